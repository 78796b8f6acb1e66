"""Findings grouped by cause: when one effect (body effect, λ) or a region change explains several
hand differences, the text leads with the cause and lists them under it; `--json` keeps every
finding and adds "groups" (indices into "findings"), decided from the comparison's re-solves
(``CheckResult.settled_by``), never from the findings' text.

Stages of our own, from a greenhouse sensor board."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from check_support import PROBE_BUFFER, cli_subprocess, needs_library
from conftest import needs_ngspice, ngspice_batch_op

from bridge.check import check_circuit
from bridge.compare import REGION_CHANGE, CauseGroup, CheckResult, Settled, cause_groups, leading_cause
from bridge.netlist import read_netlist
from bridge.report.check_view import check_json, finding_lines
from bridge.vocabulary import Finding

FAN_DRIVER = """\
Greenhouse sensor board: vent-fan gate driver, NMOS common source with a noticeable LAMBDA
VDD vdd 0 12
VG g 0 1.6
RD vdd d 4.7k
M1 d g 0 0 nch W=50u L=4u
.model nch nmos (vto=0.8 kp=110u lambda=0.01)
.op
.end
"""
HUMIDITY_PREAMP = """\
Greenhouse sensor board: humidity-sensor preamp, short-channel NMOS pulled into triode
VDD vdd 0 5
VG g 0 1.3
RD vdd d 4.7k
M1 d g 0 0 nch W=20u L=0.5u
.model nch nmos (vto=0.6 kp=120u lambda=0.2)
.op
.end
"""
BODY_EFFECT_QUANTITIES = ["V(s)", "M1 id", "M1 vgs", "M1 vds", "M1 vth", "M1 vov", "M1 gm"]


def _write(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.write_text(text)
    return path


@needs_library
def test_the_body_effect_leads_and_the_quantities_it_moves_follow_under_it(tmp_path):
    path = _write(tmp_path, "probe_buffer.cir", PROBE_BUFFER)
    completed = cli_subprocess(["check", str(path)], NO_COLOR="1", COLUMNS="300")
    assert completed.returncode == 1, completed.stderr
    lines = completed.stdout.splitlines()
    heading = next(i for i, line in enumerate(lines) if line.startswith("cause: "))
    assert lines[heading] == ("cause: body effect (GAMMA) — switched on alone in the hand model, it removes each of "
                              "the 7 differences below (none is flagged with it):")
    under = lines[heading + 1: heading + 10]
    # First the lines that state the cause, then the seven differences, every one indented under it.
    assert under[0].startswith("  info: line 6: M1: the body effect (GAMMA = 0.9 √V;") and under[0].endswith("[cause]")
    assert under[1].startswith("  info: line 6: M1: hand id is +39.0 % from ngspice's")
    differences = under[2:]
    assert [line.split(": hand ")[0].split(": ")[-1] for line in differences] == BODY_EFFECT_QUANTITIES
    assert all(line.startswith("  warning: ") and line.endswith("[hand-differs]") for line in differences)
    # No finding is repeated or left at the top level before the cause.
    assert not any(line.startswith(("warning:", "info:")) for line in lines[:heading])
    assert lines[heading + 10].startswith("→ disagreement flagged")


@needs_ngspice
def test_ngspice_without_the_body_effect_lands_on_the_hand_values(tmp_path):
    """The grouping's premise, checked with ngspice itself (`ngspice -b`): the same stage with
    GAMMA = 0 gives the hand column's V(s) = 1.098 V (hand id 109.8 µA through RS = 10 kΩ),
    where with GAMMA = 0.9 it gives 789.4 mV."""
    with_gamma = ngspice_batch_op(_write(tmp_path, "with.cir", PROBE_BUFFER))
    without = ngspice_batch_op(_write(tmp_path, "without.cir", PROBE_BUFFER.replace("gamma=0.9 ", "")))
    assert without["s"] == pytest.approx(1.098, abs=1e-3)
    assert with_gamma["s"] == pytest.approx(0.7894, abs=1e-3)


@needs_library
def test_json_groups_index_the_findings_the_body_effect_settles(tmp_path):
    path = _write(tmp_path, "probe_buffer.cir", PROBE_BUFFER)
    completed = cli_subprocess(["check", "--json", str(path)])
    line = completed.stdout.rstrip("\n")
    result = json.loads(line)
    findings = result["findings"]
    assert result["groups"] == [{"cause": "gamma", "subject": None, "stated_by": [7, 8],
                                 "findings": [0, 1, 2, 3, 4, 5, 6]}]
    group = result["groups"][0]
    assert [findings[i]["code"] for i in group["stated_by"]] == ["cause", "cause"]
    assert all(findings[i]["code"] == "hand-differs" for i in group["findings"])
    assert [findings[i]["message"].split(":")[0] for i in group["findings"]] == BODY_EFFECT_QUANTITIES
    # Every finding is still there, and "groups" is a key added after the others.
    assert len(findings) == 9 and list(result)[-1] == "groups"
    assert line.endswith(', "groups": ' + json.dumps(result["groups"]) + "}")


@needs_library
def test_a_large_lambda_groups_the_current_and_gm_it_explains(required_ngspice_session, tmp_path):
    result = check_circuit(read_netlist(_write(tmp_path, "fan.cir", FAN_DRIVER)), required_ngspice_session,
                           tolerance=0.05)
    groups = cause_groups(result)
    assert [group.cause for group in groups] == ["lambda"]
    assert [result.findings[i].quantity for i in groups[0].findings] == ["M1 id", "M1 gm"]
    assert leading_cause(result).cause == "lambda" and leading_cause(result).explains == 2
    # With LAMBDA switched on alone, the hand id comes within 5 % of ngspice's (the settled data).
    assert "M1 id" in result.settled_by["lambda"].quantities
    assert "M1 id" not in result.settled_by["gamma"].quantities  # the card has no GAMMA: it moves nothing


@needs_library
def test_a_finding_no_cause_explains_keeps_its_place_after_the_group(required_ngspice_session, tmp_path):
    result = check_circuit(read_netlist(_write(tmp_path, "preamp.cir", HUMIDITY_PREAMP)), required_ngspice_session,
                           tolerance=0.05)
    lines = [line.text for line in finding_lines(result)]
    assert lines[0].startswith("cause: channel-length modulation (LAMBDA)")
    not_amplifying = next(i for i, text in enumerate(lines) if text.endswith("[not-amplifying]"))
    assert lines[not_amplifying].startswith("warning: ")  # not indented: no group holds it
    assert all(text.startswith("  ") for text in lines[1:not_amplifying])


@needs_library
def test_a_stage_without_differences_has_no_group_and_its_findings_as_before(required_ngspice_session):
    from conftest import EXAMPLES

    result = check_circuit(read_netlist(EXAMPLES / "cs_divider.cir"), required_ngspice_session, tolerance=0.05)
    assert cause_groups(result) == () and check_json(result)["groups"] == []
    assert [line.text for line in finding_lines(result)] == [
        f"{f.severity}: line {f.line}: {f.message} [{f.code}]" for f in result.findings]


def _result(findings: tuple[Finding, ...], settled_by: dict) -> CheckResult:
    return CheckResult(file="vent.cir", title="vent", simulator=("ngspice", "39"), topology="common-source",
                       closed_form=True, nodes={}, devices={}, findings=findings, settled_by=settled_by)


def test_a_region_change_no_effect_explains_leads_its_devices_differences():
    findings = (
        Finding("warning", "hand-differs", "V(d): …", None, "V(d)", quantity="V(d)"),
        Finding("warning", "hand-differs", "M1 id: …", 5, "M1", quantity="M1 id"),
        Finding("warning", "hand-differs", "M1 vds: …", 5, "M1", quantity="M1 vds"),
        Finding("warning", "region-mismatch", "M1: the hand analysis puts it in triode, ngspice in saturation", 5,
                "M1"),
        Finding("info", "cause", "M1: hand id is …", 5, "M1"),
    )
    # Neither effect alone settles the region; λ alone settles only V(d).
    settled = {"lambda": Settled(("V(d)",), ()), "gamma": Settled((), ())}
    result = _result(findings, settled)
    assert cause_groups(result) == (
        CauseGroup("lambda", None, (), (0,)),  # a node's difference: no device's cause line states it
        CauseGroup(REGION_CHANGE, "M1", (3,), (1, 2)),
    )
    assert leading_cause(result).cause == "lambda"
    lines = [line.text for line in finding_lines(result)]
    assert lines == [
        "cause: channel-length modulation (LAMBDA) — switched on alone in the hand model, it removes the difference "
        "below (none is flagged with it):",
        "  warning: V(d): … [hand-differs]",
        "cause: the region of M1 — the hand analysis puts it in another region than ngspice and no effect switched "
        "on alone moves it there; its 2 differences below come with that region:",
        "  warning: line 5: M1: the hand analysis puts it in triode, ngspice in saturation [region-mismatch]",
        "  warning: line 5: M1 id: … [hand-differs]",
        "  warning: line 5: M1 vds: … [hand-differs]",
        "info: line 5: M1: hand id is … [cause]",
    ]


def test_a_difference_two_effects_settle_goes_to_the_one_that_settles_more():
    findings = (
        Finding("warning", "hand-differs", "M1 id: …", 5, "M1", quantity="M1 id"),
        Finding("warning", "hand-differs", "M1 vth: …", 5, "M1", quantity="M1 vth"),
        Finding("warning", "region-mismatch", "M1: …", 5, "M1"),
    )
    settled = {"lambda": Settled(("M1 id",), ()), "gamma": Settled(("M1 id", "M1 vth"), ("M1",))}
    groups = cause_groups(_result(findings, settled))
    assert groups == (CauseGroup("gamma", None, (), (0, 1, 2)),)


# A model-railway throttle stage: LAMBDA settles two hand differences, GAMMA the threshold's.
RAILWAY_THROTTLE = """\
Model railway throttle: NMOS current sink for the track LED, divider bias
VDD vdd 0 9
R1 vdd g 220k
R2 g 0 82k
RD vdd d 1.5k
RS s 0 470
M1 d g s 0 ntrack W=30u L=3u
.model ntrack nmos (vto=1.0 kp=80u lambda=0.02 gamma=0.4 phi=0.7)
.op
.end
"""


@needs_library
def test_the_body_effects_cause_line_goes_with_the_body_effects_group(required_ngspice_session, tmp_path):
    result = check_circuit(read_netlist(_write(tmp_path, "throttle.cir", RAILWAY_THROTTLE)),
                           required_ngspice_session, tolerance=0.05)
    groups = {group.cause: group for group in cause_groups(result)}
    assert set(groups) == {"lambda", "gamma"}
    assert [result.findings[i].quantity for i in groups["gamma"].findings] == ["M1 vth"]
    assert len(groups["lambda"].findings) == 2
    # The body effect's own line (what GAMMA does to the threshold) states the GAMMA group; the line
    # on every effect's share of the id states the device's first group (the largest: LAMBDA's).
    body, shares = (result.findings[i] for i in (*groups["gamma"].stated_by, *groups["lambda"].stated_by))
    assert body.effect == "gamma" and "the body effect (GAMMA = 0.4" in body.message
    assert shares.effect is None and "each effect switched on alone" in shares.message
    assert len(groups["gamma"].stated_by) == len(groups["lambda"].stated_by) == 1
    lines = [line.text for line in finding_lines(result)]
    gamma_heading = next(i for i, text in enumerate(lines) if text.startswith("cause: body effect (GAMMA)"))
    assert "the body effect (GAMMA = 0.4" in lines[gamma_heading + 1]
