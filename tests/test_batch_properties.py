"""Random card text and random bytes through the reader: a Circuit, or NetlistError at a place in
the file; no other exception. Seeds are the corpus of tests/batch_corpus/.

The expression strategy calls every built-in function with zero to four arguments, user `.func`s
that may call each other, and left-grouped chains long enough to matter: the front end's earlier
property tests had no function calls, which is how `max(x)` (TypeError) slipped through.

Runs are derandomized with no example database, so CI sees the same inputs every time: a few
hundred examples each by default, thousands under the `slow` mark.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bridge.netlist import NetlistError, parse_netlist, read_netlist
from bridge.netlist.expressions import BUILTINS

CORPUS = Path(__file__).resolve().parent / "batch_corpus"
SEEDS = tuple(path.read_bytes() for path in sorted(CORPUS.glob("*.cir")))
STAGE = "VDD vdd 0 3.3\nRD vdd d {p}\nM1 d g 0 0 NHIVE W=10u L=1u\nVG g 0 1.1\n.model NHIVE nmos (vto=0.6 kp=150u)\n"


def at_two_depths(quick: int, thorough: int):
    """The property on `quick` fixed examples in every run, and on `thorough` under `slow`."""

    def decorate(body):
        def test(examples: int, tmp_path_factory) -> None:
            folder = tmp_path_factory.mktemp("reader")
            run = settings(max_examples=examples, derandomize=True, database=None, deadline=None,
                           suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
            run(given(st.data())(lambda data: body(data, folder)))()

        test.__name__, test.__qualname__ = body.__name__, body.__qualname__
        test.__doc__ = (body.__doc__ or "") + (
            f"\n\nAt {thorough} examples (the `slow` mark) this takes seconds: a thousand inputs and more are "
            "the point of a property test.")
        depths = [pytest.param(quick, id=f"{quick}-examples"),
                  pytest.param(thorough, id=f"{thorough}-examples", marks=pytest.mark.slow)]
        return pytest.mark.parametrize("examples", depths)(test)

    return decorate


def _located(error: NetlistError, lines: int) -> None:
    assert error.location.line >= 1 and error.location.column >= 1
    assert error.location.line <= lines + 1, (error.location, lines)
    assert error.message and "Traceback" not in error.message


# ---- expressions ----------------------------------------------------------------------------

NUMBERS = st.sampled_from(["0", "1", "-1", "2.5", "4.7k", "10u", "1meg", "3µ", "1e308", "1e-320", "0.0", "7", "1mil"])
NAMES = st.sampled_from(["a", "b", "x", "vdd", "pi", "a", "b", "undefined_thing"])
FUNCTIONS = st.sampled_from([*BUILTINS, "f", "g", "nowhere"])
OPERATORS = st.sampled_from(["+", "-", "*", "/", "^", "**", " > ", " ? ", " : ", "==", "&&", "%"])


def _call(arguments: st.SearchStrategy[str]) -> st.SearchStrategy[str]:
    return st.tuples(FUNCTIONS, st.lists(arguments, max_size=4)).map(lambda c: f"{c[0]}({', '.join(c[1])})")


EXPRESSIONS = st.recursive(
    st.one_of(NUMBERS, NAMES),
    lambda inner: st.one_of(
        _call(inner),
        st.tuples(inner, OPERATORS, inner).map("".join),
        inner.map(lambda e: f"({e})"),
        inner.map(lambda e: f"-{e}"),
        st.tuples(inner, st.integers(2, 6)).map(lambda t: "+".join([t[0]] * t[1])),
    ),
    max_leaves=10,
)
# A long left-grouped run at the top: deeper than the evaluator's nesting limit if it recursed.
LONG_SUM = st.tuples(NUMBERS, st.integers(60, 1500)).map(lambda t: "+".join([t[0]] * t[1]))
FUNC_CARDS = st.lists(
    st.tuples(st.sampled_from(["f", "g"]), st.sampled_from(["x", "x, y", ""]), EXPRESSIONS).map(
        lambda t: f".func {t[0]}({t[1]}) {{{t[2]}}}"
    ),
    max_size=2,
)


@at_two_depths(200, 1000)
def test_param_expressions_are_read_or_refused_at_their_place(data, folder):
    """`.param` and `{}` values built from every function and operator, with `.func`s."""
    funcs = data.draw(FUNC_CARDS)
    values = st.one_of(EXPRESSIONS, LONG_SUM, st.tuples(EXPRESSIONS, LONG_SUM).map("*".join))
    params = data.draw(st.lists(st.tuples(st.sampled_from(["a", "b", "p"]), values), min_size=1, max_size=3))
    delimiters = data.draw(st.sampled_from(["{}", "''", "{}"]))
    text = "Beehive scale: expressions\n.param a = 1 b = 2.5 x = -3 vdd = 3.3\n" + "\n".join(funcs) + "\n" + "\n".join(
        f".param {name} = {delimiters[0]}{expr}{delimiters[1]}" for name, expr in params
    ) + "\n.param p = {abs(p) + 1}\n" * data.draw(st.booleans()) + STAGE + ".end\n"
    try:
        parse_netlist(text, "hive.cir", directory=str(folder))
    except NetlistError as error:
        _located(error, text.count("\n") + 1)


def test_every_built_in_function_with_zero_to_four_arguments_is_read_or_refused_at_the_call():
    """Each function of the expression language, with every argument count a card might hold:
    the property above draws from these and may miss one; here none is left to chance."""
    for function in BUILTINS:
        for count in range(5):
            arguments = ", ".join(["0.5", "2", "-3", "4.7k"][:count])
            text = f"Beehive scale: {function} with {count}\n.param p = {{1 + {function}({arguments})}}\n" + STAGE
            try:
                parse_netlist(text, "hive.cir")
            except NetlistError as error:
                assert (error.location.line, error.location.column) == (2, 17), (function, count, error)


# ---- cards and bytes ------------------------------------------------------------------------

CARD_WORDS = st.sampled_from([
    "M1", "Q1", "D1", "B1", "A1", "S1", "T1", "X1", "R1", "V1", "E1", ".model", ".param", ".func", ".subckt",
    ".ends", ".lib", ".endl", ".include", ".control", ".endc", ".meas", ".tran", ".ac", ".dc", ".op", ".end",
    "nmos", "pmos", "npn", "sw", "params:", "d", "g", "0", "vdd", "NHIVE", "W=10u", "L=1u", "level=8",
    "version=3.3.0", "max(1)", "{min(2,3)}", "V=", "I=", "SIN(0", "1", "1k)", "[a", "b]", "+", "*", "$", ";",
    "=", "(", ")", "{", "}", "'", ",", "\u00b5", "\u03bc", "\u2126", "\ufeff", "\t",
])
CARDS = st.lists(st.lists(CARD_WORDS, max_size=12).map(" ".join), max_size=20).map("\n".join)
LINE_ENDS = st.sampled_from([b"\n", b"\r\n", b"\r"])


@at_two_depths(300, 1000)
def test_random_cards_are_read_or_refused_at_their_place(data, folder):
    """Cards of random words from every element letter and dot card, any line ends."""
    text = "Beehive scale: random cards\n" + data.draw(CARDS) + "\n"
    raw = text.encode("utf-8").replace(b"\n", data.draw(LINE_ENDS))
    path = folder / "cards.cir"
    path.write_bytes(raw)
    try:
        read_netlist(path)
    except NetlistError as error:
        _located(error, text.count("\n") + 1)


@at_two_depths(300, 1000)
def test_corpus_files_cut_spliced_and_sprinkled_with_bytes_are_read_or_refused(data, folder):
    """A corpus netlist with lines dropped, repeated or swapped for random bytes."""
    lines = data.draw(st.sampled_from(SEEDS)).splitlines(keepends=True)
    for _ in range(data.draw(st.integers(0, 6))):
        if not lines:
            break
        where = data.draw(st.integers(0, len(lines) - 1))
        action = data.draw(st.sampled_from(["drop", "repeat", "bytes", "cut"]))
        if action == "drop":
            del lines[where]
        elif action == "repeat":
            lines.insert(where, lines[where])
        elif action == "bytes":
            lines[where] = data.draw(st.binary(max_size=60)) + b"\n"
        else:
            lines[where] = lines[where][: data.draw(st.integers(0, len(lines[where])))]
    raw = b"".join(lines)
    path = folder / "spliced.cir"
    path.write_bytes(raw)
    try:
        read_netlist(path)
    except NetlistError as error:
        _located(error, raw.count(b"\n") + raw.count(b"\r") + 1)


@at_two_depths(200, 2000)
def test_random_bytes_are_read_or_refused_at_their_place(data, folder):
    """Arbitrary bytes, alone or after a title line."""
    raw = data.draw(st.sampled_from([b"", b"Beehive scale\n"])) + data.draw(st.binary(max_size=600))
    path = folder / "bytes.cir"
    path.write_bytes(raw)
    try:
        read_netlist(path)
    except NetlistError as error:
        _located(error, raw.count(b"\n") + raw.count(b"\r") + 1)
