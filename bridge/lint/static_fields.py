"""What the static rule families (scale, card, path) share: where a finding points inside a
card (a field as written), node names as the user wrote them, and the nodes whose DC voltage
the voltage sources fix (the rails), all read from the Circuit model, never from text."""

from __future__ import annotations

from collections.abc import Iterable

from ..netlist.circuit import GROUND, Circuit, Element, Written


def field(element: Element, key: str) -> Written | None:
    """The field `key` (`value`, `model`, `w`, `node2`, ...) of the element as written."""
    return element.written.get(key)


def column(element: Element, key: str) -> int | None:
    """The 1-based column of a field in the card's first line; None when the field is not
    known or sits on a `+` continuation line (a finding's line is the card's first line)."""
    written = element.written.get(key)
    if written is None or written.line != element.origin.line:
        return None
    return written.column


def node_column(element: Element, node: str) -> int | None:
    """The column of the first of the element's node fields that is `node`."""
    for index, name in enumerate(element.nodes, start=1):
        if name == node:
            return column(element, f"node{index}")
    return None


def node_names(circuit: Circuit) -> dict[str, str]:
    """Each node as the user first wrote it (`VDD`, `Gate`), by its folded name; a node inside
    a flattened subcircuit (`x1.n`) keeps its full folded name, ground is `0`."""
    names: dict[str, str] = {GROUND: GROUND}
    for element in circuit.elements:
        for index, node in enumerate(element.nodes, start=1):
            if node in names:
                continue
            written = element.written.get(f"node{index}")
            names[node] = written.text if written is not None and written.text.lower() == node else node
    return names


def fixed_voltages(circuit: Circuit) -> dict[str, float]:
    """The nodes whose DC voltage independent voltage sources fix, chained from ground, with
    that voltage (ground included). A source in a loop or between two fixed nodes adds nothing."""
    fixed = {GROUND: 0.0}
    sources = [e for e in circuit.elements_of("vsource") if e.value is not None]
    grew = True
    while grew:
        grew = False
        for source in sources:
            plus, minus = source.nodes[0], source.nodes[1]
            if minus in fixed and plus not in fixed:
                fixed[plus] = fixed[minus] + source.value
                grew = True
            elif plus in fixed and minus not in fixed:
                fixed[minus] = fixed[plus] - source.value
                grew = True
    return fixed


def listing(names: Iterable[str]) -> str:
    """`a`, `a and b`, `a, b and c`."""
    items = list(names)
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]
