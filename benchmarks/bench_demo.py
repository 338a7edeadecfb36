"""Benchmark: ``ptcheck demo`` end to end (wall and CPU time), optionally against another checkout.

    python benchmarks/bench_demo.py [--runs 5] [--baseline /path/to/other/checkout]

Each run is a fresh ``python -m ptcheck demo`` in a subprocess writing to a
temporary folder (interpreter start, imports, the check, the side studies and
every figure included).  Runs alternate between this checkout and the
baseline; the minimum wall time is the best estimate of an idle machine, the
CPU time (process and its workers) shows the work done.  A control (pure-Python
work on two processes) shows how much parallelism the machine offers at that
moment: on a loaded machine wall times say little.  For that case an estimate
from CPU times is printed too: the interpreter start and imports (measured
alone) run on one core, the rest at best on two (perfect balance, so a lower
bound of the idle-machine wall time; the baseline's estimate is its CPU time
when it uses one process).  Measurements, not tests.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

HERE = Path(__file__).resolve().parents[1]


def _burn(n: int) -> int:
    s = 0
    for i in range(n):
        s += i * i
    return s


def control(n: int = 2_000_000) -> float:
    """Speed-up of 2 tasks on 2 processes over 2 tasks in a row (2.0 on an idle 2-core machine)."""
    t = time.perf_counter()
    _burn(n)
    _burn(n)
    serial = time.perf_counter() - t
    with ProcessPoolExecutor(max_workers=2) as ex:
        list(ex.map(abs, [1, 2]))
        t = time.perf_counter()
        list(ex.map(_burn, [n, n]))
        return serial / (time.perf_counter() - t)


def run_demo(checkout: Path) -> tuple[float, float]:
    """(wall, CPU) seconds of one ``ptcheck demo`` from ``checkout``."""
    out = Path(tempfile.mkdtemp(prefix="ptcheck-bench-"))
    env = {**os.environ, "PYTHONPATH": str(checkout)}
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t = time.perf_counter()
    subprocess.run([sys.executable, "-m", "ptcheck", "demo", "--out", str(out / "demo")], env=env,
                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
    wall = time.perf_counter() - t
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    shutil.rmtree(out, ignore_errors=True)
    return wall, (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime)


def import_cpu(checkout: Path, runs: int = 3) -> float:
    """CPU seconds of ``python -c "import ptcheck.cli"`` from ``checkout`` (minimum of ``runs``)."""
    env = {**os.environ, "PYTHONPATH": str(checkout)}
    best = float("inf")
    for _ in range(runs):
        r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        subprocess.run([sys.executable, "-c", "import ptcheck.cli"], env=env, check=True)
        r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        best = min(best, (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime))
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--baseline", type=Path, help="another checkout (e.g. the main branch) to compare with")
    a = ap.parse_args()
    checkouts = {"this": HERE} | ({"baseline": a.baseline.resolve()} if a.baseline else {})
    times: dict[str, list[tuple[float, float]]] = {k: [] for k in checkouts}
    print(f"parallelism control before: {control():.2f}x (2.0 = two idle cores)")
    for _ in range(a.runs):
        for name, path in checkouts.items():
            times[name].append(run_demo(path))
    print(f"parallelism control after:  {control():.2f}x")
    estimate = {}
    for name, runs in times.items():
        walls = sorted(w for w, _ in runs)
        cpus = sorted(c for _, c in runs)
        imp = import_cpu(checkouts[name])
        estimate[name] = imp + (cpus[0] - imp) / 2
        print(f"{name:9s} wall min {walls[0]:6.2f} s  median {walls[len(walls) // 2]:6.2f} s   "
              f"CPU min {cpus[0]:6.2f} s (imports {imp:4.2f} s)  ({checkouts[name]})")
    if a.baseline:
        ratio = min(w for w, _ in times["baseline"]) / min(w for w, _ in times["this"])
        print(f"speed-up (min wall, baseline / this): {ratio:.2f}x")
        base_cpu = min(c for _, c in times["baseline"])
        print(f"idle 2-core estimate from CPU times: this >= {estimate['this']:.2f} s (imports + rest / 2), baseline "
              f"{base_cpu:.2f} s if it runs in one process: speed-up <= {base_cpu / estimate['this']:.2f}x")


if __name__ == "__main__":
    main()
