"""Eigensolver backends behind :mod:`ptcheck.exact` (private).

Every backend diagonalises ``H(λ) = H0 + λ V`` in the model's work basis and
returns eigenvalues in ascending order with orthonormal eigenvectors as the
columns of an ``(N, k)`` array.  Three kinds of request:

* ``lowest(coupling, k, start)``: the k lowest eigenpairs;
* ``window(coupling, lo, hi, start)``: eigenpairs of energy rank lo..hi-1
  (only when ``supports_rank_window``);
* ``nearest(coupling, sigma, k, start)``: the k eigenpairs closest to ``sigma``;
* ``probe(coupling, k, start, tight=...)``: the k lowest eigenpairs at a coupling
  far from any solved one, started from perturbative states (None if the
  iterative solver does not converge; the caller then takes tracked steps).

``start`` is an optional ``(N, s)`` block of vectors close to the wanted ones
(the previous point of a coupling sweep); backends that cannot use it ignore it.

The ``sparse`` backend's warm-started solver is a Chebyshev-filtered subspace
iteration (Y. Zhou, Y. Saad, M. L. Tiago, J. R. Chelikowsky, "Self-consistent-
field calculations using Chebyshev-filtered subspace iteration", J. Comput.
Phys. 219, 172 (2006), algorithm 4.1 for the scaled three-term filter) with
Rayleigh–Ritz after each filter and SVQB orthonormalisation (A. Stathopoulos,
K. Wu, "A block orthogonalization procedure with constant synchronization
requirements", SIAM J. Sci. Comput. 23, 2165 (2002)).  Along a sweep the start
block is extrapolated from recent solves (least-squares cubic of blocks aligned
along the path); when the step matches the last one, that block is filtered
straight away with a degree planned from the last step's outcome, skipping the
Rayleigh–Ritz on the start.  Its cost is dominated by
sparse block mat-vecs, which is what made it the fastest option measured on
two cores for tracked sweeps (see ``benchmarks/bench_exact.py``); ARPACK
(``scipy.sparse.linalg.eigsh``) is used for cold starts, shift-invert windows
and as the fallback.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from .errors import BasisTooLargeError
from .model import DENSE_LIMIT, Model

__all__ = [
    "make_backend", "BACKEND_CLASSES", "DenseBackend", "SparseBackend", "QutipBackend", "ProbeBasis",
    "davidson_lowest", "davidson_rows", "inner", "combine",
]

#: Below this basis size the sparse backend hands requests to LAPACK (a dense
#: eigendecomposition of a few hundred states costs less than Python overhead).
SMALL_DENSE = 96


def _hamiltonian_dense(model: Model, coupling: float) -> np.ndarray:
    h = model.hamiltonian(coupling)
    return h.toarray() if sp.issparse(h) else h


def _check_dense_size(model: Model, what: str) -> None:
    if model.n > DENSE_LIMIT:
        raise BasisTooLargeError(
            f"{what} needs a dense {model.n} x {model.n} matrix, but the basis has N = {model.n} "
            f"> DENSE_LIMIT = {DENSE_LIMIT} states. Use backend='sparse' (or 'auto'), or reduce the basis."
        )


def _realify_columns(w: np.ndarray, x: np.ndarray, cluster_tol: float) -> np.ndarray:
    """Real eigenvectors of a real symmetric matrix from complex ones.

    Each column is rotated by the phase of its largest entry; inside a cluster
    of (near-)equal eigenvalues the real and imaginary parts are re-orthonormalised
    together, because a complex basis of a degenerate real eigenspace need not be
    made real column by column.
    """
    n, k = x.shape
    out = np.empty((n, k))
    start = 0
    for i in range(1, k + 1):
        if i == k or w[i] - w[i - 1] > cluster_tol:
            block = x[:, start:i]
            if i - start == 1:
                col = block[:, 0]
                j = int(np.argmax(np.abs(col)))
                col = col * (abs(col[j]) / col[j])
                out[:, start] = col.real / np.linalg.norm(col.real)
            else:
                both = np.hstack([block.real, block.imag])
                u, s, _ = np.linalg.svd(both, full_matrices=False)
                out[:, start:i] = u[:, : i - start]
            start = i
    return out


# ---------------------------------------------------------------------------- dense
class DenseBackend:
    """LAPACK ``eigh`` on the dense matrix, with ``subset_by_index`` for windows."""

    name = "dense"
    supports_rank_window = True
    iterative = False

    #: Solves are kept for the last :data:`MEMO_COUPLINGS` couplings. Up to this size a second, different
    #: request at the same coupling (several levels tracked one by one: a quantity's boundary search, a block
    #: treatment) gets the full ``eigh``, which then serves every level there; a first request stays a window.
    FULL_LIMIT = 256
    MEMO_COUPLINGS = 4

    def __init__(self, model: Model, *, rtol: float, rng: np.random.Generator) -> None:
        _check_dense_size(model, "backend 'dense'")
        self.model = model
        self._memo: list[tuple[float, int, int, np.ndarray, np.ndarray]] = []  # (coupling, lo, hi, values, vectors)

    def _kept(self, coupling: float, lo: int, hi: int) -> tuple[int, np.ndarray, np.ndarray] | None:
        """(first index, values, vectors) of a kept solve at ``coupling`` that covers ranks lo..hi−1."""
        for c, a, b, w, x in self._memo:
            if c == coupling and a <= lo and hi <= b:
                return a, w, x
        return None

    def _keep(self, coupling: float, lo: int, w: np.ndarray, x: np.ndarray) -> None:
        self._memo = [(coupling, lo, lo + w.size, w, x)] + self._memo[: self.MEMO_COUPLINGS - 1]

    def _all(self, coupling: float) -> tuple[int, np.ndarray, np.ndarray] | None:
        """The whole spectrum at ``coupling``: kept, or solved now when a window there was solved before
        (small matrices only); None otherwise."""
        n = self.model.n
        got = self._kept(coupling, 0, n)
        if got is None and n <= self.FULL_LIMIT and any(c == coupling for c, *_ in self._memo):
            w, x = sla.eigh(_hamiltonian_dense(self.model, coupling), check_finite=False)
            self._keep(coupling, 0, w, x)
            got = (0, w, x)
        return got

    def window(self, coupling: float, lo: int, hi: int, start: Any = None, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        got = self._kept(coupling, lo, hi) or self._all(coupling)
        if got is None:
            h = _hamiltonian_dense(self.model, coupling)
            w, x = sla.eigh(h, check_finite=False) if (lo, hi) == (0, self.model.n) else sla.eigh(
                h, subset_by_index=[lo, hi - 1], check_finite=False)
            self._keep(coupling, lo, w, x)
            got = (lo, w, x)
        a, w, x = got
        return w[lo - a : hi - a].copy(), x[:, lo - a : hi - a].copy()

    def lowest(self, coupling: float, k: int, start: Any = None, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        return self.window(coupling, 0, k)

    def nearest(self, coupling: float, sigma: float, k: int, start: Any = None, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        got = self._all(coupling)
        w = got[1] if got is not None else sla.eigvalsh(_hamiltonian_dense(self.model, coupling), check_finite=False)
        lo = _nearest_block(w, sigma, k)
        return self.window(coupling, lo, lo + k)

    def probe(self, coupling: float, k: int, start: np.ndarray, *, tight: Any = (), basis: Any = None) -> tuple[np.ndarray, np.ndarray] | None:
        """The k lowest eigenpairs (LAPACK: every column is exact; ``start``, ``tight``, ``basis`` are not needed)."""
        return self.window(coupling, 0, k)


def _nearest_block(w: np.ndarray, sigma: float, k: int) -> int:
    """Start index of the k consecutive sorted eigenvalues closest to sigma."""
    order = np.argsort(np.abs(w - sigma), kind="stable")[:k]
    lo = int(order.min())
    return min(lo, w.size - k)


# ---------------------------------------------------------------------------- sparse
try:  # scipy's CSR kernel that adds A @ X into a given block (what ``A @ X`` calls after allocating)
    from scipy.sparse._sparsetools import csr_matvecs as _csr_matvecs
except ImportError:  # pragma: no cover - depends on the scipy build
    _csr_matvecs = None


class _Pattern:
    """CSR pattern of V plus the diagonal, to build ``α V + diag(d)`` in O(nnz)."""

    def __init__(self, v: Any, n: int) -> None:
        self.dense = not sp.issparse(v)
        if self.dense:
            self.v = v
            return
        coo = sp.coo_matrix(v)
        idx = np.arange(n)
        rows = np.concatenate([coo.row, idx])
        cols = np.concatenate([coo.col, idx])
        data = np.concatenate([coo.data, np.zeros(n, dtype=coo.data.dtype)])
        m = sp.csr_matrix((data, (rows, cols)), shape=(n, n))  # duplicates summed, zeros kept
        m.sort_indices()
        self.indptr, self.indices, self.v_data = m.indptr, m.indices, m.data
        row_of = np.repeat(idx, np.diff(m.indptr))
        self.diag_pos = np.flatnonzero(m.indices == row_of)
        self.shape = (n, n)

    def build(self, alpha: float, diag: np.ndarray) -> Any:
        if self.dense:
            a = alpha * self.v
            a[np.diag_indices_from(a)] += diag
            return a
        data = alpha * self.v_data
        data[self.diag_pos] += diag
        if _csr_matvecs is None:  # pragma: no cover - depends on the scipy build
            return sp.csr_matrix((data, self.indices, self.indptr), shape=self.shape, copy=False)
        return _Csr(self.indptr, self.indices, data, self.shape)


class _Csr:
    """A CSR matrix on trusted arrays, multiplied through scipy's kernel.

    Building a ``scipy.sparse.csr_matrix`` validates its arrays (about as long
    as a product with a 15-column block of a 2^11-state chain); a filter builds
    one per solve, so the sweep uses this thin holder instead.
    """

    __slots__ = ("indptr", "indices", "data", "shape", "dtype")

    def __init__(self, indptr: np.ndarray, indices: np.ndarray, data: np.ndarray, shape: tuple[int, int]) -> None:
        self.indptr, self.indices, self.data, self.shape = indptr, indices, data, shape
        self.dtype = data.dtype

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        if x.ndim != 2 or x.dtype != self.dtype:
            return sp.csr_matrix((self.data, self.indices, self.indptr), shape=self.shape, copy=False) @ x
        out = np.zeros((self.shape[0], x.shape[1]), dtype=x.dtype)
        _accumulate_product(self, np.ascontiguousarray(x), out)
        return out


class _DiagonalPlus:
    """``diag(d) + α V`` as an operator (no new sparse matrix: one product with V per use)."""

    def __init__(self, v: Any, alpha: float, d: np.ndarray) -> None:
        self.v, self.alpha, self.d = v, alpha, d
        self.dtype = np.result_type(v.dtype, d.dtype)

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        y = self.v @ x
        y *= self.alpha
        y += self.d * x if x.ndim == 1 else self.d[:, None] * x
        return y


class _Operator:
    """``H(λ) = diag(e0) + λ V`` applied to blocks, plus the Chebyshev filter."""

    def __init__(self, e0: np.ndarray, pattern: _Pattern, coupling: float) -> None:
        self.e0 = e0
        self.pattern = pattern
        self.coupling = coupling
        self.h = pattern.build(coupling, e0)

    def apply(self, x: np.ndarray) -> np.ndarray:
        return self.h @ x

    def filter(self, x: np.ndarray, degree: int, lower: float, cut: float, upper: float) -> np.ndarray:
        """Chebyshev filter T_degree((H - c)/e) applied to ``x``, damping [cut, upper].

        Components with eigenvalues in ``[cut, upper]`` stay bounded by 1,
        those below ``cut`` grow (Zhou et al. 2006, three-term recurrence
        T_{j+1} = 2 A T_j - T_{j-1}).  The callers cap the degree so that the
        growth stays far below overflow; the next orthonormalisation rescales.
        """
        e = (upper - cut) / 2.0
        c = (upper + cut) / 2.0
        a2 = self.pattern.build(2.0 * self.coupling / e, 2.0 * (self.e0 - c) / e)  # 2 (H - c) / e
        y = a2 @ x
        y *= 0.5
        if degree < 2:
            return y
        # T_{j+1} = A T_j - T_{j-1} written over T_{j-1}'s storage (elementwise in T_{j-1}):
        # two blocks in all, no fresh array per degree
        prev = a2 @ y
        prev -= x
        for _ in range(3, degree + 1):
            np.negative(y, out=y)
            _accumulate_product(a2, prev, y)  # y <- A prev - y
            prev, y = y, prev
        return prev


def _accumulate_product(a: Any, x: np.ndarray, out: np.ndarray) -> None:
    """``out += a @ x`` for a CSR or dense ``a`` and C-contiguous blocks of one dtype."""
    if (
        _csr_matvecs is not None and (isinstance(a, _Csr) or sp.isspmatrix_csr(a)) and x.ndim == 2
        and x.flags.c_contiguous and out.flags.c_contiguous and a.dtype == x.dtype == out.dtype
    ):
        n_row, n_col = a.shape
        _csr_matvecs(n_row, n_col, x.shape[1], a.indptr, a.indices, a.data, x.ravel(), out.ravel())
    else:
        out += a @ x


#: Largest M*N*K of one matrix product below which OpenBLAS stays single-threaded
#: (its GEMM_MULTITHREAD_THRESHOLD x 65536).  Tall-skinny products of a sweep are
#: cut into row chunks under this size: on a busy two-core machine, waking BLAS
#: threads for a (2000 x 15) x (15 x 15) product was measured to cost ~50x the
#: product itself.
_SINGLE_THREAD_MNK = 200_000


def _rows_per_chunk(k: int, m: int) -> int:
    return max(32, _SINGLE_THREAD_MNK // max(1, k * m))


def inner(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``a^H b`` for tall (N, k) and (N, m) blocks, in single-threaded chunks."""
    n, k = a.shape
    m = b.shape[1]
    step = _rows_per_chunk(k, m)
    at = a.T.conj() if np.iscomplexobj(a) else a.T  # conj() of a real array would copy it
    if n <= step:
        return at @ b
    out = at[:, :step] @ b[:step]
    for i in range(step, n, step):
        out += at[:, i : i + step] @ b[i : i + step]
    return out


def combine(a: np.ndarray, c: np.ndarray) -> np.ndarray:
    """``a @ c`` for a tall (N, k) block and a small (k, m) matrix, in single-threaded chunks."""
    n, k = a.shape
    m = c.shape[1]
    step = _rows_per_chunk(k, m)
    if n <= step:
        return a @ c
    out = np.empty((n, m), dtype=np.result_type(a, c))
    for i in range(0, n, step):
        np.matmul(a[i : i + step], c, out=out[i : i + step])
    return out


def _svqb_pass(x: np.ndarray, drop: float) -> tuple[np.ndarray, float]:
    """One SVQB pass: (basis, squared condition number of the column-scaled block among the kept directions)."""
    g = inner(x, x)
    d = np.sqrt(np.abs(np.real(np.diag(g))))
    d[d == 0] = 1.0
    w, u = np.linalg.eigh(g / d[:, None] / d[None, :])
    top = max(float(w[-1]), 1e-300)
    keep = w > drop * top
    spread = top / float(w[keep][0]) if np.any(keep) else 1.0
    return combine(x, u[:, keep] / d[:, None] / np.sqrt(w[keep])), spread


def svqb(x: np.ndarray, drop: float = 1e-10) -> np.ndarray:
    """Orthonormal basis of the columns of ``x`` (dependent directions dropped).

    One pass leaves the columns orthonormal to about machine epsilon x the
    squared condition number of the column-scaled block (Stathopoulos & Wu
    2002); a second pass runs when that exceeds :data:`SVQB_SECOND_PASS`.
    """
    q, spread = _svqb_pass(x, drop)
    if spread > SVQB_SECOND_PASS:
        q, _ = _svqb_pass(q, drop)
    return q


#: squared condition number above which :func:`svqb` repeats its pass (loss of orthogonality
#: of one pass: about 1e-16 x this)
SVQB_SECOND_PASS = 1e4


def _rayleigh_ritz(op: _Operator, q: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    q = svqb(q)
    hq = op.apply(q)
    t = inner(q, hq)
    th, u = np.linalg.eigh((t + t.conj().T) * 0.5)
    return th, combine(q, u), combine(hq, u)


def _column_norms(r: np.ndarray) -> np.ndarray:
    return np.sqrt(np.einsum("ij,ij->j", r.conj(), r).real)


# ---------------------------------------------------------------------------- Davidson
#: Residual tolerance, relative to the spectral scale, of the columns of a probe
#: window other than the tracked ones: enough to place their energies below the
#: tracked level (its rank), not to resolve their states.
PROBE_LOOSE_RTOL = 1e-4


def _orthonormal_rows(basis: np.ndarray, j: int, c: np.ndarray, drop: float = 1e-8) -> np.ndarray:
    """Rows of ``c`` made orthonormal to ``basis[:j]`` and to each other.

    Two classical Gram–Schmidt passes; for a single vector the second pass is
    skipped when the first kept more than 0.7 of its norm (the
    reorthogonalisation criterion of J. W. Daniel, W. B. Gragg, L. Kaufman,
    G. W. Stewart, Math. Comp. 30, 772 (1976)).

    Directions that are (numerically) already in the span are dropped, so the
    result may have fewer rows than ``c``.
    """
    if j and c.shape[0] == 1:  # one vector: second pass only when the first lost most of it
        before = float(np.linalg.norm(c[0]))
        c = c - (c @ basis[:j].conj().T) @ basis[:j]
        if np.linalg.norm(c[0]) < 0.7 * before:
            c = c - (c @ basis[:j].conj().T) @ basis[:j]
    elif j:
        for _ in range(2):
            c = c - (c @ basis[:j].conj().T) @ basis[:j]
    if c.shape[0] == 1:
        nrm = float(np.linalg.norm(c[0]))
        scale = float(np.max(np.abs(c[0]))) if c.size else 0.0
        return c / nrm if nrm > 0 and scale > 0 else c[:0]
    g = c.conj() @ c.T
    d = np.sqrt(np.abs(np.real(np.diag(g))))
    d[d == 0] = 1.0
    w, u = np.linalg.eigh(g / d[:, None] / d[None, :])
    keep = w > drop * max(float(w[-1]), 1e-300)
    return (u[:, keep] / d[:, None] / np.sqrt(w[keep])).T @ c


class ProbeBasis:
    """Fixed part of a probe's search space: orthonormal rows ``q_i`` with ``H0 q_i`` and ``V q_i``.

    ``at(λ)`` gives the rows, their images under ``H(λ) = H0 + λ V`` and the
    projected matrix, all without products with V.
    """

    def __init__(self, rows: np.ndarray, h0_rows: np.ndarray, v_rows: np.ndarray, h0_proj: np.ndarray, v_proj: np.ndarray) -> None:
        self.rows, self.h0_rows, self.v_rows = rows, h0_rows, v_rows
        self.h0_proj, self.v_proj = h0_proj, v_proj
        self._images = np.empty_like(h0_rows)  # reused: a fresh (b, N) array costs page faults each probe

    def at(self, coupling: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Rows, their images under H(λ) (a buffer overwritten by the next call) and the projected matrix."""
        np.multiply(self.v_rows, coupling, out=self._images)
        self._images += self.h0_rows
        return self.rows, self._images, self.h0_proj + coupling * self.v_proj


def davidson_rows(k: int, fixed: int = 0) -> int:
    """Largest search space of :func:`davidson_lowest` for k wanted pairs and ``fixed`` subspace rows."""
    return max(20, 4 * (k + 1), fixed + 2 * (k + 1) + 4)


def davidson_lowest(
    h: Any,
    diag: np.ndarray,
    k: int,
    start: np.ndarray,
    *,
    tols: np.ndarray,
    rng: np.random.Generator | None,
    max_matvecs: int | None = None,
    subspace: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
    workspace: tuple[np.ndarray, np.ndarray] | None = None,
) -> tuple[np.ndarray, np.ndarray] | None:
    """The k lowest eigenpairs of a Hermitian ``h`` by block Davidson, or None.

    E. R. Davidson, "The iterative calculation of a few of the lowest
    eigenvalues and corresponding eigenvectors of large real-symmetric
    matrices", J. Comput. Phys. 17, 87 (1975), with the diagonal of ``h`` as
    preconditioner in the correction of J. Olsen, P. Jørgensen, J. Simons,
    Chem. Phys. Lett. 169, 463 (1990) (the correction is made orthogonal to the
    Ritz vector in the preconditioned metric, so it does not collapse onto it
    when the diagonal is a good approximation).  In the unperturbed eigenbasis
    the diagonal of ``H0 + λV`` holds ``H0`` exactly, so the preconditioner is
    the unperturbed resolvent: started from a perturbative state, each step adds
    roughly one order of the expansion, and the subspace makes it converge
    beyond the radius too.

    Parameters
    ----------
    h : (N, N) sparse matrix or ndarray, Hermitian
    diag : (N,) ndarray
        Real diagonal of ``h``.
    k : int
        Number of lowest eigenpairs wanted.
    start : (N, s) ndarray
        Start vectors (any number, need not be orthonormal).  One random vector
        is added when ``rng`` is given, so that a state absent from the start
        can still enter.
    tols : (k,) ndarray
        Residual tolerance ``‖h x - θ x‖`` of each wanted column (energy units);
        a loose tolerance for a column only places its energy.
    rng : numpy Generator or None
    max_matvecs : int, optional
        Give up (return None) after this many products with ``h``.
    subspace : ((b, N), (b, N), (b, b) ndarrays), optional
        Orthonormal rows, their images under ``h`` and the projected matrix,
        put in the search space before ``start`` at no product cost (e.g. the
        perturbative corrections of the tracked level: :class:`ProbeBasis`).
    workspace : two (M, N) ndarrays, optional
        Scratch rows for the search space and its images, reused from call to
        call (used when M >= :func:`davidson_rows` and the dtype fits; a fresh
        pair of arrays otherwise).

    Returns
    -------
    (energies (k,), vectors (N, k)) or None if not converged.
    """
    n = diag.size
    dtype = np.result_type(start.dtype, getattr(h, "dtype", np.float64), np.float64)
    fixed = 0 if subspace is None else subspace[0].shape[0]
    max_dim = davidson_rows(k, fixed)
    max_matvecs = max_matvecs if max_matvecs is not None else 40 * k + 160
    if workspace is not None and workspace[0].shape[0] >= max_dim and workspace[0].dtype == dtype:
        basis, hbasis = workspace  # rows q_j; rows (h q_j)^T
    else:
        basis = np.empty((max_dim, n), dtype=dtype)  # orthonormal rows q_j
        hbasis = np.empty((max_dim, n), dtype=dtype)  # rows (h q_j)^T
    proj = np.zeros((max_dim, max_dim), dtype=dtype)  # q_i^H h q_j
    j = 0
    if subspace is not None:
        basis[:fixed], hbasis[:fixed], proj[:fixed, :fixed] = subspace
        j = fixed
    pending: np.ndarray | None = np.array(start.T, dtype=dtype)
    if rng is not None:
        pending = np.vstack([pending, rng.standard_normal((1, n))])
    matvecs = 0
    tiny = 1e-13 * max(float(np.max(np.abs(diag))), 1.0)
    theta = u = None
    added = 0
    while True:
        if j >= k:  # Rayleigh–Ritz on the current space; stop or compute corrections
            theta, u = np.linalg.eigh(proj[:j, :j])
            ut = u[:, :k].T
            x = ut @ basis[:j]
            r = ut @ hbasis[:j] - theta[:k, None] * x
            res = np.sqrt(np.einsum("ij,ij->i", r.conj(), r).real)
            todo = np.flatnonzero(res > tols)
            if todo.size == 0:
                return theta[:k].copy(), np.ascontiguousarray(x.T)
            c = np.empty((todo.size, n), dtype=dtype)
            for row, i in enumerate(todo):
                d = diag - theta[i]
                d[np.abs(d) < tiny] = tiny
                pr = r[i] / d
                px = x[i] / d
                den = np.vdot(x[i], px)
                # θ inside the diagonal's range can make x^H D^-1 x vanish: plain correction then
                c[row] = pr - (np.vdot(x[i], pr) / den) * px if abs(den) > 1e-8 * np.linalg.norm(px) else pr
            if pending is not None:
                c = np.vstack([pending, c])
        elif pending is not None:
            c = pending
        elif added:
            c = hbasis[j - added : j].copy()  # too few vectors yet: grow by Krylov directions
        else:
            return None
        pending = None
        c = _orthonormal_rows(basis, j, c)
        m = c.shape[0]
        if m == 0 or matvecs + m > max_matvecs:
            return None
        if j + m > max_dim:  # thick restart from the lowest Ritz vectors
            if u is None:
                return None
            keep = min(j, max_dim - m, max(2 * (k + 1), max_dim // 2))
            ut = u[:, :keep].T
            basis[:keep] = ut @ basis[:j]
            hbasis[:keep] = ut @ hbasis[:j]
            proj[:] = 0.0
            proj[np.arange(keep), np.arange(keep)] = theta[:keep]
            j = keep
            c = _orthonormal_rows(basis, j, c)
            m = c.shape[0]
            if m == 0:
                return None
        basis[j : j + m] = c
        for i in range(m):  # one vector at a time: scipy's multi-vector CSR product is slower for few vectors
            hbasis[j + i] = h @ c[i]
        matvecs += m
        block = basis[j : j + m].conj() @ hbasis[: j + m].T
        proj[j : j + m, : j + m] = block
        proj[: j + m, j : j + m] = block.conj().T
        j += m
        added = m


class SparseBackend:
    """Sparse iterative backend.

    * lowest-k requests with a warm start: Chebyshev-filtered subspace iteration
      (this module's docstring), block = k wanted + guard vectors + one fresh
      random probe (so that a state absent from the start block, e.g. of another
      symmetry sector, can still enter);
    * lowest-k without a start, or if the filter does not converge: ARPACK
      ``eigsh(which='SA')``;
    * nearest-sigma windows: ARPACK shift-invert ``eigsh(sigma=...)`` with a
      starting vector built from ``start``.
    """

    name = "sparse"
    supports_rank_window = False
    iterative = True

    #: largest number of filter + Rayleigh–Ritz rounds before falling back to ARPACK
    MAX_ROUNDS = 12

    def __init__(self, model: Model, *, rtol: float, rng: np.random.Generator) -> None:
        self.model = model
        self.rtol = rtol
        self.rng = rng
        self.v = model.v
        self.e0 = np.asarray(model.e0, dtype=float)
        self._pattern_cache: _Pattern | None = None
        self._vdiag = model.v_diagonal()
        self._spread = float(max(np.max(np.abs(self.e0)), np.ptp(self.e0)))
        self._efficiency = 1.0  # observed / predicted filter gain (log scale), adapted
        self._last_guards: np.ndarray | None = None  # guard vectors of the previous solve
        self._plan: tuple[float, int, float] | None = None  # last warm solve: (step, filter degree, residual / tol)
        # (coupling, converged block aligned along the path, Ritz values, rotation Ritz -> aligned) of recent solves
        self._history: list[tuple[float, np.ndarray, np.ndarray, np.ndarray]] = []
        self.fallbacks = 0
        self._work: tuple[np.ndarray, np.ndarray] | None = None  # probe scratch rows, reused

    # ---------------------------------------------------------------- helpers
    @property
    def _pattern(self) -> _Pattern:
        """CSR pattern of V plus the diagonal, built on first use (the Chebyshev filter needs it)."""
        if self._pattern_cache is None:
            self._pattern_cache = _Pattern(self.model.v, self.model.n)
        return self._pattern_cache

    def _scale(self, coupling: float) -> float:
        return self._spread + abs(coupling) * self.model.norm_v

    def _small(self) -> bool:
        return self.model.n <= SMALL_DENSE

    def _dense(self, coupling: float) -> np.ndarray:
        return _hamiltonian_dense(self.model, coupling)

    def _operator_matrix(self, coupling: float) -> Any:
        return self.model.hamiltonian(coupling)

    # ---------------------------------------------------------------- requests
    def window(self, coupling: float, lo: int, hi: int, start: Any = None, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        if self._small():
            return sla.eigh(self._dense(coupling), subset_by_index=[lo, hi - 1], check_finite=False)
        w, x = self.lowest(coupling, hi, start, start_coupling)
        return w[lo:], x[:, lo:]

    def lowest(self, coupling: float, k: int, start: Any = None, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        n = self.model.n
        if self._small() or k >= n - 1:
            _check_dense_size(self.model, f"asking for {k} of {n} eigenpairs")
            return sla.eigh(self._dense(coupling), subset_by_index=[0, k - 1], check_finite=False)
        if start is not None and coupling != 0.0:
            out = self._chebyshev(coupling, k, np.asarray(start), start_coupling)
            if out is not None:
                return out
            self.fallbacks += 1
        if coupling == 0.0:
            idx = np.arange(k)
            x = np.zeros((n, k), dtype=self.model.dtype)
            x[idx, idx] = 1.0
            return self.e0[:k].copy(), x
        return self._arpack_lowest(coupling, k, start)

    def nearest(self, coupling: float, sigma: float, k: int, start: Any = None, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        n = self.model.n
        if self._small() or k >= n - 1:
            _check_dense_size(self.model, f"asking for {k} of {n} eigenpairs")
            h = self._dense(coupling)
            w = sla.eigvalsh(h, check_finite=False)
            lo = _nearest_block(w, sigma, k)
            return sla.eigh(h, subset_by_index=[lo, lo + k - 1], check_finite=False)
        h = self._operator_matrix(coupling)
        if sp.issparse(h):
            h = h.tocsc()
        v0 = self._start_vector(start)
        w, x = spla.eigsh(h, k=k, sigma=sigma, which="LM", v0=v0, tol=self.rtol * 1e-2)
        order = np.argsort(w)
        return w[order], x[:, order]

    def probe_basis(self, vectors: np.ndarray) -> "ProbeBasis":
        """Orthonormal basis of the columns of ``vectors`` with its images under H0 and V, for :meth:`probe`.

        Built once (e.g. from the Rayleigh–Schrödinger corrections of a level),
        it enters every later probe's search space at no product cost, since
        ``H(λ) Q = H0 Q + λ V Q``.
        """
        rows = np.ascontiguousarray(svqb(np.asarray(vectors)).T)  # (b, N) orthonormal rows
        h0_rows = rows * self.e0[None, :]
        v_rows = np.ascontiguousarray((self.v @ rows.T).T)
        return ProbeBasis(rows, h0_rows, v_rows, rows.conj() @ h0_rows.T, rows.conj() @ v_rows.T)

    def probe(
        self, coupling: float, k: int, start: np.ndarray, *, tight: Any = (), basis: "ProbeBasis | None" = None
    ) -> tuple[np.ndarray, np.ndarray] | None:
        """The k lowest eigenpairs for a probe far from any solved coupling; None if not converged.

        Block Davidson (:func:`davidson_lowest`) started from ``start`` (e.g.
        the vectors of the nearest solved coupling) and ``basis`` (from
        :meth:`probe_basis`, e.g. the perturbative corrections of the tracked
        level: their span holds the perturbative state of every order at every
        coupling).  Columns listed in ``tight`` (energy ranks of the tracked
        levels) are converged to ``rtol`` x the spectral scale, the others to
        :data:`PROBE_LOOSE_RTOL` x scale: they only place their energies below
        the tracked ones.  The caller falls back to a tracked step when None is
        returned.  No random vector is added: "lowest" means lowest in the
        space the start and its Davidson corrections reach (a state of another
        symmetry sector with no weight in the start never enters), so the
        caller must confirm the tracked column's identity (e.g. by its overlap
        with the perturbative state).
        """
        n = self.model.n
        if self._small() or k >= n - 1:
            _check_dense_size(self.model, f"asking for {k} of {n} eigenpairs")
            return sla.eigh(self._dense(coupling), subset_by_index=[0, k - 1], check_finite=False)
        scale = self._scale(coupling)
        tols = np.full(k, PROBE_LOOSE_RTOL * scale)
        tols[np.asarray(list(tight), dtype=int)] = self.rtol * scale
        diag = self.e0 + coupling * self._vdiag
        h = _DiagonalPlus(self.v, coupling, self.e0)
        sub = None if basis is None else basis.at(coupling)
        start = np.asarray(start)
        dtype = np.result_type(start.dtype, self.v.dtype, np.float64)
        rows = davidson_rows(k, 0 if sub is None else sub[0].shape[0])
        return davidson_lowest(h, diag, k, start, tols=tols, rng=None, subspace=sub, workspace=self._workspace(rows, dtype))

    #: largest scratch (bytes) the probe solver keeps between calls; above it each probe allocates its own
    PROBE_WORKSPACE_BYTES = 64 * 2**20

    def _workspace(self, rows: int, dtype: Any) -> tuple[np.ndarray, np.ndarray] | None:
        """Scratch rows kept between probes (fresh large arrays cost page faults at every call)."""
        n = self.model.n
        w = self._work
        if w is not None and w[0].shape[0] >= rows and w[0].dtype == dtype:
            return w
        if 2 * rows * n * np.dtype(dtype).itemsize > self.PROBE_WORKSPACE_BYTES:
            return None
        self._work = (np.empty((rows, n), dtype=dtype), np.empty((rows, n), dtype=dtype))
        return self._work

    # ---------------------------------------------------------------- ARPACK
    def _start_vector(self, start: Any) -> np.ndarray | None:
        if start is None:
            return None
        s = np.asarray(start)
        weights = self.rng.uniform(0.5, 1.0, s.shape[1])
        v0 = s @ weights
        nrm = np.linalg.norm(v0)
        return v0 / nrm if nrm > 0 else None

    def _arpack_lowest(self, coupling: float, k: int, start: Any) -> tuple[np.ndarray, np.ndarray]:
        h = self._operator_matrix(coupling)
        w, x = spla.eigsh(h, k=k, which="SA", v0=self._start_vector(start), tol=self.rtol * 1e-2)
        order = np.argsort(w)
        return w[order], x[:, order]

    # ---------------------------------------------------------------- Chebyshev
    #: recent solves kept for extrapolating the start block
    HISTORY = 8
    #: nodes of the extrapolation (recent solves) and degree of the polynomial fitted to them
    #: by least squares: one node more than the degree needs averages the solver noise of the
    #: stored blocks instead of enlarging it (sum of |weights| 9.8 instead of 15 for a cubic
    #: through four equally spaced nodes), which measured as 7 % fewer filter products
    EXTRAPOLATION_POINTS = 5
    EXTRAPOLATION_DEGREE = 3
    #: smallest distance between extrapolation nodes, in units of the distance to the nearest one
    EXTRAPOLATION_SPACING = 0.5
    #: largest sum of |Lagrange weights| (it multiplies the errors of the stored blocks)
    EXTRAPOLATION_MAX_GAIN = 40.0

    def _extrapolated(self, coupling: float, k: int, start_coupling: float | None) -> tuple[np.ndarray, np.ndarray, float] | None:
        """Start block from recent solves: polynomial extrapolation of aligned subspaces.

        Every stored block was rotated onto the block of the solve it started
        from (orthogonal Procrustes, :meth:`_remember`), so stored blocks along
        a path vary smoothly with λ.  The blocks of up to
        ``EXTRAPOLATION_POINTS`` recent solves near ``coupling`` (the one at
        ``start_coupling`` first, others no farther than POINTS + 0.5 times its
        distance) are combined with the weights of a least-squares polynomial
        of ``EXTRAPOLATION_DEGREE``: the start error drops from O(δλ) to
        O(δλ⁴), which saves about half of the filter degree along a sweep.

        Returns (start block (N, k), Ritz values (m + 1,) extrapolated with the
        same weights, distance to the anchor) or None.
        """
        if start_coupling is None:
            return None
        hist = [h for h in self._history if h[1].shape[1] == k]
        anchor = next((h for h in hist if h[0] == start_coupling), None)
        if anchor is None:
            return None
        d0 = abs(coupling - anchor[0])
        others = sorted(
            (h for h in hist if h[0] != anchor[0] and abs(coupling - h[0]) <= (self.EXTRAPOLATION_POINTS + 0.5) * d0),
            key=lambda h: abs(coupling - h[0]),
        )
        pts = [anchor]
        for h in others:
            # nodes clustered closer than half the step (e.g. refinement points around a
            # narrow crossing) would make the Lagrange weights, and the start error, explode
            if all(abs(h[0] - q[0]) >= self.EXTRAPOLATION_SPACING * d0 for q in pts):
                pts.append(h)
            if len(pts) == self.EXTRAPOLATION_POINTS:
                break
        weights = _fit_weights(coupling, [h[0] for h in pts], self.EXTRAPOLATION_DEGREE)
        while len(pts) > 2 and float(np.sum(np.abs(weights))) > self.EXTRAPOLATION_MAX_GAIN:
            pts.pop()
            weights = _fit_weights(coupling, [h[0] for h in pts], self.EXTRAPOLATION_DEGREE)
        if len(pts) < 2:
            return None
        out = weights[0] * pts[0][1]
        for weight, h in zip(weights[1:], pts[1:]):
            out += weight * h[1]
        # back to the anchor's Ritz gauge: each column then carries mostly one eigenvector
        # (a filter applied to it keeps the block well conditioned)
        out = combine(out, pts[0][3].T)
        thetas = [h[2] for h in pts]
        th = sum(w * t for w, t in zip(weights, thetas)) if all(t.shape == thetas[0].shape for t in thetas) else pts[0][2]
        return out, np.sort(th), d0

    def _remember(self, coupling: float, x: np.ndarray, th: np.ndarray, start_coupling: float | None) -> None:
        """Store a converged block, rotated onto the block of the solve it started from."""
        k = x.shape[1]
        anchor = next((h for h in self._history if h[0] == start_coupling and h[1].shape[1] == k), None)
        if anchor is None:
            block, rotation = x.copy(), np.eye(k)
        else:
            u, _, vh = np.linalg.svd(inner(x, anchor[1]))
            rotation = u @ vh
            block = combine(x, rotation)
        self._history.append((coupling, block, th.copy(), rotation))
        del self._history[: -self.HISTORY]

    #: fewest guard vectors above the k wanted ones in the filtered block
    GUARDS = 3
    GUARD_RATIO = 4
    #: a sweep step within this relative distance of the last one reuses its filter degree (no first Rayleigh–Ritz)
    PLAN_STEP_MATCH = 0.25
    #: residual / tolerance aimed at when the degree is planned from the last step
    PLAN_TARGET = 0.25
    #: largest decrease of the planned degree from one step to the next
    PLAN_MAX_DROP = 2

    @staticmethod
    def _gain(th: np.ndarray, k: int, upper: float) -> float | None:
        """Growth per degree of the k-th Ritz value over the damped interval [th[-2], upper] (None if not below it)."""
        cut = float(th[-2])
        e = (upper - cut) / 2.0
        c = (upper + cut) / 2.0
        y_want = abs((th[k - 1] - c) / e)
        if not (y_want > 1.0 and upper > cut):
            return None
        return float(np.arccosh(y_want))

    @staticmethod
    def _degree_cap(th: np.ndarray, upper: float, leak: float) -> int:
        """Largest degree that keeps the block well conditioned.

        The lowest Ritz vector leaks into the others at about ``leak`` (residual
        / gap) and the filter enlarges that leak by the ratio of amplifications;
        allow at most 1e7 after the leak.
        """
        cut = float(th[-2])
        e = (upper - cut) / 2.0
        c = (upper + cut) / 2.0
        y_low = max(abs((th[0] - c) / e), 1.0 + 1e-12)
        return int(min(80, max(4, int(np.arccosh(1e7 / max(leak, 1e-6)) / np.arccosh(y_low)))))

    def _filter_degree(self, th: np.ndarray, k: int, upper: float, worst: float, tol: float) -> tuple[int, float] | None:
        """(degree, gain per degree) of the filter that brings residuals ``worst`` below ``tol``.

        ``th`` are the block's Ritz values (ascending; ``th[-2]`` is the cut above which
        the filter damps).  None when the wanted values are not below the cut.
        """
        gain = self._gain(th, k, upper)
        if gain is None:
            return None
        need = np.arccosh(max(3.0 * worst / tol, 1.0 + 1e-12))
        leak = min(1.0, worst / max(float(th[1] - th[0]), 1e-300))
        cap = self._degree_cap(th, upper, leak)
        return int(np.clip(np.ceil(need / (gain * self._efficiency)), 4, cap)), gain

    def _chebyshev(self, coupling: float, k: int, start: np.ndarray, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray] | None:
        n = self.model.n
        op = _Operator(self.e0, self._pattern, coupling)
        guards = max(self.GUARDS, (k + 3) // self.GUARD_RATIO)
        m = min(k + guards, n - 2)
        dtype = np.result_type(self.model.dtype, start.dtype, np.float64)
        block = np.empty((n, m + 1), dtype=dtype)
        extrapolated = self._extrapolated(coupling, k, start_coupling)
        guess = None if extrapolated is None else extrapolated[0]
        # converged part extrapolated when possible (guards are not smooth in λ)
        s = guess if guess is not None else start[:, :m]
        ns = s.shape[1]
        block[:, :ns] = s
        # guard vectors: those of the previous solve when there was one (a sweep moves
        # in small steps), else the next unperturbed levels; plus one random probe
        need = m - ns
        last = self._last_guards
        if need > 0 and last is not None and last.shape[0] == n:
            take = min(need, last.shape[1])
            block[:, ns : ns + take] = last[:, :take]
            ns += take
            need -= take
        if need > 0:
            block[:, ns : ns + need] = 0.0
            block[np.arange(m - need, m), np.arange(ns, ns + need)] = 1.0
            ns += need
        block[:, m] = self.rng.standard_normal(n)
        scale = self._scale(coupling)
        tol = self.rtol * scale
        upper = float(np.max(self.e0)) + abs(coupling) * self.model.norm_v
        upper += 1e-6 * scale  # strict upper bound of the spectrum (Weyl)
        plan = self._plan
        total = 0  # filter degree spent on this solve
        if (
            extrapolated is not None and plan is not None and extrapolated[1].size == m + 1
            and abs(extrapolated[2] - plan[0]) <= self.PLAN_STEP_MATCH * plan[0]
        ):
            # a sweep step like the last one: filter the extrapolated block straight away
            # (no Rayleigh–Ritz on the start), degree from the last step's outcome
            th_start = extrapolated[1]
            gain = self._gain(th_start, k, upper)
            if gain is not None:
                change = np.log(plan[2] / self.PLAN_TARGET) / gain
                degree = int(np.clip(plan[1] + np.ceil(max(change, -self.PLAN_MAX_DROP)), 4, self._degree_cap(th_start, upper, 1.0)))
                # guards and the random probe made orthogonal to the start: a component of the
                # lowest states left in them would grow fastest and swamp their own directions
                head, tail = block[:, :k], block[:, k:]
                tail -= combine(head, inner(head, tail))
                block = op.filter(block, degree, float(th_start[0]), float(th_start[-2]), upper)
                total = degree
        th, x, hx = _rayleigh_ritz(op, block)
        res = None
        for _ in range(self.MAX_ROUNDS):
            if th.size < k + 2:
                return None
            if res is None:
                res = _column_norms(hx[:, :k] - x[:, :k] * th[:k])
            worst = float(np.max(res))
            if worst <= tol:
                self._last_guards = x[:, k:m].copy()
                self._remember(coupling, x[:, :k], th, start_coupling)
                if extrapolated is not None and total > 0:
                    self._plan = (extrapolated[2], total, max(worst / tol, 1e-3))
                return th[:k].copy(), x[:, :k].copy()
            step = self._filter_degree(th, k, upper, worst, tol)
            if step is None:
                return None
            degree, gain = step
            total += degree
            y = op.filter(x, degree, float(th[0]), float(th[-2]), upper)
            th, x, hx = _rayleigh_ritz(op, y)
            res = None
            if th.size >= k:
                res = _column_norms(hx[:, :k] - x[:, :k] * th[:k])  # also the next round's convergence test
                new_worst = float(np.max(res))
                if new_worst > 0 and worst > new_worst:
                    achieved = np.log(worst / new_worst) / max(np.log(np.cosh(degree * gain)), 1e-12)
                    self._efficiency = float(np.clip(0.7 * self._efficiency + 0.3 * achieved, 0.3, 1.5))
        return None


def _fit_weights(x: float, nodes: list[float], degree: int) -> np.ndarray:
    """Weights of the values at ``nodes`` in the least-squares polynomial of ``degree`` evaluated at ``x``.

    With ``degree = len(nodes) - 1`` (or more) this is Lagrange interpolation.
    """
    t = np.asarray(nodes) - x
    t = t / np.max(np.abs(t))
    v = np.vander(t, min(degree, len(nodes) - 1) + 1, increasing=True)
    if v.shape[0] == v.shape[1]:
        return np.linalg.solve(v.T, np.eye(v.shape[0])[0])
    return v @ np.linalg.solve(v.T @ v, np.eye(v.shape[1])[0])  # minimum-norm weights (normal equations, nodes well spread)


# ---------------------------------------------------------------------------- qutip
class QutipBackend:
    """``qutip.Qobj(H).eigenstates`` (sparse ARPACK path for sparse H, LAPACK otherwise)."""

    name = "qutip"
    supports_rank_window = True
    iterative = False

    def __init__(self, model: Model, *, rtol: float, rng: np.random.Generator) -> None:
        import qutip  # noqa: F401  (fail early with ImportError if missing)

        self.model = model
        self._real = not np.iscomplexobj(model.v.data if sp.issparse(model.v) else model.v)
        self._cluster_tol = 1e-10 * float(max(np.max(np.abs(model.e0)), np.ptp(model.e0), 1e-300))

    def _qobj(self, coupling: float) -> Any:
        import qutip

        return qutip.Qobj(self.model.hamiltonian(coupling))

    def _convert(self, evals: Any, kets: Any, coupling: float) -> tuple[np.ndarray, np.ndarray]:
        w = np.real(np.asarray(evals, dtype=complex))
        x = np.column_stack([np.asarray(k.full()).ravel() for k in kets])
        order = np.argsort(w, kind="stable")
        w, x = w[order], x[:, order]
        if self._real:
            x = _realify_columns(w, x, self._cluster_tol)
            # Rayleigh–Ritz on the real block: inside a merged cluster the realified
            # columns are a basis of the eigenspace, not yet eigenvectors
            h = self.model.hamiltonian(coupling)
            t = inner(x, h @ x)
            w, u = np.linalg.eigh((t + t.T) * 0.5)
            x = combine(x, u)
        return w, x

    def lowest(self, coupling: float, k: int, start: Any = None, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        n = self.model.n
        use_sparse = self.model.is_sparse and n > SMALL_DENSE and k < n - 1
        if not use_sparse:
            _check_dense_size(self.model, "backend 'qutip' (dense path)")
        evals, kets = self._qobj(coupling).eigenstates(sparse=use_sparse, eigvals=k if k < n else 0, sort="low")
        w, x = self._convert(evals, kets, coupling)
        return w[:k], x[:, :k]

    def window(self, coupling: float, lo: int, hi: int, start: Any = None, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        w, x = self.lowest(coupling, hi)
        return w[lo:], x[:, lo:]

    def probe(self, coupling: float, k: int, start: np.ndarray, *, tight: Any = (), basis: Any = None) -> tuple[np.ndarray, np.ndarray] | None:
        """The k lowest eigenpairs (qutip's own solver; ``start``, ``tight``, ``basis`` are not used)."""
        return self.lowest(coupling, k)

    def nearest(self, coupling: float, sigma: float, k: int, start: Any = None, start_coupling: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        _check_dense_size(self.model, "backend 'qutip' with an energy target")
        evals, kets = self._qobj(coupling).eigenstates(sparse=False, sort="low")
        w, x = self._convert(evals, kets, coupling)
        lo = _nearest_block(w, sigma, k)
        return w[lo : lo + k], x[:, lo : lo + k]


BACKEND_CLASSES = {"dense": DenseBackend, "sparse": SparseBackend, "qutip": QutipBackend}


def make_backend(name: str, model: Model, *, rtol: float, rng: np.random.Generator) -> Any:
    """Instantiate a resolved backend (``name`` already checked)."""
    return BACKEND_CLASSES[name](model, rtol=rtol, rng=rng)
