"""The main process's side of a check after ngspice answers, on its faster paths: an operating
point read from the answer's floats, a card's LAMBDA and GAMMA remembered by content, one encoder
for the JSON lines. Each path is checked against the way it replaced, never for its timing.

Scenario: the buffer of a rain gauge's tipping-bucket sensor on a weather station, an NMOS common
source with a divider, and the examples in netlists/.
"""

from __future__ import annotations

import json
import pickle
from dataclasses import fields, replace

import numpy as np
import pytest
from conftest import EXAMPLES

from bridge.analysis.dcsolve import level1_model
from bridge.check import solve_own_columns, start_check
from bridge.compare import HAND_FLOOR, HAND_FLOOR_TEXT, cause_groups, compare
from bridge.devices.mos1.model import Level1Model
from bridge.netlist import NetlistError, parse_netlist, read_netlist
from bridge.netlist.numbers import engineering
from bridge.report.check_view import check_json, check_json_line
from bridge.sim.client import SimResult, _point_arrays, _sim_result, _single_points
from bridge.sim.operating_point import _read_operating_point, submit_operating_point

RAIN_GAUGE = """Rain gauge tipping-bucket buffer: NMOS common source, divider bias, source resistor
VBAT vbat 0 3.3
R1 vbat g 220k
R2 g 0 150k
RD vbat d 6.8k
RS s 0 470
M1 d g s 0 NRG W=12u L=2u
.model NRG nmos (vto=0.6 kp=110u lambda=0.04 gamma=0.35 phi=0.65)
"""

# An `.op` answer as the worker sends it: one value per vector.
OP_REPLY = {
    "id": 3, "ok": True, "plot": "op1", "messages": ["a note"],
    "vectors": {"@m1[id]": [1.23e-4], "@m1[vds]": [1.84], "d": [1.9], "g": [1.34], "s": [0.06],
                "vbat#branch": [-1.4e-4]},
}


def _example_circuits():
    for path in sorted(EXAMPLES.glob("*.cir")):
        try:
            circuit = read_netlist(path)
        except NetlistError:
            continue
        if circuit.elements_of("mosfet"):
            yield circuit


def test_an_operating_point_answer_is_read_from_its_floats():
    result = _sim_result(OP_REPLY)
    assert dict(result.points) == {name: values[0] for name, values in OP_REPLY["vectors"].items()}
    assert result.scalar("v(d)") == 1.9 and result.scalar("@m1[id]") == 1.23e-4
    assert result.scalar_if_any("i(vbat)") == -1.4e-4 and result.scalar_if_any("i(nowhere)") is None
    with pytest.raises(KeyError):
        result.scalar("nowhere")
    assert result.messages == ("a note",) and result.plot == "op1"
    # The arrays, when asked for, are the ones the answer made before: one read-only value each.
    before = _point_arrays(_single_points(OP_REPLY["vectors"]), np)
    assert list(result.vectors) == list(before) and len(result.vectors) == len(before)
    assert "d" in result and "nowhere" not in result
    for name, array in before.items():
        assert result.vectors[name].shape == (1,) and not result.vectors[name].flags.writeable
        assert result.vectors[name].tolist() == array.tolist()


def test_reading_an_operating_point_makes_no_array():
    circuit = parse_netlist(RAIN_GAUGE, "rain_gauge.cir")
    reply = {**OP_REPLY, "vectors": {**OP_REPLY["vectors"], "vbat": [3.3], "@m1[vgs]": [1.28], "@m1[vbs]": [-0.06],
                                     "@m1[gm]": [5.1e-4], "@m1[gds]": [4.4e-6], "@m1[gmbs]": [1.2e-4],
                                     "@m1[vdsat]": [0.74], "@m1[von]": [0.6]}}  # fmt: skip
    result = _sim_result(reply)
    point = _read_operating_point(circuit, result)
    assert result.vectors._arrays is None  # the floats were read, no array was made
    assert point.node_voltages == {"0": 0.0, "vbat": 3.3, "g": 1.34, "d": 1.9, "s": 0.06}
    assert point.branch_currents == {"VBAT": -1.4e-4}
    assert point.devices["M1"].id == 1.23e-4 and point.devices["M1"].vth == 0.6


def test_a_plot_of_more_points_keeps_its_arrays():
    result = _sim_result({"ok": True, "plot": "dc1", "vectors": {"d": [1.0, 2.0], "v-sweep": [0.0, 1.0]}})
    assert result.points is None
    assert result["d"].tolist() == [1.0, 2.0] and result.scalar_if_any("nowhere") is None
    with pytest.raises(ValueError):
        result.scalar("d")


@pytest.mark.parametrize("circuit", list(_example_circuits()), ids=lambda c: c.source_file.rsplit("/", 1)[-1])
def test_ngspice_answers_read_as_floats_are_read_as_through_the_arrays(circuit, required_ngspice_session):
    result = submit_operating_point(required_ngspice_session, circuit).run.result()
    assert result.points is not None
    through_arrays = replace(result, points=None)  # the vectors as arrays alone, as they were read before
    fast, slow = _read_operating_point(circuit, result), _read_operating_point(circuit, through_arrays)
    assert fast.node_voltages == slow.node_voltages and fast.branch_currents == slow.branch_currents
    assert fast.messages == slow.messages and list(fast.devices) == list(slow.devices)
    for name, device in fast.devices.items():
        for field in fields(device):
            assert getattr(device, field.name) == getattr(slow.devices[name], field.name), (name, field.name)


def _cards():
    for path in [*sorted(EXAMPLES.glob("*.cir")), *sorted((EXAMPLES.parent / "tests" / "batch_corpus").glob("*.cir"))]:
        try:
            circuit = read_netlist(path)
        except NetlistError:
            continue
        yield from circuit.models.values()


def test_a_card_read_again_gives_the_model_its_content_gave():
    # compare asks each card's LAMBDA and GAMMA of level1_model, remembered by the card's names and
    # values (model.card_model_of): a copy (a card that came through the helper's pipe) is not
    # built again; a card holding a zero (maybe -0.0) is remembered for that very card alone.
    cards = [card for card in _cards() if card.type in ("nmos", "pmos")]
    assert len(cards) > 10
    for card in cards:
        copy = pickle.loads(pickle.dumps(card))
        assert copy is not card and copy.params is not card.params
        try:
            model = level1_model(card)
        except ValueError:
            with pytest.raises(ValueError):
                level1_model(copy)
            continue
        again = level1_model(copy)
        assert (again.lambda_, again.gamma) == (model.lambda_, model.gamma), card.name
        assert (again is model) == (0 not in card.params.values()), card.name


def test_a_card_that_came_through_the_helpers_pipe_is_not_built_again(monkeypatch):
    """A circuit unpickled (as the ahead helper sends it) has new card objects: its comparison
    takes the card's LAMBDA and GAMMA from the ones its content gave, and says the same."""
    circuit = parse_netlist(RAIN_GAUGE, "rain_gauge.cir")
    own = solve_own_columns(circuit)
    first = compare(circuit, own.hand, own.level1, None, with_effect=own.with_effect)
    copy, copied_own = pickle.loads(pickle.dumps((circuit, own)))
    assert copy.models["nrg"] is not circuit.models["nrg"]
    flat = parse_netlist(RAIN_GAUGE.replace("lambda=0.04 ", ""), "rain_gauge_flat.cir")
    built = []
    real = Level1Model.from_card.__func__

    def counted(cls, *args, **kwargs):
        built.append(args[0])
        return real(cls, *args, **kwargs)

    monkeypatch.setattr(Level1Model, "from_card", classmethod(counted))
    again = compare(copy, copied_own.hand, copied_own.level1, None, with_effect=copied_own.with_effect)
    assert built == []
    assert again.findings == first.findings and any(f.code == "cause" for f in again.findings)
    # Another card's content is another entry, built once for its solve and its comparison: a card
    # without LAMBDA lists no channel-length cause.
    flat_own = solve_own_columns(flat)
    flat_result = compare(flat, flat_own.hand, flat_own.level1, None, with_effect=flat_own.with_effect)
    assert len(built) == 1
    cause = next(f.message for f in flat_result.findings if f.code == "cause")
    assert "LAMBDA" not in cause and "GAMMA" in cause


def test_the_hand_floors_read_as_engineering_writes_them():
    assert {unit: engineering(floor, unit) for unit, floor in HAND_FLOOR.items()} == HAND_FLOOR_TEXT


def test_a_json_line_is_what_json_dumps_writes(ngspice_session):
    for circuit in [parse_netlist(RAIN_GAUGE, "rain_gauge.cir"), *_example_circuits()]:
        result = start_check(circuit, ngspice_session, tolerance=0.05).finish()
        assert check_json_line(result) == json.dumps(check_json(result), allow_nan=False)
    # JSON has no infinity: a value that is not finite is refused as json.dumps refuses it.
    with pytest.raises(ValueError):
        check_json_line.__globals__["_LINE_ENCODER"].encode({"a": float("inf")})


def test_simresult_is_still_made_with_arrays_alone():
    array = np.array([2.0])
    result = SimResult(plot="op1", vectors={"d": array})
    assert result.points is None and result.scalar("v(d)") == 2.0 and result.scalar_if_any("x") is None


def test_an_effect_is_judged_on_the_hand_differences_alone(ngspice_session):
    """``CheckResult.settled_by`` names only quantities flagged in the hand column (the ones a cause
    can explain), and among them those the effect alone brings within tolerance."""
    circuit = parse_netlist(RAIN_GAUGE.replace("lambda=0.04", "lambda=0.15"), "rain_gauge_long.cir")
    result = start_check(circuit, ngspice_session, tolerance=0.05).finish()
    flagged = {f"V({node})" for node, columns in result.nodes.items() if "hand" in columns.flagged}
    flagged |= {f"{name} {quantity}" for name, device in result.devices.items()
                for quantity, columns in device.quantities.items() if "hand" in columns.flagged}
    assert "M1 id" in flagged and set(result.settled_by) == {"lambda", "gamma"}
    for settled in result.settled_by.values():
        assert set(settled.quantities) <= flagged
    # LAMBDA alone brings the hand id to the reference: the group of the difference it explains.
    assert "M1 id" in result.settled_by["lambda"].quantities
    assert any(group.cause == "lambda" for group in cause_groups(result))
