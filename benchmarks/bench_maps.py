"""A 2-D validity map on 2 local worker processes against the same map run serially.

The map: validity boundary of the dispersive shift χ (order 2, 1 %) and its
error on a coupling grid, over 12 resonator frequencies of an invented
transmon-like qubit + resonator.  The same tasks run in this process
(``executor="serial"``) and on ``ProcessPoolExecutor(max_workers=2)`` (pool
start-up included); the results must be identical.

On a 2-core machine the ideal is 2x; process start-up and other load on the
machine eat into it.  A control (pure-Python CPU-bound tasks on the same two
workers) shows how much parallelism the machine offers at that moment.
Run: ``python benchmarks/bench_maps.py``.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):  # before numpy loads; workers inherit it
    os.environ[_var] = os.environ.get("PTCHECK_BENCH_THREADS", "1")

import time  # noqa: E402
from concurrent.futures import ProcessPoolExecutor  # noqa: E402

import numpy as np  # noqa: E402
from _harness import Row, interleaved, main  # noqa: E402

from ptcheck.maps import validity_map  # noqa: E402
from ptcheck.quantities import dispersive_shift  # noqa: E402

PARAMS = dict(omega_q=5.0, alpha=-0.25, g=0.1, n_qubit=5, n_photons=24)  # invented (GHz)
OMEGA_R = np.linspace(6.0, 7.6, 12)
COUPLINGS = np.linspace(0.1, 2.0, 30)


def _map(executor):
    return validity_map(
        "kerr_qubit_resonator", "omega_r", OMEGA_R, level=dispersive_shift(), order=2, rtol=0.01,
        couplings=COUPLINGS, builder_kwargs=PARAMS, executor=executor,
    )


def _pooled():
    with ProcessPoolExecutor(max_workers=2) as ex:
        return _map(ex)


def burn(n: int) -> int:
    """Pure-Python CPU work: the control of how much parallelism the machine offers right now."""
    s = 0
    for i in range(n):
        s += i * i
    return s


def control(n: int = 2_000_000, tasks: int = 4) -> float:
    t = time.perf_counter()
    for _ in range(tasks):
        burn(n)
    serial = time.perf_counter() - t
    with ProcessPoolExecutor(max_workers=2) as ex:
        list(ex.map(abs, [1, 2]))  # start the workers first
        t = time.perf_counter()
        list(ex.map(burn, [n] * tasks))
        pooled = time.perf_counter() - t
    return serial / pooled


def run(repeats: int = 3, only_ours: bool = False) -> list[Row]:
    t_pool, t_serial, pooled, serial, ld = interleaved(_pooled, lambda: _map("serial"), repeats)
    same = np.array_equal(serial.boundary, pooled.boundary, equal_nan=True) and np.array_equal(
        serial.errors, pooled.errors, equal_nan=True)
    return [Row(
        job=f"2-D validity map, {OMEGA_R.size} values x {COUPLINGS.size} couplings, N = {5 * 24}, 2 worker processes",
        ours=t_pool, baseline_name="the same map, serial", baseline=t_serial, target="ideal 2×", load=ld,
        check=("identical results" if same else "RESULTS DIFFER")
        + f"; control: CPU-bound tasks get {control():.2f}× on the same 2 workers now",
    )]


if __name__ == "__main__":
    raise SystemExit(main(run))
