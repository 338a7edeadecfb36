"""Does the perturbation series of a level converge, and how far?

:func:`convergence` looks at one level's Rayleigh–Schrödinger energy series
from two independent sides and says whether they agree:

* **the coefficients** ``E^(k)``: ratio test, root test, Domb–Sykes
  extrapolation in 1/k (Hunter–Guerrieri for a complex-conjugate pair of
  singularities), nearest stable pole of a robust Padé approximant; the
  growth class ('convergent', 'terminating', 'asymptotic');
* **the singularities** of the exact eigenvalue branch: exceptional points
  (EPs) of ``H0 + λ V`` at complex λ, where the level coalesces with a partner
  (a square-root branch point), found by Newton on the Jordan-chain
  system and checked to lie on this level's branch (see
  :mod:`ptcheck._exceptional`).

For a finite Hermitian pencil the eigenvalue branches are algebraic functions
of λ whose only singularities are such branch points, so the radius of
convergence is the distance to the nearest EP on the level's branch (Kato,
*Perturbation Theory for Linear Operators*, 1966, ch. II §1).

A rigorous lower bound is always reported (``kato_bound``):

    r  >=  d / (2 ‖V‖),

with ``d`` the distance from ``E_n^(0)`` to the rest of the unperturbed
spectrum and ``‖V‖`` the spectral norm (``model.norm_v``).  This is the bound
of Kato 1966, ch. II §3 (convergence radii: §3.1 "simple estimates"; §3.5 the
case of a normal unperturbed operator), obtained with the circle
``Γ: |ζ - E_n^(0)| = d/2``: on Γ the unperturbed resolvent has norm ``2/d``
(H0 is normal), so ``‖λ V R0(ζ)‖ <= 2|λ|‖V‖/d < 1`` and the Neumann series of
the resolvent of ``H(λ)`` converges uniformly on Γ for every complex
``|λ| < d/(2‖V‖)``; the Riesz projection, and with it the (simple) eigenvalue
inside Γ, is then holomorphic in that disc.  The bound holds for the model as
given (for a truncated basis: the truncated model).

Limits
------
* The EP search is dense (one N x N LU factorisation per step); with
  ``ep_search="auto"`` it runs for N <= :data:`EP_DENSE_LIMIT` and is skipped
  with a note above that (and for asymptotic series, whose truncated-basis
  singularities only describe the truncation).  ``ep_search="always"`` runs
  it above the limit too: for a sparse V as a search in a reduced basis
  refined until each EP's full-space residual is small.
* The search starts from guesses (two-level estimates, real-axis avoided
  crossings, Padé poles); it can miss an EP.  A miss shows up as
  ``agreement == 'disagree'`` and the smaller radius is reported.
* Coefficient estimators need ~10+ orders and assume one dominant singularity
  (or a conjugate pair); two singularities at nearly the same distance, or a
  pair very close to the real axis, cause slow beats and poorer estimates.
* 'terminating' and 'asymptotic' describe the computed orders only: in a
  truncated basis a terminating or factorially growing series eventually
  turns geometric (the finite matrix always has a finite radius).

Examples
--------
>>> import numpy as np
>>> from ptcheck import Model
>>> m = Model(np.diag([0.0, 1.0]), [[0, 0.25], [0.25, 0]])   # radius Δ/(2|v|) = 2
>>> r = convergence(m, 0, 30)
>>> r.kind, round(r.radius, 6)
('convergent', 2.0)
"""

from __future__ import annotations

import contextlib
import html
import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from . import _validation as val
from ._format import fmt_complex
from ._exceptional import EPCandidate, ExceptionalPointSearch, ReducedExceptionalPointSearch, branch_point_guesses
from ._radius import CoefficientAnalysis, analyse
from .model import Model
from .degeneracy import DEFAULT_MIXING_THRESHOLD
from .quantities import Quantity
from .treatment import DEFAULT_TREATMENT, DEGENERATE, NONDEGENERATE, CheckSettings, expansions, require_model

__all__ = [
    "ConvergenceResult",
    "RadiusEstimates",
    "DivergenceMap",
    "convergence",
    "divergence_map",
    "EP_DENSE_LIMIT",
    "AGREEMENT_RTOL",
]

#: Largest basis for which ``ep_search="auto"`` runs the dense exceptional-point
#: search (one LU factorisation of an N x N complex matrix per continuation
#: step).  Larger models skip it with a note; force it with
#: ``ep_search="always"``.  Cost with one BLAS thread: about 1 s at N = 120 and
#: 3-5 s at N = 400 per level, i.e. the time of 15-30 dense complex
#: eigenvalue computations of the same matrix (``benchmarks/bench_exceptional.py``).
EP_DENSE_LIMIT = 400

#: Coefficient and singularity radii "agree" when they differ by at most this
#: fraction of the singularity radius.  The coefficient radius is the median of
#: the extrapolating estimators (root test, Domb–Sykes, Padé); at order ~40
#: they are typically within a few per cent of the true radius, less well
#: when two singularities lie at similar distances (beats in the coefficients).
AGREEMENT_RTOL = 0.15

KINDS = ("convergent", "terminating", "asymptotic")
EP_SEARCH = ("auto", "always", "never")
AGREEMENT = ("agree", "disagree", "unavailable")
REGIMES = ("convergent", "beyond radius", "asymptotic")


def _ro(a: Any, dtype: Any = None) -> np.ndarray:
    a = np.array(a, dtype=dtype)
    a.setflags(write=False)
    return a


def _jf(x: float | None) -> float | str | None:
    """JSON-safe float."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else str(x)


def _cplx(z: complex) -> list[float]:
    return [float(np.real(z)), float(np.imag(z))]


@dataclass(frozen=True)
class RadiusEstimates:
    """Radius of convergence (in λ) from each estimator; NaN = not available.

    Attributes
    ----------
    ratio : float
        Ratio test on the last coefficients (every p-th one for a period-p
        series; Hunter–Guerrieri quotient for an oscillating series).
    root : float
        Root test: slope of the upper envelope of ``log|c_k| + 1.5 log k``.
    domb_sykes : float
        Ratios extrapolated linearly in 1/k (Domb–Sykes plot).
    pade : float
        Nearest pole of the near-diagonal Padé approximant that is stable
        against the next lower one and is no Froissart doublet.
    exceptional_point : float
        Distance to the nearest exceptional point on this level's branch.
    """

    ratio: float = math.nan
    root: float = math.nan
    domb_sykes: float = math.nan
    pade: float = math.nan
    exceptional_point: float = math.nan

    def coefficient_estimates(self) -> np.ndarray:
        """(4,) array of the coefficient-based estimates (ratio, root, Domb–Sykes, Padé)."""
        return np.array([self.ratio, self.root, self.domb_sykes, self.pade])

    def to_dict(self) -> dict:
        return {k: _jf(getattr(self, k)) for k in ("ratio", "root", "domb_sykes", "pade", "exceptional_point")}


@dataclass(frozen=True, repr=False, eq=False)
class ConvergenceResult:
    """Convergence diagnosis of one level's energy series.

    Attributes
    ----------
    level : int
        Work-basis index of the level.
    label : str
    order : int
        Highest order of the series analysed.
    kind : {'convergent', 'terminating', 'asymptotic'}
        Growth class of the coefficients: geometric; exactly zero beyond some
        order (up to round-off); factorial (|c_k/c_{k-1}| growing ∝ k).
        Never 'asymptotic' for a model with ``truncated=False`` (a complete
        finite basis; see :class:`ptcheck.Model`): estimates that still shrink
        with the order give 'convergent' with a note instead.
    radius : float
        Estimated radius of convergence in λ (dimensionless): ``inf`` for a
        terminating series, ``0`` for an asymptotic one; otherwise the
        distance to the nearest exceptional point when it agrees with the
        coefficient estimates, else the smaller (more cautious) of the two;
        when the coefficient estimates are still shrinking (complete finite
        basis only): that exceptional point if one was found, else the
        smallest of the root-test, Domb–Sykes and Padé estimates; never
        below ``kato_bound``; NaN when nothing could be estimated.
    radius_uncertainty : float
        Half the spread (max - min) of the finite estimates in ``estimates``;
        NaN with fewer than two.
    estimates : RadiusEstimates
        The individual estimators.
    exceptional_points : (P,) complex ndarray, read-only
        Branch points of this level (EPs on its branch continued from λ = 0
        along straight rays), nearest first; conjugate pairs are both listed
        (positive imaginary part first).
    partners : (P,) int ndarray, read-only
        The level each EP coalesces with (work-basis index, found by
        continuing the partner back to λ = 0); -1 when it could not be told.
    ep_energies : (P,) complex ndarray, read-only
        The coalescing eigenvalue at each EP (energy units).
    kato_bound : float
        Rigorous lower bound ``d / (2 ‖V‖)`` on the radius (Kato 1966, ch. II
        §3; see the module docstring).
    isolation : float
        ``d``: distance from ``E_n^(0)`` to the other unperturbed levels.
    period : int
        p when only every p-th coefficient is nonzero in the tail (p = 2: a
        series in λ²), else 1.
    coupling : float or None
        The coupling the ``optimal_order``/``smallest_term`` refer to.
    optimal_order : int or None
        Order k of the smallest term ``|E^(k) λ^k|`` at ``coupling`` (for an
        asymptotic series: optimal truncation; the series should not be
        pushed beyond it).  For a terminating series the last nonzero order.
        None without a coupling.
    smallest_term : float
        ``|E^(optimal_order) λ^optimal_order|`` (energy units): the error
        estimate of the optimally truncated series.  0 for a terminating
        series, NaN without a coupling.
    agreement : {'agree', 'disagree', 'unavailable'}
        Whether the coefficient estimates and the singularity estimate agree
        (within :data:`AGREEMENT_RTOL`); 'unavailable' when one side is missing.
    summary : str
        Plain-words diagnosis.
    notes : tuple of str
        Numerical remarks.
    energy_coefficients : (order + 1,) ndarray, read-only
        The coefficients analysed (energy units); empty when the norms of a
        block's effective-Hamiltonian coefficients were analysed instead.
    treatment : str
        Treatment whose series was analysed (``"nondegenerate"``,
        ``"degenerate"``, ``"near-degenerate block"``, or ``"mixed"`` for a
        quantity).
    target : str
        Quantity name (or the level label).
    limiting_level : int or None
        For a quantity: the level whose radius limits it.
    level_radii : tuple of (str, float)
        For a quantity: each level's radius.
    reason : str
        Why that treatment (:mod:`ptcheck.treatment`).
    """

    level: int
    label: str
    order: int
    kind: str
    radius: float
    radius_uncertainty: float
    estimates: RadiusEstimates
    exceptional_points: np.ndarray
    partners: np.ndarray
    ep_energies: np.ndarray
    kato_bound: float
    isolation: float
    period: int
    coupling: float | None
    optimal_order: int | None
    smallest_term: float
    agreement: str
    summary: str
    notes: tuple[str, ...] = field(default=())
    energy_coefficients: np.ndarray = field(default_factory=lambda: _ro(np.zeros(0)))
    treatment: str = "nondegenerate"
    target: str = ""
    limiting_level: int | None = None
    level_radii: tuple = ()
    reason: str = ""

    def __repr__(self) -> str:
        ep = f", nearest EP {self.exceptional_points[0]:.4g}" if self.exceptional_points.size else ""
        return (
            f"ConvergenceResult(level={self.label}, {self.kind}, radius={self.radius:.4g}"
            f"{ep}, kato_bound={self.kato_bound:.3g}, agreement={self.agreement!r})"
        )

    def to_dict(self) -> dict:
        return {
            "level": self.level,
            "label": self.label,
            "order": self.order,
            "kind": self.kind,
            "radius": _jf(self.radius),
            "radius_uncertainty": _jf(self.radius_uncertainty),
            "estimates": self.estimates.to_dict(),
            "exceptional_points": [_cplx(z) for z in self.exceptional_points],
            "partners": [int(p) for p in self.partners],
            "ep_energies": [_cplx(z) for z in self.ep_energies],
            "kato_bound": _jf(self.kato_bound),
            "isolation": _jf(self.isolation),
            "period": self.period,
            "coupling": _jf(self.coupling),
            "optimal_order": self.optimal_order,
            "smallest_term": _jf(self.smallest_term),
            "agreement": self.agreement,
            "summary": self.summary,
            "notes": list(self.notes),
            "energy_coefficients": [float(c) for c in self.energy_coefficients],
            "treatment": self.treatment,
            "reason": self.reason,
            "target": self.target or self.label,
            "limiting_level": self.limiting_level,
            "level_radii": [[lab, _jf(r)] for lab, r in self.level_radii],
        }

    def _repr_html_(self) -> str:
        rows = [
            ("kind", self.kind),
            ("radius", f"{self.radius:.6g} ± {self.radius_uncertainty:.2g}"),
            ("Kato bound", f"{self.kato_bound:.6g}"),
            ("agreement", self.agreement),
        ]
        for k, v in self.estimates.to_dict().items():
            rows.append((f"estimate: {k}", v if isinstance(v, str) else f"{v:.6g}"))
        for z, p in zip(self.exceptional_points, self.partners):
            rows.append(("exceptional point", f"λ = {z:.6g} (with level {p})"))
        if self.coupling is not None:
            rows.append((f"optimal order at λ = {self.coupling:g}", f"{self.optimal_order} (smallest term {self.smallest_term:.3g})"))
        body = "".join(f"<tr><td>{html.escape(str(a))}</td><td>{html.escape(str(b))}</td></tr>" for a, b in rows)
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return (
            f"<b>Convergence of level {html.escape(self.label)}</b> (order {self.order})"
            f"<table>{body}</table><p>{html.escape(self.summary)}</p>" + (f"<ul>{notes}</ul>" if notes else "")
        )


# ---------------------------------------------------------------------- engine
def _isolation(model: Model, level: int) -> float:
    if model.n < 2:
        return math.inf
    others = np.delete(model.e0, level)
    return float(np.min(np.abs(others - model.e0[level])))


def _kato(isolation: float, norm_v: float) -> float:
    if norm_v == 0:
        return math.inf
    return isolation / (2.0 * norm_v)


def _dense_v(model: Model) -> np.ndarray:
    v = model.v
    return v.toarray() if hasattr(v, "toarray") else np.asarray(v)


def _in_sector(model: Model, level: int) -> tuple[Model, int, np.ndarray]:
    """The level's own symmetry sector: ``(sub-model, index there, parent index of each sub level)``.

    Levels of different sectors never mix, so the level's series, its
    exceptional points and Kato's bound are those of its sector alone
    (``model.restrict``); a model with one sector is its own sector.
    """
    if len(model.sectors) == 1:
        return model, level, np.arange(model.n)
    s = int(model.level_sectors[level])
    levels = np.asarray(model.sectors[s].levels, dtype=int)
    return model.restrict(s), int(np.searchsorted(levels, level)), levels


def _sector_note(model: Model, sub: Model, level: int) -> str:
    sector = model.sectors[int(model.level_sectors[level])]
    return (
        f"analysed in its symmetry sector {sector.name!r} ({sub.n} of {model.n} levels): levels of other sectors "
        "never mix with it, so they give it no exceptional point and do not enter Kato's bound"
    )


def _to_parent(r: ConvergenceResult, level: int, levels: np.ndarray, note: str) -> ConvergenceResult:
    """A result computed on a sector's sub-model, with level and partner indices of the whole model."""
    partners = np.array([levels[p] if p >= 0 else -1 for p in r.partners], dtype=int)
    return replace(r, level=level, partners=_ro(partners, int), notes=(note,) + r.notes)


def _ep_search(model: Model) -> ExceptionalPointSearch | ReducedExceptionalPointSearch:
    """The EP search for this model: dense up to EP_DENSE_LIMIT (or for dense V), reduced-basis above for sparse V."""
    if model.n > EP_DENSE_LIMIT and model.is_sparse:
        return ReducedExceptionalPointSearch(model.e0, model.v)
    return ExceptionalPointSearch(model.e0, _dense_v(model))


def _ep_guesses(
    search: ExceptionalPointSearch, level: int, ca: CoefficientAnalysis, reach: float, extra: list[tuple[complex, complex]],
    coefficients: np.ndarray,
) -> list[tuple[complex, complex | None]]:
    guesses: list[tuple[complex, complex | None]] = []
    guesses += [(z, None) for z in ca.pade_poles]  # energy: found by continuing the branch
    guesses += [(z, None) for z in branch_point_guesses(coefficients)]
    guesses += search.pair_guesses(level)
    guesses += search.crossing_guesses(level, reach, points=60 if search.n <= 50 else 25)
    guesses += extra
    # nearest first; drop exact duplicates
    guesses = [s for s in guesses if np.isfinite(s[0]) and s[0] != 0]
    guesses.sort(key=lambda s: abs(s[0]))
    out: list[tuple[complex, complex | None]] = []
    for s in guesses:
        z = complex(s[0])
        z = z if z.imag >= 0 else z.conjugate()
        e = s[1] if s[1] is None or complex(s[0]).imag >= 0 else complex(s[1]).conjugate()
        if any(abs(z - o[0]) <= 1e-3 * abs(z) for o in out):
            continue
        out.append((z, e))
    return out[:16]


def _one_blas_thread() -> Any:
    """Limit BLAS to one thread for the EP search (no-op without threadpoolctl).

    The search solves hundreds of small dense eigenproblems; on a busy machine
    multi-threaded BLAS makes each of them many times slower.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - threadpoolctl is a dependency
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def _median_finite(x: np.ndarray) -> float:
    x = x[np.isfinite(x) & (x > 0)]
    return float(np.median(x)) if x.size else math.nan


def _smallest_finite(x: np.ndarray) -> float:
    x = x[np.isfinite(x) & (x > 0)]
    return float(np.min(x)) if x.size else math.nan


def _analyse_level(
    model: Model,
    level: int,
    order: int,
    coupling: float | None,
    ep_search: str,
    search: ExceptionalPointSearch | None,
    extra_guesses: list[tuple[complex, complex]],
) -> ConvergenceResult:
    series = model.series(level, order)  # DegenerateLevelError propagates
    c = np.asarray(series.energy_coefficients, dtype=float)
    d = _isolation(model, level)
    kato = _kato(d, model.norm_v)
    ca = analyse(c, d, truncated=model.truncated)
    notes = list(ca.notes)
    # consensus of the extrapolating estimators (the plain ratio test is reported, not used);
    # estimates still shrinking with the order: the smallest of them
    ests = np.array([ca.root, ca.domb_sykes, ca.pade])
    r_coef = _smallest_finite(ests) if ca.unsettled else _median_finite(ests)

    # ---- exceptional points
    run_ep = model.n >= 2 and (ep_search == "always" or (ep_search == "auto" and model.n <= EP_DENSE_LIMIT))
    eps: list[EPCandidate] = []
    n_verified = 0
    if run_ep and ep_search == "auto" and ca.kind == "asymptotic":
        run_ep = False
        notes.append(
            "exceptional-point search skipped: the series is asymptotic, and the singularities of a truncated "
            "basis would only describe the truncation (pass ep_search='always' to run it anyway)"
        )
    elif model.n >= 2 and not run_ep:
        notes.append(
            f"exceptional-point search skipped (N = {model.n} > {EP_DENSE_LIMIT} for ep_search='auto'; "
            "pass ep_search='always' to run it: a reduced-basis search for a sparse V, the dense search otherwise)"
            if ep_search == "auto"
            else "exceptional-point search skipped (ep_search='never')"
        )
    if run_ep:
        if search is None:
            search = _ep_search(model)
        base = r_coef if np.isfinite(r_coef) else (4.0 * kato if np.isfinite(kato) else 1.0)
        reach = 2.5 * max(base, kato if np.isfinite(kato) else 0.0)
        with _one_blas_thread():  # many small dense eigenproblems: threads only add overhead
            guesses = _ep_guesses(search, level, ca, reach, extra_guesses, c)
            eps, n_verified = search.search(level, guesses, seeds=series.state_coefficients)
        if isinstance(search, ReducedExceptionalPointSearch):
            notes.append(
                f"exceptional points searched in a reduced basis (N = {model.n} with sparse V): each one is verified by "
                "its full-space residual and the path from λ = 0 is checked at four points; a nearer exceptional point "
                "that the reduced basis never represented can be missed"
            )
        unsure = [e for e in eps if e.connected is None]
        if unsure:
            notes.append(
                f"{len(unsure)} exceptional point(s) could not be followed back to λ = 0 unambiguously; "
                "they are not used for the radius"
            )
        eps = [e for e in eps if e.connected]
    r_ep = float(abs(eps[0].coupling)) if eps else (math.inf if run_ep else math.nan)

    # ---- combine
    est = RadiusEstimates(ca.ratio, ca.root, ca.domb_sykes, ca.pade, r_ep if eps else math.nan)
    agreement = "unavailable"
    if ca.kind == "terminating":
        radius = math.inf
        if run_ep:
            agreement = "disagree" if eps else "agree"
    elif ca.kind == "asymptotic":
        radius = 0.0
        if eps:
            agreement = "disagree"
    else:
        if run_ep and np.isfinite(r_coef):
            agreement = "agree" if (np.isfinite(r_ep) and abs(r_coef - r_ep) <= AGREEMENT_RTOL * r_ep) else "disagree"
        if agreement == "agree" or (ca.unsettled and eps):
            radius = r_ep  # unsettled coefficients: a verified singularity on the branch is the better radius
        elif np.isfinite(r_coef) and np.isfinite(r_ep):
            radius = min(r_coef, r_ep)
        elif np.isfinite(r_coef):
            radius = r_coef
        elif np.isfinite(r_ep):
            radius = r_ep
        else:
            radius = math.nan
        if np.isfinite(radius) and np.isfinite(kato) and radius < kato:
            if radius >= kato * (1 - 1e-8):  # equal up to round-off (e.g. a two-level system)
                radius = kato
        if np.isfinite(radius) and np.isfinite(kato) and radius < kato:
            notes.append(
                f"estimated radius {radius:.4g} lies below the rigorous Kato bound {kato:.4g}; "
                "the estimate is wrong (coefficients not yet in their large-order form) and is raised to the bound"
            )
            radius = kato
    finite = np.array([x for x in (ca.ratio, ca.root, ca.domb_sykes, ca.pade, est.exceptional_point) if np.isfinite(x)])
    spread = 0.5 * float(np.ptp(finite)) if finite.size >= 2 and ca.kind == "convergent" else math.nan

    # ---- exceptional points: both members of each conjugate pair
    pts, partners, energies = [], [], []
    for e in eps:
        pts += [e.coupling, e.coupling.conjugate()]
        partners += [e.partner, e.partner]
        energies += [e.energy, e.energy.conjugate()]

    # ---- optimal truncation at the coupling
    optimal, smallest = None, math.nan
    if coupling is not None:
        optimal, smallest, note = _optimal_truncation(c, coupling, ca)
        if note:
            notes.append(note)

    res = dict(
        level=level,
        label=model.label(level),
        order=order,
        kind=ca.kind,
        radius=float(radius),
        radius_uncertainty=spread,
        estimates=est,
        exceptional_points=_ro(pts, complex),
        partners=_ro(partners, int),
        ep_energies=_ro(energies, complex),
        kato_bound=float(kato),
        isolation=float(d),
        period=ca.period,
        coupling=coupling,
        optimal_order=optimal,
        smallest_term=float(smallest),
        agreement=agreement,
        notes=tuple(notes),
        energy_coefficients=_ro(c),
    )
    res["summary"] = _summary(model, res, r_coef, r_ep, run_ep, n_verified, ca)
    return ConvergenceResult(**res)


def _optimal_truncation(c: np.ndarray, coupling: float, ca: CoefficientAnalysis) -> tuple[int, float, str | None]:
    K = c.size - 1
    if ca.kind == "terminating":
        return int(ca.last_significant), 0.0, None
    if coupling == 0:
        return 0, 0.0, None
    ks = np.array([k for k in range(1, K + 1) if (k - ca.offset) % ca.period == 0 and k <= ca.last_significant])
    if ks.size == 0:
        return 0, 0.0, None
    with np.errstate(over="ignore"):
        terms = np.abs(c[ks]) * abs(coupling) ** ks.astype(float)
    i = int(np.argmin(terms))
    note = None
    if ks[i] == ks[-1]:
        note = (
            f"at coupling {coupling:g} the terms still decrease at the highest order computed ({ks[-1]}); "
            "the optimal order may be higher"
        )
    return int(ks[i]), float(terms[i]), note


def _summary(model: Model, r: dict, r_coef: float, r_ep: float, run_ep: bool, n_verified: int, ca: CoefficientAnalysis) -> str:
    lab = r["label"]
    K = r["order"]
    kato = r["kato_bound"]
    parts: list[str] = []
    eps = r["exceptional_points"]
    if eps.size:
        partner = r["partners"][0]
        pn = f"level {model.label(int(partner))}" if partner >= 0 else "another level"
        ep_txt = f"the nearest exceptional point on its branch is at λ ≈ {fmt_complex(eps[0], 4)} (|λ| = {abs(eps[0]):.4g}), where it meets {pn}"
    else:
        ep_txt = ""
    if r["kind"] == "terminating":
        parts.append(f"The series of level {lab} terminates: coefficients beyond order {ca.last_significant} vanish to round-off, so it is exact at that order for every coupling (radius ∞).")
        if eps.size:
            parts.append(
                f"Yet {ep_txt}: the two pictures disagree. In a truncated basis this singularity is usually a truncation artefact "
                f"(the exact branch of the finite matrix is not a polynomial) that shows up in the coefficients only beyond order {K}; enlarge the basis and see whether it moves away."
            )
    elif r["kind"] == "asymptotic":
        parts.append(
            f"The series of level {lab} is asymptotic, not convergent: the coefficient ratios grow about like k^{ca.growth_exponent:.2g} (factorial growth), so the radius of convergence is 0."
        )
        if r["coupling"] is not None and r["optimal_order"] is not None:
            parts.append(
                f"At λ = {r['coupling']:g} the smallest term is at order {r['optimal_order']} (size {r['smallest_term']:.3g}); truncate there and take that term as the error estimate. Higher orders make things worse."
            )
        if eps.size:
            parts.append(
                f"The truncated matrix itself has {ep_txt}; that finite radius belongs to the truncated basis and is expected to shrink as the basis grows, so coefficient and singularity pictures disagree."
            )
    else:
        if not np.isfinite(r["radius"]):
            parts.append(f"No radius could be estimated for level {lab} from {K} orders; only Kato's bound is available.")
        else:
            parts.append(f"The series of level {lab} converges for |λ| < {r['radius']:.4g}.")
        if ca.unsettled:
            parts.append(
                f"The coefficient estimates were still shrinking at order {K}; the model is a complete finite basis, so the "
                "series does converge, but the true radius may be smaller than estimated: check with more orders."
            )
        if r["agreement"] == "agree":
            parts.append(f"Coefficient tests (≈ {r_coef:.4g}) and the singularity picture agree: {ep_txt}.")
        elif r["agreement"] == "disagree" and ca.unsettled and eps.size:
            parts.append(
                f"Coefficient tests give ≈ {r_coef:.4g}, not yet settled, and {ep_txt}; the reported radius is that of "
                "this exceptional point, a verified singularity on the level's branch (a nearer one missed by the search "
                "would make it smaller)."
            )
        elif r["agreement"] == "disagree":
            if eps.size:
                parts.append(
                    f"Coefficient tests give ≈ {r_coef:.4g} but {ep_txt}: they do not agree. The reported radius is the smaller value."
                )
            else:
                parts.append(
                    f"Coefficient tests give ≈ {r_coef:.4g}, but the search ({n_verified} exceptional point(s) verified) found none on this level's branch: they do not agree."
                )
            parts.append(
                f"Possible reasons: the coefficients have not reached their large-order form by order {K} (ask for more orders), "
                "the search missed the nearest exceptional point, or the model is a truncated basis whose singularities are artefacts of the truncation."
            )
        elif run_ep is False:
            parts.append(f"Only coefficient tests were used (≈ {r_coef:.4g}); no singularity check was made.")
        if r["coupling"] is not None and np.isfinite(r["radius"]) and r["radius"] > 0:
            q = abs(r["coupling"]) / r["radius"]
            where = "inside" if q < 1 else "outside"
            parts.append(f"λ = {r['coupling']:g} lies {where} the disc (|λ|/radius = {q:.3g}).")
            if q >= 1:
                parts.append("There the plain series diverges; a Padé approximant or a block treatment may still work.")
    if np.isfinite(kato):
        parts.append(f"Kato's rigorous bound guarantees convergence for |λ| < {kato:.4g}.")
    parts.append("These are numerical estimates: confirm them with your own convergence checks (more orders, a larger basis, comparison with exact energies).")
    return " ".join(parts)


# ---------------------------------------------------------------------- public
def convergence(
    m: Model,
    level: Any,
    order: int = 40,
    *,
    coupling: float | None = None,
    ep_search: str = "auto",
    treatment: str = DEFAULT_TREATMENT,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
) -> ConvergenceResult:
    """Radius of convergence, exceptional points and growth class of a level's series.

    Parameters
    ----------
    m : Model
    level : int or label
        Energy rank of the unperturbed level or its label.
    order : int, default 40
        Highest order of the Rayleigh–Schrödinger series analysed (>= 2;
        the estimators need ~10 or more).
    coupling : float, optional
        Coupling λ at which the optimal truncation order and smallest term
        are reported (and placed relative to the radius in ``summary``).
    ep_search : {'auto', 'always', 'never'}
        Exceptional-point search: 'auto' runs it for N <= :data:`EP_DENSE_LIMIT`
        (dense); 'always' also above, as a reduced-basis search when V is
        stored sparse (only products with V; tens of seconds for a
        2^14-state chain) and densely otherwise.
    treatment : {'standard', 'nondegenerate', 'block', 'auto'}, default 'standard'
        Which series is analysed (:mod:`ptcheck.treatment`): by default the
        Rayleigh–Schrödinger series of a non-degenerate level, and for a level
        in an exactly degenerate group the Taylor series of its branch of the
        group's effective Hamiltonian (good states at the splitting order).
        'block'/'auto' analyse a near-degenerate block's effective Hamiltonian
        (root test on ‖H_eff^(k)‖, Kato's bound for the block) for a level in
        a near-degenerate cluster at ``coupling``.
    threshold : float
        Mixing-ratio threshold for clusters (:mod:`ptcheck.degeneracy`).

    A :class:`~ptcheck.quantities.Quantity` may be given instead of a level:
    its radius is the smallest among its levels, and ``limiting_level`` /
    ``level_radii`` say which level limits it.

    Returns
    -------
    ConvergenceResult

    Raises
    ------
    DegenerateLevelError
        The level is exactly degenerate (use the block treatment).

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([0.0, 1.0]), [[0, 0.25], [0.25, 0]])
    >>> r = convergence(m, 0, 30)
    >>> np.round(r.exceptional_points.imag, 6)       # closed form: λ = ±iΔ/(2|v|)
    array([ 2., -2.])
    """
    require_model(m, "convergence")
    order = val.check_order(order, n=m.n, minimum=2)
    if coupling is not None:
        coupling = val.as_coupling(coupling)
    ep_search = val.check_choice(ep_search, "ep_search", EP_SEARCH)
    settings = CheckSettings(treatment=treatment, threshold=threshold, coupling=coupling)
    if isinstance(level, Quantity):
        return _analyse_quantity(m, level, order, coupling, ep_search, settings.treatment, settings.threshold)
    n = m.level_index(level)
    if settings.treatment == "nondegenerate":
        return _analyse_in_sector(m, n, order, coupling, ep_search)  # DegenerateLevelError for a degenerate level
    (e,) = expansions(m, [n], order, settings=settings)
    if e.treatment == NONDEGENERATE:
        return replace(_analyse_in_sector(m, n, order, coupling, ep_search), reason=e.reason)
    return _analyse_effective(m, n, order, coupling, e)


def _analyse_in_sector(
    m: Model, n: int, order: int, coupling: float | None, ep_search: str,
    searches: dict | None = None, extra_guesses: list | None = None,
) -> ConvergenceResult:
    """:func:`_analyse_level` on the level's own sector; ``searches`` caches one EP search per sector."""
    sub, k, levels = _in_sector(m, n)
    search = None
    if searches is not None:
        s = int(m.level_sectors[n])
        run_ep = sub.n >= 2 and (ep_search == "always" or (ep_search == "auto" and sub.n <= EP_DENSE_LIMIT))
        if run_ep and s not in searches:
            searches[s] = _ep_search(sub)
        search = searches.get(s)
    r = _analyse_level(sub, k, order, coupling, ep_search, search, list(extra_guesses or []))
    if sub is m:
        return r
    return _to_parent(r, n, levels, _sector_note(m, sub, n))


def _analyse_effective(m: Model, n: int, order: int, coupling: float | None, e: Any) -> ConvergenceResult:
    """A level treated with an effective Hamiltonian (degenerate group or near-degenerate block).

    Degenerate group with a resolved branch: the coefficient tests on the
    branch's Taylor series.  Otherwise: the root test on ‖H_eff^(k)‖.  Kato's
    bound is that of the group/block as a whole (its total projection), not
    of one branch inside it.
    """
    levels = list(e.group)
    sub, _, sector_levels = _in_sector(m, n)  # the group lies in one sector: Kato's bound of that sector
    inside = np.isin(sector_levels, levels)
    e_in, e_out = m.e0[sector_levels[inside]], m.e0[sector_levels[~inside]]
    d = float(np.min(np.abs(e_out[:, None] - e_in[None, :]))) if e_out.size else math.inf
    kato = _kato(d, sub.norm_v)
    label = m.label(n)
    names = ", ".join(m.label(i) for i in levels)
    branch = e.treatment == DEGENERATE and e.energy_coefficients is not None
    if branch:
        c = np.asarray(e.energy_coefficients, dtype=float)
        ca = analyse(c, d if np.isfinite(d) else 1.0, truncated=m.truncated)
        what = f"the Taylor series of its branch of the degenerate group ({names})"
    else:
        c = np.array([np.linalg.norm(e.term(1.0, k)) for k in range(order + 1)])
        ca = analyse(c, d if np.isfinite(d) else 1.0, truncated=m.truncated)
        what = f"the effective Hamiltonian of the {e.treatment} ({names}) (root test on ‖H_eff^(k)‖)"
    ests = np.array([ca.root, ca.domb_sykes] + ([ca.pade] if branch else []))
    if ca.kind == "terminating":
        radius = math.inf
    elif ca.kind == "asymptotic":
        radius = 0.0
    elif ca.unsettled:  # estimates still shrinking (complete finite basis): the smallest
        # (Kato's bound here is the group's, not a branch's: no floor)
        radius = _smallest_finite(ests)
    else:
        radius = _median_finite(ests)
    fin = ests[np.isfinite(ests)]
    spread = 0.5 * float(np.ptp(fin)) if fin.size >= 2 and ca.kind == "convergent" else math.nan
    opt, smallest = None, math.nan
    note = None
    if coupling is not None:
        if branch:
            opt, smallest, note = _optimal_truncation(c, coupling, ca)
        elif ca.kind == "asymptotic":
            k = np.arange(order + 1)
            terms = c[1:] * abs(coupling) ** k[1:]
            j = int(np.argmin(terms))
            opt, smallest = j + 1, float(terms[j])
    if ca.kind == "asymptotic":
        body = (f"Level {label}: {what} grows factorially with the order: an asymptotic series (radius 0); adding "
                "orders helps only up to the optimal order.")
        if opt is not None:
            body += f" At λ = {coupling:g} the smallest term is at order {opt} (size {smallest:.3g})."
    elif ca.kind == "terminating":
        body = f"Level {label}: {what} terminates: no radius limit."
    elif np.isfinite(radius):
        body = f"Level {label}: {what} gives a radius ≈ {radius:.4g}."
        if ca.unsettled:
            body += " The estimates were still shrinking with the order, so the radius may be smaller: check with more orders."
        if coupling is not None:
            body += f" λ = {coupling:g} lies {'inside' if abs(coupling) < radius else 'outside'} that disc."
    else:
        body = f"Level {label}: no radius could be estimated from {what} at order {order}."
    summary = (
        body + f" Kato's rigorous bound for the group/block as a whole (gap {d:.3g} to the other levels) guarantees "
        f"convergence of its effective Hamiltonian for |λ| < {kato:.4g}. The exceptional-point search runs for "
        "non-degenerate levels only. These are numerical estimates: confirm them with your own convergence checks "
        "(more orders, a larger basis)."
    )
    est = RadiusEstimates(ratio=ca.ratio, root=ca.root, domb_sykes=ca.domb_sykes, pade=ca.pade if branch else math.nan)
    notes = tuple(ca.notes) + ((note,) if note else ())
    if sub is not m:
        notes = (_sector_note(m, sub, n),) + notes
    return ConvergenceResult(
        level=n, label=label, order=order, kind=ca.kind, radius=float(radius), radius_uncertainty=spread,
        estimates=est, exceptional_points=_ro(np.zeros(0, complex)), partners=_ro(np.zeros(0, int)),
        ep_energies=_ro(np.zeros(0, complex)), kato_bound=float(kato), isolation=float(d), period=int(ca.period),
        coupling=coupling, optimal_order=opt, smallest_term=smallest, agreement="unavailable", summary=summary,
        notes=notes, energy_coefficients=_ro(c if branch else np.zeros(0)), treatment=e.treatment, reason=e.reason,
    )


def _analyse_quantity(m: Model, q: Quantity, order: int, coupling: float | None, ep_search: str,
                      treatment: str, threshold: float) -> ConvergenceResult:
    """A derived quantity converges where all its levels do: radius = the smallest of theirs."""
    levels = list(q.resolve(m))
    if not levels:
        raise ValueError(f"quantity {q.name!r} has no level with a nonzero weight")
    per = [convergence(m, n, order, coupling=coupling, ep_search=ep_search, treatment=treatment, threshold=threshold)
           for n in levels]
    radii = np.array([r.radius for r in per])
    j = int(np.nanargmin(np.where(np.isnan(radii), np.inf, radii))) if np.any(np.isfinite(radii) | np.isinf(radii)) else 0
    lim = per[j]
    kinds = {r.kind for r in per}
    kind = "asymptotic" if "asymptotic" in kinds else ("convergent" if "convergent" in kinds else "terminating")
    level_radii = tuple((r.label, float(r.radius)) for r in per)
    listing = ", ".join(f"{lab}: {rad:.4g}" for lab, rad in level_radii)
    summary = (
        f"{q.name} combines levels ({listing}); it converges where all of them do, so its radius is "
        f"{lim.radius:.4g}, limited by level {lim.label}. (Singularities can cancel in a combination, so the "
        "quantity's own series may converge further; this is the safe bound.) Limiting level: " + lim.summary
    )
    notes = tuple(dict.fromkeys(n for r in per for n in r.notes))
    return replace(
        lim, kind=kind, summary=summary, target=q.name, label=q.name, limiting_level=lim.level,
        level_radii=level_radii, notes=notes,
        treatment=lim.treatment if len({r.treatment for r in per}) == 1 else "mixed",
    )


@dataclass(frozen=True, repr=False, eq=False)
class DivergenceMap:
    """Convergence discs, exceptional points and regimes of several levels.

    Attributes
    ----------
    levels : (L,) int ndarray, read-only
    labels : tuple of str
    order : int
        Series order analysed.
    couplings : (C,) ndarray, read-only
        Real coupling grid.
    radius, radius_uncertainty, kato_bound : (L,) ndarray, read-only
        Per level, as in :class:`ConvergenceResult`.
    kinds : tuple of str
    exceptional_points : tuple of (P_l,) complex ndarray
        Per level, nearest first.
    partners : tuple of (P_l,) int ndarray
    regime : (L, C) str ndarray, read-only
        'convergent' (|λ| < radius), 'beyond radius' (|λ| >= radius) or
        'asymptotic' (factorially divergent series: no convergent region).
        Where the radius is unknown (NaN) only |λ| < kato_bound is marked
        'convergent'.
    orders : tuple of str
        Names of the order specs whose validity boundaries were computed.
    boundaries : (L, O) ndarray, read-only
        ``ptcheck.compare.validity_boundary(...).coupling`` per level and
        order spec (NaN where it failed; see ``notes``).
    results : tuple of ConvergenceResult
    notes : tuple of str
    """

    levels: np.ndarray
    labels: tuple[str, ...]
    order: int
    couplings: np.ndarray
    radius: np.ndarray
    radius_uncertainty: np.ndarray
    kato_bound: np.ndarray
    kinds: tuple[str, ...]
    exceptional_points: tuple[np.ndarray, ...]
    partners: tuple[np.ndarray, ...]
    regime: np.ndarray
    orders: tuple[str, ...]
    boundaries: np.ndarray
    results: tuple[ConvergenceResult, ...]
    notes: tuple[str, ...] = ()

    def __repr__(self) -> str:
        r = ", ".join(f"{lab}: {x:.3g}" for lab, x in zip(self.labels, self.radius))
        return f"DivergenceMap({len(self.labels)} levels, radius [{r}], {self.couplings.size} couplings)"

    def to_dict(self) -> dict:
        return {
            "levels": [int(x) for x in self.levels],
            "labels": list(self.labels),
            "order": self.order,
            "couplings": [float(x) for x in self.couplings],
            "radius": [_jf(x) for x in self.radius],
            "radius_uncertainty": [_jf(x) for x in self.radius_uncertainty],
            "kato_bound": [_jf(x) for x in self.kato_bound],
            "kinds": list(self.kinds),
            "exceptional_points": [[_cplx(z) for z in e] for e in self.exceptional_points],
            "partners": [[int(p) for p in q] for q in self.partners],
            "regime": [list(map(str, row)) for row in self.regime],
            "orders": list(self.orders),
            "boundaries": [[_jf(x) for x in row] for row in self.boundaries],
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        head = "<tr><th>level</th><th>kind</th><th>radius</th><th>Kato bound</th><th>nearest EP</th>" + "".join(
            f"<th>boundary {html.escape(o)}</th>" for o in self.orders
        ) + "</tr>"
        rows = ""
        for i, lab in enumerate(self.labels):
            ep = f"{self.exceptional_points[i][0]:.4g}" if self.exceptional_points[i].size else "–"
            b = "".join(f"<td>{x:.4g}</td>" for x in self.boundaries[i])
            rows += (
                f"<tr><td>{html.escape(lab)}</td><td>{self.kinds[i]}</td><td>{self.radius[i]:.4g}</td>"
                f"<td>{self.kato_bound[i]:.4g}</td><td>{ep}</td>{b}</tr>"
            )
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return f"<b>Divergence map</b> (order {self.order})<table>{head}{rows}</table>" + (f"<ul>{notes}</ul>" if notes else "")


def divergence_map(
    m: Model,
    levels: Any,
    *,
    order: int = 40,
    couplings: Any = None,
    orders: Any = None,
    tol: float | None = None,
    rtol: float | None = None,
    ep_search: str = "auto",
) -> DivergenceMap:
    """Convergence discs, exceptional points and regimes of several levels.

    Parameters
    ----------
    m : Model
    levels : level key or sequence of them
    order : int, default 40
        Series order analysed per level.
    couplings : (C,) array_like, optional
        Real couplings for ``regime``.  Default: 201 points on
        ``[0, 2 x largest finite radius]`` (``[0, 1]`` if there is none).
    orders : order spec or sequence, optional
        If given, the validity boundary of each (level, order) is computed
        with ``ptcheck.compare.validity_boundary(m, level, order, tol=tol,
        rtol=rtol, treatment="nondegenerate")`` (exactly one of ``tol``/``rtol``
        is needed then): the boundary of the plain Rayleigh–Schrödinger series
        whose divergence this map describes, positive couplings.
    tol, rtol : float, optional
        Tolerance passed to ``validity_boundary``.
    ep_search : {'auto', 'always', 'never'}

    Returns
    -------
    DivergenceMap
    """
    if not isinstance(m, Model):
        raise TypeError(f"m must be a ptcheck Model; got {type(m).__name__}")
    keys = val.as_sequence(levels)
    if not keys:
        raise ValueError("levels is empty; give at least one level")
    idx = [m.level_index(k) for k in keys]
    if len(set(idx)) != len(idx):
        raise ValueError(f"levels contains duplicates: {list(keys)!r}")
    order = val.check_order(order, n=m.n, minimum=2)
    ep_search = val.check_choice(ep_search, "ep_search", EP_SEARCH)
    specs: tuple = ()
    if orders is not None:
        from .approximants import order_name, parse_orders

        specs = parse_orders(orders)
        if (tol is None) == (rtol is None):
            raise ValueError(f"give exactly one of tol and rtol for the validity boundaries; got tol={tol!r}, rtol={rtol!r}")
        if tol is not None:
            tol = float(val.check_positive(tol, "tol"))
        if rtol is not None:
            rtol = float(val.check_positive(rtol, "rtol"))
    grid = None if couplings is None else val.as_couplings(couplings)

    searches: dict[int, Any] = {}  # one EP search per sector, shared by its levels
    results: list[ConvergenceResult] = []
    known: dict[int, list[tuple[complex, complex]]] = {}  # EPs found so far, per sector (guesses for the next level)
    for n in idx:
        s = int(m.level_sectors[n])
        r = _analyse_in_sector(m, n, order, None, ep_search, searches, known.get(s, []))
        results.append(r)
        known.setdefault(s, []).extend((z, e) for z, e in zip(r.exceptional_points, r.ep_energies) if z.imag > 0)

    radius = np.array([r.radius for r in results])
    kato = np.array([r.kato_bound for r in results])
    if grid is None:
        fin = radius[np.isfinite(radius) & (radius > 0)]
        top = 2.0 * float(np.max(fin)) if fin.size else 1.0
        grid = np.linspace(0.0, top, 201)
    regime = np.empty((len(idx), grid.size), dtype="<U13")
    for i, r in enumerate(results):
        if r.kind == "asymptotic":
            regime[i] = "asymptotic"
            continue
        lim = r.radius if np.isfinite(r.radius) or r.radius == math.inf else r.kato_bound
        regime[i] = np.where(np.abs(grid) < lim, "convergent", "beyond radius")

    notes: list[str] = []
    bounds = np.full((len(idx), len(specs)), np.nan)
    names: tuple[str, ...] = ()
    if specs:
        from .compare import validity_boundary  # lazy: compare sits beside this module

        names = tuple(order_name(s) for s in specs)
        for i, n in enumerate(idx):
            for j, s in enumerate(specs):
                try:
                    b = validity_boundary(m, n, s, tol=tol, rtol=rtol, treatment="nondegenerate")
                except ValueError as exc:  # e.g. a degenerate level for this order
                    notes.append(f"validity boundary of level {m.label(n)}, {names[j]} failed: {exc}")
                    continue
                bounds[i, j] = float(b.coupling)
    return DivergenceMap(
        levels=_ro(idx, int),
        labels=tuple(m.label(n) for n in idx),
        order=order,
        couplings=_ro(grid, float),
        radius=_ro(radius, float),
        radius_uncertainty=_ro([r.radius_uncertainty for r in results], float),
        kato_bound=_ro(kato, float),
        kinds=tuple(r.kind for r in results),
        exceptional_points=tuple(r.exceptional_points for r in results),
        partners=tuple(r.partners for r in results),
        regime=_ro(regime),
        orders=names,
        boundaries=_ro(bounds, float),
        results=tuple(results),
        notes=tuple(notes),
    )
