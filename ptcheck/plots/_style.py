"""Colours, line styles and font sizes of every ptcheck figure (local, never global).

Palette: the eight colours of Okabe & Ito, "Color Universal Design (CUD): how to
make figures and presentations that are friendly to colorblind people" (2008,
https://jfly.uni-koeln.de/color/), chosen to stay distinguishable for the common
forms of colour-vision deficiency.  Our own assignment of them:

- **one colour per order, in every figure**: truncation order k always gets
  the same colour and dash pattern (:func:`order_style`), whatever else is
  drawn beside it (order 2 is blue everywhere; yellow is skipped: too faint);
- Padé approximants have colours of their own (:data:`PADE_COLORS`, from
  Paul Tol's colour-blind-safe "muted" scheme, 2021,
  https://personal.sron.nl/~pault/) and diamond markers;
- exact values, levels, discs and other non-order items are black or grey:
  their identity is carried by direct labels and line styles, never by an
  order colour.

All styling is applied through :func:`style` (a :func:`matplotlib.rc_context`)
around the creation of artists, plus explicit keyword arguments on the artists
themselves; ``matplotlib.rcParams`` is never modified.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from types import MappingProxyType
from typing import Any

import matplotlib as mpl
import numpy as np
from matplotlib.colors import LinearSegmentedColormap

__all__ = [
    "OKABE_ITO",
    "ORDER_COLORS",
    "ORDER_DASHES",
    "PADE_COLORS",
    "order_color",
    "NEUTRAL_DASHES",
    "LEGEND_STYLE",
    "EXACT_COLOR",
    "MARKER_COLOR",
    "CROSSING_COLOR",
    "SHADE_COLOR",
    "BAND_COLOR",
    "FLAG_COLOR",
    "MIXING_CMAP",
    "ORDER0_COLOR",
    "SLIDE_SIZE",
    "SCREEN_SIZE",
    "FONT_SIZES",
    "font_scale",
    "style",
    "order_style",
    "finite_style",
]

#: Okabe & Ito (2008) colour-universal-design set, by their names.
OKABE_ITO = MappingProxyType(
    {
        "black": "#000000",
        "orange": "#E69F00",
        "sky blue": "#56B4E9",
        "bluish green": "#009E73",
        "yellow": "#F0E442",
        "blue": "#0072B2",
        "vermillion": "#D55E00",
        "reddish purple": "#CC79A7",
    }
)

#: Colours of truncation orders 1, 2, ..., 6 (order k: entry (k − 1) mod 6; our own
#: assignment: the orders most often compared, 2 and 4, get blue and vermillion).
ORDER_COLORS = tuple(OKABE_ITO[k] for k in ("orange", "blue", "bluish green", "vermillion", "reddish purple", "sky blue"))
#: Dash patterns of orders 1, 2, ..., 6 (paired with :data:`ORDER_COLORS`); orders
#: 7–12 reuse the colours with the patterns shifted by one, and so on.
ORDER_DASHES = ((0, (1, 1.5)), "--", (0, (8, 2)), "-.", (0, (5, 1.5, 1, 1.5, 1, 1.5)), (0, (2, 1.2)))
#: Order 0 (the unperturbed value).
ORDER0_COLOR = "#8C8C8C"
#: Padé approximants [L/M]: colour (L + M, + 2 in λ²) mod 4, dash pattern by M (Tol's "muted"
#: indigo, teal, olive, wine).
PADE_COLORS = ("#332288", "#44AA99", "#999933", "#882255")
#: Exact (tracked) values.
EXACT_COLOR = OKABE_ITO["black"]
#: Current-coupling marker line.
MARKER_COLOR = "#777777"
#: Background bands (errors above a tolerance): neutral grey, so nested bands stay grey.
SHADE_COLOR = "#555555"
#: Certified bracket of an exact value, and the legend swatch of the error bands (each drawn in its order's colour).
BAND_COLOR = "#8C8C8C"
#: Avoided crossings marked on the levels figure.
CROSSING_COLOR = "#999999"
#: Highlight of flagged near-degenerate pairs (a dark red outside the order palette).
FLAG_COLOR = "#B2182B"
#: Line styles that tell apart non-order items of one kind (levels, discs, tolerances).
NEUTRAL_DASHES = ("-", "--", "-.", (0, (1, 1.5)), (0, (6, 2, 1, 2, 1, 2)), (0, (10, 3)))
#: Legend frame: inside the axes, framed and semi-opaque over whatever it covers.
LEGEND_STYLE = MappingProxyType({"frameon": True, "framealpha": 0.88, "edgecolor": "#BBBBBB", "facecolor": "white",
                                 "fancybox": False, "borderpad": 0.5})

#: Sequential colour map of mixing ratios: white -> Okabe–Ito sky blue -> blue -> near black.
MIXING_CMAP = LinearSegmentedColormap.from_list(
    "ptcheck_mixing", ["#FFFFFF", OKABE_ITO["sky blue"], OKABE_ITO["blue"], "#1B1B3A"]
)

#: 16:9 slide size in inches (a standard wide presentation page).
SLIDE_SIZE = (13.333, 7.5)
#: 16:9 size of figures made on screen (notebooks, panels), inches.
SCREEN_SIZE = (9.6, 5.4)

#: Font sizes in points at :data:`SLIDE_SIZE`.  Screen figures scale them by
#: ``SCREEN_SIZE[0] / SLIDE_SIZE[0]``; :func:`ptcheck.plots.save` scales back up.
FONT_SIZES = MappingProxyType({"base": 18.0, "ticks": 16.0, "legend": 15.0, "caption": 14.0})

_RC = {
    "font.size": FONT_SIZES["base"],
    "axes.labelsize": FONT_SIZES["base"],
    "axes.titlesize": FONT_SIZES["base"],
    "xtick.labelsize": FONT_SIZES["ticks"],
    "ytick.labelsize": FONT_SIZES["ticks"],
    "legend.fontsize": FONT_SIZES["legend"],
    "legend.frameon": False,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": False,
    "lines.linewidth": 2.2,
    "lines.markersize": 8.0,
    "svg.fonttype": "none",
    "pdf.fonttype": 42,
    "figure.dpi": 100.0,
}


def _scaled_rc(scale: float) -> dict:
    rc = dict(_RC)
    for k in ("font.size", "axes.labelsize", "axes.titlesize", "xtick.labelsize", "ytick.labelsize", "legend.fontsize"):
        rc[k] = rc[k] * scale
    rc["lines.linewidth"] = rc["lines.linewidth"] * max(scale, 0.75)
    rc["lines.markersize"] = rc["lines.markersize"] * max(scale, 0.75)
    return rc


@contextmanager
def style(scale: float = 1.0) -> Iterator[None]:
    """Local style context for creating ptcheck artists.

    Parameters
    ----------
    scale : float, default 1.0
        Font scale: 1 at :data:`SLIDE_SIZE`; smaller for screen figures.

    Examples
    --------
    >>> from matplotlib.figure import Figure
    >>> with style():
    ...     fig = Figure()
    """
    with mpl.rc_context(_scaled_rc(float(scale))):
        yield


def order_color(order: Any) -> str:
    """Colour of one order spec: an int k (truncation order) or a Padé approximant.

    The colour depends on the order alone, never on what else is drawn.

    Examples
    --------
    >>> order_color(2) == ORDER_COLORS[1]
    True
    """
    return order_style(order)["color"]


def order_style(order: Any) -> dict:
    """Colour, dash pattern and marker of one order spec (keyword arguments of ``Axes.plot``).

    Parameters
    ----------
    order : int, Pade, or str
        An order spec as in :mod:`ptcheck.approximants` (``2``, ``"pade2/2"``,
        ``Pade(2, 2)``) or its printable name (``"order 2"``, ``"Padé[2/2]"``).

    Returns
    -------
    dict
        ``color``, ``linestyle`` and, for Padé approximants, ``marker`` and
        ``markevery``.
    """
    from .._format import order_from_name
    from ..approximants import Pade

    spec = order_from_name(order)
    if isinstance(spec, Pade):
        return {"color": PADE_COLORS[(spec.num + spec.den + 2 * spec.in_square) % len(PADE_COLORS)],
                "linestyle": ORDER_DASHES[spec.den % len(ORDER_DASHES)], "marker": "D", "markevery": 0.1}
    k = int(spec)
    if k == 0:
        return {"color": ORDER0_COLOR, "linestyle": (0, (1, 3))}
    n = len(ORDER_COLORS)
    return {"color": ORDER_COLORS[(k - 1) % n], "linestyle": ORDER_DASHES[((k - 1) % n + (k - 1) // n) % len(ORDER_DASHES)]}


def finite_style(style_kw: dict, y: Any) -> dict:
    """``style_kw`` without ``markevery`` when ``y`` has no finite value (matplotlib cannot space markers
    along an empty path); the line is then empty but keeps its legend entry."""
    if "markevery" in style_kw and not np.any(np.isfinite(np.asarray(y, dtype=float))):
        return {k: v for k, v in style_kw.items() if k != "markevery"}
    return style_kw


def font_scale(fig) -> float:
    """Font scale for a figure of this width (1 at slide width)."""
    return float(fig.get_figwidth()) / SLIDE_SIZE[0]
