"""Values at the exact coupling λ (between sweep points) and the readout table (private).

The figures draw straight segments between sweep points: on a linear axis
between the values, on a log axis between their logarithms.  The values at λ
are interpolated the same way, so the markers sit on the drawn lines and the
readout shows the numbers at the markers.  Certified brackets (a comparison
made with ``reference="bounds"`` or ``"both"``) are interpolated the same way;
they are certified at the sweep points themselves.
"""

from __future__ import annotations

import html
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._format import fmt_interval
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
    exact_lower, exact_upper : (T,) ndarray or None
        Certified bracket of the exact value shown (as ``exact``), linear
        interpolation; None without certified bounds.
    error_lower, error_upper, rel_error_lower, rel_error_upper : (T, O) ndarray or None
        Certified brackets of the errors, interpolated as on the log axis.
    """

    coupling: float
    exact: np.ndarray
    perturbative: np.ndarray
    abs_error: np.ndarray
    rel_error: np.ndarray
    exact_lower: np.ndarray | None = None
    exact_upper: np.ndarray | None = None
    error_lower: np.ndarray | None = None
    error_upper: np.ndarray | None = None
    rel_error_lower: np.ndarray | None = None
    rel_error_upper: np.ndarray | None = None


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
    brackets = {}
    if getattr(result, "exact_lower", None) is not None:
        # the bracket of the value shown: minus E(0) where the figure shows shifts
        presents = tuple(getattr(result, "presents", ()) or ())
        e0 = np.asarray(result.unperturbed, dtype=float)
        off = np.array([e0[i] if shift or (presents and presents[i] == "shift") else 0.0 for i in range(e0.size)])
        for f in ("exact_lower", "exact_upper"):
            brackets[f] = interp_linear(g, (np.asarray(getattr(result, f), dtype=float) - off[:, None])[..., order], coupling)
        for f in ("error_lower", "error_upper", "rel_error_lower", "rel_error_upper"):
            brackets[f] = interp_log(g, np.asarray(getattr(result, f), dtype=float)[..., order], coupling)
    return PointValues(
        coupling=float(coupling),
        exact=interp_linear(g, exact[..., order], coupling),
        perturbative=interp_linear(g, pert[..., order], coupling),
        abs_error=interp_log(g, np.asarray(result.abs_error)[..., order], coupling),
        rel_error=interp_log(g, np.asarray(result.rel_error)[..., order], coupling),
        **brackets,
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
    """Table of exact and perturbative values at λ (as the levels figure shows them) with each order's error.

    With certified bounds the exact column shows the certified bracket of the
    exact value and each order its certified error bracket, marked ✓ (the
    whole bracket meets every tolerance), ✗ (it misses every one), ◐ (some)
    or ? (a tolerance lies inside the bracket: undecided).
    """
    err = point.rel_error if relative else point.abs_error
    bounded = point.error_lower is not None
    exact_known = getattr(result, "reference", "exact") != "bounds"
    if bounded:
        e_lo, e_hi = (point.rel_error_lower, point.rel_error_upper) if relative else (point.error_lower, point.error_upper)
    # round-off of an exactly vanishing value (e.g. a first-order shift that is 0) reads as 0
    sizes = np.abs(np.asarray(result.exact if exact_known else result.exact_upper, dtype=float))
    sizes = sizes[np.isfinite(sizes)]
    scale = float(sizes.max()) if sizes.size else 0.0
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
            if bounded:
                mark = _bracket_mark(float(e_lo[ti, oi]), float(e_hi[ti, oi]), t_sorted, tols, relative)
                if exact_known:
                    mark = _point_mark(e, t_sorted, tols, relative, relative_to[ti], val_f) + "<br>" + mark
            else:
                mark = _point_mark(e, t_sorted, tols, relative, relative_to[ti], val_f)
            cells += f"<td style='padding:0 10px'>{html.escape(val)} &nbsp;{mark}</td>"
        exact_cell = html.escape(value(float(point.exact[ti]))) if exact_known else ""
        if bounded:
            lo, hi = float(point.exact_lower[ti]), float(point.exact_upper[ti])
            if np.isfinite(lo) and np.isfinite(hi):
                a, b = fmt_interval(lo, hi, 4, 7)
                br = f"∈ [{html.escape(a)}, {html.escape(b)}]"
            else:
                br = "no certified bracket"
            exact_cell += ("<br>" if exact_known else "") + f"<span style='color:#555'>{br}</span>"
        rows += (f"<tr><td style='padding:0 10px 0 0'>{html.escape(name)}</td>"
                 f"<td style='padding:0 10px'>{exact_cell}</td>{cells}</tr>")
    kinds = sorted(set(relative_to))
    err_word = (f"error in % of {' / '.join(kinds)}" if relative else f"absolute error in {unit}")
    n = np.asarray(result.couplings).size
    between = (f"certified brackets [a, b] at the {n} sweep points, interpolated between" if bounded
               else f"interpolated between the {n} sweep points")
    return (
        f"<div style='font-size:13px'><b>At {html.escape(where)}</b> "
        f"<span style='color:#555'>· {html.escape(what)} in {html.escape(unit)} · {html.escape(err_word)} · "
        f"{html.escape(between)}</span>"
        f"<table style='margin-top:2px'><tr><th style='text-align:left'>target</th>"
        f"<th style='padding:0 10px;text-align:left'>exact</th>{head}</tr>{rows}</table></div>"
    )


_MARKS = {"all": ("✓", "#009E73"), "none": ("✗", "#D55E00"), "some": ("◐", "#B77A00"), "undecided": ("?", "#666666")}


def _point_mark(e: float, t_sorted: Sequence[float], tols: Sequence[float], relative: bool, relative_to: str,
                val: float) -> str:
    """✓ / ◐ / ✗ and the error, or why it is undefined."""
    if not np.isfinite(e):
        ref = "shift" if ("shift" in relative_to or "change" in relative_to) else "value"
        return (f"<span style='color:#666'>error undefined ({ref} ≈ 0)</span>" if relative and np.isfinite(val)
                else "<span style='color:#666'>error —</span>")
    ok = sum(e <= t for t in t_sorted)
    sym, col = _MARKS["all" if ok == len(t_sorted) else "none" if ok == 0 else "some"]
    return f"<span style='color:{col}'>{sym} {html.escape(fmt_error(e, tols, relative))}</span>"


def _bracket_mark(lo: float, hi: float, t_sorted: Sequence[float], tols: Sequence[float], relative: bool) -> str:
    """The certified error bracket [lo, hi] with ✓ (meets every tolerance), ✗ (none), ◐ (some) or ? (undecided)."""
    if np.isnan(lo) or np.isnan(hi):
        return "<span style='color:#666'>no certified bracket</span>"
    meets = sum(hi <= t for t in t_sorted)
    misses = sum(lo > t for t in t_sorted)
    if meets == len(t_sorted):
        key = "all"
    elif misses == len(t_sorted):
        key = "none"
    elif meets + misses == len(t_sorted):
        key = "some"
    else:
        key = "undecided"
    sym, col = _MARKS[key]
    factor, unit = (100.0, " %") if relative else (1.0, "")
    a, b = fmt_interval(max(lo, 0.0) * factor, hi * factor, 2, 4)
    return f"<span style='color:{col}'>{sym} [{html.escape(a)}, {html.escape(b)}]{unit}</span>"
