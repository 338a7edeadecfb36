"""Benchmarks (b) and (c): cost of high-order Rayleigh–Schrödinger series.

(b) RS order 50 for one level of a dense model with N = 2000, against one full
    dense ``eigh`` of the same matrix (the cheapest exact answer for all levels).
(c) RS order 30 for the ground level of a sparse spin chain with N = 2^14
    (absolute seconds; target < 2 s).  Site-dependent invented longitudinal
    fields make the unperturbed ground state non-degenerate.

Run: ``python benchmarks/bench_series.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

try:  # run from a checkout without installing: use the package beside this folder
    import ptcheck  # noqa: F401
except ImportError:
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import numpy as np
import scipy.linalg as sla

from ptcheck.models import kerr_qubit_resonator, spin_chain
from ptcheck.series import rs_series


def _best(fn, repeat: int = 3) -> float:
    best = np.inf
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def run_dense() -> dict:
    # invented transmon-like numbers; dense matrices so the comparison is dense vs dense
    m = kerr_qubit_resonator(omega_q=5.0, alpha=-0.25, omega_r=7.0, g=0.1, n_qubit=10, n_photons=200, sparse=False)
    t_rs = _best(lambda: rs_series(m, 0, 50), repeat=3)
    h = m.hamiltonian(1.0)
    t_eigh = _best(lambda: sla.eigh(h), repeat=1)
    return {
        "benchmark": f"(b) RS order 50, one level, dense N = {m.n}",
        "baseline": f"one dense eigh: {t_eigh:.3g} s",
        "ptcheck": f"rs_series(order=50): {t_rs:.3g} s",
        "ratio": t_eigh / t_rs,
        "target": "RS cheaper than one eigh",
        "check": f"{'ok' if t_rs < t_eigh else 'SLOWER'}",
    }


def run_sparse() -> dict:
    n_spins = 14
    fields = list(np.round(0.1 + 0.03 * np.arange(n_spins), 4))  # invented site-dependent fields
    t = time.perf_counter()
    m = spin_chain(n_spins=n_spins, kind="transverse_ising", h_z=fields)
    t_build = time.perf_counter() - t
    t_rs = _best(lambda: rs_series(m, 0, 30), repeat=3)
    return {
        "benchmark": f"(c) RS order 30, sparse spin chain N = 2^{n_spins} = {m.n}",
        "baseline": f"(absolute; model build {t_build:.3g} s)",
        "ptcheck": f"rs_series(order=30): {t_rs:.3g} s",
        "ratio": float("nan"),
        "target": "< 2 s",
        "check": "ok" if t_rs < 2.0 else "ABOVE TARGET",
    }


def run() -> list[dict]:
    return [run_dense(), run_sparse()]


if __name__ == "__main__":
    for row in run():
        for k, v in row.items():
            print(f"{k:>10}: {v:.3g}" if isinstance(v, float) else f"{k:>10}: {v}")
        print()
