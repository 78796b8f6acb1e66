"""What `sweep` takes when the command line does not say: the source, the output node, the
range, and the gate bias of a capacitor-coupled stage.

Choices only: each reads the Circuit and names something in it; the sweep itself is
bridge.sweep_run.
"""

from __future__ import annotations

from dataclasses import replace

from ..analysis.hand_edges import fixed_nodes, held_voltages
from ..curves import GateBias, SweepInputError, independent_source
from ..netlist.circuit import GROUND, Circuit, Element


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
    held = fixed_nodes(circuit)
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
    held = held_voltages(circuit)
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
