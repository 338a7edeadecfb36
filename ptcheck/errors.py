"""Exceptions and warnings raised by ptcheck.

Bad input raises a ``ValueError``/``TypeError`` subclass with a message that
names the problem.  A numerical outcome (a series that diverges, a level that
could not be tracked unambiguously) is reported in the result object and, where
useful, with a :class:`PtcheckWarning` subclass.
"""

from __future__ import annotations

__all__ = [
    "AmbiguousLevelError",
    "BasisTooLargeError",
    "DegenerateLevelError",
    "PtcheckWarning",
    "NearDegenerateWarning",
    "TrackingWarning",
    "TruncationWarning",
    "AccuracyWarning",
]


class DegenerateLevelError(ValueError):
    """A (near-)degenerate level was asked for a non-degenerate treatment.

    Attributes
    ----------
    pair : tuple of int
        The two unperturbed levels (work-basis indices) that cause the failure.
    """

    def __init__(self, message: str, pair: tuple[int, int]):
        super().__init__(message)
        self.pair = pair


class AmbiguousLevelError(ValueError):
    """A level label does not identify one perturbed level unambiguously."""


class BasisTooLargeError(ValueError):
    """The basis is too large for a method that needs dense matrices."""


class PtcheckWarning(UserWarning):
    """Base class of the warnings ptcheck emits."""


class NearDegenerateWarning(PtcheckWarning):
    """A non-degenerate series was forced on a level with a large mixing ratio."""


class TrackingWarning(PtcheckWarning):
    """An exact level could not be followed unambiguously along the coupling path."""


class TruncationWarning(PtcheckWarning):
    """A result may depend on the truncation of the basis."""


class AccuracyWarning(PtcheckWarning):
    """A requested tolerance is close to the numerical noise of the comparison."""
