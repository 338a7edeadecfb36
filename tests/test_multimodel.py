"""Models with several couplings H0 + Σ λ_i V_i: construction, sectors, work basis, rays, clear errors."""

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from ptcheck import Model, MultiCouplingError
from ptcheck.errors import DegenerateLevelError

from conftest import random_hermitian


def _two(rng, n=8, sparse=False):
    h0 = np.diag(np.sort(rng.uniform(0, 5, n)))
    v1 = random_hermitian(rng, n, sparse=sparse)
    v2 = random_hermitian(rng, n, sparse=sparse)
    return (sp.csr_matrix(h0) if sparse else h0), v1, v2


@pytest.mark.parametrize("sparse", [False, True])
def test_along_has_the_spectrum_of_the_ray_hamiltonian(rng, sparse):
    # reference: numpy eigvalsh of H0 + t (d1 V1 + d2 V2) in the user's basis (common practice, no source)
    h0, v1, v2 = _two(rng, sparse=sparse)
    m = Model(h0, [v1, v2], names=("g", "E"))
    dense = [x.toarray() if sp.issparse(x) else x for x in (h0, v1, v2)]
    for d in [(1.0, 0.0), (0.0, 1.0), (0.6, -0.8), (-2.0, 0.5)]:
        ray = m.along(d)
        assert ray.n_couplings == 1 and ray.coupling_names == ("t",)
        np.testing.assert_array_equal(ray.direction, d)
        for t in (0.1, 0.7):
            h = ray.hamiltonian(t)
            got = np.linalg.eigvalsh(h.toarray() if sp.issparse(h) else h)
            ref = np.linalg.eigvalsh(dense[0] + t * (d[0] * dense[1] + d[1] * dense[2]))
            np.testing.assert_allclose(got, ref, atol=1e-11)


def test_work_basis_operators_map_back_to_the_user_matrices(rng):
    # T V_i^work T^H = V_i with T the work basis columns in the user basis (unitary change of basis)
    n = 7
    a = random_hermitian(rng, n)
    h0 = a @ a.T  # not diagonal: the work basis is the eigenbasis of H0
    v1, v2 = random_hermitian(rng, n), random_hermitian(rng, n, complex_=True)
    m = Model(h0, [v1, v2])
    t = m.to_user_basis(np.eye(n)).T  # columns: work states in the user basis
    for vw, vu in zip(m.vs, (v1, v2)):
        np.testing.assert_allclose(t @ vw @ t.conj().T, vu, atol=1e-12)
    np.testing.assert_allclose(t @ np.diag(m.e0) @ t.conj().T, h0, atol=1e-11)
    assert m.coupling_names == ("λ1", "λ2") and m.n_couplings == 2
    assert m.dtype == np.complex128


def test_one_coupling_forms_are_unchanged():
    m = Model(np.diag([0.0, 1.0]), [[0, 0.1], [0.1, 0]])  # a nested list of numbers is one matrix
    assert m.n_couplings == 1 and m.coupling_names == ("λ",)
    np.testing.assert_array_equal(m.v, [[0, 0.1], [0.1, 0]])
    one = Model(np.diag([0.0, 1.0]), [np.array([[0, 0.1], [0.1, 0]])], names=("g",))  # a list of one matrix
    assert one.n_couplings == 1 and one.coupling_names == ("g",)
    np.testing.assert_array_equal(one.v, m.v)
    stack = Model(np.diag([0.0, 1.0]), np.array([[[0, 0.1], [0.1, 0]], [[0.2, 0], [0, -0.2]]]))  # 3-D array
    assert stack.n_couplings == 2


def test_qutip_operators():
    qutip = pytest.importorskip("qutip")
    h0 = qutip.num(4) * 1.0
    x = qutip.destroy(4) + qutip.create(4)
    m = Model(h0, [x, qutip.num(4)], names=("drive", "shift"))
    ref = np.linalg.eigvalsh(h0.full() + 0.2 * x.full() + 0.3 * qutip.num(4).full())
    h = m.along((0.2, 0.3)).hamiltonian(1.0)
    np.testing.assert_allclose(np.linalg.eigvalsh(h.toarray() if sp.issparse(h) else h), ref, atol=1e-12)


def test_sectors_come_from_the_union_of_the_coupling_graphs():
    # referee: scipy connected components of the union pattern |V1| + |V2| (H0 diagonal)
    n = 9
    h0 = np.diag(np.arange(n, dtype=float))
    v1 = np.zeros((n, n))
    v2 = np.zeros((n, n))
    for i, j in [(0, 1), (3, 4), (6, 7)]:
        v1[i, j] = v1[j, i] = 0.3
    for i, j in [(1, 2), (7, 8)]:
        v2[i, j] = v2[j, i] = -0.2
    m = Model(h0, [v1, v2])
    k, lab = connected_components(sp.csr_matrix((np.abs(v1) + np.abs(v2)) > 0), directed=False)
    got = sorted(tuple(sorted(s.levels)) for s in m.sectors)
    ref = sorted(tuple(np.flatnonzero(lab == c)) for c in range(k))
    assert got == ref
    # only V1 would give more sectors; V is exactly zero between sectors for every coupling
    assert len(Model(h0, v1).sectors) > len(m.sectors)
    for vw in m.vs:
        for s in m.sectors:
            out = np.setdiff1d(np.arange(n), s.levels)
            assert not np.any(vw[np.ix_(s.levels, out)])


def test_conserved_operator_must_commute_with_every_coupling():
    # parity of a 4-state ladder: V1 = diag (commutes), V2 couples 0-1 (breaks it)
    h0 = np.diag([0.0, 1.0, 2.0, 3.0])
    parity = np.diag([1.0, -1.0, 1.0, -1.0])
    v1 = np.diag([0.1, 0.2, 0.3, 0.4])
    v2 = np.zeros((4, 4))
    v2[0, 1] = v2[1, 0] = 0.5
    with pytest.raises(ValueError, match="does not commute with v"):
        Model(h0, [v1, v2], conserved={"P": parity})
    v2b = np.zeros((4, 4))
    v2b[0, 2] = v2b[2, 0] = 0.5
    m = Model(h0, [v1, v2b], conserved={"P": parity})
    assert len(m.sectors) >= 2


def test_along_resolves_good_states_of_the_ray_in_degenerate_groups():
    # a doublet of H0 split by V1 = σz and mixed by V2 = σx inside it: the ray's good states are the
    # eigenvectors of d1 σz + d2 σx, first-order shifts ±sqrt(d1² + d2²) (two-level closed form)
    h0 = np.diag([0.0, 1.0, 1.0, 3.0])
    v1 = np.diag([0.0, 0.5, -0.5, 0.0])
    v2 = np.zeros((4, 4))
    v2[1, 2] = v2[2, 1] = 0.5
    v2[0, 3] = v2[3, 0] = 0.2
    m = Model(h0, [v1, v2], names=("a", "b"))
    assert m.degenerate_groups == ((1, 2),)
    for d in [(1.0, 0.0), (0.0, 1.0), (0.6, 0.8), (-0.6, 0.8)]:
        ray = m.along(d)
        block = ray.v[1:3, 1:3]
        assert abs(block[0, 1]) < 1e-14
        r = 0.5 * np.hypot(*d)
        np.testing.assert_allclose(np.diag(block), [-r, r], atol=1e-14)
        # the ray's first-order shifts are what its one-coupling series reports
        assert ray.series(3, 2).energy_coefficients[0] == pytest.approx(3.0)


def test_unmixed_degenerate_group_is_sorted_per_ray_with_its_labels():
    # V1, V2 diagonal in the doublet: no rotation, the labels follow the order of the ray's shifts
    h0 = np.diag([0.0, 1.0, 1.0])
    v1 = np.diag([0.0, 0.3, -0.3])
    v2 = np.diag([0.0, -0.2, 0.1])
    v2[0, 1:] = v2[1:, 0] = 0.05  # one sector: the doublet is a degenerate group
    m = Model(h0, [v1, v2], labels=["g", "a", "b"])
    assert m.degenerate_groups == ((1, 2),) and m.ambiguous_levels == frozenset()
    up = m.along((1.0, 0.0))  # shifts a: +0.3, b: -0.3 -> b first
    assert up.label(1) == "b" and up.label(2) == "a"
    assert up.level_index("a") == 2
    down = m.along((-1.0, 0.0))
    assert down.label(1) == "a" and down.level_index("b") == 2
    assert np.diag(up.v)[1] == pytest.approx(-0.3)


@pytest.mark.parametrize(
    "call",
    [
        lambda m: m.series(0, 2),
        lambda m: __import__("ptcheck").compare(m, 0, [2], couplings=[0.1]),
        lambda m: __import__("ptcheck").validity_boundary(m, 0, 2, rtol=0.01),
        lambda m: __import__("ptcheck").track(m, [0], [0.1]),
        lambda m: __import__("ptcheck").convergence(m, 0, 10),
        lambda m: __import__("ptcheck").block_series(m, [0, 1], 2),
        lambda m: m.hamiltonian(0.1),
        lambda m: m.norm_v,
    ],
)
def test_one_coupling_functions_refuse_a_two_coupling_model_clearly(rng, call):
    h0, v1, v2 = _two(rng, n=5)
    m = Model(h0, [v1, v2], names=("g", "E"))
    with pytest.raises(MultiCouplingError, match=r"model.along\(\(d1, d2\)\).*multi_series, validity_region"):
        call(m)


def test_bad_input_is_named(rng):
    h0, v1, v2 = _two(rng, n=4)
    with pytest.raises(ValueError, match="names must be 2 non-empty strings"):
        Model(h0, [v1, v2], names=("g",))
    with pytest.raises(ValueError, match="names must be distinct"):
        Model(h0, [v1, v2], names=("g", "g"))
    bad = v2.copy()
    bad[0, 1] += 0.5
    with pytest.raises(ValueError, match=r"v\[1\]"):
        Model(h0, [v1, bad])
    with pytest.raises(ValueError, match=r"v\[1\] must have the shape of h0"):
        Model(h0, [v1, np.eye(3)])
    m = Model(h0, [v1, v2])
    with pytest.raises(ValueError, match="direction must not be zero"):
        m.along((0.0, 0.0))
    with pytest.raises(ValueError, match="direction must be 2 numbers"):
        m.along((1.0, 0.0, 0.0))
    with pytest.raises(ValueError, match="direction must be finite"):
        m.along((np.nan, 1.0))
    with pytest.raises(TypeError, match="direction must be 2 real numbers"):
        m.along(("a", 1.0))


def test_restrict_keeps_every_coupling():
    h0 = np.diag([0.0, 1.0, 2.0, 3.0])
    v1 = np.zeros((4, 4))
    v1[0, 1] = v1[1, 0] = 0.1
    v2 = np.zeros((4, 4))
    v2[2, 3] = v2[3, 2] = 0.4
    m = Model(h0, [v1, v2])
    sub = m.restrict(m.sector_of(2))
    assert sub.n_couplings == 2 and sub.n == 2
    np.testing.assert_allclose(sub.vs[1], [[0, 0.4], [0.4, 0]])
    np.testing.assert_allclose(sub.vs[0], 0.0)


def test_degenerate_level_has_no_scalar_multivariate_series_without_a_treatment():
    from ptcheck.multiseries import multi_series

    m = Model(np.diag([0.0, 1.0, 1.0]), [np.diag([0, 0.1, -0.1]), np.ones((3, 3)) * 0.1])
    with pytest.raises(DegenerateLevelError):
        multi_series(m, 1, 2, treatment="nondegenerate")
