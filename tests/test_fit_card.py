"""`biasbridge fit --card`: the level-1 equivalent of cards of our own (BSIM3 with a handful of
parameters, the rest ngspice's defaults; level 3), validated by simulating it back in ngspice; and
the output files of `fit` (atomic, the input untouched)."""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest

from bridge.cli import main
from bridge.netlist import parse_netlist
from bridge.sim.device_iv import simulate_bias_points

# A bicycle dynamo light's LED driver: its own BSIM3 and level-3 cards.
CARDS = """bicycle dynamo light: driver cards
.model led_n nmos (level=8 version=3.3.0 tox=9n vth0=0.55 u0=420)
.model led_p pmos (level=8 version=3.3.0 tox=9n vth0=-0.6 u0=150)
.model rail_n nmos (level=3 vto=0.6 kp=100u theta=0.1)
.end
"""


@pytest.fixture()
def card_file(tmp_path):
    path = tmp_path / "dynamo.lib"
    path.write_text(CARDS)
    return path


def fit_card_json(capsys, card_file, *argv) -> dict:
    status = main(["fit", "--card", str(card_file), *argv, "--w", "10u", "--l", "1u", "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    return json.loads(captured.out)


def test_bsim3_card_gets_a_level1_equivalent_that_holds_around_its_operating_point(
    required_ngspice_session, card_file, capsys
):
    result = fit_card_json(capsys, card_file, "--model", "led_n", "--around", "1.2,1.5")
    assert ".model led_n_l1 nmos (level=1 vto=" in result["card"]
    valid = result["valid_range"]
    assert valid is not None
    assert valid["vgs"][0] <= 1.2 <= valid["vgs"][1] and valid["vds"][0] <= 1.5 <= valid["vds"][1]
    # Simulated back in ngspice over the grid, the level-1 card gives what the fit's model gives.
    assert result["sim_rms_rel_error"] == pytest.approx(result["rms_rel_error"], rel=1e-3)
    # At the operating point, the equivalent run by ngspice is within 5 % of the BSIM3 card run by ngspice.
    cards = parse_netlist(CARDS.replace(".end\n", "") + result["card"] + ".end\n", "both.lib").models
    point = (np.array([1.2]), np.array([1.5]), np.array([0.0]))
    bsim3 = simulate_bias_points(required_ngspice_session, cards["led_n"], 10e-6, 1e-6, *point)
    level1 = simulate_bias_points(required_ngspice_session, cards["led_n_l1"], 10e-6, 1e-6, *point)
    assert abs(level1[0] / bsim3[0] - 1.0) <= 0.05
    assert result["model"]["gamma"] is None and "GAMMA and PHI not fitted" in result["card"]


def test_pmos_bsim3_card_equivalent_has_a_negative_vto(required_ngspice_session, card_file, capsys):
    result = fit_card_json(capsys, card_file, "--model", "led_p", "--around", "-1.2,-1.5")
    assert -1.0 < result["model"]["vto"] < -0.3
    assert " pmos (level=1 vto=-" in result["card"]
    assert result["valid_range"] is not None


def test_level3_card_equivalent_over_strong_inversion(required_ngspice_session, card_file, capsys):
    result = fit_card_json(capsys, card_file, "--model", "rail_n", "--vds-range", "0,3")
    assert result["model"]["vto"] == pytest.approx(0.6, abs=0.1)  # level 3's VTO, bent by THETA
    assert result["valid_range"] is not None
    assert result["points_used"] > 500


def test_missing_model_is_refused(card_file, capsys):
    assert main(["fit", "--card", str(card_file), "--model", "nosuch"]) == 2
    err = capsys.readouterr().err
    assert "no model `nosuch`" in err and "led_n" in err


CSV = "vgs,vds,id\n" + "".join(f"{v / 4:g},2,{max(0.0, v / 4 - 0.7) ** 2 * 1e-3:g}\n" for v in range(13))


def test_output_files_are_written_atomically_and_the_input_is_untouched(tmp_path, capsys):
    data = tmp_path / "bench.csv"
    data.write_text(CSV)
    before = hashlib.sha256(data.read_bytes()).hexdigest()
    out, plot = tmp_path / "fitted.lib", tmp_path / "fitted.png"
    out.write_text("an older card\n")
    assert main(["fit", str(data), "--out", str(out), "--plot", str(plot)]) == 0
    assert out.read_text().splitlines()[-1].startswith(".model fitted nmos (level=1 vto=")
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bench.csv", "fitted.lib", "fitted.png"]  # no .part left
    assert hashlib.sha256(data.read_bytes()).hexdigest() == before
    capsys.readouterr()


def test_out_over_the_input_is_refused(tmp_path, capsys):
    data = tmp_path / "bench.csv"
    data.write_text(CSV)
    assert main(["fit", str(data), "--out", str(data)]) == 2
    assert "refusing to write over an input" in capsys.readouterr().err
    assert data.read_text() == CSV


def test_a_failed_fit_leaves_an_earlier_output_alone(tmp_path, capsys):
    data, out = tmp_path / "bad.csv", tmp_path / "fitted.lib"
    data.write_text("vgs,vds,id\n1,1,x\n")
    out.write_text("an older card\n")
    assert main(["fit", str(data), "--out", str(out)]) == 2
    assert out.read_text() == "an older card\n"
    capsys.readouterr()


SHORT_CHANNEL = """bicycle dynamo light: a short-channel BSIM4 card of our own, and one ngspice refuses
.model short_n nmos (level=14 version=4.8.1 toxe=3n vth0=0.4)
.model broken_n nmos (level=8 version=3.3.0 tox=-9n)
.end
"""


def test_short_channel_card_gets_a_range_even_where_the_middle_of_the_grid_is_off(
    required_ngspice_session, tmp_path, capsys
):
    """Velocity saturation bends the BSIM4 card away from the square law in the middle of the grid;
    the range is then the largest box grown from any strong-inversion point where the equivalent holds."""
    path = tmp_path / "short.lib"
    path.write_text(SHORT_CHANNEL)
    assert main(["fit", "--card", str(path), "--model", "short_n", "--w", "1u", "--l", "100n", "--vds-range", "0,1.2",
                 "--json"]) == 0  # fmt: skip
    result = json.loads(capsys.readouterr().out)
    valid = result["valid_range"]
    assert valid is not None and valid["vgs"][0] <= valid["vgs"][1] and valid["vds"][0] <= valid["vds"][1]
    assert f"VGS {valid['vgs'][0]:g}..{valid['vgs'][1]:g} V" in result["card"]


def test_a_card_ngspice_refuses_is_reported_at_its_line(required_ngspice_session, tmp_path, capsys):
    path = tmp_path / "short.lib"
    path.write_text(SHORT_CHANNEL)
    assert main(["fit", "--card", str(path), "--model", "broken_n", "--w", "1u", "--l", "1u"]) == 2
    err = capsys.readouterr().err
    assert f"{path}:3:1: ngspice could not simulate model `broken_n`" in err and "Traceback" not in err
