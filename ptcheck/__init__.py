"""ptcheck: can a perturbative formula be trusted for this model at this coupling?

The engine (everything imported here) never imports matplotlib or ipywidgets;
figures live in :mod:`ptcheck.plots`, notebook panels in :mod:`ptcheck.widgets`,
the command line in :mod:`ptcheck.cli`.
"""

from . import _startup  # noqa: F401  (first: a quiet Ctrl-C while the command line starts)
from . import models
from .approximants import Pade, parse_order
from .blocks import Block, BlockSeries, block_series, find_blocks
from .bounds import CertifiedBoundary, ErrorBounds, certified_boundary, error_bounds
from .compare import ComparisonResult, ValidityBoundary, compare, validity_boundary
from .convergence import ConvergenceResult, DivergenceMap, convergence, divergence_map
from .degeneracy import DEFAULT_MIXING_THRESHOLD, NearDegeneratePair, near_degenerate_pairs
from .errors import (
    AccuracyWarning,
    AmbiguousLevelError,
    BasisTooLargeError,
    DegenerateLevelError,
    NearDegenerateWarning,
    PtcheckWarning,
    TrackingWarning,
    TruncationWarning,
)
from .exact import AvoidedCrossing, ExactSolver, ExactSweep, track
from .formula import Formula, ValidityRange, formula
from .model import Model, MultiCouplingError
from .multiexact import GridSweep, track_grid
from .multiformula import MultiFormula, multi_formula
from .multiseries import MultiSeriesResult, multi_series
from .photons import PhotonBoundaries, photon_boundaries
from .products import product_model
from .region import RayConvergence, ValidityRegion, ray_convergence, validity_region
from .quantities import (
    Quantity,
    QuantitySeries,
    anharmonicity,
    combination,
    cross_kerr,
    dispersive_shift,
    exchange,
    quantity_series,
    stark_shift,
    transition_frequency,
    zz_coupling,
)
from .sectors import Sector
from .series import SeriesResult, rs_series
from .treatment import CheckSettings, Suggestion, TreatmentChoice

__version__ = "0.1.0"

__all__ = [
    "AccuracyWarning",
    "AmbiguousLevelError",
    "AvoidedCrossing",
    "BasisTooLargeError",
    "Block",
    "BlockSeries",
    "CertifiedBoundary",
    "CheckSettings",
    "ComparisonResult",
    "ConvergenceResult",
    "DEFAULT_MIXING_THRESHOLD",
    "DegenerateLevelError",
    "DivergenceMap",
    "ErrorBounds",
    "ExactSolver",
    "ExactSweep",
    "Formula",
    "GridSweep",
    "Model",
    "MultiCouplingError",
    "MultiFormula",
    "MultiSeriesResult",
    "NearDegeneratePair",
    "NearDegenerateWarning",
    "Pade",
    "PhotonBoundaries",
    "PtcheckWarning",
    "Quantity",
    "QuantitySeries",
    "RayConvergence",
    "Sector",
    "SeriesResult",
    "Suggestion",
    "TrackingWarning",
    "TreatmentChoice",
    "TruncationWarning",
    "ValidityBoundary",
    "ValidityRange",
    "ValidityRegion",
    "anharmonicity",
    "block_series",
    "certified_boundary",
    "combination",
    "compare",
    "convergence",
    "cross_kerr",
    "dispersive_shift",
    "divergence_map",
    "error_bounds",
    "exchange",
    "find_blocks",
    "formula",
    "models",
    "multi_formula",
    "multi_series",
    "near_degenerate_pairs",
    "parse_order",
    "photon_boundaries",
    "product_model",
    "quantity_series",
    "ray_convergence",
    "rs_series",
    "stark_shift",
    "track",
    "track_grid",
    "transition_frequency",
    "validity_boundary",
    "validity_region",
    "zz_coupling",
]
