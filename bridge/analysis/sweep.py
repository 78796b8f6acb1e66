"""The DC transfer curve's own columns, numbers only: one source stepped, one node watched.

    sweep_values(start, stop, step=..., points=...) -> np.ndarray    the grid, arguments checked
    hand_curve(circuit, source, output, x, bias, devices) -> (Curve | None, findings, model)
    level1_curve(circuit, source, output, x, bias, devices) -> (Curve | None, findings)
    hand_closed_forms(circuit, source, model, x, output, bias) -> the closed-form edges and gain

The columns, stated once:

* hand — the hand model (square law, λ = γ = 0, no gate current) at every point, numbers only:
  ``HandSweep`` (the circuit reduced once, the affine closed form per point) where it applies,
  else ``hand_analysis(..., working=False)`` on a copy with the swept source's value replaced.
* level1 — ``solve_dc_sweep_arrays``: the full level-1 model, every point at once, each from the
  hand column's point (``hand_starts``) or a solved neighbour.

The ngspice column is ``bridge.sim.transfer``'s; ``bridge.sweep_run`` drives the three and
compares them (``bridge.curve_compare``). Nothing here imports compare, sim or report.

Region edges are input values where a transistor changes region: ``cutoff_saturation`` where
VOV crosses 0, ``saturation_triode`` where VDS − VOV does (device polarity). For hand and
level1 each edge is found by Brent's method on the solved model between the two grid points
where the region changes, so its accuracy does not depend on the step. For the
resistor-loaded common source the hand edges also have a closed form, worked out in steps.

Gains are dVout/dVin: at the bias point (the swept source's own value in the netlist) by a
central difference on the solved model; the largest |gain| from each curve.

Nothing here reads files or prints: the Circuit is the only input.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import replace

import numpy as np

from ..curves import (
    BOUNDARIES,
    Crossing,
    Curve,
    GainPeak,
    RegionEdges,
    SweepInputError,
    independent_source,
    interpolated_edge,
    largest_gain,
    region_edges,
)
from ..curves import interpolated_edge as _interpolated_edge
from ..curves import largest_gain as _largest_gain
from ..curves import region_edges as _edges
from ..devices.mos1.ask import REGIONS
from ..netlist.circuit import GROUND, Circuit
from ..records import record
from ..vocabulary import Finding
from .dcbatch import SweepArrays, solve_dc_sweep_arrays
from .dcsolve import DcSolveError, OperatingPoint, solve_operating_point
from .hand import HandAnalysisError, HandSolution, HandSweep, hand_analysis
from .hand_edges import (
    ClosedFormEdges,
    HandGainFormula,
    common_source_edges,
    common_source_gain,
    common_source_gain_formula,
    common_source_working,
    resistor_loaded_common_source,
)
from .roots import brent_root

__all__ = [
    "BOUNDARIES",
    "EDGE_METHODS",
    "GAIN_METHODS",
    "MAX_POINTS",
    "MAX_SWEEP_ELEMENTS",
    "ClosedFormEdges",
    "Crossing",
    "Curve",
    "GainPeak",
    "HandGainFormula",
    "RegionEdges",
    "SweepInputError",
    "hand_closed_forms",
    "hand_curve",
    "independent_source",
    "level1_curve",
    "output_node",
    "refuse_large_sweep",
    "sweep_values",
    "with_source_value",
]

MAX_POINTS = 100_000
DEFAULT_POINTS = 201
# Brent's method stops when the bracket is this narrow (V or A of the swept source).
EDGE_XTOL = 1e-12
# Central-difference half-width for the gain at the bias point, as a fraction of the sweep span:
# wide enough that the level-1 solver's 1e-9 relative convergence is noise, narrow enough that
# the curvature of the square law is.
GAIN_STEP = 1e-4


# How the hand and level-1 columns find their edges and gains (the ngspice column's are
# bridge.sim.transfer's; bridge.sweep_run names all three).
EDGE_METHODS = {
    "hand": "Brent's method on the hand model between the grid points where the region changes",
    "level1": "Brent's method on the level-1 solution between the grid points where the region changes",
}
GAIN_METHODS = {
    "hand": "centred difference on the hand model",
    "level1": "centred difference on the level-1 solution",
}


# --- arguments ------------------------------------------------------------------------------


def output_node(circuit: Circuit, name: str) -> str:
    """The node called `name` (`v(name)` accepted), folded to lower case; SweepInputError otherwise."""
    key = name.strip().lower()
    if key.startswith("v(") and key.endswith(")"):
        key = key[2:-1].strip()
    key = GROUND if key == "gnd" else key
    if key == GROUND:
        raise SweepInputError("the output cannot be node 0: it is ground")
    if key not in circuit.nodes():
        nodes = ", ".join(circuit.nodes())
        raise SweepInputError(f"no node named `{name}` in the netlist (nodes: {nodes})")
    return key


def sweep_values(start: float, stop: float, *, step: float | None = None, points: int | None = None) -> np.ndarray:
    """The grid ngspice's `.dc start stop step` visits: start + k·step up to stop.

    Give `step` or `points` (default 201); SweepInputError for a zero step, one of the wrong
    sign, fewer than 2 or more than MAX_POINTS points.
    """
    for name, value in (("--start", start), ("--stop", stop), ("--step", step)):
        if value is not None and not math.isfinite(value):
            raise SweepInputError(f"{name} must be a finite number, not {value}")
    if step is not None and points is not None:
        raise SweepInputError("give --step or --points, not both")
    if step is not None:
        if step == 0.0:
            raise SweepInputError("--step must not be zero")
        if start == stop:
            return np.array([float(start)])
        if (stop - start) * step < 0.0:
            direction = "up" if stop > start else "down"
            raise SweepInputError(
                f"--step {step:g} goes the wrong way: from {start:g} {direction} to {stop:g} the step must be "
                f"{'positive' if stop > start else 'negative'}"
            )
        intervals = (stop - start) / step
        if intervals + 1 > MAX_POINTS:
            raise SweepInputError(
                f"the sweep would have {math.floor(intervals) + 1:,} points; at most {MAX_POINTS:,} are allowed"
            )
        # ngspice goes on while it has not passed stop by more than a rounding error.
        count = math.floor(intervals * (1.0 + 1e-12) + 1e-9) + 1
        return start + step * np.arange(count)
    count = DEFAULT_POINTS if points is None else points
    if count < 2:
        raise SweepInputError(f"--points must be at least 2, not {count}")
    if count > MAX_POINTS:
        raise SweepInputError(f"--points {count:,} is more than the {MAX_POINTS:,} allowed")
    if start == stop:
        raise SweepInputError(f"--start and --stop are both {start:g}: nothing to sweep")
    return np.linspace(start, stop, count)


def with_source_value(circuit: Circuit, source: str, value: float) -> Circuit:
    """A copy of the circuit with one independent source's DC value replaced."""
    wanted = source.lower()
    elements = tuple(
        replace(e, value=float(value)) if e.name.lower() == wanted and e.kind in ("vsource", "isource") else e
        for e in circuit.elements
    )
    return replace(circuit, elements=elements)


# --- one point of each model ----------------------------------------------------------------


@record(frozen=True)
class _DevicePoint:
    """What an edge search needs of one device at one point (device polarity)."""

    vov: float
    channel: float  # |vds|: the device's own drain–source voltage, roles swapped when vds < 0
    region: str

    @property
    def triode_margin(self) -> float:
        """VDS − VOV: negative in triode, positive in saturation (and in cutoff)."""
        return self.channel - self.vov


def _indicator(boundary: str, point: _DevicePoint) -> float:
    return point.vov if boundary == "cutoff_saturation" else point.triode_margin


def _side(boundary: str, point: _DevicePoint) -> bool:
    """Which side of a boundary: in cutoff (VOV ≤ 0), or in triode (VOV > 0, VDS < VOV)."""
    if boundary == "cutoff_saturation":
        return point.vov <= 0.0
    return point.vov > 0.0 and point.triode_margin < 0.0


class HandColumn:
    """The hand model at any value of the swept source, numbers only (no working is written);
    `failure` keeps the last reason it gave none.

    The affine closed form is solved by HandSweep on the circuit reduced once; every other point
    (another topology, or one where that form does not hold) by the whole hand analysis."""

    def __init__(self, circuit: Circuit, source: str) -> None:
        self.circuit = circuit
        self.source = source
        self.failure: str | None = None
        self.closed_form = HandSweep(circuit, source)
        self.points: list[HandSolution | None] = []  # the grid's solutions, once hand_curve has them

    def solve(self, value: float) -> HandSolution | None:
        try:
            solution = self.closed_form.solve(value)
            if solution is not None:
                return solution
            copy = with_source_value(self.circuit, self.source, value)
            return hand_analysis(copy, closed_form=not self.closed_form.covered, working=False)
        except (HandAnalysisError, np.linalg.LinAlgError) as exc:
            self.failure = str(exc)
            return None

    def solve_all(self, values: Sequence[float]) -> list[HandSolution | None]:
        """``solve`` at every value, the closed-form points together."""
        try:
            solutions = self.closed_form.solve_all(values)
        except (HandAnalysisError, np.linalg.LinAlgError):
            solutions = [None] * len(values)  # each point on its own, its failure kept
        return [self.solve(value) if solution is None else solution for value, solution in zip(values, solutions)]

    @staticmethod
    def device(solution: HandSolution, name: str) -> _DevicePoint:
        d = solution.devices[name]
        return _DevicePoint(d.vov, abs(d.vds), d.region)


def _crossings(
    x: np.ndarray,
    points: Sequence[_DevicePoint | None],
    refine: Callable[[str, int], float],
) -> tuple[Crossing, ...]:
    """Every region change between neighbouring solved grid points, each edge located by `refine`."""
    found: list[Crossing] = []
    for k in range(len(x) - 1):
        here, there = points[k], points[k + 1]
        if here is None or there is None:
            continue
        for boundary in BOUNDARIES:
            if _side(boundary, here) != _side(boundary, there):
                found.append(Crossing(boundary, refine(boundary, k), here.region, there.region))
    return tuple(found)


def _root(function: Callable[[float], float], a: float, b: float, fallback: float) -> float:
    """Brent's method on [a, b]; the interpolated `fallback` if the model gives no value there."""
    try:
        fa, fb = function(a), function(b)
        if fa == 0.0:
            return a
        if fb == 0.0:
            return b
        if fa * fb > 0.0:
            return fallback
        lo, hi = (a, b) if a < b else (b, a)
        return brent_root(function, lo, hi, xtol=EDGE_XTOL, rtol=4 * np.finfo(float).eps, maxiter=200)
    except (ValueError, RuntimeError, DcSolveError, KeyError):
        return fallback


def _half_width(x: np.ndarray, bias: float) -> float:
    """Half-width of the central difference at the bias point: GAIN_STEP of the sweep span."""
    span = float(abs(x[-1] - x[0])) if len(x) > 1 else 0.0
    return GAIN_STEP * (span if span > 0.0 else max(abs(bias), 1.0))


# --- the hand column ------------------------------------------------------------------------


def hand_curve(
    circuit: Circuit, source: str, output: str, x: np.ndarray, bias: float, devices: Sequence[str]
) -> tuple[Curve | None, list[Finding], HandColumn]:
    """The hand column over the grid `x`: V(`output`), regions, edges and gains; the findings of
    points without a hand solution; the model, for the closed forms (``hand_closed_forms``)."""
    model = HandColumn(circuit, source)
    solutions = model.solve_all([float(value) for value in x])
    model.points = solutions
    findings: list[Finding] = []
    failed = sum(s is None for s in solutions)
    if failed == len(solutions):
        findings.append(Finding("warning", "hand-unavailable", f"hand analysis: {model.failure}"))
        return None, findings, model
    if failed:
        first = next(float(v) for v, s in zip(x, solutions) if s is None)
        findings.append(
            Finding("warning", "hand-failed", f"the hand model has no solution at {failed} of {len(x)} points "
                    f"(the first at {source} = {first:.6g})")
        )
    numeric = next((s for s in solutions if s is not None and not s.closed_form), None)
    if numeric is not None:
        findings.append(
            Finding("info", "hand-numeric", f"hand analysis: {numeric.topology}; no closed form, the simplified "
                    "model was solved numerically at each point")
        )
    output_values = np.array([s.node_voltages[output] if s is not None else math.nan for s in solutions])
    regions: dict[str, tuple[str | None, ...]] = {}
    edges: dict[str, RegionEdges] = {}
    for name in devices:
        points = [model.device(s, name) if s is not None else None for s in solutions]
        regions[name] = tuple(p.region if p is not None else None for p in points)

        def refine(boundary: str, k: int, name: str = name, points: list = points) -> float:
            values = [_indicator(boundary, p) if p is not None else math.nan for p in points]
            fallback = interpolated_edge(x, values, k)

            def indicator(value: float) -> float:
                solution = model.solve(value)
                if solution is None:
                    raise ValueError("no hand solution")
                return _indicator(boundary, model.device(solution, name))

            return _root(indicator, float(x[k]), float(x[k + 1]), fallback)

        edges[name] = region_edges(_crossings(x, points, refine))

    def vout(value: float) -> float:
        solution = model.solve(value)
        return solution.node_voltages[output] if solution is not None else math.nan

    h = _half_width(x, bias)
    gain = (vout(bias + h) - vout(bias - h)) / (2.0 * h)
    curve = Curve(
        "hand", output_values, regions, edges, EDGE_METHODS["hand"],
        gain if math.isfinite(gain) else None, largest_gain(x, output_values), failed,
    )  # fmt: skip
    return curve, findings, model


# --- the level-1 column ---------------------------------------------------------------------


def _level1_points(circuit: Circuit, source: str, x: np.ndarray, start: np.ndarray | None = None) -> SweepArrays:
    """Every point of the sweep solved at once (``solve_dc_sweep_arrays``: a vectorised Newton,
    each point from `start`'s row where it has one, else from a solved neighbour, stragglers by
    the scalar solver from a neighbour).

    Raises UnsupportedElement, InvalidElement or SingularCircuit: those hold at every point.
    """
    return solve_dc_sweep_arrays(circuit, source, x, start=start)


def hand_starts(circuit: Circuit, hand: HandColumn | None, x: np.ndarray) -> np.ndarray | None:
    """The hand column's node voltages at each grid point (rows in ``circuit.nodes()`` order,
    NaN where the hand model has none): the level-1 column's starting points. None without them."""
    points = hand.points if hand is not None else []
    if len(points) != len(x) or not any(point is not None for point in points):
        return None
    nodes = circuit.nodes()
    return np.array([
        [point.node_voltages.get(node, math.nan) for node in nodes] if point is not None else [math.nan] * len(nodes)
        for point in points
    ], dtype=float).reshape(len(points), len(nodes))  # fmt: skip


def level1_curve(
    circuit: Circuit, source: str, output: str, x: np.ndarray, bias: float, devices: Sequence[str],
    start: np.ndarray | None = None,
) -> tuple[Curve | None, list[Finding]]:
    """The level-1 column over the grid `x`: V(`output`), regions, edges and gains; None with an
    error finding where the solver gives no point. `start`: each point's starting node voltages
    (``hand_starts``), where known."""
    findings: list[Finding] = []
    try:
        points = _level1_points(circuit, source, x, start)
    except DcSolveError as exc:
        findings.append(Finding("error", "solver-failed", f"level-1 solver: {exc}"))
        return None, findings
    solved = points.solved.tolist()
    failed = solved.count(False)
    if failed == len(solved):
        findings.append(Finding("error", "solver-failed", "level-1 solver: no point of the sweep converged"))
        return None, findings
    if failed:
        findings.append(Finding("error", "solver-failed", f"level-1 solver: no solution at {failed} of "
                                f"{len(solved)} points"))
    findings.extend(Finding("info", "solver-caveat", caveat) for caveat in points.caveats)
    output_values = points.voltage(output).copy()
    regions: dict[str, tuple[str | None, ...]] = {}
    edges: dict[str, RegionEdges] = {}

    def device_point(point: OperatingPoint, name: str) -> _DevicePoint:
        d = point.device(name)
        return _DevicePoint(d.vov, abs(d.vds), d.region)

    def guess_at(k: int) -> dict[str, float] | None:
        return points.node_voltages(k) if solved[k] else None

    for name in devices:
        arrays = points.device(name)
        device_points = [
            _DevicePoint(vov, abs(vds), REGIONS[code]) if ok else None
            for vov, vds, code, ok in zip(arrays.vov.tolist(), arrays.vds.tolist(), arrays.region.tolist(), solved)
        ]
        regions[name] = tuple(p.region if p is not None else None for p in device_points)

        def refine(boundary: str, k: int, name: str = name, device_points: list = device_points) -> float:
            values = [_indicator(boundary, p) if p is not None else math.nan for p in device_points]
            fallback = _interpolated_edge(x, values, k)
            guess = guess_at(k)

            def indicator(value: float) -> float:
                solved = solve_operating_point(circuit, source_values={source: value}, initial=guess)
                return _indicator(boundary, device_point(solved, name))

            return _root(indicator, float(x[k]), float(x[k + 1]), fallback)

        edges[name] = _edges(_crossings(x, device_points, refine))

    gain: float | None = None
    h = _half_width(x, bias)
    guess = guess_at(int(np.argmin(np.abs(x - bias))))
    try:
        above = solve_operating_point(circuit, source_values={source: bias + h}, initial=guess)
        below = solve_operating_point(circuit, source_values={source: bias - h}, initial=guess)
        gain = (above.voltage(output) - below.voltage(output)) / (2.0 * h)
    except DcSolveError:
        findings.append(Finding("warning", "solver-failed", "level-1 solver: no solution beside the bias point"))
    curve = Curve(
        "level1", output_values, regions, edges, EDGE_METHODS["level1"], gain,
        _largest_gain(x, output_values), failed,
    )  # fmt: skip
    return curve, findings


# --- the closed forms of the resistor-loaded common source -----------------------------------


def hand_closed_forms(
    circuit: Circuit, source: str, hand: HandColumn, x: np.ndarray, output: str, bias: float
) -> tuple[ClosedFormEdges | None, HandGainFormula | None]:
    """The hand edges in closed form with their working, and the hand gain formula at the bias
    point when the output is the drain; (None, None) where the closed form does not apply."""
    stage = resistor_loaded_common_source(circuit)
    if stage is None:
        return None, None
    element = independent_source(circuit, source)
    low, high = float(x[0]), float(x[-1])
    if high == low:
        high = low + 1.0
    first, second = hand.solve(low), hand.solve(high)
    if first is None or second is None:
        return None, None
    edges = common_source_edges(stage, element, (low, first.node_voltages), (high, second.node_voltages))
    if edges is None:
        return None, None
    lo, hi = min(float(x[0]), float(x[-1])), max(float(x[0]), float(x[-1]))
    closed = ClosedFormEdges(
        stage.mosfet.name, edges.cutoff_saturation, edges.saturation_triode, edges.gate_ratio, edges.gate_offset,
        stage.drain_resistor.name, float(stage.drain_resistor.value or 0.0),
        common_source_working(circuit, edges, lo, hi),
    )  # fmt: skip
    if output != stage.mosfet.nodes[0]:
        return closed, None
    solution = hand.solve(bias)
    if solution is None:
        return closed, None
    gain = common_source_gain(stage, solution.devices[stage.mosfet.name], edges.gate_ratio)
    return closed, common_source_gain_formula(stage, gain, bias, element.name)


# --- size -----------------------------------------------------------------------------------

# Elements a sweep takes. It solves the hand model anew at every grid point and at every step
# of the edge search (some 240 solves for the default 201 points), each of them linear in the
# size of the network: at 500 elements that is about 4 s (`make bench`; 1,000 took 6 s, 5,000
# over half a minute of CPU). `check` solves each column once and takes up to the card limit.
MAX_SWEEP_ELEMENTS = 500


def refuse_large_sweep(circuit: Circuit) -> None:
    """Raise NetlistError at the first element past MAX_SWEEP_ELEMENTS, if there is one."""
    from ..netlist.errors import Location, NetlistError

    if len(circuit.elements) <= MAX_SWEEP_ELEMENTS:
        return
    # Located by the element's origin; the text is not read again (nothing after Circuit does).
    element = circuit.elements[MAX_SWEEP_ELEMENTS]
    origin = element.origin
    raise NetlistError(
        f"`sweep` takes at most {MAX_SWEEP_ELEMENTS} elements and this netlist has {len(circuit.elements)} "
        f"({element.name} is number {MAX_SWEEP_ELEMENTS + 1}): a sweep re-solves the whole network at every "
        "point; `check` takes the whole netlist",
        Location(origin.file, origin.line, 1),
    )
