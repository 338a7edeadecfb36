"""Growth class of a series: asymptotic vs convergent, also when only every m-th coefficient is nonzero."""

import numpy as np
import pytest
from scipy.special import gammaln

from ptcheck import Model, convergence
from ptcheck._radius import analyse
from ptcheck.models import anharmonic_oscillator


def test_cubic_oscillator_ground_state_is_asymptotic():
    # H = p²/2 + x²/2 + λx³: E = 1/2 − (11/8)λ² − (465/32)λ⁴ − (39709/128)λ⁶ − …, odd orders zero and the
    # even ones growing like Γ(j + 1/2) 60^j (Bender & Wu, Phys. Rev. D 7, 1620 (1973))
    m = anharmonic_oscillator(kind="cubic", n_basis=200)  # order 40 reaches state 120 < 200: coefficients exact
    r = convergence(m, 0, 40, coupling=0.05)
    np.testing.assert_allclose(r.energy_coefficients[[2, 4, 6]], [-11 / 8, -465 / 32, -39709 / 128], rtol=1e-12)
    assert r.kind == "asymptotic" and r.radius == 0.0 and r.period == 2
    assert "inside" not in r.summary and "converges" not in r.summary
    assert r.optimal_order is not None and r.optimal_order % 2 == 0


def test_quartic_oscillator_ground_state_is_asymptotic():
    # H = p²/2 + x²/2 + λx⁴: E = 1/2 + (3/4)λ − (21/8)λ² + (333/16)λ³ − …, radius zero
    # (Bender & Wu, Phys. Rev. 184, 1231 (1969))
    m = anharmonic_oscillator(kind="quartic", n_basis=200)
    r = convergence(m, 0, 40, coupling=0.02)
    np.testing.assert_allclose(r.energy_coefficients[1:4], [3 / 4, -21 / 8, 333 / 16], rtol=1e-12)
    assert r.kind == "asymptotic" and r.radius == 0.0
    assert "inside" not in r.summary


def test_two_level_series_is_convergent_with_the_closed_form_radius():
    # E = −√(Δ²/4 + λ²v²): branch points at λ = ±iΔ/(2v) (closed form), radius Δ/(2|v|)
    delta, v = 1.0, 0.25
    r = convergence(Model(np.diag([-delta / 2, delta / 2]), [[0, v], [v, 0]]), 0, 30, coupling=1.0)
    assert r.kind == "convergent"
    assert r.radius == pytest.approx(delta / (2 * v), rel=1e-6)
    assert "inside" in r.summary


def _pattern_series(d: np.ndarray, m: int, order: int) -> np.ndarray:
    c = np.zeros(order + 1)
    c[0] = 1.0
    for j, x in enumerate(d, start=1):
        if m * j <= order:
            c[m * j] = x
    return c


@pytest.mark.parametrize("m", [1, 2, 3])
@pytest.mark.parametrize("a", [0.5, 1.0])
def test_gamma_growth_of_every_mth_coefficient_is_asymptotic(m, a):
    # d_j = Γ(j + a) A^j (−1)^j on every m-th order (synthetic; factorial growth: zero radius, common practice)
    j = np.arange(1, 61)
    d = (-1.0) ** j * np.exp(gammaln(j + a) + j * np.log(3.0))
    out = analyse(_pattern_series(d, m, 60), 1.0)
    assert out.kind == "asymptotic" and out.period == m


@pytest.mark.parametrize("m", [1, 2, 3])
def test_geometric_every_mth_coefficient_is_convergent_with_the_right_radius(m):
    # d_j = R^(−j) j^(−3/2) on every m-th order: a square-root branch point at μ = λ^m = R, so |λ| = R^(1/m)
    # (synthetic; Domb & Sykes, Proc. R. Soc. A 240, 214 (1957) for the ratio form)
    R = 0.5
    j = np.arange(1, 61)
    d = R ** (-j) * j**-1.5
    out = analyse(_pattern_series(d, m, 60), 1.0)
    assert out.kind == "convergent" and out.period == m
    assert out.domb_sykes == pytest.approx(R ** (1 / m), rel=1e-3)


def test_a_radius_that_keeps_shrinking_is_never_called_convergent():
    # Γ(j)^0.45 growth (synthetic): the growth exponent 0.45 is below the factorial test's 0.5, but the root-test
    # radius falls like j^(−0.45) as orders are added; no finite radius is in sight
    j = np.arange(1, 61)
    d = np.exp(0.45 * gammaln(j + 1.0))
    out = analyse(_pattern_series(d, 2, 60), 1.0)
    assert out.kind == "asymptotic"
    assert any("keeps shrinking" in n for n in out.notes)
