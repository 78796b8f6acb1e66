"""The sweep's root finder is scipy's `brentq`, ported: the reference is scipy itself (a declared
dependency), which must return the same bits on the same functions and brackets."""

from __future__ import annotations

import math
import random

import pytest
from scipy.optimize import brentq

from bridge.analysis.roots import RootNotBracketed, brent_root

EPS4 = 4 * 2.220446049250313e-16


def _functions(rng: random.Random):
    # Smooth, kinked and steep shapes like a region edge's indicator (VOV, VDS − VOV).
    c, k, p = rng.uniform(-2, 2), rng.uniform(0.1, 50), rng.uniform(0.5, 3)
    yield lambda x: x - c
    yield lambda x: math.tanh(k * (x - c))
    yield lambda x: (x - c) ** 3 + 0.1 * (x - c)
    yield lambda x: math.copysign(abs(x - c) ** p, x - c)
    yield lambda x: min(x - c, 0.5 * (x - c)) + 1e-3 * (x - c) ** 2
    yield lambda x: math.exp(k * (x - c) / 10) - 1


def test_brent_root_returns_the_same_bits_as_scipys_brentq():
    rng = random.Random(11)
    compared = 0
    for _ in range(300):
        for function in _functions(rng):
            a, b = rng.uniform(-5, -2.1), rng.uniform(2.1, 5)
            for xtol in (1e-12, 1e-9, 1e-4):
                ours = brent_root(function, a, b, xtol=xtol, rtol=EPS4, maxiter=200)
                theirs = brentq(function, a, b, xtol=xtol, rtol=EPS4, maxiter=200)
                assert ours == theirs, (a, b, xtol)
                compared += 1
    assert compared == 300 * 6 * 3


def test_an_unbracketed_root_is_refused_as_scipy_refuses_it():
    with pytest.raises(ValueError):
        brentq(lambda x: x * x + 1, -1, 1)
    with pytest.raises(RootNotBracketed):
        brent_root(lambda x: x * x + 1, -1, 1, xtol=1e-12, rtol=EPS4)


def test_an_end_point_that_is_a_root_is_returned():
    assert brent_root(lambda x: x - 2.0, 2.0, 3.0, xtol=1e-12, rtol=EPS4) == 2.0
