"""Lint rules: model cards (`card-…`).

Two codes come from the front end, which refuses the netlist before any rule runs: a model
that no `.model` card defines (`card-missing`) and a card of the wrong kind for the element
(`card-wrong-type`, a diode card on a MOSFET); `NetlistError.code` carries them, at the model
field, and the runner reports the error under that code. The rules here read the Circuit: a
MOSFET whose card's polarity its wiring contradicts, and a card of a level other than 1.
"""

from __future__ import annotations

from ..netlist.circuit import Circuit, Element
from ..netlist.numbers import engineering
from ..vocabulary import Finding, other_level_cards
from .rule import LintContext, Rule
from .static_fields import column, fixed_voltages, node_names

# Elements through which a drain is "pulled" to a rail: passive DC paths.
_PULLS = frozenset({"resistor", "inductor"})
# Elements that push current into a node whatever its voltage: a gate they touch can sit anywhere.
_CURRENT_DRIVERS = frozenset({"isource", "vccs", "cccs"})


def _pull(circuit: Circuit, node: str, rails: set[str]) -> Element | None | bool:
    """How `node` is tied to one of `rails`: True when it is one, the resistor or inductor that
    joins it to one, else None."""
    if node in rails:
        return True
    for element in circuit.elements:
        if element.kind in _PULLS and node in element.nodes and (set(element.nodes) - {node}) & rails:
            return element
    return None


def polarity_against_wiring(context: LintContext) -> list[Finding]:
    """A pmos card on a device wired as an NMOS (source on the lowest rail, drain pulled to the
    highest), or an nmos card wired as a PMOS. Judged only when the wiring says so unambiguously:
    the rails are the nodes voltage sources fix, the source sits on the lowest (highest) of them,
    the drain is on or pulled by a resistor or inductor to the highest (lowest), and no current
    source drives the gate (which could then sit beyond the rails)."""
    circuit = context.circuit
    fixed = fixed_voltages(circuit)
    levels = set(fixed.values())
    if len(levels) < 2:
        return []
    low, high = min(levels), max(levels)
    lowest = {node for node, voltage in fixed.items() if voltage == low}
    highest = {node for node, voltage in fixed.items() if voltage == high}
    driven = {node for e in circuit.elements if e.kind in _CURRENT_DRIVERS for node in e.nodes[:2]}
    names = node_names(circuit)
    findings = []
    for mosfet in circuit.elements_of("mosfet"):
        card = circuit.model(mosfet.model or "")
        if card is None or card.type not in ("nmos", "pmos"):
            continue
        drain, gate, source = mosfet.nodes[:3]
        if drain == source or gate in driven:
            continue
        if card.type == "pmos":
            source_rails, drain_rails, wired, where, toward = lowest, highest, "an NMOS", "lowest", "up"
        else:
            source_rails, drain_rails, wired, where, toward = highest, lowest, "a PMOS", "highest", "down"
        if source not in source_rails:
            continue
        pull = _pull(circuit, drain, drain_rails)
        if pull is None:
            continue
        rail = drain if pull is True else next(n for n in pull.nodes if n in drain_rails)
        through = "" if pull is True else f" through {pull.name}"
        drain_text = "on" if pull is True else f"pulled {toward} to"
        message = (
            f"{mosfet.name} has a {card.type} card ({card.name}) but is wired as {wired}: its source is on the "
            f"{where} rail (node {names[source]}, {engineering(fixed[source], 'V')}) and its drain {drain_text} "
            f"node {names[rail]} ({engineering(fixed[rail], 'V')}){through}"
        )
        other = "an nmos" if card.type == "pmos" else "a pmos"
        fix = f"give {mosfet.name} {other} card, or swap its drain and source fields if it is meant as {card.type}"
        findings.append(
            Finding("warning", "card-type-against-wiring", message, mosfet.origin.line, mosfet.name,
                    column(mosfet, "model"), fix)
        )
    return findings


def level_not_1(context: LintContext) -> list[Finding]:
    """A MOSFET card of a level other than 1: the square-law hand analysis does not apply as-is."""
    findings = []
    for mosfet, card in context.circuit.other_level_mosfets():
        message = (
            f"{other_level_cards([(mosfet, card)])}: the square-law hand analysis does not apply as-is; "
            "`check` leaves the hand and level-1 columns empty and ngspice solves the card as written"
        )
        fix = (
            f"for the hand and level-1 columns, give {mosfet.name} a LEVEL=1 card (VTO, KP, LAMBDA) fitted to "
            "the device"
        )
        findings.append(
            Finding("warning", "card-not-level-1", message, mosfet.origin.line, mosfet.name,
                    column(mosfet, "model"), fix)
        )
    return findings


RULES: tuple[Rule, ...] = (polarity_against_wiring, level_not_1)
# The reader's own refusals of a card (``NetlistError.code``) and their fixes: the runner reports
# them in the netlist's place, since a netlist that does not build is not linted further.
BUILD_REFUSALS: dict[str, str] = {
    "card-missing": "add the `.model` card the element names, or correct the name it gives",
    "card-wrong-type": "give the element a `.model` card of its own kind (nmos/pmos for a MOSFET)",
}
CODES: dict[str, str] = {
    "card-missing": "an element names a model no `.model` card defines (from the netlist reader)",
    "card-wrong-type": "a model card of the wrong kind for the element, a diode card on a MOSFET (from the reader)",
    "card-type-against-wiring": "a pmos card on a device wired as an NMOS by its rails, or the mirror case",
    "card-not-level-1": "a MOSFET card of a level other than 1: hand and level-1 columns stay empty in `check`",
}
