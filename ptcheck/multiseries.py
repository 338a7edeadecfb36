"""Several couplings at once: ``H = H0 + Σ_i λ_i V_i`` to total order K.

:func:`multi_series` gives the multivariate Rayleigh–Schrödinger coefficients
``E^α`` (α a multi-index, ``E(λ) = Σ_α E^α λ^α``) of one level, or of a derived
quantity (the same combination of its levels' coefficients).  The recursion is
in :mod:`ptcheck._multi_numerics`; its cost grows like the number of
coefficients (one product with each ``V_i`` per coefficient).

A level in an exactly degenerate group (inside its symmetry sector) has no
scalar series in several couplings: its first-order shift is an eigenvalue of
``Σ_i λ_i P V_i P``, not a polynomial.  With the default treatment it gets
degenerate perturbation theory, as for one coupling: the Schrieffer–Wolff
effective Hamiltonian of its group, ``H_eff(λ) = Σ_α H^α λ^α``
(:attr:`MultiSeriesResult.effective_hamiltonians`), and its energy at a point
is the branch of that level along the ray through the point (the one-coupling
degenerate treatment of ``model.along(d)``, which also resolves its good
states).  The coefficients ``H^α`` are recovered from rays: along ``λ = t d``
the order-k coefficient is the homogeneous polynomial ``Σ_{|α|=k} H^α d^α``, so
k + 1 directions (more for more couplings) determine the ``H^α`` of degree k
(interpolation in the angle, solved by least squares).

Along a ray ``λ = t d`` the multivariate series summed to total degree k equals
the one-coupling series of ``model.along(d)`` truncated at order k, which is
what :func:`ptcheck.region.validity_region` uses.
"""

from __future__ import annotations

import html
from dataclasses import dataclass, field, replace
from math import comb
from typing import Any

import numpy as np

from . import _block_numerics as num
from . import _validation as val
from ._multi_numerics import graded_indices, rs_multi
from .model import Model
from .quantities import Quantity
from .series import check_nondegenerate
from .blocks import block_series
from .treatment import CheckSettings, expansions

__all__ = [
    "MultiSeriesResult",
    "multi_series",
    "as_coupling_points",
    "check_multi",
    "MAX_MULTI_ORDER",
    "MULTI_TREATMENTS",
    "target_name",
    "ray_target",
]

#: Highest total degree of a multivariate series (C(K + m, m) coefficients).
MAX_MULTI_ORDER = 60
#: Treatments :func:`multi_series` accepts: "standard" (degenerate perturbation
#: theory inside exactly degenerate groups), "nondegenerate" (scalar series
#: only) or "block" (the effective Hamiltonian of a block of levels you name).
MULTI_TREATMENTS = ("standard", "nondegenerate", "block")


def _readonly(a: Any) -> np.ndarray:
    """Read-only array; one this module made itself is frozen in place (no copy)."""
    a = np.asarray(a) if isinstance(a, np.ndarray) and a.flags.owndata and a.base is None else np.array(a)
    a.setflags(write=False)
    return a


def check_multi(model: Any, who: str) -> Model:
    """The model must be a ptcheck Model with two or more couplings."""
    if not isinstance(model, Model):
        shown = repr(model)
        shown = shown if len(shown) <= 60 else shown[:57] + "..."
        raise TypeError(f"{who} needs a ptcheck Model as its first argument; got {type(model).__name__}: {shown}")
    if model.n_couplings < 2:
        raise ValueError(
            f"{who} is for models with several couplings, Model(h0, [v1, v2], names=...); "
            f"model {model.name!r} has one coupling: use the one-coupling functions (compare, validity_boundary, ...)"
        )
    return model


def target_name(model: Model, target: Any) -> str:
    """Printable name of a level key or quantity (resolving the level once)."""
    if isinstance(target, Quantity):
        return target.name
    return model.label(model.level_index(target))


def ray_target(model: Model, ray: Model, target: Any) -> Any:
    """The target of ``model`` as a target of ``ray = model.along(d)`` (same states, the ray's indices).

    A level becomes its work index on the ray; a quantity keeps its keys unless
    the ray reorders one of its levels (an unmixed degenerate group sorted by
    the ray's shifts), then its weights are given by the ray's indices.
    """
    if isinstance(target, Quantity):
        resolved = target.resolve(model)
        moved = {ray._ray_level(n): w for n, w in resolved.items()}
        if all(ray._ray_level(n) == n for n in resolved):
            return target
        return replace(target, weights=moved)
    return ray._ray_level(model.level_index(target))


def as_coupling_points(couplings: Any, m: int, name: str = "couplings") -> np.ndarray:
    """Coupling points as a float array of shape ``(..., m)`` (one point: shape ``(m,)``)."""
    shown = repr(couplings)
    shown = shown if len(shown) <= 80 else shown[:77] + "..."
    try:
        a = np.asarray(couplings, dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be real numbers, one tuple of {m} couplings per point; got {shown}") from None
    if a.ndim == 0 or a.shape[-1] != m:
        raise ValueError(f"{name} must have a last axis of length {m} (one value per coupling); got shape {a.shape}: {shown}")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} must be finite; got {shown}")
    return a


def _monomials(points: np.ndarray, indices: tuple[tuple[int, ...], ...]) -> np.ndarray:
    """λ^α for every point and multi-index: shape ``points.shape[:-1] + (P,)`` (0^0 = 1)."""
    exps = np.asarray(indices, dtype=float)  # (P, m)
    return np.prod(points[..., None, :] ** exps, axis=-1)


@dataclass(frozen=True, repr=False, eq=False)
class MultiSeriesResult:
    """Multivariate perturbation series of one level or quantity.

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
    energy_coefficients : ndarray, shape ``(K + 1,) * m``, read-only, or None
        ``E^α`` at index α (energy units); zero above total degree K.
        ``None`` when a level of the target is in an exactly degenerate group
        (no scalar series; see :attr:`effective_hamiltonians`).
    coefficients : (P,) ndarray, read-only, or None
        The same numbers in the order of :attr:`indices`.
    state_coefficients : (P, N) ndarray or None, read-only
        ``|ψ^α⟩`` (work basis, intermediate normalisation) for a level with a
        scalar series; ``None`` otherwise.
    treatment : str
        ``"nondegenerate"``, ``"degenerate"`` (some level of the target is in
        an exactly degenerate group) or ``"near-degenerate block"`` (the block
        asked for).
    groups : tuple of tuple of int
        The exactly degenerate groups (or the block) involved (empty for
        ``"nondegenerate"``).
    effective_hamiltonians : tuple of (P, g, g) ndarray
        Schrieffer–Wolff coefficients ``H^α`` of each group (in the order of
        :attr:`indices`; ``H^0`` holds the unperturbed energies), in the
        model's work basis of the group (energy units).
    """

    target: str
    levels: dict
    order: int
    coupling_names: tuple[str, ...]
    indices: tuple[tuple[int, ...], ...]
    energy_coefficients: np.ndarray | None
    coefficients: np.ndarray | None
    state_coefficients: np.ndarray | None
    model: Model = field(repr=False)
    treatment: str = "nondegenerate"
    groups: tuple[tuple[int, ...], ...] = ()
    effective_hamiltonians: tuple[np.ndarray, ...] = field(default=(), repr=False)
    _scalar: dict = field(default_factory=dict, repr=False)
    _rays: dict = field(default_factory=dict, repr=False)
    _block: tuple | None = field(default=None, repr=False)

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
        out = np.zeros(pts.shape[:-1])
        mono = None
        for n, w in self.levels.items():
            c = self._scalar.get(n)
            if c is not None:
                if mono is None:
                    mono = _monomials(pts, self.indices)[..., use]
                out = out + w * (mono @ c[use])
            else:
                out = out + w * self._degenerate_energy(n, pts, k)
        return out

    def _degenerate_energy(self, n: int, pts: np.ndarray, k: int) -> np.ndarray:
        """Branch of level n along the ray through each point (one-coupling degenerate treatment)."""
        flat = pts.reshape(-1, self.n_couplings)
        t = np.linalg.norm(flat, axis=1)
        out = np.full(t.shape, float(self.model.e0[n]))
        nz = np.flatnonzero(t > 0)
        if nz.size:
            dirs = np.round(flat[nz] / t[nz, None], 12)
            uniq, inv = np.unique(dirs, axis=0, return_inverse=True)
            for j, d in enumerate(uniq):
                sel = nz[np.ravel(inv) == j]
                out[sel] = self._ray_expansion(n, d).energy(t[sel], order=k)
        return out.reshape(pts.shape[:-1])

    def _ray_expansion(self, n: int, d: np.ndarray) -> Any:
        """The one-coupling treatment of level n on the ray of d: ``.energy(t, order=k)``."""
        key = (n, d.tobytes())
        e = self._rays.get(key)
        if e is None:
            if len(self._rays) > 256:
                self._rays.clear()
            ray = self.model.along(d)
            if self._block is not None:
                e = _BlockLevel(block_series(ray, [ray._ray_level(b) for b in self._block], self.order), ray._ray_level(n))
            else:
                (e,) = expansions(ray, [ray._ray_level(n)], self.order, settings=CheckSettings())
            self._rays[key] = e
        return e

    def state(self, couplings: Any, order: int | None = None) -> np.ndarray:
        """Normalised perturbative state Σ_{|α|<=k} λ^α ψ^α, shape ``couplings.shape[:-1] + (N,)`` (work basis).

        Raises
        ------
        ValueError
            The target is a quantity, or a degenerate level (its state along a
            direction: ``model.along(d)`` and the one-coupling functions).
        """
        if self.state_coefficients is None:
            raise ValueError(
                f"{self.target!r} has no multivariate state series (a quantity or a degenerate level); for a "
                "degenerate level use model.along(d) and its one-coupling treatment"
            )
        k = self._k(order)
        pts = as_coupling_points(couplings, self.n_couplings)
        use = np.array([sum(a) <= k for a in self.indices])
        mono = _monomials(pts, self.indices)[..., use]
        psi = mono.astype(self.state_coefficients.dtype) @ self.state_coefficients[use]
        return psi / np.linalg.norm(psi, axis=-1, keepdims=True)

    def along(self, direction: Any) -> np.ndarray:
        """Coefficients ``c_k`` of the one-variable series ``E(t d) = Σ_k c_k t^k``, shape (K + 1,).

        Only for a scalar series (``treatment == "nondegenerate"``).
        """
        if self.coefficients is None:
            raise ValueError(f"{self.target!r} has no scalar series (degenerate level): use model.along(d)")
        d = val.as_direction(direction, self.n_couplings, self.coupling_names)
        mono = _monomials(d, self.indices)
        out = np.zeros(self.order + 1)
        for a, c, w in zip(self.indices, self.coefficients, mono):
            out[sum(a)] += float(c) * w
        return out

    def term_sizes(self) -> np.ndarray:
        """``max over |α| = k`` of ``|E^α|`` (or ``‖H^α‖``) for k = 0..K, shape (K + 1,)."""
        out = np.zeros(self.order + 1)
        if self.coefficients is not None:
            for a, c in zip(self.indices, self.coefficients):
                out[sum(a)] = max(out[sum(a)], abs(c))
            return out
        for h in self.effective_hamiltonians:
            for a, x in zip(self.indices, h):
                out[sum(a)] = max(out[sum(a)], float(np.linalg.norm(x, 2)))
        return out

    def __repr__(self) -> str:
        names = ", ".join(self.coupling_names)
        return (
            f"MultiSeriesResult({self.target}, couplings=({names}), order={self.order}, "
            f"{len(self.indices)} coefficients, {self.treatment})"
        )

    def to_dict(self) -> dict:
        out: dict = {
            "target": self.target,
            "order": self.order,
            "coupling_names": list(self.coupling_names),
            "treatment": self.treatment,
            "levels": {int(k): float(w) for k, w in self.levels.items()},
            "coefficients": None
            if self.coefficients is None
            else [{"powers": list(a), "value": float(c)} for a, c in zip(self.indices, self.coefficients)],
            "groups": [list(g) for g in self.groups],
        }
        if self.effective_hamiltonians:
            out["effective_hamiltonians"] = [
                [{"powers": list(a), "real": np.real(x).tolist(), "imag": np.imag(x).tolist()} for a, x in zip(self.indices, h)]
                for h in self.effective_hamiltonians
            ]
        return out

    def _repr_html_(self) -> str:
        names = self.coupling_names
        head = (
            f"<b>Multivariate perturbation series</b> of {html.escape(self.target)} "
            f"(model {html.escape(self.model.name)}), total order {self.order}, {html.escape(self.treatment)}"
        )
        if self.coefficients is None:
            return head + f"<p>effective Hamiltonians of groups {html.escape(str(list(self.groups)))}</p>"
        rows = "".join(
            "<tr><td>" + html.escape(" ".join(f"{n}^{p}" for n, p in zip(names, a) if p) or "1") + f"</td><td>{float(c):.10g}</td></tr>"
            for a, c in zip(self.indices, self.coefficients)
        )
        return head + f"<table><tr><th>monomial</th><th>coefficient</th></tr>{rows}</table>"


class _BlockLevel:
    """One level of a one-coupling block series: ``energy(t, order=k)`` (private)."""

    def __init__(self, series: Any, level: int) -> None:
        self.series = series
        self.row = list(series.levels).index(level)

    def energy(self, t: np.ndarray, order: int) -> np.ndarray:
        return np.asarray(self.series.energies(t, order=order))[self.row]


def multi_series(model: Model, target: Any, order: int, *, treatment: str = "standard", block: Any = None) -> MultiSeriesResult:
    """Multivariate perturbation series of a level or quantity to total order ``order``.

    Parameters
    ----------
    model : Model
        A model with several couplings, ``Model(h0, [v1, v2], names=("g", "E"))``.
    target : level key or Quantity
        Energy rank, label, or a :class:`~ptcheck.quantities.Quantity`.
    order : int
        Highest total degree K (every ``E^α`` with ``|α| <= K``).
    treatment : {"standard", "nondegenerate", "block"}, default "standard"
        "standard": Rayleigh–Schrödinger for non-degenerate levels, degenerate
        perturbation theory (effective Hamiltonian of the group) inside an
        exactly degenerate group.  "nondegenerate": refuse degenerate levels.
        "block": the Schrieffer–Wolff effective Hamiltonian of ``block``; each
        level's energy is its branch along the ray through the point (the
        one-coupling :func:`~ptcheck.blocks.block_series` of ``model.along(d)``).
    block : sequence of level keys, optional
        The levels of the block (``treatment="block"`` only); one symmetry
        sector, containing every level of the target.

    Returns
    -------
    MultiSeriesResult

    Raises
    ------
    DegenerateLevelError
        ``treatment="nondegenerate"`` and a level is exactly degenerate.

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([0.0, 1.0]), [[[0, .1], [.1, 0]], [[.2, 0], [0, -.2]]], names=("g", "E"))
    >>> s = multi_series(m, 0, 2)
    >>> round(float(s.energy_coefficients[2, 0]), 12)       # -g²/Δ of the two-level system
    -0.01
    """
    check_multi(model, "multi_series")
    m = model.n_couplings
    k = val.check_int(order, "order", minimum=0, maximum=MAX_MULTI_ORDER)
    val.check_choice(treatment, "treatment", MULTI_TREATMENTS)
    p = comb(k + m, m)
    need = p * model.n * 16
    if need > val.SERIES_MEMORY_BUDGET:
        raise ValueError(
            f"order {k} with {m} couplings has {p} coefficients; their states on N = {model.n} need "
            f"{need / 1e9:.3g} GB, more than the budget of {val.SERIES_MEMORY_BUDGET / 1e9:.3g} GB: ask for a lower order"
        )
    if isinstance(target, (list, set, range, np.ndarray)):
        raise TypeError(f"multi_series takes one level or quantity; got {target!r}")
    if isinstance(target, Quantity):
        weights = target.resolve(model)
    else:
        weights = {model.level_index(target): 1.0}
    name = target_name(model, target)
    indices = tuple(graded_indices(m, k))
    scalar: dict[int, np.ndarray] = {}
    states = None
    groups: list[tuple[int, ...]] = []
    blk = _check_block(model, block, treatment, weights)
    if blk is not None:
        groups.append(blk)
    for n in weights:
        if blk is not None:
            continue
        grp = model.degenerate_group_of(n)
        if grp is not None and treatment == "standard":
            if tuple(grp) not in groups:
                groups.append(tuple(grp))
            continue
        check_nondegenerate(model, n)
        _, e, psi = rs_multi(model.e0_relative, model.vs, n, k, resolvent_mask=_sector_mask(model, n))
        e[0] = model.e0[n]
        scalar[n] = _readonly(np.real(e).astype(float))
        if not isinstance(target, Quantity):
            states = psi
    heffs = tuple(_readonly(group_effective_hamiltonian(model, g, k)) for g in groups)
    coeffs = grid = None
    if not groups:
        coeffs = sum(w * scalar[n] for n, w in weights.items())
        grid = np.zeros((k + 1,) * m)
        for a, c in zip(indices, coeffs):
            grid[a] = c
        coeffs, grid = _readonly(coeffs), _readonly(grid)
    return MultiSeriesResult(
        target=name,
        levels=dict(weights),
        order=k,
        coupling_names=tuple(model.coupling_names),
        indices=indices,
        energy_coefficients=grid,
        coefficients=coeffs,
        state_coefficients=_readonly(states) if states is not None else None,
        model=model,
        treatment="near-degenerate block" if blk is not None else ("degenerate" if groups else "nondegenerate"),
        groups=tuple(groups),
        effective_hamiltonians=heffs,
        _scalar=scalar,
        _block=blk,
    )


def _check_block(model: Model, block: Any, treatment: str, weights: dict) -> tuple[int, ...] | None:
    """The block's work indices (sorted), or None without the block treatment; checked at the edge."""
    if treatment != "block":
        if block is not None:
            raise ValueError(f"block= is for treatment='block'; got treatment={treatment!r}")
        return None
    if block is None or isinstance(block, (str, bytes)) or not hasattr(block, "__iter__"):
        raise ValueError(f"treatment='block' needs block=[levels...] (two or more levels of one sector); got {block!r}")
    levels = tuple(sorted({model.level_index(x) for x in block}))
    if len(levels) < 2:
        raise ValueError(f"a block needs at least two distinct levels; got {block!r}")
    sectors = {model.sector_of(x) for x in levels}
    if len(sectors) > 1:
        raise ValueError(f"the block {list(block)!r} spans several symmetry sectors {sorted(sectors)}; V never couples them")
    missing = [model.label(n) for n in weights if n not in levels]
    if missing:
        raise ValueError(f"the block {list(block)!r} must contain every level of the target; missing {missing}")
    return levels


def _sector_mask(model: Model, n: int) -> np.ndarray:
    """States the reduced resolvent of level n keeps: its own sector only."""
    return np.asarray(model.level_sectors == model.level_sectors[n])


def ray_directions(m: int, order: int) -> np.ndarray:
    """Unit directions that determine every homogeneous polynomial of degree <= ``order`` in m variables.

    Two couplings: ``θ_j = π j / (order + 1)``, j = 0..order (a half circle is
    enough: degree-k terms are even or odd under d → −d).  More couplings:
    ``2 × C(order + m − 1, m − 1)`` deterministic pseudo-random unit vectors.
    """
    if m == 2:
        th = np.pi * np.arange(order + 1) / (order + 1)
        return np.stack([np.cos(th), np.sin(th)], axis=1)
    count = 2 * comb(order + m - 1, m - 1)
    x = np.random.default_rng(7).normal(size=(count, m))
    return x / np.linalg.norm(x, axis=1, keepdims=True)


def group_effective_hamiltonian(model: Model, group: tuple[int, ...], order: int) -> np.ndarray:
    """Schrieffer–Wolff ``H^α`` of one exactly degenerate group, shape (P, g, g), from rays.

    Along each direction of :func:`ray_directions` the one-coupling
    Schrieffer–Wolff coefficients of ``Σ_i d_i V_i`` are computed in the
    model's work basis (the group's basis does not depend on the ray); the
    degree-k coefficients are then the least-squares solution of
    ``Σ_{|α|=k} H^α d_j^α = H_k(d_j)`` (exact: H_k is a homogeneous polynomial
    of degree k in d).
    """
    m = model.n_couplings
    s = model.sector_of(group[0])
    space = np.asarray(model.sectors[s].levels, dtype=int)
    sub = model.restrict(s) if space.size < model.n else model
    idx = np.searchsorted(space, np.asarray(group, dtype=int))
    dirs = ray_directions(m, order)
    e0 = sub.e0_relative
    hk = []
    for d in dirs:
        v = sum(di * vi for di, vi in zip(d, sub.vs) if di != 0)
        sw = num.sw_coefficients(e0, v, idx, order)
        if sw.finite_order < order:
            raise FloatingPointError(
                f"the effective Hamiltonian of the degenerate group {[model.label(i) for i in group]} overflows float64 "
                f"at order {sw.finite_order + 1}; ask for a lower order"
            )
        hk.append(np.asarray(sw.heff))
    hk = np.stack(hk)  # (J, K+1, g, g)
    indices = graded_indices(m, order)
    g = len(group)
    dtype = np.result_type(hk.dtype, float)
    out = np.zeros((len(indices), g, g), dtype=dtype)
    degree = np.array([sum(a) for a in indices])
    for kk in range(order + 1):
        rows = np.flatnonzero(degree == kk)
        a = np.array([[np.prod(d ** np.asarray(indices[r], dtype=float)) for r in rows] for d in dirs])  # (J, n_k)
        rhs = hk[:, kk].reshape(len(dirs), g * g)
        sol, *_ = np.linalg.lstsq(a, rhs, rcond=None)
        out[rows] = sol.reshape(rows.size, g, g)
    out[0] = np.diag(model.e0[list(group)]).astype(dtype)
    return out
