"""Error of each order against the coupling (log scale), with validity boundaries."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..approximants import order_name
from ._common import add_caption, caption_text, nearest_index, new_axes, positive_or_nan, style_axes
from ._style import EXACT_COLOR, FONT_SIZES, MARKER_COLOR, order_style, style
from .levels import _order_indices, _target_indices, check_comparison

__all__ = ["ErrorArtists", "plot_errors", "ERROR_KINDS"]

#: What :func:`plot_errors` can draw: field of the result and axis label.
ERROR_KINDS = {
    "absolute": ("abs_error", "|perturbative − exact| (units of H0)"),
    "relative": ("rel_error", "relative error"),
    "infidelity": ("infidelity", "state infidelity 1 − |⟨ψ_pt|ψ⟩|²"),
}


@dataclass(frozen=True)
class ErrorArtists:
    """Artists made by :func:`plot_errors`.

    Attributes
    ----------
    figure, ax
    target : str
        Target drawn.
    orders : tuple of str
        Orders drawn, one line each.
    lines : tuple of Line2D
        Error against the coupling, one per order (non-positive values are
        left out: NaN on the log axis); the legend names the block treatment
        where the target uses it.
    tolerance_line : Line2D or None
        Horizontal line at the tolerance.
    boundary_lines : tuple of Line2D
        One vertical line per validity boundary found (its ``coupling``).
    shades : tuple of Polygon
        Region beyond each boundary (``axvspan`` from the boundary to the end
        of the coupling range on its side), in the order's colour.
    boundaries : tuple
        The ValidityBoundary objects matching ``boundary_lines``/``shades``.
    coupling_line : Line2D or None
    coupling_markers : Line2D or None
        Errors of the orders drawn at the sweep point nearest the coupling.
    caption : Text
    legend : Legend
    """

    figure: Any
    ax: Any
    target: str
    orders: tuple
    lines: tuple
    tolerance_line: Any
    boundary_lines: tuple
    shades: tuple
    boundaries: tuple
    coupling_line: Any
    coupling_markers: Any
    caption: Any
    legend: Any


def plot_errors(
    result: Any,
    boundaries: Any = (),
    *,
    target: Any = None,
    orders: Any = None,
    error: str = "absolute",
    tol: float | None = None,
    coupling: float | None = None,
    ax: Any = None,
    caption: str | None = None,
) -> ErrorArtists:
    """Error of each order against λ on a log axis, with where each order stops being valid.

    Parameters
    ----------
    result : ComparisonResult
        ``abs_error``/``rel_error``/``infidelity`` (T, O, C) against ``couplings`` (C,).
    boundaries : sequence of ValidityBoundary, optional
        From :func:`ptcheck.compare.validity_boundary` for this target.  Each
        boundary with status ``"found"`` (or ``"fails_at_zero"``) is marked by
        a vertical line and the couplings beyond it are shaded in the
        colour of its order.  Boundaries of orders not drawn are skipped.
    target : str or int, optional
        Target to draw (default: the first).
    orders : sequence, optional
        Orders to draw (default: all compared).
    error : {"absolute", "relative", "infidelity"}
    tol : float, optional
        Tolerance line.  Default: the ``tol`` (absolute) or ``rtol``
        (relative) of the first boundary.
    coupling : float, optional
        Current coupling: vertical line and markers at the nearest sweep point.
    ax : matplotlib Axes, optional
    caption : str, optional

    Returns
    -------
    ErrorArtists
    """
    check_comparison(result, "plot_errors")
    if error not in ERROR_KINDS:
        raise ValueError(f"error must be one of {list(ERROR_KINDS)}; got {error!r}")
    (ti,) = _target_indices(result, [target] if target is not None else [result.targets[0]])
    o_idx = _order_indices(result, orders)
    field, ylabel = ERROR_KINDS[error]
    data = np.asarray(getattr(result, field))
    boundaries = tuple(boundaries or ())
    if tol is None and boundaries and error != "infidelity":
        b0 = boundaries[0]
        tol = b0.rtol if error == "relative" else b0.tol
    fig, ax, scale = new_axes(ax)
    lam = np.asarray(result.couplings, dtype=float)
    srt = np.argsort(lam, kind="stable")
    x = lam[srt]
    lw = max(scale, 0.75)
    with style(scale):
        ax.set_yscale("log")
        lines = []
        for oi in o_idx:
            tag = f" ({result.treatments[ti]})" if result.treatments[ti] in ("block", "mixed") else ""
            (ln,) = ax.plot(x, positive_or_nan(data[ti, oi])[srt], label=result.order_names[oi] + tag, **order_style(oi))
            lines.append(ln)
        if x.size > 1 and x[-1] > x[0]:
            ax.set_xlim(x[0], x[-1])
        tol_line = None
        if tol is not None:
            tol_line = ax.axhline(float(tol), color=EXACT_COLOR, linestyle=(0, (1, 2)), linewidth=1.8 * lw,
                                  label=f"tolerance {float(tol):.2g}")
        b_lines, shades, b_used = [], [], []
        for b in boundaries:
            if b.target != result.targets[ti] or b.order not in result.orders:
                continue
            oi = list(result.orders).index(b.order)
            if oi not in o_idx or b.status not in ("found", "fails_at_zero") or x.size == 0:
                continue
            edge = float(x[-1]) if b.direction > 0 else float(x[0])
            start = 0.0 if b.status == "fails_at_zero" else float(b.coupling)
            col = order_style(oi)["color"]
            b_lines.append(ax.axvline(start, color=col, linestyle="-", linewidth=1.4 * lw, alpha=0.9))
            lo, hi = sorted((start, edge))
            shades.append(ax.axvspan(lo, hi, color=col, alpha=0.10, linewidth=0))
            b_used.append(b)
        line = markers = None
        if coupling is not None:
            line = ax.axvline(float(coupling), color=MARKER_COLOR, linewidth=1.6 * lw, zorder=4)
            i = nearest_index(lam, float(coupling))
            markers, = ax.plot(
                np.full(len(o_idx), lam[i]), positive_or_nan(data[ti, o_idx, i]), linestyle="none", marker="o",
                color=EXACT_COLOR, markerfacecolor="white", zorder=5,
            )
        ax.set_xlabel("coupling λ")
        ax.set_ylabel(ylabel)
        style_axes(ax, scale)
        legend = ax.legend(loc="best", fontsize=FONT_SIZES["legend"] * scale)
        if caption is None:
            extra = [f"treatment {result.treatments[ti]}"]
            for b in b_used:
                extra.append(f"{order_name(b.order)} valid to |λ| = {abs(b.coupling):.3g}" if b.status == "found"
                             else f"{order_name(b.order)} fails at any λ ≠ 0")
            for b in boundaries:
                if b.status == "not_reached" and b.target == result.targets[ti]:
                    extra.append(f"{order_name(b.order)} valid beyond |λ| = {_fmt_big(b.max_coupling)}")
            caption = caption_text(
                f"{error} error vs coupling", model=result.model_name, n=result.n, levels=[result.targets[ti]],
                orders=[result.order_names[i] for i in o_idx],
                tol=tol if error != "relative" else None, rtol=tol if error == "relative" else None,
                couplings=lam, extra=extra,
            )
        cap = add_caption(ax, caption, scale)
    return ErrorArtists(
        figure=fig, ax=ax, target=result.targets[ti], orders=tuple(result.order_names[i] for i in o_idx),
        lines=tuple(lines), tolerance_line=tol_line, boundary_lines=tuple(b_lines), shades=tuple(shades),
        boundaries=tuple(b_used), coupling_line=line, coupling_markers=markers, caption=cap, legend=legend,
    )


def _fmt_big(x: float) -> str:
    return f"{x:.3g}" if math.isfinite(x) else "∞"
