"""Good states of an exactly degenerate group, at the order where it splits (private).

The Schrieffer–Wolff effective Hamiltonian of an exactly degenerate group of
``d`` levels is ``H_eff(λ) = E0 1 + Σ_{k≥1} λ^k H_k``.  Its eigenvalue branches
are analytic in λ (Rellich; Kato, *Perturbation Theory for Linear Operators*,
1966, ch. II §1), and so are their eigenvectors; the *good states* are the
λ → 0 limits of those eigenvectors.  They are found by Kato's reduction
process: diagonalise the first ``H_k`` that is not a multiple of the identity;
every simple eigenvalue is a branch (its higher coefficients follow from
Rayleigh–Schrödinger for a polynomial perturbation); a cluster of equal
eigenvalues that no order couples to the rest is reduced again at the next
order.  A cluster that a higher order couples to the rest is left unresolved
(its branches get no Taylor series and their vectors are arbitrary inside the
cluster).

Branches come out in ascending energy at small positive λ (lexicographic order
of their Taylor coefficients), the convention by which ptcheck attaches the
levels of a degenerate group (work indices, ascending) to branches.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Branch", "group_branches", "natural_scales"]

#: Eigenvalues of a coefficient matrix closer than this fraction of the natural
#: size of that order are equal (the coefficients carry round-off of that size).
_EQUAL_RTOL = 1e-8


@dataclass(frozen=True)
class Branch:
    """One eigenvalue branch of a degenerate group's effective Hamiltonian.

    Attributes
    ----------
    coefficients : (K,) ndarray or None
        Taylor coefficients of ``E(λ) − E0`` at orders 1 … K (energy units);
        ``None`` when the branch is not resolved (see module docstring).
    vector : (d,) ndarray
        Good state: λ → 0+ limit of the branch's eigenvector, in the group's
        work basis.
    split_order : int or None
        Order at which this branch separates from every other branch of the
        group; ``None`` if it does not within the computed orders (or is
        unresolved).
    """

    coefficients: np.ndarray | None
    vector: np.ndarray
    split_order: int | None


def natural_scales(norm_v: float, gap: float, order: int) -> np.ndarray:
    """``s_k = ‖V‖ (‖V‖ / gap)^(k−1)`` for k = 1 … order: natural size of an order-k coefficient."""
    tiny = np.finfo(float).tiny
    nv = max(norm_v, tiny)
    g = gap if np.isfinite(gap) and gap > 0 else nv
    with np.errstate(over="ignore"):
        s = nv * (nv / g) ** np.arange(order)
    s[~np.isfinite(s)] = np.finfo(float).max
    return s


def group_branches(h: np.ndarray, scales: np.ndarray) -> list[Branch]:
    """Branches of ``Σ_{k≥1} λ^k h[k]`` (``h[0]`` = E0 1 is ignored), ascending at small positive λ.

    Parameters
    ----------
    h : (K + 1, d, d) ndarray
        Hermitian effective-Hamiltonian coefficients of the group.
    scales : (K,) ndarray
        Natural size of the coefficients of orders 1 … K (round-off floors).
    """
    d = h.shape[1]
    if h.shape[0] < 2:
        eye = np.eye(d, dtype=h.dtype)
        return [Branch(np.zeros(0), eye[:, i], None) for i in range(d)]
    raw = _branches(np.asarray(h[1:]), np.asarray(scales, dtype=float), 1)
    return [Branch(None if c is None else np.real(np.asarray(c, dtype=complex)), v, s) for c, v, s in raw]


def _clusters(a: np.ndarray, tol: float) -> list[np.ndarray]:
    out, start = [], 0
    for i in range(1, a.size + 1):
        if i == a.size or a[i] - a[i - 1] > tol:
            out.append(np.arange(start, i))
            start = i
    return out


def _branches(p: np.ndarray, scales: np.ndarray, order: int) -> list[tuple]:
    """(coefficients list or None, vector, split order) per branch; ``p[0]`` is the order-``order`` coefficient."""
    d = p.shape[1]
    p0 = 0.5 * (p[0] + p[0].conj().T)
    a, w = np.linalg.eigh(p0)
    tol = _EQUAL_RTOL * scales[0]
    groups = _clusters(a, tol)
    last = p.shape[0] - 1
    if len(groups) == 1:
        mean = float(np.mean(a))
        if last == 0:  # no deeper order computed: the group stays degenerate to this order
            return [([mean], w[:, i], None) for i in range(d)]
        sub = _branches(p[1:], scales[1:], order + 1)
        return [(None if c is None else [mean] + list(c), v, s) for c, v, s in sub]
    q = np.einsum("ij,kjl,lm->kim", w.conj().T, p, w)
    out: list[tuple] = []
    for idx in groups:
        if idx.size == 1:
            i = int(idx[0])
            out.append((list(_simple_branch(q, a, i)), w[:, i], order))
            continue
        rest = np.setdiff1d(np.arange(d), idx)
        coupled = np.max(np.abs(q[:, idx][:, :, rest]), axis=(1, 2)) > _EQUAL_RTOL * scales
        if np.any(coupled):  # a higher order mixes the cluster with the rest: not resolved here
            out.extend((None, w[:, i], None) for i in idx)
            continue
        sub = _branches(q[:, idx][:, :, idx], scales, order)
        out.extend((c, w[:, idx] @ v, s) for c, v, s in sub)
    return out


def _simple_branch(q: np.ndarray, a: np.ndarray, n: int) -> np.ndarray:
    """Rayleigh–Schrödinger for the simple eigenvalue ``a[n]`` of ``q[0] = diag(a)``
    under the perturbation ``Σ_{j≥1} μ^j q[j]`` (intermediate normalisation)."""
    last = q.shape[0] - 1
    r = np.zeros(a.size)
    mask = np.arange(a.size) != n
    r[mask] = 1.0 / (a[n] - a[mask])
    x = np.zeros((last + 1, a.size), dtype=complex)
    x[0, n] = 1.0
    e = np.zeros(last + 1, dtype=complex)
    e[0] = a[n]
    for k in range(1, last + 1):
        s = sum(q[j] @ x[k - j] for j in range(1, k + 1))
        e[k] = s[n]
        rhs = s - sum((e[j] * x[k - j] for j in range(1, k)), np.zeros(a.size, dtype=complex))
        x[k] = r * rhs
    return e
