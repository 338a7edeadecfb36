"""Several couplings at once: ``H = H0 + Σ_i λ_i V_i`` to total order K.

:func:`multi_series` gives the multivariate Rayleigh–Schrödinger coefficients
``E^α`` (α a multi-index, ``E(λ) = Σ_α E^α λ^α``) of one level, or of a derived
quantity (the same combination of its levels' coefficients).  The recursion is
in :mod:`ptcheck._multi_numerics`; its cost grows like the number of
coefficients (one product with each ``V_i`` per coefficient).

A level that is exactly degenerate inside its symmetry sector has no scalar
series here: along any direction it is handled by the one-coupling degenerate
(block) treatment of ``model.along(direction)``.

Along a ray ``λ = t d`` the multivariate series summed to total degree k equals
the one-coupling series of ``model.along(d)`` truncated at order k, which is
what :func:`ptcheck.region.validity_region` uses.
"""

from __future__ import annotations

import html
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import _validation as val
from ._multi_numerics import rs_multi
from .model import Model
from .quantities import Quantity
from .series import check_nondegenerate

__all__ = ["MultiSeriesResult", "multi_series", "as_coupling_points"]


def _readonly(a: Any) -> np.ndarray:
    a = np.array(a)
    a.setflags(write=False)
    return a


def check_multi(model: Any, who: str) -> Model:
    """The model must be a ptcheck Model with two or more couplings."""
    if not isinstance(model, Model):
        raise TypeError(f"{who} needs a ptcheck.Model; got {type(model).__name__}")
    if model.n_couplings < 2:
        raise ValueError(
            f"{who} is for models with several couplings, Model(h0, [v1, v2], names=...); "
            f"model {model.name!r} has one coupling: use the one-coupling functions (compare, validity_boundary)"
        )
    return model


def as_coupling_points(couplings: Any, m: int, name: str = "couplings") -> np.ndarray:
    """Coupling points as a float array of shape ``(..., m)`` (one point: shape ``(m,)``)."""
    try:
        a = np.asarray(couplings, dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be real numbers, one tuple of {m} couplings per point; got {couplings!r}") from None
    if a.ndim == 0 or a.shape[-1] != m:
        raise ValueError(f"{name} must have a last axis of length {m} (one value per coupling); got shape {a.shape}")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} must be finite; got {couplings!r}")
    return a


def _monomials(points: np.ndarray, indices: tuple[tuple[int, ...], ...]) -> np.ndarray:
    """λ^α for every point and multi-index: shape ``points.shape[:-1] + (P,)``."""
    exps = np.asarray(indices, dtype=float)  # (P, m)
    with np.errstate(invalid="ignore"):
        return np.prod(points[..., None, :] ** exps, axis=-1)


@dataclass(frozen=True, repr=False, eq=False)
class MultiSeriesResult:
    """Multivariate Rayleigh–Schrödinger series of one level or quantity.

    Attributes
    ----------
    target : str
        Printable name of the level or quantity.
    levels : dict
        Work-basis level index -> weight (one entry of weight 1 for a level).
    order : int
        Highest total degree K.
    coupling_names : tuple of str
        Names of the m couplings, e.g. ``("g", "E")``.
    indices : tuple of m-tuples
        Multi-indices α in graded order (total degree, then descending
        lexicographic), length ``P = C(K + m, m)``.
    energy_coefficients : ndarray, shape ``(K + 1,) * m``, read-only
        ``E^α`` at index α (energy units); zero above total degree K.
    coefficients : (P,) ndarray, read-only
        The same numbers in the order of :attr:`indices`.
    state_coefficients : (P, N) ndarray or None, read-only
        ``|ψ^α⟩`` (work basis, intermediate normalisation) for a level target;
        ``None`` for a quantity.
    treatment : str
        ``"nondegenerate"``.
    """

    target: str
    levels: dict
    order: int
    coupling_names: tuple[str, ...]
    indices: tuple[tuple[int, ...], ...]
    energy_coefficients: np.ndarray
    coefficients: np.ndarray
    state_coefficients: np.ndarray | None
    model: Model = field(repr=False)
    treatment: str = "nondegenerate"

    @property
    def n_couplings(self) -> int:
        return len(self.coupling_names)

    def _k(self, order: Any) -> int:
        if order is None:
            return self.order
        return val.check_int(order, "order", minimum=0, maximum=self.order)

    def energy(self, couplings: Any, order: int | None = None) -> np.ndarray:
        """Sum of the terms of total degree <= ``order`` at coupling points.

        Parameters
        ----------
        couplings : array_like, shape ``(m,)`` or ``(..., m)``
            Coupling points (λ_1, …, λ_m).
        order : int, optional
            Total degree (default: the full order).

        Returns
        -------
        ndarray, shape ``couplings.shape[:-1]`` (energy units)
        """
        k = self._k(order)
        pts = as_coupling_points(couplings, self.n_couplings)
        use = np.array([sum(a) <= k for a in self.indices])
        mono = _monomials(pts, self.indices)
        return np.real(mono[..., use] @ self.coefficients[use])

    def state(self, couplings: Any, order: int | None = None) -> np.ndarray:
        """Normalised perturbative state Σ_{|α|<=k} λ^α ψ^α, shape ``couplings.shape[:-1] + (N,)``."""
        if self.state_coefficients is None:
            raise ValueError(f"{self.target!r} is a quantity: it has no state")
        k = self._k(order)
        pts = as_coupling_points(couplings, self.n_couplings)
        use = np.array([sum(a) <= k for a in self.indices])
        mono = _monomials(pts, self.indices)[..., use]
        psi = mono @ self.state_coefficients[use]
        return psi / np.linalg.norm(psi, axis=-1, keepdims=True)

    def along(self, direction: Any) -> np.ndarray:
        """Coefficients ``c_k`` of the one-variable series ``E(t d) = Σ_k c_k t^k``, shape (K + 1,)."""
        d = as_coupling_points(direction, self.n_couplings, "direction")
        if d.ndim != 1:
            raise ValueError(f"direction must be one point of {self.n_couplings} numbers; got shape {d.shape}")
        mono = _monomials(d, self.indices)
        out = np.zeros(self.order + 1)
        for a, c, w in zip(self.indices, self.coefficients, mono):
            out[sum(a)] += float(np.real(c)) * w
        return out

    def term_sizes(self) -> np.ndarray:
        """``max over |α| = k`` of ``|E^α|`` for k = 0..K, shape (K + 1,)."""
        out = np.zeros(self.order + 1)
        for a, c in zip(self.indices, self.coefficients):
            out[sum(a)] = max(out[sum(a)], abs(c))
        return out

    def __repr__(self) -> str:
        names = ", ".join(self.coupling_names)
        return f"MultiSeriesResult({self.target}, couplings=({names}), order={self.order}, coefficients={len(self.indices)})"

    def to_dict(self) -> dict:
        return {
            "target": self.target,
            "order": self.order,
            "coupling_names": list(self.coupling_names),
            "treatment": self.treatment,
            "coefficients": [
                {"powers": list(a), "value": float(np.real(c))} for a, c in zip(self.indices, self.coefficients)
            ],
        }

    def _repr_html_(self) -> str:
        names = self.coupling_names
        rows = "".join(
            "<tr><td>" + html.escape(" ".join(f"{n}^{p}" for n, p in zip(names, a) if p) or "1") + f"</td><td>{float(np.real(c)):.10g}</td></tr>"
            for a, c in zip(self.indices, self.coefficients)
        )
        return (
            f"<b>Multivariate Rayleigh–Schrödinger series</b> of {html.escape(self.target)} "
            f"(model {html.escape(self.model.name)}), total order {self.order}"
            f"<table><tr><th>monomial</th><th>coefficient</th></tr>{rows}</table>"
        )


def multi_series(model: Model, target: Any, order: int) -> MultiSeriesResult:
    """Multivariate Rayleigh–Schrödinger series of a level or quantity.

    Parameters
    ----------
    model : Model
        A model with several couplings, ``Model(h0, [v1, v2], names=("g", "E"))``.
    target : level key or Quantity
        Energy rank, label, or a :class:`~ptcheck.quantities.Quantity`.
    order : int
        Highest total degree K (every ``E^α`` with ``|α| <= K``).

    Returns
    -------
    MultiSeriesResult

    Raises
    ------
    DegenerateLevelError
        A level is exactly degenerate inside its sector: use the one-coupling
        degenerate treatment along a direction (``model.along(d)``).

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([0.0, 1.0]), [[[0, .1], [.1, 0]], [[.2, 0], [0, -.2]]], names=("g", "E"))
    >>> s = multi_series(m, 0, 2)
    >>> float(s.energy_coefficients[2, 0])       # -g²/Δ of the two-level system
    -0.01
    """
    check_multi(model, "multi_series")
    order = val.check_order(order, n=model.n) if hasattr(val, "check_order") else val.check_int(order, "order", minimum=0)
    if isinstance(target, list):
        raise TypeError("multi_series takes one level or quantity; got a list")
    if isinstance(target, Quantity):
        weights = target.resolve(model)
        name = target.name
    else:
        n = model.level_index(target)
        weights = {n: 1.0}
        name = model.label(n)
    m = model.n_couplings
    total = None
    states = None
    indices = None
    for n, w in weights.items():
        check_nondegenerate(model, n)
        idx, e, psi = rs_multi(model.e0, model.vs, n, order, resolvent_mask=_sector_mask(model, n))
        indices = tuple(idx)
        total = w * e if total is None else total + w * e
        if len(weights) == 1 and not isinstance(target, Quantity):
            states = psi
    assert total is not None and indices is not None
    coeffs = np.real_if_close(total, tol=1000)
    coeffs = np.real(coeffs).astype(float) if np.isrealobj(coeffs) or np.max(np.abs(np.imag(total))) < 1e-12 * max(np.max(np.abs(total)), 1e-300) else coeffs
    grid = np.zeros((order + 1,) * m, dtype=coeffs.dtype)
    for a, c in zip(indices, coeffs):
        grid[a] = c
    return MultiSeriesResult(
        target=name,
        levels=dict(weights),
        order=order,
        coupling_names=tuple(model.coupling_names),
        indices=indices,
        energy_coefficients=_readonly(grid),
        coefficients=_readonly(coeffs),
        state_coefficients=_readonly(states) if states is not None else None,
        model=model,
    )


def _sector_mask(model: Model, n: int) -> np.ndarray | None:
    """States the reduced resolvent of level n keeps: its own sector only."""
    sector_of = getattr(model, "sector_of", None)
    if sector_of is None:
        return None
    s = sector_of(n)
    mask = np.zeros(model.n, dtype=bool)
    mask[list(model.sectors[s].levels)] = True
    return mask
