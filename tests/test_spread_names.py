"""`biasbridge spread`'s corner names and node rows: a corner is named by the tolerances that move
its value only, the varied quantities that move nothing are said once (and why), nodes that never
move are left out of the text tables (not the JSON), and every name is checked against the corners
themselves."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from bridge.analysis.spread import corner_cube, dc_dead_resistors, spread, with_named_corners
from bridge.cli import main
from bridge.commands.spread_defaults import Entry, Tolerances, bands
from bridge.netlist import read_netlist

# A radiosonde's humidity-sensor preamp: a bypassed common source, the sensor (RSIG) and the
# telemetry input (RL) behind coupling capacitors.
SONDE = """Radiosonde humidity preamp: bypassed common source, coupled in and out
VDD vdd 0 DC 9
VSIG sig 0 DC 0 AC 1m
RSIG sig in 2k
CIN in g 1u
R1 vdd g 1.5Meg
R2 g 0 560k
RD vdd d 8.2k
RS s 0 2.2k
CS s 0 47u
COUT d out 1u
RL out 0 47k
M1 d g s 0 NSONDE W=40u L=4u
.model NSONDE nmos (level=1 vto=0.9 kp=60u lambda=0.02 gamma=0.4 phi=0.65)
.op
.end
"""
LEAD = ["--resistors", "5", "--vto", "0.1", "--kp", "10", "--temp", "-20:70", "--samples", "200"]


@pytest.fixture()
def sonde(tmp_path: Path) -> Path:
    path = tmp_path / "sonde.cir"
    path.write_text(SONDE)
    return path


def _run(argv: list[str], capsys) -> tuple[int, str]:
    status = main(argv)
    return status, capsys.readouterr().out


def _corner_lines(text: str) -> dict[str, str]:
    """`LABEL: min at …; max at …` lines of the text output, joined across rich's wrapping."""
    flat = " ".join(line.strip() for line in text.splitlines())
    lines = {}
    for label in ("M1 id", "M1 vds − vov", "V(g)", "V(d)", "V(s)", "V(vdd)", "V(out)"):
        start = flat.find(f"{label}: min at ")
        if start >= 0:
            rest = flat[start + len(label):]
            ends = [rest.find(stop) for stop in (" V(", " M1 ", " RSIG, RL:", " saturation yield") if stop in rest]
            lines[label] = label + rest[:min(ends)]
    return lines


def test_resistors_behind_capacitors_are_left_out_of_the_corner_names_and_said_once(sonde, capsys):
    status, out = _run(["spread", str(sonde), *LEAD], capsys)
    assert status == 0
    lines = _corner_lines(out)
    assert set(lines) >= {"M1 id", "M1 vds − vov", "V(g)", "V(d)", "V(s)"}
    for label, line in lines.items():
        assert "RSIG" not in line and "RL " not in line, (label, line)
    # The gate divider's voltage is moved by R1 and R2 alone.
    assert lines["V(g)"].startswith("V(g): min at R1 +5 %, R2 −5 %; max at R1 −5 %, R2 +5 %")
    flat = " ".join(line.strip() for line in out.splitlines())
    assert flat.count("RSIG, RL: no DC effect (no DC current can flow through them") == 1


def test_the_json_keeps_every_corner_complete(sonde, capsys):
    status, out = _run(["spread", str(sonde), *LEAD, "--json"], capsys)
    data = json.loads(out)
    labels = ["RSIG", "R1", "R2", "RD", "RS", "RL", "NSONDE.vto", "NSONDE.kp", "temperature"]
    for quantities in (*data["devices"].values(), data["nodes"]):
        for extremes in quantities.values():
            for side in ("min", "max"):
                ends = extremes[f"{side}_corner_ends"]
                assert list(ends) == labels and set(ends.values()) <= {"low", "high", "nominal"}
    assert "RSIG −5 %" in data["devices"]["M1"]["id"]["min_corner"] or "RSIG +5 %" in data["devices"]["M1"]["id"][
        "min_corner"]  # fmt: skip
    assert data["no_dc_effect"] == {"no_dc_current": ["RSIG", "RL"], "no_effect_at_corners": []}


def test_every_short_name_holds_at_every_corner_it_covers(sonde):
    """A name leaves a tolerance out only where the value is the extreme at either of its ends: every
    corner matching the named ends gives the extreme (to 1e-9)."""
    circuit = read_netlist(sonde)
    varied = bands(circuit, Tolerances(resistors=Entry(5.0), vto=Entry(0.1), kp=Entry(10.0),
                                       temperature=(-20.0, 70.0)))  # fmt: skip
    result = spread(circuit, varied, samples=10, seed=0)
    k = len(varied)
    corners = result.corners.ends[1 + 2 * k:]
    solution = result.corner_solution
    checked = 0
    for values, extremes in [(solution.ids["M1"], result.devices["M1"]["id"]),
                             (solution.margins["M1"], result.devices["M1"]["margin"]),
                             *[(solution.nodes[n], e) for n, e in result.nodes.items()]]:  # fmt: skip
        for name, value in ((extremes.min_named, extremes.min), (extremes.max_named, extremes.max)):
            if name in ("nominal", "every corner (no tolerance moves it)"):
                continue
            named = dict(part.rsplit(" ", 2)[0:2] if "°C" not in part else ("temperature", part.split()[0])
                         for part in name.split(", "))  # fmt: skip
            matching = np.ones(len(corners), dtype=bool)
            for j, band in enumerate(varied):
                if band.label in named:
                    sign = -1 if named[band.label].startswith("−") or band.kind == "temperature" and float(
                        named[band.label]) == band.low else 1  # fmt: skip
                    matching &= corners[:, j] == sign
            assert matching.sum() == 2 ** (k - len(named))
            np.testing.assert_allclose(values[1 + 2 * k:][matching], value, rtol=1e-9, atol=1e-15)
            checked += 1
    assert checked >= 10


def test_dead_resistors_by_connectivity_and_by_the_numbers_agree(sonde):
    circuit = read_netlist(sonde)
    assert dc_dead_resistors(circuit) == ("RSIG", "RL")
    varied = bands(circuit, Tolerances(resistors=Entry(5.0), kp=Entry(10.0)))
    result = spread(circuit, varied, samples=10, seed=0)
    # Without the connectivity's answer, the corners find the same two (their ends change nothing).
    numbers = with_named_corners(result, ())
    assert numbers.no_dc_current == () and numbers.no_effect == ("RSIG", "RL")
    cube = corner_cube(result, result.corner_solution.nodes["d"])
    assert cube is not None and cube.shape == (2,) * len(varied)
    # A resistor that carries current is never dead: RD, RS, R1, R2.
    followed = read_netlist(sonde)
    assert not {"RD", "RS", "R1", "R2"} & set(dc_dead_resistors(followed))


def test_nodes_that_never_move_are_left_out_of_the_text_and_kept_in_the_json(sonde, capsys):
    _, out = _run(["spread", str(sonde), *LEAD], capsys)
    flat = " ".join(line.strip() for line in out.splitlines())
    for node in ("vdd", "sig", "in", "out"):
        assert not any(re.match(rf"V\({node}\)\s{{2,}}", line) for line in out.splitlines()), node  # a table row
    assert ("4 nodes left out of the tables (in --json): V(vdd) 9 V, V(sig) 0 V, V(in) 0 V, V(out) 0 V, the same "
            "at every corner and sample") in flat  # fmt: skip
    assert any(re.match(r"V\(d\)\s{2,}", line) for line in out.splitlines())
    _, out = _run(["spread", str(sonde), *LEAD, "--json"], capsys)
    assert list(json.loads(out)["nodes"]) == ["vdd", "sig", "in", "g", "d", "s", "out"]
    # With the supply varied, V(vdd) moves and has its rows again.
    _, out = _run(["spread", str(sonde), *LEAD, "--supplies", "5"], capsys)
    assert any(re.match(r"V\(vdd\)\s{2,}", line) for line in out.splitlines())
    assert "3 nodes left out" in " ".join(line.strip() for line in out.splitlines())
    # The supply's node is at its extremes whatever the other tolerances do: named by VDD alone.
    assert _corner_lines(out)["V(vdd)"] == "V(vdd): min at VDD −5 %; max at VDD +5 %"


# The radiosonde's pressure-bridge pair: two NMOS from one lot (one card), M2's gate on M1's drain.
PAIR = """Radiosonde pressure bridge: two NMOS stages from one lot
VDD vdd 0 DC 5
R1 vdd g 200k
R2 g 0 100k
RD1 vdd d1 10k
RS1 s1 0 1k
M1 d1 g s1 0 NLOT W=20u L=2u
RD2 vdd d2 15k
M2 d2 d1 0 0 NLOT W=10u L=2u
.model NLOT nmos (level=1 vto=0.8 kp=90u lambda=0.02)
.op
.end
"""


def test_a_resistor_beyond_a_gate_moves_neither_the_first_current_nor_its_corner_names(tmp_path, capsys):
    path = tmp_path / "pair.cir"
    path.write_text(PAIR)
    circuit = read_netlist(path)
    varied = bands(circuit, Tolerances(resistors=Entry(5.0), vto=Entry(0.15), kp=Entry(10.0),
                                       lambda_=Entry(20.0)))  # fmt: skip
    assert [b.label for b in varied if b.kind == "model"] == ["NLOT.vto", "NLOT.kp", "NLOT.lambda"]  # one lot
    result = spread(circuit, varied, samples=10, seed=0)
    rd2 = next(s for s in result.sensitivity["M1"] if s.band == "RD2")
    assert rd2.delta == 0.0  # the solver's last digits (≈ 3e-19 A) are not an effect
    assert next(s for s in result.sensitivity["M2"] if s.band == "RD2").delta < -1e-6
    for quantity in ("id", "margin"):
        named = result.devices["M1"][quantity]
        assert "RD2" not in named.min_named and "RD2" not in named.max_named
        assert "RD2" in result.devices["M2"][quantity].min_named
    _, out = _run(["spread", str(path), "--resistors", "5", "--lambda", "20", "--samples", "50"], capsys)
    assert re.search(r"^NLOT\.lambda +0\.02 1/V +±20 % +0\.016 1/V +0\.024 1/V$", out, re.MULTILINE), out
