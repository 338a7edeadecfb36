"""Brackets of the exact levels of an exactly degenerate group (private engine of :mod:`ptcheck.bounds`).

A level that is degenerate with others of its sector in H0 has no Rayleigh–Schrödinger series; degenerate
perturbation theory gives the whole group's states instead (:mod:`ptcheck.treatment`, Schrieffer–Wolff).
At each coupling those p states span a trial space X; Rayleigh–Ritz in it gives Ritz values θ_1 ≤ … ≤ θ_p,
Ritz vectors and their residuals r_i = ‖(H − θ_i) x_i‖ (p mat-vecs).  With α ≥ E_(n0−1) and β ≤ E_(n0+p)
(the exact levels just outside the group's ranks n0 … n0+p−1 in its sector: Weyl's inequality, or the
neighbours' own Kato–Temple brackets):

- cluster bound (derived here from Weyl's inequality, as in W. Kahan, "Inclusion theorems for clusters of
  eigenvalues of Hermitian matrices", Univ. Toronto report (1967)): with R = HX − XΘ for orthonormal Ritz
  vectors X, the matrix H + E, E = −(R X* + X R*), has X as an invariant subspace with eigenvalues θ_i and
  ‖E‖ = ‖R‖ ≤ ρ = (Σ r_i²)^½.  If α + ρ < θ_1 and θ_p + ρ < β, Weyl places every other eigenvalue of
  H + E outside [θ_1, θ_p], so θ_i is its eigenvalue of rank n0+i and |E_(n0+i) − θ_i| ≤ ρ;
- pigeonhole: at most p eigenvalues lie in (α, β); if the Weinstein intervals [θ_i ± r_i]
  (D. H. Weinstein, PNAS 20, 529 (1934)) are disjoint and inside it, the i-th holds E_(n0+i);
- Kato–Temple for each Ritz pair (G. Temple, Proc. R. Soc. A 119, 276 (1928); T. Kato, J. Phys. Soc.
  Japan 4, 334 (1949)), with the neighbours' brackets (the group's own members, or α/β at its ends) as
  the gap: θ_i − r_i²/(b_i − θ_i) ≤ E_(n0+i) ≤ θ_i + r_i²/(θ_i − a_i), iterated a few times.

Which exact level carries a member's label: the one whose rank inside the group is the rank of the
member's order-K branch among the group's branches at the same coupling (degenerate perturbation theory
attaches labels to branches; the branches follow the exact levels where the brackets are separated).
That pairing is not proven along the path from λ = 0 (the group is degenerate there), so these brackets
are never marked rigorous; where the members' brackets overlap they are not marked identified either.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._gaps import _temple
from ._trial import EPS, OperatorScales, SeriesTrial, operator_scales
from .errors import DegenerateLevelError
from .model import Model


@dataclass(frozen=True)
class GroupBrackets:
    """Brackets of each member of a degenerate group over couplings.

    Attributes (arrays of shape (p, C) unless stated; p members in the order given, C couplings)
    ----------
    lower, upper : energy bracket of the exact level paired with each member (energy units)
    rayleigh_quotient, residual : θ and r of the member's Ritz pair
    neighbour_below, neighbour_above : bounds on the paired level's neighbours used by Kato–Temple
    identified : the member's bracket is separated from the other members' (the pairing is resolved)
    gap_kind : (C,) str, source of the bounds outside the group ("weyl" or "neighbours")
    mat_vecs : int
    """

    lower: np.ndarray
    upper: np.ndarray
    rayleigh_quotient: np.ndarray
    residual: np.ndarray
    neighbour_below: np.ndarray
    neighbour_above: np.ndarray
    identified: np.ndarray
    gap_kind: np.ndarray
    mat_vecs: int


def _sector(model: Model, levels: tuple[int, ...]) -> tuple[Model, np.ndarray]:
    """Sub-model of the group's sector and the parent indices of its levels."""
    k = int(model.level_sectors[levels[0]])
    space = np.flatnonzero(model.level_sectors == k)
    return (model.restrict(k) if len(model.sectors) > 1 else model), space


def outer_gap(sub: Model, scales: OperatorScales, first: int, last: int, lam: np.ndarray, trial_order: int,
              use_neighbours: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """(α, β, kind, mat-vecs): α ≥ E_(first−1), β ≤ E_(last+1) in the sub-model (ranks = local indices).

    Weyl's inequality, improved by the Kato–Temple bracket of a neighbour's own series state when that
    neighbour is not degenerate itself (closed by Weyl one level further out).
    """
    def weyl(k: int) -> tuple[np.ndarray, np.ndarray]:
        if k < 0:
            return np.full(lam.shape, -np.inf), np.full(lam.shape, -np.inf)
        if k >= sub.n:
            return np.full(lam.shape, np.inf), np.full(lam.shape, np.inf)
        a, b = scales.shift_range(lam)
        return sub.e0[k] + a, sub.e0[k] + b

    alpha, beta = weyl(first - 1)[1], weyl(last + 1)[0]
    a_w, b_w = alpha.copy(), beta.copy()
    spent = 0
    if use_neighbours:
        for k, side in ((first - 1, -1), (last + 1, +1)):
            if not 0 <= k < sub.n:
                continue
            try:
                trial = SeriesTrial(sub, k, trial_order, scales)
            except (DegenerateLevelError, FloatingPointError):
                continue
            spent += trial.mat_vecs
            rho, r, d = trial.evaluate(lam)
            if side < 0:
                _, hi, ok = _temple(rho, r, d, weyl(k - 1)[1], np.full(lam.shape, np.inf))
                alpha = np.where(ok, np.minimum(alpha, hi), alpha)
            else:
                lo, _, ok = _temple(rho, r, d, np.full(lam.shape, -np.inf), weyl(k + 1)[0])
                beta = np.where(ok, np.maximum(beta, lo), beta)
    kind = np.where((alpha < a_w) | (beta > b_w), "neighbours", "weyl").astype(object)
    return alpha, beta, kind, spent


def group_brackets(model: Model, levels: tuple[int, ...], states, branch_energies: np.ndarray, lam: np.ndarray,
                   *, trial_order: int, use_neighbours: bool) -> GroupBrackets:
    """Brackets of the exact levels of one degenerate group (see the module notes).

    Parameters
    ----------
    model : Model
    levels : tuple of int
        The group's work indices (parent model), ascending.
    states : callable(coupling) -> (p, N) ndarray
        The members' trial states at one coupling (order-K degenerate perturbation theory, work basis).
    branch_energies : (p, C) ndarray
        The members' order-K energies (their order at each coupling pairs labels with ranks).
    lam : (C,) ndarray
    trial_order : int
    use_neighbours : bool
        Improve the bounds outside the group with the neighbours' own brackets.
    """
    sub, space = _sector(model, levels)
    scales = operator_scales(sub)
    local = np.searchsorted(space, np.asarray(levels))
    first, last = int(local[0]), int(local[-1])
    p, n_c = len(levels), lam.size
    alpha, beta, kind, spent = outer_gap(sub, scales, first, last, lam, trial_order, use_neighbours)
    out = {k: np.full((p, n_c), np.nan) for k in ("lo", "hi", "rho", "r", "a", "b")}
    sep = np.zeros((p, n_c), dtype=bool)
    h_scale = scales.h_scale(lam)
    for c in range(n_c):
        x = np.asarray(states(float(lam[c])))[:, space].T  # (N_sector, p)
        hx = sub.e0[:, None] * x + lam[c] * (sub.v @ x)
        spent += p
        g = x.conj().T @ x
        a = x.conj().T @ hx
        a = (a + a.conj().T) / 2
        w, u = np.linalg.eigh(g)
        t = u / np.sqrt(np.maximum(w, 1e-300))
        theta, y = np.linalg.eigh(t.conj().T @ a @ t)
        z, hz = x @ (t @ y), hx @ (t @ y)
        res = hz - z * theta[None, :]
        zz = z.conj().T @ z
        eta = float(np.linalg.norm(zz - np.eye(p), 2)) + sub.n * EPS / (1 - sub.n * EPS) * float(np.max(np.real(np.diag(zz))))
        pad = (3.0 * eta + 32.0 * (scales.row_nnz + p + 4) * EPS) * float(h_scale[c])
        r = np.linalg.norm(res, axis=0) / np.sqrt(np.maximum(np.real(np.diag(zz)), 1e-300)) + pad
        rho_all = float(np.sqrt(np.sum(r**2)))
        lo = np.full(p, -np.inf)
        hi = np.full(p, np.inf)
        if theta[0] - rho_all - pad > alpha[c] and theta[-1] + rho_all + pad < beta[c]:
            lo, hi = theta - rho_all - pad, theta + rho_all + pad
        w_lo, w_hi = theta - r - pad, theta + r + pad  # Weinstein: each holds some eigenvalue
        if w_lo[0] > alpha[c] and w_hi[-1] < beta[c] and np.all(w_hi[:-1] < w_lo[1:]):
            # at most p eigenvalues lie in (α, β), one in each of p disjoint intervals: E_(n0+i) in the i-th
            lo, hi = np.maximum(lo, w_lo), np.minimum(hi, w_hi)
        for _ in range(3):  # Kato–Temple with the neighbours' current brackets
            a_i = np.concatenate([[alpha[c]], hi[:-1]])
            b_i = np.concatenate([lo[1:], [beta[c]]])
            l2, h2, ok = _temple(theta, r, np.full(p, pad), a_i, b_i)
            lo = np.where(ok, np.maximum(lo, l2), lo)
            hi = np.where(ok, np.minimum(hi, h2), hi)
        a_w, b_w = scales.shift_range(np.array(lam[c]))
        e_rank = sub.e0[first : last + 1]
        lo = np.maximum(lo, e_rank + float(a_w)) - 8 * EPS * float(h_scale[c])
        hi = np.minimum(hi, e_rank + float(b_w)) + 8 * EPS * float(h_scale[c])
        disjoint = np.ones(p, dtype=bool)
        disjoint[1:] &= hi[:-1] < lo[1:]
        disjoint[:-1] &= hi[:-1] < lo[1:]
        # pair labels with ranks by the order of the members' branches at this coupling
        rank = np.argsort(np.argsort(branch_energies[:, c], kind="stable"), kind="stable")
        out["lo"][:, c], out["hi"][:, c] = lo[rank], hi[rank]
        out["rho"][:, c], out["r"][:, c] = theta[rank], r[rank]
        out["a"][:, c] = np.concatenate([[alpha[c]], hi[:-1]])[rank]
        out["b"][:, c] = np.concatenate([lo[1:], [beta[c]]])[rank]
        sep[:, c] = disjoint[rank] & np.isfinite(lo[rank]) & np.isfinite(hi[rank])
    return GroupBrackets(out["lo"], out["hi"], out["rho"], out["r"], out["a"], out["b"], sep, kind.astype(str), spent)
