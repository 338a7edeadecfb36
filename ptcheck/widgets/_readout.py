"""Values at the exact coupling λ (between sweep points) and the readout table (private).

The figures draw straight segments between sweep points: on a linear axis
between the values, on a log axis between their logarithms.  The values at λ
are interpolated the same way, so the markers sit on the drawn lines and the
readout shows the numbers at the markers.
"""

from __future__ import annotations

import html
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._text import fmt_error, fmt_number

__all__ = ["interp_linear", "interp_log", "PointValues", "shown_arrays", "values_at", "readout_html"]


def _bracket(grid: np.ndarray, x: float) -> tuple[int, float]:
    """Index i and weight t with x = (1 − t) grid[i] + t grid[i+1] (grid ascending, x clipped to it)."""
    n = grid.size
    if n == 1:
        return 0, 0.0
    x = min(max(float(x), float(grid[0])), float(grid[-1]))
    i = int(np.clip(np.searchsorted(grid, x, side="right") - 1, 0, n - 2))
    span = float(grid[i + 1] - grid[i])
    t = (x - float(grid[i])) / span if span > 0 else 0.0
    return i, t


def interp_linear(grid: Any, values: Any, x: float) -> np.ndarray:
    """Values (..., C) on the ascending grid (C,) interpolated linearly at x -> (...)."""
    grid = np.asarray(grid, dtype=float)
    v = np.asarray(values, dtype=float)
    i, t = _bracket(grid, x)
    if t == 0.0 or grid.size == 1:
        return v[..., i].copy()
    if t == 1.0:
        return v[..., i + 1].copy()
    return (1.0 - t) * v[..., i] + t * v[..., i + 1]


def interp_log(grid: Any, values: Any, x: float) -> np.ndarray:
    """Like :func:`interp_linear` but straight in log(value) (a log axis) where both ends are > 0.

    Where an end is 0 or NaN the result is the linear value (0 at a zero end
    point, NaN when an end is undefined).
    """
    grid = np.asarray(grid, dtype=float)
    v = np.asarray(values, dtype=float)
    i, t = _bracket(grid, x)
    if t == 0.0 or grid.size == 1:
        return v[..., i].copy()
    if t == 1.0:
        return v[..., i + 1].copy()
    a, b = v[..., i], v[..., i + 1]
    lin = (1.0 - t) * a + t * b
    pos = (a > 0) & (b > 0) & np.isfinite(a) & np.isfinite(b)
    with np.errstate(divide="ignore", invalid="ignore"):
        geo = np.exp((1.0 - t) * np.log(np.where(pos, a, 1.0)) + t * np.log(np.where(pos, b, 1.0)))
    return np.where(pos, geo, lin)


@dataclass(frozen=True)
class PointValues:
    """A comparison at one coupling between sweep points, as the levels figure shows it.

    Attributes
    ----------
    coupling : float
    exact : (T,) ndarray
        Exact values shown (energy units; shifts E(λ) − E(0) when asked),
        linear interpolation.
    perturbative : (T, O) ndarray
    abs_error, rel_error : (T, O) ndarray
        Interpolated as on the log error axis; NaN where undefined.
    """

    coupling: float
    exact: np.ndarray
    perturbative: np.ndarray
    abs_error: np.ndarray
    rel_error: np.ndarray


def shown_arrays(result: Any, shift: bool) -> tuple[np.ndarray, np.ndarray]:
    """Exact (T, C) and perturbative (T, O, C) values as the levels figure shows them.

    Shifts E(λ) − E(0) when ``shift``; otherwise what the result presents for
    each target (``exact_presented``: a quantity defined by its shift presents
    the shift) when it has such fields, else the values.
    """
    exact = np.asarray(result.exact, dtype=float)
    pert = np.asarray(result.perturbative, dtype=float)
    if shift:
        e0 = np.asarray(result.unperturbed, dtype=float)
        return exact - e0[:, None], pert - e0[:, None, None]
    if hasattr(result, "exact_presented") and hasattr(result, "perturbative_presented"):
        return np.asarray(result.exact_presented, dtype=float), np.asarray(result.perturbative_presented, dtype=float)
    return exact, pert


def values_at(result: Any, coupling: float, *, shift: bool = False) -> PointValues:
    """Interpolate a ComparisonResult at ``coupling`` (clipped to its sweep), values as shown."""
    lam = np.asarray(result.couplings, dtype=float)
    order = np.argsort(lam, kind="stable")
    g = lam[order]
    exact, pert = shown_arrays(result, shift)
    return PointValues(
        coupling=float(coupling),
        exact=interp_linear(g, exact[..., order], coupling),
        perturbative=interp_linear(g, pert[..., order], coupling),
        abs_error=interp_log(g, np.asarray(result.abs_error)[..., order], coupling),
        rel_error=interp_log(g, np.asarray(result.rel_error)[..., order], coupling),
    )


def readout_html(
    result: Any,
    point: PointValues,
    *,
    shift: bool,
    tols: Sequence[float],
    relative: bool,
    unit: str,
    where: str,
    relative_to: Sequence[str],
) -> str:
    """Table of exact and perturbative values at λ (as the levels figure shows them) with each order's error."""
    err = point.rel_error if relative else point.abs_error
    # round-off of an exactly vanishing value (e.g. a first-order shift that is 0) reads as 0
    scale = float(np.nanmax(np.abs(np.asarray(result.exact)))) if np.size(result.exact) else 0.0
    floor = 1e-12 * max(scale, np.finfo(float).tiny)

    def value(x: float) -> str:
        return fmt_number(0.0 if abs(x) < floor else x, 6, keep_zeros=True)

    what = "shift E(λ) − E(0)" if shift else "value"
    head = "".join(f"<th style='padding:0 10px;text-align:left'>{html.escape(o)}</th>" for o in result.order_names)
    rows = ""
    t_sorted = sorted(tols)
    for ti, name in enumerate(result.targets):
        cells = ""
        for oi in range(len(result.orders)):
            e = float(err[ti, oi])
            val_f = float(point.perturbative[ti, oi])
            val = value(val_f)
            if not np.isfinite(e):
                ref = "shift" if ("shift" in relative_to[ti] or "change" in relative_to[ti]) else "value"
                mark = (f"<span style='color:#666'>error undefined ({ref} ≈ 0)</span>" if relative and np.isfinite(val_f)
                        else "<span style='color:#666'>error —</span>")
            else:
                ok = sum(e <= t for t in t_sorted)
                sym, col = ("✓", "#009E73") if ok == len(t_sorted) else ("✗", "#D55E00") if ok == 0 else ("◐", "#B77A00")
                mark = f"<span style='color:{col}'>{sym} {html.escape(fmt_error(e, tols, relative))}</span>"
            cells += f"<td style='padding:0 10px'>{html.escape(val)} &nbsp;{mark}</td>"
        rows += (f"<tr><td style='padding:0 10px 0 0'>{html.escape(name)}</td>"
                 f"<td style='padding:0 10px'>{html.escape(value(float(point.exact[ti])))}</td>{cells}</tr>")
    kinds = sorted(set(relative_to))
    err_word = (f"error in % of {' / '.join(kinds)}" if relative else f"absolute error in {unit}")
    return (
        f"<div style='font-size:13px'><b>At {html.escape(where)}</b> "
        f"<span style='color:#555'>· {html.escape(what)} in {html.escape(unit)} · {html.escape(err_word)} · "
        f"interpolated between the {np.asarray(result.couplings).size} sweep points</span>"
        f"<table style='margin-top:2px'><tr><th style='text-align:left'>target</th>"
        f"<th style='padding:0 10px;text-align:left'>exact</th>{head}</tr>{rows}</table></div>"
    )
