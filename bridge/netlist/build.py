"""Meaning: raw cards → the Circuit model.

Evaluates `.param` values in order, resolves models, reads each element's fields
in SI, flattens subcircuits and checks what the simulator would reject anyway
(unknown models, duplicate names, sources that do not exist), each at its place.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Iterable, Mapping
from dataclasses import field

from ..devices.mos1.params import canonical_name as level1_parameter_name
from ..records import record
from .circuit import (
    GROUND,
    KIND_BY_LETTER,
    Analysis,
    Circuit,
    DcSweep,
    Directive,
    Element,
    ModelCard,
    Notice,
    Origin,
    Parameter,
    Waveform,
    Written,
)
from .errors import NetlistError
from .expressions import Expr, ExpressionError, UserFunction, evaluate
from .numbers import NumberError, parse_number
from .parser import (
    AcPart,
    Assignment,
    DcPart,
    ModelText,
    Positional,
    RawAnalysis,
    RawCard,
    RawElement,
    RawEnds,
    RawFunc,
    RawGlobal,
    RawKept,
    RawModel,
    RawParams,
    RawSetting,
    RawSubckt,
    WaveformPart,
    Word,
    parse_card,
)
from .source import MAX_CARDS, Deck, LogicalCard

MODEL_TYPES = {"nmos", "pmos", "d", "npn", "pnp"}
MODEL_TYPES_FOR = {"m": {"nmos", "pmos"}, "d": {"d"}, "q": {"npn", "pnp"}}

# Instance parameters each element accepts (ngspice's instance tables, those a
# bias circuit uses); anything else is an error rather than a silent drop.
INSTANCE_PARAMS: dict[str, frozenset[str]] = {
    "r": frozenset({"r", "resistance", "tc1", "tc2", "tc", "m", "temp", "dtemp", "scale", "noisy", "ac"}),
    "c": frozenset({"c", "capacitance", "ic", "m", "tc1", "tc2", "temp", "dtemp", "scale"}),
    "l": frozenset({"l", "inductance", "ic", "m", "tc1", "tc2", "temp", "dtemp", "scale", "nt"}),
    "d": frozenset({"area", "pj", "m", "temp", "dtemp", "ic", "lm", "wm", "lp", "wp"}),
    "m": frozenset({"w", "l", "m", "ad", "as", "pd", "ps", "nrd", "nrs", "temp", "dtemp", "ic"}),
    "q": frozenset({"area", "areac", "areab", "m", "temp", "dtemp", "ic"}),
}
INSTANCE_FLAGS: dict[str, frozenset[str]] = {
    "d": frozenset({"off"}),
    "m": frozenset({"off"}),
    "q": frozenset({"off"}),
}
MAX_SUBCKT_DEPTH = 10
# Elements after flattening: the card limit's bound, which `X` instances could otherwise multiply.
MAX_ELEMENTS = MAX_CARDS
# Semiconductor devices (MOSFETs, diodes, BJTs). Each costs Python work in every Newton iteration
# of the own solvers: 1,000 MOSFET stages check in about 3 s, 2,400 took over 6 s (`make bench`).
MAX_DEVICES = 1_000
_DEVICE_KINDS = frozenset({"mosfet", "diode", "bjt"})
_IDENTIFIER = re.compile(r"^[a-z_][a-z0-9_]*$", re.IGNORECASE)


@record(eq=False)
class _Definition:
    """A `.subckt` definition: ports, default parameters and its raw body."""

    name: str
    ports: tuple[str, ...]
    defaults: tuple[Assignment, ...]
    body: list[RawCard]
    card: LogicalCard


@record(eq=False)
class _Scope:
    """What names mean inside one (sub)circuit instance."""

    params: dict[str, float]
    path: str = ""  # "" at top level, "x1" / "x1.x2" inside instances
    ports: dict[str, str] = field(default_factory=dict)
    models: dict[str, str] = field(default_factory=dict)  # local name → hoisted name
    definitions: dict[str, _Definition] = field(default_factory=dict)
    stack: tuple[str, ...] = ()


def _origin(card: LogicalCard) -> Origin:
    return Origin(card.source.name, card.line)


class _Builder:
    def __init__(self, deck: Deck) -> None:
        self.deck = deck
        self.notices: list[Notice] = list(deck.notices)
        self.functions: dict[str, UserFunction] = {}
        self.elements: list[Element] = []
        self.element_cards: dict[str, LogicalCard] = {}
        self.models: dict[str, ModelCard] = {}
        self.parameters: list[Parameter] = []
        self.analyses: list[RawAnalysis] = []
        self.directives: list[Directive] = []
        self.globals: set[str] = {GROUND}

    # -- helpers -----------------------------------------------------------
    def value(self, expr: Expr, card: LogicalCard, scope: _Scope) -> float:
        try:
            return evaluate(expr, scope.params, self.functions)
        except ExpressionError as exc:
            raise card.error(str(exc), exc.offset) from None

    def word_number(self, word: Word, card: LogicalCard) -> float:
        try:
            return parse_number(word.text)
        except NumberError as exc:
            raise card.error(str(exc), word.offset + exc.offset) from None

    def node(self, name: str, scope: _Scope) -> str:
        lowered = name.lower()
        if lowered == "gnd":
            lowered = GROUND
        if lowered in scope.ports:
            return scope.ports[lowered]
        if lowered in self.globals or not scope.path:
            return lowered
        return f"{scope.path}.{lowered}"

    def element_name(self, raw_name: str, scope: _Scope) -> str:
        # Flattened names follow ngspice's own: `m.x1.m1` for M1 inside X1.
        return raw_name if not scope.path else f"{raw_name[0]}.{scope.path}.{raw_name}"

    # -- the walk ------------------------------------------------------------
    def build(self) -> Circuit:
        top = self.split_subcircuits([parse_card(card) for card in self.deck.cards])
        scope = _Scope(params={})
        self.collect_globals(top)
        self.instantiate(top, scope)
        self.check_device_count()
        analyses = tuple(self.analysis(raw) for raw in self.analyses)
        return Circuit(
            title=self.deck.title,
            source_file=self.deck.source.name,
            elements=tuple(self.elements),
            models=self.models,
            parameters=tuple(self.parameters),
            analyses=analyses,
            directives=tuple(self.directives),
            notices=tuple(self.notices),
            allowances=tuple(self.deck.allowances),
        )

    def split_subcircuits(self, cards: list[RawCard]) -> list[RawCard]:
        """Top-level cards, with `.subckt ... .ends` blocks turned into _Definition objects."""
        top: list[RawCard] = []
        current: _Definition | None = None
        for raw in cards:
            if isinstance(raw, RawSubckt):
                if current is not None:
                    raise raw.card.error(
                        f"nested `.subckt {raw.name}` inside `.subckt {current.name}` is not supported", 0
                    )
                current = self.definition(raw)
            elif isinstance(raw, RawEnds):
                if current is None:
                    raise raw.card.error("`.ends` without `.subckt`", 0)
                if raw.name is not None and raw.name.lower() != current.name.lower():
                    raise raw.card.error(f"`.ends {raw.name}` closes `.subckt {current.name}`", 0)
                top.append(current)  # type: ignore[arg-type]
                current = None
            elif current is not None:
                current.body.append(raw)
            else:
                top.append(raw)
        if current is not None:
            raise current.card.error(f"`.subckt {current.name}` is never closed by `.ends`", 0)
        return top

    def definition(self, raw: RawSubckt) -> _Definition:
        ports: list[str] = []
        defaults: list[Assignment] = []
        for item in raw.items:
            if isinstance(item, Assignment):
                if not _IDENTIFIER.match(item.name):
                    raise raw.card.error(f"`{item.name}` is not a parameter name", item.offset)
                defaults.append(item)
            elif isinstance(item, Word) and item.text.lower() == "params:":
                continue
            elif isinstance(item, Word):
                if defaults:
                    raise raw.card.error(f"port `{item.text}` after the parameters", item.offset)
                ports.append(item.text.lower())
            else:
                raise raw.card.error("an expression is not a port name", item.offset)
        return _Definition(raw.name, tuple(ports), tuple(defaults), [], raw.card)

    def collect_globals(self, cards: Iterable[RawCard]) -> None:
        for raw in cards:
            if isinstance(raw, RawGlobal):
                self.globals.update(n.lower() for n in raw.nodes)

    def instantiate(self, cards: list, scope: _Scope) -> None:
        """Build one (sub)circuit body in `scope`: definitions, params and models first."""
        for raw in cards:
            if isinstance(raw, _Definition):
                scope.definitions[raw.name.lower()] = raw
            elif isinstance(raw, RawFunc):
                self.functions[raw.name.lower()] = UserFunction(raw.name.lower(), raw.parameters, raw.body)
        for raw in cards:
            if isinstance(raw, RawParams):
                self.params(raw, scope)
        for raw in cards:
            if isinstance(raw, RawModel):
                self.model(raw, scope)
        for raw in cards:
            if isinstance(raw, RawElement):
                if raw.letter == "x":
                    self.call(raw, scope)
                else:
                    self.element(raw, scope)
            elif isinstance(raw, RawAnalysis):
                self.top_only(raw.card, scope, raw.kind)
                self.analyses.append(raw)
            elif isinstance(raw, RawSetting):
                self.top_only(raw.card, scope, raw.kind)
                self.directives.append(self.setting(raw, scope))
            elif isinstance(raw, RawKept) and not scope.path:
                self.directives.append(Directive(raw.kind.lstrip("."), raw.card.text, _origin(raw.card)))

    def top_only(self, card: LogicalCard, scope: _Scope, what: str) -> None:
        if scope.path:
            raise card.error(f"`.{what}` inside a subcircuit is not supported", 0)

    def params(self, raw: RawParams, scope: _Scope) -> None:
        for assignment in raw.assignments:
            value = self.value(assignment.value, raw.card, scope)
            scope.params[assignment.name.lower()] = value
            if not scope.path:
                self.parameters.append(Parameter(assignment.name, value, _origin(raw.card)))

    # -- models ------------------------------------------------------------
    def model(self, raw: RawModel, scope: _Scope) -> None:
        type_ = raw.type.text.lower()
        if type_ not in MODEL_TYPES:
            raise raw.card.error(
                f"model type `{raw.type.text}` is not supported (supported: {', '.join(sorted(MODEL_TYPES))})",
                raw.type.offset,
            )
        params, level_value = self.model_params(raw, scope, type_)
        name = raw.name if not scope.path else f"{scope.path}.{raw.name}"
        key = name.lower()
        if key in self.models and not scope.path:
            first = self.models[key].origin
            self.notices.append(
                Notice(
                    "duplicate-model",
                    f"`.model {raw.name}` defined again (first on line {first.line}): the last one wins",
                    raw.card.source.name,
                    raw.card.line,
                )
            )
        if scope.path:
            scope.models[raw.name.lower()] = key
        self.models[key] = ModelCard(name, type_, int(level_value), params, _origin(raw.card))

    def model_params(self, raw: RawModel, scope: _Scope, type_: str) -> tuple[dict[str, float | str], float]:
        """A model card's parameters by lower-case name, and its LEVEL (the last one written).

        Level-1 cards take biasbridge's aliases (`vt0` → `vto`, `u0` → `uo`, as mos1 reads them);
        other levels keep every name as written, since their own models name them (BSIM3 knows
        `u0`, not `uo`). A value that is no number (`version=3.3.0`) is kept as text on a MOSFET
        card of another level, and is an error everywhere else.
        """
        for item in raw.items:
            if not isinstance(item, Assignment):
                raise raw.card.error("a model parameter needs a value: `name=value`", item.offset)
            if not _IDENTIFIER.match(item.name.lower()):
                raise raw.card.error(f"`{item.name}` is not a model parameter name", item.offset)
        level_value = 1.0
        for item in raw.items:
            if item.name.lower() == "level":
                level_value = self.model_value(item.value, raw.card, scope)
        if level_value != int(level_value) or not 1 <= level_value <= 100:
            raise raw.card.error(f"LEVEL must be a positive integer, not {level_value:g}", 0)
        level1 = level_value == 1
        text_allowed = not level1 and type_ in MODEL_TYPES_FOR["m"]
        params: dict[str, float | str] = {}
        for item in raw.items:
            key = item.name.lower()
            if key == "level":
                continue
            if isinstance(item.value, ModelText) and text_allowed:
                params[key] = item.value.text
            else:
                params[level1_parameter_name(key) if level1 else key] = self.model_value(item.value, raw.card, scope)
        return params, level_value

    def model_value(self, value: Expr | ModelText, card: LogicalCard, scope: _Scope) -> float:
        if isinstance(value, ModelText):
            return self.word_number(Word(value.text, value.offset), card)
        return self.value(value, card, scope)

    def resolve_model(self, word: Word, card: LogicalCard, scope: _Scope, letter: str) -> str:
        key = scope.models.get(word.text.lower(), word.text.lower())
        model = self.models.get(key)
        if model is None:
            error = card.error(f"model `{word.text}` is not defined (no `.model {word.text} ...` card)", word.offset)
            error.code = "card-missing"
            raise error
        if model.type not in MODEL_TYPES_FOR[letter]:
            wanted = " or ".join(sorted(MODEL_TYPES_FOR[letter]))
            error = card.error(
                f"model `{word.text}` is of type {model.type}, but `{card.text.split()[0]}` needs {wanted}",
                word.offset,
            )
            error.code = "card-wrong-type"
            raise error
        return model.name

    # -- elements ------------------------------------------------------------
    def element(self, raw: RawElement, scope: _Scope) -> None:
        card = raw.card
        name = self.element_name(raw.name, scope)
        if name.lower() in self.element_cards:
            first = self.element_cards[name.lower()]
            raise card.error(f"duplicate element name `{raw.name}` (first on line {first.line})", 0)
        nodes = tuple(self.node(n, scope) for n, _ in raw.nodes)
        kind = KIND_BY_LETTER[raw.letter]
        value: float | None = None
        params: dict[str, float | str] = {}
        model: str | None = None
        control: str | None = None
        waveform: Waveform | None = None
        flags: list[str] = []
        items = list(raw.items)
        if raw.letter in "vi":
            value, params, waveform = self.source_fields(raw, scope)
        elif raw.letter == "q":
            nodes, model, items = self.bjt_fields(raw, scope)
        elif raw.model is not None:
            model = self.resolve_model(raw.model, card, scope, raw.letter)
        if raw.value is not None and raw.letter not in "vi":
            value = self.value(raw.value, card, scope)
        if raw.controlling_source is not None:
            control = self.element_name(raw.controlling_source.text, scope)
        for item in items:
            self.instance_item(raw, item, scope, params, flags)
        element = Element(
            name=name,
            kind=kind,
            nodes=nodes,
            value=value,
            origin=_origin(card),
            model=model,
            params=params,
            controlling_source=control,
            waveform=waveform,
            flags=tuple(flags),
            written=WrittenFields(raw),
        )
        self.elements.append(element)
        self.element_cards[name.lower()] = card

    def check_device_count(self) -> None:
        """Refuse more than MAX_DEVICES semiconductor devices, at the card of the first too many."""
        devices = [e for e in self.elements if e.kind in _DEVICE_KINDS]
        if len(devices) > MAX_DEVICES:
            extra = devices[MAX_DEVICES]
            raise self.element_cards[extra.name.lower()].error(
                f"more than {MAX_DEVICES} transistors and diodes ({extra.name} is number {MAX_DEVICES + 1}): far "
                "beyond a single-stage netlist, refused",
                0,
            )

    def instance_item(
        self, raw: RawElement, item, scope: _Scope, params: dict[str, float | str], flags: list[str]
    ) -> None:
        card = raw.card
        allowed = INSTANCE_PARAMS.get(raw.letter, frozenset())
        if isinstance(item, Assignment):
            key = item.name.lower()
            if key not in allowed:
                known = ", ".join(sorted(allowed)) or "none"
                raise card.error(
                    f"`{item.name}` is not an instance parameter of `{raw.name}` (known: {known})", item.offset
                )
            params[key] = self.value(item.value, card, scope)
            return
        if isinstance(item, Word) and item.text.lower() in INSTANCE_FLAGS.get(raw.letter, frozenset()):
            flags.append(item.text.lower())
            return
        if raw.letter in "dq" and "area" not in params:
            number = (
                self.value(item.value, card, scope)
                if isinstance(item, Positional)
                else self.word_number(item, card)
            )
            params["area"] = number
            return
        text = item.text if isinstance(item, Word) else "expression"
        raise card.error(f"unexpected `{text}` in `{raw.name}`; expected `name=value`", item.offset)

    def source_fields(
        self, raw: RawElement, scope: _Scope
    ) -> tuple[float, dict[str, float | str], Waveform | None]:
        card = raw.card
        dc: float | None = None if raw.value is None else self.value(raw.value, card, scope)
        params: dict[str, float | str] = {}
        waveform: Waveform | None = None
        for part in raw.source_parts:
            if isinstance(part, DcPart):
                dc = self.value(part.value, card, scope)
            elif isinstance(part, AcPart):
                params["ac_mag"] = 1.0 if part.magnitude is None else self.value(part.magnitude, card, scope)
                params["ac_phase"] = 0.0 if part.phase is None else self.value(part.phase, card, scope)
            elif isinstance(part, WaveformPart):
                if waveform is not None:
                    raise card.error("a source takes one transient function", part.offset)
                args = tuple(self.value(a, card, scope) for a in part.args)
                waveform = Waveform(part.kind, args)
        if dc is None:
            dc = waveform.initial_value() if waveform is not None else 0.0
            what = (
                f"its {waveform.kind.upper()} value at t = 0 ({dc:g})" if waveform is not None else "0"
            )
            self.notices.append(
                Notice(
                    "no-dc-value",
                    f"`{raw.name}` has no DC value: the operating point uses {what}, as ngspice does",
                    card.source.name,
                    card.line,
                )
            )
        if waveform is not None:
            params["waveform"] = f"{waveform.kind}({' '.join(f'{a:g}' for a in waveform.args)})"
        return dc, params, waveform

    def bjt_fields(self, raw: RawElement, scope: _Scope) -> tuple[tuple[str, ...], str, list]:
        """Q has 3 or 4 nodes: the first word that names a model ends the node list."""
        card = raw.card
        nodes = [self.node(n, scope) for n, _ in raw.nodes]
        items = list(raw.items)
        for index in range(min(2, len(items))):
            item = items[index]
            if isinstance(item, Word):
                key = scope.models.get(item.text.lower(), item.text.lower())
                if key in self.models:
                    nodes.extend(self.node(w.text, scope) for w in items[:index])
                    model = self.resolve_model(item, card, scope, "q")
                    return tuple(nodes), model, items[index + 1 :]
        offset = items[0].offset if items else len(card.text)
        raise card.error(f"`{raw.name}`: no model found after 3 or 4 nodes; expected `{_usage('q')}`", offset)

    def call(self, raw: RawElement, scope: _Scope) -> None:
        """Flatten `Xname nodes... SUBCKT [params]` into prefixed elements."""
        card = raw.card
        words = [i for i in raw.items if isinstance(i, Word) and i.text.lower() != "params:"]
        overrides = [i for i in raw.items if isinstance(i, Assignment)]
        if not words:
            raise card.error(f"`{raw.name}` names no subcircuit; expected `{_usage('x')}`", len(card.text))
        target = words[-1]
        definition = scope.definitions.get(target.text.lower()) or self.find_definition(target.text, scope)
        if definition is None:
            raise card.error(f"subcircuit `{target.text}` is not defined", target.offset)
        nodes = words[:-1]
        if len(nodes) != len(definition.ports):
            raise card.error(
                f"`{raw.name}` connects {len(nodes)} node(s), `.subckt {definition.name}` has "
                f"{len(definition.ports)} port(s) (line {definition.card.line})",
                target.offset,
            )
        if definition.name.lower() in scope.stack or len(scope.stack) >= MAX_SUBCKT_DEPTH:
            raise card.error(f"subcircuit `{definition.name}` instantiates itself", target.offset)
        path = raw.name if not scope.path else f"{scope.path}.{raw.name}"
        params = dict(scope.params)
        for default in definition.defaults:
            params[default.name.lower()] = self.value(default.value, definition.card, scope)
        for override in overrides:
            params[override.name.lower()] = self.value(override.value, card, scope)
        inner = _Scope(
            params=params,
            path=path.lower(),
            ports={port: self.node(n.text, scope) for port, n in zip(definition.ports, nodes)},
            definitions=dict(scope.definitions),
            stack=scope.stack + (definition.name.lower(),),
        )
        inner.models = {}
        self.instantiate(definition.body, inner)
        if len(self.elements) > MAX_ELEMENTS:
            raise card.error(
                f"with `{raw.name}` the flattened circuit has more than {MAX_ELEMENTS} elements: far beyond a "
                "single-stage netlist, refused",
                0,
            )

    def find_definition(self, name: str, scope: _Scope) -> _Definition | None:
        return scope.definitions.get(name.lower())

    # -- control cards ---------------------------------------------------------
    def setting(self, raw: RawSetting, scope: _Scope) -> Directive:
        settings: list[tuple[str, float | str | None]] = []
        if raw.kind == "options":
            for item in raw.items:
                if isinstance(item, Assignment):
                    settings.append((item.name.lower(), self.value(item.value, raw.card, scope)))
                elif isinstance(item, Word):
                    settings.append((item.text.lower(), None))
        elif raw.kind == "temp":
            settings = [("temp", self.value(v, raw.card, scope)) for v in raw.values]
        else:
            for node, expr in raw.node_values:
                settings.append((self.node(node, scope), self.value(expr, raw.card, scope)))
        _check_temperatures(raw, settings)
        return Directive(raw.kind, raw.card.text, _origin(raw.card), tuple(settings))

    def analysis(self, raw: RawAnalysis) -> Analysis:
        sweeps: list[DcSweep] = []
        top = _Scope(params={p.name.lower(): p.value for p in self.parameters})
        for sweep in raw.sweeps:
            element = next((e for e in self.elements if e.name.lower() == sweep.source.text.lower()), None)
            if element is None or element.kind not in {"vsource", "isource"}:
                raise raw.card.error(
                    f"`.dc` sweeps `{sweep.source.text}`, which is not an independent source of this circuit",
                    sweep.source.offset,
                )
            start, stop, step = (self.value(e, raw.card, top) for e in (sweep.start, sweep.stop, sweep.step))
            if step == 0 or (stop - start) * step < 0:
                raise raw.card.error(
                    f"`.dc` step {step:g} never goes from {start:g} to {stop:g}", sweep.source.offset
                )
            sweeps.append(DcSweep(element.name, start, stop, step))
        return Analysis(raw.kind, _origin(raw.card), tuple(sweeps))


# A plain SPICE number as written (`1M`, `2.2k`, `10uF`, `1e-6`): the field a scale rule judges.
_NUMBER_FIELD = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?[A-Za-z\u00b5]*"
# Any other field: up to the next separator.
_OTHER_FIELD = r"[^\s=(),]+"


@functools.cache
def _written_field() -> re.Pattern[str]:
    """A field as written: a number when one starts there, else any other field (one match, not
    two). Compiled at its first use: only the lint rules read the fields as written."""
    return re.compile(_NUMBER_FIELD + "|" + _OTHER_FIELD)


_NODE_KEYS = tuple(f"node{index}" for index in range(1, 9))


def written_fields(raw: RawElement) -> dict[str, Written]:
    """The fields of an element card as written, with their places: `node1`, `node2`, ...,
    `value` (a source's DC value), `model` and each `name=value` instance parameter's value.
    A value given as `{expr}` or `'expr'` is kept from its opening brace or quote."""
    return _fields_at(*_placed(raw))


class WrittenFields(Mapping[str, Written]):
    """`written_fields` of an element card, worked out at the first look: only the lint rules
    look (a check never does). It keeps the raw card until then, and nothing of it is worked out
    before (not even where each field starts); a pickle or a copy carries the card's text, its
    segments and where each field starts, not the card, and the fields are worked out where read."""

    __slots__ = ("_raw", "_placed", "_fields")

    def __init__(
        self,
        raw: RawElement | None,
        placed: tuple[str, tuple[tuple[int, int, int], ...], tuple[tuple[str, int], ...]] | None = None,
    ) -> None:
        self._raw, self._placed = raw, placed
        self._fields: dict[str, Written] | None = None

    def _read(self) -> dict[str, Written]:
        if self._fields is None:
            self._fields = _fields_at(*self._placed) if self._placed is not None else written_fields(self._raw)
        return self._fields

    def __getitem__(self, key: str) -> Written:
        return self._read()[key]

    def __iter__(self):
        return iter(self._read())

    def __len__(self) -> int:
        return len(self._read())

    def get(self, key: str, default=None):
        return self._read().get(key, default)

    def __repr__(self) -> str:
        return repr(self._read())

    def __reduce__(self):
        return (WrittenFields, (None, self._placed if self._placed is not None else _placed(self._raw)))


def _placed(raw: RawElement) -> tuple[str, tuple[tuple[int, int, int], ...], tuple[tuple[str, int], ...]]:
    """What `written_fields` works from: the card's text, its segments and where each field starts."""
    return raw.card.text, _segment_places(raw.card), _written_places(raw)


def _segment_places(card: LogicalCard) -> tuple[tuple[int, int, int], ...]:
    """A card's segments as (offset, line, column)."""
    return tuple((segment.offset, segment.line, segment.column) for segment in card.segments)


def _written_places(raw: RawElement) -> tuple[tuple[str, int], ...]:
    """Each field `written_fields` keeps, by its key, and the offset where its value starts."""
    places = [
        (_NODE_KEYS[index] if index < len(_NODE_KEYS) else f"node{index + 1}", offset)
        for index, (_, offset) in enumerate(raw.nodes)
    ]
    value = raw.value
    for part in raw.source_parts:
        if isinstance(part, DcPart):
            value = part.value
    if value is not None:
        places.append(("value", value.offset))
    if raw.model is not None:
        places.append(("model", raw.model.offset))
    for item in raw.items:
        if isinstance(item, Assignment) and not isinstance(item.value, ModelText):
            places.append((item.name.lower(), item.value.offset))
    return tuple(places)


def _fields_at(
    text: str, segments: tuple[tuple[int, int, int], ...], places: tuple[tuple[str, int], ...]
) -> dict[str, Written]:
    """The fields of card text `text` at `places`, as written and placed by the card's `segments`."""
    fields: dict[str, Written] = {}
    for key, offset in places:
        if offset > 0 and text[offset - 1] in "{'":
            opening = offset - 1
            closing = text.find("}" if text[opening] == "{" else "'", offset)
            end = closing + 1 if closing >= 0 else len(text)
            field_text = text[opening:end]
            offset = opening
        else:
            match = _written_field().match(text, offset)
            field_text = match.group(0) if match else ""
        # The last segment starting at or before the field (LogicalCard.locate).
        start, line, column = segments[0]
        for candidate in segments:
            if candidate[0] <= offset:
                start, line, column = candidate
        fields[key] = Written(field_text, line, column + offset - start)
    return fields


def _usage(key: str) -> str:
    from .parser import USAGE

    return USAGE[key]


def check_references(circuit: Circuit, cards: Mapping[str, LogicalCard]) -> None:
    """Current-controlled sources must name an existing voltage source."""
    for element in circuit.elements:
        if element.controlling_source is None:
            continue
        control = circuit.element(element.controlling_source)
        if control is None or control.kind != "vsource":
            card = cards[element.name.lower()]
            # The controlling source is the fourth field: `Fname n+ n- Vcontrol gain`.
            fields = list(re.finditer(r"[^\s=(),{}']+", card.text))
            offset = fields[3].start() if len(fields) > 3 else 0
            raise card.error(
                f"`{element.name}` is controlled by `{element.controlling_source}`, "
                "which is not a voltage source of this circuit",
                offset,
            )


def build_circuit(deck: Deck) -> Circuit:
    """The Circuit of a deck, or a located NetlistError."""
    builder = _Builder(deck)
    try:
        circuit = builder.build()
    except RecursionError:
        raise NetlistError(
            "netlist nests too deeply to read", builder.deck.cards[0].locate(0) if builder.deck.cards else None
        ) from None
    check_references(circuit, builder.element_cards)
    return circuit


def _check_temperatures(raw: RawSetting, settings: list[tuple[str, float | str | None]]) -> None:
    """A `.temp`, `.options temp` or `.options tnom` at or below absolute zero (−273.15 °C) is
    refused at its place: no device equation has a meaning there (ngspice fails to converge)."""
    if raw.kind == "temp":
        places = [getattr(value, "offset", 0) for value in raw.values]
    elif raw.kind == "options":
        places = [item.offset for item in raw.items if isinstance(item, (Assignment, Word))]
    else:
        return
    for (name, value), offset in zip(settings, places):
        if name in ("temp", "tnom") and isinstance(value, (int, float)) and value <= -273.15:
            what = "`.temp`" if raw.kind == "temp" else f"`.options {name}`"
            raise raw.card.error(f"{what} = {value:g} °C is at or below absolute zero (−273.15 °C)", offset)
