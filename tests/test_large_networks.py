"""Stages with thousands of resistors: right answers, bounded memory, and the card limit.

Scenario: the driver of a bicycle dynamo light, an NMOS common-source stage whose gate is
fed from a long resistor ladder (a tapped string of equal resistors) or a resistive mesh
(a sensor grid on a greenhouse board). The reference is ngspice run on the same file
(`ngspice -b`, tests/conftest.py) and the divider algebra written out here.
"""

from __future__ import annotations

import math
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
from conftest import needs_ngspice, ngspice_batch_op

from bridge.analysis.dcsolve import solve_operating_point
from bridge.analysis.hand import HandModel
from bridge.analysis.linear import condition_estimate, sparse_factor, stamp_rows, stamped
from bridge.analysis.sweep import MAX_SWEEP_ELEMENTS
from bridge.check import check_circuit
from bridge.cli import main
from bridge.netlist import NetlistError, read_netlist
from bridge.netlist.build import MAX_DEVICES
from bridge.netlist.source import MAX_CARDS

VDD, VTO, KP, W, L = 6.0, 0.8, 110e-6, 40e-6, 2e-6
RD = 560.0  # Ω: the stage sits in saturation (VD ≈ 3 V > VOV ≈ 2.2 V)
MODEL = f".model NLED nmos (level=1 vto={VTO} kp={KP} lambda=0.03 gamma=0.35 phi=0.7)"


def ladder_netlist(path: Path, resistors: int) -> Path:
    """RD and the MOSFET, and `resistors` − 1 equal 1 kΩ resistors in a string from vdd to
    ground with the gate at tap `resistors // 2`: `resistors` resistors in all."""
    links = resistors - 1
    nodes = ["vdd"] + [f"t{k}" for k in range(1, links)] + ["0"]
    nodes[links // 2] = "gate"
    lines = [
        "Dynamo light driver: common source, gate from a tapped resistor string",
        f"VDD vdd 0 DC {VDD}",
        f"RD vdd drain {RD}",
        f"M1 drain gate 0 0 NLED W={W} L={L}",
        MODEL,
    ]
    lines += [f"RS{k} {nodes[k]} {nodes[k + 1]} 1k" for k in range(links)]
    lines += [".op", ".end"]
    path.write_text("\n".join(lines) + "\n")
    return path


def mesh_netlist(path: Path, side: int) -> Path:
    """RD and the MOSFET, the gate at the centre of a side × side grid of 2.2 kΩ / 3.3 kΩ
    resistors whose corners are vdd and ground."""

    def name(i: int, j: int) -> str:
        if (i, j) == (0, 0):
            return "vdd"
        if (i, j) == (side - 1, side - 1):
            return "0"
        if (i, j) == (side // 2, side // 2):
            return "gate"
        return f"g{i}_{j}"

    lines = [
        "Greenhouse sensor board: common source, gate from a resistive grid",
        f"VDD vdd 0 DC {VDD}",
        f"RD vdd drain {RD}",
        f"M1 drain gate 0 0 NLED W={W} L={L}",
        MODEL,
    ]
    for i in range(side):
        for j in range(side):
            if i + 1 < side:
                lines.append(f"RH{i}_{j} {name(i, j)} {name(i + 1, j)} 2.2k")
            if j + 1 < side:
                lines.append(f"RV{i}_{j} {name(i, j)} {name(i, j + 1)} 3.3k")
    lines += [".op", ".end"]
    path.write_text("\n".join(lines) + "\n")
    return path


@needs_ngspice
def test_two_thousand_resistor_ladder_agrees_with_ngspice(tmp_path, required_ngspice_session):
    path = ladder_netlist(tmp_path / "ladder.cir", 2000)
    circuit = read_netlist(path)
    assert len(circuit.elements_of("resistor")) == 2000
    result = check_circuit(circuit, required_ngspice_session, tolerance=0.05)

    # The level-1 column against ngspice run on the file itself, every one of the 1,999 nodes.
    printed = ngspice_batch_op(path)
    assert len(result.nodes) == 2 + 1998  # vdd, drain and the taps (ground is not listed)
    for node, columns in result.nodes.items():
        assert columns.level1 == pytest.approx(printed[node], abs=1e-6), f"V({node})"
        assert columns.sim == pytest.approx(printed[node], rel=2e-6, abs=1e-9), f"V({node})"
    assert not [f for f in result.findings if f.code.startswith("solver")]

    # The hand column against the divider and the square law, written out: 1,999 string
    # resistors, the gate 1,000 of them above ground.
    gate = VDD * 1000 / 1999
    k = KP * W / L
    current = k / 2 * (gate - VTO) ** 2
    assert result.closed_form
    assert result.nodes["gate"].hand == pytest.approx(gate, rel=1e-9)
    assert result.devices["M1"].quantities["id"].hand == pytest.approx(current, rel=1e-9)
    assert result.nodes["drain"].hand == pytest.approx(VDD - RD * current, rel=1e-9)
    assert result.nodes["t500"].hand == pytest.approx(VDD * 1499 / 1999, rel=1e-9)
    # The attribution re-solves (numerical path) ran: λ raises id, γ does nothing (source on bulk).
    attribution = result.devices["M1"].attribution
    assert attribution["lambda"] > 0
    assert abs(attribution["gamma"]) < 1e-9


def test_large_ladder_is_solved_without_dense_matrices(tmp_path):
    """3,000 resistors: a dense 3,000² matrix alone is 72 MB; every own solve (hand closed form,
    its numerical path with each effect, level-1) together stays far below that."""
    circuit = read_netlist(ladder_netlist(tmp_path / "ladder.cir", 3000))
    tracemalloc.start()
    try:
        model = HandModel(circuit)
        hand = model.solve()
        numerical = model.solve(closed_form=False)
        with_lambda = model.solve(effects={"lambda"}, working=False, start=hand.node_voltages)
        level1 = solve_operating_point(circuit)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 40e6, f"peak {peak / 1e6:.0f} MB"
    assert hand.closed_form and not numerical.closed_form
    for node, value in hand.node_voltages.items():
        assert numerical.node_voltages[node] == pytest.approx(value, rel=1e-9, abs=1e-12), node
    assert with_lambda.devices["M1"].id > hand.devices["M1"].id
    assert level1.voltage("gate") == pytest.approx(VDD * 1500 / 2999, rel=1e-6)


def test_mesh_numerical_path_matches_the_closed_form(tmp_path):
    """A 40 × 40 grid (3,120 resistors, 1,600 nodes, every inner node joined to four): the
    sparse numerical path lands on the closed form's answer."""
    circuit = read_netlist(mesh_netlist(tmp_path / "mesh.cir", 40))
    model = HandModel(circuit)
    closed = model.solve()
    numerical = model.solve(closed_form=False)
    assert closed.closed_form
    assert any("numerically" in step.text for step in numerical.steps)
    for node, value in closed.node_voltages.items():
        assert numerical.node_voltages[node] == pytest.approx(value, rel=1e-9, abs=1e-12), node
    assert numerical.devices["M1"].id == pytest.approx(closed.devices["M1"].id, rel=1e-9)


def test_condition_estimate_matches_numpy_on_a_string():
    """The 1-norm condition estimate used in place of the SVD on large systems, against numpy's
    exact 1-norm condition number of the same matrix (a grounded string of 300 conductances)."""
    size = 300
    rows = stamp_rows(size)
    for k in range(size):
        rows[k][k] += 2.0 if k + 1 < size else 1.0
        if k + 1 < size:
            rows[k][k + 1] -= 1.0
            rows[k + 1][k] -= 1.0
    matrix = stamped(rows, size)
    dense = matrix.toarray()
    estimate = condition_estimate(matrix, sparse_factor(matrix))
    assert estimate == pytest.approx(np.linalg.cond(dense, 1), rel=1e-6)
    with pytest.raises(np.linalg.LinAlgError):
        sparse_factor(stamped(stamp_rows(size), size))  # all zero: exactly singular


def test_card_limit_refuses_with_a_location(tmp_path):
    path = ladder_netlist(tmp_path / "long.cir", 12_000)
    with pytest.raises(NetlistError) as info:
        read_netlist(path)
    assert MAX_CARDS == 10_000
    assert f"more than {MAX_CARDS} cards" in info.value.message
    # Title, then VDD, RD, M1, .model: the 10,001st card is on line 10,002.
    assert (info.value.location.file, info.value.location.line) == (str(path), MAX_CARDS + 2)
    assert math.isfinite(info.value.location.column)


def test_sweep_past_its_element_limit_is_refused_with_a_location(tmp_path, capsys):
    # VDD, RD, M1 and the string: MAX_SWEEP_ELEMENTS + 1 elements, the last on the last card line.
    path = ladder_netlist(tmp_path / "sweep.cir", MAX_SWEEP_ELEMENTS - 1)
    assert len(read_netlist(path).elements) == MAX_SWEEP_ELEMENTS + 1
    assert main(["sweep", str(path)]) == 2
    err = capsys.readouterr().err
    last = MAX_SWEEP_ELEMENTS + 1 + 2  # title, VDD, RD, M1, .model, then the string from line 6
    assert err.startswith(f"{path}:{last}:1: `sweep` takes at most {MAX_SWEEP_ELEMENTS} elements")
    assert "Traceback" not in err


@needs_ngspice
def test_network_of_device_terminals_only_is_solved_without_elimination(tmp_path):
    """100 divider-biased stages and a MOSFET on the supply node: every node is a device
    terminal (201 nodes, 202 unknowns, past linear.SPARSE_FROM), so there is nothing to
    eliminate and Newton solves the whole system through a sparse LU. The level-1 answer
    against `ngspice -b` on the same file."""
    lines = ["Dynamo light bank: a hundred dimmer stages", f"VDD vdd 0 DC {VDD}", MODEL,
             f"MX vdd s0 0 0 NLED W={W} L={L}"]
    for k in range(100):
        lines += [f"RD{k} vdd d{k} 22k", f"RA{k} vdd s{k} {100 + k}k", f"RB{k} s{k} 0 100k",
                  f"M{k} d{k} s{k} 0 0 NLED W={W} L={L}"]
    path = tmp_path / "bank.cir"
    path.write_text("\n".join(lines + [".op", ".end"]) + "\n")
    circuit = read_netlist(path)
    point = solve_operating_point(circuit)
    printed = ngspice_batch_op(path)
    for node in ("vdd", "s0", "d0", "s57", "d57", "d99"):
        assert point.voltage(node) == pytest.approx(printed[node], abs=1e-6), node


def test_subcircuit_instances_past_the_element_limit_are_refused_at_the_instance(tmp_path):
    """A 100-resistor tap cell instantiated 2,000 times: some 2,100 cards, 200,000 elements once
    flattened. Refused at the instance that crosses the limit (the 100th, X99, passes 10,000)."""
    lines = ["Dynamo light: a string of tap cells", f"VDD vdd 0 DC {VDD}", ".subckt cell a b"]
    lines += [f"R{k} {'a' if k == 0 else f'i{k}'} {'b' if k == 99 else f'i{k + 1}'} 10" for k in range(100)]
    lines += [".ends", f"RD vdd drain {RD}", f"M1 drain gate 0 0 NLED W={W} L={L}", MODEL]
    taps = ["vdd"] + [f"t{k}" for k in range(1, 2000)] + ["0"]
    taps[1000] = "gate"
    first = len(lines) + 1
    lines += [f"X{k} {taps[k]} {taps[k + 1]} cell" for k in range(2000)]
    path = tmp_path / "cells.cir"
    path.write_text("\n".join(lines + [".op", ".end"]) + "\n")
    with pytest.raises(NetlistError) as info:
        read_netlist(path)
    assert f"with `X99` the flattened circuit has more than {MAX_CARDS} elements" in info.value.message
    assert (info.value.location.file, info.value.location.line) == (str(path), first + 99)


def test_more_transistors_than_the_device_limit_are_refused_at_the_first_too_many(tmp_path):
    lines = ["Dynamo light bank: divider-biased dimmer stages", f"VDD vdd 0 DC {VDD}", MODEL]
    for k in range(MAX_DEVICES + 1):
        lines += [f"RD{k} vdd d{k} 22k", f"RA{k} vdd s{k} 100k", f"RB{k} s{k} 0 100k",
                  f"M{k} d{k} s{k} 0 0 NLED W={W} L={L}"]
    path = tmp_path / "bank.cir"
    path.write_text("\n".join(lines + [".op", ".end"]) + "\n")
    with pytest.raises(NetlistError) as info:
        read_netlist(path)
    assert f"more than {MAX_DEVICES} transistors and diodes (M{MAX_DEVICES} is number" in info.value.message
    # Title, VDD, .model, then four cards a stage with the MOSFET last.
    assert (info.value.location.file, info.value.location.line) == (str(path), 3 + 4 * (MAX_DEVICES + 1))
