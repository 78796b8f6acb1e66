"""The device interface the DC solver calls (bridge.devices.interface.DcDevice): each placed device
loads its own linearisation, and the solver's Newton is only the loop over them.

What a device loads is checked against its own equations: the conductances it stamps are the
derivatives of the terminal currents (central differences of ``evaluate`` and the junction
currents), and the right-hand side makes the linearised currents equal the currents at the
point. The hand device (``Mos1Instance.without_junctions``) loads its channel and nothing else.
"""

from __future__ import annotations

import math

import pytest

from bridge.analysis import dcsolve
from bridge.devices.diode import PlacedDiode, diode_current
from bridge.devices.mos1.convergence import vcrit
from bridge.devices.mos1.instance import mosfet_instance
from bridge.devices.mos1.placed import PlacedMosfet
from bridge.netlist import parse_netlist

# A bicycle dynamo light: a PMOS switch for the lamp, its bulk tied to a node that can sit above
# the source, and a diode from the dynamo rail.
DYNAMO = """bicycle dynamo light switch
.model plamp pmos (vto=-0.9 kp=35u gamma=0.4 phi=0.68 lambda=0.03 is=1e-13)
.model dclamp d (is=2e-14 n=1.05)
vrail rail 0 6
vg g 0 2.2
vb nb 0 5.45
rl lamp 0 680
m1 lamp g rail nb plamp w=120u l=2u
d1 rail clamp dclamp
rc clamp 0 10k
.end
"""


def _placed(junctions: bool = True) -> PlacedMosfet:
    circuit = parse_netlist(DYNAMO, "dynamo.cir")
    device = mosfet_instance(circuit, circuit.element("m1"))
    if not junctions:
        device = device.without_junctions(device.model.with_lambda_gamma(0.0, 0.0))
    # Unknowns: 0 ground, 1 drain, 2 gate, 3 source, 4 bulk; all kept, in that order.
    return PlacedMosfet("m1", 1, 2, 3, 4, device)


def _terminal_currents(placed: PlacedMosfet, x: list[float], gmin: float) -> list[float]:
    """Current out of each unknown into the device (ground first), from the device's equations."""
    device = placed.device
    p = device.model.polarity
    vd, vg, vs, vb = x[1], x[2], x[3], x[4]
    drain = device.evaluate(vd, vg, vs, vb).drain_current
    currents = [0.0, drain, 0.0, -drain, 0.0]
    if device.junctions:
        for far, drain_side in ((1, True), (3, False)):
            current = p * device.junction(p * (vb - x[far]), drain_side, gmin)[0]  # bulk → diffusion
            currents[4] += current
            currents[far] -= current
    return currents


def _load(placed: PlacedMosfet, x: list[float], gmin: float) -> tuple[list[list[float]], list[float], bool]:
    matrix = [[0.0] * 4 for _ in range(4)]
    rhs = [0.0] * 4
    state = placed.settle(x)
    _, clipped = placed.load(state, placed.places((-1, 0, 1, 2, 3)), x, True, gmin, matrix, rhs)
    return matrix, rhs, clipped


@pytest.mark.parametrize("junctions", [True, False])
def test_a_mosfet_loads_the_derivatives_and_the_currents_of_its_own_equations(junctions: bool) -> None:
    placed, gmin = _placed(junctions), 1e-12
    # The PMOS's bulk 0.55 V below its source (its bulk–source junction forward biased), the
    # channel conducting in triode.
    x = [0.0, 4.1, 2.2, 6.0, 5.45]
    matrix, rhs, clipped = _load(placed, x, gmin)
    assert not clipped  # the first iteration takes the state's voltages as they are
    currents = _terminal_currents(placed, x, gmin)
    for row in range(4):
        for column in range(4):
            step = 1e-6
            up, down = list(x), list(x)
            up[column + 1] += step
            down[column + 1] -= step
            slope = (_terminal_currents(placed, up, gmin)[row + 1] - _terminal_currents(placed, down, gmin)[row + 1])
            slope /= 2.0 * step
            assert math.isclose(matrix[row][column], slope, rel_tol=1e-5, abs_tol=1e-12), (row, column)
        # The linearised current g·v − rhs equals the current at the point.
        linear = sum(g * v for g, v in zip(matrix[row], x[1:])) - rhs[row]
        assert math.isclose(linear, currents[row + 1], rel_tol=1e-9, abs_tol=1e-15), row
    # Only the device with junctions draws bulk current (the junction forward biased by 0.55 V).
    bulk_current = currents[4]
    if junctions:
        assert abs(bulk_current) > 1e-6
    else:
        assert bulk_current == 0.0 and matrix[3] == [0.0, 0.0, 0.0, 0.0] and rhs[3] == 0.0


def test_the_hand_device_limits_no_junction_and_tests_its_channel_only() -> None:
    placed = _placed(junctions=False)
    state = placed.start()
    x = [0.0, 0.0, 0.0, 6.0, 3.0]  # the bulk 3 V below the PMOS source: pnjlim would clip that step
    matrix, rhs = [[0.0] * 4 for _ in range(4)], [0.0] * 4
    entry, clipped = placed.load(state, placed.places((-1, 0, 1, 2, 3)), x, False, 1e-12, matrix, rhs)
    assert not clipped
    assert len(placed.convergence_pairs(entry, x, 1e-12)) == 1
    with_junctions = _placed(junctions=True)
    state = with_junctions.start()
    entry, clipped = with_junctions.load(state, (0, 1, 2, 3), x, False, 1e-12, matrix, rhs)
    assert clipped and len(with_junctions.convergence_pairs(entry, x, 1e-12)) == 3


def test_a_diode_loads_its_shockley_linearisation() -> None:
    vte, saturation = 1.05 * 0.025865, 2e-14
    diode = PlacedDiode("d1", 1, 2, saturation, vte, vcrit(vte, saturation))
    matrix, rhs = [[0.0, 0.0], [0.0, 0.0]], [0.0, 0.0]
    x = [0.0, 0.62, 0.0]
    entry, clipped = diode.load(diode.settle(x), diode.places((-1, 0, 1)), x, True, 1e-12, matrix, rhs)
    current, conductance = diode_current(0.62, saturation, vte, 1e-12)
    assert not clipped and entry[0] == current
    assert matrix == [[conductance, -conductance], [-conductance, conductance]]
    assert math.isclose(conductance * 0.62 - rhs[0], current, rel_tol=1e-12)


def test_the_solver_loads_each_device_through_the_interface() -> None:
    circuit = parse_netlist(DYNAMO, "dynamo.cir")
    net = dcsolve._build_network(circuit, dcsolve.level1_model)
    assert [type(device) for device in net.devices] == [PlacedMosfet, PlacedDiode]
    op = dcsolve.solve_operating_point(circuit)
    # The junction current the solver reports is the placed device's own, at the solution.
    x = [0.0] + [op.node_voltages[node] for node in net.nodes] + [0.0] * len(net.branch_names)
    mos = net.mosfets[0]
    forward = x[mos.source] - x[mos.bulk]
    assert math.isclose(forward, 0.55, rel_tol=1e-9)
    expected = mos.device.junction(forward, False, net.gmin)[0]  # device polarity: vbs = −(vb − vs)
    assert expected > 1e-5 and op.junctions["m1"].bulk_source == expected
