"""The level-1 (Shichman–Hodges) MOSFET, as ngspice's mos1 device computes it, one file per phase:

``params`` (the parameter table, defaults, aliases, constants) → ``model`` (the card after
defaulting and derivations) → ``temperature`` (mos1temp.c) → ``load`` (currents, conductances,
bulk junctions; floats and numpy arrays) → ``convergence`` (limiting) → ``ask`` (polarity-
normalised quantities, the region rule); ``instance`` builds one sized device from a Circuit.
"""

from .ask import REGIONS, Region, classify_region, overdrive, region_codes
from .load import (
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
from .model import Level1Model, MosType
from .temperature import band_gap

__all__ = [
    "REGIONS",
    "ArrayPoint",
    "Level1Geometry",
    "Level1Model",
    "Level1Point",
    "MosType",
    "Region",
    "TerminalConductances",
    "band_gap",
    "beta",
    "classify_region",
    "evaluate",
    "evaluate_arrays",
    "junction_current",
    "leff",
    "overdrive",
    "region_codes",
    "threshold",
]
