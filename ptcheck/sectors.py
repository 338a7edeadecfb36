"""Symmetry sectors: subspaces that ``H(λ) = H0 + λ V`` leaves invariant for every λ.

Two sources of sectors, combined:

* the **coupling graph** (user basis): states i and j are joined when
  ``H0_ij ≠ 0`` or ``V_ij ≠ 0``; its connected components
  (``scipy.sparse.csgraph.connected_components``) never mix, whatever λ;
* **conserved operators** the user declares for symmetries the graph cannot
  see (spin-flip parity of an Ising chain, ...): Hermitian operators that
  commute with ``H0`` and ``V``.  Sectors are their joint eigenspaces inside
  each graph component (an operator is restricted to each component; where it
  maps a component out of itself it has no quantum number there, ``None``).

Levels of different sectors never mix: their crossings are true crossings, and
equal unperturbed energies in different sectors are not a degeneracy for
perturbation theory.

This module holds the sector-finding numerics (private helpers called by
:class:`ptcheck.model.Model`, inputs trusted) and the public :class:`Sector`
record.  Work-basis vectors get definite quantum numbers by diagonalising the
declared operators inside each group of exactly degenerate unperturbed states
of one component:

* fast path: an operator that is a signed permutation involution in the
  unperturbed basis (``P|s⟩ = ±|s'⟩``, ``P² = 1``, e.g. the spin-flip parity
  ``∏σx`` in the σz basis) pairs states as ``(|s⟩ ± P|s⟩)/√2``; the result
  stays sparse at any size;
* any other operator is diagonalised densely inside each degenerate group, up
  to :data:`MAX_CONSERVED_GROUP` states per group (a clear error beyond).
"""

from __future__ import annotations

import html
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from . import _validation as val
from .errors import BasisTooLargeError

__all__ = [
    "Sector",
    "COMMUTATOR_RTOL",
    "MAX_CONSERVED_GROUP",
    "ROUNDOFF_ULPS",
]

#: A declared operator P passes the commutation check when
#: ``‖[P, A] x‖_∞ <= COMMUTATOR_RTOL x ‖P‖_∞ (‖H0 − c‖_∞ + ‖V‖_∞) ‖x‖_∞`` for
#: A = H0 − c (c = the energy offset) and A = V, on three random sign vectors x
#: (∞-norms: largest absolute row sum).  Roundoff of the products is ~1e-16 of
#: the right-hand side, so this allows 7 digits of accumulated input error.
COMMUTATOR_RTOL = 1e-9

#: Largest group of exactly degenerate unperturbed states inside which a
#: declared operator that is not a signed permutation involution is
#: diagonalised densely (eigh of a 2000 x 2000 matrix: about a second).
MAX_CONSERVED_GROUP = 2000

#: Unperturbed energies closer than this many ulps of the largest |E0| are
#: equal to roundoff (e.g. the rounding of a large constant offset).
ROUNDOFF_ULPS = 16


# ============================================================================ record
@dataclass(frozen=True, repr=False)
class Sector:
    """One symmetry sector of a model.

    Attributes
    ----------
    index : int
        Position in ``model.sectors`` (sectors are ordered by their lowest
        unperturbed energy, then graph component, then quantum numbers in
        descending order, so that e.g. "parity +1" precedes "parity -1").
    levels : tuple of int
        Work-basis indices of the sector's levels, ascending.
    quantum_numbers : tuple
        Values of the declared conserved operators in this sector, in the
        order they were declared (``None`` where an operator maps the sector's
        graph component out of itself).  Empty if no operator was declared.
    name : str
        Printable name, e.g. ``"parity +1"``, ``"M -2"`` or ``"component 3"``.
    """

    index: int
    levels: tuple[int, ...]
    quantum_numbers: tuple
    name: str

    @property
    def size(self) -> int:
        """Number of levels in the sector."""
        return len(self.levels)

    def to_dict(self) -> dict:
        """JSON-safe summary (levels included)."""
        return {
            "index": int(self.index),
            "name": self.name,
            "size": self.size,
            "quantum_numbers": [None if q is None else float(q) for q in self.quantum_numbers],
            "levels": [int(i) for i in self.levels],
        }

    def __repr__(self) -> str:
        return f"Sector({self.index}, {self.name!r}, size={self.size})"

    def _repr_html_(self) -> str:
        return f"<b>Sector {self.index}</b>: {html.escape(self.name)}, {self.size} level(s)"


def small_blas() -> Any:
    """Context limiting BLAS to one thread for loops of small dense eigendecompositions.

    Groups of degenerate states are small (<= a few hundred): on a busy machine
    a multi-threaded BLAS was measured 15x slower on them than one thread.
    No-op without threadpoolctl.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - threadpoolctl is a dependency
        import contextlib

        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def format_quantum_number(q: float | None) -> str:
    """``+1``, ``-0.5``, ``0`` (None: ``"n/a"``)."""
    if q is None:
        return "n/a"
    if q == 0:
        return "0"
    return f"{q:+.6g}"


# ============================================================================ declared operators
def conserved_operators(conserved: Any, n: int, hermitian_rtol: float, *, check: bool = True) -> tuple[tuple[str, Any], ...]:
    """Validate the ``conserved=`` argument of Model: ``((name, matrix), ...)``.

    Accepts ``None``, a sequence of operators (named ``conserved[i]``) or a
    mapping ``name -> operator``; each operator like ``h0`` (ndarray,
    scipy.sparse, qutip.Qobj), square N x N, finite and Hermitian.
    """
    if conserved is None:
        return ()
    if isinstance(conserved, Mapping):
        items = []
        for key, op in conserved.items():
            if not isinstance(key, str) or not key.strip():
                raise TypeError(f"conserved operator names must be non-empty strings; got {key!r}")
            items.append((key, op))
    elif isinstance(conserved, (str, bytes)) or not isinstance(conserved, Sequence) or _is_single_operator(conserved):
        raise TypeError(
            "conserved must be a sequence of operators or a mapping name -> operator; "
            f"got {type(conserved).__name__} (wrap a single operator in a list)"
        )
    else:
        items = [(f"conserved[{i}]", op) for i, op in enumerate(conserved)]
    out = []
    for name, op in items:
        m, _ = val.as_operator(op, name)
        if m.shape != (n, n):
            raise ValueError(f"conserved operator {name!r} must have the shape of h0 ({n}, {n}); got {m.shape}")
        if check:  # (skipped for operators a built-in builder made Hermitian by construction)
            val.check_finite(m, name)
            val.check_hermitian(m, name, hermitian_rtol)
        out.append((name, m))
    return tuple(out)


def _is_single_operator(x: Any) -> bool:
    """A matrix passed where a sequence of matrices is expected."""
    if sp.issparse(x) or type(x).__module__.startswith("qutip"):
        return True
    return isinstance(x, np.ndarray) or (
        isinstance(x, Sequence) and len(x) > 0 and isinstance(x[0], Sequence) and len(x[0]) > 0 and np.isscalar(x[0][0])
    )


def _inf_norm(m: Any) -> float:
    """Largest absolute row sum (bounds the spectral norm of a Hermitian matrix)."""
    if sp.issparse(m):
        if m.nnz == 0:
            return 0.0
        return float(np.max(np.asarray(abs(m).sum(axis=1))))
    return float(np.max(np.sum(np.abs(m), axis=1))) if m.size else 0.0


def _shifted(h0: Any, offset: float) -> Any:
    """``h0 − offset·1`` (a copy)."""
    if sp.issparse(h0):
        return (h0 - offset * sp.eye(h0.shape[0], format="csr")).tocsr()
    out = np.array(h0, copy=True)
    out[np.diag_indices_from(out)] -= offset
    return out


def check_commutation(ops: Sequence[tuple[str, Any]], h0: Any, v: Any, offset: float) -> None:
    """Raise ValueError naming the operator and the commutator size if a check fails.

    Each declared operator P must commute with ``H0`` and ``V`` (and the
    declared operators with each other); see :data:`COMMUTATOR_RTOL`.
    """
    if not ops:
        return
    n = h0.shape[0]
    h0s = _shifted(h0, offset)
    norm_h0, norm_v = _inf_norm(h0s), _inf_norm(v)
    rng = np.random.default_rng(20240611)
    x = rng.choice([-1.0, 1.0], size=(n, 3))
    others = [("h0", h0s, norm_h0), ("v", v, norm_v)]
    for k, (name, p) in enumerate(ops):
        norm_p = _inf_norm(p)
        scale = norm_p * (norm_h0 + norm_v)
        for other, a, _ in others + [(o, q, _inf_norm(q)) for o, q in ops[:k]]:
            c = p @ (a @ x) - a @ (p @ x)
            size = float(np.max(np.abs(c))) if c.size else 0.0
            tol = COMMUTATOR_RTOL * scale
            if other in ("h0", "v"):
                allowed = f"{COMMUTATOR_RTOL:g} x ‖{name}‖ (‖h0 − c‖ + ‖v‖) = {tol:.3g}"
            else:
                allowed = f"{COMMUTATOR_RTOL:g} x ‖{name}‖ (‖h0 − c‖ + ‖v‖) = {tol:.3g}; declared operators must commute with each other"
            if not size <= tol:
                raise ValueError(
                    f"conserved operator {name!r} does not commute with {other}: ‖[{name}, {other}] x‖ = {size:.3g} "
                    f"on a random sign vector x (allowed {allowed}; ∞-norms, c = energy offset {offset:.6g}). "
                    "Declare only operators that commute with h0 and v."
                )


# ============================================================================ graph components
def components(h0: Any, v: Any, h0_diagonal: bool) -> np.ndarray:
    """Component label (N,) of every user-basis state; components numbered by first state."""
    n = h0.shape[0]
    if sp.issparse(v) and (h0_diagonal or sp.issparse(h0)):
        g = v if h0_diagonal else (abs(h0) + abs(v)).tocsr()
        g = sp.csr_matrix(g)
        if g.nnz and np.any(g.data == 0):
            g = g.copy()
            g.eliminate_zeros()
        if g.nnz == 0:
            return np.arange(n)
        g = sp.csr_matrix((np.ones(g.nnz), g.indices, g.indptr), shape=g.shape)  # the pattern only
        # strong components of a Hermitian (symmetric) pattern are its components and
        # are found without building the transpose; an asymmetric pattern (round-off
        # entries in one triangle only) falls back to weak components
        _, lab = connected_components(g, directed=True, connection="strong")
        rows = np.repeat(np.arange(n), np.diff(g.indptr))
        if np.any(lab[rows] != lab[g.indices]):
            _, lab = connected_components(g, directed=True, connection="weak")
        return _renumber(lab)
    mask = _dense(v) != 0
    if not h0_diagonal:
        mask |= _dense(h0) != 0
    lab = np.full(n, -1, dtype=np.int64)
    c = 0
    for s in range(n):
        if lab[s] >= 0:
            continue
        lab[s] = c
        front = np.array([s])
        while front.size:
            reach = np.any(mask[front], axis=0) | np.any(mask[:, front], axis=1)
            front = np.flatnonzero(reach & (lab < 0))
            lab[front] = c
        c += 1
    return lab


def _renumber(lab: np.ndarray) -> np.ndarray:
    """Relabel components in order of their first state."""
    _, first = np.unique(lab, return_index=True)
    order = np.argsort(first)
    new = np.empty(order.size, dtype=np.int64)
    new[order] = np.arange(order.size)
    return new[lab]


def _dense(m: Any) -> np.ndarray:
    return m.toarray() if sp.issparse(m) else np.asarray(m)


# ============================================================================ unperturbed basis
def energy_offset(h0: Any) -> float:
    """Lower median of the diagonal of ``h0`` (an actual entry, so subtracting it is exact for equal inputs)."""
    d = np.real(h0.diagonal() if sp.issparse(h0) else np.diag(h0)).astype(float)
    k = (d.size - 1) // 2
    return float(np.partition(d, k)[k])


def unperturbed_basis(h0: Any, offset: float, comp: np.ndarray, h0_diagonal: bool, dense_limit: int) -> tuple[np.ndarray, Any]:
    """Eigenbasis of ``h0`` per graph component.

    Returns ``(e0_rel, transform)``: energies minus ``offset`` (N,) and the
    eigenvectors as columns in the user basis (``None`` when ``h0`` is
    diagonal: the user basis itself), block-diagonal by component.
    """
    n = h0.shape[0]
    d = np.real(h0.diagonal() if sp.issparse(h0) else np.diag(h0)).astype(float)
    e0 = d - offset
    if h0_diagonal:
        return e0, None
    if sp.issparse(h0):
        coo = h0.tocoo()
        off = (coo.row != coo.col) & (coo.data != 0)
        need = np.unique(comp[coo.row[off]])
    else:
        off = np.argwhere(np.asarray(h0) != 0)
        off = off[off[:, 0] != off[:, 1]]
        need = np.unique(comp[off[:, 0]])
    single = np.flatnonzero(~np.isin(comp, need))
    rows, cols, vals = [single], [single], [np.ones(single.size)]
    dtype = np.result_type(h0.dtype, np.float64)
    sizes = np.bincount(comp)[need]
    dense = float(np.sum(sizes.astype(float) ** 2)) > 0.25 * float(n) * n
    out = np.zeros((n, n), dtype=dtype) if dense else None
    if dense:
        out[single, single] = 1.0
    for c in need:
        idx = np.flatnonzero(comp == c)
        if idx.size > dense_limit:
            raise BasisTooLargeError(
                f"h0 is not diagonal and one coupled component of the basis has {idx.size} > {dense_limit} states "
                f"(N = {n}): ptcheck would need a dense eigendecomposition of h0 there. Pass h0 in its eigenbasis "
                "(diagonal, e.g. as a sparse diagonal matrix) or reduce the basis."
            )
        block = h0[idx][:, idx].toarray() if sp.issparse(h0) else np.asarray(h0)[np.ix_(idx, idx)]
        block = np.array(block, dtype=dtype)
        block[np.diag_indices_from(block)] -= offset
        w, u = sla.eigh(block)
        e0[idx] = w
        if dense:
            out[np.ix_(idx, idx)] = u
            continue
        rows.append(np.repeat(idx, idx.size))
        cols.append(np.tile(idx, idx.size))
        vals.append(u.ravel())
    if dense:
        return e0, out
    return e0, sp.csr_matrix((np.concatenate(vals).astype(dtype), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))


def roundoff_clusters(e0: np.ndarray, tol: float) -> np.ndarray:
    """Cluster id (N,) of runs of sorted energies closer than ``tol``; ids ascend with energy."""
    order = np.argsort(e0, kind="stable")
    s = e0[order]
    brk = np.concatenate([[0], (np.diff(s) > tol).astype(np.int64)])
    cid = np.empty(e0.size, dtype=np.int64)
    cid[order] = np.cumsum(brk)
    return cid


def snap_to_cluster_mean(e0: np.ndarray, cid: np.ndarray) -> np.ndarray:
    """Energies of one roundoff cluster replaced by their mean (exactly equal afterwards)."""
    counts = np.bincount(cid)
    if np.all(counts == 1):
        return e0
    mean = np.bincount(cid, weights=e0) / counts
    out = e0.copy()
    multi = counts[cid] > 1
    out[multi] = mean[cid[multi]]
    return out


# ============================================================================ quantum numbers
@dataclass
class ConservedBasis:
    """Result of diagonalising the declared operators (private, mutable).

    ``rotation`` (N, N) sparse, columns = new basis vectors in the unperturbed
    basis (``None``: unchanged).  ``values[:, k]`` are the quantum numbers of
    operator k (NaN: undefined).  For an involution pairing of the first
    operator on the user basis, ``pair_lo``/``pair_hi`` hold the two user
    states of each combination (-1 elsewhere) and ``pair_sign`` its
    eigenvalue; ``rep``/``rep_scale`` give ``V`` in the new basis cheaply.
    ``mixed`` flags positions whose vector is a general rotation.
    """

    values: np.ndarray
    rotation: Any = None
    pair_lo: np.ndarray | None = None
    pair_hi: np.ndarray | None = None
    pair_sign: np.ndarray | None = None
    rep: np.ndarray | None = None
    rep_scale: np.ndarray | None = None
    mixed: np.ndarray | None = None
    general: bool = False  # a dense (non-pairing) rotation was applied


def _in_basis(p: Any, basis: Any) -> Any:
    """``basis^H p basis`` (None = identity); sparse stays sparse."""
    if basis is None:
        return p
    if sp.issparse(basis) and sp.issparse(p):
        return (basis.conj().T @ p @ basis).tocsr()
    b = _dense(basis)
    return b.conj().T @ (p @ b)


def _entries(m: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Non-zero entries (row, col, value); a dense matrix drops entries below 1e-14 of its largest."""
    if sp.issparse(m):
        c = m.tocoo()
        keep = c.data != 0
        return c.row[keep], c.col[keep], c.data[keep]
    a = np.abs(m)
    r, c = np.nonzero(a > 1e-14 * float(a.max(initial=0.0)))
    return r, c, m[r, c]


def _snap_values(x: np.ndarray, scale: float) -> np.ndarray:
    """Cluster equal-to-roundoff eigenvalues and snap them (to multiples of 1/2 when that close)."""
    out = x.copy()
    ok = np.isfinite(x)
    if not np.any(ok):
        return out
    tol = 1e-8 * max(scale, 1e-300)
    y = x[ok]
    order = np.argsort(y, kind="stable")
    s = y[order]
    cid = np.cumsum(np.concatenate([[0], (np.diff(s) > tol).astype(np.int64)]))
    mean = np.bincount(cid, weights=s) / np.bincount(cid)
    half = np.round(2.0 * mean) / 2.0
    mean = np.where(np.abs(mean - half) <= tol, half, mean)
    snapped = np.empty_like(y)
    snapped[order] = mean[cid]
    out[ok] = snapped
    return out


def diagonalise_conserved(
    ops: Sequence[tuple[str, Any]], transform: Any, comp: np.ndarray, cluster: np.ndarray
) -> ConservedBasis:
    """Give every unperturbed basis vector definite quantum numbers of the declared operators.

    ``transform`` holds the unperturbed basis in the user basis (None: the user
    basis itself); ``cluster`` the roundoff-degenerate energy clusters.  Each
    operator is restricted to each graph component it keeps, then
    diagonalised inside the groups (component, energy cluster, quantum numbers
    so far).
    """
    n = comp.size
    k_ops = len(ops)
    values = np.full((n, k_ops), np.nan)
    res = ConservedBasis(values=values)
    group = cluster * (int(comp.max()) + 1) + comp  # joint (cluster, component) id
    rot = None  # cumulative rotation in the unperturbed basis
    for k, (name, p) in enumerate(ops):
        basis = transform if rot is None else (rot if transform is None else _mul(transform, rot))
        m = _in_basis(p, basis)
        r, c, d = _entries(m)
        mmax = float(np.max(np.abs(d))) if d.size else 0.0
        big = np.abs(d) > 1e-12 * max(mmax, 1e-300)
        # components the operator maps out of themselves: no quantum number there
        leak = big & (comp[r] != comp[c])
        open_comp = np.zeros(int(comp.max()) + 1, dtype=bool)
        open_comp[comp[r[leak]]] = True
        open_comp[comp[c[leak]]] = True
        closed = ~open_comp[comp]
        inside = (group[r] == group[c]) & closed[r] & big
        r, c, d = r[inside], c[inside], d[inside]
        if rot is None and transform is None and _is_signed_involution(r, c, d, closed, n):
            new_rot = _pair_states(res, k, r, c, d, closed, n)
        else:
            new_rot = _dense_groups(res, k, name, r, c, d, closed, group, n)
        if new_rot is not None:
            rot = new_rot if rot is None else (rot @ new_rot).tocsr()
        res.values[:, k] = _snap_values(res.values[:, k], mmax)
        # refine the groups by this operator's quantum numbers
        key = np.where(np.isfinite(res.values[:, k]), res.values[:, k], np.inf)
        _, q = np.unique(key, return_inverse=True)
        group = group * (int(q.max()) + 1) + q
        _, group = np.unique(group, return_inverse=True)
    res.rotation = rot
    return res


def _mul(a: Any, b: Any) -> Any:
    if sp.issparse(a) and sp.issparse(b):
        return (a @ b).tocsr()
    return np.asarray(a @ b)


def _is_signed_involution(r: np.ndarray, c: np.ndarray, d: np.ndarray, closed: np.ndarray, n: int) -> bool:
    """One entry ±1 per row of the closed part, symmetric: a signed permutation with P² = 1."""
    if np.iscomplexobj(d) and np.any(np.abs(d.imag) > 1e-12):
        return False
    d = np.real(d)
    counts = np.bincount(r, minlength=n)
    if np.any(counts[closed] != 1) or np.any(counts[~closed] != 0):
        return False
    if np.any(np.abs(np.abs(d) - 1.0) > 1e-12):
        return False
    partner = np.full(n, -1, dtype=np.int64)
    sign = np.zeros(n)
    partner[r] = c
    sign[r] = np.sign(d)
    rows = np.flatnonzero(closed)
    back = partner[partner[rows]]
    return bool(np.all(back == rows) and np.all(sign[partner[rows]] == sign[rows]))


def _pair_states(res: ConservedBasis, k: int, r: np.ndarray, c: np.ndarray, d: np.ndarray, closed: np.ndarray, n: int) -> Any:
    """Fast path: fixed points keep their state; pairs (s, s') become (|s⟩ ± t|s'⟩)/√2."""
    partner = np.arange(n, dtype=np.int64)
    t = np.zeros(n)
    partner[r] = c
    t[r] = np.sign(np.real(d))
    fixed = closed & (partner == np.arange(n))
    lo = np.flatnonzero(closed & (partner > np.arange(n)))
    hi = partner[lo]
    res.values[fixed, k] = t[fixed]
    res.values[lo, k] = 1.0
    res.values[hi, k] = -1.0
    if lo.size == 0:
        return None
    s = 1.0 / np.sqrt(2.0)
    single = np.flatnonzero(~np.isin(np.arange(n), np.concatenate([lo, hi])))
    tt = t[lo]
    rows = np.concatenate([single, lo, hi, lo, hi])
    cols = np.concatenate([single, lo, lo, hi, hi])
    vals = np.concatenate([np.ones(single.size), np.full(lo.size, s), s * tt, np.full(lo.size, s), -s * tt])
    rot = sp.csr_matrix((vals, (rows, cols)), shape=(n, n))
    res.pair_lo = np.full(n, -1, dtype=np.int64)
    res.pair_hi = np.full(n, -1, dtype=np.int64)
    res.pair_sign = np.zeros(n)
    res.pair_lo[lo], res.pair_lo[hi] = lo, lo
    res.pair_hi[lo], res.pair_hi[hi] = hi, hi
    res.pair_sign[lo], res.pair_sign[hi] = 1.0, -1.0
    res.rep = np.arange(n, dtype=np.int64)
    res.rep[hi] = lo
    res.rep_scale = np.ones(n)
    res.rep_scale[lo] = np.sqrt(2.0)
    res.rep_scale[hi] = np.sqrt(2.0)
    return rot


def _group_eigh(
    name: str, groups: np.ndarray, starts: np.ndarray, ends: np.ndarray, order: np.ndarray, group: np.ndarray,
    r: np.ndarray, c: np.ndarray, d: np.ndarray, n: int, dtype: Any,
) -> list:
    """(indices, eigenvalues, eigenvectors) of the operator inside each group it mixes."""
    out = []
    for g, a, b in zip(groups, starts, ends):
        idx = np.sort(order[a:b])
        if idx.size > MAX_CONSERVED_GROUP:
            raise ValueError(
                f"conserved operator {name!r} mixes a group of {idx.size} exactly degenerate unperturbed states "
                f"(more than {MAX_CONSERVED_GROUP}); ptcheck diagonalises a general operator densely inside such "
                "groups. Declare it as a signed permutation (entries ±1, P² = 1) in a basis where h0 is diagonal, "
                "or split the degeneracy."
            )
        pos = np.full(n, -1, dtype=np.int64)
        pos[idx] = np.arange(idx.size)
        mine = group[r] == g
        block = np.zeros((idx.size, idx.size), dtype=dtype)
        block[pos[r[mine]], pos[c[mine]]] = d[mine]
        w, u = np.linalg.eigh(0.5 * (block + block.conj().T))
        out.append((idx, w, u))
    return out


def _dense_groups(
    res: ConservedBasis, k: int, name: str, r: np.ndarray, c: np.ndarray, d: np.ndarray, closed: np.ndarray, group: np.ndarray, n: int
) -> Any:
    """General path: eigh of the operator inside each group it mixes; diagonal elsewhere."""
    diag = np.zeros(n, dtype=d.dtype if d.size else float)
    on = r == c
    diag[r[on]] = d[on]
    vals = np.real(diag).astype(float)
    offd = ~on
    mixed_groups = np.unique(group[r[offd]])
    res.values[:, k] = np.where(closed, vals, np.nan)
    if mixed_groups.size == 0:
        return None
    rows, cols, data = [], [], []
    touched = np.zeros(n, dtype=bool)
    order = np.argsort(group, kind="stable")
    starts = np.searchsorted(group[order], mixed_groups)
    ends = np.searchsorted(group[order], mixed_groups, side="right")
    sel = np.isin(group[r], mixed_groups)
    r2, c2, d2 = r[sel], c[sel], d[sel]
    with small_blas():
        blocks = _group_eigh(name, mixed_groups, starts, ends, order, group, r2, c2, d2, n, d.dtype)
    for idx, w, u in blocks:
        res.values[idx, k] = w
        rows.append(np.repeat(idx, idx.size))
        cols.append(np.tile(idx, idx.size))
        data.append(u.ravel())
        touched[idx] = True
    rest = np.flatnonzero(~touched)
    rows.append(rest), cols.append(rest), data.append(np.ones(rest.size))
    res.general = True
    if res.mixed is None:
        res.mixed = np.zeros(n, dtype=bool)
    res.mixed |= touched
    dtype = np.result_type(*[x.dtype for x in data], np.float64)
    return sp.csr_matrix((np.concatenate(data).astype(dtype), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))


# ============================================================================ sectors
def sector_ids(comp: np.ndarray, values: np.ndarray, e0: np.ndarray) -> tuple[np.ndarray, list[tuple]]:
    """Sector index (N,) and the quantum numbers of each sector.

    Sectors are the distinct (component, quantum numbers) pairs, ordered by
    lowest energy, then component, then quantum numbers descending.
    """
    n = comp.size
    if values.shape[1] == 0:
        keys = [comp]
    else:
        keys = [comp] + [np.where(np.isfinite(values[:, k]), values[:, k], np.inf) for k in range(values.shape[1])]
    order = np.lexsort(keys[::-1])
    brk = np.zeros(n, dtype=bool)
    brk[0] = True
    for key in keys:
        s = key[order]
        brk[1:] |= s[1:] != s[:-1]
    raw = np.empty(n, dtype=np.int64)
    raw[order] = np.cumsum(brk) - 1
    m = int(raw.max()) + 1
    starts = order[brk]
    lowest = np.full(m, np.inf)
    np.minimum.at(lowest, raw, e0)
    rcomp = comp[starts]
    rq = values[starts] if values.shape[1] else np.zeros((m, 0))
    sort_keys = [np.where(np.isfinite(rq[:, k]), -rq[:, k], np.inf) for k in range(rq.shape[1])][::-1] + [rcomp, lowest]
    rank = np.lexsort(sort_keys)
    new = np.empty(m, dtype=np.int64)
    new[rank] = np.arange(m)
    qn = [tuple(None if not np.isfinite(x) else float(x) for x in rq[i]) for i in rank]
    return new[raw], [(int(rcomp[i]), q) for i, q in zip(rank, qn)]


def sector_names(info: list[tuple], op_names: Sequence[str]) -> list[str]:
    """Printable names: quantum numbers, or the component when they do not tell sectors apart."""
    if len(info) == 1 and not op_names:
        return ["all levels"]
    base = []
    for comp, qn in info:
        parts = [f"{nm} {format_quantum_number(q)}" for nm, q in zip(op_names, qn) if q is not None]
        base.append(", ".join(parts))
    counts: dict[str, int] = {}
    for b in base:
        counts[b] = counts.get(b, 0) + 1
    out = []
    for (comp, _), b in zip(info, base):
        if not b:
            out.append(f"component {comp}")
        elif counts[b] > 1:
            out.append(f"{b} (component {comp})")
        else:
            out.append(b)
    return out
