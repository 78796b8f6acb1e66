"""`biasbridge lint` as a command: output formats, exit status, select/ignore, config errors, and
the `.control` block that must never run."""

from __future__ import annotations

import io
import json

import pytest
from check_support import OWN_NETLISTS, cli_subprocess, run_cli, write_own_netlists
from conftest import EXAMPLES, NGSPICE

from bridge.lint import registry
from bridge.lint.run import lint_files
from bridge.report.lint_view import lint_renderable

# A greenhouse sensor board's soil-probe amplifier: a correct divider-biased common source.
PROBE = """\
Greenhouse sensor board: soil-moisture probe amplifier
VDD vdd 0 5
R1 vdd g 330k
R2 g 0 150k
RD vdd d 10k
M1 d g 0 0 nch W=10u L=2u
.model nch nmos (vto=0.7 kp=100u lambda=0.02)
.op
.end
"""
CONTROL = PROBE.replace(".end\n", ".control\nop\nprint v(d)\n.endc\n.end\n")


def write(folder, name, text):
    path = folder / name
    path.write_text(text)
    return str(path)


@pytest.mark.skipif(NGSPICE is None, reason="ngspice is not installed")
def test_control_block_with_a_shell_command_never_runs(tmp_path):
    """The command itself, in its own process, with ngspice installed (so lint runs ngspice's .op)."""
    marker = tmp_path / "pwned"
    text = PROBE.replace(".end\n", f".control\nshell touch {marker}\nop\n.endc\n.end\n")
    path = write(tmp_path, "probe.cir", text)
    completed = cli_subprocess(["lint", "--format", "text", path])
    assert not marker.exists()
    assert completed.returncode == 1
    assert completed.stdout.splitlines()[0].startswith(f"{path}:9:1: error control-block-dropped `.control` block on "
                                                       "lines 9–12 dropped")


def test_lines_format_and_exit_status_1_on_an_error(tmp_path, capsys):
    path = write(tmp_path, "c.cir", CONTROL)
    status, out, err = run_cli(["lint", path], capsys)  # not a terminal: the compiler-style lines
    assert status == 1 and err == ""
    first, fix = out.splitlines()
    assert first.startswith(f"{path}:9:1: error control-block-dropped ")
    assert fix.startswith("    fix: ")


def test_clean_stage_exits_0_with_no_output(tmp_path, capsys):
    assert run_cli(["lint", write(tmp_path, "ok.cir", PROBE)], capsys) == (0, "", "")


def test_json_format_is_one_object(tmp_path, capsys):
    path = write(tmp_path, "c.cir", CONTROL)
    status, out, _ = run_cli(["lint", "--format", "json", path, write(tmp_path, "ok.cir", PROBE)], capsys)
    assert status == 1
    data = json.loads(out)
    assert list(data) == ["findings"]
    (finding,) = data["findings"]
    assert finding == {
        "file": path, "line": 9, "column": 1, "severity": "error", "code": "control-block-dropped",
        "message": finding["message"], "fix": finding["fix"],
    }
    assert finding["fix"]


def test_unreadable_file_exits_2_after_the_others_are_reported(tmp_path, capsys):
    control = write(tmp_path, "c.cir", CONTROL)
    status, out, _ = run_cli(["lint", str(tmp_path / "missing.cir"), control], capsys)
    assert status == 2
    lines = [line for line in out.splitlines() if not line.startswith(" ")]
    assert lines[0].startswith(f"{control}:9:1: error control-block-dropped")
    assert lines[1].startswith(f"{tmp_path / 'missing.cir'}:1:1: error file-unreadable cannot read")


def test_parse_error_exits_1_and_the_run_goes_on(tmp_path, capsys):
    broken = write(tmp_path, "a.cir", PROBE.replace("RD vdd d 10k", "RD vdd d ten"))
    status, out, _ = run_cli(["lint", broken, write(tmp_path, "ok.cir", PROBE)], capsys)
    assert status == 1
    assert out.startswith(f"{broken}:5:10: error parse-error ")


def test_a_model_no_card_defines_is_card_missing_at_the_model_field_even_when_ignored(tmp_path, capsys):
    path = write(tmp_path, "m.cir", PROBE.replace("M1 d g 0 0 nch", "M1 d g 0 0 nfast"))
    status, out, _ = run_cli(["lint", "--ignore", "card", path], capsys)
    assert status == 1
    assert out.startswith(f"{path}:6:12: error card-missing model `nfast` is not defined")
    assert "fix: add the `.model` card the element names" in out


def test_strict_makes_warnings_fail(tmp_path, capsys):
    path = write(tmp_path, "w.cir", PROBE.replace("RD vdd d 10k", "RD vdd d 10k ; lint: allow scale-milli"))
    assert run_cli(["lint", path], capsys)[0] == 0
    status, out, _ = run_cli(["lint", "--strict", path], capsys)
    assert status == 1 and " warning allow-unknown-code " in out


def test_select_and_ignore_on_the_command_line(tmp_path, capsys):
    path = write(tmp_path, "c.cir", CONTROL)
    assert run_cli(["lint", "--ignore", "control", path], capsys) == (0, "", "")
    assert run_cli(["lint", "--select", "scale,path", path], capsys) == (0, "", "")
    assert run_cli(["lint", "--select", "scale", "--select", "control-block-dropped", path], capsys)[0] == 1


def test_select_naming_no_code_is_refused(tmp_path, capsys):
    status, out, err = run_cli(["lint", "--select", "contrl", write(tmp_path, "ok.cir", PROBE)], capsys)
    assert (status, out) == (2, "") and "`contrl` names no lint code" in err


def test_config_unknown_key_exits_2_with_a_located_message(tmp_path, capsys):
    (tmp_path / "pyproject.toml").write_text("[tool.biasbridge.lint]\nweak-overdrive = 0.03\nrating = 1\n")
    status, out, err = run_cli(["lint", write(tmp_path, "ok.cir", PROBE)], capsys)
    assert (status, out) == (2, "")
    assert err.startswith(f"{tmp_path / 'pyproject.toml'}:3:1: unknown key `rating` in [tool.biasbridge.lint]")


def test_terminal_view_shows_the_card_under_each_finding_and_the_fix(tmp_path):
    from rich.console import Console

    path = write(tmp_path, "w.cir", PROBE.replace("RD vdd d 10k", "RD vdd d 10k ; lint: allow scale-milli"))
    report = lint_files([path])
    buffer = io.StringIO()
    Console(file=buffer, width=200, force_terminal=False, color_system=None).print(lint_renderable(report))
    lines = buffer.getvalue().splitlines()
    assert lines[0] == path
    assert "5:28" in lines[1] and "warning" in lines[1] and "allow-unknown-code" in lines[1]
    assert lines[2].endswith("5 │ RD vdd d 10k ; lint: allow scale-milli")
    assert lines[3].index("^") == lines[2].index("│ ") + 2 + 27
    assert "fix:" in lines[4]
    assert lines[-1] == "1 netlist linted: 1 warning"


def test_bundled_examples_give_no_warning(capsys):
    """Every bundled example: no error or warning but the `.control` block the bench-session example
    holds on purpose (every rule family registered on this branch runs)."""
    files = sorted(str(path) for path in EXAMPLES.glob("*.cir"))
    report = lint_files(files)
    loud = [(e.file.rsplit("/", 1)[-1], e.finding.code) for e in report.entries if e.finding.severity != "info"]
    assert loud == [("bench_session.cir", "control-block-dropped")]


def test_frame_findings_are_quiet_on_the_check_stages(tmp_path, monkeypatch):
    """The runner's own findings (notices, markers) on the stages of the check tests: no warning or error."""
    monkeypatch.setattr(registry, "RULES", ())
    folder = write_own_netlists(tmp_path)
    report = lint_files(sorted(str(folder / name) for name in OWN_NETLISTS))
    assert [e for e in report.entries if e.finding.severity != "info"] == []


def test_no_operating_point_rule_speaks_where_the_path_rules_say_none_exists(tmp_path, capsys):
    """The gate reached only through CIN: ngspice falls back to an answer of its own (a gmin or
    transient operating point) that is no bias; only the path finding is reported."""
    text = PROBE.replace("R1 vdd g 330k\nR2 g 0 150k\n", "VSIG sig 0 dc 0 ac 10m\nCIN sig g 1u\n")
    status, out, _ = run_cli(["lint", "--format", "json", write(tmp_path, "f.cir", text)], capsys)
    codes = [finding["code"] for finding in json.loads(out)["findings"]]
    assert status == 1 and codes == ["path-gate-through-capacitor"]
