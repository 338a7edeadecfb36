"""Derived quantities: named linear combinations of level energies.

A transition frequency, a dispersive shift χ, a ZZ coupling or an exchange J
is a difference of levels; its perturbative error is not the error of any one
level.  A :class:`Quantity` is accepted wherever a level is (``compare``,
``validity_boundary``, ``convergence``).
"""

from __future__ import annotations

from collections.abc import Hashable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import _validation as val

__all__ = ["Quantity"]


@dataclass(frozen=True)
class Quantity:
    """A named linear combination ``Σ w_i E_i`` of level energies.

    Parameters
    ----------
    name : str
        Short name used in tables and figures (e.g. ``"chi"``).
    weights : mapping of level key -> float
        Level keys are energy ranks (int) or labels (e.g. ``(1, 0)``).
    units : str, optional
        Units of the quantity (the units of H0 by default).
    relative_to : {"value", "shift"}, default "value"
        Denominator of the relative error: the exact value of the quantity
        itself, or its change from the unperturbed value.

    Examples
    --------
    >>> chi = Quantity("chi", {(1, 1): .5, (1, 0): -.5, (0, 1): -.5, (0, 0): .5})
    """

    name: str
    weights: Mapping[Hashable, float] = field(hash=False)
    units: str = ""
    relative_to: str = "value"

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name:
            raise TypeError(f"Quantity name must be a non-empty str; got {self.name!r}")
        if not isinstance(self.weights, Mapping) or not self.weights:
            raise ValueError(f"Quantity {self.name!r} needs a non-empty mapping level -> weight; got {self.weights!r}")
        clean = {}
        for k, w in self.weights.items():
            try:
                wf = float(w)
            except (TypeError, ValueError):
                raise TypeError(f"Quantity {self.name!r}: weight of level {k!r} must be a number; got {w!r}") from None
            if not np.isfinite(wf):
                raise ValueError(f"Quantity {self.name!r}: weight of level {k!r} is not finite ({w!r})")
            clean[k] = wf
        object.__setattr__(self, "weights", clean)
        val.check_choice(self.relative_to, "relative_to", ("value", "shift"))

    def resolve(self, model: Any) -> dict[int, float]:
        """Work-basis level index -> weight (weights of repeated levels add up)."""
        out: dict[int, float] = {}
        for k, w in self.weights.items():
            i = model.level_index(k)
            out[i] = out.get(i, 0.0) + w
        return {i: w for i, w in out.items() if w != 0.0}

    def __str__(self) -> str:
        return self.name
