"""`gain` on stages beyond the textbook three: drain-to-gate feedback, a DC-coupled input, an
inductor, a load capacitance, a cascode, a current-source input, an output with no signal. Each
result is true for its circuit or a clear finding; ngspice (through the worker) is the reference.

Stages of a beehive monitor's sensing board (invented values).
"""

from __future__ import annotations

import math

import pytest

from bridge.commands.gain_defaults import GainInputError
from bridge.gain_compare import compare_columns
from bridge.gain_run import run_gain
from bridge.netlist import parse_netlist

CARD = ".model NB nmos (level=1 vto=0.8 kp=110u lambda=0.02)"


def _circuit(body: str, card: str = CARD):
    return parse_netlist(f"beehive monitor stage\n{body}\n{card}\n.end\n", "hive.cir")


def _codes(result) -> dict[str, list]:
    found: dict[str, list] = {}
    for finding in result.findings:
        found.setdefault(finding.code, []).append(finding)
    return found


def test_feedback_stage_poles_are_a_complex_pair_and_said_so(required_ngspice_session):
    """RF from drain to gate couples CIN's and COUT's sections: the hand network's two low poles are
    a complex pair (their real parts still sum to the estimate), written `a ± jb Hz`."""
    result = run_gain(_circuit("""VDD vdd 0 DC 9
VIN sig 0 DC 0 AC 1
RSIG sig pin 10k
CIN pin g 1u
RF d g 1meg
RD vdd d 10k
M1 d g 0 0 NB W=60u L=2u
COUT d out 1u
RL out 0 47k""", ".model NB nmos (level=1 vto=0.8 kp=110u lambda=0.01)"), required_ngspice_session)
    for quantity in ("gain", "rin", "rout"):
        values = getattr(result, quantity)
        assert values["level1"] == pytest.approx(values["sim"], rel=5e-3)
    low = result.band["low_hz"]
    assert low["level1"] == pytest.approx(low["sim"], rel=5e-3)
    cause = _codes(result)["band-cause"][0].message
    assert " ± j" in cause and "found numerically" in cause


def test_a_dc_coupled_gate_has_a_reactive_input_impedance_not_compared(required_ngspice_session):
    """No gate resistor: what VIN sees at midband is the gate capacitance (phase −90°), shown as |Z|
    and not compared with the hand column's open circuit (before: a `gain-hand-differs` warning
    that read "from 0")."""
    result = run_gain(_circuit("""VDD vdd 0 DC 9
VIN g 0 DC 1.4 AC 1
RD vdd d 10k
RS s 0 470
M1 d g s 0 NB W=40u L=2u""", ".model NB nmos (level=1 vto=0.8 kp=110u lambda=0.02 tox=25n cgso=0.3n cgdo=0.3n)"),
        required_ngspice_session)  # fmt: skip
    codes = _codes(result)
    assert "reactive-impedance" in codes and codes["reactive-impedance"][0].quantity == "rin"
    assert not any(f.quantity == "rin" for f in codes.get("gain-hand-differs", []))
    assert math.isinf(result.rin["hand"]) and result.rin["sim"] > 1e8
    assert "not-midband" not in codes


def test_an_infinite_hand_value_against_a_finite_one_is_not_said_to_be_from_0():
    findings = compare_columns({"rin": {"hand": math.inf, "level1": 2e3, "sim": 2e3}}, 0.05, "M1", 5)
    assert len(findings) == 1 and "infinite against a finite value" in findings[0].message
    assert "from 0" not in findings[0].message


def test_an_inductor_that_moves_the_band_gives_a_not_midband_warning(required_ngspice_session):
    """LD across RD shorts the drain below R/(2πL): the capacitor-only estimate puts the midband at
    500 Hz, where the gain's phase is near −90°. The tool says so, and the cause names LD."""
    result = run_gain(_circuit("""VDD vdd 0 DC 9
VIN sig 0 DC 0 AC 1
CIN sig g 1u
R1 vdd g 680k
R2 g 0 220k
LD vdd d 10m
RD vdd d 10k
M1 d g 0 0 NB W=20u L=2u
COUT d out 1u
RL out 0 47k"""), required_ngspice_session)
    codes = _codes(result)
    assert codes["not-midband"][0].severity == "warning" and not result.agree
    assert "LD (inductance) is left out of it" in codes["band-cause"][0].message
    low = result.band["low_hz"]
    assert low["level1"] == pytest.approx(low["sim"], rel=5e-3)


def test_an_output_held_by_a_supply_is_refused():
    circuit = _circuit("""VDD vdd 0 DC 9
VIN g 0 DC 1.3 AC 1
RD vdd d 10k
M1 d g 0 0 NB W=40u L=2u""")
    with pytest.raises(GainInputError, match="`vdd` is held by VDD"):
        run_gain(circuit, None, output_name="vdd")


def test_a_load_capacitance_is_not_shorted_by_the_hand_model(required_ngspice_session):
    """CL from drain to ground is a low-pass capacitance: shorting it (as a coupling capacitor
    would be) kills the gain. Before, the hand model shorted it, the low band edge estimate took
    CL's 34 kHz term as the band's, the midband landed at 5 MHz and the hand gain was 0."""
    result = run_gain(_circuit("""VDD vdd 0 DC 9
VIN sig 0 DC 0 AC 1
CIN sig g 1u
R1 vdd g 680k
R2 g 0 220k
RD vdd d 4.7k
M1 d g 0 0 NB W=10u L=2u
CL d 0 1n"""), required_ngspice_session)
    assert result.frequency < 1e3
    # The hand gain: −gm·RD with gm = K·VOV at the hand bias point (VG = 9·220/900 = 2.2 V).
    k = 110e-6 * 10 / 2
    assert result.gain["hand"] == pytest.approx(-k * (2.2 - 0.8) * 4.7e3, rel=1e-3)
    assert result.gain["level1"] == pytest.approx(result.gain["sim"], rel=5e-3)
    notes = [f.message for f in result.findings if f.code == "hand-note"]
    assert any(n.startswith("CL: shorting it lowers the hand gain") for n in notes)
    # The low band edge is CIN's alone; the upper one, CL's, is the level-1 network's and ngspice's.
    assert result.band["low_hz"]["hand"] == pytest.approx(1.0 / (2.0 * math.pi * 680e3 * 220e3 / 900e3 * 1e-6))
    high = result.band["high_hz"]
    assert high["level1"] == pytest.approx(high["sim"], rel=5e-3)


def test_a_cascode_reports_the_top_drain_with_its_drain_resistor_kept(required_ngspice_session):
    """Before: the output was M1's drain (the cascode's middle node, gain ≈ −1) or, named with
    --output, RD was taken out as if it were a load (hand Rout infinite)."""
    circuit = _circuit("""VDD vdd 0 DC 9
VIN g 0 DC 1.3 AC 1
VB b 0 DC 4
M1 x g 0 0 NB W=40u L=2u
M2 d b x 0 NB W=40u L=2u
RD vdd d 10k""")
    result = run_gain(circuit, required_ngspice_session)
    assert result.output.value == "d" and "cascode" in result.output.why
    assert result.load.value is None
    k = 110e-6 * 40 / 2
    assert result.gain["hand"] == pytest.approx(-k * (1.3 - 0.8) * 10e3, rel=1e-9)
    assert result.rout["hand"] == pytest.approx(10e3, rel=1e-9)
    for quantity in ("gain", "rout"):
        values = getattr(result, quantity)
        assert values["level1"] == pytest.approx(values["sim"], rel=5e-3)
    assert result.agree


def test_a_pmos_stage_on_split_supplies_with_no_upper_edge_says_so(required_ngspice_session):
    """A PMOS common source, RS unbypassed, split supplies, its gate driven through CIN by an ideal
    source: Cgd carries the input to the drain, so the response never falls 3 dB above midband.
    The Miller estimate still gives a number; the tool says the circuit has no such edge (before:
    the estimate stood alone in the table, unflagged)."""
    result = run_gain(_circuit("""VP vp 0 DC 5
VN vn 0 DC -5
VIN sig 0 DC 0 AC 1
CIN sig g 1u
RG g 0 1meg
RS vp s 2.2k
M1 d g s vp PB W=80u L=2u
RD d vn 3.3k
COUT d out 1u
RL out 0 47k""", ".model PB pmos (level=1 vto=-0.8 kp=45u lambda=0.02 tox=25n cgso=0.3n cgdo=0.3n)"),
        required_ngspice_session)  # fmt: skip
    # Hand bias: VSG = 5 − ID·RS with ID = K/2·(VSG − 0.8)², K = 45u·80/2; VOV from the quadratic.
    k, rs = 45e-6 * 80 / 2, 2.2e3
    a, b, c = k * rs / 2, 1.0, -(5.0 - 0.8)
    vov = (-b + math.sqrt(b * b - 4 * a * c)) / (2 * a)
    gm = k * vov
    rd = 3.3e3 * 47e3 / (3.3e3 + 47e3)
    assert result.gain["hand"] == pytest.approx(-gm * rd / (1 + gm * rs), rel=1e-6)
    for quantity in ("gain", "rin", "rout"):
        values = getattr(result, quantity)
        assert values["level1"] == pytest.approx(values["sim"], rel=5e-3)
    assert result.band["high_hz"]["hand"] is not None and result.band["high_hz"]["sim"] is None
    flagged = [f for f in result.findings if f.code == "gain-hand-differs" and f.quantity == "high_hz"]
    assert flagged and "never falls 3 dB below its midband gain up to" in flagged[0].message
    cause = next(f for f in result.findings if f.code == "band-cause" and f.quantity == "high_hz")
    assert "the gate is driven through no resistance" in cause.message


def test_an_output_the_signal_never_reaches_is_a_finding_not_band_edges(required_ngspice_session):
    """`ref`, a divider from the supply, carries no signal: gain 0 everywhere. Before, the hand
    low band edge estimate stood beside it as if the node had a band."""
    circuit = _circuit("""VDD vdd 0 DC 9
VIN sig 0 DC 0 AC 1
CIN sig g 1u
R1 vdd g 680k
R2 g 0 220k
RD vdd d 4.7k
M1 d g 0 0 NB W=10u L=2u
RA vdd ref 10k
RB ref 0 10k""")
    result = run_gain(circuit, required_ngspice_session, output_name="ref")
    codes = _codes(result)
    assert "no-output-signal" in codes and not result.agree
    assert result.band["low_hz"]["hand"] is None
    assert not any(f.quantity in ("low_hz", "high_hz") for f in result.findings)
    assert result.rout["hand"] == pytest.approx(10e3) and result.rout["sim"] == pytest.approx(10e3, rel=1e-6)
