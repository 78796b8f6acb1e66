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
  same model solved numerically, and the steps say so: the DC solver (``dcsolve.HandNetwork``)
  with the hand device, the same MOSFET without bulk junctions (so without GMIN).

Nothing here reads files or prints: the Circuit is the only input.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from ..devices.mos1 import (
    Level1Geometry,
    Level1Model,
    Level1Point,
    Region,
    beta,
    evaluate,
    leff,
    threshold,
)
from ..devices.mos1.instance import InstanceError, Mos1Instance, NotLevel1, default_size, mosfet_instance
from ..devices.mos1.load import (
    saturation_overdrive,
    saturation_overdrive_quadratic,
    square_law,
    triode_channel_bias,
    triode_current_quadratic,
)
from ..devices.mos1.params import CELSIUS_TO_KELVIN, CIRCUIT_TEMPERATURE_C
from ..netlist.circuit import GROUND, Circuit, Element
from ..netlist.numbers import engineering
from ..vocabulary import EFFECTS as _EFFECT_ORDER
from ..vocabulary import Step
from .connectivity import NodeSets
from .dcsolve import DcSolveError, HandNetwork, InvalidElement
from .linear import stamp_rows, stamped
from .reduction import kron, solve_block, solve_each

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

_LINEAR_KINDS = frozenset({"resistor", "capacitor", "inductor", "vsource", "isource"})
_CONTROLLED_KINDS = frozenset({"vcvs", "vccs", "cccs", "ccvs"})
_HAND_KINDS = _LINEAR_KINDS | _CONTROLLED_KINDS | {"mosfet"}
_MATCH = 1e-9  # relative agreement for "this Thevenin equivalent is just that one resistor"


class HandAnalysisError(ValueError):
    """The circuit has no bias point under the hand model, or holds what the model excludes."""


@dataclass(frozen=True)
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


@dataclass(frozen=True)
class HandSolution:
    """The hand bias point: recognised topology, every node voltage (ground "0" included),
    each MOSFET's point, the working and what was assumed. ``closed_form`` is False when the
    simplified model was solved numerically; ``effects`` lists the effects switched on."""

    topology: str
    closed_form: bool
    node_voltages: dict[str, float]
    devices: dict[str, HandDevice]
    steps: tuple[Step, ...]
    assumptions: tuple[str, ...]
    effects: frozenset[str] = frozenset()


# --- formatting ------------------------------------------------------------------------------


def _q(value: float, unit: str = "") -> str:
    """A quantity as a designer writes it: 1.333 V, 0.6325 V, 240.7 µA, 88 kΩ."""
    if unit == "V" and 1e-2 <= abs(value) < 1e3:
        return f"{value:.4g} V"
    return engineering(value, unit)


def _minus(value: float, unit: str) -> str:
    """`− 1.5 kΩ`-style continuation of a sum: the sign pulled out of the number."""
    return f"− {_q(-value, unit)}" if value < 0 else f"+ {_q(value, unit)}"


def _signed(value: float) -> str:
    """`− 0.5`-style continuation of a sum for a plain number."""
    return f"− {-value:.4g}" if value < 0 else f"+ {value:.4g}"


def _gate_formula(offset: float, drain_gain: float, source_gain: float) -> str:
    """VG = a + α·VD + β·VS, zero terms left out."""
    text = f"VG = {_q(offset, 'V')}"
    for gain, symbol in ((drain_gain, "VD"), (source_gain, "VS")):
        if abs(gain) > 1e-12:
            text += f" {_signed(gain)}·{symbol}"
    return text


# --- the DC circuit ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Resistor:
    name: str
    a: str
    b: str
    resistance: float


@dataclass(frozen=True)
class _CurrentSource:
    """An independent current source: its current leaves node `leaves` and enters `enters`."""

    name: str
    leaves: str
    enters: str
    current: float


@dataclass(frozen=True)
class _Transistor:
    element: Element
    model: Level1Model  # the hand model: LAMBDA and GAMMA zeroed unless switched on
    card: Level1Model  # as the card gives it, for the wording of effects
    geometry: Level1Geometry
    drain: str
    gate: str
    source: str
    bulk: str
    instance: Mos1Instance  # the element as the device package reads it (card model, size, junctions)

    @property
    def name(self) -> str:
        return self.element.name

    def hand_device(self) -> Mos1Instance:
        """The hand device the numerical path solves: the instance with this hand model and no
        bulk junctions."""
        return self.instance.without_junctions(self.model)

    @property
    def polarity(self) -> int:
        return self.model.polarity


@dataclass
class _DcCircuit:
    """The circuit at DC: shorts merged, voltage-source nodes fixed, the rest as lists."""

    nodes: tuple[str, ...]  # the circuit's nodes but ground (Circuit.nodes)
    merged: dict[str, str]  # every node name → the node it is shorted into
    fixed: dict[str, float]  # node → voltage set by voltage sources from ground
    rail_label: dict[str, str]  # fixed node → how the working names it (VDD, VNEG, 0)
    resistors: list[_Resistor]
    current_sources: list[_CurrentSource]
    transistors: list[_Transistor]
    voltage_sources: list[Element]
    floating_sources: list[Element]  # voltage sources not referred to ground
    controlled: list[Element]
    notes: list[str] = field(default_factory=list)
    # The numerical path's network (dcsolve.HandNetwork), once compiled (_solve_numerically). Its
    # linear part does not involve the transistors' models, and the copies HandModel.solve makes
    # with other transistor models share this list, so the attribution's re-solves compile it once.
    solver: list[HandNetwork] = field(default_factory=list, repr=False, compare=False)
    # Per node, the resistors touching it in `resistors` order, once built (_resistors_at); shared
    # by the copies HandModel.solve makes like `solver`.
    incidence: dict[str, list[_Resistor]] = field(default_factory=dict, repr=False, compare=False)


def _number(value: object, what: str, element: Element) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise HandAnalysisError(f"{element.name}: {what} is not a number ({value!r})")
    return float(value)


def _resistance(element: Element) -> float:
    value = element.value
    if value is None:
        value = element.params.get("r", element.params.get("resistance"))
    if value is None:
        raise HandAnalysisError(f"{element.name}: resistor without a value")
    # M resistors in parallel.
    return _number(value, "resistance", element) / _number(element.params.get("m", 1.0), "M", element)


def hand_model(card_model: Level1Model, effects: frozenset[str] = frozenset()) -> Level1Model:
    """The hand model of a card: LAMBDA and GAMMA zeroed, unless named in `effects`."""
    return card_model.with_lambda_gamma(
        card_model.lambda_ if "lambda" in effects else 0.0,
        card_model.gamma if "gamma" in effects else 0.0,
    )


def _transistor(
    element: Element,
    circuit: Circuit,
    merged: dict[str, str],
    effects: frozenset[str],
    defaults: tuple[float, float],
) -> _Transistor:
    try:
        device = mosfet_instance(circuit, element, defaults=defaults)
    except NotLevel1 as exc:
        raise HandAnalysisError(
            f"{element.name}: model {exc.card.name} is LEVEL={exc.card.level}; the hand model reads level-1 cards"
        ) from None
    except InstanceError as exc:
        raise HandAnalysisError(f"{element.name}: {exc}") from None
    card_model, geometry = device.model, device.geometry
    d, g, s, b = (merged[node] for node in element.nodes)
    return _Transistor(element, hand_model(card_model, effects), card_model, geometry, d, g, s, b, device)


def _temperature_moved(model: Level1Model) -> bool:
    """True when the model is not simply the card at 27 °C: another temperature or TNOM."""
    return model.temperature_celsius is not None and (
        model.temperature_celsius != CIRCUIT_TEMPERATURE_C or not model.at_nominal_temperature
    )


def _temperature_step(transistor: _Transistor) -> Step:
    """The working's line for KP and VTO at the device temperature (mos1temp.c's rules)."""
    model = transistor.model
    card = model.nominal or model
    celsius = model.temperature_celsius
    kelvin, tnom_kelvin = model.kelvin, card.tnom_celsius + CELSIUS_TO_KELVIN
    return Step(
        f"{transistor.name} at {celsius:g} °C: KP and VTO at that temperature (ngspice level-1 temperature "
        f"rules, TNOM = {card.tnom_celsius:g} °C: KP·(T/TNOM)^−1.5, VTO through PHI and the band gap)",
        f"KP = {_q(card.kp, 'A/V²')}·({kelvin:.2f} K/{tnom_kelvin:.2f} K)^−1.5 = {_q(model.kp, 'A/V²')}, "
        f"VTO = {_q(card.vto, 'V')} → {_q(model.vto, 'V')}, PHI = {_q(card.phi, 'V')} → {_q(model.phi, 'V')}",
        model.kp,
        "A/V²",
    )


def _dc_circuit(circuit: Circuit, effects: frozenset[str]) -> _DcCircuit:
    """Reduce the circuit to DC: capacitors open, shorts merged, supplies fixed."""
    for element in circuit.elements:
        if element.kind not in _HAND_KINDS:
            raise HandAnalysisError(
                f"{element.name}: the hand model covers MOSFETs, resistors, capacitors, inductors and "
                f"sources; a {element.kind} is outside it"
            )
    default_w, default_l = default_size(circuit)
    notes: list[str] = []
    circuit_nodes = circuit.nodes()
    order = {node: k for k, node in enumerate(circuit_nodes)}

    # Shorts (inductors, 0 Ω resistors) merge their nodes; ground stays its class's name.
    def first_written(a: str, b: str) -> str:
        return b if b == GROUND or (a != GROUND and order[b] < order[a]) else a

    shorts = NodeSets((GROUND, *circuit_nodes), first_written)

    # Each resistor's value, read once (in element order, so the first bad one is reported).
    resistances = [_resistance(e) if e.kind == "resistor" else None for e in circuit.elements]
    for element, resistance in zip(circuit.elements, resistances):
        shorted = element.kind == "inductor" or resistance == 0.0
        if shorted:
            shorts.join(element.nodes[0], element.nodes[1])
            what = "inductor" if element.kind == "inductor" else "0 Ω resistor"
            notes.append(f"{element.name} ({what}) is a short at DC")
    merged = {node: shorts.root(node) for node in shorts.parent}

    # Voltage sources referred to ground fix their nodes; the rest float.
    fixed: dict[str, float] = {GROUND: 0.0}
    rail_label: dict[str, str] = {GROUND: "0"}
    pending = [e for e in circuit.elements if e.kind == "vsource"]
    for element in pending:
        if merged[element.nodes[0]] == merged[element.nodes[1]]:
            raise HandAnalysisError(
                f"{element.name} is shorted (by an inductor or a 0 Ω resistor): its current is undefined"
            )
    _hold_nodes(pending, merged, fixed, rail_label)

    resistors = []
    current_sources = []
    transistors = []
    controlled = []
    for element, resistance in zip(circuit.elements, resistances):
        kind = element.kind
        if kind == "resistor":
            a, b = merged[element.nodes[0]], merged[element.nodes[1]]
            if resistance != 0.0 and a != b:
                resistors.append(_Resistor(element.name, a, b, resistance))
        elif kind == "isource":
            a, b = merged[element.nodes[0]], merged[element.nodes[1]]
            current = _number(element.value if element.value is not None else 0.0, "value", element)
            if a != b:
                current_sources.append(_CurrentSource(element.name, a, b, current))
        elif kind == "mosfet":
            transistors.append(_transistor(element, circuit, merged, effects, (default_w, default_l)))
        elif kind in _CONTROLLED_KINDS:
            controlled.append(element)
    return _DcCircuit(
        nodes=circuit_nodes,
        merged=merged,
        fixed=fixed,
        rail_label=rail_label,
        resistors=resistors,
        current_sources=current_sources,
        transistors=transistors,
        voltage_sources=[e for e in circuit.elements if e.kind == "vsource"],
        floating_sources=pending,
        controlled=controlled,
        notes=notes,
    )


def _hold_nodes(
    pending: list[Element], merged: dict[str, str], fixed: dict[str, float], rail_label: dict[str, str],
    chain: list[tuple[Element, str, str, bool]] | None = None,
) -> None:
    """Fix the nodes the voltage sources in `pending` hold from the `fixed` ones, in chains from
    ground; the sources used are taken out of `pending` (the rest float). `chain`, when given,
    receives each step in order: (source, node fixed, node it is fixed from, added or subtracted)."""
    progress = True
    while progress:
        progress = False
        for element in list(pending):
            plus, minus = merged[element.nodes[0]], merged[element.nodes[1]]
            value = _number(element.value if element.value is not None else 0.0, "value", element)
            if plus in fixed and minus in fixed:
                raise HandAnalysisError(
                    f"{element.name} closes a loop of voltage sources and shorts: its current is undefined"
                )
            if minus in fixed:
                fixed[plus] = fixed[minus] + value
                rail_label[plus] = element.name if minus == GROUND else f"V({plus})"
                if chain is not None:
                    chain.append((element, plus, minus, True))
            elif plus in fixed:
                fixed[minus] = fixed[plus] - value
                rail_label[minus] = f"V({minus})"
                if chain is not None:
                    chain.append((element, minus, plus, False))
            else:
                continue
            pending.remove(element)
            progress = True


# --- the linear network seen by one transistor ----------------------------------------------


@dataclass
class _Network:
    """Node equations of the resistive part on the free (unfixed) nodes: G·v = J + ID·e.

    J is the current the sources push into each node; e the device's: a conducting NMOS
    draws ID out of its drain node and returns it at its source (the other way for a PMOS).
    """

    nodes: list[str]
    index: dict[str, int]
    conductance: np.ndarray
    injection: np.ndarray
    device: np.ndarray
    plain: list  # the conductance matrix in plain floats (list rows), to cut blocks from; None when large
    # A large network (linear.is_large) has `conductance` in CSR; the sparse LU of the whole
    # matrix is kept here once made.
    factors: dict[str, object] = field(default_factory=dict, repr=False, compare=False)


def _network(dc: _DcCircuit, transistor: _Transistor) -> _Network:
    free = [n for n in dict.fromkeys(dc.merged.values()) if n not in dc.fixed]
    index = {node: k for k, node in enumerate(free)}
    size = len(free)
    # Stamped in plain floats (numpy's per-element indexing is slow), the same sums in the same order.
    conductance = stamp_rows(size)  # dict rows from linear.SPARSE_FROM unknowns on
    for resistor in dc.resistors:
        g = 1.0 / resistor.resistance
        for here, there in ((resistor.a, resistor.b), (resistor.b, resistor.a)):
            if here in index:
                row = conductance[index[here]]
                row[index[here]] += g
                if there in index:
                    row[index[there]] -= g
    injection = _injection(dc, index)
    device = [0.0] * size
    p = transistor.polarity
    if transistor.drain in index:
        device[index[transistor.drain]] -= p
    if transistor.source in index:
        device[index[transistor.source]] += p
    matrix = stamped(conductance, size)
    plain = conductance if isinstance(matrix, np.ndarray) else None
    return _Network(free, index, matrix, np.array(injection, dtype=float), np.array(device, dtype=float), plain)


def _injection(dc: _DcCircuit, index: Mapping[str, int]) -> list[float]:
    """J of G·v = J + ID·e: the current the fixed nodes (through resistors) and the current
    sources push into each free node, summed in element order."""
    injection = [0.0] * len(index)
    for resistor in dc.resistors:
        g = 1.0 / resistor.resistance
        for here, there in ((resistor.a, resistor.b), (resistor.b, resistor.a)):
            if here in index and there not in index:
                injection[index[here]] += g * dc.fixed[there]
    for source in dc.current_sources:
        if source.leaves in index:
            injection[index[source.leaves]] -= source.current
        if source.enters in index:
            injection[index[source.enters]] += source.current
    return injection


def _unanchored_groups(dc: _DcCircuit, net: _Network) -> list[set[str]]:
    """Groups of free nodes joined by resistors that reach no fixed node through one."""
    free = NodeSets(net.nodes)
    anchored: set[str] = set()
    for resistor in dc.resistors:
        if resistor.a in free and resistor.b in free:
            free.join(resistor.a, resistor.b)
    for resistor in dc.resistors:
        for here, there in ((resistor.a, resistor.b), (resistor.b, resistor.a)):
            if here in free and there in dc.fixed:
                anchored.add(free.root(here))
    groups: dict[str, set[str]] = {}
    for node in net.nodes:
        if free.root(node) not in anchored:
            groups.setdefault(free.root(node), set()).add(node)
    return list(groups.values())


def _reduce(net: _Network, kept: list[str], ports: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """Kron reduction onto `ports`: Y·v_ports = J_ports, the other kept nodes eliminated
    (``reduction.kron``)."""
    port_set = set(ports)
    internal = [net.index[n] for n in kept if n not in port_set]
    return kron(net.conductance, net.injection, [net.index[n] for n in ports], internal, net.plain)


def _large(net: _Network) -> bool:
    """Whether `net` was stamped sparse (linear.is_large): its solves go through a sparse LU."""
    return not isinstance(net.conductance, np.ndarray)


def _solve_on(net: _Network, rhs: np.ndarray, rows: list[int] | None = None) -> np.ndarray:
    """G⁻¹·rhs on the free nodes `rows` (None: all of them), ``reduction.solve_block``; raises
    np.linalg.LinAlgError where that block of G is singular."""
    return solve_block(net.conductance, rhs, rows, net.plain, net.factors)


def _resistors_at(dc: _DcCircuit, node: str) -> list[_Resistor]:
    """The resistors touching `node`, in `dc.resistors` order (an index built on first use)."""
    if not dc.incidence and dc.resistors:
        for resistor in dc.resistors:
            dc.incidence.setdefault(resistor.a, []).append(resistor)
            if resistor.b != resistor.a:
                dc.incidence.setdefault(resistor.b, []).append(resistor)
    return dc.incidence.get(node, [])


@dataclass(frozen=True)
class _Terminal:
    """What one device terminal sees, for the working (the solution comes from the network).

    kind — drain/source: rail, resistor (a Thevenin equivalent), current, coupled;
    gate: rail, divider, resistor, network, feedback, diode, tied (to the source), coupled.
    The gate obeys VG = offset + drain_gain·VD + source_gain·VS (no gate current).
    """

    kind: str
    voltage: float = 0.0
    resistance: float = 0.0
    voltage_label: str = ""
    resistance_label: str = ""
    elements: tuple[str, ...] = ()
    offset: float = 0.0
    drain_gain: float = 0.0
    source_gain: float = 0.0
    returned: bool = False  # gate: has a resistive path to a rail besides the drain
    detail: tuple[_Resistor, ...] = ()  # the resistors a named formula uses


@dataclass(frozen=True)
class _Stage:
    """A single-transistor stage the closed forms cover."""

    transistor: _Transistor
    network: _Network
    gate: _Terminal
    drain: _Terminal
    source: _Terminal
    held_node: str | None  # the node whose only DC path is a current source: it fixes ID
    held_current: float
    held_by: tuple[str, ...]
    response: np.ndarray | None  # without a held node: each node's voltage per A of device current


def _group_resistors(dc: _DcCircuit, node: str, skip: str | None) -> tuple[str, ...]:
    """Names of the resistors in the resistive network hanging off `node` (up to fixed nodes)."""
    seen = {node}
    frontier = [node]
    names: dict[str, None] = {}
    while frontier:
        here = frontier.pop()
        for resistor in _resistors_at(dc, here):
            there = resistor.b if resistor.a == here else resistor.a
            names.setdefault(resistor.name, None)
            if there not in dc.fixed and there != skip and there not in seen:
                seen.add(there)
                frontier.append(there)
    return tuple(names)


def _incident(dc: _DcCircuit, node: str) -> tuple[list[_Resistor], list[_CurrentSource]]:
    return (
        [r for r in dc.resistors if node in (r.a, r.b)],
        [c for c in dc.current_sources if node in (c.leaves, c.enters)],
    )


def _far_end(resistor: _Resistor, node: str) -> str:
    return resistor.b if resistor.a == node else resistor.a


def _channel_terminal(
    dc: _DcCircuit,
    node: str,
    role: str,
    y: np.ndarray | None,
    jt: np.ndarray | None,
    k: int,
    held: str | None,
) -> _Terminal:
    """Drain or source: a rail, a Thevenin equivalent, a current source, or coupled to the other."""
    tag = "D" if role == "drain" else "S"
    if node in dc.fixed:
        return _Terminal("rail", dc.fixed[node], 0.0, dc.rail_label[node])
    if node == held:
        _, currents = _incident(dc, node)
        return _Terminal("current", elements=tuple(c.name for c in currents), resistance=math.inf)
    assert y is not None and jt is not None
    if y.shape[0] == 2 and abs(y[0, 1]) > 1e-12 * max(abs(y[0, 0]), abs(y[1, 1])):
        return _Terminal("coupled", elements=_group_resistors(dc, node, None))
    resistance = 1.0 / y[k, k]
    voltage = jt[k] * resistance
    resistors, currents = _incident(dc, node)
    to_rails = [r for r in resistors if _far_end(r, node) in dc.fixed]
    if len(to_rails) == 1 and not currents:
        only = to_rails[0]
        rail = _far_end(only, node)
        if math.isclose(resistance, only.resistance, rel_tol=_MATCH) and math.isclose(
            voltage, dc.fixed[rail], rel_tol=_MATCH, abs_tol=_MATCH
        ):
            return _Terminal("resistor", voltage, resistance, dc.rail_label[rail], only.name, (only.name,))
    names = _group_resistors(dc, node, None) + tuple(c.name for c in currents)
    return _Terminal("resistor", voltage, resistance, f"VTH,{tag}", f"RTH,{tag}", names)


def _gate_terminal(dc: _DcCircuit, net: _Network, transistor: _Transistor, kept: list[str]) -> _Terminal:
    d, g, s = transistor.drain, transistor.gate, transistor.source
    if g == d:
        return _Terminal("diode")
    if g == s:
        return _Terminal("tied")
    if g in dc.fixed:
        return _Terminal("rail", dc.fixed[g], 0.0, dc.rail_label[g])
    ports = [g] + [n for n in dict.fromkeys((d, s)) if n in kept and n != g]
    y, jt = _reduce(net, kept, ports)
    offset = jt[0] / y[0, 0]
    gains = {ports[k]: -y[0, k] / y[0, 0] for k in range(1, len(ports))}
    drain_gain = gains.get(d, 0.0)
    source_gain = gains.get(s, 0.0)
    returned = y[0].sum() > 1e-12 * y[0, 0]  # some conductance from the gate to the rails
    resistors, currents = _incident(dc, g)
    tiny = 1e-12
    if abs(drain_gain) > tiny:
        to_drain = [r for r in resistors if _far_end(r, g) == d]
        to_rails = [r for r in resistors if _far_end(r, g) in dc.fixed]
        simple = (
            not currents
            and abs(source_gain) <= tiny
            and len(to_drain) == 1
            and len(to_rails) <= 1
            and len(resistors) == len(to_drain) + len(to_rails)
        )
        return _Terminal(
            "feedback",
            offset=offset,
            drain_gain=drain_gain,
            source_gain=source_gain,
            returned=returned or abs(source_gain) > tiny,
            elements=_group_resistors(dc, g, d),
            detail=tuple(to_drain + to_rails) if simple else (),
        )
    if abs(source_gain) > tiny:
        return _Terminal(
            "coupled",
            offset=offset,
            source_gain=source_gain,
            elements=_group_resistors(dc, g, None),
            returned=returned,
        )
    resistance = 1.0 / y[0, 0]
    all_to_rails = all(_far_end(r, g) in dc.fixed for r in resistors)
    if all_to_rails and not currents and len(resistors) in (1, 2):
        kind = "resistor" if len(resistors) == 1 else "divider"
        return _Terminal(
            kind,
            offset,
            resistance,
            elements=tuple(r.name for r in resistors),
            offset=offset,
            detail=tuple(resistors),
            returned=True,
        )
    names = _group_resistors(dc, g, None) + tuple(c.name for c in currents)
    return _Terminal("network", offset, resistance, elements=names, offset=offset, returned=True)


def _recognise(dc: _DcCircuit) -> tuple[str, _Stage | None, str | None]:
    """Name the topology; return the stage when a closed form covers it, else the reason not."""
    count = len(dc.transistors)
    if count == 0:
        return "no transistor", None, "there is no MOSFET in the circuit"
    if count > 1:
        return f"{count} MOSFETs", None, f"{count} MOSFETs: the closed forms cover one transistor"
    transistor = dc.transistors[0]
    pmos = "PMOS " if transistor.polarity < 0 else ""
    if dc.controlled:
        names = ", ".join(e.name for e in dc.controlled)
        return f"{pmos}single MOSFET with controlled sources", None, f"controlled sources ({names})"
    if dc.floating_sources:
        names = ", ".join(e.name for e in dc.floating_sources)
        return (
            f"{pmos}single MOSFET, floating voltage source",
            None,
            f"voltage source(s) {names} are not referred to ground",
        )
    d, g, s = transistor.drain, transistor.gate, transistor.source
    if d == s:
        return f"{pmos}single MOSFET, drain shorted to source", None, "drain and source are one node"
    net = _network(dc, transistor)
    held: str | None = None
    for group in _unanchored_groups(dc, net):
        names = ", ".join(sorted(group))
        if group == {s} and s != g:
            held = s if held is None else "?"
        elif group == {d} and d == g:
            held = d if held is None else "?"
        elif g in group and not group & {d, s}:
            raise HandAnalysisError(
                f"the gate of {transistor.name} has no DC path (node {names}): its voltage is undefined"
            )
        elif not group & {d, g, s}:
            raise HandAnalysisError(
                f"no DC path to a supply or ground from node(s) {names} (only capacitors, current "
                "sources or a MOSFET bulk reach them): the operating point is undefined"
            )
        elif group == {d}:
            return (
                f"{pmos}common-source, current-source drain load",
                None,
                "the drain is held only by a current source: with λ = 0 a saturated drain's voltage is set by nothing",
            )
        else:
            return f"{pmos}single MOSFET, other bias network", None, f"nodes {names} reach no rail"
    if held == "?":
        return (
            f"{pmos}single MOSFET, current-source bias",
            None,
            "both drain and source are held by current sources",
        )

    held_current = 0.0
    held_by: tuple[str, ...] = ()
    if held is not None:
        k = net.index[held]
        # KCL at the held node: the sources' injection balances the device's.
        held_current = -net.injection[k] / net.device[k]
        held_by = tuple(c.name for c in _incident(dc, held)[1])
    kept = [n for n in net.nodes if n != held]
    try:
        channel_ports = [n for n in (d, s) if n in kept]
        y, jt = _reduce(net, kept, channel_ports) if channel_ports else (None, None)
        drain = _channel_terminal(dc, d, "drain", y, jt, channel_ports.index(d) if d in channel_ports else 0, held)
        source = _channel_terminal(dc, s, "source", y, jt, channel_ports.index(s) if s in channel_ports else 0, held)
        gate = _gate_terminal(dc, net, transistor, kept)
        response = None
        if held is None:
            # The affine closed form's slopes; the solve doubles as the test that the network is regular.
            response = _solve_on(net, net.device)
        elif kept:
            rows = [net.index[n] for n in kept]
            _solve_on(net, np.ones(len(rows)), rows)
    except np.linalg.LinAlgError:
        return f"{pmos}single MOSFET, other bias network", None, "the resistive network is singular"
    stage = _Stage(transistor, net, gate, drain, source, held, held_current, held_by, response)
    if held is not None and held_current == 0.0:
        return (
            _topology_label(dc, stage),
            None,
            f"nothing but the device reaches node {held}: ID = 0 and its voltage is left undefined",
        )
    if held is not None and held_current < 0.0:
        return (
            _topology_label(dc, stage),
            None,
            f"current source {', '.join(held_by)} drives the device backwards (ID would be {_q(held_current, 'A')})",
        )
    return _topology_label(dc, stage), stage, None


def _topology_label(dc: _DcCircuit, stage: _Stage) -> str:
    gate, drain, source = stage.gate, stage.drain, stage.source
    pmos = "PMOS " if stage.transistor.polarity < 0 else ""
    if gate.kind == "tied":
        return f"{pmos}single MOSFET, gate tied to source"
    open_circuit = {"rail", "resistor"}
    if (
        drain.kind in open_circuit
        and source.kind in open_circuit
        and gate.kind != "diode"
        and stage.transistor.polarity * (drain.voltage - source.voltage) < 0.0
    ):
        return f"{pmos}single MOSFET, drain and source swapped (drain side below the source side)"
    source_phrase = {
        "rail": "",
        "resistor": "source resistor",
        "current": "current source in the source",
        "coupled": "source network",
    }[source.kind]
    if gate.kind == "rail":
        gate_phrase = "gate grounded" if gate.voltage_label == "0" else "gate on a voltage source"
    elif gate.kind == "resistor":
        rail = _far_end(gate.detail[0], stage.transistor.gate)
        gate_phrase = "gate returned to ground through a resistor" if rail == GROUND else "gate resistor to a rail"
    else:
        gate_phrase = {
            "divider": "divider bias",
            "network": "resistive gate bias",
            "coupled": "gate tied to the source network",
        }.get(gate.kind, "")
    if gate.kind == "diode":
        feed = {"current": "a current source", "resistor": "a resistor", "rail": "a rail"}.get(drain.kind, "a network")
        parts = [f"diode-connected, fed by {feed}", source_phrase]
    elif gate.kind == "feedback":
        parts = ["drain-to-gate feedback", "gate resistor" if gate.returned else "", source_phrase]
    elif drain.kind == "rail" and source.kind != "rail":
        load = {"current": "current-source load", "resistor": "resistor to the lower rail"}.get(
            source.kind, "source network"
        )
        parts = ["source follower", gate_phrase, load]
    else:
        parts = ["common-source", gate_phrase, source_phrase]
        if drain.kind == "rail":
            parts.append("no drain resistor")
    used = {n for r in dc.resistors for n in (r.a, r.b)} | {n for c in dc.current_sources for n in (c.leaves, c.enters)}
    used |= {stage.transistor.drain, stage.transistor.gate, stage.transistor.source}
    rails = [v for n, v in dc.fixed.items() if n in used]
    if any(v < 0 for v in rails) and any(v > 0 for v in rails):
        parts.append("split supplies")
    return pmos + ", ".join(p for p in parts if p)


# --- the working ------------------------------------------------------------------------------


@dataclass
class _Names:
    """How the working writes device-polarity quantities: VGS/VDS for NMOS, VSG/VSD for PMOS."""

    vgs: str
    vds: str
    vgd: str


def _names(polarity: int) -> _Names:
    return _Names("VGS", "VDS", "VGD") if polarity > 0 else _Names("VSG", "VSD", "VDG")


def _model_steps(transistor: _Transistor, effects: frozenset[str]) -> list[Step]:
    model, geometry = transistor.model, transistor.geometry
    k = beta(model, geometry)
    length = leff(model, geometry)
    m_text = "·M" if geometry.m != 1.0 else ""
    m_value = f"·{geometry.m:g}" if geometry.m != 1.0 else ""
    l_text = "Leff" if model.ld != 0.0 else "L"
    moved = _temperature_moved(model)
    at_text = f" at {model.temperature_celsius:g} °C" if moved else ""
    steps = [_temperature_step(transistor)] if moved else []
    steps += [
        Step(
            f"{transistor.name}: gain factor K = KP·W{m_text}/{l_text}{at_text}"
            + (f" (Leff = L − 2·LD = {_q(length, 'm')})" if model.ld != 0.0 else ""),
            f"K = {_q(model.kp, 'A/V²')}·{_q(geometry.w, 'm')}{m_value}/{_q(length, 'm')} = {_q(k, 'A/V²')}",
            k,
            "A/V²",
        )
    ]
    vt = threshold(model, 0.0)
    if "gamma" in effects:
        steps.append(
            Step(
                f"{transistor.name}: zero-bias threshold{at_text} (body effect on: GAMMA = {model.gamma:.4g} √V, "
                f"PHI = {_q(model.phi, 'V')})",
                f"Vt0 = {'−VTO' if model.polarity < 0 else 'VTO'} = {_q(vt, 'V')}",
                vt,
                "V",
            )
        )
    else:
        steps.append(
            Step(
                f"{transistor.name}: threshold from the card{at_text}, no body effect"
                + (" (PMOS: in device polarity)" if model.polarity < 0 else ""),
                f"Vt = {'−VTO' if model.polarity < 0 else 'VTO'} = {_q(vt, 'V')}",
                vt,
                "V",
            )
        )
    return steps


def _gate_steps(dc: _DcCircuit, stage: _Stage) -> list[Step]:
    gate, t = stage.gate, stage.transistor
    if gate.kind == "diode":
        return [Step(f"Gate tied to the drain (diode-connected): {_names(t.polarity).vgs} = {_names(t.polarity).vds}")]
    if gate.kind == "tied":
        return [Step(f"Gate tied to the source: {_names(t.polarity).vgs} = 0")]
    if gate.kind == "rail":
        if gate.voltage_label == "0":
            return [Step("Gate grounded", "VG = 0 V", 0.0, "V")]
        return [
            Step(
                f"Gate driven directly by {gate.voltage_label} (a Thevenin source with R = 0)",
                f"VG = {_q(gate.voltage, 'V')}",
                gate.voltage,
                "V",
            )
        ]
    if gate.kind == "divider":
        first, second = gate.detail
        rail_1, rail_2 = dc.fixed[_far_end(first, t.gate)], dc.fixed[_far_end(second, t.gate)]
        if rail_1 == 0.0 and rail_2 != 0.0:
            first, second = second, first
            rail_1, rail_2 = rail_2, rail_1
        label_1 = dc.rail_label[_far_end(first, t.gate)]
        label_2 = dc.rail_label[_far_end(second, t.gate)]
        total = first.resistance + second.resistance
        if rail_2 == 0.0:
            formula = f"VG = {label_1}·{second.name}/({first.name}+{second.name})"
            numbers = f"{_q(rail_1, 'V')}·{_q(second.resistance, 'Ω')}/{_q(total, 'Ω')}"
        else:
            formula = f"VG = ({label_1}·{second.name} + {label_2}·{first.name})/({first.name}+{second.name})"
            numbers = (
                f"({_q(rail_1, 'V')}·{_q(second.resistance, 'Ω')} + {_q(rail_2, 'V')}·"
                f"{_q(first.resistance, 'Ω')})/{_q(total, 'Ω')}"
            )
        return [
            Step(
                f"Gate voltage from the divider (no gate current, so RTH = {first.name}∥{second.name} = "
                f"{_q(gate.resistance, 'Ω')} drops nothing)",
                f"{formula} = {numbers} = {_q(gate.offset, 'V')}",
                gate.offset,
                "V",
            )
        ]
    if gate.kind == "resistor":
        (only,) = gate.detail
        rail = _far_end(only, t.gate)
        return [
            Step(
                f"Gate returned to {dc.rail_label[rail] if rail != GROUND else 'ground'} through {only.name} "
                "(no gate current, so no drop across it)",
                f"VG = {_q(gate.offset, 'V')}",
                gate.offset,
                "V",
            )
        ]
    if gate.kind == "network":
        return [
            Step(
                f"Gate Thevenin equivalent of {', '.join(gate.elements)} (no gate current, so VG is the "
                f"Thevenin voltage; RTH = {_q(gate.resistance, 'Ω')} drops nothing)",
                f"VG = {_q(gate.offset, 'V')}",
                gate.offset,
                "V",
            )
        ]
    if gate.kind == "feedback":
        if gate.detail:
            feedback = gate.detail[0]
            if len(gate.detail) == 2:
                shunt = gate.detail[1]
                rail = _far_end(shunt, t.gate)
                ratio = f"{shunt.name}/({feedback.name}+{shunt.name})"
                if rail == GROUND:
                    formula = f"VG = VD·{ratio} = {gate.drain_gain:.4g}·VD"
                else:
                    formula = (
                        f"VG = {dc.rail_label[rail]} + (VD − {dc.rail_label[rail]})·{ratio} = "
                        f"{_q(gate.offset, 'V')} + {gate.drain_gain:.4g}·VD"
                    )
                text = f"Gate from the drain through the divider {feedback.name}–{shunt.name} (no gate current)"
            else:
                text = f"Gate from the drain through {feedback.name}: no gate current, so it drops nothing"
                formula = "VG = VD"
        else:
            text = f"Gate from the drain through {', '.join(gate.elements)} (no gate current)"
            formula = _gate_formula(gate.offset, gate.drain_gain, gate.source_gain)
        return [Step(text, formula)]
    return [
        Step(
            f"Gate relation from {', '.join(gate.elements)} (no gate current)",
            _gate_formula(gate.offset, gate.drain_gain, gate.source_gain),
        )
    ]


def _channel_relation(terminal: _Terminal, role: str, polarity: int) -> str | None:
    """`VD = VDD − ID·RD`-style relation of a drain or source resistor; None when there is none."""
    if terminal.kind != "resistor":
        return None
    symbol = "VD" if role == "drain" else "VS"
    # A conducting NMOS pulls current out of its drain node and pushes it into its source node.
    sign = -polarity if role == "drain" else polarity
    rail = "" if terminal.voltage_label == "0" else terminal.voltage_label
    term = f"ID·{terminal.resistance_label}"
    if not rail:
        return f"{symbol} = {'−' if sign < 0 else ''}{term}"
    return f"{symbol} = {rail} {'−' if sign < 0 else '+'} {term}"


def _channel_steps(dc: _DcCircuit, stage: _Stage) -> list[Step]:
    steps: list[Step] = []
    p = stage.transistor.polarity
    for role, terminal in (("source", stage.source), ("drain", stage.drain)):
        symbol = "VS" if role == "source" else "VD"
        if terminal.kind == "rail":
            where = "grounded" if terminal.voltage_label == "0" else f"on {terminal.voltage_label}"
            if role == "drain" and stage.gate.kind == "diode":
                continue
            steps.append(
                Step(
                    f"{role.capitalize()} {where}",
                    f"{symbol} = {_q(terminal.voltage, 'V')}",
                    terminal.voltage,
                    "V",
                )
            )
        elif terminal.kind == "resistor":
            relation = _channel_relation(terminal, role, p)
            if terminal.resistance_label.startswith("RTH"):
                tag = terminal.resistance_label[-1]
                steps.append(
                    Step(
                        f"{role.capitalize()} Thevenin equivalent of {', '.join(terminal.elements)}"
                        + (" (the feedback string loads the drain)" if stage.gate.kind == "feedback" else ""),
                        f"VTH,{tag} = {_q(terminal.voltage, 'V')}, RTH,{tag} = {_q(terminal.resistance, 'Ω')}",
                    )
                )
                steps.append(Step(f"{role.capitalize()} side", relation))
            else:
                rail = terminal.voltage_label
                where = "ground" if rail == "0" else rail
                steps.append(Step(f"{role.capitalize()} resistor {terminal.resistance_label} to {where}", relation))
        elif terminal.kind == "coupled" and role == "source":
            steps.append(
                Step(
                    f"Drain and source both hang on the network {', '.join(terminal.elements)}: "
                    "it is reduced as a whole below"
                )
            )
    return steps


def _terminal_value_step(terminal: _Terminal, role: str, polarity: int, current: float, value: float) -> Step | None:
    if terminal.kind == "rail":
        return None
    symbol = "VD" if role == "drain" else "VS"
    relation = _channel_relation(terminal, role, polarity)
    if relation is None:
        return Step(f"{role.capitalize()} voltage", f"{symbol} = {_q(value, 'V')}", value, "V")
    sign = -polarity if role == "drain" else polarity
    rail = "" if terminal.voltage_label == "0" else f"{_q(terminal.voltage, 'V')} "
    numbers = f"{rail}{'−' if sign < 0 else '+'} {_q(current, 'A')}·{_q(terminal.resistance, 'Ω')}"
    if not rail:
        numbers = ("−" if sign < 0 else "") + numbers[2:]
    return Step(f"{role.capitalize()} voltage", f"{relation} = {numbers} = {_q(value, 'V')}", value, "V")


# --- closed forms -----------------------------------------------------------------------------


@dataclass
class _ClosedForm:
    free_voltages: dict[str, float]
    drain_current: float
    steps: list[Step]


def _voltage(dc: _DcCircuit, free: dict[str, float], node: str) -> float:
    return dc.fixed[node] if node in dc.fixed else free[node]


def _solve_network(net: _Network, kept: list[str], drain_current: float) -> dict[str, float]:
    """The voltages of the `kept` nodes (a subsequence of net.nodes) with the device drawing ID."""
    if not kept:
        return {}
    if len(kept) == len(net.nodes):  # all of them: the arrays as they are
        solution = _solve_on(net, net.injection + drain_current * net.device)
    else:
        idx = [net.index[n] for n in kept]
        solution = _solve_on(net, net.injection[idx] + drain_current * net.device[idx], idx)
    return dict(zip(kept, solution.tolist(), strict=True))


def _overdrive_symbol(stage: _Stage, value: float) -> str:
    """Name of the resistance that turns ID into lost overdrive; its value when there is no name."""
    gate, drain, source = stage.gate, stage.drain, stage.source
    source_r = source.resistance_label if source.kind == "resistor" else ""
    plus_source = f" + {source_r}" if source_r else ""
    if gate.kind in ("rail", "divider", "resistor", "network") and source_r:
        return source_r
    if gate.kind == "diode" and drain.kind == "resistor":
        return f"({drain.resistance_label}{plus_source})" if source_r else drain.resistance_label
    if gate.kind == "feedback" and drain.kind == "resistor" and abs(gate.source_gain) <= 1e-12:
        factor = "" if math.isclose(gate.drain_gain, 1.0) else f"{gate.drain_gain:.4g}·"
        named = f"{factor}{drain.resistance_label}{plus_source}"
        return f"({named})" if source_r or factor else named
    return _q(value, "Ω")


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


@dataclass(frozen=True)
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


def _affine_closed_form(dc: _DcCircuit, stage: _Stage, steps: list[Step]) -> _ClosedForm | str:
    """Every node voltage affine in ID: VOV = u − Rg·ID, VDS = w − Rd·ID; a quadratic each region."""
    numbers = _affine_numbers(dc, stage)
    if isinstance(numbers, str):
        return numbers
    steps.extend(_affine_working(dc, stage, numbers))
    if numbers.failure is not None:
        return numbers.failure
    return _ClosedForm(numbers.voltages, numbers.current, steps)


def _affine_working(dc: _DcCircuit, stage: _Stage, numbers: _AffineNumbers) -> list[Step]:
    """The steps of the affine closed form, written from its numbers."""
    t = stage.transistor
    names = _names(t.polarity)
    k, vt, vgs0, vds0, u = numbers.k, numbers.vt, numbers.vgs0, numbers.vds0, numbers.u
    rg, rd = numbers.rg, numbers.rd
    symbol = _overdrive_symbol(stage, rg)
    steps = [
        Step(
            f"Overdrive in terms of ID (substituting the gate and source relations; VOV = {names.vgs} − Vt)",
            f"VOV = {_q(u, 'V')}" + (f" − ID·{_q(rg, 'Ω')}" if rg > 0.0 else ""),
        ),
        Step(
            f"{names.vds} in terms of ID",
            f"{names.vds} = {_q(vds0, 'V')}" + (f" − ID·{_q(rd, 'Ω')}" if rd else ""),
        ),
    ]
    if numbers.region == "cutoff":
        steps.append(
            Step(
                f"With ID = 0, {names.vgs} = {_q(vgs0, 'V')} is not above Vt = {_q(vt, 'V')}: VOV ≤ 0, cutoff",
                "ID = 0",
                0.0,
                "A",
            )
        )
        return steps

    steps.append(Step("Assume saturation", "ID = (K/2)·VOV²"))
    vov, other = numbers.trial_vov, numbers.trial_other
    if rg == 0.0:
        steps.append(
            Step(
                "Nothing between the source and a rail drops voltage: VOV is set directly",
                f"VOV = {_q(vov, 'V')}",
                vov,
                "V",
            )
        )
    else:
        a = saturation_overdrive_quadratic(t.model, t.geometry, u, rg)[0]
        steps.append(
            Step(
                f"Quadratic in VOV from ID = (K/2)·VOV² and VOV = {_q(u, 'V')} − ID·{symbol}",
                f"(K·{symbol}/2)·VOV² + VOV − {_q(u, 'V')} = {a:.4g} /V·VOV² + VOV − {_q(u, 'V')} = 0 → "
                f"VOV = (−1 ± √(1 + 2·K·{symbol}·{_q(u, 'V')}))/(K·{symbol}) = {_q(vov, 'V')} or "
                f"{_q(other, 'V')}",
            )
        )
        steps.append(
            Step(
                f"Keep the root VOV = {_q(vov, 'V')}: the other, {_q(other, 'V')}, would mean {names.vgs} = "
                f"Vt + VOV = {_q(vt + other, 'V')} < Vt — the square law's mirror branch, where the device "
                "is really off",
                f"VOV = {_q(vov, 'V')}",
                vov,
                "V",
            )
        )
    current = numbers.trial_current
    steps.append(
        Step(
            "Drain current",
            f"ID = (K/2)·VOV² = {_q(k / 2, 'A/V²')}·({_q(vov, 'V')})² = {_q(current, 'A')}",
            current,
            "A",
        )
    )
    vds = numbers.trial_vds
    steps.extend(_node_steps(dc, stage, current, numbers.trial_voltages))
    if numbers.region == "saturation":
        steps.append(
            Step(
                "Check the saturation assumption",
                f"{names.vds} = {_q(vds, 'V')} ≥ VOV = {_q(vov, 'V')} → saturation holds",
            )
        )
        steps.append(_gm_step(t, vov, current, "saturation"))
        return steps

    steps.append(
        Step(
            "Check the saturation assumption",
            f"{names.vds} = {_q(vds, 'V')} < VOV = {_q(vov, 'V')} → saturation fails: re-solve in triode",
        )
    )
    w = vds0
    qa, qb, qc = numbers.quadratic
    roots = numbers.roots
    steps.append(
        Step(
            f"Triode: ID = K·(VOV·{names.vds} − {names.vds}²/2) with "
            f"VOV = {_q(u, 'V')}" + (f" − ID·{_q(rg, 'Ω')}" if rg > 0.0 else "") + " and "
            f"{names.vds} = {_q(w, 'V')}" + (f" − ID·{_q(rd, 'Ω')}" if rd else "") + ": a quadratic in ID",
            f"{qa:.4g} /A·ID² {_signed(qb)}·ID {_minus(qc, 'A')} = 0 → ID = " + " or ".join(_q(r, "A") for r in roots),
        )
    )
    if numbers.failure is not None:
        return steps
    current, vov, vds = numbers.current, numbers.vov, numbers.vds
    rejected = [r for r in roots if r != current]
    why = ""
    if rejected:
        r = rejected[0]
        why = f"; the other root gives VOV = {_q(u - rg * r, 'V')}, {names.vds} = {_q(w - rd * r, 'V')}, outside triode"
    steps.append(
        Step(
            f"Keep ID = {_q(current, 'A')}: with it 0 ≤ {names.vds} = {_q(vds, 'V')} ≤ VOV = {_q(vov, 'V')}{why}",
            f"ID = {_q(current, 'A')}",
            current,
            "A",
        )
    )
    steps.extend(_node_steps(dc, stage, current, numbers.voltages))
    steps.append(Step("Check", f"{names.vds} = {_q(vds, 'V')} < VOV = {_q(vov, 'V')} → triode holds"))
    steps.append(_gm_step(t, vds, current, "triode", vov))
    return steps


def _held_closed_form(dc: _DcCircuit, stage: _Stage, steps: list[Step]) -> _ClosedForm | str:
    """A current source is the only DC path of the source (or of a diode-connected drain): ID = I."""
    t, net = stage.transistor, stage.network
    p, names = t.polarity, _names(t.polarity)
    k, vt = beta(t.model, t.geometry), threshold(t.model, 0.0)
    held = stage.held_node
    assert held is not None
    current = stage.held_current
    where = "source" if held == t.source else "drain–gate node"
    steps.append(
        Step(
            f"Current source {', '.join(stage.held_by)} is the {where}'s only DC path (no gate current), so "
            "it sets the drain current",
            f"ID = {_q(current, 'A')}",
            current,
            "A",
        )
    )
    kept = [n for n in net.nodes if n != held]
    free = _solve_network(net, kept, current)
    vov_sat = saturation_overdrive(t.model, t.geometry, current)
    d, g, s = t.drain, t.gate, t.source

    if held == s:
        vg, vd = _voltage(dc, free, g), _voltage(dc, free, d)
        steps.append(
            Step(
                "Assume saturation",
                f"VOV = √(2·ID/K) = √(2·{_q(current, 'A')}/{_q(k, 'A/V²')}) = {_q(vov_sat, 'V')}",
                vov_sat,
                "V",
            )
        )
        vs = vg - p * (vt + vov_sat)
        if stage.gate.kind != "rail":
            steps.append(Step("Gate voltage", f"VG = {_q(vg, 'V')}", vg, "V"))
        relation = "VS = VG − Vt − VOV" if p > 0 else "VS = VG + Vt + VOV"
        steps.append(Step("Source voltage", f"{relation} = {_q(vs, 'V')}", vs, "V"))
        step = _terminal_value_step(stage.drain, "drain", p, current, vd)
        if step is not None:
            steps.append(step)
        vds = p * (vd - vs)
        if vds >= vov_sat:
            steps.append(
                Step(
                    "Check the saturation assumption",
                    f"{names.vds} = {_q(vds, 'V')} ≥ VOV = {_q(vov_sat, 'V')} → saturation holds",
                )
            )
            steps.append(_gm_step(t, vov_sat, current, "saturation"))
            free[s] = vs
            return _ClosedForm(free, current, steps)
        steps.append(
            Step(
                "Check the saturation assumption",
                f"{names.vds} = {_q(vds, 'V')} < VOV = {_q(vov_sat, 'V')} → saturation fails: re-solve in triode",
            )
        )
        # Triode with ID fixed: VOV = VDS + δ, δ = VGD − Vt, so ID = K·(VDS²/2 + δ·VDS).
        delta = p * (vg - vd) - vt
        vds = triode_channel_bias(t.model, t.geometry, delta, current)
        vs = vd - p * vds
        steps.append(
            Step(
                f"Triode with ID fixed: VOV = {names.vds} + δ, δ = {names.vgd} − Vt = {_q(delta, 'V')}, so "
                f"ID = K·({names.vds}²/2 + δ·{names.vds}); keep the positive root (the other puts the drain "
                "beyond the source)",
                f"{names.vds} = √(δ² + 2·ID/K) − δ = {_q(vds, 'V')}",
                vds,
                "V",
            )
        )
        steps.append(Step("Source voltage", f"VS = {_q(vs, 'V')}", vs, "V"))
        steps.append(Step("Check", f"{names.vds} = {_q(vds, 'V')} < VOV = {_q(vds + delta, 'V')} → triode holds"))
        steps.append(_gm_step(t, vds, current, "triode", vds + delta))
        free[s] = vs
        return _ClosedForm(free, current, steps)

    # Diode-connected node fed only by a current source.
    vs = _voltage(dc, free, s)
    step = _terminal_value_step(stage.source, "source", p, current, vs)
    if step is not None:
        steps.append(step)
    if vt > 0.0:
        vgs = vt + vov_sat
        steps.append(
            Step(
                f"Saturation ({names.vds} = {names.vgs} = Vt + VOV ≥ VOV, as Vt > 0)",
                f"{names.vgs} = Vt + √(2·ID/K) = {_q(vt, 'V')} + √(2·{_q(current, 'A')}/{_q(k, 'A/V²')}) "
                f"= {_q(vgs, 'V')}",
                vgs,
                "V",
            )
        )
        region, vov = "saturation", vov_sat
    else:
        # Depletion device: VDS = VGS < VOV, so triode: ID = K·(VGS²/2 − Vt·VGS).
        vgs = triode_channel_bias(t.model, t.geometry, -vt, current)  # VDS = VGS, VOV = VGS − Vt
        steps.append(
            Step(
                f"Vt ≤ 0, so {names.vds} = {names.vgs} < VOV: triode, ID = K·({names.vgs}²/2 − "
                f"Vt·{names.vgs}); keep the positive root",
                f"{names.vgs} = Vt + √(Vt² + 2·ID/K) = {_q(vgs, 'V')}",
                vgs,
                "V",
            )
        )
        region, vov = "triode", vgs - vt
    vd = vs + p * vgs
    steps.append(
        Step(
            "Drain (and gate) voltage",
            f"VD = VS {'+' if p > 0 else '−'} {names.vgs} = {_q(vd, 'V')}",
            vd,
            "V",
        )
    )
    steps.append(_gm_step(t, vov if region == "saturation" else vgs, current, region, vov))
    free[d] = vd
    return _ClosedForm(free, current, steps)


def _node_steps(dc: _DcCircuit, stage: _Stage, current: float, voltages: dict[str, float]) -> list[Step]:
    t = stage.transistor
    steps = []
    for role, terminal, node in (("source", stage.source, t.source), ("drain", stage.drain, t.drain)):
        step = _terminal_value_step(terminal, role, t.polarity, current, _voltage(dc, voltages, node))
        if step is not None:
            steps.append(step)
    if stage.gate.kind in ("feedback", "coupled"):
        vg = _voltage(dc, voltages, t.gate)
        steps.append(Step("Gate voltage", f"VG = {_q(vg, 'V')}", vg, "V"))
    return steps


def _gm_step(t: _Transistor, drive: float, current: float, region: Region, vov: float | None = None) -> Step:
    """gm (and gds in triode) of the hand model, asked of the device at the closed form's point:
    `drive` is VOV in saturation, VDS in triode."""
    if region == "saturation":
        gm = square_law(t.model, t.geometry, drive, drive, region)[1]
        return Step("Transconductance (λ = 0: gds = 0)", f"gm = K·VOV = 2·ID/VOV = {_q(gm, 'S')}", gm, "S")
    assert vov is not None
    _, gm, gds = square_law(t.model, t.geometry, vov, drive, region)
    return Step(
        "Small-signal values in triode",
        f"gm = K·VDS = {_q(gm, 'S')}, gds = K·(VOV − VDS) = {_q(gds, 'S')}",
        gm,
        "S",
    )


# --- the numerical path -----------------------------------------------------------------------

_NO_POINT = (
    "the simplified model (square law, λ = γ = 0, no gate current) has no operating point Newton's "
    "method could find: the circuit may have none, or several nodes the model leaves undetermined "
    "(e.g. a saturated drain held only by a current source)"
)


def _solve_numerically(
    circuit: Circuit, dc: _DcCircuit, start: Mapping[str, float] | None = None
) -> tuple[dict[str, float], int]:
    """The hand model solved by the DC solver with the hand device (``dcsolve.HandNetwork``): the
    voltages of the merged nodes (ground included) and the Newton iterations spent.

    Newton starts from `start`'s node voltages where given (a nearby solution: the attribution
    starts each one-effect re-solve from the plain hand point), from ngspice's junction guess
    otherwise.
    """
    devices = {t.name: t.hand_device() for t in dc.transistors}
    try:
        if not dc.solver:
            dc.solver.append(HandNetwork(circuit, devices, dc.merged))
        network = dc.solver[0]
        guess = None if start is None else {node: start[node] for node in network.nodes if node in start}
        solved = network.solve(devices, guess)
    except InvalidElement as exc:  # a controlled source's value or control, read on this path only
        raise HandAnalysisError(str(exc)) from None
    except DcSolveError:
        raise HandAnalysisError(_NO_POINT) from None
    voltages = {GROUND: 0.0}
    voltages.update({node: solved.node_voltages[node] for node in network.nodes})
    return voltages, solved.iterations


# --- the answer -------------------------------------------------------------------------------


def _hand_device(point: Level1Point) -> HandDevice:
    # HandDevice's fields in order: id, vgs, vds, vth, vov, gm, gds, region.
    return HandDevice(point.id, point.vgs, point.vds, point.vth, point.vov, point.gm, point.gds, point.region)


def _device_points(dc: _DcCircuit, voltages: dict[str, float]) -> dict[str, Level1Point]:
    return {
        t.name: evaluate(t.model, t.geometry, voltages[t.drain], voltages[t.gate], voltages[t.source], voltages[t.bulk])
        for t in dc.transistors
    }


# Forward bias at which a real bulk junction conducts enough to matter: the answer then
# leans on the missing junction diodes, and the working says so.
_JUNCTION_ON = 0.3  # V: about a nanoamp through a default (IS = 1e-14 A) junction


def _junction_warnings(dc: _DcCircuit, voltages: dict[str, float]) -> list[Step]:
    """Bulk junctions the hand solution forward-biases: its answer then ignores a real diode."""
    warnings = []
    for t in dc.transistors:
        for terminal, node in (("source", t.source), ("drain", t.drain)):
            forward = t.polarity * (voltages[t.bulk] - voltages[node])
            if forward > _JUNCTION_ON:
                warnings.append(
                    Step(
                        f"Warning: {t.name}'s bulk–{terminal} junction is forward biased by "
                        f"{_q(forward, 'V')}; the hand model has no junction diodes, a real device "
                        "(and ngspice) would conduct through it",
                        value=forward,
                        unit="V",
                    )
                )
    return warnings


def _assumptions(dc: _DcCircuit, effects: frozenset[str]) -> tuple[str, ...]:
    items = [
        "Square law: ID = (K/2)·VOV² in saturation, K·(VOV·VDS − VDS²/2) in triode, K = KP·W·M/Leff",
        "LAMBDA switched on: ID scaled by (1 + λ·VDS)"
        if "lambda" in effects
        else "LAMBDA = 0: no channel-length modulation (gds = 0 in saturation)",
        "GAMMA switched on: threshold rises with source–bulk reverse bias"
        if "gamma" in effects
        else "GAMMA = 0: no body effect, Vt = VTO",
        "No gate current",
        "Capacitors open, inductors shorted (DC)",
        "Bulk junction diodes and GMIN left out",
        "Device quantities in device polarity: a conducting PMOS has positive ID, VGS = V(s) − V(g), "
        "VDS = V(s) − V(d), Vt",
    ]
    items.extend(dc.notes)
    for t in dc.transistors:
        if _temperature_moved(t.model):
            items.append(
                f"{t.name} at {t.model.temperature_celsius:g} °C: the card's KP, VTO and PHI taken to that "
                f"temperature by ngspice's level-1 rules (TNOM = {t.model.tnom_celsius:g} °C)"
            )
    for t in dc.transistors:
        items.extend(f"{t.name}: {caveat}" for caveat in t.card.caveats)
    return tuple(dict.fromkeys(items))


def _effect_text(dc: _DcCircuit, effects: frozenset[str]) -> str:
    parts = []
    for t in dc.transistors:
        if "lambda" in effects:
            parts.append(f"{t.name} LAMBDA = {t.model.lambda_:.4g} /V")
        if "gamma" in effects:
            parts.append(f"{t.name} GAMMA = {t.model.gamma:.4g} √V")
    return ", ".join(parts)


def _numerical_solution(
    circuit: Circuit,
    dc: _DcCircuit,
    topology: str,
    reason: str,
    effects: frozenset[str],
    steps: list[Step],
    working: bool = True,
    start: Mapping[str, float] | None = None,
) -> HandSolution:
    voltages, iterations = _solve_numerically(circuit, dc, start)
    points = _device_points(dc, voltages)
    devices = {name: _hand_device(point) for name, point in points.items()}
    if not working:
        return HandSolution(topology, False, _all_nodes(dc, voltages), devices, (), (), effects)
    steps.append(Step(f"No closed form used: {reason}"))
    model_words = "the hand model" + (f" with {_effect_text(dc, effects)} switched on" if effects else "")
    steps.append(
        Step(f"Solved {model_words} numerically: Newton's method on the node equations ({iterations} iterations)")
    )
    warnings = _junction_warnings(dc, voltages)
    for t in dc.transistors:
        point = points[t.name]
        names = _names(t.polarity)
        steps.append(
            Step(
                f"{t.name}: {point.region}",
                f"ID = {_q(point.id, 'A')}, {names.vgs} = {_q(point.vgs, 'V')}, {names.vds} = "
                f"{_q(point.vds, 'V')}, VOV = {_q(point.vov, 'V')}",
                point.id,
                "A",
            )
        )
    return HandSolution(
        topology=topology,
        closed_form=False,
        node_voltages=_all_nodes(dc, voltages),
        devices=devices,
        steps=tuple(steps + warnings),
        assumptions=_assumptions(dc, effects) + tuple(w.text for w in warnings),
        effects=effects,
    )


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
    exists (the two agree to rounding). ``working=False`` leaves the steps and assumptions
    out of a numerical answer (its numbers are the same): for callers that only read the
    bias point, such as the attribution. Raises HandAnalysisError when the circuit has no
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
            dc = replace(dc, transistors=[replace(t, model=hand_model(t.card, chosen)) for t in dc.transistors])
        return _solve(self.circuit, dc, chosen, self._recognised, closed_form, working, start)


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
) -> HandSolution:
    topology, stage, reason = recognised
    if not working and (chosen or not closed_form or stage is None):
        return _numerical_solution(circuit, dc, topology, "", chosen, [], working=False, start=start)
    steps: list[Step] = []
    for t in dc.transistors:
        steps.extend(_model_steps(t, chosen))
    if chosen:
        reason = f"{_effect_text(dc, chosen)} switched on — the closed forms assume λ = γ = 0" + (
            f" (and {reason})" if reason else ""
        )
    elif not closed_form:
        reason = "numerical path requested" + (f" (and {reason})" if reason else "")
    if stage is None or reason is not None:
        return _numerical_solution(circuit, dc, topology, reason or "", chosen, steps)

    steps.extend(_gate_steps(dc, stage))
    steps.extend(_channel_steps(dc, stage))
    solved = (
        _held_closed_form(dc, stage, steps) if stage.held_node is not None else _affine_closed_form(dc, stage, steps)
    )
    if isinstance(solved, str):
        return _numerical_solution(circuit, dc, topology, solved, chosen, steps, working=working)
    voltages = {**dc.fixed, **solved.free_voltages}
    points = _device_points(dc, voltages)
    t = stage.transistor
    point = points[t.name]
    if not math.isclose(point.id, solved.drain_current, rel_tol=1e-9, abs_tol=1e-15):
        # Far from any stage's sizes and supplies (W = 1 T-metre, VDD = 1 TV) the closed form's
        # rounding leaves the device equations: the numerical path answers instead.
        reason = (f"the closed form for {t.name} loses its precision here (ID {solved.drain_current:.6g} A vs "
                  f"{point.id:.6g} A from the device equations)")
        return _numerical_solution(circuit, dc, topology, reason, chosen, steps, working=working)
    warnings = _junction_warnings(dc, voltages)
    return HandSolution(
        topology=topology,
        closed_form=True,
        node_voltages=_all_nodes(dc, voltages),
        devices={t.name: _hand_device(point)},
        steps=tuple(solved.steps + warnings),
        assumptions=_assumptions(dc, chosen) + tuple(w.text for w in warnings),
        effects=chosen,
    )
