"""Figures of ptcheck results (matplotlib; usable without widgets).

Every function takes engine result(s), draws on ``ax`` (a new 16:9 figure only
when ``ax`` is None) and returns a frozen dataclass of the artists it made, so
a caller (e.g. a widget) can move markers with ``set_data``/``set_xdata``.
Styling is local (:func:`style`, a :func:`matplotlib.rc_context`); the palette
is built from the Okabe–Ito colour-universal-design set (see :mod:`._style`).

- :func:`plot_levels`: exact and perturbative levels/quantities against λ.
- :func:`plot_errors`: error of each order against λ (log), tolerance,
  validity boundaries with the region beyond shaded.
- :func:`plot_divergence`: complex λ plane: exceptional points, convergence
  discs, Kato bound, real-axis regimes.
- :func:`plot_pairs` (+ :func:`mixing_map`): mixing ratios among levels at one
  coupling, flagged pairs, blocks chosen.
- :func:`plot_region`: nested regions of two couplings where each order meets
  the tolerance, with the radius of convergence per ray.
- :func:`plot_formula`: an exported formula above its error curve, valid
  ranges shaded.
- :func:`save`: slide export (PNG/SVG/PDF, 16:9, legible fonts).
"""

from ._style import OKABE_ITO, ORDER_COLORS, SCREEN_SIZE, SLIDE_SIZE, style
from .divergence import DivergenceArtists, plot_divergence
from .errors import ErrorArtists, plot_errors
from .export import FORMATS, SavedFigure, save
from .formula import FormulaArtists, plot_formula
from .levels import LevelArtists, plot_levels
from .pairs import MixingMap, PairArtists, mixing_map, plot_pairs
from .region import RegionArtists, plot_region

__all__ = [
    "OKABE_ITO",
    "ORDER_COLORS",
    "SCREEN_SIZE",
    "SLIDE_SIZE",
    "FORMATS",
    "DivergenceArtists",
    "ErrorArtists",
    "FormulaArtists",
    "LevelArtists",
    "MixingMap",
    "PairArtists",
    "RegionArtists",
    "SavedFigure",
    "mixing_map",
    "plot_divergence",
    "plot_errors",
    "plot_formula",
    "plot_levels",
    "plot_pairs",
    "plot_region",
    "save",
    "style",
]
