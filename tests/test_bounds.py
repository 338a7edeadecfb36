"""Error brackets without exact solves, checked against closed forms and brute-force eigensolvers."""

import json
import warnings

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import HealthCheck, given, settings, strategies as st
from scipy.optimize import brentq

from ptcheck import CertifiedBoundary, ErrorBounds, Model, Quantity, certified_boundary, error_bounds
from ptcheck.errors import DegenerateLevelError
from ptcheck.models import spin_chain

from conftest import oscillator_x


# ---------------------------------------------------------------------- brute-force referees
def tracked_levels(model: Model, level: int, couplings, *, steps: int = 400) -> np.ndarray:
    """The exact level continuous from the unperturbed one, at each coupling (dense eigh along a fine path
    from 0 through the couplings, following the eigenvector of largest overlap).  Common practice, no source."""
    h0 = np.diag(model.e0)
    v = model.v.toarray() if sp.issparse(model.v) else np.asarray(model.v)
    lam = np.asarray(couplings, dtype=float)
    out = np.empty(lam.size)
    for sign in (1.0, -1.0):
        idx = np.flatnonzero(np.sign(lam) == sign) if sign > 0 else np.flatnonzero(lam < 0)
        if sign > 0:
            idx = np.concatenate([np.flatnonzero(lam == 0), idx])
        idx = idx[np.argsort(np.abs(lam[idx]))]
        if idx.size == 0:
            continue
        top = float(np.max(np.abs(lam[idx])))
        path = np.union1d(np.linspace(0.0, top, steps), np.abs(lam[idx]))
        vec = np.zeros(model.n)
        vec[level] = 1.0
        values = {0.0: model.e0[level]}
        for x in path[1:]:
            w, u = np.linalg.eigh(h0 + sign * x * v)
            k = int(np.argmax(np.abs(u.conj().T @ vec)))
            vec = u[:, k]
            values[float(x)] = w[k]
        for i in idx:
            out[i] = values[float(abs(lam[i]))]
    return out


def ranked_levels(model: Model, level: int, couplings) -> np.ndarray:
    """The exact eigenvalue of energy rank ``level`` (numpy eigvalsh)."""
    h0 = np.diag(model.e0)
    v = model.v.toarray() if sp.issparse(model.v) else np.asarray(model.v)
    return np.array([np.linalg.eigvalsh(h0 + x * v)[level] for x in couplings])


def brute_boundary(exact, pert, tol, s_max, *, relative=False, e0=0.0, n_grid=2000) -> float:
    """First |λ| where the error exceeds the tolerance: fine grid, then brentq.  Common practice, no source."""
    def g(s):
        err = abs(pert(s) - exact(s))
        return err / abs(exact(s) - e0) - tol if relative else err - tol

    grid = np.linspace(0.0, s_max, n_grid)[1:]
    vals = np.array([g(s) for s in grid])
    bad = np.flatnonzero(vals > 0)
    if bad.size == 0:
        return np.inf
    i = int(bad[0])
    if i == 0:
        return brentq(g, 1e-9 * s_max, grid[0], xtol=1e-13)
    return brentq(g, grid[i - 1], grid[i], xtol=1e-13, rtol=1e-13)


# ---------------------------------------------------------------------- closed forms
def two_level(delta=1.0, v=1.0):
    # E_± = ±sqrt((Δ/2)^2 + λ^2 v^2) (Cohen-Tannoudji, Diu, Laloë, Quantum Mechanics, Complement B_IV)
    m = Model(np.diag([-delta / 2, delta / 2]), [[0, v], [v, 0]])
    exact = lambda lam, sign: sign * np.sqrt((delta / 2) ** 2 + (np.asarray(lam) * v) ** 2)  # noqa: E731
    return m, exact


@pytest.mark.parametrize("gap", ["auto", "weyl", "neighbours", "estimate"])
def test_two_level_brackets_contain_closed_form(gap):
    m, exact = two_level()
    lam = np.array([-0.9, -0.4, -0.05, 1e-3, 0.02, 0.1, 0.3, 0.45, 0.8, 1.5])
    for level, sign in ((0, -1.0), (1, +1.0)):
        for order in (1, 2, 4, "pade1/1"):
            b = error_bounds(m, level, order, lam, gap=gap)
            e = exact(lam, sign)
            slack = 1e-14  # eigenvalue rounding of the closed form itself
            assert np.all(b.energy_lower <= e + slack) and np.all(e - slack <= b.energy_upper)
            err = np.abs(b.perturbative - e)
            assert np.all(b.error_lower <= err + slack) and np.all(err <= b.error_upper + slack)
            assert b.exact_solves == 0


@pytest.mark.parametrize("order,power", [(1, 2), (2, 4), (4, 6)])
def test_two_level_error_brackets_tight_to_expected_power(order, power):
    # The exact error of the order-k energy is ~ c λ^p with p the first omitted even power (closed form above);
    # both ends of the bracket must follow that power, and the bracket must be far narrower than the error
    # (Kato–Temple width r²/gap with r = O(λ^(K+1)): T. Kato, J. Phys. Soc. Japan 4, 334 (1949)).
    m, exact = two_level(delta=1.0, v=1.0)
    lam = np.array([0.02, 0.04])
    b = error_bounds(m, 0, order, lam, gap="weyl", trial_order=order + 4)
    err = np.abs(b.perturbative - exact(lam, -1.0))
    for bound in (b.error_lower, b.error_upper):
        assert np.log(bound[1] / bound[0]) / np.log(2.0) == pytest.approx(power, abs=0.05)
    assert np.all(b.error_upper - b.error_lower < 1e-6 * err + 1e-14)  # 1e-14: float64 rounding margin
    assert bool(b.rigorous.all()) and bool(b.identified.all())


def test_bracket_width_follows_temple_power_on_a_larger_model():
    # With a 3-vector trial space in a 12-level invented random model, the bracket width is r²/gap;
    # r shrinks at least like λ^(K+1), so the width like λ^(2K+2) or faster (T. Kato, 1949, as above).
    m = random_model(3, 12, 0.3)
    lam = np.array([0.04, 0.08])  # above the float64 floor of the residual (~1e-7 here)
    b = error_bounds(m, 0, 1, lam, gap="weyl", trial_order=2)
    width = b.energy_upper - b.energy_lower
    assert np.log(width[1] / width[0]) / np.log(2.0) >= 2 * 2 + 2 - 0.1
    assert np.all(width > 0)


def test_oscillator_with_linear_term():
    # H = a†a + 1/2 + λ x: completing the square, E_n = n + 1/2 − λ²/2 (m = ω = 1)
    # (e.g. Sakurai & Napolitano, Modern Quantum Mechanics; the truncation to 40 states changes the low
    # levels by far less than 1e-12 at these couplings, checked against eigvalsh below)
    n = 40
    m = Model(np.diag(np.arange(n) + 0.5), oscillator_x(n)[:n, :n])
    lam = np.array([-0.6, 0.01, 0.1, 0.3, 0.7, 1.0])
    for level in (0, 1, 3):
        closed = level + 0.5 - lam**2 / 2
        np.testing.assert_allclose(ranked_levels(m, level, lam), closed, atol=1e-12)
        for order, true_err in ((1, lam**2 / 2), (2, 0.0 * lam)):
            b = error_bounds(m, level, order, lam)
            assert np.all(b.energy_lower <= closed + 1e-12) and np.all(closed - 1e-12 <= b.energy_upper)
            assert np.all(b.error_lower <= true_err + 1e-12) and np.all(true_err <= b.error_upper + 1e-12)
            # tight: the bracket of the error is within 1e-8 of the exact error (order 2 is exact)
            assert np.all(b.error_upper - true_err < 1e-8 + 1e-6 * true_err)
            assert bool(b.identified.all())


# ---------------------------------------------------------------------- identification
def test_crossing_between_sectors_keeps_the_labelled_level():
    # Two uncoupled levels E_0 = λ and E_1 = 1 − λ cross at λ = 1/2 (common practice, no source): V never
    # couples them, so they are separate symmetry sectors and each is bracketed in its own sector.
    m = Model(np.diag([0.0, 1.0]), np.diag([1.0, -1.0]))
    b = error_bounds(m, 0, 1, [0.2, 0.7])
    assert b.identified.tolist() == [True, True]
    assert b.energy_lower[1] <= 0.7 <= b.energy_upper[1]  # the labelled level, above the other one
    assert b.energy_lower[0] <= 0.2 <= b.energy_upper[0]


def test_unprovable_separation_is_flagged_not_identified():
    # The same pair coupled by 1e-7: an avoided crossing at λ = 1/2 with a gap of 2e-7 (common practice, no
    # source).  Separation from the neighbour cannot be shown through it: beyond it the bracket is flagged as
    # about the level of the same energy rank (numpy eigvalsh referee).
    m = Model(np.diag([0.0, 1.0]), [[1.0, 1e-7], [1e-7, -1.0]])
    b = error_bounds(m, 0, 1, [0.2, 0.7])
    assert b.identified.tolist() == [True, False]
    rank0 = np.linalg.eigvalsh(m.hamiltonian(0.7))[0]
    assert b.energy_lower[1] <= rank0 <= b.energy_upper[1]
    assert any("same energy rank" in n for n in b.notes)


# ---------------------------------------------------------------------- property tests
def random_model(seed: int, n: int, scale: float, *, complex_: bool = False) -> Model:
    rng = np.random.default_rng(seed)
    e0 = np.cumsum(rng.uniform(0.3, 1.5, size=n))
    a = rng.normal(size=(n, n)) + (1j * rng.normal(size=(n, n)) if complex_ else 0.0)
    v = scale * (a + a.conj().T) / 2
    return Model(np.diag(e0), v)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 10_000),
    n=st.integers(3, 8),
    scale=st.floats(0.05, 0.6),
    gap=st.sampled_from(["auto", "weyl", "neighbours", "estimate"]),
    order=st.integers(0, 4),
    complex_=st.booleans(),
)
def test_random_models_exact_level_in_every_bracket(seed, n, scale, gap, order, complex_):
    # invented random (real or complex Hermitian) models; the referee is numpy's eigh (rank, and tracked by
    # overlap on a fine path).  With N <= 8 the Lanczos estimate spans the whole space, so it is exact here.
    m = random_model(seed, n, scale, complex_=complex_)
    level = seed % n
    lam = np.array([-0.5, -0.1, 0.05, 0.2, 0.6])
    b = error_bounds(m, level, order, lam, gap=gap, trial_order=order + 4)
    ranked = ranked_levels(m, level, lam)
    tracked = tracked_levels(m, level, lam)
    slack = 1e-12 * (1 + np.max(np.abs(ranked)))
    assert np.all(b.energy_lower <= ranked + slack) and np.all(ranked - slack <= b.energy_upper)
    ok = b.identified
    assert np.all(b.energy_lower[ok] <= tracked[ok] + slack) and np.all(tracked[ok] - slack <= b.energy_upper[ok])
    err = np.abs(b.perturbative - tracked)
    assert np.all(b.error_lower[ok] <= err[ok] + slack) and np.all(err[ok] <= b.error_upper[ok] + slack)
    assert np.all(b.error_lower <= b.error_upper)


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10_000), n=st.integers(3, 8), scale=st.floats(0.05, 0.5), order=st.integers(0, 3))
def test_temple_never_violated_with_a_true_gap(seed, n, scale, order):
    # Kato–Temple with a true gap (T. Kato, J. Phys. Soc. Japan 4, 334 (1949); G. Temple, Proc. R. Soc. A 119,
    # 276 (1928)): the gap given is 0.9 x the smallest distance from the tracked level to any other eigenvalue
    # on a fine path from 0 (brute force with numpy eigh).
    m = random_model(seed, n, scale)
    level = seed % n
    lam = np.array([0.05, 0.15, 0.3])
    v = np.asarray(m.v)
    path = np.linspace(0.0, lam[-1], 300)
    gaps = []
    vec = np.eye(n)[level]
    for x in path:
        w, u = np.linalg.eigh(np.diag(m.e0) + x * v)
        k = int(np.argmax(np.abs(u.T @ vec)))
        vec = u[:, k]
        gaps.append(np.min(np.abs(np.delete(w, k) - w[k])))
    delta = 0.9 * float(np.min(gaps))
    b = error_bounds(m, level, order, lam, gap=delta, trial_order=order + 3)
    tracked = tracked_levels(m, level, lam)
    slack = 1e-12 * (1 + np.max(np.abs(tracked)))
    ok = b.identified
    assert np.all(b.energy_lower[ok] <= tracked[ok] + slack) and np.all(tracked[ok] - slack <= b.energy_upper[ok])
    assert not b.rigorous.any()  # conditional on the gap given
    assert set(b.gap_kind.tolist()) == {"given"}


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10_000), shift=st.floats(-50, 50), flip=st.booleans())
def test_invariances(seed, shift, flip):
    # A constant added to H0 moves every bracket by that constant; V -> -V with λ -> -λ changes nothing
    # (common practice, no source).
    m = random_model(seed, 5, 0.3)
    v = np.asarray(m.v)
    lam = np.array([0.1, 0.4])
    base = error_bounds(m, 1, 2, lam, gap="weyl")
    other = Model(np.diag(m.e0 + shift), -v if flip else v)
    b = error_bounds(other, 1, 2, -lam if flip else lam, gap="weyl")
    tol = 1e-9 * (1 + abs(shift))
    np.testing.assert_allclose(b.energy_lower - shift, base.energy_lower, atol=tol)
    np.testing.assert_allclose(b.error_upper, base.error_upper, atol=tol)


# ---------------------------------------------------------------------- derived quantities
def test_transition_bracket_is_interval_sum_and_contains_exact():
    # a transition E_2 − E_0 and a χ-like combination (weights +1, −1, −1, +1) on an invented random model;
    # referee: numpy eigvalsh by rank (levels stay ordered at these couplings; checked via identified).
    m = random_model(7, 6, 0.15)
    lam = np.array([0.05, 0.2, 0.4])
    q = Quantity("E2-E0", {2: 1.0, 0: -1.0})
    b = error_bounds(m, q, 2, lam)
    exact = ranked_levels(m, 2, lam) - ranked_levels(m, 0, lam)
    assert b.identified.all()
    assert np.all(b.energy_lower <= exact + 1e-12) and np.all(exact - 1e-12 <= b.energy_upper)
    p2, p0 = b.parts[0], b.parts[1]
    np.testing.assert_allclose(b.energy_upper, p2.energy_upper - p0.energy_lower)
    chi = Quantity("chi", {3: 1.0, 2: -1.0, 1: -1.0, 0: 1.0})
    c = error_bounds(m, chi, 3, lam)
    ex = sum(w * ranked_levels(m, k, lam) for k, w in {3: 1.0, 2: -1.0, 1: -1.0, 0: 1.0}.items())
    assert np.all(c.energy_lower <= ex + 1e-12) and np.all(ex - 1e-12 <= c.energy_upper)
    err = np.abs(c.perturbative - ex)
    assert np.all(c.error_lower <= err + 1e-12) and np.all(err <= c.error_upper + 1e-12)
    assert len(c.parts) == 4


# ---------------------------------------------------------------------- Krylov refinement, sparse models
def test_krylov_steps_never_widen_and_stay_valid():
    m = spin_chain(n_spins=8, h_z=[0.1, 0.13, 0.17, 0.11, 0.19, 0.14, 0.12, 0.16])  # invented fields
    lam = np.array([0.3, 0.8, 1.2])
    plain = error_bounds(m, 0, 2, lam, trial_order=6)
    refined = error_bounds(m, 0, 2, lam, trial_order=6, krylov_steps=6)
    exact = ranked_levels(m, 0, lam)  # scipy-free referee: numpy eigvalsh of the dense 256 x 256 matrix
    for b in (plain, refined):
        assert np.all(b.energy_lower <= exact + 1e-11) and np.all(exact - 1e-11 <= b.energy_upper)
    assert np.all(refined.energy_upper - refined.energy_lower <= plain.energy_upper - plain.energy_lower + 1e-15)
    assert refined.mat_vecs > plain.mat_vecs


# ---------------------------------------------------------------------- certified boundary
@pytest.mark.parametrize("order,rtol", [(2, 1e-2), (2, 1e-3), (4, 1e-2), (4, 1e-3)])
def test_two_level_certified_boundary_below_closed_form_boundary(order, rtol):
    m, exact = two_level()
    coef = m.series(0, order).energy_coefficients
    true = brute_boundary(lambda s: exact(s, -1.0), lambda s: np.polyval(coef[::-1], s), rtol, 0.45, relative=True, e0=-0.5)
    c = certified_boundary(m, 0, order, rtol=rtol)
    assert isinstance(c, CertifiedBoundary)
    assert 0 < c.coupling <= true
    assert c.coupling > 0.999 * true  # certified within 0.1 % here (smooth, well-separated levels)
    assert c.fail_coupling >= true
    assert c.status == "bracketed" and c.rigorous and c.exact_solves == 0


def test_certified_boundary_of_a_transition():
    # E_1 − E_0 = 2 sqrt(1/4 + λ²) for the two-level model above (closed form); its order-2 value is 1 + 2λ²
    m, exact = two_level()
    q = Quantity("transition", {1: 1.0, 0: -1.0}, relative_to="shift")
    true = brute_boundary(lambda s: 2 * exact(s, 1.0), lambda s: 1 + 2 * s**2, 1e-3, 0.45, relative=True, e0=1.0)
    c = certified_boundary(m, q, 2, rtol=1e-3)
    assert 0.99 * true <= c.coupling <= true <= abs(c.fail_coupling)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10_000), n=st.integers(3, 7), scale=st.floats(0.1, 0.5), order=st.integers(1, 3),
       direction=st.sampled_from([1, -1]), absolute=st.booleans())
def test_certified_boundary_never_above_brute_force(seed, n, scale, order, direction, absolute):
    # referee: fine grid + brentq on the tracked exact level (numpy eigh); invented random models
    m = random_model(seed, n, scale)
    level = seed % n
    s = m.series(level, order)
    tol = 1e-3
    c = certified_boundary(m, level, order, tol=tol if absolute else None, rtol=None if absolute else tol,
                           direction=direction, max_coupling=3.0)
    top = min(abs(c.fail_coupling) if np.isfinite(c.fail_coupling) else 3.0, 3.0) * 1.01
    grid = np.linspace(0.0, top, 300)[1:]
    exact = tracked_levels(m, level, direction * grid, steps=600)
    pert = s.energy(direction * grid)
    err = np.abs(pert - exact)
    ref = np.abs(exact - m.e0[level])
    viol = err > tol if absolute else err > tol * ref
    first_bad = grid[np.argmax(viol)] if viol.any() else np.inf
    assert abs(c.coupling) <= first_bad + 1e-9  # nothing certified beyond a sampled failure
    if np.isfinite(c.fail_coupling):  # the order really fails there
        e_fail = tracked_levels(m, level, [c.fail_coupling], steps=600)[0]
        err_fail = abs(float(s.energy(c.fail_coupling)) - e_fail)
        assert err_fail > (tol if absolute else tol * abs(e_fail - m.e0[level]))


def test_chain_certified_boundary_against_brute_force():
    # invented site fields; referee: dense numpy eigvalsh of the 2^7-state chain on a fine grid + brentq
    m = spin_chain(n_spins=7, h_z=[0.1, 0.25, 0.17, 0.3, 0.12, 0.22, 0.28])
    coef = m.series(0, 3).energy_coefficients
    v = m.v.toarray()
    exact = lambda s: np.linalg.eigvalsh(np.diag(m.e0) + s * v)[0]  # noqa: E731 (gapped ground state: rank 0)
    for order, rtol in ((2, 1e-2), (3, 1e-3)):
        true = brute_boundary(exact, lambda s: np.polyval(coef[: order + 1][::-1], s), rtol, 1.5, relative=True,
                              e0=m.e0[0], n_grid=150)
        c = certified_boundary(m, 0, order, rtol=rtol)
        assert c.coupling <= true and c.coupling >= 0.9 * true
        assert c.fail_coupling >= true
        assert c.exact_solves == 0


def test_neighbour_gap_beats_weyl_when_the_next_level_is_far():
    # invented three-level model E0 = (0, 1, 10): the neighbour's own Kato–Temple bracket (closed by Weyl at the
    # far level) bounds E_1 far better than Weyl's inequality does, so the rigorous certificate reaches further.
    v = np.array([[0.0, 0.3, 0.2], [0.3, 0.1, 0.4], [0.2, 0.4, -0.2]])
    m = Model(np.diag([0.0, 1.0, 10.0]), v)
    weyl = certified_boundary(m, 0, 2, rtol=1e-3, gap="weyl")
    nb = certified_boundary(m, 0, 2, rtol=1e-3, gap="neighbours")
    assert weyl.rigorous and nb.rigorous
    assert nb.coupling >= weyl.coupling
    lam = np.linspace(0.05, 1.2, 6)
    bw = error_bounds(m, 0, 2, lam, gap="weyl")
    bn = error_bounds(m, 0, 2, lam, gap="neighbours")
    assert np.all(bn.neighbour_above >= bw.neighbour_above) and np.any(bn.neighbour_above > bw.neighbour_above + 0.1)
    exact = ranked_levels(m, 1, lam)  # numpy eigvalsh: the bound on the neighbour stays below it
    assert np.all(bn.neighbour_above <= exact + 1e-12)


def test_rigorous_coupling_and_status_fields():
    m, _ = two_level()
    c = certified_boundary(m, 0, 2, tol=1e-4, gap="estimate")
    assert not c.rigorous and c.rigorous_coupling == 0.0 and c.gap_kind == "estimate"
    d = certified_boundary(m, 0, 0, rtol=1e-2)
    assert d.status == "fails_at_zero" and d.coupling == 0.0
    e = certified_boundary(m, 0, 2, tol=1e-4, max_coupling=1e-3)
    assert e.status == "certified_to_max" and e.coupling == pytest.approx(1e-3)
    neg = certified_boundary(m, 0, 2, tol=1e-4, direction=-1)
    assert neg.coupling < 0 and neg.fail_coupling < 0


# ---------------------------------------------------------------------- results and input checks
def test_result_object_contract():
    m, _ = two_level()
    b = error_bounds(m, 0, 2, [0.1, 0.2])
    assert isinstance(b, ErrorBounds)
    with pytest.raises(AttributeError):
        b.order = 3
    with pytest.raises(ValueError):
        b.energy_lower[0] = 0.0
    json.dumps(b.to_dict())
    assert len(repr(b)) < 200 and "<table>" in b._repr_html_()
    c = certified_boundary(m, 0, 2, rtol=1e-2)
    json.dumps(c.to_dict())
    assert "exact_solves=0" in repr(c) and "<code>" in c._repr_html_()


def test_bad_input_messages():
    m, _ = two_level()
    with pytest.raises(ValueError, match="gap must be one of"):
        error_bounds(m, 0, 2, [0.1], gap="exact")
    with pytest.raises(ValueError, match="gap must be a positive"):
        error_bounds(m, 0, 2, [0.1], gap=-1.0)
    with pytest.raises(TypeError, match="gap must be one of"):
        error_bounds(m, 0, 2, [0.1], gap=[1.0])
    with pytest.raises(ValueError, match="trial_order must exceed"):
        error_bounds(m, 0, 4, [0.1], trial_order=4)
    with pytest.raises(ValueError, match="krylov_steps must be 0"):
        error_bounds(m, 0, 2, [0.1], krylov_steps=1)
    with pytest.raises(TypeError, match="one level or Quantity"):
        error_bounds(m, [0, 1], 2, [0.1])
    with pytest.raises(ValueError, match="exactly one of tol"):
        certified_boundary(m, 0, 2, tol=1e-3, rtol=1e-3)
    with pytest.raises(ValueError, match="truncation order"):
        certified_boundary(m, 0, "pade1/1", tol=1e-3)
    with pytest.raises(ValueError, match="direction must be"):
        certified_boundary(m, 0, 2, tol=1e-3, direction=2)
    deg = Model(np.diag([0.0, 0.0, 1.0]), np.ones((3, 3)))
    with pytest.raises(DegenerateLevelError, match="needs a level that is not degenerate with another level of its sector"):
        certified_boundary(deg, 0, 2, tol=1e-3)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        error_bounds(m, 1, 2, np.linspace(-1, 1, 5))  # no stray warnings
