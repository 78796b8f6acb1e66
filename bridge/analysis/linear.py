"""Small dense linear systems, the inner step of the DC solver's Newton (dcsolve; the hand
analysis's numerical path is that solver), and the stamping the hand's linear network shares.

A one-transistor stage leaves Newton a handful of unknowns; numpy's solve costs several
microseconds of call overhead on such a system, elimination in plain floats a fraction of it.
Larger systems go to numpy's LAPACK solve; networks of thousands of unknowns to a sparse LU (below).
"""

from __future__ import annotations

import math
from collections import defaultdict
from itertools import chain

import numpy as np

__all__ = [
    "PLAIN_SOLVE_LIMIT",
    "SPARSE_FROM",
    "as_array",
    "condition_estimate",
    "copy_rows",
    "is_large",
    "solve_dense",
    "solve_system",
    "sparse_factor",
    "stamp_rows",
    "stamped",
]

# Above this many unknowns numpy's LAPACK solve beats elimination in plain Python (measured:
# 6.4 against 8.3 µs at 4 unknowns, 12.7 against 9.7 µs at 6, conversions included).
PLAIN_SOLVE_LIMIT = 4

# numpy.linalg.solve's own gufunc for one right-hand side (LAPACK gesv), called under the error
# state numpy.linalg.solve sets around it but for a singular matrix, which raises
# FloatingPointError here instead of LinAlgError: the same call on the same arrays, without
# numpy.linalg.solve's per-call conversions, type and shape checks and errstate object (a third
# of a 5–8 unknown solve). The error state is set per call (thread-safe): see `_in_solve_state`.
_SOLVE_ERRORS = {"invalid": "raise", "over": "ignore", "divide": "ignore", "under": "ignore"}


def _in_solve_state(gufunc):
    """`gufunc` called under the error state `_SOLVE_ERRORS`, restored to the caller's after.

    numpy ≥ 2 keeps the error state in a context variable, which np.errstate sets to an object
    it makes from its arguments at every call: made here once and set the same way (per call, so
    per thread). numpy 2.4, the 2151 solves of the 200 bench stages replayed: 28 → 22 µs a stage
    on an idle machine, 68 → 36 at load 5–7. numpy 1.x, or internals moved: errstate's decorator
    itself. Both set the four error kinds; the state made here keeps the error callback and buffer
    size in force at import (numpy's defaults), where the decorator keeps the caller's: neither
    plays a part in a solve (no kind is set to "call", and a gufunc on float64 arrays casts
    nothing)."""
    try:
        from numpy._core._multiarray_umath import _make_extobj
        from numpy._core._ufunc_config import _extobj_contextvar
    except ImportError:  # pragma: no cover - numpy 1.x
        return np.errstate(**_SOLVE_ERRORS)(gufunc)
    state = _make_extobj(**_SOLVE_ERRORS)
    enter, leave = _extobj_contextvar.set, _extobj_contextvar.reset

    def solve(matrix: np.ndarray, rhs: np.ndarray, signature: str) -> np.ndarray:
        token = enter(state)
        try:
            return gufunc(matrix, rhs, signature=signature)
        finally:
            leave(token)

    return solve


try:
    from numpy.linalg import _umath_linalg
except ImportError:  # pragma: no cover - numpy moved it: its public solve does the same
    _gesv = None
else:
    _gesv = _in_solve_state(_umath_linalg.solve1)
    # The same for a matrix of right-hand sides (or a stack of systems): the gufunc
    # numpy.linalg.solve calls where its second argument is not one vector.
    _gesv_columns = _in_solve_state(_umath_linalg.solve)


def as_array(matrix: list[list[float]]) -> np.ndarray:
    """A square matrix of floats as an array: np.array(matrix), without its type and shape discovery."""
    size = len(matrix)
    return np.fromiter(chain.from_iterable(matrix), float, size * size).reshape(size, size)


def solve_dense(matrix: list[list[float]], rhs: list[float]) -> list[float] | None:
    """Gaussian elimination with partial pivoting; None when a pivot is exactly zero (singular)."""
    size = len(rhs)
    if size == 2:  # the common case (drain and gate of one device), written out
        (a, b), (c, d) = matrix
        if abs(c) > abs(a):
            a, b, c, d = c, d, a, b
            first, second = rhs[1], rhs[0]
        else:
            first, second = rhs
        if a == 0.0:
            return None
        factor = c / a
        pivot = d - factor * b
        if pivot == 0.0:
            return None
        y = (second - factor * first) / pivot
        return [(first - b * y) / a, y]
    if size > PLAIN_SOLVE_LIMIT:
        if isinstance(matrix[0], dict):  # sparse rows (a large system): a sparse LU
            return _solve_rows(matrix, rhs)
        return _solve_lapack(as_array(matrix), np.array(rhs))
    for column in range(size):
        pivot_row, largest = column, abs(matrix[column][column])
        for row in range(column + 1, size):
            if abs(matrix[row][column]) > largest:
                pivot_row, largest = row, abs(matrix[row][column])
        pivot = matrix[pivot_row][column]
        if pivot == 0.0:
            return None
        if pivot_row != column:
            matrix[column], matrix[pivot_row] = matrix[pivot_row], matrix[column]
            rhs[column], rhs[pivot_row] = rhs[pivot_row], rhs[column]
        top = matrix[column]
        for row in range(column + 1, size):
            below = matrix[row]
            factor = below[column] / pivot
            if factor:
                for j in range(column + 1, size):
                    below[j] -= factor * top[j]
                rhs[row] -= factor * rhs[column]
    solution = [0.0] * size
    for row in range(size - 1, -1, -1):
        top = matrix[row]
        total = rhs[row]
        for j in range(row + 1, size):
            total -= top[j] * solution[j]
        solution[row] = total / top[row]
    return solution


def _solve_lapack(matrix: np.ndarray, rhs: np.ndarray) -> list[float] | None:
    """``np.linalg.solve(matrix, rhs)`` of a square float matrix and one right-hand side, as a
    list (``solve_system``); None where LAPACK finds the matrix singular (an exactly zero pivot)."""
    try:
        return solve_system(matrix, rhs).tolist()
    except np.linalg.LinAlgError:
        return None


def solve_system(matrix: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """``np.linalg.solve(matrix, rhs)``, the same numbers, for float64 arrays without numpy's
    per-call conversions and checks (the same gufunc on the same arrays, one vector or a matrix
    of right-hand sides, or stacks of systems); anything else goes to numpy.linalg.solve itself.
    Raises np.linalg.LinAlgError where the matrix is singular, as numpy.linalg.solve does."""
    if (
        _gesv is None
        or type(matrix) is not np.ndarray
        or type(rhs) is not np.ndarray
        or matrix.dtype.char != "d"
        or rhs.dtype.char != "d"
        or matrix.ndim < 2
        or matrix.shape[-1] != matrix.shape[-2]
    ):
        return np.linalg.solve(matrix, rhs)
    try:
        return (_gesv if rhs.ndim == 1 else _gesv_columns)(matrix, rhs, signature="dd->d")
    except FloatingPointError:
        raise np.linalg.LinAlgError("Singular matrix") from None


# --- large networks ---------------------------------------------------------------------------
#
# A stage with a long resistor ladder or a mesh has thousands of unknowns. Dense rows, dense
# solves and SVDs cost O(n²) memory and O(n³) time there (a 5,000-resistor ladder took minutes
# and gigabytes), so from SPARSE_FROM unknowns on the linear systems are stamped into dict rows
# and solved by a sparse LU (SuperLU through scipy.sparse). Smaller systems keep the dense path
# unchanged, to the last bit.

# Unknowns from which a network is stamped and solved sparse. Below it the dense path costs
# milliseconds at most (an SVD of 200×200 takes about 10 ms).
SPARSE_FROM = 200


def is_large(size: int) -> bool:
    """Whether a system of `size` unknowns takes the sparse path."""
    return size >= SPARSE_FROM


def stamp_rows(size: int) -> list:
    """Rows to stamp a `size`-unknown matrix into, ``rows[r][c] += value``: lists of floats for
    a small system, dicts (column → value, missing means 0) for a large one (`is_large`)."""
    if not is_large(size):
        return [[0.0] * size for _ in range(size)]
    return [defaultdict(float) for _ in range(size)]


def stamped(rows: list, size: int):
    """The matrix of `stamp_rows` rows: a dense array for a small system, CSR for a large one."""
    if not is_large(size):
        return as_array(rows)
    return _csr(rows, size)


def copy_rows(rows) -> list:
    """Fresh rows to stamp into: lists of a dense system's rows, dicts (missing means 0) of
    sparse ones."""
    if rows and isinstance(rows[0], dict):
        return [defaultdict(float, row) for row in rows]
    return [list(row) for row in rows]


def _solve_rows(rows: list, rhs: list[float]) -> list[float] | None:
    """`solve_dense` for sparse rows: a sparse LU; None when a pivot is exactly zero."""
    try:
        factor = sparse_factor(_csr(rows, len(rows)))
    except np.linalg.LinAlgError:
        return None
    with np.errstate(all="ignore"):
        return factor.solve(np.array(rhs, dtype=float)).tolist()


def _csr(rows: list, size: int):
    """Dict rows (column → value) as a CSR matrix."""
    from scipy.sparse import csr_matrix

    indptr = np.zeros(size + 1, dtype=np.int64)
    np.cumsum([len(row) for row in rows], out=indptr[1:])
    indices = np.fromiter(chain.from_iterable(rows), np.int64, int(indptr[-1]))
    data = np.fromiter(chain.from_iterable(row.values() for row in rows), float, int(indptr[-1]))
    matrix = csr_matrix((data, indices, indptr), shape=(size, size))
    matrix.sort_indices()
    return matrix


def sparse_factor(matrix):
    """The sparse LU (SuperLU, partial pivoting) of a square sparse matrix; raises
    np.linalg.LinAlgError where a pivot is exactly zero, as np.linalg.solve does."""
    from scipy.sparse.linalg import splu

    try:
        return splu(matrix.tocsc())
    except RuntimeError as exc:  # "Factor is exactly singular"
        raise np.linalg.LinAlgError(str(exc)) from None


def condition_estimate(matrix, factor) -> float:
    """κ₁(A) = ‖A‖₁·‖A⁻¹‖₁ with ‖A⁻¹‖₁ estimated from the LU `factor` by Hager's method with
    Higham's refinements (the estimator of LAPACK's dlacn2, which its gecon uses; Higham,
    "FORTRAN codes for estimating the one-norm of a real or complex matrix", 1988 — from
    memory), in place of an SVD on a large system. Deterministic: no random start.

    The estimate is a lower bound of ‖A⁻¹‖₁, almost always equal to it. κ₁ and the SVD's κ₂ of
    an n×n matrix are within a factor n of each other. inf or nan when the solves overflow (a
    matrix that only rounds away from singular)."""
    size = matrix.shape[0]
    if size == 0:
        return 1.0
    with np.errstate(all="ignore"):
        norm = float(abs(matrix).sum(axis=0).max())
        x = np.full(size, 1.0 / size)
        estimate = 0.0
        for iteration in range(5):
            y = factor.solve(x)
            value = float(np.abs(y).sum())
            if not np.isfinite(value):
                return math.inf
            if iteration and value <= estimate:
                break
            estimate = value
            z = factor.solve(np.where(y >= 0.0, 1.0, -1.0), trans="T")
            j = int(np.argmax(np.abs(z)))
            if iteration and abs(z[j]) <= float(z @ x):
                break
            x = np.zeros(size)
            x[j] = 1.0
        # Higham's extra vector, against matrices that fool the iteration.
        steps = np.arange(size, dtype=float)
        alternating = np.where(steps % 2 == 0, 1.0, -1.0) * (1.0 + steps / max(size - 1, 1))
        extra = 2.0 * float(np.abs(factor.solve(alternating)).sum()) / (3.0 * size)
        return norm * max(estimate, extra)
