"""Run every benchmark script in one go and print one table.

    python benchmarks/run_all.py

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


def main() -> int:
    rows = []
    t0 = time.perf_counter()
    for name in OURS:
        try:
            rows.extend(_load(name).run())
        except Exception as exc:  # a benchmark that breaks is reported, the others still run
            rows.append({"benchmark": name, "baseline": "", "ptcheck": f"FAILED: {type(exc).__name__}: {exc}",
                         "ratio": math.nan, "target": "", "check": ""})
    others = sorted(p for p in HERE.glob("bench_*.py") if p.stem not in OURS)
    load = os.getloadavg() if hasattr(os, "getloadavg") else (math.nan,) * 3
    blas = {k: os.environ[k] for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS") if k in os.environ}
    print(f"machine: {os.cpu_count()} cores, load average {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f} "
          f"(1/5/15 min; other work on the machine slows every number), BLAS threads env: {blas or 'default'}\n")
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
