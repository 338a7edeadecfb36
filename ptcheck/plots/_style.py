"""Colours, line styles and font sizes of every ptcheck figure (local, never global).

Palette: the eight colours of Okabe & Ito, "Color Universal Design (CUD): how to
make figures and presentations that are friendly to colorblind people" (2008,
https://jfly.uni-koeln.de/color/), chosen to stay distinguishable for the common
forms of colour-vision deficiency.  Our own assignment of them: exact values in
black, perturbative orders cycle through blue, vermillion, bluish green, reddish
purple, orange and sky blue (yellow is skipped: too faint on white), and every
order also gets its own dash pattern so the curves stay apart in greyscale.

All styling is applied through :func:`style` (a :func:`matplotlib.rc_context`)
around the creation of artists, plus explicit keyword arguments on the artists
themselves; ``matplotlib.rcParams`` is never modified.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from types import MappingProxyType

import matplotlib as mpl
from matplotlib.colors import LinearSegmentedColormap

__all__ = [
    "OKABE_ITO",
    "ORDER_COLORS",
    "ORDER_DASHES",
    "EXACT_COLOR",
    "MARKER_COLOR",
    "FLAG_COLOR",
    "MIXING_CMAP",
    "SLIDE_SIZE",
    "SCREEN_SIZE",
    "FONT_SIZES",
    "font_scale",
    "style",
    "order_style",
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

#: Colours of successive perturbative orders (our own order of the Okabe–Ito set).
ORDER_COLORS = tuple(OKABE_ITO[k] for k in ("blue", "vermillion", "bluish green", "reddish purple", "orange", "sky blue"))
#: Dash patterns of successive orders (paired with :data:`ORDER_COLORS`).
ORDER_DASHES = ("--", "-.", (0, (1, 1.5)), (0, (5, 1.5, 1, 1.5, 1, 1.5)), (0, (8, 2)), (0, (3, 1, 1, 1)))
#: Exact (tracked) values.
EXACT_COLOR = OKABE_ITO["black"]
#: Current-coupling marker line.
MARKER_COLOR = "#777777"
#: Highlight of flagged near-degenerate pairs and of exceptional points.
FLAG_COLOR = OKABE_ITO["vermillion"]

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


def order_style(i: int) -> dict:
    """Colour and dash pattern of the i-th order curve (cycles after six)."""
    return {"color": ORDER_COLORS[i % len(ORDER_COLORS)], "linestyle": ORDER_DASHES[i % len(ORDER_DASHES)]}


def font_scale(fig) -> float:
    """Font scale for a figure of this width (1 at slide width)."""
    return float(fig.get_figwidth()) / SLIDE_SIZE[0]
