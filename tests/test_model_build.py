"""Model construction shortcuts give the same answers as the full path.

Referees: numpy's dense ``A − Aᴴ`` for the Hermiticity check of sparse matrices; for the builder's trusted
path (input checks skipped because the builder makes its matrices Hermitian by construction), a Model built
through the public constructor from the same matrices.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st
from numpy.testing import assert_allclose

from ptcheck import Model
from ptcheck._validation import check_hermitian
from ptcheck.models import spin_chain


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 2**31 - 1), st.sampled_from(["hermitian", "one value off", "one entry missing", "complex"]))
def test_sparse_hermiticity_check_agrees_with_dense_numpy(key, kind):
    rng = np.random.default_rng(key)
    n = int(rng.integers(3, 30))
    a = sp.random(n, n, density=0.2, random_state=rng, format="csr")
    if kind == "complex":
        a = a + 1j * sp.random(n, n, density=0.2, random_state=rng, format="csr")
    m = (a + a.conj().T).tocsr()
    m.sum_duplicates()
    m.sort_indices()
    if m.nnz and kind in ("one value off", "one entry missing"):
        d = m.tocoo()
        k = int(np.flatnonzero(d.row != d.col)[0]) if np.any(d.row != d.col) else 0
        data = d.data.copy()
        if kind == "one value off":
            data[k] += 0.5
        else:
            data[k] = 0.0
        m = sp.csr_matrix((data, (d.row, d.col)), shape=m.shape)
        m.eliminate_zeros()
    dense = m.toarray()
    gap = float(np.max(np.abs(dense - dense.conj().T))) if n else 0.0  # numpy referee
    if gap > 1e-12:
        with pytest.raises(ValueError, match="m is not Hermitian"):
            check_hermitian(m, "m", 1e-10)
    else:
        check_hermitian(m, "m", 1e-10)


def test_trusted_builder_path_equals_the_checked_constructor():
    chain = spin_chain(n_spins=6)
    # the same matrices through the public constructor (every input check runs)
    n = 6
    dim = 1 << n
    states = np.arange(dim)
    z = np.array([[1.0 - 2.0 * ((s >> (n - 1 - i)) & 1) for i in range(n)] for s in states])
    h0 = sp.diags(-np.sum(z * np.roll(z, -1, axis=1), axis=1), format="csr")  # −Σ σz σz on a ring
    rows = np.repeat(states, n)
    cols = (states[:, None] ^ (1 << np.arange(n))[None, :]).ravel()
    v = sp.csr_matrix((-np.ones(rows.size), (rows, cols)), shape=(dim, dim))  # −Σ σx
    parity = sp.csr_matrix((np.ones(dim), (states, states ^ (dim - 1))), shape=(dim, dim))
    ref = Model(h0, v, dims=(2,) * n, conserved={"parity": parity})
    assert_allclose(chain.e0, ref.e0)
    assert [s.name for s in chain.sectors] == [s.name for s in ref.sectors]
    assert chain.degenerate_groups == ref.degenerate_groups
    assert abs(chain.v - ref.v).max() < 1e-13
    # a non-Hermitian input through the public constructor is still refused
    with pytest.raises(ValueError, match="v is not Hermitian"):
        Model(h0, sp.triu(v, format="csr"))


# ---------------------------------------------------------------------------------------------------
# The sparse work basis against dense numpy: W = Tᴴ V T with T the work states in the user basis
_SX = np.array([[0.0, 1.0], [1.0, 0.0]])
_SY = np.array([[0.0, -1j], [1j, 0.0]])
_SZ = np.diag([1.0, -1.0])


def _site(op: np.ndarray, i: int, n: int) -> np.ndarray:
    """``op`` on site i of n spins, site 0 the most significant Kronecker factor (numpy only)."""
    out = np.ones((1, 1))
    for k in range(n):
        out = np.kron(out, op if k == i else np.eye(2))
    return out


def _pauli_chain(n: int, kind: str, h_z: float, periodic: bool) -> tuple[np.ndarray, np.ndarray]:
    """H0 and V of the chains in ``spin_chain``'s docstring, from Kronecker products of Pauli matrices."""
    bonds = [(i, i + 1) for i in range(n - 1)] + ([(n - 1, 0)] if periodic else [])
    zz = sum(_site(_SZ, i, n) @ _site(_SZ, k, n) for i, k in bonds)
    field = sum(h_z * _site(_SZ, i, n) for i in range(n))
    if kind == "transverse_ising":
        return -zz - field, -sum(_site(_SX, i, n) for i in range(n))
    flip = sum(_site(_SX, i, n) @ _site(_SX, k, n) + _site(_SY, i, n) @ _site(_SY, k, n) for i, k in bonds)
    return zz - field, np.real(flip)


@pytest.mark.parametrize(
    "n, kind, h_z, boundary",
    [
        (8, "transverse_ising", 0.0, "periodic"),  # parity pairs; mixed groups of 28 (rotated) and 70 (not)
        (7, "transverse_ising", 0.0, "open"),
        (6, "transverse_ising", 0.13, "periodic"),  # no parity: plain permutation of the user basis
        (6, "xxz", 0.0, "periodic"),  # magnetisation components; parity only at zero magnetisation
        (5, "xxz", 0.0, "open"),
    ],
)
def test_sparse_work_basis_is_the_dense_change_of_basis_of_the_chain(n, kind, h_z, boundary):
    # Referee: numpy Kronecker products of Pauli matrices for the user-basis H0 and V, and dense products
    # Tᴴ H0 T, Tᴴ V T with T the model's work states in the user basis (common practice, no source).
    m = spin_chain(n_spins=n, kind=kind, h_z=h_z, boundary=boundary)
    h0, v = _pauli_chain(n, kind, h_z, boundary == "periodic")
    t = m.to_user_basis(np.eye(m.n)).T  # column j: work state j in the user basis
    assert_allclose(t.conj().T @ t, np.eye(m.n), atol=1e-12)
    assert_allclose(t.conj().T @ h0 @ t, np.diag(m.e0), atol=1e-11)
    assert sp.issparse(m.v)
    assert_allclose(m.v.toarray(), t.conj().T @ v @ t, atol=1e-11)
    assert m.v.has_canonical_format


def test_sparse_model_rotates_small_groups_and_leaves_large_ones_on_the_user_states():
    # The Ising ring of 8 spins with its parity: per sector, mixed groups of 28 (two domain walls) and 70
    # (four) states.  The same matrices as dense arrays rotate every group (MAX_GROUP_ROTATION = 256); as
    # sparse matrices only the groups of at most MAX_SPARSE_GROUP_ROTATION states.
    # Referee: numpy eigvalsh of V inside each group (the first-order shifts; common practice, no source).
    from ptcheck.model import MAX_SPARSE_GROUP_ROTATION

    sparse = spin_chain(n_spins=8)
    n = 8
    states = np.arange(1 << n)
    parity = sp.csr_matrix((np.ones(1 << n), (states, states ^ ((1 << n) - 1))), shape=(1 << n, 1 << n))
    h0, v = _pauli_chain(n, "transverse_ising", 0.0, True)
    dense = Model(h0, v, dims=(2,) * n, conserved={"parity": parity.toarray()})
    assert not sp.issparse(dense.v)
    assert sparse.degenerate_groups == dense.degenerate_groups
    assert sparse.ambiguous_levels == dense.ambiguous_levels  # every mixed group is ambiguous, rotated or not
    sizes = sorted({len(g) for g in sparse.degenerate_groups})
    assert sizes == [28, 70]
    assert 28 <= MAX_SPARSE_GROUP_ROTATION < 70  # so both kinds occur below
    for g in sparse.degenerate_groups:
        idx = np.asarray(g)
        block = sparse.v[idx][:, idx].toarray()
        off = block - np.diag(np.diag(block))
        if len(g) <= MAX_SPARSE_GROUP_ROTATION:
            assert np.max(np.abs(off)) < 1e-12  # good states: V diagonal in the group
        else:
            assert np.max(np.abs(off)) > 0.5  # the user's states: V mixes them
        # same first-order shifts either way, ascending in the dense (rotated) model
        assert_allclose(np.linalg.eigvalsh(block), dense.v_diagonal()[idx], atol=1e-11)
        assert np.all(np.diff(dense.v_diagonal()[idx]) >= -1e-12)
        assert all(sparse.label(i) == f"n={i}" for i in g)  # mixed: named by rank


def test_unrotated_group_gets_the_exact_branches_in_ascending_order():
    # A level of the unrotated 70-state group of the Ising ring of 8 spins: the degenerate treatment
    # finds the group's good states itself, and level group[i] is the i-th branch in ascending energy.
    # Referee: dense numpy eigvalsh of the group's parity sector at a small coupling (brute force); the
    # 70 exact levels nearest E0 are the group's (the next unperturbed energies are 4 J away).
    from ptcheck.treatment import expansions

    m = spin_chain(n_spins=8)
    group = next(g for g in m.degenerate_groups if len(g) == 70)
    sector = m.restrict(m.sector_of(group[0]))
    lam = 2e-3
    h = np.diag(sector.e0) + lam * sector.v.toarray()
    exact = np.linalg.eigvalsh(h)
    e0 = m.e0[group[0]]
    near = np.sort(exact[np.argsort(np.abs(exact - e0))[:70]])
    pert = np.array([x.energy(lam, 3) for x in expansions(m, list(group), 3)])
    assert all(x.treatment == "degenerate" for x in expansions(m, [group[0]], 3))
    # order 3: error O(λ⁴ ‖V‖⁴ / gap³) ≈ 1e-10 x 4096 / 64 ≈ 1e-8
    assert_allclose(pert, near, atol=1e-7)
    assert np.all(np.diff(pert) >= -1e-9)


def test_round_off_between_sectors_of_a_signed_involution_is_dropped_like_the_dense_path():
    # P swaps states 0 and 1 and fixes 2 (+1) and 3 (-1); V commutes with P except for a round-off entry
    # V[2,3] = 1e-14 between the sectors (accepted by the commutation check).  The sparse fold has no
    # column for state 3 in the +1 half and drops it; the same matrices as dense arrays go through the
    # general path.  Referee: numpy Tᴴ V T with the cross-sector entry set to zero (common practice,
    # no source), and the dense model.
    p = np.array([[0, 1, 0, 0], [1, 0, 0, 0], [0, 0, 1, 0], [0, 0, 0, -1]], dtype=float)
    h0 = np.diag([0.0, 0.0, 1.0, 2.5])
    v = np.array([[0.0, 0.1, 0.3, 0.2], [0.1, 0.0, 0.3, -0.2], [0.3, 0.3, 0.0, 1e-14], [0.2, -0.2, 1e-14, 0.0]])
    assert np.max(np.abs(p @ v - v @ p)) < 1e-13
    sparse = Model(sp.csr_matrix(h0), sp.csr_matrix(v), conserved={"P": sp.csr_matrix(p)})
    dense = Model(h0, v, conserved={"P": p})
    assert [s.name for s in sparse.sectors] == [s.name for s in dense.sectors] == ["P +1", "P -1"]
    assert_allclose(sparse.e0, dense.e0)
    assert_allclose(sparse.v.toarray(), dense.v, atol=1e-15)
    t = sparse.to_user_basis(np.eye(4)).T
    exact = v.copy()
    exact[2, 3] = exact[3, 2] = 0.0
    assert_allclose(sparse.v.toarray(), t.T @ exact @ t, atol=1e-15)
    same = sparse.level_sectors[:, None] == sparse.level_sectors[None, :]
    assert np.all(sparse.v.toarray()[~same] == 0.0)  # exactly zero between sectors
