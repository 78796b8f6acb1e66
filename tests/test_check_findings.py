"""`biasbridge check`'s findings and verdict must be true for the circuit: values at the solver's
resolution, percentages, the tolerance floor, a stage out of saturation, causes.
reference: the ngspice manual (Debian ngspice-doc 39), section 15.1.2 "OP and DC Solution Options"
(VNTOL = 1 µV, ABSTOL = 1 pA, GMIN = 1e-12 S), and ngspice itself through the worker.
"""

from __future__ import annotations

import json
import re
import subprocess
from pathlib import Path

import pytest
from check_support import cli_subprocess, needs_library, table_rows, write_own_netlists

from bridge.check import check_circuit
from bridge.netlist import read_netlist
from bridge.netlist.numbers import engineering
from bridge.report.check_view import check_json


@pytest.fixture(scope="module")
def own_dir(tmp_path_factory) -> Path:
    return write_own_netlists(tmp_path_factory.mktemp("own_netlists"))


@pytest.fixture(scope="module")
def session(required_ngspice_session):
    """One ngspice worker shared by every check in this module that does not break workers."""
    return required_ngspice_session


VERDICT_NETLISTS = {
    # Bicycle dynamo light: a lamp-current sense follower whose bulk sits on the negative rail;
    # the body effect lifts the threshold above the gate, so ngspice has it in cutoff, while the
    # hand model (GAMMA = 0) has it conducting.
    "dynamo_sense.cir": """\
Bicycle dynamo light: lamp-current sense follower, bulk on the negative rail
VDD vdd 0 5
VNEG vneg 0 -5
R1 vdd g 300k
R2 g 0 100k
M1 vdd g s vneg nch W=20u L=2u
RS s 0 10k
.model nch nmos (vto=0.7 kp=100u gamma=1.5 phi=0.6)
.op
.end
""",
}


@pytest.fixture(scope="module")
def verdict_dir(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("verdict_netlists")
    for name, text in VERDICT_NETLISTS.items():
        (folder / name).write_text(text)
    return folder


def check_text(path: Path, *options: str) -> subprocess.CompletedProcess:
    return cli_subprocess(["check", *options, str(path)], NO_COLOR="1", COLUMNS="250")


@needs_library
def test_a_reference_at_the_solver_resolution_is_zero_and_compared_absolutely(verdict_dir, session):
    path = verdict_dir / "dynamo_sense.cir"
    result = check_circuit(read_netlist(path), session, tolerance=0.05)
    source = result.nodes["s"]
    # ngspice holds V(s) at the GMIN leakage through RS: tens of nanovolts, not zero, in the JSON.
    assert source.sim != 0 and abs(source.sim) < 1e-6
    assert check_json(result)["nodes"]["s"]["sim"] == source.sim
    # The drain current in cutoff is GMIN (1e-12 S) times the 10 V from drain to bulk, within ABSTOL.
    drain_current = result.devices["M1"].quantities["id"]
    assert abs(drain_current.sim - 1e-12 * 10) < 1e-12
    # So the current's resolution is ABSTOL plus GMIN times that drain-to-bulk voltage.
    assert drain_current.resolution == pytest.approx(1e-12 + 1e-12 * 10)
    completed = check_text(path)
    rows = table_rows(completed.stdout)
    assert rows["V(s)"][1:] == ["0 V", "0 V"]
    assert rows["M1 id"][1:] == ["0 A", "0 A"]
    assert not re.search(r"\d a[AVS]\b|-0 [AVS]\b", completed.stdout)  # no atto, no minus zero
    (node,) = [f.message for f in result.findings if f.code == "hand-differs" and f.subject == "V(s)"]
    assert node.startswith("V(s): hand 303.6 mV vs ngspice 0 V (+303.6 mV from a value at the solver's resolution;")
    assert "%" not in node.split(";")[0]
    # No percentage of a value at the resolution anywhere: every one printed stays below 1000 %.
    percentages = [float(p) for p in re.findall(r"([+-]\d+(?:\.\d+)?) %", completed.stdout)]
    assert percentages and max(map(abs, percentages)) < 1000


@needs_library
def test_a_stage_in_cutoff_that_all_three_agree_on_does_not_amplify(own_dir):
    path = own_dir / "cutoff.cir"  # the divider holds the gate below threshold
    completed = check_text(path)
    assert completed.returncode == 1, completed.stdout + completed.stderr
    lines = completed.stdout.splitlines()
    assert ("→ all three agree within tolerance, but the stage is not biased to amplify (M1 in cutoff)") in lines
    assert any(line.startswith("warning: line 6: M1: ngspice puts it in cutoff (vov = -245.5 mV): no channel current, "
                               "gm = 0 — the stage does not amplify") for line in lines)
    rows = table_rows(completed.stdout)
    # GMIN leakage (5 pA = 1e-12 S × 5 V) is zero of its unit in the table, raw in the JSON.
    assert rows["M1 id"] == ["0 A", "0 A", "0 A"]
    as_json = json.loads(cli_subprocess(["check", "--json", str(path)]).stdout)
    assert as_json["devices"]["M1"]["id"]["sim"] > 0
    assert as_json["agree"] is True and as_json["amplifies"] is False
    assert [f["code"] for f in as_json["findings"]] == ["not-amplifying"]
    allowed = check_text(path, "--allow-region")
    assert allowed.returncode == 0, allowed.stdout
    assert "info: line 6: M1: ngspice puts it in cutoff" in allowed.stdout
    assert "but the stage is not biased to amplify (M1 in cutoff); accepted by --allow-region" in allowed.stdout


@needs_library
def test_a_stage_in_triode_shows_a_negative_saturation_margin_and_does_not_amplify(own_dir):
    path = own_dir / "triode.cir"  # a 47k drain resistor pulls it into triode
    completed = check_text(path)
    assert completed.returncode == 1
    as_json = json.loads(cli_subprocess(["check", "--json", str(path)]).stdout)
    device = as_json["devices"]["M1"]
    margin = device["vds"]["sim"] - device["vov"]["sim"]
    assert margin < 0 and device["sat_margin"]["sim"] == pytest.approx(margin, abs=1e-12)
    rows = table_rows(completed.stdout)
    assert rows["M1 vds − vov"][2] == engineering(margin, "V")
    (finding,) = [f for f in as_json["findings"] if f["code"] == "not-amplifying"]
    ratio = device["gm"]["sim"] / device["gds"]["sim"]
    assert f"puts it in triode (vds − vov = {engineering(margin, 'V')}), not saturation — the stage is not biased " \
           f"to amplify; its intrinsic gain gm/gds is {ratio:.3g} " in finding["message"]
    assert check_text(path, "--allow-region").returncode == 0


def test_a_value_passes_within_the_relative_tolerance_or_within_the_floor():
    from bridge.compare import _differs

    # Far from zero the relative tolerance decides: exactly 5 % passes, 5.3 % fails either way.
    assert not _differs(0.95, 1.0, 0.05, 5e-3)
    assert _differs(1.053, 1.0, 0.05, 5e-3) and _differs(0.947, 1.0, 0.05, 5e-3)
    # Near zero the floor decides: 5.3 mV from 100 mV is beyond 5 % and beyond 5 mV (the floor is not
    # added to the percentage), 4.9 mV is within the floor.
    assert _differs(0.1053, 0.1, 0.05, 5e-3)
    assert not _differs(0.1049, 0.1, 0.05, 5e-3)
    assert not _differs(4e-3, -5e-8, 0.05, 5e-3)


def test_a_device_in_cutoff_gets_no_garbled_cause(own_dir):
    result = check_circuit(read_netlist(own_dir / "cutoff.cir"), None, tolerance=0.05)
    assert not [f.message for f in result.findings if "from zero from" in f.message]


def test_a_percentage_beyond_a_million_is_written_with_an_exponent():
    """A supply of 1e300 V (a slip of the exponent) once printed a 300-digit percentage."""
    from bridge.compare import _percent

    assert _percent(0.047) == "+4.7 %"
    assert _percent(9999.0) == "+999900.0 %"
    assert _percent(7.462686567e297) == "+7.46e+299 %"
    assert _percent(-1e5) == "-1e+07 %"
