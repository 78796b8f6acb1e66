"""Lint rules: DC paths (`path-…`): circuits whose operating point cannot exist, said in the
user's node names (what ngspice would meet as a singular matrix).

At DC a capacitor is open and an inductor a short. A node reached only through capacitors,
current sources, MOSFET gates and controlled sources' inputs has no defined voltage; a loop of
voltage sources and inductors has no defined current. ngspice 39 fails on both ("singular
matrix", then gmin and source stepping fail: tests/test_lint_static_paths.py runs it; on the
first three ngspice then falls back to a transient operating point, whose numbers depend on how
the capacitors charged, not on the DC circuit). The connectivity
is `analysis.connectivity.NodeSets`, joined as the level-1 solver's structure check joins it:
resistors, diodes, voltage sources, inductors, E/H outputs; a MOSFET's drain and source to its
bulk (the junctions carry GMIN); a BJT's terminals to each other.
"""

from __future__ import annotations

from collections import deque

from ..analysis.connectivity import NodeSets
from ..netlist.circuit import GROUND, Circuit, Element
from ..netlist.numbers import engineering
from ..vocabulary import Finding
from .rule import LintContext, Rule
from .static_fields import column, listing, node_column, node_names

# Two-terminal branches that fix a voltage at DC (a loop of them has no defined current).
_FIXED_KINDS = frozenset({"vsource", "inductor", "vcvs", "ccvs"})
# Elements that conduct between their first two nodes at DC.
_CONDUCTING_KINDS = frozenset({"resistor", "diode", "vsource", "inductor", "vcvs", "ccvs"})
_TERMINALS = {"mosfet": ("drain", "gate", "source", "bulk"), "bjt": ("collector", "base", "emitter", "substrate")}


def _dc_sets(circuit: Circuit) -> tuple[NodeSets, set[str]]:
    """The nodes joined by DC paths, and the outputs of G and F sources (which may pin a node
    through a feedback this static view does not follow: their sets are left unjudged)."""
    sets = NodeSets((GROUND, *circuit.nodes()))
    loose_ends: set[str] = set()
    for element in circuit.elements:
        kind, ends = element.kind, element.nodes
        if kind in _CONDUCTING_KINDS:
            sets.join(ends[0], ends[1])
        elif kind == "mosfet":
            sets.join(ends[0], ends[3])
            sets.join(ends[2], ends[3])
        elif kind == "bjt":
            for end in ends[1:]:
                sets.join(ends[0], end)
        elif kind in ("vccs", "cccs"):
            loose_ends.update(ends[:2])
            if kind == "vccs" and {ends[0], ends[1]} == {ends[2], ends[3]}:
                sets.join(ends[0], ends[1])  # controlled by its own nodes: a conductance
    return sets, loose_ends


def _terminal(element: Element, index: int) -> str:
    """`CIN (a capacitor, open at DC)`, `the gate of M1`, `I1`, `E1's control input`."""
    kind = element.kind
    if kind == "capacitor":
        return f"{element.name} (a capacitor, open at DC)"
    if kind in _TERMINALS:
        return f"the {_TERMINALS[kind][index]} of {element.name}"
    if kind in ("vcvs", "vccs") and index >= 2:
        return f"{element.name}'s control input"
    if kind in ("isource", "vccs", "cccs"):
        return f"{element.name} (a current source)"
    return element.name


def _reach(things: list[str]) -> str:
    return "reaches" if len(things) == 1 else "reach"


def floating_nodes(context: LintContext) -> list[Finding]:
    """Nodes with no DC path to ground, one finding per cut-off group: a current source feeding
    it (`path-current-nowhere`), a gate reached only through capacitors
    (`path-gate-through-capacitor`), else `path-no-dc-ground`."""
    circuit = context.circuit
    sets, loose_ends = _dc_sets(circuit)
    ground = sets.root(GROUND)
    groups: dict[object, list[str]] = {}
    for node in circuit.nodes():
        root = sets.root(node)
        if root != ground:
            groups.setdefault(root, []).append(node)
    if not groups:
        return []
    names = node_names(circuit)
    touching_node: dict[str, list[tuple[int, int, Element]]] = {}
    for position, element in enumerate(circuit.elements):
        for index, node in enumerate(element.nodes):
            touching_node.setdefault(node, []).append((position, index, element))
    findings: list[Finding] = []
    for members in groups.values():
        if loose_ends & set(members):
            continue
        # In card order, as the user reads the netlist.
        touching = [(element, index) for _, index, element in sorted(
            (entry for node in members for entry in touching_node[node]), key=lambda entry: entry[:2]
        )]
        findings += _floating_group(circuit, members, touching, names)
    return sorted(findings, key=lambda f: (f.line or 0, f.column or 0))


def _floating_group(
    circuit: Circuit, members: list[str], touching: list[tuple[Element, int]], names: dict[str, str]
) -> list[Finding]:
    shown = listing(names[node] for node in members)
    nodes_word = "node" if len(members) == 1 else "nodes"
    sources = [(e, i) for e, i in touching if e.kind == "isource"]
    if sources:
        findings = []
        for source, index in sources:
            node = source.nodes[index]
            others = list(dict.fromkeys(_terminal(e, i) for e, i in touching if e is not source))
            reach = (
                f"besides {source.name} only {listing(others)} {_reach(others)} it" if others
                else "nothing else reaches it"
            )
            # SPICE's `I n+ n- value` drives a positive value from n+ through itself into n−.
            into = "into" if (index == 1) == ((source.value or 0.0) >= 0) else "out of"
            message = (
                f"{source.name} forces {engineering(abs(source.value or 0.0), 'A')} {into} node {names[node]}, "
                f"which has no DC path to ground: {reach}, so at DC the current has nowhere to go and no DC "
                "operating point exists"
            )
            fix = (
                f"give node {names[node]} a DC path: a resistor to a rail, or the transistor terminal "
                f"{source.name} is meant to bias"
            )
            findings.append(
                Finding("error", "path-current-nowhere", message, source.origin.line, source.name,
                        node_column(source, node), fix)
            )
        return findings
    gates = [(e, i) for e, i in touching if e.kind == "mosfet" and i == 1]
    rest = [(e, i) for e, i in touching if not (e.kind == "mosfet" and i == 1)]
    if gates and rest and all(e.kind == "capacitor" for e, _ in rest):
        findings = []
        capacitors = listing(dict.fromkeys(e.name for e, _ in rest))
        one = len(rest) == 1
        for mosfet, _ in gates:
            gate = mosfet.nodes[1]
            message = (
                f"the gate of {mosfet.name} (node {names[gate]}) is reached only through {capacitors}, "
                f"{'a capacitor' if one else 'capacitors'} open at DC: nothing sets the gate's DC voltage, so "
                "the DC operating point is undefined"
            )
            fix = f"bias node {names[gate]}: a resistor to a rail or a divider between the rails"
            findings.append(
                Finding("error", "path-gate-through-capacitor", message, mosfet.origin.line, mosfet.name,
                        node_column(mosfet, gate), fix)
            )
        return findings
    first, _ = min(touching, key=lambda pair: pair[0].origin.line)
    reached = list(dict.fromkeys(_terminal(e, i) for e, i in touching))
    message = (
        f"{nodes_word} {shown} {'has' if len(members) == 1 else 'have'} no DC path to ground: only "
        f"{listing(reached)} {_reach(reached)} {'it' if len(members) == 1 else 'them'}, so "
        f"{'its' if len(members) == 1 else 'their'} DC voltage is undefined, and with it the DC operating point"
    )
    fix = f"join {nodes_word} {shown} to the circuit through a resistor (to ground or a rail)"
    node = next(n for n in first.nodes if n in set(members))
    return [
        Finding("error", "path-no-dc-ground", message, first.origin.line, names[node], node_column(first, node), fix)
    ]


def voltage_loops(context: LintContext) -> list[Finding]:
    """A loop of voltage sources and inductors (V, E, H, L: each fixes the voltage across it at
    DC), reported at the element that closes it, with the loop's members and nodes."""
    circuit = context.circuit
    names = node_names(circuit)
    sets = NodeSets((GROUND, *circuit.nodes()))
    branches: dict[str, list[tuple[str, Element]]] = {}
    findings = []
    for element in circuit.elements:
        if element.kind not in _FIXED_KINDS:
            continue
        a, b = element.nodes[0], element.nodes[1]
        if sets.join(a, b):
            branches.setdefault(a, []).append((b, element))
            branches.setdefault(b, []).append((a, element))
            continue
        path = _path(branches, a, b)
        loop = [e.name for e in path] + [element.name]
        loop_nodes = listing(dict.fromkeys(names[n] for e in (*path, element) for n in e.nodes[:2]))
        has_inductor = any(e.kind == "inductor" for e in (*path, element))
        short = "; an inductor is a DC short" if has_inductor else ""
        what = "itself" if not path else listing(loop)
        message = (
            f"{element.name} closes a loop of voltage sources{' and inductors' if has_inductor else ''} "
            f"({what}, through node{'s' if len(set(element.nodes[:2])) > 1 or path else ''} {loop_nodes}{short}): "
            "the voltages around it either contradict each other or leave its current undefined, so the "
            "DC operating point is not defined"
        )
        fix = "remove one of them, or put a resistor in the loop"
        findings.append(
            Finding("error", "path-voltage-loop", message, element.origin.line, element.name,
                    column(element, "node1"), fix)
        )
    return findings


def _path(branches: dict[str, list[tuple[str, Element]]], start: str, goal: str) -> list[Element]:
    """The branches on one path from `start` to `goal` (breadth first); [] when they are one node."""
    came: dict[str, tuple[str, Element] | None] = {start: None}
    queue = deque([start])
    while queue:
        node = queue.popleft()
        if node == goal:
            break
        for other, element in branches.get(node, ()):
            if other not in came:
                came[other] = (node, element)
                queue.append(other)
    path: list[Element] = []
    node = goal
    while came.get(node) is not None:
        previous, element = came[node]
        path.append(element)
        node = previous
    return path[::-1]


RULES: tuple[Rule, ...] = (floating_nodes, voltage_loops)
CODES: dict[str, str] = {
    "path-no-dc-ground": "a node with no DC path to ground (only capacitors, gates or current sources reach it)",
    "path-gate-through-capacitor": "a MOSFET gate reached only through a capacitor: no DC bias",
    "path-current-nowhere": "a current source into a node with no DC path: its current has nowhere to go",
    "path-voltage-loop": "a loop of voltage sources and inductors: no defined current",
}
