"""Time a coupling move in the panels (precomputed sweep): target < 50 ms.

For each panel and canvas it builds the panel once (heavy work: compare
sweep, validity boundaries), then moves the coupling slider ``MOVES`` times and
reports min / median of the time the callback takes (markers moved with
``set_xdata``/``set_data``, readout rewritten, redraw of the moving artists
over the cached background).  It checks that no engine work ran during the
moves.  The baseline column is a full redraw of the same figure.

Canvases: ``image`` (inline PNG, the fallback: the PNG encoding is included)
and ``ipympl`` (``%matplotlib widget``: blit and diff frame; the browser
repaint is not included).  Run: ``python benchmarks/bench_widgets.py``.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):  # before numpy loads
    os.environ[_var] = os.environ.get("PTCHECK_BENCH_THREADS", "1")

import time  # noqa: E402

import numpy as np  # noqa: E402
from _harness import Row, load, main  # noqa: E402

MOVES = 40


def bench(panel_cls, canvas: str, repeats: int) -> Row:
    from ptcheck.models import rabi

    model = rabi(n_photons=6)  # N = 12; invented default numbers
    before = load()
    t0 = time.perf_counter()
    p = panel_cls(model, orders=(1, 2, 4), coupling_range=(0.0, 2.0), n_points=101, canvas=canvas, raise_errors=True)
    build = time.perf_counter() - t0
    heavy = p.heavy_computations
    p.view.figure.canvas.draw()  # as the browser's first frame request would: caches the background
    moves = []
    for lam in np.linspace(0.1, 1.9, MOVES):
        t = time.perf_counter()
        p.controls.coupling.value = float(lam)
        moves.append(time.perf_counter() - t)
    untouched = p.heavy_computations == heavy
    full = []
    for _ in range(repeats):
        t = time.perf_counter()
        p.view.figure.canvas.draw()
        full.append(time.perf_counter() - t)
    p.close()
    med = float(np.median(moves))
    return Row(
        job=f"coupling move in {panel_cls.__name__} ({canvas} canvas), precomputed sweep", ours=moves,
        ours_note=f"{MOVES} moves; build {build:.2f} s", baseline_name="full redraw of the figure", baseline=full,
        target="< 50 ms median", load=(before, load()),
        check=("met" if med < 0.05 else "NOT met") + ("" if untouched else "; ENGINE WORK RAN DURING MOVES"),
    )


def run(repeats: int = 3, only_ours: bool = False) -> list[Row]:
    from ptcheck.widgets import DivergencePanel, ErrorsPanel, LevelsPanel

    rows = []
    for canvas in ("image", "ipympl"):
        for cls in (LevelsPanel, ErrorsPanel, DivergencePanel):
            try:
                rows.append(bench(cls, canvas, repeats))
            except ImportError as exc:  # ipympl missing
                rows.append(Row(job=f"coupling move in {cls.__name__} ({canvas} canvas)", ours=[], check=f"skipped: {exc}"))
    return rows


if __name__ == "__main__":
    raise SystemExit(main(run))
