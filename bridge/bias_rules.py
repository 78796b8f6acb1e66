"""Circuit sanity at a solved bias point: supply currents and powers, and the bias mistakes
that no comparison of the three columns shows, each found at the element's line.

Reads a Circuit and its solutions (hand, level-1, ngspice; any may be missing), never text, so
that the coming `lint` command can reuse the rules. The rules:

- `milliohm-resistor`: a resistor below 1 Ω carrying more than 1 A — SPICE's `M` is milli;
- `supply-current`: a supply delivering more than 1 A to a single-transistor stage;
- `bulk-rail`: a MOSFET's bulk on a rail other than the one it belongs to (NMOS: the most
  negative, PMOS: the most positive, or its own source), a bulk junction forward biased;
- `current-source-backwards`: a current source forcing current into a MOSFET against its
  polarity (into an NMOS source, out of a PMOS source, …), the device then in cutoff;
- `beyond-supplies`: a node driven beyond every voltage supply.

The judgement uses the reference column: ngspice's when it ran, else the level-1 solver's,
else the hand analysis.
"""

from __future__ import annotations

from collections.abc import Mapping

from .analysis.dcsolve import OperatingPoint
from .analysis.hand import HandSolution
from .compare import Columns
from .netlist.circuit import GROUND, Circuit, Element
from .netlist.numbers import engineering
from .records import record
from .sim.operating_point import SimOperatingPoint
from .vocabulary import COLUMN_SOLUTIONS, COLUMNS, Finding

# Thresholds that are rules of thumb (common practice, no source): a single-MOSFET bias stage
# draws milliamps from its supplies, so an ampere is a mistake, not a design; a resistor under
# 1 Ω in such a stage is a shunt at most and never carries amperes.
LARGE_CURRENT = 1.0  # A
SMALL_RESISTANCE = 1.0  # Ω
# A node this far beyond every voltage supply (common practice, no source): millivolts can be
# solver tolerance, half a volt is a circuit that forces it there.
BEYOND_MARGIN = 0.5  # V


@record(frozen=True, eq=False)
class Supply:
    """One independent voltage source with a DC value: its current as delivered (out of its +
    terminal into the circuit) and the power it delivers, V·I, per column."""

    name: str
    line: int
    current: Columns
    power: Columns


@record(frozen=True, eq=False)
class _Solved:
    """One column's solution as the rules read it."""

    column: str
    voltages: Mapping[str, float]
    supply_currents: Mapping[str, float | None]  # delivered, by element name
    regions: Mapping[str, str]


def supplies(
    circuit: Circuit, hand: HandSolution | None, level1: OperatingPoint | None, sim: SimOperatingPoint | None,
) -> dict[str, Supply]:
    """Each supply's delivered current and power in the hand, level-1 and ngspice columns.

    ngspice and the level-1 solver give the branch current (SPICE sign: into n+, through the
    source, out of n−), so the delivered current is its negative; the hand analysis has none,
    and its current is the sum by Kirchhoff's current law of what leaves the source's node
    through resistors, current sources and MOSFET channels (None where another kind of element
    touches that node)."""
    found: dict[str, Supply] = {}
    for element in _supply_elements(circuit):
        currents = {
            "hand": _hand_supply_current(circuit, element, hand) if hand is not None else None,
            "level1": _branch_delivered(level1.branch_currents if level1 else None, element),
            "sim": _branch_delivered(sim.branch_currents if sim else None, element),
        }
        voltages = {
            "hand": _across(hand.node_voltages if hand else None, element),
            "level1": _across(level1.node_voltages if level1 else None, element),
            "sim": _across(sim.node_voltages if sim else None, element),
        }
        powers = {
            column: None if currents[column] is None or voltages[column] is None
            else voltages[column] * currents[column]
            for column in COLUMNS
        }
        found[element.name] = Supply(
            element.name, element.origin.line,
            Columns(currents["hand"], currents["level1"], currents["sim"]),
            Columns(powers["hand"], powers["level1"], powers["sim"]),
        )
    return found


def _supply_elements(circuit: Circuit) -> list[Element]:
    """Independent voltage sources with a DC value (a 0 V source is an ammeter or a signal input)."""
    return [e for e in circuit.elements_of("vsource") if e.value]


def _branch_delivered(branches: Mapping[str, float] | None, element: Element) -> float | None:
    if branches is None:
        return None
    current = branches.get(element.name)  # as written: names are unique ignoring case (build)
    if current is not None:
        return -current
    wanted = element.name.lower()
    for name, current in branches.items():
        if name.lower() == wanted:
            return -current
    return None


def _across(voltages: Mapping[str, float] | None, element: Element) -> float | None:
    if voltages is None:
        return None
    plus, minus = element.nodes[0], element.nodes[1]
    if plus not in voltages or minus not in voltages:
        return None
    return voltages[plus] - voltages[minus]


def _hand_supply_current(circuit: Circuit, supply: Element, hand: HandSolution) -> float | None:
    """The current out of the supply's + terminal, by KCL at that node (or at its − node, when
    the + node is ground) over the hand solution; None when the node has an element whose
    current the hand solution does not give."""
    plus, minus = supply.nodes[0], supply.nodes[1]
    node, sign = (plus, 1.0) if plus != GROUND else (minus, -1.0)
    if node == GROUND:
        return None
    leaving = _leaving(circuit, node, supply, hand)
    return None if leaving is None else sign * leaving


def _leaving(circuit: Circuit, node: str, skip: Element, hand: HandSolution) -> float | None:
    """The current leaving `node` into every element but `skip`, at the hand solution."""
    voltages = hand.node_voltages
    total = 0.0
    for element in circuit.elements:
        if element is skip or node not in element.nodes:
            continue
        kind = element.kind
        if kind == "capacitor":
            continue
        if kind == "resistor" and element.value:
            a, b = element.nodes
            if a == b:
                continue
            if a not in voltages or b not in voltages:
                return None
            current = (voltages[a] - voltages[b]) / element.value
            total += current if a == node else -current
        elif kind == "isource":
            plus, minus = element.nodes
            if plus != minus:  # SPICE: the current flows from n+ through the source to n−
                total += (element.value or 0.0) * ((plus == node) - (minus == node))
        elif kind == "mosfet":
            device = hand.devices.get(element.name)
            model = circuit.model(element.model or "")
            if device is None or model is None:
                return None
            drain, _, source, _ = element.nodes
            into_drain = (-1.0 if model.type == "pmos" else 1.0) * device.id  # gate and bulk carry none
            total += into_drain * ((drain == node) - (source == node))
        else:
            return None
    return total


def bias_findings(
    circuit: Circuit,
    hand: HandSolution | None,
    level1: OperatingPoint | None,
    sim: SimOperatingPoint | None,
    supply_table: Mapping[str, Supply] | None = None,
) -> list[Finding]:
    """The circuit-sanity findings at the reference column's solution (see the module's rules)."""
    table = supply_table if supply_table is not None else supplies(circuit, hand, level1, sim)
    solved = _reference(circuit, hand, level1, sim, table)
    if solved is None:
        return []
    found: list[Finding] = []
    found += _beyond_supplies(circuit, solved)
    found += _backwards_current_sources(circuit, solved)
    found += _milliohm_resistors(circuit, solved)
    found += _large_supply_currents(circuit, solved)
    found += _bulk_rails(circuit, solved, level1)
    return found


def _reference(
    circuit: Circuit, hand: HandSolution | None, level1: OperatingPoint | None, sim: SimOperatingPoint | None,
    table: Mapping[str, Supply],
) -> _Solved | None:
    for column, point in (("sim", sim), ("level1", level1), ("hand", hand)):
        if point is None or not point.node_voltages:
            continue
        voltages = dict(point.node_voltages)
        voltages.setdefault(GROUND, 0.0)
        if not all(node in voltages for node in circuit.nodes()):
            continue
        regions = {name: device.region for name, device in point.devices.items()}
        currents = {name: supply.current.get(column) for name, supply in table.items()}
        return _Solved(column, voltages, currents, regions)
    return None


def _rails(circuit: Circuit, solved: _Solved) -> dict[str, float]:
    """Ground and every node an independent voltage source ties to ground, with its voltage."""
    rails = {GROUND: 0.0}
    for element in circuit.elements_of("vsource"):
        plus, minus = element.nodes[0], element.nodes[1]
        if minus == GROUND and plus != GROUND:
            rails[plus] = solved.voltages[plus]
        elif plus == GROUND and minus != GROUND:
            rails[minus] = solved.voltages[minus]
    return rails


def _rail_name(circuit: Circuit, node: str, voltage: float) -> str:
    if node == GROUND:
        return "ground (0 V)"
    for element in circuit.elements_of("vsource"):
        if node in element.nodes[:2] and GROUND in element.nodes[:2]:
            return f"{element.name}'s rail, node {node} ({engineering(voltage, 'V')})"
    return f"node {node} ({engineering(voltage, 'V')})"


_DRIVERS = frozenset({"isource", "vcvs", "vccs", "cccs", "ccvs"})  # what can hold a node beyond the supplies


def _beyond_supplies(circuit: Circuit, solved: _Solved) -> list[Finding]:
    """Nodes above the highest or below the lowest voltage-source terminal by BEYOND_MARGIN. Only a
    current source or a controlled source can put a node there (resistors, diodes and MOSFETs
    only dissipate); the finding names those present."""
    sources = circuit.elements_of("vsource")
    if not sources:
        return []
    levels = [0.0] + [solved.voltages[node] for e in sources for node in e.nodes[:2]]
    low, high = min(levels), max(levels)
    found = []
    for node in circuit.nodes():
        voltage = solved.voltages[node]
        excess = voltage - high if voltage > high else low - voltage
        if excess <= BEYOND_MARGIN:
            continue
        side = "above" if voltage > high else "below"
        message = (
            f"V({node}) is {engineering(voltage, 'V')} {_in(solved.column)}, "
            f"{engineering(excess, 'V')} {side} every voltage supply (they span {engineering(low, 'V')} to "
            f"{engineering(high, 'V')})"
        )
        if not circuit.elements_of("bjt"):
            message += (": resistors, diodes and MOSFETs only carry current from a higher node to a lower one, so "
                        "only a current or controlled source can hold a node there")
            drivers = [e.name for e in circuit.elements if e.kind in _DRIVERS]
            if drivers:
                message += f" — here {_names(drivers)}"
        line = _first_line(circuit, node)
        found.append(Finding("error", "beyond-supplies", message, line, f"V({node})"))
    return found


def _in(column: str) -> str:
    return f"in {'' if column == 'sim' else 'the '}{COLUMN_SOLUTIONS[column]}"


def _names(names: list[str]) -> str:
    return names[0] if len(names) == 1 else f"{', '.join(names[:-1])} and {names[-1]}"


def _first_line(circuit: Circuit, node: str) -> int | None:
    """The line of the first current or controlled source on `node`, else of the first element on it."""
    on_node = [e for e in circuit.elements if node in e.nodes]
    for element in on_node:
        if element.kind in _DRIVERS:
            return element.origin.line
    return on_node[0].origin.line if on_node else None


# Which way a channel current must go at each terminal, for the device to carry it: +1 into the
# node, −1 out of it. An NMOS takes current in at its drain and gives it out at its source (so
# its drain node must feed it and its source node must drain it away); a PMOS the other way.
_CHANNEL_NEEDS = {("nmos", "drain"): +1, ("nmos", "source"): -1, ("pmos", "drain"): -1, ("pmos", "source"): +1}


def _backwards_current_sources(circuit: Circuit, solved: _Solved) -> list[Finding]:
    """A current source on a MOSFET's drain or source node forcing its current the way the
    device cannot conduct it, the device then in cutoff in the reference column."""
    found = []
    for source in circuit.elements_of("isource"):
        plus, minus = source.nodes[0], source.nodes[1]
        value = source.value or 0.0
        if not value or plus == minus:
            continue
        for mosfet in circuit.elements_of("mosfet"):
            model = circuit.model(mosfet.model or "")
            if model is None or solved.regions.get(mosfet.name) != "cutoff":
                continue
            drain, _, channel_source, _ = mosfet.nodes
            for role, node in (("drain", drain), ("source", channel_source)):
                if node == GROUND or node not in (plus, minus):
                    continue
                into_node = value if node == minus else -value  # SPICE: from n+ through it to n−
                if into_node * _CHANNEL_NEEDS[(model.type, role)] >= 0:
                    continue
                pushes = "into" if into_node > 0 else "out of"
                lets = "leaves by" if _CHANNEL_NEEDS[(model.type, role)] < 0 else "enters by"
                message = (
                    f"{source.name} forces {engineering(abs(value), 'A')} {pushes} {mosfet.name}'s {role} node {node} "
                    f"(SPICE: a source's current flows from its first node through it to its second, here from "
                    f"{plus} to {minus}); a{'n' if model.type == 'nmos' else ''} {model.type.upper()}'s channel "
                    f"current {lets} its {role}, so {mosfet.name} cannot carry it and is in cutoff "
                    f"{_in(solved.column)}, with V({node}) = {engineering(solved.voltages[node], 'V')}. "
                    f"The source is wired backwards: `{source.name} {minus} {plus} …` turns it around"
                )
                found.append(Finding("error", "current-source-backwards", message, source.origin.line, source.name))
    return found


def _milliohm_resistors(circuit: Circuit, solved: _Solved) -> list[Finding]:
    found = []
    for resistor in circuit.elements_of("resistor"):
        value = resistor.value
        a, b = resistor.nodes
        if not value or not 0 < value < SMALL_RESISTANCE:
            continue
        current = abs(solved.voltages[a] - solved.voltages[b]) / value
        if current <= LARGE_CURRENT:
            continue
        message = f"{resistor.name} is {engineering(value, 'Ω')} and carries {engineering(current, 'A')} " \
                  f"{_in(solved.column)}"
        if value >= 1e-3:
            written = f"{value * 1e3:.6g}"
            message += (
                f": SPICE's `M` is milli (`{written}M` is {engineering(value, 'Ω')}); mega is `MEG` — "
                f"`{written}MEG` for {engineering(value * 1e9, 'Ω')}"
            )
        found.append(Finding("warning", "milliohm-resistor", message, resistor.origin.line, resistor.name))
    return found


def _large_supply_currents(circuit: Circuit, solved: _Solved) -> list[Finding]:
    found = []
    for element in _supply_elements(circuit):
        current = solved.supply_currents.get(element.name)
        if current is None or abs(current) <= LARGE_CURRENT:
            continue
        voltage = solved.voltages[element.nodes[0]] - solved.voltages[element.nodes[1]]
        message = (
            f"{element.name} delivers {engineering(current, 'A')} ({engineering(voltage * current, 'W')}) "
            f"{_in(solved.column)}: far more than a single-transistor bias stage draws"
        )
        found.append(Finding("warning", "supply-current", message, element.origin.line, element.name))
    return found


def _bulk_rails(circuit: Circuit, solved: _Solved, level1: OperatingPoint | None) -> list[Finding]:
    """A bulk on a rail that is neither the one its type belongs to nor its own source, with a
    bulk junction forward biased at the reference solution."""
    rails = _rails(circuit, solved)
    found = []
    for mosfet in circuit.elements_of("mosfet"):
        model = circuit.model(mosfet.model or "")
        if model is None:
            continue
        drain, _, source, bulk = mosfet.nodes
        if bulk == source or bulk not in rails:
            continue
        nmos = model.type == "nmos"
        wanted_voltage = min(rails.values()) if nmos else max(rails.values())
        if rails[bulk] == wanted_voltage:
            continue
        polarity = 1.0 if nmos else -1.0
        forward = {
            terminal: polarity * (solved.voltages[bulk] - solved.voltages[node])
            for terminal, node in (("source", source), ("drain", drain))
        }
        terminal = max(forward, key=forward.get)
        if forward[terminal] <= 0:
            continue
        wanted = [node for node, voltage in rails.items() if voltage == wanted_voltage]
        where = "most negative" if nmos else "most positive"
        rail = _rail_name(circuit, source if source in wanted else wanted[0], wanted_voltage)
        belongs = (
            f"at its source, {rail}, the {where} node" if source in wanted
            else f"at the {where} node, {rail}, or at its source node {source}"
        )
        message = (
            f"{mosfet.name}'s bulk is tied to {_rail_name(circuit, bulk, rails[bulk])}; a{'n' if nmos else ''} "
            f"{model.type.upper()} bulk belongs {belongs}. Its bulk–{terminal} junction is forward biased by "
            f"{engineering(forward[terminal], 'V')} "
            f"{_in(solved.column)}, and a forward-biased junction conducts"
        )
        junctions = level1.junctions.get(mosfet.name) if level1 is not None else None
        if junctions is not None:
            current = junctions.bulk_source if terminal == "source" else junctions.bulk_drain
            if current > 0:
                message += f": {engineering(current, 'A')} through it in the level-1 solver"
        found.append(Finding("warning", "bulk-rail", message, mosfet.origin.line, mosfet.name))
    return found


def inconsistent_device_vectors(circuit: Circuit, sim: SimOperatingPoint | None) -> dict[str, dict[str, tuple]]:
    """MOSFETs whose ngspice device vectors (@m[vgs], @m[vds], @m[vbs]) disagree with ngspice's own
    node voltages by more than 1 mV + 0.1 %: quantity → (ngspice's vector, the node difference), in
    device polarity. ngspice -b shows it too (a backwards current source: @m1[vgs] = −17 V with
    V(g) − V(s) = −148 V); the level-1 solver is then measured against the node voltages."""
    found: dict[str, dict[str, tuple]] = {}
    if sim is None:
        return found
    voltages = sim.node_voltages
    for mosfet in circuit.elements_of("mosfet"):
        device = sim.devices.get(mosfet.name)
        model = circuit.model(mosfet.model or "")
        if device is None or model is None or not all(node in voltages for node in mosfet.nodes):
            continue
        polarity = -1.0 if model.type == "pmos" else 1.0
        drain, gate, source, bulk = (voltages[node] for node in mosfet.nodes)
        terminal = {"vgs": polarity * (gate - source), "vds": polarity * (drain - source),
                    "vbs": polarity * (bulk - source)}
        wrong = {
            quantity: (getattr(device, quantity), value) for quantity, value in terminal.items()
            if getattr(device, quantity) is not None  # a vector the card's model lacks
            and abs(getattr(device, quantity) - value) > 1e-3 + 1e-3 * abs(value)
        }
        if wrong:
            found[mosfet.name] = wrong
    return found


def device_vector_findings(
    circuit: Circuit, sim: SimOperatingPoint | None, inconsistent: Mapping[str, Mapping[str, tuple]] | None = None,
) -> list[Finding]:
    """One finding per MOSFET whose ngspice device vectors disagree with ngspice's node voltages
    (`inconsistent`: ``inconsistent_device_vectors(circuit, sim)``, when the caller has it)."""
    found = []
    if inconsistent is None:
        inconsistent = inconsistent_device_vectors(circuit, sim)
    for name, wrong in inconsistent.items():
        element = circuit.element(name)
        parts = "; ".join(
            f"@{name.lower()}[{quantity}] = {engineering(vector, 'V')} but its node voltages give "
            f"{engineering(nodes, 'V')}" for quantity, (vector, nodes) in wrong.items()
        )
        found.append(Finding(
            "warning", "sim-device-vectors",
            f"{name}: ngspice's device vectors disagree with its own node voltages ({parts}); its vgs, vds, vth, "
            "vov and region for this device are computed at those vectors, not at its solution, and a "
            "level-1/ngspice difference in them is not a defect of the level-1 solver",
            element.origin.line if element else None, name,
        ))
    return found


# --- public views of the judgements above, for the lint rules (bridge/lint/bias.py) ------------


def solution_phrase(column: str) -> str:
    """`in ngspice's solution`, `in the level-1 solution`: where a judged value comes from."""
    return _in(column)


def rail_voltages(circuit: Circuit, voltages: Mapping[str, float]) -> dict[str, float]:
    """Ground and every node an independent voltage source ties to ground, with its voltage in
    `voltages` (a solution's node voltages, ground included)."""
    return _rails(circuit, _Solved("", voltages, {}, {}))


def rail_name(circuit: Circuit, node: str, voltage: float) -> str:
    """A rail as the findings name it: `ground (0 V)`, `VDD's rail, node vdd (5 V)`."""
    return _rail_name(circuit, node, voltage)


def wrong_rail_bulks(
    circuit: Circuit, voltages: Mapping[str, float], column: str, level1: OperatingPoint | None,
) -> dict[str, Finding]:
    """The `bulk-rail` judgement at a solution (`column`'s node voltages): per MOSFET whose bulk sits
    on a rail it does not belong to with a bulk junction forward biased, check's finding."""
    solved = _Solved(column, voltages, {}, {})
    return {finding.subject or "": finding for finding in _bulk_rails(circuit, solved, level1)}
