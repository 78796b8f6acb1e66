"""First estimates of the threshold and KP from measured curves, by published extraction methods.

Both methods are reviewed in A. Ortiz-Conde, F. J. García Sánchez, J. J. Liou, A. Cerdeira,
M. Estrada, Y. Yue, "A review of recent MOSFET threshold voltage extraction methods",
Microelectronics Reliability 42 (2002) 583–596, doi:10.1016/S0026-2714(02)00027-6:

- linear extrapolation at the maximum-transconductance point of a low-VDS ID–VGS curve (the
  "ELR" method there; also JEDEC's extrapolated threshold VT(ext) = VGS(gm,max) − ID(gm,max)/gm,max,
  after ASTM F617): the tangent's intercept with the VGS axis, minus VDS/2 (the review's
  correction for the drain bias, from memory);
- extrapolation of √ID against VGS in saturation at its point of maximum slope (the "ESR"
  method there): the intercept is the threshold, the slope gives KP (``kp_from_root_slope``).

Slopes are those of a straight line fitted through neighbouring points (WINDOW, or a quarter of
the curve when that is more), so that noise in one reading does not make a spurious maximum
(common practice, no source).
"""

from __future__ import annotations

import numpy as np

from ..devices.mos1.fitting import kp_from_root_slope
from ..devices.mos1.load import Level1Geometry
from ..records import record
from .data import BiasData

WINDOW = 5  # at least this many points per tangent; a quarter of the curve when that is more
LOW_VDS = 0.25  # V: the largest VDS still taken as a "low-VDS" (triode) curve (common practice, no source)
SAME_BIAS = 1e-6  # V: readings of one curve share VDS and VBS to within this

LINEAR_METHOD = "linear extrapolation at maximum gm, low-VDS curve (Ortiz-Conde et al. 2002, ELR)"
ROOT_METHOD = "extrapolation of √ID against VGS in saturation at maximum slope (Ortiz-Conde et al. 2002, ESR)"


@record(frozen=True)
class Extraction:
    """One method's result: the threshold (and KP when the method gives it), on the curve at ``vds``."""

    method: str
    vto: float
    kp: float | None
    vds: float
    points: int


def _curves(data: BiasData) -> dict[float, tuple[np.ndarray, np.ndarray]]:
    """ID–VGS curves at the body bias nearest zero, keyed by VDS, each sorted by VGS."""
    body = data.vbs[np.argmin(np.abs(data.vbs))]
    at_body = np.abs(data.vbs - body) <= SAME_BIAS
    curves: dict[float, tuple[np.ndarray, np.ndarray]] = {}
    for vds in np.unique(np.round(data.vds[at_body] / SAME_BIAS) * SAME_BIAS):
        pick = at_body & (np.abs(data.vds - vds) <= SAME_BIAS)
        order = np.argsort(data.vgs[pick])
        vgs, current = data.vgs[pick][order], data.id[pick][order]
        if np.unique(vgs).size >= WINDOW:
            curves[float(vds)] = (vgs, current)
    return curves


def _steepest_tangent(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """The straight line of largest slope through WINDOW neighbouring points: (slope, x-intercept)."""
    best = (-np.inf, np.nan)
    width = max(WINDOW, x.size // 4)
    for start in range(x.size - width + 1):
        xs, ys = x[start:start + width], y[start:start + width]
        if np.ptp(xs) <= 0.0:
            continue
        slope, offset = np.polyfit(xs, ys, 1)
        if slope > best[0]:
            best = (float(slope), float(-offset / slope) if slope > 0 else np.nan)
    return best


def linear_extrapolation(data: BiasData) -> Extraction | None:
    """VT from the low-VDS curve (VDS ≤ LOW_VDS): intercept of the tangent at maximum gm − VDS/2."""
    low = [vds for vds in _curves(data) if 0.0 < vds <= LOW_VDS]
    if not low:
        return None
    vds = min(low)
    vgs, current = _curves(data)[vds]
    slope, intercept = _steepest_tangent(vgs, current)
    if not slope > 0.0:
        return None
    return Extraction(LINEAR_METHOD, intercept - vds / 2.0, None, vds, int(vgs.size))


def root_extrapolation(data: BiasData, geometry: Level1Geometry) -> Extraction | None:
    """VT and KP from the highest-VDS curve: √ID against VGS, tangent at maximum slope."""
    curves = _curves(data)
    if not curves:
        return None
    vds = max(curves)
    vgs, current = curves[vds]
    slope, intercept = _steepest_tangent(vgs, np.sqrt(np.clip(current, 0.0, None)))
    if not slope > 0.0:
        return None
    return Extraction(ROOT_METHOD, intercept, kp_from_root_slope(slope, geometry), vds, int(vgs.size))
