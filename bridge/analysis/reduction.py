"""One linear reduction: a regular block of a linear system eliminated onto the unknowns that
matter (a Schur complement; Kron's reduction, for a network), the eliminated ones recovered
from those, and the solves of a block of such a system. Dense arrays, or a sparse LU from
``linear.SPARSE_FROM`` unknowns on.

Split the unknowns into kept (k) and eliminated (r) ones; with A_rr regular,

    A·x = B·s   ⇔   (A_kk − A_kr·A_rr⁻¹·A_rk)·x_k = (B_k − A_kr·A_rr⁻¹·B_r)·s
                    x_r = A_rr⁻¹·B_r·s − A_rr⁻¹·A_rk·x_k

Two users, one arithmetic (``schur_complement``):

* the DC solver (``dcsolve``) folds the linear part of its MNA system onto the unknowns its
  nonlinear devices touch, once per network (``reduce_network`` → ``Reduction``), Newton solves
  that small system and recovers the rest after every iteration; the block it eliminates must
  pass a rank test (an SVD; a condition estimate from the sparse LU), else it keeps more;
* the hand analysis reduces its resistive network (node equations G·v = J on its free nodes)
  onto the device terminals (``kron``) for the Thevenin views its closed forms are written
  from, and solves it or a block of it (``solve_block``, ``solve_each``). Its blocks are not
  rank-tested: an exactly singular block raises np.linalg.LinAlgError and the hand says the
  network is singular.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Protocol

import numpy as np

from ..records import record
from .linear import SPARSE_FROM, condition_estimate, solve_system, sparse_factor

__all__ = [
    "Reduction",
    "full_rank",
    "keep_all_sparse",
    "kron",
    "reduce_large",
    "reduce_network",
    "schur_complement",
    "schur_reduction",
    "solve_block",
    "solve_each",
    "surely_regular",
]

_EPS = float(np.finfo(float).eps)  # machine epsilon, 2.2e-16


# --- the elimination --------------------------------------------------------------------------


def schur_complement(kk, kr, rk: np.ndarray, rr, kept_sources: np.ndarray, rest_sources: np.ndarray, factor=None):
    """Eliminate the `rr` block: (matrix, source_map, on_kept, on_sources), where

        matrix = kk − kr·rr⁻¹·rk,   source_map = kept_sources − kr·rr⁻¹·rest_sources,
        on_kept = rr⁻¹·rk,          on_sources = rr⁻¹·rest_sources

    (the eliminated unknowns are on_sources·s − on_kept·x_kept). `rr` is solved densely, or
    through `factor` (its sparse LU) when given; `kr` may be sparse. Sources as one vector
    (a single right-hand side) give a vector source_map and on_sources. Raises
    np.linalg.LinAlgError where a dense `rr` is exactly singular.
    """
    count = rk.shape[1]
    right = np.column_stack([rk, rest_sources])
    weights = solve_system(rr, right) if factor is None else factor.solve(right)
    on_kept = weights[:, :count]
    on_sources = weights[:, count:] if np.ndim(rest_sources) == 2 else weights[:, -1]
    return kk - kr @ on_kept, kept_sources - kr @ on_sources, on_kept, on_sources


def surely_regular(block: np.ndarray) -> bool:
    """Whether a 1×1 or 2×2 block is so far from singular that the rank test's SVD is sure to
    pass it (False proves nothing: then the SVD decides).

    1×1: any finite non-zero value. 2×2: σ₁·σ₂ = |det| and σ₁² ≤ ‖A‖²_F bound the condition
    number by ‖A‖²_F/|det|. Where that is ≤ 1e10 (|det| taken from below), the SVD, whose
    singular values are within far less than 1e-12·σ₁ of the exact ones, finds σ₂/σ₁ ≥ 0.99e-10:
    far above the rank test's 2ε.
    """
    if block.shape == (1, 1):
        value = float(block[0, 0])
        return value != 0.0 and math.isfinite(value)
    if block.shape != (2, 2):
        return False
    (a, b), (c, d) = block.tolist()
    ad, bc = a * d, b * c
    # |det| from below: ad − bc is off by at most about 2ε(|ad| + |bc|), and by a denormal's ulp
    # if a product underflows. The range of ‖A‖²_F makes that margin immaterial and keeps the
    # sums finite; NaN and inf fail the comparisons.
    determinant = abs(ad - bc) - 4.0 * _EPS * (abs(ad) + abs(bc)) - 1e-300
    square = a * a + b * b + c * c + d * d
    return 1e-150 < square < 1e150 and square * (1.0 + 1e-12) <= 1e10 * determinant


def full_rank(block: np.ndarray) -> bool:
    """The rank test of a dense block before it is inverted: numpy's matrix_rank tolerance
    (σmin > σmax·n·ε, by an SVD), skipped where ``surely_regular`` already proves it passes.
    A block that only rounds away from singular fails it."""
    if surely_regular(block):
        return True
    singular = np.linalg.svd(block, compute_uv=False)
    return not singular[-1] <= singular[0] * block.shape[0] * _EPS  # NaN passes, as it always did


def _well_conditioned(block, factor) -> bool:
    """``full_rank`` of a sparse block, from its LU: numpy's matrix_rank tolerance read as a
    condition number, against a 1-norm estimate (``linear.condition_estimate``)."""
    return condition_estimate(block, factor) < 1.0 / (block.shape[0] * _EPS)


# --- the DC solver's reduction ----------------------------------------------------------------


class MnaNetwork(Protocol):
    """What ``reduce_network`` reads of a compiled MNA network (``dcsolve._Network``): the linear
    matrix (ground row and column 0; dense, or sparse from SPARSE_FROM unknowns on), the source
    columns, the node unknowns (1 … len(nodes); branch currents after them) and the devices,
    whose terminals are the unknowns that matter."""

    linear: object
    source_columns: np.ndarray
    nodes: tuple[str, ...]

    @property
    def size(self) -> int: ...

    @property
    def devices(self) -> tuple: ...


@record(frozen=True, eq=False)
class Reduction:
    """The MNA system with its linear-only unknowns eliminated (a Schur complement).

    Newton only has to solve for the unknowns a nonlinear device touches (`kept`); every
    other node voltage and branch current is an affine function of those and of the sources,
    fixed once per network. For a one-transistor stage that turns a 6–10 unknown system into
    a 2–4 unknown one, solved in plain Python instead of through numpy's per-call overhead.
    """

    kept: tuple[int, ...]  # full-vector indices Newton solves for (ground excluded)
    position: tuple[int, ...]  # full index → its place in `kept`, −1 for ground or eliminated
    matrix: tuple[tuple[float, ...], ...]  # the kept block after elimination
    source_map: np.ndarray  # sources → right-hand side of the kept block
    eliminated: tuple[int, ...]  # full-vector indices recovered after each solve
    recover_sources: np.ndarray  # sources → eliminated values (with the kept ones at zero)
    recover_kept: tuple[tuple[float, ...], ...]  # per eliminated unknown, its weight on each kept one


def _device_terminals(net: MnaNetwork) -> set[int]:
    """The unknowns a nonlinear device touches (ground left out), as each device places itself."""
    identity = range(net.size)
    return {i for device in net.devices for i in device.places(identity)} - {0}


def reduce_network(net: MnaNetwork, diagonal_gmin: float, *, eliminate: bool = True) -> Reduction:
    """Fold the linear unknowns away. The block eliminated must be regular; where it is not
    (a voltage source straight across two device terminals leaves its branch row empty
    there), the branch currents are kept too, and failing that (or without `eliminate`)
    nothing is eliminated."""
    if not isinstance(net.linear, np.ndarray):
        return reduce_large(net, diagonal_gmin, eliminate=eliminate)
    size = net.size
    full = net.linear[1:, 1:].copy()
    if diagonal_gmin:
        nodes = np.arange(len(net.nodes))
        full[nodes, nodes] += diagonal_gmin
    columns = net.source_columns[1:]
    if not eliminate:  # every unknown kept, in order: the system as it is, nothing to recover
        return schur_reduction(size, list(range(1, size)), [], full, columns.copy(),
                               np.zeros((0, size - 1)), np.zeros((0, columns.shape[1])))
    touched = _device_terminals(net)
    branches = set(range(1 + len(net.nodes), size))
    everything = set(range(1, size))
    for kept_set in (touched, touched | branches, everything):
        kept = sorted(kept_set)
        rest = [j for j in range(1, size) if j not in kept_set]
        order = np.array(kept + rest, dtype=int) - 1
        # Kept unknowns first, then the ones to eliminate (take: the copies fancy indexing makes, cheaper).
        ordered = full.take(order, 0).take(order, 1)
        count = len(kept)
        kk, kr = ordered[:count, :count], ordered[:count, count:]
        rk, rr = ordered[count:, :count], ordered[count:, count:]
        kept_sources, rest_sources = columns.take(order[:count], 0), columns.take(order[count:], 0)
        if rest:
            # The rank test once per network: a block that only rounds away from singular must
            # not be inverted. Keeping more is always correct.
            if not full_rank(rr):
                continue
            matrix, source_map, on_kept, on_sources = schur_complement(kk, kr, rk, rr, kept_sources, rest_sources)
        else:
            matrix, source_map = kk, kept_sources
            on_kept, on_sources = np.zeros((0, count)), np.zeros((0, columns.shape[1]))
        return schur_reduction(size, kept, rest, matrix, source_map, on_kept, on_sources)
    raise AssertionError("keeping every unknown always gives a reduction")  # pragma: no cover


def schur_reduction(
    size: int, kept: list[int], rest: list[int], matrix: np.ndarray, source_map: np.ndarray,
    on_kept: np.ndarray, on_sources: np.ndarray,
) -> Reduction:
    """The reduction that keeps `kept` (matrix and sources their Schur complement) and recovers
    `rest` from them (rest = on_sources·sources − on_kept·kept), dense or sparse path alike."""
    position = [-1] * size
    for place, index in enumerate(kept):
        position[index] = place
    return Reduction(
        kept=tuple(kept),
        position=tuple(position),
        matrix=tuple(tuple(row) for row in matrix.tolist()),
        source_map=source_map,
        eliminated=tuple(rest),
        recover_sources=on_sources,
        recover_kept=tuple(tuple(row) for row in on_kept.tolist()),
    )


def reduce_large(net: MnaNetwork, diagonal_gmin: float, *, eliminate: bool = True) -> Reduction:
    """``reduce_network`` for a network stamped sparse (linear.SPARSE_FROM unknowns or more).

    The same Schur complement, with the eliminated block factored by a sparse LU instead of
    a dense solve, and its rank test a 1-norm condition estimate from that LU instead of an
    SVD (``linear.condition_estimate``), against the same tolerance. Kept unknowns become
    Newton's dense system, so that is tried only while they are fewer than SPARSE_FROM (many
    devices make the eliminated rest couple all of them). Otherwise, or where the rest is not
    regular, nothing is eliminated and Newton's system stays sparse (``keep_all_sparse``).
    """
    size = net.size
    full = net.linear[1:, 1:].tocsr()
    if diagonal_gmin:
        node_count = len(net.nodes)
        diagonal = np.zeros(size - 1)
        diagonal[:node_count] = diagonal_gmin
        from scipy.sparse import diags

        full = (full + diags(diagonal)).tocsr()
    columns = net.source_columns[1:]
    touched = _device_terminals(net)
    branches = set(range(1 + len(net.nodes), size))
    for kept_set in (touched, touched | branches) if eliminate else ():
        kept = sorted(kept_set)
        rest = [j for j in range(1, size) if j not in kept_set]
        if not rest or len(kept) >= SPARSE_FROM:
            break  # nothing to eliminate, or a kept system too large to be dense
        kept_at, rest_at = np.array(kept, dtype=int) - 1, np.array(rest, dtype=int) - 1
        kept_rows, rest_rows = full[kept_at], full[rest_at]
        kk, kr = kept_rows[:, kept_at].toarray(), kept_rows[:, rest_at]
        rk, rr = rest_rows[:, kept_at].toarray(), rest_rows[:, rest_at].tocsc()
        kept_sources, rest_sources = columns[kept_at], columns[rest_at]
        try:
            factor = sparse_factor(rr)
        except np.linalg.LinAlgError:
            continue
        if not _well_conditioned(rr, factor):
            continue
        matrix, source_map, on_kept, on_sources = schur_complement(kk, kr, rk, None, kept_sources, rest_sources, factor)
        return schur_reduction(size, kept, rest, np.asarray(matrix), np.asarray(source_map), on_kept, on_sources)
    return keep_all_sparse(full, columns, size)


def keep_all_sparse(full, columns: np.ndarray, size: int) -> Reduction:
    """The reduction that eliminates nothing, its matrix as sparse rows (dicts, column → value):
    Newton stamps the devices into copies of them and solves by a sparse LU (linear.solve_dense)."""
    rows = full.tocsr()
    matrix = tuple(
        dict(zip(rows.indices[rows.indptr[k]:rows.indptr[k + 1]].tolist(),
                 rows.data[rows.indptr[k]:rows.indptr[k + 1]].tolist()))
        for k in range(size - 1)
    )  # fmt: skip
    return Reduction(
        kept=tuple(range(1, size)),
        position=(-1, *range(size - 1)),
        matrix=matrix,
        source_map=columns,
        eliminated=(),
        recover_sources=np.zeros((0, columns.shape[1])),
        recover_kept=(),
    )


# --- a network's node equations: Kron's reduction and block solves ---------------------------


def _cut(matrix: np.ndarray, rows: Sequence[int], columns: Sequence[int], plain: list | None) -> np.ndarray:
    """``matrix[np.ix_(rows, columns)]``: the same array, cut from the matrix's rows in plain floats
    (`plain`, when the caller keeps them) without np.ix_'s overhead."""
    if plain is None:
        return matrix[np.ix_(rows, columns)]
    values = [[plain[r][c] for c in columns] for r in rows]
    return np.array(values, dtype=float).reshape(len(rows), len(columns))


def kron(
    matrix, injection: np.ndarray, ports: Sequence[int], internal: Sequence[int], plain: list | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Kron's reduction of G·v = J (G dense, or CSR when large) onto the unknowns `ports`, those
    in `internal` eliminated (the rest left out: held at zero): Y·v_ports = J_ports. `plain`: G's
    rows in plain floats, to cut dense blocks from. Raises np.linalg.LinAlgError where the
    internal block is exactly singular."""
    if isinstance(matrix, np.ndarray):
        y, jt = _cut(matrix, ports, ports, plain), injection.take(ports, 0)
        if not internal:
            return y, jt
        y, jt, _, _ = schur_complement(
            y, _cut(matrix, ports, internal, plain), _cut(matrix, internal, ports, plain),
            _cut(matrix, internal, internal, plain), jt, injection.take(internal, 0),
        )  # fmt: skip
        return y, jt
    at_ports, at_internal = np.array(ports, dtype=int), np.array(internal, dtype=int)
    port_rows = matrix[at_ports]
    y, jt = port_rows[:, at_ports].toarray(), injection[at_ports]
    if not len(at_internal):
        return y, jt
    internal_rows = matrix[at_internal]
    factor = sparse_factor(internal_rows[:, at_internal])
    y, jt, _, _ = schur_complement(
        y, port_rows[:, at_internal], internal_rows[:, at_ports].toarray(), None, jt, injection[at_internal], factor
    )
    return y, jt


def solve_block(
    matrix, rhs: np.ndarray, rows: Sequence[int] | None = None, plain: list | None = None,
    factors: dict | None = None,
) -> np.ndarray:
    """G⁻¹·rhs on the block of G on `rows` (as rows and columns; None: all of G). G dense, or
    CSR when large: then a sparse LU, the whole matrix's kept in `factors` once made. Raises
    np.linalg.LinAlgError where the block is exactly singular."""
    if isinstance(matrix, np.ndarray):
        return solve_system(matrix if rows is None else _cut(matrix, rows, rows, plain), rhs)
    if rows is not None:
        at = np.array(rows, dtype=int)
        return sparse_factor(matrix[at][:, at]).solve(np.asarray(rhs, dtype=float))
    factors = {} if factors is None else factors
    if "whole" not in factors:
        factors["whole"] = sparse_factor(matrix)
    return factors["whole"].solve(np.asarray(rhs, dtype=float))


def solve_each(matrix: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """G⁻¹·r for every row r of `rhs` (G dense), in one call: one LAPACK solve per row, the
    same numbers as ``solve_block`` row by row."""
    count, size = rhs.shape
    return solve_system(np.broadcast_to(matrix, (count, size, size)), rhs[:, :, None])[:, :, 0]
