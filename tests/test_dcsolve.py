"""The project's own DC solver, checked against ngspice itself and against closed forms.

ngspice cases parse a netlist, emit it with an `.op` (or `.dc`) card, run it through one
reused ngspice worker, and compare every node voltage within 1 mV, every MOSFET drain
current within 0.2 % (+1 pA for cutoff, where only junction leakage and GMIN flow) and every
voltage-source branch current alike. ngspice stops at RELTOL = 1e-3, so agreement is
meaningful to a few parts in 10⁴; our solver iterates on to 1e-9. Closed-form cases need no
simulator and always run.
"""

from __future__ import annotations

import dataclasses
import math
import time
from pathlib import Path

import numpy as np
import pytest

from bridge.analysis import dcsolve
from bridge.analysis.compiled_network import HandNetwork
from bridge.analysis.dcsolve import (
    GMIN_STEPPING,
    NEWTON,
    SOURCE_STEPPING,
    InvalidElement,
    NoConvergence,
    OperatingPoint,
    SingularCircuit,
    UnsupportedElement,
    level1_model,
    solve_dc_sweep,
    solve_operating_point,
)
from bridge.analysis.linear import solve_dense
from bridge.netlist import parse_netlist, read_netlist
from bridge.netlist.circuit import Analysis, Circuit, DcSweep, Origin
from bridge.netlist.emit import emit
from bridge.sim.client import NgspiceSession, SimResult, SimulationFailed, ngspice_available

BUNDLED = sorted((Path(__file__).resolve().parents[1] / "netlists").glob("*.cir"))
LIBRARY_FOUND, LIBRARY_HINT = ngspice_available()
needs_ngspice = pytest.mark.skipif(not LIBRARY_FOUND, reason=LIBRARY_HINT)

VOLTAGE_ABS = 1e-3  # V
CURRENT_REL = 2e-3
CURRENT_ABS = 1e-12  # A: cutoff leaves picoamps of junction leakage and GMIN current
ORIGIN = Origin("<test_dcsolve>", 1)

NCH = ".model nch nmos (vto=0.7 kp=120u lambda=0.02 gamma=0.4 phi=0.65)\n"
PCH = ".model pch pmos (vto=-0.8 kp=45u lambda=0.03 gamma=0.5 phi=0.7)\n"

# Netlists written for these tests: each pins one behaviour of the solver.
INLINE = {
    "nmos_triode": """nmos driven into triode by a large drain resistor
VDD vdd 0 5
VG g 0 3
RD vdd d 47k
M1 d g 0 0 nch W=20u L=2u
"""
    + NCH,
    "nmos_cutoff_leaves_junction_leakage": """nmos held in cutoff by a low gate divider
VDD vdd 0 5
R1 vdd g 1meg
R2 g 0 100k
RD vdd d 10k
M1 d g 0 0 nch W=20u L=2u
"""
    + NCH,
    "body_effect_with_source_above_ground": """source resistor lifts the source: vsb > 0
VDD vdd 0 5
VG g 0 2.5
RD vdd d 4.7k
RS s 0 4.7k
M1 d g s 0 nb W=20u L=2u
.model nb nmos (vto=0.7 kp=120u gamma=0.6 phi=0.7)
""",
    "large_lambda": """channel-length modulation dominates
VDD vdd 0 5
VG g 0 1.2
RD vdd d 10k
M1 d g 0 0 nl W=20u L=2u
.model nl nmos (vto=0.7 kp=120u lambda=0.2)
""",
    "lateral_diffusion_shortens_channel": """LD = 0.4 um on a 2 um channel
VDD vdd 0 5
VG g 0 1.3
RD vdd d 10k
M1 d g 0 0 nld W=10u L=2u
.model nld nmos (vto=0.7 kp=120u lambda=0.02 ld=0.4u)
""",
    "kp_from_uo_and_tox": """KP derived from UO and TOX
VDD vdd 0 5
VG g 0 1.5
RD vdd d 10k
M1 d g 0 0 nox W=10u L=2u
.model nox nmos (vto=0.7 uo=500 tox=25n lambda=0.01)
""",
    "multiplier_m4": """four devices in parallel (M = 4)
VDD vdd 0 5
VG g 0 1.1
RD vdd d 5k
M1 d g 0 0 nch W=10u L=2u M=4
"""
    + NCH,
    "pmos_split_supplies": """pmos common source between +5 V and -5 V, gate at ground
VPOS vpos 0 5
VNEG vneg 0 -5
RS vpos s 10k
RD d vneg 10k
M1 d 0 s vpos pch W=30u L=2u
"""
    + PCH,
    "diode_connected_pmos": """diode-connected pmos fed from a resistor to ground
VDD vdd 0 3.3
M1 d d vdd vdd pch W=20u L=2u
RB d 0 22k
"""
    + PCH,
    "source_follower_on_current_sink": """nmos follower with body effect to a negative supply
VDD vdd 0 5
VSS vss 0 -5
VIN g 0 1
M1 vdd g out vss nch W=30u L=2u
IB out vss 150u
"""
    + NCH,
    "current_mirror": """two-transistor mirror, 1:2
VDD vdd 0 5
IREF vdd ref 50u
M1 ref ref 0 0 nch W=10u L=2u
M2 out ref 0 0 nch W=20u L=2u
RL vdd out 20k
"""
    + NCH,
    "diode_string": """three diodes in series: area, emission coefficient
VDD vdd 0 5
R1 vdd a 2.2k
D1 a b dx
D2 b c dx 2
D3 c 0 dy
.model dx d (is=1e-14 n=1)
.model dy d (is=5e-15 n=1.8)
""",
    "controlled_sources_e_g_f_h": """E, G, F and H sources around one nmos
VIN in 0 1.2
E1 e 0 in 0 2
RE e 0 10k
VSENSE e es 0
RES es 0 4.8k
F1 0 f VSENSE 2
RF f 0 1k
H1 h 0 VSENSE 2k
RH h 0 1k
G1 0 gd in 0 0.5m
RG gd 0 5k
VDD vdd 0 5
RD vdd dd 10k
M1 dd gd 0 0 nch W=10u L=2u
"""
    + NCH,
    "high_gain_feedback_stage": """ideal amplifier (gain 1e6) closing a loop around a CS stage
VDD vdd 0 5
VREF ref 0 2
E1 g 0 d ref 1e6
RD vdd d 10k
M1 d g 0 0 nch W=10u L=1u
"""
    + NCH,
    "bulk_forward_biased_by_current_js_times_area": """1 uA pushed into the bulk: the source junction
VDD vdd 0 5
VG g 0 1.5
RD vdd d 10k
IB 0 b 1u
M1 d g 0 b nj W=20u L=2u AD=40p AS=200p
.model nj nmos (vto=0.7 kp=120u gamma=0.4 phi=0.65 js=1e-3)
""",
    "floating_bulk_settles_between_its_junctions": """bulk tied to nothing but its own junctions
VDD vdd 0 5
VG g 0 1.5
RD vdd d 10k
RS s 0 1k
M1 d g s b nch W=20u L=2u
"""
    + NCH,
    "pmos_drain_above_source_swaps_ends": """pmos with its drain pulled above its source
VDD vdd 0 5
VS s 0 2
VG g 0 0
RD vdd d 10k
M1 d g s vdd pch W=20u L=2u
"""
    + PCH,
}

# `.options gmin=0` leaves the follower's output held by nothing at the junction start (the
# device off, its reverse junctions without GMIN): the matrix is singular until gmin stepping.
GMIN_ZERO_FOLLOWER = (Path(__file__).resolve().parents[1] / "netlists" / "source_follower.cir").read_text()
GMIN_ZERO_FOLLOWER = GMIN_ZERO_FOLLOWER.replace(".op", ".options gmin=0\n.op")

FLOATING_GATE = (
    """gate reached only through a capacitor
VDD vdd 0 5
RD vdd d 10k
VIN in 0 1
CIN in g 1n
M1 d g 0 0 nch W=10u L=2u
"""
    + NCH
)

# 1000 V straight across a diode: the current would be exp(1000/Vt)·IS, no finite answer.
DIODE_ACROSS_SOURCE = """1000 V across a bare diode
V1 a 0 1000
D1 a 0 dd
.model dd d
"""

CS_SWEEP = (
    """common source swept through cutoff, saturation and triode
VDD vdd 0 5
VG g 0 0
RD vdd d 10k
M1 d g 0 0 nch W=20u L=2u
"""
    + NCH
)


def circuit_of(text: str, name: str = "inline.cir") -> Circuit:
    return parse_netlist(text, name)


@pytest.fixture(scope="module")
def ngspice(required_ngspice_session):
    return required_ngspice_session


def run_op(session: NgspiceSession, circuit: Circuit) -> SimResult:
    mosfets = [e.name.lower() for e in circuit.elements_of("mosfet")]
    deck = emit(circuit, analyses=[Analysis("op", ORIGIN)], saves=("all", *(f"@{m}[id]" for m in mosfets)))
    return session.run(deck)


def assert_agrees(ours: OperatingPoint, reference: SimResult, circuit: Circuit) -> None:
    """Every node voltage within 1 mV; every MOSFET id and source current within 0.2 %."""
    for node in circuit.nodes():
        assert ours.voltage(node) == pytest.approx(reference.scalar(f"v({node})"), abs=VOLTAGE_ABS), node
    for mosfet in circuit.elements_of("mosfet"):
        expected = reference.scalar(f"@{mosfet.name.lower()}[id]")
        got = ours.drain_terminal_current(mosfet.name)
        assert got == pytest.approx(expected, rel=CURRENT_REL, abs=CURRENT_ABS), mosfet.name
    for name, current in ours.branch_currents.items():
        if circuit.element(name).kind == "vsource":
            expected = reference.scalar(f"i({name.lower()})")
            assert current == pytest.approx(expected, rel=CURRENT_REL, abs=CURRENT_ABS), name


# --- against ngspice -------------------------------------------------------------------------


@needs_ngspice
@pytest.mark.parametrize("path", BUNDLED, ids=[p.stem for p in BUNDLED])
def test_bundled_netlist_matches_ngspice(path: Path, ngspice: NgspiceSession) -> None:
    # reference: ngspice 39 through its shared library (bridge.sim)
    circuit = read_netlist(path)
    ours = solve_operating_point(circuit)
    assert ours.method == NEWTON
    assert_agrees(ours, run_op(ngspice, circuit), circuit)


@needs_ngspice
@pytest.mark.parametrize("name", list(INLINE))
def test_written_netlist_matches_ngspice(name: str, ngspice: NgspiceSession) -> None:
    # reference: ngspice 39 through its shared library (bridge.sim)
    circuit = circuit_of(INLINE[name], f"{name}.cir")
    ours = solve_operating_point(circuit)
    assert_agrees(ours, run_op(ngspice, circuit), circuit)


@pytest.mark.parametrize(
    "name, region",
    [
        ("nmos_triode", "triode"),
        ("nmos_cutoff_leaves_junction_leakage", "cutoff"),
        ("body_effect_with_source_above_ground", "saturation"),
        ("large_lambda", "saturation"),
        ("multiplier_m4", "saturation"),
        ("pmos_split_supplies", "saturation"),
        ("diode_connected_pmos", "saturation"),
        ("current_mirror", "saturation"),
    ],
)
def test_written_netlists_land_in_the_region_they_are_meant_to(name: str, region: str) -> None:
    ours = solve_operating_point(circuit_of(INLINE[name]))
    assert {point.region for point in ours.devices.values()} == {region}


def test_pmos_quantities_are_polarity_normalised() -> None:
    ours = solve_operating_point(circuit_of(INLINE["pmos_split_supplies"]))
    point = ours.device("m1")
    assert point.id > 0 and point.vgs > 0 and point.vds > 0
    assert point.drain_current == pytest.approx(-point.id)  # current leaves a PMOS drain


def test_pmos_with_reversed_drain_runs_swapped() -> None:
    point = solve_operating_point(circuit_of(INLINE["pmos_drain_above_source_swaps_ends"])).device("M1")
    assert point.swapped and point.id < 0


def test_cutoff_drain_current_is_only_junction_leakage_and_gmin() -> None:
    ours = solve_operating_point(circuit_of(INLINE["nmos_cutoff_leaves_junction_leakage"]))
    assert ours.device("m1").id == 0.0
    # vbd ≈ −5 V: ngspice's reverse junction carries −IS + GMIN·vbd.
    leakage = ours.drain_terminal_current("m1")
    assert leakage == pytest.approx(1e-14 + 1e-12 * ours.voltage("d"), rel=1e-6)


@needs_ngspice
def test_singular_junction_start_is_rescued_by_gmin_stepping_as_in_ngspice(ngspice: NgspiceSession) -> None:
    # reference: ngspice 39 through its shared library (bridge.sim)
    circuit = circuit_of(GMIN_ZERO_FOLLOWER, "gmin_zero_follower.cir")
    with pytest.raises(NoConvergence, match="singular"):
        solve_operating_point(circuit, methods=(NEWTON,))
    ours = solve_operating_point(circuit)
    assert ours.method == GMIN_STEPPING
    reference = run_op(ngspice, circuit)
    assert any("gmin stepping completed" in message.lower() for message in reference.messages)
    assert_agrees(ours, reference, circuit)


@needs_ngspice
@pytest.mark.parametrize("method", [GMIN_STEPPING, SOURCE_STEPPING])
@pytest.mark.parametrize("stem", ["cs_degenerated", "pmos_cs", "split_supply"])
def test_stepping_methods_reach_ngspice_answer(stem: str, method: str, ngspice: NgspiceSession) -> None:
    # reference: ngspice 39 through its shared library (bridge.sim)
    circuit = read_netlist(next(p for p in BUNDLED if p.stem == stem))
    ours = solve_operating_point(circuit, methods=(method,))
    assert ours.method == method
    assert ours.iterations > 1
    assert_agrees(ours, run_op(ngspice, circuit), circuit)


@needs_ngspice
def test_floating_gate_is_reported_singular_where_ngspice_warns(ngspice: NgspiceSession) -> None:
    # reference: ngspice 39 through its shared library (bridge.sim). ngspice finds the matrix
    # singular too, fails every stepping method and falls back to a transient op whose answer
    # depends on the capacitor: it warns, we refuse.
    circuit = circuit_of(FLOATING_GATE, "floating_gate.cir")
    with pytest.raises(SingularCircuit) as raised:
        solve_operating_point(circuit)
    assert raised.value.nodes == ("g",)
    assert "no DC path to ground" in str(raised.value)
    messages = " ".join(run_op(ngspice, circuit).messages).lower()
    assert "singular matrix" in messages and "check node g" in messages


@needs_ngspice
def test_unsolvable_circuit_fails_in_bounded_time_like_ngspice(ngspice: NgspiceSession) -> None:
    # reference: ngspice 39 through its shared library (bridge.sim)
    circuit = circuit_of(DIODE_ACROSS_SOURCE)
    with pytest.raises(SimulationFailed):
        run_op(ngspice, circuit)
    started = time.monotonic()
    with pytest.raises(NoConvergence) as raised:
        solve_operating_point(circuit)
    assert time.monotonic() - started < 5.0
    assert raised.value.methods == (NEWTON, GMIN_STEPPING, SOURCE_STEPPING)
    assert raised.value.iterations > 0


@needs_ngspice
def test_dc_sweep_of_common_source_stage_matches_ngspice_at_every_point(ngspice: NgspiceSession) -> None:
    # reference: ngspice 39 through its shared library (bridge.sim)
    circuit = circuit_of(CS_SWEEP, "cs_sweep.cir")
    sweep = Analysis("dc", ORIGIN, (DcSweep("VG", 0.0, 3.0, 0.05),))
    reference = ngspice.run(emit(circuit, analyses=[sweep], saves=("all", "@m1[id]")))
    gate = reference["v-sweep"]
    assert len(gate) == 61
    points = solve_dc_sweep(circuit, "VG", list(gate))
    drain = np.array([point.voltage("d") for point in points])
    current = np.array([point.drain_terminal_current("M1") for point in points])
    np.testing.assert_allclose(drain, reference["v(d)"], rtol=0, atol=VOLTAGE_ABS)
    np.testing.assert_allclose(current, reference["@m1[id]"], rtol=CURRENT_REL, atol=CURRENT_ABS)
    assert {point.device("m1").region for point in points} == {"cutoff", "saturation", "triode"}


@needs_ngspice
def test_supply_sweep_of_bundled_stage_matches_ngspice(ngspice: NgspiceSession) -> None:
    # reference: ngspice 39 through its shared library (bridge.sim)
    circuit = read_netlist(next(p for p in BUNDLED if p.stem == "cs_divider"))
    sweep = Analysis("dc", ORIGIN, (DcSweep("VDD", 0.0, 5.0, 0.1),))
    reference = ngspice.run(emit(circuit, analyses=[sweep], saves=("all", "@m1[id]")))
    points = solve_dc_sweep(circuit, "VDD", list(reference["v-sweep"]))
    for node in circuit.nodes():
        ours = np.array([point.voltage(node) for point in points])
        np.testing.assert_allclose(ours, reference[f"v({node})"], rtol=0, atol=VOLTAGE_ABS, err_msg=node)


# --- closed forms (always on) ----------------------------------------------------------------


def test_resistor_divider_is_exact() -> None:
    ours = solve_operating_point(circuit_of("divider\nV1 top 0 9\nR1 top mid 2k\nR2 mid 0 1k\n"))
    assert ours.voltage("mid") == pytest.approx(3.0, rel=1e-12)
    assert ours.node_voltages["0"] == 0.0
    # SPICE sign: the source delivers 3 mA, so the current into its n+ is −3 mA.
    assert ours.current("v1") == pytest.approx(-3e-3, rel=1e-12)
    assert ours.method == NEWTON and ours.devices == {}


def test_current_source_pushes_current_from_n_plus_through_itself_to_n_minus() -> None:
    ours = solve_operating_point(circuit_of("isrc\nI1 0 a 1m\nR1 a 0 2k\n"))
    assert ours.voltage("a") == pytest.approx(2.0, rel=1e-12)


def test_linear_controlled_sources_follow_their_definitions() -> None:
    ours = solve_operating_point(circuit_of(INLINE["controlled_sources_e_g_f_h"]))
    assert ours.voltage("e") == pytest.approx(2.4, rel=1e-9)  # E: 2 × 1.2 V
    assert ours.current("VSENSE") == pytest.approx(0.5e-3, rel=1e-9)  # 2.4 V / 4.8 kΩ
    assert ours.voltage("f") == pytest.approx(1.0, rel=1e-9)  # F: 2 × 0.5 mA into f, 1 kΩ
    assert ours.voltage("h") == pytest.approx(1.0, rel=1e-9)  # H: 2 kΩ × 0.5 mA
    assert ours.voltage("gd") == pytest.approx(3.0, rel=1e-9)  # G: 0.5 mS × 1.2 V into 5 kΩ


def degenerated_stage(vto: float = 0.7, kp: float = 100e-6) -> str:
    return f"""degenerated nmos, square law only
VDD vdd 0 5
VG g 0 2
RD vdd d 5k
RS s 0 2k
M1 d g s 0 n0 W=20u L=2u
.model n0 nmos (vto={vto} kp={kp})
"""


def test_resistor_loaded_nmos_in_saturation_solves_the_square_law_quadratic() -> None:
    # textbook square law, from memory: Id = β/2·(VG − VT − Id·RS)², β = KP·W/L, λ = γ = 0.
    beta, vg, vt, rs, rd = 100e-6 * 20 / 2, 2.0, 0.7, 2e3, 5e3
    overdrive = (-1 + math.sqrt(1 + 2 * beta * rs * (vg - vt))) / (beta * rs)
    drain_current = beta / 2 * overdrive**2
    ours = solve_operating_point(circuit_of(degenerated_stage()))
    point = ours.device("M1")
    assert point.region == "saturation"
    assert point.id == pytest.approx(drain_current, rel=1e-9)
    assert ours.voltage("s") == pytest.approx(drain_current * rs, rel=1e-9)
    # The drain resistor also carries the bulk–drain junction's picoamps (−IS + GMIN·vbd).
    assert ours.voltage("d") == pytest.approx(5 - drain_current * rd, abs=1e-7)
    assert ours.voltage("d") == pytest.approx(5 - ours.drain_terminal_current("M1") * rd, rel=1e-12)


def square_law_only(card):
    return dataclasses.replace(level1_model(card), lambda_=0.0, gamma=0.0)


def test_model_override_switches_lambda_and_gamma_off() -> None:
    # textbook square law, from memory: Id = β/2·vov² with VG from the divider 5·120k/450k.
    circuit = read_netlist(next(p for p in BUNDLED if p.stem == "cs_divider"))
    full = solve_operating_point(circuit)
    plain = solve_operating_point(circuit, model_override=square_law_only)
    beta, vg = 120e-6 * 20 / 2, 5 * 120 / 450
    expected = beta / 2 * (vg - 0.7) ** 2
    assert plain.device("m1").id == pytest.approx(expected, rel=1e-9)
    assert full.device("m1").id > expected * 1.02  # λ = 0.02 at vds ≈ 2.5 V adds ~5 %


def test_source_values_override_named_sources_case_insensitively() -> None:
    circuit = circuit_of("divider\nV1 top 0 9\nR1 top mid 2k\nR2 mid 0 1k\n")
    assert solve_operating_point(circuit, source_values={"v1": 3.0}).voltage("mid") == pytest.approx(1.0)
    with pytest.raises(ValueError, match="R1"):
        solve_operating_point(circuit, source_values={"R1": 1.0})


def test_initial_guess_at_the_solution_converges_at_once() -> None:
    circuit = read_netlist(next(p for p in BUNDLED if p.stem == "cs_degenerated"))
    cold = solve_operating_point(circuit)
    warm = solve_operating_point(circuit, initial=cold.node_voltages)
    assert warm.iterations <= 2 < cold.iterations
    for node, voltage in cold.node_voltages.items():
        assert warm.node_voltages[node] == pytest.approx(voltage, rel=1e-9, abs=1e-12)
    with pytest.raises(ValueError, match="nowhere"):
        solve_operating_point(circuit, initial={"nowhere": 1.0})


def test_sweep_continues_from_the_previous_point() -> None:
    circuit = circuit_of(CS_SWEEP)
    values = np.linspace(0.0, 3.0, 31)
    points = solve_dc_sweep(circuit, "vg", values)
    assert all(point.method == NEWTON for point in points)
    assert max(point.iterations for point in points[1:]) <= 8
    for value, point in zip(values[::10], points[::10], strict=True):
        alone = solve_operating_point(circuit, source_values={"VG": value})
        assert point.voltage("d") == pytest.approx(alone.voltage("d"), rel=1e-9, abs=1e-12)


def test_diode_follows_shockley_with_gmin() -> None:
    # Shockley: I = IS·(exp(V/(N·Vt)) − 1), with ngspice's kT/q at 27 °C and GMIN in parallel.
    ours = solve_operating_point(circuit_of("diode\nV1 a 0 0.6\nD1 a 0 dd 3\n.model dd d is=2e-14 n=1.2\n"))
    thermal = 1.38064852e-23 * 300.15 / 1.6021766208e-19
    expected = 3 * 2e-14 * (math.exp(0.6 / (1.2 * thermal)) - 1) + 1e-12 * 0.6
    assert ours.diode_currents["D1"] == pytest.approx(expected, rel=1e-9)
    assert ours.current("V1") == pytest.approx(-expected, rel=1e-9)


def test_unmodelled_diode_parameters_are_listed_as_caveats() -> None:
    circuit = circuit_of("diode rs\nV1 a 0 5\nR1 a b 1k\nD1 b 0 dd\n.model dd d rs=10 bv=50\n")
    ours = solve_operating_point(circuit)
    assert any("RS" in caveat for caveat in ours.caveats)
    assert any("BV" in caveat for caveat in ours.caveats)


def test_bjt_is_refused_with_a_clear_error() -> None:
    circuit = circuit_of("bjt\nV1 c 0 5\nQ1 c b 0 qn\nR1 c b 100k\n.model qn npn (bf=100)\n")
    with pytest.raises(UnsupportedElement, match="Q1: bipolar"):
        solve_operating_point(circuit)


def test_non_level1_mosfet_is_refused() -> None:
    circuit = circuit_of("level 3\nV1 d 0 5\nM1 d d 0 0 n3\n.model n3 nmos (level=3 vto=0.7)\n")
    with pytest.raises(UnsupportedElement, match="LEVEL=3"):
        solve_operating_point(circuit)


def test_non_positive_effective_length_is_refused() -> None:
    circuit = circuit_of("short\nV1 d 0 5\nM1 d d 0 0 nl W=10u L=1u\n.model nl nmos (ld=0.6u)\n")
    with pytest.raises(InvalidElement, match="M1"):
        solve_operating_point(circuit)


def test_loop_of_voltage_sources_is_singular_and_named() -> None:
    circuit = circuit_of("loop\nV1 a 0 1\nV2 a 0 2\nR1 a 0 1k\n")
    with pytest.raises(SingularCircuit) as raised:
        solve_operating_point(circuit)
    assert set(raised.value.elements) == {"V1", "V2"}


def test_contradictory_controlled_source_fails_quickly_with_the_methods_tried() -> None:
    # E1 demands V(out) = V(out) − V(in), i.e. V(in) = 0, against V1: no solution exists.
    circuit = circuit_of("contradiction\nV1 in 0 1\nE1 out 0 out in 1\nR1 out 0 1k\n")
    started = time.monotonic()
    with pytest.raises(NoConvergence) as raised:
        solve_operating_point(circuit)
    assert time.monotonic() - started < 5.0
    assert raised.value.methods == (NEWTON, GMIN_STEPPING, SOURCE_STEPPING)


def test_inductor_is_a_short_with_its_current_reported() -> None:
    ours = solve_operating_point(circuit_of("inductor\nV1 a 0 2\nL1 a b 1m\nR1 b 0 1k\nC1 b 0 1u\n"))
    assert ours.voltage("b") == pytest.approx(2.0)
    assert ours.current("L1") == pytest.approx(2e-3)


# --- the reduced Newton system ----------------------------------------------------------------


@pytest.mark.parametrize("size", range(1, 14))
def test_plain_elimination_agrees_with_lapack(size: int) -> None:
    # reference: numpy's LAPACK solve (gesv); sizes past the plain-Python limit go to it directly
    rng = np.random.default_rng(size)
    for _ in range(20):
        matrix = rng.normal(size=(size, size)) + size * np.eye(size) * rng.choice([-1.0, 1.0])
        rhs = rng.normal(size=size)
        ours = solve_dense(matrix.tolist(), rhs.tolist())
        assert ours == pytest.approx(np.linalg.solve(matrix, rhs).tolist(), rel=1e-10, abs=1e-12)
    # a row swap is needed: the first pivot is zero
    swapped = np.roll(np.eye(size), 1, axis=0) * 2.0
    assert solve_dense(swapped.tolist(), list(range(size))) == pytest.approx(
        np.linalg.solve(swapped, np.arange(size, dtype=float)).tolist()
    )


@pytest.mark.parametrize("size", [1, 2, 3, 12])
def test_plain_elimination_reports_a_singular_matrix(size: int) -> None:
    matrix = [[1.0] * size for _ in range(size)] if size > 1 else [[0.0]]
    assert solve_dense(matrix, [1.0] * size) is None


def network_of(text: str) -> dcsolve._Network:
    return dcsolve._build_network(circuit_of(text), level1_model)


def kept_names(net: dcsolve._Network) -> set[str]:
    names = ("0", *net.nodes, *(f"i({b.lower()})" for b in net.branch_names))
    return {names[k] for k in net.reduction(0.0).kept}


DIVIDER_FED = (
    """common source fed through a gate divider and a source resistor
VDD vdd 0 5
VIN in 0 2.4
R1 in g 100k
R2 g 0 100k
RD vdd d 10k
RS s 0 1k
M1 d g s 0 nch W=20u L=2u
"""
    + NCH
)


def test_reduction_keeps_only_the_device_terminals_behind_a_divider() -> None:
    # VDD, VIN, the divider and the resistors are linear: Newton is left drain, gate and source.
    assert kept_names(network_of(DIVIDER_FED)) == {"d", "g", "s"}


@needs_ngspice
def test_divider_fed_sweep_on_the_reduced_system_matches_ngspice_op_at_each_point(ngspice: NgspiceSession) -> None:
    # reference: ngspice 39 (.op at each swept value) through its shared library (bridge.sim)
    circuit = circuit_of(DIVIDER_FED, "divider_fed.cir")
    values = np.linspace(0.0, 5.0, 26)
    ours = solve_dc_sweep(circuit, "VIN", values)
    for value, point in zip(values, ours, strict=True):
        sim = run_op(ngspice, circuit_of(DIVIDER_FED.replace("VIN in 0 2.4", f"VIN in 0 {float(value)!r}")))
        assert_agrees(point, sim, circuit)


def test_reduction_keeps_the_branch_of_a_source_straight_across_device_terminals() -> None:
    # VG from gate to ground: its branch row has no entry outside the kept gate, so the block
    # to eliminate would be singular; the branch currents are kept instead.
    net = network_of(INLINE["nmos_triode"])
    assert {"d", "g", "i(vg)"} <= kept_names(net)


@pytest.mark.parametrize("name", list(INLINE))
def test_reduced_and_full_systems_give_the_same_operating_point(
    name: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    circuit = circuit_of(INLINE[name], f"{name}.cir")
    reduced = solve_operating_point(circuit)
    monkeypatch.setattr(dcsolve._Network, "reduction", lambda net, g: dcsolve._reduce(net, g, eliminate=False))
    full = solve_operating_point(circuit)
    assert full.method == reduced.method
    for node, voltage in full.node_voltages.items():
        assert reduced.node_voltages[node] == pytest.approx(voltage, rel=1e-8, abs=1e-9), node
    for element, current in full.branch_currents.items():
        assert reduced.branch_currents[element] == pytest.approx(current, rel=1e-7, abs=1e-15), element
    for device, point in full.devices.items():
        assert reduced.devices[device].id == pytest.approx(point.id, rel=1e-7, abs=1e-15), device


def test_as_array_is_np_array() -> None:
    from bridge.analysis.linear import as_array

    matrix = [[1.0, -0.0, math.inf], [2.5, math.nan, -1e-320], [3.0, 4.0, 5.0]]
    ours, reference = as_array(matrix), np.array(matrix)
    assert ours.dtype == reference.dtype and ours.shape == reference.shape and ours.flags.c_contiguous
    assert ours.tobytes() == reference.tobytes()


def test_a_small_system_is_stamped_into_the_array_np_array_makes() -> None:
    # reference: np.array of the stamped rows, as `stamped` made it before (as_array since)
    from bridge.analysis.linear import stamp_rows, stamped

    for size in (1, 2, 5, 9):
        rows = stamp_rows(size)
        for k in range(size):
            rows[k][k] += 1.0 / (k + 3)
            rows[k][(k + 1) % size] -= 2.5e-320 if k % 2 else 1e5
        ours, reference = stamped(rows, size), np.array(rows, dtype=float).reshape(size, size)
        assert ours.dtype == reference.dtype and ours.shape == reference.shape and ours.flags.c_contiguous
        assert ours.tobytes() == reference.tobytes()


@pytest.mark.parametrize("size", range(5, 13))
def test_lapack_path_is_numpy_solve_to_the_bit(size: int) -> None:
    # reference: np.linalg.solve itself; past the plain limit solve_dense calls the same gufunc
    import warnings

    rng = np.random.default_rng(100 + size)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # neither path may warn, singular or not
        for _ in range(20):
            matrix = rng.normal(size=(size, size)) * 10.0 ** rng.integers(-12, 4, size=(size, 1))
            rhs = rng.normal(size=size)
            assert solve_dense(matrix.tolist(), rhs.tolist()) == np.linalg.solve(matrix, rhs).tolist()
        exact = np.ones((size, size))  # LAPACK meets an exactly zero pivot
        with pytest.raises(np.linalg.LinAlgError):
            np.linalg.solve(exact, np.ones(size))
        assert solve_dense(exact.tolist(), [1.0] * size) is None
        with_nan = np.eye(size)
        with_nan[0, 0] = math.nan  # not singular for LAPACK: numpy answers NaN, so do we
        ours = solve_dense(with_nan.tolist(), [1.0] * size)
        assert ours is not None and math.isnan(ours[0]) and ours[1:] == [1.0] * (size - 1)


# An aquarium pump driver: a cascode of two NMOS with a body-biased upper device, the hand
# analysis's numerical path (no closed form).
AQUARIUM = """aquarium pump driver, cascode
VDD vdd 0 12
VB1 g1 0 1.4
VB2 g2 0 4
RL vdd d 4.7k
M2 d g2 m 0 pump w=80u l=2u
M1 m g1 0 0 pump w=80u l=2u
.model pump nmos (vto=0.8 kp=60u gamma=0.6 phi=0.7 lambda=0.04)
"""


def _hand_devices(circuit: Circuit, effects: frozenset[str]):
    from bridge.analysis.hand import _dc_circuit

    dc = _dc_circuit(circuit, effects)
    return {t.name: t.hand_device() for t in dc.transistors}, dc.merged


def test_compiled_network_with_other_devices_is_a_network_built_with_them() -> None:
    # reference: a HandNetwork compiled afresh for the devices of each model
    circuit = parse_netlist(AQUARIUM, "aquarium.cir")
    plain, merged = _hand_devices(circuit, frozenset())
    network = HandNetwork(circuit, plain, merged)
    first = network.solve()
    for effects in ({"lambda"}, {"gamma"}, {"lambda", "gamma"}):
        devices, _ = _hand_devices(circuit, frozenset(effects))
        for start in (None, first.node_voltages):
            ours = network.solve(devices, start)
            fresh = HandNetwork(circuit, devices, merged).solve(None, start)
            assert ours.node_voltages == fresh.node_voltages and ours.iterations == fresh.iterations, effects
            assert ours.devices == fresh.devices
            assert ours.node_voltages != first.node_voltages
    assert network.solve().node_voltages == first.node_voltages  # the compiled network untouched


def test_a_reduction_that_eliminates_nothing_is_the_system_as_it_is() -> None:
    # reference: the network's own MNA matrix and source columns, ground's row and column cut
    from bridge.analysis.reduction import reduce_network

    for text in (AQUARIUM, DIVIDER_FED):
        circuit = parse_netlist(text, "stage.cir")
        devices, merged = _hand_devices(circuit, frozenset())
        net = HandNetwork(circuit, devices, merged)._net
        assert not net.eliminate
        size, nodes = net.size, len(net.nodes)
        for gmin in (0.0, 1e-3):
            reduced = reduce_network(net, gmin, eliminate=False)
            matrix = net.linear[1:, 1:].copy()
            matrix[range(nodes), range(nodes)] += gmin
            assert reduced.kept == tuple(range(1, size)) and reduced.position == (-1, *range(size - 1))
            assert reduced.matrix == tuple(map(tuple, matrix.tolist()))
            assert reduced.source_map.tobytes() == net.source_columns[1:].tobytes()
            assert reduced.eliminated == () and reduced.recover_kept == ()
            assert reduced.recover_sources.shape == (0, net.source_columns.shape[1])
        assert net.plain_reduction.matrix == reduce_network(net, 0.0, eliminate=False).matrix


# A bicycle dynamo light: a PMOS high-side switch whose drain feeds the lamp through a choke
# (a short at DC, merged by the hand model), its gate held by a divider, the bulk on the rail.
DYNAMO_LIGHT = """bicycle dynamo light, PMOS high-side switch
VDYN rail 0 6
R1 rail g 220k
R2 g 0 330k
M1 d g rail rail lampfet w=40u l=2u
LCH d lamp 100u
RLAMP lamp 0 1.2k
.model lampfet pmos (vto=-0.9 kp=25u gamma=0.5 phi=0.65 lambda=0.05)
"""


@pytest.mark.parametrize("text", [AQUARIUM, DYNAMO_LIGHT])
def test_compiled_network_points_are_its_answer_read_in_part(text: str) -> None:
    # reference: HandNetwork.solve's whole answer and the square law evaluated afresh at its voltages
    from bridge.analysis.hand import _dc_circuit
    from bridge.devices.mos1.load import evaluate

    circuit = parse_netlist(text, "stage.cir")
    plain_devices, merged = _hand_devices(circuit, frozenset())
    network = HandNetwork(circuit, plain_devices, merged)
    first = network.solve()
    for effects in ((), ("lambda",), ("gamma",), ("lambda", "gamma")):
        dc = _dc_circuit(circuit, frozenset(effects))
        devices = {t.name: t.hand_device() for t in dc.transistors}
        for start in (None, {node: first.node_voltages[node] for node in network.nodes}):
            whole = network.solve(devices, start)
            voltages, points, iterations = network.solve_points(devices, start)
            assert voltages == {"0": 0.0, **{node: whole.node_voltages[node] for node in network.nodes}}
            assert points == whole.devices and iterations == whole.iterations
            for t in dc.transistors:
                at = [voltages[node] for node in (t.drain, t.gate, t.source, t.bulk)]
                assert points[t.name] == evaluate(t.model, t.geometry, *at), (effects, t.name)
