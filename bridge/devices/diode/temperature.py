"""The diode's temperature phase (diotemp.c): IS and N·kT/q at the device temperature."""

from __future__ import annotations

import math
from collections.abc import Mapping

from ..mos1.params import CELSIUS_TO_KELVIN, K_OVER_Q


def diode_at_temperature(params: Mapping[str, float], celsius: float, nominal_celsius: float) -> tuple[float, float]:
    """A diode card's IS (per unit area, before AREA·M) and N·kT/q at `celsius`, as diotemp.c
    (ngspice 39, DIOtempUpdate): IS(T) = IS·exp((T/TNOM − 1)·EG/(N·Vt(T)) + (XTI/N)·ln(T/TNOM)),
    EG = 1.11 eV and XTI = 3 by default, TNOM the card's or the circuit's nominal temperature."""
    kelvin = celsius + CELSIUS_TO_KELVIN
    if not kelvin > 0.0:
        raise ValueError(f"temperature {celsius:g} °C is below absolute zero")
    emission = params.get("n", 1.0)
    emission_voltage = emission * K_OVER_Q * kelvin
    saturation_current = params.get("is", 1e-14)
    tnom = params.get("tnom", nominal_celsius) + CELSIUS_TO_KELVIN
    if kelvin != tnom and emission_voltage > 0.0:
        ratio = kelvin / tnom
        band_gap_term = (ratio - 1.0) * params.get("eg", 1.11) / emission_voltage
        saturation_current *= math.exp(band_gap_term + params.get("xti", 3.0) / emission * math.log(ratio))
    return saturation_current, emission_voltage
