"""ptcheck's Brent root finder against scipy.optimize.brentq (the reference implementation of the same
algorithm: R. P. Brent, Algorithms for Minimization without Derivatives, 1973, ch. 4), and the fast path of
the overlap assignment against scipy.optimize.linear_sum_assignment."""

import math

import numpy as np
import pytest
from scipy.optimize import brentq as scipy_brentq
from scipy.optimize import linear_sum_assignment

from ptcheck._roots import brentq
from ptcheck._tracking import assign

CASES = [
    (lambda x: x**3 - 2 * x - 5, 2.0, 3.0),  # Wallis's cubic, root 2.0945514815423265
    (lambda x: math.cos(x) - x, 0.0, 1.0),  # Dottie number 0.7390851332151607
    (lambda x: math.exp(x) - 10.0, 0.0, 5.0),
    (lambda x: (x - 0.3) ** 3, 0.0, 1.0),  # triple root: slow for interpolation, bisection steps
    (lambda x: math.atan(1e4 * (x - 1e-3)), -1.0, 1.0),  # steep
    (lambda x: -1.0 if x < 0.7 else 1.0, 0.0, 1.0),  # a jump: pure bisection
    (lambda x: x - 1e-9, 0.0, 1.0),
]


@pytest.mark.parametrize("k", range(len(CASES)))
@pytest.mark.parametrize("xtol, rtol", [(2e-12, 4 * np.finfo(float).eps), (1e-4, 1e-10), (1e-14, 1e-14)])
def test_brentq_gives_scipys_root_to_the_last_bit(k, xtol, rtol):
    f, a, b = CASES[k]

    def outcome(solver, lo, hi):  # the root, or the failure to converge (a triple root at the tightest tolerance)
        try:
            return solver(f, lo, hi, xtol=xtol, rtol=rtol)
        except RuntimeError:
            return "no convergence"

    for lo, hi in ((a, b), (b, a)):
        assert outcome(brentq, lo, hi) == outcome(scipy_brentq, lo, hi)


def test_brentq_known_roots():
    # closed forms: Wallis's cubic (Newton's example), the Dottie number (from memory), ln 10
    assert brentq(CASES[0][0], 2, 3) == pytest.approx(2.0945514815423265, abs=1e-11)
    assert brentq(CASES[1][0], 0, 1) == pytest.approx(0.7390851332151607, abs=1e-11)
    assert brentq(CASES[2][0], 0, 5) == pytest.approx(math.log(10.0), abs=1e-11)


def test_brentq_refuses_what_scipy_refuses():
    with pytest.raises(ValueError, match="different signs"):
        brentq(lambda x: x * x + 1, -1.0, 1.0)
    with pytest.raises(ValueError, match="NaN"):
        brentq(lambda x: math.nan if x > 0.5 else -1.0, 0.0, 1.0)
    with pytest.raises(ValueError, match="xtol"):
        brentq(lambda x: x, -1.0, 1.0, xtol=0.0)
    with pytest.raises(ValueError, match="rtol"):
        brentq(lambda x: x, -1.0, 1.0, rtol=1e-17)
    with pytest.raises(RuntimeError, match="converge"):
        brentq(lambda x: (x - 1 / 3) ** 3, 0.0, 1.0, maxiter=3)
    with pytest.raises(RuntimeError, match="converge"):
        scipy_brentq(lambda x: (x - 1 / 3) ** 3, 0.0, 1.0, maxiter=3)
    assert brentq(lambda x: x, 0.0, 1.0) == 0.0  # a root at an end is returned as is


def scipy_assign(ov):
    rows, cols = linear_sum_assignment(-ov)
    out = np.full(ov.shape[0], -1, dtype=int)
    out[rows] = cols
    return out


def test_assignment_matches_the_hungarian_method():
    rng = np.random.default_rng(3)
    for trial in range(300):
        ka = int(rng.integers(1, 9))
        kb = int(rng.integers(1, 9))
        if trial % 3 == 0:  # overlap-like: a permuted near-identity, sometimes mixed
            m = max(ka, kb)
            u = np.linalg.qr(np.eye(m) + rng.normal(scale=rng.choice([0.05, 0.5, 2.0]), size=(m, m)))[0]
            ov = (np.abs(u) ** 2)[:ka][:, rng.permutation(m)[:kb]]
        else:
            ov = rng.random((ka, kb))
        if trial % 7 == 0:
            ov = np.round(ov, 1)  # ties
        got, want = assign(ov), scipy_assign(ov)
        # the same total overlap always; the same columns wherever the optimum is unique
        tot = lambda c: sum(ov[r, j] for r, j in enumerate(c) if j >= 0)  # noqa: E731
        assert tot(got) == pytest.approx(tot(want), abs=1e-12)
        assert (got >= 0).sum() == (want >= 0).sum()
        if trial % 7:
            assert got.tolist() == want.tolist()
