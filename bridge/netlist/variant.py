"""Variants of a Circuit: the same netlist with values changed, elements taken out or added,
or another temperature. What a corner, a small-signal test fixture or a sweep point hands to
the solver or the emitter; nothing here reads text.

Every function returns a new Circuit (Circuits are frozen) and leaves its argument alone.
Names match ignoring case, as SPICE's do; a name the circuit does not have is a ValueError
that names it, so a caller's typo never silently changes nothing.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import replace

from .circuit import Circuit, Directive, Element, Origin

VALUED_KINDS = frozenset({"resistor", "capacitor", "inductor", "vsource", "isource", "vcvs", "vccs", "cccs", "ccvs"})


def _by_name(circuit: Circuit, names: Iterable[str], what: str) -> dict[str, Element]:
    found: dict[str, Element] = {}
    for name in names:
        element = circuit.element(name)
        if element is None:
            raise ValueError(f"{what}: the circuit has no element `{name}`")
        found[element.name.lower()] = element
    return found


def with_values(circuit: Circuit, values: Mapping[str, float]) -> Circuit:
    """The circuit with some elements' values replaced (SI: Ω, F, H, a source's DC value, a
    controlled source's gain). Only elements that carry a value can take one."""
    chosen = _by_name(circuit, values, "with_values")
    new = {name.lower(): float(value) for name, value in values.items()}
    for element in chosen.values():
        if element.kind not in VALUED_KINDS:
            raise ValueError(f"with_values: `{element.name}` is a {element.kind} and has no value of its own")
    elements = tuple(
        replace(e, value=new[e.name.lower()]) if e.name.lower() in new else e for e in circuit.elements
    )
    return replace(circuit, elements=elements)


def with_model_parameters(circuit: Circuit, parameters: Mapping[str, Mapping[str, float]]) -> Circuit:
    """The circuit with parameters of some `.model` cards set (model name → parameter name →
    value; parameter names as the card keeps them, lower case, aliases already resolved on
    level-1 cards)."""
    models = dict(circuit.models)
    for name, changes in parameters.items():
        card = circuit.model(name)
        if card is None:
            raise ValueError(f"with_model_parameters: the circuit has no model `{name}`")
        models[card.name.lower()] = replace(
            card, params={**card.params, **{key.lower(): float(value) for key, value in changes.items()}}
        )
    return replace(circuit, models=models)


def without_elements(circuit: Circuit, names: Iterable[str]) -> Circuit:
    """The circuit with some elements taken out (their nodes stay if other elements use them)."""
    gone = set(_by_name(circuit, names, "without_elements"))
    return replace(circuit, elements=tuple(e for e in circuit.elements if e.name.lower() not in gone))


def with_elements(circuit: Circuit, added: Iterable[Element]) -> Circuit:
    """The circuit with elements appended; an added name must be new to it."""
    extra = tuple(added)
    for element in extra:
        if circuit.element(element.name) is not None:
            raise ValueError(f"with_elements: the circuit already has an element `{element.name}`")
    return replace(circuit, elements=circuit.elements + extra)


def at_temperature(circuit: Circuit, celsius: float, origin: Origin | None = None) -> Circuit:
    """The circuit at another circuit temperature: its `.temp` cards replaced by one `.temp
    celsius` (which ngspice takes over `.options temp`, as `Circuit.temperature` reads it).
    Instances with their own TEMP keep it; a DTEMP still adds to the new temperature."""
    where = origin or Origin(circuit.source_file, 0)
    kept = tuple(d for d in circuit.directives if d.kind != "temp")
    card = Directive("temp", f".temp {float(celsius)!r}", where, (("temp", float(celsius)),))
    return replace(circuit, directives=kept + (card,))
