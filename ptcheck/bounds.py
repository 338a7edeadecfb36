"""Error bars without an exact solve: residual (Weinstein) and Kato–Temple bounds.

:func:`error_bounds` brackets the exact level (or a linear combination of
levels) at each coupling from a perturbative *trial state* — the
Rayleigh–Schrödinger state to a higher order than the one judged, optionally
improved by a few Krylov (Rayleigh–Ritz) steps — and turns the bracket into a
lower and an upper bound on the error of the order-k energy.
:func:`certified_boundary` finds, with zero exact solves, a coupling below which
the order is guaranteed to meet a tolerance and a coupling at which it is
certified not to.

How good a bound is depends on the *gap* (bounds on the neighbouring exact
levels); ``gap=`` chooses where it comes from:

``"weyl"``
    Unperturbed spectrum with the perturbation's spectral range added (Weyl's
    inequality).  Rigorous, but V's range grows with system size in many-body
    models, so it certifies only small couplings there.
``"neighbours"``
    The neighbouring levels' own Kato–Temple intervals (their own series trial
    states), closed by Weyl one level further out; never worse than ``"weyl"``.
    Rigorous.
``"estimate"``
    A few Lanczos steps on H with the level's trial state projected out.  An
    *estimate*: bounds that use it are conditional on it (``rigorous`` False).
``"auto"`` (default)
    The rigorous gaps (Weyl and neighbours) wherever they give a Kato–Temple
    bound and identify the level; the Lanczos estimate elsewhere, marked
    conditional coupling by coupling.
a positive number δ
    The user's statement that the labelled level stays at least δ (energy
    units) from every other level on the path from λ = 0.  Conditional on it.

Each level is bracketed inside its own symmetry sector (the sector's sub-model):
equal energies of other sectors are neither neighbours nor crossings.  A level
that is exactly degenerate with others of its sector has no series trial state;
:func:`error_bounds` (and ``compare(..., reference="bounds")``) bracket it through
its group's degenerate-perturbation-theory states (:mod:`ptcheck._cluster`:
Rayleigh–Ritz in their span, a cluster bound derived from Weyl's inequality and
Kato–Temple), conditional on pairing labels with ranks; certified boundaries need
a series and refuse it.

Identification: an interval is about the level that carries the label (the
branch continuous from the unperturbed level) when that level is separated from
its neighbours on the whole path from 0 to λ; the separation is checked at
nodes along the path and carried between them by Weyl's bound on how fast
eigenvalues move (see :mod:`ptcheck._gaps`).  ``identified`` says where that
argument holds; elsewhere the interval is about the exact level of the same
energy rank.

Trial states at each coupling: the series state itself and every Ritz vector of
H(λ) in the span of the series vectors ψ^(0..K) (Rayleigh–Ritz, no extra
mat-vec), optionally a few Krylov steps; each gives a Kato–Temple interval and
the bracket is their intersection (with Weyl's range of the level of that
rank).  The Weinstein interval |E − ρ| ≤ r is what identifies the level along
the path; where the gap is known it is always wider than Kato–Temple's.

Cost per level: K + 1 mat-vecs with V (K = ``trial_order``) and Gram matrices
of about 3K vectors of length N (O(K² N)), then O(K³) scalar work per
coupling; Lanczos estimates and Krylov steps add O(steps · nnz) each.  Memory
O(K · N).  Everything is computed in float64 with explicit rounding margins
(worst-case dot-product bounds); the bounds are for the matrices as given (a
truncated basis is the user's to check).
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from . import _validation as val
from ._cluster import group_brackets
from ._gaps import GAP_KINDS, LevelEngine, Settings
from ._roots import brentq
from ._trial import operator_scales
from .approximants import OrderSpec, Pade, order_name, parse_order, required_order
from .errors import DegenerateLevelError
from .model import Model
from .quantities import Quantity
from .treatment import CheckSettings, expansion_map

__all__ = ["CertifiedBoundary", "ErrorBounds", "GAP_KINDS", "certified_boundary", "error_bounds"]

#: Default trial order: this many orders above the order judged (and at least 12).
TRIAL_EXTRA_ORDERS = 10

BOUNDS_NOTE = (
    "Bounds are for the matrices given; if the basis is a truncation of a larger one, check that the "
    "levels used are converged in it. Where a result rests on an estimated or given gap it is marked "
    "conditional; confirm design decisions with your own convergence checks."
)


def _ro(a: Any) -> np.ndarray:
    a = np.array(a)
    a.setflags(write=False)
    return a


# ---------------------------------------------------------------------- result types
@dataclass(frozen=True, repr=False, eq=False)
class ErrorBounds:
    """Certified brackets of an exact level (or quantity) and of a perturbative error.

    Attributes
    ----------
    model_name : str
    target : str
        Level label or quantity name.
    levels : tuple of int
        Work-basis indices of the levels used (one for a level).
    weights : tuple of float
        Weight of each level in the target (``(1.0,)`` for a level).
    order : int or Pade
        The order spec judged.
    trial_order : int
        Order K of the Rayleigh–Schrödinger trial states.
    couplings : (C,) ndarray
        Couplings λ (dimensionless), as given.
    perturbative : (C,) ndarray
        The order-k value (energy units).
    unperturbed : float
        Value at λ = 0 (energy units).
    rayleigh_quotient : (C,) ndarray
        ρ of the best trial state (energy units); for a quantity, Σ w ρ.
    residual : (C,) ndarray
        r = ‖(H − ρ)ψ‖ of that state (energy units); for a quantity, Σ |w| r.
    gap : (C,) ndarray
        Distance from ρ to the nearest bound on a neighbouring level,
        min(β − ρ, ρ − α) (energy units); ≤ 0 where Kato–Temple does not apply
        (the bracket then comes from Weyl's inequality alone).  For a quantity,
        the smallest over its levels.
    gap_kind : (C,) ndarray of str
        Source of the gap at each coupling: ``"weyl"``, ``"neighbours"``,
        ``"estimate"`` or ``"given"`` (for a quantity, the sources joined by "+").
    neighbour_below, neighbour_above : (C,) ndarray
        α ≥ E_(n−1) and β ≤ E_(n+1) used (energy units; ±inf at the spectrum's
        ends; NaN for a quantity).
    energy_lower, energy_upper : (C,) ndarray
        Bracket of the exact value (energy units).
    error_lower, error_upper : (C,) ndarray
        Bracket of |perturbative − exact| (energy units).
    rel_error_lower, rel_error_upper : (C,) ndarray
        Bracket of the error relative to the exact shift |E − E0| (levels) or to
        the reference the quantity names; ``inf`` upper where that reference's
        bracket contains 0, NaN where the reference is exactly 0 (λ = 0).
    rigorous : (C,) ndarray of bool
        True where the bracket uses rigorous gaps only and the level is
        identified rigorously; False where it is conditional on an estimated or
        given gap.
    identified : (C,) ndarray of bool
        True where the bracket is shown to be about the labelled level (see the
        module notes); False where it is about the level of the same rank only.
    mat_vecs : int
        Products of a vector with V (or H) spent.
    exact_solves : int
        Always 0.
    notes : tuple of str
    parts : tuple of ErrorBounds
        One result per level for a quantity; empty for a level.
    """

    model_name: str
    target: str
    levels: tuple
    weights: tuple
    order: Any
    trial_order: int
    couplings: np.ndarray
    perturbative: np.ndarray
    unperturbed: float
    rayleigh_quotient: np.ndarray
    residual: np.ndarray
    gap: np.ndarray
    gap_kind: np.ndarray
    neighbour_below: np.ndarray
    neighbour_above: np.ndarray
    energy_lower: np.ndarray
    energy_upper: np.ndarray
    error_lower: np.ndarray
    error_upper: np.ndarray
    rel_error_lower: np.ndarray
    rel_error_upper: np.ndarray
    rigorous: np.ndarray
    identified: np.ndarray
    mat_vecs: int
    exact_solves: int = 0
    notes: tuple = ()
    parts: tuple = field(default=())

    def __repr__(self) -> str:
        frac = f"{int(np.sum(self.rigorous))}/{self.couplings.size} rigorous"
        return (
            f"ErrorBounds({self.target}, {order_name(self.order)}, {self.couplings.size} couplings in "
            f"[{self.couplings.min():.3g}, {self.couplings.max():.3g}], {frac}, trial order {self.trial_order})"
        )

    def to_dict(self) -> dict:
        def arr(a: np.ndarray) -> list:
            return [None if not math.isfinite(x) else x for x in np.asarray(a, dtype=float).tolist()]

        return {
            "model": self.model_name,
            "target": self.target,
            "levels": list(self.levels),
            "weights": list(self.weights),
            "order": order_name(self.order),
            "trial_order": self.trial_order,
            "couplings": self.couplings.tolist(),
            "perturbative": self.perturbative.tolist(),
            "unperturbed": self.unperturbed,
            "rayleigh_quotient": self.rayleigh_quotient.tolist(),
            "residual": self.residual.tolist(),
            "gap": arr(self.gap),
            "gap_kind": [str(k) for k in self.gap_kind],
            "neighbour_below": arr(self.neighbour_below),
            "neighbour_above": arr(self.neighbour_above),
            "energy_lower": arr(self.energy_lower),
            "energy_upper": arr(self.energy_upper),
            "error_lower": arr(self.error_lower),
            "error_upper": arr(self.error_upper),
            "rel_error_lower": arr(self.rel_error_lower),
            "rel_error_upper": arr(self.rel_error_upper),
            "rigorous": [bool(x) for x in self.rigorous],
            "identified": [bool(x) for x in self.identified],
            "mat_vecs": self.mat_vecs,
            "exact_solves": self.exact_solves,
            "notes": list(self.notes),
            "parts": [p.to_dict() for p in self.parts],
        }

    def _repr_html_(self) -> str:
        rows = ""
        for i, lam in enumerate(self.couplings):
            rows += (
                f"<tr><td>{lam:.4g}</td><td>{self.error_lower[i]:.3g}</td><td>{self.error_upper[i]:.3g}</td>"
                f"<td>{self.gap_kind[i]}</td><td>{'yes' if self.rigorous[i] else 'conditional'}</td>"
                f"<td>{'yes' if self.identified[i] else 'no'}</td></tr>"
            )
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return (
            f"<b>Error bounds</b> of {html.escape(self.target)} at {html.escape(order_name(self.order))} "
            f"(model {html.escape(self.model_name)}, trial order {self.trial_order}, no exact solve)"
            "<table><tr><th>λ</th><th>error ≥</th><th>error ≤</th><th>gap</th><th>rigorous</th>"
            f"<th>identified</th></tr>{rows}</table><ul>{notes}</ul>"
        )


@dataclass(frozen=True, repr=False, eq=False)
class CertifiedBoundary:
    """Couplings between which the true validity boundary lies, certified without exact solves.

    Attributes
    ----------
    target : str
        Level label or quantity name.
    order : int
    tol, rtol : float or None
        The tolerance asked for (absolute, energy units; or relative).
    direction : int
        +1 or −1: the ray of couplings searched.
    coupling : float
        Signed coupling λ_c: for every |λ| ≤ |λ_c| on this ray the error is
        guaranteed to meet the tolerance (given the gap, see ``rigorous``).
        0 when nothing could be certified.
    rigorous_coupling : float
        The same guarantee using rigorous gaps only (|·| ≤ |coupling|).
    fail_coupling : float
        Signed coupling at which the error is certified to exceed the
        tolerance, so the true boundary lies between ``coupling`` and this;
        NaN when no failure could be certified (see ``status``).
    fail_rigorous : bool
        Whether the failure certificate uses rigorous gaps only.
    status : str
        ``"bracketed"`` (both couplings found), ``"certified_to_max"`` (the
        tolerance is certified up to ``max_coupling``), ``"fail_not_certified"``
        (no failure could be certified: bounds too wide or the level no longer
        identified), ``"fails_at_zero"`` (a relative tolerance this order cannot
        meet at small coupling), or ``"not_certified"``.
    rigorous : bool
        True when ``coupling`` rests on rigorous gaps only.
    gap_kind : str
        The gap option used.
    trial_order : int
    mat_vecs : int
        Products with V (or H) spent.
    exact_solves : int
        Always 0.
    max_coupling : float
        Largest |λ| searched.
    notes : tuple of str
    """

    target: str
    order: int
    tol: float | None
    rtol: float | None
    direction: int
    coupling: float
    rigorous_coupling: float
    fail_coupling: float
    fail_rigorous: bool
    status: str
    rigorous: bool
    gap_kind: str
    trial_order: int
    mat_vecs: int
    exact_solves: int
    max_coupling: float
    notes: tuple = ()

    @property
    def magnitude(self) -> float:
        """|λ_c|."""
        return abs(self.coupling)

    def __repr__(self) -> str:
        t = f"tol={self.tol:g}" if self.tol is not None else f"rtol={self.rtol:g}"
        kind = "rigorous" if self.rigorous else "conditional"
        return (
            f"CertifiedBoundary({self.target}, order {self.order}, {t}: certified to {self.coupling:.6g} ({kind}), "
            f"fails at {self.fail_coupling:.6g}, status={self.status!r}, exact_solves=0)"
        )

    def to_dict(self) -> dict:
        def f(x: float) -> float | str | None:
            return x if math.isfinite(x) else (None if math.isnan(x) else str(x))

        return {
            "target": self.target,
            "order": self.order,
            "tol": self.tol,
            "rtol": self.rtol,
            "direction": self.direction,
            "coupling": f(self.coupling),
            "rigorous_coupling": f(self.rigorous_coupling),
            "fail_coupling": f(self.fail_coupling),
            "fail_rigorous": self.fail_rigorous,
            "status": self.status,
            "rigorous": self.rigorous,
            "gap_kind": self.gap_kind,
            "trial_order": self.trial_order,
            "mat_vecs": self.mat_vecs,
            "exact_solves": self.exact_solves,
            "max_coupling": f(self.max_coupling),
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        return f"<code>{html.escape(repr(self))}</code>" + "".join(f"<br>{html.escape(n)}" for n in self.notes)


# ---------------------------------------------------------------------- validation
def _settings(gap: Any, trial_order: Any, krylov_steps: Any, lanczos_steps: Any, seed: Any, spec: OrderSpec) -> Settings:
    need = required_order(spec)
    if isinstance(gap, str):
        gap_mode = val.check_choice(gap, "gap", GAP_KINDS)
        gap_value = None
    elif isinstance(gap, (bool, np.bool_)) or not isinstance(gap, (int, float, np.integer, np.floating)):
        raise TypeError(f"gap must be one of {', '.join(map(repr, GAP_KINDS))} or a positive number; got {gap!r}")
    else:
        gap_mode, gap_value = "given", float(val.check_positive(gap, "gap"))
    if trial_order is None:
        trial_order = max(12, need + TRIAL_EXTRA_ORDERS)
    trial_order = val.check_int(trial_order, "trial_order", minimum=1)
    if trial_order <= need:
        raise ValueError(
            f"trial_order must exceed the order judged ({order_name(spec)} needs order {need}); got trial_order={trial_order}"
        )
    krylov_steps = val.check_int(krylov_steps, "krylov_steps", minimum=0)
    if krylov_steps == 1:
        raise ValueError("krylov_steps must be 0 (no refinement) or >= 2; got 1")
    if lanczos_steps is not None:
        lanczos_steps = val.check_int(lanczos_steps, "lanczos_steps", minimum=2)
    seed = val.check_int(seed, "seed", minimum=0)
    return Settings(gap_mode, gap_value, trial_order, krylov_steps, lanczos_steps, seed)


def bounds_options(gap: Any, trial_order: Any, order: Any) -> Settings:
    """Validated options of a bounds computation for callers in other modules (compare, the report).

    ``order``: the highest order spec judged (sets the default trial order).
    """
    return _settings(gap, trial_order, 0, None, 0, parse_order(order))


def _resolve(model: Model, level: Any) -> tuple[str, dict[int, float], str]:
    if not isinstance(model, Model):
        raise TypeError(f"model must be a ptcheck Model; got {type(model).__name__}")
    if isinstance(level, list):
        raise TypeError(f"give one level or Quantity; got a list {level!r}")
    if isinstance(level, Quantity):
        return level.name, level.resolve(model), level.relative_to
    n = model.level_index(level)
    return model.label(n), {n: 1.0}, "shift"


def _sector_model(model: Model, n: int) -> tuple[Model, int]:
    """The sub-model of level n's symmetry sector and n's index in it (the model itself with one sector).

    V never couples sectors, so the level's bounds, gaps and identification are
    judged among the levels of its own sector: equal energies in other sectors
    are neither neighbours nor crossings.
    """
    if len(model.sectors) == 1:
        return model, n
    k = int(model.level_sectors[n])
    sub = model.restrict(k)
    return sub, int(np.searchsorted(np.flatnonzero(model.level_sectors == k), n))


def _engines(model: Model, weights: dict[int, float], settings: Settings, caller: str) -> dict[int, LevelEngine]:
    scales: dict[int, Any] = {}
    out = {}
    for n in weights:
        sub, local = _sector_model(model, n)
        if id(sub) not in scales:
            scales[id(sub)] = operator_scales(sub)
        try:
            out[n] = LevelEngine(sub, local, settings, scales[id(sub)])
        except DegenerateLevelError as exc:
            raise DegenerateLevelError(
                f"{caller} needs a level that is not degenerate with another level of its sector (its trial state "
                f"is a Rayleigh–Schrödinger series; error_bounds and compare(..., reference='bounds') bracket a "
                f"degenerate level at given couplings through its group): {exc}",
                exc.pair,
            ) from None
    return out


def _v_bound(engines: dict[int, LevelEngine]) -> float:
    """Largest bound on ‖V‖ over the sectors of the levels used (energy units)."""
    return max(max(abs(e.scales.v_min), abs(e.scales.v_max)) for e in engines.values())


# ---------------------------------------------------------------------- one level, pointwise
@dataclass
class _Pointwise:
    lo: np.ndarray
    hi: np.ndarray
    rho: np.ndarray
    r: np.ndarray
    alpha: np.ndarray
    beta: np.ndarray
    kind: np.ndarray
    rigorous: np.ndarray
    identified: np.ndarray


def _identification(eng: LevelEngine, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(identified, identified with rigorous gaps) per coupling."""
    st = eng.settings
    s = np.abs(lam)
    if st.gap == "given":
        ok = 2.0 * eng.trial.residual_bound(s) < st.gap_value
        return ok, np.zeros(lam.shape, dtype=bool)
    ident = s == 0
    rig = s == 0
    for d in (1, -1):
        sel = np.sign(lam) == d
        if not np.any(sel):
            continue
        w = eng.walk(d, float(np.max(s[sel])))
        ident |= sel & (s < w.reach)
        rig |= sel & (s < w.rigorous_reach)
    return ident, rig


def _pointwise(eng: LevelEngine, lam: np.ndarray, *, krylov: bool, allow_estimate: bool = True) -> _Pointwise:
    """Bracket of the level at each coupling with the gap option asked for.

    ``allow_estimate=False`` (gap ``"auto"`` only) keeps to rigorous gaps and
    rigorous identification, for the rigorous-only certificate.
    """
    st = eng.settings
    ident, ident_rig = _identification(eng, lam)
    if st.gap == "given":
        alpha, beta = eng.given_gap(lam, st.gap_value)
        kind = np.full(lam.shape, "given", dtype=object)
        lo, hi, rho, r, _ = eng.interval(lam, alpha, beta, krylov=krylov)
        return _Pointwise(lo, hi, rho, r, alpha, beta, kind, np.zeros(lam.shape, dtype=bool), ident)
    if st.gap == "estimate":
        alpha, beta = eng.transported_estimate(lam)
        kind = np.full(lam.shape, "estimate", dtype=object)
        lo, hi, rho, r, _ = eng.interval(lam, alpha, beta, krylov=krylov)
        return _Pointwise(lo, hi, rho, r, alpha, beta, kind, np.zeros(lam.shape, dtype=bool), ident)
    alpha, beta, kind = eng.rigorous_gap(lam)
    lo, hi, rho, r, ok = eng.interval(lam, alpha, beta, krylov=krylov)
    rigorous = ident_rig.copy()
    if not allow_estimate:
        return _Pointwise(lo, hi, rho, r, alpha, beta, kind, rigorous, ident_rig)
    if st.gap == "auto":
        weak = ~(ok & ident_rig)
        if np.any(weak):
            idx = np.flatnonzero(weak)
            a2, b2 = eng.transported_estimate(lam[idx])
            l2, h2, rho2, r2, _ = eng.interval(lam[idx], a2, b2, krylov=krylov)
            lo[idx], hi[idx], rho[idx], r[idx] = l2, h2, rho2, r2
            alpha[idx], beta[idx] = a2, b2
            kind[idx] = "estimate"
            rigorous[idx] = False
    return _Pointwise(lo, hi, rho, r, alpha, beta, kind, rigorous, ident)


def error_brackets(lo, hi, pert, ref_lo, ref_hi):
    """(error ≥, error ≤, relative error ≥, relative error ≤) of ``pert`` against a value in [lo, hi].

    The relative error is relative to a reference known to lie in [ref_lo,
    ref_hi]; its upper end is ``inf`` where that range contains 0, and both
    ends are NaN where the reference is exactly 0 (λ = 0).  Shapes broadcast.
    """
    err_lo = np.maximum(0.0, np.maximum(lo - pert, pert - hi))
    err_hi = np.maximum(np.abs(pert - lo), np.abs(pert - hi))
    ref_max = np.maximum(np.abs(ref_lo), np.abs(ref_hi))
    contains_zero = (ref_lo <= 0) & (ref_hi >= 0)
    ref_min = np.where(contains_zero, 0.0, np.minimum(np.abs(ref_lo), np.abs(ref_hi)))
    with np.errstate(divide="ignore", invalid="ignore"):
        rel_lo = np.where(ref_max > 0, err_lo / ref_max, np.nan)  # 0/0 at λ = 0: undefined
        rel_hi = np.where(ref_min > 0, err_hi / ref_min, np.where(ref_max > 0, np.inf, np.nan))
    return err_lo, err_hi, rel_lo, rel_hi


# ---------------------------------------------------------------------- error_bounds
def error_bounds(
    model: Model,
    level: Any,
    order: Any,
    couplings: Any,
    *,
    gap: str | float = "auto",
    trial_order: int | None = None,
    krylov_steps: int = 0,
    lanczos_steps: int | None = None,
    seed: int = 0,
) -> ErrorBounds:
    """Bracket the exact level and the error of its order-k energy, without an exact solve.

    Parameters
    ----------
    model : Model
    level : level key or Quantity
        Energy rank, label, or a :class:`~ptcheck.Quantity` (its bracket is the
        interval sum of its levels' brackets).  A level that is exactly
        degenerate with others of its sector is bracketed through its group
        (module notes of :mod:`ptcheck._cluster`): its order-k energy is that of
        degenerate perturbation theory, and its brackets are never rigorous.
    order : int, Pade or str
        The order spec whose error is bracketed.
    couplings : float or (C,) array_like
        Couplings λ (dimensionless).
    gap : {"auto", "weyl", "neighbours", "estimate"} or float, default "auto"
        Where the bounds on the neighbouring levels come from (module notes).
    trial_order : int, optional
        Order K of the trial state; default ``max(12, k + 10)``.  Costs K + 1
        mat-vecs and about 3K vectors of length N per level.
    krylov_steps : int, default 0
        Rayleigh–Ritz steps from the trial state at each coupling (0 = none).
    lanczos_steps : int, optional
        Lanczos steps of each gap estimate; default 20 + 4 n for level n (at most N).
    seed : int, default 0
        Seed of the Lanczos start vectors.

    Returns
    -------
    ErrorBounds

    Notes
    -----
    What is guaranteed: the exact eigenvalue of the level's energy rank lies in
    [``energy_lower``, ``energy_upper``] whenever the bounds on its neighbours
    hold — always for rigorous gaps, and under the estimate (or the user's
    statement) otherwise.  It is the level that carries the label where
    ``identified`` is True: there the level's separation from both neighbours
    has been shown on the whole path from λ = 0 (nodes with a proven
    separation, each valid over a window of λ by Weyl's bound on how fast
    eigenvalues move; for a given gap δ, the Weinstein radius stays below δ/2).
    Where that argument fails the result says so in ``notes``.

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model, error_bounds
    >>> m = Model(np.diag([-0.5, 0.5]), [[0, 1], [1, 0]])
    >>> b = error_bounds(m, 0, 2, [0.1, 0.2])
    >>> bool(np.all(b.error_lower <= b.error_upper)), bool(b.rigorous.all())
    (True, True)
    """
    spec = parse_order(order)
    lam = val.as_couplings(couplings)
    name, weights, relative_to = _resolve(model, level)
    settings = _settings(gap, trial_order, krylov_steps, lanczos_steps, seed, spec)
    groups = _degenerate_members(model, list(weights), lam, settings)
    engines = _engines(model, {n: w for n, w in weights.items() if n not in groups}, settings, "error_bounds")
    parts = []
    for n, eng in engines.items():
        pw = _pointwise(eng, lam, krylov=True)
        pert = np.asarray(eng.trial.series.energy(lam, spec), dtype=float)
        parts.append((n, eng, pw, pert))

    def level_result(n: int, eng: LevelEngine, pw: _Pointwise, pert: np.ndarray) -> ErrorBounds:
        e0 = float(model.e0[n])
        el, eh, rl, rh = error_brackets(pw.lo, pw.hi, pert, pw.lo - e0, pw.hi - e0)
        gapv = np.minimum(pw.beta - pw.rho, pw.rho - pw.alpha)
        return ErrorBounds(
            model_name=model.name, target=model.label(n), levels=(n,), weights=(1.0,), order=spec,
            trial_order=settings.trial_order, couplings=_ro(lam), perturbative=_ro(pert), unperturbed=e0,
            rayleigh_quotient=_ro(pw.rho), residual=_ro(pw.r), gap=_ro(gapv), gap_kind=_ro(pw.kind.astype(str)),
            neighbour_below=_ro(pw.alpha), neighbour_above=_ro(pw.beta), energy_lower=_ro(pw.lo),
            energy_upper=_ro(pw.hi), error_lower=_ro(el), error_upper=_ro(eh), rel_error_lower=_ro(rl),
            rel_error_upper=_ro(rh), rigorous=_ro(pw.rigorous & pw.identified), identified=_ro(pw.identified),
            mat_vecs=eng.mat_vecs, notes=tuple(_level_notes(eng, pw, lam)),
        )

    def group_result(n: int) -> ErrorBounds:
        gb, i, exp = groups[n]
        e0 = float(model.e0[n])
        lo, hi = gb.lower[i], gb.upper[i]
        pert = np.asarray(exp.energy(lam, spec), dtype=float)
        el, eh, rl, rh = error_brackets(lo, hi, pert, lo - e0, hi - e0)
        rho = gb.rayleigh_quotient[i]
        gapv = np.minimum(gb.neighbour_above[i] - rho, rho - gb.neighbour_below[i])
        return ErrorBounds(
            model_name=model.name, target=model.label(n), levels=(n,), weights=(1.0,), order=spec,
            trial_order=settings.trial_order, couplings=_ro(lam), perturbative=_ro(pert), unperturbed=e0,
            rayleigh_quotient=_ro(rho), residual=_ro(gb.residual[i]), gap=_ro(gapv), gap_kind=_ro(gb.gap_kind),
            neighbour_below=_ro(gb.neighbour_below[i]), neighbour_above=_ro(gb.neighbour_above[i]),
            energy_lower=_ro(lo), energy_upper=_ro(hi), error_lower=_ro(el), error_upper=_ro(eh),
            rel_error_lower=_ro(rl), rel_error_upper=_ro(rh), rigorous=_ro(np.zeros(lam.shape, dtype=bool)),
            identified=_ro(gb.identified[i]), mat_vecs=gb.mat_vecs, notes=tuple(_group_notes(model, n, gb, i, lam, settings)),
        )

    by_level = {p[0]: level_result(*p) for p in parts}
    by_level.update({n: group_result(n) for n in weights if n in groups})
    level_parts = [by_level[n] for n in weights]
    if not isinstance(level, Quantity):
        only = level_parts[0]
        return replace(only, notes=(BOUNDS_NOTE,) + only.notes)
    return _combine(model, name, weights, relative_to, spec, settings, lam, level_parts)


@dataclass(frozen=True)
class LevelBracket:
    """Bracket of one exact level over couplings (for :func:`ptcheck.compare`); arrays of shape (C,).

    ``lower``/``upper`` in energy units; ``rigorous``: rigorous gaps and
    identification; ``identified``: about the labelled level; ``gap_kind``:
    the gap source per coupling.
    """

    lower: np.ndarray
    upper: np.ndarray
    rigorous: np.ndarray
    identified: np.ndarray
    gap_kind: np.ndarray


def level_brackets(
    model: Model, levels: list[int], couplings: np.ndarray, settings: Settings,
) -> tuple[dict[int, LevelBracket], list[str], int]:
    """Brackets of exact levels (work indices) at couplings, no exact solve.

    Returns the brackets, notes and the mat-vecs spent.  A level in an exactly
    degenerate group is bracketed through its group (never marked rigorous).
    """
    groups = _degenerate_members(model, levels, couplings, settings)
    engines = _engines(model, {n: 1.0 for n in levels if n not in groups}, settings, "certified bounds")
    out, notes = {}, [BOUNDS_NOTE]
    for n, eng in engines.items():
        pw = _pointwise(eng, couplings, krylov=True)
        out[n] = LevelBracket(pw.lo, pw.hi, pw.rigorous & pw.identified, pw.identified, pw.kind.astype(str))
        notes.extend(_level_notes(eng, pw, couplings))
    spent = {id(gb): gb.mat_vecs for gb, _, _ in groups.values()}
    for n in levels:
        if n in groups:
            gb, i, _ = groups[n]
            out[n] = LevelBracket(gb.lower[i], gb.upper[i], np.zeros(couplings.shape, dtype=bool), gb.identified[i],
                                  gb.gap_kind)
            notes.extend(_group_notes(model, n, gb, i, couplings, settings))
    return out, list(dict.fromkeys(notes)), int(sum(e.mat_vecs for e in engines.values()) + sum(spent.values()))


def _degenerate_members(model: Model, levels: list[int], lam: np.ndarray, settings: Settings) -> dict[int, tuple]:
    """Group brackets of the levels that are exactly degenerate in their sector: {level: (brackets, index, expansion)}.

    The trial states are the group's degenerate-perturbation-theory states at the trial order
    (:mod:`ptcheck.treatment`, standard treatment); see :mod:`ptcheck._cluster`.
    """
    out: dict[int, tuple] = {}
    k = settings.trial_order
    for n in levels:
        grp = model.degenerate_group_of(n)
        if grp is None or n in out:
            continue
        exps = expansion_map(model, list(grp), k, settings=CheckSettings())

        def states(c: float, exps=exps, grp=grp) -> np.ndarray:
            return np.stack([np.asarray(exps[m].state(np.array([c]), k)).reshape(model.n) for m in grp])

        energies = np.stack([np.asarray(exps[m].energy(lam, k), dtype=float).reshape(lam.shape) for m in grp])
        gb = group_brackets(model, tuple(grp), states, energies, lam, trial_order=k, use_neighbours=settings.gap != "weyl")
        for i, m in enumerate(grp):
            out[m] = (gb, i, exps[m])
    return out


def _group_notes(model: Model, n: int, gb: Any, i: int, lam: np.ndarray, settings: Settings) -> list[str]:
    lab = model.label(n)
    others = ", ".join(model.label(m) for m in model.degenerate_group_of(n) if m != n)
    notes = [
        f"Level {lab} is exactly degenerate with {others} in its sector: its bracket comes from the group's "
        "degenerate-perturbation-theory states (Rayleigh–Ritz in their span, cluster and Kato–Temple bounds), and "
        "its label is paired with the exact level of the same rank among the group's branches at each coupling. "
        "That pairing is not proven along the path from λ = 0, so these brackets are conditional, never rigorous."
    ]
    if settings.gap in ("estimate", "given") or settings.krylov_steps > 0:
        notes.append(f"Level {lab}: a degenerate group uses rigorous bounds outside the group (Weyl and the neighbours' "
                     "own brackets); the gap option and Krylov steps asked for apply to non-degenerate levels only.")
    bad = ~gb.identified[i] & (lam != 0)
    if np.any(bad):
        notes.append(
            f"Level {lab}: at {int(np.sum(bad))} coupling(s) the group's brackets overlap (or reach past its "
            "neighbours), so which exact level carries the label is not resolved there."
        )
    return notes


def _level_notes(eng: LevelEngine, pw: _Pointwise, lam: np.ndarray) -> list[str]:
    notes = list(dict.fromkeys(eng.notes))
    lab = eng.model.label(eng.n)
    if not np.all(pw.identified):
        bad = np.abs(lam[~pw.identified])
        notes.append(
            f"Level {lab}: from |λ| = {bad.min():.4g} on, its separation from the neighbouring levels could not be "
            "shown along the path; there the bracket is about the exact level of the same energy rank, which "
            "may not be the level carrying the label."
        )
    est = pw.kind == "estimate"
    if np.any(est):
        notes.append(
            f"Level {lab}: at {int(np.sum(est))} coupling(s) the gap is a Lanczos estimate; those brackets are "
            "conditional on it."
        )
    if np.any(pw.kind == "given"):
        notes.append(f"Level {lab}: brackets are conditional on the gap given ({eng.settings.gap_value:g}).")
    return notes


def _combine(model, name, weights, relative_to, spec, settings, lam, parts) -> ErrorBounds:
    w = np.array([weights[p.levels[0]] for p in parts])
    lo = sum(np.where(wi >= 0, wi * p.energy_lower, wi * p.energy_upper) for wi, p in zip(w, parts))
    hi = sum(np.where(wi >= 0, wi * p.energy_upper, wi * p.energy_lower) for wi, p in zip(w, parts))
    pert = sum(wi * p.perturbative for wi, p in zip(w, parts))
    unpert = float(sum(wi * p.unperturbed for wi, p in zip(w, parts)))
    ref_off = unpert if relative_to == "shift" else 0.0
    el, eh, rl, rh = error_brackets(lo, hi, pert, lo - ref_off, hi - ref_off)
    kinds = np.array(["+".join(dict.fromkeys(str(p.gap_kind[i]) for p in parts)) for i in range(lam.size)])
    notes = [BOUNDS_NOTE, f"Quantity {name!r}: bracket = interval sum of its levels' brackets (weights {tuple(w.tolist())})."]
    for p in parts:
        notes.extend(p.notes)
    return ErrorBounds(
        model_name=model.name, target=name, levels=tuple(p.levels[0] for p in parts), weights=tuple(w.tolist()),
        order=spec, trial_order=settings.trial_order, couplings=_ro(lam), perturbative=_ro(pert), unperturbed=unpert,
        rayleigh_quotient=_ro(sum(wi * p.rayleigh_quotient for wi, p in zip(w, parts))),
        residual=_ro(sum(abs(wi) * p.residual for wi, p in zip(w, parts))),
        gap=_ro(np.min([p.gap for p in parts], axis=0)), gap_kind=_ro(kinds),
        neighbour_below=_ro(np.full(lam.shape, np.nan)), neighbour_above=_ro(np.full(lam.shape, np.nan)),
        energy_lower=_ro(lo), energy_upper=_ro(hi), error_lower=_ro(el), error_upper=_ro(eh),
        rel_error_lower=_ro(rl), rel_error_upper=_ro(rh),
        rigorous=_ro(np.all([p.rigorous for p in parts], axis=0)),
        identified=_ro(np.all([p.identified for p in parts], axis=0)),
        mat_vecs=int(sum(p.mat_vecs for p in parts)), notes=tuple(dict.fromkeys(notes)), parts=tuple(parts),
    )


# ---------------------------------------------------------------------- certified boundary
class _Criterion:
    """g(s) ≥ 0 proves that the error meets the tolerance at |λ| = s (polynomial in s).

    For each level i along the ray: ρ_i − E_k,i = M_i / D_i with M_i = P_i D_i + N1_i
    (P_i = E_K,i − E_k,i), the shift (or value) of ρ_i is S_i / D_i, and
    |E_i − ρ_i| ≤ r_i² / G'_i ≤ T_i / D_i with T_i = N2_i / G'_i (+ rounding terms),
    G'_i = G_i − 2 U_i a lower bound of (gap − 2 r) on the path (see
    :func:`certified_boundary`).  With Π = Π_i D_i and Π_−i = Π / D_i:

        absolute:  g = tol Π − |Σ w M Π_−i| − Σ |w| T Π_−i
        relative:  g = (rtol (|Σ w S Π_−i| − Σ |w| T Π_−i) − |Σ w M Π_−i| − Σ |w| T Π_−i) / s^j0

    ``gaps=None`` drops the T terms (a first guess, not a proof).
    """

    def __init__(self, pieces, k, thr, relative, relative_to, gaps):
        mul = np.polynomial.polynomial.polymul
        add = np.polynomial.polynomial.polyadd
        dens = [pc["D"] for _, pc, _ in pieces]
        num_m = num_s = num_t = mag_s = np.zeros(1)
        den = np.ones(1)
        for d in dens:
            den = mul(den, d)
        nterm = 4 * (2 * max(pc["E"].size for _, pc, _ in pieces) + 2) * float(np.finfo(float).eps)
        for i, (w, pc, e0) in enumerate(pieces):
            rest = np.ones(1)
            for j, d in enumerate(dens):
                if j != i:
                    rest = mul(rest, d)
            e = pc["E"]
            p = e.copy()
            p[: k + 1] = 0.0
            ref = e.copy()
            if relative_to == "shift":
                ref[0] -= e0
            m_i = add(mul(p, pc["D"]), pc["N1"])
            s_i = add(mul(ref, pc["D"]), pc["N1"])
            num_m = add(num_m, w * mul(m_i, rest))
            num_s = add(num_s, w * mul(s_i, rest))
            mag_s = add(mag_s, abs(w) * mul(add(mul(np.abs(ref), pc["D"]), np.abs(pc["N1"])), np.abs(rest)))
            if gaps is not None:
                u0sq = mul(pc["U0"], pc["U0"])
                t_i = add(add(pc["N2"], nterm * u0sq) / gaps[i], nterm * mul(pc["PHI"], pc["U0"]))
                num_t = add(num_t, abs(w) * mul(t_i, rest))
        size = max(num_m.size, num_s.size, num_t.size, den.size, mag_s.size)
        pad = lambda c: np.concatenate([c, np.zeros(size - c.size)])  # noqa: E731
        num_m, num_s, num_t, den, mag_s = pad(num_m), pad(num_s), pad(num_t), pad(den), pad(mag_s)
        noise = 1e-10 * mag_s + 1e-14 * max(float(np.max(mag_s)), 1e-300) * (np.arange(size) > 0)
        num_s = np.where(np.abs(num_s) > noise, num_s, 0.0)
        self.thr, self.relative = thr, relative
        nz = np.flatnonzero(num_s)
        self.j0 = (int(nz[0]) if nz.size else None) if relative else 0
        self.possible = (not relative) or (self.j0 is not None and self.j0 <= k)
        j0 = self.j0 or 0
        # M starts at order k + 1 > j0 and T at order K + 1: dividing by s^j0 leaves polynomials
        self.m, self.s_, self.t, self.den = num_m[j0:], num_s[j0:], num_t[j0:], den
        if j0:
            self.den = None

    def __call__(self, s: Any) -> np.ndarray:
        pv = np.polynomial.polynomial.polyval
        s = np.asarray(s, dtype=float)
        m, t = np.abs(pv(s, self.m)), pv(s, self.t)
        if self.relative:
            return self.thr * (np.abs(pv(s, self.s_)) - t) - m - t
        return self.thr * pv(s, self.den) - m - t

    def lipschitz(self, b: Any) -> np.ndarray:
        """Bound on |g'| over [0, b] (shape of ``b``): derivatives with absolute coefficients, monotone in b."""
        if not hasattr(self, "_lip"):
            def d(c):
                return np.arange(1, c.size) * np.abs(c[1:]) if c.size > 1 else np.zeros(1)

            parts = [d(self.m), d(self.t)]
            parts += [self.thr * d(self.s_), self.thr * d(self.t)] if self.relative else [self.thr * d(self.den)]
            size = max(p.size for p in parts)
            self._lip = sum(np.concatenate([p, np.zeros(size - p.size)]) for p in parts)
        return np.polynomial.polynomial.polyval(np.asarray(b, dtype=float), self._lip)


def _first_root(g: _Criterion, s_lo: float, s_max: float) -> float:
    grid = np.concatenate([[0.0], np.geomspace(s_lo, s_max, 4000)])
    vals = g(grid)
    bad = np.flatnonzero(~(vals >= 0))
    if bad.size == 0:
        return s_max
    i = int(bad[0])
    if i == 0:
        return 0.0
    return float(brentq(lambda x: float(g(np.array(x))), grid[i - 1], grid[i], xtol=1e-14 * grid[i], rtol=1e-14))


def _certify_prefix(g: _Criterion, target: float, max_evals: int = 200000) -> float:
    """Largest s ≤ target with g ≥ 0 proven on [0, s] (Lipschitz subdivision, left to right).

    On a cell [a, b], g ≥ (g(a) + g(b))/2 − L(b)(b − a)/2 with L(b) the bound on
    |g'| over [0, b]; a cell is proven when that is ≥ 0.  Cells are halved (up
    to 64 per round, vectorised) until every cell is proven or the first
    unproven one starts where g < 0 or has shrunk to rounding size.
    """
    if target <= 0:
        return 0.0
    edges = np.linspace(0.0, target, 65)
    vals = np.asarray(g(edges), dtype=float)
    evals = edges.size
    while True:
        a, b, ga, gb = edges[:-1], edges[1:], vals[:-1], vals[1:]
        ok = (ga >= 0) & (gb >= 0) & (ga + gb >= g.lipschitz(b) * (b - a))
        if ok.all():
            return target
        i = int(np.argmin(ok))
        if not ga[i] >= 0 or b[i] - a[i] < 1e-13 * target or evals > max_evals:
            return float(a[i])
        bad_edge = np.flatnonzero(~(vals >= 0))
        stop = int(bad_edge[0]) if bad_edge.size else edges.size  # cells beyond a failing point never count
        todo = np.flatnonzero(~ok[:stop])[:64]
        mids = 0.5 * (a[todo] + b[todo])
        edges = np.insert(edges, todo + 1, mids)
        vals = np.insert(vals, todo + 1, np.asarray(g(mids), dtype=float))
        evals += mids.size


def certified_boundary(
    model: Model,
    level: Any,
    order: int,
    *,
    tol: float | None = None,
    rtol: float | None = None,
    direction: int = +1,
    gap: str | float = "auto",
    trial_order: int | None = None,
    krylov_steps: int = 0,
    lanczos_steps: int | None = None,
    seed: int = 0,
    max_coupling: float | None = None,
    xrtol: float = 1e-3,
) -> CertifiedBoundary:
    """Certified couplings around the validity boundary of one order, with zero exact solves.

    Parameters
    ----------
    model : Model
    level : level key or Quantity
    order : int
        Truncation order k judged (Padé approximants are not polynomials: not accepted).
    tol : float, optional
        Absolute tolerance (energy units).  Give exactly one of ``tol``/``rtol``.
    rtol : float, optional
        Tolerance relative to the exact shift |E − E0| (a quantity: to the
        reference it names).
    direction : {+1, −1}
    gap, trial_order, krylov_steps, lanczos_steps, seed
        As in :func:`error_bounds` (``krylov_steps`` refines the trial at the
        couplings probed for a certified failure).
    max_coupling : float, optional
        Largest |λ| searched; default 100 × (isolation of the level / bound on ‖V‖).
    xrtol : float, default 1e-3
        Relative precision of ``fail_coupling``.

    Returns
    -------
    CertifiedBoundary

    Notes
    -----
    Below ``coupling``, on the whole path from 0: the exact level E (identified,
    see :mod:`ptcheck.bounds`) is at least G from every other level, with G the
    floor of the identification walk's gap envelope; then for the trial state
    with Rayleigh quotient ρ and residual r (r ≤ U, the residual bound of
    :mod:`ptcheck._trial`), d = |E − ρ| obeys d (G − 2d) ≤ r² (expand r² over
    eigenvectors; |E_i − ρ| ≥ |E_i − E| − d), and continuity from d = 0 at λ = 0
    keeps d on the small root, so |E − ρ| ≤ r² / (G − 2U) while G > 3U.  With ρ
    and r² written as ratios of polynomials in λ (Gram matrices of the series
    vectors), "bracket of the error ≤ tolerance" becomes a polynomial
    inequality, proven on [0, λ_c] by Lipschitz subdivision.  Rounding of the
    series coefficients themselves (relative ~1e-13) is not propagated.
    ``fail_coupling``: a coupling where the Kato–Temple bracket of the error
    lies wholly above the tolerance and the level is identified.
    """
    if (tol is None) == (rtol is None):
        raise ValueError(f"give exactly one of tol (absolute) or rtol (relative); got tol={tol!r}, rtol={rtol!r}")
    relative = rtol is not None
    thr = float(val.check_positive(rtol if relative else tol, "rtol" if relative else "tol"))
    if direction not in (1, -1) or isinstance(direction, bool):
        raise ValueError(f"direction must be +1 or -1; got {direction!r}")
    spec = parse_order(order)
    if isinstance(spec, Pade):
        raise ValueError(f"certified_boundary needs a truncation order (an int); got {order_name(spec)}")
    k = int(spec)
    xrtol = float(val.check_positive(xrtol, "xrtol"))
    if max_coupling is not None:
        max_coupling = float(val.check_positive(max_coupling, "max_coupling"))
    name, weights, relative_to = _resolve(model, level)
    settings = _settings(gap, trial_order, krylov_steps, lanczos_steps, seed, spec)
    return certify(model, name, weights, relative_to, k, thr, relative, direction, settings, max_coupling, xrtol)


def certify(
    model: Model, name: str, weights: dict[int, float], relative_to: str, k: int, thr: float, relative: bool,
    direction: int, settings: Settings, max_coupling: float | None, xrtol: float, *, reach_at_least: float = 0.0,
) -> CertifiedBoundary:
    """:func:`certified_boundary` on validated, resolved input.

    ``reach_at_least``: the default search limit is raised to this |λ| (the
    caller's coupling of interest must be inside the range searched).
    """
    engines = _engines(model, weights, settings, "certified bounds")
    v_big = _v_bound(engines)
    iso = min(e.sep0 for e in engines.values())
    s_nat = iso / v_big if v_big > 0 else np.inf
    if max_coupling is None:
        s_max = max(100.0 * s_nat if np.isfinite(s_nat) else 1e6, reach_at_least)
    else:
        s_max = max_coupling
    notes = [BOUNDS_NOTE]
    pieces = [(weights[n], eng.trial.polynomials(direction), float(model.e0[n])) for n, eng in engines.items()]

    def result(coupling, rig_coupling, fail, fail_rig, status, extra=()):
        conditional = settings.gap in ("given", "estimate") or rig_coupling < coupling
        return CertifiedBoundary(
            target=name, order=k, tol=None if relative else thr, rtol=thr if relative else None, direction=direction,
            coupling=direction * float(coupling), rigorous_coupling=direction * float(rig_coupling),
            fail_coupling=direction * float(fail) if np.isfinite(fail) else float("nan"), fail_rigorous=bool(fail_rig),
            status=status, rigorous=not conditional,
            gap_kind=settings.gap if settings.gap != "given" else f"given ({settings.gap_value:g})",
            trial_order=settings.trial_order, mat_vecs=int(sum(e.mat_vecs for e in engines.values())), exact_solves=0,
            max_coupling=s_max, notes=tuple(dict.fromkeys(notes + [n for e in engines.values() for n in e.notes] + list(extra))),
        )

    guess = _Criterion(pieces, k, thr, relative, relative_to, None)
    if not guess.possible or not float(guess(np.array(0.0))) >= 0:
        return result(0.0, 0.0, np.nan, False, "fails_at_zero", (
            "The relative error of this order does not go to zero with λ (the order-k value has none of the "
            "exact shift): it cannot meet a relative tolerance below 1 at any small coupling.",))
    s_guess = _first_root(guess, 1e-9 * min(s_nat, s_max), s_max)
    extent = s_max if s_guess >= s_max else min(1.02 * s_guess, s_max)
    if settings.gap != "given":
        for eng in engines.values():
            eng.walk(direction, extent)

    def certify(s_top: float, rigorous_only: bool) -> float:
        for _ in range(60):
            if s_top <= 0:
                return 0.0
            gaps = []
            for eng in engines.values():
                u = float(eng.trial.residual_bound(s_top))
                floor = settings.gap_value if settings.gap == "given" else eng.gap_floor(direction, s_top, rigorous_only=rigorous_only)
                gaps.append(floor - 2.0 * u if floor > 3.0 * u else -1.0)
            if min(gaps) > 0:
                break
            s_top *= 0.8
        else:
            return 0.0
        g = _Criterion(pieces, k, thr, relative, relative_to, gaps)
        root = _first_root(g, 1e-9 * min(s_nat, s_top), s_top)
        return _certify_prefix(g, root * (1 - 1e-9) if root < s_top else s_top)

    def reach(rigorous_only: bool) -> float:
        if settings.gap == "given":
            return extent
        walks = [eng.walk(direction, extent) for eng in engines.values()]
        return min(w.rigorous_reach if rigorous_only else w.reach for w in walks)

    rigorous_modes = settings.gap in ("auto", "weyl", "neighbours")
    s_p = s_p_rig = 0.0
    for rigorous_only in ((True, False) if settings.gap == "auto" else (rigorous_modes,)):
        top = min(extent, reach(rigorous_only) * (1 - 1e-12))
        best = certify(top, rigorous_only)
        if 0 < best < top:  # a shorter path has a larger gap floor: try once more just beyond
            best = max(best, certify(min(top, best * 1.02), rigorous_only))
        if rigorous_only:
            s_p_rig = best
        s_p = max(s_p, best)

    # beyond the polynomial certificate: pointwise Kato–Temple brackets and Weyl's slope bound
    target = _Target(engines, weights, k, direction, thr, relative, relative_to, model)
    fail, fail_rig = np.nan, False
    if s_p < s_max:
        fail, fail_rig = _find_fail(target, max(s_p, 1e-9 * min(s_nat, s_max)), s_max, xrtol, settings.krylov_steps > 0)
    end = fail if np.isfinite(fail) else min(s_max, reach(False))
    s_c = _extend(target, s_p, end, allow_estimate=not rigorous_modes or settings.gap == "auto")
    s_rig = 0.0
    if rigorous_modes:
        s_rig = _extend(target, s_p_rig, min(end, reach(True)), allow_estimate=False)
        s_c = max(s_c, s_rig)
    if settings.gap == "given":
        notes.append(f"Conditional on the gap given ({settings.gap_value:g}) holding along the path.")
    if rigorous_modes and s_rig < s_c:
        notes.append(
            f"With rigorous gaps alone the tolerance is certified up to |λ| = {s_rig:.4g}; beyond it the "
            "certificate rests on the Lanczos gap estimate."
        )
    if s_c >= s_max:
        return result(s_max, s_rig, np.nan, False, "certified_to_max", (
            f"The tolerance is certified up to the search limit |λ| = {s_max:.4g}.",))
    if not np.isfinite(fail):
        status = "fail_not_certified" if s_c > 0 else "not_certified"
        return result(s_c, s_rig, np.nan, False, status, (
            "No coupling could be certified to fail: the brackets beyond the certified coupling are too wide or the "
            "level is no longer identified; an exact check (or a higher trial order / Krylov steps) decides there.",))
    gap_note = ()
    if fail > s_c * (1 + 0.1):
        gap_note = (
            f"The true boundary lies between {s_c:.4g} and {fail:.4g}; a higher trial order, Krylov steps or a "
            "better gap narrows the bracket.",
        )
    return result(s_c, s_rig, fail, fail_rig, "bracketed" if s_c > 0 else "not_certified", gap_note)


class _Target:
    """The error of one order of a level or quantity along the ray, bracketed pointwise."""

    def __init__(self, engines, weights, spec, direction, thr, relative, relative_to, model):
        self.engines, self.weights, self.spec, self.direction = engines, weights, spec, direction
        self.thr, self.relative = thr, relative
        unpert = sum(weights[n] * float(model.e0[n]) for n in engines)
        self.offset = unpert if relative_to == "shift" else 0.0
        w = np.array([weights[n] for n in engines])
        v_big = _v_bound(engines)
        self.slope = float(np.sum(np.abs(w))) * v_big  # |d(exact value)/dλ| ≤ Σ|w| ‖V‖ (Weyl)
        k = int(spec)
        coef = sum(weights[n] * eng.trial.energy_coefficients[: k + 1] for n, eng in engines.items())
        self.pert_coef = np.asarray(coef, dtype=float) * float(direction) ** np.arange(k + 1)

    def brackets(self, s: np.ndarray, *, krylov: bool = False, allow_estimate: bool = True):
        """(error upper, error lower, reference lower, reference upper, identified, rigorous, temple ok) at |λ| = s."""
        lam = self.direction * np.asarray(s, dtype=float)
        lo = np.zeros(lam.shape)
        hi = np.zeros(lam.shape)
        ident = np.ones(lam.shape, dtype=bool)
        rig = np.ones(lam.shape, dtype=bool)
        useful = np.ones(lam.shape, dtype=bool)
        for n, eng in self.engines.items():
            w = self.weights[n]
            pw = _pointwise(eng, lam, krylov=krylov, allow_estimate=allow_estimate)
            lo += np.where(w >= 0, w * pw.lo, w * pw.hi)
            hi += np.where(w >= 0, w * pw.hi, w * pw.lo)
            ident &= pw.identified
            rig &= pw.rigorous
            useful &= (pw.alpha < pw.rho) & (pw.rho < pw.beta)
        pert = np.polynomial.polynomial.polyval(np.abs(lam), self.pert_coef)
        el, eh, _, _ = error_brackets(lo, hi, pert, lo - self.offset, hi - self.offset)
        ref_lo, ref_hi = lo - self.offset, hi - self.offset
        contains_zero = (ref_lo <= 0) & (ref_hi >= 0)
        ref_min = np.where(contains_zero, 0.0, np.minimum(np.abs(ref_lo), np.abs(ref_hi)))
        ref_max = np.maximum(np.abs(ref_lo), np.abs(ref_hi))
        return eh, el, ref_min, ref_max, ident, rig, useful

    def fails(self, s: float, *, krylov: bool) -> tuple[bool, bool, bool]:
        """(certified to fail at s, rigorously, Kato–Temple still applies)."""
        eh, el, _, ref_max, ident, rig, useful = self.brackets(np.array([s]), krylov=krylov)
        err = el[0] / ref_max[0] if self.relative and ref_max[0] > 0 else (np.inf if self.relative else el[0])
        return bool(ident[0] and err > self.thr), bool(rig[0]), bool(useful[0] and ident[0])

    def pert_slope(self, b: np.ndarray) -> np.ndarray:
        """Bound on |dE_k/dλ| for |λ| ≤ b (shape of ``b``)."""
        j = np.arange(1, self.pert_coef.size)
        return np.polynomial.polynomial.polyval(np.asarray(b, dtype=float), np.concatenate([j * np.abs(self.pert_coef[1:]), [0.0]]))


def _find_fail(target: _Target, s_start: float, s_max: float, xrtol: float, krylov: bool) -> tuple[float, bool]:
    """Smallest coupling (to ``xrtol``) found above ``s_start`` where failure is certified; NaN if none."""
    s_prev = s = s_start
    while s < s_max:
        s = min(s * 1.05, s_max)
        fail, rig, useful = target.fails(s, krylov=krylov)
        if fail:
            lo, hi, hi_rig = s_prev, s, rig
            while hi - lo > xrtol * lo:
                mid = 0.5 * (lo + hi)
                f2, r2, _ = target.fails(mid, krylov=krylov)
                if f2:
                    hi, hi_rig = mid, r2
                else:
                    lo = mid
            return hi, hi_rig
        if not useful:
            return np.nan, False
        s_prev = s
    return np.nan, False


def _extend(target: _Target, start: float, end: float, *, allow_estimate: bool, rounds: int = 48) -> float:
    """Push a certified coupling from ``start`` towards ``end`` with pointwise brackets.

    Between two probed couplings a and b the error can exceed its brackets at
    the ends by at most (b − a)/2 × (|dE_k/dλ| + Σ|w| ‖V‖) (Weyl: exact levels
    move no faster than ‖V‖), and the reference can shrink likewise; a cell is
    certified when that worst case still meets the tolerance.  Cells are
    halved, left to right, until the first one that cannot be certified.
    """
    if end <= start:
        return start
    pts = np.linspace(start, end, 65)
    cache: dict[float, tuple] = {}

    def probe(xs: np.ndarray) -> None:
        new = np.array([x for x in xs if float(x) not in cache])
        if new.size:
            eh, _, rmin, _, ident, rig, _ = target.brackets(new, allow_estimate=allow_estimate)
            ok = ident & (rig if not allow_estimate else True)
            for x, e_, r_, c_ in zip(new, eh, rmin, ok):
                cache[float(x)] = (float(e_), float(r_), float(c_))

    probe(pts)
    cert_to = start
    for _ in range(rounds):
        xs = np.array(sorted(cache))
        vals = np.array([cache[float(x)] for x in xs])
        err, ref, ok = vals[:, 0], vals[:, 1], vals[:, 2].astype(bool)
        a, b = xs[:-1], xs[1:]
        worst = 0.5 * (err[:-1] + err[1:] + (b - a) * (target.pert_slope(b) + target.slope))
        if target.relative:
            good = worst <= target.thr * 0.5 * (ref[:-1] + ref[1:] - (b - a) * target.slope)
            bad = err > target.thr * ref
        else:
            good = worst <= target.thr
            bad = err > target.thr
        good &= ok[:-1] & ok[1:]
        hard = ~(ok[:-1] & ok[1:]) | (~good & (bad[:-1] | (b - a < 1e-9 * end)))
        soft = ~good & bad[1:]  # worth one more split, nothing beyond it
        limit = min(int(np.argmax(hard)) if hard.any() else good.size, int(np.argmax(soft)) + 1 if soft.any() else good.size)
        run = int(np.argmin(good[:limit])) if not good[:limit].all() else limit
        cert_to = float(b[run - 1]) if run > 0 else start
        todo = np.flatnonzero(~good[:limit])[:64]
        if todo.size == 0:
            return cert_to
        probe(0.5 * (a[todo] + b[todo]))
    return cert_to
