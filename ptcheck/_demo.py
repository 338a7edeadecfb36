"""The demo's invented device, its side studies, and how its work is spread over the cores.

``ptcheck demo`` checks the invented device Q-17 (:data:`DEMO_PARAMS`) and
adds two side studies (a validity map over the resonator frequency, the
boundary against photon number) and their figures.  The parts are
independent, so on a machine that can fork they run side by side
(:class:`DemoWork`):

- a *compute worker*, forked at once, runs the two side studies, then the
  convergence diagnosis of the check (:func:`ptcheck.report.run_check`,
  ``executor=``);
- meanwhile this process loads the figure code (matplotlib, fonts), then
  forks a *drawing worker* that inherits it (matplotlib is loaded once, not
  once per process), and runs the rest of the check;
- the drawing worker draws the side studies' figures as soon as they are
  computed; the check's figures are then drawn here and there, whichever
  process is free.

Where fork is unavailable everything runs here, one part after the other;
the report is the same either way.
"""

from __future__ import annotations

import contextlib
import io
import multiprocessing as mp
import threading
from collections.abc import Iterator
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from typing import Any, Callable

from .maps import _stop_pool, _worker_init

__all__ = ["DEMO_PARAMS", "DEMO_MARK", "DemoWork", "demo_model"]

#: The invented demo device "Q-17": a transmon-like Kerr-ladder qubit and its
#: readout resonator (GHz).  These numbers describe no real device.
DEMO_PARAMS = {
    "omega_q": 5.21,
    "alpha": -0.232,
    "omega_r": 6.41,
    "g": 0.082,
    "n_qubit": 4,
    "n_photons": 8,
}

#: The design point (ω_r in GHz, λ) marked on the demo's validity map.
DEMO_MARK = (DEMO_PARAMS["omega_r"], 1.0)

def demo_model(p: dict | None = None, **changes: Any) -> Any:
    """The Q-17 model (``p``: builder parameters, default :data:`DEMO_PARAMS`), λ = 1 ↔ g in MHz."""
    from .models import kerr_qubit_resonator

    p = DEMO_PARAMS if p is None else p
    model = kerr_qubit_resonator(**{**p, **changes})
    model.name = "Q-17 qubit + readout resonator (invented)"
    model.coupling_scale = 1000.0 * p["g"]
    model.coupling_unit = "MHz"
    return model


def validity_map_study(chi: Any) -> Any:
    """The demo's validity map of χ over ω_r (small: serially, a process pool of its own costs more than it saves)."""
    import numpy as np

    from .maps import validity_map

    p = DEMO_PARAMS
    return validity_map(
        "kerr_qubit_resonator", "omega_r", np.round(np.linspace(5.95, 7.35, 8), 4), level=chi, order=2, rtol=0.01,
        couplings=np.linspace(0.1, 2.0, 20), builder_kwargs={k: v for k, v in p.items() if k != "omega_r"},
        executor="serial",
    )


def photon_study() -> Any:
    """Photon budget: the same device with room for 24 photons in the resonator basis.

    The report shows λ*_n of the dispersive formula beside n_crit; the block treatment's boundary per photon
    number (a second, costlier search each) is left out: the near-degeneracy notes still name it.
    """
    from .photons import photon_boundaries

    return photon_boundaries(demo_model(n_photons=24), 2, rtol=0.01, photons=range(0, 21, 2), units="GHz",
                             suggestions=False)


def _study_figure_options(model: Any) -> dict[tuple, dict]:
    """Keyword arguments of :func:`ptcheck.report.draw_study_figure` per figure key."""
    return {
        ("validity_map",): {"mark": DEMO_MARK, "unit": "GHz"},
        ("photons",): {"coupling_scale": model.coupling_scale, "coupling_unit": model.coupling_unit},
    }


def load_figure_code() -> None:
    """Import the figure code and load the fonts in this process (a process forked later inherits them)."""
    from matplotlib.figure import Figure

    from . import maps_plot  # noqa: F401
    from .plots import _common

    _common.text_width("λ 0123456789 ⟩", 12.0)
    Figure(figsize=(1, 1)).savefig(io.BytesIO(), format="png")


def _drawing_worker() -> None:
    """Start-up of a drawing worker forked before the figure code was loaded: load it there."""
    _worker_init()
    load_figure_code()


@contextlib.contextmanager
def _one_worker(initializer: Callable[[], None]) -> Iterator[ProcessPoolExecutor]:
    """One forked worker process (forked at the first task), stopped on the way out."""
    pool = ProcessPoolExecutor(max_workers=1, mp_context=mp.get_context("fork"), initializer=initializer)
    try:
        yield pool
    except BaseException:  # an interrupt or an error: stop the worker now, leave no orphan
        _stop_pool(pool)
        raise
    pool.shutdown(wait=True, cancel_futures=True)


class DemoWork:
    """The demo's independent parts, spread over this process and up to two forked workers.

    Create it inside an :class:`contextlib.ExitStack` (the workers stop when
    the stack closes), then run the check in this process, then ask for
    :meth:`studies` and :meth:`figures`.

    Parameters
    ----------
    stack : contextlib.ExitStack
    chi : Quantity
        The quantity of the validity map.
    model : Model
        The demo model (its physical coupling labels the photon figure).
    studies : bool
        Run the side studies (validity map, photon numbers).
    figure_format : str or None
        Figure format; None: no figures.
    """

    def __init__(self, stack: contextlib.ExitStack, chi: Any, model: Any, *, studies: bool,
                 figure_format: str | None) -> None:
        self._chi = chi
        self._fmt = figure_format
        self._options = _study_figure_options(model)
        self._studies = studies
        self._compute: ProcessPoolExecutor | None = None
        self._draw: ProcessPoolExecutor | None = None
        self._study_futures: dict[tuple, Future] = {}
        self._drawn: dict[tuple, Future] = {}
        self._forwarder: threading.Thread | None = None
        self._error: BaseException | None = None
        if "fork" not in mp.get_all_start_methods():
            return
        if studies:
            self._compute = stack.enter_context(_one_worker(_worker_init))
            self._study_futures = {
                ("validity_map",): self._compute.submit(validity_map_study, chi),
                ("photons",): self._compute.submit(photon_study),
            }
        if figure_format is None:
            return
        if self._compute is not None:
            load_figure_code()  # here, while the compute worker runs the studies
            self._draw = stack.enter_context(_one_worker(_worker_init))
        else:  # nothing else to overlap with: the drawing worker loads it itself while the check runs here
            self._draw = stack.enter_context(_one_worker(_drawing_worker))
        self._draw.submit(int)  # fork it now, from this thread
        if self._study_futures:
            self._forwarder = threading.Thread(target=self._forward, name="ptcheck-demo-figures", daemon=True)
            self._forwarder.start()

    @property
    def executor(self) -> ProcessPoolExecutor | None:
        """The compute worker, for the check's independent steps (None: run them here)."""
        return self._compute

    def _forward(self) -> None:
        """Hand each side study to the drawing worker as soon as it is computed (runs in a thread)."""
        from .report import draw_study_figure

        try:
            for key, fut in self._study_futures.items():
                self._drawn[key] = self._draw.submit(draw_study_figure, fut.result(), figure_format=self._fmt,
                                                     **self._options[key])
        except BaseException as exc:  # handed to the main thread by studies()
            self._error = exc

    def studies(self) -> dict:
        """``{"validity_map": ValidityMap, "photon_boundaries": PhotonBoundaries}`` (computed here without a worker)."""
        if not self._studies:
            return {}
        if self._compute is None:
            return {"validity_map": validity_map_study(self._chi), "photon_boundaries": photon_study()}
        out = {"validity_map": self._study_futures[("validity_map",)].result(),
               "photon_boundaries": self._study_futures[("photons",)].result()}
        if self._forwarder is not None:
            self._forwarder.join()
        if self._error is not None:
            raise self._error
        return out

    def figures(self, report: Any) -> list:
        """The report's figures in :func:`ptcheck.report.figure_plan` order, drawn here and on the drawing worker.

        One list, heaviest first: the worker takes from the front, this process from the back, each as soon as
        it is free.  While two or more are left the worker keeps one waiting in its queue (no gap between its
        figures); the last one goes to whichever is free first.
        """
        from .report import default_figures, draw_figure, figure_plan

        if self._draw is None:
            return default_figures(report, figure_format=self._fmt)
        plan = figure_plan(report)
        done: dict[tuple, Any] = {k: f for k, f in self._drawn.items() if k in plan}
        todo = sorted((k for k in plan if k not in done), key=_drawing_cost, reverse=True)
        lock = threading.Lock()
        failed: list[BaseException] = []  # the feeder's error
        stop = threading.Event()  # this thread failed: the feeder takes nothing more

        def feed() -> None:  # the drawing worker's share (a thread that only waits)
            try:
                mine = list(done.values())  # the side studies' figures may still be drawing there
                while True:
                    busy = [f for f in mine if not f.done()]
                    with lock:
                        ok = bool(todo) and not failed and not stop.is_set()
                        key = todo.pop(0) if ok and (not busy or (len(busy) < 2 and len(todo) >= 2)) else None
                    if key is not None:
                        done[key] = self._draw.submit(draw_figure, report, key, figure_format=self._fmt)
                        mine.append(done[key])
                    elif busy:
                        wait(busy, return_when=FIRST_COMPLETED)
                    else:
                        return
            except BaseException as exc:  # re-raised below, in this thread
                failed.append(exc)

        def take_last() -> tuple | None:
            with lock:
                return todo.pop() if todo and not failed else None

        feeder = threading.Thread(target=feed, name="ptcheck-demo-drawing", daemon=True)
        feeder.start()
        try:
            while (key := take_last()) is not None:
                done[key] = draw_figure(report, key, figure_format=self._fmt)
        except BaseException:  # (the worker is stopped on the way out; the feeder then ends by itself)
            stop.set()
            raise
        feeder.join()
        if failed:
            raise failed[0]
        return [done[k].result() if isinstance(done[k], Future) else done[k] for k in plan]


def _drawing_cost(key: tuple) -> int:
    """Rough drawing cost of a figure (the complex-plane view and the error curves carry the most text)."""
    return {"convergence": 3, "errors": 2, "bands": 2, "pairs": 2}.get(key[0], 1)
