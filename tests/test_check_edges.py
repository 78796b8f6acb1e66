"""Circuits at the edge of the check: outside the hand model, singular, without a MOSFET."""

from __future__ import annotations

import pytest

from bridge.check import NotASingleStage, check_circuit
from bridge.netlist import parse_netlist


@pytest.fixture(scope="module")
def session(required_ngspice_session):
    """The ngspice column is part of what these tests check: they skip where ngspice is absent."""
    return required_ngspice_session


def codes(result) -> set[str]:
    return {f.code for f in result.findings}


def test_bjt_beside_the_mosfet_leaves_hand_and_level1_empty_but_reports(session):
    circuit = parse_netlist(
        "bjt stage\nV1 vcc 0 5\nR1 vcc b 100k\nQ1 c b 0 qn\nRC vcc c 1k\nM1 c b 0 0 nch\n"
        ".model qn npn(bf=100)\n.model nch nmos vto=1 kp=50u\n.op\n", "bjt.cir",
    )
    result = check_circuit(circuit, session, tolerance=0.05)
    assert {"hand-unavailable", "solver-failed"} <= codes(result)
    assert result.nodes["c"].hand is None and result.nodes["c"].level1 is None
    assert not result.agree
    # reference: ngspice 39 solves the BJT itself
    assert result.nodes["c"].sim is not None


def test_gate_reached_only_through_a_capacitor_is_reported_not_trusted(session):
    circuit = parse_netlist(
        "floating gate\nVDD vdd 0 5\nVIN in 0 1\nC1 in g 1u\nRD vdd d 10k\nM1 d g 0 0 nch w=10u l=1u\n"
        ".model nch nmos vto=0.7 kp=100u\n", "float.cir",
    )
    result = check_circuit(circuit, session, tolerance=0.05)
    assert "hand-unavailable" in codes(result)
    assert "solver-failed" in codes(result)
    solver = next(f for f in result.findings if f.code == "solver-failed")
    assert "node g" in solver.message
    # ngspice 39 warns "singular matrix: check node g" and still returns a number
    assert "sim-singular" in codes(result)


def test_netlist_without_mosfet_is_refused():
    circuit = parse_netlist("divider\nV1 a 0 1\nR1 a b 1k\nR2 b 0 1k\n", "div.cir")
    with pytest.raises(NotASingleStage):
        check_circuit(circuit, None, tolerance=0.05)
