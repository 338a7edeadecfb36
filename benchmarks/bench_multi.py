"""Cost of the multivariate Rayleigh–Schrödinger series against its own minimal work.

Job (invented parameters): the ground level of a chain of L = 14 spins (N = 2^14) with random
longitudinal fields and an Ising bond in H0, and two couplings: a transverse field ``V1 = Σ σx``
and a flip-flop hopping ``V2 = Σ (σ+σ− + σ−σ+)`` on the bonds (sparse).  All coefficients
``E^(a,b)`` and states ``ψ^(a,b)`` with ``a + b <= 12`` (91 coefficients).

Reference (the work the recursion cannot avoid), timed as a plain loop in the same process,
interleaved with ptcheck: one mat-vec per coefficient — a product of a vector with every ``V_i`` —
plus the vector work: one BLAS ``daxpy`` per term of the Cauchy sums ``Σ E^β ψ^(α−β)`` and the
resolvent applied into a freshly allocated (P, N) array of states.  Target: ptcheck's time
<= 1.5 × that reference (min over the repeats of each).

Run: ``python benchmarks/bench_multi.py``.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):  # before numpy loads
    os.environ[_var] = os.environ.get("PTCHECK_BENCH_THREADS", "1")

import time  # noqa: E402
from math import comb  # noqa: E402

import numpy as np  # noqa: E402
import scipy.sparse as sp  # noqa: E402
from _harness import Row, interleaved, main  # noqa: E402
from scipy.linalg import blas  # noqa: E402

from ptcheck import Model  # noqa: E402
from ptcheck._multi_numerics import cauchy_terms, graded_indices  # noqa: E402
from ptcheck.multiseries import multi_series  # noqa: E402

SPINS = 14
ORDER = 12


def chain(n_spins: int) -> Model:
    """Invented spin chain: H0 = Σ h_i σz_i + 0.3 Σ σz_i σz_{i+1}; V1 = Σ σx_i; V2 = Σ (σ+σ− + σ−σ+)_{i,i+1}."""
    rng = np.random.default_rng(14)
    h = rng.uniform(0.5, 1.5, n_spins)
    n = 2**n_spins
    states = np.arange(n)
    bits = (states[:, None] >> np.arange(n_spins)[None, :]) & 1
    z = 1.0 - 2.0 * bits  # σz eigenvalues
    diag = z @ h + 0.3 * np.sum(z[:, :-1] * z[:, 1:], axis=1)
    rows, cols = [], []
    for i in range(n_spins):
        rows.append(states)
        cols.append(states ^ (1 << i))
    v1 = sp.csr_matrix((np.ones(n * n_spins), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))
    rows, cols = [], []
    for i in range(n_spins - 1):
        differ = bits[:, i] != bits[:, i + 1]
        s = states[differ]
        rows.append(s)
        cols.append(s ^ (0b11 << i))
    r, c = np.concatenate(rows), np.concatenate(cols)
    v2 = sp.csr_matrix((np.ones(r.size), (r, c)), shape=(n, n))
    return Model(sp.diags(diag, format="csr"), [v1, v2], names=("hx", "J"), name="invented spin chain, two couplings")


def minimal_work(model: Model, order: int):
    """A plain loop doing exactly the unavoidable work, on the same memory layout (returns a callable).

    For each of the P coefficients: one product of a state with every ``V_i`` (``V1 @ x + V2 @ x``), one
    BLAS axpy per Cauchy term ``E^β ψ^(α−β)`` of that coefficient, and the resolvent applied into a freshly
    allocated (P, N) array of states.  No bookkeeping: it computes nothing meaningful, only the cost.
    """
    v1, v2 = model.vs
    n = model.n
    idx = graded_indices(2, order)
    p = len(idx)
    terms = [cauchy_terms([a]) for a in idx]
    r = np.random.default_rng(1).uniform(0.5, 1.0, n)

    def run_once() -> np.ndarray:
        psi = np.zeros((p, n))
        psi[0, 0] = 1.0
        for j in range(1, p):
            x = psi[j - 1]
            y = v1 @ x
            y += v2 @ x
            for t in range(terms[j]):
                blas.daxpy(psi[t % j], y, a=1e-3)
            np.multiply(y, r, out=psi[j])
        return psi

    note = f"{p} × (V1·x + V2·x) + {sum(terms)} axpy + {p} resolvent products, into a new (P, N) array"
    return run_once, note


def run(repeats: int = 3, only_ours: bool = False) -> list[Row]:
    t = time.perf_counter()
    m = chain(SPINS)
    t_build = time.perf_counter() - t
    base, note = minimal_work(m, ORDER)
    t_ours, t_base, s, _, ld = interleaved(lambda: multi_series(m, 0, ORDER), base, max(repeats, 5))
    # check: along the hx axis the series is the one-coupling series of H0 + t V1 (consistency of the recursion)
    one = m.along((1.0, 0.0)).series(0, ORDER).energy_coefficients
    dev = float(np.max(np.abs(s.along((1.0, 0.0)) - one) / np.maximum(np.abs(one), 1e-300)))
    ratio = min(t_ours) / min(t_base)
    return [Row(
        job=f"multivariate RS, total order {ORDER} ({comb(ORDER + 2, 2)} coefficients), sparse chain L = {SPINS} "
            f"(N = {m.n}), 2 couplings",
        ours=t_ours, ours_note=f"model build {t_build:.2f} s",
        baseline_name=f"minimal work as a plain loop: {note}", baseline=t_base, load=ld,
        target="≤ 1.5 × minimal work",
        ratio_text=f"ours / minimal = {ratio:.2f} ({'met' if ratio <= 1.5 else 'NOT met'})",
        check=f"max relative |E^(k,0) − one-coupling E^(k)| = {dev:.1e}",
    )]


if __name__ == "__main__":
    raise SystemExit(main(run))
