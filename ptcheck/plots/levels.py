"""Levels (or derived quantities) against the coupling: exact and perturbative."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from ._common import add_caption, caption_text, finite_or_none, nearest_index, new_axes, style_axes
from ._style import EXACT_COLOR, FONT_SIZES, MARKER_COLOR, OKABE_ITO, order_style, style

__all__ = ["LevelArtists", "plot_levels", "crossing_info"]


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
    legend : Legend
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
) -> LevelArtists:
    """Exact and perturbative values of levels or quantities against λ.

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
        Caption text; default: model, N, levels, orders, coupling range.
        ``""`` for none.
    shift : bool, default False
        Draw ``value − value at λ = 0`` (``result.unperturbed``): the level
        shifts, comparable across levels far apart in energy.
    ylabel : str, optional

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
    t_idx = _target_indices(result, targets)
    o_idx = _order_indices(result, orders)
    fig, ax, scale = new_axes(ax)
    lam = np.asarray(result.couplings, dtype=float)
    srt = np.argsort(lam, kind="stable")
    x = lam[srt]
    offset = np.asarray(result.unperturbed, dtype=float) if shift else np.zeros(len(result.targets))
    if ylabel is None:
        ylabel = "shift from λ = 0 (units of H0)" if shift else "energy (units of H0)"
    with style(scale):
        exact_lines, pert_lines = [], []
        for k, ti in enumerate(t_idx):
            row = []
            for j, oi in enumerate(o_idx):
                (ln,) = ax.plot(
                    x, np.asarray(result.perturbative[ti, oi])[srt] - offset[ti], label=result.order_names[oi] if k == 0 else None,
                    **order_style(oi),
                )
                row.append(ln)
            pert_lines.append(tuple(row))
            (ex,) = ax.plot(x, np.asarray(result.exact[ti])[srt] - offset[ti], color=EXACT_COLOR, linewidth=2.6 * max(scale, 0.75),
                            label="exact" if k == 0 else None, zorder=3)
            exact_lines.append(ex)
        # keep the view on the exact values: diverging orders must not squash them
        ex_vals = np.asarray(result.exact)[t_idx] - offset[t_idx, None]
        finite = ex_vals[np.isfinite(ex_vals)]
        if finite.size:
            lo, hi = float(finite.min()), float(finite.max())
            pad = 0.12 * (hi - lo) if hi > lo else max(abs(hi), 1.0) * 0.1
            ax.set_ylim(lo - pad, hi + pad)
        if x.size > 1 and x[-1] > x[0]:
            ax.set_xlim(x[0], x[-1])
        line = markers = None
        if coupling is not None:
            line = ax.axvline(float(coupling), color=MARKER_COLOR, linewidth=1.6 * max(scale, 0.75), zorder=4)
            i = nearest_index(lam, float(coupling))
            markers, = ax.plot(
                np.full(len(t_idx), lam[i]), ex_vals[:, i], linestyle="none", marker="o", color=EXACT_COLOR,
                markerfacecolor="white", zorder=5,
            )
        crossings = []
        for ac in getattr(result, "avoided_crossings", ()):
            lc, text = crossing_info(ac)
            if lc is None or x.size == 0 or not (x[0] <= lc <= x[-1]):
                continue
            crossings.append(ax.axvline(lc, color=OKABE_ITO["orange"], linestyle=(0, (2, 2)), linewidth=1.4 * max(scale, 0.75)))
            crossings.append(ax.annotate(
                text, xy=(lc, 0.02), xycoords=("data", "axes fraction"), rotation=90, ha="right", va="bottom",
                fontsize=FONT_SIZES["caption"] * scale, color="#555555",
            ))
        ax.set_xlabel("coupling λ")
        ax.set_ylabel(ylabel)
        style_axes(ax, scale)
        legend = ax.legend(loc="best", fontsize=FONT_SIZES["legend"] * scale)
        if caption is None:
            caption = caption_text(
                "levels vs coupling", model=result.model_name, n=result.n,
                levels=[result.targets[i] for i in t_idx], orders=[result.order_names[i] for i in o_idx],
                couplings=lam, extra=[_treatment_note(result, t_idx)],
            )
        cap = add_caption(ax, caption, scale)
    return LevelArtists(
        figure=fig, ax=ax, targets=tuple(result.targets[i] for i in t_idx), orders=tuple(result.order_names[i] for i in o_idx),
        exact=tuple(exact_lines), perturbative=tuple(pert_lines), coupling_line=line, coupling_markers=markers,
        crossings=tuple(crossings), caption=cap, legend=legend,
    )


def check_comparison(result: Any, who: str) -> None:
    """TypeError unless ``result`` looks like a ComparisonResult."""
    need = ("couplings", "exact", "perturbative", "abs_error", "targets", "orders", "order_names")
    if not all(hasattr(result, a) for a in need):
        raise TypeError(f"{who} needs a ComparisonResult (from ptcheck.compare.compare); got {type(result).__name__}")


def _treatment_note(result: Any, t_idx: list[int]) -> str:
    kinds = sorted({result.treatments[i] for i in t_idx})
    return "treatment " + "/".join(kinds) if kinds else ""


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
