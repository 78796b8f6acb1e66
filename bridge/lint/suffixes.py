"""Lint rules: scale suffixes and implausible values (`scale-…`), judged on the value as the
user wrote it (carried in `Element.written`) and where the element sits in the circuit.

SPICE reads the first letter after a number as a scale factor (ngspice manual, section
2.1.4.2, Table 2.2): `M` is milli, mega is `MEG`, `F` is femto; any letters after the scale
are ignored. ngspice 39 has no atto scale: `1A`, `1H` and `1V` are 1 A, 1 H and 1 V there
(checked with `ngspice -b`, tests/test_lint_static_suffixes.py), so a unit letter is a trap
only where it is itself a scale: `F` on a capacitor, `M` (`1MOhm`) on a resistor.
"""

from __future__ import annotations

import re

from ..netlist.circuit import Circuit, Element
from ..netlist.numbers import engineering
from ..vocabulary import Finding
from .rule import LintContext, Rule
from .static_fields import column, field, fixed_voltages

# A plain SPICE number as written: mantissa, exponent, letters (the first may be a scale).
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?([A-Za-z\u00b5]*)")

# Plausible values, rules of thumb (common practice, no source): a bias network's resistors
# run from milliohm current shunts to the teraohm a netlist adds as a DC path of its own; a
# MOSFET's drawn channel length from 10 nm to 1 mm, its width from 10 nm to 10 cm.
RESISTOR_RANGE = (1e-3, 1e12)  # Ω
LENGTH_RANGE = (10e-9, 1e-3)  # m
WIDTH_RANGE = (10e-9, 0.1)  # m

# Elements a bias network's gate side may hold besides resistors: nothing there carries DC current.
_GATE_SIDE_KINDS = frozenset({"resistor", "capacitor"})


def _letters(element: Element, key: str) -> str | None:
    """The letters after the number of a plain-number field (`1MOhm` → `MOhm`); None when the
    field is an expression or was not written."""
    written = field(element, key)
    if written is None:
        return None
    match = _NUMBER.fullmatch(written.text)
    return match.group(1) if match else None


def _is_milli(letters: str | None) -> bool:
    """Letters whose scale is milli: `M`, `m`, `MOhm`, but not `MEG` or `MIL`."""
    return bool(letters) and letters[0] in "mM" and letters[:3].lower() not in ("meg", "mil")


def mega_written_as_milli(resistor: Element) -> tuple[str, str] | None:
    """A resistor value written with a capital `M` (`1M`, `4.7MOhm`), which SPICE reads as milli:
    the text as written and the one that says mega (`1MEG`). None for any other writing: a small
    `m` is taken to mean milli on purpose (a current shunt)."""
    return _as_mega(resistor) if _is_capital_milli(_letters(resistor, "value")) else None


def _is_capital_milli(letters: str | None) -> bool:
    """Milli letters that begin with a capital `M` (`M`, `MOhm`): mega mistaken, not milli meant."""
    return _is_milli(letters) and letters.startswith("M")


def _as_mega(resistor: Element) -> tuple[str, str]:
    """A resistor value written with a milli scale letter, as written and as mega: (`2M`, `2MEG`)."""
    written = field(resistor, "value").text
    return written, written[: len(written) - len(_letters(resistor, "value"))] + "MEG"


def _touching(circuit: Circuit) -> dict[str, list[tuple[Element, int]]]:
    """Per node, the elements on it and the index of the terminal they touch it with."""
    touching: dict[str, list[tuple[Element, int]]] = {}
    for element in circuit.elements:
        for index, node in enumerate(element.nodes):
            touching.setdefault(node, []).append((element, index))
    return touching


def load_resistors(circuit: Circuit) -> dict[str, str]:
    """Resistors that are a MOSFET's drain or source load, by name, with what they load (``drain of
    M1``): the one resistor on a drain or source node that holds besides it only MOSFET terminals
    and capacitors, its other end on a rail or ground. Its value sets that terminal's voltage and
    the stage's gain: a milliohm there leaves the terminal within ID × 1 mΩ of the rail."""
    fixed = fixed_voltages(circuit)
    touching = _touching(circuit)
    loads: dict[str, str] = {}
    for mosfet in circuit.elements_of("mosfet"):
        for index, terminal in ((0, "drain"), (2, "source")):
            node = mosfet.nodes[index]
            if node in fixed:
                continue
            on_node = touching.get(node, ())
            resistors = [element for element, _ in on_node if element.kind == "resistor"]
            if len(resistors) != 1 or any(e.kind not in {"resistor", "mosfet", "capacitor"} for e, _ in on_node):
                continue
            resistor = resistors[0]
            if all(other in fixed for other in resistor.nodes if other != node):
                loads.setdefault(resistor.name, f"{terminal} of {mosfet.name}")
    return loads


def meant_as_mega(circuit: Circuit) -> dict[str, str]:
    """The resistors whose milli scale (`1M` = 1 mΩ) is taken to be a slip for mega, by name, with
    where they sit: on a gate's side of the bias network (`M` or `m`: no DC current flows there,
    milliohms set nothing), or a drain or source load written with a capital `M` (a small `m` there
    may be a deliberate shunt)."""
    milli = []
    for resistor in circuit.elements_of("resistor"):
        if resistor.value is not None and 0 < resistor.value < 1.0:
            letters = _letters(resistor, "value")
            if _is_milli(letters):
                milli.append((resistor, letters))
    if not milli:  # the usual netlist: no network to trace
        return {}
    found: dict[str, str] = {}
    loads = None
    gate_side = gate_side_resistors(circuit)
    for resistor, letters in milli:
        if resistor.name in gate_side:
            found[resistor.name] = "gate"
        elif _is_capital_milli(letters):
            loads = load_resistors(circuit) if loads is None else loads
            if resistor.name in loads:
                found[resistor.name] = loads[resistor.name]
    return found


def gate_side_resistors(circuit: Circuit) -> set[str]:
    """Resistors on a MOSFET gate's side of the bias network (gate resistor, divider, drain-to-gate
    feedback): those reached from a gate node through resistors over nodes that hold only
    resistors, capacitors and gates. No DC current flows there but the divider's own, so a
    resistor's value only sets the bias impedance: kilohms to megohms, never milliohms."""
    fixed = fixed_voltages(circuit)
    touching = _touching(circuit)

    def gate_only(node: str) -> bool:
        if node in fixed:
            return False
        return all(
            element.kind in _GATE_SIDE_KINDS or (element.kind == "mosfet" and index == 1)
            for element, index in touching.get(node, ())
        )

    gates = {m.nodes[1] for m in circuit.elements_of("mosfet") if gate_only(m.nodes[1])}
    seen, found, pending = set(gates), set(), list(gates)
    while pending:
        node = pending.pop()
        for element, _ in touching.get(node, ()):
            if element.kind != "resistor":
                continue
            found.add(element.name)
            for other in element.nodes:
                if other not in seen and gate_only(other):
                    seen.add(other)
                    pending.append(other)
    return found


def milli_meant_meg(context: LintContext) -> list[Finding]:
    """`M` (milli) where `MEG` was meant (``meant_as_mega``): `1M` is 1 mΩ."""
    circuit = context.circuit
    findings = []
    for name, where in meant_as_mega(circuit).items():
        resistor = circuit.element(name)
        text, mega = _as_mega(resistor)
        if where == "gate":
            place = f"{name} is in a gate's bias network, where no DC current flows and milliohms set nothing"
        else:
            role = ("the drain sits at its rail and cannot swing" if where.startswith("drain")
                    else "it sets neither the bias current nor any degeneration")
            place = (f"{name}, the one resistor on the {where}, drops {engineering(resistor.value, 'V')} per "
                     f"ampere there: at a stage's currents {role}")
        message = f"`{text}` is {engineering(resistor.value, 'Ω')} in SPICE (`M` is milli): {place}; mega is `MEG`"
        fix = f"write `{mega}` for {engineering(resistor.value * 1e9, 'Ω')}"
        findings.append(
            Finding("warning", "scale-milli-meant-meg", message, resistor.origin.line, resistor.name,
                    column(resistor, "value"), fix)
        )
    return findings


def farad_read_as_femto(context: LintContext) -> list[Finding]:
    """A capacitor written with the farad unit alone (`10F`, `1Farad`): `F` is femto."""
    findings = []
    for capacitor in context.circuit.elements_of("capacitor"):
        letters = _letters(capacitor, "value")
        if letters is None or not (letters == "F" or letters.lower() in ("farad", "farads")):
            continue
        text = field(capacitor, "value").text
        mantissa = text[: len(text) - len(letters)]
        message = (
            f"`{text}` is {engineering(capacitor.value, 'F')} in SPICE: the `F` is read as the femto scale, "
            f"not as farads (ngspice 39 reads {capacitor.value:g})"
        )
        fix = (
            f"write the scale before the unit: `{mantissa}uF` for {mantissa} µF, `{mantissa}fF` if femtofarads "
            "are meant"
        )
        findings.append(
            Finding("warning", "scale-farad-read-as-femto", message, capacitor.origin.line, capacitor.name,
                    column(capacitor, "value"), fix)
        )
    return findings


def mosfet_size(context: LintContext) -> list[Finding]:
    """A MOSFET W or L outside plausible sizes; written with no scale (`w=10`), it is metres."""
    findings = []
    if context.circuit.options().get("scale") is not None:
        return findings  # `.options scale` multiplies every W and L: the written numbers are not metres
    for mosfet in context.circuit.elements_of("mosfet"):
        for key, name, (low, high), what in (
            ("w", "W", WIDTH_RANGE, "width"),
            ("l", "L", LENGTH_RANGE, "channel length"),
        ):
            value = mosfet.params.get(key)
            if not isinstance(value, (int, float)) or low <= value <= high:
                continue
            written = field(mosfet, key)
            letters = _letters(mosfet, key)
            bare = letters == "" and written is not None and "e" not in written.text.lower()
            plausible = f"{engineering(low, 'm')} to {engineering(high, 'm')} (common practice, no source)"
            if bare:
                message = (
                    f"`{key}={written.text}` has no scale suffix: SPICE lengths are in metres, so {name} of "
                    f"{mosfet.name} is {engineering(value, 'm')}; a plausible {what} is {plausible}"
                )
                fix = f"write `{key}={written.text}u` for {written.text} µm"
            else:
                message = (
                    f"{name} of {mosfet.name} is {engineering(value, 'm')}, outside the plausible {what} of "
                    f"{plausible}"
                )
                fix = f"check the scale suffix of {name} (`u` is µm, `n` is nm)"
            findings.append(
                Finding("warning", "scale-mosfet-size", message, mosfet.origin.line, mosfet.name,
                        column(mosfet, key), fix)
            )
    return findings


def resistor_range(context: LintContext) -> list[Finding]:
    """A resistor outside any plausible range for a bias network (common practice, no source);
    one reported as `scale-milli-meant-meg` is not reported again."""
    circuit = context.circuit
    low, high = RESISTOR_RANGE
    meant = None
    findings = []
    for resistor in circuit.elements_of("resistor"):
        value = resistor.value
        if value is None or low <= value <= high:
            continue
        if 0 < value < 1.0 and _is_milli(_letters(resistor, "value")):
            meant = meant_as_mega(circuit) if meant is None else meant
            if resistor.name in meant:
                continue
        written = field(resistor, "value")
        as_written = f" (`{written.text}`)" if written is not None else ""
        message = (
            f"{resistor.name} is {engineering(value, 'Ω')}{as_written}, outside the "
            f"{engineering(low, 'Ω')} to {engineering(high, 'Ω')} a bias network's resistors span "
            "(common practice, no source)"
        )
        fix = "check the value and its scale suffix (`k` kilo, `MEG` mega, `m` milli, `u` micro)"
        findings.append(
            Finding("warning", "scale-resistor-range", message, resistor.origin.line, resistor.name,
                    column(resistor, "value"), fix)
        )
    return findings


RULES: tuple[Rule, ...] = (milli_meant_meg, farad_read_as_femto, mosfet_size, resistor_range)
CODES: dict[str, str] = {
    "scale-milli-meant-meg": (
        "`M` (milli) on a gate-side bias resistor or a capital `M` on a drain or source load: `1M` is 1 mΩ, "
        "mega is `MEG`"
    ),
    "scale-farad-read-as-femto": "a capacitor written `10F`: the `F` is femto, not farads",
    "scale-mosfet-size": "a MOSFET W or L outside plausible sizes (no suffix: metres)",
    "scale-resistor-range": "a resistor outside any plausible bias-network range (1 mΩ to 1 TΩ)",
}
