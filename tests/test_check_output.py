"""`biasbridge check`'s output: the table as text (colour off), the `--steps` working, the JSON
Lines shape and `demo`. reference: README, `check` (a disagreeing cell carries `!` as well as colour;
plain text in a pipe) and `check --json` (JSON Lines; node keys lower case, device names as written).
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest
from check_support import (
    QUANTITIES,
    TRIPLE,
    cli_subprocess,
    needs_library,
    run_cli,
    table_rows,
    table_titles,
    write_own_netlists,
)
from conftest import EXAMPLES

from bridge.check import check_circuit
from bridge.netlist import read_netlist
from bridge.netlist.numbers import engineering


@pytest.fixture(scope="module")
def own_dir(tmp_path_factory) -> Path:
    return write_own_netlists(tmp_path_factory.mktemp("own_netlists"))



def saturation_overdrive(k: float, drive: float, resistance: float) -> float:
    """VOV from (K·R/2)·VOV² + VOV − drive = 0, the root with VOV > 0 (R: resistance in the loop);
    textbook square law (from memory), λ = γ = 0."""
    return (-1 + math.sqrt(1 + 2 * k * resistance * drive)) / (k * resistance)


@pytest.fixture(scope="module")
def table_text() -> dict[str, str]:
    """`check --steps --details` on two bundled stages (every stage's full view after the batch
    rows), colour off and wide, split per netlist."""
    files = [EXAMPLES / "cs_degenerated.cir", EXAMPLES / "cs_divider.cir"]
    completed = cli_subprocess(["check", "--steps", "--details", *map(str, files)], NO_COLOR="1", COLUMNS="250")
    assert completed.returncode == 1, completed.stderr
    text = completed.stdout
    starts = [text.index(f"{path}: ") for path in files]
    return {
        path.name: text[start:end]
        for path, start, end in zip(files, starts, starts[1:] + [len(text)])
    }


@pytest.fixture(scope="module")
def table_json() -> dict[str, dict]:
    completed = cli_subprocess(
        ["check", "--json", str(EXAMPLES / "cs_degenerated.cir"), str(EXAMPLES / "cs_divider.cir")]
    )
    objects = [json.loads(line) for line in completed.stdout.splitlines()]
    return {Path(obj["file"]).name: obj for obj in objects}


@needs_library
def test_table_has_the_three_columns_and_one_row_per_node_and_quantity(table_text):
    block = table_text["cs_degenerated.cir"]
    assert table_titles(block) == ["quantity", "hand", "level-1", "ngspice"]
    rows = table_rows(block)
    for label in ("V(vdd)", "V(g)", "V(d)", "V(s)", "M1 region (nmos)"):
        assert label in rows
    for quantity in ("id", "vgs", "vds", "vth", "vov", "gm", "gds"):
        assert f"M1 {quantity}" in rows
    assert "topology: common-source, divider bias, source resistor" in block
    assert "simulator: ngspice 39" in block


@needs_library
def test_table_cells_show_the_json_values_and_a_bang_where_flagged(table_text, table_json):
    rows = table_rows(table_text["cs_degenerated.cir"])
    numbers = table_json["cs_degenerated.cir"]
    assert rows["M1 region (nmos)"] == ["triode !", "saturation", "saturation"]
    drain = numbers["nodes"]["d"]
    assert rows["V(d)"] == [engineering(drain["hand"], "V") + " !", engineering(drain["level1"], "V"),
                            engineering(drain["sim"], "V")]
    drain_current = numbers["devices"]["M1"]["id"]
    assert rows["M1 id"] == [engineering(drain_current["hand"], "A") + " !",
                             engineering(drain_current["level1"], "A"), engineering(drain_current["sim"], "A")]
    assert not any(cell.endswith("!") for cell in rows["V(g)"])
    agreeing = table_rows(table_text["cs_divider.cir"])
    assert not any(cell.endswith("!") for cells in agreeing.values() for cell in cells)


@needs_library
def test_steps_show_the_divider_the_kept_root_and_the_region_check(table_text):
    degenerated = table_text["cs_degenerated.cir"]
    assert "Hand analysis, step by step:" in degenerated
    assert "VG = VDD·R2/(R1+R2) = 5 V·180 kΩ/450 kΩ = 2 V" in degenerated
    # The root kept in saturation, as the quadratic of the test gives it.
    vov = saturation_overdrive(110e-6 * 40 / 2, 2 - 0.65, 1.5e3)
    assert re.search(rf"Keep the root VOV = {vov:.4g} V", degenerated)
    assert "saturation fails: re-solve in triode" in degenerated
    assert "→ triode holds" in degenerated
    divider = table_text["cs_divider.cir"]
    assert "VG = VDD·R2/(R1+R2) = 5 V·120 kΩ/450 kΩ = 1.333 V" in divider
    assert "VDS = 2.593 V ≥ VOV = 0.6333 V → saturation holds" in divider


@needs_library
def test_findings_and_verdict_lines_follow_the_table(table_text):
    degenerated = table_text["cs_degenerated.cir"].splitlines()
    # The body effect explains them all: its heading leads, the findings follow indented under it.
    heading = next(i for i, line in enumerate(degenerated) if line.startswith("cause: body effect (GAMMA) — "))
    grouped = degenerated[heading + 1:]
    assert any(re.fullmatch(r"  warning: V\(d\): hand 1\.224 V vs ngspice 1\.671 V \(.*\) \[hand-differs\]", line)
               for line in grouped)
    assert ("  warning: line 8: M1: the hand analysis puts it in triode, ngspice in saturation; body effect "
            "(GAMMA) alone moves the hand model to saturation [region-mismatch]") in grouped
    assert any(line.startswith("  info: line 8: M1: the body effect (GAMMA = 0.45") and line.endswith("[cause]")
               for line in grouped)
    assert "→ disagreement flagged" in grouped
    assert "→ all three agree within tolerance" in table_text["cs_divider.cir"].splitlines()


@needs_library
def test_nothing_but_plain_text_reaches_a_pipe():
    completed = cli_subprocess(
        ["check", "--steps", str(EXAMPLES / "cs_degenerated.cir")],
        NO_COLOR=None, FORCE_COLOR=None, TERM="xterm-256color", COLORTERM="truecolor",
    )
    assert completed.returncode == 1
    assert "\x1b" not in completed.stdout and "\x1b" not in completed.stderr
    assert "triode !" in completed.stdout


@needs_library
def test_json_lines_one_object_per_netlist_with_the_documented_shape(own_dir, capsys):
    files = [own_dir / "mixed_case.cir", EXAMPLES / "cs_degenerated.cir"]
    status, out, _ = run_cli(["check", "--json", *map(str, files)], capsys)
    lines = out.splitlines()
    assert len(lines) == 2
    objects = [json.loads(line) for line in lines]
    assert [obj["file"] for obj in objects] == [str(path) for path in files]
    for obj in objects:
        assert {"file", "title", "simulator", "nodes", "devices", "findings", "agree"} <= set(obj)
        assert obj["simulator"] == {"name": "ngspice", "version": "39"}
        assert isinstance(obj["agree"], bool)
        for node, triple in obj["nodes"].items():
            assert node == node.lower()
            assert set(triple) == TRIPLE
            assert all(isinstance(value, float) for value in triple.values())
        for device in obj["devices"].values():
            assert {"type", "model", "region", "attribution", *QUANTITIES} <= set(device)
            assert set(device["region"]) == TRIPLE
            for quantity in QUANTITIES:
                assert set(device[quantity]) == TRIPLE
            changes = list(device["attribution"].values())
            assert set(device["attribution"]) == {"lambda", "gamma"}
            assert all(isinstance(change, float) for change in changes)
            assert [abs(c) for c in changes] == sorted((abs(c) for c in changes), reverse=True)
        for finding in obj["findings"]:
            assert set(finding) == {"severity", "code", "message", "line", "subject"}
            assert finding["severity"] in {"error", "warning", "info"}
    mixed, degenerated = objects
    assert set(mixed["nodes"]) == {"vdd", "gate", "out"}
    assert list(mixed["devices"]) == ["Mamp"]
    assert mixed["devices"]["Mamp"]["model"] == "NCH"
    assert mixed["title"] == "Mixed-case names: node and device names as written"
    # Largest first: in the degenerated stage the body effect moves id far more than LAMBDA.
    assert list(degenerated["devices"]["M1"]["attribution"]) == ["gamma", "lambda"]
    assert degenerated["devices"]["M1"]["attribution"]["gamma"] < -0.1
    assert degenerated["agree"] is False and status == 1
    region = next(f for f in degenerated["findings"] if f["code"] == "region-mismatch")
    assert region["line"] == 8 and region["subject"] == "M1" and region["severity"] == "warning"


@needs_library
def test_a_saturated_stage_shows_its_positive_margin_and_still_agrees(table_text, table_json):
    rows = table_rows(table_text["cs_divider.cir"])
    device = table_json["cs_divider.cir"]["devices"]["M1"]
    for column, cell in zip(("hand", "level1", "sim"), rows["M1 vds − vov"]):
        margin = device["vds"][column] - device["vov"][column]
        assert margin > 0 and cell == engineering(margin, "V")
    assert table_json["cs_divider.cir"]["amplifies"] is True


@needs_library
def test_one_percentage_convention_for_the_difference_and_its_cause(table_json):
    # (other − reference)/|reference| with ngspice the reference, in the difference and in the cause.
    obj = table_json["cs_degenerated.cir"]
    current = obj["devices"]["M1"]["id"]
    percent = f"{(current['hand'] - current['sim']) / abs(current['sim']) * 100:+.1f} %"
    messages = [f["message"] for f in obj["findings"]]
    assert any(m.startswith("M1 id: hand") and f"({percent};" in m for m in messages)
    assert any(m.startswith(f"M1: hand id is {percent} from ngspice's;") for m in messages)
    assert not any("from the hand value" in m for m in messages)


def test_no_closed_form_note_when_the_hand_column_is_empty(tmp_path):
    from bridge.report.check_view import check_renderable

    # A diode in the circuit is outside the hand model: the hand column is empty, nothing was solved.
    path = tmp_path / "led.cir"
    path.write_text("Greenhouse status LED in the drain\nVDD vdd 0 5\nR1 vdd g 100k\nR2 g 0 100k\n"
                    "RD vdd a 1k\nD1 a d led\nM1 d g 0 0 nch W=20u L=1u\n.model led d (is=1e-14 n=2)\n"
                    ".model nch nmos (vto=0.7 kp=100u)\n.op\n.end\n")
    result = check_circuit(read_netlist(path), None, tolerance=0.05)
    assert all(columns.hand is None for columns in result.nodes.values())
    header = check_renderable(result).parts[0]
    assert "solved numerically" not in header.second
    assert "outside the hand model" in header.second


@needs_library
def test_demo_runs_check_with_steps_on_a_bundled_example():
    completed = cli_subprocess(["demo"], NO_COLOR="1", COLUMNS="250")
    assert completed.returncode == 0, completed.stderr
    assert "check --steps on the bundled example cs_divider.cir" in completed.stdout
    assert "Hand analysis, step by step:" in completed.stdout
    assert table_titles(completed.stdout) == ["quantity", "hand", "level-1", "ngspice"]
