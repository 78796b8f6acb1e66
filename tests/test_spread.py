"""`biasbridge spread`: the yield against a closed-form Monte Carlo computed here, the corners
against ngspice run directly (`ngspice -b`) on the corner netlists, the worst corners through the
worker, and determinism under a seed."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from conftest import needs_ngspice, ngspice_batch_op

from bridge.analysis.spread import spread
from bridge.cli import main
from bridge.commands.spread_defaults import Entry, Tolerances, bands
from bridge.netlist import read_netlist
from bridge.netlist.circuit import Analysis, Origin
from bridge.netlist.emit import emit
from bridge.sim.corners import corner_circuit, prove_corners

# A greenhouse vent-motor pre-driver: the gate held by a reference, λ = γ = 0, source grounded.
VENT = """Greenhouse vent pre-driver: NMOS common source, fixed gate reference
VDD vdd 0 DC 5
VREF g 0 DC 1.5
RD vdd d 16k
M1 d g 0 0 NVENT W=20u L=2u
.model NVENT nmos (level=1 vto=0.8 kp=100u)
.op
.end
"""

# A frost-alarm siren's PMOS level shifter, divider-biased, its drain resistor with a TC1.
FROST = """Frost-alarm PMOS stage: divider bias, source resistor, drain resistor with TC1
VDD vdd 0 DC 5
R1 vdd g 150k
R2 g 0 330k
RS vdd s 1k
RD d 0 6.8k tc1=0.003
M1 d g s vdd PFROST W=50u L=2u
.model PFROST pmos (level=1 vto=-0.8 kp=45u lambda=0.03 gamma=0.5 phi=0.7)
.op
.end
"""


def _circuit(tmp_path: Path, name: str, text: str):
    path = tmp_path / name
    path.write_text(text)
    return path, read_netlist(path)


def test_the_saturation_yield_equals_a_closed_form_monte_carlo_of_the_same_samples(tmp_path):
    _, circuit = _circuit(tmp_path, "vent.cir", VENT)
    count, seed = 2000, 7
    tolerances = Tolerances(resistors=Entry(10.0), vto=Entry(0.1), kp=Entry(20.0))
    varied = bands(circuit, tolerances)
    assert [b.label for b in varied] == ["RD", "NVENT.vto", "NVENT.kp"]
    result = spread(circuit, varied, samples=count, seed=seed, margin_threshold=0.1)
    # The same samples, drawn here: one uniform matrix, column j for band j.
    u = np.random.default_rng(seed).random((count, 3))
    rd = 16e3 * (0.9 + 0.2 * u[:, 0])
    vto = 0.8 + (-0.1 + 0.2 * u[:, 1])
    kp = 100e-6 * (0.8 + 0.4 * u[:, 2])
    np.testing.assert_allclose(result.sample_points.values, np.column_stack([rd, vto, kp]), rtol=1e-15)
    # λ = γ = 0, source grounded, VGS = 1.5 V: in saturation Id = ½·KP·(W/L)·(VGS − VTO)², and the
    # device is in saturation exactly when VDD − Id·RD ≥ VGS − VTO (a resistor load has one solution).
    overdrive = 1.5 - vto
    current = 0.5 * kp * 10.0 * overdrive**2
    margin = 5.0 - current * rd - overdrive
    saturated = (overdrive > 0) & (margin >= 0)
    assert 0.2 < saturated.mean() < 0.95  # the bands cross the edge: the yield is a real test
    assert result.saturation_yield == saturated.mean()
    assert result.margin_yield == (saturated & (margin >= 0.1)).mean()
    # The saturated samples' drain currents and margins, as the closed form gives them.
    ids = result.sample_solution.ids["M1"]
    np.testing.assert_allclose(ids[saturated], current[saturated], rtol=1e-6)
    np.testing.assert_allclose(result.sample_solution.margins["M1"][saturated], margin[saturated], rtol=1e-6,
                               atol=1e-6)  # fmt: skip
    stats = result.devices["M1"]["id"]
    assert stats.mean == pytest.approx(float(np.mean(ids)), rel=1e-12)
    assert stats.p_low == pytest.approx(float(np.percentile(ids, 0.1)), rel=1e-12)


def test_the_corners_are_all_combinations_and_name_the_extremes(tmp_path):
    _, circuit = _circuit(tmp_path, "vent.cir", VENT)
    varied = bands(circuit, Tolerances(resistors=Entry(10.0), vto=Entry(0.1), kp=Entry(20.0)))
    result = spread(circuit, varied, samples=10, seed=1)
    assert result.corners.count == 1 + 2 * 3 + 8
    # Each corner in closed form (λ = γ = 0): saturation when VDD − Id·RD ≥ VOV, else triode, where
    # Id = K·(VOV·v − v²/2) = (VDD − v)/RD gives (K/2)v² − (K·VOV + 1/RD)·v + VDD/RD = 0, smaller root.
    expected = []
    for rd, vto, kp in result.corners.values[7:]:
        k, vov = kp * 10.0, 1.5 - vto
        current = 0.5 * k * vov**2
        if 5.0 - current * rd < vov:
            b = k * vov + 1.0 / rd
            v = (b - np.sqrt(b * b - 2.0 * k * 5.0 / rd)) / k
            current = (5.0 - v) / rd
        expected.append(current)
    ids = result.corner_solution.ids["M1"][7:]
    np.testing.assert_allclose(ids, expected, rtol=1e-6)
    stats = result.devices["M1"]["id"]
    assert stats.max == pytest.approx(max(expected), rel=1e-6)
    assert stats.min == pytest.approx(min(expected), rel=1e-6)
    assert stats.max_corner == result.corner_names[7 + int(np.argmax(expected))]
    assert "NVENT.vto −0.1 V" in stats.max_corner and "NVENT.kp +20 %" in stats.max_corner
    # The sensitivities, largest first: VTO moves the current most, then KP, then RD (which moves
    # it only through triode at its high end).
    assert [s.band for s in result.sensitivity["M1"]] == ["NVENT.vto", "NVENT.kp", "RD"]
    deltas = [abs(s.delta) for s in result.sensitivity["M1"]]
    assert deltas == sorted(deltas, reverse=True) and deltas[2] > 0


def test_beyond_the_corner_limit_only_the_directed_corners_are_searched_and_it_is_said(tmp_path):
    _, circuit = _circuit(tmp_path, "vent.cir", VENT)
    varied = bands(circuit, Tolerances(resistors=Entry(10.0), supplies=Entry(5.0), vto=Entry(0.1), kp=Entry(20.0)))
    full = spread(circuit, varied, samples=10, seed=1)
    directed = spread(circuit, varied, samples=10, seed=1, full_corner_limit=2)
    assert "not all 32 corners were solved" in directed.how and "over these points only" in directed.how
    assert directed.corners.count < full.corners.count
    # Here the directed corners (VDD, which does not move the current at nominal, tried at both ends)
    # find the same extremes as all 32.
    for quantity in ("id", "margin"):
        assert directed.devices["M1"][quantity].min == pytest.approx(full.devices["M1"][quantity].min, rel=1e-9)
        assert directed.devices["M1"][quantity].max == pytest.approx(full.devices["M1"][quantity].max, rel=1e-9)


def _batch_op(tmp_path: Path, circuit, name: str) -> dict[str, float]:
    deck = emit(circuit, analyses=[Analysis("op", Origin(circuit.source_file, 0))])
    path = tmp_path / name
    path.write_text(deck.text)
    return ngspice_batch_op(path)


@needs_ngspice
def test_corners_that_cross_into_triode_agree_with_ngspice_run_on_the_corner_netlists(tmp_path):
    """Reference: ngspice 39 itself (`ngspice -b`) on each corner's emitted netlist."""
    _, circuit = _circuit(tmp_path, "vent.cir", VENT)
    varied = bands(circuit, Tolerances(resistors=Entry(10.0), vto=Entry(0.1), kp=Entry(20.0)))
    result = spread(circuit, varied, samples=10, seed=1)
    margin = result.devices["M1"]["margin"]
    assert margin.min < 0 < margin.max  # the worst corner is in triode, the best in saturation
    for row in {margin.min_row, margin.max_row, result.devices["M1"]["id"].min_row}:
        sim = _batch_op(tmp_path, corner_circuit(circuit, varied, result.corners.values[row]), f"c{row}.cir")
        drain = result.corner_solution.nodes["d"][row]
        assert drain == pytest.approx(sim["d"], abs=1e-3)
        # The drain current is the supply's: ngspice's branch current flows into its + terminal.
        assert result.corner_solution.ids["M1"][row] == pytest.approx(-sim["vdd#branch"], rel=2e-3)


@needs_ngspice
def test_a_pmos_stage_over_minus_40_to_125_c_agrees_with_ngspice_at_both_ends(tmp_path):
    """Reference: ngspice 39 (`ngspice -b`, `.temp` on the corner netlist): the level-1 temperature
    phase (KP, VTO through PHI and the band gap) and the resistor's TC1 as ngspice applies them."""
    _, circuit = _circuit(tmp_path, "frost.cir", FROST)
    varied = bands(circuit, Tolerances(temperature=(-40.0, 125.0), kp=Entry(5.0)))
    result = spread(circuit, varied, samples=10, seed=1)
    ends = result.corners.ends
    for row in range(result.corners.count):
        if ends[row][-1] == 0:  # the circuit temperature; the corners proper are at −40 and 125 °C
            continue
        corner = corner_circuit(circuit, varied, result.corners.values[row])
        sim = _batch_op(tmp_path, corner, f"t{row}.cir")
        for node in ("d", "s", "g"):
            assert result.corner_solution.nodes[node][row] == pytest.approx(sim[node], abs=1e-3), (row, node)
        assert result.corner_solution.ids["M1"][row] == pytest.approx(-sim["vdd#branch"] - 5 / 480e3, rel=2e-3)
    # The temperature really moves the stage: the drain current differs between the ends.
    ids = result.corner_solution.ids["M1"]
    cold = [r for r in range(len(ids)) if ends[r][-1] < 0]
    hot = [r for r in range(len(ids)) if ends[r][-1] > 0]
    assert abs(ids[cold[0]] - ids[hot[0]]) > 0.02 * abs(ids[0])


def test_the_worst_corners_run_in_ngspice_beside_the_level1_values(tmp_path, required_ngspice_session):
    _, circuit = _circuit(tmp_path, "frost.cir", FROST)
    varied = bands(circuit, Tolerances(temperature=(-40.0, 125.0), resistors=Entry(5.0), vto=Entry(0.05)))
    result = spread(circuit, varied, samples=10, seed=1)
    check = prove_corners(required_ngspice_session, circuit, result)
    assert not [f for f in check.findings if f.code == "corner-differs"], check.findings
    low, high = check.devices["M1"]["id"]
    assert low == pytest.approx(result.devices["M1"]["id"].min, rel=5e-3)
    assert high == pytest.approx(result.devices["M1"]["id"].max, rel=5e-3)
    for node, (sim_low, sim_high) in check.nodes.items():
        assert sim_low == pytest.approx(result.nodes[node].min, abs=1e-3), node
        assert sim_high == pytest.approx(result.nodes[node].max, abs=1e-3), node


def _json(argv: list[str], capsys) -> str:
    status = main(argv)
    out = capsys.readouterr().out
    assert status in (0, 1)
    return out


def test_the_same_seed_gives_the_same_bytes_and_another_seed_other_numbers(tmp_path, capsys):
    path, _ = _circuit(tmp_path, "vent.cir", VENT)
    argv = ["spread", str(path), "--resistors", "10", "--vto", "0.1", "--kp", "20", "--samples", "300", "--json"]
    first = _json([*argv, "--seed", "3", "--plot", str(tmp_path / "a.svg")], capsys)
    second = _json([*argv, "--seed", "3", "--plot", str(tmp_path / "b.svg")], capsys)
    assert first == second
    assert (tmp_path / "a.svg").read_bytes() == (tmp_path / "b.svg").read_bytes()
    other = json.loads(_json([*argv, "--seed", "4"], capsys))
    data = json.loads(first)
    assert data["seed"] == 3 and other["seed"] == 4
    assert data["devices"]["M1"]["id"]["mean"] != other["devices"]["M1"]["id"]["mean"]
    # The corners do not depend on the seed.
    assert data["devices"]["M1"]["id"]["min"] == other["devices"]["M1"]["id"]["min"]
    # The keys first, in its order; what was added since after them.
    assert list(data) == ["file", "samples", "seed", "devices", "nodes", "yield", "sensitivity", "findings",
                          "no_dc_effect"]  # fmt: skip
    assert list(data["devices"]["M1"]["id"]) == ["nominal", "min", "max", "min_corner", "max_corner", "sim_min",
                                                 "sim_max", "mean", "std", "p0.1", "p99.9", "min_corner_ends",
                                                 "max_corner_ends"]  # fmt: skip


def test_normal_draws_read_the_band_as_three_sigma_and_stay_inside_it(tmp_path):
    _, circuit = _circuit(tmp_path, "vent.cir", VENT)
    varied = bands(circuit, Tolerances(resistors=Entry(10.0)))
    result = spread(circuit, varied, samples=4000, seed=2, distribution="normal")
    rd = result.sample_points.values[:, 0]
    z = np.random.default_rng(2).standard_normal((4000, 1))[:, 0]
    np.testing.assert_allclose(rd, np.clip(16e3 + (3.2e3 / 6) * z, 14.4e3, 17.6e3), rtol=1e-15)
    assert rd.min() >= 14.4e3 and rd.max() <= 17.6e3


def test_a_temperature_range_without_the_circuit_temperature_keeps_every_point_inside_it(tmp_path):
    _, circuit = _circuit(tmp_path, "frost.cir", FROST)  # at 27 °C
    varied = bands(circuit, Tolerances(temperature=(40.0, 80.0)))
    assert varied[0].nominal == 60.0
    result = spread(circuit, varied, samples=50, seed=1)
    assert result.corners.values[:, 0].min() >= 40.0 and result.corners.values[:, 0].max() <= 80.0
    assert result.sample_points.values.min() >= 40.0 and result.sample_points.values.max() <= 80.0


def test_a_corner_where_ngspice_differs_beyond_half_a_percent_is_a_finding(tmp_path, required_ngspice_session):
    """A card with RS (series source resistance), which ngspice models and the level-1 solver does
    not (its caveat says so): ngspice's current at the corners is lower, and the check says so."""
    _, circuit = _circuit(tmp_path, "vent_rs.cir", VENT.replace("kp=100u)", "kp=100u rs=200)"))
    varied = bands(circuit, Tolerances(vto=Entry(0.1)))
    result = spread(circuit, varied, samples=20, seed=1)
    assert any("RS given" in caveat for caveat in result.caveats)
    check = prove_corners(required_ngspice_session, circuit, result)
    differs = [f.message for f in check.findings if f.code == "corner-differs"]
    assert any(m.startswith("M1 id minimum at its corner (NVENT.vto +0.1 V): level-1") for m in differs), differs
    low, _ = check.devices["M1"]["id"]
    assert low < 0.99 * result.devices["M1"]["id"].min


def test_samples_solved_in_blocks_give_the_numbers_of_one_call(tmp_path, monkeypatch):
    import bridge.analysis.spread as numbers

    _, circuit = _circuit(tmp_path, "vent.cir", VENT)
    varied = bands(circuit, Tolerances(resistors=Entry(10.0), vto=Entry(0.1)))
    whole = spread(circuit, varied, samples=1000, seed=5)
    monkeypatch.setattr(numbers, "CHUNK_ROWS", 300)
    blocks = spread(circuit, varied, samples=1000, seed=5)
    np.testing.assert_array_equal(blocks.sample_solution.ids["M1"], whole.sample_solution.ids["M1"])
    assert blocks.saturation_yield == whole.saturation_yield


def test_the_command_line_beats_the_files_defaults_and_the_files_names_beat_both(tmp_path):
    from bridge.commands.spread_defaults import merged, read_tolerance_file

    _, circuit = _circuit(tmp_path, "frost.cir", FROST)
    toml = tmp_path / "t.toml"
    toml.write_text("[resistors]\ndefault = 5\nRD = 1\n[models.PFROST]\nvto = 0.02\n[temperature]\nrange = [0, 50]\n")
    file = read_tolerance_file(toml)
    varied = {b.label: b for b in bands(circuit, merged(Tolerances(resistors=Entry(10.0), vto=Entry(0.1),
                                                                   temperature=(-40.0, 85.0)), file))}  # fmt: skip
    assert varied["R1"].high == pytest.approx(165e3)  # --resistors 10 over the file's default 5
    assert varied["RD"].high == pytest.approx(6.8e3 * 1.01)  # the file's RD = 1 over --resistors
    assert varied["PFROST.vto"].low == pytest.approx(-0.82)  # the file's model entry over --vto
    assert (varied["temperature"].low, varied["temperature"].high) == (-40.0, 85.0)
    only_file = {b.label: b for b in bands(circuit, merged(Tolerances(), file))}
    assert only_file["R1"].high == pytest.approx(157.5e3)
    assert (only_file["temperature"].low, only_file["temperature"].high) == (0.0, 50.0)


def test_a_corner_in_cutoff_is_said_and_ngspices_gmin_leakage_there_is_no_difference(tmp_path,
                                                                                     required_ngspice_session):
    from bridge.spread_compare import spread_findings

    _, circuit = _circuit(tmp_path, "vent_low.cir", VENT.replace("VREF g 0 DC 1.5", "VREF g 0 DC 0.95"))
    varied = bands(circuit, Tolerances(vto=Entry(0.2)))
    result = spread(circuit, varied, samples=50, seed=1)
    check = prove_corners(required_ngspice_session, circuit, result)
    low, _ = check.devices["M1"]["id"]
    assert result.devices["M1"]["id"].min == 0.0 and 0.0 < low < 1e-11  # ngspice: GMIN·V(d) through the junction
    assert [f for f in check.findings if f.code == "corner-differs"] == []
    cutoff = [f for f in spread_findings(circuit, result, check) if f.code == "corner-cutoff"]
    assert [f.message for f in cutoff] == [
        "M1 is in cutoff (vov ≤ 0) at 2 of 5 points searched, e.g. at NVENT.vto +0.2 V"
    ]
    assert cutoff[0].line == circuit.element("M1").origin.line  # the finding sits at the MOSFET's card


def test_a_current_that_is_not_monotone_in_temperature_is_not_called_worst_at_a_corner(tmp_path):
    """Near its zero-temperature-coefficient bias the drain current has a minimum inside −40…125 °C
    (KP falls with T, VTO falls too): the corners (the two ends) miss it, the samples find it."""
    from bridge.spread_compare import spread_findings

    stage = VENT.replace("VREF g 0 DC 1.5", "VREF g 0 DC 1.3").replace("RD vdd d 16k", "RD vdd d 1k")
    _, circuit = _circuit(tmp_path, "ztc.cir", stage.replace("kp=100u)", "kp=100u gamma=0.5 phi=0.7)"))
    result = spread(circuit, bands(circuit, Tolerances(temperature=(-40.0, 125.0))), samples=2000, seed=0)
    stats = result.devices["M1"]["id"]
    assert stats.sample_min < stats.min
    messages = [f.message for f in spread_findings(circuit, result, None) if f.code == "corner-not-worst"]
    assert any(m.startswith("M1 id: a Monte-Carlo sample is below every corner searched") for m in messages)
