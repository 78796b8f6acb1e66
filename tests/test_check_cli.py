"""`biasbridge check` as a command: exit status, unusable input (located, exit 2), `--expect`
and the run without ngspice. reference: README, `Exit status and errors` (0 agree, 1 disagreement,
2 unusable; FILE:LINE:COL:), `--expect FILE.toml` and the format in bridge/expect.py's docstring.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from check_support import QUANTITIES, cli_subprocess, located, needs_library, run_cli, table_rows, table_titles
from conftest import EXAMPLES


@needs_library
def test_exit_status_0_when_all_three_agree(capsys):
    status, out, err = run_cli(["check", str(EXAMPLES / "diode_connected.cir")], capsys)
    assert status == 0, out + err
    assert "→ all three agree within tolerance" in out


@needs_library
def test_exit_status_1_when_hand_lands_in_triode_and_ngspice_in_saturation(capsys):
    status, out, _ = run_cli(["check", "--json", str(EXAMPLES / "cs_degenerated.cir")], capsys)
    assert status == 1
    result = json.loads(out)
    assert result["devices"]["M1"]["region"] == {"hand": "triode", "level1": "saturation", "sim": "saturation"}
    (region,) = [f for f in result["findings"] if f["code"] == "region-mismatch"]
    assert "body effect (GAMMA)" in region["message"]


@pytest.mark.parametrize(
    ("name", "text", "line"),
    [
        ("bad_number.cir", "bad number\nV1 a 0 5\nR1 a 0 1.2.3k\nM1 a a 0 0 n\n.model n nmos\n.op\n", 3),
        ("no_mosfet.cir", "resistors only\nV1 a 0 5\nR1 a b 1k\nR2 b 0 1k\n.op\n", 1),
        ("unknown_model.cir", "unknown model\nV1 a 0 5\nM1 a a 0 0 nosuch\n.op\n", None),
    ],
)
def test_exit_status_2_for_a_netlist_biasbridge_cannot_use(name, text, line, tmp_path, capsys):
    path = tmp_path / name
    path.write_text(text)
    status, out, err = run_cli(["check", str(path)], capsys)
    assert status == 2
    assert out == ""
    assert located(err, path, line), err
    assert "Traceback" not in err


EXPECT_FILES = {
    "invalid_toml": ('tolerance = "5%"\n[nodes]\ndrain = "2.6\n', 3, "not valid TOML"),
    "unknown_quantity": ('[devices.M1]\nid = "240u"\nbeta = "1m"\n', 3, "`beta` is not a device quantity"),
    "unknown_node": ('[nodes]\ndrain = "2.5"\nnowhere = "1"\n', 3, "node `nowhere` is not in the netlist"),
    "unknown_device": ('[devices.M7]\nid = "1m"\n', 2, "device `m7` is not in the netlist"),
    "not_a_number": ('[nodes]\ndrain = "abc"\n', 2, "not a number"),
    "boolean": ("[nodes]\ndrain = true\n", 2, "expected a number"),
    "bad_region": ('[devices.M1]\nregion = "linear"\n', 2, "region `linear` is not one of"),
}


@pytest.mark.parametrize("case", sorted(EXPECT_FILES))
def test_exit_status_2_for_an_expect_file_biasbridge_cannot_use(case, tmp_path, capsys):
    text, line, message = EXPECT_FILES[case]
    targets = tmp_path / f"{case}.toml"
    targets.write_text(text)
    status, out, err = run_cli(["check", "--expect", str(targets), str(EXAMPLES / "cs_divider.cir")], capsys)
    assert status == 2
    assert out == ""
    assert located(err, targets, line), err
    assert message in err


def test_a_negative_tolerance_in_the_expect_file_is_unusable_input(tmp_path, capsys):
    targets = tmp_path / "negative.toml"
    targets.write_text('tolerance = "-5%"\n[nodes]\nvdd = "5"\n')
    status, _, err = run_cli(["check", "--expect", str(targets), str(EXAMPLES / "cs_divider.cir")], capsys)
    assert status == 2
    assert located(err, targets, 1), err


@needs_library
def test_a_batch_with_one_bad_file_still_checks_the_others(tmp_path, capsys):
    bad = tmp_path / "bad.cir"
    bad.write_text("bad\nR1 a 0 1.2.3k\n")
    files = [bad, EXAMPLES / "diode_connected.cir", EXAMPLES / "cs_degenerated.cir"]
    status, out, err = run_cli(["check", "--json", *map(str, files)], capsys)
    assert status == 2  # unusable input outranks a disagreement
    # One line per file in the order given, the unusable one as its error object.
    objects = [json.loads(line) for line in out.splitlines()]
    assert [Path(o["file"]).name for o in objects] == ["bad.cir", "diode_connected.cir", "cs_degenerated.cir"]
    assert objects[0]["error"]["line"] == 2 and "error" not in objects[1]
    assert located(err, bad, 2)


def test_without_ngspice_hand_and_level1_still_report_and_one_line_says_how_to_install():
    files = [EXAMPLES / "cs_divider.cir", EXAMPLES / "cs_degenerated.cir"]
    completed = cli_subprocess(
        ["check", "--json", *map(str, files)], NGSPICE_LIBRARY_PATH="/nonexistent/libngspice.so.0"
    )
    assert completed.returncode in (0, 1), completed.stderr
    stderr_lines = completed.stderr.splitlines()
    assert len(stderr_lines) == 1
    assert "apt-get install ngspice libngspice0" in stderr_lines[0]
    objects = [json.loads(line) for line in completed.stdout.splitlines()]
    assert len(objects) == 2
    for obj in objects:
        assert obj["simulator"] is None
        assert "no-simulator" in {f["code"] for f in obj["findings"]}
        for triple in obj["nodes"].values():
            assert triple["sim"] is None
            assert isinstance(triple["hand"], float) and isinstance(triple["level1"], float)
        for device in obj["devices"].values():
            assert device["region"]["sim"] is None
            assert device["region"]["hand"] and device["region"]["level1"]
            for quantity in QUANTITIES:
                assert device[quantity]["sim"] is None
                assert isinstance(device[quantity]["level1"], float)
    # Without a simulator the level-1 solver is the reference: the degenerated stage still disagrees.
    assert objects[1]["agree"] is False and completed.returncode == 1


MET_TARGETS = """\
tolerance = "5%"
[nodes]
drain = "2.6"
gate = { value = "1.333", tol = "1%" }
[devices.M1]
id = "252u"
gm = { value = "800u", tol = "1%" }
region = "saturation"
"""


MISSED_TARGETS = """\
tolerance = "2%"
[nodes]
drain = "2.6"
gate = { value = "1.333", tol = "1%" }
[devices.M1]
id = "240u"
gm = { value = "800u", tol = "0.1%" }
region = "triode"
"""


@needs_library
def test_expect_targets_met_agree_and_show_as_a_fourth_column(tmp_path, capsys, monkeypatch):
    targets = tmp_path / "met.toml"
    targets.write_text(MET_TARGETS)
    netlist = str(EXAMPLES / "cs_divider.cir")
    status, out, _ = run_cli(["check", "--json", "--expect", str(targets), netlist], capsys)
    assert status == 0
    result = json.loads(out)
    assert result["agree"] is True
    assert result["nodes"]["drain"]["expect"] == pytest.approx(2.6)
    assert result["nodes"]["gate"]["expect"] == pytest.approx(1.333)
    assert result["nodes"]["vdd"].get("expect") is None
    assert result["devices"]["M1"]["id"]["expect"] == pytest.approx(252e-6)  # "252u"
    assert result["devices"]["M1"]["gm"]["expect"] == pytest.approx(800e-6)
    assert result["devices"]["M1"]["vgs"].get("expect") is None
    assert result["devices"]["M1"]["region"]["expect"] == "saturation"
    monkeypatch.setenv("NO_COLOR", "1")
    monkeypatch.setenv("COLUMNS", "250")
    status, out, _ = run_cli(["check", "--expect", str(targets), netlist], capsys)
    assert table_titles(out) == ["quantity", "hand", "level-1", "ngspice", "expected"]
    rows = table_rows(out)
    assert rows["V(drain)"][3] == "2.6 V"
    assert rows["M1 id"][3] == "252 µA"
    assert rows["M1 region (nmos)"][3] == "saturation"
    assert rows["V(vdd)"][3] == "—"


@needs_library
def test_expect_targets_missed_are_flagged_with_their_toml_line(tmp_path, capsys, monkeypatch):
    targets = tmp_path / "missed.toml"
    targets.write_text(MISSED_TARGETS)
    netlist = str(EXAMPLES / "cs_divider.cir")
    status, out, _ = run_cli(["check", "--json", "--expect", str(targets), netlist], capsys)
    assert status == 1
    result = json.loads(out)
    assert result["agree"] is False
    missed = {f["message"].split(":")[0]: f for f in result["findings"]
              if f["code"] in {"expect-differs", "expect-region"}}
    # drain: 2.474 V is 4.8 % below 2.6 V (file tolerance 2 %); gm: 0.3 % off (entry tolerance 0.1 %).
    assert set(missed) == {"V(drain)", "M1 id", "M1 gm", "M1"}
    assert "(expect file line 3)" in missed["V(drain)"]["message"]
    assert "(expect file line 6)" in missed["M1 id"]["message"]
    assert "± 0.1 %" in missed["M1 gm"]["message"]
    assert missed["M1"]["code"] == "expect-region" and "expected triode" in missed["M1"]["message"]
    monkeypatch.setenv("NO_COLOR", "1")
    monkeypatch.setenv("COLUMNS", "250")
    status, out, _ = run_cli(["check", "--expect", str(targets), netlist], capsys)
    rows = table_rows(out)
    assert rows["V(drain)"][3] == "2.6 V !"
    assert rows["V(gate)"][3] == "1.333 V"
    assert rows["M1 gm"][3] == "800 µS !"
    assert rows["M1 region (nmos)"][3] == "triode !"
    assert "[expect-differs]" in out and "[expect-region]" in out


@needs_library
def test_expect_without_a_file_tolerance_uses_tol(tmp_path, capsys):
    targets = tmp_path / "plain.toml"
    targets.write_text('[nodes]\ndrain = "2.6"\n')
    netlist = str(EXAMPLES / "cs_divider.cir")
    assert run_cli(["check", "--tol", "10%", "--expect", str(targets), netlist], capsys)[0] == 0
    assert run_cli(["check", "--tol", "1%", "--expect", str(targets), netlist], capsys)[0] == 1
