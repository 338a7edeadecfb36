"""Exact side: backends, level tracking, avoided crossings, caching, bad input."""

from __future__ import annotations

import json

import numpy as np
import pytest
import qutip
import scipy.sparse as sp
from numpy.testing import assert_allclose

from ptcheck import Model
from ptcheck.errors import BasisTooLargeError, TrackingWarning
from ptcheck.exact import BACKENDS, AvoidedCrossing, ExactSolver, ExactSweep, auto_backend, eigenpairs, track
from ptcheck.model import DENSE_LIMIT

SOLVERS = ("dense", "sparse", "qutip")


# ----------------------------------------------------------------------------- helpers
def two_level_eigs(delta: float, v: complex, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """E± = ±√((Δ/2)² + λ²|v|²) for H = diag(-Δ/2, Δ/2) + λ [[0, v], [v*, 0]].

    Closed form of the two-level eigenvalues (C. Cohen-Tannoudji, B. Diu, F. Laloë,
    Quantum Mechanics, 1977, vol. 1, Complement B_IV, eq. (9)).
    """
    r = np.sqrt((delta / 2) ** 2 + lam**2 * abs(v) ** 2)
    return -r, r


def embedded_two_level(delta: float, v: complex, n: int) -> Model:
    """Two-level system as levels 0, 1 of a sparse model; the other levels are far and uncoupled."""
    e0 = np.concatenate([[-delta / 2, delta / 2], 5.0 + np.arange(n - 2) * 0.37])
    vv = sp.lil_matrix((n, n), dtype=complex)
    vv[0, 1], vv[1, 0] = v, np.conj(v)
    # couplings among the far levels only (do not touch the two-level block)
    for i in range(2, n - 1):
        vv[i, i + 1] = vv[i + 1, i] = 0.05
    return Model(sp.diags(e0).tocsr(), vv.tocsr(), name="embedded two-level")


def residuals(model: Model, sweep: ExactSweep) -> np.ndarray:
    """‖H(λ)ψ − Eψ‖ for every tracked state (common practice, no source)."""
    out = []
    for c, lam in enumerate(sweep.couplings):
        h = model.hamiltonian(lam)
        for i in range(len(sweep.levels)):
            psi = sweep.states[i, c]
            out.append(np.linalg.norm(h @ psi - sweep.energies[i, c] * psi))
    return np.array(out)


def random_model(n: int, *, complex_: bool, sparse: bool, key: int) -> Model:
    rng = np.random.default_rng(key)
    e0 = np.sort(rng.uniform(0.0, 10.0, n))
    if sparse:
        a = sp.random(n, n, density=0.02, random_state=key, data_rvs=rng.standard_normal)
        if complex_:
            b = sp.random(n, n, density=0.02, random_state=key + 1, data_rvs=rng.standard_normal)
            a = a + 1j * b
        v = ((a + a.conj().T) * 0.5).tocsr()
        return Model(sp.diags(e0).tocsr(), v, name="random sparse")
    a = rng.standard_normal((n, n)) + (1j * rng.standard_normal((n, n)) if complex_ else 0)
    return Model(np.diag(e0), (a + a.conj().T) / 2, name="random dense")


# ----------------------------------------------------------------------------- two-level closed form
@pytest.mark.parametrize("backend", SOLVERS)
def test_two_level_closed_form_every_backend(backend):
    delta, v = 1.3, 0.4 - 0.3j
    m = Model(np.diag([-delta / 2, delta / 2]), [[0, v], [np.conj(v), 0]])
    lam = np.array([-2.0, -0.7, 0.0, 0.3, 1.1, 2.5])
    sw = track(m, [0, 1], lam, backend=backend)
    lo, hi = two_level_eigs(delta, v, lam)  # Cohen-Tannoudji et al., Complement B_IV
    assert_allclose(sw.energy(0), lo, rtol=1e-12, atol=1e-12)
    assert_allclose(sw.energy(1), hi, rtol=1e-12, atol=1e-12)
    assert sw.backend == backend
    assert not sw.avoided_crossings  # each ray has a monotone gap: no interior minimum


@pytest.mark.parametrize("backend", SOLVERS)
def test_two_level_closed_form_inside_a_larger_sparse_model(backend):
    # the same closed form (Cohen-Tannoudji et al., Complement B_IV) for levels 0, 1 of an N = 300
    # sparse model: the iterative solver runs here (N above its dense hand-off)
    delta, v = 0.8, 0.25 + 0.1j
    m = embedded_two_level(delta, v, 300)
    lam = np.linspace(-3.0, 3.0, 25)
    sw = track(m, [0, 1], lam, backend=backend)
    lo, hi = two_level_eigs(delta, v, lam)
    assert_allclose(sw.energy(0), lo, atol=1e-9)
    assert_allclose(sw.energy(1), hi, atol=1e-9)
    assert residuals(m, sw).max() < 1e-6


# ----------------------------------------------------------------------------- backends agree
@pytest.mark.parametrize("complex_", [False, True])
@pytest.mark.parametrize("sparse", [False, True])
def test_backends_agree_with_each_other_and_with_qutip(complex_, sparse):
    n = 400 if sparse else 60
    m = random_model(n, complex_=complex_, sparse=sparse, key=3 + 2 * sparse + complex_)
    lam = 0.37
    # references straight from QuTiP and numpy, outside our code (common practice, no source)
    h = m.hamiltonian(lam)
    want_q = np.sort(qutip.Qobj(h).eigenenergies())[:6]
    want_np = np.linalg.eigvalsh(h.toarray() if sp.issparse(h) else h)[:6]
    assert_allclose(want_q, want_np, atol=1e-10)  # test set-up: the two references agree
    for backend in SOLVERS:
        w, x = eigenpairs(m, lam, k=6, backend=backend)
        assert_allclose(w, want_np, atol=1e-9, err_msg=backend)
        r = np.linalg.norm(h @ x - x * w, axis=0)
        assert r.max() < 1e-6, backend
        assert_allclose(x.conj().T @ x, np.eye(6), atol=1e-8)
    # energies near a target energy (shift-invert / dense selection)
    target = float(want_np[3]) + 1e-3
    for backend in SOLVERS:
        w, _ = eigenpairs(m, lam, k=3, sigma=target, backend=backend)
        all_w = np.linalg.eigvalsh(h.toarray() if sp.issparse(h) else h)
        nearest = np.sort(all_w[np.argsort(np.abs(all_w - target))[:3]])
        assert_allclose(w, nearest, atol=1e-9, err_msg=backend)


def test_tracked_sweeps_agree_across_backends_on_a_random_sparse_model():
    m = random_model(400, complex_=True, sparse=True, key=11)
    lam = np.linspace(-0.04, 0.04, 5)  # below the first anticrossings of this random model
    sweeps = {b: track(m, [0, 1, 2], lam, backend=b, find_crossings=False) for b in SOLVERS}
    for b in ("sparse", "qutip"):
        assert_allclose(sweeps[b].energies, sweeps["dense"].energies, atol=1e-9, err_msg=b)
        ov = np.abs(np.einsum("lcn,lcn->lc", sweeps[b].states.conj(), sweeps["dense"].states))
        assert ov.min() > 1 - 1e-7, b
    assert residuals(m, sweeps["sparse"]).max() < 1e-6


def test_levels_high_in_a_sparse_spectrum_agree_with_dense():
    # levels 100, 101 of N = 300: the sparse backend uses shift-invert windows there (cross-check of two
    # independent solvers: common practice, no source)
    m = random_model(300, complex_=False, sparse=True, key=4)
    lam = np.linspace(0.0, 0.02, 5)
    ref = track(m, [100, 101], lam, backend="dense")
    got = track(m, [100, 101], lam, backend="sparse")
    assert_allclose(got.energies, ref.energies, atol=1e-9)
    assert residuals(m, got).max() < 1e-6  # common practice, no source


def test_degenerate_group_branches_agree_across_backends():
    # a threefold degenerate unperturbed level: branches are labelled by the block convention
    # (first-order shift along the ray, ties in ascending energy) with every backend
    n = 200
    e0 = np.concatenate([[0.0, 1.0, 1.0, 1.0], 3 + 0.05 * np.arange(n - 4)])
    rng = np.random.default_rng(0)
    a = sp.random(n, n, density=0.03, random_state=1, data_rvs=rng.standard_normal)
    m = Model(sp.diags(e0).tocsr(), ((a + a.T) / 2).tocsr())
    assert m.degenerate_groups == ((1, 2, 3),)
    lam = [-0.05, 0.01, 0.05]
    ref = track(m, [1, 2, 3], lam, backend="dense")
    for backend in ("sparse", "qutip"):
        assert_allclose(track(m, [1, 2, 3], lam, backend=backend).energies, ref.energies, atol=1e-9)
    # each exact state lies in the degenerate group's subspace to leading order
    weight = np.sum(np.abs(ref.states[:, 1, 1:4]) ** 2, axis=-1)
    assert np.all(weight > 0.99)


# ----------------------------------------------------------------------------- avoided crossing
def crossing_model(w: float, n_extra: int = 0) -> Model:
    """Levels 1, 2 anticross: diabatic energies 1 + λ/2 and 1.2 − λ/2 (crossing at λ = 0.2), coupling wλ.

    Level 0 and the extra far levels are uncoupled from the pair, so levels 1, 2 are an exact 2 x 2
    problem.  ``n_extra`` adds far levels (sparse storage) so that the iterative solver runs.
    """
    n = 3 + n_extra
    e0 = np.concatenate([[0.0, 1.0, 1.2], 6.0 + 0.5 * np.arange(n_extra)])
    v = sp.lil_matrix((n, n))
    v[1, 1], v[2, 2] = 0.5, -0.5
    v[1, 2] = v[2, 1] = w
    v[0, 0] = 0.1
    for i in range(3, n - 1):
        v[i, i + 1] = v[i + 1, i] = 0.1
    return Model(sp.diags(e0).tocsr(), v.tocsr(), name="anticrossing")


def pair_branches(w: float, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Closed form of the two-level eigenvalues (Cohen-Tannoudji et al., Complement B_IV) for the pair:
    H = [[1 + λ/2, wλ], [wλ, 1.2 − λ/2]] → E± = 1.1 ± √(((λ − 0.2)/2)² + w²λ²); weight of e_1 in the
    lower eigenvector (b, E₋ − a) with a = 1 + λ/2, b = wλ."""
    r = np.sqrt(((lam - 0.2) / 2) ** 2 + (w * lam) ** 2)
    lower, upper = 1.1 - r, 1.1 + r
    a, b = 1 + lam / 2, w * lam
    with np.errstate(invalid="ignore"):
        weight1 = np.where(b == 0, 1.0, b**2 / (b**2 + (lower - a) ** 2))
    return lower, upper, weight1


@pytest.mark.parametrize("backend,n_extra", [("dense", 0), ("qutip", 0), ("sparse", 200)])
def test_tracking_stays_on_the_adiabatic_branch_and_reports_the_anticrossing(backend, n_extra):
    w = 0.01
    m = crossing_model(w, n_extra)
    lam = np.linspace(0.0, 0.6, 13)  # step 0.05: the crossing region (width ~ 2wλ = 0.004) is between samples
    sw = track(m, [1, 2], lam, backend=backend)
    lower, upper, weight1 = pair_branches(w, lam)
    # level 1 is continuously connected to the lower branch (it starts as e_1, the lower of the pair)
    assert_allclose(sw.energy(1), lower, atol=1e-9)
    assert_allclose(sw.energy(2), upper, atol=1e-9)
    assert_allclose(np.abs(sw.state(1)[:, 1]) ** 2, weight1, atol=1e-7)
    # minimum of the gap 2√(((λ − 0.2)/2)² + w²λ²): λ* = 0.2/(1 + 4w²), gap* = 0.4 w/√(1 + 4w²)
    # (derivative of the closed form above set to zero); at the diabatic crossing the gap is 2|λ w| = 0.004
    lam_star = 0.2 / (1 + 4 * w**2)
    gap_star = 0.4 * w / np.sqrt(1 + 4 * w**2)
    assert gap_star == pytest.approx(2 * 0.2 * w, rel=1e-3)
    assert len(sw.avoided_crossings) == 1  # found from both tracked levels, reported once
    ac = sw.avoided_crossings[0]
    assert set(ac.levels) == {1, 2}
    assert ac.coupling == pytest.approx(lam_star, abs=2e-4)
    assert ac.min_gap == pytest.approx(gap_star, rel=1e-4)
    assert not sw.notes


@pytest.mark.parametrize("backend,n_extra", [("dense", 0), ("sparse", 200)])
@pytest.mark.parametrize("w", [1e-4, 1e-5])
def test_narrow_anticrossing_inside_a_step_is_located_without_halving(backend, n_extra, w):
    # gap 4w·λ* ~ 4e-5 .. 4e-6, far narrower than the step 0.05: the pair is resolved as a two-level
    # problem inside the step (a few extra solves at most) instead of by halving down to its width
    m = crossing_model(w, n_extra)
    lam = np.linspace(0.0, 0.6, 13)
    solver = ExactSolver(m, backend=backend)
    sw = solver.track([1, 2], lam)
    lower, upper, _ = pair_branches(w, lam)  # closed form (Cohen-Tannoudji et al., Complement B_IV)
    assert_allclose(sw.energy(1), lower, atol=1e-9)  # adiabatic: level 1 stays the lower branch
    assert_allclose(sw.energy(2), upper, atol=1e-9)
    (ac,) = sw.avoided_crossings
    # minimum of the closed-form gap: λ* = 0.2/(1 + 4w²), gap* = 0.4 w/√(1 + 4w²)
    assert set(ac.levels) == {1, 2}
    assert ac.coupling == pytest.approx(0.2 / (1 + 4 * w**2), abs=1e-7)
    assert ac.min_gap == pytest.approx(0.4 * w / np.sqrt(1 + 4 * w**2), rel=1e-4)
    assert sw.solves <= lam.size - 1 + 5  # one solve per coupling plus at most five for the pair
    assert not sw.notes


def test_pair_coupled_below_round_off_is_an_exact_crossing_not_an_anticrossing():
    # Level 0 (E0 = 0) is coupled to the others only by 1e-16 x V1; level 1 is mixed with level 2 and
    # meets level 0 near λ = -4.6 with a gap ~1e-17, far below round-off.  The two-level search inside
    # the step cannot resolve that gap (the pair's squared gap is not a parabola: level 2 bends it), so
    # its sampled minimum must not be reported as an avoided crossing: level 0 stays at E = 0 to
    # round-off (eigvalsh of the 3 x 3 matrix below; common practice, no source)
    h0 = np.diag([0.0, 1.0, 2.5])
    v1 = np.array([[0, 0.3, 0], [0.3, 0, 0.2], [0, 0.2, 0]])
    v2 = np.diag([0.0, 0.2, -0.1]) + np.array([[0, 0, 0], [0, 0, 0.1], [0, 0.1, 0]])
    m = Model(h0, v2 + 1e-16 * v1)
    lam = np.linspace(0.0, -12.0, 13)
    sw = track(m, [0], lam, backend="dense")
    assert sw.avoided_crossings == ()
    ref = [np.linalg.eigvalsh(h0 + c * (v2 + 1e-16 * v1)) for c in lam]
    assert all(np.min(np.abs(r)) < 1e-12 for r in ref)  # test set-up: 0 stays an eigenvalue
    assert_allclose(sw.energy(0), 0.0, atol=1e-12)


def test_long_sparse_sweep_equals_dense_eigenvalues_and_crossings_equal_brute_force():
    # 61 equal steps on an 8-spin chain in non-uniform fields (invented numbers, the benchmark's model at
    # a smaller size): after a few steps the iterative backend filters the extrapolated block of the
    # previous solves directly.  Referee: dense eigvalsh at every coupling, and each reported avoided
    # crossing against a bounded minimisation of the dense gap (common practice, no source).
    n_spins = 8
    i = np.arange(n_spins)
    h = 1.0 + 0.37 * np.sin(1.3 * i + 0.4) + 0.05 * i
    jz = 0.45 + 0.21 * np.cos(0.9 * i[:-1] + 1.1)
    states = np.arange(2**n_spins)
    s = 1 - 2 * ((states[:, None] >> (n_spins - 1 - i)[None, :]) & 1)
    diag = -(s * h).sum(axis=1) - (s[:, :-1] * s[:, 1:] * jz).sum(axis=1)
    rows = np.repeat(states, n_spins)
    cols = (states[:, None] ^ (1 << (n_spins - 1 - i))[None, :]).ravel()
    v = sp.csr_matrix((np.ones(rows.size), (rows, cols)), shape=(2**n_spins,) * 2)
    m = Model(sp.diags(diag).tocsr(), v, name="chain")
    lam = np.linspace(0.0, 1.2, 61)
    sw = track(m, range(6), lam, backend="sparse")
    dense = np.array([np.linalg.eigvalsh(m.hamiltonian(c).toarray()) for c in lam])
    # no symmetry sector and no unresolvable crossing: the six tracked levels are the six lowest
    assert_allclose(np.sort(sw.energies, axis=0).T, dense[:, :6], atol=1e-9)
    assert residuals(m, sw).max() < 1e-6
    assert len(sw.avoided_crossings) >= 1
    for ac in sw.avoided_crossings:
        j = int(np.argmin(np.abs(lam - ac.coupling)))
        e_pair = [sw.energy(level)[j] for level in ac.levels]
        rank = int(np.argmin(np.abs(dense[j] - min(e_pair))))

        def gap(c: float, rank: int = rank) -> float:
            w = np.linalg.eigvalsh(m.hamiltonian(c).toarray())
            return float(w[rank + 1] - w[rank])

        from scipy.optimize import minimize_scalar

        best = minimize_scalar(gap, bounds=(ac.coupling - 0.03, ac.coupling + 0.03), method="bounded",
                               options={"xatol": 1e-9})
        # a broad minimum is placed from the samples (parabola vertex), a narrower one by a few
        # parabolic steps: positions to a tenth of a step, depths to 0.1 %
        assert ac.coupling == pytest.approx(best.x, abs=0.1 * (lam[1] - lam[0]))
        assert ac.min_gap == pytest.approx(best.fun, rel=1e-3)


def test_untracked_partner_is_identified():
    m = crossing_model(0.01)
    sw = track(m, [1], np.linspace(0.0, 0.6, 13))
    (ac,) = sw.avoided_crossings
    assert ac.levels == (1, 2)
    assert ac.labels == ("n=1", "n=2")


def test_unresolvable_crossing_warns_and_is_noted():
    # a gap of ~4e-7 with refinement switched off (max_depth=0: no halving, no two-level
    # resolution) cannot be resolved: followed diabatically
    m = crossing_model(1e-6)
    solver = ExactSolver(m, backend="dense", max_depth=0)
    with pytest.warns(TrackingWarning, match="narrower than resolvable"):
        sw = solver.track([1], np.linspace(0.0, 0.6, 6))  # grid avoids λ = 0.2 itself
    assert any("narrower than resolvable" in n for n in sw.notes)
    # diabatic: after the crossing level 1 keeps the character of e_1 (the upper branch)
    assert abs(sw.state(1)[-1, 1]) ** 2 > 0.99
    lower, upper, _ = pair_branches(1e-6, sw.couplings)
    assert_allclose(sw.energy(1)[-1], upper[-1], atol=1e-9)


# ----------------------------------------------------------------------------- symmetry-protected crossings
def two_sector_model(n: int, sparse: bool, key: int = 5) -> tuple[Model, np.ndarray]:
    """V couples only states of the same sector (even / odd work index): eigenstates never mix sectors,
    so levels of different sectors cross exactly (von Neumann & Wigner, Phys. Z. 30, 467 (1929))."""
    rng = np.random.default_rng(key)
    e0 = np.sort(rng.uniform(0.0, 4.0, n))
    sector = np.arange(n) % 2
    a = rng.standard_normal((n, n)) * (rng.uniform(size=(n, n)) < (0.05 if sparse else 1.0))
    a = (a + a.T) / 2
    a[sector[:, None] != sector[None, :]] = 0.0
    # opposite slopes per sector make inter-sector crossings among the low levels
    a[np.diag_indices(n)] = np.where(sector == 0, 1.0, -1.0) * (1.0 + 0.2 * rng.uniform(size=n))
    v = sp.csr_matrix(a) if sparse else a
    return Model(sp.diags(e0).tocsr() if sparse else np.diag(e0), v, name="two sectors"), sector


@pytest.mark.parametrize("backend,n,sparse", [("dense", 12, False), ("qutip", 12, False), ("sparse", 240, True)])
def test_symmetry_protected_crossings_are_followed_diabatically(backend, n, sparse):
    m, sector = two_sector_model(n, sparse)
    levels = [0, 1, 2, 3]
    lam = np.linspace(0.0, 0.8, 33)
    sw = track(m, levels, lam, backend=backend)  # filterwarnings=error: no TrackingWarning allowed
    # test set-up: the energy order of the tracked levels does change (there are crossings to follow)
    order_changes = np.any(np.diff(np.argsort(sw.energies, axis=0), axis=1) != 0)
    assert order_changes
    for i, lev in enumerate(levels):
        own = sector == sector[lev]
        weight = np.sum(np.abs(sw.states[i][:, own]) ** 2, axis=1)
        assert_allclose(weight, 1.0, atol=1e-8)  # the state never leaves its sector
    for ac in sw.avoided_crossings:
        assert sector[ac.levels[0]] == sector[ac.levels[1]], ac  # never between sectors
    assert not sw.notes
    assert residuals(m, sw).max() < 1e-6


# ----------------------------------------------------------------------------- level_at and caching
def test_level_at_agrees_with_track_and_reuses_the_cache():
    m = crossing_model(0.01, 200)
    solver = ExactSolver(m, backend="sparse")
    lam = np.linspace(-0.6, 0.6, 25)
    sw = solver.track([1, 2], lam)
    before = solver.solves
    for c in (0.35, -0.2, 0.6):
        e, psi = solver.level_at(1, c)
        j = int(np.argmin(np.abs(lam - c)))
        assert e == pytest.approx(sw.energy(1)[j], abs=1e-12)
        assert_allclose(psi, sw.state(1)[j], atol=1e-10)  # same state and same phase convention
    assert solver.solves == before  # points of the sweep come from the cache


def test_bisection_probes_are_cheap_and_consistent():
    m = crossing_model(0.01, 200)
    lower, _, _ = pair_branches(0.01, np.array([0.1, 0.45, 0.3, 0.27, 0.29, 0.28]))
    solver = ExactSolver(m, backend="sparse")
    counts = []
    got = []
    for c in (0.1, 0.45, 0.3, 0.27, 0.29, 0.28):  # bisection-like order
        got.append(solver.level_at(1, c)[0])
        counts.append(solver.solves)
    assert_allclose(got, lower, atol=1e-9)  # closed form of the pair (pair_branches)
    cost = np.diff([0] + counts)
    # 0.1 -> 0.45 crosses the anticrossing at 0.2 and refines there; the later probes start from the
    # nearest cached point below them and need one or two solves each
    assert cost[0] <= 2 and cost[1] > cost[0]
    assert cost[2:].max() <= 2
    again = solver.solves
    assert solver.level_at(1, 0.28)[0] == got[-1]
    assert solver.solves == again  # repeated probe: no solve at all


def test_coupling_zero_needs_no_solve():
    m = crossing_model(0.01)
    sw = track(m, [0, 2], [0.0, 0.0])
    assert sw.solves == 0
    assert_allclose(sw.energies, [[0.0, 0.0], [1.2, 1.2]])
    assert_allclose(sw.state(2)[0], np.eye(3)[2])
    e, psi = ExactSolver(m).level_at(2, 0.0)
    assert e == 1.2 and psi[2] == 1.0


def test_phase_convention_component_real_nonnegative():
    m = random_model(40, complex_=True, sparse=False, key=2)
    sw = track(m, [0, 5], np.linspace(-0.2, 0.2, 5))
    for i, lev in enumerate(sw.levels):
        comp = sw.state(lev)[:, lev]
        assert np.all(np.abs(comp.imag) < 1e-12) and np.all(comp.real > 0)
        assert_allclose(np.linalg.norm(sw.state(lev), axis=1), 1.0, atol=1e-12)


# ----------------------------------------------------------------------------- result objects
def test_sweep_result_is_read_only_and_serialisable():
    m = crossing_model(0.01)
    sw = track(m, [1, 2], np.linspace(0.0, 0.6, 13))
    assert sw.energies.flags.writeable is False and sw.states.flags.writeable is False
    assert sw.couplings.flags.writeable is False
    d = json.loads(json.dumps(sw.to_dict()))
    assert d["levels"] == [1, 2] and len(d["energies"]) == 2 and d["has_states"] is True
    assert d["avoided_crossings"][0]["levels"] == [1, 2]
    assert "ExactSweep(" in repr(sw) and len(repr(sw)) < 200
    page = sw._repr_html_()
    assert "<table>" in page and "n=1 ~ n=2" in page
    assert_allclose(sw.energy("n=1"), sw.energy(1))
    with pytest.raises(ValueError, match="was not tracked"):
        sw.energy(0)
    ac = sw.avoided_crossings[0]
    assert isinstance(ac, AvoidedCrossing) and json.dumps(ac.to_dict())
    no_states = track(m, [1], [0.1, 0.2], keep_states=False, find_crossings=False)
    assert no_states.states is None and no_states.avoided_crossings == ()
    with pytest.raises(ValueError, match="keep_states=False"):
        no_states.state(1)


def test_auto_rule():
    small = crossing_model(0.01)
    assert auto_backend(small) == "dense"
    assert auto_backend(crossing_model(0.01, 300)) == "sparse"
    dense_v = random_model(250, complex_=False, sparse=False, key=1)
    assert auto_backend(dense_v) == "dense"
    assert ExactSolver(small).backend == "dense"
    assert BACKENDS == ("auto", "dense", "sparse", "qutip")


# ----------------------------------------------------------------------------- bad input
def test_unknown_backend_lists_the_names():
    m = crossing_model(0.01)
    with pytest.raises(ValueError, match="'auto', 'dense', 'sparse', 'qutip'; got 'lapack'"):
        ExactSolver(m, backend="lapack")
    with pytest.raises(ValueError, match="backend must be one of"):
        track(m, [0], [0.1], backend="eigen")


def test_dense_methods_refuse_a_huge_basis():
    n = DENSE_LIMIT + 1
    chain = sp.diags([np.ones(n - 1), np.ones(n - 1)], [-1, 1], format="csr")  # one sector of N states
    m = Model(sp.diags(np.arange(n, dtype=float)).tocsr(), chain, name="huge chain")
    with pytest.raises(BasisTooLargeError, match=f"N = {n} > DENSE_LIMIT"):
        ExactSolver(m, backend="dense")
    with pytest.raises(BasisTooLargeError, match="DENSE_LIMIT"):
        eigenpairs(m, 0.1, backend="sparse")  # all N eigenpairs need a dense solve
    assert ExactSolver(m).backend == "sparse"
    # the dense backend works sector by sector: N uncoupled states are N sectors of one state
    free = Model(sp.diags(np.arange(n, dtype=float)).tocsr(), sp.diags(np.full(n, 0.5)).tocsr(), name="huge diagonal")
    sw = ExactSolver(free, backend="dense").track([0, 7], [0.2])
    # E = E0 + λ V_nn for a diagonal V (common practice, no source); the shift carries no offset rounding
    assert_allclose(sw.shifts[:, 0], [0.1, 0.1], rtol=1e-15)
    assert_allclose(sw.energies[:, 0], [0.1, 7.1], atol=1e-12)
    with pytest.raises(BasisTooLargeError, match="DENSE_LIMIT"):
        eigenpairs(free, 0.1, backend="sparse")


def test_bad_couplings_levels_and_k():
    m = crossing_model(0.01)
    with pytest.raises(ValueError, match=r"couplings must be finite; couplings\[1\] = nan"):
        track(m, [1], [0.1, np.nan])
    with pytest.raises(ValueError, match="level must be in 0..2; got 7"):
        track(m, [7], [0.1])
    with pytest.raises(ValueError, match="levels must be distinct"):
        track(m, [1, 1], [0.1])
    with pytest.raises(ValueError, match="levels is empty"):
        track(m, [], [0.1])
    with pytest.raises(ValueError, match="coupling must be finite"):
        ExactSolver(m).level_at(1, float("inf"))
    with pytest.raises(ValueError, match="k must be an int <= 3; got 4"):
        eigenpairs(m, 0.1, k=4)
    with pytest.raises(TypeError, match="model must be a ptcheck.Model"):
        track(np.eye(3), [0], [0.1])


# ----------------------------------------------------------------------------- shifts and sectors
def test_shifts_are_energy_minus_unperturbed_and_free_of_the_offset():
    m = crossing_model(0.01)
    lam = np.linspace(0.0, 0.6, 7)
    sw = track(m, [0, 1, 2], lam)
    assert_allclose(sw.shifts, sw.energies - m.e0[:, None], atol=1e-14)
    lower, upper, _ = pair_branches(0.01, lam)  # closed form of the pair (Cohen-Tannoudji et al.)
    assert_allclose(sw.shift(1), lower - 1.0, atol=1e-12)
    # the same model with a large constant in H0: the shifts are those of the stored matrix minus the
    # constant (subtracted exactly here), to the accuracy of the offset-free problem
    h_big = m.hamiltonian(0.0).toarray() + 2.0**40 * np.eye(3)
    big = Model(h_big, m.v.toarray(), name="offset")
    ref = Model(h_big - 2.0**40 * np.eye(3), m.v.toarray(), name="offset removed")
    assert ExactSolver(big).shift_at(1, 0.35) == pytest.approx(ExactSolver(ref).shift_at(1, 0.35), abs=1e-14)
    assert_allclose(track(big, [0, 1, 2], lam).shifts, track(ref, [0, 1, 2], lam).shifts, atol=1e-14)
    assert json.loads(json.dumps(sw.to_dict()))["shifts"][1][0] == 0.0


def test_levels_of_different_sectors_are_solved_apart():
    # level 0 is alone in its sector (V_00 only): closed form E0 + λ V_00 and no solve at all
    m = crossing_model(0.01)
    solver = ExactSolver(m)
    e, psi = solver.level_at(0, 0.4)
    assert e == pytest.approx(0.04, abs=1e-15) and solver.solves == 0
    assert_allclose(psi, [1.0, 0.0, 0.0])
    sw = solver.track([0, 1], [0.2, 0.4])
    assert sw.states.shape == (2, 2, 3)
    assert np.all(sw.states[1][:, 0] == 0.0)  # level 1 never has weight in level 0's sector


# ----------------------------------------------------------------------------- probe path
def two_block_random_model(n: int, key: int = 5) -> tuple[Model, np.ndarray, np.ndarray, np.ndarray]:
    """Invented random model of two uncoupled blocks of n states (two sectors, both iterative-sized).

    Returns the model, the dense user-basis matrices H0 and V (the referee diagonalises their blocks)
    and the work index of each user state (H0 is diagonal with distinct entries, so the work basis is
    the user basis sorted by energy).
    """
    rng = np.random.default_rng(key)
    e0 = np.concatenate([np.sort(rng.uniform(0.0, 10.0, n)), np.sort(rng.uniform(0.05, 10.05, n))])
    blocks = []
    for b in range(2):
        a = sp.random(n, n, density=0.04, random_state=key + b, data_rvs=rng.standard_normal)
        blocks.append((a + a.T) * 0.25)
    v = sp.block_diag(blocks).tocsr()
    model = Model(sp.diags(e0).tocsr(), v, name="two sectors (invented)")
    return model, np.diag(e0), v.toarray(), np.argsort(np.argsort(e0))


def test_probe_path_equals_tracking_and_dense_eigvalsh_per_sector():
    # Probes (one direct Davidson solve per coupling, no path from λ = 0) must give the state that
    # tracking from λ = 0 gives; when the level has lost its energy rank or its perturbative
    # character, the probe must be refused and the tracked path used instead.  Referee: LAPACK
    # eigvalsh of each user-basis block (common practice, no source) and ExactSolver.track.  (The
    # model and couplings avoid anticrossings narrower than ~1e-5: there the tracked path itself
    # depends on where it is sampled.)
    n = 110  # above SMALL_DENSE: the sparse backend iterates
    m, h0, v, work = two_block_random_model(n)
    picks = [(b, r) for b in (0, 1) for r in (0, 3, 10)]  # (block, energy rank inside the block)
    levels = [int(work[b * n + r]) for b, r in picks]
    lams = [0.3, 0.1, 0.2, 0.25, 0.05, -0.03]  # bisection-like order, both rays
    solver = ExactSolver(m, backend="sparse")
    got = {(lev, c): solver.level_at(lev, c) for lev in levels for c in lams}
    sweep = ExactSolver(m, backend="sparse").track(levels, sorted(lams))
    probed = 0
    for (b, r), lev in zip(picks, levels):
        sub = solver._solver(m.sector_of(lev))
        k = int(np.searchsorted(solver._levels_of[m.sector_of(lev)], lev))
        for c in lams:
            e, psi = got[(lev, c)]
            j = sorted(lams).index(c)
            assert e == pytest.approx(sweep.energy(lev)[j], abs=1e-9)
            assert_allclose(psi, sweep.state(lev)[j], atol=1e-6)  # same state, same phase convention
            blk = slice(b * n, (b + 1) * n)
            w = np.linalg.eigvalsh(h0[blk, blk] + c * v[blk, blk])
            assert np.min(np.abs(w - e)) < 1e-9  # an exact eigenvalue of the level's own block
            ray = 1 if c > 0 else -1
            if any(abs(p[0] - abs(c)) == 0 for p in sub._probes.get((ray, k), [])):
                probed += 1
                assert e == pytest.approx(w[r], abs=1e-9)  # a probe keeps the unperturbed energy rank
    assert probed >= 20  # most points are probes on this mildly coupled model
    assert probed < len(picks) * len(lams)  # and some were refused (the level mixed), then tracked


def test_probes_on_a_chain_with_site_fields_equal_dense_eigvalsh():
    # The boundary-search case: low levels of an 8-spin Ising chain with invented site fields, probed in
    # a bisection-like order.  Referee: LAPACK eigvalsh of the dense matrix (common practice, no source).
    # The ground level stays perturbative up to λ = 0.6; level 2 (one flipped spin, 0.06 from its
    # neighbours) only up to λ ≈ 0.1, so its probe at 0.3 must be refused and the tracked path used.
    from ptcheck.models import spin_chain

    m = spin_chain(n_spins=8, h_z=[0.1 + 0.03 * i for i in range(8)])
    solver = ExactSolver(m, backend="sparse")
    for level, couplings in ((0, (0.6, 0.3, 0.45, 0.52, 0.5)), (2, (0.1, 0.05, 0.08))):
        for c in couplings:
            before = solver.solves
            e, psi = solver.level_at(level, c)
            assert solver.solves == before + 1  # one probe, no tracked path
            ref = np.linalg.eigvalsh(m.hamiltonian(c).toarray())
            assert e == pytest.approx(ref[level], abs=1e-9)
            assert np.linalg.norm(m.hamiltonian(c) @ psi - e * psi) < 1e-6 and psi[level] > 0
    sweep = ExactSolver(m, backend="sparse").track([2], [0.1, 0.2, 0.3])
    before = solver.solves
    e, psi = solver.level_at(2, 0.3)
    assert solver.solves > before + 1  # refused probe, then the tracked path
    assert e == pytest.approx(sweep.energy(2)[-1], abs=1e-9)
    assert_allclose(psi, sweep.state(2)[-1], atol=1e-6)


def test_broad_avoided_crossing_is_placed_from_the_samples_without_extra_solves():
    # Squared gap of the pair of crossing_model: 4 [((λ − 0.2)/2)² + w²λ²], exactly quadratic in λ
    # (closed form of the two-level eigenvalues, Cohen-Tannoudji et al., Complement B_IV), so the
    # parabola through three samples is exact: minimum at λ* = 0.2 / (1 + 4w²).
    w = 0.1
    m = crossing_model(w, 200)
    lam = np.linspace(0.0, 0.6, 13)
    sw = track(m, [1, 2], lam, backend="sparse")
    (ac,) = sw.avoided_crossings
    star = 0.2 / (1 + 4 * w**2)
    assert ac.levels == (1, 2)
    assert ac.coupling == pytest.approx(star, abs=1e-9)
    assert ac.min_gap == pytest.approx(2 * np.sqrt(((star - 0.2) / 2) ** 2 + (w * star) ** 2), abs=1e-9)
    plain = track(m, [1, 2], lam, backend="sparse", find_crossings=False)
    assert sw.solves == plain.solves  # nothing spent on locating the crossing
