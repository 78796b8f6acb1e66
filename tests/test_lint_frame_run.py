"""The lint runner (bridge/lint/run.py) with a test-only rule in place of the families, and its
own findings: parse-error, file-unreadable, the reader's notices, the `lint: allow` markers,
--select/--ignore and the `[tool.biasbridge.lint]` config."""

from __future__ import annotations

import pytest

from bridge.lint import registry
from bridge.lint.rule import LintContext, LintSettings
from bridge.lint.run import (
    ConfigCache,
    Selection,
    find_config,
    lint_files,
    read_config,
)
from bridge.netlist import NetlistError
from bridge.vocabulary import Finding

# A dynamo bicycle light's LED driver: a correct common source with a divider and a source resistor.
DYNAMO = """\
Bicycle dynamo light: LED driver stage biased from the regulated 6 V rail
VDD rail 0 6
R1 rail g 220k
R2 g 0 100k
RD rail d 4.7k
RS s 0 1k
M1 d g s 0 nch W=20u L=2u
.model nch nmos (vto=0.8 kp=110u lambda=0.01)
.op
.end
"""

# The same stage with a 4.7 mΩ drain resistor (`4.7M`): the test rule flags resistors under 1 Ω.
MILLI = DYNAMO.replace("RD rail d 4.7k", "RD rail d 4.7M")


def tiny_resistors(context: LintContext) -> list[Finding]:
    """Test-only rule: a resistor under 1 Ω, at its card."""
    return [
        Finding("warning", "scale-test-tiny", f"{e.name} is {e.value:g} Ω", e.origin.line, e.name, None, "use MEG")
        for e in context.circuit.elements_of("resistor") if e.value is not None and e.value < 1
    ]


SEEN: list[LintContext] = []


def record(context: LintContext) -> list[Finding]:
    SEEN.append(context)
    return []


@pytest.fixture
def test_rules(monkeypatch):
    SEEN.clear()
    monkeypatch.setattr(registry, "RULES", (tiny_resistors, record))
    monkeypatch.setattr(registry, "CODES", {"scale-test-tiny": "a resistor under 1 Ω"})


def write(folder, name, text):
    path = folder / name
    path.write_text(text)
    return str(path)


def codes(report):
    return [(e.file.rsplit("/", 1)[-1], e.finding.line, e.finding.code) for e in report.entries]


def test_rule_findings_are_reported_at_their_card_and_sorted_by_file_and_line(tmp_path, test_rules):
    two = MILLI.replace("RS s 0 1k", "RS s 0 1m")
    report = lint_files([write(tmp_path, "b.cir", two), write(tmp_path, "a.cir", MILLI)])
    assert codes(report) == [("a.cir", 5, "scale-test-tiny"), ("b.cir", 5, "scale-test-tiny"),
                             ("b.cir", 6, "scale-test-tiny")]
    assert report.entries[0].source_line == "RD rail d 4.7M"
    assert report.entries[0].finding.fix == "use MEG"


def test_correct_stage_gives_no_finding(tmp_path, test_rules):
    assert lint_files([write(tmp_path, "ok.cir", DYNAMO)]).entries == ()


def test_level1_solution_is_handed_to_the_rules(tmp_path, test_rules):
    lint_files([write(tmp_path, "ok.cir", DYNAMO)])
    (context,) = SEEN
    assert context.level1 is not None and context.sim is None
    assert context.settings == LintSettings()
    # The level-1 drain voltage is the one the solver gives on its own (no hand-off loss).
    from bridge.analysis.dcsolve import solve_operating_point

    assert context.level1.node_voltages == solve_operating_point(context.circuit).node_voltages


def test_other_level_card_gets_no_level1_solution(tmp_path, test_rules):
    lint_files([write(tmp_path, "l3.cir", DYNAMO.replace("(vto=0.8", "(level=3 vto=0.8"))])
    (context,) = SEEN
    assert context.level1 is None


def test_ngspice_solution_is_handed_to_the_rules(tmp_path, test_rules, required_ngspice_session):
    lint_files([write(tmp_path, "ok.cir", DYNAMO)], session=required_ngspice_session)
    (context,) = SEEN
    assert context.sim is not None
    # Checked against the level-1 solution (which test_dcsolve checks against `ngspice -b`): 1 mV.
    assert context.sim.node_voltages["d"] == pytest.approx(context.level1.node_voltages["d"], abs=1e-3)


def test_parse_error_is_one_finding_at_its_line_and_column_and_the_run_goes_on(tmp_path, test_rules):
    broken = DYNAMO.replace("RS s 0 1k", "RS s 0 x")
    report = lint_files([write(tmp_path, "a.cir", broken), write(tmp_path, "b.cir", MILLI)])
    first, second = report.entries
    assert (first.finding.code, first.finding.line, first.finding.severity) == ("parse-error", 6, "error")
    assert first.finding.column == len("RS s 0 ") + 1
    assert second.file.endswith("b.cir") and second.finding.code == "scale-test-tiny"
    assert not report.unreadable


@pytest.mark.parametrize("kind", ["missing", "folder", "binary", "empty"])
def test_unreadable_file_is_reported_and_marks_the_run(tmp_path, test_rules, kind):
    path = tmp_path / "bad.cir"
    if kind == "folder":
        path.mkdir()
    elif kind == "binary":
        path.write_bytes(b"\x00\x01\x02" * 100)
    elif kind == "empty":
        path.write_text("")
    report = lint_files([str(path), write(tmp_path, "z.cir", MILLI)])
    assert report.unreadable
    assert [e.finding.code for e in report.entries] == ["file-unreadable", "scale-test-tiny"]


def test_control_block_is_an_error_at_its_first_line(tmp_path, test_rules):
    text = DYNAMO.replace(".end\n", ".control\nop\nprint v(d)\n.endc\n.end\n")
    (entry,) = lint_files([write(tmp_path, "c.cir", text)]).entries
    finding = entry.finding
    assert (finding.code, finding.severity, finding.line) == ("control-block-dropped", "error", 10)
    assert "lines 10–13" in finding.message and "never runs it" in finding.message


def test_other_notices_become_findings_of_their_severity(tmp_path, test_rules):
    text = DYNAMO.replace("VDD rail 0 6", "VDD rail 0 6\nVSIG sig 0 AC 1\nRSIG sig 0 1k")
    text = text.replace(".op", ".model nch nmos (vto=0.8 kp=120u)\n.op")
    report = lint_files([write(tmp_path, "n.cir", text)])
    found = {(e.finding.code, e.finding.severity, e.finding.line) for e in report.entries}
    assert found == {("read-no-dc-value", "info", 3), ("read-duplicate-model", "warning", 11)}


def test_allow_marker_silences_that_code_on_that_card_only(tmp_path, test_rules):
    text = MILLI.replace("RD rail d 4.7M", "RD rail d 4.7M ; lint: allow scale-test-tiny").replace(
        "RS s 0 1k", "RS s 0 1m")
    report = lint_files([write(tmp_path, "m.cir", text)])
    assert codes(report) == [("m.cir", 6, "scale-test-tiny")]


def test_allow_marker_naming_an_unknown_code_is_a_warning_at_the_code(tmp_path, test_rules):
    text = MILLI.replace("RD rail d 4.7M", "RD rail d 4.7M ; lint: allow scale-test-tiyn")
    report = lint_files([write(tmp_path, "m.cir", text)])
    assert [(e.finding.code, e.finding.line, e.finding.column) for e in report.entries] == [
        ("scale-test-tiny", 5, None), ("allow-unknown-code", 5, len("RD rail d 4.7M ; lint: allow ") + 1)]
    assert report.entries[1].finding.severity == "warning"
    assert "scale-test-tiny" in report.entries[1].finding.fix


def test_allow_marker_cannot_silence_a_control_block(tmp_path, test_rules):
    text = DYNAMO.replace(".end\n", ".control ; lint: allow control-block-dropped\nop\n.endc\n.end\n")
    assert [e.finding.code for e in lint_files([write(tmp_path, "c.cir", text)]).entries] == ["control-block-dropped"]


def test_select_and_ignore_by_code_or_prefix(tmp_path, test_rules):
    text = MILLI.replace(".end\n", ".control\nop\n.endc\n.end\n")
    files = [write(tmp_path, "m.cir", text), write(tmp_path, "p.cir", DYNAMO.replace("RS s 0 1k", "RS s 0 x"))]

    def run(select=None, ignore=()):
        return sorted({e.finding.code for e in lint_files(files, Selection(select, ignore)).entries})

    assert run() == ["control-block-dropped", "parse-error", "scale-test-tiny"]
    assert run(select=("scale",)) == ["parse-error", "scale-test-tiny"]  # a parse error is always reported
    assert run(select=("scale-test-tiny",)) == ["parse-error", "scale-test-tiny"]
    assert run(select=("scale-test",)) == ["parse-error", "scale-test-tiny"]
    assert run(select=("scale-tes",)) == ["parse-error"]  # a prefix ends at a dash
    assert run(ignore=("control",)) == ["parse-error", "scale-test-tiny"]
    assert run(select=("scale", "control"), ignore=("scale-test-tiny",)) == ["control-block-dropped", "parse-error"]


PYPROJECT = """\
[project]
name = "dynamo-light"

[tool.biasbridge.lint]
ignore = ["scale-test"]
saturation-margin = 0.2
"""


def test_config_is_found_upwards_and_applied(tmp_path, test_rules):
    (tmp_path / "pyproject.toml").write_text(PYPROJECT)
    (tmp_path / "boards" / "front").mkdir(parents=True)
    path = write(tmp_path / "boards" / "front", "m.cir", MILLI)
    assert find_config(path) == tmp_path / "pyproject.toml"
    assert lint_files([path]).entries == ()  # ignored by the config
    assert SEEN[-1].settings == LintSettings(saturation_margin=0.2)
    # The command line's --select replaces the config's select, its --ignore adds to the config's.
    assert lint_files([path], Selection(select=("scale-test-tiny",))).entries == ()


def test_config_search_stops_at_the_top_of_a_repository(tmp_path):
    (tmp_path / "pyproject.toml").write_text(PYPROJECT)
    (tmp_path / "repo" / ".git").mkdir(parents=True)
    path = write(tmp_path / "repo", "m.cir", MILLI)
    assert find_config(path) is None
    (tmp_path / "repo" / "pyproject.toml").write_text("[tool.biasbridge.lint]\n")
    assert find_config(path) == tmp_path / "repo" / "pyproject.toml"


def test_config_unknown_key_is_a_located_error_naming_the_file(tmp_path, test_rules):
    config = tmp_path / "pyproject.toml"
    config.write_text(PYPROJECT + "  saturation-margn = 0.1\n")
    with pytest.raises(NetlistError) as caught:
        read_config(config)
    assert (caught.value.location.file, caught.value.location.line, caught.value.location.column) == (
        str(config), 7, 3)
    assert "saturation-margn" in caught.value.message and "saturation-margin" in caught.value.message


@pytest.mark.parametrize("line, wanted", [
    ("saturation-margin = \"100m\"", "must be a number"),
    ("saturation-margin = -0.1", "must be a number"),
    ("ignore = \"scale\"", "must be a list"),
    ("select = [\"scael\"]", "names no lint code"),
    ("select = [", "not valid TOML"),
])
def test_config_bad_value_is_a_located_error(tmp_path, test_rules, line, wanted):
    config = tmp_path / "pyproject.toml"
    config.write_text(f"[tool.biasbridge.lint]\n{line}\n")
    with pytest.raises(NetlistError) as caught:
        ConfigCache().for_netlist(write(tmp_path, "m.cir", MILLI))
    assert wanted in caught.value.message
    assert caught.value.location.file == str(config) and caught.value.location.line in (2, 3)


def test_stray_endc_and_lines_after_end_are_infos_at_their_lines(tmp_path, test_rules):
    text = DYNAMO.replace(".op\n", ".op\n.endc\n") + "R9 rail 0 1m\n"
    report = lint_files([write(tmp_path, "s.cir", text)])
    assert [(e.finding.code, e.finding.severity, e.finding.line) for e in report.entries] == [
        ("control-stray-endc", "info", 10), ("read-after-end", "info", 11)]
