"""Figures of ptcheck results (matplotlib; usable without widgets).

Every function takes engine result(s), draws on ``ax`` (a new 16:9 figure only
when ``ax`` is None) and returns a frozen dataclass of the artists it made, so
a caller (e.g. a widget) can move markers with ``set_data``/``set_xdata``.
Styling is local (:func:`style`, a :func:`matplotlib.rc_context`); the palette
is built from the Okabe–Ito colour-universal-design set (see :mod:`._style`).

- :func:`plot_levels`: exact and perturbative levels/quantities against λ.
- :func:`plot_errors`: error of each order against λ (log), tolerance,
  validity boundaries with the region beyond shaded.
- :func:`plot_error_bands`: certified bracket of each order's error against
  λ (no exact solve), certified boundaries.
- :func:`plot_divergence`: complex λ plane: exceptional points, convergence
  discs, Kato bound, real-axis regimes.
- :func:`plot_pairs` (+ :func:`mixing_map`): mixing ratios among levels at one
  coupling, flagged pairs, blocks chosen.
- :func:`plot_region`: nested regions of two couplings where each order meets
  the tolerance, with the radius of convergence per ray.
- :func:`plot_formula`: an exported formula above its error curve, valid
  ranges shaded.
- :func:`plot_pairs` (+ :func:`mixing_map`, :func:`update_pairs`): level
  diagram of near-degenerate pairs at one coupling (arcs by mixing ratio,
  blocks outlined, ranked table), moved in place to another coupling;
  :func:`plot_mixing_matrix`: the same ratios as a heat map.
- :func:`plot_photon_boundaries`: validity boundary against photon number
  beside the dispersive critical photon number.
- :func:`save`: slide export (PNG/SVG/PDF, 16:9, legible fonts).
"""

from ._style import OKABE_ITO, ORDER_COLORS, PADE_COLORS, SCREEN_SIZE, SLIDE_SIZE, order_color, order_style, style
from .bands import BandArtists, plot_error_bands
from .divergence import DivergenceArtists, plot_divergence
from .errors import ErrorArtists, plot_errors
from .export import FORMATS, SavedFigure, save
from .formula import FormulaArtists, plot_formula
from .levels import LevelArtists, plot_levels
from .pairs import MatrixArtists, MixingMap, PairArtists, mixing_map, plot_mixing_matrix, plot_pairs, update_pairs
from .photons import PhotonArtists, plot_photon_boundaries
from .region import RegionArtists, plot_region

__all__ = [
    "FORMATS",
    "OKABE_ITO",
    "ORDER_COLORS",
    "PADE_COLORS",
    "SCREEN_SIZE",
    "SLIDE_SIZE",
    "BandArtists",
    "DivergenceArtists",
    "ErrorArtists",
    "FormulaArtists",
    "LevelArtists",
    "MatrixArtists",
    "MixingMap",
    "PairArtists",
    "PhotonArtists",
    "RegionArtists",
    "SavedFigure",
    "mixing_map",
    "order_color",
    "order_style",
    "plot_divergence",
    "plot_error_bands",
    "plot_errors",
    "plot_formula",
    "plot_levels",
    "plot_mixing_matrix",
    "plot_pairs",
    "plot_photon_boundaries",
    "plot_region",
    "save",
    "style",
    "update_pairs",
]
