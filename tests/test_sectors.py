"""Symmetry sectors: coupling-graph components, declared conserved operators, per-sector exact tracking.

Brute force is the referee: every tracked exact energy is compared with a dense ``numpy.linalg.eigvalsh``
of the level's own sector, built here from closed-form matrix elements or by projecting the user's
matrices, never from ptcheck's own work-basis matrices.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import HealthCheck, given, settings, strategies as st
from numpy.testing import assert_allclose

from ptcheck import AmbiguousLevelError, ExactSolver, Model, compare, near_degenerate_pairs, rs_series, track
from ptcheck.blocks import block_series
from ptcheck.models import linear_rotor, spin_chain
from ptcheck.sectors import Sector

from conftest import ising_ring


# ----------------------------------------------------------------------------- references (outside ptcheck)
def rotor_sector(b: float, mu_e: float, j_max: int, m: int, lam: float) -> np.ndarray:
    """Dense H of the M sector of a linear rotor in a field, J = |M| .. j_max (ascending J).

    Diagonal B J(J+1), off-diagonal −λ μE ⟨J+1, M|cos θ|J, M⟩ = −λ μE √[((J+1)² − M²)/((2J+1)(2J+3))]
    (direction-cosine matrix element of a linear molecule, Townes & Schawlow, Microwave Spectroscopy, 1955;
    quoted from memory).
    """
    js = np.arange(abs(m), j_max + 1, dtype=float)
    off = np.sqrt(((js[:-1] + 1) ** 2 - m**2) / ((2 * js[:-1] + 1) * (2 * js[:-1] + 3)))
    return np.diag(b * js * (js + 1)) - lam * mu_e * (np.diag(off, 1) + np.diag(off, -1))


def parity_basis(parity: np.ndarray, sign: int) -> np.ndarray:
    """Orthonormal basis (columns) of the parity = sign eigenspace: (|s⟩ + sign |s̄⟩)/√2 for s < s̄ (s̄: all
    spins flipped), checked against the parity matrix itself."""
    dim = len(parity)
    s = np.arange(dim)
    lo = s[s < (s ^ (dim - 1))]
    q = np.zeros((dim, lo.size))
    q[lo, np.arange(lo.size)] = 1 / np.sqrt(2)
    q[lo ^ (dim - 1), np.arange(lo.size)] = sign / np.sqrt(2)
    assert np.allclose(parity @ q, sign * q)  # test set-up: eigenvectors of Π σx with eigenvalue sign
    return q


def parity_sector_spectrum(h: np.ndarray, basis: np.ndarray) -> np.ndarray:
    """Eigenvalues of h on the span of ``basis``."""
    return np.linalg.eigvalsh(basis.T @ h @ basis)


# ----------------------------------------------------------------------------- linear rotor
def test_rotor_levels_follow_their_labels_in_their_m_sector():
    b, mu_e, j_max = 1.3, 0.9, 10
    m = linear_rotor(b=b, mu_e=mu_e, j_max=j_max)
    assert len(m.sectors) == 2 * j_max + 1
    labels = [(jj, mm) for jj in range(j_max + 1) for mm in range(-jj, jj + 1)]
    lam = [-1.7, 0.25, 1.0, 2.5]
    sw = track(m, labels, lam)
    assert not sw.notes and not sw.avoided_crossings
    for i, (jj, mm) in enumerate(labels):
        # a tridiagonal sector with non-zero off-diagonal has simple eigenvalues that never cross:
        # level (J, M) is rank J − |M| of its sector at every coupling
        ref = [np.linalg.eigvalsh(rotor_sector(b, mu_e, j_max, mm, x))[jj - abs(mm)] for x in lam]
        assert_allclose(sw.energies[i], ref, atol=1e-11, err_msg=str((jj, mm)))
        assert m.sectors[m.sector_of((jj, mm))].quantum_numbers == (float(mm),)


def test_rotor_j1_is_not_degenerate_inside_its_sectors():
    m = linear_rotor(j_max=6)
    assert m.degenerate_groups == ()  # M sectors hold one level per J
    assert m.ambiguous_levels == frozenset()
    j1 = [m.level_index((1, mm)) for mm in (-1, 0, 1)]
    assert len({m.sector_of(x) for x in j1}) == 3
    assert any(set(j1) <= set(g) for g in m.symmetry_degeneracies)  # equal E0 across sectors: information only
    assert near_degenerate_pairs(m, 0.3, levels=j1) == []  # nothing in V couples the J = 1 members
    rs_series(m, (1, 0), 4)  # non-degenerate in its sector: no DegenerateLevelError


@pytest.mark.parametrize("b, mu_e", [(1.0, 0.5), (2.3, 1.7)])
def test_rotor_second_order_stark_shift_townes_schawlow(b, mu_e):
    # Townes & Schawlow, Microwave Spectroscopy (1955), second-order Stark effect of a linear molecule:
    # E2(J, M) = (μE)² [J(J+1) − 3M²] / [2B J(J+1)(2J−1)(2J+3)],  E2(0, 0) = −(μE)²/(6B)
    m = linear_rotor(b=b, mu_e=mu_e, j_max=10)
    for jj in range(0, 9):
        for mm in range(-jj, jj + 1):
            want = -(mu_e**2) / (6 * b) if jj == 0 else mu_e**2 * (jj * (jj + 1) - 3 * mm**2) / (
                2 * b * jj * (jj + 1) * (2 * jj - 1) * (2 * jj + 3)
            )
            got = rs_series(m, (jj, mm), 2).energy_coefficients[2]
            assert got == pytest.approx(want, rel=1e-12, abs=1e-15), (jj, mm)


def test_rotor_compare_pairs_labels_with_their_own_branches():
    # the perturbative side and the exact side of label (1, 0) are the same branch (issue: (1,0) and
    # |M| = 1 were swapped); order 2 of Townes & Schawlow against the sector's eigvalsh at a small field
    b, mu_e = 1.0, 0.5
    m = linear_rotor(b=b, mu_e=mu_e, j_max=10)
    lam = 0.05
    r = compare(m, [(1, 0), (1, 1)], [2], [lam])
    d = r.to_dict()
    for i, (jj, mm) in enumerate([(1, 0), (1, 1)]):
        exact = np.linalg.eigvalsh(rotor_sector(b, mu_e, 10, mm, lam))[jj - abs(mm)]
        assert d["exact"][i][0] == pytest.approx(exact, abs=1e-12)
        e2 = mu_e**2 * (2 - 3 * mm**2) / (2 * b * 2 * 1 * 5)
        assert d["perturbative"][i][0][0] == pytest.approx(2 * b + e2 * lam**2, abs=1e-14)


# ----------------------------------------------------------------------------- Ising chain with parity
@pytest.mark.parametrize("grid", [[0.3, 0.5], list(np.linspace(0.0, 0.5, 11))])
def test_ising_ground_doublet_tracked_in_its_parity_sectors(grid):
    n = 8
    m = spin_chain(n_spins=n)
    assert m.sector_of(0) != m.sector_of(1)
    assert {m.sectors[m.sector_of(0)].name, m.sectors[m.sector_of(1)].name} == {"parity +1", "parity -1"}
    h0, v, parity = ising_ring(n)
    sw = track(m, [0, 1], grid)
    assert not sw.avoided_crossings and not sw.notes  # no reported crossing
    for i, lev in enumerate([0, 1]):
        sign = int(m.sectors[m.sector_of(lev)].quantum_numbers[0])
        basis = parity_basis(parity, sign)
        # each level is the lowest of its sector (rank 0) at every coupling: brute force per sector
        ref = [parity_sector_spectrum(h0 + x * v, basis)[0] for x in sw.couplings]
        assert_allclose(sw.energies[i], ref, atol=1e-10)
    # the + sector holds the true ground state for λ > 0 (level 0 is the lower member)
    assert np.all(sw.energies[0] <= sw.energies[1] + 1e-12)


def test_ising_order16_error_is_the_same_on_any_grid():
    # issue: on [0.3, 0.5] the exact side took the other doublet member (error ~ the doublet splitting)
    m = spin_chain(n_spins=8)
    coarse = compare(m, [0], [16], [0.3, 0.5]).to_dict()
    fine = compare(m, [0], [16], list(np.linspace(0.0, 0.5, 11))).to_dict()
    assert coarse["exact"][0][0] == pytest.approx(fine["exact"][0][6], abs=1e-12)  # λ = 0.3
    assert coarse["exact"][0][1] == pytest.approx(fine["exact"][0][10], abs=1e-12)  # λ = 0.5
    h0, v, parity = ising_ring(8)
    want = parity_sector_spectrum(h0 + 0.3 * v, parity_basis(parity, +1))[0]
    assert coarse["exact"][0][0] == pytest.approx(want, abs=1e-10)
    assert abs(coarse["perturbative"][0][0][0] - want) < 1e-9  # the true order-16 error, far below the splitting


def test_paired_labels_name_both_states_and_members_are_refused():
    m = spin_chain(n_spins=4)
    assert m.label(0) == "|0,0,0,0⟩+|1,1,1,1⟩"
    assert m.level_index("|0,0,0,0⟩−|1,1,1,1⟩") == 1
    with pytest.raises(AmbiguousLevelError, match=r"pairs it with \(1, 1, 1, 1\)"):
        m.level_index((0, 0, 0, 0))
    # a longitudinal field breaks the parity: no operator declared, product labels come back
    f = spin_chain(n_spins=4, h_z=0.1)
    assert f.conserved_names == () and f.labels[0] == (0, 0, 0, 0)


# ----------------------------------------------------------------------------- declared operators
def commuting_pair(seed: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """H0 = diag(0, 0, 2, 2) ⊗-structured, Q = 0.3 + 0.7 σx on the second factor, V commuting with Q."""
    rng = np.random.default_rng(seed)
    sx = np.array([[0.0, 1.0], [1.0, 0.0]])
    a, bm = rng.normal(size=(2, 2)), rng.normal(size=(2, 2))
    a, bm = a + a.T, bm + bm.T
    h0 = np.kron(np.diag([0.0, 2.0]), np.eye(2))
    q = np.kron(np.eye(2), 0.3 * np.eye(2) + 0.7 * sx)
    v = np.kron(a, np.eye(2)) + np.kron(bm, sx)
    return h0, v, q


def test_general_conserved_operator_splits_degenerate_states():
    h0, v, q = commuting_pair()
    m = Model(h0, v, conserved={"Q": q})
    names = sorted(s.name for s in m.sectors)
    assert names == ["Q +1", "Q -0.4"]
    # brute force: eigenvalues of H on each eigenspace of Q (eigenvalues 1 and -0.4 of 0.3 + 0.7 σx)
    w, u = np.linalg.eigh(q)
    lam = 0.7
    for s in m.sectors:
        basis = u[:, np.isclose(w, s.quantum_numbers[0])]
        ref = np.linalg.eigvalsh(basis.T @ (h0 + lam * v) @ basis)
        got = track(m, list(s.levels), [lam]).energies[:, 0]
        assert_allclose(np.sort(got), ref, atol=1e-12)
    assert m.degenerate_groups == ()  # each Q sector has one state per H0 energy


def test_conserved_operator_with_a_non_diagonal_h0():
    h0, v, q = commuting_pair(1)
    rng = np.random.default_rng(7)
    # rotate everything by a random orthogonal matrix that commutes with Q (so Q stays conserved)
    r, _ = np.linalg.qr(rng.normal(size=(2, 2)))
    rot = np.kron(r, np.eye(2))
    h0r, vr, qr = rot @ h0 @ rot.T, rot @ v @ rot.T, rot @ q @ rot.T
    m = Model(h0r, vr, conserved=[qr])
    assert sorted(s.name for s in m.sectors) == ["conserved[0] +1", "conserved[0] -0.4"]
    lam = 1.3
    w, u = np.linalg.eigh(qr)
    for s in m.sectors:
        basis = u[:, np.isclose(w, s.quantum_numbers[0])]
        ref = np.linalg.eigvalsh(basis.T @ (h0r + lam * vr) @ basis)
        assert_allclose(np.sort(track(m, list(s.levels), [lam]).energies[:, 0]), ref, atol=1e-11)


def test_non_commuting_or_non_hermitian_operator_gives_a_clear_error():
    h0, v, q = commuting_pair()
    bad = q.copy()
    bad[0, 2] = bad[2, 0] = 0.5  # mixes H0 levels 0 and 2
    with pytest.raises(ValueError, match=r"conserved operator 'Q' does not commute with h0: ‖\[Q, h0\] x‖ = "):
        Model(h0, v, conserved={"Q": bad})
    with pytest.raises(ValueError, match=r"'Q' does not commute with v"):
        Model(h0, v + np.kron(np.eye(2), np.diag([0.2, 0.0])), conserved={"Q": q})
    nonherm = q.copy()
    nonherm[0, 1] += 0.3
    with pytest.raises(ValueError, match=r"Q is not Hermitian"):
        Model(h0, v, conserved={"Q": nonherm})
    with pytest.raises(ValueError, match=r"must have the shape of h0 \(4, 4\); got \(2, 2\)"):
        Model(h0, v, conserved={"Q": np.eye(2)})
    with pytest.raises(TypeError, match="wrap a single operator in a list"):
        Model(h0, v, conserved=q)
    with pytest.raises(TypeError, match="non-empty strings"):
        Model(h0, v, conserved={3: q})
    # declared operators must commute with each other too
    sz2 = np.kron(np.eye(2), np.diag([1.0, -1.0]))
    with pytest.raises(ValueError, match="must commute with each other"):
        Model(h0, np.kron(v[:2, :2] * 0 + np.eye(2), np.eye(2)), conserved={"Q": q, "Z": sz2})


def test_operator_that_leaves_a_component_has_no_quantum_number_there():
    # two uncoupled copies of a two-level system; the swap of the copies commutes with H0 and V but maps
    # each component onto the other: restricted to a component it is zero, so no quantum number
    h0 = np.diag([0.0, 1.0, 0.0, 1.0])
    v = np.kron(np.eye(2), np.array([[0.0, 0.3], [0.3, 0.0]]))
    swap = np.kron(np.array([[0.0, 1.0], [1.0, 0.0]]), np.eye(2))
    m = Model(h0, v, conserved={"swap": swap})
    assert [s.quantum_numbers for s in m.sectors] == [(None,), (None,)]
    assert sorted(s.name for s in m.sectors) == ["component 0", "component 1"]


# ----------------------------------------------------------------------------- sub-models
def block_diagonal_model(seed: int, sizes=(4, 3, 5)) -> tuple[Model, list[np.ndarray]]:
    """Random block-diagonal V (invented numbers): each block is one component of the coupling graph."""
    rng = np.random.default_rng(seed)
    n = sum(sizes)
    e0 = rng.uniform(0.0, 5.0, n)
    v = np.zeros((n, n))
    blocks, start = [], 0
    for s in sizes:
        idx = np.arange(start, start + s)
        a = rng.normal(size=(s, s))
        v[np.ix_(idx, idx)] = (a + a.T) / 2
        blocks.append(idx)
        start += s
    return Model(np.diag(e0), v, labels=[f"s{i}" for i in range(n)]), blocks


def test_restricted_series_equal_full_series_on_every_level():
    m, blocks = block_diagonal_model(3)
    assert sorted(s.size for s in m.sectors) == [3, 4, 5]
    for lev in range(m.n):
        sub = m.restrict(m.sector_of(lev))
        k = sub.parent_levels.index(lev)
        full = rs_series(m, lev, 10).energy_coefficients
        part = rs_series(sub, k, 10).energy_coefficients
        assert_allclose(part, full, rtol=1e-12, atol=1e-14)
        assert sub.label(k) == m.label(lev)
    sub = m.restrict(0)
    assert sub is m.restrict(0)  # cached
    lv = list(sub.parent_levels)
    assert_allclose(sub.e0, m.e0[lv])
    assert_allclose(sub.v, m.v[np.ix_(lv, lv)])
    assert len(sub.sectors) == 1 and sub.sectors[0].name == m.sectors[0].name
    with pytest.raises(ValueError, match=r"sector must be an int <= 2; got 3"):
        m.restrict(3)


def test_cross_sector_equal_energies_are_no_degeneracy():
    # levels 1 and 2 have equal E0 but lie in different components: RS, pairs and blocks treat each alone
    h0 = np.diag([0.0, 1.0, 1.0, 3.0])
    v = np.zeros((4, 4))
    v[0, 1] = v[1, 0] = 0.2
    v[2, 3] = v[3, 2] = 0.3
    m = Model(h0, v, labels=["a", "b", "c", "d"])
    assert m.degenerate_groups == ()
    assert m.symmetry_degeneracies == ((1, 2),)
    assert near_degenerate_pairs(m, 0.3) == []  # ratios 0.3·0.2/1 and 0.3·0.3/2 stay below 0.1
    b, c = m.level_index("b"), m.level_index("c")
    # second order in each isolated two-level sector: Σ |V_nm|² / (E_n − E_m) (textbook RS, no source needed)
    assert rs_series(m, b, 2).energy_coefficients[2] == pytest.approx(0.2**2 / 1.0, rel=1e-14)
    assert rs_series(m, c, 2).energy_coefficients[2] == pytest.approx(0.3**2 / (1.0 - 3.0), rel=1e-14)
    blk = block_series(m, [b], 2)
    assert blk.coefficients[2][0, 0] == pytest.approx(0.04, rel=1e-12)
    assert np.isfinite(blk.gap) and blk.gap == pytest.approx(1.0)


# ----------------------------------------------------------------------------- offsets, tolerances
def test_offset_in_h0_changes_nothing():
    # issue: Model(diag(0, 1, 2.1) + 1e9, V) gave an exact ground shift of -0.0201 instead of -0.000442
    v = np.array([[0.0, 0.02, 0.01], [0.02, 0.0, 0.03], [0.01, 0.03, 0.0]])
    want = np.linalg.eigvalsh(np.diag([0.0, 1.0, 2.1]) + 1.0 * v)[0]  # numpy on the offset-free matrix
    off = Model(np.diag([0.0, 1.0, 2.1]) + 1e9 * np.eye(3), v)
    assert off.degenerate_groups == () and off.degeneracy_tol < 1e-3
    # 1e9 + 2.1 is stored to ~6e-8; the ground shift moves by (0.01/2.1)² x that at most
    assert ExactSolver(off).shift_at(0, 1.0) == pytest.approx(want, abs=1e-11)
    # an offset the input represents exactly (2^30, energies on a binary grid): identical numbers
    e0 = np.array([0.0, 1.0, 2.125])
    base = Model(np.diag(e0), v)
    off = Model(np.diag(e0 + 2.0**30), v)
    lam = [0.5, 1.0]
    assert ExactSolver(off).shift_at(0, 1.0) == ExactSolver(base).shift_at(0, 1.0)
    assert_allclose(track(off, [0, 1, 2], lam).shifts, track(base, [0, 1, 2], lam).shifts, atol=1e-15)
    assert_allclose(rs_series(off, 0, 6).energy_coefficients[1:], rs_series(base, 0, 6).energy_coefficients[1:], atol=1e-15)


def test_wide_user_tolerance_never_changes_the_exact_matrix():
    # a degeneracy_tol wider than a real splitting groups levels for the perturbative side only
    h0 = np.diag([0.0, 0.01, 1.0])
    v = np.array([[0.0, 0.05, 0.1], [0.05, 0.0, 0.2], [0.1, 0.2, 0.0]])
    m = Model(h0, v, degeneracy_tol=0.1)
    assert m.degenerate_groups == ((0, 1),)
    assert_allclose(m.e0, [0.0, 0.01, 1.0])  # true energies kept
    for lam in (0.1, 1.0, 7.0):
        h = m.hamiltonian(lam)
        assert_allclose(np.linalg.eigvalsh(h), np.linalg.eigvalsh(h0 + lam * v), atol=1e-14)
        sw = track(m, [0, 1, 2], [lam])
        # a generic real 3x3 family has no crossings: level n is eigenvalue n (numpy) at every coupling
        assert_allclose(sw.energies[:, 0], np.linalg.eigvalsh(h0 + lam * v), atol=1e-12)


def test_huge_coupling_follows_the_lowest_level():
    # issue: compare(m, [0, 1, 2], [2], [1e6]) on a generic real 3x3 model reported the middle eigenvalue
    rng = np.random.default_rng(11)
    a = rng.normal(size=(3, 3))
    h0, v = np.diag([0.0, 1.0, 2.1]), (a + a.T) / 2
    m = Model(h0, v)
    r = compare(m, [0, 1, 2], [2], [1e6]).to_dict()
    # a generic real symmetric family has no crossings: level n is eigenvalue n (numpy) at every coupling
    assert_allclose([r["exact"][i][0] for i in range(3)], np.linalg.eigvalsh(h0 + 1e6 * v), rtol=1e-12)
    assert not any("crossing" in note for note in r["notes"])


# ----------------------------------------------------------------------------- hypothesis properties
def _spaced_energies(draw, n: int) -> np.ndarray:
    """Energies on a 2^-8 grid with spacing >= 1/16 (exactly representable after adding the offsets below)."""
    steps = draw(st.lists(st.integers(16, 200), min_size=n - 1, max_size=n - 1))
    return np.concatenate([[0.0], np.cumsum(steps)]) / 256.0


@st.composite
def small_models(draw):
    n = draw(st.integers(3, 6))
    e0 = _spaced_energies(draw, n)
    if draw(st.booleans()):
        e0[1] = e0[0]  # an exact degeneracy
    key = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(key)
    a = rng.normal(size=(n, n))
    v = (a + a.T) / 2
    cut = draw(st.integers(1, n))  # split into two components when cut < n
    v[:cut, cut:] = 0.0
    v[cut:, :cut] = 0.0
    return e0, v, rng


def _structure(m: Model) -> tuple:
    groups = sorted((round(float(m.e0_relative[g[0]] - m.e0_relative[0]), 9), len(g)) for g in m.degenerate_groups)
    return sorted(s.size for s in m.sectors), groups


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(small_models(), st.integers(-1000, 1000))
def test_offset_invariance_property(model, k):
    # H0 -> H0 + c·1 with c = k·2^30 (up to 1e12 x the spacing): sectors, groups and exact shifts unchanged
    e0, v, _ = model
    c = float(k) * 2.0**30
    a, b = Model(np.diag(e0), v), Model(np.diag(e0 + c), v)
    assert _structure(a) == _structure(b)
    lam = [0.2, -0.7]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # property: equality, whatever the tracker had to say
        sa, sb = track(a, list(range(a.n)), lam), track(b, list(range(b.n)), lam)
    assert_allclose(sb.shifts, sa.shifts, atol=1e-12)
    assert_allclose(sb.energies - c, sa.energies, atol=1e-12 + 4e-16 * abs(c))


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(small_models(), st.integers(0, 2**31 - 1))
def test_permutation_and_unitary_invariance_property(model, key):
    e0, v, rng = model
    n = e0.size
    h0 = np.diag(e0)
    base = Model(h0, v)
    lam = 0.45
    want = np.linalg.eigvalsh(h0 + lam * v)  # numpy on the user's matrices
    # basis permutation
    p = np.random.default_rng(key).permutation(n)
    perm = Model(h0[np.ix_(p, p)], v[np.ix_(p, p)])
    # orthogonal change of basis inside each component (keeps the sectors)
    comps = [np.flatnonzero(base.to_user_basis(np.eye(n)[list(s.levels)]).any(axis=0)) for s in base.sectors]
    u = np.zeros((n, n))
    for idx in comps:
        q, _ = np.linalg.qr(rng.normal(size=(idx.size, idx.size)))
        u[np.ix_(idx, idx)] = q
    rot = Model(u @ h0 @ u.T, u @ v @ u.T)
    for m in (perm, rot):
        assert _structure(m) == _structure(base)
        assert_allclose(m.e0, base.e0, atol=1e-12)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            got = np.sort(track(m, list(range(n)), [lam]).energies[:, 0])
        assert_allclose(got, want, atol=1e-10)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(3, 6), st.integers(0, 2**31 - 1), st.floats(-2.0, 8.0), st.sampled_from([1.0, -1.0]))
def test_exact_energies_equal_numpy_at_huge_couplings(n, key, log_scale, sign):
    # a generic real symmetric family (one sector, no symmetry) has no level crossings (von Neumann &
    # Wigner, Phys. Z. 30, 467 (1929)): level n is eigenvalue n of numpy at every coupling, up to 1e8 ‖H0‖/‖V‖
    rng = np.random.default_rng(key)
    e0 = np.sort(rng.uniform(0.0, 3.0, n))
    a = rng.normal(size=(n, n))
    v = (a + a.T) / 2
    m = Model(np.diag(e0), v)
    lam = sign * 10.0**log_scale * np.max(np.abs(e0)) / np.max(np.abs(np.linalg.eigvalsh(v)))
    want = np.linalg.eigvalsh(np.diag(e0) + lam * v)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        got = track(m, list(range(n)), [lam]).energies[:, 0]
    scale = np.max(np.abs(e0)) + abs(lam) * np.max(np.abs(np.linalg.eigvalsh(v)))
    assert_allclose(got, want, atol=1e-11 * scale)


# ----------------------------------------------------------------------------- summaries and options
def test_sector_records_repr_and_model_summary():
    m = spin_chain(n_spins=4)
    s = m.sectors[0]
    assert isinstance(s, Sector) and s.index == 0 and s.size == 8 and s.quantum_numbers == (1.0,)
    with pytest.raises(AttributeError):
        s.index = 3
    d = json.loads(json.dumps(s.to_dict()))
    assert d["name"] == "parity +1" and d["levels"] == list(s.levels)
    assert "2 sectors (parity +1: 8, parity -1: 8)" in repr(m)
    summary = json.loads(json.dumps(m.to_dict()))
    assert summary["sectors"] == {"count": 2, "listed": 2, "names": ["parity +1", "parity -1"], "sizes": [8, 8]}
    assert summary["conserved"] == ["parity"]
    assert "<table>" in m._repr_html_()


def test_coupling_scale_and_unit_are_stored_and_checked():
    m = Model(np.diag([0.0, 1.0]), [[0, 0.1], [0.1, 0]], coupling_scale=66.0, coupling_unit="MHz")
    assert (m.coupling_scale, m.coupling_unit) == (66.0, "MHz")
    assert m.to_dict()["coupling_scale"] == 66.0
    with pytest.raises(ValueError, match="coupling_unit='MHz' needs coupling_scale"):
        Model(np.diag([0.0, 1.0]), np.eye(2), coupling_unit="MHz")
    with pytest.raises(ValueError, match="coupling_scale must be a nonzero"):
        Model(np.diag([0.0, 1.0]), np.eye(2), coupling_scale=0.0)
    with pytest.raises(TypeError, match="coupling_scale must be a real number"):
        Model(np.diag([0.0, 1.0]), np.eye(2), coupling_scale="66 MHz")
    with pytest.raises(TypeError, match="coupling_unit must be a non-empty string"):
        Model(np.diag([0.0, 1.0]), np.eye(2), coupling_scale=1.0, coupling_unit=3)


def test_product_labels_are_made_on_demand():
    m = spin_chain(n_spins=10, h_z=0.1 + 0.01 * np.arange(10))  # no parity: product labels
    assert m.level_index((0,) * 10) == 0
    assert m.label(0) == "|" + ",".join("0" * 10) + "⟩"
    with pytest.raises(ValueError, match="unknown level"):
        m.level_index((0, 2) + (0,) * 8)
    sparse_chain = sp.issparse(m.v)
    assert sparse_chain and len(m.labels) == 1024
