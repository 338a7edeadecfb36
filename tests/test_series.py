"""Rayleigh–Schrödinger series against closed forms, published coefficients and exact levels."""

from fractions import Fraction

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st
from scipy.special import binom, mathieu_a

from ptcheck import Model
from ptcheck.approximants import Pade
from ptcheck.errors import DegenerateLevelError

from conftest import oscillator_power, oscillator_x


def test_two_level_closed_form_coefficients():
    # E_-(λ) = -sqrt((Δ/2)^2 + λ^2 v^2) = -(Δ/2) Σ_j binom(1/2, j) (2λv/Δ)^(2j)
    # (closed form of the two-level eigenvalues, Cohen-Tannoudji, Diu, Laloë, Quantum Mechanics, Complement B_IV)
    delta, v = 1.3, 0.4
    m = Model(np.diag([-delta / 2, delta / 2]), [[0, v], [v, 0]])
    s = m.series(0, 12)
    expected = np.zeros(13)
    for j in range(7):
        expected[2 * j] = -(delta / 2) * binom(0.5, j) * (2 * v / delta) ** (2 * j)
    np.testing.assert_allclose(s.energy_coefficients, expected, rtol=1e-12, atol=1e-15)
    lam = np.array([0.05, 0.1, 0.2])
    exact = -np.sqrt((delta / 2) ** 2 + lam**2 * v**2)
    np.testing.assert_allclose(s.energy(lam), exact, rtol=1e-9)


def test_linear_term_on_oscillator_terminates_at_second_order():
    # H = a†a + 1/2 + λ x: completing the square gives E_n = n + 1/2 - λ^2/2 (m = ω = 1)
    # (standard textbook exercise, e.g. Sakurai & Napolitano, Modern Quantum Mechanics, problem 5.x)
    n = 40
    m = Model(np.diag(np.arange(n) + 0.5), oscillator_x(n)[:n, :n])
    for level in (0, 1, 3):
        c = m.series(level, 8).energy_coefficients
        assert c[0] == pytest.approx(level + 0.5)
        assert c[1] == pytest.approx(0.0, abs=1e-14)
        assert c[2] == pytest.approx(-0.5, rel=1e-12)
        np.testing.assert_allclose(c[3:], 0.0, atol=1e-12)


def test_quartic_oscillator_bender_wu_coefficients():
    # H = p^2/2 + x^2/2 + λ x^4, ground state: 1/2, 3/4, -21/8, 333/16, -30885/128, 916731/256
    # (Bender & Wu, Phys. Rev. 184, 1231 (1969), Table I)
    n = 120
    m = Model(np.diag(np.arange(n) + 0.5), oscillator_power(4, n))
    c = m.series(0, 5).energy_coefficients
    ref = [Fraction(1, 2), Fraction(3, 4), Fraction(-21, 8), Fraction(333, 16), Fraction(-30885, 128), Fraction(916731, 256)]
    np.testing.assert_allclose(c, [float(f) for f in ref], rtol=1e-12)


def test_mathieu_a0_series_and_exact():
    # Mathieu: y'' + (a - 2q cos 2v) y = 0. In the basis e^{2imv}: H0 = (2m)^2, V = q (m -> m±1), λ = q.
    # a_0(q) = -q^2/2 + 7q^4/128 - 29q^6/2304 + 68687q^8/18874368 + ...
    # (Abramowitz & Stegun, Handbook of Mathematical Functions, 1964, eq. 20.2.25)
    mmax = 30
    ms = np.arange(-mmax, mmax + 1)
    h0 = sp.diags((2.0 * ms) ** 2)
    v = sp.diags([np.ones(2 * mmax), np.ones(2 * mmax)], [1, -1])
    m = Model(h0, v)
    s = m.series(0, 8)
    np.testing.assert_allclose(
        s.energy_coefficients, [0, 0, -1 / 2, 0, 7 / 128, 0, -29 / 2304, 0, 68687 / 18874368], atol=1e-13, rtol=1e-10
    )
    # partial sums approach the exact characteristic value (scipy.special.mathieu_a) at small q
    q = 0.3
    err = [abs(s.energy(q, order=k) - mathieu_a(0, q)) for k in (2, 4, 6, 8)]
    assert err[-1] < 1e-8
    assert all(a > b for a, b in zip(err, err[1:]))


def test_order_fifty_and_sparse():
    # large orders: coefficients stay finite and partial sums converge inside the radius (two-level closed form)
    delta, v = 1.0, 0.3
    m = Model(sp.diags([-delta / 2, delta / 2]), sp.csr_matrix([[0, v], [v, 0]]))
    s = m.series(0, 60)
    assert s.energy_coefficients.shape == (61,)
    lam = 1.0  # radius Δ/(2v) = 1.67
    assert s.energy(lam, order=60) == pytest.approx(-np.sqrt(0.25 + (lam * v) ** 2), rel=1e-9)


def test_state_matches_exact_eigenvector(rng):
    a = rng.normal(size=(8, 8))
    v = (a + a.T) / 2
    m = Model(np.diag(np.arange(8.0)), v)
    lam = 0.05
    s = m.series(2, 6)
    w, u = np.linalg.eigh(m.hamiltonian(lam))
    psi = s.state(lam)
    assert abs(np.vdot(u[:, 2], psi)) ** 2 == pytest.approx(1.0, abs=1e-9)
    # intermediate normalisation: <n|psi^(k)> = 0 for k >= 1
    np.testing.assert_allclose(s.state_coefficients[1:, 2], 0.0)
    # batch of couplings has shape (C, N); user basis maps back
    assert s.state([0.01, 0.02]).shape == (2, 8)
    assert s.state(lam, basis="user").shape == (8,)
    with pytest.raises(ValueError, match="energy only"):
        s.state(lam, order=Pade(1, 1))


def _random_model(key, n, complex_):
    r = np.random.default_rng(key)
    e0 = np.sort(r.uniform(0, 10, n))
    e0 = e0 + 0.2 * np.arange(n)  # isolation >= 0.2
    a = r.normal(size=(n, n)) + (1j * r.normal(size=(n, n)) if complex_ else 0)
    return Model(np.diag(e0), (a + a.conj().T) / 2)


@settings(max_examples=25, deadline=None)
@given(key=st.integers(0, 10_000), n=st.integers(2, 9), complex_=st.booleans())
def test_trace_sum_rules(key, n, complex_):
    # Tr H(λ) = Tr H0 + λ Tr V for every λ, so Σ_n E_n^(1) = Tr V and Σ_n E_n^(k) = 0 for k >= 2
    # (linearity of the trace; common practice, no source needed beyond that identity)
    m = _random_model(key, n, complex_)
    coeffs = np.array([m.series(k, 5).energy_coefficients for k in range(n)])
    assert coeffs[:, 1].sum() == pytest.approx(np.trace(m.v).real, abs=1e-9)
    scale = np.max(np.abs(coeffs[:, 2:])) + 1
    np.testing.assert_allclose(coeffs[:, 2:].sum(axis=0), 0.0, atol=1e-9 * scale)


@settings(max_examples=20, deadline=None)
@given(key=st.integers(0, 10_000), n=st.integers(2, 7))
def test_hellmann_feynman_and_convergence_against_exact(key, n):
    # dE/dλ at 0 = <n|V|n> (Hellmann–Feynman theorem), d²E/dλ² / 2 = E^(2): checked by central
    # differences of exact eigenvalues; partial sums approach the exact level as the order grows.
    m = _random_model(key, n, False)
    level = int(np.random.default_rng(key).integers(n))
    s = m.series(level, 6)
    h = 1e-4
    e = [np.linalg.eigvalsh(m.hamiltonian(x))[level] for x in (-h, 0.0, h)]
    assert (e[2] - e[0]) / (2 * h) == pytest.approx(m.v_diagonal()[level], abs=1e-6)
    assert (e[2] - 2 * e[1] + e[0]) / h**2 / 2 == pytest.approx(s.energy_coefficients[2], abs=1e-3 * (1 + abs(s.energy_coefficients[2])))
    lam = 0.02 / max(m.norm_v, 1e-9)
    exact = np.linalg.eigvalsh(m.hamiltonian(lam))[level]
    errs = [abs(s.energy(lam, order=k) - exact) for k in range(1, 5)]
    assert errs[3] < errs[0] or errs[0] < 1e-14


def test_degenerate_level_refused_with_pair_and_pointer():
    v = np.array([[0, 0.3, 0.1], [0.3, 0, 0.2], [0.1, 0.2, 0]])
    m = Model(np.diag([0.0, 0.0, 1.0]), v)
    with pytest.raises(DegenerateLevelError, match="exactly degenerate.*block") as ei:
        m.series(0, 2)
    assert ei.value.pair == (0, 1)
    m.series(2, 4)  # the isolated level is fine


def test_near_degenerate_refused_at_given_coupling():
    m = Model(np.diag([0.0, 1.0, 1.01]), [[0, 0.1, 0], [0.1, 0, 0.05], [0, 0.05, 0]])
    with pytest.raises(DegenerateLevelError, match=r"mixing ratio .* >= 0.1") as ei:
        m.series(1, 4, coupling=0.5)
    assert ei.value.pair == (1, 2)
    m.series(1, 4, coupling=0.001)  # small coupling: fine


@pytest.mark.parametrize("order, exc", [(-1, ValueError), (2.5, TypeError), ("x", TypeError), (True, TypeError)])
def test_bad_order(order, exc):
    m = Model(np.diag([0.0, 1.0]), [[0, 1], [1, 0]])
    with pytest.raises(exc, match="order must be an int"):
        m.series(0, order)


def test_order_beyond_computed_refused():
    m = Model(np.diag([0.0, 1.0]), [[0, 1], [1, 0]])
    s = m.series(0, 3)
    with pytest.raises(ValueError, match="needs coefficients up to order 5"):
        s.energy(0.1, order=5)
