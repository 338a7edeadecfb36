"""Timing and table helpers shared by the benchmark scripts.

Import this module only after the script has limited the BLAS threads in its
environment (the first lines of every ``bench_*.py``): the variables are read
once, when numpy loads its BLAS library.

Conventions of every benchmark row:

* ptcheck and its baseline run in the same process, interleaved
  (ours, baseline, ours, baseline, ...), so load on the machine hits both alike;
* times are wall-clock seconds, reported as min and median of the repeats;
* ``ratio`` = baseline min / ptcheck min (> 1: ptcheck is faster);
* the 1-minute load average is recorded before and after the job, and the BLAS
  thread count actually in use is printed with the table.
"""

from __future__ import annotations

import math
import os
import statistics
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

BLAS_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")

try:  # run from a checkout without installing: use the package beside this folder
    import ptcheck  # noqa: F401
except ImportError:  # pragma: no cover - depends on how the scripts are run
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def load() -> float:
    """1-minute load average (NaN where the platform has none)."""
    return os.getloadavg()[0] if hasattr(os, "getloadavg") else math.nan


def blas_threads() -> str:
    """BLAS libraries loaded in this process and their thread counts."""
    try:
        from threadpoolctl import threadpool_info
    except ImportError:
        env = {k: os.environ.get(k) for k in BLAS_VARIABLES}
        return f"threadpoolctl missing; environment {env}"
    info = [i for i in threadpool_info() if i.get("user_api") == "blas"]
    return ", ".join(f"{i.get('internal_api')} {i.get('num_threads')} thread(s)" for i in info) or "no BLAS loaded"


@dataclass
class Row:
    """One benchmark job: ptcheck against the strongest plain loop, same process."""

    job: str
    ours: list[float]
    baseline_name: str = ""
    baseline: list[float] = field(default_factory=list)
    ours_note: str = ""
    baseline_note: str = ""
    check: str = ""
    target: str = ""
    load: tuple[float, float] = (math.nan, math.nan)
    ratio_text: str = ""  # replaces the ratio column where a plain ratio would mislead

    @property
    def ratio(self) -> float:
        if not self.baseline or not self.ours:
            return math.nan
        return min(self.baseline) / min(self.ours)

    def met(self, factor: float) -> str:
        r = self.ratio
        return "met" if r >= factor else "NOT met"


def _fmt_times(ts: list[float]) -> str:
    if not ts:
        return "—"
    lo, med = min(ts), statistics.median(ts)

    def one(x: float) -> str:
        return f"{x * 1e3:.0f} ms" if x < 1.0 else f"{x:.2f} s"

    return f"{one(lo)} / {one(med)}"


def interleaved(ours: Callable[[], Any], baseline: Callable[[], Any] | None, repeats: int) -> tuple[list[float], list[float], Any, Any, tuple[float, float]]:
    """Time ``ours`` and ``baseline`` alternately; returns times, last results and the load before/after."""
    t_ours: list[float] = []
    t_base: list[float] = []
    out_ours = out_base = None
    before = load()
    for _ in range(repeats):
        t = time.perf_counter()
        out_ours = ours()
        t_ours.append(time.perf_counter() - t)
        if baseline is not None:
            t = time.perf_counter()
            out_base = baseline()
            t_base.append(time.perf_counter() - t)
    return t_ours, t_base, out_ours, out_base, (before, load())


def markdown(rows: list[Row]) -> str:
    """One markdown table: job, ptcheck min / median, baseline min / median, ratio, load, check."""
    lines = [
        "| job | ptcheck min / median | baseline | baseline min / median | ratio | load | check |",
        "|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        ours = _fmt_times(r.ours) + (f" ({r.ours_note})" if r.ours_note else "")
        base = _fmt_times(r.baseline) + (f" ({r.baseline_note})" if r.baseline_note else "")
        ratio = r.ratio_text or ("—" if math.isnan(r.ratio) else f"{r.ratio:.2f}×")
        if r.target:
            ratio += f" (target {r.target})"
        ld = f"{r.load[0]:.1f}–{r.load[1]:.1f}"
        lines.append(f"| {r.job} | {ours} | {r.baseline_name or '—'} | {base} | {ratio} | {ld} | {r.check} |")
    return "\n".join(lines)


def header() -> str:
    return (
        f"machine: {os.cpu_count()} cores, load average {load():.2f}; BLAS: {blas_threads()}; "
        f"environment {', '.join(f'{k}={os.environ.get(k)}' for k in BLAS_VARIABLES)}"
    )


def main(run: Callable[..., list[Row]], argv: list[str] | None = None) -> int:
    """Command line of one benchmark script: ``--repeats N``, ``--only-ours``."""
    import argparse

    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=3, help="repeats of each timed job (min and median reported)")
    ap.add_argument("--only-ours", action="store_true", help="skip the second, named baselines (qutip)")
    a = ap.parse_args(argv)
    print(header())
    rows = run(repeats=a.repeats, only_ours=a.only_ours)
    print(markdown(rows))
    return 0
