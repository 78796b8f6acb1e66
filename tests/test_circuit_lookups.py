"""A Circuit's lookups (nodes, elements by name and kind, options, temperatures) are worked out once
and kept on it: they must say what a scan of its fields says, stay unchangeable, and never follow a
variant or a pickle that does not carry them."""

from __future__ import annotations

import copy
import pickle
from dataclasses import replace

import pytest

from bridge.netlist import parse_netlist
from bridge.netlist.circuit import GROUND, Circuit, Written

# A bicycle dynamo light: a PMOS switch feeds the LED string from the rectified dynamo rail.
_DYNAMO_LIGHT = """bicycle dynamo light: PMOS high-side switch
VRAIL rail 0 6
RPULL rail gate 100k
RDRIVE gate 0 47k
M1 led gate rail rail pled W=200u L=1u
RLED led 0 120
CHOLD rail 0 100u
.model pled pmos (vto=-0.9 kp=40u lambda=0.02)
.options reltol=1e-4 temp=40
.options reltol=1e-3 noacct
.op
.end
"""


def _light() -> Circuit:
    return parse_netlist(_DYNAMO_LIGHT, "dynamo.cir")


def test_the_lookups_say_what_a_scan_of_the_fields_says() -> None:
    circuit = _light()
    scanned: dict[str, None] = {}
    for element in circuit.elements:
        scanned.update((node, None) for node in element.nodes if node != GROUND)
    assert circuit.nodes() == tuple(scanned) == ("rail", "gate", "led")
    for element in circuit.elements:
        assert circuit.element(element.name.swapcase()) is element
        assert element in circuit.elements_of(element.kind)
    assert circuit.element("R9") is None
    assert [e.name for e in circuit.elements_of("resistor")] == ["RPULL", "RDRIVE", "RLED"]
    assert circuit.elements_of("bjt") == ()
    # Later `.options` cards override earlier ones; a flag maps to None.
    assert dict(circuit.options()) == {"reltol": 1e-3, "temp": 40.0, "noacct": None}
    assert circuit.temperature() == 40.0
    assert circuit.device_temperature(circuit.element("M1")) == 40.0


def test_the_lookups_are_worked_out_once() -> None:
    circuit = _light()
    assert circuit.nodes() is circuit.nodes()
    assert circuit.elements_of("mosfet") is circuit.elements_of("mosfet")
    assert circuit.options() is circuit.options()


def test_the_options_cannot_be_changed_through_the_lookup() -> None:
    circuit = _light()
    with pytest.raises(TypeError):
        circuit.options()["temp"] = 80.0  # type: ignore[index]
    assert circuit.temperature() == 40.0


def test_a_variant_has_its_own_lookups() -> None:
    circuit = _light()
    assert circuit.nodes() == ("rail", "gate", "led")
    without_led = replace(circuit, elements=tuple(e for e in circuit.elements if e.name != "RLED"))
    assert without_led.element("RLED") is None and circuit.element("RLED") is not None
    hotter = replace(circuit, directives=())
    assert hotter.temperature() == 27.0 and dict(hotter.options()) == {}
    assert circuit.temperature() == 40.0


def test_a_pickle_or_a_copy_carries_the_fields_alone() -> None:
    circuit = _light()
    circuit.nodes(), circuit.options(), circuit.element("M1"), circuit.temperature()
    for again in (pickle.loads(pickle.dumps(circuit)), copy.copy(circuit), copy.deepcopy(circuit)):
        assert again == circuit
        assert not any(name.startswith("_") for name in vars(again))
        assert again.nodes() == circuit.nodes() and dict(again.options()) == dict(circuit.options())
        assert again.element("m1") == circuit.element("M1")


def test_the_fields_as_written_are_worked_out_at_their_first_look_and_travel_in_a_pickle() -> None:
    circuit = _light()
    written = circuit.element("M1").written
    assert written._fields is None  # a check never looks: nothing worked out yet
    carried = pickle.loads(pickle.dumps(circuit)).element("M1").written
    assert written["model"] == Written("pled", 5, 23) and written["w"] == Written("200u", 5, 30)
    assert written._fields is not None
    assert dict(carried) == dict(written) == dict(copy.deepcopy(written))
    assert list(written) == ["node1", "node2", "node3", "node4", "model", "w", "l"]
    assert written.get("ad") is None and "l" in written
