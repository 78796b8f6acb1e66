"""The hand model's recognition takes shortcuts that must give what the long way gives, to the bit:
Kron's reduction skips nodes whose elimination would subtract exact zeros
(``hand_circuit._isolated``), the gate's equation is read off G where nothing is eliminated
(``_first_row``), and an affine stage's voltages with ID = 0 are solved once per model.

The long way is computed here beside the short one, on the example netlists, the batch corpus
and random networks (exact zeros, negative, huge, tiny and subnormal conductances).
"""

from __future__ import annotations

import random
from pathlib import Path

import numpy as np
import pytest

from bridge.analysis import hand_circuit
from bridge.analysis.hand_circuit import (
    HandAnalysisError,
    _dc_circuit,
    _first_row,
    _isolated,
    _Network,
    _recognise,
    _reduce,
)
from bridge.analysis.reduction import kron
from bridge.netlist import NetlistError, read_netlist

REPO = Path(__file__).resolve().parents[1]
NETLISTS = sorted((REPO / "netlists").glob("*.cir")) + sorted((REPO / "tests" / "batch_corpus").glob("*.cir"))


def _full_kron(net: _Network, kept: list[str], ports: list[str]):
    """Kron's reduction with every kept node that is not a port eliminated: the long way."""
    internal = [net.index[n] for n in kept if n not in set(ports)]
    return kron(net.conductance, net.injection, [net.index[n] for n in ports], internal, net.plain)


def _same_bits(short, full) -> bool:
    return all(a.shape == b.shape and a.dtype == b.dtype and a.tobytes() == b.tobytes() for a, b in zip(short, full))


def _same_first_row(net: _Network, kept: list[str], ports: list[str], full) -> bool:
    """``_first_row`` against the full reduction's first row and injection, and the row's sum
    (the gate terminal's test for a path to the rails)."""
    row, injected = _first_row(net, kept, ports)
    y, jt = full
    same_sum = np.array(row.sum()).tobytes() == np.array(y[0].sum()).tobytes()
    same_injection = type(injected) is type(jt[0]) and np.array(injected).tobytes() == np.array(jt[0]).tobytes()
    return same_injection and same_sum and _same_bits((row,), (y[0],))


def test_reductions_of_the_examples_match_the_full_elimination(monkeypatch) -> None:
    seen = {"calls": 0, "skipped": 0}

    def compared(net, kept, ports):
        short = _reduce(net, kept, ports)
        full = _full_kron(net, kept, ports)
        assert _same_bits(short, full)
        assert _same_first_row(net, kept, ports, full)
        internal = [net.index[n] for n in kept if n not in set(ports)]
        seen["calls"] += 1
        seen["skipped"] += bool(internal) and _isolated(net, [net.index[n] for n in ports], internal)
        return short

    monkeypatch.setattr(hand_circuit, "_reduce", compared)
    for path in NETLISTS:
        try:
            circuit = read_netlist(str(path))
            _recognise(_dc_circuit(circuit, frozenset()))
        except (NetlistError, HandAnalysisError):
            continue
    # The divider stages' channel views skip their gate; the feedback stage's may not.
    assert seen["skipped"] >= 5 and seen["calls"] > seen["skipped"]


_VALUES = (0.0, 1e-3, -1e-3, 2.5e-4, 1.0, 1e200, -1e200, 1e-300, 5e-324, 1e-310, 3.7e5)


def _random_network(rng: random.Random) -> tuple[_Network, list[str], list[str]]:
    size = rng.randint(2, 6)
    nodes = [f"n{k}" for k in range(size)]
    rows = [[0.0] * size for _ in range(size)]
    for a in range(size):
        rows[a][a] = rng.choice(_VALUES[1:]) if rng.random() < 0.9 else 0.0
        for b in range(a + 1, size):
            if rng.random() < 0.35:
                g = rng.choice(_VALUES[1:])
                rows[a][b] -= g
                rows[b][a] -= g if rng.random() < 0.95 else 2 * g  # now and then not symmetric
    injection = np.array([rng.choice(_VALUES) for _ in range(size)], dtype=float)
    net = _Network(nodes, {n: k for k, n in enumerate(nodes)}, np.array(rows, dtype=float), injection,
                   np.zeros(size), rows)  # fmt: skip
    ports = rng.sample(nodes, rng.randint(1, size - 1))
    kept = [n for n in nodes if n in ports or rng.random() < 0.85]
    return net, kept, ports


@pytest.mark.parametrize("seed", range(4))
def test_reductions_of_random_networks_match_the_full_elimination(seed: int) -> None:
    rng = random.Random(seed)
    skipped = 0
    with np.errstate(all="ignore"):
        for _ in range(1500):
            net, kept, ports = _random_network(rng)
            try:
                full = _full_kron(net, kept, ports)
            except np.linalg.LinAlgError:
                with pytest.raises(np.linalg.LinAlgError):
                    _reduce(net, kept, ports)
                continue
            short = _reduce(net, kept, ports)
            assert _same_bits(short, full), (net.plain, kept, ports)
            assert _same_first_row(net, kept, ports, full), (net.plain, kept, ports)
            internal = [net.index[n] for n in kept if n not in set(ports)]
            skipped += bool(internal) and _isolated(net, [net.index[n] for n in ports], internal)
    assert skipped > 50  # the shortcut was taken, not only the long way


def test_a_node_with_a_zero_or_subnormal_equation_is_eliminated_the_long_way() -> None:
    rows = [[1e-3, 0.0], [0.0, 0.0]]
    net = _Network(["d", "g"], {"d": 0, "g": 1}, np.array(rows), np.array([1e-3, 0.0]), np.zeros(2), rows)
    assert not _isolated(net, [0], [1])
    with pytest.raises(np.linalg.LinAlgError):
        _reduce(net, ["d", "g"], ["d"])  # the singular gate is still found
    rows = [[1e-3, 0.0], [0.0, 5e-324]]
    net = _Network(["d", "g"], {"d": 0, "g": 1}, np.array(rows), np.array([1e-3, 1.0]), np.zeros(2), rows)
    assert not _isolated(net, [0], [1])  # 1/g overflows
    rows = [[1e-3, -1e-6], [-1e-6, 2e-3]]
    net = _Network(["d", "g"], {"d": 0, "g": 1}, np.array(rows), np.array([1e-3, 1.0]), np.zeros(2), rows)
    assert not _isolated(net, [0], [1])  # coupled to the port


def _examples_with_affine_stages():
    from bridge.analysis.hand import HandModel

    for path in NETLISTS:
        try:
            model = HandModel(read_netlist(str(path)))
        except (NetlistError, HandAnalysisError):
            continue
        _, stage, reason = model._recognised
        if stage is not None and reason is None and stage.held_node is None:
            yield path, model


def test_the_base_voltages_are_solved_once_for_every_solve_of_a_model(monkeypatch) -> None:
    """The plain solve and the one-effect re-solves of an affine stage read the network's
    voltages with ID = 0 from one solve; each gives what a model of its own (solving them
    afresh) gives, to the bit."""
    from bridge.analysis import hand
    from bridge.analysis.hand import HandModel

    solved = []
    original = hand._solve_network

    def counted(net, kept, current):
        if current == 0.0 and kept is net.nodes:
            solved.append(net)
        return original(net, kept, current)

    monkeypatch.setattr(hand, "_solve_network", counted)
    stages = list(_examples_with_affine_stages())
    assert len(stages) >= 5
    compared = 0
    for path, model in stages:
        solved.clear()
        plain = model.solve(working=False)
        try:
            again = [model.solve(effects={effect}, working=False, start=plain.node_voltages)
                     for effect in ("lambda", "gamma")]  # fmt: skip
        except HandAnalysisError:  # no point with an effect (a 1e300 V supply): nothing to share
            continue
        assert len(solved) == 1, path
        compared += 1
        alone = [HandModel(model.circuit).solve(effects={effect}, working=False, start=plain.node_voltages)
                 for effect in ("lambda", "gamma")]  # fmt: skip
        assert [(s.node_voltages, s.devices) for s in again] == [(s.node_voltages, s.devices) for s in alone], path
        assert HandModel(model.circuit).solve(working=False).node_voltages == plain.node_voltages
    assert compared >= 5
