"""Bad input: exit status 2 and `FILE:LINE:COL: message`, never a traceback; files untouched."""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from bridge.cli import main
from bridge.netlist import NetlistError, read_netlist
from bridge.netlist.source import MAX_CARDS

# (file text, expected line, column, fragment of the message)
CASES = {
    "empty": ("", 1, 1, "empty netlist"),
    "only_blanks": ("  \n\n\t\n", 1, 1, "empty netlist"),
    "not_a_number": ("t\nR1 a 0 1.2.3k\n", 2, 11, "`1.2.3k` is not a number"),
    "unbalanced_brace": ("t\nR1 a 0 {1+(2*3}\n", 2, 15, "unbalanced"),
    "unclosed_quote": ("t\nR1 a 0 '1+2\n", 2, 12, "unbalanced expression"),
    "unsupported_letter": ("t\nZ1 a 0 1k\n", 2, 1, "element letter `Z` is not supported"),
    "unsupported_dot_card": ("t\nR1 a 0 1k\n.foo bar\n", 3, 1, "`.foo` is not a supported card"),
    "too_few_nodes": ("t\nR1 a\n", 2, 5, "incomplete `R1` card"),
    "missing_value": ("t\nR1 a b\n", 2, 7, "incomplete `R1` card"),
    "mosfet_three_nodes": ("t\n.model n nmos\nM1 d g s n\n", 3, 11, "incomplete `M1` card"),
    "missing_include": ("t\n.include nothere.inc\n", 2, 10, "`nothere.inc` not found"),
    "undefined_parameter": ("t\nR1 a 0 {rx*2}\n", 2, 9, "undefined parameter `rx`"),
    "undefined_in_param": ("t\n.param a=1 b={a+c}\n", 2, 17, "undefined parameter `c`"),
    "undefined_model": ("t\nM1 d g s b nch\n", 2, 12, "model `nch` is not defined"),
    "wrong_model_type": ("t\n.model d1 d\nM1 d g s b d1\n", 3, 12, "needs nmos or pmos"),
    "behavioural_e_source": ("t\nE1 a 0 value={v(b)}\n", 2, 13, "only the linear form"),
    "dc_of_unknown_source": ("t\nV1 a 0 1\nR1 a 0 1\n.dc V2 0 1 0.1\n", 4, 5, "not an independent source"),
    "dc_zero_step": ("t\nV1 a 0 1\nR1 a 0 1\n.dc V1 0 1 0\n", 4, 5, "never goes"),
    "undefined_subcircuit": ("t\nX1 a b nosuch\n", 2, 8, "subcircuit `nosuch` is not defined"),
    "duplicate_name": ("t\nR1 a 0 1k\nr1 b 0 2k\n", 3, 1, "duplicate element name"),
    "continuation_first": ("t\n+ R1 a 0 1k\n", 2, 1, "continuation line"),
    "unknown_instance_param": ("t\n.model n nmos\nM1 d g s b n wl=2u\n", 3, 14, "not an instance parameter"),
    "greek_mu": ("t\nC1 a 0 10\u03bcF\n", 2, 10, "write `u`"),
    "division_by_zero": ("t\nR1 a 0 {1/0}\n", 2, 9, "division by zero"),
    "ic_not_a_voltage": ("t\nR1 a 0 1\n.ic foo(a)=1\n", 3, 5, "expected `V(node)=value`"),
    "level_out_of_range": ("t\n.model m nmos level=1e300\n", 2, 1, "LEVEL must be a positive integer"),
    "control_not_a_vsource": ("t\nV1 a 0 1\nF1 a 0 a 2\n", 3, 8, "not a voltage source"),
    "node_setting_without_value": ("t\nR1 a 0 1\n.nodeset v(a)=\n", 3, 15, "incomplete `.nodeset` card"),
    "lib_without_section": ("t\n.lib models.lib\nR1 a 0 1\n", 2, 1, "section definition"),
}


def run_cli(capsys, *argv: str) -> tuple[int, str, str]:
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


@pytest.mark.parametrize("name", sorted(CASES))
def test_bad_netlist_is_located_and_exits_2(tmp_path, capsys, monkeypatch, name):
    text, line, column, fragment = CASES[name]
    monkeypatch.chdir(tmp_path)
    path = tmp_path / f"{name}.cir"
    path.write_text(text, encoding="utf-8")
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    if name == "lib_without_section":
        # a lone `.lib NAME` in a netlist opens a section definition: skipped, with a notice
        circuit = read_netlist(path)
        assert any(n.code == "lib-section-skipped" for n in circuit.notices)
        return
    status, out, err = run_cli(capsys, "parse", path.name)
    assert status == 2
    assert out == ""
    first_line = err.splitlines()[0]
    assert first_line.startswith(f"{name}.cir:{line}:{column}: "), err
    assert fragment in first_line
    assert "Traceback" not in err
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before  # the input is never modified


def test_latin1_micro_sign_is_refused_not_read_as_a_unit_letter(tmp_path, capsys):
    # ngspice 39 (`ngspice -b`) reads the Latin-1 byte 0xB5 after a number as micro; decoded
    # as UTF-8 it is U+FFFD, which cannot be told from other bytes ngspice refuses: refused here.
    path = tmp_path / "latin1.cir"
    path.write_bytes(b"t\nC1 a 0 10\xb5F\n")
    status, out, err = run_cli(capsys, "parse", str(path))
    assert status == 2 and out == ""
    assert err.startswith(f"{path}:2:10: ") and "not UTF-8" in err.splitlines()[0]


def test_caret_points_at_the_column(tmp_path):
    path = tmp_path / "n.cir"
    path.write_text("t\nR1 a 0 1.2.3k\n")
    with pytest.raises(NetlistError) as info:
        read_netlist(path)
    lines = info.value.render().splitlines()
    assert lines[1].strip() == "R1 a 0 1.2.3k"
    assert lines[2].index("^") == lines[1].index("1.2.3k") + 3  # at the second `.`


def test_binary_file(tmp_path, capsys):
    path = tmp_path / "blob.cir"
    path.write_bytes(bytes(range(256)) * 20)
    status, _, err = run_cli(capsys, "parse", str(path))
    assert status == 2 and err.startswith(f"{path}:1:1: binary data")


def test_missing_file_and_directory(tmp_path, capsys):
    status, _, err = run_cli(capsys, "parse", str(tmp_path / "nope.cir"))
    assert status == 2 and err.startswith(f"{tmp_path / 'nope.cir'}:1:1: cannot read")
    status, _, err = run_cli(capsys, "parse", str(tmp_path))
    assert status == 2 and "is a directory" in err


def test_include_cycle_is_named(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "a.cir").write_text("t\n.include b.inc\n")
    (tmp_path / "b.inc").write_text("R1 x 0 1\n.include a.cir\n")
    with pytest.raises(NetlistError) as info:
        read_netlist("a.cir")
    assert "include cycle: a.cir → b.inc → a.cir" in info.value.message
    assert str(info.value.location) == "b.inc:2:10"


def test_self_include_is_a_cycle(tmp_path):
    (tmp_path / "s.cir").write_text("t\n.inc s.cir\n")
    with pytest.raises(NetlistError, match="include cycle"):
        read_netlist(tmp_path / "s.cir")


def test_huge_netlist_is_refused(tmp_path):
    path = tmp_path / "huge.cir"
    lines = ["huge"] + [f"R{i} n{i} n{i + 1} 1k" for i in range(300_000)]
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(NetlistError) as info:
        read_netlist(path)
    assert f"more than {MAX_CARDS} cards" in info.value.message
    assert info.value.location.line == MAX_CARDS + 2


def test_bad_arguments_exit_2(capsys):
    with pytest.raises(SystemExit) as info:
        main(["parse"])
    assert info.value.code == 2
    with pytest.raises(SystemExit) as info:
        main(["nosuchverb"])
    assert info.value.code == 2


def test_no_traceback_from_the_installed_command(tmp_path):
    # The real console entry point in a child process: a bad netlist gives one located
    # message and status 2.
    path = tmp_path / "bad.cir"
    path.write_text("t\nR1 a 0 {1+\n")
    completed = subprocess.run(
        [sys.executable, "-m", "bridge", "parse", str(path)],
        capture_output=True, text=True, env={**os.environ, "NO_COLOR": "1"}, timeout=60,
    )
    assert completed.returncode == 2
    assert completed.stderr.startswith(f"{path}:2:")
    assert "Traceback" not in completed.stderr
    assert Path(path).read_text() == "t\nR1 a 0 {1+\n"


@pytest.mark.parametrize("verb", ["parse", "check"])
def test_json_has_one_object_per_file_unusable_ones_included_in_order(tmp_path, capsys, monkeypatch, verb):
    # A bicycle dynamo light's regulator stage, a card that is no number, a missing file, and an
    # include whose own card is wrong: every file gets its JSON line, in the order given.
    monkeypatch.chdir(tmp_path)
    good = "dynamo light regulator\nVDD vdd 0 6\nRD vdd d 1k\nVG g 0 2\nM1 d g 0 0 nch W=10u L=1u\n"
    (tmp_path / "lamp.cir").write_text(good + ".model nch nmos (vto=0.9 kp=80u)\n.op\n.end\n")
    (tmp_path / "bad.cir").write_text("dynamo light, bad value\nR1 a 0 1.2.3k\n.end\n")
    (tmp_path / "models.inc").write_text("* dynamo models\n.model nch nmos (vto=0.9 kp=8x0u)\n")
    (tmp_path / "via_include.cir").write_text(good + ".include models.inc\n.op\n.end\n")
    files = ["lamp.cir", "bad.cir", "missing.cir", "via_include.cir", "lamp.cir"]
    status = main([verb, "--json", *files])
    out, err = capsys.readouterr()
    assert status == 2
    objects = [json.loads(line) for line in out.splitlines()]
    assert [o["file"] for o in objects] == files
    assert "error" not in objects[0] and "error" not in objects[4]
    errors = [o["error"] for o in objects[1:4]]
    assert [(e["file"], e["line"], e["column"]) for e in errors] == [
        ("bad.cir", 2, 11), ("missing.cir", 1, 1), ("models.inc", 2, 31),
    ]
    assert errors[0]["message"] == "`1.2.3k` is not a number (unexpected `.` after `1.2`)"
    assert errors[1]["message"].startswith("cannot read")
    # The located messages still go to stderr, one per unusable file, in the same order.
    located = [line for line in err.splitlines() if line and not line.startswith((" ", "biasbridge:"))]
    assert [line.split(":", 1)[0] for line in located] == ["bad.cir", "missing.cir", "models.inc"]


def test_sweep_json_gives_the_error_object_of_an_unusable_file(tmp_path, capsys):
    path = tmp_path / "bad.cir"
    path.write_text("dynamo light, bad value\nR1 a 0 1.2.3k\n.end\n")
    assert main(["sweep", "--json", str(path)]) == 2
    out, err = capsys.readouterr()
    assert json.loads(out) == {"file": str(path), "error": {
        "message": "`1.2.3k` is not a number (unexpected `.` after `1.2`)", "file": str(path), "line": 2, "column": 11}}
    assert err.startswith(f"{path}:2:11: ")
