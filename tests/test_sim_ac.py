"""The ngspice column of the small-signal check (bridge/sim/ac.py): `.ac` runs through the worker,
against closed forms derived here and against `ngspice -b` run directly on decks written here."""

from __future__ import annotations

import cmath
import math
import re
import subprocess
from pathlib import Path

import numpy as np
import pytest

from bridge.netlist import parse_netlist
from bridge.netlist.circuit import AcSweep, Analysis, Origin
from bridge.netlist.emit import emit
from bridge.sim.ac import AcMeasurement, AcSetup, band_edges, measure_ac
from tests.conftest import NGSPICE, needs_ngspice

# A greenhouse soil-moisture probe's signal path, piece by piece.
HIGH_PASS = """soil probe AC coupling: RC high-pass
VPROBE in 0 DC 0.3 AC 1
CC in out 100n
RB out 0 10k
.end
"""
R_HP, C_HP = 10e3, 100e-9

LOW_PASS = """soil probe anti-alias: RC low-pass
VPROBE in 0 DC 0 AC 1
RF in out 4.7k
CF out 0 22n
.end
"""
R_LP, C_LP = 4.7e3, 22e-9

DIVIDER = """soil probe attenuator into the logger input
VPROBE in 0 DC 1.2 AC 0.5
RA in out 30k
RB out 0 10k
RLOG out 0 5k
.end
"""

# A bicycle dynamo light's ambient-light sensor amplifier: a common source with coupling capacitors
# and an unbypassed source resistor; the bulk tied to the source (no body effect).
CS_STAGE = """bicycle dynamo light: ambient sensor preamp, common source
VDD vdd 0 DC 6
VSIG sig 0 DC 0 AC 1
RSIG sig a 1k
CIN a gate 1u
R1 vdd gate 390k
R2 gate 0 150k
RD vdd drain 12k
RS src 0 2.2k
M1 drain gate src src NLAMP W=30u L=3u
COUT drain out 2.2u
RL out 0 47k
.model NLAMP nmos (level=1 vto=0.8 kp=110u lambda=0.03 gamma=0.5 phi=0.7)
.end
"""


# The edge from a straight line in ln|H| against ln f between sweep points h = ln(10)/40 apart: for a
# first-order corner y = −½·ln(1 + e^(2u)) has |y''| ≤ ½, so the line is off by at most h²/8·½ in y,
# and with |y'| = ½ at the corner by h²/8 in u: 4.1e-4 relative in f.
EDGE_REL = math.log(10.0) ** 2 / 40**2 / 8 * 1.02


def _batch(deck: str, tmp_path: Path, name: str) -> dict[str, float]:
    """`ngspice -b` on a deck whose `.control` block prints `name = value` lines at 15 digits."""
    assert NGSPICE is not None
    path = tmp_path / name
    path.write_text(deck)
    completed = subprocess.run([NGSPICE, "-b", str(path)], capture_output=True, text=True, timeout=30,
                               cwd=tmp_path)
    values = {
        match.group(1).lower(): float(match.group(2))
        for match in re.finditer(r"^(\S+) = ([-+]?\d\.\d+e[-+]\d+)\s*$", completed.stdout, re.MULTILINE)
    }
    assert values, completed.stdout + completed.stderr
    return values


def test_the_ac_analysis_is_emitted_as_ngspice_reads_it():
    circuit = parse_netlist(HIGH_PASS, "hp.cir")
    analysis = Analysis("ac", Origin("hp.cir", 0), ac=AcSweep("dec", 40, 1.0, 1e7))
    assert emit(circuit, analyses=[analysis]).text.splitlines()[-2] == ".ac dec 40 1 10000000"
    one = Analysis("ac", Origin("hp.cir", 0), ac=AcSweep("lin", 1, 159.25, 159.25))
    assert ".ac lin 1 159.25 159.25" in emit(circuit, analyses=[one]).text
    for bad in (AcSweep("log", 10, 1.0, 10.0), AcSweep("dec", 0, 1.0, 10.0), AcSweep("dec", 10, 0.0, 10.0),
                AcSweep("dec", 10, 10.0, 1.0)):
        with pytest.raises(ValueError):
            emit(circuit, analyses=[Analysis("ac", Origin("hp.cir", 0), ac=bad)])


def test_a_netlists_own_ac_card_is_still_read_as_before():
    circuit = parse_netlist(HIGH_PASS.replace(".end", ".ac dec 10 1 1meg\n.op\n.end"), "hp.cir")
    assert [a.kind for a in circuit.analyses] == ["op"]
    assert [d.kind for d in circuit.directives] == ["ac"]
    assert ".ac" not in emit(circuit).text


@needs_ngspice
def test_rc_high_pass_edge_and_phase(required_ngspice_session):
    circuit = parse_netlist(HIGH_PASS, "hp.cir")
    corner = 1.0 / (2.0 * math.pi * R_HP * C_HP)  # H = jωRC / (1 + jωRC)
    setup = AcSetup("VPROBE", "out", "RB", midband_hz=1e6, start_hz=1.0, stop_hz=1e7)
    measured = measure_ac(required_ngspice_session, circuit, setup)
    closed = 1j * 2 * np.pi * measured.frequency * R_HP * C_HP
    assert np.allclose(measured.response, closed / (1 + closed), rtol=1e-9, atol=0)
    assert measured.frequency[0] == pytest.approx(1.0) and measured.frequency[-1] == pytest.approx(1e7)
    assert len(measured.frequency) == 7 * 40 + 1
    assert measured.low_hz == pytest.approx(corner, rel=EDGE_REL)
    assert measured.high_hz is None
    # Rin: C in series with RB; Rout seen by RB: the capacitor to the source's AC ground.
    w = 2 * math.pi * 1e6
    assert measured.rin == pytest.approx(R_HP + 1 / (1j * w * C_HP), rel=1e-9)
    assert measured.rout == pytest.approx(1 / (1j * w * C_HP), rel=1e-9)

    at_corner = measure_ac(required_ngspice_session, circuit,
                           AcSetup("VPROBE", "out", None, corner, 1.0, 1e7, points_per_decade=10))
    assert abs(at_corner.gain) == pytest.approx(1 / math.sqrt(2), rel=1e-9)
    assert math.degrees(cmath.phase(at_corner.gain)) == pytest.approx(45.0, rel=1e-9)
    # Nothing taken out: Rout is RB ∥ 1/(jωC) at the corner, where |1/(ωC)| = RB.
    assert at_corner.rout == pytest.approx(R_HP / (1 + 1j), rel=1e-9)


@needs_ngspice
def test_rc_low_pass_edge_and_phase(required_ngspice_session):
    circuit = parse_netlist(LOW_PASS, "lp.cir")
    corner = 1.0 / (2.0 * math.pi * R_LP * C_LP)  # H = 1 / (1 + jωRC)
    measured = measure_ac(required_ngspice_session, circuit, AcSetup("VPROBE", "out", "CF", 10.0, 1.0, 1e6))
    closed = 1 / (1 + 1j * 2 * np.pi * measured.frequency * R_LP * C_LP)
    assert np.allclose(measured.response, closed, rtol=1e-9, atol=0)
    assert measured.high_hz == pytest.approx(corner, rel=EDGE_REL)
    assert measured.low_hz is None
    assert measured.gain == pytest.approx(1 / (1 + 1j * 2 * math.pi * 10.0 * R_LP * C_LP), rel=1e-9)
    assert measured.rout == pytest.approx(R_LP, rel=1e-9)  # CF taken out: RF to the source's AC ground
    assert math.degrees(cmath.phase(np.interp(corner, measured.frequency, measured.response))) == pytest.approx(
        -45.0, abs=0.5)


@needs_ngspice
def test_divider_rin_rout_and_gain_against_its_terminal_voltage(required_ngspice_session):
    circuit = parse_netlist(DIVIDER, "div.cir")
    measured = measure_ac(required_ngspice_session, circuit, AcSetup("VPROBE", "out", "RLOG", 1e3, 10.0, 1e5))
    below = 10e3 * 5e3 / (10e3 + 5e3)  # RB ∥ RLOG
    # The deck drives AC 1 whatever the netlist's AC 0.5 says; the gain is per volt across VPROBE.
    assert measured.gain == pytest.approx(below / (30e3 + below), rel=1e-12)
    assert measured.rin == pytest.approx(30e3 + below, rel=1e-12)
    assert measured.rout == pytest.approx(30e3 * 10e3 / 40e3, rel=1e-12)  # RA ∥ RB: RLOG out
    assert measured.low_hz is None and measured.high_hz is None  # flat
    assert measured.rin.imag == 0.0


@needs_ngspice
def test_current_source_input_sees_the_network_at_its_terminals(required_ngspice_session):
    # A Norton signal: 1 A AC out of its − node `in` into RA + (RB ∥ RLOG).
    circuit = parse_netlist(DIVIDER.replace("VPROBE in 0 DC 1.2 AC 0.5", "IPROBE 0 in DC 0"), "norton.cir")
    measured = measure_ac(required_ngspice_session, circuit, AcSetup("IPROBE", "out", "RLOG", 1e3, 10.0, 1e5))
    below = 10e3 * 5e3 / 15e3
    assert measured.rin == pytest.approx(30e3 + below, rel=1e-12)
    # v(out) / (v(0) − v(in)): the + node is ground, so the gain is negative.
    assert measured.gain == pytest.approx(-below / (30e3 + below), rel=1e-12)


@needs_ngspice
def test_common_source_midband_gain_is_ngspices_own(required_ngspice_session, tmp_path):
    circuit = parse_netlist(CS_STAGE, "cs.cir")
    setup = AcSetup("VSIG", "out", "RL", midband_hz=2e3, start_hz=0.1, stop_hz=1e6)
    measured = measure_ac(required_ngspice_session, circuit, setup)
    deck = CS_STAGE.replace(".end", ".ac lin 1 2000 2000\n.control\nset numdgt=15\nrun\n"
                            "print vr(out) vi(out) vr(sig) vi(sig) vr(a) vi(a) vr(vsig#branch) vi(vsig#branch)\n"
                            ".endc\n.end")
    direct = _batch(deck, tmp_path, "cs_direct.cir")
    v_out = complex(direct["vr(out)"], direct["vi(out)"])
    v_sig = complex(direct["vr(sig)"], direct["vi(sig)"])
    assert v_sig == 1.0
    assert measured.gain == pytest.approx(v_out / v_sig, rel=1e-9)
    branch = complex(direct["vr(vsig#branch)"], direct["vi(vsig#branch)"])
    assert measured.rin == pytest.approx(v_sig / -branch, rel=1e-9)
    assert -2.5 < measured.gain.real < -2.4  # an amplifier: inverting, about −gm·RD∥RL/(1 + gm·RS)
    # One coupling capacitor pair: the response falls at both ends of the audio band? Only below.
    assert measured.low_hz is not None and measured.low_hz < 200.0
    assert measured.high_hz is None


@needs_ngspice
def test_common_source_rout_is_the_closed_form_at_ngspices_operating_point(required_ngspice_session, tmp_path):
    circuit = parse_netlist(CS_STAGE, "cs.cir")
    f = 2e3
    measured = measure_ac(required_ngspice_session, circuit, AcSetup("VSIG", "out", "RL", f, 10.0, 1e5))
    deck = CS_STAGE.replace(".end", ".control\nset numdgt=15\nop\nprint @m1[gm] @m1[gds] @m1[gbd]\n.endc\n.end")
    op = _batch(deck, tmp_path, "cs_op.cir")
    # The drain with RS unbypassed, bulk on the source, gate at AC ground (the input source zeroed,
    # no gate current): i = gm·vgs + g·vds, vgs = −RS·i, vds = vd − RS·i, g = gds + gbd (ngspice's
    # drain junction, GMIN at least) → vd / i = (1 + (gm + g)·RS) / g = ro + RS + gm·ro·RS.
    g = op["@m1[gds]"] + op["@m1[gbd]"]
    drain = (1 + (op["@m1[gm]"] + g) * 2.2e3) / g
    coupled = 1 / (1j * 2 * math.pi * f * 2.2e-6)  # COUT
    assert measured.rout == pytest.approx(coupled + 1 / (1 / 12e3 + 1 / drain), rel=1e-9)  # COUT + RD ∥ drain
    # RD as the load: its other terminal is the supply (AC ground); it sees the drain ∥ (COUT + RL).
    at_drain = measure_ac(required_ngspice_session, circuit, AcSetup("VSIG", "drain", "RD", f, 10.0, 1e5))
    assert at_drain.rout == pytest.approx(1 / (1 / drain + 1 / (coupled + 47e3)), rel=1e-9)


@needs_ngspice
def test_the_output_resistance_keeps_the_bias_of_a_dc_coupled_load(required_ngspice_session, tmp_path):
    # RL straight at the drain: its DC current sets the bias; the load is kept in for it and its
    # AC current measured, so Rout is the rest of the circuit at the stage's own operating point.
    coupled = CS_STAGE.replace("COUT drain out 2.2u\nRL out 0 47k", "RL drain 0 47k")
    circuit = parse_netlist(coupled, "dc_load.cir")
    measured = measure_ac(required_ngspice_session, circuit, AcSetup("VSIG", "drain", "RL", 2e3, 10.0, 1e5))
    op = _batch(coupled.replace(".end", ".control\nset numdgt=15\nop\nprint @m1[gm] @m1[gds] @m1[gbd]\n"
                                ".endc\n.end"), tmp_path, "dc_load_op.cir")
    g = op["@m1[gds]"] + op["@m1[gbd]"]
    drain = (1 + (op["@m1[gm]"] + g) * 2.2e3) / g
    assert measured.rout == pytest.approx(1 / (1 / 12e3 + 1 / drain), rel=1e-9)


@needs_ngspice
def test_names_the_circuit_lacks_are_value_errors(required_ngspice_session):
    circuit = parse_netlist(CS_STAGE, "cs.cir")
    session = required_ngspice_session
    cases = [
        (AcSetup("VNOPE", "out", "RL", 2e3, 10.0, 1e5), "no element"),
        (AcSetup("RD", "out", "RL", 2e3, 10.0, 1e5), "not an independent source"),
        (AcSetup("VSIG", "nowhere", "RL", 2e3, 10.0, 1e5), "no node `nowhere`"),
        (AcSetup("VSIG", "0", "RL", 2e3, 10.0, 1e5), "ground"),
        (AcSetup("VSIG", "out", "RNOPE", 2e3, 10.0, 1e5), "no element `RNOPE`"),
        (AcSetup("VSIG", "out", "RD", 2e3, 10.0, 1e5), "does not connect the output"),
        (AcSetup("VSIG", "out", "M1", 2e3, 10.0, 1e5), "two-terminal"),
        (AcSetup("VSIG", "out", "RL", 0.0, 10.0, 1e5), "midband"),
        (AcSetup("VSIG", "out", "RL", 2e3, 1e5, 10.0), "rise"),
        (AcSetup("VSIG", "out", "RL", 2e3, 10.0, 1e5, points_per_decade=0), "points per decade"),
    ]
    for setup, message in cases:
        with pytest.raises(ValueError, match=message):
            measure_ac(session, circuit, setup)


def test_band_edges_interpolate_log_log_and_stop_at_the_first_fall():
    f = np.array([1.0, 10.0, 100.0, 1e3, 1e4, 1e5])
    # |H| of a first-order high-pass sampled: the edge on a straight log-log segment is exact.
    magnitude = np.array([0.01, 0.1, 1.0, 1.0, 1.0, 1.0])
    low, high = band_edges(f, magnitude.astype(complex), 1e3, 1.0)
    assert low == pytest.approx(100.0 / math.sqrt(2), rel=1e-12)
    assert high is None
    # A notch above midband, then recovery: the first fall counts.
    notch = np.array([1.0, 1.0, 1.0, 1.0, 0.5, 1.0])
    assert band_edges(f, notch.astype(complex), 1e3, 1.0)[1] == pytest.approx(
        1e3 * 10 ** (math.log(HALF) / math.log(0.5)), rel=1e-12)
    assert band_edges(f, np.zeros(6, dtype=complex), 1e3, 0.0) == (None, None)


HALF = 1 / math.sqrt(2)


@needs_ngspice
def test_the_worker_returns_an_ac_plot_as_complex_arrays_and_an_op_as_floats(required_ngspice_session):
    circuit = parse_netlist(LOW_PASS, "lp.cir")
    session = required_ngspice_session
    ac = emit(circuit, analyses=[Analysis("ac", Origin("lp.cir", 0), ac=AcSweep("oct", 2, 100.0, 800.0))])
    result = session.run(ac, vectors=["frequency", "v(out)", "i(vprobe)"])
    assert result["v(out)"].dtype == complex and result["vprobe#branch"].dtype == complex
    assert np.allclose(result["frequency"].real, [100.0, 100 * 2**0.5, 200.0, 200 * 2**0.5, 400.0,
                                                   400 * 2**0.5, 800.0], rtol=1e-12)
    w = 2 * np.pi * result["frequency"].real
    assert np.allclose(result["v(out)"], 1 / (1 + 1j * w * R_LP * C_LP), rtol=1e-9, atol=0)
    # ngspice's branch current flows into the + node: the current VPROBE delivers is its negative.
    assert np.allclose(-result["i(vprobe)"], 1 / (R_LP + 1 / (1j * w * C_LP)), rtol=1e-9, atol=0)
    op = session.run(emit(circuit, analyses=[Analysis("op", Origin("lp.cir", 0))]), vectors=["v(out)"])
    assert op["v(out)"].dtype == float and op.scalar("v(out)") == 0.0


def _high_pass_measurement() -> AcMeasurement:
    """The RC high-pass's response from its closed form, in the shape measure_ac gives it."""
    f = np.logspace(0, 7, 7 * 40 + 1)
    x = 1j * 2 * np.pi * f * R_HP * C_HP
    response = x / (1 + x)
    gain = complex(response[-40])
    low, high = band_edges(f, response, float(f[-40]), abs(gain))
    return AcMeasurement(float(f[-40]), gain, complex(R_HP), complex(0.0), f, response, low, high)


def test_gain_plot_draws_the_response_and_the_hand_marks():
    from bridge.report.gain_plot import gain_figure

    measured = _high_pass_measurement()
    corner = 1.0 / (2.0 * math.pi * R_HP * C_HP)
    figure = gain_figure(measured, -0.98, corner * 1.1, None, "soil probe coupling")
    magnitude, phase = figure.axes
    sim = next(line for line in magnitude.get_lines() if line.get_label() == "ngspice .ac")
    assert np.allclose(sim.get_ydata(), 20 * np.log10(np.abs(measured.response)))
    assert sim.get_xdata()[0] == 1.0 and magnitude.get_xscale() == "log"
    hand = [line for line in magnitude.get_lines() if line.get_label().startswith("hand midband gain -0.98 ")]
    assert len(hand) == 1 and np.allclose(hand[0].get_ydata(), 20 * math.log10(0.98))
    edges = [line for line in magnitude.get_lines() if line.get_label().startswith("hand f_L = ")]
    assert len(edges) == 1 and np.allclose(edges[0].get_xdata(), corner * 1.1)
    assert not [line for line in magnitude.get_lines() if "f_H" in line.get_label()]  # None: not drawn
    assert any(np.allclose(line.get_xdata(), corner * 1.1) for line in phase.get_lines())
    sim_phase = next(line for line in phase.get_lines() if line.get_label() == "ngspice .ac")
    assert np.interp(corner, sim_phase.get_xdata(), sim_phase.get_ydata()) == pytest.approx(45.0, abs=0.1)
    ngspice_edge = [line for line in magnitude.get_lines() if line.get_label().startswith("ngspice −3 dB f_L")]
    assert len(ngspice_edge) == 1 and np.allclose(ngspice_edge[0].get_xdata(), measured.low_hz)
    assert figure.get_suptitle() == "soil probe coupling"
    upper = gain_figure(measured, None, None, 2e5, "soil probe coupling").axes[0]
    assert [line.get_label() for line in upper.get_lines() if line.get_label().startswith("hand")] == [
        "hand f_H = 200 kHz"]


def test_gain_plot_file_is_written_whole_and_replaced_by_rename(tmp_path):
    from bridge.report.gain_plot import plot_gain

    measured = _high_pass_measurement()
    target = tmp_path / "probe.png"
    plot_gain(target, measured, 0.99, 160.0, None, "soil probe coupling")
    first = target.stat().st_ino
    assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    plot_gain(target, measured, None, None, None, "soil probe coupling")
    # A new file renamed into place (another inode), never the old one rewritten; no part left.
    assert target.stat().st_ino != first and target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["probe.png"]
    with pytest.raises(ValueError, match=r"\.png or \.svg"):
        plot_gain(tmp_path / "probe.pdf", measured, 0.99, None, None, "x")
    assert not (tmp_path / "probe.pdf").exists()
