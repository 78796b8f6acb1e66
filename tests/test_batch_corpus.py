"""Every command over a whole folder of netlists in one process: nothing breaks the batch.

tests/batch_corpus/ holds netlists of our own in the styles of the public ngspice examples:
several devices, subcircuits with parameters, behavioural and XSPICE elements, `.func` and
`.param` expressions, `.control` blocks, analysis and `.meas` cards, includes that are missing,
binary and empty files, unicode, very long lines, CR/CRLF line ends. Some are stages biasbridge
checks; the rest it must refuse with a located message, the file's own finding, and go on.

Each command runs once over the whole corpus (`parse`, `check` and `lint` take every file in one
command line; `sweep`, `gain` and `spread` take one netlist, so one Python process calls them for
each file in turn) under a timeout, so a hang fails the test instead of stalling CI. `gain` and
`spread` run over a sample by default and over the whole corpus under the `slow` mark.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import REPO

CORPUS = Path(__file__).resolve().parent / "batch_corpus"
NETLISTS = sorted(path.name for path in CORPUS.glob("*.cir"))
TIMEOUT = 60  # seconds for a whole command over the corpus; each takes 1–3 s here

# The bad files are spread through the sorted list, so a batch that stopped at the first one
# would miss most of the good ones.
UNUSABLE_EXAMPLES = ("behavioural_b.cir", "binary_noise.cir", "empty.cir", "param_max_one.cir", "xspice_a.cir")

SWEEP_DRIVER = """\
import sys, traceback
from bridge.cli import main

options = sys.argv[1].split()
for path in sys.argv[2:]:
    for stream in (sys.stdout, sys.stderr):
        print(f"=== {path}", file=stream, flush=True)
    try:
        status = main(["sweep", path, *options])
    except SystemExit as exc:
        status = exc.code
    except BaseException:
        traceback.print_exc()
        status = "raised"
    sys.stdout.flush()
    print(f"=== status {status}", flush=True)
"""


def _run(arguments: list[str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, *arguments], capture_output=True, text=True, cwd=CORPUS, timeout=TIMEOUT,
        env=_environment(),
    )


def _environment() -> dict[str, str]:
    import os

    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(REPO), env.get("PYTHONPATH", "")])
    env["COLUMNS"] = "100"
    return env


def _located(stderr: str) -> dict[str, int]:
    """How many located errors (`FILE:LINE:COL: ...` at the start of a line) each file has."""
    counts: dict[str, int] = {}
    for match in re.finditer(r"^([^\s:]+\.cir):\d+:\d+: ", stderr, re.MULTILINE):
        counts[match.group(1)] = counts.get(match.group(1), 0) + 1
    return counts


def _no_traceback(completed: subprocess.CompletedProcess[str]) -> None:
    assert "Traceback" not in completed.stderr, completed.stderr[-3000:]
    assert completed.returncode in (0, 1, 2), (completed.returncode, completed.stderr[-3000:])


def test_the_corpus_is_a_folder_of_the_promised_size_and_kinds():
    assert 30 <= len(NETLISTS) <= 60
    assert set(UNUSABLE_EXAMPLES) <= set(NETLISTS)
    raw = {name: (CORPUS / name).read_bytes() for name in NETLISTS}
    assert raw["empty.cir"] == b""
    assert b"\r\n" in raw["crlf_ends.cir"]
    assert max(len(line) for text in raw.values() for line in text.splitlines()) > 10_000


@pytest.mark.parametrize("json_output", [True, False], ids=["json", "text"])
def test_parse_gives_one_result_or_one_located_error_per_file(json_output):
    completed = _run(["-m", "bridge", "parse", *(["--json"] if json_output else []), *NETLISTS])
    _no_traceback(completed)
    errors = _located(completed.stderr)
    if json_output:
        lines = [json.loads(line) for line in completed.stdout.splitlines()]
        assert [line["file"] for line in lines] == NETLISTS  # in order, the batch went on
        refused = {line["file"] for line in lines if "error" in line}
    else:
        shown = re.findall(r"^(\S+\.cir): ", completed.stdout, re.MULTILINE)
        refused = set(NETLISTS) - set(shown)
        assert sorted(shown + sorted(refused)) == NETLISTS
    assert errors == dict.fromkeys(refused, 1)
    assert set(UNUSABLE_EXAMPLES) <= refused
    assert completed.returncode == 2  # some files are unusable


@pytest.mark.parametrize("json_output", [True, False], ids=["json", "text"])
def test_check_gives_one_result_or_one_located_error_per_file(json_output):
    completed = _run(["-m", "bridge", "check", *(["--json"] if json_output else []), *NETLISTS])
    _no_traceback(completed)
    errors = _located(completed.stderr)
    if json_output:
        lines = [json.loads(line) for line in completed.stdout.splitlines()]
        assert [line["file"] for line in lines] == NETLISTS
        refused = {line["file"] for line in lines if "error" in line}
        assert len(refused) < len(NETLISTS) // 2 + 10
    else:  # the batch view: one row per file, in order; an unusable one says so
        rows = re.findall(r"^(\S+\.cir) \| .* \| (\w[\w ]*)$", completed.stdout, re.MULTILINE)
        assert [name for name, _ in rows] == NETLISTS
        refused = {name for name, verdict in rows if verdict == "unusable"}
    assert errors == dict.fromkeys(refused, 1)
    assert set(UNUSABLE_EXAMPLES) <= refused
    assert completed.returncode == 2


@pytest.mark.parametrize("form", ["json", "text"])
def test_lint_gives_each_unusable_file_one_finding_and_goes_on(form):
    completed = _run(["-m", "bridge", "lint", "--format", form, *NETLISTS])
    _no_traceback(completed)
    parse = _run(["-m", "bridge", "parse", "--json", *NETLISTS])
    unusable = {line["file"] for line in map(json.loads, parse.stdout.splitlines()) if "error" in line}
    if form == "json":
        findings = json.loads(completed.stdout)["findings"]
        located = [(f["file"], f["code"]) for f in findings]
    else:
        located = re.findall(r"^(\S+\.cir):\d+:\d+: \w+ (\S+) ", completed.stdout, re.MULTILINE)
    # A netlist that does not build gets one finding (parse-error, file-unreadable, or the
    # card code of the reader's refusal) and no rule runs on it.
    for name in unusable:
        assert len([file for file, _ in located if file == name]) == 1, name
    assert {file for file, _ in located} - unusable  # usable files further on were linted
    assert completed.returncode == 2


# The files `sweep` is quick to refuse, and a few stages it sweeps: the batch goes on through both.
SWEEP_SAMPLE = sorted({*UNUSABLE_EXAMPLES, "cs_hive_scale.cir", "crlf_ends.cir", "long_line.cir", "nul_bytes.cir",
                       "param_max_three.cir", "sf_hive_temp.cir", "huge_numbers.cir", "control_block.cir",
                       "extreme_diode_supply.cir", "extreme_length.cir"})  # extreme_supply: 6 s, in the slow run


def _sweep_batch(netlists: list[str], options: str) -> None:
    completed = _run(["-c", SWEEP_DRIVER, options, *netlists])
    assert "Traceback" not in completed.stderr, completed.stderr[-3000:]
    statuses = re.findall(r"^=== status (\S+)$", completed.stdout, re.MULTILINE)
    assert len(statuses) == len(netlists)
    assert set(statuses) <= {"0", "1", "2"}, statuses
    per_file = dict(zip(netlists, statuses, strict=True))
    assert all(per_file[name] == "2" for name in UNUSABLE_EXAMPLES if name in per_file)
    assert "0" in statuses or "1" in statuses  # the good stages were swept
    # each refused file says why, naming itself, in its own part of stderr
    parts = re.split(r"^=== (\S+\.cir)$", completed.stderr, flags=re.MULTILINE)[1:]
    for name, text in zip(parts[::2], parts[1::2], strict=True):
        if per_file[name] == "2":
            assert re.search(rf"^(biasbridge: error: )?{re.escape(name)}(:\d+:\d+)?: ", text, re.MULTILINE), text


@pytest.mark.parametrize("options", ["--json", ""], ids=["json", "text"])
def test_sweep_goes_on_past_refused_files_in_one_process(options):
    _sweep_batch(SWEEP_SAMPLE, options)


@pytest.mark.slow
def test_sweep_over_the_whole_corpus_in_one_process_never_raises():
    """Slow (12–30 s on a shared 2-core machine): every stage of the corpus is swept, ngspice's `.dc`
    runs included, with --json; the text view's own path is run over the sample above (the columns
    behind both are the same)."""
    _sweep_batch(NETLISTS, "--json")


# `gain` and `spread` take one netlist each, like `sweep`: one process calls the command for each file.
COMMAND_DRIVER = SWEEP_DRIVER.replace('main(["sweep", path, *options])', "main([verb, path, *options])").replace(
    "options = sys.argv[1].split()\nfor path in sys.argv[2:]:",
    "verb = sys.argv[1]\noptions = sys.argv[2].split()\nfor path in sys.argv[3:]:",
)
# The files both refuse at once, and a few stages each runs to the end (one ngspice start each).
ONE_FILE_SAMPLE = sorted({*UNUSABLE_EXAMPLES, "no_mosfet.cir", "cs_hive_scale.cir", "sf_hive_temp.cir",
                          "two_mosfets.cir", "controlled_sources.cir", "meas_tran_ac.cir", "crlf_ends.cir"})
SPREAD_OPTIONS = "--resistors 5 --vto 50m --samples 200"


def _one_file_batch(verb: str, netlists: list[str], options: str) -> dict[str, str]:
    """`verb` on each netlist in turn in one process: never a traceback, an exit status per file,
    every unusable example refused (2) with a message naming its file; the status per file."""
    completed = _run(["-c", COMMAND_DRIVER, verb, options, *netlists])
    assert "Traceback" not in completed.stderr, completed.stderr[-3000:]
    statuses = re.findall(r"^=== status (\S+)$", completed.stdout, re.MULTILINE)
    assert len(statuses) == len(netlists), completed.stdout[-3000:]
    assert set(statuses) <= {"0", "1", "2"}, statuses
    per_file = dict(zip(netlists, statuses, strict=True))
    assert all(per_file[name] == "2" for name in UNUSABLE_EXAMPLES if name in per_file)
    parts = re.split(r"^=== (\S+\.cir)$", completed.stderr, flags=re.MULTILINE)[1:]
    for name, text in zip(parts[::2], parts[1::2], strict=True):
        if per_file[name] == "2":
            assert re.search(rf"^(biasbridge: error: )?{re.escape(name)}(:\d+:\d+)?: ", text, re.MULTILINE), text
    return per_file


def test_gain_goes_on_past_refused_files_in_one_process():
    per_file = _one_file_batch("gain", ONE_FILE_SAMPLE, "")
    assert per_file["no_mosfet.cir"] == "2"
    assert {per_file[name] for name in ("cs_hive_scale.cir", "sf_hive_temp.cir")} <= {"0", "1"}


def test_spread_goes_on_past_refused_files_in_one_process():
    per_file = _one_file_batch("spread", ONE_FILE_SAMPLE, SPREAD_OPTIONS)
    assert {per_file[name] for name in ("cs_hive_scale.cir", "sf_hive_temp.cir")} <= {"0", "1"}


@pytest.mark.slow
@pytest.mark.parametrize("verb, options", [("gain", "--json"), ("spread", SPREAD_OPTIONS)])
def test_gain_and_spread_over_the_whole_corpus_in_one_process_never_raise(verb, options):
    """Slow (~10 s each on a shared 2-core machine: gain starts ngspice once per stage)."""
    _one_file_batch(verb, NETLISTS, options)
