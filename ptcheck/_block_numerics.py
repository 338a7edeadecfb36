"""Numerics behind :mod:`ptcheck.blocks` (private; callers validate inputs).

Everything works in the work basis, where ``H0 = diag(e0)``.  A block ``P`` is an
index array of ``p`` levels; ``Q`` is the rest.  Full-space objects restricted to
the block's columns are ``(N, p)`` arrays, so a model with sparse ``V`` only ever
needs sparse-times-``(N, p)`` products.

Schrieffer–Wolff (canonical van Vleck) effective Hamiltonian
------------------------------------------------------------
1. Bloch's wave operator ``Ω = P + X`` (``X = Q X P``, intermediate normalisation)
   order by order (Bloch, Nucl. Phys. 6, 329 (1958); Lindgren, J. Phys. B 7, 2441
   (1974)):

       X_k = D ∘ [ Q V Ω_{k-1} - Σ_{j=1}^{k-1} X_j W_{k-1-j} ],   W_m = P V Ω_m,
       D_qp = 1 / (E_p - E_q),

   which is the order-λ^k part of ``X E_P - E_Q X = λ Q V Ω - λ X P V Ω``.
2. Bloch's (non-Hermitian) ``H_B = P H Ω = E_P + λ P V Ω`` satisfies ``H Ω = Ω H_B``,
   so ``Ω† H Ω = S H_B`` with ``S = Ω†Ω = 1 + X†X``.  des Cloizeaux's Hermitian
   effective Hamiltonian is therefore

       H_eff = S^{-1/2} (Ω† H Ω) S^{-1/2} = S^{1/2} H_B S^{-1/2},

   with ``S^{±1/2}`` expanded as power series of ``p x p`` matrices.  The isometry
   ``U = Ω S^{-1/2}`` maps the block onto the exact invariant subspace; it is the
   direct rotation whose generator is block-off-diagonal, i.e. the canonical van
   Vleck / Schrieffer–Wolff transformation (Shavitt & Redmon, J. Chem. Phys. 73,
   5711 (1980)).  ``tests/test_blocks.py`` checks the coefficients against the
   Taylor coefficients of ``W diag(E) W†`` built from exact eigenvectors.

Brillouin–Wigner / Löwdin partitioning
--------------------------------------
``H_eff(E) = E_P + λ PVP + Σ_{m=2}^{k} λ^m P V (R(E) V)^{m-1} P`` with the diagonal
``R(E) = Q (E - Q H0 Q)^{-1} Q``; each eigenvalue is solved self-consistently
(secant iteration on ``ε(E) - E``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: Largest number of ``(N, p)`` entries held at once by a batched
#: Brillouin–Wigner evaluation (memory guard).
_BW_BATCH_ENTRIES = 2_000_000


# ============================================================== Schrieffer–Wolff
@dataclass(frozen=True)
class SWCoefficients:
    """Power-series pieces of the Schrieffer–Wolff construction (private)."""

    heff: np.ndarray  # (K+1, p, p) Hermitian parts of H_eff^(k)
    omega: np.ndarray  # (N, K+1, p): omega[:, k, :] = Ω_k (Ω_0 = P, Ω_k = X_k)
    s_inv_sqrt: np.ndarray  # (K+1, p, p) coefficients of S^{-1/2}
    residual: np.ndarray  # (K+1,) anti-Hermitian residual relative to the roundoff scale
    finite_order: int  # highest order whose coefficients are finite (== K when all fine)


def _conv_norms(*arrays: np.ndarray) -> np.ndarray:
    out = arrays[0]
    for a in arrays[1:]:
        out = np.convolve(out, a)
    return out


def sw_coefficients(e0: np.ndarray, v, block: np.ndarray, order: int) -> SWCoefficients:
    """Schrieffer–Wolff ``H_eff^(0..order)`` and ``U^(0..order)`` of a block.

    Cost: ``order`` products of ``V`` with an ``(N, p)`` array plus
    ``O(order² N p²)``.
    """
    n = e0.size
    p = block.size
    dtype = np.result_type(v.dtype, np.float64)
    in_q = np.ones(n, dtype=bool)
    in_q[block] = False
    ep = e0[block]
    d = np.zeros((n, p))
    d[in_q] = 1.0 / (ep[None, :] - e0[in_q][:, None])

    # omega[:, k, :] = Ω_k (N, p); stored (N, K+1, p) so that sums over orders are one matmul
    omega = np.zeros((n, order + 1, p), dtype=dtype)
    omega[block, 0, np.arange(p)] = 1.0
    w = np.zeros((order + 1, p, p), dtype=dtype)  # W_m = P V Ω_m
    finite_order = order
    with np.errstate(over="ignore", invalid="ignore"):
        for k in range(1, order + 1):
            vo = np.asarray(v @ omega[:, k - 1, :])
            w[k - 1] = vo[block]
            rhs = vo
            if k >= 2:
                # Σ_{j=1}^{k-1} X_j W_{k-1-j}
                for j in range(1, k):
                    rhs = rhs - omega[:, j, :] @ w[k - 1 - j]
            omega[:, k, :] = d * rhs
            if not (np.all(np.isfinite(omega[:, k, :])) and np.all(np.isfinite(w[k - 1]))):
                finite_order = k - 1
                break
    kmax = finite_order

    # S = 1 + Σ_k λ^k S_k,  S_k = Σ_{i=1}^{k-1} X_i† X_{k-i}
    x = omega[:, 1 : kmax + 1, :].reshape(n, kmax * p)
    # (einsum, not BLAS: a threaded BLAS is erratic for this tall-skinny product on a busy machine)
    gram = np.einsum("ni,nj->ij", x.conj(), x).reshape(kmax, p, kmax, p).transpose(0, 2, 1, 3)
    eye = np.eye(p, dtype=dtype)
    s = np.zeros((kmax + 1, p, p), dtype=dtype)
    for k in range(2, kmax + 1):
        for i in range(1, k):
            s[k] += gram[i - 1, k - i - 1]
    t = np.zeros_like(s)  # S^{1/2}
    ti = np.zeros_like(s)  # S^{-1/2}
    t[0] = eye
    ti[0] = eye
    for k in range(1, kmax + 1):
        acc = s[k].copy()
        for i in range(1, k):
            acc -= t[i] @ t[k - i]
        t[k] = 0.5 * acc
    for k in range(1, kmax + 1):
        acc = np.zeros((p, p), dtype=dtype)
        for i in range(k):
            acc -= ti[i] @ t[k - i]
        ti[k] = acc

    hb = np.zeros((kmax + 1, p, p), dtype=dtype)
    hb[0] = np.diag(ep).astype(dtype)
    hb[1:] = w[:kmax]
    left = np.zeros_like(hb)  # (S^{1/2} H_B)_m
    for m in range(kmax + 1):
        for a in range(m + 1):
            left[m] += t[a] @ hb[m - a]
    heff = np.zeros_like(hb)
    for k in range(kmax + 1):
        for m in range(k + 1):
            heff[k] += left[m] @ ti[k - m]

    fro = lambda a: np.linalg.norm(a, axis=(1, 2))  # noqa: E731
    scale = _residual_scale(_conv_norms(fro(t), fro(hb), fro(ti))[: kmax + 1], e0, v, block)
    anti = fro(heff - np.conj(np.swapaxes(heff, 1, 2)))
    tiny = np.finfo(float).tiny
    residual = anti / (2.0 * np.maximum(scale, tiny))
    heff = 0.5 * (heff + np.conj(np.swapaxes(heff, 1, 2)))

    return SWCoefficients(heff=heff, omega=omega[:, : kmax + 1, :], s_inv_sqrt=ti, residual=residual, finite_order=finite_order)


def _residual_scale(direct: np.ndarray, e0: np.ndarray, v, block: np.ndarray) -> np.ndarray:
    """Scale against which the anti-Hermitian round-off of ``H_eff^(k)`` is judged.

    ``direct[k]`` (the size of the products that make up order k) vanishes for
    orders that vanish by symmetry (e.g. odd orders under parity), while their
    computed coefficients still carry round-off inherited from the neighbouring
    orders (cancellations of products of size ~ the order-(k-1) pieces times
    ‖V‖ / gap).  The scale is therefore the larger of ``direct[k]`` and the
    geometric continuation ``max_{j<k} direct[j] ρ^(k-j)`` with
    ``ρ = ‖V P‖ / gap``, which does not vanish with the coefficient.
    """
    p = block.size
    n = e0.size
    in_q = np.ones(n, dtype=bool)
    in_q[block] = False
    if not np.any(in_q):
        return direct
    gap = float(np.min(np.abs(e0[in_q][:, None] - e0[block][None, :])))
    basis = np.zeros((n, p))
    basis[block, np.arange(p)] = 1.0
    vcol = float(np.linalg.norm(np.asarray(v @ basis), ord=2))
    if not (gap > 0 and vcol > 0):
        return direct
    rho = vcol / gap
    out = direct.astype(float).copy()
    with np.errstate(over="ignore"):
        for k in range(1, out.size):
            cont = float(np.max(direct[:k] * rho ** np.arange(k, 0, -1)))
            if np.isfinite(cont):
                out[k] = max(out[k], cont)
    return out


def isometry_at(sw: SWCoefficients, order: int, couplings: np.ndarray) -> np.ndarray:
    """``U^{(≤order)}(λ) = Σ_{k≤order} λ^k U_k``, ``U_k = Σ_a Ω_a S^{-1/2}_{k-a}``: (C, N, p)."""
    ti = sw.s_inv_sqrt[: order + 1]
    powers = couplings[:, None] ** np.arange(order + 1)[None, :]  # (C, K+1)
    # Σ_k λ^k Σ_a Ω_a T_{k-a} = Σ_a Ω_a λ^a Σ_b λ^b T_b  with b <= order - a
    n, _, p = sw.omega.shape
    out = np.zeros((couplings.size, n, p), dtype=np.result_type(sw.omega.dtype, ti.dtype))
    for a in range(order + 1):
        tb = np.einsum("cb,bpq->cpq", powers[:, : order - a + 1].astype(ti.dtype), ti[: order - a + 1])
        out += powers[:, a, None, None] * np.einsum("np,cpq->cnq", sw.omega[:, a, :], tb)
    return out


def evaluate_polynomial(coefficients: np.ndarray, couplings: np.ndarray) -> np.ndarray:
    """``Σ_j λ^j C_j`` for every coupling: (K+1, a, b), (G,) -> (G, a, b)."""
    powers = couplings[:, None] ** np.arange(coefficients.shape[0])[None, :]
    return np.einsum("gj,jab->gab", powers.astype(coefficients.dtype), coefficients)


# ================================================================ eigen-tracking
def _degenerate_clusters(w: np.ndarray, tol: float) -> list[np.ndarray]:
    """Runs of (sorted) eigenvalues closer than ``tol`` (size >= 2 only)."""
    out, start = [], 0
    for i in range(1, w.size + 1):
        if i == w.size or w[i] - w[i - 1] > tol:
            if i - start > 1:
                out.append(np.arange(start, i))
            start = i
    return out


def _greedy_assignment(weights: np.ndarray) -> np.ndarray:
    """``perm[i]`` = column given to row i, taking the largest remaining weight first.

    For the unitary overlap matrices used here, whenever every assigned weight
    exceeds 1/2 (all accepted steps have >= QUALITY) the assignment is unique,
    so the greedy choice is the optimal one.

    When the rows' largest weights lie in distinct columns (the usual case
    along a tracked path), the greedy choice is that column for every row:
    it is returned without the loop.
    """
    rows = weights.argmax(axis=1)
    if len(set(rows.tolist())) == rows.size and np.isfinite(weights).all():
        return rows
    w = weights.astype(float).copy()
    p = w.shape[0]
    perm = np.empty(p, dtype=int)
    for _ in range(p):
        i, j = np.unravel_index(int(np.argmax(w)), w.shape)
        perm[i] = j
        w[i, :] = -1.0
        w[:, j] = -1.0
    return perm


def match_eigenvectors(ref: np.ndarray, w: np.ndarray, vecs: np.ndarray, degeneracy_tol: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Assign eigenpairs ``(w, vecs)`` to the columns of ``ref`` by overlap.

    Inside a cluster of degenerate eigenvalues the eigenvectors are first
    rotated to align with the reference (orthogonal Procrustes), so that a
    degenerate subspace does not scramble the assignment.

    Returns
    -------
    energies : (p,) assigned eigenvalue of each reference column
    vectors : (p, p) assigned eigenvectors (column i ↔ ref column i), phase
        chosen so that ``<ref_i|vec_i>`` is real and >= 0
    quality : float
        Smallest assigned overlap ``|<ref_i|vec_i>|²``.
    """
    clusters = _degenerate_clusters(w, degeneracy_tol)
    vecs = vecs.copy() if clusters else np.ascontiguousarray(vecs)  # (rotated in place below)
    for c in clusters:
        b = vecs[:, c]
        o = b.conj().T @ ref  # (m, p)
        weight = np.sum(np.abs(o) ** 2, axis=0)
        sel = np.sort(np.argsort(-weight, kind="stable")[: c.size])
        uu, _, vh = np.linalg.svd(o[:, sel])
        vecs[:, c] = b @ (uu @ vh)
    ov = ref.conj().T @ vecs  # (p_ref, p_new)
    perm = _greedy_assignment(np.abs(ov) ** 2)
    phase = ov[np.arange(perm.size), perm]
    mag = np.abs(phase)
    if (mag > 0).all():
        unit = np.conj(phase) / mag
    else:  # a zero overlap keeps its vector's phase
        unit = np.where(mag > 0, np.conj(phase) / np.where(mag > 0, mag, 1.0), 1.0)
    return w[perm], vecs[:, perm] * unit[None, :], float(np.min(mag**2)) if mag.size else 1.0


@dataclass(frozen=True)
class TrackResult:
    energies: np.ndarray  # (p, C)
    vectors: np.ndarray  # (C, p, p): vectors[c][:, i] = block-basis eigenvector of level i
    ambiguous: bool  # some step could not be resolved to overlap >= QUALITY


#: Smallest accepted overlap between assigned eigenvectors of neighbouring path points.
QUALITY = 0.9
#: Equal steps of a path from its start to its farthest coupling (before any bisection).
PATH_STEPS = 32
#: Tracked points kept per truncation order for warm starts (:func:`track_point`).
MAX_ANCHORS = 512
_MAX_DEPTH = 40
_BUDGET = 20_000


def track_branches(
    heff: np.ndarray,
    couplings: np.ndarray,
    guess_vectors: np.ndarray,
    guess_coupling: float,
    scale: float,
    *,
    cluster_rtol: float | None = None,
    steps: int = PATH_STEPS,
) -> TrackResult:
    """Follow the eigenbranches of ``H_eff(λ) = Σ_j λ^j heff[j]`` from ``±guess_coupling``.

    ``guess_vectors[:, i]`` is the (limit) eigenvector of block level ``i`` near
    λ = 0.  Four monotone paths start at ±guess_coupling (outwards and inwards
    towards 0), each through ``steps`` equal steps to its farthest coupling
    besides the couplings asked for; neighbouring points are matched by
    eigenvector overlap, and an interval is bisected while the overlap is
    below :data:`QUALITY`.

    Eigenvalues closer than ``1e-10 x scale`` count as numerically degenerate
    (their eigenvectors are aligned with the previous point).  With
    ``cluster_rtol`` the threshold is ``cluster_rtol x ‖H_eff(λ)‖`` instead: for
    an ``H_eff`` whose constant part has been removed (a degenerate group,
    whose splitting can start at a high order), so that a small but resolved
    splitting is followed rather than taken for a degeneracy.
    """
    p = heff.shape[1]
    c = couplings.size
    energies = np.zeros((p, c))
    vectors = np.zeros((c, p, p), dtype=np.result_type(heff.dtype, guess_vectors.dtype))
    tiny = np.finfo(float).tiny
    fixed_dtol = 1e-10 * max(scale, tiny)

    def cluster_tol(w: np.ndarray) -> float:
        if cluster_rtol is None:
            return fixed_dtol
        return cluster_rtol * max(float(np.max(np.abs(w), initial=0.0)), tiny)

    state = {"budget": _BUDGET, "ambiguous": False}

    def eig(lams: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return np.linalg.eigh(evaluate_polynomial(heff, lams))

    def step(a: float, ref: np.ndarray, b: float, wb: np.ndarray, vb: np.ndarray, depth: int):
        e, vv, q = match_eigenvectors(ref, wb, vb, cluster_tol(wb))
        if q >= QUALITY:
            return e, vv
        if depth >= _MAX_DEPTH or state["budget"] <= 0:
            state["ambiguous"] = True
            return e, vv
        state["budget"] -= 1
        mid = 0.5 * (a + b)
        wm, vm = eig(np.array([mid]))
        _, refm = step(a, ref, mid, wm[0], vm[0], depth + 1)
        return step(mid, refm, b, wb, vb, depth + 1)

    for sign in (+1.0, -1.0):
        start = sign * guess_coupling
        side = couplings * sign >= 0 if sign > 0 else couplings < 0
        for outward in (True, False):
            if outward:
                sel = np.flatnonzero(side & (np.abs(couplings) >= guess_coupling))
            else:
                sel = np.flatnonzero(side & (np.abs(couplings) < guess_coupling))
            if sel.size == 0:
                continue
            order = np.argsort(np.abs(couplings[sel]))
            if not outward:
                order = order[::-1]
            sel = sel[order]
            end = couplings[sel[-1]]
            fill = np.linspace(start, end, steps + 1)[1:]
            pts = np.concatenate([couplings[sel], fill])
            pts = pts[np.argsort(np.abs(pts - start), kind="stable")]
            w_all, v_all = eig(np.concatenate([[start], pts]))
            _, ref, _ = match_eigenvectors(guess_vectors, w_all[0], v_all[0], cluster_tol(w_all[0]))
            clean = _clean_path(ref, w_all[1:], v_all[1:], fixed_dtol, cluster_rtol)
            if clean is not None:
                results = list(zip(pts, *clean))
            else:
                prev = start
                results = []
                for g, lam in enumerate(pts):
                    e, ref = step(prev, ref, lam, w_all[g + 1], v_all[g + 1], 0)
                    results.append((lam, e, ref))
                    prev = lam
            lookup = {}
            for lam, e, ref_ in results:
                lookup[float(lam)] = (e, ref_)
            for i in sel:
                e, ref_ = lookup[float(couplings[i])]
                energies[:, i] = e
                vectors[i] = ref_
    return TrackResult(energies=energies, vectors=vectors, ambiguous=bool(state["ambiguous"]))


def _clean_path(ref: np.ndarray, w: np.ndarray, v: np.ndarray, dtol: float, cluster_rtol: float | None
                ) -> tuple[np.ndarray, np.ndarray] | None:
    """Every step of a real path matched at once, when no step needs more than the plain rule.

    The plain rule (what :func:`match_eigenvectors` does at a step without
    degenerate eigenvalues whose rows have their largest overlaps in distinct
    columns, all >= :data:`QUALITY`): each branch goes to its largest overlap,
    sign chosen so that the overlap is positive.  For real eigenvectors the
    overlaps with the previous matched vectors are ± the overlaps of the raw
    eigenvectors, so the whole path follows from one batched product; the
    result is bit for bit the step-by-step one.  ``None`` (walk step by step
    instead) for complex vectors or as soon as one step needs more: a
    degenerate cluster, a contested column, an overlap below QUALITY.

    ``ref``: (p, p) matched vectors at the start; ``w``, ``v``: (G, p) and
    (G, p, p) eigenpairs of the path's points; degeneracy threshold ``dtol``,
    or ``cluster_rtol x max|w|`` per point.  Returns energies (G, p) and
    matched vectors (G, p, p).
    """
    if np.iscomplexobj(v) or np.iscomplexobj(ref):
        return None
    g_n, p = w.shape
    if p > 1:
        tol = dtol if cluster_rtol is None else cluster_rtol * np.maximum(np.max(np.abs(w), axis=1), np.finfo(float).tiny)
        if not np.all(np.diff(w, axis=1) > np.reshape(tol, (-1, 1))):
            return None
    prev = np.concatenate([ref[None], v[:-1]])
    o = np.swapaxes(prev, 1, 2) @ v  # o[g] = prev[g]^T v[g]: rows = previous raw columns (level order at g = 0)
    wts = np.abs(o) ** 2
    sigma = wts.argmax(axis=2)
    if np.take_along_axis(wts, sigma[..., None], 2).min() < QUALITY:
        return None
    if not np.array_equal(np.sort(sigma, axis=1), np.broadcast_to(np.arange(p), sigma.shape)):
        return None
    cols = np.empty_like(sigma)  # cols[g, i]: raw column of level i at point g
    col = np.arange(p)
    for g in range(g_n):
        col = sigma[g][col]
        cols[g] = col
    rows = np.concatenate([np.arange(p)[None], cols[:-1]])
    ov = o[np.arange(g_n)[:, None], rows, cols]
    sign = np.cumprod(ov / np.abs(ov), axis=0)
    return np.take_along_axis(w, cols, 1), np.take_along_axis(v, cols[:, None, :], 2) * sign[:, None, :]


def track_point(
    heff: np.ndarray,
    coupling: float,
    guess_vectors: np.ndarray,
    guess_coupling: float,
    scale: float,
    anchors: list[tuple[float, np.ndarray]],
) -> TrackResult:
    """:func:`track_branches` at one coupling, started from the nearest point already tracked on its path.

    The path of ``coupling`` runs monotonically from ``±guess_coupling``; a
    point tracked before (``anchors``: ``(coupling, vectors)`` pairs of the
    same ``heff``, unambiguous) that lies on it, between the start and
    ``coupling``, carries the branches as well as the start does.  The path
    continues from the nearest such point, in steps no longer than a fresh
    path's (``|coupling - start| / PATH_STEPS``), so a search that visits
    nearby couplings one at a time tracks each of them in a few steps instead
    of :data:`PATH_STEPS`.  The result is added to ``anchors`` (when
    unambiguous).
    """
    lam = float(coupling)
    start = math.copysign(guess_coupling, lam)
    span = abs(lam - start)
    best = None
    if span > 0 and anchors:
        a = np.array([x for x, _ in anchors])
        on_path = (np.sign(a) == np.sign(lam)) & (np.abs(a - start) <= span) & (np.abs(a - lam) <= span)
        if on_path.any():
            best = int(np.flatnonzero(on_path)[np.argmin(np.abs(a[on_path] - lam))])
    if best is None:
        tr = track_branches(heff, np.array([lam]), guess_vectors, guess_coupling, scale)
    else:
        a_lam, a_vec = anchors[best]
        steps = max(1, math.ceil(PATH_STEPS * abs(lam - a_lam) / span))
        tr = track_branches(heff, np.array([lam]), a_vec, abs(a_lam), scale, steps=steps)
    remember(anchors, np.array([lam]), tr)
    return tr


def remember(anchors: list[tuple[float, np.ndarray]], couplings: np.ndarray, tr: TrackResult) -> None:
    """Add the tracked points of ``tr`` to ``anchors`` (unambiguous results only; at most :data:`MAX_ANCHORS`)."""
    if tr.ambiguous:
        return
    if len(anchors) + couplings.size > MAX_ANCHORS:
        anchors.clear()
    anchors.extend((float(x), tr.vectors[i]) for i, x in enumerate(couplings) if x != 0)


def guess_vectors(
    heff: np.ndarray, guess_coupling: float, tie_sets: list[np.ndarray], scale: float
) -> np.ndarray:
    """Eigenvectors of ``H_eff(guess_coupling)`` assigned to the block levels.

    Columns are assigned by largest overlap with the block basis vectors
    (work basis = good states), except inside a *tie set* (levels of one
    exactly degenerate group with equal first-order shift), whose branches are
    given to its levels in ascending energy at the (positive) guess coupling.
    """
    p = heff.shape[1]
    w, vecs = np.linalg.eigh(evaluate_polynomial(heff, np.array([guess_coupling]))[0])
    eye = np.eye(p, dtype=vecs.dtype)
    _, out, _ = match_eigenvectors(eye, w, vecs, 1e-10 * max(scale, np.finfo(float).tiny))
    energies = np.real(np.einsum("ai,ab,bi->i", out.conj(), evaluate_polynomial(heff, np.array([guess_coupling]))[0], out))
    for ts in tie_sets:
        order = np.argsort(energies[ts], kind="stable")
        out[:, ts] = out[:, ts[order]]
        energies[ts] = energies[ts[order]]
    return out


# ============================================================ Brillouin–Wigner
def _resolvent(e0: np.ndarray, in_q: np.ndarray, energies: np.ndarray) -> np.ndarray:
    """``R(E)`` diagonals, shape (B, N); zero on block rows."""
    with np.errstate(divide="ignore", invalid="ignore"):
        r = 1.0 / (energies[:, None] - e0[None, :])
    r[:, ~in_q] = 0.0
    return r


def bw_matrices(e0: np.ndarray, v, block: np.ndarray, order: int, energies: np.ndarray) -> np.ndarray:
    """``M_m(E) = P V (R(E) V)^{m-1} P`` for m = 0..order, each E: (B, order+1, p, p).

    ``M_0 = E_P`` and ``M_1 = PVP`` do not depend on E.
    """
    n, p, b = e0.size, block.size, energies.size
    dtype = np.result_type(v.dtype, np.float64)
    in_q = np.ones(n, dtype=bool)
    in_q[block] = False
    out = np.zeros((b, order + 1, p, p), dtype=dtype)
    out[:, 0] = np.diag(e0[block])
    if order == 0:
        return out
    basis = np.zeros((n, p), dtype=dtype)
    basis[block, np.arange(p)] = 1.0
    z1 = np.asarray(v @ basis)  # (N, p)
    out[:, 1] = z1[block]
    if order == 1:
        return out
    chunk = max(1, _BW_BATCH_ENTRIES // max(n * p, 1))
    for lo in range(0, b, chunk):
        hi = min(b, lo + chunk)
        r = _resolvent(e0, in_q, energies[lo:hi])  # (B', N)
        z = np.broadcast_to(z1[:, None, :], (n, hi - lo, p))
        for m in range(2, order + 1):
            y = r.T[:, :, None] * z  # (N, B', p)
            z = np.asarray(v @ y.reshape(n, -1)).reshape(n, hi - lo, p)
            out[lo:hi, m] = np.transpose(z[block], (1, 0, 2))
    return out


def bw_states(e0: np.ndarray, v, block: np.ndarray, order: int, energies: np.ndarray, couplings: np.ndarray, phis: np.ndarray) -> np.ndarray:
    """``Σ_{m=0}^{order} λ^m (R(E) V)^m P φ`` (un-normalised), shape (B, N)."""
    n, b = e0.size, energies.size
    dtype = np.result_type(v.dtype, np.float64, phis.dtype)
    in_q = np.ones(n, dtype=bool)
    in_q[block] = False
    out = np.zeros((b, n), dtype=dtype)
    chunk = max(1, _BW_BATCH_ENTRIES // max(n, 1))
    for lo in range(0, b, chunk):
        hi = min(b, lo + chunk)
        r = _resolvent(e0, in_q, energies[lo:hi])
        y = np.zeros((n, hi - lo), dtype=dtype)
        y[block] = phis[lo:hi].T
        acc = y.copy()
        for m in range(1, order + 1):
            y = r.T * np.asarray(v @ y)
            acc = acc + couplings[lo:hi][None, :] ** m * y
        out[lo:hi] = acc.T
    return out


@dataclass(frozen=True)
class BWSolution:
    energies: np.ndarray  # (B,)
    vectors: np.ndarray  # (B, p) block-basis eigenvector at the final energy
    converged: np.ndarray  # (B,) bool
    iterations: np.ndarray  # (B,) int


def bw_solve(
    e0: np.ndarray,
    v,
    block: np.ndarray,
    order: int,
    couplings: np.ndarray,
    start_energies: np.ndarray,
    reference: np.ndarray,
    *,
    rtol: float,
    max_iter: int,
    scale: float,
) -> BWSolution:
    """Self-consistent ``E = ε(E)`` for a batch of (coupling, reference vector).

    ``ε(E)`` is the eigenvalue of ``H_eff(E)`` whose eigenvector overlaps most
    with ``reference`` (B, p).  Secant iteration on ``g(E) = ε(E) - E`` started
    from ``start_energies`` with a fixed-point step; at most ``max_iter``
    evaluations per entry.
    """
    b = couplings.size
    p = block.size

    def evaluate(idx: np.ndarray, e: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        mats = bw_matrices(e0, v, block, order, e)  # (B', K+1, p, p)
        powers = couplings[idx][:, None] ** np.arange(order + 1)[None, :]
        h = np.einsum("bk,bkij->bij", powers.astype(mats.dtype), mats)
        h = 0.5 * (h + np.conj(np.swapaxes(h, 1, 2)))
        eps = np.full(idx.size, np.nan)
        vec = np.zeros((idx.size, p), dtype=np.result_type(h.dtype, reference.dtype))
        good = np.all(np.isfinite(h), axis=(1, 2))
        if np.any(good):
            w, vv = np.linalg.eigh(h[good])
            ov = np.abs(np.einsum("bi,bij->bj", reference[idx][good].conj(), vv))
            j = np.argmax(ov, axis=1)
            eps[good] = w[np.arange(j.size), j]
            vec[good] = vv[np.arange(j.size), :, j]
        return eps - e, vec

    e_prev = start_energies.astype(float).copy()
    idx_all = np.arange(b)
    g_prev, vec = evaluate(idx_all, e_prev)
    vectors = vec.copy()
    iterations = np.ones(b, dtype=int)
    tol = rtol * np.maximum(np.abs(e_prev), scale)
    converged = np.isfinite(g_prev) & (np.abs(g_prev) <= tol)
    energies = e_prev.copy()
    failed = ~np.isfinite(g_prev)
    e_cur = np.where(converged | failed, e_prev, e_prev + np.nan_to_num(g_prev))
    active = ~(converged | failed)
    while np.any(active) and iterations.max(initial=0) < max_iter:
        idx = np.flatnonzero(active)
        g_cur, vec = evaluate(idx, e_cur[idx])
        iterations[idx] += 1
        energies[idx] = e_cur[idx]
        vectors[idx] = vec
        fin = np.isfinite(g_cur)
        tol = rtol * np.maximum(np.abs(e_cur[idx]), scale)
        done = fin & (np.abs(g_cur) <= tol)
        converged[idx[done]] = True
        failed[idx[~fin]] = True
        go = fin & ~done
        ii = idx[go]
        denom = g_cur[go] - g_prev[ii]
        de = e_cur[ii] - e_prev[ii]
        with np.errstate(divide="ignore", invalid="ignore"):
            secant = e_cur[ii] - g_cur[go] * de / denom
        ok = np.isfinite(secant) & (np.abs(denom) > 0)
        nxt = np.where(ok, secant, e_cur[ii] + g_cur[go])
        e_prev[ii] = e_cur[ii]
        g_prev[ii] = g_cur[go]
        e_cur[ii] = nxt
        active[idx[~go]] = False
    return BWSolution(energies=energies, vectors=vectors, converged=converged, iterations=iterations)
