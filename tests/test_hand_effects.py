"""The attribution's hand points with one effect switched on (check._solved_with_each_effect):
an effect that cannot act in the circuit gives the plain hand point itself, every other is
re-solved and moves it as the square law with that effect says.

The stages are a bicycle dynamo light's LED driver, written for these tests. The expected
numbers are derived here from the level-1 square law (ngspice's mos1load.c as the project's
devices/mos1/load.py states it: Vth = VTO + GAMMA·(√(PHI − VBS) − √PHI), and for a forward
body bias ngspice's tangent √PHI − VBS/(2√PHI)), solved by bisection.
"""

from __future__ import annotations

import math

from bridge.analysis.hand import HandModel
from bridge.check import check_circuit, solve_own_columns
from bridge.netlist import parse_netlist

REL = 1e-9  # Newton's answer against the bisection of the same equation


def _bisect(f, lo: float, hi: float) -> float:
    """The root of f between lo and hi (f changes sign there)."""
    flo = f(lo)
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if (f(mid) > 0.0) == (flo > 0.0):
            lo, flo = mid, f(mid)
        else:
            hi = mid
    return 0.5 * (lo + hi)


# Source and bulk on ground: the body bias is 0 whatever the point, so GAMMA cannot act.
DIVIDER = """Bicycle dynamo light: LED driver, common source, divider bias
VDD vdd 0 6
R1 vdd g 270k
R2 g 0 100k
RD vdd d 8.2k
M1 d g 0 0 nled W=24u L=2u
.model nled nmos (vto=0.65 kp=110u lambda=0.025 gamma=0.45 phi=0.7)
.op
.end
"""

# The same with LAMBDA 0 on the card: LAMBDA cannot act either.
NO_LAMBDA = DIVIDER.replace("lambda=0.025 ", "")

# A source follower with its bulk on ground: the source rises, the body bias is −V(s).
FOLLOWER = """Bicycle dynamo light: LED driver, source follower
VDD vdd 0 6
VG g 0 3
RS s 0 4.7k
M1 vdd g s 0 nled W=24u L=2u
.model nled nmos (vto=0.65 kp=110u lambda=0.025 gamma=0.45 phi=0.7)
.op
.end
"""

# Drawn upside down with the bulk on the written source: the device runs swapped, the written
# drain (ground) acts as its source and the bulk sits V(s) above it, a forward body bias.
UPSIDE_DOWN = """Bicycle dynamo light: LED driver drawn upside down, bulk on the written source
VDD vdd 0 6
VG g 0 2
RD vdd s 8.2k
M1 0 g s s nled W=24u L=2u
.model nled nmos (vto=0.65 kp=110u lambda=0.025 gamma=0.45 phi=0.7)
.op
.end
"""

K = 110e-6 * 24 / 2  # β = KP·W/L (no LD on the card)


def _own(text: str):
    return solve_own_columns(parse_netlist(text, "dynamo.cir"))


def test_gamma_with_source_on_bulk_is_the_plain_hand_point() -> None:
    own = _own(DIVIDER)
    assert own.with_effect is not None
    gamma = own.with_effect["gamma"]
    assert gamma.node_voltages == own.hand.node_voltages  # exactly: nothing re-solved
    assert gamma.devices == own.hand.devices
    assert gamma.effects == {"gamma"}
    assert gamma.steps == ()
    # LAMBDA acts (the card gives 0.025): re-solved, the factor 1 + λ·VDS raises ID.
    lam = own.with_effect["lambda"].devices["M1"]
    plain = own.hand.devices["M1"]
    assert lam.id > plain.id
    assert not any(finding.code == "hand-unavailable" for finding in own.findings)


def test_gamma_that_cannot_act_attributes_exactly_nothing() -> None:
    result = check_circuit(parse_netlist(DIVIDER, "dynamo.cir"), None, tolerance=0.02)
    attribution = result.devices["M1"].attribution
    assert attribution["gamma"] == 0.0  # not a rounding residue of a re-solve
    assert attribution["lambda"] > 0.01


def test_lambda_zero_on_every_card_is_the_plain_hand_point() -> None:
    own = _own(NO_LAMBDA)
    assert own.with_effect is not None
    assert own.with_effect["lambda"].node_voltages == own.hand.node_voltages
    assert own.with_effect["lambda"].devices == own.hand.devices
    assert own.with_effect["gamma"].devices == own.hand.devices  # source on bulk too


def test_gamma_in_a_follower_is_re_solved_with_the_body_effect() -> None:
    own = _own(FOLLOWER)
    model = HandModel(parse_netlist(FOLLOWER, "dynamo.cir"))
    assert model.solved_unchanged("gamma", own.hand) is None
    phi, gamma = 0.7, 0.45

    def excess(vs: float) -> float:  # the square law's current minus RS's at V(s)
        vth = 0.65 + gamma * (math.sqrt(phi + vs) - math.sqrt(phi))
        return 0.5 * K * max(3.0 - vs - vth, 0.0) ** 2 - vs / 4.7e3

    vs = _bisect(excess, 0.0, 3.0 - 0.65)
    solved = own.with_effect["gamma"]
    assert math.isclose(solved.node_voltages["s"], vs, rel_tol=REL)
    assert solved.devices["M1"].id < own.hand.devices["M1"].id  # a higher threshold: less current


def test_gamma_in_a_device_running_swapped_is_re_solved() -> None:
    # The bulk is on the written source, but the device works from its written drain: a skip
    # that only compared the written source with the bulk would drop the body effect here.
    own = _own(UPSIDE_DOWN)
    plain = own.hand.devices["M1"]
    assert plain.vds < 0.0  # runs swapped in the hand model
    model = HandModel(parse_netlist(UPSIDE_DOWN, "dynamo.cir"))
    assert model.solved_unchanged("gamma", own.hand) is None
    phi, gamma = 0.7, 0.45

    def excess(vs: float) -> float:  # V(s) above the acting source at ground: triode there
        vth = 0.65 - gamma * vs / (2.0 * math.sqrt(phi))  # ngspice's tangent for a forward bias
        return K * ((2.0 - vth) * vs - 0.5 * vs * vs) - (6.0 - vs) / 8.2e3

    vs = _bisect(excess, 0.0, 1.0)
    solved = own.with_effect["gamma"]
    assert vs < 2.0 - (0.65 - gamma * vs / (2.0 * math.sqrt(phi)))  # triode holds
    assert solved.devices["M1"].region == "triode"
    assert math.isclose(solved.node_voltages["s"], vs, rel_tol=REL)
    assert -solved.devices["M1"].id > -plain.id  # a lower threshold: more current


# A PMOS high-side driver whose n-well has its own supply pin, VNW: at the source's 6 V GAMMA
# cannot act; 0.5 V above it, the well reverse-biases the source junction and raises |Vt|.
WELL = """Bicycle dynamo light: PMOS high-side driver, n-well on its own pin
VDD vdd 0 6
VNW nw 0 {well}
R1 vdd g 100k
R2 g 0 220k
RD d 0 3.3k
M1 d g vdd nw pled W=60u L=2u
.model pled pmos (vto=-0.75 kp=40u lambda=0.03 gamma=0.5 phi=0.7)
.op
.end
"""


def test_gamma_with_the_well_on_a_source_at_the_source_voltage_is_the_plain_hand_point() -> None:
    own = _own(WELL.format(well=6))
    assert own.with_effect is not None
    assert own.with_effect["gamma"].node_voltages == own.hand.node_voltages
    assert own.with_effect["gamma"].devices == own.hand.devices


def test_gamma_with_the_well_above_the_source_is_re_solved() -> None:
    own = _own(WELL.format(well=6.5))
    model = HandModel(parse_netlist(WELL.format(well=6.5), "dynamo.cir"))
    assert model.solved_unchanged("gamma", own.hand) is None
    # The source sits on VDD: VSG = 6·100/320 V and the body bias (0.5 V reverse) are fixed, so
    # the saturation current follows at once from the raised threshold.
    vth = 0.75 + 0.5 * (math.sqrt(0.7 + 0.5) - math.sqrt(0.7))
    vsg = 6.0 * 100.0 / 320.0
    current = 0.5 * 40e-6 * 30 * (vsg - vth) ** 2
    solved = own.with_effect["gamma"].devices["M1"]
    assert solved.region == "saturation"
    assert math.isclose(solved.id, current, rel_tol=REL)
    assert math.isclose(own.with_effect["gamma"].node_voltages["d"], 3.3e3 * current, rel_tol=REL)
