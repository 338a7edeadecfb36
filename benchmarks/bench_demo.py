"""Benchmark: ``ptcheck demo`` end to end (wall and CPU time), optionally against another checkout.

    python benchmarks/bench_demo.py [--runs 5] [--baseline /path/to/other/checkout]

Each run is a fresh ``python -m ptcheck demo`` in a subprocess writing to a
temporary folder (interpreter start, imports, the check, the side studies and
every figure included).  Runs alternate between this checkout and the
baseline; the minimum wall time is the best estimate of an idle machine, the
CPU time (process and its workers) shows the work done.  A control (pure-Python
work on two processes) shows how much parallelism the machine offers at that
moment: on a loaded machine wall times say little.  For that case an estimate
from CPU times is printed too, the same formula for both checkouts: the
imports (measured alone) run on one core, then the main process's own work
beside its workers', at best perfectly balanced on two cores (a lower bound of
the idle-machine wall time).  Measurements, not tests.

Bytecode: an installed package runs from compiled bytecode (``pip install``
compiles it; an editable install writes it on the first import).  Where the
environment forbids writing it (``PYTHONDONTWRITEBYTECODE``, as on some CI
machines) every run would compile every module of the package again, which
no user pays.  By default both checkouts therefore run with their bytecode in
a temporary cache (``PYTHONPYCACHEPREFIX``), filled by one untimed run each;
``--bytecode none`` measures the compile-every-time case instead.
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


def _load() -> float:
    """1-minute load average (NaN where the platform has none)."""
    return os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")


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


#: Runs ``ptcheck demo`` in a fresh interpreter and writes (wall, own CPU, workers' CPU) to the file argv[1].
#: The process presents itself as ``python -m ptcheck ...`` (sys.orig_argv), so that ptcheck behaves as it does
#: for a user who types the command (it checks how it was started, e.g. to tidy up quickly before exit).
_WRAPPER = """
import resource, runpy, sys, time
t = time.perf_counter()
report, sys.argv = sys.argv[1], ["ptcheck"] + sys.argv[2:]
sys.orig_argv = [sys.executable, "-m", "ptcheck", *sys.argv[1:]]
try:
    runpy.run_module("ptcheck", run_name="__main__")
except SystemExit as exc:
    if exc.code:
        raise
me, kids = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
with open(report, "w") as f:
    f.write(f"{time.perf_counter() - t} {me.ru_utime + me.ru_stime} {kids.ru_utime + kids.ru_stime} "
            f"{sys.modules['ptcheck'].__file__}")
"""


def _env(checkout: Path, pycache: Path | None) -> dict:
    """The environment of a run from ``checkout``: bytecode read from (and written to) ``pycache``, or never written."""
    env = {**os.environ, "PYTHONPATH": str(checkout)}
    if pycache is None:
        env["PYTHONDONTWRITEBYTECODE"] = "1"
        env.pop("PYTHONPYCACHEPREFIX", None)
    else:
        env.pop("PYTHONDONTWRITEBYTECODE", None)
        env["PYTHONPYCACHEPREFIX"] = str(pycache)
    return env


def run_demo(checkout: Path, pycache: Path | None = None) -> tuple[float, float, float, float]:
    """(wall, CPU, main-process CPU, worker CPU) seconds of one ``ptcheck demo`` from ``checkout``."""
    out = Path(tempfile.mkdtemp(prefix="ptcheck-bench-"))
    env = _env(checkout, pycache)
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t = time.perf_counter()
    # run in the empty temporary folder: the interpreter puts its working directory first on sys.path, and
    # started inside a checkout it would import that checkout's ptcheck whatever PYTHONPATH says
    subprocess.run([sys.executable, "-c", _WRAPPER, str(out / "cpu.txt"), "demo", "--out", str(out / "demo")], env=env,
                   cwd=out, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
    wall = time.perf_counter() - t
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    _, main_cpu, workers_cpu, used = (out / "cpu.txt").read_text().split()
    if Path(used).resolve().parents[1] != checkout.resolve():
        raise RuntimeError(f"the run imported {used}, not the checkout {checkout}")
    shutil.rmtree(out, ignore_errors=True)
    return wall, (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime), float(main_cpu), float(workers_cpu)


def import_cpu(checkout: Path, pycache: Path | None = None, runs: int = 3) -> float:
    """CPU seconds of ``python -c "import ptcheck.cli"`` from ``checkout`` (minimum of ``runs``)."""
    env = _env(checkout, pycache)
    best = float("inf")
    for _ in range(runs):
        r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        subprocess.run([sys.executable, "-c", "import ptcheck.cli"], env=env, cwd=tempfile.gettempdir(), check=True)
        r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        best = min(best, (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime))
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--baseline", type=Path, help="another checkout (e.g. the main branch) to compare with")
    ap.add_argument("--bytecode", choices=("cached", "none"), default="cached",
                    help="run from cached bytecode as an installed package does (default), or compile every time")
    a = ap.parse_args()
    pycache = Path(tempfile.mkdtemp(prefix="ptcheck-bench-pyc-")) if a.bytecode == "cached" else None
    checkouts = {"this": HERE} | ({"baseline": a.baseline.resolve()} if a.baseline else {})
    times: dict[str, list[tuple[float, float, float, float]]] = {k: [] for k in checkouts}
    print(f"bytecode: {'cached (one untimed run per checkout fills it)' if pycache else 'compiled in every run'}")
    if pycache is not None:
        for path in checkouts.values():
            run_demo(path, pycache)
    print(f"load average (1 min) before: {_load():.2f}")
    print(f"parallelism control before: {control():.2f}x (2.0 = two idle cores)")
    for _ in range(a.runs):
        for name, path in checkouts.items():
            times[name].append(run_demo(path, pycache))
    print(f"parallelism control after:  {control():.2f}x")
    print(f"load average (1 min) after:  {_load():.2f}")
    estimate = {}
    for name, runs in times.items():
        walls = sorted(r[0] for r in runs)
        cpus = sorted(r[1] for r in runs)
        imp = import_cpu(checkouts[name], pycache)
        # idle 2-core machine: the imports on one core, then the main process's own work beside the workers'
        # (at best perfectly balanced on two cores): a lower bound of the wall time, from the run with least CPU
        _, cpu, main_cpu, workers_cpu = min(runs, key=lambda r: r[1])
        rest = max(main_cpu - imp, 0.0)
        estimate[name] = imp + max(rest, (rest + workers_cpu) / 2)
        print(f"{name:9s} wall min {walls[0]:6.2f} s  median {walls[len(walls) // 2]:6.2f} s   CPU min {cpus[0]:6.2f} s "
              f"(imports {imp:4.2f} s, main process {main_cpu:4.2f} s, workers {workers_cpu:4.2f} s)  ({checkouts[name]})")
    if a.baseline:
        ratio = min(r[0] for r in times["baseline"]) / min(r[0] for r in times["this"])
        print(f"speed-up (min wall, baseline / this): {ratio:.2f}x")
        print(f"idle 2-core estimate from CPU times (imports + max(main rest, (main rest + workers) / 2)): this "
              f"{estimate['this']:.2f} s, baseline {estimate['baseline']:.2f} s: speed-up "
              f"{estimate['baseline'] / estimate['this']:.2f}x")
    if pycache is not None:
        shutil.rmtree(pycache, ignore_errors=True)


if __name__ == "__main__":
    main()
