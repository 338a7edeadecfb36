"""Error of each order against the coupling (log scale), with validity boundaries."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from matplotlib.colors import to_rgba
from matplotlib.patches import Patch

from .._format import fmt_certified_range, fmt_toward
from ..approximants import order_name
from ._common import (
    add_caption,
    add_legend,
    add_physical_axis,
    caption_text,
    fmt_physical,
    log_axis,
    nearest_index,
    new_axes,
    physical_coupling,
    positive_or_nan,
    style_axes,
)
from ._style import BAND_COLOR, EXACT_COLOR, FONT_SIZES, MARKER_COLOR, SHADE_COLOR, finite_style, order_style, style
from .levels import _order_indices, _target_indices, check_comparison, target_unit

__all__ = ["ErrorArtists", "plot_errors", "ERROR_KINDS", "BRACKET_FIELDS", "error_label", "fmt_tolerance",
           "TOLERANCE_DASHES"]

#: What :func:`plot_errors` can draw: the result's field for each error kind.
ERROR_KINDS = {"absolute": "abs_error", "relative": "rel_error", "infidelity": "infidelity"}
#: Certified bracket of each error kind (a comparison made with ``reference="bounds"`` or ``"both"``).
BRACKET_FIELDS = {"absolute": ("error_lower", "error_upper"), "relative": ("rel_error_lower", "rel_error_upper")}
#: Opacity of a certified error band (the order's colour).
BAND_ALPHA = 0.22
#: Legend entry of the bands (one neutral swatch for every order's band).
BAND_LABEL = "band: certified bracket of each order's error"

#: Line styles of successive tolerances (black): the boundary segments reuse them.
TOLERANCE_DASHES = ((0, (1, 1.6)), (0, (5, 2)), (0, (7, 2, 1.5, 2)), (0, (2, 3)))


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
        Error against the coupling, one per order, in the order's own colour
        (non-positive values are left out: NaN on the log axis); the legend
        names the block treatment where the target uses it.
    tolerance_line : Line2D or None
        Horizontal line at the first (smallest) tolerance.
    boundary_lines : tuple of Line2D
        One per validity boundary found: a vertical segment at its
        ``coupling`` from the bottom of the axes up to its tolerance, in the
        order's colour and the tolerance's line style, with a marker where
        the error curve meets the tolerance.
    shades : tuple of Rectangle
        One light grey band per tolerance: errors above it (the legend says
        so).  Bands of several tolerances nest (the darker, the more
        tolerances are exceeded).
    boundaries : tuple
        The ValidityBoundary objects matching ``boundary_lines``.
    coupling_line : Line2D or None
    coupling_markers : Line2D or None
        Errors of the orders drawn at the sweep point nearest the coupling
        (with certified bounds only: both ends of each bracket).
    caption : Text
    legend : Legend
    tolerances : tuple of float
        The tolerances drawn, ascending.
    tolerance_lines : tuple of Line2D
        One horizontal line per tolerance (same order).
    bands : tuple of PolyCollection
        Certified bracket of each order's error (``fill_between`` in the
        order's colour); empty when none is drawn.
    band_edges : tuple of (Line2D, Line2D)
        Lower and upper edge of each band (the order's colour and dashes:
        with certified bounds only they are what names the order).
    certified_lines : tuple of Line2D
        One per certified boundary drawn (``reference="bounds"`` boundaries):
        with bounds only, a segment at the certified coupling rising to the
        tolerance and one at ``certified_not`` rising from it; beside exact
        errors, a bar on the tolerance line from the certified coupling to
        ``certified_not`` (the true λ* lies on it).
    certified : tuple
        The certified ValidityBoundary objects drawn.
    exact_known : bool
        The result has exact errors (``reference`` "exact" or "both").
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
    tolerances: tuple = ()
    tolerance_lines: tuple = ()
    bands: tuple = ()
    band_edges: tuple = ()
    certified_lines: tuple = ()
    certified: tuple = ()
    exact_known: bool = True


def error_label(result: Any, ti: int, error: str) -> str:
    """Axis label saying whose error it is, and relative to what.

    Examples: "absolute error of |1,0⟩ (units of H0)", "relative error of chi\n(÷ |exact chi|)".
    """
    name = result.targets[ti]
    key = result.levels[ti]
    if error == "absolute":
        return f"absolute error of {name} ({target_unit(result, [ti])})"
    if error == "infidelity":
        return f"infidelity of {name}: 1 − |⟨ψ_pt|ψ_exact⟩|²"
    ref = getattr(key, "relative_to", "shift")
    return f"relative error of {name}\n(÷ |exact {'shift' if ref == 'shift' else name}|)"


def fmt_tolerance(value: float, relative: bool, unit: str = "") -> str:
    """``"1 %"`` (relative) or ``"1e-05 GHz"`` (absolute)."""
    if relative:
        return f"{100 * value:.3g} %"
    return f"{value:.2g}" + (f" {unit}" if unit and unit != "units of H0" else "")


def plot_errors(
    result: Any,
    boundaries: Any = (),
    *,
    target: Any = None,
    orders: Any = None,
    error: str = "absolute",
    tol: Any = None,
    coupling: float | None = None,
    ax: Any = None,
    caption: str | None = None,
    coupling_scale: float | None = None,
    coupling_unit: str | None = None,
    bands: bool | None = None,
) -> ErrorArtists:
    """Error of each order against λ on a log axis, with where each order stops being valid.

    With certified bounds (a comparison made with ``reference="bounds"`` or
    ``"both"``) the certified bracket of each error is a band in the order's
    colour: beside the exact error (``"both"``), or alone (``"bounds"``: no
    exact solve, so no exact error to draw).

    Parameters
    ----------
    result : ComparisonResult
        ``abs_error``/``rel_error``/``infidelity`` (T, O, C) against ``couplings`` (C,).
    boundaries : sequence of ValidityBoundary, optional
        From :func:`ptcheck.compare.validity_boundary` for this target, at one
        or several tolerances.  Each boundary with status ``"found"`` (or
        ``"fails_at_zero"``, drawn at λ = 0) is a segment in its order's colour
        rising to its tolerance; the legend gives λ* (and the physical
        coupling).  Boundaries not reached within the search are listed in
        the legend.  Boundaries of orders or targets not drawn are skipped.
        Certified boundaries (``reference="bounds"``) are drawn with the
        bands (see ``certified_lines`` of :class:`ErrorArtists`); their
        couplings are printed rounded toward safety (the certified coupling
        down, the coupling of certified failure up).
    target : str or int, optional
        Target to draw (default: the first).
    orders : sequence, optional
        Orders to draw (default: all compared).
    error : {"absolute", "relative", "infidelity"}
    tol : float or sequence of float, optional
        Tolerance line(s), e.g. ``[0.01, 0.05]``.  Default: the tolerances of
        the boundaries given (``tol`` for absolute, ``rtol`` for relative).
    coupling : float, optional
        Current coupling: vertical line and markers at the nearest sweep point.
    ax : matplotlib Axes, optional
    caption : str, optional
    coupling_scale, coupling_unit : float, str, optional
        Physical coupling at λ = 1 and its unit (default: the result's, if
        any): a secondary axis on top and λ* in both units.
    bands : bool, optional
        Draw the certified brackets (default: whenever the result has them
        and ``error`` is "absolute" or "relative").

    Returns
    -------
    ErrorArtists
    """
    check_comparison(result, "plot_errors")
    if error not in ERROR_KINDS:
        raise ValueError(f"error must be one of {list(ERROR_KINDS)}; got {error!r}")
    has_brackets = getattr(result, "error_lower", None) is not None and error in BRACKET_FIELDS
    if bands is None:
        bands = has_brackets
    elif bands and not has_brackets:
        raise ValueError("bands=True needs a comparison with certified bounds (compare(..., reference='bounds' or "
                         f"'both')) and error 'absolute' or 'relative'; got reference={getattr(result, 'reference', 'exact')!r}, "
                         f"error={error!r}")
    exact_known = getattr(result, "reference", "exact") != "bounds"
    (ti,) = _target_indices(result, [target] if target is not None else [result.targets[0]])
    o_idx = _order_indices(result, orders)
    data = np.asarray(getattr(result, ERROR_KINDS[error]))
    boundaries = tuple(boundaries or ())
    relative = error == "relative"
    tols = _tolerances(tol, boundaries, error)
    unit = target_unit(result, [ti])
    phys = physical_coupling(result, coupling_scale, coupling_unit)
    fig, ax, scale = new_axes(ax)
    lam = np.asarray(result.couplings, dtype=float)
    srt = np.argsort(lam, kind="stable")
    x = lam[srt]
    lw = max(scale, 0.75)
    with style(scale):
        ax.set_yscale("log")
        log_axis(ax.yaxis)
        lines = []
        for oi in o_idx:
            tag = f" ({result.treatments[ti]})" if result.treatments[ti] in ("block", "mixed") else ""
            y = positive_or_nan(data[ti, oi])[srt]
            (ln,) = ax.plot(x, y, label=result.order_names[oi] + tag if exact_known else None,
                            **finite_style(order_style(result.orders[oi]), y))
            lines.append(ln)
        band_arts, edge_arts, mark_data = [], [], data[ti, o_idx]
        if bands:
            lower, upper = (np.asarray(getattr(result, f), dtype=float) for f in BRACKET_FIELDS[error])
            for k, oi in enumerate(o_idx):
                st = order_style(result.orders[oi])
                lo, hi = positive_or_nan(lower[ti, oi])[srt], positive_or_nan(upper[ti, oi])[srt]
                lo_drawn = np.where(np.isnan(lo) & np.isfinite(hi), hi * 1e-3, lo)  # a bracket reaching 0: open below
                band_arts.append(ax.fill_between(x, lo_drawn, hi, color=st["color"], alpha=BAND_ALPHA, linewidth=0,
                                                 zorder=1.5, label=BAND_LABEL if k == 0 else None))
                edge = dict(color=st["color"], linestyle=st["linestyle"], linewidth=(1.3 if not exact_known else 0.8) * lw,
                            alpha=1.0 if not exact_known else 0.7)
                (e_lo,) = ax.plot(x, lo, **edge)
                (e_hi,) = ax.plot(x, hi, label=None if exact_known else result.order_names[oi], **edge)
                edge_arts.append((e_lo, e_hi))
            if not exact_known:
                mark_data = np.concatenate([lower[ti, o_idx], upper[ti, o_idx]])
        if x.size > 1 and x[-1] > x[0]:
            ax.set_xlim(x[0], x[-1])
        tol_lines = []
        for k, t in enumerate(tols):
            tol_lines.append(ax.axhline(t, color=EXACT_COLOR, linestyle=TOLERANCE_DASHES[k % len(TOLERANCE_DASHES)],
                                        linewidth=1.6 * lw, label=f"tolerance {fmt_tolerance(t, relative, unit)}"))
        ylim = _ylim(ax, tols)
        shades = []
        for t in tols:
            label = "error above a tolerance" if not shades else None
            shades.append(ax.axhspan(t, ylim[1] * 1e3, facecolor=SHADE_COLOR, alpha=0.07, linewidth=0, zorder=0,
                                     label=label))
        ax.set_ylim(*ylim)
        b_lines, b_used, extra_handles, c_lines, c_used = [], [], [], [], []
        same = {}  # statement without its tolerance -> (first artist, tolerances): said once, "at 1 % and 5 %"
        for b in boundaries:
            if b.target != result.targets[ti] or b.order not in result.orders or x.size == 0:
                continue
            oi = list(result.orders).index(b.order)
            if oi not in o_idx:
                continue
            bt = b.rtol if relative else b.tol
            k = _tol_index(tols, bt)
            col = order_style(b.order)["color"]
            several = len(tols) > 1
            at = f" at {fmt_tolerance(bt, relative, unit)}" if several and bt is not None else ""
            if getattr(b, "reference", "exact") == "bounds":
                if exact_known and b.status not in ("certified", "not_certified"):
                    continue  # the exact boundary says it (fails at zero / valid over the range)
                if b.status in ("certified", "not_certified"):
                    dash = TOLERANCE_DASHES[(k or 0) % len(TOLERANCE_DASHES)] if several else "-"
                    top = bt if bt is not None and k is not None else ylim[1]
                    made = _certified_artists(ax, b, col, dash, top, ylim, x, exact_known, phys, at, lw)
                    if made:
                        c_lines.extend(made)
                        c_used.append(b)
                    continue
            if b.status in ("found", "fails_at_zero"):
                start = 0.0 if b.status == "fails_at_zero" else float(b.coupling)
                top = bt if bt is not None and k is not None else ylim[1]
                outside = x.size > 1 and not (x[0] <= start <= x[-1])
                text = (f"{order_name(b.order)}: λ* = {fmt_physical(abs(start), phys)}{at}" if b.status == "found"
                        else f"{order_name(b.order)}: fails at any λ ≠ 0{at}")
                if outside and b.status == "found":  # its line is off the axes; the arrowhead at the edge points to it
                    text += " (beyond the view)"
                (bl,) = ax.plot([start, start], [ylim[0], top], color=col,
                                linestyle=TOLERANCE_DASHES[(k or 0) % len(TOLERANCE_DASHES)] if several else "-",
                                linewidth=1.6 * lw, marker="o", markevery=[1], markerfacecolor=col,
                                markeredgecolor="white", zorder=4, label=text)
                b_lines.append(bl)
                b_used.append(b)
                if b.status == "fails_at_zero" and at:
                    _said_once(same, bl, text[: -len(at)], at)
                if outside:  # beyond the view: an arrowhead at the edge
                    right = start > x[-1]
                    ax.plot([x[-1] if right else x[0]], [top], linestyle="none", marker=">" if right else "<", color=col,
                            markersize=10 * lw, clip_on=False, zorder=4)
            elif b.status == "not_reached":
                word = "certified valid" if getattr(b, "reference", "exact") == "bounds" else "valid"
                (h,) = ax.plot([], [], color=col, marker=">", linestyle="none",
                               label=f"{order_name(b.order)}: {word} beyond λ = {fmt_physical(abs(b.max_coupling), phys)}{at}"
                               if math.isfinite(b.max_coupling) else f"{order_name(b.order)}: never exceeds it{at}")
                extra_handles.append(h)
                if at:
                    _said_once(same, h, h.get_label()[: -len(at)], at)
        if exact_known and c_lines:
            (h,) = ax.plot([], [], color=MARKER_COLOR, linewidth=5 * lw, alpha=0.55, solid_capstyle="butt", marker="|",
                           markersize=12 * lw, label="bar on a tolerance: certified range of λ*")
            extra_handles.append(h)
        line = markers = None
        if coupling is not None:
            line = ax.axvline(float(coupling), color=MARKER_COLOR, linewidth=1.6 * lw, zorder=4)
            i = nearest_index(lam, float(coupling))
            markers, = ax.plot(
                np.full(mark_data.shape[0], lam[i]), positive_or_nan(mark_data[:, i]), linestyle="none", marker="o",
                color=EXACT_COLOR, markerfacecolor="white", zorder=5,
            )
        ax.set_xlabel("coupling λ")
        ax.set_ylabel(error_label(result, ti, error))
        style_axes(ax, scale)
        add_physical_axis(ax, phys, scale)
        handles, texts = ax.get_legend_handles_labels()
        handles = [Patch(facecolor=to_rgba(BAND_COLOR, 0.45), linewidth=0) if t == BAND_LABEL else h
                   for h, t in zip(handles, texts)]
        legend = add_legend(ax, scale, handles=handles, labels=texts,
                            size=FONT_SIZES["legend"] * (0.9 if len(texts) > 6 else 1.0))
        if caption is None:
            treat = result.treatments[ti]
            caption = caption_text(
                f"{error} error", model=result.model_name, n=result.n, levels=[result.targets[ti]],
                extra=[f"treatment {treat}" if treat != "nondegenerate" else ""],
            )
        cap = add_caption(ax, caption, scale)
    return ErrorArtists(
        figure=fig, ax=ax, target=result.targets[ti], orders=tuple(result.order_names[i] for i in o_idx),
        lines=tuple(lines), tolerance_line=tol_lines[0] if tol_lines else None, boundary_lines=tuple(b_lines),
        shades=tuple(shades), boundaries=tuple(b_used), coupling_line=line, coupling_markers=markers, caption=cap,
        legend=legend, tolerances=tuple(tols), tolerance_lines=tuple(tol_lines), bands=tuple(band_arts),
        band_edges=tuple(edge_arts), certified_lines=tuple(c_lines), certified=tuple(c_used), exact_known=exact_known,
    )


def _certified_artists(ax: Any, b: Any, col: str, dash: Any, top: float, ylim: tuple, x: np.ndarray, exact_known: bool,
                       phys: Any, at: str, lw: float) -> list:
    """Artists of one certified boundary (see ``certified_lines`` of :class:`ErrorArtists`)."""
    c, f = float(b.coupling), float(b.certified_not)
    name = order_name(b.order)
    made = []
    if exact_known:  # a bar on the tolerance line: the true λ* lies between the certified coupling and certified_not
        end = f if math.isfinite(f) else (x[-1] if c >= 0 else x[0])
        (bar,) = ax.plot([c, end], [top, top], color=col, linewidth=5 * lw, alpha=0.55, solid_capstyle="butt",
                         marker="|", markevery=[0] if not math.isfinite(f) else [0, 1], markersize=12 * lw, zorder=4)
        return [bar]
    kind = "rigorous" if b.rigorous else "conditional"
    if c != 0:
        if math.isfinite(f):
            lo, hi = fmt_certified_range(abs(c), abs(f))
            if b.rigorous != b.certified_not_rigorous:
                kind = "rigorous" if b.rigorous else "conditional"
                kind += ", failure " + ("rigorous" if b.certified_not_rigorous else "conditional")
            text = f"{name}{at}: certified valid below λ = {_with_phys(lo, abs(c), phys)}, not valid from {hi} ({kind})"
        else:
            text = f"{name}{at}: certified valid below λ = {_with_phys(fmt_toward(abs(c)), abs(c), phys)} ({kind})"
        (seg,) = ax.plot([c, c], [ylim[0], top], color=col, linestyle=dash, linewidth=1.6 * lw, marker="o", markevery=[1],
                         markerfacecolor=col, markeredgecolor="white", zorder=4, label=text)
        made.append(seg)
    if math.isfinite(f):
        label = (None if c != 0 else
                 f"{name}{at}: certified not valid from λ = {_with_phys(fmt_toward(abs(f), up=True), abs(f), phys, up=True)}")
        (seg,) = ax.plot([f, f], [top, ylim[1]], color=col, linestyle=dash, linewidth=1.6 * lw, marker="X", markevery=[0],
                         markerfacecolor=col, markeredgecolor="white", zorder=4, label=label)
        made.append(seg)
    return made


def _said_once(same: dict, artist: Any, stem: str, at: str) -> None:
    """Label ``artist`` "<stem> at <t1> and <t2>" when an earlier one said ``stem`` at another tolerance.

    The first artist keeps the legend entry (its label lists every tolerance);
    later ones stay drawn but leave the legend.
    """
    tol = at.removeprefix(" at ")
    if stem not in same:
        same[stem] = (artist, [tol])
        return
    first, tols = same[stem]
    tols.append(tol)
    first.set_label(f"{stem} at {', '.join(tols[:-1])} and {tols[-1]}")
    artist.set_label("_" + artist.get_label())  # drawn, not listed


def _with_phys(text: str, value: float, phys: Any, *, up: bool = False) -> str:
    """A certified coupling as printed, with its physical value rounded the same way when the model has one."""
    if phys is None:
        return text
    scale, unit = phys
    return f"{text} ({fmt_toward(value * scale, up=up)}{' ' + unit if unit else ''})"


def _tolerances(tol: Any, boundaries: tuple, error: str) -> list[float]:
    if tol is None:
        if error == "infidelity":
            return []
        vals = [b.rtol if error == "relative" else b.tol for b in boundaries]
        return sorted({float(v) for v in vals if v is not None})
    vals = [tol] if np.ndim(tol) == 0 else list(tol)
    out = []
    for v in vals:
        f = float(v)
        if not (math.isfinite(f) and f > 0):
            raise ValueError(f"tol must be a positive number or a sequence of them; got {tol!r}")
        out.append(f)
    return sorted(set(out))


def _tol_index(tols: list[float], t: float | None) -> int | None:
    if t is None:
        return None
    for k, v in enumerate(tols):
        if math.isclose(v, t, rel_tol=1e-9):
            return k
    return None


def _ylim(ax: Any, tols: list[float]) -> tuple[float, float]:
    """Log y limits holding the data and every tolerance line."""
    lo, hi = ax.get_ylim()
    if tols:
        lo, hi = min(lo, min(tols) / 3.0), max(hi, max(tols) * 3.0)
    return lo, hi


def _fmt_big(x: float) -> str:
    return f"{x:.3g}" if math.isfinite(x) else "∞"
