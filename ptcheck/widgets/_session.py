"""Engine calls behind the panels, cached by what they depend on (private).

A :class:`Settings` names everything the heavy computations depend on; the
:class:`Session` keeps the last results per key and counts each engine call it
actually makes (``heavy_computations``), so that moving the coupling can be
shown to cost no engine work.  A :class:`State` is one consistent answer (the
model, the settings asked and the results computed from exactly those): what
a figure draws and what an export writes.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from ..approximants import Pade, order_name
from ..compare import compare, validity_boundary
from ..convergence import divergence_map
from ..quantities import Quantity

__all__ = ["Settings", "Session", "State"]


@dataclass(frozen=True)
class Settings:
    """What the heavy computations depend on (all hashable).

    ``tols`` are fractions when ``relative`` (0.01 = 1 %), energy units otherwise,
    ascending; ``focus`` is the target whose validity boundaries (verdict, errors
    figure) are computed; ``reference`` is what they are judged against,
    already resolved: ``"exact"`` (exact solves), ``"bounds"`` (certified
    brackets, no exact solve) or ``"both"``.
    """

    targets: tuple  # level work indices (int) and Quantity objects
    orders: tuple  # order specs
    tols: tuple
    relative: bool
    treatment: str
    backend: str
    coupling_min: float
    coupling_max: float
    n_points: int
    series_order: int
    threshold: float
    focus: Any
    reference: str = "exact"

    @property
    def references(self) -> tuple[str, ...]:
        """Kinds of validity boundary computed: ``("exact",)``, ``("bounds",)`` or both."""
        return ("exact", "bounds") if self.reference == "both" else (self.reference,)

    @property
    def couplings(self) -> np.ndarray:
        return np.linspace(self.coupling_min, self.coupling_max, self.n_points)

    @property
    def reach(self) -> float:
        """Largest |λ| of the range: the coupling of interest of every engine call."""
        return max(abs(self.coupling_min), abs(self.coupling_max))

    @property
    def directions(self) -> tuple[int, ...]:
        d = []
        if self.coupling_max > 0:
            d.append(1)
        if self.coupling_min < 0:
            d.append(-1)
        return tuple(d)


@dataclass(frozen=True)
class State:
    """One consistent answer: model, settings and the results computed from them.

    Attributes
    ----------
    model : Model
    model_text : str
        How the model was asked for (builder and parameters, or its name).
    model_params : dict or None
        The builder's parameters (None for a model given directly).
    settings : Settings
    result : ComparisonResult
        Its ``orders`` may leave out orders that do not apply (see ``dropped``).
    boundaries : tuple of ValidityBoundary
        For ``settings.focus``: every order of ``result`` × tolerance ×
        direction × reference (``b.reference``: "exact", or "bounds" for
        certified boundaries).
    divergence : DivergenceMap or None
        Computed when a view needs it.
    dropped : str
        Why orders were left out ("" when none were).
    unavailable : tuple of (order spec, str, str)
        Orders of ``result`` with no boundary of one reference for
        ``settings.focus`` (a Padé approximant of a level without a scalar
        series; a certified boundary of a Padé approximant or of a level that
        is not expanded by its own series), the reference ("exact" or
        "bounds") and why.
    reference_reason : str
        Why the reference is what it is (the "auto" choice explained).
    notes : tuple of str
        Engine warnings and result notes, in plain words.
    """

    model: Any
    model_text: str
    model_params: Any
    settings: Settings
    result: Any
    boundaries: tuple
    divergence: Any = None
    dropped: str = ""
    unavailable: tuple = ()
    notes: tuple = field(default=())
    reference_reason: str = ""

    def with_divergence(self, d: Any, notes: tuple = ()) -> State:
        return replace(self, divergence=d, notes=tuple(dict.fromkeys(self.notes + tuple(notes))))


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

    def comparison(self, s: Settings) -> tuple[Any, str]:
        """The sweep, and why orders were left out ("" if none).

        A Padé approximant needs a scalar energy series; when the engine
        refuses it (e.g. for a block-treated level) the other orders are
        compared and the reason is returned instead of failing everything.
        """
        key = (tuple(map(_key, s.targets)), s.orders, s.treatment, s.backend, s.coupling_min, s.coupling_max,
               s.n_points, s.threshold, s.reference)
        if key not in self._comparisons:
            run = lambda orders: self._call(  # noqa: E731 - one call site, two order lists
                compare, self.model, list(s.targets), list(orders), s.couplings, treatment=s.treatment,
                backend=s.backend, threshold=s.threshold, coupling=s.reach, reference=s.reference,
            )
            dropped = ""
            try:
                result = run(s.orders)
            except ValueError as exc:
                pade = [o for o in s.orders if isinstance(o, Pade)]
                rest = [o for o in s.orders if not isinstance(o, Pade)]
                if not pade or not rest:
                    raise
                result = run(rest)
                names = ", ".join(order_name(o) for o in pade)
                dropped = f"{names} left out: {exc}"
            self._comparisons = {key: (result, dropped)}
        return self._comparisons[key]

    def boundary_jobs(self, s: Settings, orders: tuple) -> int:
        """How many validity boundaries are not cached yet."""
        return sum(self._bkey(s, o, t, d, r) not in self._boundaries
                   for o in orders for t in s.tols for d in s.directions for r in s.references)

    def boundaries(self, s: Settings, orders: tuple, progress: Callable[[], None] | None = None) -> tuple[tuple, dict]:
        """Validity boundaries of ``s.focus``: each order × tolerance × direction × reference (cached).

        Returns the boundaries and ``{(order spec, reference): reason}`` for
        the boundaries the engine refuses for this target: a Padé approximant
        of a level with no scalar series to approximate; with certified
        bounds, a Padé approximant or a level not expanded by its own series
        (the comparison still brackets it).
        """
        out, unavailable = [], {}
        for r in s.references:
            for o in orders:
                for t in s.tols:
                    for d in s.directions:
                        k = self._bkey(s, o, t, d, r)
                        if k not in self._boundaries:
                            try:
                                self._boundaries[k] = self._call(
                                    validity_boundary, self.model, s.focus, o, direction=d, treatment=s.treatment,
                                    backend=s.backend, max_coupling=s.reach, threshold=s.threshold, coupling=s.reach,
                                    reference=r, **({"rtol": t} if s.relative else {"tol": t}),
                                )
                            except ValueError as exc:
                                if not isinstance(o, Pade) and r == "exact":
                                    raise
                                self._boundaries[k] = exc
                            if progress is not None:
                                progress()
                        b = self._boundaries[k]
                        if isinstance(b, Exception):
                            unavailable[(o, r)] = str(b)
                        else:
                            out.append(b)
        return tuple(out), unavailable

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
    def _bkey(s: Settings, order: Any, tol: float, direction: int, reference: str) -> tuple:
        return (_key(s.focus), order, direction, tol, s.relative, s.treatment, s.backend, s.reach, s.threshold, reference)
