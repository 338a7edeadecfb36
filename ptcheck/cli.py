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
    undefined at that coupling).
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
import signal
import sys
import textwrap
import threading
import warnings
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

from .treatment import DEFAULT_TREATMENT, TREATMENTS

__all__ = ["main", "build_parser", "DEMO_PARAMS"]

EXIT_VALID, EXIT_NOT_VALID, EXIT_BAD_INPUT, EXIT_INTERNAL_ERROR = 0, 1, 2, 3
#: SIGINT and SIGTERM: 128 + the signal number, as a shell reports them.
EXIT_INTERRUPTED, EXIT_TERMINATED = 130, 143

#: The invented demo device "Q-17": a transmon-like Kerr-ladder qubit and its
#: readout resonator (GHz).  These numbers describe no real device.
DEMO_PARAMS = {
    "omega_q": 5.21,
    "alpha": -0.232,
    "omega_r": 6.41,
    "g": 0.082,
    "n_qubit": 4,
    "n_photons": 8,
}

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

exit status: 0 valid, 1 not valid, 2 bad input, 3 internal error,
130 interrupted, 143 terminated.
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
    d.add_argument("--no-map", action="store_true", help="skip the validity map (the part run on 2 worker processes)")
    d.add_argument("--no-figures", action="store_true", help="write no figures")

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
    tg.add_argument("--tol", type=float, metavar="X", help="absolute tolerance (energy units of H0)")
    tg.add_argument("--rtol", type=float, metavar="X", help="relative tolerance (default 0.01: 1 %% of the exact shift)")
    c.add_argument("--coupling", type=float, metavar="λ", help="the coupling you use (dimensionless); required here or in MODEL")
    c.add_argument("--treatment", choices=TREATMENTS,
                   help="perturbation theory judged (default: standard = the textbook series; degenerate perturbation "
                        "theory inside exactly degenerate groups); block/auto ask for near-degenerate blocks")
    c.add_argument("--backend", metavar="NAME", help="exact solver: auto, dense, sparse, qutip (default: auto)")
    c.add_argument("--out", metavar="DIR", help="output directory (default: <MODEL name>-report)")
    c.add_argument("--format", nargs="+", choices=("json", "md", "csv"), metavar="FMT",
                   help="report formats among json, md, csv (default: all three)")
    c.add_argument("--force", action="store_true", help="replace a different report already in DIR")
    c.add_argument("--no-figures", action="store_true", help="write no figures")
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
    source = {"model_file": str(a.model), "kind": mf.kind}
    with _progress_bar("checking") as bar:
        report = run_check(
            model, targets or None, orders, coupling=coupling, tol=tol, rtol=rtol, treatment=treatment,
            backend=backend, builder=mf.builder, params=dict(mf.params) if mf.builder else None, source=source,
            title=mf.title, progress=bar,
        )
    if a.formula:
        from dataclasses import replace

        from .formula_report import report_formulas

        with _progress_bar("formulas") as bar:
            report = replace(report, extras={**report.extras, "formulas": report_formulas(report, progress=bar)})
    files = _write(report, out, formats=a.format or ("json", "md", "csv"), figures=not a.no_figures, force=a.force)
    _print_summary(report, files, Path(given))
    return report.exit_status


def _cmd_demo(a: argparse.Namespace, run: _Run) -> int:
    import numpy as np

    from .models import kerr_qubit_resonator
    from .quantities import dispersive_shift, stark_shift
    from .report import run_check

    given = _out_dir(a.out, "ptcheck-demo")
    out = run.out = _prepare_output(given)
    model = kerr_qubit_resonator(**DEMO_PARAMS)
    model.name = "Q-17 qubit + readout resonator (invented)"
    model.coupling_unit = "GHz"  # the builder names g (λ = 1 is g); the demo's energies are in GHz
    lamb = stark_shift((1, 0), (0, 0), name="qubit Lamb shift", units="GHz")
    chi = dispersive_shift(name="chi", units="GHz")
    p = DEMO_PARAMS
    description = (
        "Q-17 is an **invented** transmon-like qubit (a Kerr ladder of 4 levels: ω_q/2π = "
        f"{p['omega_q']} GHz, anharmonicity α/2π = {p['alpha']} GHz) coupled with g/2π = {p['g']} GHz to a readout "
        f"resonator at ω_r/2π = {p['omega_r']} GHz ({p['n_photons']} Fock states), without the rotating-wave "
        "approximation. The numbers are made up for this demonstration and describe no real device. λ = 1 is the "
        "design coupling. Question: can the textbook second-order (dispersive) formulas for the qubit's Lamb shift "
        "and the dispersive shift χ be trusted at the design coupling, to 1 %?"
    )
    with _progress_bar("demo") as bar:
        report = run_check(
            model, [lamb, chi], [2, 4], coupling=1.0, rtol=0.01, builder="kerr_qubit_resonator", params=p,
            source={"demo": "Q-17 (invented)"}, title="Q-17 (invented device): can second-order dispersive formulas be trusted?",
            description=description, invented=True, progress=bar,
        )
    if not a.no_map:
        from dataclasses import replace

        from .maps import validity_map

        detunings = np.round(np.linspace(5.95, 7.35, 8), 4)
        with _progress_bar("validity map") as bar:
            vm = validity_map(
                "kerr_qubit_resonator", "omega_r", detunings, level=chi, order=2, rtol=0.01,
                couplings=np.linspace(0.1, 2.0, 20), builder_kwargs={k: v for k, v in p.items() if k != "omega_r"},
                progress=bar,
            )
        report = replace(report, extras={**report.extras, "validity_map": vm, "validity_map_mark": (p["omega_r"], 1.0)})
    files = _write(report, out, figures=not a.no_figures, force=a.force)
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


def _raise_terminated(signum: int, frame: Any) -> None:
    raise _Terminated()


@contextlib.contextmanager
def _signal_handlers() -> Iterator[None]:
    """Ctrl-C raises KeyboardInterrupt and SIGTERM raises _Terminated while main runs (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = {sig: signal.getsignal(sig) for sig in (signal.SIGINT, signal.SIGTERM)}
    signal.signal(signal.SIGINT, signal.default_int_handler)
    signal.signal(signal.SIGTERM, _raise_terminated)
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
    try:
        with _signal_handlers():
            try:
                return _main(argv, run)
            except KeyboardInterrupt as exc:
                return _interrupted(exc, run)
    except KeyboardInterrupt as exc:  # a second signal while the first one was being reported
        return EXIT_TERMINATED if isinstance(exc, _Terminated) else EXIT_INTERRUPTED


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
