"""The circuit as the hand analysis sees it, numbers only: the DC circuit (capacitors open,
shorts merged, nodes the voltage sources fix), the node equations of the resistive network on
the free nodes with the transistor's current as an injection (reduced and solved by
``reduction``: Kron's reduction onto the device terminals, block solves), and the topology
recognised from the Thevenin views of gate, drain and source (``_recognise``).

``hand.py`` solves the closed forms and the numerical path on this; ``hand_working.py``
writes the working from both.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import field

import numpy as np

from ..devices.mos1 import Level1Geometry, Level1Model
from ..devices.mos1.instance import InstanceError, Mos1Instance, NotLevel1, default_size, mosfet_instance
from ..netlist.circuit import GROUND, Circuit, Element
from ..records import record, with_fields
from .compiled_network import HandNetwork
from .connectivity import NodeSets
from .hand_working import _q
from .linear import stamp_rows, stamped
from .reduction import kron, solve_block

_LINEAR_KINDS = frozenset({"resistor", "capacitor", "inductor", "vsource", "isource"})
_CONTROLLED_KINDS = frozenset({"vcvs", "vccs", "cccs", "ccvs"})
_HAND_KINDS = _LINEAR_KINDS | _CONTROLLED_KINDS | {"mosfet"}
_MATCH = 1e-9  # relative agreement for "this Thevenin equivalent is just that one resistor"

class HandAnalysisError(ValueError):
    """The circuit has no bias point under the hand model, or holds what the model excludes."""


# --- the DC circuit ---------------------------------------------------------------------------


@record(frozen=True, eq=False)
class _Resistor:
    """A resistor between nodes `a` and `b`."""

    name: str
    a: str
    b: str
    resistance: float

    def far_end(self, node: str) -> str:
        """The other end from `node`."""
        return self.b if self.a == node else self.a


@record(frozen=True, eq=False)
class _CurrentSource:
    """An independent current source: its current leaves node `leaves` and enters `enters`."""

    name: str
    leaves: str
    enters: str
    current: float


@record(frozen=True, eq=False)
class _Transistor:
    """A MOSFET of the DC circuit with the model the hand analysis gives it."""

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

    def with_model(self, model: Level1Model) -> _Transistor:
        """This transistor with another hand model (the attribution makes one per re-solve)."""
        return with_fields(self, model=model)


@record(eq=False)
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
    # The numerical path's network (compiled_network.HandNetwork), once compiled (_solve_numerically). Its
    # linear part does not involve the transistors' models, and the copies HandModel.solve makes
    # with other transistor models share this list, so the attribution's re-solves compile it once.
    solver: list[HandNetwork] = field(default_factory=list, repr=False, compare=False)
    # Per node, the resistors touching it in `resistors` order, once built (_resistors_at); shared
    # by the copies HandModel.solve makes like `solver`.
    incidence: dict[str, list[_Resistor]] = field(default_factory=dict, repr=False, compare=False)

    def voltage(self, free: Mapping[str, float], node: str) -> float:
        """A node's voltage: fixed by a source, else taken from `free`."""
        return self.fixed[node] if node in self.fixed else free[node]

    def with_transistors(self, transistors: list[_Transistor]) -> _DcCircuit:
        """The same reduction with `transistors` in place of its own (another hand model of each);
        every other field is shared, `solver` and `incidence` among them."""
        return with_fields(self, transistors=transistors)


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


@record(eq=False)
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
    index = net.index  # the free nodes
    free = NodeSets(net.nodes)
    anchored: set[str] = set()
    for resistor in dc.resistors:
        if resistor.a in index and resistor.b in index:
            free.join(resistor.a, resistor.b)
    for resistor in dc.resistors:
        for here, there in ((resistor.a, resistor.b), (resistor.b, resistor.a)):
            if here in index and there in dc.fixed:
                anchored.add(free.root(here))
    groups: dict[str, set[str]] = {}
    for node in net.nodes:
        root = free.root(node)
        if root not in anchored:
            groups.setdefault(root, set()).add(node)
    return list(groups.values())


def _reduce(net: _Network, kept: list[str], ports: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """Kron reduction onto `ports`: Y·v_ports = J_ports, the other kept nodes eliminated
    (``reduction.kron``)."""
    at, internal = _eliminated(net, kept, ports)
    return kron(net.conductance, net.injection, at, internal, net.plain)


def _eliminated(net: _Network, kept: list[str], ports: list[str]) -> tuple[list[int], list[int]]:
    """The indices of `ports`, and of the other `kept` nodes Kron's reduction onto them must
    eliminate: none where eliminating them would subtract exact zeros (``_isolated``)."""
    port_set = set(ports)
    internal = [net.index[n] for n in kept if n not in port_set]
    at = [net.index[n] for n in ports]
    if internal and _isolated(net, at, internal):
        internal = []
    return at, internal


def _first_row(net: _Network, kept: list[str], ports: list[str]) -> tuple[np.ndarray, np.floating]:
    """The first port's equation after ``_reduce(net, kept, ports)``: Y's first row and J's first
    entry, the same numbers. Where nothing is eliminated they are G's and J's own, read off
    without cutting the whole block of the ports."""
    at, internal = _eliminated(net, kept, ports)
    if internal or net.plain is None:
        y, jt = kron(net.conductance, net.injection, at, internal, net.plain)
        return y[0], jt[0]
    return net.conductance[at[0]].take(at), net.injection[at[0]]


def _isolated(net: _Network, ports: list[int], internal: list[int]) -> bool:
    """Whether Kron's reduction onto `ports` would leave the port block of G·v = J as it is, to
    the bit, if `internal` were eliminated (a divider's gate seen from the channel, a load behind
    an open capacitor): each internal node touches no other port or internal node (G is exactly 0
    between them, both ways), and its own equation g·v = j solves finitely (g finite and not 0,
    1/g, j/g and j·(1/g) finite, so LAPACK's LU neither stops at a zero pivot nor makes an inf,
    whether it divides or multiplies by the reciprocal).

    Then the block kron inverts is diagonal, its solve gives exact zeros against the zero
    couplings and finite numbers elsewhere, and Y = G_pp − 0·(…), J_p − 0·(…) are G_pp and J_p:
    a zero product is ±0, and no entry of G or J is −0 (both are stamped as sums starting from
    +0, and x + (−x) is +0), so subtracting ±0 changes none. Dense networks only (``net.plain``)."""
    rows = net.plain
    if rows is None:
        return False
    together = ports + internal
    for i in internal:
        row = rows[i]
        for k in together:
            if k != i and (row[k] != 0.0 or rows[k][i] != 0.0):
                return False
        g, j = row[i], float(net.injection[i])
        if g == 0.0 or not math.isfinite(g):
            return False
        if not (math.isfinite(1.0 / g) and math.isfinite(j / g) and math.isfinite(j * (1.0 / g))):
            return False
    return True


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


@record(frozen=True, eq=False)
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


@record(frozen=True, eq=False)
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
    to_rails = [r for r in resistors if r.far_end(node) in dc.fixed]
    if len(to_rails) == 1 and not currents:
        only = to_rails[0]
        rail = only.far_end(node)
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
    row, injected = _first_row(net, kept, ports)  # the gate's equation: row·v_ports = injected
    offset = injected / row[0]
    gains = {ports[k]: -row[k] / row[0] for k in range(1, len(ports))}
    drain_gain = gains.get(d, 0.0)
    source_gain = gains.get(s, 0.0)
    returned = row.sum() > 1e-12 * row[0]  # some conductance from the gate to the rails
    resistors, currents = _incident(dc, g)
    tiny = 1e-12
    if abs(drain_gain) > tiny:
        to_drain = [r for r in resistors if r.far_end(g) == d]
        to_rails = [r for r in resistors if r.far_end(g) in dc.fixed]
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
    resistance = 1.0 / row[0]
    all_to_rails = all(r.far_end(g) in dc.fixed for r in resistors)
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
        rail = gate.detail[0].far_end(stage.transistor.gate)
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
    if _split_supplies(dc, stage):
        parts.append("split supplies")
    return pmos + ", ".join(p for p in parts if p)


def _split_supplies(dc: _DcCircuit, stage: _Stage) -> bool:
    """Whether the stage uses rails on both sides of ground (one below, one above), counting a
    rail as used where a resistor, a current source or the transistor's drain, gate or source
    reaches it. Without fixed nodes of both signs no stage can."""
    fixed = dc.fixed.values()
    if not (any(v < 0 for v in fixed) and any(v > 0 for v in fixed)):
        return False
    used = {n for r in dc.resistors for n in (r.a, r.b)} | {n for c in dc.current_sources for n in (c.leaves, c.enters)}
    used |= {stage.transistor.drain, stage.transistor.gate, stage.transistor.source}
    rails = [v for n, v in dc.fixed.items() if n in used]
    return any(v < 0 for v in rails) and any(v > 0 for v in rails)


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
