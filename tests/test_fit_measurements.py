"""`biasbridge fit` on bench data: a known level-1 card recovered from data ngspice makes in the test
(seeded noise), PMOS data, data without vbs, the published first estimates, datasheet mode."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from bridge.cli import main
from bridge.devices.mos1.load import Level1Geometry
from bridge.fit.data import BiasData, read_bias_csv
from bridge.fit.estimate import linear_extrapolation, root_extrapolation
from bridge.netlist import parse_netlist
from bridge.sim.device_iv import simulate_bias_points, simulate_grid

# Cards of our own: the NMOS of a greenhouse sensor board's soil-probe amplifier and the PMOS of
# its heater-valve driver.
CARDS = parse_netlist(
    "greenhouse sensor board cards\n"
    ".model probe_n nmos (level=1 vto=0.65 kp=110u lambda=0.03 gamma=0.45 phi=0.7)\n"
    ".model valve_p pmos (level=1 vto=-0.8 kp=40u lambda=0.05)\n"
    ".end\n",
    "cards.lib",
).models
W, L = 10e-6, 1e-6
VGS = np.linspace(0.0, 3.0, 31)
VDS = np.linspace(0.05, 3.05, 13)  # the first curve at 50 mV: the low-VDS curve of the ELR method


def grid_data(session, card: str, vbs=(0.0,)):
    return simulate_grid(session, CARDS[card], W, L, VGS, VDS, vbs)


def write_csv(path, grid, noise: float, sign: float = 1.0, with_vbs: bool = True, seed: int = 15) -> None:
    """The grid as a bench would record it: 1 % gain noise (seeded), the device's own signs."""
    rng = np.random.default_rng(seed)
    current = grid.id * (1.0 + noise * rng.standard_normal(grid.id.size))
    lines = ["vgs,vds,vbs,id" if with_vbs else "vgs,vds,id"]
    for g, d, b, i in zip(grid.vgs, grid.vds, grid.vbs, current):
        cells = [g, d, b, i] if with_vbs else [g, d, i]
        lines.append(",".join(repr(float(sign * c)) for c in cells))
    path.write_text("\n".join(lines) + "\n")


def fit_json(capsys, *argv) -> dict:
    status = main(["fit", *argv, "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    return json.loads(captured.out)


def test_known_card_is_recovered_from_noisy_data_with_vbs(required_ngspice_session, tmp_path, capsys):
    write_csv(tmp_path / "probe.csv", grid_data(required_ngspice_session, "probe_n", (0.0, -0.5, -1.0, -2.0)), 0.01)
    result = fit_json(capsys, str(tmp_path / "probe.csv"), "--w", "10u", "--l", "1u")
    model = result["model"]
    assert abs(model["vto"] - 0.65) <= 0.010
    assert model["kp"] == pytest.approx(110e-6, rel=0.03)
    assert model["lambda"] == pytest.approx(0.03, rel=0.15)
    assert model["gamma"] == pytest.approx(0.45, rel=0.08)
    assert set(result) == {"model", "uncertainty", "card", "rms_rel_error", "points_used", "points_dropped",
                           "sim_rms_rel_error"}  # fmt: skip
    assert all(result["uncertainty"][key] > 0.0 for key in ("vto", "kp", "lambda", "gamma", "phi"))
    # 1 % noise: the relative error is about that, and ngspice running the card agrees with the model.
    assert 0.005 < result["rms_rel_error"] < 0.02
    assert result["sim_rms_rel_error"] == pytest.approx(result["rms_rel_error"], rel=0.02)
    assert result["points_used"] + result["points_dropped"] == 31 * 13 * 4
    assert ".model fitted nmos (level=1 vto=" in result["card"] and "gamma=" in result["card"]


def test_pmos_data_with_negative_signs_is_normalised(required_ngspice_session, tmp_path, capsys):
    write_csv(tmp_path / "valve.csv", grid_data(required_ngspice_session, "valve_p"), 0.01, sign=-1.0, with_vbs=False)
    result = fit_json(capsys, str(tmp_path / "valve.csv"), "--type", "pmos", "--w", "10u", "--l", "1u",
                      "--name", "valve")  # fmt: skip
    assert abs(result["model"]["vto"] - (-0.8)) <= 0.010  # the card's sign: negative for a PMOS
    assert result["model"]["kp"] == pytest.approx(40e-6, rel=0.03)
    assert result["model"]["lambda"] == pytest.approx(0.05, rel=0.15)
    assert ".model valve pmos (level=1 vto=-0." in result["card"]


def test_pmos_data_given_as_nmos_is_refused_at_its_row(required_ngspice_session, tmp_path, capsys):
    write_csv(tmp_path / "valve.csv", grid_data(required_ngspice_session, "valve_p"), 0.0, sign=-1.0, with_vbs=False)
    assert main(["fit", str(tmp_path / "valve.csv")]) == 2
    err = capsys.readouterr().err
    assert f"{tmp_path / 'valve.csv'}:" in err and "PMOS data given as nmos" in err and "Traceback" not in err


def test_data_without_vbs_leaves_gamma_and_phi_unfitted(required_ngspice_session, tmp_path, capsys):
    write_csv(tmp_path / "probe.csv", grid_data(required_ngspice_session, "probe_n"), 0.01, with_vbs=False)
    result = fit_json(capsys, str(tmp_path / "probe.csv"), "--w", "10u", "--l", "1u")
    assert result["model"]["gamma"] is None and result["model"]["phi"] is None
    assert result["uncertainty"]["gamma"] is None
    assert "* GAMMA and PHI not fitted: VBS did not vary" in result["card"]
    assert "gamma=" not in result["card"].splitlines()[-1]
    assert abs(result["model"]["vto"] - 0.65) <= 0.010


def test_published_first_estimates_on_a_known_card(required_ngspice_session):
    """ELR and ESR of Ortiz-Conde et al., Microelectronics Reliability 42 (2002) 583–596, on noise-free
    ngspice data of a card with VTO = 0.65 V: ELR's tangent on the 50 mV curve, minus VDS/2, lands on
    VTO (the triode current is linear in VGS above VTO + VDS); ESR's √ID line in saturation meets the
    VGS axis at VTO, with slope √(KP·W/L·(1 + λ·VDS)/2) (λ = 0.03 makes it slightly steeper)."""
    grid = grid_data(required_ngspice_session, "probe_n")
    data = BiasData("probe", "nmos", grid.vgs, grid.vds, grid.vbs, grid.id, np.arange(grid.id.size))
    linear = linear_extrapolation(data)
    assert linear is not None and linear.vds == pytest.approx(0.05)
    assert abs(linear.vto - 0.65) <= 0.005
    root = root_extrapolation(data, Level1Geometry(W, L))
    assert root is not None and root.vds == pytest.approx(3.05)
    assert abs(root.vto - 0.65) <= 0.005
    assert root.kp == pytest.approx(110e-6 * (1.0 + 0.03 * 3.05), rel=0.005)


def test_fitted_card_simulated_back_matches_the_data(required_ngspice_session, tmp_path):
    """The --out card, read back by the netlist reader and run by ngspice at a few points, gives the
    currents the fit's model gives there (the card text is the fit, to its five digits)."""
    write_csv(tmp_path / "probe.csv", grid_data(required_ngspice_session, "probe_n"), 0.0, with_vbs=False)
    assert main(["fit", str(tmp_path / "probe.csv"), "--w", "10u", "--l", "1u", "--out", str(tmp_path / "p.lib"),
                 "--json"]) == 0  # fmt: skip
    card = parse_netlist((tmp_path / "p.lib").read_text(), "p.lib").models["fitted"]
    vgs, vds = np.array([1.0, 2.0, 3.0]), np.array([3.0, 0.5, 2.0])
    simulated = simulate_bias_points(required_ngspice_session, card, W, L, vgs, vds, np.zeros(3))
    original = simulate_bias_points(required_ngspice_session, CARDS["probe_n"], W, L, vgs, vds, np.zeros(3))
    np.testing.assert_allclose(simulated, original, rtol=1e-3)


def test_datasheet_mode_against_a_hand_calculation(capsys):
    """Hand: √(2 mA) = 0.044721, √(8 mA) = 0.089443, slope 0.044721 /V over 1 V, so VT = 2 − 1 = 1 V
    and β = 2·slope² = 4 mA/V²; at W = L (100 µm, ngspice's defaults) KP = β = 4e-3 A/V²."""
    assert main(["fit", "--point", "2,2m", "--point", "3,8m", "--vds", "10", "--json"]) == 0
    captured = capsys.readouterr()
    result = json.loads(captured.out)
    assert result["model"]["vto"] == pytest.approx(1.0, abs=1e-12)
    assert result["model"]["kp"] == pytest.approx(4e-3, rel=1e-12)
    assert result["model"]["lambda"] == 0.0 and result["model"]["gamma"] is None
    assert "two points pin only two parameters" in captured.err
    assert "not in saturation" not in captured.err  # VDS = 10 V is above both overdrives
    status = main(["fit", "--point", "2,2m", "--point", "3,8m", "--vds", "1.5", "--w", "20u", "--l", "2u"])
    out = capsys.readouterr().out
    assert status == 0
    assert "two points pin only two parameters" in out
    assert "VDS = 1.5 V is below the overdrive 2 V" in out  # VGS = 3 V, VT = 1 V: triode, said
    assert "kp=0.0004 " in out  # β·L/W = 4e-3·2/20
    assert math.isclose(float(out.split("vto=")[1].split()[0]), 1.0)


def test_datasheet_mode_with_pmos_signs(capsys):
    result = fit_json(capsys, "--point", "-2,-2m", "--point", "-3,-8m", "--type", "pmos")
    assert result["model"]["vto"] == pytest.approx(-1.0, abs=1e-12)
    assert "pmos (level=1 vto=-1 " in result["card"]


def test_header_forms_and_units(tmp_path):
    path = tmp_path / "units.csv"
    points = [(1.0, 1.0, 0.1e-3), (1.5, 1.0, 0.5e-3), (2.0, 1.0, 1.2e-3), (2.5, 1.0, 2.1e-3), (3.0, 1.0, 3.3e-3)]
    rows = "\n".join(f"{g},{d * 1000:g},{i * 1000:g}" for g, d, i in points)
    path.write_text("# a comment line\nVGS (V), Vds [mV], id/mA\n" + rows + "\n")
    data = read_bias_csv(str(path))
    assert data.vds.tolist() == [1.0] * 5
    assert data.id[-1] == pytest.approx(3.3e-3)
    assert data.rows.tolist() == [3, 4, 5, 6, 7]
    assert not data.has_vbs and not data.vbs_varies


def test_pmos_data_with_magnitude_currents_and_signed_voltages(required_ngspice_session, tmp_path, capsys):
    """A bench that records |ID| but the PMOS's own negative VGS and VDS: the voltages are negated alone."""
    grid = grid_data(required_ngspice_session, "valve_p")
    lines = ["vgs,vds,id"] + [f"{-g:.17g},{-d:.17g},{i:.17g}" for g, d, i in zip(grid.vgs, grid.vds, grid.id)]
    (tmp_path / "valve.csv").write_text("\n".join(lines) + "\n")
    result = fit_json(capsys, str(tmp_path / "valve.csv"), "--type", "pmos", "--w", "10u", "--l", "1u")
    assert abs(result["model"]["vto"] - (-0.8)) <= 0.010
    assert result["model"]["kp"] == pytest.approx(40e-6, rel=0.03)


def test_plain_text_report_in_a_pipe(required_ngspice_session, tmp_path, capsys):
    write_csv(tmp_path / "probe.csv", grid_data(required_ngspice_session, "probe_n"), 0.01, with_vbs=False)
    assert main(["fit", str(tmp_path / "probe.csv"), "--w", "10u", "--l", "1u"]) == 0
    out = capsys.readouterr().out
    assert "  VTO     0.6" in out and " ± " in out
    assert "  GAMMA   not fitted" in out
    assert "worst points (device polarity):\n  line " in out  # the file's line of each worst point
    assert "ELR" in out and "ESR" in out  # the published first estimates, named
    assert "RMS relative error, fitted card simulated in ngspice vs data: " in out
    assert "\x1b[" not in out and "┃" not in out  # no colour, no table frame in a pipe
