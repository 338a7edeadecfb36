"""Command line: ``ptcheck demo``, ``ptcheck check MODEL``, ``ptcheck models``.

A thin skin over :func:`ptcheck.report.run_check` and
:func:`ptcheck.report.write_report`: flags map onto their keywords, and the
report files are the output.  ``main(argv=None) -> int`` is the entry point
(``ptcheck`` script and ``python -m ptcheck``).

Exit status
-----------
0
    ``check``: every order asked for meets the tolerance for every level /
    quantity at the coupling asked for.  ``demo``, ``models``, ``--help``: done.
1
    ``check``: at least one of them does not (or its relative error is
    undefined at that coupling, or certified bounds can decide neither way).
2
    Bad input: unknown flags or values, a missing / malformed / damaged model
    file, an unknown model or parameter, a size or order beyond the limits, a
    non-Hermitian matrix, λ = 0, an unusable output folder, a different report
    already in the output folder (use ``--force``), another ptcheck writing
    into the same folder at the same moment.  One line on stderr.
3
    Internal error: ptcheck itself failed (a bug, or out of memory).  One
    line on stderr; no verdict was reached.  A script can tell it from 1.
130, 143
    Interrupted by SIGINT (Ctrl-C) or SIGTERM.  The output folder holds the
    previous report or the new one, complete (the message says which).

Every failure is one line on stderr starting with ``ptcheck: error:``, never
a traceback.
"""

from __future__ import annotations

import argparse
import contextlib
import gc
import os
import signal
import sys
import textwrap
import threading
import warnings
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

from ._demo import DEMO_PARAMS
from ._startup import _is_command_line
from .treatment import DEFAULT_TREATMENT, TREATMENTS

__all__ = ["main", "build_parser", "DEMO_PARAMS"]

EXIT_VALID, EXIT_NOT_VALID, EXIT_BAD_INPUT, EXIT_INTERNAL_ERROR = 0, 1, 2, 3
#: SIGINT and SIGTERM: 128 + the signal number, as a shell reports them.
EXIT_INTERRUPTED, EXIT_TERMINATED = 130, 143

#: Figure file formats (as in :data:`ptcheck.report.FIGURE_FORMATS`; kept here so --help needs no heavy import).
FIGURE_FORMATS = ("png", "svg", "pdf")

_MAIN_EPILOG = """\
exit status:
  0    check: every order asked for meets the tolerance at the coupling (demo/models: done)
  1    check: some order does not meet it
  2    bad input (flags, model file, model, matrices, output folder, existing different report)
  3    internal error (a bug in ptcheck, or out of memory): no verdict
  130  interrupted (Ctrl-C)
  143  terminated (SIGTERM)

examples:
  ptcheck demo --out q17-report
  ptcheck check qubit.toml --coupling 1.0 --orders 2 4 --rtol 0.01
  ptcheck check chain.toml --coupling 0.3 --reference bounds
  ptcheck models
"""

_CHECK_EPILOG = """\
model file (TOML; see also `python -c "import ptcheck.modelfile as m; help(m)"`):

  title = "Readout of my qubit"          # optional
  [model]
  builtin = "kerr_qubit_resonator"       # a name from `ptcheck models`
  [model.params]                         # that builder's keyword arguments
  omega_q = 5.0
  g = 0.1

  # or matrices (paths relative to the TOML file):
  #   [model]
  #   h0 = "h0.npy"    v = "v.npy"       # numpy.save, or scipy.sparse.save_npz (.npz)
  #   matrices = "model.npz"             # or one numpy.savez archive with h0 and v
  #   labels = ["g", "e"]                # optional state names; dims = [2, 5] optional
  #   [model.conserved]                  # optional conserved operators (symmetries the
  #   parity = "parity.npz"              #   coupling graph cannot see), files like h0;
  #                                      #   each must commute with h0 and v
  # either kind may name the physical coupling at λ = 1, shown beside λ in the report:
  #   coupling_scale = 0.066   coupling_unit = "GHz"   coupling_name = "g"   (in [model])

  [check]                                # all optional; flags override
  levels = [0, [1, 0]]                   # ranks or labels ([1, 0] is the label (1,0))
  orders = [2, 4]                        # every order listed is judged
  coupling = 1.0
  rtol = 0.01                            # or tol = 1e-4 (absolute, energy units)
  treatment = "standard"
  backend = "auto"

  # two couplings: v = ["v1.npy", "v2.npy"] (or builtin = "polar_molecule"),
  # coupling_names = ["E", "B"] in [model], and couplings = [0.8, 0.3] in [check]
  # (or --couplings 0.8 0.3): verdict at that point, boundary on its ray, region map

  [[quantity]]                           # derived quantities, any number
  name = "chi"
  expr = "0.5*(1,1) - 0.5*(1,0) - 0.5*(0,1) + 0.5*(0,0)"
  # or: kind = "dispersive_shift" (also transition_frequency, zz_coupling, ...)

  MODEL may also be an .npz archive with arrays h0 and v.

levels: 3 = energy rank 3 (0 = lowest unperturbed level); (1,0) or |1,0> = the label
(1, 0); anything else = a string label.  --quantity "f01 = (1,0) - (0,0)".
orders: 2, 4, pade2/2, pade2/2@2 (Padé in λ²).
Give MODEL before the options that take several values (--levels, --orders, --format).

output (in --out, default <MODEL name>-report): report.md (verdict, cautions, tables,
figures), report.json (everything), comparison.csv, boundaries.csv, figures (*.png);
with --formula also formula.tex, formula.py and formula*.png.
The folder is replaced as a whole (never a mix of old and new files); a
different existing report is not replaced without --force.

reference: --reference exact judges against exact solves; --reference bounds against
certified brackets of the exact levels (Kato–Temple bounds from perturbative trial
states: no exact solve, for bases too large to diagonalise). A certified verdict is
'valid' (guaranteed below the certified coupling), 'not valid' (failure certified) or
'undecided'; each says whether it is rigorous or conditional on an estimated gap.
--reference auto (default) uses bounds above --bounds-above states (default 20000)
when every level is non-degenerate in its sector and no Padé order is judged.

exit status: 0 valid, 1 not valid, 2 bad input, 3 internal error,
130 interrupted, 143 terminated (1 also when certified bounds cannot decide).
"""


def _wrap(text: str) -> str:
    return textwrap.fill(text, width=78)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser (sub-commands ``demo``, ``check``, ``models``)."""
    from . import __version__

    p = argparse.ArgumentParser(
        prog="ptcheck",
        description=_wrap("Can a perturbative formula be trusted for H(λ) = H0 + λV at your coupling? "
                          "Any-order perturbation theory checked against exact solutions, with a report."),
        epilog=_MAIN_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--version", action="version", version=f"ptcheck {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    d = sub.add_parser(
        "demo",
        help="full check of an invented transmon-like qubit (Q-17) and its readout resonator",
        description=_wrap("Run the full check on the invented device Q-17 (a transmon-like qubit with a readout "
                          "resonator; invented numbers) and write the report with figures."),
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="exit status: 0 when the report was written (whatever its verdict), 2 on bad input, "
               "3 on an internal error, 130/143 when interrupted/terminated.",
    )
    d.add_argument("--out", metavar="DIR", default="ptcheck-demo", help="output directory (default: %(default)s)")
    d.add_argument("--force", action="store_true", help="replace a different report already in DIR")
    d.add_argument("--no-map", action="store_true", help="skip the validity map and the photon-number boundaries")
    d.add_argument("--no-figures", action="store_true", help="write no figures")
    d.add_argument("--figure-format", choices=FIGURE_FORMATS, default="png", metavar="FMT",
                   help="figure files: png, svg or pdf (default: %(default)s)")

    c = sub.add_parser(
        "check",
        help="check a model file (built-in model or saved matrices) and write a report",
        description=_wrap("Compare perturbation theory with exact solutions for the levels / quantities of MODEL, "
                          "find where each order stops meeting the tolerance, diagnose convergence and "
                          "near-degenerate levels, and write a report. Flags override the model file's [check] table."),
        epilog=_CHECK_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    c.add_argument("model", metavar="MODEL", help="model file (.toml, or an .npz with arrays h0 and v)")
    c.add_argument("--levels", nargs="+", metavar="LEVEL", help="levels to check: ranks (0, 1, ...) or labels like (1,0)")
    c.add_argument("--quantity", action="append", metavar="'NAME = EXPR'",
                   help="a derived quantity, e.g. 'f01 = (1,0) - (0,0)' (repeatable)")
    c.add_argument("--orders", nargs="+", metavar="ORDER", help="orders you rely on, e.g. 2 4 or 2,4 or pade2/2 (default: 2)")
    tg = c.add_mutually_exclusive_group()
    tg.add_argument("--tol", type=float, nargs="+", metavar="X",
                    help="absolute tolerance (energy units of H0); several: the first is judged, all get a boundary")
    tg.add_argument("--rtol", type=float, nargs="+", metavar="X",
                    help="relative tolerance (default 0.01: 1 %% of the exact shift); e.g. --rtol 0.01 0.05")
    c.add_argument("--coupling", type=float, metavar="λ", help="the coupling you use (dimensionless); required here or in MODEL")
    c.add_argument("--couplings", type=float, nargs=2, metavar=("λ1", "λ2"),
                   help="the point (λ1, λ2) you use, for a model with two couplings (or couplings = [λ1, λ2] in MODEL)")
    c.add_argument("--treatment", choices=TREATMENTS,
                   help="perturbation theory judged (default: standard = the textbook series; degenerate perturbation "
                        "theory inside exactly degenerate groups); block/auto ask for near-degenerate blocks")
    c.add_argument("--backend", metavar="NAME", help="exact solver: auto, dense, sparse, qutip (default: auto)")
    c.add_argument("--sweep", nargs=3, metavar=("LO", "HI", "N"),
                   help="couplings of the comparison (figures, CSV): N points from LO to HI (default: automatic)")
    c.add_argument("--threshold", type=float, metavar="X",
                   help="mixing-ratio threshold |λV|/|ΔE| for near-degenerate pairs and blocks (default 0.1)")
    c.add_argument("--convergence-order", type=int, metavar="K",
                   help="series order analysed for convergence (radius, exceptional points; default 40)")
    c.add_argument("--reference", choices=("exact", "bounds", "auto"), default="auto",
                   help="what the perturbative values are judged against: exact solves, or certified bounds with no "
                        "exact solve (verdicts say 'certified', rigorous or conditional on an estimated gap, or "
                        "'undecided'); auto (default) uses bounds above --bounds-above states when every level can "
                        "be bracketed")
    c.add_argument("--bounds-above", type=int, metavar="N", default=None,
                   help="basis size above which --reference auto uses certified bounds (default: 20000)")
    c.add_argument("--gap", metavar="KIND",
                   help="gap of the certified bounds: auto (default), weyl, neighbours (rigorous), estimate (a Lanczos "
                        "estimate: verdicts conditional on it), or a number (a gap you state, energy units)")
    c.add_argument("--out", metavar="DIR", help="output directory (default: <MODEL name>-report)")
    c.add_argument("--format", nargs="+", choices=("json", "md", "csv"), metavar="FMT",
                   help="report formats among json, md, csv (default: all three)")
    c.add_argument("--force", action="store_true", help="replace a different report already in DIR")
    c.add_argument("--no-figures", action="store_true", help="write no figures")
    c.add_argument("--figure-format", choices=FIGURE_FORMATS, default="png", metavar="FMT",
                   help="figure files: png, svg or pdf (default: %(default)s)")
    c.add_argument("--formula", action="store_true",
                   help="also write formula.tex, formula.py and the formula figure: each target's formula at each "
                        "order judged, with the range where it meets the tolerance")

    sub.add_parser("models", help="list the built-in models and their parameters",
                   description="List the built-in models (for `builtin = ...` in a model file) and their parameters.")
    return p


# ---------------------------------------------------------------------- helpers
def _err(msg: str) -> None:
    sys.stderr.write(f"ptcheck: error: {' '.join(str(msg).split())}\n")


def _showwarning(message, category, filename, lineno, file=None, line=None) -> None:  # noqa: ANN001
    sys.stderr.write(f"ptcheck: warning: {' '.join(str(message).split())}\n")


def _split(items: Sequence[str] | None) -> list[str]:
    """Accept both ``2 4`` and ``2,4`` (but keep labels like ``(1,0)`` whole)."""
    out: list[str] = []
    for it in items or []:
        if "(" in it or "|" in it:
            out.append(it)
        else:
            out.extend(x for x in it.split(",") if x.strip())
    return out


def _progress_bar(label: str):
    from ._progress import ProgressBar

    return ProgressBar(label)


def _print_summary(report: Any, files: Sequence[Path], out: Path) -> None:
    w = sys.stdout.write
    w(report.verdict_text + "\n")
    for v in report.verdicts:
        w(f"  - {v.text}\n")
    if report.cautions:
        w("cautions:\n")
        for c in report.cautions:
            w(f"  - {c}\n")
    names = [p.name for p in files]
    main = out / ("report.md" if "report.md" in names else names[-1])
    others = [n for n in names if n != main.name]
    w(f"report: {main}" + (f" (also {', '.join(others)})" if others else "") + "\n")


# ---------------------------------------------------------------------- commands
def _cmd_models() -> int:
    import inspect

    from .models import BUILDERS

    for name, fn in sorted(BUILDERS.items()):
        params = ", ".join(
            f"{k}={v.default!r}" for k, v in inspect.signature(fn).parameters.items() if v.default is not inspect.Parameter.empty
        )
        doc = (inspect.getdoc(fn) or "").splitlines()[0]
        sys.stdout.write(f"{name}: {doc}\n    {params}\n")
    return EXIT_VALID


class _Terminated(KeyboardInterrupt):
    """SIGTERM, raised in the main thread so that clean-up code runs as for Ctrl-C."""


class _Output:
    """Where this run writes its report, and the fingerprint of that report once computed.

    Used to say truthfully what an interrupt left in the output folder.
    """

    def __init__(self, given: str, target: Path) -> None:
        self.given = given
        self.target = target
        self.fingerprint: str | None = None
        self.before: str | None = None


class _Run:
    """What one run of the command line has set up so far (for the message after an interrupt)."""

    def __init__(self) -> None:
        self.out: _Output | None = None


def _out_dir(given: str | None, default: str) -> str:
    if given is not None and not given.strip():
        raise ValueError(f"--out is empty; give the report folder, e.g. --out {default}")
    return default if given is None else given


def _prepare_output(given: str) -> _Output:
    """Check the output folder before any work (empty name, a file, the current folder, foreign files)."""
    from .report import check_out_dir, read_fingerprint

    out = _Output(given, check_out_dir(given))
    out.before = read_fingerprint(out.target)
    return out


def _write(report: Any, out: _Output, **kw: Any) -> list[Path]:
    from .report import report_fingerprint, write_report

    out.fingerprint = report_fingerprint(report)
    return write_report(report, out.target, **kw)


def _cmd_check(a: argparse.Namespace, run: _Run) -> int:
    from .approximants import parse_orders
    from .modelfile import load_model_file, parse_level, parse_quantity
    from .report import run_check

    given = _out_dir(a.out, f"{Path(a.model).stem}-report")
    out = run.out = _prepare_output(given)
    mf = load_model_file(a.model)
    model = mf.model
    if model.n_couplings > 1:
        return _cmd_check_couplings(a, out, given, mf)
    if a.couplings is not None:
        raise ValueError(f"--couplings is for models with several couplings; {a.model} has one: use --coupling λ")
    levels: list[Any] = [parse_level(x) for x in a.levels] if a.levels else list(mf.levels)
    quantities = [parse_quantity(q) for q in a.quantity] if a.quantity else list(mf.quantities)
    targets = levels + quantities
    orders = parse_orders(_split(a.orders)) if a.orders else (mf.orders or None)
    coupling = a.coupling if a.coupling is not None else mf.coupling
    if coupling is None:
        raise ValueError("no coupling given: pass --coupling λ or set coupling in the [check] table of the model file")
    if coupling == 0:
        raise ValueError("the coupling is 0: at λ = 0 every order is exact, there is nothing to check; give the coupling "
                         "you use (--coupling λ)")
    if a.tol is not None or a.rtol is not None:
        tol, rtol = a.tol, a.rtol
    else:
        tol, rtol = mf.tol, mf.rtol
    treatment = a.treatment or mf.treatment or DEFAULT_TREATMENT
    backend = a.backend or mf.backend or "auto"
    bounds_kw = _bounds_options(a)
    source = {"model_file": str(a.model), "kind": mf.kind}
    extra = _presentation_options(a)
    with _progress_bar("checking") as bar:
        report = run_check(
            model, targets or None, orders, coupling=coupling, tol=tol, rtol=rtol, treatment=treatment,
            backend=backend, builder=mf.builder, params=dict(mf.params) if mf.builder else None, source=source,
            title=mf.title, progress=bar, **extra, **bounds_kw,
        )
    if a.formula:
        from dataclasses import replace

        from .formula_report import report_formulas

        with _progress_bar("formulas") as bar:
            report = replace(report, extras={**report.extras, "formulas": report_formulas(report, progress=bar)})
    files = _write(report, out, formats=a.format or ("json", "md", "csv"), figures=_figures(a), force=a.force)
    _print_summary(report, files, Path(given))
    return report.exit_status


def _cmd_check_couplings(a: argparse.Namespace, out: _Output, given: str, mf: Any) -> int:
    """``check`` of a model with several couplings: verdict at the point, boundary on its ray, region map."""
    from .approximants import parse_orders
    from .modelfile import parse_level, parse_quantity
    from .region_report import run_region_check, write_region_report
    from .report import report_fingerprint

    model = mf.model
    names = ", ".join(model.coupling_names)
    if a.coupling is not None:
        raise ValueError(f"{a.model} has {model.n_couplings} couplings ({names}): give the point with --couplings, "
                         "not --coupling")
    point = tuple(a.couplings) if a.couplings is not None else mf.couplings
    if point is None:
        raise ValueError(f"no coupling point given: the model has couplings ({names}); pass --couplings λ1 λ2 or set "
                         "couplings = [λ1, λ2] in the [check] table of the model file")
    levels: list[Any] = [parse_level(x) for x in a.levels] if a.levels else list(mf.levels)
    quantities = [parse_quantity(q) for q in a.quantity] if a.quantity else list(mf.quantities)
    orders = parse_orders(_split(a.orders)) if a.orders else (mf.orders or None)
    if orders is not None and not all(isinstance(o, int) for o in orders):
        raise ValueError(f"with several couplings the orders are total degrees (integers); got {[str(o) for o in orders]}")
    if a.formula:
        raise ValueError("--formula is not available for models with several couplings in the command line; "
                         "use ptcheck.formula in Python")
    unsupported = [flag for flag, given_ in (
        ("--reference bounds", a.reference == "bounds"), ("--bounds-above", a.bounds_above is not None),
        ("--gap", a.gap is not None), ("--sweep", a.sweep is not None), ("--threshold", a.threshold is not None),
        (f"--figure-format {a.figure_format}", a.figure_format != "png"),
    ) if given_]
    if unsupported:
        raise ValueError(f"{', '.join(unsupported)}: not available for a model with several couplings (exact reference, "
                         "region map in PNG)")
    if a.tol is not None or a.rtol is not None:
        tol, rtol = _one_tolerance(a.tol, "--tol"), _one_tolerance(a.rtol, "--rtol")
    else:
        tol, rtol = mf.tol, mf.rtol
    conv = {} if a.convergence_order is None else {"convergence_order": a.convergence_order}
    with _progress_bar("checking") as bar:
        report = run_region_check(
            model, (levels + quantities) or None, orders, couplings=point, tol=tol, rtol=rtol,
            treatment=a.treatment or mf.treatment or DEFAULT_TREATMENT, backend=a.backend or mf.backend or "auto",
            title=mf.title, source={"model_file": str(a.model), "kind": mf.kind, "builder": mf.builder},
            progress=bar, **conv,
        )
    out.fingerprint = report_fingerprint(report.to_dict())
    files = write_region_report(report, out.target, formats=a.format or ("json", "md", "csv"),
                                figures=not a.no_figures, force=a.force)
    _print_summary(report, files, Path(given))
    return report.exit_status


def _one_tolerance(x: Any, flag: str) -> float | None:
    """One tolerance of a check with several couplings (each tolerance is a region search per order)."""
    if x is None or not isinstance(x, (list, tuple)):
        return x
    if len(x) != 1:
        raise ValueError(f"{flag}: give one tolerance for a model with several couplings; got {len(x)} ({x})")
    return x[0]


def _bounds_options(a: argparse.Namespace) -> dict:
    """run_check keywords of --reference, --bounds-above and --gap (checked here, before any work)."""
    from .report import DEFAULT_BOUNDS_ABOVE

    kw: dict[str, Any] = {"reference": a.reference}
    if a.bounds_above is not None:
        if a.bounds_above < 0:
            raise ValueError(f"--bounds-above must be a basis size >= 0; got {a.bounds_above}")
        kw["bounds_above"] = a.bounds_above
    else:
        kw["bounds_above"] = DEFAULT_BOUNDS_ABOVE
    if a.gap is not None:
        from ._gaps import GAP_KINDS

        if a.gap in GAP_KINDS:
            kw["gap"] = a.gap
        else:
            try:
                kw["gap"] = float(a.gap)
            except ValueError:
                raise ValueError(f"--gap must be one of {', '.join(GAP_KINDS)} or a positive number; got {a.gap!r}") from None
            if not kw["gap"] > 0 or kw["gap"] == float("inf"):
                raise ValueError(f"--gap must be one of {', '.join(GAP_KINDS)} or a positive number; got {a.gap!r}")
    return kw


def _presentation_options(a: argparse.Namespace) -> dict:
    """run_check keywords of --sweep, --threshold and --convergence-order (only those given)."""
    import numpy as np

    out: dict[str, Any] = {}
    if a.sweep is not None:
        lo, hi, n = a.sweep
        try:
            lo_f, hi_f, n_i = float(lo), float(hi), int(n)
        except ValueError:
            raise ValueError(f"--sweep takes LO HI N (two numbers and a whole number of points); got {' '.join(a.sweep)}") from None
        if not (np.isfinite(lo_f) and np.isfinite(hi_f) and lo_f < hi_f and n_i >= 3):
            raise ValueError(f"--sweep needs LO < HI (finite) and N >= 3; got {' '.join(a.sweep)}")
        out["couplings"] = np.linspace(lo_f, hi_f, n_i)
    if a.threshold is not None:
        out["threshold"] = a.threshold
    if a.convergence_order is not None:
        out["convergence_order"] = a.convergence_order
    return out


def _figures(a: argparse.Namespace) -> Any:
    """The figure step of write_report: none, or the default figures in the format asked for."""
    if a.no_figures:
        return False
    from functools import partial

    from .report import default_figures

    return partial(default_figures, figure_format=a.figure_format)


def _cmd_demo(a: argparse.Namespace, run: _Run) -> int:
    from .maps import _single_thread_blas

    # small matrices (N = 32, 96): one BLAS thread is faster than several; the independent parts (side studies,
    # figures) run on forked workers beside the check (ptcheck._demo)
    with _single_thread_blas():
        return _demo(a, run)


def _demo(a: argparse.Namespace, run: _Run) -> int:
    from dataclasses import replace

    from ._demo import DEMO_MARK, DemoWork, demo_model
    from .quantities import dispersive_shift, stark_shift
    from .report import run_check

    given = _out_dir(a.out, "ptcheck-demo")
    out = run.out = _prepare_output(given)
    p = DEMO_PARAMS
    model = demo_model(p)
    lamb = stark_shift((1, 0), (0, 0), name="qubit Lamb shift", units="GHz")
    chi = dispersive_shift(name="chi", units="GHz")
    description = (
        "Design check of Q-17, an **invented** transmon-like qubit (a Kerr ladder of 4 levels: ω_q/2π = "
        f"{p['omega_q']} GHz, anharmonicity α/2π = {p['alpha']} GHz) coupled with g/2π = {p['g']} GHz to a readout "
        f"resonator at ω_r/2π = {p['omega_r']} GHz ({p['n_photons']} Fock states), without the rotating-wave "
        "approximation. The numbers are made up for this demonstration and describe no real device. The design uses "
        "the second-order (dispersive) formulas for the qubit's Lamb shift and the dispersive shift χ at the design "
        "coupling λ = 1 (g/2π = 82 MHz); this report checks them against exact diagonalisation, to 1 % (judged) "
        "and 5 %, and shows how far the coupling, the resonator frequency and the photon number can go."
    )
    fmt = None if a.no_figures else a.figure_format
    with contextlib.ExitStack() as stack:
        # the side studies start now on a worker; the check runs here meanwhile
        work = DemoWork(stack, chi, model, studies=not a.no_map, figure_format=fmt)
        with _progress_bar("demo") as bar:
            report = run_check(
                model, [lamb, chi], [2, 4], coupling=1.0, rtol=[0.01, 0.05], builder="kerr_qubit_resonator", params=p,
                source={"demo": "Q-17 (invented)"},
                title="Q-17 (invented device): design check of the second-order dispersive formulas",
                description=description, invented=True, progress=bar, executor=work.executor,
            )
        extras: dict[str, Any] = {"energy_unit": "GHz", **work.studies()}
        if not a.no_map:
            extras["validity_map_mark"] = DEMO_MARK
        report = replace(report, extras={**report.extras, **extras})
        figures: Any = False if fmt is None else work.figures
        files = _write(report, out, figures=figures, force=a.force)
    _print_summary(report, files, Path(given))
    return EXIT_VALID


# ---------------------------------------------------------------------- entry point
def _interrupted(exc: KeyboardInterrupt, run: _Run) -> int:
    """One truthful line about what the output folder holds after an interrupt."""
    from .report import read_fingerprint

    what = "terminated" if isinstance(exc, _Terminated) else "interrupted"
    out = run.out
    if out is None:
        _err(f"{what}; nothing was written")
    else:
        now = read_fingerprint(out.target)
        where = repr(out.given)
        if out.fingerprint is not None and now == out.fingerprint and out.before == now:
            _err(f"{what}; {where} holds a complete report of these same settings and results")
        elif out.fingerprint is not None and now == out.fingerprint:
            _err(f"{what} after the report was written: {where} holds the new report, complete")
        elif now is not None:
            _err(f"{what} before the report was written: {where} still holds the previous report, unchanged")
        else:
            _err(f"{what} before the report was written; nothing was written to {where}")
    return EXIT_TERMINATED if isinstance(exc, _Terminated) else EXIT_INTERRUPTED


def _terminator(owner: int, exc: type[BaseException]) -> Any:
    """Signal handler of process ``owner``: raise ``exc`` there; end quietly in a forked worker.

    A worker forked from ``owner`` inherits the handler until its own set-up runs; stopped while starting up it
    must not print a traceback into the caller's stderr, so it exits as the signal's default action would.
    """

    def handler(signum: int, frame: Any) -> None:
        if os.getpid() != owner:
            os._exit(128 + signum)
        raise exc()

    return handler


@contextlib.contextmanager
def _signal_handlers() -> Iterator[None]:
    """Ctrl-C raises KeyboardInterrupt and SIGTERM raises _Terminated while main runs (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = {sig: signal.getsignal(sig) for sig in (signal.SIGINT, signal.SIGTERM)}
    signal.signal(signal.SIGINT, _terminator(os.getpid(), KeyboardInterrupt))
    signal.signal(signal.SIGTERM, _terminator(os.getpid(), _Terminated))
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler if handler is not None else signal.SIG_DFL)


def _bad_input_types() -> tuple[type[BaseException], ...]:
    import tomllib

    return (ValueError, TypeError, OSError, tomllib.TOMLDecodeError, FloatingPointError, OverflowError)


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status (see the module docstring)."""
    run = _Run()
    owner = argv is None and _is_command_line()
    if owner:  # this process is the ptcheck command: what is imported now lives until it ends
        gc.freeze()  # (the collector skips it; forked workers do not copy the pages it would touch)
    try:
        with _signal_handlers():
            try:
                return _main(argv, run)
            except KeyboardInterrupt as exc:
                return _interrupted(exc, run)
    except KeyboardInterrupt as exc:  # a second signal while the first one was being reported
        return EXIT_TERMINATED if isinstance(exc, _Terminated) else EXIT_INTERRUPTED
    finally:
        if owner:  # the process ends next: the interpreter's exit then skips a collection over every object (~0.2 s)
            gc.freeze()


def _main(argv: Sequence[str] | None, run: _Run) -> int:
    parser = build_parser()
    try:
        a = parser.parse_args(argv)
    except SystemExit as exc:  # --help / --version (0) and argparse errors (2)
        return int(exc.code) if isinstance(exc.code, int) else EXIT_BAD_INPUT
    if a.command is None:
        parser.print_help(sys.stderr)
        return EXIT_BAD_INPUT
    with warnings.catch_warnings():
        warnings.showwarning = _showwarning
        try:
            if a.command == "models":
                return _cmd_models()
            if a.command == "demo":
                return _cmd_demo(a, run)
            return _cmd_check(a, run)
        except MemoryError as exc:
            _err(f"internal error: out of memory ({exc or 'no detail'}); no verdict. Ask for a smaller basis or "
                 "fewer orders")
            return EXIT_INTERNAL_ERROR
        except _bad_input_types() as exc:
            _err(exc)
            return EXIT_BAD_INPUT
        except Exception as exc:  # a bug: one line, a distinct status, never a traceback
            _err(f"internal error: {type(exc).__name__}: {exc} (no verdict). This is a bug in ptcheck: please "
                 "report it with the command that caused it")
            return EXIT_INTERNAL_ERROR
