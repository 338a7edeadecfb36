"""Tests for ptcheck.pade (robust Padé approximants) and Padé order specs on real series."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from conftest import oscillator_x
from ptcheck import Model
from ptcheck.approximants import Pade
from ptcheck.pade import (
    froissart_mask,
    pade_coefficients,
    pade_evaluate,
    pade_poles,
    pade_zeros,
    series_scale,
)


# ---------------------------------------------------------------- closed forms
def test_geometric_series_is_its_own_pade():
    # 1/(1 - x) = Σ x^k: the [0/1] approximant is exact (definition of Padé approximants)
    a, b = pade_coefficients(np.ones(8), 3, 4)
    # Gonnet–Güttel–Trefethen degree reduction (SIAM Rev. 55, 101 (2013), Alg. 2): the
    # requested [3/4] collapses to the exact [0/1]
    assert a.size == 1 and b.size == 2
    assert_allclose(a, [1.0], atol=1e-12)
    assert_allclose(b, [1.0, -1.0], atol=1e-12)
    assert_allclose(pade_poles(b), [1.0], atol=1e-12)


def test_exp_22_closed_form():
    # Baker & Graves-Morris, Padé Approximants (2nd ed., 1996), §1.2: the [2/2] approximant
    # of e^x is (1 + x/2 + x²/12) / (1 - x/2 + x²/12)
    c = np.array([1 / math.factorial(k) for k in range(5)])
    a, b = pade_coefficients(c, 2, 2)
    assert_allclose(a, [1, 1 / 2, 1 / 12], rtol=1e-12)
    assert_allclose(b, [1, -1 / 2, 1 / 12], rtol=1e-12)


def test_exp_diagonal_pade_converges():
    # [n/n] of e^x converges to e^x on compact sets (Padé's theorem for exp; Baker & Graves-Morris §1.2)
    c = np.array([1 / math.factorial(k) for k in range(21)])
    errs = [abs(pade_evaluate(*pade_coefficients(c, n, n), 2.0) - math.exp(2.0)) for n in (2, 4, 6, 10)]
    assert all(e2 < e1 for e1, e2 in zip(errs, errs[1:]))
    # (the SVD rank decisions of the robust algorithm cap the accuracy near 1e-11 here)
    assert errs[-1] < 1e-9 * math.exp(2.0)


def test_common_power_of_x_cancels():
    # x / (1 - x) = x + x² + ...: the Toeplitz system gives b with a leading zero; the common
    # factor is cancelled instead of raising (closed form)
    a, b = pade_coefficients([0.0, 1.0, 1.0, 1.0, 1.0], 2, 2)
    assert_allclose(pade_evaluate(a, b, 0.3), 0.3 / 0.7, rtol=1e-12)
    assert b[0] == 1.0


# ---------------------------------------------------------------- robustness
def test_polynomial_data_give_polynomial():
    # a terminating series: every Toeplitz block is singular; the approximant is the polynomial
    c = np.array([0.5, 0.0, -0.5, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0])
    a, b = pade_coefficients(c, 4, 4)
    assert_allclose(b, [1.0])
    assert_allclose(a, [0.5, 0.0, -0.5], atol=1e-15)


def test_round_off_tail_does_not_create_poles():
    # the same polynomial with a round-off tail of size 1e-17: still no denominator
    rng = np.random.default_rng(1)
    c = np.array([0.5, 0.0, -0.5] + list(1e-17 * rng.normal(size=18)))
    a, b = pade_coefficients(c, 10, 10)
    assert b.size == 1
    assert_allclose(pade_evaluate(a, b, 3.0), 0.5 - 4.5, rtol=1e-12)


def test_zero_and_tiny_data():
    a, b = pade_coefficients(np.zeros(5), 2, 2)
    assert_allclose(a, [0.0]) and assert_allclose(b, [1.0])
    a, b = pade_coefficients([1.0, 0.0, 0.0, 0.0, 0.0], 2, 2)
    assert_allclose(pade_evaluate(a, b, [0.0, 5.0]), [1.0, 1.0])


def test_froissart_doublet_is_flagged():
    # hand-made doublet: (x - 2)/(x - 2(1 + 1e-9)) has a pole and a zero 2e-9 apart
    a = np.array([-2.0, 1.0])
    b = np.array([-2.0 * (1 + 1e-9), 1.0])
    b, a = b / b[0], a / b[0]
    assert froissart_mask(a, b).tolist() == [True]
    # a genuine pole is kept
    assert froissart_mask(np.array([1.0]), np.array([1.0, -1.0])).tolist() == [False]


def test_scale_does_not_change_the_approximant():
    # Padé approximants are covariant under x -> s x (definition); scaling only conditions the SVD
    c = np.array([1 / (k + 1) for k in range(9)])  # -log(1 - x)/x
    x = np.array([-0.7, 0.2, 0.5])
    v1 = pade_evaluate(*pade_coefficients(c, 4, 4), x)
    v2 = pade_evaluate(*pade_coefficients(c, 4, 4, scale=0.3), x)
    assert_allclose(v1, v2, rtol=1e-9)
    assert_allclose(v1, -np.log(1 - x) / x, rtol=1e-6)


def test_series_scale_of_geometric_series():
    # Σ (x/R)^k: balancing scale R (from the definition in series_scale)
    c = 2.5 ** -np.arange(12.0)
    assert_allclose(series_scale(c), 2.5, rtol=1e-12)


@pytest.mark.parametrize(
    "args, msg",
    [
        (([1.0, 2.0], 1, 1), "needs 3 coefficients"),
        (([1.0, 2.0, 3.0], -1, 1), "degrees must be >= 0"),
        (([1.0, np.nan, 3.0], 1, 1), "finite"),
        ((np.ones((2, 2)), 0, 0), "1-D"),
    ],
)
def test_bad_input(args, msg):
    with pytest.raises(ValueError, match=msg):
        pade_coefficients(*args)


def test_roots_helpers():
    assert pade_poles(np.array([1.0])).size == 0
    assert_allclose(pade_zeros(np.array([-2.0, 1.0])), [2.0])


# ---------------------------------------------------------------- on RS series
def test_two_level_pade_in_square_converges_beyond_radius():
    # Two-level closed form (any QM text): E_0 = Δ/2 - sqrt(Δ²/4 + λ² v²); radius Δ/(2|v|) = 1/2.
    m = Model(np.diag([0.0, 1.0]), [[0, 1.0], [1.0, 0]])
    s = m.series(0, 40)
    lam = 1.5  # three times the radius
    exact = 0.5 - math.sqrt(0.25 + lam**2)
    pade_err = [abs(s.energy(lam, order=Pade(n, n, in_square=True)) - exact) for n in (1, 2, 4, 6, 8, 10)]
    plain_err = [abs(s.energy(lam, order=4 * n) - exact) for n in (1, 2, 4, 6, 8, 10)]
    assert all(e2 < e1 for e1, e2 in zip(pade_err, pade_err[1:]))
    assert pade_err[-1] < 1e-5
    # the plain series diverges there
    assert all(e2 > e1 for e1, e2 in zip(plain_err, plain_err[1:]))
    assert plain_err[-1] > 1e10


def test_pade_extends_the_validity_region():
    # An invented 3-level model; exact energies from numpy's eigvalsh.  Padé [4/4] and the
    # plain series both use orders 0..8; the first coupling on a fine grid where the error
    # exceeds tol marks each one's validity boundary (common practice, no source).
    h0 = np.diag([0.0, 1.0, 2.2])
    v = np.array([[0.1, 0.4, 0.2], [0.4, -0.2, 0.3], [0.2, 0.3, 0.0]])
    m = Model(h0, v, name="invented 3-level")
    s = m.series(0, 8)
    grid = np.linspace(0.0, 2.0, 2001)
    exact = np.array([np.linalg.eigvalsh(m.hamiltonian(x))[0] for x in grid])
    tol = 1e-4

    def boundary(values):
        bad = np.flatnonzero(np.abs(values - exact) > tol)
        return grid[bad[0]] if bad.size else np.inf

    b_plain = boundary(s.energy(grid, order=8))
    b_pade = boundary(s.energy(grid, order=Pade(4, 4)))
    assert 0 < b_plain < b_pade
    assert b_pade > 1.2 * b_plain


def test_pade_of_terminating_series_is_exact():
    # shifted oscillator: E_0 = 1/2 - λ²/2 exactly (completing the square, any QM text)
    n = 30
    m = Model(np.diag(np.arange(n) + 0.5), oscillator_x(n)[:n, :n])
    s = m.series(0, 40)
    lam = np.array([0.5, 3.0, 10.0])
    assert_allclose(s.energy(lam, order=Pade(20, 20)), 0.5 - lam**2 / 2, rtol=1e-10)
    assert_allclose(s.energy(lam, order=Pade(5, 5, in_square=True)), 0.5 - lam**2 / 2, rtol=1e-10)


def test_validity_boundary_pade_beats_plain_if_available():
    compare = pytest.importorskip("ptcheck.compare", reason="ptcheck.compare (validity_boundary) not available yet")
    h0 = np.diag([0.0, 1.0, 2.2])
    v = np.array([[0.1, 0.4, 0.2], [0.4, -0.2, 0.3], [0.2, 0.3, 0.0]])
    m = Model(h0, v, name="invented 3-level")
    b_plain = compare.validity_boundary(m, 0, 8, tol=1e-4, treatment="nondegenerate").coupling
    b_pade = compare.validity_boundary(m, 0, Pade(4, 4), tol=1e-4, treatment="nondegenerate").coupling
    assert b_pade > b_plain > 0
