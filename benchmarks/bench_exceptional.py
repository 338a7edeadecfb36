"""Exceptional-point search at real model sizes.

* dense: ``convergence(model, level, 30)`` with the EP search on (the default
  for N <= 400) for a qubit-resonator model with N = 400 (invented numbers),
  against the cost of one dense eigenvalue computation of the same complex
  matrix H(λ) (``scipy.linalg.eigvals`` at the EP found, what the search used
  to do per continuation step).  Target: at most 40 such eigensolves' worth.
  The check column also gives the cost in real ``eigh`` units (the cheapest
  dense exact solve of the model at a real coupling).
* sparse: ``convergence(chain, 0, 40, ep_search="always")`` for the ground
  level of a transverse-field Ising chain with invented site fields, L = 14
  (N = 16384): the reduced-basis search (products with the sparse V only; no
  dense or factorised alternative fits).  Absolute time, one run; the check
  compares the EP's distance with the coefficient radius estimates.

Run: ``python benchmarks/bench_exceptional.py``.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):  # before numpy loads
    os.environ[_var] = os.environ.get("PTCHECK_BENCH_THREADS", "1")

import numpy as np  # noqa: E402
import scipy.linalg as sla  # noqa: E402
from _harness import Row, interleaved, main  # noqa: E402

from ptcheck.convergence import convergence  # noqa: E402
from ptcheck.models import kerr_qubit_resonator, spin_chain  # noqa: E402

#: Invented transmon-like numbers (GHz); N = 5 x 80 = 400.
KERR = dict(omega_q=5.0, alpha=-0.25, omega_r=7.0, g=0.1, n_qubit=5, n_photons=80, sparse=False)
LEVEL = (1, 0)
ORDER = 30
BUDGET = 40
CHAIN_SPINS = 14


def run(repeats: int = 3, only_ours: bool = False) -> list[Row]:
    m = kerr_qubit_resonator(**KERR)
    level = m.level_index(LEVEL)
    first = convergence(m, level, ORDER)
    lam = complex(first.exceptional_points[0]) if first.exceptional_points.size else 1j
    h = (m.hamiltonian(0.0) + lam * m.v).astype(complex)
    t_ours, t_eig, r, _, ld = interleaved(
        lambda: convergence(m, level, ORDER),
        lambda: sla.eigvals(h, check_finite=False),
        repeats,
    )
    hr = m.hamiltonian(abs(lam))
    t_eigh = min(_time(lambda: sla.eigh(hr, check_finite=False)) for _ in range(repeats))
    worth = min(t_ours) / min(t_eig)
    ep = f"nearest EP λ = {r.exceptional_points[0]:.6g}" if r.exceptional_points.size else "no EP found"
    skipped = any("skipped" in n for n in r.notes)
    rows = [Row(
        job=f"exceptional-point search (convergence, order {ORDER}), dense qubit-resonator N = {m.n}",
        ours=t_ours, ours_note=ep + (" (SKIPPED)" if skipped else ""),
        baseline_name="one complex eigvals of H(λ*)", baseline=t_eig, target=f"≤ {BUDGET}",
        ratio_text=f"{worth:.1f} eigensolves' worth",
        check=f"{'met' if worth <= BUDGET else 'NOT met'}; = {min(t_ours) / t_eigh:.0f} real eigh (with vectors) of H(|λ*|)",
        load=ld,
    )]

    c = spin_chain(n_spins=CHAIN_SPINS, kind="transverse_ising", h_z=list(np.round(0.1 + 0.03 * np.arange(CHAIN_SPINS), 4)))
    _ = c.norm_v
    t_ours, _, r, _, ld = interleaved(lambda: convergence(c, 0, 40, ep_search="always"), None, 1)
    if r.exceptional_points.size:
        z = r.exceptional_points[0]
        ep = f"nearest EP λ = {z:.6g} (|λ| = {abs(z):.4g}, with level {r.partners[0]})"
    else:
        ep = "no EP found"
    rows.append(Row(
        job=f"exceptional-point search, reduced basis (convergence, order 40, ep_search='always'), sparse Ising chain "
        f"L = {CHAIN_SPINS} (N = {c.n})", ours=t_ours, ours_note=ep,
        check=f"coefficient radius: root test {r.estimates.root:.4g}, Padé {r.estimates.pade:.4g}; agreement '{r.agreement}'",
        load=ld,
    ))
    return rows


def _time(fn) -> float:
    import time

    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


if __name__ == "__main__":
    raise SystemExit(main(run))
