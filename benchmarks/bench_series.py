"""Cost of high-order Rayleigh–Schrödinger series against one exact solve.

Jobs (invented parameters):

* dense: RS order 50 for the ground level of a qubit-resonator model with
  N = 2000, against the cheapest exact answer for that one level: one
  ``eigvalsh(subset_by_index=[0, 0])`` of the same matrix at one coupling.
* sparse: RS order 30 for the ground level of a transverse-field Ising chain
  with site fields, L = 14 (N = 16384), against one ``eigsh(k=1)`` at one
  coupling; target < 2 s absolute.  The model build time is printed beside it.

Run: ``python benchmarks/bench_series.py``.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):  # before numpy loads
    os.environ[_var] = os.environ.get("PTCHECK_BENCH_THREADS", "1")

import time  # noqa: E402

import numpy as np  # noqa: E402
import scipy.linalg as sla  # noqa: E402
import scipy.sparse.linalg as spla  # noqa: E402
from _harness import Row, interleaved, main  # noqa: E402

from ptcheck.models import kerr_qubit_resonator, spin_chain  # noqa: E402
from ptcheck.series import rs_series  # noqa: E402

CHAIN_SPINS = 14


def run(repeats: int = 3, only_ours: bool = False) -> list[Row]:
    rows = []
    # invented transmon-like numbers; dense matrices so the comparison is dense vs dense
    m = kerr_qubit_resonator(omega_q=5.0, alpha=-0.25, omega_r=7.0, g=0.1, n_qubit=10, n_photons=200, sparse=False)
    h = m.hamiltonian(1.0)
    t_ours, t_base, s, w, ld = interleaved(
        lambda: rs_series(m, 0, 50),
        lambda: sla.eigvalsh(h, subset_by_index=[0, 0], check_finite=False),
        repeats,
    )
    rows.append(Row(
        job=f"RS order 50, one level, dense N = {m.n}", ours=t_ours,
        baseline_name="one eigvalsh(subset_by_index=[0, 0]) at one coupling", baseline=t_base, load=ld,
        check=f"|E_RS(λ=1) - E_exact| = {abs(s.energy(1.0) - w[0]):.1e}",
    ))

    fields = list(np.round(0.1 + 0.03 * np.arange(CHAIN_SPINS), 4))  # invented site-dependent fields
    t = time.perf_counter()
    c = spin_chain(n_spins=CHAIN_SPINS, kind="transverse_ising", h_z=fields)
    t_build = time.perf_counter() - t
    hc = c.hamiltonian(0.3)
    t_ours, t_base, s, w, ld = interleaved(
        lambda: rs_series(c, 0, 30),
        lambda: spla.eigsh(hc, k=1, which="SA", tol=1e-8),
        repeats,
    )
    rows.append(Row(
        job=f"RS order 30, one level, sparse Ising chain L = {CHAIN_SPINS} (N = {c.n})", ours=t_ours,
        ours_note=f"model build {t_build:.2f} s", baseline_name="one eigsh(k=1) at one coupling", baseline=t_base,
        load=ld, target="< 2 s absolute",
        check=f"{'met' if min(t_ours) < 2.0 else 'NOT met'}; |E_RS(0.3) - E_exact| = {abs(s.energy(0.3) - w[0][0]):.1e}",
    ))
    return rows


if __name__ == "__main__":
    raise SystemExit(main(run))
