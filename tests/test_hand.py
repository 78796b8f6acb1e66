"""The hand analysis: square law with λ = γ = 0, no gate current, closed forms with the working.

Every expected value is derived here, independently of bridge.analysis.hand: the algebra
of each topology is written out and its quadratic solved with the textbook formula
x = (−b ± √(b² − 4ac))/2a. The closed forms are also checked against the numerical
path of the same simplified model (to 1e-9), against worked textbook examples, and
against ngspice with LAMBDA = GAMMA = 0 (which adds only junction leakage and GMIN).
"""

from __future__ import annotations

import math
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from bridge.analysis.hand import HandAnalysisError, HandSolution, hand_analysis
from bridge.netlist import parse_netlist, read_netlist

EXAMPLES = Path(__file__).resolve().parents[1] / "netlists"
NGSPICE = shutil.which("ngspice")
TIGHT = 1e-9  # closed form against the numerical path of the same model: rounding only

# Cards used below: K = KP·W/L, Vt = |VTO|. LAMBDA and GAMMA are given (non-zero) on purpose:
# the hand model must ignore them.
NCARD = ".model nch nmos (vto=0.7 kp=100u lambda=0.02 gamma=0.4 phi=0.65)"
PCARD = ".model pch pmos (vto=-0.8 kp=40u lambda=0.03 gamma=0.5 phi=0.7)"
K_N = 100e-6 * 20 / 2  # W/L = 20u/2u → 1 mA/V²
K_P = 40e-6 * 20 / 2  # 400 µA/V²
VT_N, VT_P = 0.7, 0.8


def circuit(body: str):
    return parse_netlist(f"hand-analysis test stage\n{body}\n{NCARD}\n{PCARD}\n.op\n.end\n")


def roots(a: float, b: float, c: float) -> tuple[float, float]:
    """Both roots of a·x² + b·x + c = 0 by the standard formula, ascending."""
    disc = math.sqrt(b * b - 4 * a * c)
    return tuple(sorted(((-b - disc) / (2 * a), (-b + disc) / (2 * a))))  # type: ignore[return-value]


def close(actual: float, expected: float, rel: float = 1e-9, abs_: float = 1e-12) -> bool:
    return math.isclose(actual, expected, rel_tol=rel, abs_tol=abs_)


def only_device(solution: HandSolution):
    (device,) = solution.devices.values()
    return device


def working(solution: HandSolution) -> str:
    return "\n".join(str(step) for step in solution.steps)


# --- common source --------------------------------------------------------------------------


def test_divider_biased_common_source_follows_the_square_law():
    c = read_netlist(EXAMPLES / "cs_divider.cir")  # KP = 120u, W/L = 10, VTO = 0.7
    solution = hand_analysis(c)
    k = 120e-6 * 10
    vg = 5 * 120e3 / (330e3 + 120e3)
    vov = vg - 0.7
    drain_current = k / 2 * vov**2
    vd = 5 - drain_current * 10e3
    assert solution.closed_form
    assert solution.topology == "common-source, divider bias"
    assert close(solution.node_voltages["gate"], vg)
    assert close(solution.node_voltages["drain"], vd)
    device = only_device(solution)
    assert device.region == "saturation"
    assert close(device.id, drain_current)
    assert close(device.vov, vov)
    assert close(device.gm, k * vov)
    assert device.gds == 0.0
    # Every node, the AC-coupled input and ground included.
    assert set(solution.node_voltages) == {"0", "vdd", "sig", "gate", "drain"}
    assert solution.node_voltages["sig"] == 0.0


def test_source_resistor_quadratic_keeps_the_root_above_threshold():
    c = circuit("VDD vdd 0 10\nR1 vdd g 2meg\nR2 g 0 1meg\nRD vdd d 4k\nRS s 0 1k\nM1 d g s 0 nch w=20u l=2u")
    vg = 10 / 3
    rs, rd = 1e3, 4e3
    # ID = (K/2)·(VG − ID·RS − Vt)² → (K/2)RS²·ID² − (K·RS·(VG − Vt) + 1)·ID + (K/2)(VG − Vt)² = 0
    drive = vg - VT_N
    low, high = roots(K_N / 2 * rs**2, -(K_N * rs * drive + 1), K_N / 2 * drive**2)
    assert vg - high * rs - VT_N < 0  # the larger root is the mirror branch: VGS < Vt
    drain_current = low
    solution = hand_analysis(c)
    assert solution.topology == "common-source, divider bias, source resistor"
    device = only_device(solution)
    assert device.region == "saturation"
    assert close(device.id, drain_current)
    assert close(solution.node_voltages["s"], drain_current * rs)
    assert close(solution.node_voltages["d"], 10 - drain_current * rd)


def test_pmos_common_source_with_source_resistor_is_polarity_normalised():
    c = read_netlist(EXAMPLES / "pmos_cs.cir")  # KP = 45u, W/L = 25, VTO = −0.8; RS to VDD, RD to 0
    k, vt = 45e-6 * 25, 0.8
    vg = 5 * 330e3 / 480e3
    # VSG = VDD − ID·RS − VG: ID = (K/2)(VDD − VG − Vt − ID·RS)²
    drive = 5 - vg - vt
    low, _ = roots(k / 2 * 1e3**2, -(k * 1e3 * drive + 1), k / 2 * drive**2)
    solution = hand_analysis(c)
    assert solution.topology == "PMOS common-source, divider bias, source resistor"
    device = only_device(solution)
    vs, vd = 5 - low * 1e3, low * 6.8e3
    assert close(solution.node_voltages["s"], vs)
    assert close(solution.node_voltages["d"], vd)
    assert device.id > 0 and close(device.id, low)
    assert close(device.vgs, vs - vg)  # V(s) − V(g)
    assert close(device.vds, vs - vd)  # V(s) − V(d)
    assert device.vth == pytest.approx(vt)
    assert device.region == "saturation"


def test_split_supply_stage_with_grounded_gate_resistor():
    c = read_netlist(EXAMPLES / "split_supply.cir")  # K = 1.2 mA/V², Vt = 0.7, RS = 15k to −5 V
    k = 120e-6 * 10
    # VGS = 0 − (−5 + ID·RS): ID = (K/2)(5 − Vt − ID·RS)²
    drive = 5 - 0.7
    low, _ = roots(k / 2 * 15e3**2, -(k * 15e3 * drive + 1), k / 2 * drive**2)
    solution = hand_analysis(c)
    assert "split supplies" in solution.topology
    assert solution.topology.startswith("common-source")
    assert close(solution.node_voltages["g"], 0.0)
    assert close(solution.node_voltages["s"], -5 + low * 15e3)
    assert close(solution.node_voltages["d"], 5 - low * 12e3)
    assert only_device(solution).region == "saturation"


def test_gate_driven_directly_by_a_voltage_source():
    solution = hand_analysis(circuit("VDD vdd 0 5\nVB g 0 1.5\nRD vdd d 5k\nM1 d g 0 0 nch w=20u l=2u"))
    drain_current = K_N / 2 * (1.5 - VT_N) ** 2
    assert solution.topology == "common-source, gate on a voltage source"
    assert close(only_device(solution).id, drain_current)
    assert close(solution.node_voltages["d"], 5 - drain_current * 5e3)


def test_saturation_that_fails_is_re_solved_in_triode():
    solution = hand_analysis(circuit("VDD vdd 0 5\nVB g 0 2\nRD vdd d 50k\nM1 d g 0 0 nch w=20u l=2u"))
    vov = 2 - VT_N
    saturated_vd = 5 - K_N / 2 * vov**2 * 50e3
    assert saturated_vd < vov  # the saturation guess is inconsistent
    # Triode: (VDD − VD)/RD = K·(VOV·VD − VD²/2) → (K/2)VD² − (K·VOV + 1/RD)VD + VDD/RD = 0
    vd_low, vd_high = roots(K_N / 2, -(K_N * vov + 1 / 50e3), 5 / 50e3)
    assert 0 <= vd_low <= vov < vd_high
    device = only_device(solution)
    assert device.region == "triode"
    assert close(solution.node_voltages["d"], vd_low)
    assert close(device.id, (5 - vd_low) / 50e3)
    assert close(device.gm, K_N * vd_low)
    assert close(device.gds, K_N * (vov - vd_low))
    text = working(solution)
    assert "saturation fails: re-solve in triode" in text
    assert "→ triode holds" in text


def test_degenerated_example_lands_in_triode_under_the_hand_model():
    c = read_netlist(EXAMPLES / "cs_degenerated.cir")  # K = 2.2 mA/V², Vt = 0.65, VG = 2 V
    k, vt, vg, vdd, rs, rd = 110e-6 * 20, 0.65, 2.0, 5.0, 1.5e3, 8.2e3
    drive = vg - vt
    saturated, _ = roots(k / 2 * rs**2, -(k * rs * drive + 1), k / 2 * drive**2)
    assert vdd - saturated * (rd + rs) < drive - saturated * rs  # VDS < VOV: not saturated
    # Triode with VOV = A − RS·ID, VDS = B − (RD+RS)·ID:
    # K[(A − R1·I)(B − R2·I) − (B − R2·I)²/2] = I  →  a·I² + b·I + c = 0
    a_, b_, r1, r2 = drive, vdd, rs, rd + rs
    candidates = roots(
        k * (r1 * r2 - r2**2 / 2), k * (-a_ * r2 - r1 * b_ + b_ * r2) - 1, k * (a_ * b_ - b_**2 / 2)
    )
    (triode_current,) = [i for i in candidates if 0 <= b_ - r2 * i <= a_ - r1 * i]
    solution = hand_analysis(c)
    device = only_device(solution)
    assert device.region == "triode"
    assert close(device.id, triode_current)
    assert close(solution.node_voltages["s"], triode_current * rs)
    assert close(solution.node_voltages["d"], vdd - triode_current * rd)


def test_cutoff_when_the_gate_sits_below_threshold():
    # VG = 5·100k/570k = 0.877 V, below VTO = 1.2 V.
    c = parse_netlist(
        "cutoff\nVDD vdd 0 5\nR1 vdd g 470k\nR2 g 0 100k\nRD vdd d 10k\nM1 d g 0 0 hvt w=20u l=2u\n"
        ".model hvt nmos (vto=1.2 kp=100u)\n.end\n"
    )
    solution = hand_analysis(c)
    device = only_device(solution)
    assert solution.closed_form
    assert device.region == "cutoff"
    assert device.id == 0.0 and device.gm == 0.0 and device.gds == 0.0
    assert close(solution.node_voltages["d"], 5.0)
    assert close(device.vov, 5 * 100 / 570 - 1.2)
    assert "cutoff" in working(solution)


def test_parallel_devices_multiply_k_in_the_source_resistor_quadratic():
    c = circuit("VDD vdd 0 5\nR1 vdd g 100k\nR2 g 0 50k\nRD vdd d 4.7k\nRS s 0 1k\nM1 d g s 0 nch w=20u l=2u m=4")
    k, rs = 4 * K_N, 1e3  # M = 4 devices in parallel: four times K
    drive = 5 * 50 / 150 - VT_N
    low, _ = roots(k / 2 * rs**2, -(k * rs * drive + 1), k / 2 * drive**2)
    device = only_device(hand_analysis(c))
    assert device.region == "saturation"
    assert close(device.id, low)
    assert close(device.vov, drive - low * rs)


def test_effective_length_and_kp_from_uo_and_tox():
    # K = KP·W/Leff with Leff = L − 2·LD; without KP, KP = UO·Cox, Cox = 3.9·ε0/TOX, UO in cm²/V·s
    # (textbook, from memory; ε0 recalled to 4 digits, hence the looser tolerance).
    lateral = hand_analysis(parse_netlist(
        "ld\nVDD vdd 0 5\nR1 vdd g 300k\nR2 g 0 100k\nRD vdd d 8k\nM1 d g 0 0 nch W=10u L=1.5u\n"
        ".model nch nmos (vto=0.6 kp=100u ld=0.2u lambda=0.01)\n.end\n"))
    leff = 1.5e-6 - 2 * 0.2e-6
    assert close(only_device(lateral).id, 100e-6 * 10e-6 / leff / 2 * (1.25 - 0.6) ** 2)
    derived = hand_analysis(parse_netlist(
        "uo\nVDD vdd 0 5\nR1 vdd g 200k\nR2 g 0 100k\nRD vdd d 10k\nM1 d g 0 0 nch W=10u L=2u\n"
        ".model nch nmos (vto=0.7 uo=450 tox=20n)\n.end\n"))
    kp = 450e-4 * 3.9 * 8.854e-12 / 20e-9
    assert only_device(derived).id == pytest.approx(kp * 10 / 2 / 2 * (5 / 3 - 0.7) ** 2, rel=1e-4)


# --- current source in the source ---------------------------------------------------------


def test_current_source_in_the_source_sets_the_drain_current():
    c = circuit(
        "VDD vdd 0 5\nR1 vdd g 300k\nR2 g 0 200k\nRD vdd d 10k\nM1 d g s 0 nch w=20u l=2u\nISS s 0 150u"
    )
    vg = 5 * 200 / 500
    vov = math.sqrt(2 * 150e-6 / K_N)
    solution = hand_analysis(c)
    assert solution.topology == "common-source, divider bias, current source in the source"
    device = only_device(solution)
    assert close(device.id, 150e-6)
    assert close(device.vov, vov)
    assert close(solution.node_voltages["s"], vg - VT_N - vov)
    assert close(solution.node_voltages["d"], 5 - 150e-6 * 10e3)
    assert device.region == "saturation"


def test_current_source_in_the_source_re_solved_in_triode():
    c = circuit("VDD vdd 0 5\nVB g 0 3\nRD vdd d 40k\nM1 d g s 0 nch w=20u l=2u\nISS s 0 100u")
    vd = 5 - 100e-6 * 40e3  # 1 V, the gate at 3 V: VGD > Vt, so triode
    # K·((VG − x − Vt)(VD − x) − (VD − x)²/2) = I with x = VS  →  (K/2)x² − K·a·x + K(ab − b²/2) − I = 0
    a_, b_ = 3 - VT_N, vd
    candidates = roots(K_N / 2, -K_N * a_, K_N * (a_ * b_ - b_**2 / 2) - 100e-6)
    (vs,) = [x for x in candidates if 0 <= b_ - x <= a_ - x]
    solution = hand_analysis(c)
    device = only_device(solution)
    assert device.region == "triode"
    assert close(solution.node_voltages["s"], vs)
    assert close(device.id, 100e-6)


def test_pmos_current_source_in_the_source():
    c = circuit(
        "VDD vdd 0 5\nR1 vdd g 100k\nR2 g 0 100k\nISS vdd s 100u\nRD d 0 10k\nM1 d g s vdd pch w=20u l=2u"
    )
    vov = math.sqrt(2 * 100e-6 / K_P)
    solution = hand_analysis(c)
    assert solution.topology == "PMOS common-source, divider bias, current source in the source"
    assert close(solution.node_voltages["s"], 2.5 + VT_P + vov)
    assert close(solution.node_voltages["d"], 100e-6 * 10e3)
    assert close(only_device(solution).id, 100e-6)


# --- source follower ----------------------------------------------------------------------


def test_source_follower_with_resistor_is_a_quadratic_in_vs():
    c = circuit("VDD vdd 0 5\nVSS vss 0 -5\nVB g 0 1\nM1 vdd g out vss nch w=20u l=2u\nRS out vss 10k")
    # (VS − VSS)/RS = (K/2)(VG − VS − Vt)²; with y = VG − Vt − VS:
    # (K/2)·y² + y/RS − (VG − Vt − VSS)/RS = 0
    _, y = roots(K_N / 2, 1 / 10e3, -(1 - VT_N + 5) / 10e3)
    solution = hand_analysis(c)
    assert (
        solution.topology
        == "source follower, gate on a voltage source, resistor to the lower rail, split supplies"
    )
    assert close(solution.node_voltages["out"], 1 - VT_N - y)
    assert close(only_device(solution).vov, y)


def test_pmos_source_follower_with_resistor():
    c = circuit("VDD vdd 0 5\nVB g 0 2\nM1 0 g s vdd pch w=20u l=2u\nRS vdd s 10k")
    # (VDD − VS)/RS = (K/2)(VS − VG − Vt)²; y = VS − VG − Vt: (K/2)y² + y/RS − (VDD − VG − Vt)/RS = 0
    _, y = roots(K_P / 2, 1 / 10e3, -(5 - 2 - VT_P) / 10e3)
    solution = hand_analysis(c)
    assert solution.topology == "PMOS source follower, gate on a voltage source, resistor to the lower rail"
    assert close(solution.node_voltages["s"], 2 + VT_P + y)
    assert only_device(solution).id > 0


def test_source_follower_on_a_current_sink():
    c = read_netlist(EXAMPLES / "source_follower.cir")  # K = 120u·20 = 2.4 mA/V², 200 µA sink
    k = 120e-6 * 30 / 1.5
    solution = hand_analysis(c)
    assert solution.topology == "source follower, gate on a voltage source, current-source load"
    assert close(solution.node_voltages["out"], 2.5 - 0.7 - math.sqrt(2 * 200e-6 / k))
    assert close(only_device(solution).id, 200e-6)


def test_pmos_source_follower_on_a_current_source():
    c = circuit("VDD vdd 0 5\nVB g 0 2\nM1 0 g s vdd pch w=20u l=2u\nIS vdd s 100u")
    solution = hand_analysis(c)
    assert solution.topology == "PMOS source follower, gate on a voltage source, current-source load"
    assert close(solution.node_voltages["s"], 2 + VT_P + math.sqrt(2 * 100e-6 / K_P))


# --- feedback and diode connection ----------------------------------------------------------


def test_drain_to_gate_feedback_with_gate_resistor():
    c = read_netlist(EXAMPLES / "drain_feedback.cir")  # K = 1 mA/V², Vt = 0.8, VDD = 9
    k, vt, vdd, rd, rf, rgs = 100e-6 * 10, 0.8, 9.0, 4.7e3, 2.2e6, 1e6
    alpha = rgs / (rf + rgs)
    # KCL at the drain: (VDD − VD)/RD = (K/2)(α·VD − Vt)² + VD/(RF + RGS)
    a_ = k / 2 * alpha**2
    b_ = -k * alpha * vt + 1 / rd + 1 / (rf + rgs)
    c_ = k / 2 * vt**2 - vdd / rd
    (vd,) = [v for v in roots(a_, b_, c_) if alpha * v > vt]
    solution = hand_analysis(c)
    assert solution.topology == "drain-to-gate feedback, gate resistor"
    assert close(solution.node_voltages["d"], vd)
    assert close(solution.node_voltages["g"], alpha * vd)
    assert close(only_device(solution).id, k / 2 * (alpha * vd - vt) ** 2)


def test_drain_to_gate_feedback_without_gate_resistor_acts_as_a_diode():
    c = circuit("VDD vdd 0 5\nRD vdd d 10k\nRF d g 1meg\nM1 d g 0 0 nch w=20u l=2u")
    # No gate current: VG = VD; (VDD − VD)/RD = (K/2)(VD − Vt)²
    _, y = roots(K_N / 2, 1 / 10e3, -(5 - VT_N) / 10e3)  # y = VD − Vt
    solution = hand_analysis(c)
    assert solution.topology == "drain-to-gate feedback"
    assert close(solution.node_voltages["g"], VT_N + y)
    assert close(solution.node_voltages["d"], VT_N + y)


def test_pmos_drain_to_gate_feedback():
    c = circuit("VDD vdd 0 5\nRD d 0 10k\nRF d g 1meg\nRGS g vdd 1meg\nM1 d g vdd vdd pch w=20u l=2u")
    # VG = (VD + VDD)/2; VSG = (VDD − VD)/2. KCL at the drain:
    # (K/2)((VDD − VD)/2 − Vt)² + (VDD − VD)/(RF + RGS) = VD/RD; with x = VDD − VD:
    # (K/8)x² − (K·Vt/2)x + (K/2)Vt² + x/2meg − (VDD − x)/RD = 0
    a_ = K_P / 8
    b_ = -K_P * VT_P / 2 + 1 / 2e6 + 1 / 10e3
    c_ = K_P / 2 * VT_P**2 - 5 / 10e3
    (x,) = [x for x in roots(a_, b_, c_) if x / 2 > VT_P]
    solution = hand_analysis(c)
    assert solution.topology == "PMOS drain-to-gate feedback, gate resistor"
    assert close(solution.node_voltages["d"], 5 - x)
    assert close(solution.node_voltages["g"], 5 - x / 2)


def test_diode_connected_fed_by_a_resistor():
    c = read_netlist(EXAMPLES / "diode_connected.cir")  # K = 600 µA/V², Vt = 0.7, 22k from 3.3 V
    k = 120e-6 * 5
    _, y = roots(k / 2, 1 / 22e3, -(3.3 - 0.7) / 22e3)  # y = VOV = VD − Vt
    solution = hand_analysis(c)
    assert solution.topology == "diode-connected, fed by a resistor"
    assert close(solution.node_voltages["d"], 0.7 + y)
    device = only_device(solution)
    assert device.region == "saturation" and close(device.vgs, device.vds)


def test_diode_connected_fed_by_a_current_source_with_source_resistor():
    c = circuit("VDD vdd 0 5\nIREF vdd d 100u\nM1 d d s 0 nch w=20u l=2u\nRS s 0 2k")
    solution = hand_analysis(c)
    assert solution.topology == "diode-connected, fed by a current source, source resistor"
    assert close(solution.node_voltages["s"], 0.2)
    assert close(solution.node_voltages["d"], 0.2 + VT_N + math.sqrt(2 * 100e-6 / K_N))


def test_pmos_diode_connected_twins():
    fed_by_resistor = hand_analysis(circuit("VDD vdd 0 5\nM1 d d vdd vdd pch w=20u l=2u\nR1 d 0 20k"))
    _, y = roots(K_P / 2, 1 / 20e3, -(5 - VT_P) / 20e3)  # VD/R = (K/2)(VDD − VD − Vt)², y = VOV
    assert fed_by_resistor.topology == "PMOS diode-connected, fed by a resistor"
    assert close(fed_by_resistor.node_voltages["d"], 5 - VT_P - y)
    fed_by_source = hand_analysis(circuit("VDD vdd 0 5\nM1 d d vdd vdd pch w=20u l=2u\nI1 d 0 100u"))
    assert fed_by_source.topology == "PMOS diode-connected, fed by a current source"
    assert close(fed_by_source.node_voltages["d"], 5 - VT_P - math.sqrt(2 * 100e-6 / K_P))


def test_depletion_diode_connection_sits_in_triode():
    c = parse_netlist(
        "dep\nVDD vdd 0 5\nI1 vdd d 100u\nM1 d d 0 0 nd w=20u l=2u\n.model nd nmos(vto=-0.5 kp=100u)\n.end\n"
    )
    # VDS = VGS = v < VOV = v + 0.5: K·((v + 0.5)·v − v²/2) = I → (K/2)v² + 0.5K·v − I = 0
    _, v = roots(K_N / 2, 0.5 * K_N, -100e-6)
    solution = hand_analysis(c)
    assert only_device(solution).region == "triode"
    assert close(solution.node_voltages["d"], v)


# --- the same model two ways ----------------------------------------------------------------


def deck(*cards: str) -> str:
    """Element cards, one per argument, as netlist text."""
    return "\n".join(cards)


TOPOLOGIES = {
    "divider": deck(
        "VDD vdd 0 5",
        "R1 vdd g 330k",
        "R2 g 0 120k",
        "RD vdd d 10k",
        "M1 d g 0 0 nch w=20u l=2u",
    ),
    "divider + RS": deck(
        "VDD vdd 0 10",
        "R1 vdd g 2meg",
        "R2 g 0 1meg",
        "RD vdd d 4k",
        "RS s 0 1k",
        "M1 d g s 0 nch w=20u l=2u",
    ),
    "pmos divider + RS": deck(
        "VDD vdd 0 5",
        "R1 vdd g 150k",
        "R2 g 0 330k",
        "RS vdd s 1k",
        "RD d 0 6.8k",
        "M1 d g s vdd pch w=50u l=2u",
    ),
    "gate on source": deck("VDD vdd 0 5", "VB g 0 1.5", "RD vdd d 5k", "M1 d g 0 0 nch w=20u l=2u"),
    "triode": deck("VDD vdd 0 5", "VB g 0 2", "RD vdd d 50k", "M1 d g 0 0 nch w=20u l=2u"),
    "triode + RS": deck(
        "VDD vdd 0 5",
        "R1 vdd g 270k",
        "R2 g 0 180k",
        "RD vdd d 8.2k",
        "RS s 0 1.5k",
        "M1 d g s 0 nch w=40u l=2u",
    ),
    "current source in source": deck(
        "VDD vdd 0 5",
        "R1 vdd g 300k",
        "R2 g 0 200k",
        "RD vdd d 10k",
        "M1 d g s 0 nch w=20u l=2u",
        "ISS s 0 150u",
    ),
    "current source, triode": deck(
        "VDD vdd 0 5",
        "VB g 0 3",
        "RD vdd d 40k",
        "M1 d g s 0 nch w=20u l=2u",
        "ISS s 0 100u",
    ),
    "pmos current source": deck(
        "VDD vdd 0 5",
        "R1 vdd g 100k",
        "R2 g 0 100k",
        "ISS vdd s 100u",
        "RD d 0 10k",
        "M1 d g s vdd pch w=20u l=2u",
    ),
    "follower, resistor": deck(
        "VDD vdd 0 5",
        "VSS vss 0 -5",
        "VB g 0 1",
        "M1 vdd g out vss nch w=20u l=2u",
        "RS out vss 10k",
    ),
    "pmos follower, resistor": deck("VDD vdd 0 5", "VB g 0 2", "M1 0 g s vdd pch w=20u l=2u", "RS vdd s 10k"),
    "follower, current sink": deck(
        "VDD vdd 0 5",
        "VB g 0 2.5",
        "M1 vdd g out 0 nch w=20u l=2u",
        "IS out 0 200u",
    ),
    "pmos follower, current": deck("VDD vdd 0 5", "VB g 0 2", "M1 0 g s vdd pch w=20u l=2u", "IS vdd s 100u"),
    "feedback": deck(
        "VDD vdd 0 9",
        "RD vdd d 4.7k",
        "RF d g 2.2meg",
        "RGS g 0 1meg",
        "M1 d g 0 0 nch w=20u l=2u",
    ),
    "feedback, no RGS": deck("VDD vdd 0 5", "RD vdd d 10k", "RF d g 1meg", "M1 d g 0 0 nch w=20u l=2u"),
    "feedback + RS": deck(
        "VDD vdd 0 9",
        "RD vdd d 4.7k",
        "RF d g 2.2meg",
        "RGS g 0 1meg",
        "RS s 0 1k",
        "M1 d g s 0 nch w=20u l=2u",
    ),
    "feedback, RGS to source": deck(
        "VDD vdd 0 9",
        "RD vdd d 4.7k",
        "RF d g 2.2meg",
        "RGS g s 1meg",
        "RS s 0 1k",
        "M1 d g s 0 nch w=20u l=2u",
    ),
    "pmos feedback": deck(
        "VDD vdd 0 5",
        "RD d 0 10k",
        "RF d g 1meg",
        "RGS g vdd 1meg",
        "M1 d g vdd vdd pch w=20u l=2u",
    ),
    "diode, resistor": deck("VDD vdd 0 3.3", "RREF vdd d 22k", "M1 d d 0 0 nch w=10u l=2u"),
    "diode, current": deck("VDD vdd 0 5", "IREF vdd d 100u", "M1 d d s 0 nch w=20u l=2u", "RS s 0 2k"),
    "pmos diode, resistor": deck("VDD vdd 0 5", "M1 d d vdd vdd pch w=20u l=2u", "R1 d 0 20k"),
    "pmos diode, current": deck("VDD vdd 0 5", "M1 d d vdd vdd pch w=20u l=2u", "I1 d 0 100u"),
    "split supply": deck(
        "VPOS vpos 0 5",
        "VNEG vneg 0 -5",
        "RG g 0 1meg",
        "RD vpos d 12k",
        "RS s vneg 15k",
        "M1 d g s vneg nch w=20u l=2u",
    ),
    "cutoff": deck(
        "VDD vdd 0 5",
        "R1 vdd g 900k",
        "R2 g 0 100k",
        "RD vdd d 10k",
        "M1 d g 0 0 nch w=20u l=2u",
    ),
    "inductor and capacitors": deck(
        "VDD vdd 0 5",
        "VB g 0 1.5",
        "RD vdd x 5k",
        "L1 x d 1m",
        "C1 d 0 1u",
        "CS s 0 10u",
        "RS s 0 500",
        "M1 d g s 0 nch w=20u l=2u",
    ),
}


@pytest.mark.parametrize("name", sorted(TOPOLOGIES))
def test_closed_form_agrees_with_the_numerical_path(name):
    c = circuit(TOPOLOGIES[name])
    closed = hand_analysis(c)
    numeric = hand_analysis(c, closed_form=False)
    assert closed.closed_form and not numeric.closed_form
    assert closed.node_voltages.keys() == numeric.node_voltages.keys()
    for node, value in closed.node_voltages.items():
        assert math.isclose(value, numeric.node_voltages[node], rel_tol=TIGHT, abs_tol=TIGHT), node
    for device_name, device in closed.devices.items():
        other = numeric.devices[device_name]
        assert device.region == other.region
        assert math.isclose(device.id, other.id, rel_tol=TIGHT, abs_tol=1e-15)
    assert "numerically" in working(numeric)


@pytest.mark.parametrize("path", sorted(EXAMPLES.glob("*.cir")), ids=lambda p: p.stem)
def test_bundled_examples_have_closed_forms_that_the_numerical_path_confirms(path):
    c = read_netlist(path)
    closed = hand_analysis(c)
    numeric = hand_analysis(c, closed_form=False)
    assert closed.closed_form
    for node, value in closed.node_voltages.items():
        assert math.isclose(value, numeric.node_voltages[node], rel_tol=TIGHT, abs_tol=TIGHT), node


# --- textbook examples --------------------------------------------------------------------


def test_sedra_smith_divider_biased_nmos_with_source_resistor():
    """Sedra & Smith, Microelectronic Circuits, 5th ed., Example 4.5 (edition and number
    from memory): VDD = 15 V, RG1 = 10 MΩ, RG2 = 5 MΩ, RD = RS = 6 kΩ, Vt = 1 V,
    k'n(W/L) = 1 mA/V², λ = 0. The book's answer (from memory): VG = 5 V, the quadratic
    18·ID² − 25·ID + 8 = 0 (ID in mA) with roots 0.89 mA and 0.5 mA, the first rejected
    because it puts VS above VG; ID = 0.5 mA, VS = 3 V, VD = 12 V, saturation."""
    c = parse_netlist(
        "Sedra-Smith divider + RS\nVDD vdd 0 15\nRG1 vdd g 10meg\nRG2 g 0 5meg\nRD vdd d 6k\nRS s 0 6k\n"
        "M1 d g s 0 book w=10u l=10u\n.model book nmos (vto=1 kp=1m)\n.end\n"
    )
    low, high = roots(18, -25, 8)  # the book's quadratic, in mA
    assert low == pytest.approx(0.5) and high == pytest.approx(0.889, abs=1e-3)
    solution = hand_analysis(c)
    assert solution.topology == "common-source, divider bias, source resistor"
    assert close(solution.node_voltages["g"], 5.0)
    assert close(only_device(solution).id, 0.5e-3)
    assert close(solution.node_voltages["s"], 3.0)
    assert close(solution.node_voltages["d"], 12.0)
    assert only_device(solution).region == "saturation"
    text = working(solution)
    assert "VG = VDD·RG2/(RG1+RG2) = 15 V·5 MΩ/15 MΩ = 5 V" in text  # the divider voltage
    assert "Keep the root VOV = 1 V" in text  # the kept root (VOV = VG − VS − Vt = 1 V)
    assert "-1.333 V" in text  # the rejected root: ID = 0.89 mA ↔ VOV = −4/3 V, VGS < Vt
    assert "VDS = 9 V ≥ VOV = 1 V → saturation holds" in text  # the region check


def test_sedra_smith_split_supply_design_analysed_back():
    """Sedra & Smith, Microelectronic Circuits, 5th ed., Example 4.2 (from memory): design for
    ID = 0.4 mA and VD = +0.5 V on ±2.5 V with the gate grounded; Vt = 0.7 V,
    µnCox = 100 µA/V², W/L = 32 µm/1 µm, λ = 0. The book's design (from memory): VOV = 0.5 V,
    VGS = 1.2 V, RS = 3.25 kΩ, RD = 5 kΩ. Analysing that design must give the targets back."""
    c = parse_netlist(
        "Sedra-Smith split supply\nVDD vdd 0 2.5\nVSS vss 0 -2.5\nRD vdd d 5k\nRS s vss 3.25k\n"
        "M1 d 0 s vss book w=32u l=1u\n.model book nmos (vto=0.7 kp=100u)\n.end\n"
    )
    solution = hand_analysis(c)
    device = only_device(solution)
    assert solution.topology == "common-source, gate grounded, source resistor, split supplies"
    assert close(device.id, 0.4e-3)
    assert close(device.vov, 0.5)
    assert close(solution.node_voltages["s"], -1.2)
    assert close(solution.node_voltages["d"], 0.5)


# --- the working ----------------------------------------------------------------------------


def test_working_shows_divider_voltage_kept_root_and_region_check():
    solution = hand_analysis(read_netlist(EXAMPLES / "cs_divider.cir"))
    text = working(solution)
    assert "Gate voltage from the divider" in text
    assert "VG = VDD·R2/(R1+R2) = 5 V·120 kΩ/450 kΩ = 1.333 V" in text
    assert "VOV = 0.6333 V" in text
    assert "VDS = 2.593 V ≥ VOV = 0.6333 V → saturation holds" in text
    assert all(step.text for step in solution.steps)
    values = [step for step in solution.steps if step.value is not None]
    assert any(step.unit == "A" and close(step.value, only_device(solution).id) for step in values)

    degenerated = working(hand_analysis(circuit(TOPOLOGIES["divider + RS"])))
    assert "Quadratic in VOV" in degenerated
    assert "Keep the root VOV" in degenerated
    assert "mirror branch" in degenerated


def test_assumptions_state_the_hand_model():
    assumptions = " | ".join(hand_analysis(read_netlist(EXAMPLES / "cs_divider.cir")).assumptions)
    for phrase in ("LAMBDA = 0", "GAMMA = 0", "No gate current", "Capacitors open, inductors shorted"):
        assert phrase in assumptions


def test_inductor_is_a_short_and_both_of_its_nodes_are_reported():
    solution = hand_analysis(circuit(TOPOLOGIES["inductor and capacitors"]))
    assert solution.node_voltages["x"] == solution.node_voltages["d"]
    assert any("L1" in a for a in solution.assumptions)


# --- effects, other circuits, refusals -----------------------------------------------------


def test_lambda_switched_on_is_solved_numerically_and_matches_its_own_closed_form():
    c = read_netlist(EXAMPLES / "cs_divider.cir")  # λ = 0.02
    solution = hand_analysis(c, effects=frozenset({"lambda"}))
    # ID = a(1 + λ·VDS), VDS = VDD − ID·RD, a = (K/2)VOV²  →  ID = a(1 + λ·VDD)/(1 + a·λ·RD)
    a_ = 120e-6 * 10 / 2 * (5 * 120 / 450 - 0.7) ** 2
    expected = a_ * (1 + 0.02 * 5) / (1 + a_ * 0.02 * 10e3)
    assert not solution.closed_form
    assert solution.effects == frozenset({"lambda"})
    assert solution.topology == "common-source, divider bias"
    assert close(only_device(solution).id, expected)
    assert only_device(solution).gds > 0
    text = working(solution)
    assert "LAMBDA = 0.02" in text and "numerically" in text


def test_gamma_switched_on_moves_the_degenerated_stage_back_to_saturation():
    c = read_netlist(EXAMPLES / "cs_degenerated.cir")  # GAMMA = 0.45, PHI = 0.7, VSB = ID·RS
    k, vto, gamma, phi, vg, rs = 110e-6 * 20, 0.65, 0.45, 0.7, 2.0, 1.5e3

    def excess(current: float) -> float:  # saturation: (K/2)(VG − VS − Vt(VSB))² − ID
        vs = current * rs
        vt = vto + gamma * (math.sqrt(phi + vs) - math.sqrt(phi))
        return k / 2 * max(vg - vs - vt, 0.0) ** 2 - current

    low, high = 0.0, 1e-3  # bisection, independent of any solver in the package
    for _ in range(200):
        mid = (low + high) / 2
        low, high = (mid, high) if excess(mid) > 0 else (low, mid)
    solution = hand_analysis(c, effects={"gamma"})
    device = only_device(solution)
    assert device.region == "saturation"
    assert close(device.id, low, rel=1e-9)
    assert device.vth > vto


def test_unknown_effect_is_refused():
    with pytest.raises(ValueError, match="unknown effect"):
        hand_analysis(read_netlist(EXAMPLES / "cs_divider.cir"), effects={"temperature"})


def test_two_transistors_are_solved_numerically():
    c = circuit(
        "VDD vdd 0 5\nIREF vdd a 100u\nM1 a a 0 0 nch w=20u l=2u\nM2 d a 0 0 nch w=20u l=2u\nRD vdd d 10k"
    )
    solution = hand_analysis(c)
    assert not solution.closed_form
    assert "No closed form used" in working(solution)
    assert close(solution.devices["M1"].id, 100e-6)
    assert close(solution.devices["M2"].id, 100e-6)  # λ = 0: a perfect mirror
    assert close(solution.node_voltages["a"], VT_N + math.sqrt(2 * 100e-6 / K_N))
    assert close(solution.node_voltages["d"], 5 - 100e-6 * 10e3)


def test_current_source_drain_load_has_no_closed_form_but_a_triode_solution():
    c = circuit("VDD vdd 0 5\nVB g 0 1.2\nI1 vdd d 50u\nM1 d g 0 0 nch w=20u l=2u")
    solution = hand_analysis(c)
    # K·(VOV·VD − VD²/2) = I: (K/2)VD² − K·VOV·VD + I = 0, the root below VOV
    vd, _ = roots(K_N / 2, -K_N * 0.5, 50e-6)
    assert not solution.closed_form
    assert solution.topology == "common-source, current-source drain load"
    assert close(solution.node_voltages["d"], vd)


def test_controlled_source_bias_is_solved_numerically():
    c = circuit("VDD vdd 0 5\nVREF r 0 0.6\nE1 g 0 r 0 2\nRD vdd d 10k\nM1 d g 0 0 nch w=20u l=2u")
    solution = hand_analysis(c)
    assert not solution.closed_form
    assert close(solution.node_voltages["g"], 1.2)
    assert close(only_device(solution).id, K_N / 2 * (1.2 - VT_N) ** 2)


def test_floating_gate_is_refused():
    c = circuit("VDD vdd 0 5\nVIN in 0 1\nC1 in g 1u\nRD vdd d 10k\nM1 d g 0 0 nch w=20u l=2u")
    with pytest.raises(HandAnalysisError, match="gate of M1 has no DC path"):
        hand_analysis(c)


def test_elements_outside_the_hand_model_are_refused():
    c = parse_netlist("d\nV1 a 0 5\nR1 a k 1k\nD1 k 0 dmod\n.model dmod d\n.end\n")
    with pytest.raises(HandAnalysisError, match="outside"):
        hand_analysis(c)


# --- ngspice as the outside reference -------------------------------------------------------

_ROW = re.compile(r"^\s*(\S+)\s+([-+]?\d\.\d+e[-+]\d+)\s*$")


def _ngspice_node_voltages(path: Path) -> dict[str, float]:
    """Node voltages `ngspice -b` prints for a netlist file holding its own `.op`."""
    run = subprocess.run(
        [NGSPICE, "-b", str(path)], capture_output=True, text=True, timeout=60, cwd=path.parent
    )
    values = {m.group(1).lower(): float(m.group(2)) for m in map(_ROW.match, run.stdout.splitlines()) if m}
    assert values, f"ngspice printed no operating point:\n{run.stdout}\n{run.stderr}"
    return values


@pytest.mark.skipif(NGSPICE is None, reason="ngspice is not installed")
@pytest.mark.parametrize(
    "name", ["divider + RS", "pmos divider + RS", "feedback", "follower, current sink", "triode"]
)
def test_closed_form_matches_ngspice_with_lambda_and_gamma_zeroed(name, tmp_path):
    cards = ".model nch nmos (vto=0.7 kp=100u)\n.model pch pmos (vto=-0.8 kp=40u)"
    text = f"hand vs ngspice\n{TOPOLOGIES[name]}\n{cards}\n.op\n.end\n"
    path = tmp_path / "stage.cir"
    path.write_text(text)
    reference = _ngspice_node_voltages(path)
    solution = hand_analysis(parse_netlist(text))
    for node, value in solution.node_voltages.items():
        if node != "0":
            # ngspice adds junction leakage and GMIN (pA) and stops at RELTOL = 1e-3.
            assert value == pytest.approx(reference[node], rel=1e-3, abs=1e-6), node


def test_forward_biased_bulk_junction_is_flagged():
    # The ideal 1 mA sink drags the source to VG − Vt − VOV = 0.2 − 0.7 − 1.414 V, below the
    # grounded bulk: a real junction would conduct, the hand model has none.
    c = circuit("VDD vdd 0 5\nVB g 0 0.2\nRD vdd d 1k\nM1 d g s 0 nch w=20u l=2u\nIS s 0 1m")
    solution = hand_analysis(c)
    assert close(solution.node_voltages["s"], 0.2 - VT_N - math.sqrt(2 * 1e-3 / K_N))
    assert any("bulk–source junction is forward biased" in a for a in solution.assumptions)
    assert "Warning" in working(solution)


@pytest.mark.skipif(NGSPICE is None, reason="ngspice is not installed")
@pytest.mark.parametrize(
    "path", [p for p in sorted(EXAMPLES.glob("*.cir")) if p.stem != "bench_session"], ids=lambda p: p.stem
)
def test_both_effects_on_reproduce_the_full_level1_model_in_ngspice(path):
    # With LAMBDA and GAMMA switched on the hand model is the full level-1 channel model:
    # only ngspice's junction leakage, GMIN and RELTOL = 1e-3 remain between them.
    reference = _ngspice_node_voltages(path)
    solution = hand_analysis(read_netlist(path), effects={"lambda", "gamma"})
    for node, value in solution.node_voltages.items():
        if node != "0":
            assert value == pytest.approx(reference[node], rel=1e-3, abs=1e-6), node
