"""Run every benchmark in one process and print one markdown table.

    python benchmarks/run_all.py [--repeats N] [--only-ours] [--only NAME ...]

BLAS is limited to one thread (``PTCHECK_BENCH_THREADS`` to change it) in
this process's environment before numpy loads, so it holds for every
benchmark and for the worker processes of the map benchmark.  Each
``bench_*.py`` has ``rows(repeats, only_ours)`` (or ``run(repeats, only_ours)``)
returning a list of rows and is imported as a module (registered in
``sys.modules``, so worker processes can unpickle its functions).  The table has one row per job: ptcheck min / median, the
strongest plain baseline and its min / median, the ratio, the load average
during the job and the job's own check.  These are measurements, not tests:
they never fail, a benchmark that raises is reported in its row.
``--only-ours`` skips the second, named baselines (qutip).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):  # before numpy loads
    os.environ[_var] = os.environ.get("PTCHECK_BENCH_THREADS", "1")

import importlib  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

from _harness import Row, header, markdown  # noqa: E402

SCRIPTS = (
    "bench_boundary", "bench_exact", "bench_exceptional", "bench_series", "bench_multi", "bench_maps", "bench_widgets",
    "bench_model", "bench_bounds",
)


def main(argv: list[str] | None = None) -> int:
    import argparse

    ap = argparse.ArgumentParser(description="Run all benchmarks and print one markdown table.")
    ap.add_argument("--repeats", type=int, default=3, help="repeats of each timed job (min and median reported)")
    ap.add_argument("--only-ours", action="store_true", help="skip the second, named baselines (qutip)")
    ap.add_argument("--only", nargs="+", choices=SCRIPTS, metavar="NAME", help=f"run only these scripts: {', '.join(SCRIPTS)}")
    a = ap.parse_args(argv)
    rows: list[Row] = []
    t0 = time.perf_counter()
    for name in a.only or SCRIPTS:
        try:
            module = importlib.import_module(name)
            rows.extend(getattr(module, "rows", module.run)(repeats=a.repeats, only_ours=a.only_ours))
        except Exception as exc:  # a benchmark that breaks is reported, the others still run
            rows.append(Row(job=name, ours=[], check=f"FAILED: {type(exc).__name__}: {exc}"))
    print(header())
    print()
    print(markdown(rows))
    print(f"\ntotal {time.perf_counter() - t0:.0f} s; load average at the end {os.getloadavg()[0]:.2f}" if hasattr(os, "getloadavg")
          else f"\ntotal {time.perf_counter() - t0:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
