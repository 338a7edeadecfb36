"""Eigensolver backends behind :mod:`ptcheck.exact` (private).

Every backend diagonalises ``H(λ) = H0 + λ V`` in the model's work basis and
returns eigenvalues in ascending order with orthonormal eigenvectors as the
columns of an ``(N, k)`` array.  Three kinds of request:

* ``lowest(coupling, k, start)``: the k lowest eigenpairs;
* ``window(coupling, lo, hi, start)``: eigenpairs of energy rank lo..hi-1
  (only when ``supports_rank_window``);
* ``nearest(coupling, sigma, k, start)``: the k eigenpairs closest to ``sigma``.

``start`` is an optional ``(N, s)`` block of vectors close to the wanted ones
(the previous point of a coupling sweep); backends that cannot use it ignore it.

The ``sparse`` backend's warm-started solver is a Chebyshev-filtered subspace
iteration (Y. Zhou, Y. Saad, M. L. Tiago, J. R. Chelikowsky, "Self-consistent-
field calculations using Chebyshev-filtered subspace iteration", J. Comput.
Phys. 219, 172 (2006), algorithm 4.1 for the scaled three-term filter) with
Rayleigh–Ritz after each filter and SVQB orthonormalisation (A. Stathopoulos,
K. Wu, "A block orthogonalization procedure with constant synchronization
requirements", SIAM J. Sci. Comput. 23, 2165 (2002)).  Its cost is dominated by
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

__all__ = ["make_backend", "BACKEND_CLASSES", "DenseBackend", "SparseBackend", "QutipBackend"]

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

    def __init__(self, model: Model, *, rtol: float, rng: np.random.Generator) -> None:
        _check_dense_size(model, "backend 'dense'")
        self.model = model

    def window(self, coupling: float, lo: int, hi: int, start: Any = None) -> tuple[np.ndarray, np.ndarray]:
        h = _hamiltonian_dense(self.model, coupling)
        n = self.model.n
        if lo == 0 and hi == n:
            return sla.eigh(h, check_finite=False)
        return sla.eigh(h, subset_by_index=[lo, hi - 1], check_finite=False)

    def lowest(self, coupling: float, k: int, start: Any = None) -> tuple[np.ndarray, np.ndarray]:
        return self.window(coupling, 0, k)

    def nearest(self, coupling: float, sigma: float, k: int, start: Any = None) -> tuple[np.ndarray, np.ndarray]:
        h = _hamiltonian_dense(self.model, coupling)
        w = sla.eigvalsh(h, check_finite=False)
        lo = _nearest_block(w, sigma, k)
        return sla.eigh(h, subset_by_index=[lo, lo + k - 1], check_finite=False)


def _nearest_block(w: np.ndarray, sigma: float, k: int) -> int:
    """Start index of the k consecutive sorted eigenvalues closest to sigma."""
    order = np.argsort(np.abs(w - sigma), kind="stable")[:k]
    lo = int(order.min())
    return min(lo, w.size - k)


# ---------------------------------------------------------------------------- sparse
class _Operator:
    """``H(λ) = diag(e0) + λ V`` applied to blocks, plus the Chebyshev filter."""

    def __init__(self, e0: np.ndarray, v: Any, coupling: float) -> None:
        self.e0 = e0
        self.v = v
        self.coupling = coupling

    def apply(self, x: np.ndarray) -> np.ndarray:
        y = self.v @ x
        y *= self.coupling
        y += self.e0[:, None] * x
        return y

    def filter(self, x: np.ndarray, degree: int, lower: float, cut: float, upper: float) -> np.ndarray:
        """Scaled Chebyshev filter of the given degree damping [cut, upper].

        Zhou et al. (2006), algorithm 4.1: components with eigenvalues in
        ``[cut, upper]`` stay bounded, those below ``cut`` grow; scaling by the
        value at ``lower`` keeps the wanted ones of order one.
        """
        e = (upper - cut) / 2.0
        c = (upper + cut) / 2.0
        sigma = e / (lower - c)
        s1 = sigma
        shifted = (self.e0 - c)[:, None]
        tmp = np.empty_like(x)
        y = self.v @ x
        y *= self.coupling
        np.multiply(shifted, x, out=tmp)
        y += tmp
        y *= s1 / e
        prev = x
        for _ in range(2, degree + 1):
            s2 = 1.0 / (2.0 / s1 - sigma)
            yn = self.v @ y
            yn *= self.coupling
            np.multiply(shifted, y, out=tmp)
            yn += tmp
            yn *= 2.0 * s2 / e
            np.multiply(prev, sigma * s2, out=tmp)
            yn -= tmp
            prev, y, s1 = y, yn, s2
        return y


def svqb(x: np.ndarray, drop: float = 1e-10) -> np.ndarray:
    """Orthonormal basis of the columns of ``x`` (dependent directions dropped)."""
    g = x.conj().T @ x
    d = np.sqrt(np.abs(np.real(np.diag(g))))
    d[d == 0] = 1.0
    w, u = np.linalg.eigh(g / d[:, None] / d[None, :])
    keep = w > drop * max(float(w[-1]), 1e-300)
    return x @ (u[:, keep] / d[:, None] / np.sqrt(w[keep]))


def _rayleigh_ritz(op: _Operator, q: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    q = svqb(svqb(q))
    hq = op.apply(q)
    t = q.conj().T @ hq
    th, u = np.linalg.eigh((t + t.conj().T) * 0.5)
    return th, q @ u, hq @ u


def _column_norms(r: np.ndarray) -> np.ndarray:
    return np.sqrt(np.einsum("ij,ij->j", r.conj(), r).real)


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
        self._spread = float(max(np.max(np.abs(self.e0)), np.ptp(self.e0)))
        self._efficiency = 1.0  # observed / predicted filter gain (log scale), adapted
        self.fallbacks = 0

    # ---------------------------------------------------------------- helpers
    def _scale(self, coupling: float) -> float:
        return self._spread + abs(coupling) * self.model.norm_v

    def _small(self) -> bool:
        return self.model.n <= SMALL_DENSE

    def _dense(self, coupling: float) -> np.ndarray:
        return _hamiltonian_dense(self.model, coupling)

    def _operator_matrix(self, coupling: float) -> Any:
        return self.model.hamiltonian(coupling)

    # ---------------------------------------------------------------- requests
    def window(self, coupling: float, lo: int, hi: int, start: Any = None) -> tuple[np.ndarray, np.ndarray]:
        if self._small():
            return sla.eigh(self._dense(coupling), subset_by_index=[lo, hi - 1], check_finite=False)
        w, x = self.lowest(coupling, hi, start)
        return w[lo:], x[:, lo:]

    def lowest(self, coupling: float, k: int, start: Any = None) -> tuple[np.ndarray, np.ndarray]:
        n = self.model.n
        if self._small() or k >= n - 1:
            _check_dense_size(self.model, f"asking for {k} of {n} eigenpairs")
            return sla.eigh(self._dense(coupling), subset_by_index=[0, k - 1], check_finite=False)
        if start is not None and coupling != 0.0:
            out = self._chebyshev(coupling, k, np.asarray(start))
            if out is not None:
                return out
            self.fallbacks += 1
        if coupling == 0.0:
            idx = np.arange(k)
            x = np.zeros((n, k), dtype=self.model.dtype)
            x[idx, idx] = 1.0
            return self.e0[:k].copy(), x
        return self._arpack_lowest(coupling, k, start)

    def nearest(self, coupling: float, sigma: float, k: int, start: Any = None) -> tuple[np.ndarray, np.ndarray]:
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
    def _chebyshev(self, coupling: float, k: int, start: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
        n = self.model.n
        op = _Operator(self.e0, self.v, coupling)
        guards = max(3, (k + 3) // 4)
        m = min(k + guards, n - 2)
        dtype = np.result_type(self.model.dtype, start.dtype, np.float64)
        block = np.empty((n, m + 1), dtype=dtype)
        s = start[:, :m]
        block[:, : s.shape[1]] = s
        fill = m + 1 - s.shape[1]
        block[:, s.shape[1] :] = self.rng.standard_normal((n, fill))
        scale = self._scale(coupling)
        tol = self.rtol * scale
        upper = float(np.max(self.e0)) + abs(coupling) * self.model.norm_v
        upper += 1e-6 * scale  # strict upper bound of the spectrum (Weyl)
        th, x, hx = _rayleigh_ritz(op, block)
        for _ in range(self.MAX_ROUNDS):
            if th.size < k + 2:
                return None
            res = _column_norms(hx[:, :k] - x[:, :k] * th[:k])
            worst = float(np.max(res))
            if worst <= tol:
                return th[:k].copy(), x[:, :k].copy()
            cut = float(th[-2])
            e = (upper - cut) / 2.0
            c = (upper + cut) / 2.0
            y_want = abs((th[k - 1] - c) / e)
            y_low = abs((th[0] - c) / e)
            if not (y_want > 1.0 and upper > cut):
                return None
            gain = np.arccosh(y_want)
            need = np.arccosh(max(3.0 * worst / tol, 1.0 + 1e-12))
            cap = max(4, int(np.arccosh(1e7) / np.arccosh(y_low)))  # keep the block well conditioned
            degree = int(np.clip(np.ceil(need / (gain * self._efficiency)), 4, min(80, cap)))
            y = op.filter(x, degree, float(th[0]), cut, upper)
            th, x, hx = _rayleigh_ritz(op, y)
            if th.size:
                new_worst = float(np.max(_column_norms(hx[:, :k] - x[:, :k] * th[:k]))) if th.size >= k else worst
                if new_worst > 0 and worst > new_worst:
                    achieved = np.log(worst / new_worst) / max(np.log(np.cosh(degree * gain)), 1e-12)
                    self._efficiency = float(np.clip(0.7 * self._efficiency + 0.3 * achieved, 0.3, 1.5))
        return None


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

    def _convert(self, evals: Any, kets: Any) -> tuple[np.ndarray, np.ndarray]:
        w = np.real(np.asarray(evals, dtype=complex))
        x = np.column_stack([np.asarray(k.full()).ravel() for k in kets])
        order = np.argsort(w, kind="stable")
        w, x = w[order], x[:, order]
        if self._real:
            x = _realify_columns(w, x, self._cluster_tol)
        return w, x

    def lowest(self, coupling: float, k: int, start: Any = None) -> tuple[np.ndarray, np.ndarray]:
        n = self.model.n
        use_sparse = self.model.is_sparse and n > SMALL_DENSE and k < n - 1
        if not use_sparse:
            _check_dense_size(self.model, "backend 'qutip' (dense path)")
        evals, kets = self._qobj(coupling).eigenstates(sparse=use_sparse, eigvals=k if k < n else 0, sort="low")
        w, x = self._convert(evals, kets)
        return w[:k], x[:, :k]

    def window(self, coupling: float, lo: int, hi: int, start: Any = None) -> tuple[np.ndarray, np.ndarray]:
        w, x = self.lowest(coupling, hi)
        return w[lo:], x[:, lo:]

    def nearest(self, coupling: float, sigma: float, k: int, start: Any = None) -> tuple[np.ndarray, np.ndarray]:
        _check_dense_size(self.model, "backend 'qutip' with an energy target")
        evals, kets = self._qobj(coupling).eigenstates(sparse=False, sort="low")
        w, x = self._convert(evals, kets)
        lo = _nearest_block(w, sigma, k)
        return w[lo : lo + k], x[:, lo : lo + k]


BACKEND_CLASSES = {"dense": DenseBackend, "sparse": SparseBackend, "qutip": QutipBackend}


def make_backend(name: str, model: Model, *, rtol: float, rng: np.random.Generator) -> Any:
    """Instantiate a resolved backend (``name`` already checked)."""
    return BACKEND_CLASSES[name](model, rtol=rtol, rng=rng)
