"""Near-degenerate pairs: where non-degenerate formulas stop being safe.

The *mixing ratio* of unperturbed levels l and n at coupling λ is
``|λ V_ln| / |E_l^(0) - E_n^(0)|`` (work basis).  For an isolated pair the
non-degenerate series converges only while the ratio is below 1/2 (the
two-level radius ``Δ/(2|v|)``), and the second-order shift is within 1 % of
the exact one at ratio 0.1: that is the default threshold
(:data:`DEFAULT_MIXING_THRESHOLD`).  Exactly degenerate pairs have ratio
``inf``.

Pairs are judged inside a symmetry sector (:mod:`ptcheck.sectors`): ``V`` is
exactly zero between sectors and exactly degenerate groups are groups of one
sector, so levels of different sectors never pair, whatever their energies.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import scipy.sparse as sp

from . import _validation as val
from .model import Model

__all__ = ["DEFAULT_MIXING_THRESHOLD", "NearDegeneratePair", "near_degenerate_pairs", "mixing_ratios"]

#: Default threshold on the mixing ratio |λ V_ln| / |ΔE|.  Justification: for an
#: isolated pair the second-order level shift Δ r² differs from the exact
#: (Δ/2)(√(1 + 4 r²) - 1) by 1 % at r = 0.1, and the series diverges at r = 0.5
#: (closed form of the two-level eigenvalues).
DEFAULT_MIXING_THRESHOLD = 0.1


@dataclass(frozen=True)
class NearDegeneratePair:
    """A pair of unperturbed levels whose mixing ratio is large.

    Attributes
    ----------
    l, n : int
        Work-basis level indices, ``l < n``.
    ratio : float
        ``|λ V_ln| / |E_l^(0) - E_n^(0)|`` (``inf`` for an exact degeneracy).
    gap : float
        ``|E_l^(0) - E_n^(0)|`` (energy units).
    coupling_element : float
        ``|V_ln|`` (energy units).
    labels : tuple of str
        Printable names of the two levels.
    """

    l: int
    n: int
    ratio: float
    gap: float
    coupling_element: float
    labels: tuple[str, str]

    def to_dict(self) -> dict:
        return asdict(self)


def _pair_elements(model: Model, rows: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Upper-triangle nonzero (i, j, |V_ij|) of the work-basis V (optionally rows restricted)."""
    v = model.v
    if sp.issparse(v):
        c = sp.triu(v, k=1).tocoo() if rows is None else None
        if c is None:
            sub = v[rows].tocoo()
            i, j, d = rows[sub.row], sub.col, np.abs(sub.data)
            keep = i != j
            return i[keep], j[keep], d[keep]
        return c.row, c.col, np.abs(c.data)
    if rows is None:
        i, j = np.triu_indices(model.n, k=1)
        d = np.abs(v[i, j])
    else:
        i = np.repeat(rows, model.n)
        j = np.tile(np.arange(model.n), rows.size)
        d = np.abs(v[rows].ravel())
        keep = i != j
        i, j, d = i[keep], j[keep], d[keep]
    nz = d > 0
    return i[nz], j[nz], d[nz]


def _ratios(model: Model, i: np.ndarray, j: np.ndarray, d: np.ndarray, coupling: float) -> tuple[np.ndarray, np.ndarray]:
    gap = np.abs(model.e0_relative[i] - model.e0_relative[j])
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(gap <= model.degeneracy_tol, np.inf, abs(coupling) * d / np.where(gap > 0, gap, 1.0))
    return r, gap


def mixing_ratios(model: Model, level: int, coupling: float) -> tuple[np.ndarray, np.ndarray]:
    """Mixing ratio of ``level`` with every level it couples to directly.

    Returns
    -------
    partners : (P,) int ndarray
    ratios : (P,) float ndarray (``inf`` for an exactly degenerate partner)
    """
    rows = np.array([level])
    i, j, d = _pair_elements(model, rows)
    r, _ = _ratios(model, i, j, d, coupling)
    grp = model.degenerate_group_of(level)
    if grp:  # degenerate partners count even when V_ln = 0 (good states)
        extra = np.array([g for g in grp if g != level and g not in set(j.tolist())], dtype=int)
        j = np.concatenate([j, extra])
        r = np.concatenate([r, np.full(extra.size, np.inf)])
    return j.astype(int), r


def near_degenerate_pairs(
    model: Model,
    coupling: float,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    *,
    levels: Any = None,
) -> list[NearDegeneratePair]:
    """Pairs (l, n) whose mixing ratio at ``coupling`` is at least ``threshold``.

    Parameters
    ----------
    model : Model
    coupling : float
        Coupling λ at which the ratio is evaluated (dimensionless).
    threshold : float, default :data:`DEFAULT_MIXING_THRESHOLD`
        Smallest ratio reported.  Exactly degenerate pairs are always reported.
    levels : sequence of level keys, optional
        Restrict to pairs involving these levels.

    Returns
    -------
    list of NearDegeneratePair
        Ranked by ratio, largest first.

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([0.0, 1.0, 1.05]), [[0, .1, 0], [.1, 0, .1], [0, .1, 0]])
    >>> [(p.l, p.n) for p in near_degenerate_pairs(m, 0.5)]
    [(1, 2)]
    >>> [(p.l, p.n) for p in near_degenerate_pairs(m, 0.5, 0.04)]
    [(1, 2), (0, 1)]
    """
    lam = val.as_coupling(coupling)
    threshold = float(val.check_positive(threshold, "threshold"))
    if levels is None:
        i, j, d = _pair_elements(model)
    else:
        idx = np.array(sorted({model.level_index(k) for k in val.as_sequence(levels)}), dtype=int)
        i, j, d = _pair_elements(model, idx)
        lo, hi = np.minimum(i, j), np.maximum(i, j)
        key = np.unique(np.stack([lo, hi], axis=1), axis=0, return_index=True)[1]
        i, j, d = lo[key], hi[key], d[key]
    r, gap = _ratios(model, i, j, d, lam)
    pairs = {(int(a), int(b)): (float(rr), float(g), float(dd)) for a, b, rr, g, dd in zip(i, j, r, gap, d) if rr >= threshold}
    wanted = None if levels is None else set(int(x) for x in idx)
    groups = model.degenerate_groups if wanted is None else dict.fromkeys(
        g for a in sorted(wanted) if (g := model.degenerate_group_of(a)) is not None
    )
    for grp in groups:
        for a in grp:
            for b in grp:
                if a < b and (wanted is None or a in wanted or b in wanted) and (a, b) not in pairs:
                    pairs[(a, b)] = (np.inf, abs(model.e0_relative[a] - model.e0_relative[b]), float(abs(model.v[a, b])))
    out = [
        NearDegeneratePair(a, b, rr, g, dd, (model.label(a), model.label(b)))
        for (a, b), (rr, g, dd) in pairs.items()
    ]
    out.sort(key=lambda p: (-p.ratio, p.l, p.n))
    return out
