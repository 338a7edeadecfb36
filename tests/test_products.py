"""product_model: labelled models from subsystem Hamiltonians, checked against direct np.kron constructions."""

import numpy as np
import pytest
import qutip as qt
import scipy.sparse as sp
from numpy.testing import assert_allclose

from ptcheck.errors import AmbiguousLevelError
from ptcheck.models import jaynes_cummings
from ptcheck.products import product_model

from conftest import random_hermitian


def lowering(n):
    return np.diag(np.sqrt(np.arange(1.0, n)), 1)


def random_part(rng, d, spacing=1.0):
    """A non-diagonal Hermitian part with a well separated spectrum (eigenvalues spacing·(0..d-1) + noise)."""
    q, _ = np.linalg.qr(rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d)))
    e = spacing * np.arange(d) + 0.1 * rng.random(d)
    return (q * e) @ q.conj().T, np.sort(e)


# --------------------------------------------------------------------------- against np.kron
def test_levels_and_labels_match_direct_kron(rng):
    # common practice, no source: H = h1⊗1 + 1⊗h2 + λ Σ c A⊗B built directly with np.kron
    h1, e1 = random_part(rng, 3, spacing=1.0)
    h2, e2 = random_part(rng, 4, spacing=0.37)
    a1, b1 = random_hermitian(rng, 3), random_hermitian(rng, 4)
    a2 = rng.normal(size=(3, 3))  # non-Hermitian factors, made Hermitian by the conjugate term
    b2 = rng.normal(size=(4, 4))
    c = 0.3 + 0.2j
    m = product_model([h1, h2], [(0.2, [a1, b1]), (c, [a2, b2]), (np.conj(c), [a2.conj().T, b2.conj().T])])
    assert m.dims == (3, 4) and m.n == 12
    h0_direct = np.kron(h1, np.eye(4)) + np.kron(np.eye(3), h2)
    v_direct = 0.2 * np.kron(a1, b1) + c * np.kron(a2, b2) + np.conj(c) * np.kron(a2.conj().T, b2.conj().T)
    # unperturbed levels: all sums e1[j1] + e2[j2], sorted
    assert_allclose(m.e0, np.sort(np.add.outer(e1, e2).ravel()), atol=1e-12)
    # the label (j1, j2) names the level with energy e1[j1] + e2[j2] (subsystem eigen-ranks)
    for i in range(m.n):
        j1, j2 = m.labels[i]
        assert_allclose(m.e0[i], e1[j1] + e2[j2], atol=1e-12)
        assert m.label(i) == f"|{j1},{j2}⟩"
    # |V| between labelled levels = |⟨u1_j1 u2_j2| V |u1_k1 u2_k2⟩| (phases of eigenvectors are conventions)
    _, u1 = np.linalg.eigh(h1)
    _, u2 = np.linalg.eigh(h2)
    u = np.kron(u1, u2)
    v_eig = u.conj().T @ v_direct @ u
    for i in range(m.n):
        for k in range(m.n):
            (j1, j2), (k1, k2) = m.labels[i], m.labels[k]
            assert_allclose(abs(m.v[i, k]), abs(v_eig[j1 * 4 + j2, k1 * 4 + k2]), atol=1e-12)
    # the whole spectrum at finite coupling is basis independent
    for lam in (0.3, -1.1):
        assert_allclose(np.linalg.eigvalsh(m.hamiltonian(lam)), np.linalg.eigvalsh(h0_direct + lam * v_direct), atol=1e-10)


def test_diagonal_parts_keep_their_basis_and_match_the_jaynes_cummings_builder():
    # diagonal parts keep their basis order, so the labels are the user's quantum numbers;
    # JC: H0 = ω_q|1⟩⟨1| + ω_r a†a, V = g(σ+ a + σ− a†) (Jaynes & Cummings, Proc. IEEE 51, 89 (1963))
    wq, wr, g, nph = 5.0, 6.0, 0.1, 5
    a = lowering(nph)
    sigma_plus = np.array([[0.0, 0.0], [1.0, 0.0]])
    m = product_model([np.diag([0.0, wq]), wr * a.T @ a], [(g, [sigma_plus, a]), (g, [sigma_plus.T, a.T])], name="JC")
    ref = jaynes_cummings(omega_q=wq, omega_r=wr, g=g, n_photons=nph)
    assert m.labels == ref.labels and m.dims == ref.dims and m.name == "JC"
    assert_allclose(m.e0, ref.e0, atol=0)
    assert_allclose(np.asarray(m.v), np.asarray(ref.v), atol=1e-15)


def test_part_given_in_a_permuted_basis_is_relabelled_by_eigen_rank():
    # a diagonal part with descending entries: label 0 = its lowest eigenvalue
    m = product_model([np.diag([3.0, 1.0, 2.0]), np.diag([0.0, 10.0])], [(0.1, [np.ones((3, 3)), None])])
    assert m.label(0) == "|0,0⟩" and m.e0[m.level_index((2, 0))] == 3.0 and m.e0[m.level_index((0, 1))] == 11.0


def test_mapping_ops_and_full_operator_terms_give_the_same_v(rng):
    h1, h2 = np.diag([0.0, 1.0]), np.diag([0.0, 0.7, 1.5])
    x = np.array([[0.0, 1.0], [1.0, 0.0]])
    n3 = np.diag([0.0, 1.0, 2.0])
    m1 = product_model([h1, h2], [(0.3, [x, n3])])
    m2 = product_model([h1, h2], [(0.3, {0: x, 1: n3})])
    m3 = product_model([h1, h2], [0.3 * np.kron(x, n3)])
    m4 = product_model([h1, h2], [sp.csr_matrix(0.3 * np.kron(x, n3))])
    for other in (m2, m3, m4):
        assert_allclose(np.asarray(other.v), np.asarray(m1.v), atol=1e-15)
        assert other.labels == m1.labels
    # a term acting on one subsystem only
    m5 = product_model([h1, h2], [(0.5, [x, None])])
    assert_allclose(np.linalg.eigvalsh(m5.hamiltonian(1.0)), np.linalg.eigvalsh(np.kron(h1 + 0.5 * x, np.eye(3)) + np.kron(np.eye(2), h2)), atol=1e-12)


def test_qutip_input_gives_the_same_model():
    # qutip Qobj parts (including qutip's diagonal storage) and operators
    wq, wr, g, nph = 5.0, 6.3, 0.1, 4
    npa = lowering(nph)
    sm = np.array([[0.0, 1.0], [0.0, 0.0]])  # |0⟩⟨1|
    m_np = product_model([np.diag([0.0, wq]), wr * npa.T @ npa], [(g, [sm.T, npa]), (g, [sm, npa.T])])
    m_qt = product_model(
        [wq * qt.num(2), wr * qt.num(nph)],
        [(g, [qt.Qobj(sm.T), qt.destroy(nph)]), (g, [qt.Qobj(sm), qt.create(nph)])],
    )
    assert m_qt.labels == m_np.labels
    assert_allclose(m_qt.e0, m_np.e0, atol=1e-14)
    assert_allclose(np.asarray(m_qt.v), np.asarray(m_np.v), atol=1e-14)
    # a full Qobj coupling with tensor dims
    full = g * (qt.tensor(qt.Qobj(sm.T), qt.destroy(nph)) + qt.tensor(qt.Qobj(sm), qt.create(nph)))
    m_full = product_model([wq * qt.num(2), wr * qt.num(nph)], [full])
    assert_allclose(np.asarray(m_full.v), np.asarray(m_np.v), atol=1e-14)


def test_sparse_output():
    a = lowering(30)
    hr = 6.0 * a.T @ a
    x = np.array([[0.0, 1.0], [1.0, 0.0]])
    big = product_model([np.diag([0.0, 5.0]), hr, np.diag([0.0, 4.2, 8.1, 12.3, 16.1, 19.9, 23.5, 27.0, 30.4, 33.6])],
                        [(0.05, [x, a + a.T, None])])
    assert big.n == 600 and big.is_sparse and sp.issparse(big.v)
    small_sparse = product_model([np.diag([0.0, 5.0]), hr[:4, :4]], [(0.05, [x, (a + a.T)[:4, :4]])], sparse=True)
    small_dense = product_model([np.diag([0.0, 5.0]), hr[:4, :4]], [(0.05, [x, (a + a.T)[:4, :4]])], sparse=False)
    assert small_sparse.is_sparse and not small_dense.is_sparse
    assert_allclose(small_sparse.v.toarray(), small_dense.v, atol=0)


def test_degenerate_product_level_mixed_by_v_is_ambiguous():
    # two resonant qubits with exchange: |1,0⟩ and |0,1⟩ are degenerate and V mixes them
    sp_ = np.array([[0.0, 0.0], [1.0, 0.0]])
    m = product_model([np.diag([0.0, 5.0]), np.diag([0.0, 5.0])], [(0.1, [sp_, sp_.T]), (0.1, [sp_.T, sp_])])
    with pytest.raises(AmbiguousLevelError, match=r"\(1, 0\)"):
        m.level_index((1, 0))
    assert m.level_index((1, 1)) == 3  # unaffected levels keep their labels


# --------------------------------------------------------------------------- bad input
def test_bad_inputs_raise_clear_errors():
    x = np.array([[0.0, 1.0], [1.0, 0.0]])
    h = [np.diag([0.0, 1.0]), np.diag([0.0, 2.0, 3.0])]
    with pytest.raises(ValueError, match=r"operator for subsystem 1 has shape \(2, 2\).*dimension 3"):
        product_model(h, [(0.1, [x, x])])
    with pytest.raises(ValueError, match="ops has 1 entries but there are 2 subsystems"):
        product_model(h, [(0.1, [x])])
    with pytest.raises(ValueError, match=r"parts\[1\] is not Hermitian"):
        product_model([np.diag([0.0, 1.0]), np.array([[0.0, 1.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 2.0]])])
    with pytest.raises(ValueError, match=r"parts\[0\] must be square; got shape \(2, 3\)"):
        product_model([np.zeros((2, 3))])
    with pytest.raises(ValueError, match="do not add up to a Hermitian V"):
        product_model(h, [(0.1, [np.array([[0.0, 1.0], [0.0, 0.0]]), None])])
    with pytest.raises(ValueError, match=r"full operator of shape \(4, 4\).*N = 6"):
        product_model(h, [np.eye(4)])
    with pytest.raises(ValueError, match="Qobj with dims"):
        product_model(h, [qt.Qobj(np.eye(6), dims=[[3, 2], [3, 2]])])
    with pytest.raises(TypeError, match="sequence of subsystem Hamiltonians"):
        product_model(np.eye(2))
    with pytest.raises(ValueError, match="parts is empty"):
        product_model([])
    with pytest.raises(TypeError, match=r"couplings\[0\] must be \(coeff, ops\)"):
        product_model(h, [("g", [x, None])])
    with pytest.raises(TypeError, match="wrap it in a list"):
        product_model(h, np.eye(6))
    with pytest.raises(ValueError, match="subsystem indices must be ints in 0..1"):
        product_model(h, [(0.1, {2: x})])
    with pytest.raises(ValueError, match="coefficient must be finite"):
        product_model(h, [(np.inf, [x, None])])
    with pytest.raises(ValueError, match=r"parts\[0\] has a non-finite entry"):
        product_model([np.diag([0.0, np.nan])])
