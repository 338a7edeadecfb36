"""The model ``H(λ) = H0 + λ V``: validation, unperturbed basis, level labels.

All of ptcheck works in the *work basis*: the eigenbasis of ``H0`` sorted by
unperturbed energy (level 0 = lowest).  Inside a group of exactly degenerate
unperturbed levels the work basis is rotated to the "good" states that
diagonalise ``V`` in the group (sorted by their first-order shift), so that
"level n" names one analytic branch of the exact spectrum.  The transform back
to the user's basis is kept (:meth:`Model.to_user_basis`).
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from typing import Any

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp

from . import _validation as val
from .errors import AmbiguousLevelError, BasisTooLargeError

__all__ = ["Model", "DENSE_LIMIT"]

#: Largest basis for which ptcheck will build and diagonalise a dense matrix
#: (a dense complex 6000 x 6000 matrix is 0.6 GB; eigh takes minutes on 2 cores).
DENSE_LIMIT = 6000

#: Largest exactly degenerate group of H0 that is rotated to first-order good
#: states; levels in larger groups are reported as ambiguous.
MAX_GROUP_ROTATION = 256


class Model:
    """A perturbed Hamiltonian ``H(λ) = H0 + λ V``.

    Parameters
    ----------
    h0 : (N, N) array_like, scipy.sparse matrix or qutip.Qobj
        Unperturbed Hamiltonian (Hermitian).  Energies are in the user's units;
        every energy ptcheck reports is in the same units (ħ = 1).
    v : (N, N) array_like, scipy.sparse matrix or qutip.Qobj
        Perturbation (Hermitian).  The coupling λ is dimensionless.
    labels : sequence of hashable, length N, optional
        Names of the unperturbed states.  If ``h0`` is diagonal they name its
        basis states in the order given; otherwise they name the eigenstates
        of ``h0`` in ascending energy.
    name : str, optional
        Name used in reports and figure captions.
    dims : sequence of int, optional
        Subsystem dimensions of a product basis (product must equal N).  If
        ``labels`` is not given, states are labelled by their quantum numbers,
        e.g. ``(1, 0)``.  Taken from a ``Qobj``'s dims when not given.
    hermitian_rtol : float, default 1e-10
        Largest allowed ``|A[i,j] - conj(A[j,i])|`` relative to the larger of
        ``|A[i,j]|`` and ``|A[j,i]|`` (each pair on its own scale), beyond
        rounding noise (see :func:`ptcheck._validation.check_hermitian`).
    degeneracy_tol : float, optional
        Unperturbed levels closer than this (energy units) count as exactly
        degenerate.  Default: ``1e-9 x`` the spectral scale of ``H0``
        (``max(|E0|)``, or the span of E0 if larger).

    Attributes
    ----------
    n : int
        Basis size N.
    e0 : (N,) ndarray, read-only
        Unperturbed energies, ascending (energy units).
    v : (N, N) ndarray or scipy.sparse.csr_matrix
        The perturbation in the work basis.
    degenerate_groups : tuple of tuple of int
        Groups (size >= 2) of exactly degenerate unperturbed levels.
    ambiguous_levels : frozenset of int
        Levels whose user label cannot be attached to one perturbed level
        (a degenerate group in which ``V`` mixes the user's states).

    Examples
    --------
    >>> import numpy as np
    >>> m = Model(np.diag([0.0, 1.0]), [[0, 0.1], [0.1, 0]], name="two-level")
    >>> m.e0
    array([0., 1.])
    """

    def __init__(
        self,
        h0: Any,
        v: Any,
        *,
        labels: Sequence[Hashable] | None = None,
        name: str | None = None,
        dims: Sequence[int] | None = None,
        hermitian_rtol: float = 1e-10,
        degeneracy_tol: float | None = None,
    ) -> None:
        h0m, h0dims = val.as_operator(h0, "h0", max_dense=DENSE_LIMIT)
        vm, vdims = val.as_operator(v, "v", max_dense=DENSE_LIMIT)
        n = val.check_square_pair(h0m, vm)
        hermitian_rtol = float(val.check_positive(hermitian_rtol, "hermitian_rtol"))
        for nm, m in (("h0", h0m), ("v", vm)):
            val.check_finite(m, nm)
            val.check_hermitian(m, nm, hermitian_rtol, scale=max(val.max_abs(h0m), val.max_abs(vm)))
        if dims is None:
            dims = h0dims if (h0dims is not None and len(h0dims) > 1) else None
        if dims is not None:
            dims = tuple(val.check_int(d, "dims entry", minimum=1) for d in dims)
            if int(np.prod(dims)) != n:
                raise ValueError(f"dims {dims} multiply to {int(np.prod(dims))}, but the basis size is {n}")
        if labels is not None:
            labels = list(labels)
            if len(labels) != n:
                raise ValueError(f"labels must have one entry per basis state ({n}); got {len(labels)}")
            if len(set(map(_hashable, labels))) != n:
                raise ValueError("labels must be distinct")
        self.name = str(name) if name is not None else "model"
        self.n = n
        self.dims = dims
        self.hermitian_rtol = hermitian_rtol
        self.is_sparse = sp.issparse(vm)
        self._source_v_sparse = sp.issparse(vm)

        # ---- unperturbed eigenbasis -------------------------------------------------
        h0_diag = _is_diagonal(h0m)
        if h0_diag:
            d = np.real(h0m.diagonal() if sp.issparse(h0m) else np.diag(h0m)).astype(float)
            perm = np.argsort(d, kind="stable")
            e0 = d[perm]
            transform = sp.csr_matrix((np.ones(n), (perm, np.arange(n))), shape=(n, n))
            v_work = _permute(vm, perm)
            user_labels = labels
        else:
            if n > DENSE_LIMIT:
                raise BasisTooLargeError(
                    f"h0 is not diagonal and the basis has N = {n} > {DENSE_LIMIT} states: ptcheck "
                    "would need a dense eigendecomposition of h0. Pass h0 in its eigenbasis "
                    "(diagonal, e.g. as a sparse diagonal matrix) or reduce the basis."
                )
            h0d = h0m.toarray() if sp.issparse(h0m) else h0m
            e0, u = sla.eigh(h0d)
            transform = u
            vd = vm.toarray() if sp.issparse(vm) else vm
            v_work = u.conj().T @ vd @ u
            if sp.issparse(vm):
                # keep the work-basis V sparse if it really is sparse there
                v_work = _maybe_sparse(v_work)
            perm = None
            user_labels = labels  # labels name eigenstates in energy order
        self.h0_is_diagonal = h0_diag

        scale = float(max(np.max(np.abs(e0)), np.ptp(e0))) if n else 0.0
        if degeneracy_tol is None:
            degeneracy_tol = 1e-9 * scale if scale > 0 else 1e-12
        self.degeneracy_tol = float(val.check_positive(degeneracy_tol, "degeneracy_tol"))

        # ---- exactly degenerate groups: rotate to good states ---------------------
        groups = _degenerate_groups(e0, self.degeneracy_tol)
        ambiguous: set[int] = set()
        order = np.arange(n)
        rotations: list[tuple[np.ndarray, np.ndarray]] = []
        vscale = val.max_abs(v_work)
        for g in groups:
            idx = np.asarray(g)
            if len(g) > MAX_GROUP_ROTATION:
                ambiguous.update(g)  # too large to resolve into good states
                continue
            block = _submatrix(v_work, idx)
            off = block - np.diag(np.diag(block))
            if np.max(np.abs(off), initial=0.0) <= hermitian_rtol * max(vscale, 1e-300):
                order[idx] = idx[np.argsort(np.real(np.diag(block)), kind="stable")]
            else:
                w, r = np.linalg.eigh(block)
                rotations.append((idx, r))
                ambiguous.update(g)
        src = perm.copy() if perm is not None else np.arange(n)  # work index -> label source
        if not np.array_equal(order, np.arange(n)):
            e0 = e0[order]
            v_work = _permute(v_work, order)
            transform = transform[:, order]
            src = src[order]
        if rotations:
            rows, cols, vals = [], [], []
            in_group = np.zeros(n, dtype=bool)
            for idx, r in rotations:
                in_group[idx] = True
                rows.append(np.repeat(idx, len(idx)))
                cols.append(np.tile(idx, len(idx)))
                vals.append(r.ravel())
            rest = np.flatnonzero(~in_group)
            rows.append(rest), cols.append(rest), vals.append(np.ones(rest.size))
            rot = sp.csr_matrix(
                (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)
            )
            if sp.issparse(v_work):
                v_work = (rot.conj().T @ v_work @ rot).tocsr()
            else:
                v_work = rot.conj().T.toarray() @ v_work @ rot.toarray()
            transform = sp.csr_matrix(transform @ rot) if sp.issparse(transform) else transform @ rot.toarray()

        v_work = _realify(v_work)
        if sp.issparse(v_work):
            v_work = sp.csr_matrix(v_work)
            v_work.eliminate_zeros()
        e0 = np.ascontiguousarray(e0, dtype=float)
        e0.setflags(write=False)
        self.e0 = e0
        self.v = v_work
        self._transform = transform
        self.degenerate_groups = tuple(tuple(int(i) for i in g) for g in groups)
        self.ambiguous_levels = frozenset(int(i) for i in ambiguous)

        # ---- labels in work order ---------------------------------------------------
        if user_labels is None and dims is not None:
            user_labels = [tuple(int(q) for q in idx) for idx in np.ndindex(*dims)]
            if not h0_diag:
                # name each eigenstate of h0 by its dominant product-basis component
                t = np.abs(np.asarray(transform.toarray() if sp.issparse(transform) else transform)) ** 2
                dom = np.argmax(t, axis=0)
                weight = t[dom, np.arange(n)]
                user_labels = [user_labels[int(d)] if w > 0.5 else None for d, w in zip(dom, weight)]
                src = np.arange(n)
        self._labels: list = [None] * n
        self._label_index: dict = {}
        self._ambiguous_labels: dict = {}
        if user_labels is not None:
            for i in range(n):
                lab = user_labels[int(src[i])]
                if lab is None:
                    continue
                if i in self.ambiguous_levels:
                    self._ambiguous_labels[_hashable(lab)] = i
                else:
                    self._labels[i] = lab
                    self._label_index[_hashable(lab)] = i
        self._norm_v: float | None = None

    # ------------------------------------------------------------------ basics
    def __repr__(self) -> str:
        kind = "sparse" if self.is_sparse else "dense"
        deg = f", {len(self.degenerate_groups)} degenerate group(s)" if self.degenerate_groups else ""
        return f"Model({self.name!r}, N={self.n}, {kind}{deg})"

    @property
    def dtype(self) -> np.dtype:
        """Data type of the work-basis perturbation (float64 or complex128)."""
        return self.v.dtype

    @property
    def labels(self) -> tuple:
        """Label of each level in work order (``None`` where no label is known)."""
        return tuple(self._labels)

    @property
    def norm_v(self) -> float:
        """Spectral norm ``‖V‖`` (largest |eigenvalue| of V), energy units."""
        if self._norm_v is None:
            self._norm_v = _spectral_norm(self.v)
        return self._norm_v

    def hamiltonian(self, coupling: float) -> np.ndarray | sp.csr_matrix:
        """``H0 + λ V`` in the work basis, shape (N, N), same storage as ``v``."""
        lam = val.as_coupling(coupling)
        if sp.issparse(self.v):
            return (sp.diags(self.e0) + lam * self.v).tocsr()
        h = lam * self.v
        h[np.diag_indices(self.n)] += self.e0
        return h

    def v_element(self, i: int, j: int) -> complex | float:
        """Work-basis matrix element ``V_ij``."""
        return self.v[i, j]

    def v_diagonal(self) -> np.ndarray:
        """Diagonal of V in the work basis, shape (N,) (real)."""
        d = self.v.diagonal() if sp.issparse(self.v) else np.diag(self.v)
        return np.real(np.asarray(d))

    def to_user_basis(self, states: np.ndarray) -> np.ndarray:
        """Map work-basis vectors (shape ``(..., N)``) to the user's basis."""
        s = np.asarray(states)
        if s.shape[-1] != self.n:
            raise ValueError(f"states must have last axis of length {self.n}; got shape {s.shape}")
        t = self._transform
        flat = s.reshape(-1, self.n)
        out = (t @ flat.T).T
        return np.asarray(out).reshape(s.shape[:-1] + (self.n,))

    # ------------------------------------------------------------------ levels
    def level_index(self, key: Any) -> int:
        """Work-basis index of a level given by energy rank (int) or label.

        Raises
        ------
        AmbiguousLevelError
            The label belongs to a degenerate group mixed by ``V``.
        ValueError
            Unknown label or rank out of range.
        """
        if isinstance(key, (int, np.integer)) and not isinstance(key, bool):
            k = int(key)
            if not 0 <= k < self.n:
                raise ValueError(f"level must be in 0..{self.n - 1}; got {k}")
            return k
        h = _hashable(key)
        if h in self._ambiguous_labels:
            grp = next(g for g in self.degenerate_groups if self._ambiguous_labels[h] in g)
            names = ", ".join(repr(k) for k, i in self._ambiguous_labels.items() if i in grp)
            raise AmbiguousLevelError(
                f"level {key!r} is ambiguous: it lies in an exactly degenerate group of H0 "
                f"({names}) that V mixes, so no single perturbed level belongs to it. "
                f"Address the group's perturbed levels by energy rank {list(grp)} "
                "(ordered by first-order shift) or use the block treatment."
            )
        if h not in self._label_index:
            raise ValueError(f"unknown level {key!r}: not an energy rank in 0..{self.n - 1} nor a label of {self.name!r}")
        return self._label_index[h]

    def label(self, level: int) -> str:
        """Printable name of a level: its label if it has one, else ``"n=<rank>"``."""
        lab = self._labels[level]
        if lab is None:
            return f"n={level}"
        if isinstance(lab, tuple):
            return "|" + ",".join(str(x) for x in lab) + "⟩"
        return str(lab)

    def degenerate_group_of(self, level: int) -> tuple[int, ...] | None:
        """The exactly degenerate group containing ``level``, or ``None``."""
        for g in self.degenerate_groups:
            if level in g:
                return g
        return None

    # ------------------------------------------------------------------ series
    def series(self, level: Any, order: int, **kwargs: Any):
        """Rayleigh–Schrödinger series of one level; see :func:`ptcheck.series.rs_series`."""
        from .series import rs_series

        return rs_series(self, level, order, **kwargs)

    def block_series(self, levels: Any, order: int, **kwargs: Any):
        """Block (quasi-degenerate) series; see :func:`ptcheck.blocks.block_series`."""
        from .blocks import block_series

        return block_series(self, levels, order, **kwargs)


# ---------------------------------------------------------------------- helpers
def _hashable(x: Any) -> Hashable:
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, (list, np.ndarray)):
        return tuple(_hashable(t) for t in x)
    if isinstance(x, tuple):
        return tuple(_hashable(t) for t in x)
    return x


def _is_diagonal(m: Any) -> bool:
    if sp.issparse(m):
        c = m.tocoo()
        off = c.row != c.col
        return not np.any(c.data[off] != 0)
    return not np.any(m[~np.eye(m.shape[0], dtype=bool)] != 0)


def _permute(m: Any, perm: np.ndarray) -> Any:
    if sp.issparse(m):
        return sp.csr_matrix(m)[perm][:, perm].tocsr()
    return m[np.ix_(perm, perm)]


def _submatrix(m: Any, idx: np.ndarray) -> np.ndarray:
    if sp.issparse(m):
        return m[idx][:, idx].toarray()
    return np.array(m[np.ix_(idx, idx)])


def _maybe_sparse(a: np.ndarray) -> Any:
    tol = 1e-14 * max(float(np.max(np.abs(a))), 1e-300)
    b = np.where(np.abs(a) > tol, a, 0)
    if np.count_nonzero(b) < 0.25 * a.size:
        return sp.csr_matrix(b)
    return a


def _realify(m: Any) -> Any:
    if not np.iscomplexobj(m.data if sp.issparse(m) else m):
        return m
    data = m.data if sp.issparse(m) else m
    if data.size == 0 or np.max(np.abs(data.imag)) == 0:
        return m.real.copy() if not sp.issparse(m) else sp.csr_matrix(m.real)
    return m


def _degenerate_groups(e0: np.ndarray, tol: float) -> list[tuple[int, ...]]:
    groups: list[tuple[int, ...]] = []
    start = 0
    for i in range(1, len(e0) + 1):
        if i == len(e0) or e0[i] - e0[i - 1] > tol:
            if i - start > 1:
                groups.append(tuple(range(start, i)))
            start = i
    return groups


def _spectral_norm(v: Any) -> float:
    n = v.shape[0]
    if sp.issparse(v):
        if v.nnz == 0:
            return 0.0
        if n <= 400:
            return float(np.max(np.abs(np.linalg.eigvalsh(v.toarray()))))
        from scipy.sparse.linalg import eigsh

        w = eigsh(v, k=1, which="LM", return_eigenvectors=False, tol=1e-10)
        return float(abs(w[0]))
    return float(np.max(np.abs(np.linalg.eigvalsh(v)))) if n else 0.0
