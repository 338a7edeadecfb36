"""Multivariate Rayleigh–Schrödinger recursion (private numerics of :mod:`ptcheck.multiseries`).

For ``H = H0 + Σ_i λ_i V_i`` (H0 diagonal) and a level ``n`` non-degenerate
inside the states the reduced resolvent keeps, the energy and state are
expanded in monomials ``λ^α = Π_i λ_i^{α_i}``::

    E(λ) = Σ_α E^α λ^α,    |ψ(λ)⟩ = Σ_α λ^α |ψ^α⟩,   ⟨n|ψ^α⟩ = δ_{α0}.

Collecting the coefficient of ``λ^α`` in ``(H0 + Σ_i λ_i V_i − E) ψ = 0`` gives, with ``e_i`` the unit multi-index and ``R = Σ_{m≠n} |m⟩⟨m| / (E^0_n − E^0_m)``::

    w^α  = Σ_{i: α_i > 0} V_i ψ^{α − e_i}
    E^α  = ⟨n| w^α
    ψ^α  = R (w^α − Σ_{0 < β < α} E^β ψ^{α − β})

(componentwise ``β <= α``, ``β ≠ 0, α``).  This is the one-coupling recursion
with the Cauchy product taken over multi-indices; for one coupling it is the
textbook one.  Every coefficient of total degree k depends only on lower
degrees, so one degree is computed at a time: one product of each ``V_i`` with
the block of the previous degree's states (each ``V_i ψ^β`` is made once), and
the Cauchy sums of the whole degree as one matrix product.  The number of
products with ``V`` is ``m × C(K − 1 + m, m)`` — one per coefficient and
coupling — and the vector work is that of the Cauchy sums.
"""

from __future__ import annotations

from collections.abc import Sequence
from itertools import combinations_with_replacement, product
from typing import Any

import numpy as np
import scipy.sparse as sp

__all__ = ["graded_indices", "rs_multi", "cauchy_terms"]


def graded_indices(m: int, order: int) -> list[tuple[int, ...]]:
    """Every multi-index of m non-negative ints with total degree <= order, by degree.

    Inside one degree the order is lexicographic descending in the first
    component, e.g. m = 2, order 2: (0,0), (1,0), (0,1), (2,0), (1,1), (0,2).
    """
    out: list[tuple[int, ...]] = []
    for d in range(order + 1):
        level: list[tuple[int, ...]] = []
        for combo in combinations_with_replacement(range(m), d):
            a = [0] * m
            for i in combo:
                a[i] += 1
            level.append(tuple(a))
        level.sort(reverse=True)
        out.extend(level)
    return out


def cauchy_terms(indices: Sequence[tuple[int, ...]]) -> int:
    """Number of terms ``E^β ψ^{α−β}`` (0 < β < α) summed over all α: the minimal vector work."""
    total = 0
    for a in indices:
        total += int(np.prod([x + 1 for x in a])) - (2 if any(a) else 1)
    return total


def rs_multi(
    e0: np.ndarray,
    vs: Sequence[Any],
    n: int,
    order: int,
    *,
    resolvent_mask: np.ndarray | None = None,
) -> tuple[list[tuple[int, ...]], np.ndarray, np.ndarray]:
    """Energy and state coefficients of level ``n`` to total degree ``order``.

    Parameters
    ----------
    e0 : (N,) ndarray
        Unperturbed energies (work basis, H0 diagonal), offset-free.
    vs : sequence of m (N, N) ndarrays or sparse matrices
        Perturbations in the same basis.
    n : int
        The level (non-degenerate inside the states the resolvent keeps).
    order : int
        Highest total degree K.
    resolvent_mask : (N,) bool ndarray, optional
        States the reduced resolvent keeps (default: all but n).  States of
        other symmetry sectors with E_m = E_n must be masked out.

    Returns
    -------
    indices : list of m-tuples
        Multi-indices in graded order (length P = C(K + m, m)).
    energies : (P,) ndarray
        ``E^α`` in the order of ``indices`` (``E^0 = e0[n]``; complex dtype
        if a V is complex).
    states : (P, N) ndarray
        ``ψ^α`` in the same order.

    Raises
    ------
    FloatingPointError
        A coefficient overflows float64.
    """
    m = len(vs)
    nn = e0.size
    keep = np.ones(nn, dtype=bool) if resolvent_mask is None else np.asarray(resolvent_mask, dtype=bool).copy()
    keep[n] = False
    with np.errstate(divide="ignore"):
        r = np.where(keep, 1.0 / np.where(keep, e0[n] - e0, 1.0), 0.0)
    dtype = np.result_type(*(v.dtype for v in vs), np.float64)
    idx = graded_indices(m, order)
    pos = {a: i for i, a in enumerate(idx)}
    p = len(idx)
    psi = np.zeros((p, nn), dtype=dtype)
    energies = np.zeros(p, dtype=dtype)
    psi[0, n] = 1.0
    energies[0] = e0[n]
    starts = [0]
    for k in range(order + 1):
        starts.append(starts[-1] + _count(m, k))
    for k in range(1, order + 1):
        lo, hi = starts[k - 1], starts[k]  # previous degree
        a0, a1 = starts[k], starts[k + 1]
        block = psi[lo:hi]
        w = np.zeros((a1 - a0, nn), dtype=dtype)
        for i, v in enumerate(vs):
            # V_i ψ^β for every β of degree k − 1 (one product per coupling and coefficient), added to every
            # α = β + e_i of degree k
            dst, src = _predecessors(idx, pos, a0, a1, lo, i)
            prod = _times(v, block)
            if dst.size == a1 - a0:
                w += prod[src]
            else:
                w[dst] += prod[src]
        energies[a0:a1] = w[:, n]
        if k > 1:
            # Σ_{0<β<α} E^β ψ^{α−β} for the whole degree: coefficient matrix (α, γ = α − β) times ψ^γ
            w -= _cauchy_matrix(idx, pos, energies, a0, a1) @ psi[1:a0]
        np.multiply(w, r, out=psi[a0:a1])
        if not (np.all(np.isfinite(energies[a0:a1])) and np.all(np.isfinite(psi[a0:a1]))):
            raise FloatingPointError(
                f"multivariate Rayleigh–Schrödinger coefficients overflow float64 at total degree {k}: the series "
                "diverges fast; ask for a lower order"
            )
    return idx, energies, psi


def _count(m: int, k: int) -> int:
    """Number of multi-indices of m components with total degree exactly k."""
    from math import comb

    return comb(k + m - 1, m - 1)


def _times(v: Any, block: np.ndarray) -> np.ndarray:
    """``V`` applied to each row of ``block``: rows ``V ψ_β``, C-contiguous (b, N)."""
    if sp.issparse(v):
        return np.ascontiguousarray((v @ block.T).T)
    return block @ v.T


def _predecessors(idx: list, pos: dict, a0: int, a1: int, lo: int, i: int) -> tuple[np.ndarray, np.ndarray]:
    """For the α of one degree (rows a0..a1) with α_i > 0: their row and the row of α − e_i in the previous degree."""
    dst, src = [], []
    for j in range(a0, a1):
        a = idx[j]
        if a[i]:
            prev = list(a)
            prev[i] -= 1
            dst.append(j - a0)
            src.append(pos[tuple(prev)] - lo)
    return np.asarray(dst, dtype=np.intp), np.asarray(src, dtype=np.intp)


def _cauchy_matrix(idx: list, pos: dict, energies: np.ndarray, a0: int, a1: int) -> np.ndarray:
    """``C[α, γ] = E^(α−γ)`` for 0 < γ < α (componentwise), rows α of one degree, columns γ = 1..a0−1."""
    c = np.zeros((a1 - a0, a0 - 1), dtype=energies.dtype)
    for j in range(a0, a1):
        a = idx[j]
        total = sum(a)
        for g in product(*[range(x + 1) for x in a]):
            s = sum(g)
            if 0 < s < total:
                c[j - a0, pos[g] - 1] = energies[pos[tuple(x - y for x, y in zip(a, g))]]
    return c
