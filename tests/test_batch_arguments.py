"""A fuzz of the command line: random option lists for each command end in exit 0, 1 or 2 with
no traceback. The options are read from the parser itself, so a new option is fuzzed too.

Each example runs `bridge.cli.main` in this process (a subprocess each would cost a second of
imports); what escapes `main` other than SystemExit is the failure. The working folder is a
fresh temporary one holding copies of a few corpus netlists, so whatever a command writes
(`--plot`, `--csv`) lands there. Derandomized; more examples under the `slow` mark.
"""

from __future__ import annotations

import argparse
import os
import shutil
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bridge.cli import build_parser, main

CORPUS = Path(__file__).resolve().parent / "batch_corpus"
NETLISTS = ("cs_hive_scale.cir", "sf_hive_temp.cir", "param_max_one.cir", "binary_noise.cir", "empty.cir",
            "subckt_params.cir", "control_block.cir")
TARGETS = "[M1]\nregion = \"saturation\"\nid = \"100u\"\n"
VALUES = (
    "", "0", "-1", "1", "5%", "0.05", "250%", "abc", "1e400", "nan", "inf", "-inf", "-10m", "1k", "2.5", "1e-12",
    "VG", "vdd", "d", "nowhere", "M1", "scale", "path,op", ",", "text", "json", "out.csv", "out.png", "out.svg",
    "out.pdf", "missing/out.csv", "cs_hive_scale.cir", ".", "/", "targets.toml", "junk.toml", "µ", "\u00e9\u00e8",
    "--", "-", "--json", "x" * 300,
)


def _verb_options(verb: str) -> list[tuple[str, bool]]:
    """(option, takes a value) for each option of a command, from the parser."""
    parser = build_parser()
    verbs = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    options: list[tuple[str, bool]] = []
    for action in verbs.choices[verb]._actions:
        if isinstance(action, argparse._HelpAction) or not action.option_strings:
            continue
        takes_value = action.nargs != 0
        options.extend((option, takes_value) for option in action.option_strings)
    return options


def _argument_lists(verb: str) -> st.SearchStrategy[list[str]]:
    options = _verb_options(verb)
    option = st.sampled_from(options).flatmap(
        lambda o: st.sampled_from(VALUES).map(lambda v: [o[0], v]) if o[1] else st.just([o[0]])
    )
    stray = st.sampled_from(VALUES).map(lambda v: [v])
    files = st.lists(st.sampled_from(NETLISTS), min_size=0, max_size=3)
    pieces = st.lists(st.one_of(option, option, stray), max_size=6).map(lambda parts: sum(parts, []))
    return st.tuples(pieces, files, st.booleans()).map(
        lambda t: [verb, *t[0], *t[1]] if t[2] else [verb, *t[1], *t[0]]
    )


@pytest.fixture
def workspace(tmp_path_factory):
    folder = tmp_path_factory.mktemp("arguments")
    for name in NETLISTS:
        shutil.copyfile(CORPUS / name, folder / name)
    (folder / "targets.toml").write_text(TARGETS)
    (folder / "junk.toml").write_bytes(b"[[[ \x00 not toml")
    before = os.getcwd()
    os.chdir(folder)
    try:
        yield folder
    finally:
        os.chdir(before)


def _fuzz(verb: str, examples: int, capsys) -> None:
    @settings(max_examples=examples, derandomize=True, database=None, deadline=None,
              suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
    @given(_argument_lists(verb))
    def run(argv: list[str]) -> None:
        try:
            status = main(argv)
        except SystemExit as exc:  # argparse's own refusals and --help
            status = exc.code if isinstance(exc.code, int) else 2
        captured = capsys.readouterr()
        assert status in (0, 1, 2), (argv, status, captured.err[-2000:])
        assert "Traceback" not in captured.err, (argv, captured.err[-2000:])

    run()


# How many examples each command gets by default: parse and lint are quick; check, sweep and gain
# start ngspice for each example (0.1-0.3 s), spread solves its corners and runs the worst in ngspice.
QUICK = {"parse": 60, "lint": 40, "check": 20, "sweep": 15, "gain": 12, "spread": 12}


@pytest.mark.parametrize("verb", list(QUICK))
def test_random_option_lists_end_in_exit_0_1_or_2_without_a_traceback(verb, workspace, capsys):
    _fuzz(verb, QUICK[verb], capsys)


@pytest.mark.slow
@pytest.mark.parametrize("verb", list(QUICK))
def test_many_random_option_lists_end_in_exit_0_1_or_2_without_a_traceback(verb, workspace, capsys):
    """Slow (a few seconds per command): 100 option lists per command, ngspice started for each
    check and sweep."""
    _fuzz(verb, 100, capsys)


@pytest.mark.parametrize("verb", ["check", "lint", "sweep"])
@pytest.mark.parametrize("seconds", ["inf", "1e400", "1e9", "nan"])
def test_a_simulator_timeout_beyond_a_day_or_not_a_number_is_refused(verb, seconds, workspace, capsys):
    # inf and 1e400 raised OverflowError from the wait for ngspice, 1e9 "timeout is too large"
    # (epoll counts milliseconds in a C int), and nan was taken as a timeout.
    try:
        status = main([verb, "--sim-timeout", seconds, "cs_hive_scale.cir"])
    except SystemExit as exc:
        status = exc.code
    err = capsys.readouterr().err
    assert status == 2
    expected = "is not a number of seconds" if seconds == "nan" else "the timeout must be at most 86400 seconds"
    assert expected in err and "Traceback" not in err


# spread's values: most option lists of the shared fuzz stop at the parser, so spread also gets lists
# built to reach the solver: a netlist first, then options with values of the kinds spread reads.
SPREAD_VALUES = ("5", "10%", "0", "100", "99.9", "-5", "1e400", "nan", "50m", "0.2", "-40:125", "125:-40", "20:20",
                 "-300:20", "-1e3:1e3", "1:2:3", "spread.toml", "junk.toml", "targets.toml", "out.svg", "uniform",
                 "normal", "1", "7")  # fmt: skip
SPREAD_TOLERANCES = "[resistors]\ndefault = 5\n[models.NHIVE]\nvto = \"50m\"\n[temperature]\nrange = [-40, 125]\n"


def _spread_lists() -> st.SearchStrategy[list[str]]:
    options = [o for o in _verb_options("spread") if o[0] != "--samples"]
    option = st.sampled_from(options).flatmap(
        lambda o: st.sampled_from(SPREAD_VALUES).map(lambda v: [o[0], v]) if o[1] else st.just([o[0]])
    )
    samples = st.sampled_from(("1", "40", "0", "x")).map(lambda v: ["--samples", v])
    pieces = st.lists(option, min_size=1, max_size=5).map(lambda parts: sum(parts, []))
    return st.tuples(st.sampled_from(NETLISTS[:3]), pieces, samples).map(lambda t: ["spread", t[0], *t[1], *t[2]])


def test_random_spread_option_lists_end_in_exit_0_1_or_2_without_a_traceback(workspace, capsys):
    """`spread`: the shared fuzz (its options from the parser), then option lists that reach the
    solver and ngspice's corner check (started for each example that gets that far)."""
    _fuzz("spread", 30, capsys)
    (workspace / "spread.toml").write_text(SPREAD_TOLERANCES)
    statuses = []

    @settings(max_examples=25, derandomize=True, database=None, deadline=None,
              suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
    @given(_spread_lists())
    def run(argv: list[str]) -> None:
        try:
            status = main(argv)
        except SystemExit as exc:
            status = exc.code if isinstance(exc.code, int) else 2
        captured = capsys.readouterr()
        assert status in (0, 1, 2), (argv, status, captured.err[-2000:])
        assert "Traceback" not in captured.err, (argv, captured.err[-2000:])
        statuses.append(status)

    run()
    assert {0, 1} & set(statuses)  # some lists were solved, not all refused
