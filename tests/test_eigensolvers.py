"""Eigensolver backends: every request path against LAPACK's dense eigh (the referee).

Reference throughout: ``scipy.linalg.eigvalsh`` / ``eigh`` of the dense matrix
(LAPACK; common practice, no source).  Residuals ``‖Hx − θx‖`` are checked
against the tolerance each path promises.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp
from numpy.testing import assert_allclose

from ptcheck import Model
from ptcheck._eigensolvers import BACKEND_CLASSES, SMALL_DENSE, davidson_lowest, make_backend

RTOL = 1e-9


def sparse_random_model(n: int, *, complex_: bool, key: int, density: float = 0.03) -> Model:
    """Invented random model: H0 diagonal with a spread spectrum, V sparse Hermitian."""
    rng = np.random.default_rng(key)
    e0 = np.sort(rng.uniform(0.0, 10.0, n))
    a = sp.random(n, n, density=density, random_state=key, data_rvs=rng.standard_normal)
    if complex_:
        a = a + 1j * sp.random(n, n, density=density, random_state=key + 1, data_rvs=rng.standard_normal)
    return Model(sp.diags(e0).tocsr(), ((a + a.getH()) * 0.5).tocsr(), name="random sparse (invented)")


def dense_reference(model: Model, coupling: float) -> tuple[np.ndarray, np.ndarray]:
    h = model.hamiltonian(coupling)
    return sla.eigh(h.toarray() if sp.issparse(h) else h)


def check_pairs(model: Model, coupling: float, w: np.ndarray, x: np.ndarray, ref: np.ndarray, tol: float) -> None:
    """Energies equal the reference; every column is a normalised eigenvector to ``tol`` (residual)."""
    assert_allclose(w, ref, atol=tol, rtol=0)
    h = model.hamiltonian(coupling)
    res = np.linalg.norm(h @ x - x * w, axis=0)
    assert np.all(res <= tol), res
    assert_allclose(np.linalg.norm(x, axis=0), 1.0, atol=1e-10)


@pytest.fixture(scope="module", params=[False, True], ids=["real", "complex"])
def model(request):
    # N > SMALL_DENSE, so the sparse backend runs its iterative paths
    return sparse_random_model(SMALL_DENSE + 64, complex_=request.param, key=7)


# ----------------------------------------------------------------------------- every backend, every request
@pytest.mark.parametrize("name", sorted(BACKEND_CLASSES))
@pytest.mark.parametrize("coupling", [0.3, 1.5])
def test_lowest_window_nearest_probe_equal_dense_eigh(model, name, coupling):
    backend = make_backend(name, model, rtol=RTOL, rng=np.random.default_rng(1))
    w_ref, x_ref = dense_reference(model, coupling)
    scale = float(np.max(np.abs(model.e0))) + coupling * model.norm_v
    tol = 1e-6 * scale  # energies: far inside; vectors: residual bound of the iterative paths

    w, x = backend.lowest(coupling, 5)
    check_pairs(model, coupling, w, x, w_ref[:5], tol)

    # warm start from a nearby coupling (the sweep path of the sparse backend)
    _, x_near = backend.lowest(coupling * 0.98, 5)
    w, x = backend.lowest(coupling, 5, x_near, coupling * 0.98)
    check_pairs(model, coupling, w, x, w_ref[:5], tol)

    if backend.supports_rank_window:
        w, x = backend.window(coupling, 3, 7)
        check_pairs(model, coupling, w, x, w_ref[3:7], tol)

    sigma = 0.5 * (w_ref[40] + w_ref[41])
    w, x = backend.nearest(coupling, sigma, 4)
    near = np.sort(w_ref[np.argsort(np.abs(w_ref - sigma))[:4]])
    check_pairs(model, coupling, w, x, near, tol)

    # the probe path: started from the unperturbed states only
    start = np.zeros((model.n, 3), dtype=model.dtype)
    start[[0, 1, 2], [0, 1, 2]] = 1.0
    got = backend.probe(coupling, 3, start, tight=[2])
    assert got is not None
    w, x = got
    assert_allclose(w, w_ref[:3], atol=tol, rtol=0)
    res = np.linalg.norm(model.hamiltonian(coupling) @ x[:, 2] - w[2] * x[:, 2])
    assert res <= RTOL * scale * (1 + 1e-9)


def test_probe_basis_of_perturbative_corrections(model):
    # The span of the RS corrections |ψ^(k)⟩ holds the perturbative state of every order: a
    # probe seeded with it converges to the exact ground state (referee: dense eigh).
    backend = make_backend("sparse", model, rtol=RTOL, rng=np.random.default_rng(2))
    s = model.series(0, 8)
    basis = backend.probe_basis(np.asarray(s.state_coefficients).T)
    for coupling in (0.05, 0.4, 1.2):
        w_ref, x_ref = dense_reference(model, coupling)
        w, x = backend.probe(coupling, 1, np.zeros((model.n, 0)), tight=[0], basis=basis)
        scale = float(np.max(np.abs(model.e0))) + coupling * model.norm_v
        assert_allclose(w[0], w_ref[0], atol=1e-9 * scale, rtol=0)
        # angle to the exact vector <= residual / gap (Davis–Kahan sin θ theorem, from memory)
        bound = (RTOL * scale / (w_ref[1] - w_ref[0])) ** 2
        assert 1 - abs(np.vdot(x_ref[:, 0], x[:, 0])) ** 2 <= 1.01 * bound + 1e-14


def test_probe_and_sweep_paths_agree(model):
    # The Krylov probe (far from any solved coupling) and the warm-started sweep path
    # (Chebyshev filter along small steps) return the same levels.
    sweep = make_backend("sparse", model, rtol=RTOL, rng=np.random.default_rng(3))
    probe = make_backend("sparse", model, rtol=RTOL, rng=np.random.default_rng(4))
    lams = np.linspace(0.0, 1.2, 25)
    x = None
    prev = None
    for lam in lams[1:]:
        w_s, x = sweep.lowest(lam, 4, x, prev)
        prev = lam
    start = np.zeros((model.n, 4), dtype=model.dtype)
    start[np.arange(4), np.arange(4)] = 1.0
    w_p, x_p = probe.probe(lams[-1], 4, start, tight=[0, 1, 2, 3])
    scale = float(np.max(np.abs(model.e0))) + lams[-1] * model.norm_v
    assert_allclose(w_p, w_s, atol=1e-8 * scale, rtol=0)
    overlaps = np.abs(np.sum(x_p.conj() * x, axis=0)) ** 2
    assert np.all(overlaps > 1 - 1e-8)


# ----------------------------------------------------------------------------- Davidson directly
def test_davidson_column_tolerances():
    # Tight columns meet their residual tolerance; loose ones only theirs, and their energies are
    # still within the residual of an eigenvalue (Weyl / Bauer–Fike for Hermitian matrices:
    # |θ - λ_j| <= ‖r‖, from memory).
    m = sparse_random_model(300, complex_=False, key=11)
    lam = 0.8
    h = m.hamiltonian(lam)
    w_ref = sla.eigvalsh(h.toarray())
    tols = np.array([1e-3, 1e-3, 1e-10])
    start = np.eye(m.n, 3)
    w, x = davidson_lowest(h, m.e0 + lam * m.v_diagonal(), 3, start, tols=tols, rng=None)
    res = np.linalg.norm(h @ x - x * w, axis=0)
    assert np.all(res <= tols)
    assert np.all(np.abs(w - w_ref[:3]) <= res + 1e-12)
    assert abs(w[2] - w_ref[2]) <= 1e-10


def test_davidson_reports_failure_instead_of_a_wrong_number():
    m = sparse_random_model(300, complex_=True, key=12)
    h = m.hamiltonian(2.0)
    out = davidson_lowest(h, m.e0 + 2.0 * m.v_diagonal(), 4, np.eye(m.n, 4, dtype=complex), tols=np.full(4, 1e-12),
                          rng=None, max_matvecs=6)
    assert out is None


def test_svqb_orthonormal_to_rounding_also_for_an_ill_conditioned_block():
    # Columns that are nearly dependent (condition number ~1e4, like a block after a strong filter; one
    # SVQB pass would leave ~1e-16 x 1e8 of non-orthogonality): the result must be orthonormal to
    # ~1e-12 and span the same space (common practice, no source: Gram matrix against the identity;
    # projector onto the span against the QR referee).
    from ptcheck._eigensolvers import svqb

    rng = np.random.default_rng(3)
    base = rng.standard_normal((500, 6))
    x = base @ np.diag([1.0, 1.0, 1.0, 1e-2, 1e-3, 1e-4]) @ rng.standard_normal((6, 6))
    q = svqb(x)
    assert q.shape == (500, 6)
    assert_allclose(q.T @ q, np.eye(6), atol=1e-12)
    ref, _ = np.linalg.qr(x)
    assert_allclose(q @ q.T, ref @ ref.T, atol=1e-8)


def test_chebyshev_filter_equals_the_polynomial_of_the_dense_matrix():
    # T_d((H - c)/e) x by the three-term recurrence T_{j+1} = 2 A T_j - T_{j-1} on the dense matrix
    # (Zhou, Saad, Tiago, Chelikowsky, J. Comput. Phys. 219, 172 (2006), eq. for the Chebyshev filter).
    from ptcheck._eigensolvers import _Operator, _Pattern

    m = sparse_random_model(150, complex_=False, key=11)
    coupling = 0.3
    op = _Operator(np.asarray(m.e0, dtype=float), _Pattern(m.v, m.n), coupling)
    h = m.hamiltonian(coupling).toarray()
    w = np.linalg.eigvalsh(h)
    cut, upper = w[20], w[-1] + 1e-6
    a = (h - 0.5 * (upper + cut) * np.eye(m.n)) / (0.5 * (upper - cut))
    x = np.random.default_rng(5).standard_normal((m.n, 4))
    for degree in (1, 2, 3, 9):
        prev, cur = x, a @ x
        for _ in range(2, degree + 1):
            prev, cur = cur, 2 * a @ cur - prev
        got = op.filter(x, degree, float(w[0]), cut, upper)
        assert_allclose(got, cur, rtol=0, atol=1e-12 * np.max(np.abs(cur)))
