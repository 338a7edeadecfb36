"""Validity boundary: ``validity_boundary`` against the strongest plain scipy loops.

Jobs (invented parameters throughout):

* sparse: ground level of a transverse-field Ising chain with site-dependent
  longitudinal fields, L = 14 (N = 16384), order 2, rtol 1e-2.  Baseline: the
  loop a capable user writes with scipy: doubling from the natural coupling
  scale (gap / ‖V‖) until the relative error exceeds the tolerance, then
  ``brentq``; every exact energy is a warm-started real ``eigsh(k=1)`` (``v0``
  = the last vector; tolerance equivalent to ptcheck's residual tolerance).
  It does not track the level (it trusts that the ground level stays lowest).
* dense: the (1, 0) level of a qubit-resonator model, N = 400, order 2,
  rtol 1e-2.  Baseline: a 12-point grid on [0, 2 λ*] (told where to look)
  plus ``brentq`` inside the first failing interval, exact energies by
  ``eigvalsh(subset_by_index=[rank, rank])``.

Both sides must give the same λ* to 1e-3 (relative).  Target for the sparse
job: ptcheck at least 2x faster.  Run: ``python benchmarks/bench_boundary.py``.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):  # before numpy loads
    os.environ[_var] = os.environ.get("PTCHECK_BENCH_THREADS", "1")

import numpy as np  # noqa: E402
import scipy.linalg as sla  # noqa: E402
import scipy.sparse as sp  # noqa: E402
import scipy.sparse.linalg as spla  # noqa: E402
from _harness import Row, interleaved, main  # noqa: E402
from scipy.optimize import brentq  # noqa: E402

from ptcheck.compare import validity_boundary  # noqa: E402
from ptcheck.models import kerr_qubit_resonator, spin_chain  # noqa: E402
from ptcheck.series import rs_series  # noqa: E402

RTOL = 0.01
ORDER = 2
XRTOL = 1e-3  # relative bracket width asked of both sides
CHAIN_SPINS = 14
CHAIN_FIELDS = list(np.round(0.1 + 0.03 * np.arange(CHAIN_SPINS), 4))  # invented site fields
#: Invented transmon-like numbers (GHz); N = n_qubit * n_photons.
KERR = dict(omega_q=5.0, alpha=-0.25, omega_r=7.0, g=0.1, n_qubit=5, n_photons=80, sparse=False)
KERR_LEVEL = (1, 0)  # qubit excited, no photon: rank 1 of the spectrum
GRID = 12


def chain():
    m = spin_chain(n_spins=CHAIN_SPINS, kind="transverse_ising", h_z=CHAIN_FIELDS)
    _ = m.norm_v  # one-off model preparation, shared by both sides
    return m


def plain_sparse(model, level: int = 0) -> tuple[float, int]:
    """Doubling + brentq, warm-started real eigsh(k=1); returns (λ*, solves)."""
    s = rs_series(model, level, ORDER)
    e0 = model.e0[level]
    h0 = sp.diags(model.e0).tocsr()
    v = model.v.tocsr()
    state = {"v0": None, "solves": 0}
    scale = float(np.max(np.abs(model.e0)))

    def g(lam: float) -> float:
        h = (h0 + lam * v).tocsr()
        # ARPACK stops at |r| <= tol |θ|: tol = 1e-8 x scale / |θ| matches ptcheck's residual rtol = 1e-8
        w, x = spla.eigsh(h, k=1, which="SA", v0=state["v0"], tol=1e-8 * (scale + lam * model.norm_v) / scale)
        state["v0"] = x[:, 0]
        state["solves"] += 1
        exact = float(w[0])
        return abs(float(s.energy(lam)) - exact) / abs(exact - e0) - RTOL

    lam = (model.e0[level + 1] - model.e0[level]) / model.norm_v  # natural coupling scale
    if g(lam) > 0:
        hi = lam
        while g(lam / 2) > 0:
            lam /= 2
            hi = lam
        lo = lam / 2
    else:
        lo = lam
        while g(2 * lam) <= 0:
            lam *= 2
            lo = lam
        hi = 2 * lam
    root = brentq(g, lo, hi, xtol=XRTOL * lo, rtol=4 * np.finfo(float).eps)
    return float(root), state["solves"]


def plain_dense(model, level: int, lam_max: float) -> tuple[float, int]:
    """Coarse grid on [0, lam_max] + brentq; exact energies by eigvalsh(subset_by_index)."""
    s = rs_series(model, level, ORDER)
    e0 = model.e0[level]
    count = {"solves": 0}

    def g(lam: float) -> float:
        h = model.hamiltonian(lam)
        h = h.toarray() if sp.issparse(h) else h
        exact = float(sla.eigvalsh(h, subset_by_index=[level, level], check_finite=False)[0])
        count["solves"] += 1
        return abs(float(s.energy(lam)) - exact) / abs(exact - e0) - RTOL

    grid = np.linspace(lam_max / GRID, lam_max, GRID)
    prev = 0.0
    for lam in grid:
        if g(lam) > 0:
            root = brentq(g, prev if prev > 0 else lam / GRID, lam, xtol=XRTOL * max(prev, lam / GRID), rtol=4 * np.finfo(float).eps)
            return float(root), count["solves"]
        prev = lam
    return float("nan"), count["solves"]


def _agree(a: float, b: float) -> str:
    rel = abs(a - b) / abs(b)
    return f"λ* {a:.6g} vs {b:.6g}: rel. diff {rel:.1e} ({'ok' if rel < 1e-3 else 'DIFFERS'})"


def run(repeats: int = 3, only_ours: bool = False) -> list[Row]:
    rows = []
    m = chain()
    t_ours, t_base, b, (lam_b, solves_b), ld = interleaved(
        lambda: validity_boundary(m, 0, ORDER, rtol=RTOL, treatment="nondegenerate", xrtol=XRTOL),
        lambda: plain_sparse(m),
        repeats,
    )
    rows.append(Row(
        job=f"validity boundary, sparse Ising chain with site fields, L = {CHAIN_SPINS} (N = {m.n}), order {ORDER}, rtol {RTOL}",
        ours=t_ours, ours_note=f"{b.exact_solves} solves",
        baseline_name="doubling + brentq, warm eigsh(k=1)", baseline=t_base, baseline_note=f"{solves_b} solves",
        target="≥ 2×", check=_agree(abs(b.coupling), lam_b), load=ld,
    ))

    k = kerr_qubit_resonator(**KERR)
    level = k.level_index(KERR_LEVEL)
    ref = validity_boundary(k, level, ORDER, rtol=RTOL, treatment="nondegenerate", xrtol=XRTOL)
    # the same question as the plain loop (the boundary alone), then the default, which also searches the
    # boundary of the block treatment it suggests beside the answer (a near-degenerate partner limits this level)
    for suggestions, what in ((False, "the boundary alone"), (True, "with the block-treatment suggestion beside it")):
        t_ours, t_base, b, (lam_b, solves_b), ld = interleaved(
            lambda: validity_boundary(k, level, ORDER, rtol=RTOL, treatment="nondegenerate", xrtol=XRTOL,
                                      suggestions=suggestions),
            lambda: plain_dense(k, level, 2.0 * abs(ref.coupling)),
            repeats,
        )
        rows.append(Row(
            job=f"validity boundary, dense qubit-resonator N = {k.n}, order {ORDER}, rtol {RTOL}: {what}",
            ours=t_ours, ours_note=f"{b.exact_solves} solves" + (f", {len(b.suggestions)} suggestion(s)" if suggestions else ""),
            baseline_name=f"{GRID}-point grid on [0, 2λ*] + brentq, eigvalsh(subset_by_index)", baseline=t_base,
            baseline_note=f"{solves_b} solves", check=_agree(abs(b.coupling), lam_b), load=ld,
        ))
    return rows


if __name__ == "__main__":
    raise SystemExit(main(run))
