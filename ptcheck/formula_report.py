"""The formulas of a check report: ``formula.tex``, ``formula.py`` and their slide figures.

:func:`report_formulas` exports, for every target and every integer order a
:class:`~ptcheck.report.CheckReport` judged, the formula of exactly what was
judged (:func:`ptcheck.formula` with the report's treatment, tolerance,
coupling of interest, threshold, backend and direction), so each range it
prints is the report's validity boundary.  :meth:`ReportFormulas.files` gives
the files :func:`ptcheck.report.write_report` adds to the report directory:

- ``formula.tex``: the equations with their validity ranges (LaTeX text);
- ``formula.py``: one self-contained Python function per formula;
- ``formula.png`` (one formula) or ``formula-<i>-<target>-order<k>.png``: the
  slide figure of each formula (:func:`ptcheck.plots.plot_formula`).

Used by ``ptcheck check ... --formula`` and by the panels' "export formula"
button (:func:`collect` gathers any formulas for the same files).
"""

from __future__ import annotations

import html
import keyword
import tempfile
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ._progress import ProgressCallback, report_progress
from .approximants import Pade, order_name
from .formula import Formula, formula

__all__ = ["ReportFormulas", "collect", "report_formulas"]


@dataclass(frozen=True, repr=False, eq=False)
class ReportFormulas:
    """Formulas of the targets and orders of a check report.

    Attributes
    ----------
    formulas : tuple of Formula
        One per target x integer order judged, in the report's order.
    function_names : tuple of str
        Name of each formula's function in ``formula.py`` (unique; the
        formula's own name when that is unique, else with target and order).
    figure_names : tuple of str
        File name of each formula's figure.
    skipped : tuple of str
        Target x order pairs without a formula, and why (a Padé order; a
        quantity with a level treated by an effective Hamiltonian; ...).
    title : str
        What the formulas come from (model, coupling, tolerance).
    """

    formulas: tuple
    function_names: tuple
    figure_names: tuple
    skipped: tuple
    title: str

    def __repr__(self) -> str:
        return f"ReportFormulas({len(self.formulas)} formulas, {len(self.skipped)} skipped)"

    def to_dict(self) -> dict:
        return {
            "title": self.title,
            "formulas": [{**f.to_dict(), "function_name_in_file": n, "figure": g}
                         for f, n, g in zip(self.formulas, self.function_names, self.figure_names)],
            "skipped": list(self.skipped),
        }

    def _repr_html_(self) -> str:
        items = "".join(f"<li>{html.escape(f.target)}, order {f.order}: {html.escape(f.equations[0])}</li>" for f in self.formulas)
        return f"<b>Formulas</b> ({html.escape(self.title)})<ul>{items}</ul>"

    # ------------------------------------------------------------------ files
    def latex(self) -> str:
        """Text of ``formula.tex``: a comment header, then each formula with its ranges (one paragraph per line)."""
        out = [f"% {line}" for line in _header(self)] + [""]
        for f in self.formulas:
            out.append(f"% {f.target}, order {f.order} ({f.treatment})")
            for line in f.latex.split("\n"):
                out += [line, ""]
        for s in self.skipped:
            out.append(f"% no formula: {s}")
        return "\n".join(out).rstrip("\n") + "\n"

    def python(self) -> str:
        """Text of ``formula.py``: a module docstring, then one pure-Python function per formula."""
        doc = "\n".join(_header(self) + ([""] + [f"No formula: {s}" for s in self.skipped] if self.skipped else []))
        doc = doc.replace("\\", "\\\\").replace('"""', '\\"\\"\\"')
        parts = [f'"""{doc}\n"""\n']
        for f, name in zip(self.formulas, self.function_names):
            src = f.python
            prefix = f"def {f.function_name}("
            parts.append(f"def {name}(" + src[len(prefix):] if src.startswith(prefix) else src)
        return "\n\n".join(parts)

    def figures(self) -> list[tuple[str, str, bytes]]:
        """``(file name, caption, PNG bytes)`` of each formula's slide figure (needs matplotlib)."""
        from matplotlib.figure import Figure as MplFigure  # no pyplot: no global state

        from .plots import SLIDE_SIZE, plot_formula, save

        out = []
        with tempfile.TemporaryDirectory() as d:
            for f, name in zip(self.formulas, self.figure_names):
                fig = MplFigure(figsize=SLIDE_SIZE, layout="constrained")
                plot_formula(f, ax=fig.add_subplot())
                path = Path(d) / name
                save(fig, path, dpi=100)
                caption = (f"{f.target}, order {f.order}: the formula, its error against λ and where it meets the "
                           "tolerance (shaded).")
                out.append((name, caption, path.read_bytes()))
        return out

    def files(self) -> dict[str, str]:
        """``{file name: text}``: ``formula.tex`` and ``formula.py`` (the figures: :meth:`figures`)."""
        return {"formula.tex": self.latex(), "formula.py": self.python()}

    def to_markdown(self) -> str:
        """The section of ``report.md``."""
        out = ["## Formulas", "", "Each formula is exactly what was judged above (same treatment and tolerance); "
               "its range is the validity boundary. Files: `formula.tex`, `formula.py`; figures below.", ""]
        for f, name in zip(self.formulas, self.function_names):
            ranges = "; ".join(r.text for r in f.ranges)
            out += [f"- **{f.target}**, order {f.order} ({f.treatment}): `{_one_line(f.expression)}` — {ranges} "
                    f"(`{name}` in formula.py)"]
        out += [f"- no formula: {s}" for s in self.skipped]
        return "\n".join(out)


def _one_line(text: str, limit: int = 160) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _header(r: ReportFormulas) -> list[str]:
    version = r.formulas[0].version if r.formulas else ""
    return [
        f"Formulas exported by ptcheck {version}".rstrip() + f" from {r.title}.",
        "Each is followed by the range of couplings where it meets the tolerance, checked against exact",
        "diagonalisation of the model.",
    ]


def _slug(text: str) -> str:
    keep = "".join(ch if ch.isascii() and ch.isalnum() else "_" for ch in str(text)).strip("_")
    while "__" in keep:
        keep = keep.replace("__", "_")
    return keep


def _unique_names(formulas: list[Formula]) -> list[str]:
    counts: dict[str, int] = {}
    for f in formulas:
        counts[f.function_name] = counts.get(f.function_name, 0) + 1
    names = []
    for i, f in enumerate(formulas):
        if counts[f.function_name] == 1:
            names.append(f.function_name)
            continue
        slug = _slug(f.target)
        name = f"{f.function_name}_{slug}_order{f.order}" if slug else f"{f.function_name}_{i + 1}_order{f.order}"
        names.append(name if name.isidentifier() and not keyword.iskeyword(name) else f"formula_{i + 1}")
    return names


def _figure_names(formulas: list[Formula]) -> list[str]:
    if len(formulas) == 1:
        return ["formula.png"]
    return [f"formula-{i + 1}-{_slug(f.target).replace('_', '-') or 'target'}-order{f.order}.png" for i, f in enumerate(formulas)]


def collect(formulas: Sequence[Formula], *, title: str, skipped: Sequence[str] = ()) -> ReportFormulas:
    """Formulas gathered for files: unique function names in ``formula.py`` and figure file names.

    Parameters
    ----------
    formulas : sequence of Formula
    title : str
        What they come from (model, coupling, tolerance), for the file headers.
    skipped : sequence of str
        Targets without a formula, and why.
    """
    formulas = list(formulas)
    return ReportFormulas(
        formulas=tuple(formulas), function_names=tuple(_unique_names(formulas)),
        figure_names=tuple(_figure_names(formulas)), skipped=tuple(skipped), title=str(title),
    )


def report_formulas(report: Any, *, progress: ProgressCallback | None = None) -> ReportFormulas:
    """The formulas of every target x integer order judged in a check report.

    Parameters
    ----------
    report : CheckReport
        From :func:`ptcheck.report.run_check` (it carries the model checked).
    progress : callable(done, total), optional

    Returns
    -------
    ReportFormulas

    Notes
    -----
    Each formula is :func:`ptcheck.formula` with the report's treatment,
    tolerance, threshold and backend, the report's coupling as the coupling of
    interest, and the direction of that coupling only -- so its range is the
    report's validity boundary of that target and order.  A target x order
    without a scalar or matrix formula (a Padé order; a quantity whose level
    is an eigenvalue of an effective Hamiltonian; a block treatment at
    λ = 0) is listed in ``skipped`` with the reason.
    """
    model = getattr(report, "source_model", None)
    if model is None:
        raise ValueError("the report carries no model (source_model is None): formulas need the model checked")
    s: Mapping[str, Any] = report.settings
    comp = report.comparison
    lam0 = float(s["coupling"])
    tolkw = {"rtol": s["rtol"]} if s["rtol"] is not None else {"tol": s["tol"]}
    params = (report.model or {}).get("params")
    keys = dict(zip(comp.targets, comp.levels))
    jobs = [(v.target, v.order) for v in report.verdicts]
    jobs = list(dict.fromkeys(jobs))
    formulas: list[Formula] = []
    skipped: list[str] = []
    for i, (target, spec) in enumerate(jobs):
        if isinstance(spec, Pade):
            skipped.append(f"{target}, {order_name(spec)}: a Padé approximant is not exported (only truncated series)")
        else:
            try:
                formulas.append(formula(
                    model, keys[target], int(spec), **tolkw, directions=(int(s["direction"]),),
                    treatment=s["treatment"], coupling=lam0 if lam0 != 0 else None, threshold=s["threshold"],
                    backend=s["backend"], params=params,
                ))
            except (ValueError, ArithmeticError) as exc:
                skipped.append(f"{target}, order {order_name(spec)}: {exc}")
        report_progress(progress, i + 1, len(jobs))
    tol = f"relative tolerance {s['rtol']:g}" if s["rtol"] is not None else f"absolute tolerance {s['tol']:g}"
    title = (f"the check of {report.model['name']} at λ = {lam0:g} ({tol}, treatment {s['treatment']!r}; "
             "see report.md / report.json beside this file)")
    return collect(formulas, title=title, skipped=skipped)
