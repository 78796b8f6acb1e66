"""`biasbridge gain` on the command line: every bad argument exits 2 with a clear message and no
traceback; the bundled example runs. (The random option lists are in tests/test_batch_arguments.py.)"""

from __future__ import annotations

import pytest
from conftest import EXAMPLES

from bridge.cli import main

STAGE = """Dynamo light: pickup preamp
VDD vdd 0 5
VIN sig 0 DC 0 AC 1
CIN sig g 1u
R1 vdd g 360k
R2 g 0 140k
RD vdd d 4.7k
M1 d g 0 0 N W=40u L=2u
.model N nmos (level=1 vto=0.7 kp=120u)
.end
"""


@pytest.fixture
def stage(tmp_path):
    path = tmp_path / "dynamo.cir"
    path.write_text(STAGE)
    return path


@pytest.mark.parametrize(
    "extra, said",
    [
        (["--freq", "abc"], "--freq `abc` is not a number"),
        (["--freq", "0"], "must be a positive frequency"),
        (["--freq=-5k"], "must be a positive frequency"),
        (["--input", "VNOPE"], "no source named `VNOPE`"),
        (["--input", "RD"], "`RD` is a resistor, not an independent source"),
        (["--output", "nowhere"], "no node `nowhere`"),
        (["--output", "0"], "ground is not an output node"),
        (["--tol", "200"], "tolerance 200 is out of range"),
        (["--tol", "five"], "is not a tolerance"),
        (["--band-tol", "half"], "is not a tolerance"),
        (["--band-tol", "0"], "tolerance 0 is out of range"),
        (["--sim-timeout", "0"], "--sim-timeout"),
        (["--plot", "missing-folder/plot.png"], "does not exist"),
        (["--plot", "plot.txt"], "plot"),
    ],
)
def test_bad_arguments_exit_2(stage, extra, said, capsys, monkeypatch, tmp_path):
    monkeypatch.chdir(tmp_path)
    assert _status(["gain", str(stage), *extra]) == 2
    err = capsys.readouterr().err
    assert said in err
    assert "Traceback" not in err


def _status(argv: list[str]) -> int:
    """main's exit status, argparse's own refusals (SystemExit) included."""
    try:
        return main(argv)
    except SystemExit as exc:
        return int(exc.code)


def test_a_missing_file_and_a_bad_card_are_located(tmp_path, capsys):
    assert main(["gain", str(tmp_path / "absent.cir")]) == 2
    bad = tmp_path / "bad.cir"
    bad.write_text(STAGE.replace("RD vdd d 4.7k", "RD vdd d 4.7q!"))
    assert main(["gain", str(bad)]) == 2
    err = capsys.readouterr().err
    assert f"{bad}:7:" in err and "Traceback" not in err


def test_a_netlist_without_mosfet_is_refused(tmp_path, capsys):
    path = tmp_path / "divider.cir"
    path.write_text("divider\nV1 a 0 5 AC 1\nR1 a b 1k\nR2 b 0 1k\n.end\n")
    assert main(["gain", str(path)]) == 2
    assert "no MOSFET" in capsys.readouterr().err


def test_the_bundled_example_runs(capsys):
    status = main(["gain", str(EXAMPLES / "greenhouse_cs_gain.cir"), "--steps"])
    out = capsys.readouterr().out
    assert status in (0, 1)
    assert "midband" in out and "RD = 10 kΩ" in out and "CS (470 µF)" in out


def test_plot_is_written(stage, tmp_path, required_ngspice_session, capsys):
    target = tmp_path / "response.svg"
    assert main(["gain", str(stage), "--plot", str(target)]) in (0, 1)
    assert target.read_text().lstrip().startswith("<?xml") and "hand midband gain" in target.read_text()


@pytest.mark.parametrize("seconds", ["inf", "1e400", "nan"])
def test_a_simulator_timeout_beyond_a_day_or_not_a_number_is_refused(seconds, stage, capsys):
    assert _status(["gain", str(stage), "--sim-timeout", seconds]) == 2
    err = capsys.readouterr().err
    assert "--sim-timeout" in err and "Traceback" not in err


def test_the_documents_say_gain_simulates_ac():
    """README and DEVELOPERS: every statement of which analyses are simulated names `.ac` (`gain`)."""
    root = EXAMPLES.parent
    for name in ("README.md", "DEVELOPERS.md"):
        text = (root / name).read_text()
        for statement in ("ever simulated", "worker: .op, .dc"):
            for line in (line for line in text.splitlines() if statement in line):
                assert ".ac" in line, f"{name}: {line}"
