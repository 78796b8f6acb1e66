"""Brent's root finder on a bracket, as scipy's `brentq` computes it.

The sweep finds each region edge with it. It is written out here (a line-for-line port of
scipy's C routine, scipy/optimize/Zeros/brentq.c) because importing `scipy.optimize` for this
one function costs about 0.3 s at every start of `biasbridge sweep`; the port takes the same
steps in the same floating-point order, so it returns the same bits (tests/test_roots.py
compares it with scipy's `brentq` itself).
"""

from __future__ import annotations

import math
from collections.abc import Callable


class RootNotBracketed(ValueError):
    """f(a) and f(b) have the same sign: no root is bracketed."""


class RootNotConverged(RuntimeError):
    """The bracket did not shrink to the tolerance within the iterations allowed."""


def brent_root(
    function: Callable[[float], float], a: float, b: float, *, xtol: float, rtol: float, maxiter: int = 100
) -> float:
    """A root of `function` in [a, b] to within xtol + rtol·|root| (Brent, 1973)."""
    xpre, xcur = float(a), float(b)
    xblk = fblk = spre = scur = 0.0
    fpre, fcur = _value(function, xpre), _value(function, xcur)
    if fpre == 0.0:
        return xpre
    if fcur == 0.0:
        return xcur
    if math.copysign(1.0, fpre) == math.copysign(1.0, fcur):
        raise RootNotBracketed("f(a) and f(b) must have different signs")
    for _ in range(maxiter):
        if fpre != 0.0 and fcur != 0.0 and math.copysign(1.0, fpre) != math.copysign(1.0, fcur):
            xblk, fblk = xpre, fpre
            spre = scur = xcur - xpre
        if abs(fblk) < abs(fcur):
            xpre, xcur, xblk = xcur, xblk, xcur
            fpre, fcur, fblk = fcur, fblk, fcur
        delta = (xtol + rtol * abs(xcur)) / 2
        sbis = (xblk - xcur) / 2
        if fcur == 0.0 or abs(sbis) < delta:
            return xcur
        if abs(spre) > delta and abs(fcur) < abs(fpre):
            if xpre == xblk:  # interpolate
                stry = -fcur * (xcur - xpre) / (fcur - fpre)
            else:  # extrapolate (inverse quadratic)
                dpre = (fpre - fcur) / (xpre - xcur)
                dblk = (fblk - fcur) / (xblk - xcur)
                stry = -fcur * (fblk * dblk - fpre * dpre) / (dblk * dpre * (fblk - fpre))
            if 2 * abs(stry) < min(abs(spre), 3 * abs(sbis) - delta):
                spre, scur = scur, stry  # good short step
            else:
                spre = scur = sbis  # bisect
        else:
            spre = scur = sbis  # bisect
        xpre, fpre = xcur, fcur
        if abs(scur) > delta:
            xcur += scur
        else:
            xcur += delta if sbis > 0 else -delta
        fcur = _value(function, xcur)
    raise RootNotConverged(f"no convergence in {maxiter} iterations")


def _value(function: Callable[[float], float], x: float) -> float:
    value = float(function(x))
    if math.isnan(value):
        raise ValueError(f"the function is NaN at {x!r}")
    return value
