"""The ngspice column of a transfer curve: one `.dc` through the worker, read and refined.

    sim_curve(circuit, session, source, output, x, bias, devices, timeout) -> (Curve | None, findings)

V(output) and each MOSFET's @m[vgs], @m[vds] and threshold (@m[von] or @m[vth], as the `.op`
reading takes it: operating_point.threshold_vector) are read on the grid; the region edges are
linear interpolations between sweep points, refined by further `.dc` runs through the same
worker around each edge, and the gain at the bias point is read on one fine `.dc` around it.
The simulator sees only SPICE emitted from the Circuit.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from ..curves import (
    Crossing,
    Curve,
    RegionEdges,
    grid_step,
    independent_source,
    interpolated_edge,
    largest_gain,
    region_edges,
    slope_from_curve,
)
from ..devices.mos1 import classify_region, overdrive
from ..netlist.circuit import Analysis, Circuit, DcSweep, Element, Origin
from ..netlist.emit import SpiceDeck, emit
from ..vocabulary import Finding, simulator_failure
from .client import NgspiceSession, SimulationFailed, SimulatorError
from .operating_point import threshold_vector

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

SIM_EDGE_METHOD = (
    f"the grid interval where the region changes swept again by ngspice in {REFINE_INTERVALS} steps, then "
    f"the finer interval where it changes, until it is at most {EDGE_TARGET:g} of the sweep; linear "
    "interpolation of @m[vgs], @m[vds] and the threshold (@m[von] or @m[vth]) there; ± that interval, "
    "inside which the edge lies"
)
SIM_GAIN_METHOD = (
    "centred difference on a fine ngspice .dc around the bias point; ± the difference between the "
    "estimates at steps h and h/2 (Richardson), or a quarter of the one before when that is larger"
)


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
            at = interpolated_edge(x, indicator, k)
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
                                    f"{name}: its regions and edges are not known",
                                    element.origin.line if element is not None else None, name))
            continue
        vov, channel = _sim_device_drive(circuit, name, *(on_grid(result[vector]) for vector in names))
        regions[name] = _device_regions(vov, channel)
        crossings = _interpolated_crossings(x, vov, channel, regions[name])
        refined, from_grid = _refined_crossings(circuit, session, source, output, name, x, crossings, timeout)
        edges[name] = region_edges(refined)
        if from_grid:
            findings.append(Finding("info", "sim-edge-from-grid", f"{from_grid} of {name}'s ngspice edges could "
                                    "not be refined with a finer .dc: they are the grid's interpolation, ± the grid "
                                    "step", element.origin.line, name))  # fmt: skip
    refined = _refined_sim_gain(circuit, session, source, output, x, bias, timeout)
    gain, gain_accuracy = refined if refined is not None else (slope_from_curve(x, output_values, bias), None)
    if gain is None:
        findings.append(Finding("info", "bias-outside-sweep", f"the bias point {source} = {bias:g} is outside the "
                                "sweep: ngspice's gain there is not read from its curve"))
    elif refined is None:
        findings.append(Finding("info", "sim-gain-from-grid", "ngspice's gain at the bias point is read from the "
                                "sweep's own grid (the finer .dc around the bias point failed); its accuracy is "
                                "not known"))
    curve = Curve("sim", output_values, regions, edges, SIM_EDGE_METHOD, gain, largest_gain(x, output_values),
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
        at = interpolated_edge(xs, indicator, k)
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
