"""`gain` against ngspice itself: the level-1 column against `.ac` decks run with `ngspice -b`
(written by the test, `print` read back), the Meyer capacitances against ngspice's `@m1[cgs]`,
`@m1[cgd]`, `@m1[cgb]` op vectors, the low band edge against the −3 dB point of a dense sweep,
and the whole command through the worker (``bridge.sim.ac.measure_ac``).

Stages of a bicycle dynamo light's sensing board (invented values).
"""

from __future__ import annotations

import json
import math
import re
import subprocess
from pathlib import Path

import numpy as np
import pytest
from conftest import NGSPICE, needs_ngspice

from bridge.analysis.dcsolve import solve_operating_point
from bridge.analysis.hand import HandModel
from bridge.analysis.smallsignal import SignalSetup, hand_column, level1_column
from bridge.cli import main
from bridge.devices.mos1.instance import mosfet_instance
from bridge.devices.mos1.smallsignal import meyer_capacitances
from bridge.gain_run import run_gain
from bridge.netlist import parse_netlist

_PAIR = re.compile(r"^(\S+)\s*=\s*([-+0-9.e]+)(?:,\s*([-+0-9.e]+))?\s*$")


def _ngspice(deck: str, folder: Path) -> dict[str, complex]:
    """`ngspice -b` on `deck` (its own .control block), every `name = re[,im]` line it prints."""
    path = folder / "deck.cir"
    path.write_text(deck)
    done = subprocess.run([NGSPICE, "-b", str(path)], capture_output=True, text=True, timeout=60, cwd=folder)
    values = {}
    for line in done.stdout.splitlines():
        match = _PAIR.match(line.strip())
        if match:
            values[match.group(1).lower()] = complex(float(match.group(2)), float(match.group(3) or 0.0))
    assert values, done.stdout + done.stderr
    return values


def _deck(body: str, control: str) -> str:
    return f"dynamo light stage\n{body}\n.control\n{control}\n.endc\n.end\n"


STAGES = {
    # λ only: a divider-biased common source, RS bypassed.
    "lambda": ("""VDD vdd 0 5
VIN sig 0 DC 0 AC 1
CIN sig g 1u
R1 vdd g 360k
R2 g 0 140k
RD vdd d 4.7k
RS s 0 1k
CS s 0 100u
COUT d out 1u
RL out 0 47k
M1 d g s 0 N W=40u L=2u
.model N nmos (level=1 vto=0.7 kp=120u lambda=0.05)""", "out"),
    # Body effect: an unbypassed source resistor, bulk at ground (gmbs acts).
    "gamma": ("""VDD vdd 0 5
VIN sig 0 DC 0 AC 1
RSIG sig pin 5k
CIN pin g 1u
R1 vdd g 330k
R2 g 0 170k
RD vdd d 6.8k
RS s 0 820
M1 d g s 0 N W=40u L=2u
.model N nmos (level=1 vto=0.7 kp=120u lambda=0.02 gamma=0.5 phi=0.7)""", "d"),
    # M = 3, gate capacitances on the card, measured at a frequency where they matter a little.
    "multiplier": ("""VDD vdd 0 3.3
VIN g 0 DC 1.0 AC 1
RD vdd d 2.2k
M1 d g 0 0 N W=10u L=1u M=3
.model N nmos (level=1 vto=0.6 kp=100u lambda=0.04 tox=15n cgso=0.3n cgdo=0.3n cgbo=0.1n)""", "d"),
    # Split supplies: a follower with its bulk on the negative rail.
    "split": ("""VDD vdd 0 5
VSS vss 0 -5
VIN sig 0 DC 0 AC 1
CIN sig g 1u
RG g 0 1MEG
RS s vss 10k
COUT s out 10u
RL out 0 2k
M1 vdd g s vss N W=20u L=2u
.model N nmos (level=1 vto=0.8 kp=100u lambda=0.03 gamma=0.45 phi=0.65)""", "out"),
    # PMOS common source, drain resistor to ground.
    "pmos": ("""VDD vdd 0 5
VIN sig 0 DC 0 AC 1
CIN sig g 1u
R1 vdd g 140k
R2 g 0 360k
RD d 0 4.7k
M1 d g vdd vdd P W=40u L=2u
.model P pmos (level=1 vto=-0.7 kp=60u lambda=0.03)""", "d"),
}


@needs_ngspice
@pytest.mark.parametrize("case", sorted(STAGES))
def test_level1_column_against_ngspice_ac(case, tmp_path):
    body, output = STAGES[case]
    frequency = 20e3 if case != "multiplier" else 20e6
    circuit = parse_netlist(f"dynamo light stage\n{body}\n.end\n", f"{case}.cir")
    level1 = solve_operating_point(circuit)
    assert all(p.region == "saturation" for p in level1.devices.values())
    column = level1_column(circuit, level1, SignalSetup("VIN", output, None, frequency))
    printed = _ngspice(_deck(body, f"ac lin 1 {frequency} {frequency}\nprint v({output}) i(vin)"), tmp_path)
    gain = printed[f"v({output})"]
    rin = 1.0 / -printed["i(vin)"]
    assert abs(column.gain_complex - gain) <= 1e-4 * abs(gain)  # ngspice prints 6 digits
    assert abs(column.rin_complex - rin) <= 1e-4 * abs(rin)


@needs_ngspice
@pytest.mark.parametrize("rd", ["1.5k", "12k", "1.5k vgate=0.5"])
def test_meyer_capacitances_against_ngspice_op_vectors(rd, tmp_path):
    """Saturation, triode and cutoff (the gate source at 0.5 V, below VTO)."""
    resistance, _, gate = rd.partition(" vgate=")
    body = f"""VDD vdd 0 5
VG g 0 {gate or 1.6}
RD vdd d {resistance}
M1 d g 0 0 N W=20u L=2u M=2
.model N nmos (level=1 vto=0.7 kp=120u tox=20n cgso=0.3n cgdo=0.25n cgbo=0.1n ld=0.1u)"""
    # ngspice keeps the capacitances of its last Newton iterate: at its default RELTOL (1e-3) a
    # triode cgs was seen 5e-5 off the converged value, at RELTOL = 1e-7 equal to 7 digits.
    printed = _ngspice(_deck(body + "\n.options reltol=1e-7", "op\nprint @m1[cgs] @m1[cgd] @m1[cgb]"), tmp_path)
    circuit = parse_netlist(f"meyer\n{body}\n.end\n", "meyer.cir")
    point = solve_operating_point(circuit).devices["M1"]
    instance = mosfet_instance(circuit, circuit.element("M1"))
    caps = meyer_capacitances(instance.card.params, instance.model, instance.geometry, point)
    assert caps.cgs == pytest.approx(printed["@m1[cgs]"].real, rel=1e-5, abs=1e-21)
    assert caps.cgd == pytest.approx(printed["@m1[cgd]"].real, rel=1e-5, abs=1e-21)
    assert caps.cgb == pytest.approx(printed["@m1[cgb]"].real, rel=1e-5, abs=1e-21)


@needs_ngspice
def test_low_band_edge_against_the_ngspice_sweep(tmp_path):
    """COUT dominates (its pole ~10× the others'): the short-circuit time-constant sum is within
    5 % of ngspice's −3 dB point."""
    body = """VDD vdd 0 5
VIN sig 0 DC 0 AC 1
CIN sig g 10u
R1 vdd g 360k
R2 g 0 140k
RD vdd d 4.7k
COUT d out 22n
RL out 0 47k
M1 d g 0 0 N W=40u L=2u
.model N nmos (level=1 vto=0.7 kp=120u lambda=0.01)"""
    circuit = parse_netlist(f"edge\n{body}\n.end\n", "edge.cir")
    column = hand_column(circuit, HandModel(circuit).solve(), SignalSetup("VIN", "out", "RL", 1e5))
    control = "ac dec 400 1 1e5\nlet mag = abs(v(out))\nwrdata edge.txt mag"
    _ngspice(_deck(body, control + "\nprint mag[1599]"), tmp_path)
    data = np.loadtxt(tmp_path / "edge.txt")
    frequency, magnitude = data[:, 0], data[:, 1]
    target = magnitude[-1] / math.sqrt(2.0)
    k = int(np.argmax(magnitude >= target))
    edge = math.exp(np.interp(math.log(target), np.log(magnitude[k - 1:k + 1]), np.log(frequency[k - 1:k + 1])))
    assert column.low_hz == pytest.approx(edge, rel=0.05)
    assert max(t.pole_hz for t in column.low_terms) > 0.9 * column.low_hz  # COUT does dominate


def test_gain_command_through_the_worker(required_ngspice_session, tmp_path):
    body, output = STAGES["gamma"]
    circuit = parse_netlist(f"dynamo light stage\n{body}\n.end\n", "gamma.cir")
    result = run_gain(circuit, required_ngspice_session)
    for quantity in ("gain", "rin", "rout"):
        values = getattr(result, quantity)
        assert values["level1"] == pytest.approx(values["sim"], rel=5e-3)
    # The body effect moves this stage's gain: the attribution names it, largest first.
    assert next(iter(result.attribution)) in ("gamma", "lambda")
    assert "gamma" in result.attribution
    assert result.band["low_hz"]["sim"] is not None


@needs_ngspice
def test_gain_json_shape(tmp_path, capsys):
    netlist = tmp_path / "stage.cir"
    netlist.write_text(f"dynamo light stage\n{STAGES['lambda'][0]}\n.end\n")
    status = main(["gain", str(netlist), "--json"])
    document = json.loads(capsys.readouterr().out)
    assert list(document) == ["file", "title", "input", "output", "frequency", "simulator", "gain", "rin", "rout",
                              "band", "attribution", "findings", "agree"]  # fmt: skip
    assert list(document["gain"]) == ["hand", "level1", "sim"]
    assert list(document["band"]) == ["low_hz", "high_hz"]
    assert list(document["band"]["low_hz"]) == ["hand", "level1", "sim"]
    assert document["input"] == "VIN" and document["output"] == "out"
    assert status == (0 if document["agree"] else 1)


def test_a_current_source_input(required_ngspice_session):
    """The input a current source: gain against the voltage across it, Rin the impedance it
    drives (RG ∥ RB here), the same definitions in all three columns."""
    circuit = parse_netlist("""current-driven pickup
VDD vdd 0 5
IIN 0 g DC 0 AC 1
RG g 0 100k
VB gb 0 2.4
RB gb g 100k
RD vdd d 4.7k
M1 d g 0 0 N W=40u L=2u
.model N nmos (level=1 vto=0.7 kp=120u lambda=0.02)
.end
""", "current.cir")  # fmt: skip
    result = run_gain(circuit, required_ngspice_session, input_name="IIN")
    assert result.rin["hand"] == pytest.approx(50e3, rel=1e-9)
    for quantity in ("gain", "rin", "rout"):
        values = getattr(result, quantity)
        assert values["level1"] == pytest.approx(values["sim"], rel=5e-3)
    # v(d) over v(0) − v(g): the current into g develops −v(g) across the source, so the sign is +.
    assert result.gain["hand"] == pytest.approx(120e-6 * 20 * 0.5 * 4.7e3, rel=1e-9)
