"""Temperature: `.temp`, `.options temp/tnom` and instance TEMP/DTEMP, as ngspice's level-1 takes them.

The reference throughout is ngspice 39 itself, run directly in batch mode (`ngspice -b`): one
device between ideal sources for the model values, whole stages for the solver. The hand
column's numbers are checked against mos1temp.c's formulas written out below (ngspice 39,
src/spicelib/devices/mos1/mos1temp.c, MOS1temp) and against ngspice's own @m1[von].

The stages are parts of a greenhouse climate board (soil-moisture preamp, humidity buffer,
vent-fan driver, light-sensor stage); the values are test data.
"""

from __future__ import annotations

import math
import re
import subprocess
from pathlib import Path

import pytest
from conftest import NGSPICE, needs_ngspice, ngspice_batch_op

from bridge.analysis.dcsolve import solve_operating_point
from bridge.analysis.hand import hand_analysis
from bridge.analysis.sweep import sweep_values
from bridge.check import check_circuit
from bridge.cli import main
from bridge.devices.mos1 import Level1Geometry, Level1Model, evaluate
from bridge.netlist import parse_netlist, read_netlist
from bridge.sweep_run import transfer_curve

TEMPERATURES = (-40.0, 0.0, 27.0, 85.0, 125.0)
# The project's solver bar against ngspice (README, `check`): 0.2 % on currents, 1 mV on voltages.
RELATIVE = 2e-3
VOLTS = 1e-3

# --- mos1temp.c written out, independently of bridge/devices/mos1/temperature.py ----------------------
# Constants of ngspice 39's const.h.
Q = 1.6021766208e-19
K_BOLTZ = 1.38064852e-23
REFTEMP = 300.15


def _eg(t: float) -> float:
    return 1.16 - 7.02e-4 * t * t / (t + 1108.0)


def _pbfact(t: float) -> float:
    vt = t * K_BOLTZ / Q
    arg = -_eg(t) / (2.0 * K_BOLTZ * t) + 1.1150877 / (K_BOLTZ * 2.0 * REFTEMP)
    return -2.0 * vt * (1.5 * math.log(t / REFTEMP) + Q * arg)


def mos1temp(kp: float, vto: float, phi: float, gamma: float, polarity: int, celsius: float, tnom: float = 27.0):
    """KP, PHI and VTO at `celsius` from a card at TNOM, as MOS1temp computes tTransconductance,
    tPhi and tVto."""
    t, t_nom = celsius + 273.15, tnom + 273.15
    ratio = t / t_nom
    kp_t = kp / (ratio * math.sqrt(ratio))
    phio = (phi - _pbfact(t_nom)) / (t_nom / REFTEMP)
    phi_t = (t / REFTEMP) * phio + _pbfact(t)
    vbi = vto - polarity * gamma * math.sqrt(phi) + 0.5 * (_eg(t_nom) - _eg(t)) + polarity * 0.5 * (phi_t - phi)
    return kp_t, phi_t, vbi + polarity * gamma * math.sqrt(phi_t)


# --- ngspice on one device --------------------------------------------------------------------

_PRINTED = re.compile(r"^@m1\[(\w+)\]\s*=\s*(\S+)\s*$")
_QUANTITIES = ("id", "gm", "gds", "gmbs", "von", "temp")


def ngspice_device(
    mos_type: str, card: dict[str, float], bias: tuple[float, float, float, float], cards: str, tmp_path: Path,
    instance: str = "",
) -> dict[str, float]:
    """ngspice -b on one device at absolute terminal voltages (d, g, s, b); its @m1[...] values."""
    vd, vg, vs, vb = bias
    body = " ".join(f"{k}={v!r}" for k, v in card.items())
    text = "\n".join([
        "one level-1 device at temperature",
        f"vd d 0 {vd!r}", f"vg g 0 {vg!r}", f"vs s 0 {vs!r}", f"vb b 0 {vb!r}",
        f"m1 d g s b dut w=10u l=2u {instance}",
        f".model dut {mos_type} ({body})",
        cards,
        ".control", "set numdgt=12", "op", "print " + " ".join(f"@m1[{q}]" for q in _QUANTITIES), ".endc",
        ".end", "",
    ])  # fmt: skip
    path = tmp_path / "device.cir"
    path.write_text(text)
    done = subprocess.run([NGSPICE or "ngspice", "-b", str(path)], capture_output=True, text=True, timeout=30)
    values = {m.group(1): float(m.group(2)) for m in map(_PRINTED.match, done.stdout.splitlines()) if m}
    assert set(values) == set(_QUANTITIES), f"ngspice printed {values}:\n{done.stdout}\n{done.stderr}"
    return values


DEVICE_CASES = {
    # card, bias (d, g, s, b): saturation with body effect and λ
    "nmos_body": ("nmos", {"vto": 0.7, "kp": 1.1e-4, "gamma": 0.45, "phi": 0.68, "lambda": 0.03},
                  (3.0, 2.0, 0.2, -0.8)),
    # PMOS in triode with body effect (device polarity: vsg 2.2, vsd 0.4, vsb −0.5)
    "pmos_body_triode": ("pmos", {"vto": -0.8, "kp": 4e-5, "gamma": 0.55, "phi": 0.7, "lambda": 0.05},
                         (2.9, 1.1, 3.3, 3.8)),
    # PHI, GAMMA, VTO and KP all derived from NSUB, TOX, UO (mos1temp.c derives them at TNOM)
    "nmos_nsub_derived": ("nmos", {"tox": 20e-9, "nsub": 2e16, "uo": 520.0}, (2.5, 2.0, 0.0, -0.5)),
    # a card characterised at 50 °C: scaled from its own TNOM at every temperature, 27 °C included
    "nmos_tnom_50": ("nmos", {"vto": 0.65, "kp": 9e-5, "gamma": 0.3, "phi": 0.7, "tnom": 50.0}, (3.0, 1.8, 0.0, 0.0)),
}


@needs_ngspice
@pytest.mark.parametrize("celsius", TEMPERATURES)
@pytest.mark.parametrize("case", DEVICE_CASES)
def test_device_at_temperature_matches_ngspice(case: str, celsius: float, tmp_path: Path) -> None:
    # reference: ngspice 39 run directly (`ngspice -b`, `.temp`), @m1[id gm gds gmbs von]
    mos_type, card, bias = DEVICE_CASES[case]
    ngspice = ngspice_device(mos_type, card, bias, f".temp {celsius:g}", tmp_path)
    assert ngspice["temp"] == pytest.approx(celsius)
    model = Level1Model.from_card(mos_type, card).at_temperature(celsius)
    point = evaluate(model, Level1Geometry(w=10e-6, l=2e-6), *bias)
    assert point.id == pytest.approx(ngspice["id"], rel=RELATIVE, abs=1e-12)
    for quantity in ("gm", "gds", "gmbs"):
        assert getattr(point, quantity) == pytest.approx(ngspice[quantity], rel=RELATIVE, abs=1e-12), quantity
    # ngspice's von carries the type's sign; ours is in device polarity.
    assert point.vth == pytest.approx(model.polarity * ngspice["von"], abs=1e-6)


@needs_ngspice
@pytest.mark.parametrize(
    "instance, cards, expected",
    [
        ("temp=100", ".temp 27", 100.0),  # the instance's own TEMP wins
        ("dtemp=15", ".temp 60", 75.0),  # DTEMP adds to the circuit temperature
        ("", ".options temp=50\n.temp 85", 85.0),  # `.temp` beats `.options temp`...
        ("", ".temp 85\n.options temp=50", 85.0),  # ...wherever it stands
        ("", ".options temp=50\n.options temp=-10", -10.0),  # the last `.options temp`
        ("", ".temp 60\n.temp 85 100", 27.0),  # several values: ngspice sets none, 27 °C
    ],
)
def test_device_temperature_is_chosen_as_ngspice_chooses_it(instance, cards, expected, tmp_path: Path) -> None:
    # reference: ngspice 39 run directly, @m1[temp] and @m1[id]
    card = {"vto": 0.7, "kp": 1e-4, "gamma": 0.4, "phi": 0.65}
    ngspice = ngspice_device("nmos", card, (3.0, 2.0, 0.0, 0.0), cards, tmp_path, instance)
    assert ngspice["temp"] == pytest.approx(expected)
    circuit = parse_netlist(
        f"t\nvd d 0 3\nvg g 0 2\nm1 d g 0 0 dut w=10u l=2u {instance}\n"
        f".model dut nmos (vto=0.7 kp=1e-4 gamma=0.4 phi=0.65)\n{cards}\n.op\n.end\n"
    )
    element = circuit.element("m1")
    assert circuit.device_temperature(element) == pytest.approx(expected)
    solved = solve_operating_point(circuit)
    assert solved.device("m1").id == pytest.approx(ngspice["id"], rel=RELATIVE)


@needs_ngspice
def test_options_tnom_is_the_default_tnom_of_every_card(tmp_path: Path) -> None:
    # reference: ngspice 39 run directly: `.options tnom=50` rescales a TNOM-less card to 27 °C
    card = {"vto": 0.7, "kp": 1e-4, "gamma": 0.4, "phi": 0.65}
    ngspice = ngspice_device("nmos", card, (3.0, 2.0, 0.0, 0.0), ".options tnom=50", tmp_path)
    circuit = parse_netlist(
        "t\nvd d 0 3\nvg g 0 2\nm1 d g 0 0 dut w=10u l=2u\n"
        ".model dut nmos (vto=0.7 kp=1e-4 gamma=0.4 phi=0.65)\n.options tnom=50\n.op\n.end\n"
    )
    assert circuit.nominal_temperature() == 50.0
    assert solve_operating_point(circuit).device("m1").id == pytest.approx(ngspice["id"], rel=RELATIVE)
    assert hand_analysis(circuit).devices["m1"].vth == pytest.approx(
        mos1temp(1e-4, 0.7, 0.65, 0.4, 1, 27.0, tnom=50.0)[2], abs=1e-9
    )


def test_model_at_its_own_tnom_is_the_card() -> None:
    card = Level1Model.from_card("nmos", {"vto": 0.7, "kp": 1e-4, "gamma": 0.4})
    same = card.at_temperature(27.0)
    assert (same.kp, same.vto, same.phi) == (card.kp, card.vto, card.phi)
    assert same.saturation_current_factor == 1.0
    assert same.nominal is card and same.temperature_celsius == 27.0
    # re-scaling a scaled model starts again from the card
    assert card.at_temperature(85.0).at_temperature(0.0) == card.at_temperature(0.0)


def test_phi_driven_negative_is_an_error() -> None:
    # PHI(T) falls about 2 mV/K; a 0.1 V card PHI is gone well before 125 °C.
    with pytest.raises(ValueError, match="PHI at 125 °C"):
        Level1Model.from_card("nmos", {"phi": 0.1}).at_temperature(125.0)


# --- whole stages: the own solver against ngspice ---------------------------------------------

STAGES = {
    "divider_cs": """\
Greenhouse soil-moisture probe preamp: NMOS common source, divider bias
VDD vdd 0 5
R1 vdd g 300k
R2 g 0 120k
RD vdd d 8.2k
M1 d g 0 0 nch W=24u L=2u
.model nch nmos (vto=0.75 kp=110u lambda=0.02 gamma=0.4 phi=0.65)
""",
    "source_follower": """\
Greenhouse humidity-sensor buffer: NMOS source follower, bulk on ground (body effect)
VDD vdd 0 5
VIN in 0 2.8
RS out 0 12k
M1 vdd in out 0 nch W=40u L=2u
.model nch nmos (vto=0.7 kp=100u lambda=0.01 gamma=0.5 phi=0.7)
""",
    "pmos_cs": """\
Greenhouse vent-fan gate driver: PMOS common source, divider bias
VDD vdd 0 5
R1 vdd g 150k
R2 g 0 220k
RD d 0 6.8k
M1 d g vdd vdd pch W=60u L=2u
.model pch pmos (vto=-0.8 kp=40u lambda=0.03 gamma=0.45 phi=0.7)
""",
    "forward_bulk": """\
Greenhouse light-sensor stage: bulk pulled 0.45 V above the source, junctions forward-ish
VDD vdd 0 3.3
VG g 0 1.4
VBB bb 0 0.45
RB bb b 20k
RD vdd d 10k
M1 d g 0 b nch W=20u L=2u
.model nch nmos (vto=0.8 kp=90u lambda=0.02 gamma=0.6 phi=0.7 is=1e-12)
""",
}


@needs_ngspice
@pytest.mark.parametrize("celsius", TEMPERATURES)
@pytest.mark.parametrize("stage", STAGES)
def test_level1_stage_at_temperature_matches_ngspice(stage: str, celsius: float, tmp_path: Path) -> None:
    # reference: ngspice 39 run directly in batch mode on the same netlist (`.temp`, `.op`)
    path = tmp_path / f"{stage}.cir"
    path.write_text(STAGES[stage] + f".temp {celsius:g}\n.op\n.end\n")
    ngspice = ngspice_batch_op(path)
    solved = solve_operating_point(read_netlist(path))
    for node, volts in solved.node_voltages.items():
        if node != "0":
            assert volts == pytest.approx(ngspice[node], abs=VOLTS), f"V({node})"
    for name, amps in solved.branch_currents.items():
        assert amps == pytest.approx(ngspice[f"{name.lower()}#branch"], rel=RELATIVE, abs=1e-12), name
    assert not any("not modelled" in caveat for caveat in solved.caveats)


@needs_ngspice
def test_forward_bulk_stage_leans_on_the_junction_at_125_c(tmp_path: Path) -> None:
    # The junction current through RB must matter at 125 °C, or the stage above tests nothing of
    # the junction's temperature rules: IS grows by exp(EG(TNOM)/Vt(TNOM) − EG(T)/Vt(T)).
    path = tmp_path / "bulk.cir"
    path.write_text(STAGES["forward_bulk"] + ".temp 125\n.op\n.end\n")
    ngspice = ngspice_batch_op(path)
    junction_drop = 0.45 - ngspice["b"]
    assert junction_drop > 0.05  # more than 2.5 µA through 20 kΩ
    assert solve_operating_point(read_netlist(path)).voltage("b") == pytest.approx(ngspice["b"], abs=VOLTS)


# --- the hand column and `check` at 85 °C -------------------------------------------------------


def test_hand_column_uses_kp_and_vto_at_85_c_and_says_so() -> None:
    circuit = parse_netlist(STAGES["divider_cs"] + ".temp 85\n.op\n.end\n")
    solution = hand_analysis(circuit)
    kp, _, vto = mos1temp(110e-6, 0.75, 0.65, 0.4, 1, 85.0)
    assert kp == pytest.approx(110e-6 * (300.15 / 358.15) ** 1.5, rel=1e-12)
    # the closed form with the scaled card: VG from the divider, ID = (K/2)(VG − VTO(T))²
    k = kp * 24 / 2
    vg = 5 * 120 / 420
    current = 0.5 * k * (vg - vto) ** 2
    device = solution.devices["M1"]
    assert device.vth == pytest.approx(vto, abs=1e-12)
    assert device.id == pytest.approx(current, rel=1e-9)
    assert solution.node_voltages["d"] == pytest.approx(5 - current * 8.2e3, abs=1e-9)
    text = "\n".join(str(step) for step in solution.steps)
    assert "M1 at 85 °C" in text and "ngspice level-1 temperature rules, TNOM = 27 °C" in text
    assert "threshold from the card at 85 °C" in text
    assert any("85 °C" in item for item in solution.assumptions)


@needs_ngspice
def test_hand_threshold_at_85_c_is_ngspices_von(tmp_path: Path) -> None:
    # reference: ngspice 39 run directly: @m1[von] at vbs = 0 is its VTO at temperature
    card = {"vto": 0.75, "kp": 110e-6, "lambda": 0.02, "gamma": 0.4, "phi": 0.65}
    ngspice = ngspice_device("nmos", card, (2.0, 1.5, 0.0, 0.0), ".temp 85", tmp_path)
    solution = hand_analysis(parse_netlist(STAGES["divider_cs"] + ".temp 85\n.op\n.end\n"))
    assert solution.devices["M1"].vth == pytest.approx(ngspice["von"], abs=1e-9)


@pytest.fixture(scope="module")
def session(required_ngspice_session):
    return required_ngspice_session


@pytest.mark.parametrize("celsius", (-40.0, 85.0, 125.0))
@pytest.mark.parametrize("stage", STAGES)
def test_check_at_temperature_has_no_solver_differences(stage: str, celsius: float, session) -> None:
    # reference: ngspice 39 through its shared library (the `sim` column)
    circuit = parse_netlist(STAGES[stage] + f".temp {celsius:g}\n.op\n.end\n")
    result = check_circuit(circuit, session, tolerance=0.05)
    codes = {finding.code for finding in result.findings}
    assert not {"solver-differs", "solver-region-mismatch", "solver-failed"} & codes
    messages = [finding.message for finding in result.findings]
    assert any(message.startswith(f"solved at {celsius:g} °C") for message in messages)
    assert not any("not modelled" in message for message in messages)


def test_several_values_on_the_last_temp_card_leave_27_c_and_say_so() -> None:
    circuit = parse_netlist(STAGES["divider_cs"] + ".temp 60\n.temp 85 100\n.op\n.end\n")
    assert circuit.temperature() == 27.0
    solved = solve_operating_point(circuit)
    assert any("several temperatures" in caveat and "27 °C" in caveat for caveat in solved.caveats)


def test_27_c_circuit_gets_no_temperature_note() -> None:
    solved = solve_operating_point(parse_netlist(STAGES["divider_cs"] + ".temp 27\n.op\n.end\n"))
    assert solved.caveats == ()


# --- `sweep` at temperature ----------------------------------------------------------------------

SWEPT_CS = """\
Greenhouse vent-position sensor amplifier: NMOS common source, VIN on the gate
VDD vdd 0 5
VIN in 0 1.2
RD vdd d 15k
M1 d in 0 0 nch W=20u L=2u
.model nch nmos (vto=0.7 kp=100u lambda=0.02 gamma=0.4 phi=0.65)
"""


def test_sweep_at_85_c_takes_the_temperature_in_every_column(session) -> None:
    # reference: ngspice 39's own `.dc` through the worker (the sim column), and the mos1temp.c
    # formulas above for the hand edges
    circuit = parse_netlist(SWEPT_CS + ".temp 85\n.op\n.end\n")
    result = transfer_curve(circuit, "VIN", "d", sweep_values(0.0, 5.0, step=0.05), session)
    codes = {finding.code for finding in result.findings}
    assert not {"solver-differs", "solver-failed"} & codes
    level1, sim = result.curves["level1"], result.curves["sim"]
    assert max(abs(a - b) for a, b in zip(level1.output, sim.output)) <= VOLTS
    kp, _, vto = mos1temp(100e-6, 0.7, 0.65, 0.4, 1, 85.0)
    k, rd = kp * 10, 15e3
    vov = 2 * 5 / (1 + math.sqrt(1 + 2 * k * rd * 5))  # (K·RD/2)·VOV² + VOV − VDD = 0
    closed = result.closed_form["M1"]
    assert closed.cutoff_saturation == pytest.approx(vto, abs=1e-9)
    assert closed.saturation_triode == pytest.approx(vto + vov, abs=1e-9)
    hand = result.curves["hand"].edges["M1"]
    assert hand.cutoff_saturation == pytest.approx(vto, abs=1e-6)
    assert hand.saturation_triode == pytest.approx(vto + vov, abs=1e-6)
    assert any("M1 at 85 °C" in step.text for step in closed.steps)


DIODE_STAGE = """\
Greenhouse frost sensor: forward-biased diodes as thermometers, one MOSFET reading them
VDD vdd 0 5
R1 vdd a 47k
D1 a 0 dsense
R2 vdd k 100k
D2 k 0 dslow area=2
M1 d a 0 0 nch W=10u L=2u
RD vdd d 20k
.model dsense d (is=2e-14 n=1.05)
.model dslow d (is=1e-15 n=1.6 eg=1.2 xti=2.5 tnom=40)
.model nch nmos (vto=0.4 kp=100u lambda=0.02)
"""


@needs_ngspice
@pytest.mark.parametrize("celsius", TEMPERATURES)
def test_diodes_at_temperature_match_ngspice(celsius: float, tmp_path: Path) -> None:
    # reference: ngspice 39 run directly in batch mode (its diotemp.c scaling of IS and N·kT/q)
    path = tmp_path / "frost.cir"
    path.write_text(DIODE_STAGE + f".temp {celsius:g}\n.op\n.end\n")
    ngspice = ngspice_batch_op(path)
    solved = solve_operating_point(read_netlist(path))
    for node in ("a", "k", "d"):
        assert solved.voltage(node) == pytest.approx(ngspice[node], abs=VOLTS), f"V({node})"


# --- temperatures no device has a meaning at ------------------------------------------------------


@pytest.mark.parametrize(
    "card, column, fragment",
    [
        (".temp -300", 7, "`.temp` = -300 °C is at or below absolute zero"),
        (".options reltol=1e-3 temp=-280", 22, "`.options temp` = -280 °C"),
        (".options tnom=-273.15", 10, "`.options tnom` = -273.15 °C"),
    ],
)
def test_temperature_below_absolute_zero_is_a_located_error(card, column, fragment, tmp_path, capsys) -> None:
    path = tmp_path / "cold.cir"
    path.write_text(STAGES["divider_cs"] + card + "\n.op\n.end\n")
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert f"cold.cir:8:{column}: {fragment}" in err
    assert "Traceback" not in err


def test_card_tnom_below_absolute_zero_is_an_invalid_model() -> None:
    with pytest.raises(ValueError, match="TNOM = -300 °C"):
        Level1Model.from_card("nmos", {"tnom": -300.0}).at_temperature(27.0)
