"""The full check of one model, and its report (JSON, CSV, Markdown + figures).

:func:`run_check` answers "can I trust order k at my coupling λ?" for each
level or derived quantity: it compares perturbative and exact values
(:func:`ptcheck.compare.compare`), finds the validity boundary of every order
asked for (:func:`ptcheck.compare.validity_boundary`), diagnoses the
convergence of each level's series (:func:`ptcheck.convergence.convergence`),
lists near-degenerate pairs at λ and, for a built-in model with a truncation
parameter, checks the truncation.  The result is a :class:`CheckReport`.

:func:`write_report` writes it to a directory:

- ``report.json``: everything, machine-readable (ptcheck version, all settings);
- ``comparison.csv`` (one row per target × order × coupling) and
  ``boundaries.csv`` (one row per target × order);
- ``report.md``: the verdict in plain words, the cautions, tables, and the
  figures (PNG files beside it).

The folder is written as a whole (a fresh sibling folder swapped in at the
end: never a mix of old and new files), one writer at a time; a different
existing report is never replaced unless ``force=True``.
"""

from __future__ import annotations

import csv
import html
import io
import json
import math
import platform
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from . import _validation as val
from ._atomic import (
    ReportBusyError,
    ReportExistsError,
    ReportFolderError,
    check_target,
    folder_state,
    write_folder,
)
from ._progress import ProgressCallback, report_progress
from ._format import clean_complex, order_from_name, order_json
from .approximants import Pade, order_name, parse_orders
from .compare import TRUNCATION_NOTE, ComparisonResult, ValidityBoundary, compare, validity_boundary
from .treatment import DEFAULT_TREATMENT, EXACT_IN_SECTOR, NEAR_DEGENERATE, CheckSettings, require_model
from .degeneracy import DEFAULT_MIXING_THRESHOLD, near_degenerate_pairs
from .model import Model, physical_coupling_text
from .modelfile import SIZE_PARAMS
from .quantities import Quantity

__all__ = [
    "CheckReport",
    "Verdict",
    "VERDICT_STATUSES",
    "REPORT_REFERENCES",
    "DEFAULT_BOUNDS_ABOVE",
    "choose_reference",
    "Figure",
    "FORMATS",
    "ReportBusyError",
    "FIGURE_FORMATS",
    "ReportExistsError",
    "ReportFolderError",
    "check_out_dir",
    "read_fingerprint",
    "report_fingerprint",
    "run_check",
    "write_report",
    "default_figures",
    "to_json",
    "to_markdown",
    "comparison_csv",
    "boundaries_csv",
]

#: Report formats :func:`write_report` can write.
FORMATS = ("json", "md", "csv")

#: Figure file formats of a report (:func:`default_figures`).
FIGURE_FORMATS = ("png", "svg", "pdf")

#: How order specs appear in the JSON report.
ORDER_FORMAT = ('an int k: the series truncated after the λ^k term; {"pade": [L, M]}: the Padé approximant [L/M] '
                '(with "in_square": true when built in λ²)')

#: Default relative tolerance when none is given (1 % of the exact shift / value).
DEFAULT_RTOL = 0.01

#: Default orders judged when none are given.
DEFAULT_ORDERS = (2,)

#: Where a report's reference values come from: ``"exact"`` solves, certified ``"bounds"``
#: (no exact solve, :mod:`ptcheck.bounds`), or ``"auto"``: bounds for a basis larger than
#: ``bounds_above`` states when every target can be bracketed, exact solves otherwise.
REPORT_REFERENCES = ("exact", "bounds", "auto")

#: Default basis size above which ``reference="auto"`` uses certified bounds: beyond it each
#: sparse exact solve costs about a second or more and a report needs dozens of them.
DEFAULT_BOUNDS_ABOVE = 20_000



def _version() -> str:
    from . import __version__

    return __version__


# ---------------------------------------------------------------------- result types
#: Verdict statuses: what a verdict can say about one order of one target ("undecided":
#: certified bounds neither certify that the order meets the tolerance nor that it does not).
VERDICT_STATUSES = ("valid", "not valid", "exact within its sector", "undefined", "undecided")


@dataclass(frozen=True)
class Verdict:
    """Is one order of one target within tolerance at the coupling asked about?

    The verdict is gated by the validity boundary of the same treatment: valid
    exactly when |λ| lies below the first coupling at which the error exceeds
    the tolerance (so it never changes back and forth with λ).

    Attributes
    ----------
    target : str
        Level label or quantity name.
    order : int or Pade
    coupling : float
        The coupling λ asked about (dimensionless).
    error : float
        Error at ``coupling``: absolute (energy units) or relative, as the
        tolerance; NaN when a relative error is undefined there.
    tolerance : float
    relative : bool
        Whether ``tolerance`` and ``error`` are relative.
    valid : bool
        ``status == "valid"``.
    boundary : float
        Signed validity boundary λ* of this order (``inf`` if not reached, NaN
        if ill defined or exact within its sector).
    boundary_status : str
        ``ValidityBoundary.status``.
    text : str
        The verdict in one plain sentence.
    status : str
        One of :data:`VERDICT_STATUSES`: ``"valid"`` (|λ| below the first
        boundary), ``"not valid"``, ``"exact within its sector"`` (the treatment
        is exact diagonalisation of a whole invariant sector: no order is
        judged, never a "valid" verdict), ``"undefined"`` (the error cannot be
        judged, e.g. a relative error whose reference vanishes), ``"undecided"``
        (certified bounds only: neither meeting the tolerance nor failing it
        is certified at this coupling).
    treatment : str
        Treatment used (:mod:`ptcheck.treatment`).
    reason : str
        Why that treatment.
    reference : str
        ``"exact"`` or ``"bounds"`` (no exact solve: "valid" and "not valid"
        are certified, see ``rigorous``).
    error_lower, error_upper : float
        ``reference="bounds"``: certified bracket of the error at ``coupling``
        (as ``error``: absolute or relative); NaN otherwise.  ``error`` is NaN
        with ``reference="bounds"``.
    rigorous : bool
        ``reference="bounds"``: the verdict rests on rigorous gaps only; False
        when it is conditional on an estimated (Lanczos) gap or a given one.
    certified_not : float
        ``reference="bounds"``: signed coupling from which the order is
        certified not to meet the tolerance (NaN: none certified).
    """

    target: str
    order: Any
    coupling: float
    error: float
    tolerance: float
    relative: bool
    valid: bool
    boundary: float
    boundary_status: str
    text: str
    status: str = "valid"
    treatment: str = "nondegenerate"
    reason: str = ""
    reference: str = "exact"
    error_lower: float = math.nan
    error_upper: float = math.nan
    rigorous: bool = False
    certified_not: float = math.nan

    def to_dict(self) -> dict:
        d = {
            "target": self.target,
            "order": order_json(self.order),
            "coupling": self.coupling,
            "error": _finite_or_str(self.error),
            "tolerance": self.tolerance,
            "relative": self.relative,
            "valid": self.valid,
            "status": self.status,
            "treatment": self.treatment,
            "reason": self.reason,
            "boundary": _finite_or_str(self.boundary),
            "boundary_status": self.boundary_status,
            "text": self.text,
        }
        if self.reference == "bounds":
            d.update({
                "reference": self.reference,
                "error_lower": _finite_or_str(self.error_lower),
                "error_upper": _finite_or_str(self.error_upper),
                "rigorous": self.rigorous,
                "certified_not": _finite_or_str(self.certified_not),
            })
        return d


@dataclass(frozen=True, repr=False, eq=False)
class CheckReport:
    """Everything the full check found about one model at one coupling.

    Attributes
    ----------
    title : str
    description : str
        What the model is (for an invented scenario: says so).
    invented : bool
        The model's numbers are invented (demo data).
    model : dict
        Name, basis size N, dims, source (built-in builder and parameters, or
        matrix files), ``norm_v`` (energy units).
    settings : dict
        Targets, orders, coupling, tol/rtol, treatment, backend, threshold,
        the coupling grid of the comparison and the ptcheck version.
    valid : bool
        Every order asked for meets the tolerance for every target at the
        coupling.
    verdicts : tuple of Verdict
        One per target × order asked for.
    comparison : ComparisonResult
        On a grid of couplings from ~0 to beyond the coupling, for the orders
        asked for plus neighbouring truncation orders (context).
    boundaries : tuple of ValidityBoundary
        One per target × order asked for (same order as ``verdicts``).
    convergence : tuple
        One ``ConvergenceResult`` per level involved (``None`` where the
        analysis was not possible; see ``notes``).
    pairs : tuple of NearDegeneratePair
        Near-degenerate pairs at the coupling involving the levels used.
    truncation : tuple
        ``TruncationCheck`` results (built-in models with a size parameter).
    lowest_valid_order : dict
        Target -> lowest truncation order compared that meets the tolerance at
        the coupling (None: none of those compared).
    cautions : tuple of str
        Plain-words cautions, most important first.
    notes : tuple of str
        All remarks of the engine (deduplicated).
    extras : dict
        Optional additions, e.g. a validity map (``{"validity_map": ValidityMap}``),
        a photon-number boundary (``{"photon_boundaries": PhotonBoundaries}``),
        the energy unit of the model's numbers (``{"energy_unit": "GHz"}``).
    source_model : Model
        The model checked (not serialised; used by figure makers).
    suggestions : tuple of Suggestion
        Near-degenerate blocks that would fix a partner limiting a target's
        series, each with its own validity boundary: beside the verdict, never
        in its place (the verdict and the exit status judge what was asked).
    other_boundaries : tuple of ValidityBoundary
        Boundaries at the further tolerances asked for (``settings["other_tolerances"]``),
        target × order for each tolerance in turn; not judged.
    """

    title: str
    description: str
    invented: bool
    model: dict
    settings: dict
    valid: bool
    verdicts: tuple
    comparison: ComparisonResult
    boundaries: tuple
    convergence: tuple
    pairs: tuple
    truncation: tuple
    lowest_valid_order: dict
    cautions: tuple
    notes: tuple
    extras: dict = field(default_factory=dict)
    source_model: Any = field(default=None, repr=False)
    suggestions: tuple = ()
    other_boundaries: tuple = ()

    @property
    def exit_status(self) -> int:
        """0 if valid, 1 if not (the command line's exit status)."""
        return 0 if self.valid else 1

    @property
    def verdict_text(self) -> str:
        """The verdict in plain words (a short paragraph starting with VALID or NOT VALID)."""
        return f"{'VALID' if self.valid else 'NOT VALID'}: {_verdict_paragraph(self)}"

    def __repr__(self) -> str:
        return (
            f"CheckReport({self.title!r}, λ={self.settings['coupling']:g}, "
            f"{'VALID' if self.valid else 'NOT VALID'}, {len(self.verdicts)} verdicts, {len(self.cautions)} cautions)"
        )

    def to_dict(self) -> dict:
        """Complete, JSON-safe description (non-finite floats as the strings 'inf', '-inf', 'nan')."""
        d = {
            "ptcheck_version": _version(),
            "versions": _versions(),
            "title": self.title,
            "description": self.description,
            "invented": self.invented,
            "model": self.model,
            "settings": self.settings,
            "verdict": {
                "valid": self.valid,
                "exit_status": self.exit_status,
                "text": self.verdict_text,
                "per_target": [v.to_dict() for v in self.verdicts],
                "lowest_valid_order": {k: (None if v is None else order_json(v)) for k, v in self.lowest_valid_order.items()},
            },
            "cautions": list(self.cautions),
            "suggestions": [g.to_dict() for g in self.suggestions],
            "boundaries": [_order_fields(b.to_dict()) for b in self.boundaries],
            "other_boundaries": [_order_fields(b.to_dict()) for b in self.other_boundaries],
            "convergence": [None if c is None else _convergence_json(c) for c in self.convergence],
            "near_degenerate_pairs": [p.to_dict() for p in self.pairs],
            "truncation": [t.to_dict() for t in self.truncation],
            "comparison": _order_fields(self.comparison.to_dict()),
            "notes": list(self.notes),
            "conventions": {"order": ORDER_FORMAT, "complex": "[real, imaginary] (round-off below 1e-9 of the modulus set to 0)"},
        }
        d["settings"] = _order_fields(dict(self.settings))
        for k, v in self.extras.items():
            d[k] = _order_fields(v.to_dict()) if hasattr(v, "to_dict") else _json_safe(v)
        return _json_safe(d)

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{html.escape(v.target)}</td><td>{html.escape(order_name(v.order))}</td>"
            f"<td>{_fmt_err(v.error, v.relative)}</td><td>{'✔' if v.valid else ('exact' if v.status == 'exact within its sector' else '✘')}</td>"
            f"<td>{_fmt_lam(v.boundary)}</td></tr>"
            for v in self.verdicts
        )
        cautions = "".join(f"<li>{html.escape(c)}</li>" for c in self.cautions)
        return (
            f"<b>{html.escape(self.title)}</b>: <b>{'VALID' if self.valid else 'NOT VALID'}</b> at "
            f"λ = {self.settings['coupling']:g}<table><tr><th>target</th><th>order</th><th>error</th>"
            f"<th>ok</th><th>λ*</th></tr>{rows}</table><ul>{cautions}</ul>"
        )


@dataclass(frozen=True)
class Figure:
    """A figure file of a report.

    Attributes
    ----------
    filename : str
        File name inside the report directory (suffix ``.png``, ``.svg`` or ``.pdf``).
    caption : str
    data : bytes
        The file's bytes (also readable as ``png`` for PNG figures).
    format : str
        ``"png"``, ``"svg"`` or ``"pdf"``.
    """

    filename: str
    caption: str
    data: bytes = field(repr=False)
    format: str = "png"

    @property
    def png(self) -> bytes:
        """The file's bytes (name kept from when reports wrote PNG only)."""
        return self.data


#: Signature of a figure step: report -> figures.
FigureMaker = Callable[[CheckReport], Sequence[Figure]]


# ---------------------------------------------------------------------- the check

def run_check(
    model: Model,
    levels: Any = None,
    orders: Any = None,
    *,
    coupling: float,
    tol: float | None = None,
    rtol: float | None = None,
    treatment: str = DEFAULT_TREATMENT,
    backend: str = "auto",
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    builder: str | None = None,
    params: Mapping[str, Any] | None = None,
    source: Mapping[str, Any] | None = None,
    title: str | None = None,
    description: str = "",
    invented: bool = False,
    n_points: int = 41,
    convergence_order: int = 40,
    couplings: Any = None,
    progress: ProgressCallback | None = None,
    reference: str = "auto",
    bounds_above: int = DEFAULT_BOUNDS_ABOVE,
    gap: str | float = "auto",
    trial_order: int | None = None,
    executor: Any = None,
) -> CheckReport:
    """Run the full check of levels / quantities of a model at one coupling.

    Parameters
    ----------
    model : Model
    levels : level key, Quantity, or list of them, optional
        What to check (default: level 0, the lowest unperturbed level).
    orders : int, str, Pade or list of them, optional
        The orders you rely on (default ``[2]``); *every* order listed is judged.
    coupling : float
        The coupling λ you use (dimensionless).
    tol, rtol : float or sequence of float, optional
        Absolute tolerance (energy units) or relative tolerance (relative to
        the exact shift of a level / the reference a quantity names).  At most
        one kind; default ``rtol = 0.01``.  With several values (e.g.
        ``rtol=[0.01, 0.05]``) the first is judged (verdicts, validity) and the
        others get validity boundaries too (``other_boundaries``), drawn in
        the same error figure.
    treatment : {"standard", "nondegenerate", "block", "auto"}, default "standard"
        The perturbation theory judged (:mod:`ptcheck.treatment`): by default
        the textbook series (degenerate perturbation theory inside exactly
        degenerate groups).  Near-degenerate blocks are suggested beside the
        verdict, not substituted for what was asked.
    backend : str
        Exact solver backend.
    threshold : float
        Mixing-ratio threshold for near-degenerate pairs, blocks and suggestions.
    builder, params : optional
        Name and keyword arguments of the built-in builder that made ``model``
        (enables the truncation check and is recorded in the report).
    source : mapping, optional
        Where the model came from (recorded in the report).
    title, description : str, optional
    invented : bool
        Mark the model's numbers as invented (demo data).
    n_points : int, default 41
        Couplings in the comparison grid.
    convergence_order : int, default 40
        Series order analysed by the convergence diagnosis.
    couplings : (C,) array_like, optional
        Coupling grid of the comparison (the sweep of the figures and CSV);
        ``coupling`` is added to it.  Default: ``n_points`` couplings from ~0
        to past the coupling and the boundaries found.
    progress : callable(done, total), optional
        Called after each step.
    reference : {"auto", "exact", "bounds"}, default "auto"
        Where the reference values come from (:func:`choose_reference`, the
        one place that decides): exact solves, or certified bounds with no
        exact solve (verdicts then say "certified", rigorous or conditional on
        an estimated gap, and may be "undecided"); ``"auto"`` uses bounds for
        a basis larger than ``bounds_above`` when every target can be bracketed.
    bounds_above : int, default :data:`DEFAULT_BOUNDS_ABOVE`
        Basis size N above which ``reference="auto"`` uses bounds.
    gap : {"auto", "weyl", "neighbours", "estimate"} or float, default "auto"
        Gap source of the bounds (:mod:`ptcheck.bounds`).
    trial_order : int, optional
        Order of the bounds' trial states (default ``max(12, k + 10)``).
    executor : concurrent.futures.Executor, optional
        Run the convergence diagnosis of each level there (e.g. a process
        pool), beside the boundaries and the comparison computed here; the
        report is the same as without.  Default: everything in this process.

    Returns
    -------
    CheckReport

    Notes
    -----
    Each verdict is gated by its validity boundary (same treatment, searched
    with λ as the coupling of interest): an order is valid at λ exactly when
    |λ| lies below the first coupling where its error exceeds the tolerance.
    An error that comes back within tolerance beyond that boundary is an
    accident, reported as NOT valid with a caution.  With certified bounds the
    boundary is the certified coupling: "valid" below it, "not valid" from the
    coupling where failure is certified, "undecided" in between.
    """
    require_model(model, "run_check")
    lam0 = val.as_coupling(coupling)
    if tol is not None and rtol is not None:
        raise ValueError(f"give tol or rtol, not both; got tol={tol!r}, rtol={rtol!r}")
    if tol is None and rtol is None:
        rtol = DEFAULT_RTOL
    relative = rtol is not None
    thr, *other_thr = _tolerances(rtol if relative else tol, "rtol" if relative else "tol")
    grid_given = None if couplings is None else val.as_couplings(couplings)
    n_points = val.check_int(n_points, "n_points", minimum=3)
    convergence_order = val.check_int(convergence_order, "convergence_order", minimum=2)
    settings = CheckSettings(treatment=treatment, backend=backend, threshold=threshold, coupling=lam0 if lam0 != 0 else None)
    targets = list(val.as_sequence(levels)) if levels is not None else [0]
    if not targets:
        targets = [0]
    specs = parse_orders(orders if orders is not None else list(DEFAULT_ORDERS))
    direction = -1 if lam0 < 0 else 1

    # names and levels of the targets (resolves labels: bad ones raise here)
    names, level_sets = [], []
    for t in targets:
        if isinstance(t, Quantity):
            names.append(t.name)
            level_sets.append(list(t.resolve(model)))
        else:
            n = model.level_index(t)
            names.append(model.label(n))
            level_sets.append([n])
    if len(set(names)) != len(names):
        raise ValueError(f"targets must be distinct; got {names}")
    needed = list(dict.fromkeys(n for s_ in level_sets for n in s_))
    ref, ref_reason = choose_reference(model, needed, specs, reference=reference, bounds_above=bounds_above,
                                       treatment=settings.treatment)
    bounds_kw = {"gap": gap, "trial_order": trial_order} if ref == "bounds" else {}
    if ref == "bounds":
        from .bounds import bounds_options

        bounds_options(gap, trial_order, max((s_ for s_ in specs if not isinstance(s_, Pade)), default=0))

    do_trunc = ref == "exact" and builder is not None and any(
        p in (params or {}) or _has_param(builder, p) for p in SIZE_PARAMS)
    total = 2 + len(targets) * len(specs) * (1 + len(other_thr)) + len(needed) + (1 if do_trunc else 0)
    step = 0

    def tick() -> None:
        nonlocal step
        step += 1
        report_progress(progress, step, total)

    tolkw = {"rtol": thr} if relative else {"tol": thr}
    from .convergence import convergence as _convergence  # lazy: heavier module

    conv_kw = {"coupling": lam0, "treatment": settings.treatment, "threshold": threshold}
    # the convergence diagnosis (step 4) needs nothing computed before it: on an executor it starts now
    conv_tasks = None if executor is None else [
        executor.submit(_convergence, model, n, convergence_order, **conv_kw) for n in needed]

    # 1. validity boundaries of every order asked for (λ is the coupling of interest: the first
    #    crossing below it is always found, so the verdict and the boundary agree)
    boundaries = []
    for t, name in zip(targets, names):
        for sp_ in specs:
            boundaries.append(_boundary(model, t, name, sp_, direction, tolkw, settings, lam0, bounds_kw))
            tick()
    other_boundaries = []
    for x in other_thr:
        kw_x = {"rtol": x} if relative else {"tol": x}
        for t, name in zip(targets, names):
            for s in specs:
                other_boundaries.append(_boundary(model, t, name, s, direction, kw_x, settings, lam0, bounds_kw))
                tick()

    # 2. comparison on a grid reaching past the coupling and the boundaries found
    reach = abs(lam0)
    finite_b = [abs(b.coupling) for b in boundaries + other_boundaries if math.isfinite(b.coupling) and b.coupling != 0]
    if finite_b:
        reach = max(reach, min(1.25 * max(finite_b), 4 * max(abs(lam0), 1e-300)))
    if reach == 0:
        reach = min(finite_b) if finite_b else 1.0
    grid = direction * np.linspace(reach / (n_points - 1), reach, n_points - 1)
    if grid_given is not None:
        grid = grid_given
    grid = np.unique(np.append(grid, lam0)) if lam0 != 0 else np.unique(np.append(grid, 0.0))
    int_orders = [s_ for s_ in specs if not isinstance(s_, Pade)]
    kmax = max(int_orders, default=2)
    context = list(range(1, min(kmax + 2, 40) + 1))
    all_orders = list(dict.fromkeys(list(specs) + context))
    comp = compare(model, targets, all_orders, grid, coupling=lam0 if lam0 != 0 else None, threshold=threshold,
                   treatment=settings.treatment, backend=settings.backend, reference=ref, **bounds_kw)
    tick()
    ci = int(np.argmin(np.abs(comp.couplings - lam0)))
    errs = comp.rel_error if relative else comp.abs_error
    if ref == "bounds":  # judged by the certified upper end of the error
        errs = comp.rel_error_upper if relative else comp.error_upper

    # 3. verdicts, gated by the boundaries
    verdicts = []
    bi = 0
    for ti, name in enumerate(comp.targets):
        for sp_ in specs:
            oi = comp.orders.index(sp_)
            e = float(errs[ti, oi, ci])
            b = boundaries[bi]
            bi += 1
            if ref == "bounds":
                verdicts.append(_certified_verdict(comp, ti, oi, ci, name, sp_, lam0, thr, relative, b))
                continue
            status = _verdict_status(b, lam0, e, thr)
            text = _verdict_sentence(name, sp_, lam0, e, thr, relative, status, b, comp.treatments[ti], model.physical_coupling)
            verdicts.append(Verdict(name, sp_, lam0, e, thr, relative, status == "valid", float(b.coupling), b.status, text,
                                    status, comp.treatments[ti], comp.reasons[ti] if comp.reasons else ""))
    lowest: dict[str, Any] = {}
    for ti, name in enumerate(comp.targets):
        lowest[name] = None
        if comp.exact_in_sector and comp.exact_in_sector[ti]:
            continue
        for k in sorted(o for o in comp.orders if not isinstance(o, Pade)):
            e = float(errs[ti, comp.orders.index(k), ci])
            if np.isfinite(e) and e <= thr:
                lowest[name] = k
                break

    # 4. convergence of each level's series (the same treatment)
    conv = []
    conv_notes = []
    for k, n in enumerate(needed):
        try:
            conv.append(_convergence(model, n, convergence_order, **conv_kw) if conv_tasks is None
                        else conv_tasks[k].result())
        except (ValueError, FloatingPointError) as exc:
            conv.append(None)
            conv_notes.append(f"No convergence diagnosis for level {model.label(n)}: {exc}")
        tick()

    # 5. near-degenerate pairs at the coupling
    pairs = tuple(near_degenerate_pairs(model, lam0, threshold, levels=needed)) if lam0 != 0 else tuple(
        near_degenerate_pairs(model, 0.0, threshold, levels=needed)
    )

    # 6. truncation (built-in models with a size parameter)
    trunc = []
    trunc_notes = []
    if do_trunc:
        trunc, trunc_notes = _truncation_checks(model, builder, dict(params or {}), needed, lam0)
        tick()

    if ref == "bounds" and builder is not None and any(_has_param(builder, p) for p in SIZE_PARAMS):
        trunc_notes.append("Truncation check skipped: it needs exact solves, and this report uses certified bounds "
                           "instead (check the truncation on a smaller basis, or with --reference exact).")
    suggestions = _report_suggestions(boundaries, comp)
    cautions = _cautions(model, comp, verdicts, boundaries, conv, pairs, trunc, trunc_notes, needed, lam0, builder, source,
                         suggestions)
    cautions = _reference_cautions(ref, ref_reason, verdicts, boundaries) + cautions
    notes = list(comp.notes)
    for b in boundaries:
        notes.extend(b.notes)
    for c in conv:
        if c is not None:  # an "optimal order" means nothing for a convergent series
            notes.extend(n for n in c.notes if c.kind != "convergent" or "optimal order" not in n)
    notes.extend(conv_notes)
    notes.extend(trunc_notes)

    model_info = {
        "name": model.name,
        "n": model.n,
        "dims": list(model.dims) if model.dims else None,
        "norm_v": model.norm_v,
        "sparse": bool(model.is_sparse),
        "builder": builder,
        "params": _json_safe(dict(params)) if params is not None else None,
        "source": _json_safe(dict(source)) if source is not None else None,
        "unperturbed_energies": {model.label(n): float(model.e0[n]) for n in needed},
        "conserved": list(model.conserved_names),
        "sectors": model.to_dict()["sectors"],
        "level_sectors": {model.label(n): model.sectors[model.level_sectors[n]].name for n in needed},
        "coupling_scale": model.coupling_scale,
        "coupling_unit": model.coupling_unit,
        "coupling_name": model.coupling_name,
    }
    settings_info = {
        "targets": list(comp.targets),
        "levels": [_key_json(t) for t in targets],
        "orders": [order_name(s_) for s_ in specs],
        "context_orders": [order_name(s_) for s_ in comp.orders],
        "coupling": lam0,
        "tol": None if relative else thr,
        "rtol": thr if relative else None,
        "other_tolerances": [float(x) for x in other_thr],
        "treatment": settings.treatment,
        "treatments_used": dict(zip(comp.targets, comp.treatments)),
        "backend": settings.backend,
        "threshold": threshold,
        "direction": direction,
        "comparison_couplings": [float(x) for x in comp.couplings],
        "convergence_order": convergence_order,
        "sweep": None if grid_given is None else [float(grid_given.min()), float(grid_given.max()), int(grid_given.size)],
        "ptcheck_version": _version(),
        "reference": ref,
        "reference_asked": reference,
        "reference_reason": ref_reason,
        "bounds_above": bounds_above,
    }
    if ref == "bounds":
        settings_info["gap"] = gap if isinstance(gap, str) else float(gap)
        settings_info["trial_order"] = trial_order
    report_progress(progress, total, total)
    return CheckReport(
        title=title or f"Can perturbation theory be trusted for {model.name} at {_with_physical(f'λ = {lam0:g}', lam0, model.physical_coupling)}?",
        description=description,
        invented=bool(invented),
        model=model_info,
        settings=settings_info,
        valid=all(v.valid for v in verdicts),
        verdicts=tuple(verdicts),
        comparison=comp,
        boundaries=tuple(boundaries),
        other_boundaries=tuple(other_boundaries),
        convergence=tuple(conv),
        pairs=pairs,
        truncation=tuple(trunc),
        lowest_valid_order=lowest,
        cautions=tuple(c for c in said_once(list(dict.fromkeys(cautions))) if c),
        notes=tuple(dict.fromkeys(notes)),
        source_model=model,
        suggestions=suggestions,
    )


def choose_reference(
    model: Model, levels: Sequence[int], orders: Sequence[Any], *, reference: str = "auto",
    bounds_above: int = DEFAULT_BOUNDS_ABOVE, treatment: str = DEFAULT_TREATMENT,
) -> tuple[str, str]:
    """Exact solves or certified bounds for a report: the one place that decides.

    Parameters
    ----------
    model : Model
    levels : sequence of int
        Work-basis indices of every level the targets use.
    orders : sequence of order specs
        The orders judged.
    reference : {"auto", "exact", "bounds"}
    bounds_above : int
        ``"auto"`` uses bounds when the basis size N exceeds this.
    treatment : str
        The treatment asked for.

    Returns
    -------
    (str, str)
        ``"exact"`` or ``"bounds"``, and the reason in plain words.

    Notes
    -----
    Bounds bracket a level through its own Rayleigh–Schrödinger series, so
    ``"auto"`` keeps exact solves when a level is degenerate with another
    level of its sector, when a Padé approximant is judged, or when a block
    treatment is asked for; ``"bounds"`` then fails with the engine's
    message naming the reason.
    """
    reference = val.check_choice(reference, "reference", REPORT_REFERENCES)
    bounds_above = val.check_int(bounds_above, "bounds_above", minimum=0)
    orders = parse_orders(orders)
    if reference == "exact":
        return "exact", "exact solves, as asked"
    if reference == "bounds":
        return "bounds", "certified bounds, as asked"
    if model.n <= bounds_above:
        return "exact", f"exact solves: the basis (N = {model.n}) is not above {bounds_above} states"
    obstacles = []
    degenerate = [n for n in levels if model.degenerate_group_of(n) is not None]
    if degenerate:
        obstacles.append(f"level {model.label(degenerate[0])} is degenerate with another level of its sector")
    if any(isinstance(o, Pade) for o in orders):
        obstacles.append("a Padé approximant is judged")
    if treatment in ("block", "auto"):
        obstacles.append(f"treatment {treatment!r} asks for near-degenerate blocks")
    if obstacles:
        return "exact", (
            f"exact solves although the basis (N = {model.n}) is above {bounds_above} states: certified bounds are "
            f"not available here ({'; '.join(obstacles)})"
        )
    return "bounds", f"certified bounds: the basis (N = {model.n}) is above {bounds_above} states"


def _certified_verdict(comp: ComparisonResult, ti: int, oi: int, ci: int, name: str, spec: Any, lam0: float, thr: float,
                       relative: bool, b: ValidityBoundary) -> Verdict:
    """The verdict of one order at λ0 from certified bounds (gated by the certified boundary)."""
    lo_arr, hi_arr = (comp.rel_error_lower, comp.rel_error_upper) if relative else (comp.error_lower, comp.error_upper)
    lo, hi = float(lo_arr[ti, oi, ci]), float(hi_arr[ti, oi, ci])
    rig_here = bool(comp.bounds_rigorous[ti, ci])
    if b.status == "exact_in_sector":
        status = "exact within its sector"
    elif b.status == "error":
        status = "not valid" if lo > thr else "undecided"
    else:
        status = b.decision_at(lam0)
        if status == "undecided" and lo > thr:  # failure certified at λ0 itself: the first crossing lies below it
            status = "not valid"
    if status == "valid":
        rigorous = b.rigorous or abs(lam0) < abs(b.rigorous_coupling)
    elif status == "not valid":
        rigorous = (lo > thr and rig_here) or b.status == "fails_at_zero"
    else:
        rigorous = False
    text = _certified_sentence(name, spec, lam0, lo, hi, thr, relative, status, rigorous, b, comp.treatments[ti])
    return Verdict(
        name, spec, lam0, math.nan, thr, relative, status == "valid", float(b.coupling), b.status, text, status,
        comp.treatments[ti], comp.reasons[ti] if comp.reasons else "", reference="bounds", error_lower=lo,
        error_upper=hi, rigorous=bool(rigorous), certified_not=float(b.certified_not),
    )


def _certified_sentence(name, spec, lam, lo, hi, thr, relative, status, rigorous, b: ValidityBoundary, treatment_here) -> str:
    tol = _fmt_err(thr, relative)
    how = "" if treatment_here == "nondegenerate" else f" ({treatment_here} treatment)"
    what = f"{name}, {order_name(spec)}{how}"
    if status == "exact within its sector":
        return (f"{what}: {EXACT_IN_SECTOR} — the treatment is exact diagonalisation of a whole invariant sector, "
                "not a perturbative approximation; no verdict on an order.")
    kind = "rigorous" if rigorous else "conditional on an estimated gap"
    if b.gap_kind.startswith("given"):
        kind = "rigorous" if rigorous else "conditional on the gap given"
    err = f"error certified in [{_fmt_err(lo, relative)}, {_fmt_err(hi, relative)}] at λ = {lam:g}"
    if status == "valid":
        s = f"{what}: {err} — certified valid ({kind}): it meets {tol} for every |λ| up to {_fmt_lam(abs(b.coupling))}."
    elif status == "not valid":
        s = f"{what}: {err} — certified NOT valid ({kind})"
        if math.isfinite(b.certified_not) and abs(lam) >= abs(b.certified_not):
            s += f": the error exceeds {tol} at |λ| = {abs(b.certified_not):.4g}."
        elif b.status == "fails_at_zero":
            s += ": it does not meet the tolerance at any nonzero coupling."
        else:
            s += f": the error exceeds {tol} at λ = {lam:g}."
    else:
        s = f"{what}: {err} — undecided: the bounds certify neither that it meets {tol} nor that it does not"
        if b.status in ("certified", "not_certified") and b.coupling != 0:
            s += f" (certified only up to |λ| = {abs(b.coupling):.4g}"
            s += f", certified to fail from {abs(b.certified_not):.4g})" if math.isfinite(b.certified_not) else ")"
        s += ". An exact check (--reference exact), a higher trial order or a better gap decides."
    return s


def _reference_cautions(ref: str, reason: str, verdicts: Sequence[Verdict], boundaries: Sequence[ValidityBoundary]) -> list[str]:
    """Cautions about where the reference values come from (certified bounds)."""
    if ref != "bounds":
        return []
    out = [
        f"No exact solve — {reason}. Verdicts are certified by Kato–Temple brackets of the exact levels; each says "
        "whether it is rigorous or conditional on an estimated gap."
    ]
    cond = [v for v in verdicts if v.status in ("valid", "not valid") and not v.rigorous]
    if cond:
        out.append(
            "Conditional verdicts (they rest on a Lanczos gap estimate, not a proof): "
            + "; ".join(f"{v.target} at {order_name(v.order)}" for v in cond)
            + ". Confirm design decisions with your own convergence checks."
        )
    und = [v for v in verdicts if v.status == "undecided"]
    if und:
        out.append(
            "Undecided (neither certified valid nor certified not valid): "
            + "; ".join(f"{v.target} at {order_name(v.order)}" for v in und)
            + ". Run with --reference exact on this model (or a smaller one) to decide."
        )
    return out


def _verdict_status(b: ValidityBoundary, lam0: float, error: float, thr: float) -> str:
    """The verdict of one order at λ0, gated by its validity boundary (one place for that rule)."""
    if b.status == "exact_in_sector":
        return "exact within its sector"
    if b.status == "ill_defined":
        return "undefined"
    if b.status == "error":  # no boundary: judge the error at λ0 alone
        if not np.isfinite(error):
            return "undefined"
        return "valid" if error <= thr else "not valid"
    return "valid" if b.valid_at(lam0) else "not valid"


def _report_suggestions(boundaries: Sequence[ValidityBoundary], comp: ComparisonResult) -> tuple:
    """Suggestions of the boundaries (with the block's boundary), then those only the comparison made."""
    out: dict[tuple, Any] = {}
    for b in boundaries:
        for g in b.suggestions:
            out.setdefault((g.target, g.level, g.partner), g)
    for g in comp.suggestions:
        out.setdefault((g.target, g.level, g.partner), g)
    return tuple(out.values())


def _tolerances(x: Any, name: str) -> list[float]:
    """One tolerance or several (first judged), each a positive number; duplicates dropped."""
    vals = list(x) if isinstance(x, (list, tuple, np.ndarray)) else [x]
    if not vals:
        raise ValueError(f"{name} is empty; give at least one tolerance")
    return list(dict.fromkeys(float(val.check_positive(v, name)) for v in vals))


def said_once(texts: Sequence[str]) -> list[str]:
    """Texts with boilerplate already said in an earlier text removed (said once).

    Boilerplate: a sentence without any digit (advice, definitions); a
    sentence with numbers is data about its own text and always stays.  The
    result is aligned with ``texts`` ("" where nothing new is left).

    Examples
    --------
    >>> said_once(["A is 1. Check it.", "B is 1. Check it."])
    ['A is 1. Check it.', 'B is 1.']
    """
    import re

    seen: set[str] = set()
    out = []
    for t in texts:
        kept = []
        for sentence in _sentences(t):
            if sentence not in seen or re.search(r"\d", sentence):
                kept.append(sentence)
                seen.add(sentence)
        out.append(" ".join(kept))
    return out


def _sentences(text: str) -> list[str]:
    """Split at ". " (a full stop followed by a space and a capital or digit), keeping the stops."""
    import re

    return [p for p in re.split(r"(?<=[.!?])\s+(?=[^a-z\s])", text.strip()) if p]


def _boundary(model, target, name, spec, direction, tolkw, settings: CheckSettings, lam0, bounds_kw=None) -> ValidityBoundary:
    """validity_boundary, robust to a failure of the search itself (reported, not raised).

    Inputs were validated before; a ValueError here is a numerical outcome (e.g.
    a block treatment meeting a cluster too large for a block, or a Padé
    approximant asked for a level treated with an effective Hamiltonian).  A
    boundary with status ``"error"`` and the message in ``notes`` is returned.
    """
    kw = dict(direction=direction, threshold=settings.threshold, backend=settings.backend,
              coupling=lam0 if lam0 != 0 else None, treatment=settings.treatment, **tolkw)
    if bounds_kw:
        kw.update(reference="bounds", **bounds_kw)
    try:
        return validity_boundary(model, target, spec, **kw)
    except (ValueError, ArithmeticError) as exc:
        first = f"{type(exc).__name__}: {exc}"
    rel = "rtol" in tolkw
    thr = tolkw.get("rtol", tolkw.get("tol"))
    return ValidityBoundary(
        target=name, order=spec, treatment=settings.treatment, tol=None if rel else thr, rtol=thr if rel else None,
        direction=direction, coupling=math.nan, status="error", exact_solves=0, bracket=(math.nan, math.nan),
        error_at_boundary=math.nan, max_coupling=math.nan, notes=(f"The validity boundary search failed: {first}",),
        reference="bounds" if bounds_kw else "exact",
    )


def _has_param(builder: str, name: str) -> bool:
    import inspect

    from .models import BUILDERS

    fn = BUILDERS.get(builder)
    return fn is not None and name in inspect.signature(fn).parameters


def _truncation_checks(model: Model, builder: str, params: dict, needed: list[int], lam: float):
    """Rebuild the model with each size parameter enlarged; is every level used converged?"""
    import inspect

    from .models import BUILDERS, truncation_check

    fn = BUILDERS[builder]
    sig = inspect.signature(fn).parameters
    out, notes = [], []
    for p in SIZE_PARAMS:
        if p not in sig:
            continue
        s = params.get(p, sig[p].default)
        if not isinstance(s, int) or isinstance(s, bool):
            continue
        bigger = s + max(2, s // 2)
        others = {k: v for k, v in params.items() if k != p}
        for n in needed:
            lab = model.labels[n] if model.labels[n] is not None else n
            try:
                out.append(truncation_check(fn, p, [s, bigger], level=lab, coupling=lam, params=others))
            except (ValueError, TypeError) as exc:
                notes.append(f"Truncation check of {p} for level {model.label(n)} was not possible: {exc}")
    return out, notes


def _cautions(model, comp, verdicts, boundaries, conv, pairs, trunc, trunc_notes, needed, lam, builder, source, suggestions=()):
    out = []
    for v, b in zip(verdicts, boundaries):
        # accidental agreement: within tolerance at λ although the error crossed it on the way
        if v.status == "not valid" and b.status == "found" and np.isfinite(v.error) and v.error <= v.tolerance:
            out.append(
                f"{v.target}, {order_name(v.order)}: the error is within tolerance at λ = {v.coupling:g} only by "
                f"accident — it already exceeds the tolerance at |λ| = {abs(b.coupling):.4g} and comes back; "
                "the verdict is NOT valid, do not rely on it."
            )
        elif v.status == "valid" and np.isfinite(v.error) and v.error > v.tolerance:
            out.append(
                f"{v.target}, {order_name(v.order)}: the comparison grid gives an error {_fmt_err(v.error, v.relative)} "
                f"at λ = {v.coupling:g}, just above the tolerance, while the boundary search finds λ* = "
                f"{_fmt_lam(abs(b.coupling))}; the order sits at the edge of the tolerance there."
            )
        if v.status == "exact within its sector":
            out.append(
                f"{v.target}, {order_name(v.order)}: {EXACT_IN_SECTOR} — the {v.treatment} treatment is exact "
                "diagonalisation of a whole invariant sector, not perturbation theory; no order is judged "
                "(not counted as valid)."
            )
        if not np.isfinite(v.error) and v.status != "exact within its sector" and v.reference == "exact":
            out.append(
                f"{v.target}, {order_name(v.order)}: the relative error is undefined at λ = {v.coupling:g} (the exact "
                "reference is ~0 or the pairing of states is ambiguous); judge it with an absolute tolerance (--tol)."
            )
    # basis truncation
    bad = [t for t in trunc if not t.converged]
    if bad:
        for t in bad:
            out.append(f"Basis truncation: {t.note}")
    elif trunc:
        params = sorted({t.size_param for t in trunc})
        out.append(
            f"Basis truncation: the exact levels used are converged in {', '.join(params)} at λ = {lam:g} "
            "(checked by enlarging the basis)."
        )
    elif builder is not None and not any(_has_param(builder, p) for p in SIZE_PARAMS):
        out.append(f"Basis truncation: none — the built-in model {builder} is finite as it stands (no truncation parameter).")
    else:
        out.append("Basis truncation: " + TRUNCATION_NOTE)
    # convergence / asymptotic series
    for n, c in zip(needed, conv):
        if c is None:
            continue
        lab = model.label(n)
        if c.kind == "asymptotic":
            oo = f"; at λ = {lam:g} the smallest term is at order {c.optimal_order}" if c.optimal_order is not None else ""
            out.append(
                f"Level {lab}: its series is divergent (asymptotic, coefficients grow factorially){oo}. "
                "Adding orders beyond that makes it worse."
            )
        elif c.kind == "convergent" and math.isfinite(c.radius) and abs(lam) >= c.radius:
            out.append(
                f"Level {lab}: λ = {lam:g} is beyond the radius of convergence ≈ {c.radius:.3g} of its series "
                "(nearest exceptional point): low orders may still be accurate, but the series diverges — more "
                "orders will not help; a Padé approximant or a near-degenerate block might (see suggestions)."
            )
    # near-degenerate levels
    if pairs:
        worst = pairs[0]
        ratio = "∞ (exactly degenerate)" if not math.isfinite(worst.ratio) else f"{worst.ratio:.3g}"
        out.append(
            f"Near-degenerate levels: {len(pairs)} pair(s) with mixing ratio |λV|/|ΔE| above the threshold at "
            f"λ = {lam:g}; the largest is {worst.labels[0]}–{worst.labels[1]} (ratio {ratio}). Non-degenerate "
            "formulas are unreliable for these levels."
        )
    # treatment used (said plainly when it is not the plain series)
    for t, tr, why in zip(comp.targets, comp.treatments, comp.reasons or ("",) * len(comp.targets)):
        if tr == NEAR_DEGENERATE or tr == "mixed" and NEAR_DEGENERATE in why:
            out.append(
                f"{t}: {NEAR_DEGENERATE} treatment used, as asked — the perturbative values come from the effective "
                "Hamiltonian of a near-degenerate cluster, not from the plain Rayleigh–Schrödinger formula."
            )
        elif tr in ("degenerate", "mixed"):
            out.append(f"{t}: degenerate perturbation theory — {why}.")
    for g in suggestions:
        out.append("Suggestion: " + g.text)
    for b in boundaries:
        if b.status == "error":
            out.append(f"{b.target}, {order_name(b.order)}: " + b.notes[-1])
        if b.status == "ill_defined":
            out.append(f"{b.target}, {order_name(b.order)}: validity boundary ill defined — " + (b.notes[-1] if b.notes else ""))
    out.extend(n for n in trunc_notes)
    return out


# ---------------------------------------------------------------------- plain words
def _fmt_err(e: float, relative: bool) -> str:
    if not np.isfinite(e):
        return "undefined"
    return f"{100 * e:.3g} %" if relative else f"{e:.3g}"


def _fmt_lam(x: float) -> str:
    if math.isnan(x):
        return "—"
    if math.isinf(x):
        return "not reached"
    return f"{x:.4g}"


def _with_physical(text: str, lam: float, physical: Callable[[float], str]) -> str:
    """``text`` followed by the physical coupling at ``lam`` in parentheses, when the model names one."""
    phys = physical(lam)
    return f"{text} ({phys})" if phys else text


def _physical_of(model_info: Mapping[str, Any]) -> Callable[[float], str]:
    """The physical-coupling formatter of a report's model summary (``""`` when it has no scale)."""
    return lambda lam: physical_coupling_text(lam, model_info.get("coupling_scale"), model_info.get("coupling_unit"),
                                              model_info.get("coupling_name"))


def _verdict_sentence(name, spec, lam, e, thr, relative, status, b: ValidityBoundary, treatment_here: str,
                      physical: Callable[[float], str] = lambda lam: "") -> str:
    tol = _fmt_err(thr, relative)
    at = _with_physical(f"λ = {lam:g}", lam, physical)
    how = "" if treatment_here == "nondegenerate" else f" ({treatment_here} treatment)"
    what = f"{name}, {order_name(spec)}{how}"
    if status == "exact within its sector":
        return (f"{what}: {EXACT_IN_SECTOR} — the treatment is exact diagonalisation of a whole invariant sector, "
                "not a perturbative approximation; no verdict on an order.")
    what += f": error {_fmt_err(e, relative)}"
    if status == "valid":
        s = f"{what} ≤ {tol} at {at} — valid."
    elif status == "undefined":
        s = f"{what} at {at} — cannot be judged with a relative tolerance."
    elif np.isfinite(e) and e <= thr:
        s = f"{what} ≤ {tol} at {at}, but only by accident (it exceeds the tolerance at smaller |λ|) — NOT valid."
    else:
        s = f"{what} > {tol} at {at} — NOT valid."
    if b.status == "found":
        s += " It meets the tolerance up to " + _with_physical(f"|λ| ≈ {abs(b.coupling):.4g}", abs(b.coupling), physical) + "."
    elif b.status == "not_reached":
        s += f" It meets the tolerance over the whole range searched (|λ| ≤ {b.max_coupling:.4g})."
    elif b.status == "fails_at_zero":
        s += " It does not meet the tolerance at any nonzero coupling."
    elif b.status == "error":
        s += " Its validity boundary could not be found (see the cautions)."
    return s


def _verdict_paragraph(r: CheckReport) -> str:
    lam = r.settings["coupling"]
    at = _with_physical(f"λ = {lam:g}", lam, _physical_of(r.model))
    tol = _fmt_err(r.verdicts[0].tolerance, r.verdicts[0].relative) if r.verdicts else ""
    kind = "relative" if r.settings["rtol"] is not None else "absolute"
    orders = ", ".join(r.settings["orders"])
    if r.valid:
        head = (
            f"at {at}, {orders} meet{'s' if len(r.settings['orders']) == 1 else ''} the {kind} "
            f"tolerance {tol} for every target checked ({', '.join(r.settings['targets'])})."
        )
    else:
        bad = [v for v in r.verdicts if not v.valid and v.status == "not valid"]
        exact = [v for v in r.verdicts if v.status == "exact within its sector"]
        undef = [v for v in r.verdicts if v.status == "undefined"]
        undecided = [v for v in r.verdicts if v.status == "undecided"]
        parts = []
        if bad:
            parts.append(f"the {kind} tolerance {tol} is not met for " + "; ".join(f"{v.target} at {order_name(v.order)}" for v in bad))
        if exact:
            parts.append("no order is judged for " + "; ".join(sorted({v.target for v in exact}))
                         + f" ({EXACT_IN_SECTOR}: its treatment is exact diagonalisation, not perturbation theory)")
        if undef:
            parts.append("the error cannot be judged for " + "; ".join(f"{v.target} at {order_name(v.order)}" for v in undef))
        if undecided:
            parts.append("the certified bounds cannot decide for "
                         + "; ".join(f"{v.target} at {order_name(v.order)}" for v in undecided))
        head = f"at {at}, " + "; ".join(parts) + "."
    certified = r.settings.get("reference") == "bounds"
    if certified:
        judged = [v for v in r.verdicts if v.status in ("valid", "not valid")]
        n_rig = sum(v.rigorous for v in judged)
        head += (f" Certified by bounds, no exact solve: {n_rig} of {len(judged)} decided verdict(s) rigorous, "
                 f"{len(judged) - n_rig} conditional on an estimated gap.")
    meets = "is certified to meet it" if certified else "meets it"
    exact_targets = {v.target for v in r.verdicts if v.status == "exact within its sector"}
    low = []
    for t, k in r.lowest_valid_order.items():
        if t in exact_targets:
            continue
        if k is None:
            top = max(o for o in r.comparison.orders if not isinstance(o, Pade))
            low.append(f"{t}: no truncation order up to {top} {meets}")
        else:
            low.append(f"{t}: order {k} is the lowest that {'is certified to meet' if certified else 'meets'} it")
    return head + (" Lowest sufficient order at this coupling — " + "; ".join(low) + "." if low else "")


# ---------------------------------------------------------------------- serialisers
def _order_fields(d: dict) -> dict:
    """Order names ("order 2", "Padé[2/2]") in a result's dict turned into numbers (see :data:`ORDER_FORMAT`)."""
    out = dict(d)
    for key in ("order",):
        if isinstance(out.get(key), str):
            out[key] = _order_value(out[key])
    for key in ("orders", "context_orders"):
        if isinstance(out.get(key), list):
            out[key] = [_order_value(x) if isinstance(x, str) else x for x in out[key]]
    return out


def _order_value(name: str) -> Any:
    try:
        return order_json(order_from_name(name))
    except ValueError:
        return name


def _convergence_json(c: Any) -> dict:
    """A ConvergenceResult's dict, complex numbers cleaned of round-off, no optimal order for a convergent series."""
    d = c.to_dict()
    for key in ("exceptional_points", "ep_energies"):
        if isinstance(d.get(key), list):
            d[key] = [_complex_pair(z) for z in d[key]]
    if d.get("kind") == "convergent":
        d["optimal_order"] = None  # meaningful for asymptotic series only: a convergent one improves with every order
        d["smallest_term"] = None
        d["notes"] = [n for n in d.get("notes", []) if "optimal order" not in n]
    return d


def _complex_pair(z: Any) -> Any:
    if isinstance(z, (list, tuple)) and len(z) == 2 and all(isinstance(x, (int, float)) for x in z):
        c = clean_complex(complex(z[0], z[1]))
        return [c.real, c.imag]
    return z


def _finite_or_str(x: Any) -> Any:
    if isinstance(x, float) and not math.isfinite(x):
        return str(x)
    return x


def _json_safe(x: Any) -> Any:
    """Plain JSON types; non-finite floats become 'inf', '-inf' or 'nan'."""
    if isinstance(x, dict):
        return {str(k): _json_safe(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_json_safe(v) for v in x]
    if isinstance(x, np.ndarray):
        return _json_safe(x.tolist())
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        f = float(x)
        return f if math.isfinite(f) else str(f)
    if isinstance(x, (complex, np.complexfloating)):
        c = clean_complex(complex(x))
        return [_json_safe(c.real), _json_safe(c.imag)]
    if x is None or isinstance(x, str):
        return x
    if isinstance(x, Pade):
        return order_json(x)
    return str(x)


def _key_json(k: Any) -> Any:
    if isinstance(k, Quantity):
        return {"quantity": k.name, "levels": [_json_safe(list(l) if isinstance(l, tuple) else l) for l in k.weights],
                "weights": list(k.weights.values()), "relative_to": k.relative_to, "units": k.units}
    return _json_safe(list(k) if isinstance(k, tuple) else k)


def _versions() -> dict:
    import numpy
    import scipy

    return {"python": platform.python_version(), "numpy": numpy.__version__, "scipy": scipy.__version__}


def to_json(report: CheckReport, *, figures: Sequence[Figure] = (), files: Sequence[str] = ()) -> str:
    """The JSON report (strict JSON: no NaN/Infinity literals)."""
    d = report.to_dict()
    d["figures"] = [{"file": f.filename, "caption": f.caption} for f in figures]
    d["files"] = list(files)
    return json.dumps(d, indent=1, ensure_ascii=False, allow_nan=False) + "\n"


def _csv(rows: Sequence[Mapping[str, Any]], columns: Sequence[str]) -> str:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(columns), lineterminator="\n", extrasaction="ignore")
    w.writeheader()
    for r in rows:
        w.writerow({k: _csv_value(r.get(k)) for k in columns})
    return buf.getvalue()


def _csv_value(x: Any) -> Any:
    if isinstance(x, float):
        return repr(x) if math.isfinite(x) else str(x)
    if x is None:
        return ""
    if isinstance(x, (list, tuple)):
        return " | ".join(str(_csv_value(v)) for v in x)
    return x


def comparison_csv(report: CheckReport) -> str:
    """One row per target × order × coupling.

    ``presents`` says whether ``exact_presented``/``perturbative_presented``
    are the shift ``E(λ) − E(0)`` (quantities with ``relative_to="shift"``) or
    the value; ``unperturbed`` is the value at λ = 0 beside them; ``exact`` and
    ``perturbative`` are always the values.
    """
    cols = ["target", "order", "treatment", "coupling", "presents", "unperturbed", "exact_presented",
            "perturbative_presented", "exact", "perturbative", "abs_error", "rel_error", "infidelity", "ambiguous"]
    if report.comparison.error_lower is not None:
        cols += ["exact_lower", "exact_upper", "error_lower", "error_upper", "rel_error_lower", "rel_error_upper",
                 "bounds_rigorous", "bounds_gap_kind"]
    return _csv(report.comparison.to_rows(), cols)


def boundaries_csv(report: CheckReport) -> str:
    """One row per target × order asked for: error at λ, verdict and validity boundary.

    ``coupling_physical`` / ``boundary_physical`` are λ x the model's ``coupling_scale`` (in its
    ``coupling_unit``; empty when the model names no physical coupling).
    """
    scale = report.model.get("coupling_scale")
    rows = []
    for v, b in zip(report.verdicts, report.boundaries):
        rows.append({
            "target": v.target, "order": order_name(v.order), "treatment": b.treatment,
            "coupling": v.coupling, "error_at_coupling": v.error, "tolerance": v.tolerance,
            "tolerance_kind": "relative" if v.relative else "absolute", "valid": v.valid, "verdict": v.status,
            "boundary": b.coupling, "boundary_status": b.status, "exact_solves": b.exact_solves,
            "coupling_physical": None if scale is None else v.coupling * scale,
            "boundary_physical": None if scale is None else b.coupling * scale,
            "reference": b.reference, "error_lower": v.error_lower, "error_upper": v.error_upper,
            "rigorous": v.rigorous, "certified_not": b.certified_not, "rigorous_boundary": b.rigorous_coupling,
            "gap_kind": b.gap_kind,
        })
    cols = ["target", "order", "treatment", "coupling", "error_at_coupling", "tolerance", "tolerance_kind", "valid",
            "verdict", "boundary", "boundary_status", "exact_solves", "coupling_physical", "boundary_physical"]
    if any(b.reference == "bounds" for b in report.boundaries):
        cols += ["reference", "error_lower", "error_upper", "rigorous", "certified_not", "rigorous_boundary", "gap_kind"]
    return _csv(rows, cols)


def _order_sort_key(o: Any) -> tuple:
    return (1, o.order, o.num) if isinstance(o, Pade) else (0, int(o), 0)


def _md_table(header: Sequence[str], rows: Sequence[Sequence[Any]]) -> str:
    def cell(x: Any) -> str:
        return str(x).replace("|", "\\|").replace("\n", " ")

    lines = ["| " + " | ".join(cell(h) for h in header) + " |", "|" + "---|" * len(header)]
    lines += ["| " + " | ".join(cell(c) for c in r) + " |" for r in rows]
    return "\n".join(lines)


def _fmt_bracket(lo: float, hi: float, relative: bool) -> str:
    if not (np.isfinite(lo) or np.isfinite(hi)):
        return "—"
    return f"[{_fmt_err(lo, relative)}, {_fmt_err(hi, relative)}]" if np.isfinite(hi) else f"≥ {_fmt_err(lo, relative)}"


def _md_certified_tables(r: CheckReport) -> list[str]:
    """Certified couplings and the certified error brackets of a report made with bounds (no exact solve)."""
    s = r.settings
    rel = s["rtol"] is not None
    out = ["", "## Certified validity boundaries", "",
           "No exact solve. Below the certified |λ| the order is guaranteed to meet the tolerance; from the "
           "'certified not' |λ| on it is guaranteed not to (the true boundary λ* lies between them). 'rigorous': "
           "the certificate uses rigorous gaps only (Weyl's inequality, the neighbouring levels' own brackets); "
           "'conditional': it rests on an estimated (Lanczos) or given gap.", "",
           _md_table(["target", "order", "treatment", f"error at λ = {s['coupling']:g}", "verdict", "certified |λ|",
                      "certified with rigorous gaps", "certified not |λ|", "gap", "status", "mat-vecs", "exact solves"], [
               [v.target, order_name(v.order), b.treatment, _fmt_bracket(v.error_lower, v.error_upper, v.relative),
                f"{v.status} ({'rigorous' if v.rigorous else 'conditional'})" if v.status in ("valid", "not valid") else v.status,
                _fmt_lam(abs(b.coupling)), _fmt_lam(abs(b.rigorous_coupling)), _fmt_lam(abs(b.certified_not)),
                b.gap_kind or "—", b.status, b.mat_vecs, b.exact_solves]
               for v, b in zip(r.verdicts, r.boundaries)])]
    comp = r.comparison
    ci = int(np.argmin(np.abs(comp.couplings - s["coupling"])))
    lo_a, hi_a = (comp.rel_error_lower, comp.rel_error_upper) if rel else (comp.error_lower, comp.error_upper)
    cols = sorted(range(len(comp.orders)), key=lambda i: _order_sort_key(comp.orders[i]))
    out += ["", f"## Certified error at λ = {s['coupling']:g}, order by order", "",
            "Each cell brackets the error: the exact value lies in the certified interval shown, so the error lies "
            "in the bracket. Orders next to the ones judged are shown for context.", "",
            _md_table(["target", "exact value in", "gap", "unperturbed"] + [comp.order_names[i] for i in cols], [
                [t, f"[{comp.exact_lower[ti, ci]:.10g}, {comp.exact_upper[ti, ci]:.10g}]",
                 f"{comp.bounds_gap_kind[ti, ci]} ({'rigorous' if comp.bounds_rigorous[ti, ci] else 'conditional'})",
                 f"{comp.unperturbed[ti]:.10g}"]
                + [_fmt_bracket(float(lo_a[ti, oi, ci]), float(hi_a[ti, oi, ci]), rel) for oi in cols]
                for ti, t in enumerate(comp.targets)])]
    return out


def to_markdown(report: CheckReport, *, figures: Sequence[Figure] = (), files: Sequence[str] = ()) -> str:
    """The Markdown summary: verdict in plain words, cautions, tables, embedded figures."""
    r = report
    s = r.settings
    out = [f"# {r.title}", ""]
    if r.invented:
        out += ["> **Invented scenario.** The model and its numbers are made up for this demonstration; "
                "they describe no real device.", ""]
    if r.description:
        out += [r.description, ""]
    out += ["## Verdict", "", f"**{'VALID' if r.valid else 'NOT VALID'}:** {_verdict_paragraph(r)}", ""]
    out += [f"- {v.text}" for v in r.verdicts]
    comp0 = r.comparison
    phys = _physical_of(r.model)
    out += ["", "## Treatment", "", "The perturbation theory judged for each target, and why.", "",
            _md_table(["target", "treatment", "reason"], [
                [t, tr, why] for t, tr, why in zip(comp0.targets, comp0.treatments, comp0.reasons or ("",) * len(comp0.targets))])]
    out += ["", "## Symmetry sectors", ""] + _sectors_md(r.model)
    if r.suggestions:
        out += ["", "## Suggestions", "",
                "Beside the verdict, not in its place: the verdict and the exit status judge the treatment asked for.", ""]
        out += [f"- {g.text}" for g in r.suggestions]
    out += ["", "## Cautions", ""]
    out += [f"- {c}" for c in r.cautions if not c.startswith("Suggestion: ")] or ["- none"]
    m = r.model
    src = f"built-in `{m['builder']}`" if m.get("builder") else (
        ", ".join(f"{k} = `{v}`" for k, v in (m.get("source") or {}).items()) or "matrices given in Python")
    out += ["", "## Model", "", _md_table(["", ""], [
        ["name", m["name"]], ["basis size N", m["n"]], ["dims", m["dims"] or "—"], ["source", src],
        ["builder parameters", ", ".join(f"{k} = {v}" for k, v in (m.get("params") or {}).items()) or "—"],
        ["‖V‖ (energy units)", f"{m['norm_v']:.6g}"],
        ["declared conserved operators", ", ".join(m.get("conserved") or []) or "none"],
        ["symmetry sectors", _sector_summary(m)],
    ] + ([["physical coupling at λ = 1", phys(1.0)]] if phys(1.0) else []))]
    tol = f"relative {s['rtol']:g}" if s["rtol"] is not None else f"absolute {s['tol']:g} (energy units)"
    if s.get("other_tolerances"):
        tol += f" (judged); also {', '.join(f'{x:g}' for x in s['other_tolerances'])} (boundaries only)"
    out += ["", "## Settings", "", _md_table(["", ""], [
        ["targets", ", ".join(s["targets"])], ["orders judged", ", ".join(s["orders"])],
        ["coupling λ", _with_physical(f"{s['coupling']:g}", s["coupling"], phys)], ["tolerance", tol],
        ["treatment", s["treatment"]],
        ["exact backend", f"{s['backend']} (used: {r.comparison.backend})"],
        ["reference", f"{s.get('reference', 'exact')} ({s.get('reference_reason', 'exact solves')})"],
        ["near-degeneracy threshold", f"{s['threshold']:g}"], ["ptcheck", s["ptcheck_version"]],
    ])]
    tables_at = len(out)
    out += ["", "## Validity boundaries", "",
            "λ* is the smallest |λ| at which the order stops meeting the tolerance (searched towards the sign of λ).", "",
            _md_table(["target", "order", "treatment", f"error at λ = {s['coupling']:g}", "verdict", "λ*", "status", "exact solves"], [
                [v.target, order_name(v.order), b.treatment, _fmt_err(v.error, v.relative), v.status,
                 _with_physical(_fmt_lam(abs(b.coupling)), abs(b.coupling), phys) if math.isfinite(b.coupling)
                 else _fmt_lam(b.coupling), b.status, b.exact_solves]
                for v, b in zip(r.verdicts, r.boundaries)])]
    if r.other_boundaries:
        rel = s["rtol"] is not None
        out += ["", "Validity boundaries at the other tolerances:", "", _md_table(["target", "order", "tolerance", "λ*", "status"], [
            [b.target, order_name(b.order), _fmt_err(b.rtol if rel else b.tol, rel),
             _fmt_lam(abs(b.coupling)) if math.isfinite(b.coupling) else _fmt_lam(b.coupling), b.status]
            for b in r.other_boundaries])]
    comp = r.comparison
    ci = int(np.argmin(np.abs(comp.couplings - s["coupling"])))
    errs = comp.rel_error if s["rtol"] is not None else comp.abs_error
    rel = s["rtol"] is not None
    cols = sorted(range(len(comp.orders)), key=lambda i: _order_sort_key(comp.orders[i]))
    pres = comp.presents or ("value",) * len(comp.targets)
    shown = comp.exact_presented if comp.exact_presented is not None else comp.exact
    out += ["", f"## Error at λ = {s['coupling']:g}, order by order", "",
            "Orders next to the ones judged are shown for context. A quantity that measures a shift shows its "
            "shift E(λ) − E(0), with its unperturbed value beside it.", "",
            _md_table(["target", "exact (shown)", "unperturbed"] + [comp.order_names[i] for i in cols], [
                [t, f"{shown[ti, ci]:.10g} ({'shift' if pres[ti] == 'shift' else 'value'})", f"{comp.unperturbed[ti]:.10g}"]
                + [_fmt_err(float(errs[ti, oi, ci]), rel) for oi in cols]
                for ti, t in enumerate(comp.targets)])]
    if s.get("reference") == "bounds":  # certified couplings and error brackets instead of exact ones
        out[tables_at:] = _md_certified_tables(r)
    convs = [c for c in r.convergence if c is not None]
    if convs:
        header = ["level", "kind", "radius", "Kato bound"]
        asymptotic = any(c.kind != "convergent" for c in convs)
        if asymptotic:  # an optimal truncation order exists for divergent (asymptotic) series only
            header.append(f"optimal order at λ = {s['coupling']:g}")
        rows = []
        for c in convs:
            row = [c.label, c.kind, _fmt_lam(c.radius), f"{c.kato_bound:.4g}"]
            if asymptotic:
                row.append("—" if c.kind == "convergent" or c.optimal_order is None else c.optimal_order)
            rows.append(row)
        out += ["", "## Convergence of the series", "", _md_table(header, rows), ""]
        out += [f"- **{c.label}**: {text}" for c, text in zip(convs, said_once([c.summary for c in convs]))]
    out += ["", "## Near-degenerate pairs", ""]
    if r.pairs:
        out += [_md_table(["levels", "mixing ratio |λV|/|ΔE|", "|ΔE|", "|V|"], [
            [f"{p.labels[0]} – {p.labels[1]}", "∞" if not math.isfinite(p.ratio) else f"{p.ratio:.3g}", f"{p.gap:.4g}",
             f"{p.coupling_element:.4g}"] for p in r.pairs[:20]])]
        if len(r.pairs) > 20:
            out += ["", f"({len(r.pairs) - 20} more in report.json)"]
    else:
        out += [f"None above the threshold {s['threshold']:g} at λ = {s['coupling']:g}."]
    if r.truncation:
        out += ["", "## Basis truncation", "", _md_table(["level", "parameter", "sizes", "last change", "converged"], [
            [t.level, t.size_param, " → ".join(map(str, t.sizes)), f"{t.changes[-1]:.3g}", "yes" if t.converged else "NO"]
            for t in r.truncation])]
    for k, v in r.extras.items():
        if hasattr(v, "to_markdown"):
            out += ["", v.to_markdown()]
    if figures:
        out += ["", "## Figures", ""]
        for f in figures:
            out += [f"![{f.caption}]({f.filename})", "", f"*{f.caption}*", ""]
    if files:
        out += ["", "## Files", ""] + [f"- `{f}`" for f in files]
    if r.notes:
        out += ["", "## Notes", ""] + [f"- {n}" for n in r.notes]
    out += ["", "---", f"Written by ptcheck {s['ptcheck_version']}."]
    return "\n".join(out) + "\n"


def _sector_summary(m: Mapping[str, Any]) -> str:
    """'2 (parity +1: 8 levels, parity -1: 8 levels)' or '21, sizes 1–11' from a report's model summary."""
    sec = m.get("sectors") or {}
    k = int(sec.get("count", 1))
    names, sizes = sec.get("names", []), sec.get("sizes", [])
    if k == 1:
        return "1 (nothing splits H0 + λV)"
    if k <= 4 and len(names) == k:
        return f"{k} (" + ", ".join(f"{nm}: {sz} levels" for nm, sz in zip(names, sizes)) + ")"
    return f"{k}, sizes {min(sizes)}–{max(sizes)}" if sizes else str(k)


def _sectors_md(m: Mapping[str, Any]) -> list[str]:
    """The 'Symmetry sectors' section: how the model splits, and which sector each judged level is in."""
    sec = m.get("sectors") or {}
    k = int(sec.get("count", 1))
    cons = m.get("conserved") or []
    how = "components of the coupling graph of H0 and V" + (
        f", split by the declared conserved operator(s) {', '.join(cons)}" if cons else ""
    )
    if k == 1:
        head = f"One sector: nothing splits H0 + λV into invariant subspaces ({how} give one)."
    else:
        head = (
            f"{k} sectors: subspaces that H0 + λV leaves invariant for every λ ({how}). Levels of different sectors "
            "never mix: degeneracy, mixing ratios, exceptional points, blocks and the exact state carrying each "
            "label are judged inside the level's own sector."
        )
    out = [head, ""]
    names, sizes = sec.get("names", []), sec.get("sizes", [])
    size_of = dict(zip(names, sizes))
    levels = m.get("level_sectors") or {}
    if levels:
        out += [_md_table(["level judged", "sector", "levels in the sector"],
                          [[lab, nm, size_of.get(nm, "—")] for lab, nm in levels.items()])]
    if 1 < k and names:
        shown = ", ".join(f"{nm} ({sz})" for nm, sz in list(zip(names, sizes))[:12])
        more = f", … {k - 12} more (all in report.json)" if k > 12 else ""
        out += ["", f"Sectors (levels): {shown}{more}."]
    return out


# ---------------------------------------------------------------------- figures
#: Page size of report figures (inches): a wide 16:9 slide, drawn once at this size.
FIGURE_SIZE = (13.333, 7.5)


def _render(fig: Any, *, fmt: str = "png", dpi: int = 100) -> bytes:
    """The figure's file bytes, drawn once at its own size (no timestamps: re-runs give the same bytes)."""
    import matplotlib as mpl
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    buf = io.BytesIO()
    meta = {"png": {"Software": None}, "svg": {"Date": None, "Creator": None},
            "pdf": {"CreationDate": None, "Creator": None, "Producer": None}}[fmt]
    kw = {"pil_kwargs": {"compress_level": 1}} if fmt == "png" else {}  # fast; files stay ~150 kB
    # lay out once with the renderer that then draws: text is measured once (savefig would lay out on a
    # renderer of its own, then draw on another, measuring every label twice)
    fig.set_dpi(dpi)
    FigureCanvasAgg(fig)
    engine = fig.get_layout_engine()
    if engine is not None:
        engine.execute(fig)
        fig.set_layout_engine(None)  # no engine at all: savefig then draws once (a placeholder engine makes it lay out again)
    with mpl.rc_context({"svg.hashsalt": "ptcheck"}):
        fig.savefig(buf, format=fmt, dpi=dpi, metadata=meta, facecolor="white", **kw)
    return buf.getvalue()


def _new_figure(figsize: tuple[float, float] = FIGURE_SIZE, *, columns: Sequence[float] | None = None):
    """A figure with one Axes (or a row of them, width ratios ``columns``), styled at its own size."""
    from matplotlib.figure import Figure as MplFigure  # no pyplot: no global state

    from .plots import style

    with style(figsize[0] / FIGURE_SIZE[0]):
        fig = MplFigure(figsize=figsize, layout="constrained")
        if columns is None:
            return fig, fig.add_subplot()
        gs = fig.add_gridspec(1, len(columns), width_ratios=list(columns))
        return fig, [fig.add_subplot(gs[0, i]) for i in range(len(columns))]


def default_figures(
    report: CheckReport, *, figure_format: str = "png", dpi: int = 100, executor: Any = None
) -> list[Figure]:
    """Figures of a report, made by :mod:`ptcheck.plots` (16:9 slides, fonts legible on a projector).

    Per target: values against λ and errors against λ (with the tolerance(s)
    and the validity boundaries); the complex-coupling plane of the levels
    used; the near-degenerate pairs at λ when there are any; the validity map
    and the photon-number boundary if the report carries them.  Each figure
    is drawn once, at slide size, straight into its file.  When
    :mod:`ptcheck.plots` cannot be imported, one simple error figure is drawn
    here instead.

    Parameters
    ----------
    report : CheckReport
    figure_format : {"png", "svg", "pdf"}
    dpi : int
        Resolution of PNG files (pixels = 13.33 in × dpi wide).
    executor : concurrent.futures.Executor, optional
        Draw the figures as independent tasks there (e.g. a process pool on
        a multi-core machine); the list comes back in the same order.
        Default: one after the other in this process.

    Returns
    -------
    list of Figure
    """
    val.check_choice(figure_format, "figure format", FIGURE_FORMATS)
    plan = figure_plan(report)
    if executor is None:
        if _plots_module() is None:
            return [_fallback_error_figure(report, figure_format)]
        return [draw_figure(report, key, figure_format=figure_format, dpi=dpi) for key in plan]
    futures = [executor.submit(draw_figure, report, key, figure_format=figure_format, dpi=dpi) for key in plan]
    return [f.result() for f in futures]


def figure_plan(report: CheckReport) -> list[tuple]:
    """The figures :func:`default_figures` draws for this report, as keys for :func:`draw_figure`."""
    plan: list[tuple] = []
    bands = report.comparison.reference == "bounds"
    for ti in range(len(report.comparison.targets)):
        plan += [("bands", ti)] if bands else [("values", ti), ("errors", ti)]
    if any(c is not None for c in report.convergence):
        plan.append(("convergence",))
    if report.source_model is not None and report.pairs:
        plan.append(("pairs",))
    if report.extras.get("validity_map") is not None:
        plan.append(("validity_map",))
    if report.extras.get("photon_boundaries") is not None:
        plan.append(("photons",))
    return plan


def draw_figure(report: CheckReport, key: tuple, *, figure_format: str = "png", dpi: int = 100) -> Figure:
    """One figure of :func:`figure_plan` (module level: a worker process can draw it)."""
    plots = _plots_module()
    comp = report.comparison
    s = report.settings
    lam = s["coupling"]
    rel = s["rtol"] is not None
    judged = [comp.orders[i] for i in _judged_indices(report)]
    phys = _physical(report)
    ext = figure_format

    def done(name: str, caption: str, fig: Any) -> Figure:
        return Figure(f"{name}.{ext}", caption, _render(fig, fmt=ext, dpi=dpi), ext)

    kind = key[0]
    if kind == "bands":  # no exact solve: the certified bracket of each order's error
        ti = key[1]
        t = comp.targets[ti]
        fig, ax = _new_figure()
        bnds = [b for b in report.boundaries if b.target == t]
        plots.plot_error_bands(comp, bnds, target=t, orders=judged, error="relative" if rel else "absolute",
                               tol=s["rtol"] if rel else s["tol"], coupling=lam, ax=ax)
        return done(f"errors-{_slug(t, ti)}", f"{t}: certified bracket of each order's error against λ (no exact "
                    "solve); solid: certified valid below, dashed: certified not valid from.", fig)
    if kind in ("values", "errors"):
        ti = key[1]
        t = comp.targets[ti]
        slug = _slug(t, ti)
        fig, ax = _new_figure()
        if kind == "values":
            plots.plot_levels(comp, targets=[t], orders=judged, coupling=lam, ax=ax, **phys)
            return done(f"values-{slug}", f"{t}: exact and perturbative values against λ (vertical line: λ = {lam:g}).", fig)
        bnds = [b for b in report.boundaries + report.other_boundaries if b.target == t]
        tols = [s["rtol"] if rel else s["tol"]] + list(s.get("other_tolerances") or ())
        plots.plot_errors(comp, bnds, target=t, orders=judged, error="relative" if rel else "absolute", tol=tols,
                          coupling=lam, ax=ax, **phys)
        return done(f"errors-{slug}", f"{t}: error of each order against λ, the tolerance{'s' if len(tols) > 1 else ''}, "
                    f"and where each order stops meeting {'them' if len(tols) > 1 else 'it'} (λ*).", fig)
    if kind == "convergence":
        fig, ax = _new_figure()
        plots.plot_divergence([c for c in report.convergence if c is not None], coupling=lam,
                              model_name=report.model["name"], ax=ax)
        return done("convergence", "Complex coupling plane: exceptional points, convergence discs and Kato bounds of "
                    "the levels used; your λ on the real axis.", fig)
    if kind == "pairs":
        needed = sorted({n for q in report.comparison.levels for n in _levels_of(report.source_model, q)})
        fig, (ax, tax) = _new_figure(columns=(3, 2))
        plots.plot_pairs(plots.mixing_map(report.source_model, lam, levels=needed, threshold=s["threshold"]), ax=ax,
                         table_ax=tax)
        return done("pairs", f"Levels at λ = {lam:g} and the pairs whose mixing ratio |λV|/|ΔE| is large; "
                    "outlined: near-degenerate blocks (suggested beside the answer).", fig)
    if kind == "validity_map":
        return draw_study_figure(report.extras["validity_map"], mark=report.extras.get("validity_map_mark"),
                                 unit=report.extras.get("energy_unit"), figure_format=figure_format, dpi=dpi)
    if kind == "photons":
        return draw_study_figure(report.extras["photon_boundaries"], figure_format=figure_format, dpi=dpi, **phys)
    raise ValueError(f"unknown figure {key!r}; figure_plan gives {figure_plan(report)}")


def draw_study_figure(
    study: Any, *, mark: tuple[float, float] | None = None, unit: str | None = None, coupling_scale: float | None = None,
    coupling_unit: str | None = None, figure_format: str = "png", dpi: int = 100,
) -> Figure:
    """The figure of a side study (a ``ValidityMap`` or ``PhotonBoundaries``), as :func:`draw_figure` draws it.

    It needs the study alone, so it can be drawn as soon as the study is done
    (e.g. on a worker process, while the main check still runs).  ``mark`` and
    ``unit``: the design point and energy unit of a validity map;
    ``coupling_scale``/``coupling_unit``: the second coupling axis of a
    photon-number figure (the model's physical coupling).
    """
    from .photons import PhotonBoundaries

    ext = figure_format
    fig, ax = _new_figure()
    if isinstance(study, PhotonBoundaries):
        phys = {} if coupling_scale is None else {"coupling_scale": coupling_scale, "coupling_unit": coupling_unit}
        _plots_module().plot_photon_boundaries(study, ax=ax, **phys)
        name, caption = "photons", study.summary()
    else:
        from .maps_plot import plot_validity_map

        plot_validity_map(study, ax=ax, mark=mark, mark_label="design point", unit=unit)
        name, caption = "validity-map", study.caption()
    return Figure(f"{name}.{ext}", caption, _render(fig, fmt=ext, dpi=dpi), ext)


def _physical(report: CheckReport) -> dict:
    """``coupling_scale``/``coupling_unit`` of the model checked, when it has them (keywords for the plots)."""
    m = report.source_model
    scale = getattr(m, "coupling_scale", None)
    if scale is None:
        return {}
    return {"coupling_scale": scale, "coupling_unit": getattr(m, "coupling_unit", None)}


def _levels_of(model: Model, key: Any) -> list[int]:
    return list(key.resolve(model)) if isinstance(key, Quantity) else [int(key)]


def _slug(name: str, i: int) -> str:
    keep = "".join(ch if ch.isascii() and ch.isalnum() else "-" for ch in name).strip("-")
    while "--" in keep:
        keep = keep.replace("--", "-")
    return f"{i + 1}-{keep}" if keep else f"{i + 1}"


def _judged_indices(report: CheckReport) -> list[int]:
    """Indices into ``report.comparison.orders`` of the orders judged (in the order asked)."""
    specs = list(dict.fromkeys(v.order for v in report.verdicts))
    return [report.comparison.orders.index(o) for o in specs]


def _plots_module() -> Any:
    try:
        import ptcheck.plots as plots  # noqa: PLC0415
    except ImportError:
        return None
    return plots


def _fallback_error_figure(report: CheckReport, figure_format: str = "png") -> Figure:
    """|error| of every order judged against λ, log scale, with the tolerance and λ*."""
    comp = report.comparison
    s = report.settings
    rel = s["rtol"] is not None
    thr = s["rtol"] if rel else s["tol"]
    errs = comp.rel_error if rel else comp.abs_error
    judged = _judged_indices(report)
    from matplotlib.figure import Figure as MplFigure

    fig = MplFigure(figsize=(10.0, 5.625), layout="constrained")
    ax = fig.add_subplot()
    x = np.abs(comp.couplings)
    srt = np.argsort(x)
    for ti, t in enumerate(comp.targets):
        for oi in judged:
            y = np.asarray(errs[ti, oi], dtype=float)[srt]
            y = np.where(y > 0, y, np.nan)
            ax.plot(x[srt], y, marker=".", label=f"{t}, {comp.order_names[oi]}")
    ax.axhline(thr, color="k", linestyle="--", linewidth=1.2, label=f"tolerance {thr:g}")
    ax.axvline(abs(s["coupling"]), color="0.4", linewidth=1.2, label=f"your |λ| = {abs(s['coupling']):g}")
    for b in report.boundaries:
        if b.status == "found":
            ax.axvline(abs(b.coupling), color="C3", linestyle=":", linewidth=1)
    ax.set_yscale("log")
    ax.set_xlabel("|coupling λ|")
    ax.set_ylabel("relative error" if rel else "absolute error (energy units)")
    ax.set_title(f"{comp.model_name}: error against the coupling (dotted: validity boundaries λ*)")
    ax.grid(True, color="#DDDDDD")
    ax.legend(fontsize=8)
    return Figure(f"errors.{figure_format}", "Error of each judged order against |λ|; dashed: tolerance; dotted: validity "
                  "boundaries.", _render(fig, fmt=figure_format), figure_format)


# ---------------------------------------------------------------------- writing
#: Files a report folder of an earlier ptcheck version can hold (no marker file).
_LEGACY_FILES = ("report.json", "report.md", "comparison.csv", "boundaries.csv")
#: Files a report holds besides those: written with ``--formula``.
_FORMULA_FILES = ("formula.tex", "formula.py")


def report_fingerprint(report: CheckReport | Mapping[str, Any]) -> str:
    """Identity of a report: its settings and results, not how it was asked for.

    The SHA-256 of the report's JSON content without the software versions,
    the figure and file lists and the spelling of the model file's path (the
    same check run on ``./g.toml`` or ``/home/me/g.toml`` is the same report).
    Two reports with the same fingerprint say the same thing.

    Parameters
    ----------
    report : CheckReport or dict
        A report, or the content of its ``report.json``.

    Returns
    -------
    str
        64 hexadecimal digits.
    """
    import hashlib

    d = report.to_dict() if isinstance(report, CheckReport) else report
    d = json.loads(json.dumps(d, allow_nan=False))  # a deep copy in JSON form, as report.json holds it
    for k in ("ptcheck_version", "versions", "figures", "files"):
        d.pop(k, None)
    if isinstance(d.get("settings"), dict):
        d["settings"].pop("ptcheck_version", None)
    src = (d.get("model") or {}).get("source")
    if isinstance(src, dict):
        src.pop("model_file", None)
    text = json.dumps(d, sort_keys=True, ensure_ascii=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def _legacy_fingerprint(folder: Path) -> str | None:
    """Fingerprint of a report written by an earlier version (from its report.json), or None."""
    try:
        d = json.loads((folder / "report.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return report_fingerprint(d) if isinstance(d, dict) else None


def _is_report_file(name: str) -> bool:
    return name in _LEGACY_FILES or name in _FORMULA_FILES or (name.endswith(".png") and not name.startswith("."))


def read_fingerprint(out_dir: str | Path) -> str | None:
    """Fingerprint of the report now in ``out_dir`` (None if there is none)."""
    try:
        target = check_target(out_dir)
        st = folder_state(target, report_file=_is_report_file, legacy_fingerprint=_legacy_fingerprint)
    except (OSError, ValueError):
        return None
    return st.fingerprint if st.kind == "report" else None


def check_out_dir(out_dir: str | Path) -> Path:
    """The absolute report folder, or a clear error before any work is done.

    Refused: an empty name, a file, the current folder (or one containing
    it), and a folder holding entries that are not part of a ptcheck report
    (the report folder is replaced as a whole).

    Returns
    -------
    Path
    """
    target = check_target(out_dir)
    st = folder_state(target, report_file=_is_report_file, legacy_fingerprint=None)
    if st.kind == "foreign":
        names = ", ".join(repr(n) for n in st.foreign[:5]) + (" and more" if len(st.foreign) > 5 else "")
        raise ReportFolderError(
            f"the output folder {str(out_dir)!r} holds entries that are not part of a ptcheck report ({names}); "
            "the report folder is replaced as a whole, so choose another folder or move them away"
        )
    return target


def write_report(
    report: CheckReport,
    out_dir: str | Path,
    *,
    formats: Sequence[str] = FORMATS,
    figures: FigureMaker | bool = True,
    force: bool = False,
) -> list[Path]:
    """Write a report folder as a whole.

    Every file is written into a fresh folder beside ``out_dir``, which then
    replaces ``out_dir`` in one step: at any moment ``out_dir`` holds the
    previous report or the new one, complete (an interrupt, a signal or a
    failed write leaves the previous one).  Files of the previous report that
    the new one does not have (figures, after ``figures=False``) are gone.  A
    second writer into the same folder at the same moment gets
    :class:`ReportBusyError`.  Folders and files follow the umask.

    Parameters
    ----------
    report : CheckReport
    out_dir : str or Path
        The report folder (created with its parents if missing).  Not the
        current folder, and not a folder with other files in it.
    formats : sequence of {"json", "md", "csv"}
        Default: all three.
    figures : bool or callable
        ``True``: :func:`default_figures`; ``False``: no figures; a callable
        ``report -> [Figure, ...]`` to make your own.  Figures are written
        with the Markdown summary (which embeds them).  A report whose
        ``extras["formulas"]`` holds :class:`~ptcheck.formula_report.ReportFormulas`
        also gets ``formula.tex``, ``formula.py`` and (unless ``figures`` is
        False) the formula figures.
    force : bool
        Replace a *different* existing report (another fingerprint: other
        settings or results, see :func:`report_fingerprint`).  Without it,
        :class:`ReportExistsError` is raised and nothing is written.  The same
        report (e.g. with figures added, or the model file named another way)
        is replaced without ``force``; an identical one is left untouched.

    Returns
    -------
    list of Path
        Files of the report, the JSON last.

    Raises
    ------
    ReportExistsError, ReportBusyError, ReportFolderError
    """
    formats = tuple(dict.fromkeys(formats))
    if not formats:
        raise ValueError("formats is empty; give at least one of json, md, csv")
    for f in formats:
        val.check_choice(f, "format", FORMATS)
    out = check_out_dir(out_dir)
    figs: list[Figure] = []
    if "md" in formats and figures:
        maker = default_figures if figures is True else figures
        if not callable(maker):
            raise TypeError(f"figures must be True, False or a callable report -> figures; got {figures!r}")
        figs = list(maker(report))
    formulas = report.extras.get("formulas")  # ReportFormulas (ptcheck check --formula)
    if formulas is not None and figures is not False:
        figs += [Figure(name, caption, png) for name, caption, png in formulas.figures()]
    files: dict[str, str | bytes] = {}
    for f in figs:
        files[f.filename] = f.png
    if "csv" in formats:
        files["comparison.csv"] = comparison_csv(report)
        files["boundaries.csv"] = boundaries_csv(report)
    if formulas is not None:
        files.update(dict(formulas.files()))
    names = list(files) + (["report.md"] if "md" in formats else []) + (["report.json"] if "json" in formats else [])
    if "md" in formats:
        files["report.md"] = to_markdown(report, figures=figs, files=names)
    if "json" in formats:
        files["report.json"] = to_json(report, figures=figs, files=names)
    return write_folder(
        out, files, fingerprint=report_fingerprint(report), force=force, report_file=_is_report_file,
        legacy_fingerprint=_legacy_fingerprint,
    )
