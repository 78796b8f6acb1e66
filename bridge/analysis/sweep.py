"""The DC transfer curve of a stage: one source stepped, one node watched, three ways.

    sweep_values(start, stop, step=..., points=...) -> np.ndarray    the grid, arguments checked
    transfer_curve(circuit, source, output, values, session) -> TransferCurve

The columns, stated once:

* hand — the hand model (square law, λ = γ = 0, no gate current) solved by ``hand_analysis``
  at every point, on a copy of the circuit with the swept source's value replaced.
* level1 — ``solve_dc_sweep``: the full level-1 model, each point started from the last, as
  ngspice's ``.dc`` does.
* sim — ngspice's own ``.dc`` through the worker, on SPICE emitted from the Circuit.

Region edges are input values where a transistor changes region: ``cutoff_saturation`` where
VOV crosses 0, ``saturation_triode`` where VDS − VOV does (device polarity). For hand and
level1 each edge is found by Brent's method on the solved model between the two grid points
where the region changes, so its accuracy does not depend on the step; ngspice's edges are
linear interpolations of its @m[vgs], @m[vds] and threshold (@m[von] or @m[vth]) between
sweep points. For the
resistor-loaded common source the hand edges also have a closed form, worked out in steps.

Gains are dVout/dVin: at the bias point (the swept source's own value in the netlist) by a
central difference on the solved model for hand and level1 and from the curve for ngspice;
the largest |gain| from each curve.

Nothing here reads files or prints: the Circuit is the only input.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.optimize import brentq

from ..compare import SOLVER_FLOOR, SOLVER_RELATIVE
from ..devices.level1 import (
    REGIONS,
    beta,
    classify_region,
    overdrive,
    threshold,
)
from ..devices.mos1.instance import InstanceError, mosfet_instance
from ..netlist.circuit import GROUND, Analysis, Circuit, DcSweep, Element, Origin
from ..netlist.emit import SpiceDeck, emit
from ..netlist.numbers import engineering
from ..netlist.source import NOTICE_SEVERITY, notice_in
from ..sim.client import NgspiceSession, SimulationFailed, SimulatorError
from ..sim.operating_point import threshold_vector
from ..vocabulary import Finding, Step, not_level1_finding, simulator_failure
from .dcsolve import (
    DcSolveError,
    OperatingPoint,
    SweepArrays,
    solve_dc_sweep_arrays,
    solve_operating_point,
)
from .hand import HandAnalysisError, HandSolution, hand_analysis, hand_model

__all__ = [
    "BOUNDARIES",
    "MAX_POINTS",
    "ClosedFormEdges",
    "Crossing",
    "Curve",
    "GainPeak",
    "HandGainFormula",
    "RegionEdges",
    "SweepInputError",
    "TransferCurve",
    "default_output",
    "default_range",
    "default_source",
    "GateBias",
    "gate_bias_source",
    "sweep_values",
    "transfer_curve",
    "with_source_value",
]

BOUNDARIES = ("cutoff_saturation", "saturation_triode")
MAX_POINTS = 100_000
DEFAULT_POINTS = 201
# Brent's method stops when the bracket is this narrow (V or A of the swept source).
EDGE_XTOL = 1e-12
# Central-difference half-width for the gain at the bias point, as a fraction of the sweep span:
# wide enough that the level-1 solver's 1e-9 relative convergence is noise, narrow enough that
# the curvature of the square law is.
GAIN_STEP = 1e-4
# What ngspice is asked for each MOSFET, beside the output node.
DEVICE_SWEEP_VECTORS = ("vgs", "vds")

# ngspice's edges and gain are refined with further `.dc` runs through the same worker, so they
# do not depend on the grid: each grid interval where a region changes is swept again in
# REFINE_INTERVALS steps, then the finer interval where it changes, and so on until that interval
# is at most EDGE_TARGET of the sweep span (at most REFINE_ROUNDS runs); the gain is read on a
# `.dc` of 2·2^GAIN_LEVELS steps over ±GAIN_WINDOW of the sweep span around the bias point.
REFINE_INTERVALS = 64
REFINE_ROUNDS = 4
EDGE_TARGET = 1e-5
REFINED_CROSSINGS = 8  # at most this many crossings per device are refined; the rest keep the grid
GAIN_WINDOW = 2.0**-8
GAIN_LEVELS = 6

EDGE_METHODS = {
    "hand": "Brent's method on the hand model between the grid points where the region changes",
    "level1": "Brent's method on the level-1 solution between the grid points where the region changes",
    "sim": (
        f"the grid interval where the region changes swept again by ngspice in {REFINE_INTERVALS} steps, then "
        f"the finer interval where it changes, until it is at most {EDGE_TARGET:g} of the sweep; linear "
        "interpolation of @m[vgs], @m[vds] and the threshold (@m[von] or @m[vth]) there; ± that interval, "
        "inside which the edge lies"
    ),
}
GAIN_METHODS = {
    "hand": "centred difference on the hand model",
    "level1": "centred difference on the level-1 solution",
    "sim": (
        "centred difference on a fine ngspice .dc around the bias point; ± the difference between the "
        "estimates at steps h and h/2 (Richardson), or a quarter of the one before when that is larger"
    ),
}


class SweepInputError(ValueError):
    """Arguments that make no sweep: unknown source or node, a bad step, too many points."""


# --- the results ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Crossing:
    """One region change on the way through the sweep: which boundary, where, from what to what."""

    boundary: str  # one of BOUNDARIES
    at: float
    before: str
    after: str
    accuracy: float | None = None  # |at − the true edge| is at most this (None: not stated)


@dataclass(frozen=True)
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


@dataclass(frozen=True)
class GainPeak:
    """The largest |dVout/dVin| along a curve and where it is."""

    gain: float
    at: float


@dataclass(frozen=True)
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


@dataclass(frozen=True)
class ClosedFormEdges:
    """The hand edges of a resistor-loaded common source in closed form, with the working.

    ``gate_ratio`` and ``gate_offset`` give VG = gate_offset + gate_ratio·Vin.
    """

    device: str
    cutoff_saturation: float
    saturation_triode: float
    gate_ratio: float
    gate_offset: float
    drain_resistor: str
    drain_resistance: float
    steps: tuple[Step, ...]


@dataclass(frozen=True)
class HandGainFormula:
    """The hand small-signal gain at the bias point: −gm·(RD ∥ ro)·dVG/dVin."""

    value: float
    gm: float
    ro: float  # math.inf in saturation, λ = 0
    drain_resistance: float
    gate_ratio: float
    region: str
    formula: str
    steps: tuple[Step, ...]


@dataclass(frozen=True)
class Deviation:
    """The largest |column − reference| over the sweep and where it is."""

    volts: float
    at: float


@dataclass(frozen=True)
class TransferCurve:
    file: str
    title: str
    source: str
    source_unit: str
    output: str
    x: np.ndarray
    step: float
    bias: float
    devices: tuple[str, ...]
    curves: dict[str, Curve | None]
    simulator: tuple[str, str] | None
    deviation: dict[str, Deviation | None]
    deviation_reference: str | None
    closed_form: dict[str, ClosedFormEdges] = field(default_factory=dict)
    hand_gain: HandGainFormula | None = None
    findings: tuple[Finding, ...] = ()
    gate_bias: GateBias | None = None  # the source created at the gate, when the sweep swept one

    @property
    def agree(self) -> bool:
        """No error or warning: every column solved and level-1 matches ngspice."""
        return not any(f.severity in {"error", "warning"} for f in self.findings)


# --- arguments ------------------------------------------------------------------------------


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


def _first_mosfet(circuit: Circuit) -> Element:
    mosfets = circuit.elements_of("mosfet")
    if not mosfets:
        raise SweepInputError("the netlist has no MOSFET: the sweep follows a MOSFET stage")
    return mosfets[0]


def default_output(circuit: Circuit) -> str:
    """The (first) MOSFET's drain node; its source node when a voltage source holds the drain
    (a follower's output), since a held node does not move."""
    mosfet = _first_mosfet(circuit)
    drain, source = mosfet.nodes[0], mosfet.nodes[2]
    held = _fixed_nodes(circuit)
    if drain in held and source not in held:
        return source
    if drain == GROUND:
        raise SweepInputError("the MOSFET's drain is ground: name the output with --output")
    return drain


def default_source(circuit: Circuit) -> str:
    """The independent voltage source that drives the (first) MOSFET's gate at DC.

    Found by walking from the gate through resistors and inductors (capacitors are open) to
    the nodes voltage sources hold; the nearest wins, and a source that also feeds the drain
    or source side only when nothing else reaches the gate.
    """
    mosfet = _first_mosfet(circuit)
    drain, gate, source = mosfet.nodes[0], mosfet.nodes[1], mosfet.nodes[2]
    held: dict[str, list[Element]] = {}
    for element in circuit.elements_of("vsource"):
        for node in element.nodes[:2]:
            if node != GROUND:
                held.setdefault(node, []).append(element)

    def reached(start: str, stop: set[str]) -> list[Element]:
        found: list[Element] = []
        seen, frontier = {start} | stop, [start]
        while frontier:
            following: list[str] = []
            for node in frontier:
                if node in held:
                    found.extend(e for e in held[node] if e not in found)
                    continue
                for element in circuit.elements:
                    if element.kind in ("resistor", "inductor") and node in element.nodes[:2]:
                        other = element.nodes[1] if element.nodes[0] == node else element.nodes[0]
                        if other != GROUND and other not in seen:
                            seen.add(other)
                            following.append(other)
            frontier = following
        return found

    if gate == GROUND:
        raise SweepInputError(f"the gate of {mosfet.name} is grounded: name the source to sweep with --source")
    candidates = reached(gate, set())
    if not candidates:
        raise SweepInputError(
            f"no independent voltage source drives the gate of {mosfet.name} at DC: name one with --source"
        )
    supplies = {e.name for node in (drain, source) if node != GROUND for e in reached(node, {gate})}
    preferred = [e for e in candidates if e.name not in supplies]
    return (preferred or candidates)[0].name


@dataclass(frozen=True)
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


def _held_voltages(circuit: Circuit) -> dict[str, float]:
    """The DC voltage of every node held by chains of voltage sources from ground."""
    known = {GROUND: 0.0}
    pending = list(circuit.elements_of("vsource"))
    progress = True
    while progress:
        progress = False
        for element in list(pending):
            plus, minus = element.nodes[0], element.nodes[1]
            value = float(element.value or 0.0)
            if minus in known and plus not in known:
                known[plus] = known[minus] + value
            elif plus in known and minus not in known:
                known[minus] = known[plus] - value
            elif plus not in known:
                continue
            pending.remove(element)
            progress = True
    return known


def gate_bias_source(circuit: Circuit) -> GateBias | None:
    """The gate bias the designer means, when the (first) MOSFET's gate is fed at DC only by a
    resistive divider from the supplies and its signal arrives through a capacitor: the circuit
    with the divider replaced by a voltage source at the gate, at the divider's Thevenin voltage.

    None when the gate is driven otherwise: a source reaches it at DC that does not also feed the
    drain or source side (that source is the input), no capacitor couples a signal to it, or its
    DC network is more than resistors from the gate straight to held nodes.
    """
    mosfets = circuit.elements_of("mosfet")
    if not mosfets:
        return None
    mosfet = mosfets[0]
    gate = mosfet.nodes[1]
    held = _held_voltages(circuit)
    if gate in held or gate in (mosfet.nodes[0], mosfet.nodes[2], mosfet.nodes[3] if len(mosfet.nodes) > 3 else None):
        return None
    try:
        if default_source(circuit) not in _supplies(circuit, mosfet):
            return None  # a source of its own reaches the gate at DC: it is the input
    except SweepInputError:
        return None
    supplies = _supplies(circuit, mosfet)
    supply_nodes = {n for e in circuit.elements_of("vsource") if e.name in supplies for n in e.nodes[:2]} - {GROUND}
    divider: list[Element] = []
    coupling: list[Element] = []
    for element in circuit.elements:
        if gate not in element.nodes or element is mosfet:
            continue
        if element.kind == "resistor" and element.nodes[:2].count(gate) == 1:
            other = element.nodes[1] if element.nodes[0] == gate else element.nodes[0]
            value = element.value
            if other not in held or not isinstance(value, float) or not value > 0.0 or "m" in element.params:
                return None
            divider.append(element)
        elif element.kind == "capacitor":
            other = element.nodes[1] if element.nodes[0] == gate else element.nodes[0]
            # A capacitor to ground, to a supply's node or to the transistor itself couples no input.
            if other not in (GROUND, gate, *mosfet.nodes) and other not in supply_nodes:
                coupling.append(element)
        else:
            return None  # a source, inductor, another device's terminal on the gate: not a plain divider
    if not divider or not coupling or any(gate in m.nodes for m in mosfets if m is not mosfet):
        return None
    conductance = sum(1.0 / float(r.value) for r in divider)  # type: ignore[arg-type]
    current = sum(held[r.nodes[1] if r.nodes[0] == gate else r.nodes[0]] / float(r.value) for r in divider)  # type: ignore[arg-type]
    thevenin = current / conductance
    taken = {e.name.lower() for e in circuit.elements}
    name = next(n for n in ("VGATE", *(f"VGATE{i}" for i in range(1, 1000))) if n.lower() not in taken)
    created = Element(name, "vsource", (gate, GROUND), thevenin, mosfet.origin)
    replaced = {r.name for r in divider}
    elements = tuple(e for e in circuit.elements if e.name not in replaced) + (created,)
    rails = tuple(
        dict.fromkeys(
            e.name for r in divider for e in circuit.elements_of("vsource")
            if (set(r.nodes[:2]) - {gate, GROUND}) & set(e.nodes[:2])
        )
    )  # fmt: skip
    return GateBias(
        replace(circuit, elements=elements), name, gate, mosfet.name, thevenin, 1.0 / conductance,
        tuple(r.name for r in divider), rails or ("ground",), tuple(c.name for c in coupling),
    )  # fmt: skip


def _supplies(circuit: Circuit, mosfet: Element) -> set[str]:
    """The voltage sources that hold the drain's or source's side (through resistors), or that hold
    a node the drain or source sits on."""
    found: set[str] = set()
    for node in (mosfet.nodes[0], mosfet.nodes[2]):
        frontier, seen = [node], {node}
        while frontier:
            here = frontier.pop()
            for element in circuit.elements:
                if here not in element.nodes[:2] or here == GROUND:
                    continue
                if element.kind == "vsource":
                    found.add(element.name)
                elif element.kind in ("resistor", "inductor"):
                    other = element.nodes[1] if element.nodes[0] == here else element.nodes[0]
                    if other not in seen and other != mosfet.nodes[1]:
                        seen.add(other)
                        frontier.append(other)
    return found


def supply_span(circuit: Circuit) -> float:
    """The largest |V| of the independent voltage sources."""
    return max((abs(e.value or 0.0) for e in circuit.elements_of("vsource")), default=0.0)


def default_range(circuit: Circuit, source: str) -> tuple[float, float]:
    """0 to the supply span for a voltage source; 0 to twice its own value for a current source."""
    element = independent_source(circuit, source)
    if element.kind == "isource":
        top = 2.0 * abs(element.value or 0.0)
        if top == 0.0:
            raise SweepInputError(f"{element.name} is 0 A: give --start and --stop for the current sweep")
        return 0.0, top
    span = supply_span(circuit)
    if span == 0.0:
        raise SweepInputError("every independent voltage source is 0 V: give --start and --stop")
    return 0.0, span


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


def grid_step(values: np.ndarray) -> float:
    """The step of a grid from sweep_values (0 for a single point)."""
    return float((values[-1] - values[0]) / (len(values) - 1)) if len(values) > 1 else 0.0


def with_source_value(circuit: Circuit, source: str, value: float) -> Circuit:
    """A copy of the circuit with one independent source's DC value replaced."""
    wanted = source.lower()
    elements = tuple(
        replace(e, value=float(value)) if e.name.lower() == wanted and e.kind in ("vsource", "isource") else e
        for e in circuit.elements
    )
    return replace(circuit, elements=elements)


# --- one point of each model ----------------------------------------------------------------


@dataclass(frozen=True)
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


class _HandModel:
    """The hand model at any value of the swept source; `failure` keeps the last reason it gave none."""

    def __init__(self, circuit: Circuit, source: str) -> None:
        self.circuit = circuit
        self.source = source
        self.failure: str | None = None

    def solve(self, value: float) -> HandSolution | None:
        try:
            return hand_analysis(with_source_value(self.circuit, self.source, value))
        except (HandAnalysisError, np.linalg.LinAlgError) as exc:
            self.failure = str(exc)
            return None

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


def _edges(crossings: tuple[Crossing, ...]) -> RegionEdges:
    first = {b: next((c.at for c in crossings if c.boundary == b), None) for b in BOUNDARIES}
    return RegionEdges(first["cutoff_saturation"], first["saturation_triode"], crossings)


def _interpolated_edge(x: np.ndarray, values: Sequence[float], k: int) -> float:
    """Where the straight line through two grid points crosses zero."""
    f0, f1 = values[k], values[k + 1]
    if f0 == f1:
        return float(x[k])
    return float(x[k] + (x[k + 1] - x[k]) * f0 / (f0 - f1))


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
        return float(brentq(function, lo, hi, xtol=EDGE_XTOL, rtol=4 * np.finfo(float).eps, maxiter=200))
    except (ValueError, RuntimeError, DcSolveError, KeyError):
        return fallback


def _gradient(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """dy/dx at every point, second order inside and at the ends."""
    return np.gradient(y, x, edge_order=2 if len(x) > 2 else 1)


def _largest_gain(x: np.ndarray, y: np.ndarray) -> GainPeak | None:
    if len(x) < 2 or not np.any(np.isfinite(y)):
        return None
    slope = _gradient(x, y)
    magnitude = np.abs(slope)
    if not np.any(np.isfinite(magnitude)):
        return None
    k = int(np.nanargmax(magnitude))
    return GainPeak(float(slope[k]), float(x[k]))


def _slope_from_curve(x: np.ndarray, y: np.ndarray, at: float) -> float | None:
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


def _half_width(x: np.ndarray, bias: float) -> float:
    """Half-width of the central difference at the bias point: GAIN_STEP of the sweep span."""
    span = float(abs(x[-1] - x[0])) if len(x) > 1 else 0.0
    return GAIN_STEP * (span if span > 0.0 else max(abs(bias), 1.0))


# --- the hand column ------------------------------------------------------------------------


def _hand_curve(
    circuit: Circuit, source: str, output: str, x: np.ndarray, bias: float, devices: Sequence[str]
) -> tuple[Curve | None, list[Finding], _HandModel]:
    model = _HandModel(circuit, source)
    solutions = [model.solve(float(value)) for value in x]
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
            fallback = _interpolated_edge(x, values, k)

            def indicator(value: float) -> float:
                solution = model.solve(value)
                if solution is None:
                    raise ValueError("no hand solution")
                return _indicator(boundary, model.device(solution, name))

            return _root(indicator, float(x[k]), float(x[k + 1]), fallback)

        edges[name] = _edges(_crossings(x, points, refine))

    def vout(value: float) -> float:
        solution = model.solve(value)
        return solution.node_voltages[output] if solution is not None else math.nan

    h = _half_width(x, bias)
    gain = (vout(bias + h) - vout(bias - h)) / (2.0 * h)
    curve = Curve(
        "hand", output_values, regions, edges, EDGE_METHODS["hand"],
        gain if math.isfinite(gain) else None, _largest_gain(x, output_values), failed,
    )  # fmt: skip
    return curve, findings, model


# --- the level-1 column ---------------------------------------------------------------------


def _level1_points(circuit: Circuit, source: str, x: np.ndarray) -> SweepArrays:
    """Every point of the sweep solved at once (``solve_dc_sweep_arrays``: a vectorised Newton,
    each point from a solved neighbour, stragglers by the scalar solver from a neighbour).

    Raises UnsupportedElement, InvalidElement or SingularCircuit: those hold at every point.
    """
    return solve_dc_sweep_arrays(circuit, source, x)


def _level1_curve(
    circuit: Circuit, source: str, output: str, x: np.ndarray, bias: float, devices: Sequence[str]
) -> tuple[Curve | None, list[Finding]]:
    findings: list[Finding] = []
    try:
        points = _level1_points(circuit, source, x)
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


# --- the simulator column -------------------------------------------------------------------


def _polarity(circuit: Circuit, element: Element) -> int:
    card = circuit.model(element.model or "")
    return -1 if card is not None and card.type.lower() == "pmos" else 1


def sim_sweep_deck(circuit: Circuit, source: str, output: str, x: np.ndarray, with_devices: bool = True) -> SpiceDeck:
    """The emitted deck of the sweep: the circuit, `.save` of the output (and each MOSFET's
    vgs, vds and threshold) and one `.dc` card from the grid's first value, last value and step."""
    element = independent_source(circuit, source)
    step = grid_step(x) or 1.0
    sweep = DcSweep(element.name, float(x[0]), float(x[-1]), step)
    analysis = Analysis("dc", Origin(circuit.source_file, 0), (sweep,))
    saves = sim_vectors(circuit, output) if with_devices else [f"v({output})"]
    try:
        return emit(circuit, analyses=[analysis], saves=saves)
    except ValueError:
        # A node name the .save card cannot carry: let ngspice keep everything instead.
        return emit(circuit, analyses=[analysis], saves=["all", *saves[1:]])


def sim_vectors(circuit: Circuit, output: str) -> list[str]:
    """The vectors the sweep reads: V(output), and each MOSFET's vgs, vds and threshold."""
    mosfets = circuit.elements_of("mosfet")
    return [f"v({output})"] + [vector for m in mosfets for vector in _device_sweep_vectors(circuit, m)]


def _device_sweep_vectors(circuit: Circuit, mosfet: Element) -> list[str]:
    """@m[vgs], @m[vds] and the threshold vector of its model family (von or vth; none when the
    family is not known: then its regions are not read)."""
    threshold = threshold_vector(circuit, mosfet)
    quantities = DEVICE_SWEEP_VECTORS + ((threshold[0],) if threshold is not None else ())
    return [f"@{mosfet.name.lower()}[{q}]" for q in quantities]


def _device_regions(vov: np.ndarray, channel: np.ndarray) -> tuple[str | None, ...]:
    """The level-1 module's region rule at every point (None where ngspice gave no number)."""
    return tuple(
        classify_region(o, c) if math.isfinite(o) and math.isfinite(c) else None
        for o, c in zip(vov.tolist(), channel.tolist())
    )


def _interpolated_crossings(
    x: np.ndarray, vov: np.ndarray, channel: np.ndarray, regions: Sequence[str | None]
) -> tuple[Crossing, ...]:
    """Every region change between neighbouring points, located by linear interpolation of
    VOV (cutoff edge) or VDS − VOV (triode edge) between them."""
    known = np.isfinite(vov) & np.isfinite(channel)
    both = known[:-1] & known[1:]
    margin = channel - vov
    sides = {
        "cutoff_saturation": (vov <= 0.0, vov),
        "saturation_triode": ((vov > 0.0) & (margin < 0.0), margin),
    }
    found: list[tuple[int, int, Crossing]] = []
    for order, (boundary, (side, indicator)) in enumerate(sides.items()):
        for k in np.nonzero(both & (side[:-1] != side[1:]))[0].tolist():
            at = _interpolated_edge(x, indicator, k)
            found.append((k, order, Crossing(boundary, at, regions[k] or "", regions[k + 1] or "")))
    return tuple(crossing for _, _, crossing in sorted(found, key=lambda item: item[:2]))


def sim_curve(
    circuit: Circuit,
    session: NgspiceSession,
    source: str,
    output: str,
    x: np.ndarray,
    bias: float,
    devices: Sequence[str],
    timeout: float,
) -> tuple[Curve | None, list[Finding]]:
    """The ngspice column: one `.dc` through the worker, V(output) and each device's regions."""
    findings: list[Finding] = []
    deck = sim_sweep_deck(circuit, source, output, x)
    wanted = sim_vectors(circuit, output)
    try:
        try:
            result = session.run(deck, vectors=wanted, timeout=timeout)
        except SimulationFailed as exc:
            if "vectors not in plot" not in exc.message:
                raise
            # A device vector ngspice does not know: take what the plot has.
            result = session.run(deck, timeout=timeout)
    except SimulatorError as exc:
        findings.append(simulator_failure(exc))
        return None, findings
    findings.extend(Finding("info", "ngspice-says", message) for message in result.messages)
    if output not in result:
        findings.append(Finding("error", "sim-failed", f"ngspice gave no vector for V({output})"))
        return None, findings
    count = len(result[output])
    if count != len(x):
        # ngspice stepped once more or less than the grid (rounding at the stop value): its
        # points are start + k·step all the same, so its curve is laid onto the grid.
        findings.append(Finding("info", "sim-regridded", f"ngspice swept {count} points, the grid has {len(x)}: "
                                "its curve was interpolated onto the grid"))

    step = grid_step(x)

    def on_grid(values: np.ndarray) -> np.ndarray:
        values = np.asarray(values, dtype=float)
        if len(values) == len(x):
            return values
        stepped = float(x[0]) + step * np.arange(len(values))
        order = np.argsort(stepped)
        return np.interp(x, stepped[order], values[order], left=math.nan, right=math.nan)

    output_values = on_grid(result[output])
    regions: dict[str, tuple[str | None, ...]] = {}
    edges: dict[str, RegionEdges] = {}
    for name in devices:
        element = circuit.element(name)
        names = _device_sweep_vectors(circuit, element) if element is not None else []
        if len(names) < 3 or not all(vector in result for vector in names):
            findings.append(Finding("warning", "sim-no-device", f"ngspice gave no vgs, vds and threshold for "
                                    f"{name}: its regions and edges are not known"))
            continue
        vov, channel = _sim_device_drive(circuit, name, *(on_grid(result[vector]) for vector in names))
        regions[name] = _device_regions(vov, channel)
        crossings = _interpolated_crossings(x, vov, channel, regions[name])
        refined, from_grid = _refined_crossings(circuit, session, source, output, name, x, crossings, timeout)
        edges[name] = _edges(refined)
        if from_grid:
            findings.append(Finding("info", "sim-edge-from-grid", f"{from_grid} of {name}'s ngspice edges could "
                                    "not be refined with a finer .dc: they are the grid's interpolation, ± the grid "
                                    "step"))  # fmt: skip
    refined = _refined_sim_gain(circuit, session, source, output, x, bias, timeout)
    gain, gain_accuracy = refined if refined is not None else (_slope_from_curve(x, output_values, bias), None)
    if gain is None:
        findings.append(Finding("info", "bias-outside-sweep", f"the bias point {source} = {bias:g} is outside the "
                                "sweep: ngspice's gain there is not read from its curve"))
    elif refined is None:
        findings.append(Finding("info", "sim-gain-from-grid", "ngspice's gain at the bias point is read from the "
                                "sweep's own grid (the finer .dc around the bias point failed); its accuracy is "
                                "not known"))
    curve = Curve("sim", output_values, regions, edges, EDGE_METHODS["sim"], gain, _largest_gain(x, output_values),
                  gain_accuracy=gain_accuracy)  # fmt: skip
    return curve, findings


def _sim_device_drive(
    circuit: Circuit, name: str, vgs: np.ndarray, vds: np.ndarray, threshold: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """VOV and |VDS| (device polarity) from ngspice's @m[vgs], @m[vds] and threshold vectors."""
    element = circuit.element(name)
    assert element is not None
    # As the operating point normalises them: the threshold made positive by its family's
    # factor; with vds < 0 the device runs with drain and source swapped.
    found = threshold_vector(circuit, element)
    vth = (found[1] if found is not None else 1.0) * np.asarray(threshold, dtype=float)
    vgs, vds = np.asarray(vgs, dtype=float), np.asarray(vds, dtype=float)
    return overdrive(vgs, vds, vth), np.abs(vds)


def _sim_window(
    circuit: Circuit, session: NgspiceSession, source: str, output: str, start: float, step: float, intervals: int,
    timeout: float, with_devices: bool,
) -> tuple[np.ndarray, dict[str, np.ndarray]] | None:
    """One further ngspice `.dc` from `start` in `intervals` steps of `step`: its sweep values and
    vectors (V(output) under the node's name), or None when ngspice gives no such sweep."""
    grid = start + step * np.arange(intervals + 1)
    deck = sim_sweep_deck(circuit, source, output, grid, with_devices)
    wanted = sim_vectors(circuit, output) if with_devices else [f"v({output})"]
    try:
        result = session.run(deck, vectors=wanted, timeout=timeout)
    except SimulatorError:
        return None
    names = [output] + wanted[1:]
    if not all(name in result for name in names):
        return None
    vectors = {name: np.asarray(result[name], dtype=float) for name in names}
    count = min(len(v) for v in vectors.values())
    if count < 2:
        return None
    return start + step * np.arange(count), {name: v[:count] for name, v in vectors.items()}


def _refined_crossings(
    circuit: Circuit, session: NgspiceSession, source: str, output: str, name: str, x: np.ndarray,
    crossings: Sequence[Crossing], timeout: float,
) -> tuple[tuple[Crossing, ...], int]:
    """ngspice's crossings located on finer `.dc` runs inside their grid intervals, each with its
    accuracy: the width of the last interval in which the region changes (the grid's own interval
    where a run fails); and how many kept the grid's value."""
    refined: list[Crossing] = []
    target = EDGE_TARGET * float(abs(x[-1] - x[0]))
    unrefined = 0
    for number, crossing in enumerate(crossings):
        k = _grid_interval(x, crossing.at)
        a, b = float(x[k]), float(x[k + 1])
        located = None
        if number < REFINED_CROSSINGS:
            located = _refined_edge(circuit, session, source, output, name, crossing.boundary, a, b, target, timeout)
            if located is None and len(x) > 2:
                # An edge on a grid point may be seen one interval over: the two neighbours too.
                wide = float(x[max(k - 1, 0)]), float(x[min(k + 2, len(x) - 1)])
                located = _refined_edge(
                    circuit, session, source, output, name, crossing.boundary, *wide, target, timeout
                )
        at, accuracy = located if located is not None else (crossing.at, abs(b - a))
        refined.append(replace(crossing, at=at, accuracy=accuracy))
        unrefined += located is None
    return tuple(refined), unrefined


def _grid_interval(x: np.ndarray, at: float) -> int:
    """k such that `at` lies between x[k] and x[k + 1] (the grid in sweep order)."""
    direction = 1.0 if x[-1] >= x[0] else -1.0
    behind = np.nonzero((x - at) * direction <= 0.0)[0]
    return min(int(behind[-1]) if len(behind) else 0, len(x) - 2)


def _refined_edge(
    circuit: Circuit, session: NgspiceSession, source: str, output: str, name: str, boundary: str,
    a: float, b: float, target: float, timeout: float,
) -> tuple[float, float] | None:
    """Zoom in on one edge: `.dc` runs, each over the interval where the last one saw the region
    change, until that interval is at most `target` wide (at most REFINE_ROUNDS runs); the edge by
    linear interpolation in the last, ± that interval's width."""
    at: float | None = None
    for _ in range(REFINE_ROUNDS):
        if at is not None and abs(b - a) <= target:
            break
        step = (b - a) / REFINE_INTERVALS
        if step == 0.0:
            break
        window = _sim_window(circuit, session, source, output, a, step, REFINE_INTERVALS, timeout, True)
        if window is None:
            return None
        xs, vectors = window
        element = circuit.element(name)
        assert element is not None
        vov, channel = _sim_device_drive(
            circuit, name, *(vectors[vector] for vector in _device_sweep_vectors(circuit, element))
        )
        known = np.isfinite(vov) & np.isfinite(channel)
        side = vov <= 0.0 if boundary == "cutoff_saturation" else (vov > 0.0) & (channel - vov < 0.0)
        indicator = vov if boundary == "cutoff_saturation" else channel - vov
        changes = np.nonzero(known[:-1] & known[1:] & (side[:-1] != side[1:]))[0]
        if not len(changes):
            return None
        k = int(changes[0])
        at = _interpolated_edge(xs, indicator, k)
        a, b = float(xs[k]), float(xs[k + 1])
    return None if at is None else (at, abs(b - a))


def _refined_sim_gain(
    circuit: Circuit, session: NgspiceSession, source: str, output: str, x: np.ndarray, bias: float, timeout: float
) -> tuple[float, float] | None:
    """ngspice's dVout/dVin at the bias point and its accuracy, from one fine `.dc` around it.

    The run covers bias ± H (H = GAIN_WINDOW of the sweep span) in 2·2^GAIN_LEVELS steps; the
    centred differences at h = H, H/2, …, H/2^GAIN_LEVELS are read from it. The finest is the
    gain; its accuracy is the larger of its difference from the one at 2h and a quarter of the
    difference before (for a smooth curve the error falls fourfold per halving: Richardson).
    """
    span = float(abs(x[-1] - x[0])) if len(x) > 1 else 0.0
    half = GAIN_WINDOW * (span if span > 0.0 else max(abs(bias), 1.0))
    levels = 2**GAIN_LEVELS
    step = half / levels
    window = _sim_window(circuit, session, source, output, bias - half, step, 2 * levels, timeout, False)
    if window is None or len(window[0]) < 2 * levels + 1:
        return None
    y = window[1][output]
    estimates = []
    k = levels
    while k >= 1:
        estimates.append(float((y[levels + k] - y[levels - k]) / (2.0 * k * step)))
        k //= 2
    gain = estimates[-1]
    accuracy = max(abs(estimates[-1] - estimates[-2]), 0.25 * abs(estimates[-2] - estimates[-3]))
    if not (math.isfinite(gain) and math.isfinite(accuracy)):
        return None
    return gain, accuracy


# --- the closed form of the resistor-loaded common source -----------------------------------


def _hand_constants(circuit: Circuit, mosfet: Element) -> tuple[float, float, int] | None:
    """K = KP·W·M/Leff and Vt = VTO (device polarity) of the hand model, and the polarity."""
    try:
        # The card at the device temperature (ngspice's level-1 rules), as the hand column takes it.
        device = mosfet_instance(circuit, mosfet)
    except InstanceError:
        return None
    model = hand_model(device.model)
    return beta(model, device.geometry), threshold(model, 0.0), model.polarity


def _temperature_note(circuit: Circuit, mosfet: Element) -> list[Step]:
    """One line of working when K and Vt are not the card's 27 °C values: they are at the device
    temperature (or from a TNOM other than 27 °C) by ngspice's level-1 rules."""
    card = circuit.model(mosfet.model or "")
    celsius, nominal = circuit.device_temperature(mosfet), circuit.nominal_temperature()
    tnom = float(card.params.get("tnom", nominal)) if card is not None else nominal
    if celsius == 27.0 and tnom == 27.0:
        return []
    return [Step(f"{mosfet.name} at {celsius:g} °C: K and Vt from KP and VTO at that temperature "
                 f"(ngspice level-1 temperature rules, TNOM = {tnom:g} °C)")]


def _fixed_nodes(circuit: Circuit) -> set[str]:
    """Nodes held by chains of voltage sources from ground."""
    return set(_held_voltages(circuit))


@dataclass(frozen=True)
class _CommonSource:
    mosfet: Element
    drain_resistor: Element
    rail: str
    k: float
    vt: float
    polarity: int


def _resistor_loaded_common_source(circuit: Circuit) -> _CommonSource | None:
    """One MOSFET, its source on a rail, its drain reaching only one resistor to a rail."""
    mosfets = circuit.elements_of("mosfet")
    if len(mosfets) != 1 or circuit.elements_of("inductor"):
        return None
    mosfet = mosfets[0]
    drain, gate, source = mosfet.nodes[:3]
    fixed = _fixed_nodes(circuit)
    if drain in fixed or gate in (drain, source) or drain == source or source not in fixed:
        return None
    touching = [e for e in circuit.elements if e is not mosfet and e.kind != "capacitor" and drain in e.nodes]
    if len(touching) != 1 or touching[0].kind != "resistor" or mosfet.nodes[1:].count(drain):
        return None
    resistor = touching[0]
    rail = resistor.nodes[1] if resistor.nodes[0] == drain else resistor.nodes[0]
    if rail not in fixed or "m" in resistor.params or not isinstance(resistor.value, float) or resistor.value <= 0.0:
        return None
    constants = _hand_constants(circuit, mosfet)
    if constants is None:
        return None
    k, vt, polarity = constants
    return _CommonSource(mosfet, resistor, rail, k, vt, polarity)


def _difference(a: str, b: str) -> str:
    """`a − b` as a designer writes it: no `− 0`, `−b` for `0 − b`."""
    if b == "0":
        return a
    if a == "0":
        return f"−{b}"
    return f"{a} − {b}"


def _offset_text(base: str, polarity: int, amount: str) -> str:
    """The gate voltage at an edge: the source node's voltage plus (NMOS) or minus (PMOS) `amount`."""
    if base == "0":
        return amount if polarity > 0 else f"−{amount}"
    return f"{base} {'+' if polarity > 0 else '−'} {amount}"


def _rail_label(circuit: Circuit, node: str) -> str:
    if node == GROUND:
        return "0"
    named = [e.name for e in circuit.elements_of("vsource") if node in e.nodes[:2] and GROUND in e.nodes[:2]]
    return named[0] if named else f"V({node})"


def _gate_ratio_words(circuit: Circuit, stage: _CommonSource, source: Element, ratio: float) -> str:
    """How the gate follows the swept source, with the divider named when there is one."""
    gate = stage.mosfet.nodes[1]
    if gate in source.nodes[:2]:
        return f"the gate is {source.name}'s own node: VG = {source.name}"
    resistors = [e for e in circuit.elements_of("resistor") if gate in e.nodes[:2]]
    others = [e for e in circuit.elements if gate in e.nodes and e.kind not in ("resistor", "capacitor")
              and e is not stage.mosfet]  # fmt: skip
    if len(resistors) == 2 and not others:
        top = next((r for r in resistors if set(r.nodes[:2]) & set(source.nodes[:2]) - {GROUND}), None)
        if top is not None:
            bottom = resistors[1] if resistors[0] is top else resistors[0]
            return (
                f"divider {top.name}–{bottom.name}: dVG/d{source.name} = {bottom.name}/({top.name}+{bottom.name}) "
                f"= {ratio:.6g}"
            )
    return f"the gate network is linear and draws no current: dVG/d{source.name} = {ratio:.6g}"


def _closed_form(
    circuit: Circuit, source: str, hand: _HandModel, x: np.ndarray
) -> tuple[ClosedFormEdges | None, _CommonSource | None, float, float]:
    """The hand edges of the resistor-loaded common source, or None where that form does not apply."""
    stage = _resistor_loaded_common_source(circuit)
    if stage is None:
        return None, None, 0.0, 0.0
    element = independent_source(circuit, source)
    low, high = float(x[0]), float(x[-1])
    if high == low:
        high = low + 1.0
    first, second = hand.solve(low), hand.solve(high)
    if first is None or second is None:
        return None, None, 0.0, 0.0
    drain, gate, source_node = stage.mosfet.nodes[:3]
    for node in (stage.rail, source_node):
        if not math.isclose(first.node_voltages[node], second.node_voltages[node], rel_tol=1e-12, abs_tol=1e-12):
            return None, None, 0.0, 0.0  # the swept source moves a rail: no closed form in it
    ratio = (second.node_voltages[gate] - first.node_voltages[gate]) / (high - low)
    offset = first.node_voltages[gate] - ratio * low
    if abs(ratio) < 1e-12:
        return None, None, 0.0, 0.0
    p, k, vt = stage.polarity, stage.k, stage.vt
    vs, rail_v = first.node_voltages[source_node], first.node_voltages[stage.rail]
    span = p * (rail_v - vs)
    if span <= 0.0:
        return None, None, 0.0, 0.0
    rd = float(stage.drain_resistor.value or 0.0)
    name, rd_name = element.name, stage.drain_resistor.name
    direct = math.isclose(ratio, 1.0, rel_tol=1e-12) and abs(offset) < 1e-12
    rail, base = _rail_label(circuit, stage.rail), _rail_label(circuit, source_node)
    # The designer's symbols: VSUP the voltage across drain resistor and channel, the drive VGS
    # (VSG for a PMOS) written with the swept source when it is the gate.
    supply = _difference(rail, base) if p > 0 else _difference(base, rail)
    gate_symbol = name if direct else "VG"
    drive = _difference(gate_symbol, base) if p > 0 else _difference(base, gate_symbol)
    vds_name = "VDS" if p > 0 else "VSD"
    vov = 2.0 * span / (1.0 + math.sqrt(1.0 + 2.0 * k * rd * span))
    vg_edge = vs + p * (vt + vov)
    vg_cut = vs + p * vt
    edge = (vg_edge - offset) / ratio
    cut = (vg_cut - offset) / ratio

    def solved_for_input(vg: float, what: str) -> str:
        if direct:
            return f"{name} = {what} = {vg:.6g} V"
        return f"VG = {what} = {vg:.6g} V → {name} = (VG − {offset:.6g} V)/{ratio:.6g} = {(vg - offset) / ratio:.6g} V"

    steps = [
        Step(
            f"{stage.mosfet.name}: hand model (λ = γ = 0) K = KP·W·M/Leff = {engineering(k, 'A/V²')}, "
            f"Vt = {vt:.6g} V" + (" (PMOS: device polarity)" if p < 0 else ""),
            None, k, "A/V²",
        ),
        Step(
            f"Gate: {_gate_ratio_words(circuit, stage, element, ratio)}",
            f"VG = {name}" if direct else f"VG = {offset:.6g} V + {ratio:.6g}·{name}",
        ),
        Step(
            f"Drain: {rd_name} = {engineering(rd, 'Ω')} to {rail}; in saturation {vds_name} = {supply} − "
            f"(K/2)·VOV²·{rd_name}, and saturation ends where {vds_name} = VOV",
            f"{supply} − (K/2)·({drive} − Vt)²·{rd_name} = {drive} − Vt",
        ),
        Step(
            f"Solve (K·{rd_name}/2)·VOV² + VOV − VSUP = 0 for the positive root, VSUP = {supply} = {span:.6g} V",
            f"VOV = 2·VSUP/(1 + √(1 + 2·K·{rd_name}·VSUP)) = {vov:.6g} V",
            vov, "V",
        ),
        Step("Saturation → triode edge", solved_for_input(vg_edge, _offset_text(base, p, "(Vt + VOV)")), edge, "V"),
        Step("Cutoff → saturation edge (VOV = 0)", solved_for_input(vg_cut, _offset_text(base, p, "Vt")), cut, "V"),
    ]  # fmt: skip
    steps[1:1] = _temperature_note(circuit, stage.mosfet)
    lo, hi = min(float(x[0]), float(x[-1])), max(float(x[0]), float(x[-1]))
    for label, value in (("saturation → triode", edge), ("cutoff → saturation", cut)):
        if not lo <= value <= hi:
            steps.append(Step(f"The {label} edge {value:.6g} V lies outside the sweep ({lo:g} … {hi:g})"))
    closed = ClosedFormEdges(stage.mosfet.name, cut, edge, ratio, offset, rd_name, rd, tuple(steps))
    return closed, stage, ratio, offset


def _hand_gain_formula(
    hand: _HandModel, stage: _CommonSource, ratio: float, output: str, bias: float, source: str
) -> HandGainFormula | None:
    """−gm·(RD ∥ ro)·dVG/dVin at the bias point; ro = ∞ in saturation (λ = 0), 1/gds in triode."""
    if output != stage.mosfet.nodes[0]:
        return None
    solution = hand.solve(bias)
    if solution is None:
        return None
    device = solution.devices[stage.mosfet.name]
    rd = float(stage.drain_resistor.value or 0.0)
    rd_name = stage.drain_resistor.name
    ro = math.inf if device.gds == 0.0 else 1.0 / device.gds
    load = rd if math.isinf(ro) else rd * ro / (rd + ro)
    value = -device.gm * load * ratio
    if device.region == "saturation":
        why = f"saturation, λ = 0: ro = ∞, so RD ∥ ro = {rd_name}"
    elif device.region == "triode":
        why = f"triode: ro = 1/gds = 1/(K·(VOV − VDS)) = {engineering(ro, 'Ω')}"
    else:
        why = "cutoff: gm = 0"
    formula = f"A = −gm·({rd_name} ∥ ro)·dVG/d{source}"
    steps = (
        Step(f"Hand small-signal gain at the bias point {source} = {bias:g}: {why}", formula),
        Step(
            "With the numbers",
            f"A = −{engineering(device.gm, 'S')}·{engineering(load, 'Ω')}·{ratio:.6g} = {value:.6g}",
            value, "V/V",
        ),
    )  # fmt: skip
    return HandGainFormula(value, device.gm, ro, rd, ratio, device.region, formula, steps)


# --- the whole sweep ------------------------------------------------------------------------


def _deviation(x: np.ndarray, curve: Curve | None, reference: Curve | None) -> Deviation | None:
    if curve is None or reference is None:
        return None
    difference = np.abs(curve.output - reference.output)
    if not np.any(np.isfinite(difference)):
        return None
    k = int(np.nanargmax(difference))
    return Deviation(float(difference[k]), float(x[k]))


def transfer_curve(
    circuit: Circuit,
    source: str,
    output: str,
    values: Sequence[float] | np.ndarray,
    session: NgspiceSession | None = None,
    *,
    sim_timeout: float = 10.0,
    unavailable_hint: str | None = None,
    gate_bias: GateBias | None = None,
) -> TransferCurve:
    """Sweep `source` through `values` and follow V(`output`) in the three columns.

    Raises SweepInputError for an unknown source or node; a column that cannot be computed is
    None, with a finding that says why. With `gate_bias` (from gate_bias_source), `circuit` must
    be its circuit: the result then says which source was created and why.
    """
    element = independent_source(circuit, source)
    output = output_node(circuit, output)
    x = np.asarray(values, dtype=float)
    if x.ndim != 1 or len(x) == 0:
        raise SweepInputError("the sweep has no points")
    devices = tuple(e.name for e in circuit.elements_of("mosfet"))
    bias = float(element.value or 0.0)
    findings: list[Finding] = [Finding(NOTICE_SEVERITY, n.code, *notice_in(n, circuit.source_file))
                               for n in circuit.notices]

    other_levels = circuit.other_level_mosfets()
    hand: Curve | None = None
    level1: Curve | None = None
    if other_levels:
        findings.append(not_level1_finding(other_levels))
    else:
        hand, hand_findings, hand_model_at = _hand_curve(circuit, element.name, output, x, bias, devices)
        findings += hand_findings
        level1, level1_findings = _level1_curve(circuit, element.name, output, x, bias, devices)
        findings += level1_findings

    sim: Curve | None = None
    simulator: tuple[str, str] | None = None
    if session is None:
        findings.append(Finding("info", "no-simulator", unavailable_hint or "ngspice not available"))
    else:
        try:
            simulator = ("ngspice", session.version)
        except SimulatorError as exc:
            findings.append(simulator_failure(exc))
        else:
            sim, sim_findings = sim_curve(circuit, session, element.name, output, x, bias, devices, sim_timeout)
            findings += sim_findings

    reference = sim if sim is not None else level1
    reference_name = "sim" if sim is not None else ("level1" if level1 is not None else None)
    deviation = {
        "hand": _deviation(x, hand, reference),
        "level1": _deviation(x, level1, sim) if sim is not None else None,
    }
    if sim is not None and level1 is not None:
        worst = np.abs(level1.output - sim.output) - (SOLVER_RELATIVE * np.abs(sim.output) + SOLVER_FLOOR["V"])
        if np.any(worst > 0.0):
            k = int(np.nanargmax(worst))
            findings.append(
                Finding("warning", "solver-differs", f"V({output}): level-1 solver {level1.output[k]:.6g} V vs ngspice "
                        f"{sim.output[k]:.6g} V at {element.name} = {x[k]:.6g} (beyond 0.2 % + 1 mV)")
            )
    for column, curve in (("hand", hand), ("level1", level1), ("sim", sim)):
        for name, edges in (curve.edges.items() if curve is not None else ()):
            for boundary in BOUNDARIES:
                count = sum(c.boundary == boundary for c in edges.crossings)
                if count > 1:
                    findings.append(
                        Finding("info", "several-crossings", f"{name} crosses the {boundary.replace('_', '–')} "
                                f"boundary {count} times in the {column} column; the first is reported")
                    )

    closed: dict[str, ClosedFormEdges] = {}
    hand_gain: HandGainFormula | None = None
    if hand is not None:
        form, stage, ratio, _ = _closed_form(circuit, element.name, hand_model_at, x)
        if form is not None and stage is not None:
            closed[form.device] = form
            hand_gain = _hand_gain_formula(hand_model_at, stage, ratio, output, bias, element.name)
    return TransferCurve(
        file=circuit.source_file,
        title=circuit.title,
        source=element.name,
        source_unit="V" if element.kind == "vsource" else "A",
        output=output,
        x=x,
        step=grid_step(x),
        bias=bias,
        devices=devices,
        curves={"hand": hand, "level1": level1, "sim": sim},
        simulator=simulator,
        deviation=deviation,
        deviation_reference=reference_name,
        closed_form=closed,
        hand_gain=hand_gain,
        findings=tuple(findings),
        gate_bias=gate_bias,
    )


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
