"""The level-1 MOSFET's names as the rest of biasbridge has imported them: a re-export of
``bridge.devices.mos1`` (one file per phase there)."""

from .mos1.ask import REGIONS, Region, classify_region, overdrive, region_codes
from .mos1.load import (
    ArrayPoint,
    Level1Geometry,
    Level1Point,
    TerminalConductances,
    beta,
    evaluate,
    evaluate_arrays,
    junction_current,
    leff,
    threshold,
)
from .mos1.load import body_root as _body_root
from .mos1.model import Level1Model, MosType
from .mos1.params import ALIASES as _ALIASES
from .mos1.params import (
    BAND_GAP_AT_REFERENCE,
    BOLTZMANN,
    CELSIUS_TO_KELVIN,
    CHARGE,
    CIRCUIT_TEMPERATURE_C,
    DEFAULT_L,
    DEFAULT_W,
    DERIVATION_RULES,
    EPS0_MOS1,
    EPS_OX,
    EPS_SI,
    K_OVER_Q,
    MODEL_DEFAULTS,
    NI_SILICON,
    REFERENCE_TEMPERATURE_K,
)
from .mos1.params import KNOWN_PARAMETERS as _KNOWN_PARAMETERS
from .mos1.temperature import _potential_shift, band_gap

__all__ = [
    "BAND_GAP_AT_REFERENCE", "BOLTZMANN", "CELSIUS_TO_KELVIN", "CHARGE", "CIRCUIT_TEMPERATURE_C",
    "DEFAULT_L", "DEFAULT_W", "DERIVATION_RULES", "EPS0_MOS1", "EPS_OX", "EPS_SI", "K_OVER_Q",
    "MODEL_DEFAULTS", "NI_SILICON", "REFERENCE_TEMPERATURE_K", "REGIONS", "ArrayPoint", "Level1Geometry",
    "Level1Model", "Level1Point", "MosType", "Region", "TerminalConductances", "_ALIASES",
    "_KNOWN_PARAMETERS", "_body_root", "_potential_shift", "band_gap", "beta", "classify_region",
    "evaluate", "evaluate_arrays", "junction_current", "leff", "overdrive", "region_codes", "threshold",
]  # fmt: skip
