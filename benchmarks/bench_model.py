"""Benchmark: building a Model against the work it enables.

Target (performance issue, "Model construction"): building a transverse-field Ising
chain of 2^18 states (spin-flip parity declared, so the build also finds the two
sectors and pairs the states) costs less than its Rayleigh–Schrödinger series to
order 30.  Both are timed as CPU time of this process, interleaved (build, series, build,
series, ...) so that load on the machine hits both alike, best of ``repeat``; the ratio
series / build (> 1: the build is cheaper) is printed with the 1-minute load average
before and after, the stored entries of the work-basis V and the size of the largest
degenerate group left unrotated (sparse V: groups above ``MAX_SPARSE_GROUP_ROTATION``
states keep the user's states, see ``Model``).

Run: ``python benchmarks/bench_model.py [n_spins]`` (default 18).  ``rows()`` gives the same
job as one row of ``run_all.py``'s table (wall-clock, interleaved, min / median of repeats).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):  # before numpy loads
    os.environ[_var] = os.environ.get("PTCHECK_BENCH_THREADS", "1")

import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

try:  # run from a checkout without installing: use the package beside this folder
    import ptcheck  # noqa: F401
except ImportError:
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from ptcheck import _validation as val  # noqa: E402
from ptcheck.model import MAX_SPARSE_GROUP_ROTATION  # noqa: E402
from ptcheck.models import spin_chain  # noqa: E402
from ptcheck.series import rs_series  # noqa: E402


def _best(fn, repeat: int = 3) -> float:
    best = float("inf")
    for _ in range(repeat):
        t = time.process_time()
        fn()
        best = min(best, time.process_time() - t)
    return best


def _cpu(fn) -> float:
    t = time.process_time()
    fn()
    return time.process_time() - t


def run(n_spins: int = 18, repeat: int = 5) -> dict:
    load_before = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    spin_chain(n_spins=6)  # warm imports
    m = spin_chain(n_spins=n_spins)
    rs_series(m, 0, 30)  # warm
    builds, series_times = [], []
    for _ in range(repeat):
        builds.append(_cpu(lambda: spin_chain(n_spins=n_spins)))
        series_times.append(_cpu(lambda: rs_series(m, 0, 30)))
    build, series = min(builds), min(series_times)
    checks = _best(lambda: val.check_hermitian(m.v, "v", 1e-10))  # one Hermiticity check of V (work basis)
    load_after = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    unrotated = [len(g) for g in m.degenerate_groups if g[0] in m.ambiguous_levels and len(g) > MAX_SPARSE_GROUP_ROTATION]
    return {
        "n_spins": n_spins,
        "N": m.n,
        "build_s": build,
        "hermitian_check_of_v_s": checks,
        "rs30_s": series,
        "ratio_series_over_build": series / build,
        "build_median_s": sorted(builds)[len(builds) // 2],
        "rs30_median_s": sorted(series_times)[len(series_times) // 2],
        "load_1min": f"{load_before:.2f} -> {load_after:.2f}",
        "stored_entries_of_v": m.v.nnz,
        "largest_unrotated_group": max(unrotated, default=0),
        "model": repr(m),
    }


def rows(repeats: int = 3, only_ours: bool = False, n_spins: int = 18) -> list:
    """The build-vs-series job as a row of the common table (``run_all.py``)."""
    from _harness import Row, interleaved

    spin_chain(n_spins=6)  # warm imports
    m = spin_chain(n_spins=n_spins)
    t_build, t_series, built, series, ld = interleaved(
        lambda: spin_chain(n_spins=n_spins), lambda: rs_series(m, 0, 30), repeats
    )
    row = Row(
        job=f"model build, transverse-field Ising chain L = {n_spins} (N = {built.n}, parity declared)",
        ours=t_build, ours_note="builder + Model (sectors, work basis)",
        baseline_name="its RS series to order 30 (level 0)", baseline=t_series,
        target="> 1× (build cheaper than the series)", load=ld,
    )
    row.check = f"build {'cheaper' if row.ratio > 1 else 'DEARER'} than the series; E^(2) = {series.energy_coefficients[2]:.6g}"
    return [row]


if __name__ == "__main__":
    out = run(int(sys.argv[1]) if len(sys.argv) > 1 else 18)
    for k, v in out.items():
        print(f"{k:24s} {v:.3f}" if isinstance(v, float) else f"{k:24s} {v}")
    print("target: build_s < rs30_s ->", "met" if out["build_s"] < out["rs30_s"] else "NOT met")
