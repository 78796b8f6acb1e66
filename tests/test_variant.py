"""Circuit variants (bridge/netlist/variant.py): values, models, elements and temperature changed
on a copy, the original untouched, unknown names refused; the emitted `.temp` is what ngspice uses."""

from __future__ import annotations

import pytest

from bridge.netlist import parse_netlist
from bridge.netlist.circuit import Element, Origin
from bridge.netlist.emit import emit
from bridge.netlist.variant import (
    at_temperature,
    with_elements,
    with_model_parameters,
    with_values,
    without_elements,
)

# A greenhouse soil-probe buffer: a divider-biased common source.
PROBE = """soil probe buffer
.options temp=60
VDD vdd 0 12
R1 vdd g 680k
R2 g 0 220k
RD vdd d 8.2k
RS s 0 1.5k
M1 d g s 0 nprobe W=40u L=4u
.model nprobe nmos (level=1 vto=0.9 kp=80u lambda=0.01)
.op
.end
"""


def probe():
    return parse_netlist(PROBE, "probe.cir")


def test_values_replaced_on_a_copy():
    circuit = probe()
    changed = with_values(circuit, {"rd": 9e3, "VDD": 11.4})
    assert changed.element("RD").value == 9e3 and changed.element("vdd").value == 11.4
    assert circuit.element("RD").value == 8.2e3 and circuit.element("VDD").value == 12.0
    assert changed.element("R1") is circuit.element("R1")


def test_unknown_or_valueless_names_are_refused():
    circuit = probe()
    with pytest.raises(ValueError, match="no element `RX`"):
        with_values(circuit, {"RX": 1.0})
    with pytest.raises(ValueError, match="mosfet"):
        with_values(circuit, {"M1": 1.0})
    with pytest.raises(ValueError, match="no model `pfoo`"):
        with_model_parameters(circuit, {"pfoo": {"vto": 1.0}})
    with pytest.raises(ValueError, match="no element"):
        without_elements(circuit, ["C9"])
    with pytest.raises(ValueError, match="already has"):
        with_elements(circuit, [Element("rd", "resistor", ("d", "0"), 1e3, Origin("x", 1))])


def test_model_parameters_and_elements():
    circuit = probe()
    changed = with_model_parameters(circuit, {"NPROBE": {"VTO": 1.1}})
    assert changed.model("nprobe").params["vto"] == 1.1 and changed.model("nprobe").params["kp"] == 80e-6
    assert circuit.model("nprobe").params["vto"] == 0.9
    smaller = without_elements(circuit, ["rs"])
    assert smaller.element("RS") is None and len(smaller.elements) == len(circuit.elements) - 1
    bigger = with_elements(smaller, [Element("RS2", "resistor", ("s", "0"), 2e3, Origin("x", 1))])
    assert bigger.element("rs2").value == 2e3


def test_temperature_replaces_the_cards():
    circuit = probe()
    assert circuit.temperature() == 60.0
    hot = at_temperature(circuit, 85.0)
    assert hot.temperature() == 85.0 and circuit.temperature() == 60.0
    assert at_temperature(hot, -20.0).temperature() == -20.0
    assert emit(hot).text.count(".temp") == 1


def test_ngspice_runs_the_variant_at_its_temperature(required_ngspice_session):
    """Source: ngspice itself. The emitted `.temp 85` beats the netlist's `.options temp=60`:
    the drain current ngspice gives the variant equals the one it gives a netlist written at 85 °C."""
    written = parse_netlist(PROBE.replace(".options temp=60", ".temp 85"), "probe85.cir")
    variant = at_temperature(probe(), 85.0)
    session = required_ngspice_session
    currents = [
        session.run(emit(c, saves=["@m1[id]"]), ["@m1[id]"]).scalar("@m1[id]") for c in (variant, written, probe())
    ]
    assert currents[0] == pytest.approx(currents[1], rel=1e-12)
    assert currents[0] != pytest.approx(currents[2], rel=1e-4)
