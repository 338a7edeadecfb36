"""Brent's root finder on a sign-changing bracket, without importing :mod:`scipy.optimize`.

The validity-boundary search needs one root finder.  ``scipy.optimize``
brings it, but importing that package loads scipy.special, scipy.spatial,
scipy.fft and more: about as long as all the rest of scipy that ptcheck
uses, paid by every command and every ``import ptcheck``.  This is the same
algorithm with the same stopping rule as ``scipy.optimize.brentq`` (R. P.
Brent, *Algorithms for Minimization without Derivatives*, Prentice-Hall
1973, ch. 4; scipy's C implementation of it), so it returns the same root to
the last bit (``tests/test_roots.py`` checks it against scipy).
"""

from __future__ import annotations

import math
from collections.abc import Callable

__all__ = ["brentq"]

_EPS = 2.220446049250313e-16


def _sign(x: float) -> float:
    return math.copysign(1.0, x)


def _value(f: Callable[[float], float], x: float) -> float:
    y = float(f(x))
    if math.isnan(y):  # as scipy: NaN gives no sign to bracket with
        raise ValueError(f"The function value at x={x:f} is NaN; solver cannot continue.")
    return y


def brentq(f: Callable[[float], float], a: float, b: float, *, xtol: float = 2e-12, rtol: float = 4 * _EPS,
           maxiter: int = 100) -> float:
    """A root of ``f`` in the bracket [a, b] (f(a) and f(b) of opposite signs).

    Parameters
    ----------
    f : callable(float) -> float
    a, b : float
        Bracket ends.
    xtol, rtol : float
        Stop when the bracket is narrower than ``xtol + rtol * |x|`` (as scipy).
    maxiter : int

    Returns
    -------
    float

    Raises
    ------
    ValueError
        f(a) and f(b) have the same sign, f is NaN somewhere, xtol ≤ 0 or rtol < 4 eps.
    RuntimeError
        No convergence in ``maxiter`` iterations.
    """
    if not xtol > 0:
        raise ValueError(f"xtol too small ({xtol:g} <= 0)")
    if rtol < 4 * _EPS:
        raise ValueError(f"rtol too small ({rtol:g} < {4 * _EPS:g})")
    xpre, xcur = float(a), float(b)
    xblk = fblk = spre = scur = 0.0
    fpre, fcur = _value(f, xpre), _value(f, xcur)
    if fpre == 0:
        return xpre
    if fcur == 0:
        return xcur
    if _sign(fpre) == _sign(fcur):
        raise ValueError("f(a) and f(b) must have different signs")
    for _ in range(int(maxiter)):
        if fpre != 0 and fcur != 0 and _sign(fpre) != _sign(fcur):
            xblk, fblk = xpre, fpre
            spre = scur = xcur - xpre
        if abs(fblk) < abs(fcur):
            xpre, xcur, xblk = xcur, xblk, xcur
            fpre, fcur, fblk = fcur, fblk, fcur
        delta = (xtol + rtol * abs(xcur)) / 2
        sbis = (xblk - xcur) / 2
        if fcur == 0 or abs(sbis) < delta:
            return xcur
        if abs(spre) > delta and abs(fcur) < abs(fpre):
            if xpre == xblk:  # interpolate
                stry = -fcur * (xcur - xpre) / (fcur - fpre)
            else:  # extrapolate (inverse quadratic)
                dpre = (fpre - fcur) / (xpre - xcur)
                dblk = (fblk - fcur) / (xblk - xcur)
                stry = -fcur * (fblk * dblk - fpre * dpre) / (dblk * dpre * (fblk - fpre))
            if 2 * abs(stry) < min(abs(spre), 3 * abs(sbis) - delta):  # good short step
                spre, scur = scur, stry
            else:  # bisect
                spre = scur = sbis
        else:  # bisect
            spre = scur = sbis
        xpre, fpre = xcur, fcur
        xcur += scur if abs(scur) > delta else (delta if sbis > 0 else -delta)
        fcur = _value(f, xcur)
    raise RuntimeError(f"Failed to converge after {int(maxiter)} iterations, value is {xcur}.")
