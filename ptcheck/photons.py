"""Validity boundary against photon number, for a qubit coupled to a resonator.

Dispersive readout is designed with a photon budget: how many photons can the
resonator hold before the perturbative (dispersive) formulas stop describing
the qubit?  The number usually quoted is the critical photon number of the
dispersive approximation,

    n_crit = Δ² / (4 g²),     Δ = ω_q − ω_r,

(Blais, Huang, Wallraff, Girvin & Schoelkopf, Phys. Rev. A 69, 062320 (2004),
Sec. III), a scale at which the expansion in g√n/Δ fails.  :func:`photon_boundaries`
answers the question for the model at hand: for each photon number n it finds
the validity boundary λ*_n (:func:`ptcheck.compare.validity_boundary`) of the
qubit transition ``E|1,n⟩ − E|0,n⟩`` (or of the dispersive shift in the
n-photon manifold) at the order asked for, and puts n_crit beside it.

The model must be a product model with labels ``(q, n)``: qubit index first,
resonator photon number second (``kerr_qubit_resonator``, ``jaynes_cummings``,
``rabi``).  Δ and g are read from the model: Δ = E⁰|1,0⟩ − E⁰|0,1⟩ and
g = |V between |1,0⟩ and |0,1⟩| (energy units at λ = 1); at coupling λ the
coupling is λg, so n_crit(λ) = Δ² / (4 λ² g²) and the photon number n has
reached it at λ_crit(n) = |Δ| / (2 g √n).
"""

from __future__ import annotations

import html
import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import _validation as val
from ._progress import ProgressCallback, report_progress
from .approximants import order_name, parse_order
from .compare import validity_boundary
from .maps import _single_thread_blas
from .model import Model
from .quantities import Quantity, combination, stark_shift

__all__ = ["PhotonBoundaries", "photon_boundaries", "PHOTON_QUANTITIES", "HEADROOM"]

#: What :func:`photon_boundaries` can follow against n.
PHOTON_QUANTITIES = ("transition", "dispersive_shift")

#: Fock states kept free above the highest level used by default (truncation headroom).
HEADROOM = 2


def _ro(a: Any, dtype: Any = float) -> np.ndarray:
    a = np.array(a, dtype=dtype)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, repr=False, eq=False)
class PhotonBoundaries:
    """Validity boundary of one order against photon number, beside n_crit.

    Attributes
    ----------
    model_name : str
    quantity : str
        ``"transition"``: the qubit transition ``E|1,n⟩ − E|0,n⟩`` in the
        n-photon manifold, judged relative to its shift from ω_q (or
        absolutely); ``"dispersive_shift"``: χ_n = ½[(E|1,n+1⟩ − E|1,n⟩) −
        (E|0,n+1⟩ − E|0,n⟩)], judged relative to its value.
    order : int or Pade
    tol, rtol : float or None
        The tolerance (absolute, energy units; or relative).
    photons : (P,) int ndarray
        Photon numbers n checked.
    boundary : (P,) ndarray
        Signed validity boundary λ*_n (``inf``: not reached within the search;
        NaN: ill defined or failed, see ``status``/``notes``).
    status : tuple of str
        ``ValidityBoundary.status`` per n (``"error"`` if the search failed).
    exact_solves : (P,) int ndarray
    coupling : float
        The coupling of interest λ (dimensionless; λ = 1: the model's own g).
    detuning : float
        Δ = E⁰|1,0⟩ − E⁰|0,1⟩ (energy units).
    g : float
        |V| between |1,0⟩ and |0,1⟩ (energy units, at λ = 1).
    n_crit : float
        Δ² / (4 λ² g²) at ``coupling`` (Blais et al. 2004); ``inf`` at λ = 0.
    critical_coupling : (P,) ndarray
        λ_crit(n) = |Δ| / (2 g √n): the coupling at which n reaches n_crit
        (``inf`` for n = 0).
    n_valid : int or None
        Largest n such that the order meets the tolerance at ``coupling`` for
        every photon number checked up to n; None when it fails already at
        the first.  Beyond the largest n checked nothing is known.
    notes : tuple of str
    """

    model_name: str
    quantity: str
    order: Any
    tol: float | None
    rtol: float | None
    photons: np.ndarray
    boundary: np.ndarray
    status: tuple
    exact_solves: np.ndarray
    coupling: float
    detuning: float
    g: float
    n_crit: float
    critical_coupling: np.ndarray
    n_valid: int | None
    notes: tuple = field(default=())

    @property
    def tolerance(self) -> float:
        """The tolerance value (``tol`` or ``rtol``)."""
        return self.rtol if self.rtol is not None else self.tol

    def summary(self) -> str:
        """One sentence: up to which photon number the order holds at the coupling, and n_crit."""
        tol = f"{100 * self.rtol:.3g} %" if self.rtol is not None else f"{self.tol:.3g} (absolute)"
        what = "the qubit transition" if self.quantity == "transition" else "the dispersive shift"
        top = int(self.photons[-1]) if self.photons.size else 0
        if self.n_valid is None:
            head = f"At λ = {self.coupling:g}, {order_name(self.order)} misses {tol} for {what} already at n = {int(self.photons[0])}"
        elif self.n_valid >= top:
            head = f"At λ = {self.coupling:g}, {order_name(self.order)} meets {tol} for {what} for every n checked (n ≤ {top})"
        else:
            head = f"At λ = {self.coupling:g}, {order_name(self.order)} meets {tol} for {what} up to n = {self.n_valid} photons"
        return f"{head}; the dispersive critical photon number is n_crit = Δ²/(4g²) = {self.n_crit:.3g}."

    def __repr__(self) -> str:
        return (f"PhotonBoundaries({self.model_name!r}, {self.quantity}, {order_name(self.order)}, "
                f"n = {int(self.photons[0])}…{int(self.photons[-1])}, n_valid={self.n_valid}, n_crit={self.n_crit:.3g})")

    def to_dict(self) -> dict:
        def f(x: float) -> float | str:
            return float(x) if math.isfinite(x) else str(float(x))

        from ._format import order_json

        return {
            "model": self.model_name, "quantity": self.quantity, "order": order_json(self.order),
            "tol": self.tol, "rtol": self.rtol, "photons": [int(n) for n in self.photons],
            "boundary": [f(b) for b in self.boundary], "status": list(self.status),
            "exact_solves": [int(x) for x in self.exact_solves], "coupling": self.coupling,
            "detuning": self.detuning, "g": self.g, "n_crit": f(self.n_crit),
            "critical_coupling": [f(x) for x in self.critical_coupling], "n_valid": self.n_valid,
            "summary": self.summary(), "notes": list(self.notes),
        }

    def to_markdown(self) -> str:
        """A section for a Markdown report: λ*_n and λ_crit(n) per photon number."""
        rows = "\n".join(
            f"| {int(n)} | {_fmt(b)} | {_fmt(c)} | {s} |"
            for n, b, c, s in zip(self.photons, self.boundary, self.critical_coupling, self.status)
        )
        return (f"## Validity against photon number\n\n{self.summary()}\n\n"
                f"| n | λ*_n | λ_crit(n) = \\|Δ\\|/(2g√n) | status |\n|---|---|---|---|\n{rows}\n")

    def _repr_html_(self) -> str:
        rows = "".join(f"<tr><td>{int(n)}</td><td>{_fmt(b)}</td><td>{_fmt(c)}</td><td>{html.escape(s)}</td></tr>"
                       for n, b, c, s in zip(self.photons, self.boundary, self.critical_coupling, self.status))
        return (f"<b>{html.escape(self.summary())}</b><table><tr><th>n</th><th>λ*_n</th><th>λ_crit(n)</th>"
                f"<th>status</th></tr>{rows}</table>")


def _fmt(x: float) -> str:
    if math.isnan(x):
        return "—"
    if math.isinf(x):
        return "not reached" if x > 0 else "−∞"
    return f"{abs(x):.4g}"


def _target(quantity: str, n: int, units: str) -> Quantity:
    if quantity == "transition":
        return stark_shift((1, n), (0, n), name=f"qubit transition, n = {n}", units=units)
    return combination(f"χ, n = {n}", {(1, n + 1): 0.5, (1, n): -0.5, (0, n + 1): -0.5, (0, n): 0.5}, units=units)


def photon_boundaries(
    model: Model,
    order: Any = 2,
    *,
    tol: float | None = None,
    rtol: float | None = None,
    photons: Any = None,
    quantity: str = "transition",
    coupling: float = 1.0,
    treatment: str = "nondegenerate",
    backend: str = "auto",
    max_coupling: float | None = None,
    units: str = "",
    progress: ProgressCallback | None = None,
    executor: Any = None,
    suggestions: bool = True,
) -> PhotonBoundaries:
    """Validity boundary of one order against the resonator photon number n, with n_crit beside it.

    Parameters
    ----------
    model : Model
        Qubit–resonator product model, labels ``(q, n)`` (qubit first).
    order : int, Pade or str, default 2
        The order judged (2: the dispersive formulas).
    tol, rtol : float, optional
        Absolute (energy units) or relative tolerance; at most one; default
        ``rtol = 0.01``.  Relative to the transition's shift from ω_q, or to
        the dispersive shift's value.
    photons : sequence of int, optional
        Photon numbers to check.  Default: 0, 1, ... up to the highest n whose
        levels stay :data:`HEADROOM` Fock states below the truncation.
    quantity : {"transition", "dispersive_shift"}
    coupling : float, default 1.0
        Coupling of interest λ (λ = 1: the model's own g) for ``n_valid`` and ``n_crit``.
    treatment : str, default "nondegenerate"
        Perturbative treatment judged.  The dispersive formulas are the
        non-degenerate (Rayleigh–Schrödinger) series, so that is the default;
        "auto" would switch to a block treatment where |1,n⟩ and |0,n+1⟩ mix
        strongly, and then judge that instead.
    backend : str
        Exact solver, as for :func:`ptcheck.compare.validity_boundary`.
    max_coupling : float, optional
        Largest |λ| searched.
    units : str
        Energy unit for the targets' names (e.g. "GHz").
    progress : callable(done, total), optional
    executor : concurrent.futures.Executor, optional
        Search the photon numbers as independent tasks there (e.g. a process
        pool); the result is the same as without.  Default: one after the
        other in this process.
    suggestions : bool, default True
        Where a near-degenerate partner limits the series at some n, add to
        ``notes`` the boundary of the near-degenerate block that would treat
        them together (:attr:`ValidityBoundary.suggestions`).  Each costs one
        more search with that treatment (several times the cost of the
        default search); ``False`` keeps only the boundaries asked for and the
        near-degeneracy warnings (which name the partner and the treatment).

    Returns
    -------
    PhotonBoundaries

    Examples
    --------
    >>> from ptcheck.models import jaynes_cummings
    >>> pb = photon_boundaries(jaynes_cummings(n_photons=8), 2, photons=[0, 1, 2])
    >>> pb.photons.tolist(), round(pb.n_crit, 3)
    ([0, 1, 2], 25.0)
    """
    if not isinstance(model, Model):
        raise TypeError(f"model must be a ptcheck Model; got {type(model).__name__}")
    val.check_choice(quantity, "quantity", PHOTON_QUANTITIES)
    if not model.dims or len(model.dims) != 2:
        raise ValueError(
            f"photon_boundaries needs a qubit–resonator product model with labels (q, n); got dims {model.dims!r} "
            f"for model {model.name!r}"
        )
    if tol is not None and rtol is not None:
        raise ValueError(f"give tol or rtol, not both; got tol={tol!r}, rtol={rtol!r}")
    if tol is None and rtol is None:
        rtol = 0.01
    thr = float(val.check_positive(rtol if rtol is not None else tol, "rtol" if rtol is not None else "tol"))
    tol, rtol = (None, thr) if rtol is not None else (thr, None)
    spec = parse_order(order)
    lam = val.as_coupling(coupling)
    n_max_states = int(model.dims[1])
    extra = 1 if quantity == "dispersive_shift" else 0
    if photons is None:
        top = max(0, n_max_states - 1 - HEADROOM - extra)
        photons = list(range(0, top + 1))
    else:
        photons = [val.check_int(n, "photon number", minimum=0) for n in val.as_sequence(photons)]
        if not photons:
            raise ValueError("photons is empty; give at least one photon number")
        too_big = [n for n in photons if n + extra > n_max_states - 1]
        if too_big:
            raise ValueError(
                f"photon numbers {too_big} need Fock states beyond the {n_max_states} kept (n_photons = {n_max_states}); "
                "enlarge the resonator basis"
            )
    photons = sorted(set(photons))
    e_q = model.level_index((1, 0))
    e_r = model.level_index((0, 1))
    detuning = float(model.e0[e_q] - model.e0[e_r])
    g = float(abs(model.v_element(e_q, e_r)))
    if g == 0:
        raise ValueError(f"model {model.name!r} has no coupling between |1,0⟩ and |0,1⟩ (V element 0): no g to quote")
    notes: list[str] = []
    jobs = [(model, _target(quantity, n, units), spec, tol, rtol, treatment, backend, max_coupling, lam, bool(suggestions))
            for n in photons]
    if executor is None:
        found = []
        for k, job in enumerate(jobs):
            found.append(_photon_job(job))
            report_progress(progress, k + 1, len(jobs))
    else:
        futures = [executor.submit(_photon_job, job) for job in jobs]
        found = []
        for k, f in enumerate(futures):
            found.append(f.result())
            report_progress(progress, k + 1, len(jobs))
    bounds = [f[0] for f in found]
    status = [f[1] for f in found]
    solves = [f[2] for f in found]
    for n, f in zip(photons, found):
        notes.extend(f"n = {n}: {x}" for x in f[3])
    top_used = max(photons) + 1 + extra
    if top_used > n_max_states - 1 - HEADROOM:
        notes.append(
            f"Levels up to {top_used} photons are within {HEADROOM} Fock states of the truncation (n_photons = "
            f"{n_max_states}): check that they are converged (ptcheck.models.truncation_check)."
        )
    for i, n in enumerate(photons):  # an isolated failure at λ → 0 between valid neighbours: say what it likely is
        if status[i] == "fails_at_zero" and any(status[j] == "found" and abs(bounds[j]) > 0
                                                 for j in (i - 1, i + 1) if 0 <= j < len(photons)):
            notes.append(
                f"n = {n}: reported to fail at any nonzero coupling while its neighbours hold to finite λ*; likely "
                "round-off in the exact shift at tiny λ (the levels' absolute energies are large). Check it with an "
                "absolute tolerance (tol=...)."
            )
    n_valid = None
    for n, b, s in zip(photons, bounds, status):
        ok = s == "not_reached" or (s == "found" and abs(b) > abs(lam))
        if not ok:
            break
        n_valid = n
    with np.errstate(divide="ignore"):
        crit = np.array([abs(detuning) / (2 * g * math.sqrt(n)) if n > 0 else math.inf for n in photons])
    n_crit = detuning**2 / (4 * (lam * g) ** 2) if lam != 0 else math.inf
    return PhotonBoundaries(
        model_name=model.name, quantity=quantity, order=spec, tol=tol, rtol=rtol, photons=_ro(photons, int),
        boundary=_ro(bounds), status=tuple(status), exact_solves=_ro(solves, int), coupling=lam, detuning=detuning,
        g=g, n_crit=float(n_crit), critical_coupling=_ro(crit), n_valid=n_valid, notes=tuple(dict.fromkeys(notes)),
    )


def _photon_job(job: tuple) -> tuple:
    """:func:`_boundary` of one photon number (module level: a worker process can run it)."""
    with _single_thread_blas():  # many small diagonalisations: one BLAS thread is faster and steadier
        return _boundary(*job)


def _boundary(model, target, spec, tol, rtol, treatment, backend, max_coupling, lam, suggestions):
    """(λ*, status, exact solves, notes) of one photon number.

    A failed search is reported, not raised; warnings of the search (e.g. a
    forced non-degenerate series near a degeneracy) become notes.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            b = validity_boundary(model, target, spec, tol=tol, rtol=rtol, treatment=treatment, backend=backend,
                                  max_coupling=max_coupling, coupling=lam if lam != 0 else None,
                                  suggestions=suggestions)
            out = (float(b.coupling), b.status, int(b.exact_solves), tuple(b.notes[1:]))  # [0]: generic truncation note
        except (ValueError, ArithmeticError) as exc:
            out = (math.nan, "error", 0, (f"{type(exc).__name__}: {exc}",))
    extra = tuple(f"{w.category.__name__}: {w.message}" for w in caught)
    return out[:3] + (out[3] + extra,)
