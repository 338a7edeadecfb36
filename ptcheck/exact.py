"""Exact side of the comparison: eigensolvers and level tracking.

"Level n at λ" is the exact eigenstate continuously connected to the
unperturbed level n (the work-basis unit vector e_n at λ = 0; inside an exactly
degenerate group of H0 the model has already rotated the basis to the good
states, so e_n is still the λ → 0 limit).  It is followed along the coupling
path by overlap continuity; positive and negative couplings are separate rays
from 0.

Tracking rules (all thresholds are class attributes of :class:`ExactSolver`):

* identities are carried from one path point to the next with
  ``scipy.optimize.linear_sum_assignment`` on the squared overlaps
  ``|⟨ψ_i(λ_a)|ψ_j(λ_b)⟩|²``; a cluster of numerically equal eigenvalues is
  first rotated to match the previous point (so an exact crossing is followed
  diabatically, as it must be);
* a step is *refined* (the midpoint is inserted, recursively, up to
  ``max_depth`` halvings) when a tracked level's best overlap is below
  ``MIN_OVERLAP`` = 0.8, or when it swapped energy order with a state it is
  coupled to (``|⟨ψ_t|V|ψ_q⟩|`` above what the solver's residual can explain),
  i.e. when the step jumped over an avoided crossing; a swap with an uncoupled
  state (an exact, e.g. symmetry-protected, crossing) gets at most
  ``EXACT_CROSSING_DEPTH`` = 1 halving and is then followed diabatically;
* before halving, a tracked state and its neighbour that swapped order (or
  matched ambiguously) are examined as an isolated two-level problem when V
  couples them (the coupling test below) and the plane they span is the same
  at both step ends (squared cosine of the
  smallest principal angle >= ``PAIR_SUBSPACE`` = 0.9): the minimum of their
  squared gap (quadratic in λ for two levels) is located with at most
  ``PAIR_EVALS`` = 5 solves, started at the crossing of the diabatic lines;
  a minimum gap above ``RESOLVABLE_GAP`` = 20 residual tolerances is followed
  adiabatically and reported as the avoided crossing (no halving spent on an
  anticrossing narrower than the step); below that gap a swapped pair counts
  as an exact crossing (followed diabatically: the solver cannot tell it
  from one) and an ambiguous one is left to the rules below;
* if the depth cap is reached, the level is continued diabatically (largest
  overlap), a note is recorded in the result and a
  :class:`~ptcheck.errors.TrackingWarning` is emitted.  Whether two states are
  coupled is judged against their measured residuals, so with the iterative
  backend an anticrossing whose gap is below ~20 x the eigenvector residual
  (``rtol`` x spectral scale) counts as an exact crossing;
* the window of eigenpairs holds the tracked levels plus ``pad`` neighbours
  on each side; it is widened when a tracked level is lost (its weight in the
  window drops below ``LOST_WEIGHT`` = 0.9) or sits on the window edge.

Single points (:meth:`ExactSolver.level_at`, e.g. the probes of a boundary
search) of a low level (energy rank < 16 in its sector, outside any degenerate
group) are first tried by a *probe* on the iterative backend: one direct solve
for the lowest rank + 1 states at that coupling, seeded with the level's
Rayleigh–Schrödinger corrections, accepted when the state of that rank has
squared overlap >= 0.8 with the order-2 perturbative state (so it is the
level's own state, still at its unperturbed rank).  A refused probe falls back
to the tracked path, and the level is not probed again at that |λ| or beyond
on that ray.

Avoided crossings met on the way are reported for each tracked level: interior
local minima of the gap to its nearest neighbouring eigenvalue along the path
(sampled couplings plus refinement points) whose neighbour keeps its identity
through the minimum.  A *narrow* minimum (the parabola through the three
sampled squared gaps dips below half the smallest sample) is refined by
successive parabolic interpolation of the squared gap with a few extra exact
solves; a broad one, whose samples already bracket the bottom of the well, is
placed at that parabola's vertex with no solve (the squared gap of an isolated
two-level anticrossing is exactly quadratic in λ).

Backends (``BACKENDS``) and the ``'auto'`` rule (:func:`auto_backend`):

* ``'dense'``: ``scipy.linalg.eigh`` (``subset_by_index`` windows); refuses a
  basis larger than :data:`ptcheck.model.DENSE_LIMIT`;
* ``'sparse'``: warm-started Chebyshev-filtered subspace iteration for the
  lowest levels (ARPACK ``eigsh`` for cold starts and as fallback) and ARPACK
  shift-invert for windows high in the spectrum;
* ``'qutip'``: ``qutip.Qobj(H).eigenstates``;
* ``'auto'``: ``'dense'`` if N <= 200; else ``'sparse'`` if V is stored sparse
  with at most 10 % non-zeros; else ``'dense'`` if N <= DENSE_LIMIT; else
  ``'sparse'``.

Energies are in the units of H0; couplings are dimensionless; ħ = 1.
"""

from __future__ import annotations

import html
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp


from . import _validation as val
from ._eigensolvers import inner, make_backend
from ._tracking import (
    PathPoint,
    align_clusters,
    assign,
    fix_phase,
    gap_minima,
    overlaps,
    parabolic_minimum,
)
from .errors import BasisTooLargeError, DegenerateLevelError, TrackingWarning
from .model import DENSE_LIMIT, Model
from .series import rs_series

__all__ = [
    "BACKENDS",
    "AvoidedCrossing",
    "ExactSweep",
    "ExactSolver",
    "track",
    "eigenpairs",
    "auto_backend",
]

BACKENDS = ("auto", "dense", "sparse", "qutip")

#: 'auto' uses LAPACK up to this basis size whatever the storage.
AUTO_DENSE_MAX = 200
#: 'auto' treats V as sparse if stored sparse with at most this fraction of non-zeros.
AUTO_SPARSE_DENSITY = 0.10
#: The sparse backend serves windows reaching down to the ground state up to this
#: rank with its warm-started lowest-levels solver; higher windows use shift-invert.
LOWEST_WINDOW_MAX = 64


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.asarray(a)
    a.setflags(write=False)
    return a


def auto_backend(model: Model) -> str:
    """The backend ``'auto'`` resolves to for ``model``.

    Rule: ``'dense'`` if N <= 200 (LAPACK is fast and exact there); else
    ``'sparse'`` if ``model.v`` is stored sparse with density <= 10 %;
    else ``'dense'`` if N <= DENSE_LIMIT; else ``'sparse'``.
    """
    n = model.n
    if n <= AUTO_DENSE_MAX:
        return "dense"
    v = model.v
    if sp.issparse(v) and v.nnz <= AUTO_SPARSE_DENSITY * float(n) * n:
        return "sparse"
    if n <= DENSE_LIMIT:
        return "dense"
    return "sparse"


# ============================================================================ results
@dataclass(frozen=True)
class AvoidedCrossing:
    """An avoided crossing met by a tracked level along the coupling path.

    Attributes
    ----------
    coupling : float
        Position λ of the minimum gap (dimensionless).
    min_gap : float
        Minimum distance between the two exact levels (energy units).
    levels : tuple of int
        Work-basis indices of the unperturbed levels the two exact states are
        connected to, lower index first.  A partner that was not tracked is
        identified by overlap continuity inside the eigenpair window; if it
        entered the window later, the pair is (tracked level, index of the
        partner's largest work-basis component) and its label ends in ``"?"``.
    labels : tuple of str
        Printable names of the two levels.
    """

    coupling: float
    min_gap: float
    levels: tuple[int, int]
    labels: tuple[str, str]

    def to_dict(self) -> dict:
        return {
            "coupling": float(self.coupling),
            "min_gap": float(self.min_gap),
            "levels": [int(self.levels[0]), int(self.levels[1])],
            "labels": [str(self.labels[0]), str(self.labels[1])],
        }

    def __repr__(self) -> str:
        return (
            f"AvoidedCrossing({self.labels[0]} ~ {self.labels[1]} at λ={self.coupling:.6g}, "
            f"min_gap={self.min_gap:.4g})"
        )


@dataclass(frozen=True, repr=False, eq=False)
class ExactSweep:
    """Exact energies (and states) of tracked levels over a set of couplings.

    Attributes
    ----------
    couplings : (C,) ndarray, read-only
        Couplings λ in the order given by the user.
    levels : tuple of int
        Work-basis indices of the tracked levels (L of them).
    energies : (L, C) ndarray, read-only
        Exact energy of each tracked level at each coupling (energy units).
    shifts : (L, C) ndarray, read-only
        Exact shift ``E(λ) − E0`` of each tracked level (energy units),
        computed from offset-free energies (``model.e0_relative``), so it does
        not carry the rounding of a large constant in ``H0``.
    states : (L, C, N) ndarray or None, read-only
        Normalised exact states in the work basis, phase fixed so that
        ⟨e_n|ψ_n⟩ is real and >= 0 where it is not tiny (|.| > 1e-6), and
        continuous along the path elsewhere.  ``None`` if not kept.
    avoided_crossings : tuple of AvoidedCrossing
        Avoided crossings met by the tracked levels (ordered by coupling).
    backend : str
        The backend actually used (``'dense'``, ``'sparse'`` or ``'qutip'``).
    solves : int
        Number of exact diagonalisations this sweep needed.
    notes : tuple of str
        Numerical remarks (crossings too narrow to resolve, solver fallbacks).
    labels : tuple of str
        Printable names of the tracked levels.
    """

    couplings: np.ndarray
    levels: tuple[int, ...]
    energies: np.ndarray
    shifts: np.ndarray
    states: np.ndarray | None
    avoided_crossings: tuple[AvoidedCrossing, ...]
    backend: str
    solves: int
    notes: tuple[str, ...]
    labels: tuple[str, ...] = field(default=())

    def _row(self, level: Any) -> int:
        if isinstance(level, (int, np.integer)) and not isinstance(level, bool) and int(level) in self.levels:
            return self.levels.index(int(level))
        if isinstance(level, str) and level in self.labels:
            return self.labels.index(level)
        raise ValueError(f"level {level!r} was not tracked in this sweep; tracked levels: {list(self.levels)}")

    def energy(self, level: Any) -> np.ndarray:
        """Energies of one tracked level (work index or label), shape (C,)."""
        return self.energies[self._row(level)]

    def shift(self, level: Any) -> np.ndarray:
        """Shifts ``E(λ) − E0`` of one tracked level (work index or label), shape (C,)."""
        return self.shifts[self._row(level)]

    def state(self, level: Any) -> np.ndarray:
        """States of one tracked level, shape (C, N); raises if states were not kept."""
        if self.states is None:
            raise ValueError("this sweep was computed with keep_states=False")
        return self.states[self._row(level)]

    def to_dict(self) -> dict:
        """JSON-safe summary (states are not included; use :attr:`states`)."""
        return {
            "couplings": self.couplings.tolist(),
            "levels": list(self.levels),
            "labels": list(self.labels),
            "energies": self.energies.tolist(),
            "shifts": self.shifts.tolist(),
            "has_states": self.states is not None,
            "avoided_crossings": [a.to_dict() for a in self.avoided_crossings],
            "backend": self.backend,
            "solves": int(self.solves),
            "notes": list(self.notes),
        }

    def __repr__(self) -> str:
        lab = ", ".join(self.labels) if self.labels else ", ".join(map(str, self.levels))
        c = self.couplings
        span = f"{c.min():.4g}..{c.max():.4g}" if c.size else "-"
        return (
            f"ExactSweep(levels=[{lab}], C={c.size}, λ={span}, backend={self.backend!r}, "
            f"solves={self.solves}, avoided_crossings={len(self.avoided_crossings)}, notes={len(self.notes)})"
        )

    def _repr_html_(self) -> str:
        esc = html.escape
        rows = "".join(
            f"<tr><td>{esc(a.labels[0])} ~ {esc(a.labels[1])}</td><td>{a.coupling:.6g}</td><td>{a.min_gap:.4g}</td></tr>"
            for a in self.avoided_crossings
        )
        table = (
            f"<table><tr><th>pair</th><th>λ</th><th>min gap</th></tr>{rows}</table>" if rows else "<p>no avoided crossings</p>"
        )
        notes = "".join(f"<li>{esc(n)}</li>" for n in self.notes)
        return (
            f"<b>Exact sweep</b>: {len(self.levels)} level(s), {self.couplings.size} couplings, "
            f"backend {esc(self.backend)}, {self.solves} solves{table}"
            + (f"<ul>{notes}</ul>" if notes else "")
        )


# ============================================================================ solver
@dataclass
class _Raw:
    """One exact solve: spec, energies, vectors."""

    spec: tuple
    coupling: float
    energies: np.ndarray
    vectors: np.ndarray
    lo: int | None
    top: bool
    res_tol: float


@dataclass
class _StepCheck:
    ok: bool
    lost: bool
    problems: list  # (level, partner_id, kind)


class _SectorSolver:
    """Tracked exact levels of one sector's offset-free sub-model (private; inputs trusted).

    All the tracking machinery of this module (module docstring) runs here, on
    ``model.restrict(s)._offset_free()``; :class:`ExactSolver` delegates each
    level to the solver of its sector and maps indices, energies and states
    back.
    """

    MIN_OVERLAP = 0.8
    LOST_WEIGHT = 0.9
    MATCH_OVERLAP = 0.5
    #: halvings spent on a crossing of states judged uncoupled (an exact crossing) before
    #: accepting it; a coupled crossing is refined up to ``max_depth``.  The coupling test
    #: (:meth:`_coupled`) sees any avoided crossing whose half-gap exceeds ~10x the
    #: eigenvector residual, so narrower ones are followed diabatically as exact crossings.
    EXACT_CROSSING_DEPTH = 1

    #: couplings beyond LADDER_START x (span of E0) / ‖V‖ are reached over a geometric ladder
    #: of intermediate couplings (ratio 2): there the spectrum is dominated by λV and
    #: eigenvectors turn slowly, but a single step from small λ would skip the whole
    #: region where H0 and λV compete (halving alone cannot bridge a ratio of 1e8).
    LADDER_START = 64.0
    #: a step longer than GAP_LADDER x (distance of a tracked level to its nearest level) / ‖V‖
    #: goes over a geometric ladder from that coupling scale (halving alone reaches only 2^-16 of it)
    GAP_LADDER = 1024.0

    def __init__(self, model: Model, *, backend: str, rtol: float, max_depth: int, cache_bytes: float) -> None:
        self.rtol = rtol
        self.max_depth = max_depth
        self._cache_budget = cache_bytes
        self.model = model
        self.backend = backend
        self._rng = np.random.default_rng(20240607)
        self._impl = make_backend(self.backend, model, rtol=self.rtol, rng=self._rng)
        self.solves = 0
        self._spread = float(max(np.max(np.abs(model.e0)), np.ptp(model.e0))) if model.n else 0.0
        self._cache: dict[int, list[PathPoint]] = {+1: [], -1: []}
        self._cache_clock = 0
        self._cache_used: dict[int, int] = {}
        self._anon = -1
        self.notes: list[str] = []
        self._ladder_scale: float | None = None
        self._isolation_cache: dict[frozenset, float] = {}
        self._probe_bases: dict[int, tuple[Any, Any] | None] = {}  # level -> (RS series, ProbeBasis) or None
        self._probes: dict[tuple[int, int], list[tuple[float, float, np.ndarray]]] = {}  # (ray, level) -> (|λ|, E, window)
        self._probe_failed: dict[tuple[int, int], float] = {}  # (ray, level) -> smallest |λ| that failed
        self._pair_minima: dict[int, list[tuple[frozenset, float, float]]] = {+1: [], -1: []}  # ray -> (ids, λ, gap)

    def __repr__(self) -> str:
        return f"_SectorSolver({self.model!r}, backend={self.backend!r}, solves={self.solves})"

    # ------------------------------------------------------------------ basics
    def _scale(self, coupling: float) -> float:
        return self._spread + abs(coupling) * self.model.norm_v if self.model.n else 1.0

    def _res_tol(self, coupling: float) -> float:
        rel = self.rtol if self._impl.iterative else 1e-12
        return rel * max(self._scale(coupling), 1e-300)

    def eigenpairs(self, coupling: float, *, k: int, sigma: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """k exact eigenpairs of H(λ) in the work basis.

        Parameters
        ----------
        coupling : float
        k : int
            Number of eigenpairs, 1 <= k <= N.
        sigma : float, optional
            If given, the k eigenvalues closest to ``sigma`` (energy units);
            otherwise the k lowest.

        Returns
        -------
        energies : (k,) ndarray, ascending (energy units)
        vectors : (N, k) ndarray, orthonormal columns
        """
        self.solves += 1
        if sigma is None:
            return self._impl.lowest(coupling, k)
        return self._impl.nearest(coupling, sigma, k)

    # ------------------------------------------------------------------ windows
    def _pad(self) -> int:
        return 1 if not self._impl.supports_rank_window else 2

    def _origin(self, tracked: frozenset) -> PathPoint:
        """λ = 0: unit vectors around the tracked levels."""
        n = self.model.n
        pad = self._pad()
        members = set(tracked)
        for t in tracked:
            g = self.model.degenerate_group_of(t)
            if g is not None:
                members.update(g)
        lo = max(0, min(members) - pad)
        hi = min(n, max(members) + pad + 1)
        if not self._impl.supports_rank_window and hi <= LOWEST_WINDOW_MAX:
            lo = 0
        idx = np.arange(lo, hi)
        x = np.zeros((n, idx.size), dtype=self.model.dtype)
        x[idx, np.arange(idx.size)] = 1.0
        return PathPoint(
            coupling=0.0,
            energies=np.array(self.model.e0[lo:hi], dtype=float),
            vectors=x,
            ids=idx.astype(np.int64),
            lo=lo,
            top=hi == n,
            res_tol=0.0,
            certified=frozenset(range(n)),
        )

    def _start_point(self, origin: PathPoint, ray: int, tracked: frozenset, first: float, notes: list) -> PathPoint | None:
        """Exact states of degenerate groups at a tiny coupling, by the block convention.

        Inside an exactly degenerate group of H0 the λ → 0 limit of a branch is
        fixed by V (the model's good states) or, where V leaves a tie, only by
        higher orders.  At a coupling ``ε`` far below any structure
        (``ε = c x`` distance to the nearest other level ``/ ‖V‖``, c = 1e-4 for
        LAPACK backends and 1e-2 for the iterative one, at most half the first
        coupling asked for) the group's exact states are given to its levels in
        order of first-order shift along this ray, ties in ascending energy —
        the convention of the block treatment.  ``None`` if no tracked level
        lies in a degenerate group.
        """
        model = self.model
        # runs of exactly equal E0 inside the tracked levels' degenerate groups (a wide user
        # degeneracy_tol may group levels with a real splitting: those keep their own states)
        groups = []
        for g in model.degenerate_groups:
            if not any(t in g for t in tracked):
                continue
            e = model.e0[list(g)]
            for val_ in np.unique(e):
                run = tuple(int(x) for x, ee in zip(g, e) if ee == val_)
                if len(run) > 1 and any(t in run for t in tracked) and run not in groups:
                    groups.append(run)
        if not groups or model.norm_v == 0.0:
            return None
        factor = 1e-2 if self._impl.iterative else 1e-4
        eps = np.inf
        for g in groups:
            d = np.abs(model.e0 - model.e0[g[0]])
            d = d[d > 0]
            eps = min(eps, factor * (d.min() if d.size else 1.0) / model.norm_v)
        eps = float(min(eps, 0.5 * first))
        lam = ray * eps
        raw = self._solve(lam, ("rank", origin.lo, origin.lo + origin.energies.size)
                          if self._impl.supports_rank_window or origin.lo == 0 else self._spec(origin, tracked, self._pad()),
                          origin.vectors)
        b, check = self._match(origin, raw, tracked)
        vdiag = model.v_diagonal()
        scale = max(model.norm_v, 1e-300)
        ids = b.ids.copy()
        x = b.vectors
        for g in groups:
            gi = np.asarray(g)
            weight = np.sum(np.abs(x[gi, :]) ** 2, axis=0)
            cols = np.sort(np.argsort(weight)[-len(g):])
            cols = cols[np.argsort(b.energies[cols], kind="stable")]
            key = np.round(ray * vdiag[gi] / (1e-9 * scale))
            members = gi[np.lexsort((gi, key))]
            for mem in members:
                ids[ids == mem] = self._new_id()
            ids[cols] = members
        b.ids = ids
        fix_phase(x, ids, None, None)
        for t, partner, kind in check.problems:
            if model.degenerate_group_of(t) is None and kind != "lost":
                msg = f"level {model.label(t)}: ambiguous already at the starting coupling λ={lam:.3g}"
                if msg not in notes:
                    notes.append(msg)
        return b

    def _spec(self, a: PathPoint, tracked: frozenset, pad: int) -> tuple:
        n = self.model.n
        cols = [a.column(t) for t in tracked]
        cols = [c for c in cols if c is not None]
        if not cols:
            cols = list(range(a.energies.size))
        cmin, cmax = min(cols), max(cols)
        if a.lo is not None:
            rmin, rmax = a.lo + cmin, a.lo + cmax
            lo = max(0, rmin - pad)
            hi = min(n, rmax + pad + 1)
            if self._impl.supports_rank_window:
                return ("rank", lo, hi)
            if hi <= LOWEST_WINDOW_MAX:
                return ("rank", 0, hi)
        e = a.energies
        sigma = 0.5 * (e[cmin] + e[cmax])
        k = min(n, (cmax - cmin + 1) + 2 * pad)
        return ("sigma", float(sigma), int(k))

    def _solve(self, coupling: float, spec: tuple, start: np.ndarray | None, start_coupling: float | None = None) -> _Raw:
        self.solves += 1
        n = self.model.n
        if spec[0] == "rank":
            lo, hi = spec[1], spec[2]
            w, x = (
                self._impl.lowest(coupling, hi, start, start_coupling)
                if lo == 0
                else self._impl.window(coupling, lo, hi, start, start_coupling)
            )
            w, x = np.asarray(w, dtype=float), np.asarray(x)
            return _Raw(spec, coupling, w, x, lo, hi == n, self._res_tol(coupling))
        sigma, k = spec[1], spec[2]
        w, x = self._impl.nearest(coupling, sigma, k, start, start_coupling)
        return _Raw(spec, coupling, np.asarray(w, dtype=float), np.asarray(x), None, False, self._res_tol(coupling))

    # ------------------------------------------------------------------ one step
    def _new_id(self) -> int:
        self._anon -= 1
        return self._anon + 1

    def _match(self, a: PathPoint, raw: _Raw, tracked: frozenset, *, pairs: bool = False) -> tuple[PathPoint, _StepCheck]:
        """Carry identities from ``a`` to the solve ``raw`` and judge the step.

        With ``pairs``, swapped or ambiguous neighbours that form an isolated
        two-level anticrossing are resolved inside the step (:meth:`_resolve_pairs`).
        """
        ctol = 10.0 * max(raw.res_tol, a.res_tol)
        w, x = align_clusters(a.vectors, raw.energies, raw.vectors, ctol)
        if not x.flags.writeable or x is raw.vectors:
            x = np.array(x)
        ov = overlaps(a.vectors, x)
        col_of = assign(ov)
        kb = w.size
        resolved: dict[int, int] = {}  # row at a -> column of its resolved partner at b
        records: list = []
        if pairs and self.max_depth > 0:
            resolved, records = self._resolve_pairs(a, raw, w, x, ov, col_of, tracked)
        ids = np.full(kb, 0, dtype=np.int64)
        taken = np.zeros(kb, dtype=bool)
        match = np.full(kb, -1, dtype=int)
        for r, c in enumerate(col_of):
            if c < 0:
                continue
            if ov[r, c] >= self.MATCH_OVERLAP or int(a.ids[r]) in tracked or r in resolved:
                ids[c] = a.ids[r]
                taken[c] = True
                match[c] = r
        for c in np.flatnonzero(~taken):
            ids[c] = self._new_id()
        fix_phase(x, ids, a.vectors, match)
        b = PathPoint(
            coupling=raw.coupling, energies=w, vectors=x, ids=ids, lo=raw.lo, top=raw.top, res_tol=raw.res_tol,
            certified=frozenset(tracked),
            crossings=tuple((int(a.ids[r1]), int(a.ids[r2]), lam, gap) for r1, r2, lam, gap in records),
        )
        problems: list = []
        lost = False
        entering_slope: dict | None = None
        for t in tracked:
            r = a.column(t)
            if r is None:
                continue
            c = col_of[r]
            weight = float(np.sum(ov[r]))
            at_low_edge = c == 0 and raw.lo != 0
            at_high_edge = c == kb - 1 and not raw.top
            if c < 0 or weight < self.LOST_WEIGHT or at_low_edge or at_high_edge:
                lost = True
                continue
            if ov[r, c] < self.MIN_OVERLAP and r not in resolved:
                second = np.partition(ov[r], -2)[-2] if kb > 1 else 0.0
                q = int(np.argmax(np.where(np.arange(kb) == c, -1.0, ov[r])))
                problems.append((t, int(ids[q]) if second > 0 else None, "ambiguous"))
                continue
            # energy-order swaps with coupled states: a skipped avoided crossing
            ea_t, eb_t = a.energies[r], w[c]
            # matched states first, vectorised: only those whose order relative to t flipped go on
            db_all = eb_t - w
            da_all = ea_t - a.energies[np.maximum(match, 0)]
            flipped = (da_all * db_all < 0) & (np.abs(da_all) > ctol) & (np.abs(db_all) > ctol)
            suspects = np.flatnonzero((flipped | (match < 0)) & (np.arange(kb) != c) & (np.arange(kb) != resolved.get(r, -1)))
            for c2 in suspects:
                c2 = int(c2)
                r2 = match[c2]
                if r2 >= 0:
                    ea_q = a.energies[r2]
                else:
                    # entered the window: its energy at λ_a by first-order extrapolation
                    # (Hellmann–Feynman slope ⟨ψ|V|ψ⟩ at λ_b)
                    if entering_slope is None:
                        entering_slope = {}
                    if c2 not in entering_slope:
                        xc = x[:, c2]
                        entering_slope[c2] = float(np.real(np.vdot(xc, self.model.v @ xc)))
                    ea_q = w[c2] - (raw.coupling - a.coupling) * entering_slope[c2]
                da = ea_t - ea_q
                db = eb_t - w[c2]
                if da * db >= 0 or abs(da) <= ctol or abs(db) <= ctol:
                    continue
                coupled = self._coupled(b, c, c2, abs(db)) and (r2 < 0 or self._coupled(a, r, r2, abs(da)))
                problems.append((t, int(ids[c2]) if r2 >= 0 else None, "swap" if coupled else "crossing"))
        return b, _StepCheck(ok=not problems and not lost, lost=lost, problems=problems)

    # ------------------------------------------------------------------ two-level anticrossings
    #: a swapped or ambiguous pair of neighbouring states is treated as an isolated two-level
    #: problem when the plane it spans at one step end lies in the plane of its two matched
    #: states at the other end up to this squared cosine (smallest principal angle)
    PAIR_SUBSPACE = 0.9
    #: a two-level anticrossing whose minimum gap exceeds this many residual tolerances is
    #: followed adiabatically (the states keep their energy order); a smaller minimum gap is
    #: below what the solver resolves and counts as an exact crossing (followed diabatically)
    RESOLVABLE_GAP = 20.0
    #: exact solves spent locating the minimum gap of one two-level anticrossing
    PAIR_EVALS = 5

    def _resolve_pairs(
        self, a: PathPoint, raw: _Raw, w: np.ndarray, x: np.ndarray, ov: np.ndarray, col_of: np.ndarray, tracked: frozenset
    ) -> tuple[dict[int, int], list[tuple[int, int, float, float]]]:
        """Resolve isolated two-level anticrossings met inside the step from ``a`` to ``raw``.

        A tracked state and its neighbour in energy at ``a`` whose matched states at
        the other end are neighbours in the opposite energy order (a swap), or
        matched with an ambiguous overlap, are examined as a two-level problem
        when V couples them at ``a`` (:meth:`_coupled`; an uncoupled pair is an
        exact crossing, left to the step checks) and their plane is the same at
        both ends (``PAIR_SUBSPACE``): inside that
        plane the family is a 2 x 2 problem, whose only event is one anticrossing
        with a squared gap quadratic in λ.  Its minimum gap is located by
        successive parabolic interpolation of the squared gap from the two ends
        and the crossing of the diabatic lines (``PAIR_EVALS`` solves at most,
        instead of halving the step down to the anticrossing's width).

        * minimum gap above ``RESOLVABLE_GAP`` x the residual tolerance: the
          states are followed adiabatically (``col_of`` is changed in place so
          that the pair keeps its energy order) and the anticrossing is recorded;
        * below it, a swap is an exact crossing within the solver's resolution
          and keeps the diabatic assignment; an ambiguous pair is left to halving.

        Returns (row -> partner column for every settled row, records
        ``(lower row, upper row, coupling of the minimum, minimum gap)``).
        """
        resolved: dict[int, int] = {}
        records: list[tuple[int, int, float, float]] = []
        ka = a.energies.size
        floor = self.RESOLVABLE_GAP * max(a.res_tol, raw.res_tol)
        for t in sorted(tracked):
            r = a.column(t)
            if r is None or r in resolved or col_of[r] < 0:
                continue
            c = int(col_of[r])
            for r2 in (r - 1, r + 1):
                if not 0 <= r2 < ka or r2 in resolved or col_of[r2] < 0:
                    continue
                c2 = int(col_of[r2])
                if abs(c2 - c) != 1:
                    continue
                swapped = (r2 - r) * (c2 - c) < 0
                weak = min(ov[r, c], ov[r2, c2]) < self.MIN_OVERLAP
                if not (swapped or weak):
                    continue
                cosines = np.linalg.svd(inner(a.vectors[:, [r, r2]], x[:, [c, c2]]), compute_uv=False)
                if float(cosines[-1]) ** 2 < self.PAIR_SUBSPACE:
                    continue
                if not self._coupled(a, r, r2, abs(float(a.energies[r] - a.energies[r2]))):
                    continue  # V does not couple the pair: an exact crossing, judged by the step checks
                lam, gap = self._pair_minimum(a, raw, (r, r2), (c, c2), w)
                lo_row, hi_row = (r, r2) if a.energies[r] <= a.energies[r2] else (r2, r)
                if gap > floor:  # adiabatic: the lower state at a stays the lower one
                    col_of[lo_row], col_of[hi_row] = min(c, c2), max(c, c2)
                    records.append((lo_row, hi_row, lam, gap))
                elif not swapped:
                    continue  # ambiguous and below the solver's resolution: the step checks decide
                # (a swap below the resolution keeps its diabatic assignment: an exact crossing)
                resolved[r], resolved[r2] = int(col_of[r2]), int(col_of[r])
                break
        return resolved, records

    def _pair_minimum(self, a: PathPoint, raw: _Raw, rows: tuple[int, int], cols: tuple[int, int], w: np.ndarray) -> tuple[float, float]:
        """(coupling, gap) of the minimum gap of a two-level pair between ``a`` and ``raw`` (a few solves)."""
        (r, r2), (c, c2) = rows, cols
        la, lb = a.coupling, raw.coupling
        key = frozenset((int(a.ids[r]), int(a.ids[r2])))
        ray = 1 if lb > 0 else -1
        lo, hi = min(la, lb), max(la, lb)
        for pair, lam, gap in self._pair_minima[ray]:
            if pair == key and lo <= lam <= hi:
                return lam, gap  # located on an earlier path through this step (e.g. a bisection)
        da = float(a.energies[r] - a.energies[r2])
        db = float(w[c] - w[c2])  # same characters at the other end (diabatic lines)
        frac = da / (da - db) if da * db < 0 else 0.5
        mid = la + float(np.clip(frac, 0.05, 0.95)) * (lb - la)
        pair = a.vectors[:, [r, r2]]

        def gap2(lam: float) -> float:
            out = self._solve(float(lam), raw.spec, a.vectors, a.coupling)
            e = out.energies
            if e.size < 2:
                return np.inf
            weight = np.sum(np.abs(inner(out.vectors, pair)) ** 2, axis=1)
            best = int(np.argmax(weight[:-1] + weight[1:]))
            return float((e[best + 1] - e[best]) ** 2)

        pts = sorted([(la, da * da), (mid, gap2(mid)), (lb, db * db)])
        xs = tuple(p[0] for p in pts)
        fs = tuple(p[1] for p in pts)
        xtol = 1e-6 * abs(lb - la) + 1e-15
        lam, g2, _ = parabolic_minimum(gap2, xs, fs, max_evals=self.PAIR_EVALS - 1, xtol=xtol)
        lam, gap = float(lam), float(np.sqrt(max(g2, 0.0)))
        if min(key) >= 0:
            self._pair_minima[ray].append((key, lam, gap))
        return lam, gap

    def _coupled(self, p: PathPoint, i: int, j: int, gap: float) -> bool:
        """Is |⟨ψ_i|V|ψ_j⟩| larger than the eigenvector errors of the solve can explain?

        An eigenvector with residual r (measured here) is mixed with a neighbour
        at distance ``gap`` by at most r / gap, which fakes a coupling element of about
        (r / gap) |⟨V⟩_i - ⟨V⟩_j| (and (r / gap) ‖V‖ from all other states, with
        a 1e-3 weight since their gaps are larger).  A symmetry-protected crossing
        has an exactly zero element; a factor 10 above this noise counts as coupled.
        """
        v = self.model.v
        vnorm = max(self.model.norm_v, 1e-300)
        if p.coupling == 0.0 and p.res_tol == 0.0:
            elem = abs(v[p.ids[i], p.ids[j]]) if p.ids[i] >= 0 and p.ids[j] >= 0 else 0.0
            return bool(elem > 1e-12 * vnorm)
        xi, xj = p.vectors[:, i], p.vectors[:, j]
        vi, vj = v @ xi, v @ xj
        elem = abs(np.vdot(xj, vi))
        slope_diff = abs(np.real(np.vdot(xi, vi)) - np.real(np.vdot(xj, vj)))
        e0 = self.model.e0
        res = max(
            float(np.linalg.norm(e0 * xi + p.coupling * vi - p.energies[i] * xi)),
            float(np.linalg.norm(e0 * xj + p.coupling * vj - p.energies[j] * xj)),
            1e-15 * self._scale(p.coupling),
        )
        noise = 10.0 * (res / max(gap, 1e-300)) * (slope_diff + 1e-3 * vnorm) + 1e-12 * vnorm
        return bool(elem > noise)

    def _step(self, a: PathPoint, coupling: float, tracked: frozenset, raw: _Raw | None) -> tuple[PathPoint, _StepCheck, _Raw]:
        pad = self._pad() + a.drift  # levels that crossed on the last step will likely cross again
        check = None
        b = None
        for attempt in range(4):
            spec = self._spec(a, tracked, pad)
            if raw is None or raw.spec != spec or raw.coupling != coupling:
                raw = self._solve(coupling, spec, a.vectors, a.coupling)
            b, check = self._match(a, raw, tracked, pairs=True)
            if not check.lost:
                break
            pad = 2 * pad + 2
            if raw.spec[0] == "rank" and raw.lo == 0 and raw.top:
                break  # whole spectrum already in the window
        assert b is not None and check is not None
        if a.lo is not None and b.lo is not None:
            moves = [abs((b.lo + cb) - (a.lo + ca)) for t in tracked
                     if (ca := a.column(t)) is not None and (cb := b.column(t)) is not None]
            b.drift = min(max(moves, default=0), 16)
        if check.lost:
            check = _StepCheck(ok=False, lost=True, problems=check.problems + [(t, None, "lost") for t in tracked])
        return b, check, raw

    def _ladder(self, start: float, target: float, tracked: frozenset) -> list[float]:
        """Couplings from ``start`` to ``target`` (same ray): a geometric ladder (ratio 2) where the step is huge.

        Two scales: beyond ``LADDER_START x span(E0) / ‖V‖`` (V dominates, see
        the class attribute), and beyond ``GAP_LADDER x δ / ‖V‖`` with δ the
        distance of a tracked level to its nearest other unperturbed level
        (a step that large would hide the level's own avoided crossings
        below the reach of ``max_depth`` halvings).
        """
        model = self.model
        nv = model.norm_v
        if self._ladder_scale is None:
            span = float(np.ptp(model.e0)) if model.n else 0.0
            self._ladder_scale = self.LADDER_START * span / nv if (span > 0 and nv > 0) else np.inf
        a, b = abs(start), abs(target)
        lo = self._ladder_scale
        if nv > 0 and model.n > 1:
            gap = self._isolation(tracked)
            if np.isfinite(gap) and b > self.GAP_LADDER * max(a, gap / nv):
                lo = min(lo, gap / nv)
        if not np.isfinite(lo) or b <= 2.0 * max(a, lo):
            return [target]
        sign = 1.0 if target > 0 else -1.0
        pts = [] if a >= lo else [sign * lo]
        x = 2.0 * max(a, lo)
        while x < b / 1.5:
            pts.append(sign * x)
            x *= 2.0
        return pts + [target]

    def _isolation(self, tracked: frozenset) -> float:
        """Smallest distance of a tracked level to its nearest other unperturbed level (inf if none); cached."""
        gap = self._isolation_cache.get(tracked)
        if gap is None:
            e0 = self.model.e0
            gaps = [np.inf]
            for t in tracked:
                d = np.abs(e0 - e0[t])
                d = d[d > 0]
                if d.size:
                    gaps.append(float(d.min()))
            gap = self._isolation_cache[tracked] = min(gaps)
        return gap

    def _advance(self, a: PathPoint, target: float, tracked: frozenset, notes: list) -> list[PathPoint]:
        """Path points from ``a`` to ``target`` (same ray), refining where ambiguous."""
        out: list[PathPoint] = []
        cur = a
        for stop in self._ladder(a.coupling, target, tracked):
            pts = self._advance_step(cur, stop, tracked, notes)
            out.extend(pts)
            cur = pts[-1]
        return out

    def _advance_step(self, a: PathPoint, target: float, tracked: frozenset, notes: list) -> list[PathPoint]:
        """Path points from ``a`` to ``target``, halving ambiguous steps (module docstring)."""
        out: list[PathPoint] = []
        stack: list[tuple[float, int, _Raw | None]] = [(target, 0, None)]
        cur = a
        budget = 8 * (self.max_depth + 2)
        while stack:
            lam, depth, raw = stack.pop()
            b, check, raw = self._step(cur, lam, tracked, raw)
            if check.ok:
                out.append(b)
                cur = b
                continue
            only_exact = bool(check.problems) and all(k == "crossing" for _, _, k in check.problems)
            cap = min(self.max_depth, self.EXACT_CROSSING_DEPTH) if only_exact else self.max_depth
            if depth < cap and budget > 0 and not (check.lost and not check.problems):
                budget -= 1
                stack.append((lam, depth + 1, raw))
                stack.append((0.5 * (cur.coupling + lam), depth + 1, None))
                continue
            for t, partner, kind in check.problems:
                if kind == "crossing":
                    continue  # uncoupled states: an exact crossing, followed diabatically as it must be
                if kind == "lost":
                    msg = (
                        f"level {self.model.label(t)}: lost from the eigenpair window between λ={cur.coupling:.6g} "
                        f"and λ={lam:.6g}; continued with the state of largest overlap"
                    )
                else:
                    who = self._name(partner) if partner is not None else "a neighbouring level"
                    real, gap, where = self._check_crossing(cur, b, t, partner)
                    if real:
                        msg = (
                            f"level {self.model.label(t)}: crossing with {who} between λ={cur.coupling:.6g} and "
                            f"λ={lam:.6g} is narrower than resolvable (step {abs(lam - cur.coupling):.2g} after "
                            f"{depth} halvings; checked: gap {gap:.2g} near λ={where:.6g}); followed diabatically"
                        )
                    else:
                        msg = (
                            f"level {self.model.label(t)}: ambiguous step between λ={cur.coupling:.6g} and "
                            f"λ={lam:.6g} after {depth} halvings, but no crossing with {who} there (smallest gap "
                            f"{gap:.2g}); continued with the state of largest overlap"
                        )
                if msg not in notes:
                    notes.append(msg)
            out.append(b)
            cur = b
        return out

    def _check_crossing(self, a: PathPoint, b: PathPoint, t: int, partner: int | None) -> tuple[bool, float, float]:
        """Is there really a narrow crossing of ``t`` with ``partner`` between ``a`` and ``b``?

        The gap between the two exact levels that carry the pair's states is
        minimised over the step (bounded Brent search, at most 8 solves).  The
        crossing is real when that minimum lies well below the gaps at both
        ends (< 1/2 of the smaller one) or below the solver's resolution.
        Returns ``(real, min gap, coupling of the minimum)``.
        """
        ca = a.column(t)
        cp = a.column(partner) if partner is not None and partner >= 0 else None
        cb_t, cb_p = b.column(t), (b.column(partner) if partner is not None and partner >= 0 else None)
        if ca is None or cb_t is None:
            return True, np.nan, 0.5 * (a.coupling + b.coupling)
        if cp is None or cb_p is None:
            # nearest neighbour of t in energy at a
            e = a.energies
            cand = [c for c in (ca - 1, ca + 1) if 0 <= c < e.size]
            if not cand:
                return True, np.nan, 0.5 * (a.coupling + b.coupling)
            cp = min(cand, key=lambda c: abs(e[c] - e[ca]))
            pid = int(a.ids[cp])
            cb_p = b.column(pid)
            if cb_p is None:
                return True, np.nan, 0.5 * (a.coupling + b.coupling)
        ends = min(abs(a.energies[ca] - a.energies[cp]), abs(b.energies[cb_t] - b.energies[cb_p]))
        pair = a.vectors[:, [ca, cp]]
        spec = ("rank", b.lo, b.lo + b.energies.size) if b.lo is not None else self._spec(b, frozenset({t}), self._pad())

        def gap(lam: float) -> float:
            raw = self._solve(float(lam), spec, b.vectors, b.coupling)
            w = raw.energies
            if w.size < 2:
                return np.inf
            weight = np.sum(np.abs(inner(raw.vectors, pair)) ** 2, axis=1)
            best = int(np.argmax(weight[:-1] + weight[1:]))
            return float(w[best + 1] - w[best])

        from scipy.optimize import minimize_scalar  # here only: a heavy import

        lo, hi = sorted((a.coupling, b.coupling))
        res = minimize_scalar(gap, bounds=(lo, hi), method="bounded", options={"maxiter": 8, "xatol": 1e-3 * (hi - lo)})
        g = float(res.fun)
        floor = 10.0 * max(a.res_tol, b.res_tol)
        return bool(g < 0.5 * ends or g <= floor), g, float(res.x)

    def _name(self, pid: int) -> str:
        return self.model.label(pid) if pid >= 0 else "an untracked level"

    # ------------------------------------------------------------------ cache
    def _cache_add(self, ray: int, pts: list[PathPoint]) -> None:
        lst = self._cache[ray]
        for p in pts:
            lst.append(p)
            self._cache_clock += 1
            self._cache_used[id(p)] = self._cache_clock
        lst.sort(key=lambda p: abs(p.coupling))
        total = sum(p.nbytes for r in self._cache.values() for p in r)
        while total > self._cache_budget:
            victims = [(self._cache_used.get(id(p), 0), r, p) for r in self._cache for p in self._cache[r]]
            if not victims:
                break
            _, r, p = min(victims, key=lambda t: t[0])
            self._cache[r].remove(p)
            self._cache_used.pop(id(p), None)
            total -= p.nbytes

    def _cache_start(self, ray: int, mag: float, tracked: frozenset) -> PathPoint | None:
        """Nearest cached point with |λ| <= mag on this ray that certifies ``tracked``."""
        best = None
        for p in self._cache[ray]:
            if abs(p.coupling) <= mag and tracked <= p.certified:
                best = p
            elif abs(p.coupling) > mag:
                break
        if best is not None:
            self._cache_clock += 1
            self._cache_used[id(best)] = self._cache_clock
        return best

    # ------------------------------------------------------------------ probe path
    #: probes serve levels of energy rank below this inside the sector (window = rank + 1 states)
    PROBE_MAX_RANK = 16
    #: order of the Rayleigh–Schrödinger corrections that span a probe's fixed search space
    PROBE_ORDER = 8
    #: order of the perturbative state that confirms a probe's identity
    PROBE_CHECK_ORDER = 2
    #: smallest squared overlap with that state for a probe to be accepted
    PROBE_MIN_OVERLAP = 0.8
    #: share of the cache budget kept for probe vectors
    PROBE_CACHE_SHARE = 0.25

    def _probe_basis(self, n: int) -> tuple[Any, Any] | None:
        """(RS series to PROBE_ORDER, probe basis of its corrections) of level n, or None if it has none."""
        if n not in self._probe_bases:
            try:
                series = rs_series(self.model, n, self.PROBE_ORDER)
            except (DegenerateLevelError, FloatingPointError):
                self._probe_bases[n] = None
            else:
                coeffs = np.asarray(series.state_coefficients)
                self._probe_bases[n] = (series, self._impl.probe_basis(coeffs.T))
        return self._probe_bases[n]

    def _probe(self, n: int, lam: float, ray: int) -> tuple[float, np.ndarray] | None:
        """Level n at λ by one direct solve (no path from λ = 0), or None when the tracked path must serve.

        Serves iterative backends only, for a level of rank n < PROBE_MAX_RANK
        outside any degenerate group, below the smallest |λ| where a probe of
        this level on this ray failed before.  The lowest n + 1 eigenpairs are
        computed by the backend's probe solver (block Davidson seeded with the
        level's Rayleigh–Schrödinger corrections to order PROBE_ORDER, started
        from the nearest earlier probe of the level on this ray, else from the
        unperturbed states e_0..e_{n-1}); column n is accepted when its squared
        overlap with the normalised order-PROBE_CHECK_ORDER perturbative state
        is at least PROBE_MIN_OVERLAP.  Since the window holds the n + 1 lowest
        states and overlaps of orthonormal states sum to at most 1, no other
        state can carry that much of the perturbative state: the identity is
        unique and the level kept its energy rank.  A rejected probe is
        recorded and the caller takes the tracked path.
        """
        model = self.model
        key = (ray, n)
        mag = abs(lam)
        if (
            not self._impl.iterative
            or n >= self.PROBE_MAX_RANK
            or model.degenerate_group_of(n) is not None
            or mag >= self._probe_failed.get(key, np.inf)
        ):
            return None
        prepared = self._probe_basis(n)
        if prepared is None:
            return None
        series, basis = prepared
        earlier = self._probes.get(key, [])
        if earlier:
            near, energy, start = min(earlier, key=lambda p: abs(p[0] - mag))
            if near == mag:
                return energy, start[:, n].copy()
        else:
            start = np.zeros((model.n, n), dtype=model.dtype)
            start[np.arange(n), np.arange(n)] = 1.0
        self.solves += 1
        out = self._impl.probe(lam, n + 1, start, tight=[n], basis=basis)
        if out is not None:
            w, x = out
            psi = np.asarray(series.state(lam, self.PROBE_CHECK_ORDER))
            o = np.vdot(psi, x[:, n])
            if abs(o) ** 2 >= self.PROBE_MIN_OVERLAP:
                x = np.array(x)
                col = x[:, n : n + 1]
                fix_phase(col, np.array([n]), psi[:, None], np.array([0]))
                x[:, n] = col[:, 0]
                self._probe_keep(key, mag, float(w[n]), x)
                return float(w[n]), x[:, n].copy()
        self._probe_failed[key] = min(mag, self._probe_failed.get(key, np.inf))
        return None

    def _probe_keep(self, key: tuple[int, int], mag: float, energy: float, vectors: np.ndarray) -> None:
        """Cache one accepted probe (window vectors: start of the next probe of the level)."""
        lst = self._probes.setdefault(key, [])
        lst.append((mag, energy, vectors))
        budget = self.PROBE_CACHE_SHARE * self._cache_budget
        while sum(v.nbytes for p in self._probes.values() for _, _, v in p) > budget:
            victim = max(self._probes, key=lambda k: len(self._probes[k]))
            if not self._probes[victim]:
                break
            self._probes[victim].pop(0)  # oldest first

    # ------------------------------------------------------------------ public tracking
    def _resolve_levels(self, levels: Any) -> tuple[int, ...]:
        seq = val.as_sequence(levels)
        if not seq:
            raise ValueError("levels is empty; give at least one level (energy rank or label)")
        out = tuple(self.model.level_index(x) for x in seq)
        if len(set(out)) != len(out):
            raise ValueError(f"levels must be distinct; got {list(seq)!r} (work indices {list(out)})")
        return out

    def level_at(self, level: Any, coupling: float, stacklevel: int = 3) -> tuple[float, np.ndarray]:
        """Tracked exact energy and state of one level at one coupling.

        A low level on an iterative backend is first probed directly
        (:meth:`_probe`); otherwise the level is followed from the nearest
        cached path point below |λ| on the same ray (or from λ = 0), refining
        the step where overlaps are ambiguous; every solved point is cached,
        so calls in any order (a bisection) stay cheap and consistent.

        Parameters
        ----------
        level : int or label
        coupling : float

        Returns
        -------
        energy : float
            Exact energy of the level (energy units).
        state : (N,) ndarray
            Normalised work-basis state, phase as in :class:`ExactSweep`.
        """
        n = self.model.level_index(level)
        lam = val.as_coupling(coupling)
        if lam == 0.0:
            e = np.zeros(self.model.n, dtype=self.model.dtype)
            e[n] = 1.0
            return float(self.model.e0[n]), e
        tracked = frozenset({n})
        ray = 1 if lam > 0 else -1
        start = self._cache_start(ray, abs(lam), tracked)
        if start is not None and start.coupling == lam:
            c = start.column(n)
            return float(start.energies[c]), start.vectors[:, c].copy()
        probed = self._probe(n, lam, ray)
        if probed is not None:
            return probed
        notes: list[str] = []
        pts = []
        if start is None:
            start = self._origin(tracked)
            start_pt = self._start_point(start, ray, tracked, abs(lam), notes)
            if start_pt is not None:
                pts.append(start_pt)
                start = start_pt
        pts += self._advance(start, lam, tracked, notes)
        self._cache_add(ray, pts)
        self._warn(notes, stacklevel)
        p = pts[-1]
        c = p.column(n)
        return float(p.energies[c]), p.vectors[:, c].copy()

    def _warn(self, notes: list[str], stacklevel: int) -> None:
        fresh = [m for m in notes if m not in self.notes]
        self.notes.extend(fresh)
        if notes:
            warnings.warn(
                "exact level tracking: " + "; ".join(notes[:3]) + (f" (+{len(notes) - 3} more)" if len(notes) > 3 else ""),
                TrackingWarning,
                stacklevel=stacklevel + 1,
            )

    def _track(self, levels: Any, couplings: Any, *, keep_states: bool, find_crossings: bool, stacklevel: int) -> ExactSweep:
        lv = self._resolve_levels(levels)
        lam = val.as_couplings(couplings)
        tracked = frozenset(lv)
        solves0 = self.solves
        fallbacks0 = getattr(self._impl, "fallbacks", 0)
        nl, nc, n = len(lv), lam.size, self.model.n
        energies = np.empty((nl, nc))
        states = np.empty((nl, nc, n), dtype=self.model.dtype) if keep_states else None
        notes: list[str] = []
        crossings: list[AvoidedCrossing] = []
        origin = self._origin(tracked)
        zero = np.flatnonzero(lam == 0.0)
        for i, t in enumerate(lv):
            energies[i, zero] = self.model.e0[t]
            if states is not None and zero.size:
                states[i, zero] = 0.0
                states[i, zero, t] = 1.0
        for ray in (+1, -1):
            sel = np.flatnonzero(lam * ray > 0)
            if sel.size == 0:
                continue
            mags = np.abs(lam[sel])
            uniq, inv = np.unique(mags, return_inverse=True)
            path = [origin]
            start_pt = self._start_point(origin, ray, tracked, float(uniq[0]), notes)
            if start_pt is not None:
                path.append(start_pt)
            where = np.empty(uniq.size, dtype=int)
            cur = path[-1]
            for u_i, mag in enumerate(uniq):
                pts = self._advance(cur, ray * float(mag), tracked, notes)
                path.extend(pts)
                where[u_i] = len(path) - 1
                cur = pts[-1]
            self._cache_add(ray, path[1:])
            for j, s in enumerate(sel):
                p = path[where[inv[j]]]
                cols = [p.column(t) for t in lv]
                energies[:, s] = p.energies[cols]
                if states is not None:
                    states[:, s] = p.vectors[:, cols].T
            if find_crossings:
                crossings.extend(self._crossings(path, lv))
        fb = getattr(self._impl, "fallbacks", 0) - fallbacks0
        if fb:
            notes.append(f"the warm-started sparse solver fell back to ARPACK {fb} time(s)")
        crossings = _dedupe(crossings)
        if any(_is_tracking_problem(m) for m in notes):
            tracking_notes = [m for m in notes if _is_tracking_problem(m)]
            warnings.warn(
                "exact level tracking: "
                + "; ".join(tracking_notes[:3])
                + (f" (+{len(tracking_notes) - 3} more)" if len(tracking_notes) > 3 else ""),
                TrackingWarning,
                stacklevel=stacklevel,
            )
        return ExactSweep(
            couplings=_readonly(lam.copy()),
            levels=lv,
            energies=_readonly(energies),
            shifts=_readonly(energies - self.model.e0[list(lv)][:, None]),
            states=_readonly(states) if states is not None else None,
            avoided_crossings=tuple(sorted(crossings, key=lambda a: (a.coupling, a.levels))),
            backend=self.backend,
            solves=self.solves - solves0,
            notes=tuple(notes),
            labels=tuple(self.model.label(t) for t in lv),
        )

    # ------------------------------------------------------------------ avoided crossings
    #: a sampled gap minimum is *narrow* (refined with extra solves) when the parabola through the
    #: three sampled squared gaps puts the minimum below this fraction of the smallest sampled
    #: squared gap; otherwise the samples already bracket the bottom of the well and the
    #: parabola's vertex is reported without a solve
    NARROW_GAP2 = 0.5

    def _crossings(self, path: list[PathPoint], levels: tuple[int, ...]) -> list[AvoidedCrossing]:
        out = []
        wanted = set(levels)
        # anticrossings already located while tracking (two-level pairs resolved inside a step);
        # the sampled gap minimum of such a pair sits at one end of that step
        done: set[tuple[frozenset, int]] = set()
        for j, p in enumerate(path):
            for i1, i2, lam, gap in p.crossings:
                if i1 in wanted or i2 in wanted:
                    out.append(self._resolved_crossing(p, i1, i2, lam, gap))
                    done.update({(frozenset((i1, i2)), j - 1), (frozenset((i1, i2)), j)})
        seen: set[tuple[frozenset, int]] = set()
        scale = self._scale(abs(path[-1].coupling))
        for t in levels:
            for gm in gap_minima(path, t, scale):
                key = (frozenset((gm.level, gm.partner_id)), gm.index)
                if key in done or (gm.partner_id >= 0 and key in seen):
                    continue  # resolved while tracking, or the same minimum seen from the partner: refined once
                seen.add(key)
                out.append(self._refine_crossing(path, gm))
        return out

    def _resolved_crossing(self, p: PathPoint, i1: int, i2: int, lam: float, gap: float) -> AvoidedCrossing:
        """AvoidedCrossing of a two-level pair resolved inside the step that led to ``p``."""
        ids = [i1, i2]
        if i1 < 0 or i2 < 0:  # an untracked partner that entered the window: name it by its largest component
            t, other = (i2, i1) if i1 < 0 else (i1, i2)
            partner, plabel = self._partner(other, p.vectors[:, p.column(other)], exclude={int(i) for i in p.ids if i >= 0})
            return AvoidedCrossing(coupling=lam, min_gap=gap, levels=(t, partner), labels=(self.model.label(t), plabel))
        ids.sort()
        return AvoidedCrossing(
            coupling=lam, min_gap=gap, levels=(ids[0], ids[1]), labels=(self.model.label(ids[0]), self.model.label(ids[1]))
        )

    def _refine_crossing(self, path: list[PathPoint], gm: Any) -> AvoidedCrossing:
        j = gm.index
        p = path[j]
        ct = p.column(gm.level)
        cp = ct + gm.side
        pair = p.vectors[:, [ct, cp]]
        spec = (
            ("rank", p.lo, p.lo + p.energies.size)
            if p.lo is not None
            else ("sigma", float(0.5 * (p.energies[ct] + p.energies[cp])), int(p.energies.size))
        )

        def gap2(lam: float) -> float:
            raw = self._solve(float(lam), spec, p.vectors, p.coupling)
            x, w = raw.vectors, raw.energies
            if w.size < 2:
                return np.inf
            proj = np.abs(inner(x, pair)) ** 2
            weight = proj.sum(axis=1)
            best = int(np.argmax(weight[:-1] + weight[1:]))
            return float((w[best + 1] - w[best]) ** 2)

        xs = (path[j - 1].coupling, p.coupling, path[j + 1].coupling)
        gaps = []
        for q in (path[j - 1], p, path[j + 1]):
            c = q.column(gm.level)
            gaps.append(float((q.energies[c + gm.side] - q.energies[c]) ** 2))
        if xs[0] > xs[2]:
            xs, gaps = xs[::-1], gaps[::-1]
        vertex = _parabola_vertex(xs, gaps)
        if vertex is not None and vertex[1] >= self.NARROW_GAP2 * min(gaps):
            lam_min, g2 = vertex  # broad: the samples resolve the minimum (no solve)
        else:
            xtol = 1e-6 * max(abs(xs[2] - xs[0]), 1e-300) + 1e-12
            lam_min, g2, _ = parabolic_minimum(gap2, xs, tuple(gaps), max_evals=4, xtol=xtol)
        partner, plabel = self._partner(gm.partner_id, p.vectors[:, cp], exclude=set(int(i) for i in p.ids if i >= 0))
        a, b = (gm.level, partner), (self.model.label(gm.level), plabel)
        if gm.partner_id >= 0 and partner < gm.level:  # both identities known: lower index first
            a, b = a[::-1], b[::-1]
        return AvoidedCrossing(coupling=float(lam_min), min_gap=float(np.sqrt(max(g2, 0.0))), levels=a, labels=b)

    def _partner(self, pid: int, vec: np.ndarray, exclude: set) -> tuple[int, str]:
        """Identity of the partner: carried id, else its largest component outside the window's known levels."""
        if pid >= 0:
            return pid, self.model.label(pid)
        weight = np.abs(vec) ** 2
        if exclude:
            weight[np.fromiter(exclude, dtype=int)] = -1.0
        guess = int(np.argmax(weight))
        return guess, self.model.label(guess) + "?"


def _parabola_vertex(xs: tuple, fs: list) -> tuple[float, float] | None:
    """(x, f) of the minimum of the parabola through three points, if it opens upward and lies between them."""
    (x0, x1, x2), (f0, f1, f2) = xs, fs
    if not x0 < x1 < x2:
        return None
    curv = (f2 - f1) / (x2 - x1) - (f1 - f0) / (x1 - x0)
    if curv <= 0:
        return None
    den = (x1 - x0) * (f1 - f2) - (x1 - x2) * (f1 - f0)
    num = (x1 - x0) ** 2 * (f1 - f2) - (x1 - x2) ** 2 * (f1 - f0)
    x = x1 - 0.5 * num / den
    if not x0 <= x <= x2:
        return None
    f = float(np.polyval(np.polyfit([x0, x1, x2], [f0, f1, f2], 2), x))
    return float(x), max(f, 0.0)


def _is_tracking_problem(note: str) -> bool:
    return "narrower than resolvable" in note or "lost from" in note or "ambiguous step" in note


def _dedupe(crossings: list[AvoidedCrossing]) -> list[AvoidedCrossing]:
    """One entry per pair and position (a crossing of two tracked levels is found from both)."""
    out: list[AvoidedCrossing] = []
    for a in crossings:
        close = 1e-3 * abs(a.coupling) + 1e-9
        same = next((i for i, b in enumerate(out) if set(b.levels) == set(a.levels) and abs(a.coupling - b.coupling) <= close), None)
        if same is None:
            out.append(a)
        elif a.min_gap < out[same].min_gap:
            out[same] = a
    return out


# ============================================================================ public solver
class ExactSolver:
    """Exact eigenpairs and tracked levels of one model, sector by sector.

    Each tracked level is followed by a solver of its symmetry sector
    (:meth:`ptcheck.model.Model.restrict`, with the model's energy offset
    removed); indices, energies and states are mapped back to the model
    (states embedded as N-vectors, zero outside the sector).  Levels of
    different sectors therefore never mix: their crossings are true
    crossings, never refined and never reported as avoided.  A sector of one
    level is solved in closed form (``E = E0 + λ V_nn``, no solve).  Energies
    are absolute (``model.e0`` scale); :meth:`shift_at` and
    :attr:`ExactSweep.shifts` give ``E(λ) − E0`` without the rounding of the
    offset.

    Parameters
    ----------
    model : Model
    backend : {'auto', 'dense', 'sparse', 'qutip'}, default 'auto'
        ``'auto'`` applies the rule of the module docstring to each sector's
        sub-model; an explicit name is used for every sector.
    n_levels_hint : int, optional
        How many levels the caller will follow (accepted for sizing; windows
        are sized from the levels actually requested).
    rtol : float, default 1e-8
        Residual tolerance of the iterative solvers relative to the spectral
        scale ``max|E0 − c| + |λ| ‖V‖`` of the sector (c = energy offset):
        ``‖Hψ - Eψ‖ <= rtol x scale``.  Energies are then accurate to about
        ``(rtol x scale)² / gap``.
    max_depth : int, default 16
        Largest number of step halvings when refining an ambiguous step.
    cache_mb : float, default 256
        Memory budget of the path-point caches (shared by the sectors in
        proportion to their size; least recently used points are dropped first).

    Attributes
    ----------
    solves : int
        Running count of exact diagonalisations (all sectors).
    backend : str
        The backend ``'auto'`` resolves to for the whole model (sweeps report
        the backends their sectors actually used).
    notes : list of str
        Tracking remarks accumulated by :meth:`level_at` (crossings too narrow
        to resolve); :meth:`track` reports its own in the result.

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([0.0, 1.0, 3.0]), 0.2 * np.ones((3, 3)))
    >>> s = ExactSolver(m)
    >>> e, psi = s.level_at(1, 0.5)
    >>> psi.shape
    (3,)
    """

    def __init__(
        self,
        model: Model,
        *,
        backend: str = "auto",
        n_levels_hint: int | None = None,
        rtol: float = 1e-8,
        max_depth: int = 16,
        cache_mb: float = 256.0,
    ) -> None:
        if not isinstance(model, Model):
            raise TypeError(f"model must be a ptcheck.Model; got {type(model).__name__}")
        val.check_choice(backend, "backend", BACKENDS)
        if n_levels_hint is not None:
            n_levels_hint = val.check_int(n_levels_hint, "n_levels_hint", minimum=1, maximum=model.n)
        self.rtol = float(val.check_positive(rtol, "rtol"))
        self.max_depth = val.check_int(max_depth, "max_depth", minimum=0)
        self._cache_budget = float(val.check_positive(cache_mb, "cache_mb")) * 2**20
        self.model = model
        self.n_levels_hint = n_levels_hint
        self._requested = backend
        self.backend = auto_backend(model) if backend == "auto" else backend
        self._sizes = np.bincount(model.level_sectors)
        if backend == "dense" and int(self._sizes.max()) > DENSE_LIMIT:
            s = int(np.argmax(self._sizes))
            raise BasisTooLargeError(
                f"backend 'dense' needs a dense matrix of each sector, but sector {s} of {model.name!r} has "
                f"N = {int(self._sizes[s])} > DENSE_LIMIT = {DENSE_LIMIT} states (model N = {model.n}). "
                "Use backend='sparse' (or 'auto'), or reduce the basis."
            )
        if backend == "qutip":
            import qutip  # noqa: F401  (fail early with ImportError if missing)
        self._solvers: dict[int, _SectorSolver] = {}
        self._centre: dict[int, float] = {}  # sector energy centre (relative to model.energy_offset)
        self._levels_of: dict[int, np.ndarray] = {}
        self._full: _SectorSolver | None = None

    def __repr__(self) -> str:
        return f"ExactSolver({self.model!r}, backend={self.backend!r}, solves={self.solves})"

    @property
    def solves(self) -> int:
        """Exact diagonalisations so far (all sectors)."""
        return sum(s.solves for s in self._solvers.values()) + (self._full.solves if self._full is not None else 0)

    @property
    def notes(self) -> list[str]:
        """Tracking remarks of :meth:`level_at` calls (all sectors)."""
        out: list[str] = []
        for s in self._solvers.values():
            out.extend(m for m in s.notes if m not in out)
        return out

    # ------------------------------------------------------------------ sectors
    def _where(self, level: int) -> tuple[int, int]:
        """(sector, index inside the sector) of a work index."""
        s = int(self.model.level_sectors[level])
        if s not in self._levels_of:
            self._levels_of[s] = np.flatnonzero(self.model.level_sectors == s)
        return s, int(np.searchsorted(self._levels_of[s], level))

    def _solver(self, s: int) -> _SectorSolver:
        """The solver of sector s, on the sector's sub-model with its energy centre removed."""
        if s not in self._solvers:
            single = self._sizes.size == 1
            sub, centre = (self.model if single else self.model.restrict(s))._offset_free()
            backend = auto_backend(sub) if self._requested == "auto" else self._requested
            share = self._cache_budget * max(sub.n / self.model.n, 1.0 / 64.0)
            self._solvers[s] = _SectorSolver(sub, backend=backend, rtol=self.rtol, max_depth=self.max_depth, cache_bytes=share)
            self._centre[s] = centre
        return self._solvers[s]

    def _solve_level(self, n: int, lam: float, stacklevel: int) -> tuple[float, float, np.ndarray]:
        """(absolute energy, shift E − E0, N-vector state) of work level n at λ."""
        s, k = self._where(n)
        model = self.model
        psi = np.zeros(model.n, dtype=model.dtype)
        if self._sizes[s] == 1:
            psi[n] = 1.0
            shift = lam * float(np.real(model.v[n, n]))
            return float(model.e0[n] + shift), shift, psi
        solver = self._solver(s)
        e, sub_psi = solver.level_at(k, lam, stacklevel + 1)
        psi[self._levels_of[s]] = sub_psi
        return float(e + (self._centre[s] + model.energy_offset)), float(e - solver.model.e0[k]), psi

    # ------------------------------------------------------------------ public
    def eigenpairs(self, coupling: float, *, k: int, sigma: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """k exact eigenpairs of the whole H(λ) in the work basis (all sectors together).

        Parameters
        ----------
        coupling : float
        k : int
            Number of eigenpairs, 1 <= k <= N.
        sigma : float, optional
            If given, the k eigenvalues closest to ``sigma`` (energy units);
            otherwise the k lowest.

        Returns
        -------
        energies : (k,) ndarray, ascending (energy units)
        vectors : (N, k) ndarray, orthonormal columns
        """
        lam = val.as_coupling(coupling)
        k = val.check_int(k, "k", minimum=1, maximum=self.model.n)
        if sigma is not None:
            sigma = val.as_coupling(sigma, "sigma") - self.model.energy_offset
        whole, centre = self.model._offset_free()
        if sigma is not None:
            sigma -= centre
        if self._full is None:
            self._full = _SectorSolver(whole, backend=self.backend, rtol=self.rtol, max_depth=self.max_depth, cache_bytes=self._cache_budget)
        w, x = self._full.eigenpairs(lam, k=k, sigma=sigma)
        return np.asarray(w, dtype=float) + (centre + self.model.energy_offset), x

    def shifts_near(self, level: Any, coupling: float, *, k: int, shift: float) -> tuple[np.ndarray, np.ndarray]:
        """The k exact eigenpairs of a level's sector nearest ``E0 + shift``, as shifts from that level's E0.

        Solved on the sector's offset-free sub-model (untracked), so the
        shifts ``E − E0[level]`` keep the accuracy of the offset-free problem.

        Parameters
        ----------
        level : int or label
        coupling : float
        k : int
            Number of eigenpairs (at most the sector's size).
        shift : float
            Target ``E − E0[level]`` (energy units).

        Returns
        -------
        shifts : (k,) ndarray, ascending (energy units)
        vectors : (N, k) ndarray, orthonormal columns (zero outside the sector)
        """
        n = self.model.level_index(level)
        lam = val.as_coupling(coupling)
        s, i = self._where(n)
        where = self._levels_of[s]
        k = val.check_int(k, "k", minimum=1, maximum=int(where.size))
        out = np.zeros((self.model.n, k), dtype=np.result_type(self.model.dtype, float))
        if where.size == 1:
            out[n, 0] = 1.0
            return np.array([lam * float(np.real(self.model.v[n, n]))]), out
        solver = self._solver(s)
        e0 = float(solver.model.e0[i])
        w, x = solver.eigenpairs(lam, k=k, sigma=e0 + float(shift))
        out[where] = x
        return np.asarray(w, dtype=float) - e0, out

    def level_at(self, level: Any, coupling: float) -> tuple[float, np.ndarray]:
        """Tracked exact energy and state of one level at one coupling.

        A low level on an iterative backend is first probed directly at λ
        (one solve, module docstring); otherwise, or when the probe is
        refused, the level is followed inside its sector from the nearest
        cached path point below |λ| on the same ray (or from λ = 0), refining
        the step where overlaps are ambiguous.  Every solved point is cached,
        so calls in any order (a bisection) stay cheap and consistent.

        Parameters
        ----------
        level : int or label
        coupling : float

        Returns
        -------
        energy : float
            Exact energy of the level (energy units).
        state : (N,) ndarray
            Normalised work-basis state, phase as in :class:`ExactSweep`.
        """
        n = self.model.level_index(level)
        lam = val.as_coupling(coupling)
        e, _, psi = self._solve_level(n, lam, 3)
        return e, psi

    def shift_at(self, level: Any, coupling: float) -> float:
        """Exact shift ``E(λ) − E0`` of one level (energy units).

        Computed on the level's sector with the sector's energy centre removed,
        so it keeps the accuracy of the offset-free problem however large a
        constant ``H0`` carries.
        """
        n = self.model.level_index(level)
        lam = val.as_coupling(coupling)
        return self._solve_level(n, lam, 3)[1]

    def track(self, levels: Any, couplings: Any, *, keep_states: bool = True, find_crossings: bool = True) -> ExactSweep:
        """Follow levels over couplings; see :func:`track`."""
        return self._track(levels, couplings, keep_states=keep_states, find_crossings=find_crossings, stacklevel=3)

    def _resolve_levels(self, levels: Any) -> tuple[int, ...]:
        seq = val.as_sequence(levels)
        if not seq:
            raise ValueError("levels is empty; give at least one level (energy rank or label)")
        out = tuple(self.model.level_index(x) for x in seq)
        if len(set(out)) != len(out):
            raise ValueError(f"levels must be distinct; got {list(seq)!r} (work indices {list(out)})")
        return out

    def _track(self, levels: Any, couplings: Any, *, keep_states: bool, find_crossings: bool, stacklevel: int) -> ExactSweep:
        model = self.model
        lv = self._resolve_levels(levels)
        lam = val.as_couplings(couplings)
        nl, nc, n = len(lv), lam.size, model.n
        absolute = np.empty((nl, nc))
        shifts = np.empty((nl, nc))
        whole = self._sizes.size == 1 and n > 1  # one sector: its states are the model's, no copy
        states = np.zeros((nl, nc, n), dtype=model.dtype) if keep_states and not whole else None
        by_sector: dict[int, list[tuple[int, int]]] = {}
        for row, t in enumerate(lv):
            s, k = self._where(t)
            by_sector.setdefault(s, []).append((row, k))
        notes: list[str] = []
        crossings: list[AvoidedCrossing] = []
        backends: list[str] = []
        solves = 0
        for s, items in by_sector.items():
            where = self._levels_of[s]
            if self._sizes[s] == 1:
                (row, _), t = items[0], int(where[0])
                shifts[row] = lam * float(np.real(model.v[t, t]))
                absolute[row] = model.e0[t] + shifts[row]
                if states is not None:
                    states[row, :, t] = 1.0
                continue
            solver = self._solver(s)
            centre = self._centre[s] + model.energy_offset
            sw = solver._track([k for _, k in items], lam, keep_states=keep_states, find_crossings=find_crossings, stacklevel=stacklevel + 1)
            solves += sw.solves
            if sw.backend not in backends:
                backends.append(sw.backend)
            for m in sw.notes:
                if m not in notes:
                    notes.append(m)
            for j, (row, k) in enumerate(items):
                absolute[row] = sw.energies[j] + centre
                shifts[row] = sw.shifts[j]
                if states is not None:
                    states[row][:, where] = sw.states[j]
            if whole and keep_states:
                states = sw.states  # rows in the order asked for (one sector: items follow lv)
            for ac in sw.avoided_crossings:
                crossings.append(
                    AvoidedCrossing(
                        coupling=ac.coupling, min_gap=ac.min_gap, levels=(int(where[ac.levels[0]]), int(where[ac.levels[1]])), labels=ac.labels
                    )
                )
        zero = lam == 0.0
        absolute[:, zero] = model.e0[list(lv)][:, None]  # exact at λ = 0
        shifts[:, zero] = 0.0
        return ExactSweep(
            couplings=_readonly(lam.copy()),
            levels=lv,
            energies=_readonly(absolute),
            shifts=_readonly(shifts),
            states=_readonly(states) if states is not None else None,
            avoided_crossings=tuple(sorted(crossings, key=lambda a: (a.coupling, a.levels))),
            backend="+".join(backends) if backends else self.backend,
            solves=solves,
            notes=tuple(notes),
            labels=tuple(model.label(t) for t in lv),
        )


# ============================================================================ one-off functions
def track(
    model: Model,
    levels: Any,
    couplings: Any,
    *,
    backend: str = "auto",
    keep_states: bool = True,
    find_crossings: bool = True,
) -> ExactSweep:
    """Exact energies (and states) of tracked levels over a list of couplings.

    Parameters
    ----------
    model : Model
    levels : int, label, or sequence of them
        Unperturbed levels to follow (energy rank in the work basis or label).
    couplings : float or (C,) array_like
        Couplings λ, any order; 0 is allowed (no solve needed there).
    backend : {'auto', 'dense', 'sparse', 'qutip'}, default 'auto'
    keep_states : bool, default True
        Keep the (L, C, N) array of states.
    find_crossings : bool, default True
        Locate and refine the avoided crossings met by the tracked levels.

    Returns
    -------
    ExactSweep

    Warns
    -----
    TrackingWarning
        A crossing was narrower than the refinement can resolve; the level was
        followed diabatically there (also recorded in ``notes``).

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([-0.5, 0.5]), [[0, 1], [1, 0]])
    >>> sw = track(m, [0, 1], [0.0, 0.5, 1.0])
    >>> np.round(sw.energy(1), 6)
    array([0.5     , 0.707107, 1.118034])
    """
    if not isinstance(model, Model):
        raise TypeError(f"model must be a ptcheck.Model; got {type(model).__name__}")
    val.check_choice(backend, "backend", BACKENDS)
    solver = ExactSolver(model, backend=backend)
    return solver._track(levels, couplings, keep_states=bool(keep_states), find_crossings=bool(find_crossings), stacklevel=3)


def eigenpairs(
    model: Model, coupling: float, *, k: int | None = None, backend: str = "auto", sigma: float | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Exact eigenpairs of H(λ) = H0 + λV in the work basis (a plain one-off call).

    Parameters
    ----------
    model : Model
    coupling : float
    k : int, optional
        Number of eigenpairs; default all N (needs N <= DENSE_LIMIT).
    backend : {'auto', 'dense', 'sparse', 'qutip'}, default 'auto'
    sigma : float, optional
        Return the k eigenpairs closest to this energy instead of the lowest.

    Returns
    -------
    energies : (k,) ndarray, ascending (energy units)
    vectors : (N, k) ndarray, orthonormal columns in the work basis
    """
    if not isinstance(model, Model):
        raise TypeError(f"model must be a ptcheck.Model; got {type(model).__name__}")
    val.check_choice(backend, "backend", BACKENDS)
    kk = model.n if k is None else val.check_int(k, "k", minimum=1, maximum=model.n)
    solver = ExactSolver(model, backend=backend, n_levels_hint=min(kk, model.n))
    return solver.eigenpairs(coupling, k=kk, sigma=sigma)
