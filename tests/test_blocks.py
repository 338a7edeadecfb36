"""Block effective Hamiltonians (Schrieffer–Wolff, Brillouin–Wigner) and cluster detection.

Exact references are plain ``numpy.linalg.eigh`` / ``eig`` of ``model.hamiltonian(λ)``
(or of the test's own matrices), never ptcheck's exact solver.
"""

import json
import time

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st

from ptcheck import Model
from ptcheck.approximants import Pade
from ptcheck.blocks import METHODS, Block, BlockWarning, block_series, find_blocks
from ptcheck.errors import AmbiguousLevelError, DegenerateLevelError


# ----------------------------------------------------------------- references
def exact_canonical_heff(h0, v, block, lam):
    """Exact canonical (des Cloizeaux / van Vleck) H_eff at a possibly complex coupling.

    At real λ: H_eff = W diag(E) W† with W the Löwdin (symmetric) orthonormalisation of the
    block components A of the exact block eigenvectors: W = A (A†A)^{-1/2}, i.e. the unitary
    polar factor of A (des Cloizeaux, Nucl. Phys. 20, 321 (1960); Shavitt & Redmon, J. Chem.
    Phys. 73, 5711 (1980)).  Written with right eigenvectors R and left eigenvectors L = R^{-1}
    (B = L[T, P] replaces A†) it reads M^{-1/2} A E A^{-1} M^{1/2} with M = A B, which is
    analytic in λ, so it can be evaluated on a complex circle for Cauchy's formula.
    (Rewriting from memory of the polar decomposition; checked here at real λ below.)
    """
    h = h0 + lam * v
    w, r = np.linalg.eig(h)
    left = np.linalg.inv(r)
    eb = np.diag(h0)[block]
    dist = np.min(np.abs(w[:, None] - eb[None, :]), axis=1)
    t = np.argsort(dist)[: len(block)]
    a = r[np.ix_(block, t)]
    b = left[np.ix_(t, block)]
    s = sla.sqrtm(a @ b)
    return np.linalg.solve(s, a @ np.diag(w[t]) @ np.linalg.inv(a) @ s)


def taylor_coefficients(f, radius, order, points=64):
    """Taylor coefficients of an analytic matrix function by Cauchy's integral formula.

    Trapezoidal rule on a circle (Trefethen & Weideman, "The exponentially convergent
    trapezoidal rule", SIAM Review 56, 385 (2014), section 17).
    """
    theta = 2 * np.pi * np.arange(points) / points
    vals = np.array([f(radius * np.exp(1j * th)) for th in theta])
    c = np.fft.fft(vals, axis=0) / points
    return np.array([c[k] / radius**k for k in range(order + 1)])


def separated_model(key, n, p, *, complex_=False, spread=0.5, gap=2.0):
    """Invented random model: p block levels in [0, spread + 0.1 (p - 1)], at least 0.1 apart,
    the rest in [gap, gap + 2]; ‖V‖ = 1."""
    rng = np.random.default_rng(key)
    block = np.sort(rng.uniform(0, spread, p)) + 0.1 * np.arange(p)
    e = np.concatenate([block, np.sort(rng.uniform(gap, gap + 2, n - p))])
    a = rng.normal(size=(n, n))
    if complex_:
        a = a + 1j * rng.normal(size=(n, n))
    v = (a + a.conj().T) / 2
    v /= np.linalg.norm(v, 2)
    return np.diag(e), v


def jc_matrices(omega_r, omega_q, n_photons):
    """Jaynes–Cummings H0 = ω_r a†a + ω_q |e><e| and V = a σ+ + a† σ- (coupling g = λ).

    Basis |q, n> with q = 0 (g), 1 (e), index q * n_photons + n (dims (2, n_photons)).
    """
    a = np.diag(np.sqrt(np.arange(1, n_photons)), 1)
    num = np.diag(np.arange(n_photons, dtype=float))
    sp_ = np.array([[0.0, 0.0], [1.0, 0.0]])  # σ+ = |e><g| with g = index 0
    ee = np.diag([0.0, 1.0])
    h0 = omega_r * np.kron(np.eye(2), num) + omega_q * np.kron(ee, np.eye(n_photons))
    v = np.kron(sp_, a) + np.kron(sp_.T, a.T)
    return h0, v


def hubbard_dimer_sz0(u):
    """Two-site Hubbard model, half filling, Sz = 0, built from Jordan–Wigner fermions.

    Modes (1↑, 1↓, 2↑, 2↓); H0 = U Σ_i n_i↑ n_i↓, V = -Σ_σ (c†_1σ c_2σ + h.c.) (t = λ).
    Returns h0, v (4 x 4) and labels of the basis states.
    """
    nm = 4
    z = np.diag([1.0, -1.0])
    low = np.array([[0.0, 1.0], [0.0, 0.0]])  # annihilator on one mode
    c = []
    for j in range(nm):
        ops = [z] * j + [low] + [np.eye(2)] * (nm - j - 1)
        m = ops[0]
        for o in ops[1:]:
            m = np.kron(m, o)
        c.append(m)
    n_op = [cj.T @ cj for cj in c]
    h0 = u * (n_op[0] @ n_op[1] + n_op[2] @ n_op[3])
    hop = -(c[0].T @ c[2] + c[2].T @ c[0] + c[1].T @ c[3] + c[3].T @ c[1])
    occ = np.array([[(k >> (nm - 1 - j)) & 1 for j in range(nm)] for k in range(2**nm)])
    keep = [k for k in range(2**nm) if occ[k].sum() == 2 and occ[k][0] + occ[k][2] == 1]
    names = {(1, 1, 0, 0): "ud,0", (0, 0, 1, 1): "0,ud", (1, 0, 0, 1): "u,d", (0, 1, 1, 0): "d,u"}
    labels = [names[tuple(occ[k])] for k in keep]
    idx = np.ix_(keep, keep)
    return h0[idx], hop[idx], labels


# ======================================================== closed-form physics
@pytest.mark.parametrize("vv", [0.7, 0.3 - 0.4j])
def test_exactly_degenerate_two_level_first_order_splitting(vv):
    # H = E 1 + λ [[0, v], [v*, 0]] has eigenvalues E ± λ|v| exactly
    # (closed form of the two-level eigenvalues, e.g. Cohen-Tannoudji, Diu, Laloë, Quantum Mechanics, Complement B_IV)
    e = 1.5
    m = Model(np.diag([e, e]), [[0, vv], [np.conj(vv), 0]])
    b = m.block_series([0, 1], 6)
    np.testing.assert_allclose(np.linalg.eigvalsh(b.coefficients[1]), [-abs(vv), abs(vv)], rtol=1e-13)
    np.testing.assert_allclose(b.coefficients[2:], 0, atol=1e-14)
    lam = np.array([-0.8, -0.1, 0.0, 0.2, 3.0])
    en = b.energies(lam, order=1)
    np.testing.assert_allclose(np.sort(en, axis=0), [e - abs(vv) * abs(lam), e + abs(vv) * abs(lam)], rtol=1e-13, atol=1e-14)
    # branches are analytic: level 0 is the good state with first-order shift -|v| for every sign of λ
    np.testing.assert_allclose(en[0], e - abs(vv) * lam, rtol=1e-13, atol=1e-14)


def test_degenerate_pair_with_a_far_level_splits_like_first_order():
    # first-order splitting 2λ|v| of a degenerate pair, corrections O(λ²)
    # (degenerate perturbation theory, Sakurai & Napolitano, Modern QM, sec. 5.2)
    v = np.array([[0.0, 0.4, 0.3], [0.4, 0.0, 0.2], [0.3, 0.2, 0.0]])
    m = Model(np.diag([0.0, 0.0, 3.0]), v)
    b = m.block_series([0, 1], 1)
    for lam in (1e-3, 2e-3):
        exact = np.linalg.eigvalsh(m.hamiltonian(lam))[:2]
        assert abs((exact[1] - exact[0]) - 2 * 0.4 * lam) < 5 * lam**2
        np.testing.assert_allclose(np.diff(b.energies(lam)[:, 0]), 2 * 0.4 * lam, rtol=1e-12)


@pytest.mark.parametrize("n", [1, 2, 3, 5])
def test_jaynes_cummings_resonant_doublet_splitting(n):
    # resonant JC doublet {|g,n>, |e,n-1>}: E = n ω ± g √n, splitting 2 g √n
    # (Jaynes & Cummings, Proc. IEEE 51, 89 (1963))
    omega, g, nph = 1.0, 0.05, 9
    h0, v = jc_matrices(omega, omega, nph)
    m = Model(h0, v, dims=(2, nph))
    blk = next(bb for bb in find_blocks(m, g) if np.isclose(m.e0[bb.levels[0]], n * omega))
    assert blk.size == 2 and all(np.isinf(p.ratio) for p in blk.pairs)
    b = m.block_series(blk, 8)
    np.testing.assert_allclose(np.linalg.eigvalsh(b.coefficients[1]) * g, [-g * np.sqrt(n), g * np.sqrt(n)], rtol=1e-12)
    e = b.energies(g)[:, 0]
    np.testing.assert_allclose(np.sort(e), [n * omega - g * np.sqrt(n), n * omega + g * np.sqrt(n)], rtol=1e-12)
    # the RWA Hamiltonian conserves excitations, so the doublet decouples: no higher orders
    np.testing.assert_allclose(b.coefficients[2:], 0, atol=1e-14)


def test_jaynes_cummings_dispersive_shift_second_order():
    # dispersive JC: H ≈ (ω_r + (g²/Δ) σz) a†a + (ω_q + g²/Δ) σz / 2, Δ = ω_q - ω_r
    # (Blais, Huang, Wallraff, Girvin, Schoelkopf, Phys. Rev. A 69, 062320 (2004), dispersive limit);
    # relative to H0: |g,n> shifts by -n g²/Δ, |e,n> by +(n+1) g²/Δ.
    omega_r, omega_q, nph = 5.0, 6.0, 12
    delta = omega_q - omega_r
    h0, v = jc_matrices(omega_r, omega_q, nph)
    m = Model(h0, v, dims=(2, nph))
    for n in (0, 1, 3):
        b = m.block_series([(0, n), (1, n)], 2)  # the qubit manifold at photon number n
        np.testing.assert_allclose(b.coefficients[2], np.diag([-n / delta, (n + 1) / delta]), atol=1e-13)
    # cavity pull: E(g, n+1) - E(g, n) = ω_r - g²/Δ at second order, from single-level blocks
    g = 0.02
    eg = [m.block_series([(0, n)], 2).energies(g, order=2)[0, 0] for n in (2, 3)]
    assert eg[1] - eg[0] == pytest.approx(omega_r - g**2 / delta, rel=1e-12)
    ee = [m.block_series([(1, n)], 2).energies(g, order=2)[0, 0] for n in (2, 3)]
    assert ee[1] - ee[0] == pytest.approx(omega_r + g**2 / delta, rel=1e-12)
    # and the second-order result is within O(g⁴/Δ³) of the exact level
    exact = np.linalg.eigvalsh(m.hamiltonian(g))
    level = m.level_index((0, 2))
    assert abs(eg[0] - exact[level]) < 10 * g**4 / delta**3


def test_hubbard_dimer_superexchange():
    # two-site Hubbard at half filling: the singly-occupied block gets H_eff = J (S1·S2 - 1/4),
    # J = 4t²/U at second order (Anderson superexchange; e.g. Auerbach, Interacting Electrons and
    # Quantum Magnetism, ch. 3): singlet lowered by J, triplet T0 unshifted.  Exact singlet of the
    # dimer: (U - sqrt(U² + 16 t²)) / 2 (closed form, same reference).
    u = 4.0
    h0, v, labels = hubbard_dimer_sz0(u)
    m = Model(h0, v, labels=labels, name="hubbard dimer")
    b = m.block_series(["u,d", "d,u"], 10)
    assert b.levels == (0, 1)
    np.testing.assert_allclose(b.coefficients[1], 0, atol=1e-15)
    w, vec = np.linalg.eigh(b.coefficients[2])
    np.testing.assert_allclose(w, [-4 / u, 0.0], atol=1e-14)
    assert abs(abs(vec[0, 0]) - 1 / np.sqrt(2)) < 1e-12  # singlet = equal-weight combination
    assert any("equal first-order shifts" in s for s in b.notes)
    t = 0.5
    singlet = (u - np.sqrt(u**2 + 16 * t**2)) / 2
    errs = [abs(b.energies(t, order=k)[0, 0] - singlet) for k in (2, 4, 6, 8, 10)]
    assert errs[0] == pytest.approx(abs(-4 * t**2 / u - singlet), rel=1e-12)
    assert all(e2 < e1 for e1, e2 in zip(errs, errs[1:])) and errs[-1] < 2e-5
    np.testing.assert_allclose(b.energies([-t, t], order=10)[1], 0.0, atol=1e-14)  # triplet T0
    # the perturbative singlet state against the exact ground state
    exact_w, exact_v = np.linalg.eigh(m.hamiltonian(t))
    psi = b.level_expansion(0).state(t, order=10)
    assert 1 - abs(np.vdot(exact_v[:, 0], psi)) ** 2 < 1e-8
    # Brillouin–Wigner at second order: E = -4t²/(U - E) ... self-consistent, exact for the dimer
    # (the singlet couples to one doubly-occupied combination only; Löwdin partitioning is exact)
    bw = m.block_series([0, 1], 2, method="brillouin-wigner")
    assert bw.energies(t)[0, 0] == pytest.approx(singlet, rel=1e-11)


# ======================================================== construction checks
def test_sw_coefficients_match_exact_canonical_heff_taylor_coefficients_order_8():
    # coefficients of the exact canonical H_eff (see exact_canonical_heff) by Cauchy's formula
    for key, complex_ in ((1, False), (2, True)):
        h0, v = separated_model(key, 7, 3, complex_=complex_)
        m = Model(h0, v)
        b = m.block_series([0, 1, 2], 8)
        ref = taylor_coefficients(lambda lam: exact_canonical_heff(h0, m.v, [0, 1, 2], lam), 0.3, 8)
        for k in range(9):
            np.testing.assert_allclose(b.coefficients[k], ref[k], atol=1e-9 * 0.3 ** -k)


def test_sw_heff_equals_lowdin_construction_at_real_coupling():
    # at real λ, W diag(E) W† with W = A (A†A)^{-1/2} (Löwdin symmetric orthonormalisation of the
    # projected exact eigenvectors; Löwdin, J. Chem. Phys. 18, 365 (1950)); H_eff(λ) truncated at
    # order 10 must agree to O(λ^11)
    h0, v = separated_model(3, 6, 2)
    m = Model(h0, v)
    b = m.block_series([0, 1], 10)
    lam = 0.1
    w, vec = np.linalg.eigh(m.hamiltonian(lam))
    a = vec[:2, :2]
    lw = a @ sla.inv(sla.sqrtm(a.T @ a))
    direct = lw @ np.diag(w[:2]) @ lw.T
    np.testing.assert_allclose(b.effective_hamiltonian(lam), direct, atol=1e-10)
    np.testing.assert_allclose(exact_canonical_heff(h0, m.v, [0, 1], lam), direct, atol=1e-12)


@settings(max_examples=20, deadline=None)
@given(key=st.integers(0, 2**31 - 1), p=st.integers(1, 3), complex_=st.booleans())
def test_property_hermitian_and_converging(key, p, complex_):
    h0, v = separated_model(key, 6, p, complex_=complex_)
    m = Model(h0, v)
    b = m.block_series(list(range(p)), 6)
    # Hermitian at every order, before symmetrisation too (common practice, no source)
    assert np.all(b.hermiticity_residual < 1e-10)
    np.testing.assert_allclose(b.coefficients, np.conj(np.swapaxes(b.coefficients, 1, 2)), atol=1e-15)
    # error of the order-k block eigenvalues shrinks like λ^(k+1) (the H_eff series is Taylor's;
    # Kato, Perturbation Theory for Linear Operators (1966), ch. II §2)
    lams = np.array([0.01, 0.005])
    exact = np.array([np.linalg.eigvalsh(m.hamiltonian(x))[:p] for x in lams]).T
    for k in (1, 2, 3, 4):
        err = np.max(np.abs(np.sort(b.energies(lams, order=k), axis=0) - exact), axis=0)
        if err[1] > 1e-12:  # above roundoff
            slope = np.log(err[0] / err[1]) / np.log(2.0)
            assert slope > k + 1 - 0.4, (k, err)
        assert err[0] < 50 * lams[0] ** (k + 1)


@settings(max_examples=15, deadline=None)
@given(key=st.integers(0, 2**31 - 1), p=st.integers(2, 3), complex_=st.booleans())
def test_property_sw_and_bw_agree_at_small_coupling(key, p, complex_):
    # both are order-k accurate, so they differ by O(λ^(k+1)) (Löwdin partitioning and the
    # canonical expansion have the same exact limit; Lindgren, J. Phys. B 7, 2441 (1974))
    h0, v = separated_model(key, 6, p, complex_=complex_)
    m = Model(h0, v)
    sw = m.block_series(list(range(p)), 4)
    bw = m.block_series(list(range(p)), 4, method="brillouin-wigner")
    lam = np.array([-0.03, 0.03])
    exact = np.array([np.linalg.eigvalsh(m.hamiltonian(x))[:p] for x in lam]).T
    esw, ebw = sw.energies(lam), bw.energies(lam)
    assert np.max(np.abs(esw - ebw)) < 20 * 0.03**5
    assert np.max(np.abs(np.sort(ebw, axis=0) - exact)) < 20 * 0.03**5
    # the states agree too
    psw, pbw = sw.states(lam), bw.states(lam)
    overlap = np.abs(np.einsum("icn,icn->ic", psw.conj(), pbw)) ** 2
    assert np.min(overlap) > 1 - 1e-6


@settings(max_examples=15, deadline=None)
@given(key=st.integers(0, 2**31 - 1), p=st.integers(1, 3))
def test_property_states_approach_exact_eigenvectors(key, p):
    # infidelity of the order-k state ~ λ^(2(k+1)) (common practice, no source)
    h0, v = separated_model(key, 7, p, spread=1.0)
    m = Model(h0, v)
    b = m.block_series(list(range(p)), 6)
    lam = 0.03
    w, vec = np.linalg.eigh(m.hamiltonian(lam))
    e = b.energies(lam)[:, 0]
    states = b.states(lam)[:, 0]
    order = np.argsort(e)
    infid = [1 - abs(np.vdot(vec[:, j], states[order[j]])) ** 2 for j in range(p)]
    assert max(infid) < 1e-9
    np.testing.assert_allclose(np.linalg.norm(states, axis=1), 1.0, rtol=1e-12)


def test_single_level_block_reproduces_rayleigh_schrodinger():
    # p = 1: Bloch's effective Hamiltonian is the RS energy series (Lindgren 1974, sec. 2)
    h0, v = separated_model(5, 6, 3)
    m = Model(h0, v)
    b = m.block_series([1], 8)
    rs = m.series(1, 8)
    np.testing.assert_allclose(b.coefficients[:, 0, 0], rs.energy_coefficients, rtol=1e-10, atol=1e-13)


def test_first_order_in_degenerate_block_diagonalises_v():
    # order 1 of an exactly degenerate block = V restricted to the block (degenerate PT,
    # Sakurai & Napolitano, Modern QM, sec. 5.2); the work basis holds its eigenvectors ("good" states)
    rng = np.random.default_rng(7)
    a = rng.normal(size=(6, 6))
    v = (a + a.T) / 2
    m = Model(np.diag([0.0, 0.0, 0.0, 2.0, 3.0, 4.0]), v)
    b = m.block_series([0, 1, 2], 3)
    np.testing.assert_allclose(b.coefficients[1], np.diag(np.linalg.eigvalsh(v[:3, :3])), atol=1e-12)
    st0 = b.states(1e-9, order=1)[:, 0]
    np.testing.assert_allclose(np.abs(st0[:, :3]), np.eye(3), atol=1e-6)


def test_branches_followed_through_a_true_crossing():
    # two block levels with slopes +1 and -1 that V does not couple: they cross at λ = 0.05 and the
    # exact levels are the diagonal entries (common practice, no source)
    v = np.array([[1.0, 0.0, 0.3], [0.0, -1.0, 0.0], [0.3, 0.0, 0.0]])
    m = Model(np.diag([0.0, 0.1, 5.0]), v)
    b = m.block_series([0, 1], 8)
    lam = np.linspace(-0.2, 0.2, 9)
    e = b.energies(lam)
    # level 1 never couples: 0.1 - λ exactly; level 0 lives in the 2 x 2 problem of levels {0, 2}
    np.testing.assert_allclose(e[1], 0.1 - lam, atol=1e-14)
    e0_exact = [np.linalg.eigvalsh([[x, 0.3 * x], [0.3 * x, 5.0]])[0] for x in lam]
    np.testing.assert_allclose(e[0], e0_exact, atol=1e-9)
    assert e[0, -1] > e[1, -1]  # past the crossing, level 0 is the upper one


def test_one_coupling_at_a_time_follows_the_same_branches():
    # a search visits couplings one by one (each continues from the nearest point tracked before); the
    # branches must be those of the true-crossing model above: level 1 is 0.1 - λ exactly and level 0 the
    # lower eigenvalue of the {0, 2} problem (common practice, no source), on both sides of λ = 0 and in
    # any visiting order
    v = np.array([[1.0, 0.0, 0.3], [0.0, -1.0, 0.0], [0.3, 0.0, 0.0]])
    m = Model(np.diag([0.0, 0.1, 5.0]), v)
    b = m.block_series([0, 1], 8)
    visits = [0.01, 0.02, 0.04, 0.08, 0.16, 0.12, 0.06, 0.045, 0.055, 0.2, -0.03, -0.2, -0.1, 0.001, 0.07]
    for x in visits:
        e = b.energies(x)[:, 0]
        assert abs(e[1] - (0.1 - x)) < 1e-14, x
        assert abs(e[0] - np.linalg.eigvalsh([[x, 0.3 * x], [0.3 * x, 5.0]])[0]) < 1e-9, x
        assert not b.solve(x).ambiguous


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_branch_tracking_matches_brute_force_following(seed):
    # referee: follow the eigenvectors of H(λ) = Σ λ^j h_j over 5 000 points by largest overlap (brute
    # force, common practice, no source); the tracker (its batched path included) must give each branch
    # the same energies and the same vectors up to sign
    from ptcheck import _block_numerics as num

    rng = np.random.default_rng(seed)
    p = 4
    h = rng.normal(size=(3, p, p))
    h = 0.5 * (h + np.swapaxes(h, 1, 2))
    h[0] = np.diag([0.0, 1.0, 2.0, 3.0])
    lam = np.array([0.05, 0.3, 0.7, 1.2])
    start = 1e-3
    tr = num.track_branches(h, lam, np.eye(p), start, 1.0)
    fine = np.linspace(start, lam[-1], 5_000)
    w, v = np.linalg.eigh(h[0] + fine[:, None, None] * h[1] + fine[:, None, None] ** 2 * h[2])
    ref = np.eye(p)
    want_e, want_v = [], []
    for k in range(fine.size):
        cols = np.argmax(np.abs(ref.T @ v[k]) ** 2, axis=1)
        ref = v[k][:, cols] * np.sign(np.sum(ref * v[k][:, cols], axis=0))
        want_e.append(w[k][cols])
        want_v.append(ref)
    at = [int(np.argmin(np.abs(fine - x))) for x in lam]
    for c, k in enumerate(at):
        exact = np.linalg.eigvalsh(h[0] + lam[c] * h[1] + lam[c] ** 2 * h[2])
        # the brute-force branch order, re-evaluated exactly at λ (the grid point is within 1.2e-4 of it)
        order = np.argsort(np.argsort(want_e[k]))
        np.testing.assert_allclose(tr.energies[:, c], exact[order], atol=1e-12)
        np.testing.assert_allclose(np.abs(np.sum(tr.vectors[c] * want_v[k], axis=0)), 1.0, atol=1e-3)
    assert not tr.ambiguous


def test_avoided_crossing_follows_adiabatic_branch():
    # a weak direct coupling turns the crossing into an avoided one; the analytic branches are the
    # adiabatic ones (von Neumann & Wigner non-crossing rule, Phys. Z. 30, 467 (1929))
    v = np.array([[1.0, 0.002, 0.3], [0.002, -1.0, 0.0], [0.3, 0.0, 0.0]])
    m = Model(np.diag([0.0, 0.1, 5.0]), v)
    b = m.block_series([0, 1], 8)
    lam = np.array([0.03, 0.2])
    e = b.energies(lam)
    exact = np.array([np.linalg.eigvalsh(m.hamiltonian(x))[:2] for x in lam]).T
    np.testing.assert_allclose(e, exact, atol=1e-8)


# ============================================================== find_blocks
def _chain_model(sparse=False):
    e0 = np.array([0.0, 1.0, 1.05, 3.0, 3.0])
    v = np.zeros((5, 5))
    # the weak 0-4 element keeps level 4 in the sector of level 3 (an uncoupled level would be a sector of
    # its own, and equal energies in different sectors are no degeneracy)
    for i, j, x in [(0, 1, 0.1), (1, 2, 0.1), (2, 3, 0.2), (0, 3, 0.3), (0, 4, 0.01)]:
        v[i, j] = v[j, i] = x
    if sparse:
        return Model(sp.diags(e0), sp.csr_matrix(v))
    return Model(np.diag(e0), v)


@pytest.mark.parametrize("sparse", [False, True])
def test_find_blocks_union_of_pairs(sparse):
    # mixing ratio |λ V| / |ΔE| (definition in ptcheck.degeneracy); union-find over tied pairs
    m = _chain_model(sparse)
    blocks = find_blocks(m, 0.5)
    assert [b.levels for b in blocks] == [(1, 2), (3, 4)]
    assert blocks[0].pairs[0].ratio == pytest.approx(0.5 * 0.1 / 0.05)
    assert np.isinf(blocks[1].max_ratio)  # exact degeneracy
    # a smaller threshold ties more: ratios 0.05 (0-1), 0.0513 (2-3), 0.05 (0-3)
    assert [b.levels for b in find_blocks(m, 0.5, 0.04)] == [(0, 1, 2, 3, 4)]
    only = find_blocks(m, 0.5, levels=[0, 2])
    assert [b.levels for b in only] == [(0,), (1, 2)]
    assert only[0].pairs == () and only[0].size == 1
    json.dumps(blocks[1].to_dict(), allow_nan=False)
    assert "Block" in repr(blocks[0]) and "<table>" in blocks[0]._repr_html_()


def test_find_blocks_chain_through_levels_option():
    m = _chain_model()
    # starting from level 0 with a small threshold, the cluster grows along the chain
    assert find_blocks(m, 0.5, 0.04, levels=[0])[0].levels == (0, 1, 2, 3, 4)


def test_find_blocks_size_guard():
    n = 40
    e0 = np.arange(n) * 0.01
    v = np.diag(np.ones(n - 1), 1)
    v = v + v.T
    m = Model(np.diag(e0), v)
    with pytest.raises(ValueError, match="smaller coupling or a larger threshold"):
        find_blocks(m, 1.0, max_size=10)
    with pytest.raises(ValueError, match="smaller coupling or a larger threshold"):
        find_blocks(m, 1.0, levels=[0], max_size=10)
    assert find_blocks(m, 1.0)[0].size == n


def test_find_blocks_bad_input():
    m = _chain_model()
    with pytest.raises(ValueError, match="threshold must be a positive"):
        find_blocks(m, 0.5, 0.0)
    with pytest.raises(TypeError, match="coupling must be a real number"):
        find_blocks(m, "big")
    with pytest.raises(ValueError, match="unknown level"):
        find_blocks(m, 0.5, levels=["nope"])


# ===================================================== results and protocol
def test_block_series_results_and_level_expansion_protocol():
    h0, v = separated_model(11, 6, 2)
    m = Model(h0, v, labels=list("abcdef"))
    b = m.block_series(["a", "b"], 5)
    assert b.levels == (0, 1) and b.labels == ("a", "b") and b.method == "schrieffer-wolff"
    assert b.coefficients.shape == (6, 2, 2) and not b.coefficients.flags.writeable
    assert b.gap == pytest.approx(h0[2, 2] - h0[1, 1])
    json.dumps(b.to_dict(), allow_nan=False)
    assert "BlockSeries" in repr(b) and "<table>" in b._repr_html_()
    lam = np.array([0.01, 0.02, 0.05])
    assert b.energies(lam).shape == (2, 3)
    assert b.states(lam).shape == (2, 3, 6)
    x = b.level_expansion("b")
    assert (x.level, x.label, x.order, x.treatment, x.energy_coefficients) == (1, "b", 5, "block", None)
    assert np.ndim(x.energy(0.02)) == 0 and x.energy(lam).shape == (3,)
    np.testing.assert_allclose(x.energy(lam, order=3), b.energies(lam, order=3)[1])
    assert x.state(0.02).shape == (6,) and x.state(lam).shape == (3, 6)
    # term = ‖H_eff^(k)‖₂ |λ|^k
    np.testing.assert_allclose(x.term(lam, 2), np.linalg.norm(b.coefficients[2], 2) * lam**2)
    with pytest.raises(ValueError, match="not available for a block"):
        x.energy(lam, order=Pade(1, 1))
    with pytest.raises(ValueError, match="not available for a block"):
        x.energy(lam, order="pade1/1")
    with pytest.raises(ValueError, match="energy only"):
        x.state(lam, order=Pade(1, 1))
    with pytest.raises(ValueError, match="exceeds the computed order 5"):
        x.energy(lam, order=6)
    with pytest.raises(ValueError, match="not in this block"):
        b.level_expansion("c")
    with pytest.raises(ValueError, match="Brillouin–Wigner method only"):
        b.effective_hamiltonian(0.1, level="a")


def test_brillouin_wigner_result_fields_and_nonconvergence_reported():
    h0, v = separated_model(4, 6, 2)
    m = Model(h0, v)
    bw = m.block_series([0, 1], 4, method="brillouin-wigner")
    assert "energy-independent" in " ".join(bw.notes)
    np.testing.assert_allclose(bw.coefficients[2:], 0)
    e = 0.3
    mats = bw.coefficients_at(e)
    # M_2(E) = P V R(E) V P with R(E) = Q/(E - H0) (Löwdin partitioning, J. Math. Phys. 3, 969 (1962))
    q = slice(2, 6)
    direct = m.v[:2, q] @ np.diag(1 / (e - np.diag(h0)[q])) @ m.v[q, :2]
    np.testing.assert_allclose(mats[2], direct, atol=1e-14)
    # self-consistency: E is an eigenvalue of H_eff(E)
    lam = 0.05
    en = bw.energies(lam)[:, 0]
    for i in range(2):
        h = bw.effective_hamiltonian(lam, level=i)
        assert np.min(np.abs(np.linalg.eigvalsh(h) - en[i])) < 1e-11
    # a one-iteration cap cannot converge at a sizeable coupling: reported, NaN, warned
    capped = m.block_series([0, 1], 4, method="brillouin-wigner", max_iter=1)
    sol = capped.solve([0.3])
    assert not np.all(sol.converged)
    with pytest.warns(BlockWarning, match="did not converge"):
        en = capped.energies([0.3])
    assert np.any(np.isnan(en))


def test_order_zero_and_default_order():
    h0, v = separated_model(9, 5, 2)
    m = Model(h0, v)
    b = m.block_series([0, 1], 3)
    np.testing.assert_allclose(b.energies([0.0, 0.1], order=0), np.diag(h0)[:2, None] * np.ones((1, 2)))
    np.testing.assert_allclose(b.energies(0.1), b.energies(0.1, order=3))
    np.testing.assert_allclose(np.abs(b.states(0.0)[:, 0, :2]), np.eye(2), atol=1e-12)


# ================================================================ bad input
def test_block_series_bad_input():
    v = np.array([[0, 0.2, 0.1, 0.0], [0.2, 0, 0, 0.1], [0.1, 0, 0, 0.3], [0.0, 0.1, 0.3, 0]])
    m = Model(np.diag([0.0, 1.0, 1.0, 2.0]), v)
    with pytest.raises(ValueError, match="order must be an int >= 0; got -1"):
        block_series(m, [1, 2], -1)
    with pytest.raises(TypeError, match="order must be an int"):
        block_series(m, [1, 2], 2.5)
    with pytest.raises(ValueError, match="method must be one of 'schrieffer-wolff', 'brillouin-wigner'; got 'sw'"):
        block_series(m, [1, 2], 2, method="sw")
    assert METHODS == ("schrieffer-wolff", "brillouin-wigner")
    with pytest.raises(DegenerateLevelError, match=r"contains level n=1 \(index 1\) but not level n=2 \(index 2\)"):
        block_series(m, [0, 1], 2)
    with pytest.raises(ValueError, match="more than once"):
        block_series(m, [1, 2, 1], 2)
    with pytest.raises(ValueError, match="levels is empty"):
        block_series(m, [], 2)
    with pytest.raises(ValueError, match="level must be in 0..3; got 7"):
        block_series(m, [7], 2)
    with pytest.raises(ValueError, match="rtol must be a positive"):
        block_series(m, [1, 2], 2, method="brillouin-wigner", rtol=0)
    b = block_series(m, [1, 2], 2)
    with pytest.raises(ValueError, match="couplings must be finite"):
        b.energies([0.1, np.inf])
    with pytest.raises(ValueError, match="order must be an int >= 0"):
        b.energies(0.1, order=-2)


def test_degenerate_with_outside_level_is_refused_and_ambiguous_labels_explained():
    # a block whose level is degenerate with one outside it
    m = Model(np.diag([0.0, 1.0, 1.0]), np.array([[0, 0.1, 0.1], [0.1, 0, 0.0], [0.1, 0.0, 0]]))
    with pytest.raises(DegenerateLevelError, match="not level n=2"):
        m.block_series([1], 2)
    # JC resonant labels are ambiguous (V mixes them); the message points to ranks / block treatment
    h0, v = jc_matrices(1.0, 1.0, 4)
    mj = Model(h0, v, dims=(2, 4))
    with pytest.raises(AmbiguousLevelError, match="block treatment"):
        mj.block_series([(0, 1), (1, 0)], 2)


# ===================================================================== speed
def test_sparse_large_model_is_fast():
    # N = 10^4 sparse, a block of 4 (two exactly degenerate), order 8 (common practice, no source)
    rng = np.random.default_rng(0)
    n = 10_000
    e = np.concatenate([[0.0, 0.0, 0.01, 0.02], np.sort(rng.uniform(1, 100, n - 4))])
    rows, cols = rng.integers(0, n, 5 * n), rng.integers(0, n, 5 * n)
    a = sp.csr_matrix((rng.uniform(0, 1, 5 * n), (rows, cols)), shape=(n, n))
    m = Model(sp.diags(e), (a + a.T) * 0.5)
    block_series(m, [0, 1, 2, 3], 2).energies(0.001)  # warm-up (imports)
    elapsed = []
    for _ in range(3):  # best of three: the machine may be busy
        t0 = time.perf_counter()
        b = block_series(m, [0, 1, 2, 3], 8)
        e8 = b.energies(np.linspace(-0.01, 0.01, 41))
        elapsed.append(time.perf_counter() - t0)
    assert min(elapsed) < 1.0, elapsed
    # no exact reference needed: the order-8 states are eigenvectors to O(λ^9) (residual ‖Hψ - Eψ‖)
    psi = b.states(0.01)[:, 0]
    h = m.hamiltonian(0.01)
    for i in range(4):
        assert np.linalg.norm(h @ psi[i] - e8[i, -1] * psi[i]) < 1e-9
