"""Benchmark (a): validity boundary search vs a 200-point grid scan.

Question answered: how many times fewer seconds does ``validity_boundary``
need than the plain way of finding λ*: exact ``eigvalsh`` at 200 couplings,
perturbative energies from the same RS series, and the first crossing of the
tolerance located by interpolation between grid points?  Both must give the
same λ* to 1e-3 (relative).

The grid spans [0, 2 λ*] (this favours the baseline: it is told where to look).
Run: ``python benchmarks/bench_boundary.py``.  Numbers vary with the machine
and its load; the ratio is measured in one process, back to back.
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
import scipy.sparse as sp

from ptcheck.compare import validity_boundary
from ptcheck.models import kerr_qubit_resonator
from ptcheck.series import rs_series

N_GRID = 200
RTOL = 0.01
ORDER = 2
#: Invented transmon-like numbers (GHz); N = n_qubit * n_photons.
PARAMS = dict(omega_q=5.0, alpha=-0.25, omega_r=7.0, g=0.1, n_qubit=5, n_photons=80, sparse=False)
LEVEL = (1, 0)  # qubit excited, no photon: rank 1 of the spectrum


def grid_scan(model, level: int, lam_max: float) -> tuple[float, int]:
    """Baseline: eigvalsh on a uniform grid, first crossing by linear interpolation of log(error)."""
    s = rs_series(model, level, ORDER)
    grid = np.linspace(0.0, lam_max, N_GRID)
    e0 = model.e0[level]
    errs = np.empty(N_GRID)
    for i, lam in enumerate(grid):
        h = model.hamiltonian(lam)
        h = h.toarray() if sp.issparse(h) else h
        exact = sla.eigvalsh(h)[level]  # rank = level: no crossing below 2 λ* for this level
        pert = s.energy(lam)
        ref = abs(exact - e0)
        errs[i] = abs(pert - exact) / ref if ref > 0 else 0.0
    k = int(np.flatnonzero(errs > RTOL)[0])
    x0, x1 = grid[k - 1], grid[k]
    y0, y1 = np.log(max(errs[k - 1], 1e-300)), np.log(errs[k])
    return float(x0 + (np.log(RTOL) - y0) * (x1 - x0) / (y1 - y0)), N_GRID


def run() -> list[dict]:
    model = kerr_qubit_resonator(**PARAMS)
    level = model.level_index(LEVEL)
    t = time.perf_counter()
    b = validity_boundary(model, level, ORDER, rtol=RTOL, treatment="nondegenerate")
    t_ours = time.perf_counter() - t
    t = time.perf_counter()
    lam_grid, solves = grid_scan(model, level, 2.0 * abs(b.coupling))
    t_grid = time.perf_counter() - t
    rel = abs(lam_grid - b.coupling) / abs(b.coupling)
    return [{
        "benchmark": f"(a) validity boundary, N = {model.n}, order {ORDER}, rtol {RTOL}",
        "baseline": f"200-point eigvalsh grid scan: {t_grid:.3g} s ({solves} solves)",
        "ptcheck": f"validity_boundary: {t_ours:.3g} s ({b.exact_solves} solves)",
        "ratio": t_grid / t_ours,
        "target": "≥ 8× fewer seconds",
        "check": f"λ* = {b.coupling:.6g} vs {lam_grid:.6g} (rel. diff {rel:.1e}, need < 1e-3): {'ok' if rel < 1e-3 else 'DIFFERS'}",
    }]


if __name__ == "__main__":
    for row in run():
        for k, v in row.items():
            print(f"{k:>10}: {v:.3g}" if isinstance(v, float) else f"{k:>10}: {v}")
