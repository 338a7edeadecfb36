"""Model: validation at the edge, work basis, degeneracies, labels."""

import numpy as np
import pytest
import scipy.sparse as sp

import ptcheck
from ptcheck import Model
from ptcheck.errors import AmbiguousLevelError, BasisTooLargeError


def test_sorted_work_basis_and_transform_roundtrip(rng):
    h0 = np.diag([3.0, 1.0, 2.0])
    v = rng.normal(size=(3, 3))
    v = v + v.T
    m = Model(h0, v, labels=["c", "a", "b"])
    np.testing.assert_array_equal(m.e0, [1.0, 2.0, 3.0])
    assert [m.level_index(k) for k in "abc"] == [0, 1, 2]
    # spectrum of H(λ) is basis independent
    np.testing.assert_allclose(np.linalg.eigvalsh(m.hamiltonian(0.3)), np.linalg.eigvalsh(h0 + 0.3 * v), atol=1e-12)
    # work-basis unit vector of level 0 is user basis state 1 ("a")
    np.testing.assert_allclose(np.abs(m.to_user_basis(np.eye(3)[0])), [0, 1, 0])


def test_nondiagonal_h0_is_diagonalised(rng):
    a = rng.normal(size=(5, 5))
    h0 = a + a.T
    v = np.diag(np.arange(5.0))
    m = Model(h0, v)
    np.testing.assert_allclose(m.e0, np.linalg.eigvalsh(h0), atol=1e-12)
    np.testing.assert_allclose(np.linalg.eigvalsh(m.hamiltonian(0.7)), np.linalg.eigvalsh(h0 + 0.7 * v), atol=1e-11)
    # states map back: H0 (user) U e_n = E_n U e_n
    u = m.to_user_basis(np.eye(5))
    np.testing.assert_allclose(h0 @ u.T, u.T * m.e0, atol=1e-10)


def test_sparse_and_qobj_inputs_stay_sparse():
    qutip = pytest.importorskip("qutip")
    h0 = qutip.tensor(qutip.sigmaz(), qutip.qeye(4)) + qutip.tensor(qutip.qeye(2), qutip.num(4)) * 0.37
    v = qutip.tensor(qutip.sigmax(), qutip.destroy(4) + qutip.create(4))
    m = Model(h0, v)
    assert m.dims == (2, 4)
    assert sp.issparse(m.v)
    np.testing.assert_allclose(np.linalg.eigvalsh(m.hamiltonian(0.2).toarray()), (h0 + 0.2 * v).eigenenergies(), atol=1e-12)
    # product labels name the unperturbed product states
    assert m.level_index((1, 0)) == int(np.argmin(np.abs(m.e0 - (-1.0))))


def test_degenerate_groups_rotated_to_good_states():
    # H0 = diag(0, 0, 1); V mixes the degenerate pair: good states (|0> ± |1>)/√2 with shifts ±v
    v = np.array([[0, 0.3, 0.1], [0.3, 0, 0.2], [0.1, 0.2, 0]])
    m = Model(np.diag([0.0, 0.0, 1.0]), v, labels=["a", "b", "c"])
    assert m.degenerate_groups == ((0, 1),)
    assert m.ambiguous_levels == {0, 1}
    np.testing.assert_allclose(m.v_diagonal()[:2], [-0.3, 0.3], atol=1e-12)
    with pytest.raises(AmbiguousLevelError, match="ambiguous"):
        m.level_index("a")
    assert m.level_index("c") == 2


def test_degenerate_group_not_mixed_keeps_labels():
    v = np.array([[0.5, 0, 0.1], [0, -0.2, 0.2], [0.1, 0.2, 0]])
    m = Model(np.diag([0.0, 0.0, 1.0]), v, labels=["a", "b", "c"])
    assert m.ambiguous_levels == frozenset()
    # sorted by first-order shift inside the group: b (-0.2) first
    assert m.level_index("b") == 0 and m.level_index("a") == 1


@pytest.mark.parametrize(
    "h0, v, exc, match",
    [
        (np.eye(3)[:, :2], np.eye(3), ValueError, r"h0 must be square; got shape \(3, 2\)"),
        (np.eye(3), np.eye(2), ValueError, r"same shape"),
        (np.diag([0, 1.0]), [[0, np.nan], [np.nan, 0]], ValueError, r"non-finite entry: v\[0,1\] = nan"),
        (np.diag([0, 1.0]), [[0, 0.31], [0.0, 0]], ValueError, r"v is not Hermitian: \|v\[0,1\] - conj\(v\[1,0\]\)\| = 0.31"),
        (np.diag([0, 1.0]), [[0, 1j], [1j, 0]], ValueError, r"v is not Hermitian"),
        (np.zeros((0, 0)), np.zeros((0, 0)), ValueError, "empty"),
        (np.array([["a", "b"], ["c", "d"]]), np.eye(2), TypeError, "must hold numbers"),
        (np.ones(3), np.ones(3), ValueError, "2-D"),
    ],
)
def test_bad_inputs_are_named(h0, v, exc, match):
    with pytest.raises(exc, match=match):
        Model(h0, v)


def test_bad_labels_and_dims():
    with pytest.raises(ValueError, match="one entry per basis state"):
        Model(np.eye(2), np.eye(2), labels=["a"])
    with pytest.raises(ValueError, match="distinct"):
        Model(np.diag([0, 1.0]), np.eye(2), labels=["a", "a"])
    with pytest.raises(ValueError, match="multiply to 6"):
        Model(np.eye(4), np.eye(4), dims=(2, 3))
    m = Model(np.diag([0, 1.0]), np.eye(2))
    with pytest.raises(ValueError, match="unknown level 'x'"):
        m.level_index("x")
    with pytest.raises(ValueError, match=r"level must be in 0..1; got 5"):
        m.level_index(5)


def test_basis_too_large_for_dense():
    n = ptcheck.model.DENSE_LIMIT + 1
    h0 = sp.diags(np.arange(n, dtype=float)) + sp.diags(np.ones(n - 1), 1) + sp.diags(np.ones(n - 1), -1)
    with pytest.raises(BasisTooLargeError, match="not diagonal"):
        Model(h0, sp.eye(n))
    # the same size with a diagonal H0 is fine and stays sparse
    m = Model(sp.diags(np.arange(n, dtype=float)), sp.diags(np.ones(n - 1), 1) + sp.diags(np.ones(n - 1), -1))
    assert sp.issparse(m.v) and m.n == n


def test_norm_v_matches_dense(rng):
    a = rng.normal(size=(30, 30))
    v = a + a.T
    m = Model(np.diag(np.arange(30.0)), v)
    assert m.norm_v == pytest.approx(np.max(np.abs(np.linalg.eigvalsh(v))), rel=1e-10)


# ----------------------------------------------------------------------------- sectors and tolerances
def test_graph_components_are_sectors_and_v_is_exactly_zero_between_them():
    # two blocks coupled by nothing: components of the graph of H0 and V (common practice, no source)
    h0 = np.diag([0.0, 1.0, 2.0, 3.0])
    v = np.array([[0.0, 0.1, 0.0, 0.0], [0.1, 0.0, 0.0, 0.0], [0.0, 0.0, 0.0, 0.2], [0.0, 0.0, 0.2, 0.0]])
    m = Model(h0, v)
    assert [s.levels for s in m.sectors] == [(0, 1), (2, 3)]
    assert [s.name for s in m.sectors] == ["component 0", "component 1"]
    assert m.sector_of(3) == 1 and list(m.level_sectors) == [0, 0, 1, 1]
    # a declared operator whose commutator with a rotated V is only round-off: V's cross elements are set to 0
    rng = np.random.default_rng(4)
    q, _ = np.linalg.qr(rng.normal(size=(2, 2)))
    rot = np.kron(np.eye(2), q)
    p = rot @ np.kron(np.eye(2), np.diag([1.0, -1.0])) @ rot.T
    a = rng.normal(size=(2, 2))
    vv = rot @ (np.kron(a + a.T, np.eye(2)) + np.kron(np.eye(2), np.diag([0.3, -0.1]))) @ rot.T
    h = rot @ np.kron(np.diag([0.0, 1.0]), np.eye(2)) @ rot.T
    m = Model(h, vv, conserved={"P": p})
    cross = m.level_sectors[:, None] != m.level_sectors[None, :]
    assert np.all(np.asarray(m.v)[cross] == 0.0)
    assert_eigs = np.linalg.eigvalsh(m.hamiltonian(0.6))
    np.testing.assert_allclose(assert_eigs, np.linalg.eigvalsh(h + 0.6 * vv), atol=1e-12)


def test_default_degeneracy_tolerance_follows_the_spacing_not_the_offset():
    v = 0.01 * np.ones((3, 3))
    for c in (0.0, 1e6, -1e8):  # 1e-6 is still > 16 ulps of 1e8 (the round-off floor)
        m = Model(np.diag([0.0, 1e-6, 1.0]) + c * np.eye(3), v)
        assert m.degenerate_groups == ()  # a 1e-6 splitting on a span of 1 is a real splitting
        assert m.degeneracy_tol < 1e-6
        assert m.energy_offset == pytest.approx(c + 1e-6, abs=1e-6 + 1e-15 * abs(c))
    # a span of zero: V sets the scale
    m = Model(np.zeros((2, 2)), [[0.0, 0.5], [0.5, 0.0]])
    assert m.degenerate_groups == ((0, 1),) and 0 < m.degeneracy_tol <= 1e-9
