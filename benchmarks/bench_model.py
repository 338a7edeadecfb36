"""Benchmark: building a Model against the work it enables.

Target (performance issue, "Model construction"): building a transverse-field Ising
chain of 2^18 states (spin-flip parity declared, so the build also finds the two
sectors and pairs the states) costs less than its Rayleigh–Schrödinger series to
order 30.  Both are timed as CPU time of this process (best of ``repeat``), and the
build is split into the builder's matrices, ``Model`` validation and the rest of
``Model`` (sectors, work basis, labels).

Run: ``python benchmarks/bench_model.py [n_spins]`` (default 18).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

try:  # run from a checkout without installing: use the package beside this folder
    import ptcheck  # noqa: F401
except ImportError:
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from ptcheck import _validation as val
from ptcheck.models import spin_chain
from ptcheck.series import rs_series


def _best(fn, repeat: int = 3) -> float:
    best = float("inf")
    for _ in range(repeat):
        t = time.process_time()
        fn()
        best = min(best, time.process_time() - t)
    return best


def run(n_spins: int = 18) -> dict:
    spin_chain(n_spins=6)  # warm imports
    build = _best(lambda: spin_chain(n_spins=n_spins))
    m = spin_chain(n_spins=n_spins)
    checks = _best(lambda: val.check_hermitian(m.v, "v", 1e-10))  # one Hermiticity check of V (work basis)
    series = _best(lambda: rs_series(m, 0, 30))
    return {"n_spins": n_spins, "N": m.n, "build_s": build, "hermitian_check_of_v_s": checks, "rs30_s": series, "model": repr(m)}


if __name__ == "__main__":
    out = run(int(sys.argv[1]) if len(sys.argv) > 1 else 18)
    for k, v in out.items():
        print(f"{k:24s} {v:.3f}" if isinstance(v, float) else f"{k:24s} {v}")
    print("target: build_s < rs30_s ->", "met" if out["build_s"] < out["rs30_s"] else "NOT met")
