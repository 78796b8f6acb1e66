"""The level-1 MOSFET's parameters: ngspice's mos1 table (mos1.c, mos1set.c), stated once.

Every parameter name the model card may give, the aliases mos1 reads, the model and instance
defaults, and the physical constants the derivations use. The front end's checks
(``bridge.netlist.build``) and the model (``model.py``) both read this table.
"""

from __future__ import annotations

from collections.abc import Mapping

# Physical constants exactly as ngspice 39 uses them (const.h, and the literal
# permittivity written into mos1temp.c). Reproducing the derived KP/PHI/GAMMA/VTO
# to ngspice's printed 12 digits needs these values, not the CODATA 2018 ones.
CHARGE = 1.6021766208e-19  # C
BOLTZMANN = 1.38064852e-23  # J/K
K_OVER_Q = BOLTZMANN / CHARGE  # V/K
EPS0_MOS1 = 8.854214871e-12  # F/m, the value mos1temp.c hard-codes
EPS_OX = 3.9 * EPS0_MOS1  # F/m, SiO2
EPS_SI = 11.70 * EPS0_MOS1  # F/m, silicon
NI_SILICON = 1.45e16  # m⁻³ (1.45e10 cm⁻³), intrinsic carrier density
CELSIUS_TO_KELVIN = 273.15
CIRCUIT_TEMPERATURE_C = 27.0  # ngspice's default TEMP and TNOM
REFERENCE_TEMPERATURE_K = 300.15  # ngspice's REFTEMP (const.h), 27 °C
# The silicon band gap at REFTEMP as mos1temp.c writes it (1.1150877 eV in its `arg`).
BAND_GAP_AT_REFERENCE = 1.1150877  # eV

# ngspice's instance defaults (.options DEFW / DEFL).
DEFAULT_W = 100e-6
DEFAULT_L = 100e-6
# The bulk junctions' saturation current when the card gives neither IS nor JS with areas (mos1set.c).
DEFAULT_JUNCTION_IS = 1e-14  # A

# ngspice's model defaults (mos1set.c), in SI form as SPICE writes the card.
MODEL_DEFAULTS: Mapping[str, float] = {
    "vto": 0.0,
    "kp": 2e-5,
    "gamma": 0.0,
    "phi": 0.6,
    "lambda": 0.0,
    "ld": 0.0,
    "uo": 600.0,
    "tpg": 1.0,
    "nss": 0.0,
    "tnom": CIRCUIT_TEMPERATURE_C,
}

# The rule behind each value the model can derive, worded for a report.
DERIVATION_RULES: Mapping[str, str] = {
    "kp": "KP from UO·εox/TOX",
    "phi": "PHI from NSUB: 2·kT/q·ln(NSUB/ni)",
    "gamma": "GAMMA from NSUB and TOX: √(2·εsi·q·NSUB)/Cox",
    "vto": "VTO from NSUB, TOX, TPG, NSS: flat-band voltage + type·(GAMMA·√PHI + PHI)",
}

# Every parameter ngspice's mos1 accepts on a .model card (mos1.c), so that a
# misspelt name can be reported instead of vanishing.
KNOWN_PARAMETERS = frozenset(
    {
        "level", "vto", "kp", "gamma", "phi", "lambda", "rd", "rs", "cbd", "cbs",
        "is", "pb", "cgso", "cgdo", "cgbo", "rsh", "cj", "mj", "cjsw", "mjsw",
        "js", "tox", "ld", "uo", "kf", "af", "fc", "nsub", "tpg", "nss", "tnom",
    }
)  # fmt: skip
# The second spellings mos1 reads for the same parameter (mos1.c: "vt0", "u0").
ALIASES: Mapping[str, str] = {"vt0": "vto", "u0": "uo"}


def canonical_name(name: str) -> str:
    """A card parameter's name as this table keys it: lower case, an alias replaced."""
    key = name.lower()
    return ALIASES.get(key, key)
