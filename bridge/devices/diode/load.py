"""The diode's load equations (dioload.c without breakdown or series resistance)."""

from __future__ import annotations

import math

MAX_EXP_ARG = 709.0  # ngspice's clamp on junction exponents (exp overflows past it)


def diode_current(
    voltage: float, saturation_current: float, emission_voltage: float, gmin: float
) -> tuple[float, float]:
    """Current and conductance at `voltage` (anode − cathode) for IS = `saturation_current` and
    N·kT/q = `emission_voltage`: Shockley forward, a cubic approach to −IS below −3·N·Vt, and
    GMIN in parallel."""
    vte = emission_voltage
    if voltage >= -3.0 * vte:
        growth = math.exp(min(MAX_EXP_ARG, voltage / vte))
        current = saturation_current * (growth - 1.0)
        conductance = saturation_current * growth / vte
    else:
        ratio = (3.0 * vte / (voltage * math.e)) ** 3
        current = -saturation_current * (1.0 + ratio)
        conductance = saturation_current * 3.0 * ratio / voltage
    return current + gmin * voltage, conductance + gmin
