"""Check and report for a model with two couplings (``ptcheck check`` with ``couplings = [λ₁, λ₂]``).

For each target and each order (total degree of the multivariate series):

* **the verdict at the point** you use: the error there, and whether the
  tolerance holds on the whole straight path from the origin to the point
  (the one-coupling validity boundary of the ray through the point, searched
  with the point as coupling of interest);
* **the boundary along that ray**: ``t*`` and the coupling point ``t* d``
  where the order stops meeting the tolerance;
* **the region map**: the validity region of every order
  (:func:`ptcheck.region.validity_region`), with the radius of convergence
  per ray drawn over it (:func:`ptcheck.region.ray_convergence`).

The report folder (``report.md`` with figures, ``report.json``,
``regions.csv``) is written as a whole, like the one-coupling report
(:func:`ptcheck.report.write_report`).
"""

from __future__ import annotations

import io
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from . import _validation as val
from ._atomic import write_folder
from ._progress import ProgressCallback, report_progress
from .compare import ValidityBoundary, compare
from .model import Model
from .multiseries import as_coupling_points, check_multi, ray_target, target_name
from .quantities import Quantity
from .region import RayConvergence, ValidityRegion, ray_convergence, validity_region
from .report import DEFAULT_ORDERS, DEFAULT_RTOL, FORMATS, _is_report_file, _legacy_fingerprint, check_out_dir, report_fingerprint
from .treatment import DEFAULT_TREATMENT

__all__ = ["PointVerdict", "RegionCheck", "run_region_check", "write_region_report", "REGION_FILES"]

#: Files of a two-coupling report besides the figures.
REGION_FILES = ("report.md", "report.json", "regions.csv")


def _jf(x: float) -> float | str:
    return float(x) if math.isfinite(x) else str(x)


@dataclass(frozen=True)
class PointVerdict:
    """One order of one target at the coupling point.

    Attributes
    ----------
    target : str
    order : int
        Total degree.
    status : {"valid", "not valid", "undefined"}
        "valid": the tolerance holds on the whole straight path from the origin
        to the point (the ray's first boundary lies beyond it).
    perturbative, exact : float
        Values at the point (energy units).
    error : float
        Absolute or relative error at the point (as the tolerance).
    treatment : str
        Treatment of the target along the ray.
    boundary : float
        ``t*`` on the ray through the point, in units of the point itself
        (``t* = 1`` would be the point; inf: not reached; NaN: undefined).
    boundary_point : (2,) tuple
        Couplings where the order stops meeting the tolerance on that ray.
    boundary_status : str
        The one-coupling status of that boundary.
    text : str
        One sentence.
    """

    target: str
    order: int
    status: str
    perturbative: float
    exact: float
    error: float
    treatment: str
    boundary: float
    boundary_point: tuple
    boundary_status: str
    text: str

    def to_dict(self) -> dict:
        return {
            "target": self.target,
            "order": self.order,
            "status": self.status,
            "perturbative": _jf(self.perturbative),
            "exact": _jf(self.exact),
            "error": _jf(self.error),
            "treatment": self.treatment,
            "boundary": _jf(self.boundary),
            "boundary_point": [_jf(x) for x in self.boundary_point],
            "boundary_status": self.boundary_status,
            "text": self.text,
        }


@dataclass(frozen=True, repr=False, eq=False)
class RegionCheck:
    """Result of :func:`run_region_check`.

    Attributes
    ----------
    title : str
    model : dict
        ``model.to_dict()`` plus ``source`` (model file, builder, params).
    coupling_names : tuple of str
    point : (2,) tuple of float
        The coupling point checked.
    orders : tuple of int
    tol, rtol : float or None
    targets : tuple of str
    verdicts : tuple of PointVerdict
        One per target and order.
    regions : tuple of ValidityRegion
        One per target and order (same order as ``verdicts``).
    convergence : tuple of RayConvergence
        One per target (empty when not asked for).
    cautions : tuple of str
        Notes a reader must see (truncation, ill-defined rays, refinement limits).
    description : str
    invented : bool
        The model is an invented demonstration scenario.
    """

    title: str
    model: dict
    coupling_names: tuple
    point: tuple
    orders: tuple
    tol: float | None
    rtol: float | None
    targets: tuple
    verdicts: tuple
    regions: tuple = field(repr=False)
    convergence: tuple = field(repr=False)
    cautions: tuple = ()
    description: str = ""
    invented: bool = False

    @property
    def exit_status(self) -> int:
        """0 when every order of every target is valid at the point, else 1."""
        return 0 if all(v.status == "valid" for v in self.verdicts) else 1

    @property
    def verdict_text(self) -> str:
        n1, n2 = self.coupling_names
        where = f"({n1}, {n2}) = ({self.point[0]:g}, {self.point[1]:g})"
        if self.exit_status == 0:
            return f"VALID at {where}: every order asked for meets the tolerance on the straight path to the point."
        bad = sum(v.status != "valid" for v in self.verdicts)
        return f"NOT VALID at {where}: {bad} of {len(self.verdicts)} order(s) do not meet the tolerance there."

    def __repr__(self) -> str:
        return f"RegionCheck({self.title!r}, point={self.point}, {len(self.verdicts)} verdicts, exit {self.exit_status})"

    def to_dict(self) -> dict:
        from .report import _version

        return {
            "kind": "two couplings",
            "title": self.title,
            "ptcheck_version": _version(),
            "model": self.model,
            "coupling_names": list(self.coupling_names),
            "point": list(self.point),
            "orders": list(self.orders),
            "tol": self.tol,
            "rtol": self.rtol,
            "targets": list(self.targets),
            "verdict": self.verdict_text,
            "exit_status": self.exit_status,
            "verdicts": [v.to_dict() for v in self.verdicts],
            "regions": [r.to_dict() for r in self.regions],
            "convergence": [c.to_dict() for c in self.convergence],
            "cautions": list(self.cautions),
            "description": self.description,
            "invented": self.invented,
        }

    def _repr_html_(self) -> str:
        import html

        rows = "".join(f"<li>{html.escape(v.text)}</li>" for v in self.verdicts)
        return f"<b>{html.escape(self.title)}</b><p>{html.escape(self.verdict_text)}</p><ul>{rows}</ul>"


def run_region_check(
    model: Model,
    targets: Sequence[Any] | None,
    orders: Sequence[int] | None,
    *,
    couplings: Any,
    tol: float | None = None,
    rtol: float | None = None,
    treatment: str = DEFAULT_TREATMENT,
    backend: str = "auto",
    directions: int = 16,
    max_directions: int = 48,
    convergence: bool = True,
    convergence_order: int = 30,
    title: str | None = None,
    description: str = "",
    invented: bool = False,
    source: dict | None = None,
    progress: ProgressCallback | None = None,
) -> RegionCheck:
    """Verdicts at a point of two couplings, boundaries along its ray, regions and radii per ray.

    Parameters
    ----------
    model : Model
        Two couplings.
    targets : sequence of level keys / Quantity, optional
        Default: the lowest level.
    orders : sequence of int, optional
        Total degrees judged (default (2,)).
    couplings : (2,) array_like
        The coupling point (λ₁, λ₂) you use; not the origin.
    tol, rtol : float, optional
        Absolute or relative tolerance (default ``rtol = 0.01``).
    treatment, backend : str
        As in :func:`ptcheck.compare.validity_boundary`.
    directions, max_directions : int
        Rays of each region (:func:`ptcheck.region.validity_region`).
    convergence : bool, default True
        Radius of convergence per ray (``directions`` rays, series of order
        ``convergence_order``).
    title, description : str
    invented : bool
        Say in the report that the model is invented.
    source : dict, optional
        Where the model came from (model file, builder, params).
    progress : callable, optional
        Called as ``progress(done, total)`` after each region and radius search.

    Returns
    -------
    RegionCheck
    """
    check_multi(model, "run_region_check")
    if model.n_couplings != 2:
        raise ValueError(f"the check of several couplings handles two; model {model.name!r} has {model.n_couplings}")
    p = as_coupling_points(couplings, 2, "couplings")
    if p.ndim != 1:
        raise ValueError(f"couplings must be one point (λ₁, λ₂); got shape {p.shape}")
    if not np.any(p):
        raise ValueError("the coupling point is the origin: there every order is exact; give the point you use")
    if tol is not None and rtol is not None:
        raise ValueError(f"give tol or rtol, not both; got tol={tol!r}, rtol={rtol!r}")
    if tol is None and rtol is None:
        rtol = DEFAULT_RTOL
    relative = rtol is not None
    thr = float(val.check_positive(rtol if relative else tol, "rtol" if relative else "tol"))
    targets = list(targets) if targets else [0]
    orders = tuple(sorted({val.check_order(k, n=model.n) for k in (orders or DEFAULT_ORDERS)}))
    names = [target_name(model, t) for t in targets]
    tolkw = {"rtol": thr} if relative else {"tol": thr}
    steps = len(targets) * (len(orders) + (1 if convergence else 0))
    done = 0

    def tick() -> None:
        nonlocal done
        done += 1
        report_progress(progress, done, steps)

    verdicts: list[PointVerdict] = []
    regions: list[ValidityRegion] = []
    convs: list[RayConvergence] = []
    cautions: list[str] = []
    for t, name in zip(targets, names):
        for k in orders:
            r = validity_region(model, t, k, directions=directions, max_directions=max_directions, point=p,
                                treatment=treatment, backend=backend, **tolkw)
            regions.append(r)
            verdicts.append(_point_verdict(model, t, name, k, r, p, relative, thr, treatment, backend))
            for nt in r.notes:
                if nt not in cautions:
                    cautions.append(nt)
            tick()
        if convergence:
            convs.append(ray_convergence(model, t, directions=directions, order=max(convergence_order, 2 * max(orders))))
            tick()
    src = dict(source or {})
    mdict = dict(model.to_dict(), source=src)
    return RegionCheck(
        title=title or f"{model.name}: can the multivariate series be trusted at ({p[0]:g}, {p[1]:g})?",
        model=mdict,
        coupling_names=tuple(model.coupling_names),
        point=(float(p[0]), float(p[1])),
        orders=orders,
        tol=None if relative else thr,
        rtol=thr if relative else None,
        targets=tuple(names),
        verdicts=tuple(verdicts),
        regions=tuple(regions),
        convergence=tuple(convs),
        cautions=tuple(cautions),
        description=description,
        invented=bool(invented),
    )


def _point_verdict(model: Model, target: Any, name: str, order: int, region: ValidityRegion, p: np.ndarray,
                   relative: bool, thr: float, treatment: str, backend: str) -> PointVerdict:
    """Verdict at the point from the point's own ray: error there, boundary on the ray."""
    i = int(region.point_ray)
    b: ValidityBoundary = region.boundaries[i]
    d = np.asarray(region.directions[i])
    t_p = float(np.hypot(*(p / region.scales)))
    ray = model.along(d)
    c = compare(ray, [ray_target(model, ray, target)], [order], [t_p], treatment=treatment, backend=backend)
    pert = float(c.perturbative[0, 0, 0])
    exact = float(c.exact[0, 0])
    err = float((c.rel_error if relative else c.abs_error)[0, 0, 0])
    valid = b.valid_at(t_p)
    if b.status in ("ill_defined", "exact_in_sector"):
        status = "undefined"
    else:
        status = "valid" if valid else "not valid"
    t_star = abs(b.coupling) / t_p if b.status == "found" else (math.inf if b.status == "not_reached" else
                                                                  (0.0 if b.status == "fails_at_zero" else math.nan))
    bp = tuple(float(x) for x in (t_star * p)) if math.isfinite(t_star) else (t_star, t_star)
    kind = "relative error" if relative else "error"
    where = {"found": f"it stops at {t_star:.3g} × the point ({bp[0]:.4g}, {bp[1]:.4g})",
             "not_reached": f"it holds up to the search limit ({b.max_coupling / t_p:.3g} × the point)",
             "fails_at_zero": "it fails at any nonzero coupling on this ray"}.get(b.status, f"the boundary is {b.status}")
    text = (f"{name}, order {order}: {kind} {err:.3g} at the point (tolerance {thr:g}) — {status}; along the ray "
            f"through the point {where}.")
    return PointVerdict(
        target=name, order=order, status=status, perturbative=pert, exact=exact, error=err,
        treatment=str(c.treatments[0]), boundary=t_star, boundary_point=bp, boundary_status=b.status, text=text,
    )


# ---------------------------------------------------------------------- writing
def regions_csv(report: RegionCheck) -> str:
    """One row per ray of every region: target, order, angle, direction, t*, boundary point, status."""
    lines = ["target,order,angle_deg,d1,d2,t_star,point1,point2,status"]
    for r in report.regions:
        for a, d, t, pt, st in zip(r.angles, r.directions, r.boundary, r.points, r.status):
            cells = [r.target, r.order, f"{math.degrees(a):.6g}", f"{d[0]:.10g}", f"{d[1]:.10g}", _num(t), _num(pt[0]),
                     _num(pt[1]), st]
            lines.append(",".join(_csv_cell(x) for x in cells))
    return "\n".join(lines) + "\n"


def _num(x: float) -> str:
    return f"{x:.10g}" if math.isfinite(x) else str(x)


def _csv_cell(x: Any) -> str:
    s = str(x)
    return '"' + s.replace('"', '""') + '"' if any(ch in s for ch in ',"\n') else s


def _figures(report: RegionCheck) -> list[tuple[str, str, bytes]]:
    """One region map per target: (file name, caption, PNG bytes)."""
    from matplotlib.figure import Figure as MplFigure

    from .plots.region import plot_region

    out = []
    for ti, name in enumerate(report.targets):
        regs = [r for r in report.regions if r.target == name]
        conv = report.convergence[ti] if ti < len(report.convergence) else None
        fig = MplFigure(figsize=(10.0, 5.625), layout="constrained")
        ax = fig.add_subplot()
        plot_region(regs, convergence=conv, point=report.point, ax=ax)
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=110, metadata={"Software": None})
        slug = "".join(ch if ch.isalnum() else "-" for ch in name).strip("-") or f"target{ti}"
        out.append((f"region-{ti + 1}-{slug}.png", f"Validity regions of {name}", buf.getvalue()))
    return out


def to_markdown(report: RegionCheck, figures: Sequence[tuple[str, str, bytes]] = ()) -> str:
    n1, n2 = report.coupling_names
    tol = f"relative tolerance {report.rtol:g}" if report.rtol is not None else f"absolute tolerance {report.tol:g}"
    lines = [f"# {report.title}", ""]
    if report.invented:
        lines += ["*The model is invented for this demonstration; its numbers describe no real system.*", ""]
    if report.description:
        lines += [report.description, ""]
    lines += [
        f"**{report.verdict_text}**", "",
        f"Model {report.model.get('name')} (N = {report.model.get('n')}), couplings {n1} and {n2}; point "
        f"({n1}, {n2}) = ({report.point[0]:g}, {report.point[1]:g}); {tol}. An order is the total degree of the "
        f"series in ({n1}, {n2}) (mixed terms included). 'Valid' means the tolerance holds on the whole straight "
        "path from the origin to the point.", "",
        "## At the point", "",
        "| target | order | perturbative | exact | error | verdict | boundary on the ray through the point |",
        "|---|---|---|---|---|---|---|",
    ]
    for v in report.verdicts:
        if v.boundary_status == "found":
            bd = f"{v.boundary:.3g} × point = ({v.boundary_point[0]:.4g}, {v.boundary_point[1]:.4g})"
        else:
            bd = v.boundary_status
        lines.append(f"| {_md(v.target)} | {v.order} | {v.perturbative:.10g} | {v.exact:.10g} | {v.error:.3g} | {v.status} | {bd} |")
    lines += ["", "## Region map", ""]
    for r in report.regions:
        found = np.isfinite(r.boundary) & (r.boundary > 0)
        near = float(np.min(np.hypot(*r.points[found].T))) if np.any(found) else math.nan
        lines.append(
            f"- {r.target}, order {r.order}: {r.angles.size} directions searched ({r.exact_solves} exact solves); "
            + (f"nearest boundary point at distance {near:.3g} from the origin." if math.isfinite(near)
               else "no boundary found within the search limit.")
        )
    for name, caption, _ in figures:
        lines += ["", f"![{caption}]({name})"]
    if report.convergence:
        lines += ["", "## Convergence along each direction", ""]
        for c in report.convergence:
            ok = np.isfinite(c.radius)
            if np.any(ok):
                i = int(np.nanargmin(np.where(ok, np.hypot(*c.points.T), np.inf)))
                lines.append(
                    f"- {c.target}: the series on the ray towards ({c.directions[i][0]:.3g}, {c.directions[i][1]:.3g}) "
                    f"converges only up to ({c.points[i][0]:.3g}, {c.points[i][1]:.3g}) (nearest singularity over "
                    f"{c.angles.size} rays; dotted curve on the region map)."
                )
    if report.cautions:
        lines += ["", "## Cautions", ""] + [f"- {c}" for c in report.cautions]
    lines += ["", "These results judge the formula against exact diagonalisation of the matrices given; defer to your own "
              "convergence checks (basis truncation, model) before relying on them for a design decision.", ""]
    return "\n".join(lines)


def _md(text: str) -> str:
    """A table cell: the pipe of ket labels (|0,0⟩) escaped."""
    return str(text).replace("|", "\\|")


def write_region_report(
    report: RegionCheck,
    out_dir: str | Path,
    *,
    formats: Sequence[str] = FORMATS,
    figures: bool = True,
    force: bool = False,
) -> list[Path]:
    """Write the report folder as a whole (see :func:`ptcheck.report.write_report`).

    Parameters
    ----------
    report : RegionCheck
    out_dir : str or Path
    formats : sequence of {"json", "md", "csv"}
        ``csv`` writes ``regions.csv`` (one row per ray of each region).
    figures : bool
        Region map PNGs (with the Markdown summary).
    force : bool
        Replace a different existing report.

    Returns
    -------
    list of Path
    """
    import json

    formats = tuple(dict.fromkeys(formats))
    if not formats:
        raise ValueError("formats is empty; give at least one of json, md, csv")
    for f in formats:
        val.check_choice(f, "format", FORMATS)
    out = check_out_dir(out_dir)
    figs = _figures(report) if ("md" in formats and figures) else []
    files: dict[str, str | bytes] = {name: png for name, _, png in figs}
    if "csv" in formats:
        files["regions.csv"] = regions_csv(report)
    if "md" in formats:
        files["report.md"] = to_markdown(report, figs)
    d = report.to_dict()
    if "json" in formats:
        files["report.json"] = json.dumps(dict(d, figures=[n for n, _, _ in figs]), indent=1, ensure_ascii=False,
                                          allow_nan=False)
    return write_folder(out, files, fingerprint=report_fingerprint(d), force=force, report_file=_is_report_file,
                        legacy_fingerprint=_legacy_fingerprint)
