"""A transfer curve's columns as numbers: what every column of `sweep` gives, and the grid
arithmetic they share (edges from crossings, interpolation, slopes).

The solvers' columns (bridge.analysis.sweep) and the simulator's (bridge.sim.transfer) build
these; compare measures them; the report formats them. ``GateBias`` records the source a sweep
created at a capacitor-coupled gate (chosen by bridge.commands.sweep_defaults).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from .netlist.circuit import Circuit, Element
from .netlist.numbers import engineering
from .records import record

BOUNDARIES = ("cutoff_saturation", "saturation_triode")


class SweepInputError(ValueError):
    """Arguments that make no sweep: unknown source or node, a bad step, too many points."""


@record(frozen=True)
class Crossing:
    """One region change on the way through the sweep: which boundary, where, from what to what."""

    boundary: str  # one of BOUNDARIES
    at: float
    before: str
    after: str
    accuracy: float | None = None  # |at − the true edge| is at most this (None: not stated)


@record(frozen=True)
class RegionEdges:
    """A transistor's region edges in one column: the first crossing of each boundary in sweep
    order (None where never reached) and every crossing found."""

    cutoff_saturation: float | None
    saturation_triode: float | None
    crossings: tuple[Crossing, ...] = ()

    def get(self, boundary: str) -> float | None:
        return getattr(self, boundary)

    def accuracy(self, boundary: str) -> float | None:
        """The stated accuracy of the first crossing of `boundary` (None where not stated or never reached)."""
        return next((c.accuracy for c in self.crossings if c.boundary == boundary), None)


@record(frozen=True)
class GainPeak:
    """The largest |dVout/dVin| along a curve and where it is."""

    gain: float
    at: float


@record(frozen=True)
class Curve:
    """One column of the sweep: the output (NaN where the column has no solution), each
    transistor's region per point (None there), its edges, and the gains."""

    column: str
    output: np.ndarray
    regions: dict[str, tuple[str | None, ...]]
    edges: dict[str, RegionEdges]
    edge_method: str
    gain_at_bias: float | None
    largest_gain: GainPeak | None
    failed_points: int = 0
    gain_accuracy: float | None = None  # |gain_at_bias − the true slope| is at most this (None: not stated)


def independent_source(circuit: Circuit, name: str) -> Element:
    """The independent V or I source called `name` (any case); SweepInputError otherwise."""
    element = circuit.element(name)
    sources = [e.name for e in circuit.elements if e.kind in ("vsource", "isource")]
    if element is None:
        listed = ", ".join(sources) or "none"
        raise SweepInputError(f"no source named `{name}` in the netlist (independent sources: {listed})")
    if element.kind not in ("vsource", "isource"):
        raise SweepInputError(f"`{element.name}` is a {element.kind}, not an independent source: it cannot be swept")
    return element


def grid_step(values: np.ndarray) -> float:
    """The step of a grid from sweep_values (0 for a single point)."""
    return float((values[-1] - values[0]) / (len(values) - 1)) if len(values) > 1 else 0.0


def region_edges(crossings: tuple[Crossing, ...]) -> RegionEdges:
    first = {b: next((c.at for c in crossings if c.boundary == b), None) for b in BOUNDARIES}
    return RegionEdges(first["cutoff_saturation"], first["saturation_triode"], crossings)


def interpolated_edge(x: np.ndarray, values: Sequence[float], k: int) -> float:
    """Where the straight line through two grid points crosses zero."""
    f0, f1 = values[k], values[k + 1]
    if f0 == f1:
        return float(x[k])
    return float(x[k] + (x[k + 1] - x[k]) * f0 / (f0 - f1))


def gradient(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """dy/dx at every point, second order inside and at the ends."""
    return np.gradient(y, x, edge_order=2 if len(x) > 2 else 1)


def largest_gain(x: np.ndarray, y: np.ndarray) -> GainPeak | None:
    if len(x) < 2 or not np.any(np.isfinite(y)):
        return None
    slope = gradient(x, y)
    magnitude = np.abs(slope)
    if not np.any(np.isfinite(magnitude)):
        return None
    k = int(np.nanargmax(magnitude))
    return GainPeak(float(slope[k]), float(x[k]))


def slope_from_curve(x: np.ndarray, y: np.ndarray, at: float) -> float | None:
    """dVout/dVin at `at` from the curve: the derivative of the parabola through the three
    grid points nearest to it (second order, also at the ends of the sweep)."""
    count = len(x)
    if count < 2 or not (min(x[0], x[-1]) <= at <= max(x[0], x[-1])):
        return None
    if count == 2:
        value = float((y[1] - y[0]) / (x[1] - x[0]))
        return value if math.isfinite(value) else None
    nearest = int(np.argmin(np.abs(x - at)))
    first = min(max(nearest - 1, 0), count - 3)
    (x0, x1, x2), (y0, y1, y2) = x[first:first + 3], y[first:first + 3]
    value = float(
        y0 * ((at - x1) + (at - x2)) / ((x0 - x1) * (x0 - x2))
        + y1 * ((at - x0) + (at - x2)) / ((x1 - x0) * (x1 - x2))
        + y2 * ((at - x0) + (at - x1)) / ((x2 - x0) * (x2 - x1))
    )
    return value if math.isfinite(value) else None


@record(frozen=True)
class GateBias:
    """A capacitor-coupled gate's divider replaced by one swept source at the gate.

    `circuit` is the netlist's circuit with the divider resistors removed and `source` (a voltage
    source from the gate to ground at the divider's Thevenin voltage) added; the three columns
    all sweep that circuit.
    """

    circuit: Circuit
    source: str
    gate: str
    device: str
    thevenin_voltage: float
    thevenin_resistance: float
    divider: tuple[str, ...]  # the resistors replaced
    rails: tuple[str, ...]  # the voltage sources that fed them
    coupling: tuple[str, ...]  # the capacitors through which the gate's signal arrives

    def explanation(self) -> str:
        divider = "–".join(self.divider)
        coupled = ", ".join(self.coupling)
        return (
            f"{self.source} is a source biasbridge created at {self.device}'s gate (node {self.gate}) in place of "
            f"the divider {divider} (Thevenin {self.thevenin_voltage:.6g} V from {', '.join(self.rails)}, "
            f"{engineering(self.thevenin_resistance, 'Ω')}): only the divider sets the gate at DC and {coupled} "
            f"couples the input to it, so the gate bias is swept, not the supply; its bias value is the divider's "
            f"voltage (--source names any other source to sweep)"
        )
