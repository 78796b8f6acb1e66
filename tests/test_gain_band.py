"""`gain`'s band edges: the level-1 column's own −3 dB points against ngspice's sweep, the hand
network's own −3 dB points against a closed form written out here, and how a hand estimate that
behaves as the textbook says (short-circuit time constants above the −3 dB point when poles are
comparable and a bypass zero sits near them) is reported: an info with its cause, at the
capacitor whose term dominates, not a disagreement.

Stages of a beehive monitor's hive-microphone board (invented values).
"""

from __future__ import annotations

import math

import pytest

from bridge.analysis.band_edges import hand_band_evidence
from bridge.analysis.dcsolve import solve_operating_point
from bridge.analysis.hand import HandModel
from bridge.analysis.roots import brent_root
from bridge.analysis.smallsignal import SignalSetup, hand_column, hand_devices
from bridge.gain_run import run_gain
from bridge.netlist import parse_netlist

# A bypassed common source: CIN, CS and COUT give comparable terms and CS a zero at 1/(2π·RS·CS).
BYPASSED = """Beehive monitor: hive microphone preamp
VDD vdd 0 DC 9
VMIC mic 0 DC 0 AC 1
RSIG mic pin 2k
CIN pin g 1u
R1 vdd g 680k
R2 g 0 220k
RD vdd d 6.8k
RS s 0 1.5k
CS s 0 47u
COUT d out 1u
RL out 0 22k
M1 d g s 0 NB W=60u L=2u
.model NB nmos (level=1 vto=0.8 kp=110u tox=25n cgso=0.3n cgdo=0.3n)
.end
"""
CS_LINE = 10  # the card `CS s 0 47u`


def _circuit(text: str = BYPASSED):
    return parse_netlist(text, "hive.cir")


def _closed_form_edge(gm: float) -> tuple[float, tuple[float, float, float]]:
    """The hand network of BYPASSED (ro infinite, device capacitances open) is a product of three
    independent first-order sections: CIN against RSIG + R1 ∥ R2, COUT against RD + RL, and the
    source section −gm·RD'/(1 + gm·ZS) with ZS = RS ∥ 1/(sCS), whose zero is 1/(2π·RS·CS) and pole
    (1 + gm·RS)/(2π·RS·CS). Its −3 dB point solved here by Brent on that closed form, and its poles."""
    rg = 2e3 + 680e3 * 220e3 / 900e3
    p_in = 1.0 / (2.0 * math.pi * rg * 1e-6)
    p_out = 1.0 / (2.0 * math.pi * (6.8e3 + 22e3) * 1e-6)
    zero = 1.0 / (2.0 * math.pi * 1.5e3 * 47e-6)
    p_s = (1.0 + gm * 1.5e3) * zero

    def relative_magnitude(f: float) -> float:
        """|gain(f)|/|gain(midband)|: two high-pass sections and the source section's zero and pole."""
        return f / math.hypot(f, p_in) * f / math.hypot(f, p_out) * math.hypot(f, zero) / math.hypot(f, p_s)

    edge = math.exp(brent_root(lambda u: relative_magnitude(math.exp(u)) - 1.0 / math.sqrt(2.0),
                               math.log(0.1), math.log(1e3), xtol=1e-14, rtol=1e-12))  # fmt: skip
    return edge, (p_in, p_out, p_s)


def test_the_hand_networks_own_low_edge_and_poles_match_the_closed_form():
    circuit = _circuit()
    hand = HandModel(circuit).solve()
    setup = SignalSetup("VMIC", "out", "RL", 100e3)
    column = hand_column(circuit, hand, setup)
    evidence = hand_band_evidence(circuit, hand, column, setup, 0.1, 1e11)
    gm = hand_devices(circuit, hand)["M1"].gm
    edge, poles = _closed_form_edge(gm)
    # The evidence's network carries M1's gate capacitances too (for its upper edge): a few ppm here.
    assert evidence.low_hz == pytest.approx(edge, rel=1e-5)
    # The s-coefficient identity: the short-circuit terms sum to the sum of the poles.
    assert all(p.imag == 0.0 for p in evidence.low_poles_hz)
    assert sorted(p.real for p in evidence.low_poles_hz) == pytest.approx(sorted(poles), rel=1e-8)
    assert column.low_hz == pytest.approx(sum(poles), rel=1e-9)
    assert [z[:2] for z in evidence.zeros] == [("CS", "RS")]
    assert evidence.zeros[0][2] == pytest.approx(1.0 / (2.0 * math.pi * 1.5e3 * 47e-6), rel=1e-12)
    # The textbook over-estimate: comparable poles and a zero put the −3 dB point well below the sum.
    assert column.low_hz > 1.3 * evidence.low_hz


def test_the_estimate_behaving_as_the_textbook_says_is_an_info_at_the_dominant_capacitor(required_ngspice_session):
    result = run_gain(_circuit(), required_ngspice_session)
    low = result.band["low_hz"]
    # The level-1 column's own edges against ngspice's −3 dB points (its sweep, 40 points a decade).
    assert low["level1"] == pytest.approx(low["sim"], rel=5e-3)
    high = result.band["high_hz"]
    assert high["level1"] == pytest.approx(high["sim"], rel=5e-3)
    assert abs(low["hand"] - low["sim"]) / low["sim"] > 0.3  # far beyond --tol, by construction
    codes = {(f.code, f.quantity): f for f in result.findings}
    assert ("gain-hand-differs", "low_hz") not in codes
    info = codes[("band-estimate", "low_hz")]
    assert info.severity == "info" and (info.line, info.subject) == (CS_LINE, "CS")
    cause = codes[("band-cause", "low_hz")]
    assert cause.line == CS_LINE
    assert "the two largest terms are" in cause.message and "(CS)" in cause.message
    assert "CS across RS puts a zero at 1/(2π·RS·CS) = 2.258 Hz" in cause.message
    # No λ or γ on the card: nothing else differs, so the verdict is agreement.
    assert result.agree, [f.message for f in result.findings if f.severity != "info"]


def test_a_band_tolerance_below_the_estimates_error_makes_it_a_disagreement(required_ngspice_session):
    result = run_gain(_circuit(), required_ngspice_session, band_tolerance=0.2)
    flagged = [f for f in result.findings if f.code == "gain-hand-differs" and f.quantity == "low_hz"]
    assert flagged and "and the 20 % estimate tolerance" in flagged[0].message and flagged[0].line == CS_LINE
    assert not result.agree


def test_a_hand_model_that_differs_is_still_a_disagreement(required_ngspice_session):
    """One coupling capacitor alone (the estimate exact for the hand network), but a strong λ: the
    drain's resistance is RD ∥ ro, so COUT's pole moves; that is the hand model's difference, and
    it stays a warning whatever --band-tol allows."""
    text = """Beehive monitor: entrance counter pickup
VDD vdd 0 DC 9
VIN g 0 DC 1.6 AC 1
RD vdd d 2.2k
COUT d out 10n
RL out 0 4.7k
M1 d g 0 0 NB W=60u L=2u
.model NB nmos (level=1 vto=0.8 kp=110u lambda=0.2)
.end
"""
    result = run_gain(_circuit(text), required_ngspice_session)
    low = result.band["low_hz"]
    assert low["level1"] == pytest.approx(low["sim"], rel=5e-3)
    flagged = [f for f in result.findings if f.code == "gain-hand-differs" and f.quantity == "low_hz"]
    assert flagged and flagged[0].subject == "COUT" and flagged[0].line == 5
    cause = next(f for f in result.findings if f.code == "band-cause")
    assert "the hand model itself" in cause.message
    assert "one capacitor, COUT, so it is the hand network's one low-frequency pole" in cause.message


def test_the_level1_edges_work_without_ngspice():
    result = run_gain(_circuit(), None, unavailable_hint="hidden for the test")
    low = result.band["low_hz"]
    assert low["sim"] is None and low["level1"] is not None
    level1 = solve_operating_point(_circuit())
    assert level1.devices["M1"].region == "saturation"
    # Against the level-1 reference the estimate is still the estimate's difference: an info.
    assert any(f.code == "band-estimate" and f.quantity == "low_hz" for f in result.findings)
