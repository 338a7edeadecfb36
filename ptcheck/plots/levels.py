"""Levels (or derived quantities) against the coupling: exact and perturbative."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from matplotlib.colors import to_rgba
from matplotlib.patches import Patch

from ._common import (
    add_caption,
    add_legend,
    add_physical_axis,
    caption_text,
    finite_or_none,
    nearest_index,
    new_axes,
    physical_coupling,
    style_axes,
)
from ._style import BAND_COLOR, CROSSING_COLOR, EXACT_COLOR, FONT_SIZES, MARKER_COLOR, finite_style, order_style, style

#: Opacity of the certified bracket of an exact value.
BAND_ALPHA = 0.3

__all__ = ["LevelArtists", "plot_levels", "crossing_info", "spread", "target_unit"]


@dataclass(frozen=True)
class LevelArtists:
    """Artists made by :func:`plot_levels`.

    Attributes
    ----------
    figure, ax
        The figure and axes drawn on.
    targets : tuple of str
        Names of the targets drawn (T').
    orders : tuple of str
        Names of the orders drawn (O').
    exact : tuple of Line2D
        One line per target: exact values against the coupling.
    perturbative : tuple of tuple of Line2D
        ``perturbative[t][o]``: target t, order o.
    coupling_line : Line2D or None
        Vertical line at the current coupling (move it with ``set_xdata``).
    coupling_markers : Line2D or None
        Exact values at the sweep point nearest the current coupling.
    crossings : tuple of Artist
        Lines and labels marking avoided crossings.
    caption : Text
        One line above the axes.
    legend : Legend
        Orders and "exact" (framed, inside the axes).
    labels : tuple of Annotation
        Direct label of each exact curve (the target's name) at its right end.
    bands : tuple of PolyCollection
        Certified bracket of each target's exact value (grey), when the
        result has brackets (``compare(..., reference="bounds" or "both")``).
    band_edges : tuple of (Line2D, Line2D)
        Lower and upper edge of each bracket.
    exact_known : bool
        The result has exact values (``reference`` "exact" or "both"); with
        certified bounds only, the brackets stand in for the exact curves
        (markers, direct labels, view limits).
    """

    figure: Any
    ax: Any
    targets: tuple
    orders: tuple
    exact: tuple
    perturbative: tuple
    coupling_line: Any
    coupling_markers: Any
    crossings: tuple
    caption: Any
    legend: Any
    labels: tuple = ()
    bands: tuple = ()
    band_edges: tuple = ()
    exact_known: bool = True


def crossing_info(crossing: Any) -> tuple[float | None, str]:
    """(coupling, short text) of an avoided-crossing record from the exact solver."""
    d = crossing.to_dict() if hasattr(crossing, "to_dict") else dict(crossing) if isinstance(crossing, dict) else {}
    lam = finite_or_none(getattr(crossing, "coupling", d.get("coupling")))
    labels = getattr(crossing, "labels", None) or d.get("labels")
    if not labels:
        levels = getattr(crossing, "levels", None) or d.get("levels") or ()
        labels = [str(x) for x in levels]
    gap = finite_or_none(getattr(crossing, "min_gap", d.get("min_gap", d.get("gap"))))
    text = "avoided crossing"
    if labels:
        text += " " + "–".join(str(x) for x in labels)
    if gap is not None:
        text += f" (gap {gap:.2g})"
    return lam, text


def plot_levels(
    result: Any,
    *,
    targets: Any = None,
    orders: Any = None,
    coupling: float | None = None,
    ax: Any = None,
    caption: str | None = None,
    shift: bool = False,
    ylabel: str | None = None,
    coupling_scale: float | None = None,
    coupling_unit: str | None = None,
    bands: bool | None = None,
) -> LevelArtists:
    """Exact and perturbative values of levels or quantities against λ.

    Each order has its own colour and dash pattern in every figure
    (:func:`ptcheck.plots.order_style`); exact values are black, and each exact
    curve is named by a direct label at its right end.

    Parameters
    ----------
    result : ComparisonResult
        From :func:`ptcheck.compare`; arrays ``exact`` (T, C) and
        ``perturbative`` (T, O, C) are drawn against ``couplings`` (C,).
    targets : sequence of str, optional
        Target names to draw (default: all).
    orders : sequence of order specs or names, optional
        Orders to draw (default: all compared).
    coupling : float, optional
        Current coupling λ: a vertical line, and markers on the exact values
        at the nearest sweep point.
    ax : matplotlib Axes, optional
        Draw here; a new 16:9 figure is made only when None.
    caption : str, optional
        Caption text (one line); default: targets, model, N.  ``""`` for none.
    shift : bool, default False
        Draw ``value − value at λ = 0`` (``result.unperturbed``): the level
        shifts, comparable across levels far apart in energy.
    ylabel : str, optional
    coupling_scale, coupling_unit : float, str, optional
        Physical coupling at λ = 1 and its unit (default: the result's
        ``coupling_scale``/``coupling_unit`` if it has them): adds a secondary
        coupling axis on top.
    bands : bool, optional
        Draw the certified bracket of each exact value as a grey band
        (default: whenever the result has brackets).  With certified bounds
        only (``reference="bounds"``) there is no exact curve and the band is
        drawn in its place.

    Returns
    -------
    LevelArtists

    Examples
    --------
    >>> import numpy as np, ptcheck
    >>> from ptcheck.compare import compare
    >>> m = ptcheck.Model(np.diag([0.0, 1.0]), [[0, 0.2], [0.2, 0]], name="two-level")
    >>> art = plot_levels(compare(m, [0], [2], np.linspace(0, 1, 11)), coupling=0.5)
    >>> art.exact[0].get_ydata().shape
    (11,)
    """
    check_comparison(result, "plot_levels")
    has_brackets = getattr(result, "exact_lower", None) is not None
    if bands is None:
        bands = has_brackets
    elif bands and not has_brackets:
        raise ValueError("bands=True needs a comparison with certified bounds: compare(..., reference='bounds' or 'both')")
    exact_known = getattr(result, "reference", "exact") != "bounds"
    t_idx = _target_indices(result, targets)
    o_idx = _order_indices(result, orders)
    fig, ax, scale = new_axes(ax)
    lam = np.asarray(result.couplings, dtype=float)
    srt = np.argsort(lam, kind="stable")
    x = lam[srt]
    offset = np.asarray(result.unperturbed, dtype=float) if shift else np.zeros(len(result.targets))
    unit = target_unit(result, t_idx)
    if ylabel is None:
        ylabel = f"shift from λ = 0 ({unit})" if shift else f"value ({unit})" if _all_quantities(result, t_idx) else f"energy ({unit})"
    lw = max(scale, 0.75)
    with style(scale):
        exact_lines, pert_lines = [], []
        for k, ti in enumerate(t_idx):
            row = []
            for oi in o_idx:
                y = np.asarray(result.perturbative[ti, oi])[srt] - offset[ti]
                (ln,) = ax.plot(x, y, label=result.order_names[oi] if k == 0 else None,
                                **finite_style(order_style(result.orders[oi]), y))
                row.append(ln)
            pert_lines.append(tuple(row))
            (ex,) = ax.plot(x, np.asarray(result.exact[ti])[srt] - offset[ti], color=EXACT_COLOR, linewidth=2.6 * lw,
                            label="exact" if k == 0 and exact_known else None, zorder=3)
            exact_lines.append(ex)
        band_arts, edge_arts = [], []
        edge_width = (1.2 if not exact_known else 0.7) * lw
        if bands:
            for k, ti in enumerate(t_idx):
                lo = np.asarray(result.exact_lower[ti], dtype=float)[srt] - offset[ti]
                hi = np.asarray(result.exact_upper[ti], dtype=float)[srt] - offset[ti]
                band_arts.append(ax.fill_between(x, lo, hi, color=BAND_COLOR, alpha=BAND_ALPHA, linewidth=0, zorder=2.5))
                edge = dict(color=EXACT_COLOR, linewidth=edge_width, zorder=2.6)
                (e_lo,) = ax.plot(x, lo, **edge)
                (e_hi,) = ax.plot(x, hi, **edge)
                edge_arts.append((e_lo, e_hi))
        # keep the view on the exact values: diverging orders must not squash them
        ex_vals = np.asarray(result.exact)[t_idx] - offset[t_idx, None]
        if not exact_known:  # the brackets stand in for them
            lo_all = np.asarray(result.exact_lower)[t_idx] - offset[t_idx, None]
            hi_all = np.asarray(result.exact_upper)[t_idx] - offset[t_idx, None]
            ex_vals = np.concatenate([lo_all, hi_all])
            mid = 0.5 * (lo_all + hi_all)
        centre = ex_vals if exact_known else mid
        finite = centre[np.isfinite(centre)]
        if finite.size:
            lo, hi = float(finite.min()), float(finite.max())
            pad = 0.12 * (hi - lo) if hi > lo else max(abs(hi), 1.0) * 0.1
            lo, hi = lo - pad, hi + pad
            ends = ex_vals[np.isfinite(ex_vals)]
            if not exact_known and ends.size:  # wide brackets run past the view rather than squash it
                reach = hi - lo
                lo, hi = max(min(lo, float(ends.min())), lo - 0.5 * reach), min(max(hi, float(ends.max())), hi + 0.5 * reach)
            ax.set_ylim(lo, hi)
        if x.size > 1 and x[-1] > x[0]:
            ax.set_xlim(x[0], x[-1])
        line = markers = None
        if coupling is not None:
            line = ax.axvline(float(coupling), color=MARKER_COLOR, linewidth=1.6 * lw, zorder=4)
            i = nearest_index(lam, float(coupling))
            markers, = ax.plot(
                np.full(ex_vals.shape[0], lam[i]), ex_vals[:, i], linestyle="none", marker="o", color=EXACT_COLOR,
                markerfacecolor="white", zorder=5,
            )
        crossings = []
        for ac in getattr(result, "avoided_crossings", ()):
            lc, text = crossing_info(ac)
            if lc is None or x.size == 0 or not (x[0] <= lc <= x[-1]):
                continue
            crossings.append(ax.axvline(lc, color=CROSSING_COLOR, linestyle=(0, (2, 2)), linewidth=1.4 * lw))
            crossings.append(ax.annotate(
                text, xy=(lc, 0.02), xycoords=("data", "axes fraction"), rotation=90, ha="right", va="bottom",
                fontsize=FONT_SIZES["caption"] * scale, color="#555555",
            ))
        labels = _end_labels(ax, [result.targets[i] for i in t_idx], (ex_vals if exact_known else mid)[:, srt], scale)
        ax.set_xlabel("coupling λ")
        ax.set_ylabel(ylabel)
        style_axes(ax, scale)
        add_physical_axis(ax, physical_coupling(result, coupling_scale, coupling_unit), scale)
        handles, texts = ax.get_legend_handles_labels()
        if band_arts:  # a swatch with the edges drawn; say so when no bracket is wider than the curve
            widest = _widest_points(ax, np.asarray(result.exact_upper)[t_idx] - np.asarray(result.exact_lower)[t_idx])
            handles.append(Patch(facecolor=to_rgba(BAND_COLOR, BAND_ALPHA), edgecolor=EXACT_COLOR, linewidth=edge_width))
            texts.append("certified bracket of the exact value" + (" (thinner than the line)" if widest < 2.6 * lw else ""))
        legend = add_legend(ax, scale, handles=handles, labels=texts)
        if caption is None:
            caption = caption_text(
                "levels" if not _all_quantities(result, t_idx) else "values", model=result.model_name, n=result.n,
                levels=[result.targets[i] for i in t_idx], extra=[_treatment_note(result, t_idx)],
            )
        cap = add_caption(ax, caption, scale)
    return LevelArtists(
        figure=fig, ax=ax, targets=tuple(result.targets[i] for i in t_idx), orders=tuple(result.order_names[i] for i in o_idx),
        exact=tuple(exact_lines), perturbative=tuple(pert_lines), coupling_line=line, coupling_markers=markers,
        crossings=tuple(crossings), caption=cap, legend=legend, labels=tuple(labels), bands=tuple(band_arts),
        band_edges=tuple(edge_arts), exact_known=exact_known,
    )


def _widest_points(ax: Any, widths: np.ndarray) -> float:
    """Largest of ``widths`` (data units along y) in points on the axes as laid out now (0 if none is finite)."""
    lo, hi = ax.get_ylim()
    finite = widths[np.isfinite(widths)]
    if not finite.size or hi <= lo:
        return 0.0
    return float(finite.max()) * ax.get_position().height * ax.figure.get_figheight() * 72.0 / (hi - lo)


def _end_labels(ax: Any, names: list[str], values: np.ndarray, scale: float) -> list[Any]:
    """Direct label of each exact curve just right of the axes, at the height of its last finite value.

    Labels closer than one text line are spread apart (in axes fraction, from
    the y limits already set), so every curve keeps a readable name.
    """
    lo, hi = ax.get_ylim()
    size = FONT_SIZES["legend"] * scale
    height_pt = max(ax.get_position().height * ax.figure.get_figheight() * 72.0, 1.0)
    gap = 1.15 * size / height_pt
    ends = []
    for row in values:
        ok = np.flatnonzero(np.isfinite(row))
        y = float(row[ok[-1]]) if ok.size else 0.5 * (lo + hi)
        ends.append(min(max((y - lo) / (hi - lo) if hi > lo else 0.5, 0.0), 1.0))
    ys = spread(ends, gap)
    return [
        ax.annotate(name, xy=(1.0, y), xycoords="axes fraction", xytext=(4.0 * scale / 0.72, 0.0), textcoords="offset points",
                    ha="left", va="center", fontsize=size, color=EXACT_COLOR, annotation_clip=False, clip_on=False)
        for name, y in zip(names, ys)
    ]


def spread(ys: list[float], gap: float) -> list[float]:
    """Positions as close as possible to ``ys`` (any order) with neighbours at least ``gap`` apart.

    Examples
    --------
    >>> [round(y, 2) for y in spread([0.5, 0.5], 0.1)]
    [0.45, 0.55]
    """
    if not ys:
        return []
    order = sorted(range(len(ys)), key=lambda i: ys[i])
    pos = [float(ys[i]) for i in order]
    for _ in range(50):  # relax overlapping clusters around their mean
        moved = False
        i = 0
        while i < len(pos):
            j = i
            while j + 1 < len(pos) and pos[j + 1] - pos[j] < gap - 1e-12:
                j += 1
            if j > i:
                centre = sum(pos[i:j + 1]) / (j - i + 1)
                first = centre - gap * (j - i) / 2
                new = [first + gap * k for k in range(j - i + 1)]
                if any(abs(a - b) > 1e-12 for a, b in zip(new, pos[i:j + 1])):
                    pos[i:j + 1] = new
                    moved = True
            i = j + 1
        if not moved:
            break
    out = [0.0] * len(ys)
    for k, i in enumerate(order):
        out[i] = pos[k]
    return out


def target_unit(result: Any, t_idx: list[int]) -> str:
    """Unit of the targets drawn: the quantities' common ``units``, else "units of H0"."""
    units = {getattr(result.levels[i], "units", None) or "" for i in t_idx}
    return units.pop() if len(units) == 1 and "" not in units else "units of H0"


def _all_quantities(result: Any, t_idx: list[int]) -> bool:
    return all(not isinstance(result.levels[i], (int, np.integer)) for i in t_idx)


def check_comparison(result: Any, who: str) -> None:
    """TypeError unless ``result`` looks like a ComparisonResult."""
    need = ("couplings", "exact", "perturbative", "abs_error", "targets", "orders", "order_names")
    if not all(hasattr(result, a) for a in need):
        raise TypeError(f"{who} needs a ComparisonResult (from ptcheck.compare.compare); got {type(result).__name__}")


def _treatment_note(result: Any, t_idx: list[int]) -> str:
    kinds = sorted({result.treatments[i] for i in t_idx})
    return "treatment " + "/".join(kinds) if kinds and kinds != ["nondegenerate"] else ""


def _target_indices(result: Any, targets: Any) -> list[int]:
    names = list(result.targets)
    if targets is None:
        return list(range(len(names)))
    if isinstance(targets, (str, int)):
        targets = [targets]
    out = []
    for t in targets:
        if isinstance(t, (int, np.integer)) and not isinstance(t, bool) and int(t) in result.levels:
            out.append(list(result.levels).index(int(t)))
        elif str(t) in names:
            out.append(names.index(str(t)))
        else:
            raise ValueError(f"unknown target {t!r}; this result has {names}")
    if not out:
        raise ValueError("targets is empty; give at least one target name")
    return out


def _order_indices(result: Any, orders: Any) -> list[int]:
    from ..approximants import parse_order

    if orders is None:
        return list(range(len(result.orders)))
    if isinstance(orders, (str, int)):
        orders = [orders]
    out = []
    for o in orders:
        if isinstance(o, str) and o in result.order_names:
            out.append(list(result.order_names).index(o))
            continue
        spec = parse_order(o)
        if spec not in result.orders:
            raise ValueError(f"order {o!r} was not compared; this result has {list(result.order_names)}")
        out.append(list(result.orders).index(spec))
    if not out:
        raise ValueError("orders is empty; give at least one order")
    return out
