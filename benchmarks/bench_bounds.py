"""Benchmark: certified validity boundaries with zero exact solves (``certified_boundary``).

Model: transverse-field Ising chain with invented site fields h_i = 0.1 + 0.2 |sin(1.7 i + 0.3)|
(``ptcheck.models.spin_chain``), ground level, relative tolerance on the exact shift.

(a) L = 13 (N = 8192), where exact solves are possible: for orders 2–4 at rtol 1e-2 and 1e-3 the certified
    coupling must never be above the true boundary and be within 10 % of it.  True boundary: brute force,
    scipy ``eigsh`` ground states on a grid, then Brent's method (the ground level is gapped, so rank 0 is
    the labelled level).
(b) L = 20 (N = 2^20): a certified boundary of the ground level at orders 2 and 3 must take less time than
    three plain sparse ground-state solves of that chain (``scipy.sparse.linalg.eigsh(H, k=1, which="SA")``),
    measured in this process, min and median of ``--repeats`` runs.

BLAS threads are limited before numpy loads (baseline and ptcheck alike); the load average is printed, since
other work on the machine slows every number.  Run: ``python benchmarks/bench_bounds.py [--repeats N] [--quick]``.
"""

from __future__ import annotations

import os

_THREADS = os.environ.get("BENCH_BLAS_THREADS", "1")
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = _THREADS

import argparse  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

try:  # run from a checkout without installing: use the package beside this folder
    import ptcheck  # noqa: F401
except ImportError:
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import numpy as np  # noqa: E402
from scipy.optimize import brentq  # noqa: E402
from scipy.sparse.linalg import eigsh  # noqa: E402

from ptcheck.bounds import certified_boundary  # noqa: E402
from ptcheck.models import spin_chain  # noqa: E402

CASES = [(order, rtol) for order in (2, 3, 4) for rtol in (1e-2, 1e-3)]


def chain(n_spins: int):
    """The invented chain (see the module docstring)."""
    fields = 0.1 + 0.2 * np.abs(np.sin(1.7 * np.arange(n_spins) + 0.3))
    return spin_chain(n_spins=n_spins, h_z=[float(h) for h in fields])


def ground_energy(model, coupling: float) -> float:
    """Plain baseline: scipy eigsh ground state of H0 + λ V."""
    return float(eigsh(model.hamiltonian(coupling), k=1, which="SA", return_eigenvectors=False, tol=1e-13)[0])


def true_boundary(model, coefficients, order: int, rtol: float, grid: np.ndarray, cache: dict) -> float:
    """First λ on the grid where |E_k − E| > rtol |E − E0|, refined by brentq (brute force)."""
    e0 = model.e0[0]

    def exact(x: float) -> float:
        if x not in cache:
            cache[x] = ground_energy(model, x)
        return cache[x]

    def g(x: float) -> float:
        e = exact(float(x))
        return abs(np.polyval(coefficients[: order + 1][::-1], x) - e) - rtol * abs(e - e0)

    prev = None
    for x in grid:
        if g(float(x)) > 0:
            return float(brentq(g, prev, float(x), xtol=1e-10, rtol=1e-12)) if prev is not None else float("nan")
        prev = float(x)
    return float("inf")


def part_a() -> list[dict]:
    model = chain(13)
    coefficients = model.series(0, 4).energy_coefficients
    grid = np.round(np.arange(0.02, 2.5, 0.02), 10)
    cache: dict = {}
    rows = []
    for order, rtol in CASES:
        t = time.perf_counter()
        c = certified_boundary(model, 0, order, rtol=rtol)
        t_ours = time.perf_counter() - t
        n_before = len(cache)
        t = time.perf_counter()
        true = true_boundary(model, coefficients, order, rtol, grid, cache)
        t_true = time.perf_counter() - t
        ratio = c.coupling / true
        ok = c.coupling <= true and ratio >= 0.9
        rows.append({
            "benchmark": f"(a) L=13 chain, order {order}, rtol {rtol:g}",
            "baseline": f"brute force λ* = {true:.6g} ({len(cache) - n_before} new eigsh, {t_true:.2f} s)",
            "ptcheck": f"certified {c.coupling:.6g} ({'rigorous' if c.rigorous else 'conditional'}; rigorous gaps "
                       f"alone {c.rigorous_coupling:.4g}), fails at {c.fail_coupling:.6g}, {c.mat_vecs} mat-vecs, "
                       f"{t_ours:.2f} s, 0 exact solves",
            "ratio": ratio,
            "target": "certified/true in [0.9, 1]",
            "check": f"{'ok' if ok else 'MISSED'} (certified/true = {ratio:.5f})",
            "_times": (t_ours, t_true), "_ok": ok,
        })
    return rows


def part_b(repeats: int) -> list[dict]:
    t = time.perf_counter()
    model = chain(20)
    t_build = time.perf_counter() - t
    base_times: list[float] = []
    ours: dict[int, list[float]] = {2: [], 3: []}
    results = {}
    for _ in range(repeats):  # interleaved, so that load changes hit baseline and ptcheck alike
        t = time.perf_counter()
        for _ in range(3):
            ground_energy(model, 0.5)
        base_times.append(time.perf_counter() - t)
        for order in ours:
            t = time.perf_counter()
            results[order] = certified_boundary(model, 0, order, rtol=1e-2)
            ours[order].append(time.perf_counter() - t)
    rows = []
    for order, times in ours.items():
        result = results[order]
        ratio = min(base_times) / min(times)
        rows.append({
            "benchmark": f"(b) L=20 chain (N=2^20), order {order}, rtol 1e-2",
            "baseline": f"3 eigsh ground solves: min {min(base_times):.1f} s, median {statistics.median(base_times):.1f} s",
            "ptcheck": f"certified {result.coupling:.5g} ({'rigorous' if result.rigorous else 'conditional'}; rigorous "
                       f"gaps alone {result.rigorous_coupling:.4g}), fails at {result.fail_coupling:.5g}, "
                       f"{result.mat_vecs} mat-vecs: min {min(times):.1f} s, median {statistics.median(times):.1f} s "
                       f"(model built once in {t_build:.0f} s, not counted)",
            "ratio": ratio,
            "target": "> 1 (faster than 3 solves)",
            "check": f"{'ok' if ratio > 1 else 'SLOWER'} ({ratio:.2f}x)",
            "_times": (list(times), list(base_times)), "_result": result, "_build": t_build,
        })
    return rows


def run(repeats: int = 2, quick: bool = False) -> list[dict]:
    rows = part_a()
    if not quick:
        rows.extend(part_b(repeats))
    return rows


def rows(repeats: int = 2, only_ours: bool = False) -> list:
    """Parts (a) and (b) as rows of the common table (``run_all.py``)."""
    from _harness import Row, load

    before = load()
    a = part_a()
    ld = (before, load())
    worst = min(r["ratio"] for r in a)
    n_ok = sum(r["_ok"] for r in a)
    out = [Row(
        job="certified boundary, Ising chain with site fields L = 13 (N = 8192), orders 2–4 × rtol 1e-2 / 1e-3 (6 cases)",
        ours=[sum(r["_times"][0] for r in a)], ours_note="0 exact solves",
        baseline_name="brute force: eigsh on a 0.02 grid + brentq", baseline=[sum(r["_times"][1] for r in a)],
        target="certified ≤ true, ≥ 0.9 true",
        check=f"{n_ok}/{len(a)} ok; smallest certified/true {worst:.4f}", load=ld,
    )]
    before = load()
    b = part_b(repeats)
    ld = (before, load())
    for r, order in zip(b, (2, 3)):
        ours, base = r["_times"]
        res = r["_result"]
        out.append(Row(
            job=f"certified boundary, Ising chain with site fields L = 20 (N = 2^20), order {order}, rtol 1e-2",
            ours=ours, ours_note=f"{res.mat_vecs} mat-vecs, 0 exact solves; model built once in {r['_build']:.0f} s",
            baseline_name="3 plain eigsh(k=1) ground solves", baseline=base, target="> 1×",
            check=f"certified λ {res.coupling:.5g} ({'rigorous' if res.rigorous else 'conditional'})", load=ld,
        ))
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=2, help="repeats of each timed L=20 run (default 2)")
    ap.add_argument("--quick", action="store_true", help="part (a) only (skip the L=20 chain)")
    a = ap.parse_args(argv)
    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    print(f"machine: {os.cpu_count()} cores, load average {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f} (1/5/15 min); "
          f"BLAS threads {_THREADS}")
    for row in run(a.repeats, a.quick):
        print()
        for k, v in row.items():
            if not k.startswith("_"):
                print(f"{k:>10}: {v:.3g}" if isinstance(v, float) else f"{k:>10}: {v}")
    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    print(f"\nload average at the end: {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
