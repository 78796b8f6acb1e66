"""`gain`'s hand column against closed forms written out here, and a textbook worked example.

Each stage is a scenario of its own (a bicycle dynamo light's sensing board: the hub-dynamo
pickup amplified to drive the light's comparator). Each closed form is derived in its test from
the card and the resistors: the square law for the bias (VOV from VG, VTO and RS), gm = K·VOV,
then the textbook small-signal form.
"""

from __future__ import annotations

import math

import pytest

from bridge.analysis.hand import HandModel
from bridge.analysis.smallsignal import SignalNetwork, SignalSetup, hand_column, hand_devices, hand_gain_with
from bridge.gain_run import run_gain
from bridge.netlist import parse_netlist

KP, W, L, VTO = 120e-6, 40e-6, 2e-6, 0.7
K = KP * W / L


def _stage(body: str, model: str = f".model N nmos (level=1 vto={VTO} kp={KP} lambda=0.02 gamma=0.4)"):
    return parse_netlist(f"dynamo pickup stage\n{body}\n{model}\n.op\n.end\n", "dynamo.cir")


def _par(*resistances: float) -> float:
    return 1.0 / sum(1.0 / r for r in resistances)


def _saturated_overdrive(drive: float, rs: float) -> float:
    """VOV of (K/2)·RS·VOV² + VOV − drive = 0 (RS = 0: VOV = drive)."""
    if rs == 0.0:
        return drive
    a = 0.5 * K * rs
    return (-1.0 + math.sqrt(1.0 + 4.0 * a * drive)) / (2.0 * a)


def _hand(circuit, source: str, output: str, load: str | None):
    hand = HandModel(circuit).solve()
    return hand_column(circuit, hand, SignalSetup(source, output, load, 1e4))


R1, R2, RD, RL, RSIG = 360e3, 140e3, 4.7e3, 47e3, 2.2e3
VG = 5.0 * R2 / (R1 + R2)
ALPHA = _par(R1, R2) / (_par(R1, R2) + RSIG)
COMMON = f"""VDD vdd 0 5
VPICK pick 0 DC 0 AC 1
RSIG pick pin {RSIG}
CIN pin g 4.7u
R1 vdd g {R1}
R2 g 0 {R2}
RD vdd d {RD}
COUT d out 1u
RL out 0 {RL}"""


def test_common_source_without_source_resistor():
    circuit = _stage(COMMON + f"\nM1 d g 0 0 N W={W} L={L}")
    column = _hand(circuit, "VPICK", "out", "RL")
    gm = K * (VG - VTO)
    assert column.closed_form == "common source"
    assert column.gain == pytest.approx(-ALPHA * gm * _par(RD, RL), rel=1e-9)
    assert column.rin == pytest.approx(RSIG + _par(R1, R2), rel=1e-9)
    assert column.rout == pytest.approx(RD, rel=1e-9)
    # Short-circuit time constants: CIN sees RSIG + R1 ∥ R2, COUT sees RD + RL.
    expected = 1 / (2 * math.pi * (RSIG + _par(R1, R2)) * 4.7e-6) + 1 / (2 * math.pi * (RD + RL) * 1e-6)
    assert column.low_hz == pytest.approx(expected, rel=1e-9)
    assert any("RD = 4.7 kΩ" in str(step) and "RL = 47 kΩ" in str(step) for step in column.steps)


@pytest.mark.parametrize("bypassed", [False, True])
def test_common_source_with_source_resistor(bypassed):
    rs = 1e3
    body = COMMON + f"\nRS s 0 {rs}\nM1 d g s 0 N W={W} L={L}" + ("\nCS s 0 470u" if bypassed else "")
    circuit = _stage(body)
    column = _hand(circuit, "VPICK", "out", "RL")
    gm = K * _saturated_overdrive(VG - VTO, rs)
    if bypassed:
        assert column.gain == pytest.approx(-ALPHA * gm * _par(RD, RL), rel=1e-9)
        poles = {t.capacitor: t for t in column.low_terms}
        assert poles["CS"].resistance == pytest.approx(_par(rs, 1 / gm), rel=1e-9)
    else:
        assert column.gain == pytest.approx(-ALPHA * gm * _par(RD, RL) / (1 + gm * rs), rel=1e-9)
    assert column.closed_form.startswith("common source")
    assert column.rout == pytest.approx(RD, rel=1e-9)


def test_source_follower():
    rs = 4.7e3
    body = f"""VDD vdd 0 5
VPICK pick 0 DC 0 AC 1
CIN pick g 1u
R1 vdd g {R1}
R2 g 0 {R2}
RS s 0 {rs}
COUT s out 10u
RL out 0 {RL}
M1 vdd g s 0 N W={W} L={L}"""
    circuit = _stage(body)
    column = _hand(circuit, "VPICK", "out", "RL")
    gm = K * _saturated_overdrive(VG - VTO, rs)
    r = _par(rs, RL)
    assert column.closed_form == "source follower"
    assert column.gain == pytest.approx(gm * r / (1 + gm * r), rel=1e-9)
    assert column.rout == pytest.approx(_par(1 / gm, rs), rel=1e-9)
    assert column.rin == pytest.approx(_par(R1, R2), rel=1e-9)


def test_pmos_common_source():
    body = f"""VDD vdd 0 5
VPICK pick 0 DC 0 AC 1
CIN pick g 1u
R1 vdd g {R2}
R2 g 0 {R1}
RD d 0 {RD}
COUT d out 1u
RL out 0 {RL}
M1 d g vdd vdd P W={W} L={L}"""
    circuit = _stage(body, f".model P pmos (level=1 vto=-{VTO} kp={KP} lambda=0.02)")
    column = _hand(circuit, "VPICK", "out", "RL")
    vsg = 5.0 - 5.0 * R1 / (R1 + R2)
    gm = K * (vsg - VTO)
    assert column.closed_form == "PMOS common source"
    assert column.gain == pytest.approx(-gm * _par(RD, RL), rel=1e-9)


def test_current_source_in_the_source_bypassed():
    tail = 150e-6
    body = COMMON + f"""
VSS vss 0 -5
ITAIL s vss {tail}
CS s 0 470u
M1 d g s vss N W={W} L={L}"""
    column = _hand(_stage(body), "VPICK", "out", "RL")
    gm = K * math.sqrt(2 * tail / K)  # the tail fixes ID: VOV = √(2·ID/K)
    assert column.gain == pytest.approx(-ALPHA * gm * _par(RD, RL), rel=1e-9)
    assert column.closed_form == "common source"


def test_textbook_drain_feedback_amplifier():
    """Sedra & Smith, Microelectronic Circuits (5th ed.), Example 4.10, from memory: VDD = 15 V,
    RD = RL = 10 kΩ, RG = 10 MΩ from drain to gate, Vt = 1.5 V, kn'(W/L) = 0.25 mA/V², VA = 50 V:
    ID = 1.06 mA, gm = 0.725 mA/V, ro = 47 kΩ, Av = −gm·(RD ∥ RL ∥ ro) ≈ −3.3 V/V and
    Rin = RG/(1 − Av) ≈ 2.33 MΩ."""
    circuit = parse_netlist(
        "Sedra-Smith drain-feedback CS\nVDD vdd 0 15\nVIN sig 0 DC 0 AC 1\nCIN sig g 1u\nRG d g 10MEG\n"
        "RD vdd d 10k\nCOUT d out 1u\nRL out 0 10k\nM1 d g 0 0 N W=10u L=10u\n"
        ".model N nmos (level=1 vto=1.5 kp=250u lambda=0.02)\n.end\n", "sedra.cir",
    )  # fmt: skip
    hand = HandModel(circuit).solve()
    assert hand.devices["M1"].id == pytest.approx(1.06e-3, rel=0.01)
    assert hand.devices["M1"].gm == pytest.approx(0.725e-3, rel=0.01)
    setup = SignalSetup("VIN", "out", "RL", 1e4)
    column = hand_column(circuit, hand, setup)
    assert column.closed_form is None  # drain-to-gate feedback: the hand network solved numerically
    assert column.gain == pytest.approx(-0.725e-3 * 5e3, rel=0.01)  # ro infinite: −gm·(RD ∥ RL)
    # With ro (the attribution's lambda) the textbook's −3.3 V/V and 2.33 MΩ.
    assert hand_gain_with(circuit, hand, setup, "lambda") == pytest.approx(-3.3, rel=0.01)
    network = SignalNetwork(circuit, hand_devices(circuit, hand, frozenset({"lambda"})), "VIN")
    _, rin, _ = network.midband(1e4, "out", "RL", ("CIN", "COUT"))
    assert abs(rin) == pytest.approx(2.33e6, rel=0.01)


def test_attribution_ranks_the_effects_and_run_without_ngspice():
    body = COMMON + f"\nRS s 0 1k\nCS s 0 470u\nM1 d g s 0 N W={W} L={L}"
    result = run_gain(_stage(body), None, unavailable_hint="ngspice hidden for this test")
    assert result.simulator["unavailable"] == "ngspice hidden for this test"
    assert result.gain["sim"] is None and result.gain["level1"] is not None
    # LAMBDA lowers |gain| (ro in parallel with the load); GAMMA acts on nothing, the source at
    # AC ground: listed with its (zero) change, LAMBDA first.
    assert list(result.attribution) == ["lambda", "gamma"]
    assert result.attribution["lambda"] < 0.0
    assert result.attribution["gamma"] == pytest.approx(0.0, abs=1e-12)


def test_not_an_amplifier_gives_no_number():
    body = f"""VDD vdd 0 5
VPICK pick 0 DC 0 AC 1
CIN pick g 1u
R1 vdd g 100k
R2 g 0 100k
RD vdd d 100k
M1 d g 0 0 N W={W} L={L}"""  # 2.5 V on the gate, 100 kΩ: deep in triode
    result = run_gain(_stage(body), None)
    assert "not-amplifying" in {f.code for f in result.findings}
    assert set(result.gain.values()) == {None}
    assert not result.agree


def test_no_signal_source_is_a_finding():
    body = f"""VDD vdd 0 5
R1 vdd g {R1}
R2 g 0 {R2}
RD vdd d {RD}
M1 d g 0 0 N W={W} L={L}"""
    result = run_gain(_stage(body), None)
    assert [f.code for f in result.findings] == ["no-signal-source"]
    assert result.frequency is None and set(result.gain.values()) == {None}
    # Nothing was compared, so the verdict does not say the columns disagree.
    assert not result.agree and not result.compared
    from bridge.report.gain_view import gain_renderable
    verdict = gain_renderable(result).renderables[-1].plain
    assert verdict == "verdict: nothing compared (see above)"


def test_no_midband_when_the_bands_overlap():
    # A 10 pF coupling capacitor into 110 kΩ: its pole (~145 kHz) ×100 meets the Miller pole /100.
    body = COMMON.replace("CIN pin g 4.7u", "CIN pin g 10p") + f"\nM1 d g 0 0 N W={W} L={L}"
    model = f".model N nmos (level=1 vto={VTO} kp={KP} tox=20n cgso=0.2n cgdo=0.2n)"
    result = run_gain(_stage(body, model), None)
    assert [f.code for f in result.findings if f.severity != "info"] == ["no-midband"]
    assert result.gain["hand"] is None and result.frequency is None


def test_split_supplies_source_on_the_negative_rail():
    """The source on VSS is AC ground by the supply, not bypassed: the working says which."""
    body = f"""VDD vdd 0 5
VSS vss 0 -5
VPICK pick 0 DC 0 AC 1
CIN pick g 1u
R1 vdd g 850k
R2 g vss 150k
RD vdd d {RD}
M1 d g vss vss N W={W} L={L}"""
    column = _hand(_stage(body), "VPICK", "d", None)
    vgs = 10.0 * 150e3 / 1e6  # the divider across the 10 V between the rails, from VSS
    assert column.gain == pytest.approx(-K * (vgs - VTO) * RD, rel=1e-9)
    words = " ".join(str(step) for step in column.steps)
    assert "the source is on a supply: AC ground" in words and "bypassed" not in words
    assert "vdd (a supply: AC ground)" in words


def test_a_given_frequency_is_used_and_one_near_a_band_edge_is_said():
    circuit = _stage(COMMON + f"\nM1 d g 0 0 N W={W} L={L}")
    result = run_gain(circuit, None, frequency=5e3)
    assert result.frequency == 5e3 and result.frequency_why == "given with --freq"
    assert "near-band-edge" not in {f.code for f in result.findings}
    near = run_gain(circuit, None, frequency=20.0)  # the low band edge is ~3.6 Hz: within 100×
    assert "near-band-edge" in {f.code for f in near.findings}
