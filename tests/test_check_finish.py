"""A check's last step, after ngspice answers (``PendingCheck.finish``): one result that carries the
supply table the bias rules were judged with, and the comparison's findings as they are when
ngspice's device vectors disprove no level-1 difference.

Scenario: the headlight driver of a bicycle dynamo light, an NMOS with a source resistor. The
outside reference is ngspice 39 run directly (`ngspice -b`) on the same netlist.
"""

from __future__ import annotations

from dataclasses import asdict

import pytest

from bridge.bias_rules import supplies
from bridge.check import SOLVER_DIFFERS, _without_disproved, check_circuit, solve_own_columns, start_check
from bridge.compare import compare
from bridge.netlist import parse_netlist
from bridge.vocabulary import Finding
from tests.conftest import needs_ngspice, ngspice_batch_op

HEADLIGHT = """Bicycle dynamo headlight driver: NMOS common source, source resistor
VDYN vdyn 0 6
R1 vdyn g 180k
R2 g 0 100k
RD vdyn d 4.7k
RS s 0 1k
M1 d g s 0 ND W=30u L=3u
.model ND nmos (vto=0.8 kp=90u lambda=0.03 gamma=0.4 phi=0.7)
"""


def test_compare_carries_the_supply_table_it_is_given():
    circuit = parse_netlist(HEADLIGHT, "headlight.cir")
    own = solve_own_columns(circuit)
    table = supplies(circuit, own.hand, own.level1, None)
    result = compare(circuit, own.hand, own.level1, None, with_effect=own.with_effect, supplies=table)
    assert result.supplies is table and list(table) == ["VDYN"]
    assert compare(circuit, own.hand, own.level1, None, with_effect=own.with_effect).supplies == {}


def test_nothing_disproved_leaves_the_findings_as_they_are():
    circuit = parse_netlist(HEADLIGHT, "headlight.cir")
    own = solve_own_columns(circuit)
    assert own.level1 is not None
    vgs = own.level1.devices["M1"].vgs
    differs = Finding("error", SOLVER_DIFFERS, "M1 vgs: level-1 solver vs ngspice", 7, "M1", quantity="M1 vgs")
    other = Finding("info", "ngspice-says", "a message", None, None)
    findings = (other, differs)
    # No vector is wrong: the very findings come back, not a copy.
    assert _without_disproved(findings, circuit, own.level1, None, {}) is findings
    # A wrong vgs vector whose node difference the level-1 value matches: that difference goes.
    wrong = {"M1": {"vgs": (vgs + 5.0, vgs)}}
    assert _without_disproved(findings, circuit, own.level1, None, wrong) == (other,)
    # One the level-1 value does not match (beyond 1 mV + 0.2 %): it stays.
    far = {"M1": {"vgs": (vgs, vgs + 0.1)}}
    assert _without_disproved(findings, circuit, own.level1, None, far) == findings


@needs_ngspice
def test_finish_reports_the_supply_as_ngspice_solves_it(required_ngspice_session, tmp_path):
    session = required_ngspice_session
    circuit = parse_netlist(HEADLIGHT, "headlight.cir")
    result = start_check(circuit, session, tolerance=0.05).finish()
    # reference: ngspice -b's branch current of the supply (SPICE sign: into n+), delivered is its negative
    deck = tmp_path / "headlight.cir"
    deck.write_text(HEADLIGHT + ".op\n.end\n")
    reference = ngspice_batch_op(deck)
    supply = result.supplies["VDYN"]
    assert supply.current.sim == pytest.approx(-reference["vdyn#branch"], rel=1e-6)
    assert supply.power.sim == pytest.approx(6.0 * -reference["vdyn#branch"], rel=1e-6)
    assert supply.current.level1 == pytest.approx(supply.current.sim, rel=2e-3)
    # the same result whichever way the check is driven
    again = check_circuit(circuit, session, tolerance=0.05)
    assert again.findings == result.findings
    # (Supply and Columns compare as objects, eq=False: their fields are compared here)
    assert {name: asdict(s) for name, s in again.supplies.items()} == {
        name: asdict(s) for name, s in result.supplies.items()
    }
