"""What a user can ask of a level-1 MOSFET, polarity-normalised (ngspice's mos1ask.c in spirit).

The region rule and the overdrive of a device whose drain and source work swapped are stated
here once; the simulator's operating point and the sweep's ngspice column ask these too.
Quantities are in device polarity: a conducting PMOS shows positive id, vgs, vds and vov.
"""

from __future__ import annotations

from typing import Literal, overload

import numpy as np

Region = Literal["cutoff", "triode", "saturation"]
# The regions in the order of their codes in the array form (``region_codes``).
REGIONS: tuple[Region, ...] = ("cutoff", "triode", "saturation")


def classify_region(vov: float, vds: float) -> Region:
    """Cutoff when vov ≤ 0, saturation when vds ≥ vov, otherwise triode (polarity-normalised)."""
    if vov <= 0.0:
        return "cutoff"
    if vov <= vds:
        return "saturation"
    return "triode"


def region_codes(vov: np.ndarray, vds: np.ndarray) -> np.ndarray:
    """``classify_region`` over arrays: 0 cutoff, 1 triode, 2 saturation (``REGIONS``)."""
    return np.where(vov <= 0.0, 0, np.where(vov <= vds, 2, 1))


@overload
def overdrive(vgs: float, vds: float, vth: float) -> float: ...
@overload
def overdrive(vgs: np.ndarray, vds: np.ndarray, vth: np.ndarray) -> np.ndarray: ...
def overdrive(vgs, vds, vth):
    """VOV from terminal vgs and vds and the threshold (device polarity): vgs − vth, and with
    vds < 0 (drain and source swapped, ngspice's mode −1) vgd − vth = vgs − vds − vth."""
    if isinstance(vgs, np.ndarray) or isinstance(vds, np.ndarray):
        return np.where(vds < 0.0, vgs - vds - vth, vgs - vth)
    if vds < 0:
        return vgs - vds - vth
    return vgs - vth
