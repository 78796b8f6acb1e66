"""The attribution's re-solves of a stage a closed form covers, with one effect switched on:
solved for one unknown on the closed form's own network (ID of an affine stage,
``hand._affine_with_effects``; the held node's voltage, ``hand._held_with_effects``), without
compiling the circuit for the DC solver's Newton, and the same point as that numerical path
gives (``closed_form=False``) to rounding.

The stages are a greenhouse sensor board's, written for these tests: a fan driver, a soil
probe's buffer, a PMOS heater switch, a vent motor's driver pushed into triode and a lamp
driver left in cutoff, a humidity sensor's follower and a light sensor's mirror reference (each
held by a current source), and a pump driver's cascode (two MOSFETs: the DC solver's).
"""

from __future__ import annotations

import math

import pytest

from bridge.analysis.hand import HandModel
from bridge.netlist import parse_netlist

# Numbers the two paths must share: both solve the same equations to their last digits.
REL = 1e-12

FAN = """Greenhouse board: fan driver, common source, divider bias, source resistor
VDD vdd 0 12
R1 vdd g 330k
R2 g 0 100k
RD vdd d 3.3k
RS s 0 680
M1 d g s 0 nfan W=40u L=2u
.model nfan nmos (vto=0.9 kp=95u lambda=0.03 gamma=0.5 phi=0.65)
.op
.end
"""

PROBE = """Greenhouse board: soil probe buffer, drain-to-gate feedback
VDD vdd 0 5
RD vdd d 22k
RF d g 1meg
RG g 0 470k
RS s 0 1.2k
M1 d g s 0 nprobe W=10u L=1u
.model nprobe nmos (vto=0.6 kp=120u lambda=0.05 gamma=0.35 phi=0.7)
.op
.end
"""

HEATER = """Greenhouse board: heater switch, PMOS common source, source resistor
VDD vdd 0 9
R1 vdd g 100k
R2 g 0 220k
RS vdd s 330
RD d 0 1k
M1 d g s vdd pheat W=80u L=2u
.model pheat pmos (vto=-1.1 kp=40u lambda=0.04 gamma=0.55 phi=0.7)
.op
.end
"""

# RD large enough that the vent driver sits in triode.
VENT = """Greenhouse board: vent motor driver in triode
VDD vdd 0 5
R1 vdd g 100k
R2 g 0 100k
RD vdd d 47k
RS s 0 100
M1 d g s 0 nvent W=100u L=1u
.model nvent nmos (vto=0.7 kp=150u lambda=0.06 gamma=0.45 phi=0.7)
.op
.end
"""

# The gate below threshold: the lamp driver is off with either effect.
LAMP = """Greenhouse board: grow-lamp driver, gate below threshold
VDD vdd 0 12
R1 vdd g 1meg
R2 g 0 47k
RD vdd d 1k
RS s 0 220
M1 d g s 0 nlamp W=20u L=2u
.model nlamp nmos (vto=1.2 kp=100u lambda=0.02 gamma=0.5 phi=0.7)
.op
.end
"""

# The source held only by a current source: ID is the source's, the source node moves.
FOLLOWER = """Greenhouse board: humidity sensor follower, current-source load
VDD vdd 0 5
VG g 0 3
I1 s 0 200u
M1 vdd g s 0 nhum W=20u L=2u
.model nhum nmos (vto=0.7 kp=100u lambda=0.02 gamma=0.45 phi=0.7)
.op
.end
"""

# A diode-connected PMOS fed only by a current source, its bulk on the rail and its source
# below it through a resistor: the drain (and gate) node is held.
MIRROR = """Greenhouse board: light sensor mirror reference, PMOS diode fed by a current source
VDD vdd 0 5
RS vdd s 2.2k
M1 d d s vdd pref W=30u L=3u
I1 d 0 150u
.model pref pmos (vto=-0.8 kp=45u lambda=0.04 gamma=0.5 phi=0.7)
.op
.end
"""

# Two MOSFETs: no closed form, the re-solves stay with the DC solver.
CASCODE = """Greenhouse board: pump driver cascode
VDD vdd 0 12
VB1 b1 0 1.6
VB2 b2 0 4
RD vdd d 4.7k
M2 d b2 x 0 npump W=40u L=2u
M1 x b1 0 0 npump W=40u L=2u
.model npump nmos (vto=0.8 kp=100u lambda=0.03 gamma=0.4 phi=0.7)
.op
.end
"""

STAGES = {"fan": FAN, "probe": PROBE, "heater": HEATER, "vent": VENT, "lamp": LAMP, "follower": FOLLOWER,
          "mirror": MIRROR}


def _close(a: float, b: float) -> bool:
    return math.isclose(a, b, rel_tol=REL, abs_tol=1e-15)


@pytest.mark.parametrize("name", sorted(STAGES))
@pytest.mark.parametrize("effect", ["lambda", "gamma"])
def test_a_closed_form_stage_is_re_solved_without_the_dc_solver(name: str, effect: str) -> None:
    circuit = parse_netlist(STAGES[name], f"{name}.cir")
    model = HandModel(circuit)
    plain = model.solve()
    assert plain.closed_form
    moved = model.solve(effects={effect}, working=False, start=plain.node_voltages)
    assert not model._dc.solver  # no network compiled for the DC solver's Newton
    numerical = HandModel(circuit).solve(effects={effect}, closed_form=False, working=False,
                                         start=plain.node_voltages)
    assert moved.effects == numerical.effects == frozenset({effect})
    assert not moved.closed_form  # solved numerically (for ID), as the text of such a point says
    assert moved.node_voltages.keys() == numerical.node_voltages.keys()
    for node, value in moved.node_voltages.items():
        assert math.isclose(value, numerical.node_voltages[node], rel_tol=REL, abs_tol=1e-12), node
    (device,), (reference,) = moved.devices.values(), numerical.devices.values()
    assert device.region == reference.region
    for quantity in ("id", "vgs", "vds", "vth", "vov", "gm", "gds"):
        assert _close(getattr(device, quantity), getattr(reference, quantity)), quantity


def test_the_re_solves_reach_the_regions_they_name() -> None:
    """Each stage where its name says, so the cases above cover saturation, triode and cutoff,
    and the effect moves the point as it should (λ raises a saturated device's current, except
    where a current source holds it)."""
    regions = {}
    for name, text in STAGES.items():
        model = HandModel(parse_netlist(text, f"{name}.cir"))
        plain = model.solve()
        moved = model.solve(effects={"lambda"}, working=False, start=plain.node_voltages)
        (device,), (before,) = moved.devices.values(), plain.devices.values()
        regions[name] = device.region
        assert type(device.id) is float  # plain floats, as the numerical path gives
        if name in ("follower", "mirror"):
            assert device.id == before.id  # the current source sets ID: the attribution is exactly 0
        elif device.region == "saturation":
            assert device.id > before.id
    assert regions == {"fan": "saturation", "probe": "saturation", "heater": "saturation", "vent": "triode",
                       "lamp": "cutoff", "follower": "saturation", "mirror": "saturation"}


def test_the_re_solve_without_a_start_finds_the_same_point() -> None:
    circuit = parse_netlist(FAN, "fan.cir")
    model = HandModel(circuit)
    plain = model.solve()
    started = model.solve(effects={"gamma"}, working=False, start=plain.node_voltages)
    cold = model.solve(effects={"gamma"}, working=False)
    (a,), (b,) = started.devices.values(), cold.devices.values()
    assert _close(a.id, b.id) and _close(a.vth, b.vth)


def test_a_stage_of_two_mosfets_is_re_solved_by_the_dc_solver() -> None:
    circuit = parse_netlist(CASCODE, "cascode.cir")
    model = HandModel(circuit)
    plain = model.solve()
    assert not plain.closed_form
    moved = model.solve(effects={"lambda"}, working=False, start=plain.node_voltages)
    assert len(model._dc.solver) == 1
    assert moved.devices["M1"].id > plain.devices["M1"].id


# Deep triode: RD pulls the drain to 30 mV of a 5 V supply, and λ moves ID by some 3.5 ppm.
VALVE = """Greenhouse board: drip valve driver, deep triode
VDD vdd 0 5
R1 vdd g 100k
R2 g 0 100k
RD vdd d 47k
M1 d g 0 0 nvalve W=20u L=1u
.model nvalve nmos (vto=0.7 kp=100u lambda=0.02)
.op
.end
"""


def test_a_drain_in_deep_triode_keeps_its_digits() -> None:
    """ID of the re-solve is the exact root to the last digits, as the numerical path's is (not
    the device's current at a drain voltage that lost them to 5 V − 4.97 V, 1e-14 off): the
    attribution of so small an effect stays the numerical path's. Reference: the triode law
    (load.channel, β = KP·W/L = 2 mA/V², VOV = 1.8 V, VDS = 5 V − 47 kΩ·ID) solved in exact
    rational arithmetic by bisection."""
    from fractions import Fraction

    k, vov, lam = Fraction(100e-6) * Fraction(20e-6) / Fraction(1e-6), Fraction(2.5) - Fraction(0.7), Fraction(0.02)

    def excess(i: Fraction, lam: Fraction) -> Fraction:
        vds = 5 - 47000 * i
        return i - k * (1 + lam * vds) * vds * (vov - vds / 2)

    def root(lam: Fraction) -> Fraction:
        low, high = Fraction(0), Fraction(5, 47000)
        for _ in range(120):
            middle = (low + high) / 2
            low, high = (low, middle) if excess(middle, lam) > 0 else (middle, high)
        return low

    circuit = parse_netlist(VALVE, "valve.cir")
    model = HandModel(circuit)
    plain = model.solve()
    moved = model.solve(effects={"lambda"}, working=False, start=plain.node_voltages)
    exact = root(lam)
    assert abs(Fraction(moved.devices["M1"].id) - exact) <= exact * Fraction(1, 10**15)
    numerical = HandModel(circuit).solve(effects={"lambda"}, closed_form=False, working=False,
                                         start=plain.node_voltages)
    assert abs(Fraction(numerical.devices["M1"].id) - exact) <= exact * Fraction(1, 10**15)


def test_the_current_root_is_the_square_law_s_and_refuses_positive_feedback() -> None:
    """``_current_root`` alone: a saturated NMOS with its gate at 2 V and 1 kΩ under its source
    (VOV = 2 − VTO − 1000·ID, ID = β/2·VOV², λ = γ = 0 on FAN's card: the quadratic written out
    here); with the source's slope turned over (more ID, more overdrive: positive feedback) no
    root is claimed."""
    from bridge.analysis.hand import _current_root
    from bridge.analysis.hand_circuit import hand_model
    from bridge.devices.mos1.load import beta, device_constants

    transistor = HandModel(parse_netlist(FAN, "fan.cir"))._dc.transistors[0]
    model = hand_model(transistor.card)
    gain, u, r = beta(model, transistor.geometry), 2.0 - model.vto, 1000.0
    # β/2·(u − r·ID)² = ID  →  (β·r²/2)·ID² − (β·u·r + 1)·ID + β·u²/2 = 0, the smaller root.
    a, b, c = gain * r * r / 2, -(gain * u * r + 1.0), gain * u * u / 2
    expected = (-b - math.sqrt(b * b - 4 * a * c)) / (2 * a)
    constants = device_constants(model, transistor.geometry)
    terminals = [(5.0, 0.0), (2.0, 0.0), (0.0, r), (0.0, 0.0)]  # drain, gate, source, bulk
    assert math.isclose(_current_root(constants, terminals, 0.0), expected, rel_tol=1e-13)
    assert math.isclose(_current_root(constants, terminals, 1e-3), expected, rel_tol=1e-13)
    assert _current_root(constants, [(5.0, 0.0), (2.0, 0.0), (0.0, -r), (0.0, 0.0)], 1e-4) is None
