"""The level-1 MOSFET's temperature phase, as ngspice's mos1temp.c (ngspice 39, MOS1temp).

KP scaled by (T/TNOM)^−1.5, PHI and VTO moved through the band gap EG(T) =
1.16 − 7.02e-4·T²/(T + 1108) and kT/q, the bulk-junction IS/JS scaled by
exp(EG(TNOM)/Vt(TNOM) − EG(T)/Vt(T)); GAMMA and LAMBDA do not change. The junction
capacitances and potential (PB) it also scales play no part at DC and are left out.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from .params import (
    BAND_GAP_AT_REFERENCE,
    BOLTZMANN,
    CELSIUS_TO_KELVIN,
    CHARGE,
    K_OVER_Q,
    REFERENCE_TEMPERATURE_K,
)

if TYPE_CHECKING:
    from .model import Level1Model


def at_temperature(source: Level1Model, celsius: float) -> Level1Model:
    """This card at a device temperature of `celsius` °C: ngspice's temperature phase.

    mos1temp.c (ngspice 39, MOS1temp), with T the device temperature and TNOM the card's:
    KP(T) = KP·(T/TNOM)^−1.5; PHI(T) = (T/REFTEMP)·PHIo + pbfact(T) with
    PHIo = (PHI − pbfact(TNOM))/(TNOM/REFTEMP); Vbi(T) = VTO − type·GAMMA·√PHI
    + (EG(TNOM) − EG(T))/2 + type·(PHI(T) − PHI)/2; VTO(T) = Vbi(T) + type·GAMMA·√PHI(T).
    GAMMA, LAMBDA and the rest keep the card's values. At T = TNOM the card's values
    stand as they are. The result keeps the card in ``nominal`` (a model already at a
    temperature is re-scaled from that card). Raises ValueError when PHI(T) ≤ 0.
    """
    card = source.nominal or source
    kelvin = celsius + CELSIUS_TO_KELVIN
    if not kelvin > 0.0:
        raise ValueError(f"temperature {celsius:g} °C is below absolute zero")
    tnom = card.tnom_celsius + CELSIUS_TO_KELVIN
    if not tnom > 0.0:
        raise ValueError(f"TNOM = {card.tnom_celsius:g} °C is below absolute zero")
    kp, phi, vto = card.kp, card.phi, card.vto
    if not math.isclose(kelvin, tnom, rel_tol=0.0, abs_tol=1e-9):
        kp, phi, vto = temperature_values(card.kp, card.phi, card.vto, card.gamma, card.polarity, tnom, kelvin, math)
        if phi <= 0.0:
            raise ValueError(
                f"PHI at {celsius:g} °C comes out as {phi:.4g} V (ngspice's level-1 temperature "
                f"rules from PHI = {card.phi:g} V at TNOM = {card.tnom_celsius:g} °C); it must be positive"
            )
    model = object.__new__(type(source))
    vars(model).update(vars(source), kp=kp, phi=phi, vto=vto, temperature_celsius=float(celsius), nominal=card)
    return model


def at_temperature_arrays(source: Level1Model, celsius: np.ndarray) -> Level1Model:
    """``at_temperature`` over many device temperatures at once (and a card whose VTO, KP, PHI,
    GAMMA or TNOM may be arrays too): the model with array-valued ``kp``, ``phi``, ``vto`` and
    ``temperature_celsius``, the same equations (``temperature_values``) on numpy arrays. Where
    PHI(T) ≤ 0 or T or TNOM is not above absolute zero, KP, PHI and VTO are NaN (no ValueError:
    the caller decides what an unusable row means)."""
    card = source.nominal or source
    celsius = np.asarray(celsius, dtype=float)
    kelvin = celsius + CELSIUS_TO_KELVIN
    tnom = np.asarray(card.tnom_celsius, dtype=float) + CELSIUS_TO_KELVIN
    with np.errstate(invalid="ignore", divide="ignore"):
        kp, phi, vto = temperature_values(card.kp, card.phi, card.vto, card.gamma, card.polarity, tnom, kelvin, np)
    same = np.abs(kelvin - tnom) <= 1e-9
    kp, phi, vto = (np.where(same, given, moved) for given, moved in ((card.kp, kp), (card.phi, phi), (card.vto, vto)))
    usable = (kelvin > 0.0) & (tnom > 0.0) & (phi > 0.0)
    kp, phi, vto = (np.where(usable, value, math.nan) for value in (kp, phi, vto))
    model = object.__new__(type(source))
    vars(model).update(vars(source), kp=kp, phi=phi, vto=vto, temperature_celsius=celsius, nominal=card)
    return model


def temperature_values(card_kp, card_phi, card_vto, gamma, polarity, tnom, kelvin, xp) -> tuple:
    """mos1temp.c's KP(T), PHI(T) and VTO(T) from the card's values at TNOM (`tnom` and `kelvin`
    in K), written once for floats (`xp` = math) and numpy arrays (`xp` = numpy)."""
    ratio = kelvin / tnom
    kp = card_kp / (ratio * xp.sqrt(ratio))
    phi_at_reference = (card_phi - _potential_shift(tnom, xp)) / (tnom / REFERENCE_TEMPERATURE_K)
    phi = (kelvin / REFERENCE_TEMPERATURE_K) * phi_at_reference + _potential_shift(kelvin, xp)
    if xp is math and phi <= 0.0:
        return kp, phi, math.nan  # refused by at_temperature
    built_in = (
        card_vto
        - polarity * gamma * xp.sqrt(card_phi)
        + 0.5 * (band_gap(tnom) - band_gap(kelvin))
        + polarity * 0.5 * (phi - card_phi)
    )
    vto = built_in + polarity * gamma * xp.sqrt(phi)  # NaN on arrays where PHI(T) ≤ 0
    return kp, phi, vto


def saturation_current_factor(kelvin, tnom_kelvin):
    """IS(T)/IS and JS(T)/JS of the bulk junctions: mos1temp.c's
    exp(−EG(T)/Vt(T) + EG(TNOM)/Vt(TNOM)); 1 at TNOM. Floats or numpy arrays."""
    if isinstance(kelvin, np.ndarray) or isinstance(tnom_kelvin, np.ndarray):
        return np.where(kelvin == tnom_kelvin, 1.0, np.exp(_saturation_exponent(kelvin, tnom_kelvin)))
    if kelvin == tnom_kelvin:
        return 1.0
    return math.exp(_saturation_exponent(kelvin, tnom_kelvin))


def _saturation_exponent(kelvin, tnom_kelvin):
    return -band_gap(kelvin) / (K_OVER_Q * kelvin) + band_gap(tnom_kelvin) / (K_OVER_Q * tnom_kelvin)


def band_gap(kelvin):
    """Silicon band gap in eV at `kelvin`, as mos1temp.c computes it: 1.16 − 7.02e-4·T²/(T + 1108)."""
    return 1.16 - (7.02e-4 * kelvin * kelvin) / (kelvin + 1108.0)


def _potential_shift(kelvin, xp=math):
    """mos1temp.c's pbfact: −2·Vt·(1.5·ln(T/REFTEMP) + q·(−EG(T)/(2kT) + 1.1150877/(2k·REFTEMP)))."""
    thermal_energy = BOLTZMANN * kelvin
    arg = -band_gap(kelvin) / (thermal_energy + thermal_energy) + BAND_GAP_AT_REFERENCE / (
        BOLTZMANN * (REFERENCE_TEMPERATURE_K + REFERENCE_TEMPERATURE_K)
    )
    return -2.0 * K_OVER_Q * kelvin * (1.5 * xp.log(kelvin / REFERENCE_TEMPERATURE_K) + CHARGE * arg)

