"""Run every benchmark script in one go and print one table.

    python benchmarks/run_all.py [--blas-threads N] [--only-ours]

Each ``bench_*.py`` of ours has ``run() -> list of rows``; other benchmark
scripts in this folder (without ``run``) are run as they are and their output
is printed after the table.  These are measurements, not tests: they print
numbers and never fail.
"""

from __future__ import annotations

import importlib.util
import math
import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
OURS = ("bench_boundary", "bench_series", "bench_maps")


def _load(name: str):
    spec = importlib.util.spec_from_file_location(name, HERE / f"{name}.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _blas_limit(n: int | None):
    """Limit BLAS threads for our benchmarks (baseline and ptcheck alike); no-op without threadpoolctl."""
    import contextlib

    if n is None:
        return contextlib.nullcontext(), "library default"
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        return contextlib.nullcontext(), "library default (threadpoolctl not installed)"
    return threadpool_limits(limits=n, user_api="blas"), f"{n} thread(s)"


def main(argv: list[str] | None = None) -> int:
    import argparse

    ap = argparse.ArgumentParser(description="Run all benchmarks and print one table.")
    ap.add_argument("--blas-threads", type=int, default=1,
                    help="BLAS threads for our benchmarks, baseline and ptcheck alike (default 1: stable numbers on a "
                         "shared machine; 0 = library default)")
    ap.add_argument("--only-ours", action="store_true", help="skip the other bench_*.py scripts in this folder")
    a = ap.parse_args(argv)
    _, blas_text = _blas_limit(a.blas_threads or None)
    rows = []
    t0 = time.perf_counter()
    for name in OURS:
        try:
            with _blas_limit(a.blas_threads or None)[0]:
                rows.extend(_load(name).run())
        except Exception as exc:  # a benchmark that breaks is reported, the others still run
            rows.append({"benchmark": name, "baseline": "", "ptcheck": f"FAILED: {type(exc).__name__}: {exc}",
                         "ratio": math.nan, "target": "", "check": ""})
    others = [] if a.only_ours else sorted(p for p in HERE.glob("bench_*.py") if p.stem not in OURS)
    load = os.getloadavg() if hasattr(os, "getloadavg") else (math.nan,) * 3
    blas = {k: os.environ[k] for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS") if k in os.environ}
    print(f"machine: {os.cpu_count()} cores, load average {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f} "
          f"(1/5/15 min; other work on the machine slows every number), BLAS threads env: {blas or 'default'}; "
          f"our benchmarks run with BLAS limited to {blas_text}\n")
    print(f"{'benchmark':<58} {'ratio':>8}  {'target':<34} details")
    print("-" * 140)
    for r in rows:
        ratio = "" if not isinstance(r["ratio"], float) or math.isnan(r["ratio"]) else f"{r['ratio']:.1f}×"
        print(f"{r['benchmark']:<58} {ratio:>8}  {r['target']:<34} {r['baseline']} | {r['ptcheck']} | {r['check']}")
    for p in others:
        print(f"\n== {p.name} ==")
        res = subprocess.run([sys.executable, str(p)], capture_output=True, text=True)
        print(res.stdout.rstrip() or "(no output)")
        if res.returncode:
            print(f"(exited {res.returncode}) {res.stderr.strip().splitlines()[-1] if res.stderr.strip() else ''}")
    print(f"\ntotal {time.perf_counter() - t0:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
