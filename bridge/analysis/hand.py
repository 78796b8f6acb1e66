"""Hand analysis: the designer's first-order bias point, with the working written out.

    hand_analysis(circuit, effects=frozenset()) -> HandSolution

The hand model, stated once:

* Square law with LAMBDA = 0 and GAMMA = 0. K = β = KP·W·M/Leff and Vt = VTO come from the
  level-1 module (``beta``, ``threshold`` on a Level1Model with LAMBDA and GAMMA zeroed), and
  the device quantities of every answer from its ``evaluate``. No gate current. Capacitors
  open; inductors and 0 Ω resistors shorted.
* Quantities in device polarity, as ngspice reports them: a conducting PMOS has positive ID,
  VGS = V(s) − V(g), VDS = V(s) − V(d) and Vt. Region: cutoff when VOV ≤ 0, saturation when
  VDS ≥ VOV, triode otherwise.
* Closed form: one MOSFET among resistors, capacitors, inductors and independent sources whose
  voltage sources are referred to ground. With the gate drawing nothing, the resistive network
  makes every node voltage affine in ID, so VOV = u − Rg·ID and VDS = w − Rd·ID: saturation is
  a quadratic in VOV, triode a quadratic in ID. A source node held only by a current source
  (or a diode-connected node fed only by one) fixes ID at that current instead.
* Anything else — several transistors, controlled sources, floating voltage sources, a drain
  held only by a current source, or LAMBDA/GAMMA switched back on through ``effects`` — is the
  same model solved numerically, and the steps say so: the DC solver (``compiled_network.HandNetwork``)
  with the hand device, the same MOSFET without bulk junctions (so without the minimum
  conductance ngspice puts across each junction either). The attribution's re-solves (one effect,
  no working) of a stage a closed form covers solve the same equations for one unknown on the
  closed form's own network instead (``_affine_with_effects``, ``_held_with_effects``).

This module solves the closed forms and the numerical path on the circuit ``hand_circuit.py``
reduces and recognises; ``hand_working.py`` writes the working from those numbers, only when
a view reads a solution's ``steps`` or ``assumptions``. Nothing here reads files or prints: the
Circuit is the only input.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import field, replace

import numpy as np

from ..devices.mos1 import (
    Level1Point,
    beta,
    evaluate,
    threshold,
)
from ..devices.mos1.load import (
    DeviceConstants,
    device_constants,
    evaluate_with,
    saturation_overdrive,
    saturation_overdrive_quadratic,
    square_law,
    triode_channel_bias,
    triode_current_quadratic,
)
from ..netlist.circuit import GROUND, Circuit, Element
from ..records import record, with_fields
from ..vocabulary import EFFECTS as _EFFECT_ORDER
from ..vocabulary import Step
from .compiled_network import HandNetwork
from .dcsolve import DcSolveError, InvalidElement
from .hand_circuit import (
    HandAnalysisError,
    _dc_circuit,
    _DcCircuit,
    _hold_nodes,
    _injection,
    _large,
    _number,
    _recognise,
    _solve_network,
    _Stage,
    hand_model,
)
from .hand_working import Working, _effect_text, _names, _q, written
from .reduction import solve_each

__all__ = [
    "EFFECTS",
    "HandAnalysisError",
    "HandDevice",
    "HandModel",
    "HandSolution",
    "Step",
    "hand_analysis",
    "hand_model",
]

# Second-order effects the hand model leaves out and `effects` may switch back on.
EFFECTS: frozenset[str] = frozenset(_EFFECT_ORDER)


@record(frozen=True)
class HandDevice:
    """A MOSFET's hand-model operating point, in device polarity (positive for an on PMOS).

    gm = K·VOV in saturation, K·VDS in triode, 0 in cutoff; gds = 0 in saturation (λ = 0) and
    K·(VOV − VDS) in triode — what ``evaluate`` gives with LAMBDA and GAMMA zeroed.
    """

    id: float
    vgs: float
    vds: float
    vth: float
    vov: float
    gm: float
    gds: float
    region: str


@record(frozen=True)
class HandSolution:
    """The hand bias point: recognised topology, every node voltage (ground "0" included),
    each MOSFET's point, the working and what was assumed. ``closed_form`` is False when the
    simplified model was solved numerically; ``effects`` lists the effects switched on.

    ``steps`` and ``assumptions`` are sequences written the first time they are read
    (``hand_working.Written``: equal to, and pickled as, the tuples they stand for)."""

    topology: str
    closed_form: bool
    node_voltages: dict[str, float]
    devices: dict[str, HandDevice]
    steps: Sequence[Step]
    assumptions: Sequence[str]
    effects: frozenset[str] = frozenset()

# --- closed forms -----------------------------------------------------------------------------

def _quadratic(a: float, b: float, c: float) -> tuple[float, ...]:
    """Real roots of a·x² + b·x + c = 0, computed without cancellation; ascending."""
    if a == 0.0:
        return () if b == 0.0 else (-c / b,)
    disc = b * b - 4.0 * a * c
    if disc < 0.0:
        if disc > -1e-12 * b * b:
            disc = 0.0
        else:
            return ()
    q = -(b + math.copysign(math.sqrt(disc), b)) / 2.0  # halving is exact: the same bits as ×0.5
    roots = [q / a] + ([c / q] if q != 0.0 else [q / a])
    return tuple(sorted(roots))


@record(frozen=True, eq=False)
class _AffineNumbers:
    """The numbers of the affine closed form: VOV = u − rg·ID, VDS = vds0 − rd·ID.

    region is "cutoff", "saturation" or "triode"; `trial_*` are the saturation attempt's numbers
    (VOV, its rejected root, ID, VDS) when the device conducts; `roots` the triode quadratic's
    (qa·ID² + qb·ID + qc = 0) when saturation failed; `failure` says why no triode root fits.
    """

    k: float
    vt: float
    vgs0: float
    vds0: float
    rg: float
    rd: float
    u: float
    base: dict[str, float]
    voltages: dict[str, float]  # every free node at the solution
    current: float
    region: str
    vov: float = 0.0
    vds: float = 0.0
    trial_vov: float = 0.0
    trial_other: float = 0.0
    trial_current: float = 0.0
    trial_vds: float = 0.0
    trial_voltages: dict[str, float] = field(default_factory=dict)
    quadratic: tuple[float, float, float] = (0.0, 0.0, 0.0)
    roots: tuple[float, ...] = ()
    failure: str | None = None


def _affine_numbers(dc: _DcCircuit, stage: _Stage, base: dict[str, float] | None = None) -> _AffineNumbers | str:
    """The affine closed form's numbers, no text; a reason (str) where it does not apply.
    `base`: the network's node voltages with ID = 0, when already solved."""
    t, net = stage.transistor, stage.network
    p, names = t.polarity, _names(t.polarity)
    k, vt = beta(t.model, t.geometry), threshold(t.model, 0.0)
    if base is None:
        base = _solve_network(net, net.nodes, 0.0)
    # Each node's response to the device current alone: V = base + ID·response.
    assert stage.response is not None
    response = dict(zip(net.nodes, stage.response.tolist(), strict=True))

    def at(node: str, current: float) -> float:
        if node in dc.fixed:
            return dc.fixed[node]
        return base[node] + current * response[node]

    def slope(node: str) -> float:
        return 0.0 if node in dc.fixed else response[node]

    d, g, s = t.drain, t.gate, t.source
    vgs0 = p * (at(g, 0.0) - at(s, 0.0))
    vds0 = p * (at(d, 0.0) - at(s, 0.0))
    rg = -p * (slope(g) - slope(s))  # V of overdrive lost per A of ID
    rd = -p * (slope(d) - slope(s))  # V of VDS lost per A of ID
    u = vgs0 - vt
    if rg < -1e-9 * max(rd, 1.0):
        return "the bias network feeds ID back positively (Rg < 0)"
    rg = max(rg, 0.0)
    if vds0 < 0.0:
        return f"with ID = 0 the drain sits below the source ({names.vds} = {_q(vds0, 'V')}): roles swapped"
    if u <= 0.0:
        return _AffineNumbers(k, vt, vgs0, vds0, rg, rd, u, base, dict(base), 0.0, "cutoff")

    if rg == 0.0:
        vov, other = u, 0.0
    else:
        roots = _quadratic(*saturation_overdrive_quadratic(t.model, t.geometry, u, rg))
        vov, other = roots[1], roots[0]
    current = square_law(t.model, t.geometry, vov, vov, "saturation")[0]
    vds = vds0 - rd * current
    voltages = {n: at(n, current) for n in net.nodes}
    trial = {"trial_vov": vov, "trial_other": other, "trial_current": current, "trial_vds": vds,
             "trial_voltages": voltages}  # fmt: skip
    if vds >= vov:
        return _AffineNumbers(k, vt, vgs0, vds0, rg, rd, u, base, voltages, current, "saturation", vov, vds, **trial)

    # Triode: ID = K·(VOV·VDS − VDS²/2) with both affine in ID → a·ID² + b·ID + c = 0.
    w = vds0
    qa, qb, qc = triode_current_quadratic(t.model, t.geometry, u, rg, w, rd)
    roots = _quadratic(qa, qb, qc)

    def fits(root: float) -> bool:
        vov_t, vds_t = u - rg * root, w - rd * root
        slack = 1e-12 * max(1.0, abs(vov_t))
        return root >= -1e-18 and vov_t > 0.0 and -slack <= vds_t <= vov_t + slack

    chosen = [r for r in roots if fits(r)]
    if not chosen:
        return _AffineNumbers(
            k, vt, vgs0, vds0, rg, rd, u, base, {}, 0.0, "none", **trial, quadratic=(qa, qb, qc), roots=roots,
            failure="no root of the triode quadratic is consistent with triode",
        )  # fmt: skip
    current = chosen[0]
    vov, vds = u - rg * current, w - rd * current
    voltages = {n: at(n, current) for n in net.nodes}
    return _AffineNumbers(
        k, vt, vgs0, vds0, rg, rd, u, base, voltages, current, "triode", vov, vds, **trial,
        quadratic=(qa, qb, qc), roots=roots,
    )  # fmt: skip


@record(frozen=True, eq=False)
class _HeldNumbers:
    """The numbers of the held closed form: a current source is the only DC path of the source
    (or of a diode-connected drain), so ID = I.

    `region` is where the device ends up. A held source: `vg`, `vd`, `vs` and `vds` are the
    saturation attempt's (VOV = `vov_sat`); where it fails, `delta` (VGD − Vt) and `triode_vds`
    are the triode re-solve's. A diode-connected node: `vs` and `vgs` (= VDS).
    """

    current: float
    voltages: dict[str, float]  # every free node at the solution
    region: str
    vov_sat: float
    vg: float = 0.0
    vd: float = 0.0
    vs: float = 0.0
    vds: float = 0.0
    delta: float = 0.0
    triode_vds: float = 0.0
    vgs: float = 0.0
    failure: str | None = None  # never: a held closed form always has its root


def _held_numbers(dc: _DcCircuit, stage: _Stage) -> _HeldNumbers:
    """The held closed form's numbers, no text (its working: ``hand_working._held_working``)."""
    t, net = stage.transistor, stage.network
    p, vt = t.polarity, threshold(t.model, 0.0)
    held, current = stage.held_node, stage.held_current
    kept = [n for n in net.nodes if n != held]
    free = _solve_network(net, kept, current)
    vov_sat = saturation_overdrive(t.model, t.geometry, current)
    d, g, s = t.drain, t.gate, t.source
    if held == s:
        vg, vd = dc.voltage(free, g), dc.voltage(free, d)
        vs = vg - p * (vt + vov_sat)
        vds = p * (vd - vs)
        if vds >= vov_sat:
            free[s] = vs
            return _HeldNumbers(current, free, "saturation", vov_sat, vg, vd, vs, vds)
        # Triode with ID fixed: VOV = VDS + δ, δ = VGD − Vt, so ID = K·(VDS²/2 + δ·VDS).
        delta = p * (vg - vd) - vt
        triode_vds = triode_channel_bias(t.model, t.geometry, delta, current)
        free[s] = vd - p * triode_vds
        return _HeldNumbers(current, free, "triode", vov_sat, vg, vd, vs, vds, delta, triode_vds)
    # Diode-connected node fed only by a current source.
    vs = dc.voltage(free, s)
    if vt > 0.0:
        vgs, region = vt + vov_sat, "saturation"
    else:
        # Depletion device: VDS = VGS < VOV, so triode: ID = K·(VGS²/2 − Vt·VGS).
        vgs, region = triode_channel_bias(t.model, t.geometry, -vt, current), "triode"  # VOV = VGS − Vt
    free[d] = vs + p * vgs
    return _HeldNumbers(current, free, region, vov_sat, vs=vs, vgs=vgs)


# --- an effect switched on: a closed form's stage solved for one unknown -----------------------

_ROOT_ITERATIONS = 100  # bound on the scalar Newton (it takes 2–6 from the plain point)
_ROOT_SETTLED = 1e-12  # a step this small (relative) is the last: the next would be rounding
_HELD_SETTLED = 1e-15  # V: the same for a held node near 0 V


_SPLIT = 134217729.0  # 2**27 + 1: Veltkamp's split of a double into two halves of 26 bits


def _shifted(offset: float, slope: float, current: float) -> float:
    """offset + current·slope with the product's rounding error put back (Dekker's exact
    product): a node that ID pulls near zero from a large offset (a drain in deep triode, 5 V −
    4.97 V) keeps the digits the numerical path's node voltage has, and the device's current
    there with it."""
    product = current * slope
    if product == 0.0 or not math.isfinite(product):
        return offset + product
    c = _SPLIT * current
    current_high = c - (c - current)
    current_low = current - current_high
    c = _SPLIT * slope
    slope_high = c - (c - slope)
    slope_low = slope - slope_high
    error = ((current_high * slope_high - product) + current_high * slope_low + current_low * slope_high
             + current_low * slope_low)  # fmt: skip
    return (offset + product) + error


def _affine_with_effects(
    dc: _DcCircuit, topology: str, stage: _Stage, chosen: frozenset[str], start: Mapping[str, float] | None,
    base: dict[str, float] | None = None,
) -> HandSolution | None:
    """The bias point of an affine stage (``_affine_numbers``'s: no held node) with `chosen`
    switched on in `dc`'s transistor: the same network, each node V = base + ID·response, and
    ID = id(V(ID)) of the device with the effects, solved for ID by Newton safeguarded by
    bisection (``_current_root``). No working: for the attribution's re-solves. None where the
    root is not found or does not hold at the device equations (the caller then takes the
    numerical path, ``compiled_network.HandNetwork``).

    The root is the numerical path's to rounding (both solve the same equations to the last
    digit they test), without compiling the circuit for Newton. `start` (the plain hand point)
    gives the first guess of ID: the plain device's current there. `base`: the network's node
    voltages with ID = 0, when already solved."""
    t, net = dc.transistors[0], stage.network
    if base is None:
        base = _solve_network(net, net.nodes, 0.0)
    assert stage.response is not None
    response = dict(zip(net.nodes, stage.response.tolist(), strict=True))
    guess = 0.0
    if start is not None and all(n in start for n in (t.drain, t.gate, t.source, t.bulk)):
        plain = stage.transistor  # the model the stage was recognised with
        guess = max(evaluate(plain.model, plain.geometry, start[t.drain], start[t.gate], start[t.source],
                             start[t.bulk]).id, 0.0)  # fmt: skip
    terminals = [(dc.fixed[n], 0.0) if n in dc.fixed else (base[n], response[n])
                 for n in (t.drain, t.gate, t.source, t.bulk)]  # fmt: skip
    (vd, sd), (vg, sg), (vs, ss), _ = terminals
    if t.polarity * (vd - vs) < 0.0 or -t.polarity * (sg - ss) < -1e-9 * max(-t.polarity * (sd - ss), 1.0):
        return None  # as _affine_numbers: roles swapped at ID = 0, or ID fed back positively (Rg < 0)
    current = _current_root(device_constants(t.model, t.geometry), terminals, guess)
    if current is None:
        return None
    voltages = {**dc.fixed, **{n: _shifted(base[n], response[n], current) for n in net.nodes}}
    point = _device_points(dc, voltages)[t.name]
    if not math.isclose(point.id, current, rel_tol=1e-9, abs_tol=1e-15):
        return None
    # ID is the root itself: the device's current at the rounded node voltages can be off in its
    # last digits where ID pulls a node near zero (in deep triode an ulp of ID is 1e-15 V of drain).
    device = with_fields(_hand_device(point), id=current)
    return HandSolution(topology, False, _all_nodes(dc, voltages), {t.name: device}, (), (), chosen)


def _current_root(
    constants: DeviceConstants, terminals: Sequence[tuple[float, float]], guess: float
) -> float | None:
    """The ID ≥ 0 at which the device carries ID with each terminal (drain, gate, source, bulk) at
    offset + ID·slope (`terminals`): the root of f(ID) = ID − id, by Newton (f′ from the
    device's terminal conductances, the exact derivatives a solver stamps) kept inside the
    bracket f changes sign in, bisecting where a step leaves it. f(0) = −id ≤ 0 (the drain is not
    below the source at ID = 0, ``_affine_numbers``); None where f′ ≤ 0 (the bias network no longer
    feeds ID back negatively: the root need not be the one Newton in the circuit finds) or the
    iterations run out."""
    (vd, sd), (vg, sg), (vs, ss), (vb, sb) = terminals
    polarity = constants.polarity
    low, high = 0.0, math.inf
    current = guess
    for _ in range(_ROOT_ITERATIONS):
        point = evaluate_with(constants, _shifted(vd, sd, current), _shifted(vg, sg, current),
                              _shifted(vs, ss, current), _shifted(vb, sb, current))  # fmt: skip
        excess = current - point.id
        if excess == 0.0:
            return current
        if excess > 0.0:
            high = current
        else:
            low = current
        gd, gg, gs, gb = point.conductances
        slope = 1.0 - polarity * (gd * sd + gg * sg + gs * ss + gb * sb)  # id = polarity·drain current
        if not slope > 0.0:
            return None
        following = current - excess / slope
        if not low <= following <= high:
            following = (low + high) / 2.0  # bisection
        if not math.isfinite(following):
            return None
        if abs(following - current) <= _ROOT_SETTLED * abs(following):
            return following
        current = following
    return None


def _held_with_effects(
    dc: _DcCircuit, topology: str, stage: _Stage, chosen: frozenset[str], start: Mapping[str, float] | None
) -> HandSolution | None:
    """The bias point of a held stage (``_held_numbers``'s: a current source the only DC path of
    the source, or of a diode-connected drain) with `chosen` switched on in `dc`'s transistor:
    ID is still the source's current, the other nodes are the network's at that current, and the
    held node's voltage is the one at which the device with the effects carries it, solved by
    Newton from `start`'s (``_held_root``). No working; None without a start or where no root is
    found (the caller then takes the numerical path)."""
    t, net = dc.transistors[0], stage.network
    held, current = stage.held_node, float(stage.held_current)  # a numpy float from the injection
    if start is None or held is None or held not in start:
        return None
    voltages = {**dc.fixed, **_solve_network(net, [n for n in net.nodes if n != held], current)}
    nodes = (t.drain, t.gate, t.source, t.bulk)
    if any(n != held and n not in voltages for n in nodes):
        return None
    level = _held_root(device_constants(t.model, t.geometry), [None if n == held else voltages[n] for n in nodes],
                       current, start[held])  # fmt: skip
    if level is None:
        return None
    voltages[held] = level
    point = _device_points(dc, voltages)[t.name]
    if not math.isclose(point.id, current, rel_tol=1e-9, abs_tol=1e-15):
        return None
    device = _hand_device(point)
    plain = stage.transistor  # recognised with the plain hand model (HandModel), or with the effects
    if plain.model.lambda_ == 0.0 and plain.model.gamma == 0.0 and all(n in start for n in nodes):
        # ID is the current source's, with the effects as without: where `start` is the plain
        # point, its own ID (the number the plain solution reports) is this one's, so that the
        # effect moves ID by exactly 0, not by the rounding of two evaluations.
        same = evaluate(plain.model, plain.geometry, *(start[n] for n in nodes)).id
        if math.isclose(same, current, rel_tol=1e-9, abs_tol=1e-15):
            device = with_fields(device, id=same)
    return HandSolution(topology, False, _all_nodes(dc, voltages), {t.name: device}, (), (), chosen)


def _held_root(
    constants: DeviceConstants, terminals: Sequence[float | None], current: float, guess: float
) -> float | None:
    """The voltage of the held node (the terminals given as None; the others at their voltages)
    at which the device carries `current`: Newton on id − `current`, its derivative the device's
    conductances towards the held terminals. None where that derivative vanishes (cutoff) or the
    iterations run out."""
    polarity = constants.polarity
    level = guess
    for _ in range(_ROOT_ITERATIONS):
        vd, vg, vs, vb = (level if v is None else v for v in terminals)
        point = evaluate_with(constants, vd, vg, vs, vb)
        slope = polarity * sum(g for g, v in zip(point.conductances, terminals, strict=True) if v is None)
        if slope == 0.0 or not math.isfinite(slope):
            return None
        following = level - (point.id - current) / slope
        if not math.isfinite(following):
            return None
        if abs(following - level) <= _ROOT_SETTLED * abs(following) + _HELD_SETTLED:
            return following
        level = following
    return None


# --- the numerical path -----------------------------------------------------------------------

_NO_POINT = (
    "the simplified model (square law, λ = γ = 0, no gate current) has no operating point Newton's "
    "method could find: the circuit may have none, or several nodes the model leaves undetermined "
    "(e.g. a saturated drain held only by a current source)"
)


def _solve_numerically(
    circuit: Circuit, dc: _DcCircuit, start: Mapping[str, float] | None = None
) -> tuple[dict[str, float], dict[str, Level1Point], int]:
    """The hand model solved by the DC solver with the hand device (``compiled_network.HandNetwork``): the
    voltages of the merged nodes (ground included), each transistor's point there (in the order
    of ``dc.transistors``: ``_device_points`` at those voltages, the same numbers) and the Newton
    iterations spent.

    Newton starts from `start`'s node voltages where given (a nearby solution: the attribution
    starts each one-effect re-solve from the plain hand point), from ngspice's junction guess
    otherwise.
    """
    devices = {t.name: t.hand_device() for t in dc.transistors}
    try:
        placed = None  # the network compiled here holds these devices already: no copy with them
        if not dc.solver:
            dc.solver.append(HandNetwork(circuit, devices, dc.merged))
        else:
            placed = devices
        network = dc.solver[0]
        guess = None if start is None else {node: start[node] for node in network.nodes if node in start}
        voltages, solved_points, iterations = network.solve_points(placed, guess)
    except InvalidElement as exc:  # a controlled source's value or control, read on this path only
        raise HandAnalysisError(str(exc)) from None
    except DcSolveError:
        raise HandAnalysisError(_NO_POINT) from None
    return voltages, {t.name: solved_points[t.name] for t in dc.transistors}, iterations


# --- the answer -------------------------------------------------------------------------------


def _hand_device(point: Level1Point) -> HandDevice:
    # HandDevice's fields in order: id, vgs, vds, vth, vov, gm, gds, region.
    return HandDevice(point.id, point.vgs, point.vds, point.vth, point.vov, point.gm, point.gds, point.region)


def _device_points(dc: _DcCircuit, voltages: dict[str, float]) -> dict[str, Level1Point]:
    return {
        t.name: evaluate(t.model, t.geometry, voltages[t.drain], voltages[t.gate], voltages[t.source], voltages[t.bulk])
        for t in dc.transistors
    }

def _numerical_solution(
    circuit: Circuit,
    dc: _DcCircuit,
    topology: str,
    effects: frozenset[str],
    working: Working | None,
    start: Mapping[str, float] | None = None,
) -> HandSolution:
    """The model solved numerically; `working` (what the text is written from, this path's
    numbers added to it) None for an answer without text."""
    voltages, points, iterations = _solve_numerically(circuit, dc, start)
    devices = {name: _hand_device(point) for name, point in points.items()}
    if working is None:
        return HandSolution(topology, False, _all_nodes(dc, voltages), devices, (), (), effects)
    steps, assumptions = written(replace(working, voltages=voltages, iterations=iterations, points=points))
    return HandSolution(topology, False, _all_nodes(dc, voltages), devices, steps, assumptions, effects)


def _all_nodes(dc: _DcCircuit, voltages: dict[str, float]) -> dict[str, float]:
    return {GROUND: 0.0, **{node: voltages[dc.merged[node]] for node in dc.nodes}}


def _chosen_effects(effects: Iterable[str]) -> frozenset[str]:
    chosen = frozenset(e.lower() for e in effects)
    unknown = chosen - EFFECTS
    if unknown:
        raise ValueError(f"unknown effect(s) {sorted(unknown)}; choose from {sorted(EFFECTS)}")
    return chosen


def hand_analysis(
    circuit: Circuit, *, effects: Iterable[str] = frozenset(), closed_form: bool = True, working: bool = True
) -> HandSolution:
    """The designer's square-law bias point (λ = γ = 0, no gate current), with the working.

    ``effects`` switches "lambda" and/or "gamma" back on (for attributing a difference to
    one effect at a time); the closed forms then no longer apply and the same model is solved
    numerically. ``closed_form=False`` takes the numerical path even where a closed form
    exists (the two agree to rounding). The working is written only when the answer's
    ``steps`` or ``assumptions`` are read; ``working=False`` leaves them empty (the numbers are
    the same) and, with effects or without a closed form, keeps nothing to write them from:
    for callers that only read the bias point, such as the attribution. Raises HandAnalysisError when the circuit has no
    bias point under the model or holds elements it excludes (diodes, BJTs).
    """
    chosen = _chosen_effects(effects)
    dc = _dc_circuit(circuit, chosen)
    return _solve(circuit, dc, chosen, _recognise(dc), closed_form, working)


class HandModel:
    """One circuit reduced for the hand model (DC circuit, topology) once, solved on demand.

    ``HandModel(circuit).solve(...)`` gives what ``hand_analysis(circuit, ...)`` gives; the
    reduction and the recognition do not depend on the effects switched on, so a caller that
    solves the same circuit several ways (the attribution) does them once. Construction raises
    HandAnalysisError as ``hand_analysis`` would.
    """

    def __init__(self, circuit: Circuit) -> None:
        self.circuit = circuit
        self._dc = _dc_circuit(circuit, frozenset())
        self._recognised = _recognise(self._dc)
        self._base: dict[str, float] | None = None

    def _base_voltages(self) -> dict[str, float] | None:
        """The affine stage's node voltages with ID = 0 (``_affine_numbers``' base: they depend on
        the network alone, not on the effects), solved at the first solve that reads them and
        shared by the others; None where no affine closed form is recognised."""
        _, stage, reason = self._recognised
        if stage is None or reason is not None or stage.held_node is not None:
            return None
        if self._base is None:
            self._base = _solve_network(stage.network, stage.network.nodes, 0.0)
        return self._base

    def solve(
        self,
        *,
        effects: Iterable[str] = frozenset(),
        closed_form: bool = True,
        working: bool = True,
        start: Mapping[str, float] | None = None,
    ) -> HandSolution:
        """The bias point with `effects` switched on; the arguments are those of ``hand_analysis``.

        `start` (node voltages of a nearby solution) seeds the numerical path of a solve without
        working (``working=False``), the one the attribution uses.
        """
        chosen = _chosen_effects(effects)
        dc = self._dc
        if chosen:
            # The same reduction with each transistor's hand model rebuilt from its card.
            dc = dc.with_transistors([t.with_model(hand_model(t.card, chosen)) for t in dc.transistors])
        # The closed forms read the base voltages: the plain solve and the re-solves without working.
        base = self._base_voltages() if closed_form and (not chosen or not working) else None
        return _solve(self.circuit, dc, chosen, self._recognised, closed_form, working, start, base)

    def solved_unchanged(self, effect: str, plain: HandSolution) -> HandSolution | None:
        """The bias point with `effect` switched on where it provably cannot act: then it IS
        `plain` (this model's own plain solution), with no working; None where it may act
        (``solve`` must then re-solve).

        It cannot act where the hand model's equations do not change: LAMBDA or GAMMA 0 on every
        card (the model is the plain one); or GAMMA where, at `plain`, every transistor's bulk
        sits on the terminal acting as its source (the source, the drain of a device running
        swapped): one merged node, or two nodes a source fixes at the same voltage. There the
        body bias is exactly 0, s(0) − √PHI is exactly 0 (``load.body_root``), so vth, id, gm
        and gds at `plain` are those of the plain model to the last bit: `plain` solves the
        model with GAMMA, and Newton started from it (the re-solve) stays on it, but for the
        rounding of its last step."""
        if effect not in EFFECTS or not plain.devices:
            return None
        dc = self._dc
        for t in dc.transistors:
            if effect == "lambda":
                if t.card.lambda_ != 0.0:
                    return None
            elif t.card.gamma != 0.0:
                device = plain.devices.get(t.name)
                if device is None:
                    return None
                acting = t.drain if device.vds < 0.0 else t.source
                if t.bulk != acting and not (
                    t.bulk in dc.fixed and acting in dc.fixed and dc.fixed[t.bulk] == dc.fixed[acting]
                ):
                    return None
        return HandSolution(
            plain.topology, plain.closed_form, plain.node_voltages, plain.devices, (), (), frozenset((effect,))
        )


class HandSweep:
    """The hand bias point of one circuit at any value of one of its independent sources, numbers
    only: no steps, no assumptions (a sweep solves hundreds of points and reads none of them).

    The circuit is reduced and its topology recognised once, at the netlist's value; at each
    value only the nodes the voltage sources hold and the current the sources push into the
    network are recomputed (the same sums in the same order), and the affine closed form is
    solved with the same arithmetic as ``hand_analysis``, so the numbers are the same to the last
    bit. ``solve`` gives None where that path does not cover the point (no affine closed form
    here, or none at this value): the caller then asks ``hand_analysis`` with ``working=False``
    (and ``closed_form=False`` where ``covered``: the affine form holds for this circuit but not
    at that value, so the numerical path is what hand_analysis would take there too).
    """

    def __init__(self, circuit: Circuit, source: str) -> None:
        wanted = source.lower()
        self._element = next(
            e for e in circuit.elements if e.name.lower() == wanted and e.kind in ("vsource", "isource")
        )
        self.covered = False
        try:
            dc = _dc_circuit(circuit, frozenset())
            self._topology, stage, reason = _recognise(dc)
            # The chain from ground the voltage sources fix their nodes along (it depends on the
            # circuit's shape only), followed again at every value.
            chain: list[tuple[Element, str, str, bool]] = []
            pending = [e for e in circuit.elements if e.kind == "vsource"]
            _hold_nodes(pending, dc.merged, {GROUND: 0.0}, {GROUND: "0"}, chain)
        except (HandAnalysisError, np.linalg.LinAlgError):
            return
        if stage is None or reason is not None or stage.held_node is not None or _large(stage.network):
            return
        self._chain = [
            (element is self._element, _number(element.value if element.value is not None else 0.0, "value", element),
             target, origin, plus)
            for element, target, origin, plus in chain
        ]  # fmt: skip
        # Working copies, their source-dependent parts (fixed nodes, injection) set at each value.
        self._dc = copy.copy(dc)
        self._current_sources = list(dc.current_sources)
        self._network = copy.copy(stage.network)
        self._stage = replace(stage, network=self._network)
        self.covered = True

    def solve(self, value: float) -> HandSolution | None:
        """The hand bias point with the swept source at `value`; None where this path does not cover it."""
        if not self.covered:
            return None
        self._set(float(value))
        return self._point(None)

    def solve_all(self, values: Sequence[float]) -> list[HandSolution | None]:
        """``solve`` at every value; the network's linear solves of all of them in one call (one
        LAPACK solve per value, as ``solve`` makes it, so the numbers are the same)."""
        if not self.covered:
            return [None] * len(values)
        dc, net = self._dc, self._network
        injections, held = [], []
        for value in values:
            self._set_sources(float(value))
            injections.append(_injection(dc, net.index))  # the same sums as _set's, one array for all
            held.append((dc.fixed, dc.current_sources))
        if not injections:
            return []
        # G·v = J + 0·e at each value, as _solve_network states it for ID = 0.
        rhs = np.array(injections) + 0.0 * net.device
        solved = solve_each(net.conductance, rhs)
        points = []
        for (fixed, current_sources), base in zip(held, solved.tolist(), strict=True):
            dc.fixed, dc.current_sources = fixed, current_sources
            points.append(self._point(dict(zip(net.nodes, base, strict=True))))
        return points

    def _set(self, value: float) -> None:
        """The working copies at `value`: the held nodes or the swept current, and the injection."""
        self._set_sources(value)
        self._network.injection = np.array(_injection(self._dc, self._network.index), dtype=float)

    def _set_sources(self, value: float) -> None:
        """The held nodes or the swept current at `value` (the injection left as it was)."""
        dc, element = self._dc, self._element
        if element.kind == "vsource":
            fixed: dict[str, float] = {GROUND: 0.0}
            for swept, netlist_value, target, origin, plus in self._chain:
                step = value if swept else netlist_value
                fixed[target] = fixed[origin] + step if plus else fixed[origin] - step
            dc.fixed = fixed
        else:
            dc.current_sources = [
                replace(c, current=value) if c.name == element.name else c for c in self._current_sources
            ]

    def _point(self, base: dict[str, float] | None) -> HandSolution | None:
        """The closed form at the value last set (`base`: the network with ID = 0, when solved already)."""
        dc, stage = self._dc, self._stage
        numbers = _affine_numbers(dc, stage, base)
        if isinstance(numbers, str) or numbers.failure is not None:
            return None
        voltages = {**dc.fixed, **numbers.voltages}
        t = stage.transistor
        point = _device_points(dc, voltages)[t.name]
        if not math.isclose(point.id, numbers.current, rel_tol=1e-9, abs_tol=1e-15):
            return None  # the closed form lost its precision (see _solve): as where it fails
        return HandSolution(self._topology, True, _all_nodes(dc, voltages), {t.name: _hand_device(point)}, (), ())


def _solve(
    circuit: Circuit,
    dc: _DcCircuit,
    chosen: frozenset[str],
    recognised: tuple[str, _Stage | None, str | None],
    closed_form: bool,
    working: bool,
    start: Mapping[str, float] | None = None,
    base: dict[str, float] | None = None,
) -> HandSolution:
    """The numbers, and with `working` what their text is written from (written when read).
    `base`: an affine stage's node voltages with ID = 0, when already solved."""
    topology, stage, reason = recognised
    if not working and (chosen or not closed_form or stage is None):
        if chosen and closed_form and stage is not None and reason is None:
            if stage.held_node is None:
                solved = _affine_with_effects(dc, topology, stage, chosen, start, base)
            else:
                solved = _held_with_effects(dc, topology, stage, chosen, start)
            if solved is not None:
                return solved
        return _numerical_solution(circuit, dc, topology, chosen, None, start=start)
    if chosen:
        reason = f"{_effect_text(dc, chosen)} switched on — the closed forms assume λ = γ = 0" + (
            f" (and {reason})" if reason else ""
        )
    elif not closed_form:
        reason = "numerical path requested" + (f" (and {reason})" if reason else "")

    def text(**numbers: object) -> Working | None:
        """What the numerical path's text is written from (None without working)."""
        return Working(dc, chosen, {}, **numbers) if working else None

    if stage is None or reason is not None:
        return _numerical_solution(circuit, dc, topology, chosen, text(reason=reason or ""))

    closed = _held_numbers(dc, stage) if stage.held_node is not None else _affine_numbers(dc, stage, base)
    if isinstance(closed, str):
        return _numerical_solution(circuit, dc, topology, chosen, text(stage=stage, reason=closed))
    if closed.failure is not None:
        reason = closed.failure
        return _numerical_solution(circuit, dc, topology, chosen, text(stage=stage, closed=closed, reason=reason))
    voltages = {**dc.fixed, **closed.voltages}
    t = stage.transistor
    point = _device_points(dc, voltages)[t.name]
    if not math.isclose(point.id, closed.current, rel_tol=1e-9, abs_tol=1e-15):
        # Far from any stage's sizes and supplies (W = 1 T-metre, VDD = 1 TV) the closed form's
        # rounding leaves the device equations: the numerical path answers instead.
        reason = (f"the closed form for {t.name} loses its precision here (ID {closed.current:.6g} A vs "
                  f"{point.id:.6g} A from the device equations)")
        return _numerical_solution(circuit, dc, topology, chosen, text(stage=stage, closed=closed, reason=reason))
    # The closed form's working, written when read.
    steps, assumptions = written(Working(dc, chosen, voltages, stage, closed)) if working else ((), ())
    return HandSolution(
        topology=topology,
        closed_form=True,
        node_voltages=_all_nodes(dc, voltages),
        devices={t.name: _hand_device(point)},
        steps=steps,
        assumptions=assumptions,
        effects=chosen,
    )
