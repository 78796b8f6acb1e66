"""The circuit model: what every analysis reads. Plain frozen dataclasses, SI units.

Node names are folded to lower case (SPICE is case-insensitive) and `gnd` is
node `0`. Element and model names are kept as written; look them up with
`Circuit.element()` / `Circuit.model()`, which ignore case.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import field
from functools import cached_property
from types import MappingProxyType

from bridge.records import record

GROUND = "0"
CIRCUIT_TEMPERATURE_C = 27.0  # ngspice's default circuit temperature (TEMP) and TNOM, °C

# Element kinds, keyed by their SPICE letter.
KIND_BY_LETTER: dict[str, str] = {
    "r": "resistor",
    "c": "capacitor",
    "l": "inductor",
    "v": "vsource",
    "i": "isource",
    "e": "vcvs",
    "g": "vccs",
    "f": "cccs",
    "h": "ccvs",
    "d": "diode",
    "m": "mosfet",
    "q": "bjt",
}
LETTER_BY_KIND: dict[str, str] = {kind: letter for letter, kind in KIND_BY_LETTER.items()}

# Unit of an element's `value`, for display.
VALUE_UNIT: dict[str, str] = {
    "resistor": "Ω",
    "capacitor": "F",
    "inductor": "H",
    "vsource": "V",
    "isource": "A",
    "vcvs": "V/V",
    "vccs": "S",
    "cccs": "A/A",
    "ccvs": "Ω",
}


@record(frozen=True)
class Origin:
    """Where a card came from: file and 1-based line of its first physical line."""

    file: str
    line: int


@record(frozen=True)
class Waveform:
    """A transient source function (SIN, PULSE, PWL, EXP, SFFM) kept as written, in SI."""

    kind: str
    args: tuple[float, ...]

    def initial_value(self) -> float:
        """The t = 0 value ngspice uses for the operating point when no DC is given."""
        if not self.args:
            return 0.0
        if self.kind == "pwl":
            # PWL(t1 v1 t2 v2 ...): value at t = 0, holding v1 before t1.
            pairs = list(zip(self.args[0::2], self.args[1::2]))
            if not pairs or pairs[0][0] >= 0:
                return pairs[0][1] if pairs else 0.0
            for (t0, v0), (t1, v1) in zip(pairs, pairs[1:]):
                if t0 <= 0 <= t1:
                    return v0 if t1 == t0 else v0 + (v1 - v0) * (0 - t0) / (t1 - t0)
            return pairs[-1][1]
        # SIN(vo va ...), PULSE(v1 v2 ...), EXP(v1 v2 ...), SFFM(vo va ...): first argument.
        return self.args[0]


@record(frozen=True)
class Written:
    """One field of a card as the user wrote it (`1M`, `w=10`'s `10`, a node name before case
    folding): its text and where it starts, 1-based line and column in the card's file."""

    text: str
    line: int
    column: int


@record(frozen=True)
class Element:
    """One circuit element. `value` is in SI: Ω, F, H, V or A (a source's DC value),
    a controlled source's gain; None for devices that take a model instead.

    `written` keeps fields as written, for rules that judge the writing (a scale suffix, a
    node name's case) and point at it: `node1`, `node2`, ... (the nodes in order), `value`,
    `model`, and instance parameters by lower-case name (`w`, `l`). Not part of equality."""

    name: str
    kind: str
    nodes: tuple[str, ...]
    value: float | None
    origin: Origin
    model: str | None = None
    params: dict[str, float | str] = field(default_factory=dict)
    controlling_source: str | None = None
    waveform: Waveform | None = None
    flags: tuple[str, ...] = ()
    written: Mapping[str, Written] = field(default_factory=dict, compare=False, repr=False)

    @property
    def letter(self) -> str:
        return LETTER_BY_KIND[self.kind]


@record(frozen=True)
class ModelCard:
    """A `.model` card: parameters by lower-case name; on level-1 cards aliases resolved (vt0→vto,
    u0→uo), on other levels names as written and text values (`version`: "3.3.0") kept as str."""

    name: str
    type: str
    level: int
    params: dict[str, float | str]
    origin: Origin


@record(frozen=True)
class Parameter:
    """A `.param` after evaluation."""

    name: str
    value: float
    origin: Origin


@record(frozen=True)
class DcSweep:
    """One sweep of a `.dc` analysis: the source swept, from `start` to `stop` by `step`."""

    source: str
    start: float
    stop: float
    step: float


@record(frozen=True)
class AcSweep:
    """The frequencies of an `.ac` analysis: `variation` "dec", "oct" or "lin", `points` per
    decade, per octave or in all, from `start` to `stop` in Hz (ngspice's `.ac` card)."""

    variation: str
    points: int
    start: float
    stop: float


AC_VARIATIONS = ("dec", "oct", "lin")


@record(frozen=True)
class Analysis:
    """`.op` (no sweeps), `.dc` (one or two sweeps) or `.ac` (its frequencies in `ac`).

    The reader makes `.op` and `.dc` only (a netlist's own `.ac` card stays a `Directive`,
    not emitted); an `.ac` Analysis is made by the small-signal runs (bridge.sim.ac)."""

    kind: str
    origin: Origin
    sweeps: tuple[DcSweep, ...] = ()
    ac: AcSweep | None = None


@record(frozen=True)
class Directive:
    """A control card that does not change the circuit: kept for display.

    `.options`, `.temp`, `.ic` and `.nodeset` have their settings in `settings`
    (they are emitted for the simulator); the others (`.save`, `.print`, `.meas`,
    `.tran`, ...) keep their text and are not emitted.
    """

    kind: str
    text: str
    origin: Origin
    settings: tuple[tuple[str, float | str | None], ...] = ()


@record(frozen=True)
class Notice:
    """A warning about the input: something dropped, ignored or read in a way worth knowing."""

    code: str
    message: str
    file: str | None = None
    line: int | None = None

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}: " if self.file and self.line else ""
        return f"{where}{self.message} [{self.code}]"


@record(frozen=True)
class Allowance:
    """A `lint: allow CODE` marker in a card's inline comment: the designer accepts the lint
    finding CODE on that card. `line` is the card's first line (where its findings are);
    `marker_line` and `column` place the code as written (a continuation line's, say)."""

    code: str
    file: str
    line: int
    marker_line: int
    column: int


@record(frozen=True)
class Circuit:
    """A whole netlist as understood: the only thing the analyses see.

    Nothing changes a Circuit once read (a variant is a new one, `dataclasses.replace`), so its
    lookups (nodes, elements by name and kind, options, temperatures) are worked out once, at
    their first use, and kept on it; a pickle or a copy carries the fields alone."""

    title: str
    source_file: str
    elements: tuple[Element, ...]
    models: dict[str, ModelCard]
    parameters: tuple[Parameter, ...] = ()
    analyses: tuple[Analysis, ...] = ()
    directives: tuple[Directive, ...] = ()
    notices: tuple[Notice, ...] = ()
    allowances: tuple[Allowance, ...] = ()  # `lint: allow` markers, in file order

    def __getstate__(self) -> dict[str, object]:
        # The fields alone: the lookups kept below are worked out again where needed.
        return {name: value for name, value in self.__dict__.items() if not name.startswith("_")}

    @cached_property
    def _elements_by_name(self) -> dict[str, Element]:
        by_name: dict[str, Element] = {}
        for element in self.elements:
            by_name.setdefault(element.name.lower(), element)  # the first of a name, as written
        return by_name

    @cached_property
    def _elements_by_kind(self) -> dict[str, tuple[Element, ...]]:
        by_kind: dict[str, list[Element]] = {}
        for element in self.elements:
            by_kind.setdefault(element.kind, []).append(element)
        return {kind: tuple(elements) for kind, elements in by_kind.items()}

    @cached_property
    def _nodes(self) -> tuple[str, ...]:
        seen: dict[str, None] = {}
        for element in self.elements:
            for node in element.nodes:
                if node != GROUND:
                    seen.setdefault(node, None)
        return tuple(seen)

    @cached_property
    def _options(self) -> Mapping[str, float | str | None]:
        settings: dict[str, float | str | None] = {}
        for directive in self.directives:
            if directive.kind == "options":
                settings.update(directive.settings)
        return MappingProxyType(settings)

    @cached_property
    def _temperature(self) -> float:
        cards = [d for d in self.directives if d.kind == "temp" and d.settings]
        if cards:
            values = [v for _, v in cards[-1].settings]
            if len(values) == 1 and isinstance(values[0], (int, float)):
                return float(values[0])
            return CIRCUIT_TEMPERATURE_C
        value = self.options().get("temp")
        return float(value) if isinstance(value, (int, float)) else CIRCUIT_TEMPERATURE_C

    def element(self, name: str) -> Element | None:
        return self._elements_by_name.get(name.lower())

    def model(self, name: str) -> ModelCard | None:
        return self.models.get(name.lower())

    def nodes(self) -> tuple[str, ...]:
        """Every node but ground, in order of first appearance."""
        return self._nodes

    def options(self) -> Mapping[str, float | str | None]:
        """Every `.options` setting, later cards overriding earlier ones (a flag maps to None);
        read-only."""
        return self._options

    def elements_of(self, kind: str) -> tuple[Element, ...]:
        return self._elements_by_kind.get(kind, ())

    def other_level_mosfets(self) -> tuple[tuple[Element, ModelCard], ...]:
        """The MOSFETs whose model card is not level 1 (BSIM3, BSIM4, level 2 or 3, ...), with the card."""
        found = []
        for element in self.elements_of("mosfet"):
            card = self.model(element.model or "")
            if card is not None and card.level != 1:
                found.append((element, card))
        return tuple(found)

    def temperature(self) -> float:
        """The circuit temperature in °C as ngspice 39 sets it (checked with `ngspice -b`): the last
        `.temp` card, which beats `.options temp` wherever it stands; a last `.temp` with several
        values sets nothing (ngspice warns "Could not set temperature") and leaves 27 °C; without
        `.temp`, the last `.options temp`; else 27 °C."""
        return self._temperature

    def nominal_temperature(self) -> float:
        """ngspice's nominal temperature TNOM in °C: the last `.options tnom`, else 27 °C. A model
        card's own TNOM wins over it."""
        value = self.options().get("tnom")
        return float(value) if isinstance(value, (int, float)) else CIRCUIT_TEMPERATURE_C

    def device_temperature(self, element: Element) -> float:
        """An instance's temperature in °C, as ngspice's devices take it: its own TEMP when
        given, else the circuit temperature plus its DTEMP (0 by default)."""
        own = element.params.get("temp")
        if isinstance(own, (int, float)):
            return float(own)
        offset = element.params.get("dtemp", 0.0)
        return self.temperature() + (float(offset) if isinstance(offset, (int, float)) else 0.0)
