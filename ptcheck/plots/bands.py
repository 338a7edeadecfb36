"""Certified error bands against the coupling (no exact solve needed), with certified boundaries."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..approximants import order_name
from ._common import add_caption, caption_text, new_axes, positive_or_nan, style_axes
from ._style import EXACT_COLOR, FONT_SIZES, MARKER_COLOR, order_style, style
from .levels import _order_indices, _target_indices, check_comparison

__all__ = ["BandArtists", "plot_error_bands"]

#: Fields of a ComparisonResult drawn by :func:`plot_error_bands`: (lower, upper, exact error, axis label).
_KINDS = {
    "absolute": ("error_lower", "error_upper", "abs_error", "|perturbative − exact| (units of H0)"),
    "relative": ("rel_error_lower", "rel_error_upper", "rel_error", "relative error"),
}


@dataclass(frozen=True)
class BandArtists:
    """Artists made by :func:`plot_error_bands`.

    Attributes
    ----------
    figure, ax
    target : str
    orders : tuple of str
    bands : tuple of PolyCollection
        The certified bracket of each order's error (``fill_between``), in the order's colour.
    edges : tuple of tuple of Line2D
        (lower, upper) edge lines of each band.
    exact_lines : tuple of Line2D
        The exact error of each order where the result has it (``reference="both"``); empty otherwise.
    tolerance_line : Line2D or None
    open_spans : tuple of Polygon
        Hatched spans of couplings where no order drawn has a finite bracket (the gap could not be shown).
    certified_lines : tuple of Line2D
        Vertical line at each certified coupling (solid, the order's colour).
    fail_lines : tuple of Line2D
        Vertical line where failure is certified (dashed), one per boundary that has one.
    boundaries : tuple
        The ValidityBoundary objects drawn.
    coupling_line : Line2D or None
    caption : Text
    legend : Legend
    """

    figure: Any
    ax: Any
    target: str
    orders: tuple
    bands: tuple
    edges: tuple
    exact_lines: tuple
    tolerance_line: Any
    open_spans: tuple
    certified_lines: tuple
    fail_lines: tuple
    boundaries: tuple
    coupling_line: Any
    caption: Any
    legend: Any


def plot_error_bands(
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
) -> BandArtists:
    """Certified bracket of each order's error against λ (log axis), with certified boundaries.

    Parameters
    ----------
    result : ComparisonResult
        Made with ``reference="bounds"`` or ``"both"`` (``error_lower`` ...
        ``rel_error_upper``, shape (T, O, C)).  With ``"both"`` the exact
        error is drawn inside its band.
    boundaries : sequence of ValidityBoundary, optional
        From ``validity_boundary(..., reference="bounds")``: the certified
        coupling (solid vertical line) and the coupling from which failure is
        certified (dashed) of each order drawn.
    target, orders : optional
        What to draw (default: the first target, every order).
    error : {"absolute", "relative"}
    tol : float, optional
        Tolerance line (default: that of the first boundary).
    coupling : float, optional
        Current coupling (vertical grey line).
    ax : matplotlib Axes, optional
    caption : str, optional

    Returns
    -------
    BandArtists
    """
    check_comparison(result, "plot_error_bands")
    if error not in _KINDS:
        raise ValueError(f"error must be one of {list(_KINDS)}; got {error!r}")
    if getattr(result, "error_lower", None) is None:
        raise ValueError("plot_error_bands needs a comparison with bounds: compare(..., reference='bounds' or 'both')")
    (ti,) = _target_indices(result, [target] if target is not None else [result.targets[0]])
    o_idx = _order_indices(result, orders)
    f_lo, f_hi, f_ex, ylabel = _KINDS[error]
    lower, upper, exact = (np.asarray(getattr(result, f)) for f in (f_lo, f_hi, f_ex))
    boundaries = tuple(boundaries or ())
    if tol is None and boundaries:
        tol = boundaries[0].rtol if error == "relative" else boundaries[0].tol
    fig, ax, scale = new_axes(ax)
    lam = np.asarray(result.couplings, dtype=float)
    srt = np.argsort(lam, kind="stable")
    x = lam[srt]
    lw = max(scale, 0.75)
    with_exact = result.reference == "both"
    with style(scale):
        ax.set_yscale("log")
        bands, edges, exact_lines = [], [], []
        for oi in o_idx:
            st = order_style(result.orders[oi])
            lo = positive_or_nan(lower[ti, oi])[srt]
            hi = positive_or_nan(upper[ti, oi])[srt]
            lo_drawn = np.where(np.isnan(lo) & np.isfinite(hi), hi * 1e-3, lo)  # a bracket reaching 0: open below
            bands.append(ax.fill_between(x, lo_drawn, hi, color=st["color"], alpha=0.22, linewidth=0,
                                         label=f"{result.order_names[oi]}: certified bracket"))
            e_lo, = ax.plot(x, lo, color=st["color"], linewidth=0.9 * lw, linestyle="-")
            e_hi, = ax.plot(x, hi, color=st["color"], linewidth=0.9 * lw, linestyle="-")
            edges.append((e_lo, e_hi))
            if with_exact:
                ln, = ax.plot(x, positive_or_nan(exact[ti, oi])[srt], label=f"{result.order_names[oi]}: exact", **st)
                exact_lines.append(ln)
        if x.size > 1 and x[-1] > x[0]:
            ax.set_xlim(x[0], x[-1])
        gaps = []  # couplings where no order drawn has a finite upper bound: hatched, said in the legend
        open_ = ~np.any(np.isfinite(upper[ti][o_idx]), axis=0)[srt] & (x != 0)
        edges_x = np.flatnonzero(np.diff(np.concatenate([[0], open_.astype(int), [0]])))
        for k in range(0, edges_x.size, 2):
            i0, i1 = edges_x[k], edges_x[k + 1] - 1
            left = 0.5 * (x[i0 - 1] + x[i0]) if i0 > 0 else x[i0]
            right = 0.5 * (x[i1] + x[i1 + 1]) if i1 + 1 < x.size else x[i1]
            gaps.append(ax.axvspan(left, right, facecolor="none", edgecolor=MARKER_COLOR, hatch="//", linewidth=0,
                                   label="no certified bracket (no gap shown)" if not gaps else None))
        tol_line = None
        if tol is not None:
            tol_line = ax.axhline(float(tol), color=EXACT_COLOR, linestyle=(0, (1, 2)), linewidth=1.8 * lw,
                                  label=f"tolerance {float(tol):.2g}")
        cert_lines, fail_lines, used = [], [], []
        for b in boundaries:
            if b.target != result.targets[ti] or b.order not in result.orders:
                continue
            oi = list(result.orders).index(b.order)
            if oi not in o_idx or getattr(b, "reference", "exact") != "bounds":
                continue
            col = order_style(b.order)["color"]
            used.append(b)
            if math.isfinite(b.coupling) and b.coupling != 0:
                cert_lines.append(ax.axvline(b.coupling, color=col, linestyle="-", linewidth=1.6 * lw,
                                             label=f"{order_name(b.order)}: certified valid below"))
            if math.isfinite(b.certified_not):
                fail_lines.append(ax.axvline(b.certified_not, color=col, linestyle="--", linewidth=1.6 * lw,
                                             label=f"{order_name(b.order)}: certified not valid from"))
        line = None
        if coupling is not None:
            line = ax.axvline(float(coupling), color=MARKER_COLOR, linewidth=1.6 * lw, zorder=4)
        ax.set_xlabel("coupling λ")
        ax.set_ylabel(f"{ylabel} of {result.targets[ti]}" if len(result.targets[ti]) <= 24 else ylabel)
        style_axes(ax, scale)
        legend = ax.legend(loc="best", fontsize=FONT_SIZES["legend"] * scale, frameon=True, framealpha=0.85)
        if caption is None:
            extra = ["certified brackets, no exact solve" if not with_exact else "certified brackets and exact error"]
            cond = ~np.asarray(result.bounds_rigorous[ti], dtype=bool)[srt] & (x != 0) & ~open_
            if cond.any():
                extra.append(f"brackets conditional (estimated gap or unresolved pairing) at {int(cond.sum())} of "
                             f"{x.size} couplings, from |λ| = {np.min(np.abs(x[cond])):.3g}")
            for b in used:
                if math.isfinite(b.coupling) and b.coupling != 0:
                    kind = "rigorous" if b.rigorous else "conditional"
                    extra.append(f"{order_name(b.order)} certified to |λ| = {abs(b.coupling):.3g} ({kind})")
            caption = caption_text(
                f"{error} error bracket vs coupling", model=result.model_name, n=result.n, levels=[result.targets[ti]],
                orders=[result.order_names[i] for i in o_idx],
                tol=tol if error != "relative" else None, rtol=tol if error == "relative" else None,
                couplings=lam, extra=extra,
            )
        cap = add_caption(ax, caption, scale)
    return BandArtists(
        figure=fig, ax=ax, target=result.targets[ti], orders=tuple(result.order_names[i] for i in o_idx),
        bands=tuple(bands), edges=tuple(edges), exact_lines=tuple(exact_lines), tolerance_line=tol_line,
        open_spans=tuple(gaps),
        certified_lines=tuple(cert_lines), fail_lines=tuple(fail_lines), boundaries=tuple(used), coupling_line=line,
        caption=cap, legend=legend,
    )
