"""The netlist reader carries the fields the static lint rules judge, as written and where they
stand (`Element.written`), and names the model-card mistakes it refuses (`NetlistError.code`)."""

from __future__ import annotations

import pytest

from bridge.netlist import parse_netlist
from bridge.netlist.circuit import Written
from bridge.netlist.errors import NetlistError
from bridge.report.circuit_view import circuit_json

# A greenhouse soil-moisture probe buffer: one card on two lines, a parameter, a unit letter.
PROBE = """\
Greenhouse soil-moisture probe buffer
.param rl=22k
VDD Vdd 0 DC 5
R1 Vdd Gate 1M
RD vdd d {rl}
M1 d Gate 0 0
+ NSOIL w=10 l={2u}
C1 Gate x 10F
.model NSOIL nmos (vto=0.7 kp=100u)
.op
.end
"""


def test_element_fields_are_kept_as_written_with_their_line_and_column() -> None:
    circuit = parse_netlist(PROBE, "probe.cir")
    assert circuit.element("R1").written == {
        "node1": Written("Vdd", 4, 4), "node2": Written("Gate", 4, 8), "value": Written("1M", 4, 13),
    }
    assert circuit.element("VDD").written["value"] == Written("5", 3, 14)
    assert circuit.element("RD").written["value"] == Written("{rl}", 5, 10)
    mosfet = circuit.element("M1").written
    # The model and sizes are on the `+` continuation line: line 7, columns in that line.
    assert mosfet["model"] == Written("NSOIL", 7, 3)
    assert mosfet["w"] == Written("10", 7, 11) and mosfet["l"] == Written("{2u}", 7, 16)
    assert circuit.element("C1").written["value"] == Written("10F", 8, 11)


def test_written_fields_leave_equality_and_parse_json_unchanged() -> None:
    spaced = PROBE.replace("R1 Vdd Gate 1M", "R1   Vdd Gate   1M")
    first, second = parse_netlist(PROBE, "probe.cir"), parse_netlist(spaced, "probe.cir")
    assert first.element("R1") == second.element("R1")
    element = circuit_json(first)["elements"][1]
    assert set(element) == {"name", "kind", "nodes", "value", "params", "line"}


def test_undefined_model_is_refused_with_code_card_missing_at_the_model_field() -> None:
    text = "Bicycle dynamo light sensor\nVDD vdd 0 5\nRD vdd d 10k\nM1 d d 0 0 NDYN W=10u L=1u\n.op\n.end\n"
    with pytest.raises(NetlistError) as caught:
        parse_netlist(text, "dynamo.cir")
    assert caught.value.code == "card-missing"
    assert (caught.value.location.line, caught.value.location.column) == (4, 12)


def test_model_of_the_wrong_kind_is_refused_with_code_card_wrong_type() -> None:
    text = "Bicycle dynamo light sensor\nVDD vdd 0 5\nRD vdd d 10k\nM1 d d 0 0 DDYN W=10u L=1u\n.model DDYN d\n.end\n"
    with pytest.raises(NetlistError) as caught:
        parse_netlist(text, "dynamo.cir")
    assert caught.value.code == "card-wrong-type"
    assert caught.value.location.column == 12


def test_other_reader_errors_carry_no_code() -> None:
    with pytest.raises(NetlistError) as caught:
        parse_netlist("t\nR1 a 0 1.2.3k\n.end\n", "bad.cir")
    assert caught.value.code is None
