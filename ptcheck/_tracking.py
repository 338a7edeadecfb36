"""Level-tracking helpers for :mod:`ptcheck.exact` (private, inputs trusted).

A *path point* holds a window of exact eigenpairs at one coupling together with
an identity for each column: the unperturbed level (work index) it is
continuously connected to, or a negative number for a state that entered the
window later and could not be traced back.  Identities are carried from one
point to the next by maximising the summed squared overlaps
(``scipy.optimize.linear_sum_assignment``); degenerate clusters are first
rotated to match the previous point so that an exact crossing is followed
diabatically.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ._eigensolvers import combine, inner

__all__ = [
    "PathPoint",
    "align_clusters",
    "overlaps",
    "assign",
    "fix_phase",
    "GapMinimum",
    "gap_minima",
    "parabolic_minimum",
]

#: |⟨e_n|ψ⟩| below which the phase is fixed by continuity instead of by the component.
PHASE_COMPONENT_MIN = 1e-6


@dataclass(eq=False)
class PathPoint:
    """Window of exact eigenpairs at one coupling (internal, mutable)."""

    coupling: float
    energies: np.ndarray  # (K,) ascending
    vectors: np.ndarray  # (N, K)
    ids: np.ndarray  # (K,) int; >= 0: unperturbed level; < 0: unknown
    lo: int | None  # absolute energy rank of column 0, None when unknown
    top: bool  # the window reaches the top of the spectrum
    res_tol: float  # residual tolerance of the solve (energy units)
    certified: frozenset = field(default_factory=frozenset)
    drift: int = 0  # largest change of a tracked level's column over the step that led here
    # two-level anticrossings resolved inside the step that led here: (id, id, coupling, min gap)
    crossings: tuple = ()

    def column(self, level: int) -> int | None:
        """Column holding identity ``level`` (None if absent)."""
        lookup = self.__dict__.get("_lookup")
        if lookup is None or lookup[0] is not self.ids:
            lookup = (self.ids, {int(i): c for c, i in enumerate(self.ids)})
            self.__dict__["_lookup"] = lookup
        return lookup[1].get(int(level))

    @property
    def nbytes(self) -> int:
        return int(self.vectors.nbytes + self.energies.nbytes + self.ids.nbytes)


def align_clusters(prev: np.ndarray, w: np.ndarray, x: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """Rotate each cluster of (near-)equal eigenvalues to match ``prev``.

    Inside a cluster the eigenvectors are only defined up to a unitary; the
    rotation that maximises the alignment with the previous point's vectors
    (orthogonal Procrustes on the overlap block) makes continuity well defined.
    Energies of rotated columns become their Rayleigh quotients.
    """
    k = w.size
    start = 0
    copied = False
    for i in range(1, k + 1):
        if i == k or w[i] - w[i - 1] > tol:
            size = i - start
            if size > 1:
                block = x[:, start:i]
                m = inner(prev, block)  # (Ka, size)
                weight = np.sum(np.abs(m) ** 2, axis=1)
                rows = np.sort(np.argsort(weight)[::-1][:size])
                if rows.size == size:
                    u, _, vh = np.linalg.svd(m[rows], full_matrices=False)
                    rot = vh.conj().T @ u.conj().T  # (size, size) unitary
                    if not copied:
                        x, w, copied = np.array(x, dtype=np.result_type(x, rot)), np.array(w), True
                    x[:, start:i] = combine(block, rot)
                    w[start:i] = np.real(np.einsum("ji,j,ji->i", rot.conj(), w[start:i], rot))
            start = i
    order = np.argsort(w, kind="stable")
    if np.any(order != np.arange(k)):
        w, x = w[order], x[:, order]
    return w, x


def overlaps(prev: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Squared overlaps |⟨prev_i|x_j⟩|², shape (Ka, Kb)."""
    return np.abs(inner(prev, x)) ** 2


def assign(ov: np.ndarray) -> np.ndarray:
    """Column matched to each row (-1 if none), maximising the summed overlaps.

    Where every row has one strictly largest entry and no two rows share its
    column, that choice is the unique optimum (every row at its own maximum):
    it is returned at once.  Otherwise the Hungarian method
    (``scipy.optimize.linear_sum_assignment``, imported only then: importing
    scipy.optimize costs as much as the rest of scipy ptcheck needs).
    """
    ka, kb = ov.shape
    if 0 < ka <= kb and np.all(np.isfinite(ov)):
        best = np.argmax(ov, axis=1)
        if np.unique(best).size == ka:
            rows = np.arange(ka)
            rest = ov.copy()
            rest[rows, best] = -np.inf
            if np.all(ov[rows, best] > rest.max(axis=1)):
                return best
    from scipy.optimize import linear_sum_assignment

    rows, cols = linear_sum_assignment(-ov)
    out = np.full(ka, -1, dtype=int)
    out[rows] = cols
    return out


def fix_phase(x: np.ndarray, ids: np.ndarray, prev: np.ndarray | None, match: np.ndarray | None) -> None:
    """In place: ⟨e_id|ψ⟩ real >= 0 where it is not tiny, else continuity with ``prev``.

    ``match[c]`` is the column of ``prev`` matched to column ``c`` (or -1).
    """
    k = x.shape[1]
    cols = np.arange(k)
    known = np.asarray(ids) >= 0
    z = np.zeros(k, dtype=x.dtype)
    z[known] = x[np.asarray(ids)[known], cols[known]]
    big = np.abs(z) > PHASE_COMPONENT_MIN
    phase = np.ones(k, dtype=x.dtype)
    phase[big] = np.conj(z[big]) / np.abs(z[big])
    if prev is not None and match is not None:
        for c in np.flatnonzero(~big & (np.asarray(match) >= 0)):
            o = np.vdot(prev[:, match[c]], x[:, c])
            if abs(o) > 0:
                phase[c] = np.conj(o) / abs(o)
    if np.any(phase != 1):
        x *= phase[None, :]
    if np.iscomplexobj(x) and np.any(big):
        x[np.asarray(ids)[big], cols[big]] = np.abs(z[big])


# ------------------------------------------------------------------ avoided crossings
@dataclass
class GapMinimum:
    """An interior local minimum of a tracked level's gap to one side."""

    level: int
    partner_id: int
    side: int  # +1: partner above, -1: partner below
    index: int  # index of the minimising path point


def gap_minima(path: list[PathPoint], level: int, scale: float) -> list[GapMinimum]:
    """Interior local minima of the gap of ``level`` to its nearest neighbour.

    For each side separately (neighbour above / below) a sampled minimum at path
    point j counts if

    * the gap rises on both sides by more than the noise floor ``1e-9 x scale``
      (eigenvalue errors are of order residual² / gap, far below it);
    * the neighbour on that side keeps its identity over j-1, j, j+1 (at an
      exact crossing the neighbour changes and the gap has a V-shaped zero,
      which is not an avoided crossing);
    * that side is the nearer neighbour at j and the gap is not an unresolved
      degeneracy (larger than the noise floor).
    """
    npts = len(path)
    gaps = np.full((2, npts), np.nan)
    pids = np.zeros((2, npts), dtype=np.int64)
    floor = np.zeros(npts)
    for j, p in enumerate(path):
        c = p.column(level)
        floor[j] = 1e-9 * scale
        if c is None:
            continue
        k = p.energies.size
        if c + 1 < k:
            gaps[0, j] = p.energies[c + 1] - p.energies[c]
            pids[0, j] = p.ids[c + 1]
        elif p.top:
            gaps[0, j] = np.inf
        if c - 1 >= 0:
            gaps[1, j] = p.energies[c] - p.energies[c - 1]
            pids[1, j] = p.ids[c - 1]
        elif p.lo == 0:
            gaps[1, j] = np.inf
    out: list[GapMinimum] = []
    for s, side in ((0, +1), (1, -1)):
        g = gaps[s]
        for j in range(1, npts - 1):
            trio = g[j - 1 : j + 2]
            if not np.all(np.isfinite(trio)):
                continue
            noise = floor[j]
            if not (g[j - 1] - g[j] > noise and g[j + 1] - g[j] > noise and g[j] > noise):
                continue
            if not (pids[s, j - 1] == pids[s, j] == pids[s, j + 1]):
                continue
            other = gaps[1 - s, j]
            if np.isfinite(other) and other < g[j]:
                continue
            out.append(GapMinimum(level=level, partner_id=int(pids[s, j]), side=side, index=j))
    return out


def parabolic_minimum(
    f: Any, xs: tuple[float, float, float], fs: tuple[float, float, float], *, max_evals: int, xtol: float
) -> tuple[float, float, int]:
    """Minimise ``f`` (= gap²) on [xs[0], xs[2]] starting from three samples.

    Successive parabolic interpolation (the parabolic step of Brent's method;
    exact in one step for the quadratic gap² of an isolated two-level
    anticrossing), falling back to ``scipy.optimize.minimize_scalar(method=
    'bounded')`` when the three points do not define an upward parabola.

    Returns (x_min, f_min, evaluations).
    """
    lo, hi = xs[0], xs[2]
    pts = sorted(zip(xs, fs))
    best_x, best_f = min(pts, key=lambda t: t[1])
    evals = 0
    last = None
    while evals < max_evals:
        (x0, f0), (x1, f1), (x2, f2) = pts
        den = (x1 - x0) * (f1 - f2) - (x1 - x2) * (f1 - f0)
        num = (x1 - x0) ** 2 * (f1 - f2) - (x1 - x2) ** 2 * (f1 - f0)
        curv = (f2 - f1) / (x2 - x1) - (f1 - f0) / (x1 - x0) if x2 > x1 > x0 else -1.0
        if den == 0 or curv <= 0:
            from scipy.optimize import minimize_scalar  # here only: a heavy import

            res = minimize_scalar(
                f, bounds=(lo, hi), method="bounded", options={"xatol": xtol, "maxiter": max(max_evals - evals - 1, 1)}
            )
            evals += int(res.nfev)
            if res.fun < best_f:
                best_x, best_f = float(res.x), float(res.fun)
            break
        x_new = x1 - 0.5 * num / den
        x_new = float(np.clip(x_new, lo, hi))
        if last is not None and abs(x_new - last) <= xtol:
            break
        if any(abs(x_new - p[0]) <= 0.5 * xtol for p in pts):
            break
        predicted = float(np.polyval(np.polyfit([x0, x1, x2], [f0, f1, f2], 2), x_new))
        f_new = float(f(x_new))
        evals += 1
        last = x_new
        if f_new < best_f:
            best_x, best_f = x_new, f_new
        if abs(f_new - predicted) <= 1e-3 * abs(f_new) + 1e-300:
            break  # the parabola describes gap² here: its vertex is the minimum
        # keep the best point and its two neighbours
        allp = sorted(pts + [(x_new, f_new)])
        ib = int(np.argmin([p[1] for p in allp]))
        ib = min(max(ib, 1), len(allp) - 2)
        pts = allp[ib - 1 : ib + 2]
    return best_x, best_f, evals
