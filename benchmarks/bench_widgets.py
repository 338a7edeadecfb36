"""Time a coupling move in the panels (precomputed sweep): target < 50 ms.

Run: ``python benchmarks/bench_widgets.py``.  For each panel and canvas it
builds the panel once (heavy work: compare sweep, validity boundaries), then
moves the coupling slider ``--moves`` times and reports the median and the
90th percentile of the time the callback takes (markers moved with
``set_xdata``/``set_data``, readout rewritten, redraw of the moving artists
over the cached background).  It also checks that no engine work ran during
the moves, and for reference times a full redraw of the same figure.

Canvases: ``image`` (inline PNG, the fallback: the PNG encoding is included)
and ``ipympl`` (``%matplotlib widget``: blit and diff frame; the browser
repaint is not included).
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

import numpy as np


def bench(panel_cls, canvas: str, moves: int) -> dict:
    from ptcheck.models import rabi

    model = rabi(n_photons=6)  # N = 12; invented default numbers
    t0 = time.perf_counter()
    p = panel_cls(model, orders=(1, 2, 4), coupling_range=(0.0, 2.0), n_points=101, canvas=canvas, raise_errors=True)
    build = time.perf_counter() - t0
    heavy = p.heavy_computations
    p.view.figure.canvas.draw()  # as the browser's first frame request would: caches the background
    times = []
    for lam in np.linspace(0.1, 1.9, moves):
        t = time.perf_counter()
        p.controls.coupling.value = float(lam)
        times.append(time.perf_counter() - t)
    assert p.heavy_computations == heavy, "engine work ran during a coupling move"
    t = time.perf_counter()
    p.view.figure.canvas.draw()
    full = time.perf_counter() - t
    p.close()
    times.sort()
    return {"panel": panel_cls.__name__, "canvas": canvas, "build_s": build, "median_ms": 1e3 * statistics.median(times),
            "p90_ms": 1e3 * times[int(0.9 * (len(times) - 1))], "full_redraw_ms": 1e3 * full}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--moves", type=int, default=40)
    args = ap.parse_args(argv)
    from ptcheck.widgets import DivergencePanel, ErrorsPanel, LevelsPanel

    rows = []
    for canvas in ("image", "ipympl"):
        for cls in (LevelsPanel, ErrorsPanel, DivergencePanel):
            try:
                rows.append(bench(cls, canvas, args.moves))
            except ImportError as exc:  # ipympl missing
                print(f"{cls.__name__} on {canvas}: skipped ({exc})")
    print(f"{'panel':<16}{'canvas':<8}{'build s':>9}{'move median ms':>16}{'move p90 ms':>13}{'full redraw ms':>16}")
    for r in rows:
        print(f"{r['panel']:<16}{r['canvas']:<8}{r['build_s']:>9.2f}{r['median_ms']:>16.1f}{r['p90_ms']:>13.1f}"
              f"{r['full_redraw_ms']:>16.1f}")
    print(f"load average (1 min) {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores: timings scale with a busy machine")
    slow = [r for r in rows if r["median_ms"] >= 50.0]
    print("target < 50 ms per move:", "met" if not slow else f"NOT met for {[(r['panel'], r['canvas']) for r in slow]}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
