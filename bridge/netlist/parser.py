"""Syntax: one logical card → a raw card, by the lark grammar in grammar/spice.lark.

The grammar is the single statement of the syntax; the transformer below has one
small method per rule and only turns tokens into values (numbers read with
SPICE's suffix rules, expressions into trees). Meaning — parameters, subcircuits,
models — is built afterwards in build.py.
"""

from __future__ import annotations

import functools
import os
import re
from pathlib import Path
from typing import TYPE_CHECKING

from ..records import record, with_fields
from .errors import NetlistError
from .expressions import Binary, Call, Expr, Literal, Reference, Unary
from .numbers import NumberError, parse_number
from .source import LogicalCard

# lark is imported with the first card `plain_card` does not read (see the end of this module):
# a netlist of plain cards is read without it.
if TYPE_CHECKING:
    from lark import Lark, Token
    from lark.exceptions import UnexpectedInput

# ---- raw cards: what one card says, before parameters and models are known ----


@record(frozen=True)
class Assignment:
    """`name=value` on a card."""

    name: str
    value: Expr | ModelText  # ModelText only in a `.model` card
    offset: int


@record(frozen=True)
class Word:
    """A field read as a name (a node, a model, a keyword), as written."""

    text: str
    offset: int


@record(frozen=True)
class Positional:
    """A lone value where a card takes `name=value` items (a diode's area in braces, say)."""

    value: Expr
    offset: int


Item = Assignment | Word | Positional


@record(frozen=True)
class ModelText:
    """A model parameter's value that is not a number (`version=3.3.0`), kept as written.

    Only a `.model` card's `name=value` has one; build.py accepts it on cards other than level 1
    and reports it there as the number it is not.
    """

    text: str
    offset: int


@record(frozen=True)
class DcPart:
    """A source's `DC value`."""

    value: Expr


@record(frozen=True)
class AcPart:
    """A source's `AC [magnitude [phase]]`."""

    magnitude: Expr | None
    phase: Expr | None


@record(frozen=True)
class WaveformPart:
    """A source's transient function: `SIN(...)`, `PULSE(...)`, `PWL(...)`, `EXP(...)`, `SFFM(...)`."""

    kind: str
    args: tuple[Expr, ...]
    offset: int


SourcePart = DcPart | AcPart | WaveformPart


@record(frozen=True)
class RawElement:
    """An element card: its letter, name, nodes with their places, and its fields as read."""

    letter: str
    name: str
    nodes: tuple[tuple[str, int], ...]
    card: LogicalCard
    value: Expr | None = None
    model: Word | None = None
    controlling_source: Word | None = None
    items: tuple[Item, ...] = ()
    source_parts: tuple[SourcePart, ...] = ()


@record(frozen=True)
class RawModel:
    """A `.model NAME TYPE (name=value ...)` card."""

    name: str
    type: Word
    items: tuple[Item, ...]
    card: LogicalCard


@record(frozen=True)
class RawParams:
    """A `.param name=value ...` card."""

    assignments: tuple[Assignment, ...]
    card: LogicalCard


@record(frozen=True)
class RawFunc:
    """A `.func name(args) {body}` card."""

    name: str
    parameters: tuple[str, ...]
    body: Expr
    card: LogicalCard


@record(frozen=True)
class RawSweep:
    """One `SOURCE start stop step` of a `.dc` card."""

    source: Word
    start: Expr
    stop: Expr
    step: Expr


@record(frozen=True)
class RawAnalysis:
    """An `.op` or `.dc` card."""

    kind: str
    card: LogicalCard
    sweeps: tuple[RawSweep, ...] = ()


@record(frozen=True)
class RawSetting:
    """An `.options`, `.temp`, `.ic` or `.nodeset` card."""

    kind: str  # "options", "temp", "ic", "nodeset"
    card: LogicalCard
    items: tuple[Item, ...] = ()
    values: tuple[Expr, ...] = ()
    node_values: tuple[tuple[str, Expr], ...] = ()


@record(frozen=True)
class RawGlobal:
    """A `.global node ...` card."""

    nodes: tuple[str, ...]
    card: LogicalCard


@record(frozen=True)
class RawSubckt:
    """A `.subckt NAME ports [params: ...]` card, opening a definition."""

    name: str
    items: tuple[Item, ...]
    card: LogicalCard


@record(frozen=True)
class RawEnds:
    """An `.ends [NAME]` card, closing a definition."""

    name: str | None
    card: LogicalCard


@record(frozen=True)
class RawKept:
    """A card kept for display only (`.save`, `.print`, `.tran`, ...)."""

    kind: str
    card: LogicalCard


RawCard = (
    RawElement | RawModel | RawParams | RawFunc | RawAnalysis | RawSetting | RawGlobal
    | RawSubckt | RawEnds | RawKept
)


# ---- the grammar -------------------------------------------------------------

def grammar_text() -> str:
    """The grammar file, from the installed package data or the source tree."""
    from importlib import resources  # with the grammar alone: a netlist of plain cards needs neither

    try:
        return resources.files("bridge._grammar").joinpath("spice.lark").read_text(encoding="utf-8")
    except (ModuleNotFoundError, FileNotFoundError):
        return (Path(__file__).resolve().parents[2] / "grammar" / "spice.lark").read_text(encoding="utf-8")


class _CardTransformer:
    """Tokens → values, one method per grammar rule. `card` is the card being parsed.

    Lark calls a parse-time transformer's methods by the rules' names (every rule has one
    here), so this needs no base class from lark, and lark is not imported to define it.
    """

    card: LogicalCard

    # -- values and expressions
    def number(self, children: list[Token]) -> Literal:
        token = children[0]
        try:
            return Literal(parse_number(str(token)), token.start_pos)
        except NumberError as exc:
            raise self.card.error(str(exc), token.start_pos + exc.offset) from None

    def model_number(self, children: list[Token]) -> Literal | ModelText:
        token = children[0]
        try:
            return Literal(parse_number(str(token)), token.start_pos)
        except NumberError:
            return ModelText(str(token), token.start_pos)

    def literal(self, children: list[Token]) -> Literal:
        token = children[0]
        try:
            return Literal(parse_number(str(token), allow_mil=False), token.start_pos)
        except NumberError as exc:
            raise self.card.error(str(exc), token.start_pos + exc.offset) from None

    def reference(self, children: list[Token]) -> Reference:
        return Reference(str(children[0]), children[0].start_pos)

    def call(self, children: list) -> Call:
        name = children[0]
        return Call(str(name), tuple(c for c in children[1:] if c is not None), name.start_pos)

    def braced(self, children: list) -> Expr:
        return children[0]

    def _binary(operator: str):  # noqa: N805 - a factory used in the class body
        def method(self, children: list) -> Binary:
            left, right = children
            return Binary(operator, left, right, left.offset)

        return method

    add = _binary("+")
    sub = _binary("-")
    mul = _binary("*")
    div = _binary("/")
    pow = _binary("^")

    def neg(self, children: list) -> Unary:
        return Unary("-", children[0], children[0].offset)

    # -- fields
    @staticmethod
    def _node(token: Token) -> tuple[str, int]:
        return (str(token), token.start_pos)

    def assignment(self, children: list) -> Assignment:
        return Assignment(str(children[0]), children[1], children[0].start_pos)

    def word(self, children: list[Token]) -> Word:
        return Word(str(children[0]), children[0].start_pos)

    def positional(self, children: list) -> Positional:
        return Positional(children[0], children[0].offset)

    def comma(self, children: list) -> None:
        return None

    # -- elements
    def _two_terminal(self, children: list) -> RawElement:
        name, n1, n2, value, *items = children
        nodes = (self._node(n1), self._node(n2))
        return RawElement(str(name)[0].lower(), str(name), nodes, self.card, value=value, items=tuple(items))

    resistor = capacitor = inductor = _two_terminal

    def _source(self, children: list) -> RawElement:
        name, n1, n2, *rest = children
        value = rest.pop(0) if rest and not isinstance(rest[0], DcPart | AcPart | WaveformPart) else None
        return RawElement(
            str(name)[0].lower(), str(name), (self._node(n1), self._node(n2)), self.card, value=value,
            source_parts=tuple(rest),
        )

    vsource = isource = _source

    def source_dc(self, children: list) -> DcPart:
        return DcPart(children[-1])

    def source_ac(self, children: list) -> AcPart:
        from lark import Token

        values = [c for c in children[1:] if c is not None and not isinstance(c, Token)]
        return AcPart(values[0] if values else None, values[1] if len(values) > 1 else None)

    def source_waveform(self, children: list) -> WaveformPart:
        kind = children[0]
        return WaveformPart(str(kind).lower(), tuple(children[1:]), kind.start_pos)

    def _voltage_controlled(self, children: list) -> RawElement:
        name, *nodes, gain = children
        return RawElement(
            str(name)[0].lower(), str(name), tuple(self._node(n) for n in nodes), self.card, value=gain
        )

    vcvs = vccs = _voltage_controlled

    def _current_controlled(self, children: list) -> RawElement:
        name, n1, n2, control, gain = children
        return RawElement(
            str(name)[0].lower(), str(name), (self._node(n1), self._node(n2)), self.card, value=gain,
            controlling_source=Word(str(control), control.start_pos),
        )

    cccs = ccvs = _current_controlled

    def _modelled(self, children: list, node_count: int) -> RawElement:
        name = children[0]
        nodes = tuple(self._node(n) for n in children[1 : 1 + node_count])
        model = children[1 + node_count]
        return RawElement(
            str(name)[0].lower(), str(name), nodes, self.card,
            model=Word(str(model), model.start_pos), items=tuple(children[2 + node_count :]),
        )

    def diode(self, children: list) -> RawElement:
        return self._modelled(children, 2)

    def mosfet(self, children: list) -> RawElement:
        return self._modelled(children, 4)

    def bjt(self, children: list) -> RawElement:
        name, *rest = children
        nodes = tuple(self._node(n) for n in rest[:3])
        return RawElement("q", str(name), nodes, self.card, items=tuple(rest[3:]))

    def subckt_call(self, children: list) -> RawElement:
        name, *items = children
        return RawElement("x", str(name), (), self.card, items=tuple(items))

    # -- dot cards
    def model_card(self, children: list) -> RawModel:
        _, name, type_, *items = children
        return RawModel(
            str(name), Word(str(type_), type_.start_pos), tuple(i for i in items if i is not None), self.card
        )

    def param_assignment(self, children: list) -> Assignment:
        return Assignment(str(children[0]), children[1], children[0].start_pos)

    def param_card(self, children: list) -> RawParams:
        return RawParams(tuple(children[1:]), self.card)

    def func_card(self, children: list) -> RawFunc:
        _, name, *rest = children
        body = rest[-1]
        parameters = tuple(str(p).lower() for p in rest[:-1] if p is not None)
        return RawFunc(str(name), parameters, body, self.card)

    def op_card(self, children: list) -> RawAnalysis:
        return RawAnalysis("op", self.card)

    def dc_sweep(self, children: list) -> RawSweep:
        source, start, stop, step = children
        return RawSweep(Word(str(source), source.start_pos), start, stop, step)

    def dc_card(self, children: list) -> RawAnalysis:
        return RawAnalysis("dc", self.card, tuple(c for c in children[1:] if c is not None))

    def options_card(self, children: list) -> RawSetting:
        return RawSetting("options", self.card, items=tuple(children[1:]))

    def temp_card(self, children: list) -> RawSetting:
        return RawSetting("temp", self.card, values=tuple(children[1:]))

    def node_setting(self, children: list) -> tuple[str, Expr]:
        function, node, value = children
        if str(function).lower() != "v":
            raise self.card.error(f"expected `V(node)=value`, not `{function}(...)`", function.start_pos)
        return (str(node), value)

    def ic_card(self, children: list) -> RawSetting:
        return RawSetting("ic", self.card, node_values=tuple(children[1:]))

    def nodeset_card(self, children: list) -> RawSetting:
        return RawSetting("nodeset", self.card, node_values=tuple(children[1:]))

    def global_card(self, children: list) -> RawGlobal:
        return RawGlobal(tuple(str(c) for c in children[1:]), self.card)

    def subckt_card(self, children: list) -> RawSubckt:
        return RawSubckt(str(children[1]), tuple(children[2:]), self.card)

    def ends_card(self, children: list) -> RawEnds:
        return RawEnds(str(children[1]) if len(children) > 1 and children[1] is not None else None, self.card)

    def kept_card(self, children: list) -> RawKept:
        return RawKept(str(children[0]).lower(), self.card)


# What each card looks like, for messages about incomplete or malformed cards.
USAGE: dict[str, str] = {
    "r": "Rname node node value",
    "c": "Cname node node value",
    "l": "Lname node node value",
    "v": "Vname node+ node- [[DC] value] [AC mag [phase]] [SIN|PULSE|PWL|EXP|SFFM (...)]",
    "i": "Iname node+ node- [[DC] value] [AC mag [phase]] [SIN|PULSE|PWL|EXP|SFFM (...)]",
    "e": "Ename out+ out- in+ in- gain (only the linear form is supported)",
    "g": "Gname out+ out- in+ in- transconductance (only the linear form is supported)",
    "f": "Fname out+ out- Vcontrol gain",
    "h": "Hname out+ out- Vcontrol transresistance",
    "d": "Dname anode cathode model [area]",
    "m": "Mname drain gate source bulk model [W=.. L=.. M=..]",
    "q": "Qname collector base emitter [substrate] model [area]",
    "x": "Xname node ... subcircuit [name=value ...]",
    ".model": ".model NAME TYPE (name=value ...)",
    ".param": ".param name=value [name=value ...]",
    ".func": ".func name(args) {expression}",
    ".dc": ".dc SOURCE start stop step [SOURCE2 start2 stop2 step2]",
    ".ic": ".ic V(node)=value ...",
    ".nodeset": ".nodeset V(node)=value ...",
    ".temp": ".temp degrees",
    ".global": ".global node ...",
    ".subckt": ".subckt NAME node ... [params: name=value ...]",
}

SUPPORTED_LETTERS = "RCLVIEGFHDMQX"


@functools.lru_cache(maxsize=1)
def _parser() -> tuple[Lark, _CardTransformer]:
    """Built once per process: LALR with the transformer applied while parsing."""
    from lark import Lark

    transformer = _CardTransformer()
    parser = Lark(
        grammar_text(),
        parser="lalr",
        lexer="contextual",
        transformer=transformer,
        maybe_placeholders=True,
        propagate_positions=False,
        # Building the LALR tables costs 50-100 ms at every start; lark keeps them in a file
        # keyed by a hash of the grammar, the options, lark's and Python's versions, and rebuilds
        # when the file is missing, stale or unreadable.
        cache=_grammar_cache_file() or False,
    )
    return parser, transformer


def load_grammar() -> None:
    """Build the card parser now rather than at the first card (before a fork, say, so that
    both processes share it)."""
    _parser()


def _grammar_cache_file() -> str | None:
    """The user's own cache file for the built grammar, or None when there is no writable place.

    It lives in the user's cache folder (never a shared temporary folder: lark reads it back with
    pickle, so only a folder the user owns is trusted).
    """
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    folder = os.path.join(base, "biasbridge")
    try:
        os.makedirs(folder, mode=0o700, exist_ok=True)
        if not os.access(folder, os.W_OK) or os.stat(folder).st_uid != os.getuid():
            return None
    except OSError:
        return None
    return os.path.join(folder, "grammar.lark-cache")


def parse_card(card: LogicalCard) -> RawCard:
    """One logical card → its raw card, or a located NetlistError."""
    plain = plain_card(card)
    if plain is not None:
        return plain
    parser, transformer = _parser()
    from lark.exceptions import UnexpectedInput

    transformer.card = card
    try:
        return parser.parse(card.text)
    except UnexpectedInput as exc:
        raise _explain(card, exc) from None


def _card_key(card: LogicalCard) -> str:
    first = card.text.split(None, 1)[0].lower()
    if first.startswith("."):
        return first
    return first[0]


def _open_expression(text: str) -> bool:
    """Whether `text` (a card up to an error) ends inside a `{...}` or `'...'` expression."""
    depth, quoted = 0, False
    for char in text:
        if char == "'":
            quoted = not quoted
        elif char == "{":
            depth += 1
        elif char == "}":
            depth -= 1
    return quoted or depth > 0


def _explain(card: LogicalCard, exc: UnexpectedInput) -> NetlistError:
    """A lark error → a message a designer understands, at the right column."""
    from lark import Token
    from lark.exceptions import UnexpectedEOF

    key = _card_key(card)
    usage = USAGE.get(key)
    hint = f"; expected `{usage}`" if usage else ""
    first = card.text.split(None, 1)[0]
    token = getattr(exc, "token", None)
    position = token.start_pos if isinstance(token, Token) and token.type != "$END" else None
    if position is None:
        position = getattr(exc, "pos_in_stream", None)
    if position is None or (isinstance(token, Token) and token.type == "$END") or isinstance(exc, UnexpectedEOF):
        position = len(card.text)
    if position == 0:
        if key.startswith("."):
            return card.error(f"`{first}` is not a supported card", 0)
        return card.error(
            f"`{first}`: element letter `{first[0]}` is not supported (supported: {', '.join(SUPPORTED_LETTERS)})",
            0,
        )
    in_expression = _open_expression(card.text[:position])
    if position >= len(card.text):
        if in_expression:
            return card.error("unbalanced expression: not closed before the end of the card", position)
        return card.error(f"incomplete `{first}` card: fields missing{hint}", position)
    shown = str(token) if isinstance(token, Token) else card.text[position]
    if in_expression or shown in {"}", ")"}:
        return card.error(f"unbalanced or malformed expression at `{shown}`", position)
    return card.error(f"unexpected `{shown}` in `{first}` card{hint}", position)


# ---- plain cards: the usual cards read without the parser ------------------------------------
#
# Most cards of a stage are plain: an element or a `.model`, `.options`, `.op` or output card
# made of fields alone (no `{expression}` or quote). `plain_card` reads those as the grammar does,
# the same raw card the parser gives (tests/test_check_speed_paths.py compares the two over the
# examples, the corpora and random cards), in a fraction of the time; it gives None for anything
# else, and for any card the grammar would refuse or whose number does not read, so that the
# parser reads it (and says what is wrong).

# A field as the grammar's WORD, or one of the separators `=`, `(`, `)`, `,`.
_PLAIN_FIELD = re.compile(r"[^\s=(),{}']+|[=(),]")
# Space the grammar does not skip (only blanks, tabs, form and vertical feeds are), or a quoted expression.
_NOT_PLAIN = re.compile(r"[^\S \t\f\v]|'")
# The grammar's NAME and ENUMBER (grammar/spice.lark), each as a whole field.
_EXPRESSION_NAME = re.compile(r"[a-zA-Z_][a-zA-Z0-9_.]*")
_EXPRESSION_NUMBER = re.compile(r"(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?[a-zA-Z\u00b5\u03bc]*")
# A braced value of one name or one number, braces tight (`{rload}`, `{10k}`), as one field; any
# other brace stays unmatched, and the card goes to the parser.
_PLAIN_FIELD_BRACED = re.compile(
    r"\{(?:" + _EXPRESSION_NAME.pattern + "|" + _EXPRESSION_NUMBER.pattern + r")\}|" + _PLAIN_FIELD.pattern
)
_SOURCE_KEYWORDS = frozenset({"dc", "ac"})
_WAVEFORMS = frozenset({"sin", "pulse", "pwl", "exp", "sffm"})
_KEYWORDS = _SOURCE_KEYWORDS | _WAVEFORMS
_SEPARATORS = frozenset("=(),")
_NODE_COUNTS = {"r": 2, "c": 2, "l": 2, "m": 4}
_KEPT_CARD = re.compile(
    r"\.(save|print|plot|probe|meas|measure|tran|ac|noise|tf|four|sens|pz|disto|width|title|csparam)", re.IGNORECASE
)
_OPTIONS_CARD = re.compile(r"\.opt(ion)?s?", re.IGNORECASE)


class _NotPlain(Exception):
    """The card is not one `plain_card` reads: the parser takes it."""


# Plain cards already read, by their text: the same cards (`.op`, a `.model` card, a supply, a
# transistor) stand in netlist after netlist of a batch, and a card's raw card depends on its text
# alone but for the card itself, which a copy takes. Bounded: past the limit nothing more is kept.
_READ_CARDS: dict[str, RawCard] = {}
_READ_CARDS_LIMIT = 4096


def plain_card(card: LogicalCard) -> RawCard | None:
    """The raw card of a plain card (see above) as ``parse_card`` gives it; None for any other."""
    read = _READ_CARDS.get(card.text)
    if read is not None:
        return with_fields(read, card=card)
    raw = read_plain_card(card)
    if raw is not None and len(_READ_CARDS) < _READ_CARDS_LIMIT:
        _READ_CARDS[card.text] = raw
    return raw


def read_plain_card(card: LogicalCard) -> RawCard | None:
    """`plain_card` of a card read afresh, whatever was read before."""
    text = card.text
    if _NOT_PLAIN.search(text):
        return None
    if "{" in text or "}" in text:
        fields = _braced_fields(text)
        if fields is None:
            return None
    else:
        fields = [(match.group(), match.start()) for match in _PLAIN_FIELD.finditer(text)]
    if not fields:
        return None
    first = fields[0][0]
    letter = first[0].lower()
    try:
        if letter in _NODE_COUNTS:
            return _plain_element(card, fields, letter)
        if letter in "vi":
            return _plain_source(card, fields, letter)
        if letter != ".":
            return None
        keyword = first.lower()
        if keyword == ".model":
            return _plain_model(card, fields)
        if keyword == ".op":
            return RawAnalysis("op", card) if len(fields) == 1 else None
        if keyword == ".param":
            return _plain_param(card, fields)
        if _OPTIONS_CARD.fullmatch(first):
            return RawSetting("options", card, items=_plain_items(fields, 1, _plain_number))
        if _KEPT_CARD.fullmatch(first) and "{" not in text:
            return RawKept(keyword, card)
    except (_NotPlain, NumberError):
        return None
    return None


def _braced_fields(text: str) -> list[tuple[str, int]] | None:
    """The fields of a card with braces, each `{name}` or `{number}` one field; None when a brace
    is not part of such a field (an expression the parser reads)."""
    fields = [(match.group(), match.start()) for match in _PLAIN_FIELD_BRACED.finditer(text)]
    braced = sum(1 for field_text, _ in fields if field_text[0] == "{")
    if braced != text.count("{") or braced != text.count("}"):
        return None
    return fields


def _braced(field: tuple[str, int]) -> Literal | Reference:
    """`{name}` or `{number}`, as the grammar's `braced` reads it (a number there takes no MIL)."""
    inner, offset = field[0][1:-1], field[1] + 1
    if inner[0] in "0123456789.":
        return Literal(parse_number(inner, allow_mil=False), offset)
    return Reference(inner, offset)


def _plain_word(fields: list[tuple[str, int]], index: int) -> tuple[str, int]:
    if index >= len(fields) or fields[index][0] in _SEPARATORS or fields[index][0][0] == "{":
        raise _NotPlain
    return fields[index]


def _plain_value(fields: list[tuple[str, int]], index: int) -> tuple[str, int]:
    """A field where the grammar takes a `value`: a word or a braced field."""
    if index >= len(fields) or fields[index][0] in _SEPARATORS:
        raise _NotPlain
    return fields[index]


def _plain_number(field: tuple[str, int]) -> Literal | Reference:
    if field[0][0] == "{":
        return _braced(field)
    return Literal(parse_number(field[0]), field[1])


def _plain_model_value(field: tuple[str, int]) -> Literal | Reference | ModelText:
    if field[0][0] == "{":
        return _braced(field)
    try:
        return Literal(parse_number(field[0]), field[1])
    except NumberError:
        return ModelText(field[0], field[1])


def _plain_param(card: LogicalCard, fields: list[tuple[str, int]]) -> RawParams:
    """`.param name=value ...`, each value one name, one number or one of those braced."""
    assignments: list[Assignment] = []
    index = 1
    while index < len(fields):
        name, offset = fields[index]
        if index + 2 >= len(fields) or fields[index + 1][0] != "=" or not _EXPRESSION_NAME.fullmatch(name):
            raise _NotPlain
        text, at = fields[index + 2]
        if text[0] == "{":
            value: Expr = _braced(fields[index + 2])
        elif _EXPRESSION_NUMBER.fullmatch(text):
            value = Literal(parse_number(text, allow_mil=False), at)
        elif _EXPRESSION_NAME.fullmatch(text):
            value = Reference(text, at)
        else:
            raise _NotPlain
        assignments.append(Assignment(name, value, offset))
        index += 3
    if not assignments:
        raise _NotPlain
    return RawParams(tuple(assignments), card)


def _plain_items(
    fields: list[tuple[str, int]], start: int, value_of, *, model: bool = False, positional: bool = False
) -> tuple[Item, ...]:
    """`name=value` and lone words from `fields[start:]`; in a `.model` card, parentheses and
    commas only separate; where `positional`, a lone braced field is a positional value."""
    items: list[Item] = []
    index = start
    while index < len(fields):
        text, offset = fields[index]
        if text[0] == "{":
            if not positional or (index + 1 < len(fields) and fields[index + 1][0] == "="):
                raise _NotPlain
            value = _braced(fields[index])
            items.append(Positional(value, value.offset))
            index += 1
            continue
        if text.lower() in _KEYWORDS:
            # Read after a value, `dc`, `ac` or a waveform's name is the source keyword (the
            # parser's state after a value is shared with the sources'), which the card refuses.
            raise _NotPlain
        if text in _SEPARATORS:
            if model and text != "=":
                index += 1
                continue
            raise _NotPlain
        if index + 1 < len(fields) and fields[index + 1][0] == "=":
            items.append(Assignment(text, value_of(_plain_value(fields, index + 2)), offset))
            index += 3
        else:
            items.append(Word(text, offset))
            index += 1
    return tuple(items)


def _plain_element(card: LogicalCard, fields: list[tuple[str, int]], letter: str) -> RawElement:
    name = _plain_word(fields, 0)[0]
    count = _NODE_COUNTS[letter]
    nodes = tuple(_plain_word(fields, index) for index in range(1, 1 + count))
    if letter == "m":
        model = _plain_word(fields, 1 + count)
        return RawElement(letter, name, nodes, card, model=Word(*model),
                          items=_plain_items(fields, 2 + count, _plain_number, positional=True))
    value = _plain_number(_plain_value(fields, 3))
    return RawElement(letter, name, nodes, card, value=value,
                      items=_plain_items(fields, 4, _plain_number, positional=True))


def _plain_source(card: LogicalCard, fields: list[tuple[str, int]], letter: str) -> RawElement:
    """`Vname n+ n- [value] [DC [=] value] [AC [=] [mag [phase]]]...` (no waveform)."""
    name = _plain_word(fields, 0)[0]
    nodes = (_plain_word(fields, 1), _plain_word(fields, 2))

    def is_value(index: int) -> bool:
        if index >= len(fields) or fields[index][0] in _SEPARATORS:
            return False
        word = fields[index][0].lower()
        if word in _WAVEFORMS:
            raise _NotPlain
        return word not in _SOURCE_KEYWORDS

    index, value = 3, None
    if is_value(index):
        value = _plain_number(fields[index])
        index += 1
    parts: list[SourcePart] = []
    while index < len(fields):
        keyword = _plain_word(fields, index)[0].lower()
        if keyword not in _SOURCE_KEYWORDS:
            raise _NotPlain
        index += 1
        if index < len(fields) and fields[index][0] == "=":
            index += 1
        if keyword == "dc":
            if not is_value(index):
                raise _NotPlain
            parts.append(DcPart(_plain_number(fields[index])))
            index += 1
        else:
            values: list[Expr] = []
            while len(values) < 2 and is_value(index):
                values.append(_plain_number(fields[index]))
                index += 1
            parts.append(AcPart(values[0] if values else None, values[1] if len(values) > 1 else None))
    return RawElement(letter, name, nodes, card, value=value, source_parts=tuple(parts))


def _plain_model(card: LogicalCard, fields: list[tuple[str, int]]) -> RawModel:
    name = _plain_word(fields, 1)[0]
    type_ = _plain_word(fields, 2)
    return RawModel(name, Word(*type_), _plain_items(fields, 3, _plain_model_value, model=True), card)
