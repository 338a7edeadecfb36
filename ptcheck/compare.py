"""Perturbative vs exact, side by side: errors per order and validity boundaries.

:func:`compare` evaluates every target (level or derived quantity) × order ×
coupling against tracked exact levels.  :func:`validity_boundary` finds the
smallest |λ| along a direction at which one order stops meeting a tolerance,
by bracketing and Brent's method on the error, with the first bracket placed
by the size of the next series term.
"""

from __future__ import annotations

import html
import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.optimize import brentq

from . import _validation as val
from .approximants import OrderSpec, Pade, order_name, parse_order, parse_orders, required_order
from .degeneracy import DEFAULT_MIXING_THRESHOLD, mixing_ratios
from .errors import AccuracyWarning
from .exact import ExactSolver
from .model import Model
from .quantities import Quantity
from .treatment import TREATMENTS, expansions

__all__ = ["ComparisonResult", "ValidityBoundary", "compare", "validity_boundary", "TRUNCATION_NOTE"]

TRUNCATION_NOTE = (
    "Exact values are exact for the matrices given. If the basis is a truncation of a larger "
    "(or infinite) one, check that the levels you use are converged in the truncation before "
    "relying on these numbers (e.g. ptcheck.models.truncation_check)."
)


def _ro(a: Any) -> np.ndarray:
    a = np.array(a)
    a.setflags(write=False)
    return a


# ---------------------------------------------------------------------- targets
@dataclass(frozen=True)
class _Target:
    name: str
    weights: dict  # work level index -> weight
    is_level: bool
    relative_to: str  # "shift" or "value"


def _resolve_targets(model: Model, levels: Any) -> list[_Target]:
    out = []
    for key in val.as_sequence(levels):
        if isinstance(key, Quantity):
            w = key.resolve(model)
            out.append(_Target(key.name, w, False, key.relative_to))
        else:
            n = model.level_index(key)
            out.append(_Target(model.label(n), {n: 1.0}, True, "shift"))
    if not out:
        raise ValueError("levels is empty; give at least one level or quantity")
    return out


def _needed_levels(targets: Sequence[_Target]) -> list[int]:
    seen: dict[int, None] = {}
    for t in targets:
        for n in t.weights:
            seen[n] = None
    return list(seen)


def _combine(targets: Sequence[_Target], per_level: dict[int, np.ndarray]) -> np.ndarray:
    """Stack Σ w_n x_n over targets -> shape (T, ...)."""
    rows = []
    for t in targets:
        acc = None
        for n, w in t.weights.items():
            acc = w * per_level[n] if acc is None else acc + w * per_level[n]
        rows.append(acc)
    return np.stack(rows)


def _relative(abs_err: np.ndarray, exact: np.ndarray, unperturbed: np.ndarray, relative_to: Sequence[str], scale: float):
    """Relative error per target; NaN where the reference passes through ~0."""
    ref = np.empty_like(exact)
    for i, r in enumerate(relative_to):
        ref[i] = np.abs(exact[i] - unperturbed[i]) if r == "shift" else np.abs(exact[i])
    tiny = 1e-12 * max(scale, 1e-300)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = abs_err / ref[:, None, :]
    rel = np.where(ref[:, None, :] > tiny, rel, np.nan)
    return rel


# ---------------------------------------------------------------------- compare
@dataclass(frozen=True, repr=False, eq=False)
class ComparisonResult:
    """Perturbative vs exact values for every target × order × coupling.

    Attributes
    ----------
    model_name : str
    n : int
        Basis size N.
    targets : tuple of str
        Printable names of the targets (level labels or quantity names), length T.
    levels : tuple
        Work-basis index of each level target, or the :class:`Quantity`.
    orders : tuple of int or Pade
        Order specs, length O.
    couplings : (C,) ndarray
        Couplings λ (dimensionless), in the order given.
    unperturbed : (T,) ndarray
        Value at λ = 0 (energy units).
    exact : (T, C) ndarray
        Exact value (tracked levels), energy units.
    perturbative : (T, O, C) ndarray
        Perturbative value for each order spec.
    abs_error : (T, O, C) ndarray
        ``|perturbative - exact|`` (energy units).
    rel_error : (T, O, C) ndarray
        ``abs_error`` divided by ``|exact - unperturbed|`` for levels (the exact
        shift) or by the reference the quantity names; NaN where that
        reference is ~0 (a relative error is meaningless there).
    infidelity : (T, O, C) ndarray
        ``1 - |⟨ψ_pt|ψ_exact⟩|²`` for level targets and truncation orders;
        NaN for Padé approximants and derived quantities.
    treatments : tuple of str
        Treatment used for each target (``"nondegenerate"``, ``"block"``, or
        ``"mixed"`` for a quantity whose levels use both).
    avoided_crossings : tuple
        Avoided crossings met by the tracked exact levels.
    backend : str
        Exact backend used.
    exact_solves : int
        Number of exact diagonalisations.
    notes : tuple of str
        Cautions in plain words (basis truncation, forced treatments, ...).
    """

    model_name: str
    n: int
    targets: tuple
    levels: tuple
    orders: tuple
    couplings: np.ndarray
    unperturbed: np.ndarray
    exact: np.ndarray
    perturbative: np.ndarray
    abs_error: np.ndarray
    rel_error: np.ndarray
    infidelity: np.ndarray
    treatments: tuple
    avoided_crossings: tuple
    backend: str
    exact_solves: int
    notes: tuple = field(default=())

    @property
    def order_names(self) -> tuple[str, ...]:
        return tuple(order_name(o) for o in self.orders)

    def _index(self, target: Any, order: Any) -> tuple[int, int]:
        if isinstance(target, (int, np.integer)) and not isinstance(target, bool) and target in self.levels:
            ti = self.levels.index(int(target))
        elif isinstance(target, Quantity):
            ti = self.targets.index(target.name)
        elif str(target) in self.targets:
            ti = self.targets.index(str(target))
        else:
            raise ValueError(f"unknown target {target!r}; this comparison has {list(self.targets)}")
        spec = parse_order(order)
        if spec not in self.orders:
            raise ValueError(f"{order_name(spec)} was not compared; orders are {list(self.order_names)}")
        return ti, self.orders.index(spec)

    def error(self, target: Any, order: Any, *, relative: bool = False) -> np.ndarray:
        """Error of one target at one order over the couplings, shape (C,)."""
        ti, oi = self._index(target, order)
        return (self.rel_error if relative else self.abs_error)[ti, oi]

    def __repr__(self) -> str:
        return (
            f"ComparisonResult(model={self.model_name!r}, targets={list(self.targets)}, "
            f"orders={list(self.order_names)}, couplings={self.couplings.size} in "
            f"[{self.couplings.min():.3g}, {self.couplings.max():.3g}], backend={self.backend!r})"
        )

    def to_dict(self) -> dict:
        return {
            "model": self.model_name,
            "n": self.n,
            "targets": list(self.targets),
            "levels": [lv if isinstance(lv, int) else str(lv) for lv in self.levels],
            "orders": list(self.order_names),
            "couplings": self.couplings.tolist(),
            "unperturbed": self.unperturbed.tolist(),
            "exact": self.exact.tolist(),
            "perturbative": self.perturbative.tolist(),
            "abs_error": self.abs_error.tolist(),
            "rel_error": np.where(np.isnan(self.rel_error), None, self.rel_error).tolist(),
            "infidelity": np.where(np.isnan(self.infidelity), None, self.infidelity).tolist(),
            "treatments": list(self.treatments),
            "avoided_crossings": [a.to_dict() for a in self.avoided_crossings],
            "backend": self.backend,
            "exact_solves": self.exact_solves,
            "notes": list(self.notes),
        }

    def to_rows(self) -> list[dict]:
        """Long-format table: one row per target × order × coupling (for CSV)."""
        rows = []
        for ti, t in enumerate(self.targets):
            for oi, o in enumerate(self.order_names):
                for ci, lam in enumerate(self.couplings):
                    rows.append(
                        {
                            "target": t,
                            "order": o,
                            "treatment": self.treatments[ti],
                            "coupling": float(lam),
                            "exact": float(self.exact[ti, ci]),
                            "perturbative": float(self.perturbative[ti, oi, ci]),
                            "abs_error": float(self.abs_error[ti, oi, ci]),
                            "rel_error": float(self.rel_error[ti, oi, ci]),
                            "infidelity": float(self.infidelity[ti, oi, ci]),
                        }
                    )
        return rows

    def _repr_html_(self) -> str:
        head = "".join(f"<th>{html.escape(o)}</th>" for o in self.order_names)
        body = ""
        for ti, t in enumerate(self.targets):
            cells = "".join(f"<td>{np.nanmax(self.abs_error[ti, oi]):.3g}</td>" for oi in range(len(self.orders)))
            body += f"<tr><td>{html.escape(t)} ({self.treatments[ti]})</td>{cells}</tr>"
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return (
            f"<b>Comparison</b> for model {html.escape(self.model_name)} (N = {self.n}), "
            f"{self.couplings.size} couplings in [{self.couplings.min():.3g}, {self.couplings.max():.3g}]"
            f"<table><tr><th>max |error|</th>{head}</tr>{body}</table><ul>{notes}</ul>"
        )


def _treatment_names(targets: Sequence[_Target], exps: dict[int, Any]) -> tuple[str, ...]:
    out = []
    for t in targets:
        kinds = {exps[n].treatment for n in t.weights}
        out.append(kinds.pop() if len(kinds) == 1 else "mixed")
    return tuple(out)


def compare(
    model: Model,
    levels: Any,
    orders: Any,
    couplings: Any,
    *,
    treatment: str = "auto",
    backend: str = "auto",
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    method: str = "schrieffer-wolff",
    coupling: float | None = None,
) -> ComparisonResult:
    """Compare perturbative and exact values of levels or quantities.

    Parameters
    ----------
    model : Model
    levels : level key, Quantity, or list of them
        Energy ranks (int), labels (e.g. ``(1, 0)``) or :class:`Quantity` objects.
        A tuple is one label; pass several levels as a list.
    orders : int, Pade, str, or list of them
        Order specs (see :mod:`ptcheck.approximants`).
    couplings : float or (C,) array_like
        Couplings λ at which to compare.
    treatment : {"auto", "nondegenerate", "block"}
        See :mod:`ptcheck.treatment`; ``"auto"`` judges near-degeneracy at
        ``coupling`` (default: the largest |λ| compared).
    backend : {"auto", "dense", "sparse", "qutip"}
        Exact solver.
    threshold : float
        Mixing-ratio threshold for ``"auto"``.
    method : str
        Block method for block-treated levels.
    coupling : float, optional
        Coupling of interest for the ``"auto"`` choice.

    Returns
    -------
    ComparisonResult

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model, compare
    >>> m = Model(np.diag([-0.5, 0.5]), [[0, 0.2], [0.2, 0]])
    >>> r = compare(m, [0], [2, 4], [0.1, 0.5])
    >>> r.abs_error.shape
    (1, 2, 2)
    """
    targets = _resolve_targets(model, levels)
    specs = parse_orders(orders)
    lam = val.as_couplings(couplings)
    treatment = val.check_choice(treatment, "treatment", TREATMENTS)
    threshold = float(val.check_positive(threshold, "threshold"))
    if coupling is None:
        coupling = float(np.max(np.abs(lam)))
    else:
        coupling = val.as_coupling(coupling)
    max_order = max(required_order(s) for s in specs)
    needed = _needed_levels(targets)

    exp_list = expansions(model, needed, max_order, treatment=treatment, coupling=coupling, threshold=threshold, method=method)
    exps = dict(zip(needed, exp_list))
    need_states = any(t.is_level for t in targets) and any(not isinstance(s, Pade) for s in specs)

    solver = ExactSolver(model, backend=backend, n_levels_hint=len(needed))
    sweep = solver.track(needed, lam, keep_states=need_states)
    exact_levels = {n: sweep.energies[i] for i, n in enumerate(needed)}
    exact = _combine(targets, exact_levels)  # (T, C)
    unperturbed = np.array([sum(w * model.e0[n] for n, w in t.weights.items()) for t in targets])

    pert = np.empty((len(targets), len(specs), lam.size))
    infid = np.full_like(pert, np.nan)
    for oi, spec in enumerate(specs):
        per_level = {n: np.asarray(exps[n].energy(lam, spec), dtype=float) for n in needed}
        pert[:, oi, :] = _combine(targets, per_level)
        if need_states and not isinstance(spec, Pade):
            for ti, t in enumerate(targets):
                if not t.is_level:
                    continue
                (n,) = t.weights
                psi_pt = np.asarray(exps[n].state(lam, spec)).reshape(lam.size, model.n)
                psi_ex = sweep.states[needed.index(n)]
                ov = np.abs(np.einsum("cn,cn->c", psi_pt.conj(), psi_ex)) ** 2
                infid[ti, oi] = np.clip(1.0 - ov, 0.0, 1.0)
    abs_err = np.abs(pert - exact[:, None, :])
    scale = float(max(np.max(np.abs(model.e0)), np.ptp(model.e0), model.norm_v * float(np.max(np.abs(lam)))))
    rel = _relative(abs_err, exact, unperturbed, [t.relative_to for t in targets], scale)

    notes = [TRUNCATION_NOTE]
    notes.extend(sweep.notes)
    if np.any(np.isnan(rel)):
        notes.append(
            "Relative errors are undefined (NaN) where the exact reference (shift or value) is ~0; use absolute errors there."
        )
    for n in needed:
        e = exps[n]
        if e.treatment == "nondegenerate":
            partners, ratios = mixing_ratios(model, n, coupling)
            if partners.size and np.max(ratios) >= threshold:
                notes.append(
                    f"Level {model.label(n)} is near-degenerate at |λ| = {coupling:g} (mixing ratio "
                    f"{np.max(ratios):.3g}); the non-degenerate series is unreliable there."
                )
        elif e.treatment == "block":
            notes.append(f"Level {model.label(n)} uses the block treatment ({method}).")
    return ComparisonResult(
        model_name=model.name,
        n=model.n,
        targets=tuple(t.name for t in targets),
        levels=tuple(next(iter(t.weights)) if t.is_level else _orig_quantity(levels, t.name) for t in targets),
        orders=specs,
        couplings=_ro(lam),
        unperturbed=_ro(unperturbed),
        exact=_ro(exact),
        perturbative=_ro(pert),
        abs_error=_ro(abs_err),
        rel_error=_ro(rel),
        infidelity=_ro(infid),
        treatments=_treatment_names(targets, exps),
        avoided_crossings=tuple(sweep.avoided_crossings),
        backend=sweep.backend,
        exact_solves=sweep.solves,
        notes=tuple(dict.fromkeys(notes)),
    )


def _orig_quantity(levels: Any, name: str) -> Any:
    for key in val.as_sequence(levels):
        if isinstance(key, Quantity) and key.name == name:
            return key
    return name  # pragma: no cover


# ---------------------------------------------------------------------- validity boundary
@dataclass(frozen=True)
class ValidityBoundary:
    """Where one order stops meeting a tolerance.

    Attributes
    ----------
    target : str
        Level label or quantity name.
    order : int or Pade
    treatment : str
        Treatment used (``"nondegenerate"``, ``"block"`` or ``"mixed"``).
    tol, rtol : float or None
        The tolerance asked for (absolute, energy units; or relative).
    direction : int
        +1 or -1: the ray of couplings searched.
    coupling : float
        Signed coupling λ* (``direction x |λ*|``) at which the error first
        exceeds the tolerance; ``inf`` (signed) if it never does up to
        ``max_coupling``; NaN when the boundary is ill defined (see ``status``).
    status : str
        ``"found"``, ``"not_reached"`` (within ``max_coupling``), ``"fails_at_zero"``
        (the error exceeds the tolerance at any nonzero coupling), or
        ``"ill_defined"`` (relative error where the exact shift passes through 0).
    exact_solves : int
        Exact diagonalisations used.
    bracket : tuple of float
        Final bracket (|λ|) around the boundary.
    error_at_boundary : float
        Error (absolute or relative, as asked) at the upper bracket end.
    max_coupling : float
        Largest |λ| the search could reach.
    notes : tuple of str
    """

    target: str
    order: Any
    treatment: str
    tol: float | None
    rtol: float | None
    direction: int
    coupling: float
    status: str
    exact_solves: int
    bracket: tuple
    error_at_boundary: float
    max_coupling: float
    notes: tuple = ()

    @property
    def magnitude(self) -> float:
        """|λ*|."""
        return abs(self.coupling)

    def __repr__(self) -> str:
        t = f"tol={self.tol:g}" if self.tol is not None else f"rtol={self.rtol:g}"
        return (
            f"ValidityBoundary({self.target}, {order_name(self.order)}, {t}: coupling={self.coupling:.6g}, "
            f"status={self.status!r}, exact_solves={self.exact_solves})"
        )

    def to_dict(self) -> dict:
        def f(x: float | None) -> float | str | None:
            if x is None:
                return None
            return x if math.isfinite(x) else str(x)

        return {
            "target": self.target,
            "order": order_name(self.order),
            "treatment": self.treatment,
            "tol": self.tol,
            "rtol": self.rtol,
            "direction": self.direction,
            "coupling": f(self.coupling),
            "status": self.status,
            "exact_solves": self.exact_solves,
            "bracket": [f(b) for b in self.bracket],
            "error_at_boundary": f(self.error_at_boundary),
            "max_coupling": f(self.max_coupling),
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        return f"<code>{html.escape(repr(self))}</code>" + "".join(f"<br>{html.escape(n)}" for n in self.notes)


class _ErrorFunction:
    """Error of one target at one order spec along a ray, with exact solves counted."""

    def __init__(self, model, target, exps, spec, solver, direction, relative):
        self.model, self.target, self.exps, self.spec = model, target, exps, spec
        self.solver, self.direction, self.relative = solver, direction, relative
        self.unperturbed = sum(w * model.e0[n] for n, w in target.weights.items())
        self.seen: dict[float, tuple[float, float]] = {}  # s -> (error, reference)

    def pert(self, s: np.ndarray) -> np.ndarray:
        lam = self.direction * np.asarray(s, dtype=float)
        return sum(w * np.asarray(self.exps[n].energy(lam, self.spec), dtype=float) for n, w in self.target.weights.items())

    def __call__(self, s: float) -> float:
        s = float(s)
        if s in self.seen:
            return self.seen[s][0]
        lam = self.direction * s
        ex = sum(w * self.solver.level_at(n, lam)[0] for n, w in self.target.weights.items())
        err = abs(float(self.pert(np.array([s]))[0]) - ex)
        ref = abs(ex - self.unperturbed) if self.target.relative_to == "shift" else abs(ex)
        if self.relative:
            err = err / ref if ref > 0 else np.inf
        self.seen[s] = (err, ex - self.unperturbed if self.target.relative_to == "shift" else ex)
        return err


def _search_scale(model: Model, target: _Target) -> float:
    """Natural coupling scale: smallest isolation distance / ‖V‖."""
    nv = model.norm_v
    if nv == 0:
        return np.inf
    gaps = []
    for n in target.weights:
        d = np.abs(model.e0 - model.e0[n])
        d = d[d > model.degeneracy_tol]
        if d.size:
            gaps.append(d.min())
    spread = float(np.ptp(model.e0)) if model.n > 1 else 1.0
    g = min(gaps) if gaps else (spread if spread > 0 else nv)
    return g / nv


def _first_guess(ef: _ErrorFunction, spec: OrderSpec, tol: float, s_lo: float, s_hi: float) -> float:
    """Cheap estimate of the boundary from the series itself (no exact solves)."""
    grid = np.geomspace(s_lo, s_hi, 400)
    k = required_order(spec)
    # surrogate error: the next orders' terms (or the change to a higher approximant)
    higher = [ef.exps[n] for n in ef.target.weights]
    top = min(e.order for e in higher)
    if top > k:
        if isinstance(spec, Pade):
            est = np.abs(ef.pert(grid) - _pert_at(ef, grid, top))
        else:
            est = np.zeros_like(grid)
            for w_n, e in zip(ef.target.weights.values(), higher):
                for j in range(k + 1, min(top, k + 3) + 1):
                    est = est + abs(w_n) * np.asarray(e.term(ef.direction * grid, j))
    else:
        return float(np.sqrt(s_lo * s_hi))
    if ef.relative:
        ref = np.abs(_pert_at(ef, grid, top) - ef.unperturbed) if ef.target.relative_to == "shift" else np.abs(_pert_at(ef, grid, top))
        with np.errstate(divide="ignore", invalid="ignore"):
            est = np.where(ref > 0, est / ref, np.inf)
    above = np.flatnonzero(est > tol)
    if above.size == 0:
        return float(grid[-1])
    return float(grid[max(above[0], 0)])


def _pert_at(ef: _ErrorFunction, grid: np.ndarray, order: int) -> np.ndarray:
    lam = ef.direction * grid
    return sum(w * np.asarray(ef.exps[n].energy(lam, order), dtype=float) for n, w in ef.target.weights.items())


def validity_boundary(
    model: Model,
    level: Any,
    order: Any,
    *,
    tol: float | None = None,
    rtol: float | None = None,
    direction: int = +1,
    treatment: str = "auto",
    backend: str = "auto",
    max_coupling: float | None = None,
    xrtol: float = 1e-3,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    method: str = "schrieffer-wolff",
    coupling: float | None = None,
) -> ValidityBoundary:
    """Smallest |λ| along ``direction`` where the error first exceeds the tolerance.

    Parameters
    ----------
    model : Model
    level : level key or Quantity
    order : int, Pade or str
        One order spec.
    tol : float, optional
        Absolute tolerance (energy units).  Give exactly one of ``tol``/``rtol``.
    rtol : float, optional
        Tolerance on the error relative to the exact shift |E_exact - E^(0)|
        (for a quantity: relative to the reference it names).
    direction : {+1, -1}
        Search positive or negative couplings.
    treatment : {"auto", "nondegenerate", "block"}
        With ``coupling`` given, ``"auto"`` makes the same choice as
        :func:`compare` at that coupling of interest.  Without it, ``"auto"``
        first uses the non-degenerate series; if a partner's mixing ratio at
        the boundary found is above ``threshold`` it switches the level's
        cluster to the block treatment and searches again.
    backend : str
        Exact solver backend.
    max_coupling : float, optional
        Largest |λ| searched.  Default: 100 x (isolation distance / ‖V‖).
    xrtol : float, default 1e-3
        Relative precision of the boundary.
    threshold : float
        Mixing-ratio threshold for grouping levels into blocks.
    method : str
        Block method.
    coupling : float, optional
        Coupling of interest at which near-degeneracy is judged (for
        ``"auto"`` and the blocks of ``"block"``; default for ``"block"``: where
        the next series terms reach the tolerance).

    Returns
    -------
    ValidityBoundary

    Notes
    -----
    The first bracket is placed where the next series terms reach the
    tolerance; the bracket is walked down until the error is within
    tolerance, then Brent's method refines it.  Three exact checks below the
    result guard against a later crossing being reported instead of the
    first one.
    """
    if (tol is None) == (rtol is None):
        raise ValueError(f"give exactly one of tol (absolute) or rtol (relative); got tol={tol!r}, rtol={rtol!r}")
    relative = rtol is not None
    thr = float(val.check_positive(rtol if relative else tol, "rtol" if relative else "tol"))
    if direction not in (1, -1):
        raise ValueError(f"direction must be +1 or -1; got {direction!r}")
    spec = parse_order(order)
    treatment = val.check_choice(treatment, "treatment", TREATMENTS)
    xrtol = float(val.check_positive(xrtol, "xrtol"))
    (target,) = _resolve_targets(model, level)
    if isinstance(level, list):
        raise TypeError("validity_boundary takes one level or quantity; got a list")
    s_nat = _search_scale(model, target)
    if max_coupling is None:
        s_max = 100.0 * s_nat if np.isfinite(s_nat) else 1e6
    else:
        s_max = float(val.check_positive(max_coupling, "max_coupling"))
    scale = float(max(np.max(np.abs(model.e0)), np.ptp(model.e0), 1e-300))
    if not relative and thr < 1e-12 * scale:
        warnings.warn(
            f"tol={thr:g} is below ~1e-12 of the energy scale ({scale:.3g}); the boundary will be set by rounding noise",
            AccuracyWarning,
            stacklevel=2,
        )

    solver = ExactSolver(model, backend=backend, n_levels_hint=len(target.weights))
    chosen = "nondegenerate" if treatment == "auto" else treatment
    degenerate = any(model.degenerate_group_of(n) for n in target.weights)
    if coupling is not None:
        coupling = abs(val.as_coupling(coupling))
    if treatment == "auto" and degenerate:
        chosen = "block"
    elif treatment == "auto" and coupling is not None:
        # the same per-level choice compare() makes at this coupling of interest
        kinds = {e.treatment for e in expansions(model, list(target.weights), 1, treatment="auto", coupling=coupling, threshold=threshold, method=method)}
        chosen = "block" if "block" in kinds else "nondegenerate"
    block_coupling = coupling
    if chosen == "block" and block_coupling is None and not degenerate:
        # judge clusters where the non-degenerate series itself expects to fail (no exact solves)
        nd = dict(zip(list(target.weights), expansions(model, list(target.weights), required_order(spec) + 3, treatment="nondegenerate")))
        probe = _ErrorFunction(model, target, nd, spec, solver, direction, relative)
        block_coupling = _first_guess(probe, spec, thr, min(1e-6 * s_nat, s_max * 1e-6), s_max)
    result = _boundary_search(model, target, spec, chosen, solver, direction, relative, thr, s_max, s_nat, xrtol, threshold, method, block_coupling)
    if treatment == "auto" and coupling is not None:
        pass  # the treatment was fixed at the coupling of interest
    elif treatment == "auto" and chosen == "nondegenerate" and result.status == "found" and isinstance(spec, Pade):
        pass  # Padé needs a scalar series: no block alternative
    elif treatment == "auto" and chosen == "nondegenerate" and result.status == "found":
        s_star = abs(result.coupling)
        mixed = False
        for n in target.weights:
            partners, ratios = mixing_ratios(model, n, s_star)
            mixed |= bool(partners.size and np.max(ratios) >= threshold)
        if mixed:
            blk = _boundary_search(model, target, spec, "block", solver, direction, relative, thr, s_max, s_nat, xrtol, threshold, method, s_star)
            note = (
                f"auto: the non-degenerate series fails at |λ| = {s_star:.4g} where a near-degenerate partner's "
                f"mixing ratio exceeds {threshold:g}; the block treatment was used instead."
            )
            result = _replace(blk, notes=blk.notes + (note,))
    return _replace(result, exact_solves=solver.solves)


def _replace(b: ValidityBoundary, **kw: Any) -> ValidityBoundary:
    from dataclasses import replace

    return replace(b, **kw)


def _boundary_search(model, target, spec, treatment, solver, direction, relative, thr, s_max, s_nat, xrtol, threshold, method, coupling=None):
    needed = list(target.weights)
    exps = dict(zip(needed, expansions(
        model, needed, required_order(spec) + 3,
        treatment=treatment, coupling=coupling, threshold=threshold, method=method,
    )))
    kinds = {e.treatment for e in exps.values()}
    tname = kinds.pop() if len(kinds) == 1 else "mixed"
    ef = _ErrorFunction(model, target, exps, spec, solver, direction, relative)
    notes: list[str] = [TRUNCATION_NOTE]

    def done(coupling, status, bracket, err, extra=()):
        return ValidityBoundary(
            target=target.name, order=spec, treatment=tname, tol=None if relative else thr, rtol=thr if relative else None,
            direction=direction, coupling=coupling, status=status, exact_solves=solver.solves, bracket=tuple(bracket),
            error_at_boundary=float(err), max_coupling=s_max, notes=tuple(notes) + tuple(extra),
        )

    if not np.isfinite(s_nat):  # V = 0: every order is exact
        return done(direction * np.inf, "not_reached", (s_max, np.inf), 0.0, ("V is zero: the perturbative result is exact.",))

    s_lo = min(1e-6 * s_nat, s_max * 1e-6)
    g = lambda s: ef(s) - thr  # noqa: E731
    s = min(max(_first_guess(ef, spec, thr, s_lo, s_max), s_lo), s_max)
    # walk down until within tolerance
    below = None
    above = None
    if g(s) > 0:
        above = s
        while True:
            s /= 2.0
            if s < s_lo:
                return done(0.0, "fails_at_zero", (0.0, above), ef(above), (
                    f"The error exceeds the tolerance already at |λ| = {s_lo:.3g}: this order does not meet it at any "
                    "nonzero coupling searched (for a relative tolerance, order 0 always fails).",))
            if g(s) <= 0:
                below = s
                break
            above = s
    else:
        below = s
        while True:
            s_next = min(s * 2.0, s_max)
            if g(s_next) > 0:
                above = s_next
                break
            below = s_next
            if s_next >= s_max:
                return done(direction * np.inf, "not_reached", (s_max, np.inf), ef(s_max), (
                    f"The error stays within tolerance up to the search limit |λ| = {s_max:.4g}.",))
            s = s_next
    # guard the *first* crossing: exact checks below the bracket
    for frac in (0.25, 0.5, 0.8):
        sc = frac * below
        if sc > s_lo and g(sc) > 0:
            above, below = sc, None
            s = sc
            while True:
                s /= 2.0
                if s < s_lo:
                    return done(0.0, "fails_at_zero", (0.0, above), ef(above))
                if g(s) <= 0:
                    below = s
                    break
                above = s
            break
    # Brent on the bracket (every evaluation is one tracked exact point)
    root = brentq(g, below, above, xtol=xrtol * below, rtol=4 * np.finfo(float).eps, maxiter=60)
    # smallest evaluated point above tolerance that is >= root defines the reported side
    hi = min((x for x, (e, _) in ef.seen.items() if e > thr and x >= root), default=above)
    extra: list[str] = []
    if relative:
        # A relative error is meaningless where its reference (exact shift or value) passes through 0:
        # flag the boundary when the reference changes sign up to 1.5 x the boundary, or has already
        # shrunk to a tenth of its largest size before it.
        ef(min(1.5 * hi, s_max))
        refs = sorted((x, r) for x, (_, r) in ef.seen.items() if x <= 1.5 * hi)
        vals = np.array([r for _, r in refs])
        nz = vals[vals != 0]
        max_ref = float(np.max(np.abs([r for x, r in refs if x <= hi]), initial=0.0))
        ref_hi = abs(ef.seen[hi][1]) if hi in ef.seen else max_ref
        if (nz.size and np.any(np.sign(nz) != np.sign(nz[0]))) or ref_hi < 0.1 * max_ref:
            return done(np.nan, "ill_defined", (below, hi), ef(hi), (
                f"The exact reference of the relative error passes through (or close to) zero near |λ| ≈ {hi:.4g}; "
                "a relative error is meaningless there. Use an absolute tolerance (tol=...) instead.",))
    return done(direction * float(root), "found", (float(root), float(hi)), ef(hi), extra)
