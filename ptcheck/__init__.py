"""ptcheck: can a perturbative formula be trusted for this model at this coupling?"""

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
from .model import Model

__version__ = "0.1.0"
