"""Multivariate Rayleigh–Schrödinger series against closed forms and the one-coupling series along rays."""

import numpy as np
import pytest
import scipy.sparse as sp
import sympy as sy
from hypothesis import given, settings, strategies as st

from ptcheck import Model, transition_frequency
from ptcheck.errors import DegenerateLevelError
from ptcheck.multiseries import multi_series
from ptcheck.quantities import quantity_series
from ptcheck.treatment import expansions

from conftest import oscillator_power, oscillator_x, random_hermitian


def _closed_form_coefficients(expr, l1, l2, order):
    """Taylor coefficients of a closed form to total degree ``order`` (sympy series in a common scale t)."""
    t = sy.symbols("t")
    ser = sy.series(expr.subs({l1: t * l1, l2: t * l2}), t, 0, order + 1).removeO()
    out = np.zeros((order + 1, order + 1))
    for (a, b), c in sy.Poly(sy.expand(ser.subs(t, 1)), l1, l2).terms():
        out[a, b] = float(c)
    return out


def test_oscillator_with_linear_and_quadratic_terms_every_coefficient_to_order_8():
    # H = p²/2 + x²/2 + λ1 x + λ2 x²: completing the square and rescaling the frequency ω = sqrt(1 + 2λ2)
    # give E0 = ½ sqrt(1 + 2λ2) − λ1² / (2(1 + 2λ2)) (standard result); every E^(a,b), a + b <= 8
    n = 60
    x = oscillator_x(n)[:n, :n]
    m = Model(np.diag(np.arange(n) + 0.5), [x, oscillator_power(2, n)], names=("l1", "l2"))
    s = multi_series(m, 0, 8)
    l1, l2 = sy.symbols("l1 l2")
    ref = _closed_form_coefficients(sy.sqrt(1 + 2 * l2) / 2 - l1**2 / (2 * (1 + 2 * l2)), l1, l2, 8)
    np.testing.assert_allclose(s.energy_coefficients, ref, rtol=1e-11, atol=1e-12)
    assert s.energy_coefficients.shape == (9, 9)
    assert np.all(s.energy_coefficients[np.add.outer(np.arange(9), np.arange(9)) > 8] == 0)
    # the excited level n = 2: E = (n + ½) sqrt(1 + 2λ2) − λ1² / (2(1 + 2λ2)) (same derivation)
    s2 = multi_series(m, 2, 6)
    ref2 = _closed_form_coefficients(sy.Rational(5, 2) * sy.sqrt(1 + 2 * l2) - l1**2 / (2 * (1 + 2 * l2)), l1, l2, 6)
    np.testing.assert_allclose(s2.energy_coefficients, ref2, rtol=1e-10, atol=1e-10)


def test_two_level_system_with_two_fields_closed_form():
    # H = diag(−Δ/2, Δ/2) + λ1 σx + λ2 σz: E_− = −sqrt((Δ/2 − λ2)² + λ1²) (two-level eigenvalues, closed form;
    # Cohen-Tannoudji, Diu, Laloë, Quantum Mechanics, Complement B_IV)
    delta = 1.3
    sx = np.array([[0.0, 1.0], [1.0, 0.0]])
    sz = np.diag([1.0, -1.0])
    m = Model(np.diag([-delta / 2, delta / 2]), [sx, sz])
    s = multi_series(m, 0, 10)
    l1, l2 = sy.symbols("l1 l2")
    d = sy.Rational(13, 10)
    ref = _closed_form_coefficients(-sy.sqrt((d / 2 - l2) ** 2 + l1**2), l1, l2, 10)
    np.testing.assert_allclose(s.energy_coefficients, ref, rtol=1e-10, atol=1e-13)
    pts = np.array([[0.05, 0.02], [-0.1, 0.03]])
    exact = -np.sqrt((delta / 2 - pts[:, 1]) ** 2 + pts[:, 0] ** 2)
    np.testing.assert_allclose(s.energy(pts), exact, rtol=1e-9)


@pytest.mark.parametrize("sparse", [False, True])
def test_along_any_ray_it_is_the_one_coupling_series(rng, sparse):
    # consistency of the recursion: collecting powers of t in Σ E^α (t d)^α gives the series of H0 + t d·V
    n = 14
    h0 = np.diag(np.sort(rng.uniform(0, 6, n)))
    v1 = random_hermitian(rng, n, sparse=sparse)
    v2 = random_hermitian(rng, n, sparse=sparse, complex_=True)
    m = Model(sp.csr_matrix(h0) if sparse else h0, [v1, v2], names=("g", "E"))
    s = multi_series(m, 3, 9)
    for theta in (0.0, 0.4, 1.9, np.pi, 4.0):
        d = np.array([np.cos(theta), np.sin(theta)])
        one = m.along(d).series(3, 9)
        np.testing.assert_allclose(s.along(d), one.energy_coefficients, rtol=1e-9, atol=1e-11)
        t = np.array([0.01, 0.03])
        for k in (1, 4, 9):
            np.testing.assert_allclose(s.energy(t[:, None] * d, order=k), one.energy(t, order=k), rtol=1e-12)
            np.testing.assert_allclose(np.abs(np.sum(s.state(t[:, None] * d, order=k).conj() * one.state(t, order=k), axis=1)), 1.0, atol=1e-12)


def test_points_broadcast_and_bad_input(rng):
    m = Model(np.diag([0.0, 1.0, 2.5]), [random_hermitian(rng, 3), random_hermitian(rng, 3)])
    s = multi_series(m, 0, 4)
    pts = rng.uniform(-0.1, 0.1, size=(3, 5, 2))
    e = s.energy(pts)
    assert e.shape == (3, 5)
    np.testing.assert_allclose(e[1, 2], s.energy(pts[1, 2]))
    assert np.ndim(s.energy((0.01, 0.02))) == 0
    with pytest.raises(ValueError, match="last axis of length 2"):
        s.energy([0.1, 0.2, 0.3])
    with pytest.raises(ValueError, match="order"):
        s.energy((0.1, 0.1), order=5)
    with pytest.raises(TypeError, match="one level or quantity"):
        multi_series(m, [0, 1], 2)
    with pytest.raises(ValueError, match="several couplings"):
        multi_series(Model(np.diag([0.0, 1.0]), [[0, 1], [1, 0]]), 0, 2)
    with pytest.raises(ValueError, match="treatment"):
        multi_series(m, 0, 2, treatment="magic")


def test_quantity_series_is_the_combination_and_matches_each_ray(rng):
    # a transition frequency E1 − E0 on a two-coupling model: along a ray it is the one-coupling quantity series
    h0 = np.diag([0.0, 1.0, 2.2, 3.1])
    m = Model(h0, [random_hermitian(rng, 4), random_hermitian(rng, 4)], labels=["a", "b", "c", "d"])
    f = transition_frequency("b", "a", name="f_ba")
    s = multi_series(m, f, 6)
    np.testing.assert_allclose(s.coefficients, multi_series(m, "b", 6).coefficients - multi_series(m, "a", 6).coefficients)
    d = np.array([0.8, -0.6])
    q = quantity_series(m.along(d), f, 6)
    np.testing.assert_allclose(s.along(d), q.coefficients, rtol=1e-10, atol=1e-12)
    assert s.state_coefficients is None


def test_nondegenerate_treatment_refuses_a_degenerate_level():
    m = Model(np.diag([0.0, 1.0, 1.0]), [np.diag([0, 0.1, -0.1]), np.ones((3, 3)) * 0.1])
    with pytest.raises(DegenerateLevelError):
        multi_series(m, 1, 2, treatment="nondegenerate")


def _doublet_model(rng):
    # a doublet {1, 2} of H0 (plus 4 other levels); V1 splits it, V2 mixes it; both couple it outside
    e = np.array([0.0, 1.0, 1.0, 2.3, 3.1, 4.0])
    v1 = random_hermitian(rng, 6) * 0.5
    v2 = random_hermitian(rng, 6) * 0.5
    return Model(np.diag(e), [v1, v2], names=("a", "b")), v1, v2, e


def test_degenerate_group_effective_hamiltonian_second_order_formula(rng):
    # second-order effective Hamiltonian of a degenerate group (Winkler, Spin-Orbit Coupling Effects in
    # Two-Dimensional Electron and Hole Systems, 2003, Appendix B, eq. B.15):
    # H^(2)_{mm'} = ½ Σ_l V_ml V_lm' [1/(E_m − E_l) + 1/(E_m' − E_l)], bilinear in V = λ1 V1 + λ2 V2
    m, v1, v2, e = _doublet_model(rng)
    s = multi_series(m, 1, 3)
    assert s.treatment == "degenerate" and s.groups == ((1, 2),) and s.energy_coefficients is None
    t = m.to_user_basis(np.eye(6)).T  # work basis columns (the doublet is rotated to good states)
    w1, w2 = (t.conj().T @ v @ t for v in (v1, v2))
    p, q = [1, 2], [0, 3, 4, 5]

    def second(a, b):
        out = np.zeros((2, 2))
        for i, mm in enumerate(p):
            for j, mp in enumerate(p):
                out[i, j] = 0.5 * sum(a[mm, l] * b[l, mp] * (1 / (e[1] - e[l]) + 1 / (e[1] - e[l])) for l in q)
        return out

    h = dict(zip(s.indices, s.effective_hamiltonians[0]))
    np.testing.assert_allclose(h[(1, 0)], w1[np.ix_(p, p)], atol=1e-12)
    np.testing.assert_allclose(h[(0, 1)], w2[np.ix_(p, p)], atol=1e-12)
    np.testing.assert_allclose(h[(2, 0)], second(w1, w1), atol=1e-11)
    np.testing.assert_allclose(h[(0, 2)], second(w2, w2), atol=1e-11)
    np.testing.assert_allclose(h[(1, 1)], second(w1, w2) + second(w2, w1), atol=1e-11)


def test_degenerate_level_energy_is_the_rays_degenerate_treatment(rng):
    # along every ray the energy is the one-coupling degenerate treatment of model.along(d)
    m, *_ = _doublet_model(rng)
    s = multi_series(m, 2, 4)
    for d in [(1.0, 0.0), (0.6, 0.8), (-0.3, 0.2)]:
        ray = m.along(d)
        (e,) = expansions(ray, [ray._ray_level(2)], 4)
        assert e.treatment == "degenerate"
        t = np.array([0.02, 0.05])
        np.testing.assert_allclose(s.energy(t[:, None] * np.asarray(d), order=3), e.energy(t, order=3), rtol=1e-12)
        # the energy is an eigenvalue of H_eff(λ) = Σ H^α λ^α rebuilt from the multivariate coefficients
        point = t[0] * np.asarray(d)
        heff = sum(np.prod(point ** np.asarray(a)) * h for a, h in zip(s.indices, s.effective_hamiltonians[0]))
        assert np.min(np.abs(np.linalg.eigvalsh(heff) - s.energy(point))) < 1e-12
    assert s.energy((0.0, 0.0)) == pytest.approx(1.0)


def test_dispersive_shift_on_a_two_coupling_qubit_resonator():
    # qubit (|g⟩, |e⟩) ⊗ resonator (N photons): H0 = ω_q |e⟩⟨e| + ω_r a†a, V1 = a σ+ + a† σ− (coupling g), V2 = a + a†
    # (a resonator drive ε).  χ = (E11 − E10 − E01 + E00)/2 = g²/Δ at order g² (Blais et al., Phys. Rev. A 69,
    # 062320 (2004)); the drive alone displaces the resonator and shifts every level by −ε²/ω_r (completing the
    # square), so χ has no ε² term.
    from ptcheck import dispersive_shift
    from ptcheck.region import validity_region

    nr, wq, wr = 12, 5.0, 6.0
    a = np.diag(np.sqrt(np.arange(1, nr)), 1)
    sp_ = np.array([[0.0, 0.0], [1.0, 0.0]])  # σ+ = |e⟩⟨g| in the basis (g, e)
    h0 = np.kron(np.diag([0.0, wq]), np.eye(nr)) + np.kron(np.eye(2), wr * a.T @ a)
    v1 = np.kron(sp_, a) + np.kron(sp_.T, a.T)
    v2 = np.kron(np.eye(2), a + a.T)
    m = Model(h0, [v1, v2], dims=(2, nr), names=("g", "eps"))
    chi = dispersive_shift()
    s = multi_series(m, chi, 4)
    assert s.energy_coefficients[2, 0] == pytest.approx(1.0 / (wq - wr), rel=1e-12)
    assert s.energy_coefficients[0, 2] == pytest.approx(0.0, abs=1e-12)
    assert s.energy_coefficients[0, 0] == pytest.approx(0.0, abs=1e-12)
    r = validity_region(m, chi, 2, rtol=0.05, directions=4, max_directions=4)
    assert r.target == "chi" and len(r.status) == 4


def test_block_treatment_is_the_rays_block_series(rng):
    # a near-degenerate pair {1, 2} (splitting 0.05) treated as a block: the effective Hamiltonian's H^(1,0), H^(0,1)
    # are the block of V1, V2 (first order of any effective Hamiltonian: P V P), and the energy at a point is the
    # one-coupling block series of the ray through it
    from ptcheck.blocks import block_series

    e = np.array([0.0, 1.0, 1.05, 2.3, 3.1])
    v1, v2 = random_hermitian(rng, 5) * 0.3, random_hermitian(rng, 5) * 0.3
    m = Model(np.diag(e), [v1, v2], names=("a", "b"))
    s = multi_series(m, 1, 4, treatment="block", block=[1, 2])
    assert s.treatment == "near-degenerate block" and s.groups == ((1, 2),)
    h = dict(zip(s.indices, s.effective_hamiltonians[0]))
    np.testing.assert_allclose(h[(1, 0)], m.vs[0][1:3, 1:3], atol=1e-12)
    np.testing.assert_allclose(h[(0, 1)], m.vs[1][1:3, 1:3], atol=1e-12)
    d = np.array([0.6, -0.8])
    t = np.array([0.05, 0.2])
    ref = block_series(m.along(d), [1, 2], 4).energies(t, order=3)[0]
    np.testing.assert_allclose(s.energy(t[:, None] * d, order=3), ref, rtol=1e-12)
    with pytest.raises(ValueError, match="must contain every level"):
        multi_series(m, 0, 2, treatment="block", block=[1, 2])
    with pytest.raises(ValueError, match="needs block"):
        multi_series(m, 1, 2, treatment="block")


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 10_000), shift=st.floats(-50.0, 50.0))
def test_invariances_swap_sign_and_constant(seed, shift):
    # what must not change the answer (common practice, no source): swapping the couplings transposes the
    # coefficients; V1 → −V1 multiplies E^(a,b) by (−1)^a; H0 → H0 + c·1 changes only E^(0,0), by c
    r = np.random.default_rng(seed)
    e0 = np.cumsum(0.2 + r.uniform(0.0, 0.6, 6))  # spacings above 0.2: a non-degenerate level 2
    v1, v2 = random_hermitian(r, 6), random_hermitian(r, 6)
    base = multi_series(Model(np.diag(e0), [v1, v2]), 2, 5).energy_coefficients
    swapped = multi_series(Model(np.diag(e0), [v2, v1]), 2, 5).energy_coefficients
    np.testing.assert_allclose(swapped, base.T, rtol=1e-10, atol=1e-10 * np.max(np.abs(base)))
    flipped = multi_series(Model(np.diag(e0), [-v1, v2]), 2, 5).energy_coefficients
    sign = (-1.0) ** np.arange(6)[:, None]
    np.testing.assert_allclose(flipped, sign * base, rtol=1e-10, atol=1e-10 * np.max(np.abs(base)))
    moved = multi_series(Model(np.diag(e0 + shift), [v1, v2]), 2, 5).energy_coefficients
    expect = base.copy()
    expect[0, 0] += shift
    np.testing.assert_allclose(moved, expect, rtol=1e-9, atol=1e-9 * np.max(np.abs(base[1:])))
