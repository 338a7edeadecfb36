"""Slide figure of an exported formula: the equation above its error curve, valid ranges shaded."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..formula import Formula
from ._common import new_axes, positive_or_nan, style_axes
from ._style import EXACT_COLOR, FONT_SIZES, OKABE_ITO, order_style, style
from .export import MIN_FONT_SIZE

__all__ = ["FormulaArtists", "plot_formula", "RANGE_COLOR"]

#: Colour of the shaded ranges where the formula meets a tolerance (darker = tighter tolerance).
RANGE_COLOR = OKABE_ITO["bluish green"]
#: Dash patterns of the tolerance lines (tightest first).
_TOL_DASHES = ((0, (1, 2)), (0, (6, 2, 1, 2)), (0, (4, 2)), (0, (2, 4)))


@dataclass(frozen=True)
class FormulaArtists:
    """Artists made by :func:`plot_formula`.

    Attributes
    ----------
    figure, ax
    equation : Text
        The formula (mathtext), one line per equation, above the axes; its
        font is reduced until it fits the figure width (never wrapped).
    curve : Line2D
        Error of the formula against λ (relative if any range is relative,
        else absolute; non-positive values left out on the log axis).
    tolerance_lines : tuple of Line2D
        One horizontal line per tolerance of the kind drawn.
    shades : tuple of Polygon
        One ``axvspan`` per range, from its lower to its upper boundary
        (clipped to the couplings drawn), in :attr:`Formula.ranges` order.
    boundary_lines : tuple of Line2D
        Vertical lines at the boundaries found (status ``"found"``).
    legend : Legend
    physical_axis : SecondaryAxis or None
        Coupling in physical units, when the formula knows them.
    """

    figure: Any
    ax: Any
    equation: Any
    curve: Any
    tolerance_lines: tuple
    shades: tuple
    boundary_lines: tuple
    legend: Any
    physical_axis: Any


def plot_formula(result: Formula, *, ax: Any = None, fontsize: float | None = None) -> FormulaArtists:
    """The formula written above its error curve, with where it holds shaded.

    Parameters
    ----------
    result : Formula
        From :func:`ptcheck.formula`; ``couplings`` (C,), ``rel_error``/``abs_error`` (C,).
    ax : matplotlib Axes, optional
        Axes of the error curve; the equation is placed above it (as the
        axes' left title).  A new 16:9 figure when None.
    fontsize : float, optional
        Largest font of the equation (points).  Default: 1.15 x the base
        font of the figure; reduced until the equation fits the figure width.

    Returns
    -------
    FormulaArtists

    Examples
    --------
    >>> from ptcheck import formula
    >>> from ptcheck.models import anharmonic_oscillator
    >>> f = formula(anharmonic_oscillator(n_basis=40), 0, 2, rtol=0.01, directions=(1,), max_coupling=1.0)
    >>> art = plot_formula(f)
    >>> art.equation.get_text() == f.equations[0]
    True
    """
    if not isinstance(result, Formula):
        raise TypeError(f"plot_formula needs a ptcheck.Formula (from ptcheck.formula); got {type(result).__name__}")
    fig, ax, scale = new_axes(ax)
    relative = any(r.rtol is not None for r in result.ranges) or not result.ranges
    x = np.asarray(result.couplings, dtype=float)
    srt = np.argsort(x, kind="stable")
    x = x[srt]
    y = positive_or_nan(np.asarray(result.rel_error if relative else result.abs_error)[srt])
    lw = max(scale, 0.75)
    with style(scale):
        ax.set_yscale("log")
        # ranges: widest (loosest tolerance) first and lightest, so tighter ones sit on top, darker
        order = sorted(range(len(result.ranges)), key=lambda i: -_tol(result.ranges[i]))
        shades: list[Any] = [None] * len(result.ranges)
        lines_b = []
        n = max(len(order), 1)
        for rank, i in enumerate(order):
            r = result.ranges[i]
            lo, hi = _span(r.lower, r.upper, x)
            alpha = 0.12 + 0.28 * (rank + 1) / n
            shades[i] = ax.axvspan(lo, hi, color=RANGE_COLOR, alpha=alpha, linewidth=0, label=r.text)
            for b in r.boundaries:
                if b.status == "found":
                    lines_b.append(ax.axvline(b.coupling, color=RANGE_COLOR, linewidth=1.2 * lw, alpha=0.9))
        (curve,) = ax.plot(x, y, label=f"error of the formula (order {result.order})", color=order_style(0)["color"],
                           linestyle="-", zorder=3)
        tol_lines = []
        kind_ranges = sorted((r for r in result.ranges if (r.rtol is not None) == relative), key=_tol)
        for j, r in enumerate(kind_ranges):
            t = _tol(r)
            name = f"{100 * t:.3g} %" if relative else f"{t:.3g}"
            tol_lines.append(ax.axhline(t, color=EXACT_COLOR, linestyle=_TOL_DASHES[j % len(_TOL_DASHES)],
                                        linewidth=1.4 * lw, label=f"tolerance {name}"))
        if x.size > 1 and x[-1] > x[0]:
            ax.set_xlim(x[0], x[-1])
        ax.set_xlabel(f"coupling {_plain_symbol(result.variable)}")
        ax.set_ylabel("relative error" if relative else "|error| (units of H0)")
        style_axes(ax, scale)
        phys = None
        if result.coupling_scale is not None:
            s = float(result.coupling_scale)
            phys = ax.secondary_xaxis("top", functions=(lambda v: v * s, lambda v: v / s))
            unit = f" ({result.coupling_unit})" if result.coupling_unit else ""
            phys.set_xlabel(f"physical coupling{unit}", fontsize=FONT_SIZES["base"] * scale)
            phys.tick_params(labelsize=FONT_SIZES["ticks"] * scale)
        title = f"{result.model_name} · {result.target} · order {result.order} ({result.treatment})"
        # below the axes: the curve, the tolerances and the shading stay uncovered
        legend = ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.16), ncols=2, fontsize=FONT_SIZES["legend"] * scale,
                           title=title, title_fontsize=FONT_SIZES["legend"] * scale, alignment="left", frameon=False)
        size = 1.15 * FONT_SIZES["base"] * scale if fontsize is None else float(fontsize)
        eq = ax.set_title("\n".join(result.equations), loc="left", fontsize=size, pad=10.0 * scale)
        _fit_width(fig, eq, size, MIN_FONT_SIZE * scale)
    return FormulaArtists(
        figure=fig, ax=ax, equation=eq, curve=curve, tolerance_lines=tuple(tol_lines), shades=tuple(shades),
        boundary_lines=tuple(lines_b), legend=legend, physical_axis=phys,
    )


def _tol(r: Any) -> float:
    return float(r.rtol if r.rtol is not None else r.tol)


def _span(lower: float, upper: float, x: np.ndarray) -> tuple[float, float]:
    """Shaded interval of a range, clipped to the couplings drawn (NaN bounds: nothing)."""
    if x.size == 0 or math.isnan(lower) or math.isnan(upper):
        return 0.0, 0.0
    return max(lower, float(x[0])), min(upper, float(x[-1]))


def _plain_symbol(variable: str) -> str:
    return "λ" if variable in ("lam", "lamda") else variable


def _fit_width(fig: Any, text: Any, size: float, minimum: float) -> None:
    """Reduce the font of ``text`` (unbroken lines) until it ends within 97 % of the figure width."""
    if fig.get_layout_engine() is not None:
        fig.get_layout_engine().execute(fig)  # place the axes first: the title starts at their left edge
    while size > minimum:
        box = text.get_window_extent()  # with the figure's own renderer
        avail = 0.97 * fig.bbox.width - box.x0
        if box.width <= avail:
            return
        size = max(minimum, size * max(0.8, avail / box.width))
        text.set_fontsize(size)
