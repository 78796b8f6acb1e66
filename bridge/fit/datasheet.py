"""Datasheet mode: VTO and KP from two saturation points (VGS, ID), LAMBDA = 0.

Through two points passes one straight line of √ID against VGS: its VGS intercept is the
threshold and its slope gives KP (``kp_from_root_slope``), the ESR construction of
``estimate`` with two points. Two points pin two parameters and nothing more.
"""

from __future__ import annotations

import math

from ..devices.mos1.fitting import kp_from_root_slope
from ..devices.mos1.load import Level1Geometry
from ..records import record
from .least_squares import Level1Values

TWO_POINT_WARNING = (
    "two points pin only two parameters: VTO and KP go exactly through them, LAMBDA is set to 0, "
    "GAMMA and PHI are not fitted, and nothing says how the device behaves elsewhere"
)


@record(frozen=True)
class DatasheetFit:
    values: Level1Values
    points: tuple[tuple[float, float], tuple[float, float]]  # (VGS, ID) in device polarity
    vds: float | None
    warnings: tuple[str, ...]


def datasheet_fit(points: tuple[tuple[float, float], tuple[float, float]], geometry: Level1Geometry,
                  vds: float | None = None) -> DatasheetFit:  # fmt: skip
    """VTO and KP through two (VGS, ID) saturation points; ValueError when no such line exists."""
    (v1, i1), (v2, i2) = sorted((abs(v), abs(i)) for v, i in points)
    if v1 == v2:
        raise ValueError("the two points have the same VGS: they pin no slope")
    if i1 <= 0.0 or i2 <= i1:
        raise ValueError("the current must rise with VGS between the two points (and neither may be zero)")
    slope = (math.sqrt(i2) - math.sqrt(i1)) / (v2 - v1)
    vto = v1 - math.sqrt(i1) / slope
    warnings = [TWO_POINT_WARNING]
    if vds is not None:
        for vgs in (v1, v2):
            if abs(vds) < vgs - vto:
                warnings.append(f"at VGS = {vgs:g} V, VDS = {abs(vds):g} V is below the overdrive {vgs - vto:.3g} V: "
                                "that point is not in saturation, so the card does not describe it")
    return DatasheetFit(Level1Values(vto, kp_from_root_slope(slope, geometry), 0.0), ((v1, i1), (v2, i2)),
                        None if vds is None else abs(vds), tuple(warnings))  # fmt: skip
