"""The hand analysis's numerical path: the DC solver (compiled_network.HandNetwork) run on the hand device.

The circuits are the test netlists whose working says "Solved the hand model numerically" (two
transistors, devices drawn upside down, a source pushed past the supply). Each answer is derived
here by hand, square law with λ = γ = 0, so the numbers are checked, not just repeated; main's own
Newton (before this path was the solver's) gave the same numbers to 1e-15 relative.
"""

from __future__ import annotations

import math
import re

import pytest

from bridge.analysis.compiled_network import HandNetwork
from bridge.analysis.dcsolve import solve_operating_point
from bridge.analysis.hand import HandModel, _dc_circuit, hand_analysis
from bridge.netlist import parse_netlist
from tests.check_support import HEATER

REL = 1e-12  # the solver's answer against the closed form: rounding only


def _sat(k: float, vov: float) -> float:
    return 0.5 * k * vov * vov


def _root(a: float, b: float, c: float) -> float:
    """The larger root of a·x² + b·x + c = 0 (textbook formula)."""
    return (-b + math.sqrt(b * b - 4.0 * a * c)) / (2.0 * a)


def _cascode() -> tuple[str, dict[str, float], dict[str, float]]:
    text = """cascode
VDD vdd 0 5
VB b 0 2.5
R1 vdd g 300k
R2 g 0 100k
RD vdd d 10k
M2 d b x 0 nch W=20u L=2u
M1 x g 0 0 nch W=20u L=2u
.model nch nmos (vto=0.7 kp=120u lambda=0.02 gamma=0.4 phi=0.65)
"""
    k, g = 120e-6 * 10, 5.0 * 100 / 400
    current = _sat(k, g - 0.7)
    x = 2.5 - 0.7 - (g - 0.7)  # M2 carries the same current at the same overdrive
    return text, {"g": g, "x": x, "d": 5.0 - 10e3 * current}, {"M1": current, "M2": current}


def _pmos_mirror() -> tuple[str, dict[str, float], dict[str, float]]:
    text = """PMOS current mirror
VDD vdd 0 5
IREF bias 0 50u
MP1 bias bias vdd vdd pmir W=20u L=2u
MP2 out bias vdd vdd pmir W=40u L=2u
RL out 0 22k
.model pmir pmos (vto=-0.7 kp=40u lambda=0.02 gamma=0.45 phi=0.7)
"""
    vov = math.sqrt(2 * 50e-6 / (40e-6 * 10))
    return text, {"bias": 5.0 - 0.7 - vov, "out": 100e-6 * 22e3}, {"MP1": 50e-6, "MP2": 100e-6}


def _two_stages() -> tuple[str, dict[str, float], dict[str, float]]:
    text = """two common-source stages from one subcircuit
VSUP vdd 0 5
.subckt csstage in out supply params: rd=10k w=10u
VMEAS supply top 0
RD top out {rd}
M1 out in 0 0 nch W={w} L=2u
.ends csstage
.model nch nmos (vto=0.7 kp=120u lambda=0.02)
R1 vdd g1 330k
R2 g1 0 120k
X1 g1 d1 vdd csstage rd=15k w=20u
X2 d1 d2 vdd csstage params: rd=22k
"""
    g1 = 5.0 * 120 / 450
    first = _sat(120e-6 * 10, g1 - 0.7)
    d1 = 5.0 - 15e3 * first
    second = _sat(120e-6 * 5, d1 - 0.7)
    return text, {"g1": g1, "d1": d1, "d2": 5.0 - 22e3 * second}, {"M.x1.M1": first, "M.x2.M1": second}


def _pmos_upside_down() -> tuple[str, dict[str, float], dict[str, float]]:
    # Drain and source swapped: the node d acts as the source, VOV = V(d) − 0.8 with the gate at 0.
    text = """Greenhouse fan driver: PMOS wired upside down
VDD vdd 0 5
RD vdd d 2k
M1 d 0 0 vdd PG W=40u L=2u
.model PG pmos (vto=-0.8 kp=40u lambda=0.02 gamma=0.4 phi=0.7)
"""
    k = 40e-6 * 20
    vov = _root(0.5 * k * 2e3, 1.0, -(5.0 - 0.8))  # V(d) = 5 − RD·ID, ID = (K/2)·VOV²
    return text, {"d": 0.8 + vov}, {"M1": -_sat(k, vov)}  # id < 0: the current runs swapped


def _sink_backwards() -> tuple[str, dict[str, float], dict[str, float]]:
    # The current source pushes 300 µA into the source node: 150 V across RS, the device off.
    text = HEATER
    return text, {"g": 2.0, "s": 150.0, "d": 5.0}, {"M1": 0.0}


CASES = {
    "cascode": _cascode,
    "pmos mirror": _pmos_mirror,
    "two stages": _two_stages,
    "pmos upside down": _pmos_upside_down,
    "current sink backwards": _sink_backwards,
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_the_numerical_path_finds_the_hand_point(name: str) -> None:
    text, voltages, currents = CASES[name]()
    solution = hand_analysis(parse_netlist(text, "stage.cir"))
    assert not solution.closed_form
    assert any("Solved the hand model numerically" in step.text for step in solution.steps)
    for node, expected in voltages.items():
        assert math.isclose(solution.node_voltages[node], expected, rel_tol=REL, abs_tol=1e-12), node
    for device, expected in currents.items():
        assert math.isclose(solution.devices[device].id, expected, rel_tol=REL, abs_tol=1e-18), device


@pytest.mark.parametrize("name", sorted(CASES))
def test_the_working_counts_the_solver_iterations(name: str) -> None:
    circuit = parse_netlist(CASES[name]()[0], "stage.cir")
    solution = hand_analysis(circuit)
    (line,) = [step.text for step in solution.steps if "numerically" in step.text]
    count = int(re.search(r"\((\d+) iterations\)", line).group(1))
    dc = _dc_circuit(circuit, frozenset())
    devices = {t.name: t.hand_device() for t in dc.transistors}
    solved = HandNetwork(circuit, devices, dc.merged).solve()
    assert solved.iterations == count
    assert all(solution.node_voltages[node] == value for node, value in solved.node_voltages.items())


# A bicycle dynamo light: two PMOS switches whose bulk hangs on a resistor to ground, so their
# bulk–source junctions are forward biased by the whole supply.
DYNAMO = """bicycle dynamo light, bulk on a resistor
VRAIL rail 0 6
VG g 0 3
RB nb 0 10k
M1 lamp g rail nb plamp w=60u l=2u
M2 tail g rail nb plamp w=30u l=2u
RL lamp 0 680
RT tail 0 1.5k
.model plamp pmos (vto=-0.9 kp=35u)
"""


def test_the_hand_device_has_no_junctions_where_the_level1_device_conducts() -> None:
    circuit = parse_netlist(DYNAMO, "dynamo.cir")
    hand = hand_analysis(circuit)
    assert not hand.closed_form and hand.node_voltages["nb"] == 0.0  # no bulk current at all
    assert any("forward biased" in step.text for step in hand.steps)
    dc = _dc_circuit(circuit, frozenset())
    solved = HandNetwork(circuit, {t.name: t.hand_device() for t in dc.transistors}, dc.merged).solve()
    assert all(j.bulk_drain == 0.0 and j.bulk_source == 0.0 for j in solved.junctions.values())
    level1 = solve_operating_point(circuit)
    assert level1.voltage("nb") > 5.0  # the real junctions pull the bulk up towards the rail
    assert level1.junctions["M1"].bulk_source > 1e-5


def test_the_attribution_resolves_share_one_hand_network() -> None:
    model = HandModel(parse_netlist(CASES["cascode"]()[0], "stage.cir"))
    plain = model.solve()
    lam = model.solve(effects={"lambda"}, working=False, start=plain.node_voltages)
    both = model.solve(effects={"lambda", "gamma"}, working=False)
    assert len(model._dc.solver) == 1  # compiled once, for every model of the transistors
    level1 = solve_operating_point(parse_netlist(CASES["cascode"]()[0], "stage.cir"))
    # λ moves the point; λ and γ together are the level-1 channel: only the junctions' GMIN and
    # leakage differ, picoamps through RD = 10 kΩ, some 1e-8 V.
    assert lam.node_voltages["d"] != plain.node_voltages["d"]
    for node, value in both.node_voltages.items():
        assert math.isclose(value, level1.node_voltages[node], rel_tol=0.0, abs_tol=1e-7), node
