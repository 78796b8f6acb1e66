"""The one linear reduction (bridge/analysis/reduction.py): the DC solver's Schur reduction and
the hand analysis's Kron reduction are the same arithmetic, dense or sparse.

References: the reduced systems are checked against numpy's solve of the whole system (LAPACK)
and against the Schur complement written out with explicit inverses; the rank test against
numpy's matrix_rank tolerance (σmin > σmax·n·ε).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.sparse import csr_matrix

from bridge.analysis import dcsolve, reduction
from bridge.analysis.dcsolve import level1_model
from bridge.analysis.hand import hand_analysis
from bridge.analysis.reduction import (
    full_rank,
    kron,
    reduce_network,
    schur_complement,
    solve_block,
    solve_each,
    surely_regular,
)
from bridge.netlist import parse_netlist

# A bicycle dynamo light: a divider-biased common source driving the lamp's current sink, with
# a resistor string on the drain (several internal nodes for the reduction to eliminate).
DYNAMO = """bicycle dynamo tail light driver
VDD vdd 0 6
R1 vdd g 220k
R2 g 0 100k
RA vdd a 1.2k
RB a b 1.5k
RC b d 2.2k
RS s 0 470
M1 d g s 0 nled W=20u L=2u
.model nled nmos (vto=0.8 kp=110u lambda=0.02 gamma=0.4)
.op
.end
"""


def _ladder(size: int, seed: int) -> np.ndarray:
    """The node equations of a random resistor ladder with a conductance to ground at each node:
    symmetric, diagonally dominant, regular."""
    rng = np.random.default_rng(seed)
    g = np.zeros((size, size))
    for k in range(size):
        g[k, k] += rng.uniform(1e-5, 1e-3)  # to ground
        if k + 1 < size:
            series = rng.uniform(1e-4, 1e-2)
            g[k, k] += series
            g[k + 1, k + 1] += series
            g[k, k + 1] -= series
            g[k + 1, k] -= series
    return g


@pytest.mark.parametrize("sparse", [False, True])
def test_kron_is_the_schur_complement_written_out(sparse):
    g = _ladder(12, 1)
    j = np.random.default_rng(2).uniform(-1e-3, 1e-3, 12)
    ports, internal = [3, 7], [0, 1, 2, 4, 5, 6, 8, 9, 10, 11]
    y, jt = kron(csr_matrix(g) if sparse else g, j, ports, internal)
    inverse = np.linalg.inv(g[np.ix_(internal, internal)])
    expected_y = g[np.ix_(ports, ports)] - g[np.ix_(ports, internal)] @ inverse @ g[np.ix_(internal, ports)]
    expected_j = j[ports] - g[np.ix_(ports, internal)] @ inverse @ j[internal]
    np.testing.assert_allclose(y, expected_y, rtol=1e-12)
    np.testing.assert_allclose(jt, expected_j, rtol=1e-12)
    # The reduced system gives the ports' voltages of the whole one.
    whole = np.linalg.solve(g, j)
    np.testing.assert_allclose(np.linalg.solve(y, jt), whole[ports], rtol=1e-12)


def test_kron_with_plain_rows_gives_the_same_bits():
    g = _ladder(8, 4)
    j = np.arange(8.0) * 1e-4
    plain = g.tolist()
    for ports, internal in (([0, 5], [1, 2, 3, 4, 6, 7]), ([2], [0, 1]), ([1, 6], [])):
        with_rows = kron(g, j, ports, internal, plain)
        without = kron(g, j, ports, internal)
        assert with_rows[0].tolist() == without[0].tolist() and with_rows[1].tolist() == without[1].tolist()


def test_solve_block_dense_and_sparse_agree_with_numpy():
    g = _ladder(10, 5)
    rhs = np.linspace(-1.0, 1.0, 10)
    factors: dict = {}
    whole = solve_block(csr_matrix(g), rhs, factors=factors)
    np.testing.assert_allclose(whole, np.linalg.solve(g, rhs), rtol=1e-12)
    assert "whole" in factors  # the whole matrix's LU is kept for the next solve
    rows = [1, 2, 5, 8]
    expected = np.linalg.solve(g[np.ix_(rows, rows)], rhs[rows])
    assert solve_block(g, rhs[rows], rows, g.tolist()).tolist() == expected.tolist()
    np.testing.assert_allclose(solve_block(csr_matrix(g), rhs[rows], rows), expected, rtol=1e-12)
    with pytest.raises(np.linalg.LinAlgError):
        solve_block(np.zeros((2, 2)), np.ones(2))


def test_solve_each_is_solve_block_row_by_row_to_the_bit():
    g = _ladder(6, 6)
    rhs = np.random.default_rng(7).normal(size=(9, 6))
    assert solve_each(g, rhs).tolist() == [solve_block(g, row).tolist() for row in rhs]


def test_the_solver_reduction_recovers_the_whole_solution():
    circuit = parse_netlist(DYNAMO, "dynamo.cir")
    net = dcsolve._build_network(circuit, level1_model)
    reduced = reduce_network(net, 0.0)
    names = ("0", *net.nodes, *(f"i({b.lower()})" for b in net.branch_names))
    assert {names[k] for k in reduced.kept} == {"d", "g", "s"}  # a, b, vdd and i(vdd) eliminated
    # The linear system alone (the MOSFET's terminals held at chosen voltages) solved both ways.
    full = net.linear[1:, 1:]
    sources = net.source_defaults
    kept = [k - 1 for k in reduced.kept]
    held = np.array([3.1, 1.9, 0.6])  # the kept unknowns (d, g, s), as Newton would have them
    eliminated = reduced.recover_sources @ sources - np.array(reduced.recover_kept) @ held
    rest = [k - 1 for k in reduced.eliminated]
    # The rows of the eliminated unknowns hold with the kept ones at those values.
    residual = full[np.ix_(rest, rest)] @ eliminated + full[np.ix_(rest, kept)] @ held
    np.testing.assert_allclose(residual, (net.source_columns[1:] @ sources)[rest], atol=1e-12)


def test_hand_and_solver_reduce_through_one_schur_complement(monkeypatch):
    """The hand's Kron reduction and the DC solver's Schur reduction are one function: both
    reach reduction.schur_complement (before, each carried its own elimination)."""
    callers = []
    real = reduction.schur_complement

    def counted(*args, **kwargs):
        import inspect

        callers.append(inspect.stack()[1].function)
        return real(*args, **kwargs)

    monkeypatch.setattr(reduction, "schur_complement", counted)
    circuit = parse_netlist(DYNAMO, "dynamo.cir")
    hand = hand_analysis(circuit)
    assert hand.closed_form
    net = dcsolve._build_network(circuit, level1_model)
    net.plain_reduction  # noqa: B018 - the solver's reduction, built on first use
    assert "kron" in callers and "reduce_network" in callers


def test_full_rank_refuses_a_block_that_only_rounds_away_from_singular():
    assert full_rank(np.array([[2.0, 1.0], [1.0, 3.0]]))
    nearly = np.array([[1.0, 1.0, 0.0], [1.0, 1.0 + 1e-17, 0.0], [0.0, 0.0, 1.0]])
    assert not full_rank(nearly)
    assert not full_rank(np.ones((3, 3)))


def test_schur_complement_of_one_right_hand_side_is_a_vector():
    g = _ladder(5, 8)
    j = np.ones(5)
    matrix, source_map, on_kept, on_sources = schur_complement(
        g[:2, :2], g[:2, 2:], g[2:, :2], g[2:, 2:], j[:2], j[2:]
    )
    assert source_map.shape == (2,) and on_sources.shape == (3,) and on_kept.shape == (3, 2)
    np.testing.assert_allclose(np.linalg.solve(matrix, source_map), np.linalg.solve(g, j)[:2], rtol=1e-12)


def test_small_blocks_passed_without_the_rank_test_would_pass_it() -> None:
    # surely_regular lets the rank test skip the SVD rank test of a 1×1 or 2×2 block; whatever it
    # passes, the test itself must pass (singular[-1] > singular[0]·n·ε).
    rng = np.random.default_rng(3)
    blocks = [np.array([[v]]) for v in (1.0, -3e-300, 5e-324, 1e300, 0.0, -0.0, math.inf, math.nan)]
    for scale in (1.0, 1e-160, 1e-100, 1e100, 1e160):
        for gap in (1.0, 1e-5, 1e-9, 1e-11, 1e-15, 1e-17, 0.0):
            for _ in range(20):
                u, _, vt = np.linalg.svd(rng.normal(size=(2, 2)))
                blocks.append(scale * (u @ np.diag([1.0, gap]) @ vt))
    blocks += [np.array([[1.0, 1.0], [1.0, 1.0]]), np.array([[0.0, 1.0], [0.0, 0.0]]),
               np.array([[1.0, 2.0], [math.nan, 1.0]]), np.array([[1.0, 5e-324], [5e-324, 1e-300]])]  # fmt: skip
    passed = 0
    for block in blocks:
        if surely_regular(block):
            passed += 1
            singular = np.linalg.svd(block, compute_uv=False)
            assert singular[-1] > singular[0] * block.shape[0] * np.finfo(float).eps, block
    assert passed >= 60  # the well-conditioned blocks of ordinary size
    assert not surely_regular(np.eye(3))  # larger blocks are left to the SVD


def test_the_attribution_re_solves_share_one_reduction(monkeypatch):
    """The hand's one-effect re-solves (λ alone, γ alone) run on networks that differ only in
    their devices: the linear part is reduced once for both, not once per re-solve, and the
    answers are those of a model that reduced its own network (to the bit). The numerical path
    is asked for (``closed_form=False``): an affine stage's re-solves reduce no network at all
    (``hand._affine_with_effects``)."""
    from bridge.analysis.hand import HandModel

    circuit = parse_netlist(DYNAMO, "dynamo.cir")
    reductions = []
    real = dcsolve._reduce

    def counted(*args, **kwargs):
        reductions.append(args[1])  # the diagonal gmin: 0 for the plain reduction
        return real(*args, **kwargs)

    monkeypatch.setattr(dcsolve, "_reduce", counted)
    model = HandModel(circuit)
    plain = model.solve()
    assert plain.closed_form  # the plain hand solves no network: the re-solves are the first
    shared = {effect: model.solve(effects={effect}, closed_form=False, working=False, start=plain.node_voltages)
              for effect in ("lambda", "gamma")}
    assert reductions == [0.0]
    for effect, solution in shared.items():
        alone = HandModel(circuit).solve(effects={effect}, closed_form=False, working=False,
                                         start=plain.node_voltages)
        assert solution.node_voltages == alone.node_voltages
        assert solution.devices == alone.devices


@pytest.mark.parametrize("size", [1, 2, 3, 4, 6, 9])
def test_solve_system_is_numpy_solve_to_the_bit(size: int) -> None:
    # reference: np.linalg.solve itself, whose gufunc solve_system calls without its checks
    import warnings

    from bridge.analysis.linear import solve_system

    rng = np.random.default_rng(300 + size)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # neither path may warn, singular or not
        for columns in (None, 1, 3):
            for _ in range(10):
                matrix = rng.normal(size=(size, size)) * 10.0 ** rng.integers(-12, 4, size=(size, 1))
                rhs = rng.normal(size=size if columns is None else (size, columns))
                ours, reference = solve_system(matrix, rhs), np.linalg.solve(matrix, rhs)
                assert ours.shape == reference.shape and ours.tobytes() == reference.tobytes()
        stack = rng.normal(size=(4, size, size))
        right = rng.normal(size=(4, size, 1))
        assert solve_system(stack, right).tobytes() == np.linalg.solve(stack, right).tobytes()
        with pytest.raises(np.linalg.LinAlgError):  # an exactly zero pivot, as numpy says it
            solve_system(np.ones((size, size)) if size > 1 else np.zeros((1, 1)), np.ones((size, 2)))
        with pytest.raises(np.linalg.LinAlgError):
            solve_system(np.zeros((size, size)), np.ones(size))
    # other types go to numpy's own solve: integers come back as floats
    assert solve_system(np.eye(2, dtype=int), np.array([3, 4])).tolist() == [3.0, 4.0]


@pytest.mark.parametrize("callers", ["raise", "ignore", "warn"])
def test_solve_system_solves_in_numpys_error_state_whatever_the_callers(callers: str) -> None:
    # reference: np.linalg.solve itself under the same caller's state: an overflow inside the
    # solve passes silently (inf), an exactly singular matrix raises LinAlgError, and the
    # caller's state is in force again afterwards, after an answer and after a refusal alike
    import warnings

    from bridge.analysis.linear import solve_dense, solve_system

    tiny = np.array([[1e-300, 0.0, 0.0], [0.0, 2.0, 1.0], [0.0, 1.0, 2.0]])
    rhs = np.array([1e300, 1.0, -1.0])
    with np.errstate(all=callers), warnings.catch_warnings():
        warnings.simplefilter("error")
        state = np.geterr()
        reference = np.linalg.solve(tiny, rhs)
        assert math.isinf(reference[0])
        assert solve_system(tiny, rhs).tobytes() == reference.tobytes()
        assert solve_system(tiny, rhs[:, None]).tobytes() == np.linalg.solve(tiny, rhs[:, None]).tobytes()
        assert np.geterr() == state
        with pytest.raises(np.linalg.LinAlgError):
            solve_system(np.ones((3, 3)), rhs)
        assert np.geterr() == state
        # Newton's LAPACK path: the same state, a singular system answered None
        assert solve_dense(np.ones((6, 6)).tolist(), [1.0] * 6) is None
        assert np.geterr() == state


def test_a_singular_resistive_network_still_raises_through_the_block_solves() -> None:
    # reference: the Kron reduction's internal block written out: [[1, -1], [-1, 1]] is singular
    matrix = np.array([[2.0, -1.0, -1.0], [-1.0, 1.0, -1.0], [-1.0, -1.0, 1.0]])
    with pytest.raises(np.linalg.LinAlgError):
        kron(matrix, np.ones(3), [0], [1, 2])
    with pytest.raises(np.linalg.LinAlgError):
        solve_block(matrix, np.ones(2), [1, 2])
    with pytest.raises(np.linalg.LinAlgError):
        solve_each(np.ones((2, 2)), np.ones((3, 2)))
