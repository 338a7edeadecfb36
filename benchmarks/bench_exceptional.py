"""Exceptional-point search at real model sizes.

* dense: ``convergence(model, level, 30)`` with the EP search on (the default
  for N <= 400) for a qubit-resonator model with N = 400 (invented numbers),
  against the cost of one dense eigenvalue computation of the same complex
  matrix H(λ) (``scipy.linalg.eigvals`` at the EP found, what the search used
  to do per continuation step).  Target: at most 40 such eigensolves' worth.
  The check column also gives the cost in real ``eigh`` units (the cheapest
  dense exact solve of the model at a real coupling).
* sparse: ``convergence(chain, 0, 30, ep_search="always")`` for the ground
  doublet member of the uniform transverse-field Ising ring, L = 14
  (N = 16384, spin-flip parity declared): the reduced-basis search (products
  with the sparse V only; no dense or factorised alternative fits).  Absolute
  time, one run.  Check against the closed form: the ground energy of the ring
  is a sum of ε_k = 2 sqrt(1 + λ² + 2λ cos k) over the momenta of its parity
  sector, singular where ε_k = 0, i.e. at λ = −e^{±ik}, all on |λ| = 1
  (P. Pfeuty, Ann. Phys. 57, 79 (1970)); the nearest EP found must lie on the
  unit circle at an angle π ± k with k = π(2m + 1)/L.  (With the invented site
  fields of the boundary benchmark the coefficients at order 30–40 look
  asymptotic to the growth test and the search is not the default there.)

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

    c = spin_chain(n_spins=CHAIN_SPINS, kind="transverse_ising")
    _ = c.norm_v
    t_ours, _, r, _, ld = interleaved(lambda: convergence(c, 0, 30, ep_search="always"), None, 1)
    if r.exceptional_points.size:
        z = complex(r.exceptional_points[0])
        # closed form: λ = −e^{±ik}, k = π(2m + 1)/L  ⇒  |λ| = 1 and arg λ = π ± k
        ks = np.pi * (2 * np.arange(CHAIN_SPINS) + 1) / CHAIN_SPINS
        closed = -np.exp(1j * np.concatenate([ks, -ks]))
        miss = float(np.min(np.abs(closed - z)))
        ep = f"nearest EP λ = {z.real:.6g}{z.imag:+.6g}i (|λ| = {abs(z):.6g})"
        check = (f"closed form λ = −e^(±ik) (Pfeuty 1970): distance {miss:.1e} ({'ok' if miss < 1e-6 else 'NOT ok'}); "
                 f"kind {r.kind}, agreement '{r.agreement}'")
    else:
        ep, check = "no EP found", "NOT ok: the closed form has EPs on |λ| = 1"
    rows.append(Row(
        job=f"exceptional-point search, reduced basis (convergence, order 30, ep_search='always'), uniform Ising ring "
        f"L = {CHAIN_SPINS} (N = {c.n})", ours=t_ours, ours_note=ep, check=check, load=ld,
    ))
    return rows


def _time(fn) -> float:
    import time

    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


if __name__ == "__main__":
    raise SystemExit(main(run))
