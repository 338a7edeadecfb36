"""Multivariate Rayleigh–Schrödinger recursion (private numerics of :mod:`ptcheck.multiseries`).

For ``H = H0 + Σ_i λ_i V_i`` and a level n that is non-degenerate in its
sector, with multi-index coefficients ``E^α`` and ``|ψ^α⟩`` (α = (a_1, …, a_m),
``E(λ) = Σ_α E^α λ^α``) in intermediate normalisation (⟨n|ψ^α⟩ = 0 for α ≠ 0),
collecting the terms of ``H ψ = E ψ`` with the monomial λ^α gives

    E^α = Σ_i ⟨n| V_i |ψ^{α − e_i}⟩
    ψ^α = R_n [ Σ_i V_i ψ^{α − e_i} − Σ_{0 < β < α} E^β ψ^{α − β} ],   R_n = Q_n / (E_n − H0)

(terms with a negative index are absent; β < α componentwise, β ≠ α because
``R_n ψ^0 = 0``).  For one coupling this is the usual recursion (Kato,
*Perturbation Theory for Linear Operators*, 1966, ch. II).  Each ``ψ^β`` is
multiplied once by each ``V_i``, so the cost is m mat-vecs per coefficient plus
the convolution's vector work.
"""

from __future__ import annotations

from collections.abc import Sequence
from itertools import combinations_with_replacement
from typing import Any

import numpy as np

__all__ = ["graded_indices", "rs_multi"]


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
        Unperturbed energies (work basis, H0 diagonal).
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
        ``E^α`` in the order of ``indices`` (complex dtype if V is complex).
    states : (P, N) ndarray
        ``ψ^α`` in the same order.
    """
    m = len(vs)
    nn = e0.size
    with np.errstate(divide="ignore"):
        r = 1.0 / (e0[n] - e0)
    keep = np.ones(nn, dtype=bool) if resolvent_mask is None else np.asarray(resolvent_mask, dtype=bool).copy()
    keep[n] = False
    r = np.where(keep, r, 0.0)
    dtype = np.result_type(*(v.dtype for v in vs), np.float64)
    idx = graded_indices(m, order)
    pos = {a: i for i, a in enumerate(idx)}
    p = len(idx)
    psi = np.zeros((p, nn), dtype=dtype)
    energies = np.zeros(p, dtype=dtype)
    psi[0, n] = 1.0
    energies[0] = e0[n]
    vpsi: list[dict[int, np.ndarray]] = [dict() for _ in range(m)]  # V_i ψ^β, computed once

    def vmul(i: int, b: int) -> np.ndarray:
        got = vpsi[i].get(b)
        if got is None:
            got = np.asarray(vs[i] @ psi[b])
            vpsi[i][b] = got
        return got

    for k in range(1, p):
        a = idx[k]
        w = np.zeros(nn, dtype=dtype)
        for i in range(m):
            if a[i] == 0:
                continue
            prev = list(a)
            prev[i] -= 1
            w += vmul(i, pos[tuple(prev)])
        energies[k] = w[n]
        # convolution over 0 < β < α (componentwise), β != α
        lo: list[int] = []
        hi: list[int] = []
        for b in _below(a):
            lo.append(pos[b])
            hi.append(pos[tuple(x - y for x, y in zip(a, b))])
        if lo:
            w = w - energies[lo] @ psi[hi]
        psi[k] = r * w
        if not (np.isfinite(energies[k]) and np.all(np.isfinite(psi[k]))):
            raise FloatingPointError(f"multivariate Rayleigh–Schrödinger coefficients overflow float64 at {a}")
        # drop products no later coefficient needs (β with |β| = K): none are computed lazily
    return idx, energies, psi


def _below(a: tuple[int, ...]):
    """Multi-indices β with 0 <= β <= a componentwise, β != 0 and β != a."""
    ranges = [range(x + 1) for x in a]
    total = sum(a)
    for b in np.ndindex(*[len(rg) for rg in ranges]):
        s = sum(b)
        if 0 < s < total:
            yield tuple(int(x) for x in b)
