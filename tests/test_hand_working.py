"""The hand analysis's working (bridge/analysis/hand_working.py) is written from the numbers,
only when a view reads it: `check --json`, the attribution's re-solves and a sweep write no
Step; `check --steps` writes the same steps as before, from the same numbers.

The stages are a greenhouse sensor board's: a soil-probe buffer biased by a current sink in
the source (the held closed form, saturated and in triode), a fan driver with a source resistor
(the affine closed form, saturation and triode) and a two-transistor heater switch (no closed
form: the numerical path).
"""

from __future__ import annotations

import pickle

import pytest

from bridge.analysis.hand import HandModel, hand_analysis
from bridge.check import check_circuit
from bridge.netlist import parse_netlist
from bridge.report.check_view import check_json, check_renderable
from bridge.vocabulary import Step

CARD = ".model ngh nmos (vto=0.75 kp=95u lambda=0.03 gamma=0.45 phi=0.7)"

STAGES = {
    "probe buffer, current sink in the source": """greenhouse soil-probe buffer
VDD vdd 0 5
VB g 0 2.2
RD vdd d 10k
M1 d g s 0 ngh W=30u L=3u
ISINK s 0 60u
""",
    "probe buffer pushed into triode": """greenhouse soil-probe buffer, large drain resistor
VDD vdd 0 5
VB g 0 4
RD vdd d 150k
M1 d g s 0 ngh W=30u L=3u
ISINK s 0 60u
""",
    "fan driver with a source resistor": """greenhouse fan driver
VDD vdd 0 12
R1 vdd g 330k
R2 g 0 100k
RD vdd d 4.7k
RS s 0 680
M1 d g s 0 ngh W=60u L=2u
""",
    "fan driver in triode": """greenhouse fan driver, gate pulled high
VDD vdd 0 12
R1 vdd g 47k
R2 g 0 330k
RD vdd d 47k
M1 d g 0 0 ngh W=60u L=2u
""",
    "two-transistor heater switch": """greenhouse heater switch
VDD vdd 0 12
R1 vdd g 220k
R2 g 0 100k
RD vdd d 2.2k
M1 d g s 0 ngh W=40u L=2u
M2 s s 0 0 ngh W=40u L=2u
""",
}


def stage(name: str):
    return parse_netlist(f"{STAGES[name]}{CARD}\n.op\n.end\n", "greenhouse.cir")


@pytest.fixture
def steps_written(monkeypatch):
    """The Steps created while the fixture is in use, counted at the class itself (wherever the
    working builds them from)."""
    written: list[str] = []
    original = Step.__init__

    def counted(self, text, *args, **kwargs):
        written.append(text)
        original(self, text, *args, **kwargs)

    monkeypatch.setattr(Step, "__init__", counted)
    return written


@pytest.mark.parametrize("name", list(STAGES))
def test_hand_analysis_writes_no_step_until_its_steps_are_read(name, steps_written):
    solution = hand_analysis(stage(name))
    assert solution.devices and steps_written == []
    steps = list(solution.steps)
    assert steps and len(steps_written) == len(steps)  # written once, on first reading
    assert list(solution.steps) == steps and len(steps_written) == len(steps)
    assert solution.assumptions and len(steps_written) == len(steps)  # written with the steps


def test_the_stages_cover_each_way_the_working_is_written():
    kinds = set()
    for name in STAGES:
        solution = hand_analysis(stage(name))
        text = "\n".join(str(step) for step in solution.steps)
        held = "is the source's only DC path" in text
        kinds.add((solution.closed_form, held, "re-solve in triode" in text))
    assert kinds == {(True, True, False), (True, True, True), (True, False, False), (True, False, True),
                     (False, False, False)}  # fmt: skip


@pytest.mark.parametrize("name", list(STAGES))
def test_check_json_and_the_attribution_write_no_step(name, steps_written):
    """A check without --steps (its JSON, its table) writes none of the working; --steps shows
    the working the hand analysis writes."""
    circuit = stage(name)
    result = check_circuit(circuit, None, tolerance=0.05)
    check_json(result)
    check_renderable(result, steps=False)
    assert steps_written == []
    shown = check_renderable(result, steps=True)
    assert steps_written
    expected = [step.text for step in hand_analysis(circuit).steps]
    lines = [part.text for part in shown.parts if hasattr(part, "text")]
    for number, text in enumerate(expected, start=1):
        assert f"  {number:>2}. {text}" in lines


@pytest.mark.parametrize("name", list(STAGES))
def test_a_solution_pickles_with_its_working_as_tuples(name):
    """The many-file check pipes solutions between processes pickled: the working goes as the
    tuples it stands for."""
    solution = HandModel(stage(name)).solve()
    again = pickle.loads(pickle.dumps(solution))
    assert type(again.steps) is tuple and type(again.assumptions) is tuple
    assert again == solution
    assert again.steps == tuple(hand_analysis(stage(name)).steps)


def test_without_working_the_answer_has_no_text_and_the_same_numbers(steps_written):
    circuit = stage("fan driver with a source resistor")
    bare = hand_analysis(circuit, working=False)
    full = hand_analysis(circuit)
    assert bare.steps == () and bare.assumptions == ()
    assert bare.node_voltages == full.node_voltages and bare.devices == full.devices
