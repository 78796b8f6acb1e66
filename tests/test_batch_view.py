"""`check` on several netlists, text: one row per stage, the full view of the flagged stages only
(all of them with --details), a summary line with the counts; a progress bar on a terminal only.

The stages of our own are from a greenhouse sensor board; the bundled ones are netlists/."""

from __future__ import annotations

import json
import os
import pty
import re
import select
import subprocess
import sys
import time
from pathlib import Path

import pytest
from check_support import PROBE_BUFFER, cli_subprocess, needs_library
from conftest import EXAMPLES, REPO

from bridge.check import check_circuit
from bridge.compare import hand_difference
from bridge.netlist import read_netlist
from bridge.netlist.numbers import engineering
from bridge.report.batch_view import AGREE, DISAGREE, NOT_AMPLIFYING, batch_row, summary_line

GREENHOUSE = {
    # Agrees: the small LAMBDA moves the hand id by under 5 %.
    "fan_driver.cir": """\
Greenhouse sensor board: vent-fan gate driver, NMOS common source with a long-channel card
VDD vdd 0 12
VG g 0 1.6
RD vdd d 4.7k
M1 d g 0 0 nch W=50u L=4u
.model nch nmos (vto=0.8 kp=110u lambda=0.002)
.op
.end
""",
    # Disagrees: a strong body effect on a source follower (the hand model takes Vt = VTO).
    "probe_buffer.cir": PROBE_BUFFER,
    "broken.cir": "Greenhouse sensor board: a typo in a resistor\nR1 a 0 1.2.3k\n",
}
# What `check` on each bundled example says alone (its exit status and verdict line): 4 agree, 4 disagree.
BUNDLED_DISAGREE = {"cs_degenerated.cir", "pmos_cs.cir", "source_follower.cir", "split_supply.cir"}


@pytest.fixture(scope="module")
def batch_files(tmp_path_factory) -> list[Path]:
    folder = tmp_path_factory.mktemp("greenhouse")
    for name, text in GREENHOUSE.items():
        (folder / name).write_text(text)
    bundled = sorted(EXAMPLES.glob("*.cir"))
    return [*bundled, folder / "fan_driver.cir", folder / "probe_buffer.cir", folder / "broken.cir"]


def _rows(stdout: str, files: list[Path]) -> dict[str, str]:
    rows = {}
    for line in stdout.splitlines():
        for path in files:
            if line.startswith(f"{path} | "):
                rows[path.name] = line
    return rows


def _detailed(stdout: str, files: list[Path]) -> list[str]:
    """The stages whose full view (its `FILE: title` header) is printed, in order."""
    return [path.name for line in stdout.splitlines() for path in files if line.startswith(f"{path}: ")]


@needs_library
def test_a_batch_prints_a_row_per_stage_the_flagged_tables_and_the_counts(batch_files):
    completed = cli_subprocess(["check", *map(str, batch_files)], NO_COLOR="1", COLUMNS="100")
    assert completed.returncode == 2, completed.stderr  # the unusable file outranks the disagreements
    out = completed.stdout
    rows = _rows(out, batch_files)
    assert list(rows) == [path.name for path in batch_files]  # one row each, in the order given
    for name, row in rows.items():
        if name == "broken.cir":
            assert row.endswith("| unusable") and "`1.2.3k` is not a number" in row
            continue
        disagrees = name in BUNDLED_DISAGREE or name == "probe_buffer.cir"
        assert row.endswith(f"| {DISAGREE}" if disagrees else f"| {AGREE}"), row
    assert "broken.cir:2:11: `1.2.3k` is not a number" in completed.stderr
    # The body-effect stage: its regions, drain currents with the difference, and its cause.
    assert re.search(r"probe_buffer\.cir \| source follower, divider bias, resistor to the lower rail \| "
                     r"M1 sat/sat/sat, id 109\.8 µA vs 78\.94 µA \(\+39\.0 %\) \| cause: body effect \(GAMMA\) "
                     r"\(7 findings\) \| disagree$", rows["probe_buffer.cir"], re.M), rows["probe_buffer.cir"]
    # Full views for the flagged stages only, after every row, in the order given.
    flagged = [p.name for p in batch_files if p.name in BUNDLED_DISAGREE or p.name == "probe_buffer.cir"]
    assert _detailed(out, batch_files) == flagged
    assert out.index(rows["broken.cir"]) < out.index(f"{batch_files[1]}: ")
    last = out.rstrip("\n").splitlines()[-1]
    agreeing = len(batch_files) - len(flagged) - 1  # every bundled example not in BUNDLED_DISAGREE agrees
    assert last == (f"{len(batch_files)} stages: {agreeing} agree, 5 disagree, 0 not amplifying, 1 unusable; "
                    "full tables above for 5")
    # A pipe: no progress bar, no terminal control codes.
    assert "checking" not in completed.stderr and "\x1b" not in completed.stderr + out


@needs_library
def test_details_shows_every_stage_in_full(batch_files):
    files = batch_files[:-1]  # without the unusable one
    completed = cli_subprocess(["check", "--details", *map(str, files)], NO_COLOR="1", COLUMNS="100")
    assert completed.returncode == 1, completed.stderr
    assert _detailed(completed.stdout, files) == [path.name for path in files]
    assert completed.stdout.rstrip("\n").splitlines()[-1] == (
        f"{len(files)} stages: {len(files) - 5} agree, 5 disagree, 0 not amplifying, 0 unusable; "
        f"full tables above for {len(files)}")


@needs_library
def test_one_netlist_keeps_the_single_view_and_json_keeps_one_line_per_netlist(batch_files):
    alone = cli_subprocess(["check", str(EXAMPLES / "cs_divider.cir")], NO_COLOR="1")
    assert " | " not in alone.stdout and "stages:" not in alone.stdout
    assert alone.stdout.startswith(f"{EXAMPLES / 'cs_divider.cir'}: ")
    files = [str(path) for path in batch_files[-3:-1]]
    many = cli_subprocess(["check", "--json", *files])
    assert [json.loads(line)["file"] for line in many.stdout.splitlines()] == files
    assert "stages:" not in many.stdout


def test_the_summary_counts_each_verdict():
    verdicts = [AGREE, DISAGREE, AGREE, NOT_AMPLIFYING, "unusable", AGREE]
    assert summary_line(verdicts, 3) == "6 stages: 3 agree, 1 disagree, 1 not amplifying, 1 unusable; full tables " \
                                        "above for 3"
    assert summary_line([AGREE], 0) == "1 stage: 1 agree, 0 disagree, 0 not amplifying, 0 unusable"


@needs_library
def test_a_row_shows_the_results_regions_currents_and_verdict(required_ngspice_session, tmp_path):
    path = tmp_path / "probe_buffer.cir"
    path.write_text(GREENHOUSE["probe_buffer.cir"])
    result = check_circuit(read_netlist(path), required_ngspice_session, tolerance=0.05)
    row = batch_row(result)
    device = result.devices["M1"]
    current = device.quantities["id"]
    assert row.verdict == DISAGREE and not result.agree
    regions = "/".join({"saturation": "sat"}[device.region[column]] for column in ("hand", "level1", "sim"))
    assert (f"M1 {regions}, id {engineering(current.hand, 'A')} vs {engineering(current.sim, 'A')} "
            f"({hand_difference(current)})") in row.text
    # The difference as the finding on M1 id states it.
    assert any(f.code == "hand-differs" and f.quantity == "M1 id" and f"({hand_difference(current)};" in f.message
               for f in result.findings)
    # A stage out of saturation that --allow-region accepts agrees, and says so.
    triode = tmp_path / "heater_switch.cir"
    triode.write_text("Greenhouse sensor board: heater switch, NMOS driven hard into triode\nVDD vdd 0 5\n"
                      "VG g 0 5\nRD vdd d 10k\nM1 d g 0 0 nch W=20u L=2u\n.model nch nmos (vto=0.7 kp=100u)\n"
                      ".op\n.end\n")
    switch = check_circuit(read_netlist(triode), required_ngspice_session, tolerance=0.05)
    assert switch.agree and not switch.amplifies
    assert batch_row(switch).verdict == NOT_AMPLIFYING and batch_row(switch).text.endswith("| not amplifying")
    accepted = batch_row(switch, allow_region=True)
    assert accepted.verdict == AGREE and accepted.text.endswith("| agree (region accepted)")
    assert " M1 triode/triode/triode, " in accepted.text


@needs_library
def test_a_progress_bar_on_a_terminal_from_two_netlists_on(batch_files):
    """Under a pseudo-terminal (stdout and stderr on it): rich's transient bar is drawn; it is gone
    from a pipe (see the first test)."""
    master, slave = pty.openpty()
    env = {**os.environ, "NO_COLOR": "1", "COLUMNS": "200"}
    files = [str(path) for path in batch_files[:2]]
    process = subprocess.Popen([sys.executable, "-m", "bridge", "check", *files], stdin=subprocess.DEVNULL,
                               stdout=slave, stderr=slave, env=env, cwd=REPO)
    os.close(slave)
    output = b""
    deadline = time.monotonic() + 60
    try:
        while time.monotonic() < deadline:
            if select.select([master], [], [], 0.1)[0]:
                try:
                    chunk = os.read(master, 65536)
                except OSError:  # the other end is closed: the process is gone
                    break
                if not chunk:
                    break
                output += chunk
            elif process.poll() is not None:
                break
    finally:
        process.kill()
        process.wait()
        os.close(master)
    text = output.decode(errors="replace")
    assert "checking" in text and "━" in text, text  # the bar: its description and its track
    assert "2 stages: 1 agree, 1 disagree" in text


def test_without_ngspice_the_rows_say_the_column_is_missing():
    files = [str(EXAMPLES / "cs_divider.cir"), str(EXAMPLES / "cs_degenerated.cir")]
    completed = cli_subprocess(["check", *files], NGSPICE_LIBRARY_PATH="/nonexistent/libngspice.so.0", NO_COLOR="1")
    rows = completed.stdout.splitlines()[1:3]
    assert rows[0] == (f"{files[0]} | common-source, divider bias | M1 sat/sat/—, id 240.7 µA vs — | "
                       "cause: no ngspice column | agree")
    # The body effect still explains the hand's differences from the level-1 solver.
    assert rows[1].startswith(f"{files[1]} | common-source, divider bias, source resistor | M1 triode/sat/—, "
                              "id 460.5 µA vs — | cause: body effect (GAMMA) (10 findings) | disagree")
    assert completed.stdout.rstrip("\n").splitlines()[-1].startswith("2 stages: 1 agree, 1 disagree")
