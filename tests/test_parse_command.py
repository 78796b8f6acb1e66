"""`biasbridge parse`: the table a designer reads, the JSON a script reads, the warnings."""

from __future__ import annotations

import json
import os
import subprocess
import sys

from conftest import EXAMPLES

from bridge.cli import main

RESISTOR_MILLI = "One-milliohm trap\nV1 in 0 5\nR1 in out 1M\nR2 out 0 1MEG\n.op\n.end\n"


def test_table_shows_values_in_engineering_notation(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    monkeypatch.setenv("COLUMNS", "120")
    path = tmp_path / "m.cir"
    path.write_text(RESISTOR_MILLI)
    assert main(["parse", str(path)]) == 0
    out = capsys.readouterr().out
    # `1M` is one milliohm in SPICE: the table shows it at once.
    assert "1 mΩ" in out
    assert "1 MΩ" in out
    assert "5 V" in out
    assert "One-milliohm trap" in out
    assert "\x1b[" not in out  # no colour codes in a pipe


def test_json_shape(tmp_path, capsys):
    path = tmp_path / "m.cir"
    path.write_text(
        "json shape\n.model nch nmos (vto=0.7 kp=50u)\nV1 in 0 DC 5 AC 1\nR1 in d 10k\n"
        "M1 d in 0 0 nch W=10u L=1u\n.op\n.dc V1 0 5 0.5\n.control\nop\n.endc\n"
    )
    assert main(["parse", "--json", str(path)]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert len(lines) == 1
    data = json.loads(lines[0])
    assert data["title"] == "json shape"
    assert {"title", "elements", "models", "analyses", "warnings"} <= set(data)
    m1 = next(e for e in data["elements"] if e["name"] == "M1")
    assert m1 == {
        "name": "M1", "kind": "mosfet", "nodes": ["d", "in", "0", "0"], "value": None,
        "params": {"w": 1e-05, "l": 1e-06, "model": "nch"}, "line": 5,
    }
    v1 = next(e for e in data["elements"] if e["name"] == "V1")
    assert v1["value"] == 5.0 and v1["params"] == {"ac_mag": 1.0, "ac_phase": 0.0} and v1["line"] == 3
    assert data["models"] == {"nch": {"type": "nmos", "level": 1, "params": {"vto": 0.7, "kp": 5e-05}}}
    assert [a["kind"] for a in data["analyses"]] == ["op", "dc"]
    assert data["analyses"][1]["sweeps"] == [{"source": "V1", "start": 0.0, "stop": 5.0, "step": 0.5}]
    assert [w["code"] for w in data["warnings"]] == ["control-dropped"]
    assert data["warnings"][0]["line"] == 8


def test_every_bundled_example_parses(capsys):
    for path in sorted(EXAMPLES.glob("*.cir")):
        assert main(["parse", "--json", str(path)]) == 0, path
    assert len(capsys.readouterr().out.splitlines()) == len(list(EXAMPLES.glob("*.cir")))


def test_control_blocks_are_dropped_with_their_lines_named(tmp_path, capsys):
    path = tmp_path / "c.cir"
    path.write_text(
        "t\nR1 a 0 1k\n.control\nshell touch pwned\n.endc\nV1 a 0 1\n.end\n"
        ".control\nshell rm -rf x\n.endc\n.control\nop\n"
    )
    assert main(["parse", "--json", str(path)]) == 0
    warnings = json.loads(capsys.readouterr().out)["warnings"]
    messages = [w["message"] for w in warnings if w["code"] == "control-dropped"]
    assert len(messages) == 3
    assert "lines 3–5" in messages[0]
    assert "lines 8–10" in messages[1]  # after `.end`
    assert "lines 11–12" in messages[2] and "never closed" in messages[2]


def test_demo_runs_on_a_bundled_example(capsys, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    assert main(["demo"]) == 0
    assert "Kelp-buoy" in capsys.readouterr().out


def test_module_entry_point_in_a_pipe(tmp_path):
    path = tmp_path / "m.cir"
    path.write_text(RESISTOR_MILLI)
    completed = subprocess.run(
        [sys.executable, "-m", "bridge", "parse", str(path)],
        capture_output=True, text=True, timeout=60, env={**os.environ, "TERM": "xterm-256color"},
    )
    assert completed.returncode == 0
    assert "1 mΩ" in completed.stdout and "\x1b[" not in completed.stdout


GREENHOUSE_MAIN = (
    "greenhouse soil-probe buffer\n.include probe_models.inc\nVDD vdd 0 5\nRG1 vdd g 1MEG\nRG2 g 0 1MEG\n"
    "RD vdd d 10k\nM1 d g 0 0 nch W=20u L=2u\n.op\n.control\nprint all\n.endc\n.end\n"
)
GREENHOUSE_MODELS = "* probe models\n.model nch nmos (vto=0.8 kp=120u)\n\n.control\nop\nprint all\n.endc\n"


def test_control_block_in_an_include_is_named_with_its_file_alike_in_parse_and_check(
    tmp_path, capsys, monkeypatch
):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("NO_COLOR", "1")
    monkeypatch.setenv("COLUMNS", "200")
    (tmp_path / "probe.cir").write_text(GREENHOUSE_MAIN)
    (tmp_path / "probe_models.inc").write_text(GREENHOUSE_MODELS)
    included = "`.control` block on lines 4–7 dropped: its commands never reach the simulator [control-dropped]"
    in_main = "`.control` block on lines 9–11 dropped: its commands never reach the simulator [control-dropped]"

    assert main(["parse", "--json", "probe.cir"]) == 0
    warnings = json.loads(capsys.readouterr().out)["warnings"]
    assert [(w["file"], w["line"]) for w in warnings] == [("probe.cir", 9), ("probe_models.inc", 4)]
    assert main(["parse", "probe.cir"]) == 0
    parse_lines = capsys.readouterr().out.splitlines()
    assert f"info: probe_models.inc:4: {included}" in parse_lines
    assert f"info: probe.cir:9: {in_main}" in parse_lines

    main(["check", "--json", "probe.cir"])
    findings = [f for f in json.loads(capsys.readouterr().out)["findings"] if f["code"] == "control-dropped"]
    # A finding's line is a line of the netlist checked: the included file's is in the message.
    assert [(f["severity"], f["line"], f["message"]) for f in findings] == [
        ("info", 9, in_main.removesuffix(" [control-dropped]")),
        ("info", None, "probe_models.inc:4: " + included.removesuffix(" [control-dropped]")),
    ]
    main(["check", "probe.cir"])
    check_lines = capsys.readouterr().out.splitlines()
    assert f"info: probe_models.inc:4: {included}" in check_lines
    assert f"info: line 9: {in_main}" in check_lines
