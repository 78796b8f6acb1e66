"""Small dense linear systems, the inner step of both Newton solvers (dcsolve, hand).

A one-transistor stage leaves Newton a handful of unknowns; numpy's solve costs several
microseconds of call overhead on such a system, elimination in plain floats a fraction of it.
Larger systems go to numpy's LAPACK solve.
"""

from __future__ import annotations

from itertools import chain

import numpy as np

__all__ = ["PLAIN_SOLVE_LIMIT", "as_array", "solve_dense"]

# Above this many unknowns numpy's LAPACK solve beats elimination in plain Python (measured:
# 6.4 against 8.3 µs at 4 unknowns, 12.7 against 9.7 µs at 6, conversions included).
PLAIN_SOLVE_LIMIT = 4


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
        try:
            return np.linalg.solve(as_array(matrix), np.array(rhs)).tolist()
        except np.linalg.LinAlgError:
            return None
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
