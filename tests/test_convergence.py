"""Tests for ptcheck.convergence: radius, exceptional points, Kato bound, growth class."""

import json
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, note, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.special import gamma
from threadpoolctl import threadpool_limits

from conftest import oscillator_power, oscillator_x
from ptcheck import DegenerateLevelError, Model
from ptcheck.convergence import (
    AGREEMENT_RTOL,
    ConvergenceResult,
    DivergenceMap,
    convergence,
    divergence_map,
)


def two_level(delta, v, a=0.0, b=0.0):
    return Model(np.diag([0.0, delta]), [[a, v], [v, b]], name="two-level (invented numbers)")


# ---------------------------------------------------------------- two-level system
@pytest.mark.parametrize("delta, v", [(1.0, 0.25), (1.3, 0.4), (0.7, -1.1)])
def test_two_level_branch_points_closed_form(delta, v):
    # Closed form of the two-level eigenvalues (any QM text):
    # E± = Δ/2 ± sqrt(Δ²/4 + λ² v²): branch points at λ = ±iΔ/(2|v|), radius Δ/(2|v|).
    r = convergence(two_level(delta, v), 0, 40)
    expected = delta / (2 * abs(v))
    assert r.kind == "convergent"
    assert_allclose(np.sort_complex(r.exceptional_points), [-1j * expected, 1j * expected], atol=1e-9 * expected)
    assert_allclose(r.radius, expected, rtol=1e-9)
    assert list(r.partners) == [1, 1]
    # the coalescing eigenvalue is Δ/2 (the square root vanishes)
    assert_allclose(r.ep_energies, [delta / 2, delta / 2], atol=1e-9)
    # the series is even in λ: only every other coefficient is nonzero
    assert r.period == 2
    # coefficient estimators agree with the closed form too (Domb–Sykes is exact up to O(1/k^2))
    assert_allclose(r.estimates.domb_sykes, expected, rtol=1e-3)
    assert_allclose(r.estimates.root, expected, rtol=0.05)
    assert r.agreement == "agree"
    # Kato's bound d/(2‖V‖) equals the radius here (d = Δ, ‖V‖ = |v|)
    assert_allclose(r.kato_bound, expected, rtol=1e-12)


def test_two_level_with_diagonal_perturbation():
    # Closed form: eigenvalues of [[aλ, vλ], [vλ, Δ + bλ]] coalesce where
    # (Δ + λ(b - a))² + 4 λ² v² = 0, i.e. λ = -Δ / ((b - a) ∓ 2i|v|).
    delta, v, a, b = 1.0, 0.3, 0.2, -0.5
    r = convergence(two_level(delta, v, a, b), 0, 40)
    lam = -delta / ((b - a) - 2j * abs(v))
    expected = np.sort_complex(np.array([lam, np.conj(lam)]))
    assert_allclose(np.sort_complex(r.exceptional_points), expected, rtol=1e-9)
    assert_allclose(r.radius, abs(lam), rtol=1e-9)
    assert r.kato_bound <= r.radius
    assert r.agreement == "agree"


# ---------------------------------------------------------------- anharmonic oscillator
@pytest.fixture(scope="module")
def quartic():
    # H0 = a†a + 1/2, V = x^4 in N = 400 number states (x built with headroom, then x^4
    # truncated).  E^(k) only involves states up to 2k (V moves by at most 4 per order and
    # the path returns to 0), so orders <= 40 need states <= 80 << 400: exact in this basis.
    n = 400
    return Model(np.diag(np.arange(n) + 0.5), oscillator_power(4, n), name="quartic oscillator")


def test_quartic_is_asymptotic_with_bender_wu_growth(quartic):
    r = convergence(quartic, 0, 40, coupling=0.1)
    c = r.energy_coefficients
    k = np.arange(c.size)
    # Bender & Wu, Phys. Rev. D 7, 1620 (1973): E_k ≈ (-1)^(k+1) (√6/π^(3/2)) 3^k Γ(k + 1/2)
    bw = (-1.0) ** (k + 1) * np.sqrt(6) / np.pi**1.5 * 3.0**k * gamma(k + 0.5)
    assert np.all(np.sign(c[1:]) == np.sign(bw[1:]))  # alternating signs
    ratio = c[1:] / bw[1:]
    sel = np.array([10, 20, 30, 40]) - 1
    assert np.all(np.diff(np.abs(1 - ratio[sel])) < 0)  # ratio -> 1 as k grows
    assert abs(ratio[-1] - 1) < 0.05
    assert r.kind == "asymptotic"
    assert r.radius == 0.0
    # factorial growth: the ratio of successive coefficients grows linearly (exponent ~ 1)
    assert 0 < r.optimal_order < 40
    assert r.optimal_order == int(np.argmin(np.abs(c[1:]) * 0.1 ** k[1:])) + 1
    assert r.smallest_term > 0
    assert "asymptotic" in r.summary and str(r.optimal_order) in r.summary


def test_quartic_smallest_term_estimates_the_error(quartic):
    # The exact value at λ = 0.1 (Hioe & Montroll, J. Math. Phys. 16, 1945 (1975), table of
    # E0 for the x^4 oscillator: 0.559146327, from memory) confirms the basis is converged.
    lam = 0.1
    exact = np.linalg.eigvalsh(quartic.hamiltonian(lam))[0]
    assert_allclose(exact, 0.559146327, atol=2e-9)
    r = convergence(quartic, 0, 40, coupling=lam)
    s = quartic.series(0, 40)
    # optimal truncation: the error of the series truncated at the smallest term is of
    # the size of that term (common practice, no source)
    err = abs(s.energy(lam, order=r.optimal_order) - exact)
    assert err <= r.smallest_term
    # while pushing the series far beyond the optimal order is much worse
    assert abs(s.energy(lam, order=20) - exact) > 1e3 * r.smallest_term


# ---------------------------------------------------------------- terminating series
def test_shifted_oscillator_terminates():
    # H = a†a + 1/2 + λ x: completing the square gives E_n = n + 1/2 - λ²/2 exactly
    # (any QM text).  With N = 30 states the coefficients are exact up to order ~2N = 60 > 40.
    n = 30
    m = Model(np.diag(np.arange(n) + 0.5), oscillator_x(n)[:n, :n], name="shifted oscillator")
    r = convergence(m, 0, 40, coupling=2.0)
    assert r.kind == "terminating"
    assert r.radius == math.inf
    assert r.optimal_order == 2 and r.smallest_term == 0.0
    assert_allclose(r.energy_coefficients[:3], [0.5, 0.0, -0.5], atol=1e-14)
    assert "terminates" in r.summary


def test_diagonal_perturbation_terminates_at_first_order():
    # V diagonal: E_n(λ) = E_n + λ V_nn exactly (common practice, no source)
    m = Model(np.diag([0.0, 1.0, 2.5]), np.diag([0.3, -0.2, 0.1]))
    r = convergence(m, 1, 10)
    assert r.kind == "terminating" and r.radius == math.inf
    assert r.exceptional_points.size == 0


# ---------------------------------------------------------------- property test
@st.composite
def small_models(draw):
    # invented random models: spacings drawn by hypothesis, a dense random V from a drawn key
    # (dense V: no symmetry, so no exact real crossings and eigvalsh()[n] is level n's branch)
    n = draw(st.integers(2, 5))
    gaps = draw(st.lists(st.floats(0.2, 2.0), min_size=n - 1, max_size=n - 1))
    e0 = np.concatenate([[0.0], np.cumsum(gaps)])
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    a = rng.uniform(-1.0, 1.0, size=(n, n))
    v = (a + a.T) / 2
    level = draw(st.integers(0, n - 1))
    return Model(np.diag(e0), v, name="random (invented)"), level


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(small_models())
def test_property_kato_bound_and_partial_sums(case):
    # Kato 1966 ch. II §3: the series converges at least for |λ| < d/(2‖V‖); and by
    # Cauchy–Hadamard partial sums converge inside the radius and diverge outside it.
    m, level = case
    note(f"e0={m.e0.tolist()}, v={np.asarray(m.v).tolist()}, level={level}")
    r = convergence(m, level, 40)
    assert r.kind == "convergent"
    assert r.kato_bound <= r.radius * (1 + 1e-9)
    if np.isfinite(r.estimates.exceptional_point):
        assert r.kato_bound <= r.estimates.exceptional_point * (1 + 1e-9)
    s = m.series(level, 40)
    radius = r.radius
    scale = 1.0 + np.max(np.abs(m.e0))

    def exact(lam):
        return np.linalg.eigvalsh(m.hamiltonian(lam))[level]

    for sign in (1, -1):
        lam_in = 0.5 * radius * sign
        e_in = exact(lam_in)
        err = [abs(s.energy(lam_in, order=k) - e_in) for k in (10, 40)]
        assert err[1] <= max(1e-9 * scale, 1e-3 * err[0])
        lam_out = 1.5 * radius * sign
        terms = np.abs(s.energy_coefficients) * abs(lam_out) ** np.arange(41)
        assert np.max(terms[31:]) > 10 * np.max(terms[11:21])
        # partial sums run away from the exact energy (compared over windows of orders: with a
        # complex-conjugate pair of singularities the terms oscillate in size)
        e_out = exact(lam_out)
        sums = s.energies_by_order(lam_out)[:, 0]
        err_out = np.abs(sums - e_out)
        assert np.max(err_out[31:]) > 10 * np.max(err_out[11:21])


# ---------------------------------------------------------------- results, validation, map
def test_result_is_frozen_and_serialisable():
    # at λ = 1 the mixing ratio is 0.25, so 'auto' would analyse the (exact) block: ask for RS
    r = convergence(two_level(1.0, 0.25), 0, 30, coupling=1.0, treatment="nondegenerate")
    assert isinstance(r, ConvergenceResult)
    with pytest.raises(AttributeError):
        r.radius = 1.0
    with pytest.raises(ValueError):
        r.exceptional_points[0] = 0
    d = json.loads(json.dumps(r.to_dict()))
    assert d["kind"] == "convergent" and d["agreement"] == "agree"
    assert "radius" in repr(r) and "<table>" in r._repr_html_()
    assert "inside" in r.summary and "own convergence checks" in r.summary


def test_truncated_basis_artefact_is_explained():
    # Shifted oscillator in a 4-state basis: the RS coefficients equal the exact (terminating)
    # ones only up to order ~2N = 8 (common practice, no source: paths through the truncated
    # states start at order 2N).  The 4 x 4 matrix itself has a finite radius.
    n = 4
    m = Model(np.diag(np.arange(n) + 0.5), oscillator_x(n)[:n, :n])
    r40 = convergence(m, 0, 40)
    # with 40 orders the finite-matrix singularity shows in the coefficients: both pictures agree
    assert r40.kind == "convergent" and r40.agreement == "agree"
    assert abs(r40.estimates.root - r40.estimates.exceptional_point) <= AGREEMENT_RTOL * r40.estimates.exceptional_point
    # with 6 orders the coefficients still look terminating, the singularity search does not
    r6 = convergence(m, 0, 6)
    assert r6.kind == "terminating" and r6.radius == math.inf
    assert r6.agreement == "disagree"
    assert_allclose(abs(r6.exceptional_points[0]), r40.radius, rtol=1e-9)
    assert "truncation artefact" in r6.summary and "disagree" in r6.summary


def test_ep_search_can_be_switched_off():
    small = Model(np.diag(np.arange(40) + 0.5), oscillator_power(4, 40))
    r = convergence(small, 0, 18, ep_search="never")
    assert r.agreement == "unavailable"
    assert any("skipped" in n for n in r.notes)


def test_degenerate_level_raises():
    m = Model(np.diag([0.0, 0.0, 1.0]), np.array([[0, 0, 0.1], [0, 0.2, 0.1], [0.1, 0.1, 0]]))
    with pytest.raises(DegenerateLevelError):
        convergence(m, 0, 10, treatment="nondegenerate")
    assert convergence(m, 0, 10).treatment == "degenerate"  # the default analyses its degenerate group instead


@pytest.mark.parametrize(
    "kwargs, exc, msg",
    [
        (dict(level=5), ValueError, "level must be in"),
        (dict(order=1), ValueError, "order must be an int >= 2"),
        (dict(order=2.5), TypeError, "order must be an int"),
        (dict(coupling="x"), TypeError, "coupling must be a real number"),
        (dict(ep_search="sometimes"), ValueError, "ep_search must be one of"),
    ],
)
def test_bad_input(kwargs, exc, msg):
    args = dict(level=0, order=10)
    args.update(kwargs)
    with pytest.raises(exc, match=msg):
        convergence(two_level(1.0, 0.3), args.pop("level"), args.pop("order"), **args)


def test_bad_model_type():
    with pytest.raises(TypeError, match="Model"):
        convergence(np.eye(2), 0, 10)


def test_divergence_map_regimes():
    # Closed form of the two-level eigenvalues: radius Δ/(2|v|) = 2 for both levels.
    m = two_level(1.0, 0.25)  # radius 2 for both levels
    dm = divergence_map(m, [0, 1], order=30, couplings=[0.0, 1.0, 1.99, 2.01, 3.0])
    assert isinstance(dm, DivergenceMap)
    assert_allclose(dm.radius, [2.0, 2.0], rtol=1e-9)
    assert_allclose(dm.kato_bound, [2.0, 2.0], rtol=1e-12)
    assert dm.regime.shape == (2, 5)
    assert list(dm.regime[0]) == ["convergent"] * 3 + ["beyond radius"] * 2
    assert_allclose(np.sort_complex(dm.exceptional_points[1]), [-2j, 2j], atol=1e-9)
    assert json.loads(json.dumps(dm.to_dict()))["labels"] == ["n=0", "n=1"]
    assert "<table>" in dm._repr_html_()


def test_divergence_map_asymptotic_and_default_grid():
    small = Model(np.diag(np.arange(60) + 0.5), oscillator_power(4, 60))
    dm = divergence_map(small, 0, order=24)
    assert dm.kinds == ("asymptotic",)
    assert set(dm.regime[0]) == {"asymptotic"}
    assert dm.couplings.size == 201


def test_divergence_map_validity_boundaries():
    pytest.importorskip("ptcheck.compare", reason="ptcheck.compare (validity_boundary) not available yet")
    m = two_level(1.0, 0.25)
    dm = divergence_map(m, [0], order=20, orders=[2, 4], tol=1e-4)
    assert dm.boundaries.shape == (1, 2)
    b2, b4 = dm.boundaries[0]
    # the order-2 shift -λ²v²/Δ differs from the closed form by λ⁴v⁴/Δ³ + ...:
    # error 1e-4 near λ = (1e-4)^(1/4)/0.25 = 0.4 (closed form, expanded by hand)
    assert 0.3 < b2 < 0.5
    assert b4 > b2


def test_divergence_map_bad_input():
    m = two_level(1.0, 0.25)
    with pytest.raises(ValueError, match="duplicates"):
        divergence_map(m, [0, 0])
    with pytest.raises(ValueError, match="exactly one of tol and rtol"):
        divergence_map(m, [0], orders=[2])


# ---------------------------------------------------------------- exceptional points: solvers and sizes
def random_dense_model(n: int, key: int) -> Model:
    """Invented random model: spread H0 spectrum, dense real symmetric V."""
    rng = np.random.default_rng(key)
    a = rng.standard_normal((n, n))
    return Model(np.diag(np.sort(rng.uniform(0.0, 10.0, n))), 0.3 * (a + a.T), name="random dense (invented)")


def all_guesses(search, model: Model, level: int) -> list:
    from ptcheck._exceptional import branch_point_guesses

    c = model.series(level, 30).energy_coefficients
    return search.pair_guesses(level) + search.crossing_guesses(level, 3.0, points=25) + [
        (z, None) for z in branch_point_guesses(c)]


def splitting_ratio(model: Model, lam: complex, energy: complex) -> float:
    """Brute force with numpy: the two eigenvalues nearest E* split like √η at λ*(1 + η) near an EP2.

    Returns split(η = 1e-6) / split(η = 1e-4), ≈ 0.1 for a square-root branch point (Kato 1966,
    ch. II §1: Puiseux expansion of the eigenvalues at an exceptional point).
    """
    splits = []
    for eta in (1e-4, 1e-6):
        w = np.linalg.eigvals(model.e0 * np.eye(model.n) + lam * (1 + eta) * np.asarray(model.v))
        pair = w[np.argsort(np.abs(w - energy))[:2]]
        splits.append(abs(pair[0] - pair[1]))
    return splits[1] / splits[0]


@pytest.mark.parametrize("n, key", [(12, 1), (30, 2), (60, 3)])
def test_inverse_iteration_search_equals_full_eigendecomposition(n, key):
    # Referee: the same search with a full dense eigendecomposition (scipy.linalg.eig) at every
    # step instead of shifted inverse iteration (common practice, no source).
    from ptcheck._exceptional import ExceptionalPointSearch

    m = random_dense_model(n, key)
    for level in (0, 1):
        inv = ExceptionalPointSearch(m.e0, m.v, solver="inverse")
        full = ExceptionalPointSearch(m.e0, m.v, solver="full")
        guesses = all_guesses(full, m, level)
        with threadpool_limits(limits=1, user_api="blas"):  # many tiny dense problems: as convergence() runs them
            a, _ = inv.search(level, guesses)
            b, _ = full.search(level, guesses)
        assert len(a) == len(b) > 0, ([(c.coupling, c.partner) for c in a], [(c.coupling, c.partner) for c in b])
        for x, y in zip(a, b):
            assert_allclose(x.coupling, y.coupling, rtol=1e-9)
            assert_allclose(x.energy, y.energy, rtol=1e-6)
            assert (x.connected, x.partner) == (y.connected, y.partner)
            assert 0.05 < splitting_ratio(m, x.coupling, x.energy) < 0.2
        assert inv.eig_calls == 0  # no full eigendecomposition on the inverse-iteration path


def test_two_level_closed_form_inside_a_large_model_runs_by_default():
    # Two-level block (levels 0, 1) inside N = 300 > the former limit of 120 states; the other
    # levels are far and only coupled among themselves.  Closed form of the 2x2 eigenvalues
    # (common practice): branch points at λ = ±iΔ/(2|v|).  ep_search='auto' now runs the search.
    delta, v, n = 1.0, 0.25, 300
    e0 = np.concatenate([[0.0, delta], 20.0 + np.arange(n - 2) * 0.5])
    vv = np.zeros((n, n))
    vv[0, 1] = vv[1, 0] = v
    idx = np.arange(2, n - 1)
    vv[idx, idx + 1] = vv[idx + 1, idx] = 0.1
    m = Model(np.diag(e0), vv, name="embedded two-level (invented)")
    r = convergence(m, 0, 30)
    assert not any("skipped" in s for s in r.notes)
    expected = delta / (2 * abs(v))
    assert_allclose(np.sort_complex(r.exceptional_points), [-1j * expected, 1j * expected], atol=1e-9 * expected)
    assert list(r.partners) == [1, 1]
    assert_allclose(r.radius, expected, rtol=1e-9)


@pytest.mark.slow
def test_reduced_basis_search_equals_dense_search_on_a_small_chain():
    # The sparse variant (reduced basis refined by full-space residuals) against the dense search
    # on a 5-spin transverse-field Ising chain with invented site fields (N = 32): same nearest EP.
    from ptcheck._exceptional import ExceptionalPointSearch, ReducedExceptionalPointSearch
    from ptcheck.models import spin_chain

    m = spin_chain(n_spins=5, kind="transverse_ising", h_z=[0.1, 0.13, 0.16, 0.19, 0.22])
    seeds = m.series(0, 40).state_coefficients
    dense = ExceptionalPointSearch(m.e0, m.v.toarray())
    reduced = ReducedExceptionalPointSearch(m.e0, m.v)
    guesses = all_guesses(dense, m, 0)
    reduced.crossing_guesses(0, 3.0)
    with threadpool_limits(limits=1, user_api="blas"):
        a, _ = dense.search(0, guesses)
        b, _ = reduced.search(0, guesses, seeds=seeds)
    a = [c for c in a if c.connected]
    b = [c for c in b if c.connected]
    assert a and b
    assert_allclose(b[0].coupling, a[0].coupling, rtol=1e-9)
    assert b[0].partner == a[0].partner
    assert 0.05 < splitting_ratio(m, b[0].coupling, b[0].energy) < 0.2
