"""Engine calls behind the panels, cached by what they depend on (private).

A :class:`Settings` names everything the heavy computations depend on; the
:class:`Session` keeps the last results per key and counts each engine call it
actually makes (``heavy_computations``), so that moving the coupling can be
shown to cost no engine work.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..compare import compare, validity_boundary
from ..convergence import divergence_map
from ..quantities import Quantity

__all__ = ["Settings", "Session"]


@dataclass(frozen=True)
class Settings:
    """What the heavy computations depend on (all hashable)."""

    targets: tuple  # level work indices (int) and Quantity objects
    orders: tuple  # order specs
    tol: float
    relative: bool
    treatment: str
    backend: str
    coupling_min: float
    coupling_max: float
    n_points: int
    series_order: int
    threshold: float

    @property
    def couplings(self) -> np.ndarray:
        return np.linspace(self.coupling_min, self.coupling_max, self.n_points)

    def tolerance_kwargs(self) -> dict:
        return {"rtol": self.tol} if self.relative else {"tol": self.tol}


def _key(t: Any) -> Any:
    return ("q", t.name, tuple(sorted(map(str, t.weights.items())))) if isinstance(t, Quantity) else t


class Session:
    """Cached engine results for one model.

    Parameters
    ----------
    model : Model
    """

    def __init__(self, model: Any) -> None:
        self.model = model
        self.heavy_computations = 0
        self.notes: list[str] = []
        self._comparisons: dict = {}
        self._boundaries: dict = {}
        self._divergence: dict = {}

    def _call(self, fn: Callable, *args: Any, **kwargs: Any) -> Any:
        """One engine call: counted, warnings kept as notes for the panel."""
        self.heavy_computations += 1
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            out = fn(*args, **kwargs)
        for w in caught:
            msg = str(w.message)
            if msg not in self.notes:
                self.notes.append(msg)
        return out

    def comparison(self, s: Settings) -> Any:
        key = (tuple(map(_key, s.targets)), s.orders, s.treatment, s.backend, s.coupling_min, s.coupling_max,
               s.n_points, s.threshold)
        if key not in self._comparisons:
            self._comparisons = {key: self._call(
                compare, self.model, list(s.targets), list(s.orders), s.couplings, treatment=s.treatment,
                backend=s.backend, threshold=s.threshold,
            )}
        return self._comparisons[key]

    def boundary_jobs(self, s: Settings, target: Any) -> list[tuple]:
        """(order, direction) pairs whose validity boundary is not cached yet."""
        jobs = []
        for o in s.orders:
            for d in self._directions(s):
                if self._bkey(s, target, o, d) not in self._boundaries:
                    jobs.append((o, d))
        return jobs

    def boundaries(self, s: Settings, target: Any, progress: Callable[[], None] | None = None) -> tuple:
        out = []
        for o in s.orders:
            for d in self._directions(s):
                k = self._bkey(s, target, o, d)
                if k not in self._boundaries:
                    reach = max(abs(s.coupling_min), abs(s.coupling_max))
                    self._boundaries[k] = self._call(
                        validity_boundary, self.model, target, o, direction=d, treatment=s.treatment,
                        backend=s.backend, max_coupling=reach, threshold=s.threshold, coupling=reach,
                        **s.tolerance_kwargs(),
                    )
                    if progress is not None:
                        progress()
                out.append(self._boundaries[k])
        return tuple(out)

    def divergence(self, s: Settings) -> Any:
        levels = tuple(t for t in s.targets if not isinstance(t, Quantity))
        if not levels:
            raise ValueError("the divergence map needs at least one level (derived quantities have no single series)")
        key = (levels, s.series_order, s.coupling_min, s.coupling_max, s.n_points)
        if key not in self._divergence:
            self._divergence = {key: self._call(divergence_map, self.model, list(levels), order=s.series_order,
                                                couplings=s.couplings)}
        return self._divergence[key]

    @staticmethod
    def _directions(s: Settings) -> tuple[int, ...]:
        d = []
        if s.coupling_max > 0:
            d.append(1)
        if s.coupling_min < 0:
            d.append(-1)
        return tuple(d)

    @staticmethod
    def _bkey(s: Settings, target: Any, order: Any, direction: int) -> tuple:
        return (_key(target), order, direction, s.tol, s.relative, s.treatment, s.backend,
                max(abs(s.coupling_min), abs(s.coupling_max)), s.threshold)
