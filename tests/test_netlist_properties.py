"""Properties of the netlist front end over inputs nobody wrote by hand.

Whatever text arrives — noise, binary junk, a real netlist with a slip of the keyboard — the
front end either understands it or raises NetlistError at a place in the file; and whatever it
understands, it writes back as a deck it reads again to the same deck.

Runs are derandomized and keep no example database, so CI sees the same inputs every time.
"""

from __future__ import annotations

import contextlib
import re
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bridge.netlist import NetlistError, parse_netlist
from bridge.netlist.emit import emit, number

BUNDLED = Path(__file__).resolve().parents[1] / "netlists"
NAME = "fuzz.cir"

# Includes in the examples (`.include models/...`) resolve against the bundled folder.
DIRECTORY = str(BUNDLED)

# Richer seeds than the bundled examples: parameters, subcircuits, every source form.
PARAMETRISED = """\
.title two stages from one subcircuit
.param vsup=5 wn={2*10u}
.param lch = 2u  rtop='vsup*66k'
.func half(x) {x/2}
VSUP vdd 0 {vsup}
.subckt csstage in out supply params: rd=10k w=10u
VMEAS supply top 0
RD top out {rd}
M1 out in 0 0 nch W={w} L={lch}
.ends csstage
.model nch nmos (vto=0.7 kp=120u
* a comment between a card and its continuation
+ lambda=0.02)
R1 vdd g1 {rtop}
R2 g1 0 {half(240k)}
X1 g1 d1 vdd csstage rd=15k w={wn}
X2 d1 d2 vdd csstage params: rd=22k
.options reltol=1e-4 gmin=1e-12
.temp 27
.op
.end
"""
SOURCES = """\
M1 test: every source form
VIN in 0 SIN(0.5 1 1k)
VP p 0 PULSE 0 5 1n 1n 1n 1u 2u
VREF ref 0 dc=2 ac 1 90
IB 0 b DC 1mA
RIN in 0 1k
RP p 0 1k
RB b 0 1K
E1 e 0 ref 0 2.5
RE e 0 10k
G1 0 g ref 0 1m
RG g 0 2k
VSENSE e s 0
RS s 0 4.7k
F1 0 f VSENSE 3
RF f 0 1k
H1 h 0 VSENSE 1k
RH h 0 1k
.model dmod d (is=1e-14 n=1.05)
D1 h 0 dmod 2
.model qn npn (bf=100)
Q1 f b 0 qn
.ic v(in)=0.5
.nodeset v(e)=5
.dc VREF 0 2 0.5
.op
.end
"""
SEEDS = tuple(p.read_text(encoding="utf-8") for p in sorted(BUNDLED.glob("*.cir"))) + (PARAMETRISED, SOURCES)



def reproducible(max_examples: int) -> settings:
    """Fixed inputs, no example database, no deadline: the same run on every machine."""
    return settings(
        max_examples=max_examples,
        derandomize=True,
        database=None,
        deadline=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    )


def at_two_depths(quick: int, thorough: int, *strategies):
    """The property below, checked on `quick` fixed examples in every run (a few hundred, a few
    seconds at most) and again on `thorough` examples under the `slow` mark, which `make test`
    and CI run and `pytest -m "not slow"` leaves out: those runs take 5–15 s each on a shared
    2-core machine, the price of thousands of inputs."""

    def decorate(body):
        def test(examples: int) -> None:
            reproducible(examples)(given(*strategies)(body))()

        test.__name__, test.__qualname__ = body.__name__, body.__qualname__
        test.__doc__ = ((body.__doc__ or "").strip() + f"\n\nAt {thorough} examples (the `slow` mark) this takes "
                        "over 5 s: thousands of inputs are the point of a property test.").strip()
        depths = [pytest.param(quick, id=f"{quick}-examples"),
                  pytest.param(thorough, id=f"{thorough}-examples", marks=pytest.mark.slow)]
        return pytest.mark.parametrize("examples", depths)(test)

    return decorate


# ---- strategies -----------------------------------------------------------------------------

SPICE_CHARACTERS = (
    "RCLVIEGFHDMQXrclviegfhdmqx0123456789.=(){}'+-*/^,;$#:_ \t\n\r"
    "ekKuUnNpPmMgGtTfFaAs\u00b5\u00a0\ufeff\x00\x0b\x0c\x1c\x85\u2028"
)
SPICE_WORDS = (
    ".model", ".MODEL", ".param", ".func", ".subckt", ".ends", ".include", ".inc", ".lib", ".endl",
    ".control", ".endc", ".end", ".op", ".dc", ".options", ".opt", ".temp", ".ic", ".nodeset",
    ".global", ".title", ".save", ".print", ".tran", "nmos", "pmos", "npn", " d ", "dc", "DC", "ac",
    "sin", "PULSE", "pwl", "exp", "sffm", "params:", "meg", "mil", "level=1", "vto=0.7", "W=10u",
    "L=2u", "R1 a 0 1k", "V1 a 0 5", "M1 d g 0 0 nch", "X1 a b sub", " $ ", " // ", "; ", "\r\n",
    "\n", "\n+", "\n+ ", "\n*", "\n\n", "{", "}", "'", "(", ")", "=", "1e308", "gnd", "0",
    "models/buoy_devices.lib", "bench_session.cir",
)

# Arbitrary code points (control characters included; lone surrogates have their own test).
any_character = st.characters(exclude_categories=["Cs"])
noise = st.text(alphabet=st.one_of(st.sampled_from(SPICE_CHARACTERS), any_character), max_size=400)
word_salad = st.lists(
    st.one_of(st.sampled_from(SPICE_WORDS), st.text(alphabet=SPICE_CHARACTERS, max_size=5)), max_size=80
).map("".join)
titled = st.tuples(st.sampled_from(["", "title\n", "M1 test\r\n", ".title t\n"]), word_salad).map("".join)
undecodable = st.one_of(
    st.binary(max_size=400).map(lambda data: data.decode("utf-8", errors="surrogateescape")),
    st.binary(max_size=400).map(lambda data: data.decode("latin-1")),
)
random_text = st.one_of(noise, word_salad, titled, undecodable)

INSERTIONS = (
    "=", "(", ")", "{", "}", "'", "+", "*", ";", "$", " $ ", "//", " // ", ",", "-", "^", ".",
    "0", "1", "7", "9", "e", "e-3", "e+400", "k", "K", "meg", "MEG", "mil", "m", "u", "n", "p", "f",
    "t", "g", "a", "Ohm", "\n", "\r\n", "\r", "\t", " ", "\n+", "\n+ ", "\n*", "\n* c\n", "\n.end\n",
    "\n.control\n", "\n.endc\n", "\n.ends\n", ".param ", "{x}", "'1+'", "\u00b5", "\x00", "\x0c",
    "\ufeff", "\u00a0", "params:", "dc=", " ac ", " sin(", " pulse ",
)


@st.composite
def mutated_netlists(draw) -> str:
    """A real netlist after a few slips: characters, tokens, line ends and whole lines."""
    text = draw(st.sampled_from(SEEDS))
    for _ in range(draw(st.integers(1, 5))):
        operation = draw(
            st.sampled_from(
                [
                    "delete", "duplicate", "swap", "insert", "insert-char", "truncate", "splice-line",
                    "delete-line", "duplicate-line", "swap-lines", "crlf", "tabs", "case",
                ]
            )
        )
        at = draw(st.integers(0, max(0, len(text) - 1)))
        lines = text.splitlines(keepends=True) or [""]
        line_at = draw(st.integers(0, len(lines) - 1))
        if operation == "delete":
            text = text[:at] + text[at + 1 :]
        elif operation == "duplicate":
            text = text[: at + 1] + text[at:]
        elif operation == "swap" and at + 1 < len(text):
            text = text[:at] + text[at + 1] + text[at] + text[at + 2 :]
        elif operation == "insert":
            text = text[:at] + draw(st.sampled_from(INSERTIONS)) + text[at:]
        elif operation == "insert-char":
            text = text[:at] + draw(any_character) + text[at:]
        elif operation == "truncate":
            text = text[:at]
        elif operation == "splice-line":
            donor = draw(st.sampled_from(SEEDS)).splitlines(keepends=True)
            lines.insert(line_at, draw(st.sampled_from(donor)))
            text = "".join(lines)
        elif operation == "delete-line":
            del lines[line_at]
            text = "".join(lines)
        elif operation == "duplicate-line":
            lines.insert(line_at, lines[line_at])
            text = "".join(lines)
        elif operation == "swap-lines":
            other = draw(st.integers(0, len(lines) - 1))
            lines[line_at], lines[other] = lines[other], lines[line_at]
            text = "".join(lines)
        elif operation == "crlf":
            text = text.replace("\r\n", "\n").replace("\n", "\r\n")
        elif operation == "tabs":
            tail = text[at:].replace(" ", "\t", -1 if draw(st.booleans()) else 1)
            text = text[:at] + tail
        elif operation == "case":
            stop = draw(st.integers(at, len(text)))
            text = text[:at] + text[at:stop].swapcase() + text[stop:]
    return text


# Characters a name may hold once the grammar has split the card into fields.
NAME_CHARACTERS = "abcxyzABCXYZ0123456789+-_.$/#*:!?<>[]|&%@~\"\u00e9\u00b5"
# Source keywords are valid node names too (ngspice reads `R1 a dc 1k` as a node `dc`).
SOURCE_KEYWORDS = {"dc", "ac", "sin", "pulse", "pwl", "exp", "sffm"}
odd_names = st.one_of(
    st.text(alphabet=NAME_CHARACTERS, min_size=1, max_size=6), st.sampled_from(sorted(SOURCE_KEYWORDS))
)
mantissas = st.one_of(
    st.integers(0, 10**6).map(str),
    st.tuples(st.integers(0, 9999), st.integers(0, 9999)).map(lambda parts: f"{parts[0]}.{parts[1]}"),
    st.integers(0, 9999).map(lambda digits: f".{digits}"),
)
exponents = st.one_of(st.just(""), st.integers(-30, 30).map(lambda power: f"e{power:+d}"))
suffixes = st.sampled_from(
    ["", "", "k", "K", "meg", "MEG", "Meg", "m", "M", "u", "U", "n", "p", "f", "t", "g", "mil", "a",
     "Ohm", "ohms", "uF", "V", "mA", "kHz", "MHz"]
)
spice_numbers = st.tuples(st.sampled_from(["", "", "-", "+"]), mantissas, exponents, suffixes).map("".join)
values = st.one_of(
    spice_numbers,
    spice_numbers.map(lambda number: f"{{{number.lstrip('+')}*2}}"),
    spice_numbers.map(lambda number: f"'p1+{number.lstrip('+')}'"),
)


@st.composite
def generated_circuits(draw) -> str:
    """A netlist assembled from every card form, with odd names and numbers in every notation."""
    model, node = (
        draw(st.lists(odd_names, min_size=count, max_size=count, unique_by=str.lower)) for count in (5, 6)
    )

    def v() -> str:
        return draw(values)

    def word(choices: list[str]) -> str:
        return draw(st.sampled_from(choices))

    always = [
        f".param p1={draw(spice_numbers)} p2 = {draw(spice_numbers)}",
        f".model {model[0]} nmos (level=1 vto={v()} kp={v()} lambda={v()})",
        f".model {model[1]} pmos vto={v()} kp={v()}",
        f".model {model[2]} d (is={v()} n={v()})",
        f".model {model[3]} npn (bf={v()})",
        f"VS {node[4]} {node[5]} 0",
    ]
    optional = [
        lambda: f"V1 {node[0]} 0 {word(['', 'DC ', 'dc=', 'dc = '])}{v()}",
        lambda: f"V2 {node[1]} 0 {word(['sin', 'SIN'])}({v()} {v()} {v()})",
        lambda: f"V3 {node[2]} 0 PULSE {v()} {v()} {v()}",
        lambda: f"I1 {node[0]} {node[1]} dc {v()} ac {v()}",
        lambda: f"R1 {node[0]} {node[1]} {v()}",
        lambda: f"C1 {node[1]} {node[2]} {v()}",
        lambda: f"L1 {node[2]} 0 {v()}",
        lambda: f"E1 {node[3]} 0 {node[0]} {node[1]} {v()}",
        lambda: f"G1 {node[3]} 0 {node[1]} 0 {v()}",
        lambda: f"F1 {node[5]} 0 VS {v()}",
        lambda: f"H1 {node[3]} 0 VS {v()}",
        lambda: f"M1 {node[1]} {node[2]} {node[3]} 0 {model[0]} W={v()} L = {v()} M={v()}",
        lambda: f"M2 {node[2]} {node[1]} {node[0]} {node[0]} {model[1]} w={v()} l={v()} off",
        lambda: f"D1 {node[4]} {node[5]} {model[2]} {v()}",
        lambda: f"Q1 {node[0]} {node[1]} {node[2]} {model[3]}",
        lambda: (
            f".subckt {model[4]} a b params: r={v()}\n"
            "R1 a mid {r}\n"
            f"D1 mid b {model[2]}\n"
            ".ends\n"
            f"X1 {node[0]} {node[4]} {model[4]} r={v()}"
        ),
        lambda: f".options reltol={v()} {word(['', 'noacct'])}",
        lambda: f".temp {v()}",
        lambda: f".ic v({node[0]})={v()}",
        lambda: f".nodeset v({node[1]})={v()}",
        lambda: ".op",
        lambda: f".dc VS 0 {draw(st.integers(1, 5))} 1",
    ]
    keep = draw(st.lists(st.booleans(), min_size=len(optional), max_size=len(optional)))
    cards = always + [make() for make, kept in zip(optional, keep, strict=True) if kept]
    title = word(["generated", "M1 test", ".title generated", "*starred title"])
    return "\n".join([title, *cards, ".end", ""])


# ---- what a located error must look like ------------------------------------------------------

_HEAD = re.compile(r"(?P<line>\d+):(?P<column>\d+): (?P<message>.+)", re.DOTALL)


def physical_lines(data: bytes) -> list[str]:
    """A file's lines as a reader counts them: `\\n`, `\\r\\n` and `\\r` each end one."""
    text = data.decode("utf-8", errors="replace")
    return text.replace("\r\n", "\n").replace("\r", "\n").split("\n")


def assert_located(error: NetlistError, text: str) -> None:
    """`FILE:LINE:COL: message`, LINE in the file, the shown line the file's own."""
    first, *rest = error.render().split("\n")
    file = error.location.file
    if file == NAME:
        lines = physical_lines(text.encode("utf-8", errors="replace"))
    else:
        # An error in a card of an included file is placed in that file.
        assert Path(file).is_file(), f"error placed in {file!r}, neither {NAME} nor an included file"
        lines = physical_lines(Path(file).read_bytes())
    assert first.startswith(f"{file}:"), first
    head = _HEAD.fullmatch(first[len(file) + 1 :])
    assert head is not None, first
    line, column = int(head["line"]), int(head["column"])
    assert head["message"].strip()
    assert 1 <= line <= len(lines), f"line {line} of a {len(lines)}-line file: {first}"
    assert column >= 1
    if error.source_line is not None:
        assert error.source_line == lines[line - 1]
        assert column <= len(error.source_line) + 1, f"column {column} beyond the line: {first}"
        assert rest[0] == "    " + error.source_line.expandtabs(1)
        if error.caret:
            assert rest[1] == "    " + " " * (column - 1) + "^"


def parse(text: str):
    return parse_netlist(text, NAME, DIRECTORY)


# ---- (a) and (b): nothing but NetlistError ------------------------------------------------------


@at_two_depths(300, 2000, random_text)
def test_random_text_is_understood_or_refused_with_a_netlist_error(text):
    with contextlib.suppress(NetlistError):
        parse(text)


@at_two_depths(300, 2500, mutated_netlists())
def test_mistyped_netlist_is_understood_or_refused_with_a_netlist_error(text):
    with contextlib.suppress(NetlistError):
        parse(text)


# ---- (c): every error has a place in the file ---------------------------------------------------


@at_two_depths(300, 2000, st.one_of(mutated_netlists(), random_text))
def test_every_netlist_error_renders_file_line_column_inside_the_file(text):
    try:
        parse(text)
    except NetlistError as error:
        assert_located(error, text)


# ---- (d): emit is canonical -----------------------------------------------------------------------


def assert_emit_is_a_fixed_point(circuit) -> None:
    deck = emit(circuit).text
    again = parse_netlist(deck, "emitted.cir", DIRECTORY)  # never a NetlistError: emit writes valid decks
    assert emit(again).text == deck


@pytest.mark.parametrize("seed", range(len(SEEDS)))
def test_emit_parse_emit_is_a_fixed_point_for_every_seed_netlist(seed):
    assert_emit_is_a_fixed_point(parse(SEEDS[seed]))


@at_two_depths(300, 2000, mutated_netlists())
def test_emit_parse_emit_is_a_fixed_point_for_whatever_parses(text):
    try:
        circuit = parse(text)
    except NetlistError:
        return
    assert_emit_is_a_fixed_point(circuit)


@at_two_depths(100, 400, generated_circuits())
def test_emit_parse_emit_is_a_fixed_point_for_generated_circuits(text):
    try:
        circuit = parse(text)
    except NetlistError as error:
        assert_located(error, text)
        return
    assert_emit_is_a_fixed_point(circuit)


@at_two_depths(300, 3000, st.floats(allow_nan=False, allow_infinity=False))
def test_emitted_number_reads_back_as_the_same_float(value):
    circuit = parse(f"title\nV1 a 0 dc {number(value)}\n.end\n")
    assert circuit.element("V1").value == value


# ---- regressions the properties point at ------------------------------------------------------------


@reproducible(50)
@given(st.text(alphabet=st.characters(categories=["Cs"]), min_size=1, max_size=3))
def test_text_with_lone_surrogates_is_refused_with_a_netlist_error(junk):
    with pytest.raises(NetlistError) as refused:
        parse(f"title\nR1 a 0 1{junk}\n.end\n")
    assert refused.value.location.line == 2


def test_number_overflowing_through_meg_is_refused_where_it_is_written():
    with pytest.raises(NetlistError) as refused:
        parse("title\nR1 a 0 1e308meg\n.end\n")
    assert refused.value.location.line == 2


@pytest.mark.parametrize("title", [".TITLE.TITLE", ".title .title amplifier"])
def test_title_starting_with_title_twice_is_a_fixed_point(title):
    assert_emit_is_a_fixed_point(parse(f"{title}\nR1 a 0 1\n.end\n"))


@pytest.mark.parametrize(
    "card", ["R1 a dc 1k", "V1 a ac 1", "M1 d sin s 0 m", "D1 a exp dm", "E1 a 0 pulse 0 2"]
)
def test_node_named_like_a_source_keyword_is_a_node_as_in_ngspice(card):
    # reference: ngspice 39 run directly in batch mode reads each of these cards with the
    # keyword as a node (nodes `dc`, `ac`, `sin`, `exp`, `pulse` in its `.op` table)
    circuit = parse(f"title\n.model m nmos\n.model dm d\n{card}\n.end\n")
    assert any(keyword in circuit.nodes() for keyword in SOURCE_KEYWORDS)


def test_subcircuit_port_bound_to_a_keyword_named_node_emits_a_readable_deck():
    assert_emit_is_a_fixed_point(
        parse("title\n.model dm d\n.subckt s a b\nD1 a b dm\n.ends\nX1 0 AC s\n.end\n")
    )


def test_model_parameter_that_is_not_a_name_is_refused_where_it_is_written():
    # `//x` would be emitted after a blank, where SPICE reads a comment: refused instead.
    with pytest.raises(NetlistError) as refused:
        parse("title\n.model m nmos(//x=1 vto=1)\nM1 a a 0 0 m\n.end\n")
    assert refused.value.location.line == 2 and refused.value.location.column == 15
