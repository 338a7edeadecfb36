"""Perturbative vs exact, side by side: errors per order and validity boundaries.

:func:`compare` evaluates every target (level or derived quantity) × order ×
coupling against exact levels.  :func:`validity_boundary` finds the smallest
|λ| along a direction at which one order stops meeting a tolerance, by
bracketing and Brent's method on the error, with the first bracket placed by
the size of the next series term.

Both answer the question asked: the treatment of each level is decided once,
in :mod:`ptcheck.treatment` (default ``"standard"``: the non-degenerate
Rayleigh–Schrödinger series, or degenerate perturbation theory for a level in
an exactly degenerate group), and recorded per target with its reason.  A
better alternative (a near-degenerate block when a partner limits the series)
is reported beside the answer as a :class:`~ptcheck.treatment.Suggestion`,
never in its place.  Which exact state carries a level's label is decided in
:mod:`ptcheck.pairing`.  Errors are computed from shifts ``E(λ) − E(0)``, so
they do not change when a constant is added to ``H0``.
"""

from __future__ import annotations

import contextlib
import html
import math
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy.sparse.linalg import ArpackError, ArpackNoConvergence

from . import _validation as val
from . import pairing
from ._roots import brentq
from .approximants import OrderSpec, Pade, order_name, parse_order, parse_orders, required_order
from .bounds import bounds_options, certify, error_brackets, level_brackets
from .degeneracy import DEFAULT_MIXING_THRESHOLD
from .errors import AccuracyWarning
from .exact import ExactSolver
from .model import Model
from .quantities import Quantity
from .treatment import (
    DEFAULT_TREATMENT,
    EXACT_IN_SECTOR,
    NEAR_DEGENERATE,
    NONDEGENERATE,
    CheckSettings,
    PadeUnavailableError,
    Suggestion,
    expansion_map,
    limiting_partner,
    require_model,
    smallest_block,
    whole_sector,
)

__all__ = [
    "ComparisonResult",
    "ValidityBoundary",
    "compare",
    "validity_boundary",
    "TRUNCATION_NOTE",
    "MAX_COUPLING_ENERGY",
    "BOUNDARY_STATUSES",
    "DECISIONS",
    "REFERENCES",
]

TRUNCATION_NOTE = (
    "Exact values are exact for the matrices given. If the basis is a truncation of a larger "
    "(or infinite) one, check that the levels you use are converged in the truncation before "
    "relying on these numbers (e.g. ptcheck.models.truncation_check)."
)

#: Largest |λ| ‖V‖ (energy units, relative to the spectral scale of H0) accepted: beyond it
#: squares of matrix entries overflow float64 inside the eigensolvers.
MAX_COUPLING_ENERGY = 1e150

#: Status values of :class:`ValidityBoundary` ("certified" and "not_certified" come from
#: ``reference="bounds"`` only).
BOUNDARY_STATUSES = (
    "found", "not_reached", "fails_at_zero", "ill_defined", "exact_in_sector", "certified", "not_certified",
)

#: Where the reference values of a check come from: exact solves, certified bounds (no exact
#: solve: :mod:`ptcheck.bounds`), or both side by side (:func:`compare` only).
REFERENCES = ("exact", "bounds", "both")

#: What :meth:`ValidityBoundary.decision_at` can say about one coupling.
DECISIONS = ("valid", "not valid", "undecided")

#: An error below this many ulps of the energy scale (span of E0 + |λ| ‖V‖, per unit weight of the target's
#: levels) is round-off of the shifts and counts as zero in a validity boundary search.
_NOISE_ULPS = 16
# relative errors are judged from exact shifts only where round-off resolves them to 1e-4 of the shift
_RESOLVE_RELATIVE = 1e4

#: Error assigned where the pairing of perturbative and exact states is ambiguous
#: (the order is counted as failing there; finite so that Brent's method stays defined).
_AMBIGUOUS_ERROR = 1e300


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
    presents: str  # "shift" or "value"


def _resolve_targets(model: Model, levels: Any) -> list[_Target]:
    out = []
    for key in val.as_sequence(levels):
        if isinstance(key, Quantity):
            w = key.resolve(model)
            out.append(_Target(key.name, w, False, key.relative_to, "shift" if key.relative_to == "shift" else "value"))
        else:
            n = model.level_index(key)
            out.append(_Target(model.label(n), {n: 1.0}, True, "shift", "value"))
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


def _unperturbed(model: Model, t: _Target) -> float:
    return float(sum(w * model.e0[n] for n, w in t.weights.items()))


def _cheap_norm_bound(model: Model) -> float:
    """An upper bound on ‖V‖ without an eigensolve: the largest absolute row sum (energy units)."""
    v = model.v
    rows = abs(v).sum(axis=1)
    return float(np.max(np.asarray(rows).ravel(), initial=0.0))


def _check_coupling_range(model: Model, largest: float, name: str = "coupling", *, norm: float | None = None) -> None:
    """Refuse couplings for which H(λ) overflows float64 arithmetic in the eigensolvers.

    ``norm``: a bound on ‖V‖ to use instead of ``model.norm_v`` (which costs an
    eigensolve on a large sparse model).
    """
    norm_v = model.norm_v if norm is None else norm
    scale = float(max(np.max(np.abs(model.e0)), np.ptp(model.e0), 1.0))
    size = abs(largest) * norm_v
    if not np.isfinite(size) or size > MAX_COUPLING_ENERGY * scale:
        limit = MAX_COUPLING_ENERGY * scale / norm_v if norm_v > 0 else math.inf
        raise ValueError(
            f"{name} {largest:g} is too large: |λ| ‖V‖ = {size:.3g} overflows float64 arithmetic in the exact "
            f"eigensolvers; use |λ| <= {limit:.3g} for this model"
        )


@contextlib.contextmanager
def _solver_guard(what: str) -> Iterator[None]:
    """Turn an eigensolver failure into a clear ValueError."""
    try:
        yield
    except (np.linalg.LinAlgError, ArpackError, ArpackNoConvergence) as exc:
        raise ValueError(f"the exact eigensolver failed {what}: {exc}") from None


def _combined_treatment(exps: dict, t: _Target) -> str:
    kinds = list(dict.fromkeys(exps[n].treatment for n in t.weights))
    return kinds[0] if len(kinds) == 1 else "mixed"


def _combined_reason(model: Model, exps: dict, t: _Target) -> str:
    if t.is_level:
        (n,) = t.weights
        return exps[n].reason
    return "; ".join(f"{model.label(n)}: {exps[n].reason}" for n in t.weights)


def _exact_in_sector(exps: dict, t: _Target) -> bool:
    return all(exps[n].exact_in_sector for n in t.weights)


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
        Exact value (energy units); NaN where the pairing is ambiguous.
    perturbative : (T, O, C) ndarray
        Perturbative value for each order spec; NaN where an order spec is not
        available for the target's treatment (see ``notes``).
    abs_error : (T, O, C) ndarray
        ``|perturbative - exact|`` (energy units), computed from the shifts
        ``E(λ) − E(0)`` of both sides.
    rel_error : (T, O, C) ndarray
        ``abs_error`` divided by the exact shift ``|exact - unperturbed|`` for
        levels and for quantities with ``relative_to="shift"``, by ``|exact|``
        for quantities with ``relative_to="value"``; NaN where that reference
        is ~0 (a relative error is meaningless there).
    infidelity : (T, O, C) ndarray
        ``1 - |⟨ψ_pt|ψ_exact⟩|²`` for level targets and truncation orders;
        NaN for Padé approximants and derived quantities.
    treatments : tuple of str
        Treatment used for each target: ``"nondegenerate"``, ``"degenerate"``,
        ``"near-degenerate block"``, or ``"mixed"`` for a quantity whose levels
        use several.
    avoided_crossings : tuple
        Avoided crossings met by the tracked exact levels.
    backend : str
        Exact backend used.
    exact_solves : int
        Number of exact diagonalisations.
    notes : tuple of str
        Cautions in plain words (basis truncation, treatments, pairing, ...).
    reasons : tuple of str
        Why each target got its treatment (length T).
    presents : tuple of str
        ``"shift"`` when the target presents its shift ``E(λ) − E(0)``
        (quantities with ``relative_to="shift"``), else ``"value"``.
    exact_presented : (T, C) ndarray
        The exact shift or value, as ``presents`` says (energy units).
    perturbative_presented : (T, O, C) ndarray
        The perturbative shift or value, as ``presents`` says.
    ambiguous : (T, C) bool ndarray
        The pairing of perturbative and exact states had no clear winner for
        some level of the target (values there are NaN).
    exact_in_sector : tuple of bool
        Every level of the target is treated in a block that is a whole
        invariant sector: its "orders" are exact diagonalisation.
    suggestions : tuple of Suggestion
        Near-degenerate blocks that would fix a partner limiting a target's
        series at the coupling of interest (beside the answer, not in it).
    choices : tuple of TreatmentChoice
        The treatment of every level used (including the other members of
        their groups), with its reason.
    coupling : float
        Coupling of interest |λ| used for near-degeneracy judgements.
    reference : str
        ``"exact"`` (exact solves), ``"bounds"`` (certified brackets only, no
        exact solve: ``exact``, ``abs_error``, ``rel_error`` and ``infidelity``
        are NaN) or ``"both"``.
    exact_lower, exact_upper : (T, C) ndarray or None
        Certified bracket of the exact value (energy units; the value, also
        for a target that presents its shift); None with ``reference="exact"``;
        NaN where a target could not be bracketed (``notes`` say why).
    error_lower, error_upper : (T, O, C) ndarray or None
        Bracket of ``abs_error`` from those brackets (energy units).
    rel_error_lower, rel_error_upper : (T, O, C) ndarray or None
        Bracket of ``rel_error`` (upper end ``inf`` where the reference's
        bracket contains 0).
    bounds_rigorous : (T, C) bool ndarray or None
        The bracket rests on rigorous gaps and identifies the labelled level;
        False where it is conditional on an estimated gap (or not shown to be
        about the labelled level).
    bounds_gap_kind : (T, C) str ndarray or None
        Gap source of each bracket (:mod:`ptcheck.bounds`; a quantity joins its
        levels' sources with "+").
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
    reasons: tuple = field(default=())
    presents: tuple = field(default=())
    exact_presented: np.ndarray | None = None
    perturbative_presented: np.ndarray | None = None
    ambiguous: np.ndarray | None = None
    exact_in_sector: tuple = field(default=())
    suggestions: tuple = field(default=())
    choices: tuple = field(default=())
    coupling: float = math.nan
    reference: str = "exact"
    exact_lower: np.ndarray | None = None
    exact_upper: np.ndarray | None = None
    error_lower: np.ndarray | None = None
    error_upper: np.ndarray | None = None
    rel_error_lower: np.ndarray | None = None
    rel_error_upper: np.ndarray | None = None
    bounds_rigorous: np.ndarray | None = None
    bounds_gap_kind: np.ndarray | None = None

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

    def error_bracket(self, target: Any, order: Any, *, relative: bool = False) -> tuple[np.ndarray, np.ndarray]:
        """Certified (lower, upper) bracket of the error of one target at one order, each shape (C,).

        Raises ValueError for a comparison made with ``reference="exact"``.
        """
        if self.error_lower is None:
            raise ValueError("this comparison has no bounds; call compare(..., reference='bounds' or 'both')")
        ti, oi = self._index(target, order)
        if relative:
            return self.rel_error_lower[ti, oi], self.rel_error_upper[ti, oi]
        return self.error_lower[ti, oi], self.error_upper[ti, oi]

    def __repr__(self) -> str:
        return (
            f"ComparisonResult(model={self.model_name!r}, targets={list(self.targets)}, "
            f"orders={list(self.order_names)}, couplings={self.couplings.size} in "
            f"[{self.couplings.min():.3g}, {self.couplings.max():.3g}], treatments={list(self.treatments)}, "
            f"backend={self.backend!r})"
        )

    def to_dict(self) -> dict:
        def nn(a: np.ndarray) -> list:
            return np.where(np.isnan(a), None, a).tolist()

        return {
            "model": self.model_name,
            "n": self.n,
            "targets": list(self.targets),
            "levels": [lv if isinstance(lv, int) else str(lv) for lv in self.levels],
            "orders": list(self.order_names),
            "couplings": self.couplings.tolist(),
            "unperturbed": self.unperturbed.tolist(),
            "exact": nn(self.exact),
            "perturbative": nn(self.perturbative),
            "abs_error": nn(self.abs_error),
            "rel_error": nn(self.rel_error),
            "infidelity": nn(self.infidelity),
            "treatments": list(self.treatments),
            "reasons": list(self.reasons),
            "presents": list(self.presents),
            "exact_presented": None if self.exact_presented is None else nn(self.exact_presented),
            "perturbative_presented": None if self.perturbative_presented is None else nn(self.perturbative_presented),
            "ambiguous": None if self.ambiguous is None else self.ambiguous.tolist(),
            "exact_in_sector": list(self.exact_in_sector),
            "suggestions": [s.to_dict() for s in self.suggestions],
            "choices": [c.to_dict() for c in self.choices],
            "coupling": self.coupling if math.isfinite(self.coupling) else str(self.coupling),
            "avoided_crossings": [a.to_dict() for a in self.avoided_crossings],
            "backend": self.backend,
            "exact_solves": self.exact_solves,
            "notes": list(self.notes),
            "reference": self.reference,
            "exact_lower": None if self.exact_lower is None else nn(self.exact_lower),
            "exact_upper": None if self.exact_upper is None else nn(self.exact_upper),
            "error_lower": None if self.error_lower is None else nn(self.error_lower),
            "error_upper": None if self.error_upper is None else nn(self.error_upper),
            "rel_error_lower": None if self.rel_error_lower is None else nn(self.rel_error_lower),
            "rel_error_upper": None if self.rel_error_upper is None else nn(self.rel_error_upper),
            "bounds_rigorous": None if self.bounds_rigorous is None else self.bounds_rigorous.tolist(),
            "bounds_gap_kind": None if self.bounds_gap_kind is None else self.bounds_gap_kind.tolist(),
        }

    def to_rows(self) -> list[dict]:
        """Long-format table: one row per target × order × coupling (for CSV).

        ``exact_presented`` / ``perturbative_presented`` hold the shift for a
        target that presents its shift (``presents`` column), else the value;
        ``unperturbed`` is the value at λ = 0 beside them.
        """
        rows = []
        for ti, t in enumerate(self.targets):
            pres = self.presents[ti] if self.presents else "value"
            for oi, o in enumerate(self.order_names):
                for ci, lam in enumerate(self.couplings):
                    rows.append(
                        {
                            "target": t,
                            "order": o,
                            "treatment": self.treatments[ti],
                            "coupling": float(lam),
                            "presents": pres,
                            "unperturbed": float(self.unperturbed[ti]),
                            "exact_presented": float(self.exact_presented[ti, ci]) if self.exact_presented is not None else float(self.exact[ti, ci]),
                            "perturbative_presented": float(self.perturbative_presented[ti, oi, ci]) if self.perturbative_presented is not None else float(self.perturbative[ti, oi, ci]),
                            "exact": float(self.exact[ti, ci]),
                            "perturbative": float(self.perturbative[ti, oi, ci]),
                            "abs_error": float(self.abs_error[ti, oi, ci]),
                            "rel_error": float(self.rel_error[ti, oi, ci]),
                            "infidelity": float(self.infidelity[ti, oi, ci]),
                            "ambiguous": bool(self.ambiguous[ti, ci]) if self.ambiguous is not None else False,
                        }
                    )
                    if self.error_lower is not None:
                        rows[-1].update({
                            "exact_lower": float(self.exact_lower[ti, ci]),
                            "exact_upper": float(self.exact_upper[ti, ci]),
                            "error_lower": float(self.error_lower[ti, oi, ci]),
                            "error_upper": float(self.error_upper[ti, oi, ci]),
                            "rel_error_lower": float(self.rel_error_lower[ti, oi, ci]),
                            "rel_error_upper": float(self.rel_error_upper[ti, oi, ci]),
                            "bounds_rigorous": bool(self.bounds_rigorous[ti, ci]),
                            "bounds_gap_kind": str(self.bounds_gap_kind[ti, ci]),
                        })
        return rows

    def _repr_html_(self) -> str:
        head = "".join(f"<th>{html.escape(o)}</th>" for o in self.order_names)
        body = ""
        for ti, t in enumerate(self.targets):
            cells = "".join(
                f"<td>{np.nanmax(self.abs_error[ti, oi]) if np.any(np.isfinite(self.abs_error[ti, oi])) else float('nan'):.3g}</td>"
                for oi in range(len(self.orders))
            )
            body += f"<tr><td>{html.escape(t)} ({html.escape(self.treatments[ti])})</td>{cells}</tr>"
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        sugg = "".join(f"<li>{html.escape(s.text)}</li>" for s in self.suggestions)
        return (
            f"<b>Comparison</b> for model {html.escape(self.model_name)} (N = {self.n}), "
            f"{self.couplings.size} couplings in [{self.couplings.min():.3g}, {self.couplings.max():.3g}]"
            f"<table><tr><th>max |error|</th>{head}</tr>{body}</table>"
            + (f"<p>Suggestions:</p><ul>{sugg}</ul>" if sugg else "")
            + f"<ul>{notes}</ul>"
        )


def compare(
    model: Model,
    levels: Any,
    orders: Any,
    couplings: Any,
    *,
    treatment: str = DEFAULT_TREATMENT,
    backend: str = "auto",
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    method: str = "schrieffer-wolff",
    coupling: float | None = None,
    reference: str = "exact",
    gap: str | float = "auto",
    trial_order: int | None = None,
) -> ComparisonResult:
    """Compare perturbative and exact values of levels or quantities.

    Parameters
    ----------
    model : Model
    levels : level key, Quantity, or list of them
        Energy ranks (int), labels (e.g. ``(1, 0)``) or :class:`Quantity` objects.
        A tuple is one label; pass several levels as a list.
    orders : int, Pade, str, or list of them
        Order specs (see :mod:`ptcheck.approximants`).  A Padé spec is built from
        the shift series; it is not available for a level treated with an
        effective Hamiltonian (those entries are NaN, with a note).
    couplings : float or (C,) array_like
        Couplings λ at which to compare.
    treatment : {"standard", "nondegenerate", "block", "auto"}, default "standard"
        See :mod:`ptcheck.treatment`: "standard" is the textbook series
        (degenerate perturbation theory inside exactly degenerate groups);
        "block"/"auto" ask for near-degenerate blocks judged at ``coupling``.
    backend : {"auto", "dense", "sparse", "qutip"}
        Exact solver.
    threshold : float
        Mixing-ratio threshold (near-degenerate blocks, notes, suggestions).
    method : {"schrieffer-wolff", "brillouin-wigner"}
        Method of near-degenerate blocks.
    coupling : float, optional
        Coupling of interest (default: the largest |λ| compared).
    reference : {"exact", "bounds", "both"}, default "exact"
        Exact solves; certified brackets of the exact values instead (no exact
        solve, for bases too large to diagonalise: :mod:`ptcheck.bounds`); or
        both side by side.  The brackets are the fields ``exact_lower`` ...
        ``rel_error_upper``.  A level in an exactly degenerate group is
        bracketed through its group (conditional, never rigorous: see
        :func:`ptcheck.error_bounds`).  Where a level cannot be bracketed,
        ``"bounds"`` raises ``ValueError``; ``"both"`` leaves NaN brackets and a
        note.
    gap : {"auto", "weyl", "neighbours", "estimate"} or float, default "auto"
        Gap source of the brackets (:mod:`ptcheck.bounds`).
    trial_order : int, optional
        Order of the trial states of the brackets (default ``max(12, k + 10)``
        for the highest truncation order k compared).

    Returns
    -------
    ComparisonResult

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model, compare
    >>> m = Model(np.diag([-0.5, 0.5]), [[0, 0.2], [0.2, 0]])
    >>> r = compare(m, [0], [2, 4], [0.1, 0.5])
    >>> r.abs_error.shape, r.treatments
    ((1, 2, 2), ('nondegenerate',))
    """
    require_model(model, "compare")
    targets = _resolve_targets(model, levels)
    specs = parse_orders(orders)
    lam = val.as_couplings(couplings)
    reference = val.check_choice(reference, "reference", REFERENCES)
    opts = None
    if reference == "exact":
        if not (isinstance(gap, str) and gap == "auto") or trial_order is not None:
            raise ValueError(
                f"gap and trial_order shape certified bounds: give them with reference='bounds' or 'both'; got "
                f"gap={gap!r}, trial_order={trial_order!r} with reference='exact'"
            )
    else:
        top = max((sp_ for sp_ in specs if not isinstance(sp_, Pade)), default=0)
        opts = bounds_options(gap, trial_order, top if trial_order is None else 0)  # brackets need no K > k
    norm = _cheap_norm_bound(model) if reference == "bounds" else None
    _check_coupling_range(model, float(np.max(np.abs(lam))), "couplings reach", norm=norm)
    if coupling is not None:
        coupling = val.as_coupling(coupling)
        _check_coupling_range(model, coupling, norm=norm)
    settings = CheckSettings(
        treatment=treatment, backend=backend, threshold=threshold, method=method,
        coupling=float(np.max(np.abs(lam))) if coupling is None else coupling,
    )
    return _compare(model, levels, targets, specs, lam, settings, reference=reference, opts=opts)


@dataclass(frozen=True)
class _Brackets:
    """Certified brackets of every target (value, errors), shapes as in :class:`ComparisonResult`."""

    exact_lower: np.ndarray
    exact_upper: np.ndarray
    error_lower: np.ndarray
    error_upper: np.ndarray
    rel_error_lower: np.ndarray
    rel_error_upper: np.ndarray
    rigorous: np.ndarray
    gap_kind: np.ndarray
    notes: tuple


def _target_brackets(
    model: Model, targets: list[_Target], lam: np.ndarray, pert_value: np.ndarray, opts: Any, *, strict: bool,
) -> _Brackets:
    """Brackets of each target's exact value and of its errors (interval arithmetic over its levels).

    ``strict``: a level that cannot be bracketed raises; otherwise its targets
    get NaN brackets and a note.
    """
    n_t, n_o, n_c = pert_value.shape
    lo = np.full((n_t, n_c), np.nan)
    hi = np.full((n_t, n_c), np.nan)
    rig = np.zeros((n_t, n_c), dtype=bool)
    kind = np.full((n_t, n_c), "", dtype=object)
    notes: list[str] = []
    per_level: dict[int, Any] = {}
    for n in _needed_levels(targets):
        try:
            got, level_notes, _ = level_brackets(model, [n], lam, opts)
        except (ValueError, FloatingPointError) as exc:  # e.g. a group whose expansion overflows
            if strict:
                raise
            notes.append(f"No certified bracket for level {model.label(n)}: {exc}")
            continue
        per_level.update(got)
        notes.extend(level_notes)
    for ti, t in enumerate(targets):
        if not all(n in per_level for n in t.weights):
            continue
        parts = [(w, per_level[n]) for n, w in t.weights.items()]
        lo[ti] = sum(np.where(w >= 0, w * b.lower, w * b.upper) for w, b in parts)
        hi[ti] = sum(np.where(w >= 0, w * b.upper, w * b.lower) for w, b in parts)
        rig[ti] = np.all([b.rigorous for _, b in parts], axis=0)
        kind[ti] = ["+".join(dict.fromkeys(str(b.gap_kind[i]) for _, b in parts)) for i in range(n_c)]
    offset = np.array([_unperturbed(model, t) if t.relative_to == "shift" else 0.0 for t in targets])
    el, eh, rl, rh = error_brackets(
        lo[:, None, :], hi[:, None, :], pert_value, (lo - offset[:, None])[:, None, :], (hi - offset[:, None])[:, None, :],
    )
    nan_pert = np.isnan(pert_value) | np.isnan(lo)[:, None, :]
    el, eh, rl, rh = (np.where(nan_pert, np.nan, a) for a in (el, eh, rl, rh))
    return _Brackets(lo, hi, el, eh, rl, rh, rig, kind.astype(str), tuple(notes))


def _compare(
    model: Model, keys: Any, targets: list[_Target], specs: tuple, lam: np.ndarray, s: CheckSettings, *,
    reference: str = "exact", opts: Any = None,
) -> ComparisonResult:
    max_order = max(required_order(sp_) for sp_ in specs)
    needed = _needed_levels(targets)
    exps = expansion_map(model, needed, max_order, settings=s)
    need_states = any(t.is_level for t in targets) and any(not isinstance(sp_, Pade) for sp_ in specs)
    unperturbed = np.array([_unperturbed(model, t) for t in targets])
    notes = [TRUNCATION_NOTE]

    if reference == "bounds":
        need_states = False
        nan_tc = np.full((len(targets), lam.size), np.nan)
        ex_shift, ex_energy = nan_tc, nan_tc.copy()
        amb = np.zeros((len(targets), lam.size), dtype=bool)
        avoided, backend_used, solves = (), "none (certified bounds)", 0
        notes = [
            "No exact solve: the exact values are bracketed by certified bounds (Kato–Temple brackets from "
            "perturbative trial states); exact, abs_error and rel_error are NaN, see exact_lower ... rel_error_upper."
        ]
    else:
        solver = ExactSolver(model, backend=s.backend, n_levels_hint=len(exps))
        with _solver_guard(f"on the couplings compared (|λ| up to {float(np.max(np.abs(lam))):g})"):
            paired = pairing.sweep(solver, exps, needed, lam, keep_states=need_states)
        row = {n: paired.row(n) for n in needed}
        ex_shift = _combine(targets, {n: paired.shifts[row[n]] for n in needed})  # (T, C)
        ex_energy = _combine(targets, {n: paired.energies[row[n]] for n in needed})
        amb = np.stack([np.any([paired.ambiguous[row[n]] for n in t.weights], axis=0) for t in targets])
        avoided, backend_used, solves = tuple(paired.avoided_crossings), paired.backend, paired.solves
        notes.extend(paired.notes)
    pert_shift = np.full((len(targets), len(specs), lam.size), np.nan)
    infid = np.full_like(pert_shift, np.nan)
    for oi, spec in enumerate(specs):
        per_level: dict[int, np.ndarray] = {}
        for n in needed:
            try:
                per_level[n] = np.asarray(exps[n].shift(lam, spec), dtype=float)
            except PadeUnavailableError as exc:
                per_level[n] = np.full(lam.size, np.nan)
                notes.append(f"{exc}. The other orders are compared; this one is left undefined (NaN).")
        pert_shift[:, oi, :] = _combine(targets, per_level)
        if need_states and not isinstance(spec, Pade):
            for ti, t in enumerate(targets):
                if not t.is_level:
                    continue
                (n,) = t.weights
                psi_pt = np.asarray(exps[n].state(lam, spec)).reshape(lam.size, model.n)
                psi_ex = paired.states[row[n]]
                ov = np.abs(np.einsum("cn,cn->c", psi_pt.conj(), psi_ex)) ** 2
                infid[ti, oi] = np.where(amb[ti], np.nan, np.clip(1.0 - ov, 0.0, 1.0))
    abs_err = np.abs(pert_shift - ex_shift[:, None, :])
    with np.errstate(invalid="ignore"):
        perturbative = unperturbed[:, None, None] + pert_shift
    ref = np.stack([np.abs(ex_shift[i]) if t.relative_to == "shift" else np.abs(ex_energy[i]) for i, t in enumerate(targets)])
    norm_v = _cheap_norm_bound(model) if reference == "bounds" else model.norm_v
    scale = float(max(np.ptp(model.e0), norm_v * float(np.max(np.abs(lam))), np.finfo(float).tiny))
    tiny = 1e-12 * scale
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(ref[:, None, :] > tiny, abs_err / ref[:, None, :], np.nan)
    if np.any(np.isnan(rel) & np.isfinite(abs_err)):
        notes.append(
            "Relative errors are undefined (NaN) where the exact reference (shift or value) is ~0; use absolute errors there."
        )
    presents = tuple(t.presents for t in targets)
    ex_pres = np.stack([ex_shift[i] if p == "shift" else ex_energy[i] for i, p in enumerate(presents)])
    pert_pres = np.stack([pert_shift[i] if p == "shift" else perturbative[i] for i, p in enumerate(presents)])
    in_sector = tuple(_exact_in_sector(exps, t) for t in targets)
    br = None
    if reference != "exact":
        br = _target_brackets(model, targets, lam, perturbative, opts, strict=reference == "bounds")
        notes.extend(br.notes)
    notes.extend(_treatment_notes(model, exps, needed, targets, s))
    suggestions = tuple(_suggestions(model, targets, exps, s))
    for sg in suggestions:
        notes.append(sg.text)
    return ComparisonResult(
        model_name=model.name,
        n=model.n,
        targets=tuple(t.name for t in targets),
        levels=tuple(next(iter(t.weights)) if t.is_level else _orig_quantity(keys, t.name) for t in targets),
        orders=specs,
        couplings=_ro(lam),
        unperturbed=_ro(unperturbed),
        exact=_ro(ex_energy),
        perturbative=_ro(perturbative),
        abs_error=_ro(abs_err),
        rel_error=_ro(rel),
        infidelity=_ro(infid),
        treatments=tuple(_combined_treatment(exps, t) for t in targets),
        avoided_crossings=avoided,
        backend=backend_used,
        exact_solves=solves,
        notes=tuple(dict.fromkeys(notes)),
        reasons=tuple(_combined_reason(model, exps, t) for t in targets),
        presents=presents,
        exact_presented=_ro(ex_pres),
        perturbative_presented=_ro(pert_pres),
        ambiguous=_ro(amb),
        exact_in_sector=in_sector,
        suggestions=suggestions,
        choices=tuple(e.choice for e in exps.values()),
        coupling=float(s.coupling) if s.coupling is not None else math.nan,
        reference=reference,
        exact_lower=None if br is None else _ro(br.exact_lower),
        exact_upper=None if br is None else _ro(br.exact_upper),
        error_lower=None if br is None else _ro(br.error_lower),
        error_upper=None if br is None else _ro(br.error_upper),
        rel_error_lower=None if br is None else _ro(br.rel_error_lower),
        rel_error_upper=None if br is None else _ro(br.rel_error_upper),
        bounds_rigorous=None if br is None else _ro(br.rigorous),
        bounds_gap_kind=None if br is None else _ro(br.gap_kind),
    )


def _treatment_notes(model: Model, exps: dict, needed: list[int], targets: list[_Target], s: CheckSettings) -> list[str]:
    notes = []
    lam = s.coupling or 0.0
    for n in needed:
        e = exps[n]
        if e.treatment == NONDEGENERATE and s.treatment in ("standard", "nondegenerate"):
            lim = limiting_partner(model, n, e.group, lam, s.threshold)
            if lim is not None:
                notes.append(
                    f"Level {model.label(n)} is near-degenerate with level {model.label(lim[0])} at |λ| = {lam:g} "
                    f"(mixing ratio {lim[1]:.3g}); the non-degenerate series is unreliable there."
                )
        elif e.treatment != NONDEGENERATE:
            notes.append(f"Level {model.label(n)}: {e.reason}.")
    for t in targets:
        if _exact_in_sector(exps, t):
            notes.append(
                f"{t.name} is {EXACT_IN_SECTOR}: every level it uses is treated in a block that is a whole invariant "
                "sector, so its 'orders' are exact diagonalisation, not perturbation theory; no order is judged for it."
            )
    return notes


def _suggestions(model: Model, targets: list[_Target], exps: dict, s: CheckSettings, *, at: float | None = None) -> list[Suggestion]:
    """A near-degenerate block beside each standard-treated level whose partner limits it at the coupling of interest."""
    lam = s.coupling if at is None else at
    if not lam or s.treatment in ("block", "auto"):
        return []
    out = []
    for t in targets:
        seen: set[frozenset] = set()
        for n in t.weights:
            e = exps[n]
            if e.treatment == NEAR_DEGENERATE:
                continue
            lim = limiting_partner(model, n, e.group, lam, s.threshold)
            if lim is None or frozenset((n, lim[0])) in seen:
                continue
            seen.add(frozenset((n, lim[0])))
            partner, ratio = lim
            blk = smallest_block(model, n, lam, s.threshold)
            if blk is None:
                continue
            exact = whole_sector(model, blk)
            out.append(_make_suggestion(model, t.name, n, partner, ratio, lam, s.threshold, blk, exact))
    return out


def _make_suggestion(model, target, n, partner, ratio, lam, threshold, blk, exact, boundary=math.nan, status="not computed") -> Suggestion:
    lam_thr = threshold * lam / ratio if ratio > 0 else math.inf
    names = ", ".join(model.label(i) for i in blk)
    text = (
        f"{target}: level {model.label(n)} is near-degenerate with level {model.label(partner)} (mixing ratio "
        f"{ratio:.3g} at |λ| = {lam:g}; it reaches {threshold:g} at |λ| ≈ {lam_thr:.4g}). The {NEAR_DEGENERATE} "
        f"({names}) would treat them together (treatment='block')"
    )
    if exact:
        text += f"; that block is a whole invariant sector, i.e. {EXACT_IN_SECTOR} (exact diagonalisation, not perturbation theory)"
    if status == "found":
        phys = model.physical_coupling(abs(boundary))
        text += f"; its validity boundary for the same order and tolerance is |λ| ≈ {abs(boundary):.4g}" + (f" ({phys})" if phys else "")
    elif status == "not_reached":
        text += "; it meets the same tolerance over the whole range searched"
    elif status not in ("not computed", "exact_in_sector"):
        text += f"; its validity boundary search ended with status {status!r}"
    text += ". A suggestion beside the answer: the answer itself judges the treatment asked for."
    return Suggestion(
        target=target, level=n, label=model.label(n), partner=partner, partner_label=model.label(partner),
        mixing_ratio=float(ratio), coupling=float(lam), threshold=float(threshold), threshold_coupling=float(lam_thr),
        block=tuple(blk), block_labels=tuple(model.label(i) for i in blk), exact_in_sector=bool(exact),
        boundary=float(boundary), boundary_status=status, text=text,
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
        Treatment used (``"nondegenerate"``, ``"degenerate"``,
        ``"near-degenerate block"`` or ``"mixed"``).
    tol, rtol : float or None
        The tolerance asked for (absolute, energy units; or relative).
    direction : int
        +1 or -1: the ray of couplings searched.
    coupling : float
        Signed coupling λ* (``direction x |λ*|``) at which the error first
        exceeds the tolerance; ``inf`` (signed) if it never does up to
        ``max_coupling``; NaN when the boundary is ill defined or the target is
        exact within its sector (see ``status``).  With
        ``reference="bounds"``: the **certified** coupling — for every |λ|
        below it the error is guaranteed to meet the tolerance (given the gap,
        see ``rigorous``), so the true λ* is at least this; 0 when nothing
        could be certified.
    status : str
        ``"found"``, ``"not_reached"`` (within ``max_coupling``), ``"fails_at_zero"``
        (the error exceeds the tolerance at any nonzero coupling),
        ``"ill_defined"`` (relative error where the exact shift passes through 0),
        or ``"exact_in_sector"`` (the treatment is exact diagonalisation of a
        whole invariant sector: no order is judged).  With
        ``reference="bounds"``: ``"certified"`` (``coupling`` > 0 is certified;
        ``certified_not`` says where failure is certified, NaN if nowhere),
        ``"not_certified"`` (no coupling could be certified), ``"not_reached"``
        (certified up to ``max_coupling``), ``"fails_at_zero"`` or
        ``"exact_in_sector"``.
    exact_solves : int
        Exact diagonalisations used (always 0 with ``reference="bounds"``).
    bracket : tuple of float
        Final bracket (|λ|) around the boundary.  With ``reference="bounds"``:
        (|coupling|, |certified_not|), the certified range in which the true
        boundary lies (NaN upper end where no failure is certified).
    error_at_boundary : float
        Error (absolute or relative, as asked) at the upper bracket end (NaN
        with ``reference="bounds"``).
    max_coupling : float
        Largest |λ| the search could reach.
    notes : tuple of str
    reason : str
        Why the target got its treatment.
    suggestions : tuple of Suggestion
        When a near-degenerate partner limits the series at the boundary (or
        at the coupling of interest): the partner, its mixing ratio, where it
        reaches the threshold, the smallest block that fixes it and that
        block's validity boundary.  Beside the answer, never in its place.
    reference : str
        ``"exact"`` (exact solves) or ``"bounds"`` (certified bounds, no exact
        solve: :mod:`ptcheck.bounds`).
    certified_not : float
        ``reference="bounds"``: signed coupling at which the error is certified
        to exceed the tolerance, so the order is certified NOT valid at every
        |λ| ≥ |certified_not| on this ray (the first crossing lies below it);
        NaN when no failure could be certified, and always NaN for
        ``reference="exact"``.
    rigorous : bool
        ``reference="bounds"``: ``coupling`` rests on rigorous gaps only
        (Weyl's inequality, the neighbours' own brackets); False when it is
        conditional on an estimated (Lanczos) or given gap.  Always False for
        ``reference="exact"`` (no certificate is claimed there).
    rigorous_coupling : float
        ``reference="bounds"``: signed coupling certified with rigorous gaps
        alone (|·| ≤ |coupling|); NaN for ``reference="exact"``.
    certified_not_rigorous : bool
        ``reference="bounds"``: the failure at ``certified_not`` rests on
        rigorous gaps only (False when it is conditional on an estimated or
        given gap, or when no failure is certified).
    gap_kind : str
        ``reference="bounds"``: the gap option used (``"auto"``, ``"weyl"``,
        ``"neighbours"``, ``"estimate"`` or ``"given (δ)"``); empty for
        ``reference="exact"``.
    mat_vecs : int
        ``reference="bounds"``: products of a vector with V or H spent.
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
    reason: str = ""
    suggestions: tuple = ()
    reference: str = "exact"
    certified_not: float = math.nan
    rigorous: bool = False
    rigorous_coupling: float = math.nan
    certified_not_rigorous: bool = False
    gap_kind: str = ""
    mat_vecs: int = 0

    @property
    def magnitude(self) -> float:
        """|λ*|."""
        return abs(self.coupling)

    def decision_at(self, coupling: float) -> str:
        """What this boundary decides at ``coupling``: one of :data:`DECISIONS`.

        ``"valid"`` exactly when :meth:`valid_at` is True.  With
        ``reference="exact"`` every other coupling is ``"not valid"``.  With
        ``reference="bounds"`` a coupling is ``"not valid"`` only where failure
        is certified (|λ| ≥ |certified_not|, or the order fails at any nonzero
        coupling) and ``"undecided"`` between the certified coupling and that
        (an exact check, a higher trial order or a better gap decides there).
        ``"exact_in_sector"``, ``"ill_defined"`` and an ``"error"`` status are
        ``"undecided"`` (no order is judged).
        """
        if self.valid_at(coupling):
            return "valid"
        if self.status in ("exact_in_sector", "ill_defined", "error"):
            return "undecided"
        if self.reference == "exact" or self.status == "fails_at_zero":
            return "not valid"
        if math.isfinite(self.certified_not) and abs(float(coupling)) >= abs(self.certified_not):
            return "not valid"
        return "undecided"

    def valid_at(self, coupling: float) -> bool:
        """Does this order meet the tolerance at ``coupling`` (same sign as ``direction``)?

        True exactly when |λ| lies below the first boundary (``"found"``) or
        within the range searched (``"not_reached"``); False otherwise, and
        always False for ``"exact_in_sector"``, ``"ill_defined"`` and
        ``"fails_at_zero"`` (except at λ = 0).
        """
        lam = abs(float(coupling))
        if self.status == "found":
            return lam < abs(self.coupling)
        if self.status == "not_reached":
            return lam <= self.max_coupling
        if self.status == "fails_at_zero":
            return lam == 0.0
        if self.status == "certified":
            return lam < abs(self.coupling)
        return False

    def __repr__(self) -> str:
        t = f"tol={self.tol:g}" if self.tol is not None else f"rtol={self.rtol:g}"
        if self.reference == "bounds":
            kind = "rigorous" if self.rigorous else "conditional"
            return (
                f"ValidityBoundary({self.target}, {order_name(self.order)}, {t}: certified to {self.coupling:.6g} "
                f"({kind}), certified not from {self.certified_not:.6g}, status={self.status!r}, "
                f"treatment={self.treatment!r}, exact_solves={self.exact_solves})"
            )
        return (
            f"ValidityBoundary({self.target}, {order_name(self.order)}, {t}: coupling={self.coupling:.6g}, "
            f"status={self.status!r}, treatment={self.treatment!r}, exact_solves={self.exact_solves})"
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
            "reason": self.reason,
            "tol": self.tol,
            "rtol": self.rtol,
            "direction": self.direction,
            "coupling": f(self.coupling),
            "status": self.status,
            "exact_solves": self.exact_solves,
            "bracket": [f(b) for b in self.bracket],
            "error_at_boundary": f(self.error_at_boundary),
            "max_coupling": f(self.max_coupling),
            "suggestions": [s.to_dict() for s in self.suggestions],
            "notes": list(self.notes),
            "reference": self.reference,
            "certified_not": f(self.certified_not),
            "rigorous": self.rigorous,
            "rigorous_coupling": f(self.rigorous_coupling),
            "certified_not_rigorous": self.certified_not_rigorous,
            "gap_kind": self.gap_kind,
            "mat_vecs": self.mat_vecs,
        }

    def _repr_html_(self) -> str:
        return (
            f"<code>{html.escape(repr(self))}</code>"
            + "".join(f"<br>{html.escape(n)}" for n in self.notes)
            + "".join(f"<br><i>Suggestion:</i> {html.escape(s.text)}" for s in self.suggestions)
        )


@dataclass(frozen=True)
class _Tolerance:
    value: float
    relative: bool


class _ErrorFunction:
    """Error of one target at one order spec along a ray, with exact solves counted."""

    def __init__(self, model: Model, target: _Target, exps: dict, spec: OrderSpec, solver: ExactSolver, direction: int, relative: bool):
        self.model, self.target, self.exps, self.spec = model, target, exps, spec
        self.solver, self.direction, self.relative = solver, direction, relative
        self.unperturbed = _unperturbed(model, target)
        self.levels = list(target.weights)
        self.seen: dict[float, tuple[float, float]] = {}  # s -> (error, reference)
        self.ambiguous: set[float] = set()
        # round-off of the offset-free shifts (exact and perturbative) of the target's levels, per unit of
        # energy scale: an error below it cannot be told from zero
        self._noise = _NOISE_ULPS * np.finfo(float).eps * sum(abs(w) for w in target.weights.values())
        self._span = float(np.ptp(model.e0_relative)) if model.n > 1 else 0.0
        self.top_order = min(int(e.order) for e in exps.values())  # highest order every expansion holds

    def noise(self, s: float) -> float:
        """Round-off floor of the target's absolute error at |λ| = s (energy units)."""
        return self._noise * (self._span + abs(s) * self.model.norm_v)

    def pert_shift(self, s: np.ndarray, spec: OrderSpec | None = None) -> np.ndarray:
        lam = self.direction * np.asarray(s, dtype=float)
        spec = self.spec if spec is None else spec
        return sum(w * np.asarray(self.exps[n].shift(lam, spec), dtype=float) for n, w in self.target.weights.items())

    def __call__(self, s: float) -> float:
        s = float(s)
        if s in self.seen:
            return self.seen[s][0]
        lam = self.direction * s
        with _solver_guard(f"at coupling {lam:g}"):
            shifts, amb = pairing.at(self.solver, self.exps, self.levels, lam)
        ex = sum(w * shifts[n] for n, w in self.target.weights.items())
        ref_val = ex if self.target.relative_to == "shift" else self.unperturbed + ex
        if any(amb.values()):
            self.ambiguous.add(s)
            self.seen[s] = (_AMBIGUOUS_ERROR, ref_val)
            return _AMBIGUOUS_ERROR
        own = float(self.pert_shift(np.array([s]))[0])
        ref = ref_val
        if self.relative and abs(ref_val) <= _RESOLVE_RELATIVE * self.noise(s):
            # The exact reference (a shift, or a value that is 0 at λ = 0) is too close to its round-off to
            # resolve a relative error (tiny λ). There the highest-order series available is exact far below
            # round-off: judge the order against it, so an order that misses the leading term (e.g. order 1 of a
            # shift that starts at λ²) fails as λ → 0 instead of "meeting" the tolerance for want of resolution.
            top = float(self.pert_shift(np.array([s]), self.top_order)[0])
            err = abs(own - top)
            ref = top if self.target.relative_to == "shift" else self.unperturbed + top
        else:
            err = abs(own - ex)
            if err <= self.noise(s):
                err = 0.0  # below the round-off of the shifts: no error can be resolved (e.g. a χ of 1e-15 at tiny λ)
        if self.relative:
            # a zero reference: undefined relative error, a failure -- unless the order reproduces it exactly
            err = err / abs(ref) if ref != 0 else (0.0 if err == 0.0 else np.inf)
        err = min(err, _AMBIGUOUS_ERROR)
        self.seen[s] = (err, ref_val)
        return err


def _search_scale(model: Model, target: _Target, *, norm: float | None = None) -> float:
    """Natural coupling scale: smallest isolation distance inside the level's sector / ‖V‖ (``norm``: a bound
    used instead of ‖V‖)."""
    nv = model.norm_v if norm is None else norm
    if nv == 0:
        return np.inf
    gaps = []
    for n in target.weights:
        same = model.level_sectors == model.level_sectors[n]
        d = np.abs(model.e0_relative[same] - model.e0_relative[n])
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
    higher = [ef.exps[n] for n in ef.target.weights]
    top = min(e.order for e in higher)
    if top <= k:
        return float(np.sqrt(s_lo * s_hi))
    if isinstance(spec, Pade):
        est = np.abs(ef.pert_shift(grid) - ef.pert_shift(grid, top))
    else:
        est = np.zeros_like(grid)
        for w_n, e in zip(ef.target.weights.values(), higher):
            for j in range(k + 1, min(top, k + 3) + 1):
                est = est + abs(w_n) * np.asarray(e.term(ef.direction * grid, j))
    if ef.relative:
        top_shift = ef.pert_shift(grid, top)
        ref = np.abs(top_shift) if ef.target.relative_to == "shift" else np.abs(ef.unperturbed + top_shift)
        # where the reference is below round-off (tiny λ) the estimate says nothing: skip those points (a guess
        # only; the search checks it with exact values), instead of starting the search at the smallest coupling
        resolved = ref > _RESOLVE_RELATIVE * ef.noise(grid)
        with np.errstate(divide="ignore", invalid="ignore"):
            est = np.where(resolved, est / np.where(resolved, ref, 1.0), 0.0)
    above = np.flatnonzero(est > tol)
    if above.size == 0:
        return float(grid[-1])
    return float(grid[max(above[0], 0)])


def validity_boundary(
    model: Model,
    level: Any,
    order: Any,
    *,
    tol: float | None = None,
    rtol: float | None = None,
    direction: int = +1,
    treatment: str = DEFAULT_TREATMENT,
    backend: str = "auto",
    max_coupling: float | None = None,
    xrtol: float = 1e-3,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    method: str = "schrieffer-wolff",
    coupling: float | None = None,
    reference: str = "exact",
    gap: str | float = "auto",
    trial_order: int | None = None,
    suggestions: bool = True,
) -> ValidityBoundary:
    """Smallest |λ| along ``direction`` where the error first exceeds the tolerance.

    The boundary is that of the formula asked for: with the default treatment,
    the textbook series of the level (degenerate perturbation theory inside an
    exactly degenerate group), whatever near-degenerate partners do.  When a
    partner limits it, :attr:`ValidityBoundary.suggestions` names the partner
    and the boundary of the smallest near-degenerate block that fixes it.

    Parameters
    ----------
    model : Model
    level : level key or Quantity
        One level or quantity (a list is refused).
    order : int, Pade or str
        One order spec.
    tol : float, optional
        Absolute tolerance (energy units).  Give exactly one of ``tol``/``rtol``.
    rtol : float, optional
        Tolerance on the error relative to the exact shift |E_exact - E^(0)|
        (for a quantity: relative to the reference it names).
    direction : {+1, -1}
        Search positive or negative couplings.
    treatment : {"standard", "nondegenerate", "block", "auto"}, default "standard"
        See :mod:`ptcheck.treatment`.  "block"/"auto" judge near-degeneracy at
        ``coupling`` (default: where the standard series itself expects to fail).
    backend : str
        Exact solver backend.
    max_coupling : float, optional
        Largest |λ| searched.  Default: 100 x (isolation distance / ‖V‖).
    xrtol : float, default 1e-3
        Relative precision of the boundary.
    threshold : float
        Mixing-ratio threshold (near-degenerate blocks and suggestions).
    method : str
        Method of near-degenerate blocks.
    coupling : float, optional
        Coupling of interest |λ0|.  The search makes sure the first crossing
        below |λ0| is found (so a verdict "valid at λ0" ⇔ |λ0| below the
        boundary), and suggestions are judged there.
    reference : {"exact", "bounds"}, default "exact"
        ``"bounds"``: no eigensolve (``exact_solves == 0``).  The result is
        the **certified** coupling (below it the order is guaranteed to meet
        the tolerance, given the gap) and ``certified_not`` (at and beyond it
        the order is certified not to), from Kato–Temple brackets of the exact
        levels (:func:`ptcheck.certified_boundary`).  Available for truncation
        orders of levels that get the Rayleigh–Schrödinger series (not
        degenerate with another level of their sector) and quantities made of
        them; anything else raises ``ValueError`` naming the reason.
    gap : {"auto", "weyl", "neighbours", "estimate"} or float, default "auto"
        ``reference="bounds"`` only: where the bounds on the neighbouring
        levels come from (:mod:`ptcheck.bounds`); the result says whether it
        is rigorous or conditional on an estimated / given gap.
    trial_order : int, optional
        ``reference="bounds"`` only: order of the trial states (default
        ``max(12, order + 10)``).
    suggestions : bool, default True
        Look for a near-degenerate block that would do better (extra searches);
        ``False`` skips them (e.g. for the many rays of a validity region).

    Returns
    -------
    ValidityBoundary

    Notes
    -----
    The first bracket is placed where the next series terms reach the
    tolerance; the bracket is walked down until the error is within
    tolerance, then Brent's method refines it.  Exact checks below the result
    (and at the coupling of interest) guard against a later crossing being
    reported instead of the first one.  A coupling where the pairing of
    perturbative and exact states is ambiguous counts as failing.
    """
    require_model(model, "validity_boundary")
    if isinstance(level, (list, set, range, np.ndarray)):
        raise TypeError(
            f"validity_boundary takes one level or quantity; got {level!r}. Call it once per level "
            "(a tuple is read as one label)"
        )
    if (tol is None) == (rtol is None):
        raise ValueError(f"give exactly one of tol (absolute) or rtol (relative); got tol={tol!r}, rtol={rtol!r}")
    relative = rtol is not None
    thr = float(val.check_positive(rtol if relative else tol, "rtol" if relative else "tol"))
    if direction not in (1, -1) or isinstance(direction, bool):
        raise ValueError(f"direction must be +1 or -1; got {direction!r}")
    spec = parse_order(order)
    reference = val.check_choice(reference, "reference", ("exact", "bounds"))
    if reference == "exact" and (not (isinstance(gap, str) and gap == "auto") or trial_order is not None):
        raise ValueError(
            f"gap and trial_order shape certified bounds: give them with reference='bounds'; got gap={gap!r}, "
            f"trial_order={trial_order!r} with reference='exact'"
        )
    norm = _cheap_norm_bound(model) if reference == "bounds" else None
    if coupling is not None:
        coupling = val.as_coupling(coupling)
        _check_coupling_range(model, coupling, norm=norm)
    if max_coupling is not None:
        max_coupling = float(val.check_positive(max_coupling, "max_coupling"))
        _check_coupling_range(model, max_coupling, "max_coupling", norm=norm)
    settings = CheckSettings(
        treatment=treatment, backend=backend, threshold=threshold, method=method,
        coupling=coupling, xrtol=xrtol, max_coupling=max_coupling,
    )
    (target,) = _resolve_targets(model, level)
    if reference == "bounds":
        opts = bounds_options(gap, trial_order, spec)
        return _certified_boundary(model, target, spec, settings, _Tolerance(thr, relative), direction, opts)
    solver = ExactSolver(model, backend=settings.backend, n_levels_hint=len(target.weights))
    result = _boundary(model, target, spec, settings, _Tolerance(thr, relative), direction, solver, bool(suggestions))
    return replace(result, exact_solves=solver.solves)


def _certified_boundary(
    model: Model, target: _Target, spec: OrderSpec, s: CheckSettings, tol: _Tolerance, direction: int, opts: Any,
) -> ValidityBoundary:
    """``validity_boundary(reference="bounds")``: the certified boundary of the treatment asked for, no exact solve."""
    k = required_order(spec)
    if s.treatment in ("block", "auto") and s.coupling is None:
        std = expansion_map(model, list(target.weights), k + 3, settings=s.replace(treatment="standard"))
        probe = _ErrorFunction(model, target, std, spec, None, direction, tol.relative)
        s_nat = _search_scale(model, target, norm=_cheap_norm_bound(model))
        s_max = s.max_coupling if s.max_coupling is not None else (100.0 * s_nat if np.isfinite(s_nat) else 1e6)
        try:
            s = s.replace(coupling=_first_guess(probe, spec, tol.value, min(1e-6 * s_nat, s_max * 1e-6), s_max))
        except PadeUnavailableError:
            s = s.replace(coupling=s_nat if np.isfinite(s_nat) else 1.0)
    exps = expansion_map(model, list(target.weights), k, settings=s)
    tname = _combined_treatment(exps, target)
    reason = _combined_reason(model, exps, target)
    base = dict(
        target=target.name, order=spec, treatment=tname, tol=None if tol.relative else tol.value,
        rtol=tol.value if tol.relative else None, direction=direction, exact_solves=0, error_at_boundary=math.nan,
        reason=reason, reference="bounds", gap_kind=opts.gap if opts.gap != "given" else f"given ({opts.gap_value:g})",
    )
    if _exact_in_sector(exps, target):
        return ValidityBoundary(
            coupling=math.nan, status="exact_in_sector", bracket=(math.nan, math.nan), max_coupling=math.nan,
            notes=(f"{target.name} is {EXACT_IN_SECTOR} with the {tname} treatment: the block is a whole invariant "
                   "sector, so its 'orders' are exact diagonalisation; no order is judged against the tolerance.",),
            **base,
        )
    if isinstance(spec, Pade):
        raise ValueError(
            f"reference='bounds' certifies truncation orders (polynomials in λ); got {order_name(spec)}. Use "
            "reference='exact' for a Padé approximant"
        )
    other = [n for n in target.weights if exps[n].treatment != NONDEGENERATE]
    if other:
        n = other[0]
        raise ValueError(
            f"reference='bounds' brackets each level through its own Rayleigh–Schrödinger series; level "
            f"{model.label(n)} gets the {exps[n].treatment} treatment ({exps[n].reason}). Use reference='exact' for its "
            "boundary (compare(..., reference='bounds') still brackets it at given couplings)"
        )
    if val.max_abs(model.v) == 0:
        return ValidityBoundary(
            coupling=direction * math.inf, status="not_reached", bracket=(math.inf, math.inf), max_coupling=math.inf,
            notes=("V is zero: the perturbative result is exact.",), rigorous=True, **base,
        )
    reach = 1.5 * s.coupling if (s.coupling is not None and s.max_coupling is None) else 0.0
    cb = certify(
        model, target.name, dict(target.weights), target.relative_to, k, tol.value, tol.relative, direction, opts,
        s.max_coupling, s.xrtol, reach_at_least=reach,
    )
    fail = cb.fail_coupling
    if cb.status == "certified_to_max":
        status, coupling, bracket = "not_reached", direction * math.inf, (cb.max_coupling, math.inf)
    elif cb.status == "fails_at_zero":
        status, coupling, bracket = "fails_at_zero", 0.0, (0.0, math.nan)
    else:
        status = "certified" if cb.coupling != 0 else "not_certified"
        coupling = cb.coupling
        bracket = (abs(cb.coupling), abs(fail) if math.isfinite(fail) else math.nan)
    notes = list(cb.notes)
    if cb.fail_coupling == cb.fail_coupling and not cb.fail_rigorous:
        notes.append(
            f"The failure at |λ| = {abs(fail):.4g} is certified with an estimated gap (conditional on it)."
        )
    return ValidityBoundary(
        coupling=coupling, status=status, bracket=bracket, max_coupling=cb.max_coupling, notes=tuple(notes),
        certified_not=fail, rigorous=cb.rigorous, rigorous_coupling=cb.rigorous_coupling, mat_vecs=cb.mat_vecs,
        certified_not_rigorous=bool(math.isfinite(fail) and cb.fail_rigorous),
        **base,
    )


def _boundary(model: Model, target: _Target, spec: OrderSpec, s: CheckSettings, tol: _Tolerance, direction: int, solver: ExactSolver,
              suggestions: bool = True) -> ValidityBoundary:
    """The boundary of the treatment asked for, with suggestions beside it."""
    s_nat = _search_scale(model, target)
    s_max = s.max_coupling if s.max_coupling is not None else (100.0 * s_nat if np.isfinite(s_nat) else 1e6)
    if s.max_coupling is None and s.coupling is not None:
        s_max = max(s_max, 1.5 * s.coupling)  # the search always reaches past the coupling of interest
    s_max = min(s_max, _largest_coupling(model))
    scale = float(max(np.ptp(model.e0), 1e-300))  # errors come from offset-free shifts: the offset sets no floor
    if not tol.relative and tol.value < 1e-12 * scale:
        warnings.warn(
            f"tol={tol.value:g} is below ~1e-12 of the energy scale ({scale:.3g}); the boundary will be set by rounding noise",
            AccuracyWarning,
            stacklevel=3,
        )
    if s.treatment in ("block", "auto") and s.coupling is None:
        # judge clusters where the standard series itself expects to fail (no exact solves)
        std = expansion_map(model, list(target.weights), required_order(spec) + 3, settings=s.replace(treatment="standard"))
        probe = _ErrorFunction(model, target, std, spec, solver, direction, tol.relative)
        try:
            guess = _first_guess(probe, spec, tol.value, min(1e-6 * s_nat, s_max * 1e-6), s_max)
        except PadeUnavailableError:
            guess = s_nat if np.isfinite(s_nat) else 1.0
        s = s.replace(coupling=guess)
    result = _boundary_search(model, target, spec, s, tol, direction, solver, s_max, s_nat)
    if not suggestions:
        return result
    sugg = _boundary_suggestions(model, target, spec, s, tol, direction, solver, s_max, s_nat, result)
    if sugg:
        result = replace(result, suggestions=tuple(sugg), notes=result.notes + tuple(g.text for g in sugg))
    return result


def _largest_coupling(model: Model) -> float:
    scale = float(max(np.max(np.abs(model.e0)), np.ptp(model.e0), 1.0))
    return MAX_COUPLING_ENERGY * scale / model.norm_v if model.norm_v > 0 else math.inf


def _boundary_suggestions(model, target, spec, s, tol, direction, solver, s_max, s_nat, result) -> list[Suggestion]:
    if s.treatment in ("block", "auto"):
        return []
    at = s.coupling
    if at is None:
        if result.status != "found":
            return []
        at = abs(result.coupling)
    out = []
    exps = expansion_map(model, list(target.weights), required_order(spec), settings=s)
    seen: set[frozenset] = set()
    block_result: dict[str, tuple] = {}
    for n in target.weights:
        e = exps[n]
        lim = limiting_partner(model, n, e.group, at, s.threshold)
        if lim is None or frozenset((n, lim[0])) in seen:
            continue
        seen.add(frozenset((n, lim[0])))
        blk = smallest_block(model, n, at, s.threshold)
        if blk is None:
            continue
        exact = whole_sector(model, blk)
        if exact:
            b_coupling, status = math.nan, "exact_in_sector"
        elif "block" in block_result:  # the target's boundary with the block treatment: one search serves all
            b_coupling, status = block_result["block"]
        else:
            try:
                b = _boundary_search(model, target, spec, s.replace(treatment="block", coupling=at), tol, direction, solver, s_max, s_nat)
                b_coupling, status = b.coupling, b.status
            except (ValueError, ArithmeticError) as exc:
                b_coupling, status = math.nan, f"error: {exc}"
            block_result["block"] = (b_coupling, status)
        out.append(_make_suggestion(model, target.name, n, lim[0], lim[1], at, s.threshold, blk, exact, b_coupling, status))
    return out


def _boundary_search(
    model: Model, target: _Target, spec: OrderSpec, s: CheckSettings, tol: _Tolerance, direction: int,
    solver: ExactSolver, s_max: float, s_nat: float,
) -> ValidityBoundary:
    needed = list(target.weights)
    exps = expansion_map(model, needed, required_order(spec) + 3, settings=s)
    tname = _combined_treatment(exps, target)
    reason = _combined_reason(model, exps, target)
    for n in needed:
        if isinstance(spec, Pade) and exps[n].treatment != NONDEGENERATE:
            exps[n].shift(0.0, spec)  # raises PadeUnavailableError naming the level and the treatment
    ef = _ErrorFunction(model, target, exps, spec, solver, direction, tol.relative)
    thr = tol.value
    notes: list[str] = [TRUNCATION_NOTE]

    def done(coupling, status, bracket, err, extra=()):
        amb = sorted(x for x in ef.ambiguous if x <= max(bracket[-1], 0) or not np.isfinite(bracket[-1]))
        more = ()
        if amb:
            more = (
                f"The pairing of perturbative and exact states is ambiguous from |λ| ≈ {amb[0]:.4g}; the order is "
                "counted as failing where the pairing is ambiguous.",
            )
        return ValidityBoundary(
            target=target.name, order=spec, treatment=tname, tol=None if tol.relative else thr,
            rtol=thr if tol.relative else None, direction=direction, coupling=coupling, status=status,
            exact_solves=solver.solves, bracket=tuple(bracket), error_at_boundary=float(err), max_coupling=s_max,
            notes=tuple(notes) + tuple(extra) + more, reason=reason,
        )

    if _exact_in_sector(exps, target):
        return done(math.nan, "exact_in_sector", (math.nan, math.nan), 0.0, (
            f"{target.name} is {EXACT_IN_SECTOR} with the {tname} treatment: the block is a whole invariant sector, so "
            "its 'orders' are exact diagonalisation; no order is judged against the tolerance.",))
    if not np.isfinite(s_nat):  # V = 0: every order is exact
        return done(direction * np.inf, "not_reached", (s_max, np.inf), 0.0, ("V is zero: the perturbative result is exact.",))

    s_lo = min(1e-6 * s_nat, s_max * 1e-6)
    g = lambda x: ef(x) - thr  # noqa: E731

    def walk_down(above: float) -> tuple[float | None, float]:
        """Halve from a failing point until within tolerance: (below or None, smallest failing)."""
        x = above
        while True:
            x /= 2.0
            if x < s_lo:
                return None, above
            if g(x) <= 0:
                return x, above
            above = x

    def fails_at_zero(above: float) -> ValidityBoundary:
        return done(0.0, "fails_at_zero", (0.0, above), ef(above), (
            f"The error exceeds the tolerance already at |λ| = {s_lo:.3g}: this order does not meet it at any "
            "nonzero coupling searched (for a relative tolerance, order 0 always fails).",))

    s0 = min(max(_first_guess(ef, spec, thr, s_lo, s_max), s_lo), s_max)
    if g(s0) > 0:
        below, above = walk_down(s0)
        if below is None:
            return fails_at_zero(above)
    else:
        below, x = s0, s0
        while True:
            x_next = min(x * 2.0, s_max)
            if g(x_next) > 0:
                above = x_next
                break
            below = x_next
            if x_next >= s_max:
                above = None
                break
            x = x_next
    # the coupling of interest: the first crossing must not lie beyond it while the error there fails
    lam0 = s.coupling
    if lam0 is not None and s_lo < lam0 <= s_max and (above is None or above > lam0) and g(lam0) > 0:
        below, above = walk_down(lam0)
        if below is None:
            return fails_at_zero(above)
    if above is None:
        return done(direction * np.inf, "not_reached", (s_max, np.inf), ef(s_max), (
            f"The error stays within tolerance up to the search limit |λ| = {s_max:.4g}.",))
    # guard the *first* crossing: exact checks below the bracket
    for frac in (0.25, 0.5, 0.8):
        sc = frac * below
        if sc > s_lo and g(sc) > 0:
            below, above = walk_down(sc)
            if below is None:
                return fails_at_zero(above)
            break
    # Brent on the bracket (every evaluation is one tracked exact point)
    root = brentq(g, below, above, xtol=s.xrtol * below, rtol=4 * np.finfo(float).eps, maxiter=60)
    # smallest evaluated point above tolerance that is >= root defines the reported side
    hi = min((x for x, (e, _) in ef.seen.items() if e > thr and x >= root), default=above)
    if tol.relative:
        # A relative error is meaningless where its reference (exact shift or value) passes through 0:
        # flag the boundary when the reference changes sign up to 1.5 x the boundary, or has already
        # shrunk to a tenth of its largest size before it.
        ef(min(1.5 * hi, s_max))
        # references below the round-off of the shifts carry no sign (e.g. a χ of 1e-15 at tiny λ)
        refs = sorted((x, r) for x, (_, r) in ef.seen.items() if x <= 1.5 * hi and abs(r) > ef.noise(x))
        vals = np.array([r for _, r in refs])
        nz = vals[vals != 0]
        max_ref = float(np.max(np.abs([r for x, r in refs if x <= hi]), initial=0.0))
        ref_hi = abs(ef.seen[hi][1]) if hi in ef.seen else max_ref
        if (nz.size and np.any(np.sign(nz) != np.sign(nz[0]))) or ref_hi < 0.1 * max_ref:
            return done(np.nan, "ill_defined", (below, hi), ef(hi), (
                f"The exact reference of the relative error passes through (or close to) zero near |λ| ≈ {hi:.4g}; "
                "a relative error is meaningless there. Use an absolute tolerance (tol=...) instead.",))
    return done(direction * float(root), "found", (float(root), float(hi)), ef(hi))
