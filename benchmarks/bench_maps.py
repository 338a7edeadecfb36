"""Benchmark (d): a 2-D validity map on 2 local worker processes vs serially.

The map: validity boundary of the dispersive shift χ (order 2, 1 %) and its
error on a coupling grid, over 12 resonator frequencies of an invented
transmon-like qubit + resonator.  The same tasks run in this process
(``executor="serial"``) and on ``ProcessPoolExecutor(max_workers=2)`` (pool
start-up included); the results must be identical.

On a 2-core machine the ideal is 2×; process start-up and other load on the
machine eat into it.  A control (pure-Python CPU-bound tasks on the same two
workers) shows how much parallelism the machine offers at that moment.  Run: ``python benchmarks/bench_maps.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

try:  # run from a checkout without installing: use the package beside this folder
    import ptcheck  # noqa: F401
except ImportError:
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from concurrent.futures import ProcessPoolExecutor

import numpy as np

from ptcheck.maps import validity_map
from ptcheck.quantities import dispersive_shift

PARAMS = dict(omega_q=5.0, alpha=-0.25, g=0.1, n_qubit=5, n_photons=24)  # invented (GHz)
OMEGA_R = np.linspace(6.0, 7.6, 12)
COUPLINGS = np.linspace(0.1, 2.0, 30)


def _map(executor):
    return validity_map(
        "kerr_qubit_resonator", "omega_r", OMEGA_R, level=dispersive_shift(), order=2, rtol=0.01,
        couplings=COUPLINGS, builder_kwargs=PARAMS, executor=executor,
    )


def _burn(n: int) -> int:
    """Pure-Python CPU work: the control of how much parallelism the machine offers right now."""
    s = 0
    for i in range(n):
        s += i * i
    return s


def _control(n: int = 2_000_000, tasks: int = 4) -> float:
    t = time.perf_counter()
    for _ in range(tasks):
        _burn(n)
    serial = time.perf_counter() - t
    with ProcessPoolExecutor(max_workers=2) as ex:
        list(ex.map(abs, [1, 2]))  # start the workers first
        t = time.perf_counter()
        list(ex.map(_burn, [n] * tasks))
        pooled = time.perf_counter() - t
    return serial / pooled


def run() -> list[dict]:
    t = time.perf_counter()
    serial = _map("serial")
    t_serial = time.perf_counter() - t
    t = time.perf_counter()
    with ProcessPoolExecutor(max_workers=2) as ex:
        pooled = _map(ex)
    t_pool = time.perf_counter() - t
    same = np.array_equal(serial.boundary, pooled.boundary, equal_nan=True) and np.array_equal(
        serial.errors, pooled.errors, equal_nan=True)
    control = _control()
    return [{
        "benchmark": f"(d) validity map, {OMEGA_R.size} values × {COUPLINGS.size} couplings, N = {5 * 24}",
        "baseline": f"serial: {t_serial:.3g} s",
        "ptcheck": f"2 worker processes: {t_pool:.3g} s",
        "ratio": t_serial / t_pool,
        "target": "speed-up with 2 workers (ideal 2×)",
        "check": ("identical results" if same else "RESULTS DIFFER")
        + f"; control: plain CPU-bound tasks get {control:.2f}× on the same 2 workers right now",
    }]


if __name__ == "__main__":
    for row in run():
        for k, v in row.items():
            print(f"{k:>10}: {v:.3g}" if isinstance(v, float) else f"{k:>10}: {v}")
