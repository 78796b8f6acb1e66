"""The level-1 MOSFET's temperature phase, as ngspice's mos1temp.c (ngspice 39, MOS1temp).

KP scaled by (T/TNOM)^−1.5, PHI and VTO moved through the band gap EG(T) =
1.16 − 7.02e-4·T²/(T + 1108) and kT/q, the bulk-junction IS/JS scaled by
exp(EG(TNOM)/Vt(TNOM) − EG(T)/Vt(T)); GAMMA and LAMBDA do not change. The junction
capacitances and potential (PB) it also scales play no part at DC and are left out.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

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
        ratio = kelvin / tnom
        kp = card.kp / (ratio * math.sqrt(ratio))
        phi_at_reference = (card.phi - _potential_shift(tnom)) / (tnom / REFERENCE_TEMPERATURE_K)
        phi = (kelvin / REFERENCE_TEMPERATURE_K) * phi_at_reference + _potential_shift(kelvin)
        if phi <= 0.0:
            raise ValueError(
                f"PHI at {celsius:g} °C comes out as {phi:.4g} V (ngspice's level-1 temperature "
                f"rules from PHI = {card.phi:g} V at TNOM = {card.tnom_celsius:g} °C); it must be positive"
            )
        built_in = (
            card.vto
            - card.polarity * card.gamma * math.sqrt(card.phi)
            + 0.5 * (band_gap(tnom) - band_gap(kelvin))
            + card.polarity * 0.5 * (phi - card.phi)
        )
        vto = built_in + card.polarity * card.gamma * math.sqrt(phi)
    model = object.__new__(type(source))
    vars(model).update(vars(source), kp=kp, phi=phi, vto=vto, temperature_celsius=float(celsius), nominal=card)
    return model



def saturation_current_factor(kelvin: float, tnom_kelvin: float) -> float:
    """IS(T)/IS and JS(T)/JS of the bulk junctions: mos1temp.c's
    exp(−EG(T)/Vt(T) + EG(TNOM)/Vt(TNOM)); 1 at TNOM."""
    if kelvin == tnom_kelvin:
        return 1.0
    return math.exp(-band_gap(kelvin) / (K_OVER_Q * kelvin) + band_gap(tnom_kelvin) / (K_OVER_Q * tnom_kelvin))


def band_gap(kelvin: float) -> float:
    """Silicon band gap in eV at `kelvin`, as mos1temp.c computes it: 1.16 − 7.02e-4·T²/(T + 1108)."""
    return 1.16 - (7.02e-4 * kelvin * kelvin) / (kelvin + 1108.0)


def _potential_shift(kelvin: float) -> float:
    """mos1temp.c's pbfact: −2·Vt·(1.5·ln(T/REFTEMP) + q·(−EG(T)/(2kT) + 1.1150877/(2k·REFTEMP)))."""
    thermal_energy = BOLTZMANN * kelvin
    arg = -band_gap(kelvin) / (thermal_energy + thermal_energy) + BAND_GAP_AT_REFERENCE / (
        BOLTZMANN * (REFERENCE_TEMPERATURE_K + REFERENCE_TEMPERATURE_K)
    )
    return -2.0 * K_OVER_Q * kelvin * (1.5 * math.log(kelvin / REFERENCE_TEMPERATURE_K) + CHARGE * arg)

