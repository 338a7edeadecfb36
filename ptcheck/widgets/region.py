"""Panel for a model with two couplings: the region map and two coupling sliders.

A thin skin over :func:`ptcheck.region.validity_region` (the same call as the
command line), :func:`ptcheck.region.ray_convergence` and
:func:`ptcheck.plots.plot_region`.  The regions (one per order) are computed
when the target, orders or tolerance change; moving the two coupling sliders
only moves the point and its ray on the figure and rewrites the readout: the
perturbative and exact energies at the point (one tracked exact solve along
its ray) and, per order, whether the point lies inside that order's region.

Examples
--------
>>> from ptcheck.models import polar_molecule                  # doctest: +SKIP
>>> from ptcheck.widgets.region import RegionPanel             # doctest: +SKIP
>>> RegionPanel(polar_molecule(), (0, 0), orders=(2, 4))       # doctest: +SKIP
"""

from __future__ import annotations

import html
import io
import warnings
from collections.abc import Sequence
from contextlib import contextmanager
from typing import Any

import numpy as np

from .. import _validation as val
from ..exact import ExactSolver
from ..model import Model
from ..multiseries import check_multi, multi_series, ray_target, target_name
from ..quantities import Quantity
from ..region import default_scales, ray_convergence, validity_region

__all__ = ["RegionPanel", "CANVASES"]

#: How the figure is shown: an inline PNG image, or an ipympl canvas (``%matplotlib widget``).
CANVASES = ("image", "ipympl")
#: Orders offered in the order selector.
ORDER_CHOICES = tuple(range(1, 9))


class RegionPanel:
    """Region map of two couplings with a slider per coupling.

    Parameters
    ----------
    model : Model
        A model with two couplings.
    target : level key or Quantity, default 0
    orders : sequence of int, default (2, 4)
        Total degrees whose regions are drawn.
    rtol, tol : float, optional
        Relative (default 0.01) or absolute tolerance; give at most one.
    point : (2,) array_like, optional
        Starting coupling point (default: half the natural scale of each coupling).
    directions : int, default 16
        Starting directions of each region (refined up to ``max_directions``).
    max_directions : int, default 48
    convergence : bool, default False
        Also draw the radius of convergence per ray (one series analysis per ray).
    canvas : {"image", "ipympl"}, default "image"
    raise_errors : bool, default False
        Re-raise errors after showing them (for tests: ipywidgets swallows
        exceptions inside callbacks).

    Attributes
    ----------
    regions : tuple of ValidityRegion
        The current regions (one per order).
    convergence_result : RayConvergence or None
    artists : RegionArtists
    heavy_computations : int
        Engine calls that searched regions or radii (moving the sliders makes none).
    widget : ipywidgets.VBox
    """

    def __init__(
        self,
        model: Model,
        target: Any = 0,
        *,
        orders: Sequence[int] = (2, 4),
        rtol: float | None = None,
        tol: float | None = None,
        point: Any = None,
        directions: int = 16,
        max_directions: int = 48,
        convergence: bool = False,
        canvas: str = "image",
        raise_errors: bool = False,
    ) -> None:
        import ipywidgets as w

        check_multi(model, "RegionPanel")
        if model.n_couplings != 2:
            raise ValueError(f"RegionPanel takes a model with two couplings; model {model.name!r} has {model.n_couplings}")
        if tol is not None and rtol is not None:
            raise ValueError(f"give at most one of tol (absolute) or rtol (relative); got tol={tol!r}, rtol={rtol!r}")
        val.check_choice(canvas, "canvas", CANVASES)
        self.model = model
        self.raise_errors = bool(raise_errors)
        self.directions = val.check_int(directions, "directions", minimum=3, maximum=256)
        self.max_directions = val.check_int(max_directions, "max_directions", minimum=self.directions, maximum=1024)
        self.heavy_computations = 0
        self.notes: list[str] = []
        self.regions: tuple = ()
        self.convergence_result = None
        self.artists = None
        self._cache: dict = {}
        self._series: dict = {}
        self._canvas_kind = canvas
        targets = self._target_options(target)
        scales = default_scales(model, targets[0][1])
        p = np.asarray(point, dtype=float) if point is not None else 0.5 * scales
        reach = np.maximum(4.0 * scales, 2.0 * np.abs(p))
        n1, n2 = model.coupling_names
        layout = w.Layout(width="32em")
        style = {"description_width": "8em"}
        self.target = w.Dropdown(options=targets, value=targets[0][1], description="level", layout=layout, style=style)
        self.orders = w.SelectMultiple(options=ORDER_CHOICES, value=tuple(int(k) for k in orders), description="orders",
                                       rows=4, layout=w.Layout(width="14em"), style=style)
        self.relative = w.Checkbox(value=tol is None, description="relative tolerance", indent=False)
        self.tolerance = w.BoundedFloatText(value=float(tol if tol is not None else (rtol if rtol is not None else 0.01)),
                                            min=1e-14, max=1e6, description="tolerance", layout=layout, style=style)
        self.show_convergence = w.Checkbox(value=bool(convergence), description="radius of convergence per ray", indent=False)
        self.coupling1 = w.FloatSlider(value=float(p[0]), min=-float(reach[0]), max=float(reach[0]),
                                       step=float(reach[0]) / 200, description=f"coupling {n1}", readout_format=".4g",
                                       continuous_update=False, layout=layout, style=style)
        self.coupling2 = w.FloatSlider(value=float(p[1]), min=-float(reach[1]), max=float(reach[1]),
                                       step=float(reach[1]) / 200, description=f"coupling {n2}", readout_format=".4g",
                                       continuous_update=False, layout=layout, style=style)
        self.readout = w.HTML()
        self.message = w.HTML()
        self._make_figure()
        for c in (self.target, self.orders, self.relative, self.tolerance, self.show_convergence):
            c.observe(self._on_settings, names="value")
        for c in (self.coupling1, self.coupling2):
            c.observe(self._on_point, names="value")
        controls = w.HBox([w.VBox([self.target, self.tolerance, self.relative, self.show_convergence]), self.orders])
        self.widget = w.VBox([controls, self.coupling1, self.coupling2, self.message, self.view, self.readout])
        with self._guard():
            self._recompute()

    # ------------------------------------------------------------------ display
    def _ipython_display_(self) -> None:
        from IPython.display import display

        display(self.widget)

    def _make_figure(self) -> None:
        import ipywidgets as w
        from matplotlib.figure import Figure

        from ..plots._style import SCREEN_SIZE

        if self._canvas_kind == "ipympl":
            import matplotlib.pyplot as plt

            with plt.ioff():
                self.figure = plt.figure(figsize=SCREEN_SIZE, layout="constrained")
            self.view = self.figure.canvas
        else:
            self.figure = Figure(figsize=SCREEN_SIZE, layout="constrained")
            self.view = w.Image(format="png", layout=w.Layout(width="100%", max_width=f"{int(SCREEN_SIZE[0] * 100)}px"))

    def _redraw(self) -> None:
        if self._canvas_kind == "ipympl":
            self.figure.canvas.draw_idle()
            return
        buf = io.BytesIO()
        self.figure.savefig(buf, format="png", dpi=100)
        self.view.value = buf.getvalue()

    def close(self) -> None:
        """Close the widgets and release the figure."""
        for c in (self.target, self.orders, self.relative, self.tolerance, self.show_convergence, self.coupling1,
                  self.coupling2, self.readout, self.message, self.widget):
            c.close()
        if self._canvas_kind == "ipympl":
            import matplotlib.pyplot as plt

            plt.close(self.figure)
        else:
            self.view.close()

    # ------------------------------------------------------------------ state
    @property
    def point(self) -> np.ndarray:
        """The coupling point of the two sliders, shape (2,)."""
        return np.array([self.coupling1.value, self.coupling2.value], dtype=float)

    def _target_options(self, target: Any) -> list[tuple[str, Any]]:
        first = target if isinstance(target, Quantity) else self.model.level_index(target)
        opts = [(target_name(self.model, first), first)]
        for n in range(min(self.model.n, 12)):
            if n != first:
                opts.append((self.model.label(n), n))
        return opts

    def _tolerance(self) -> dict:
        return {"rtol": float(self.tolerance.value)} if self.relative.value else {"tol": float(self.tolerance.value)}

    # ------------------------------------------------------------------ callbacks
    @contextmanager
    def _guard(self):
        """Show any error as a message in the panel (and re-raise under test)."""
        try:
            self.message.value = ""
            yield
        except Exception as exc:  # noqa: BLE001 - shown to the user, re-raised when raise_errors
            self.message.value = (
                "<div style='border-left:4px solid #D55E00;padding:4px 8px;background:#FBEDE5'>"
                f"<b>Cannot compute this:</b> {html.escape(str(exc) or type(exc).__name__)}</div>"
            )
            if self.raise_errors:
                raise

    def _on_settings(self, change: dict) -> None:
        with self._guard():
            self._recompute()

    def _on_point(self, change: dict) -> None:
        with self._guard():
            p = self.point
            a = self.artists
            if a is not None and a.point_marker is not None:
                a.point_marker.set_data([p[0]], [p[1]])
                a.point_marker.set_label(f"your point ({p[0]:.3g}, {p[1]:.3g})")
                x, y = a.point_ray.get_data()
                reach = float(np.hypot(x[-1], y[-1])) or 1.0
                u = p / max(float(np.hypot(*p)), 1e-300)
                a.point_ray.set_data([0.0, reach * u[0]], [0.0, reach * u[1]])
            self._update_readout()
            self._redraw()

    # ------------------------------------------------------------------ work
    def _call(self, fn: Any, *args: Any, **kwargs: Any) -> Any:
        self.heavy_computations += 1
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            out = fn(*args, **kwargs)
        for wn in caught:
            if str(wn.message) not in self.notes:
                self.notes.append(str(wn.message))
        return out

    def _recompute(self) -> None:
        from ..plots.region import plot_region

        target = self.target.value
        orders = tuple(sorted(self.orders.value))
        if not orders:
            raise ValueError("select at least one order")
        tk = self._tolerance()
        regions = []
        for k in orders:
            key = (_key(target), k, tuple(tk.items()))
            if key not in self._cache:
                self._cache[key] = self._call(validity_region, self.model, target, k, directions=self.directions,
                                              max_directions=self.max_directions, **tk)
            regions.append(self._cache[key])
        self.regions = tuple(regions)
        conv = None
        if self.show_convergence.value:
            key = ("convergence", _key(target))
            if key not in self._cache:
                self._cache[key] = self._call(ray_convergence, self.model, target, directions=self.directions,
                                              order=max(2 * max(orders), 24))
            conv = self._cache[key]
        self.convergence_result = conv
        self.figure.clear()
        ax = self.figure.add_subplot()
        self.artists = plot_region(self.regions, convergence=conv, point=self.point, ax=ax)
        self._update_readout()
        self._redraw()

    def _update_readout(self) -> None:
        """Energies and verdicts at the sliders' point (light: one tracked exact solve on its ray)."""
        p = self.point
        target = self.target.value
        k = max(r.order for r in self.regions)
        skey = (_key(target), k)
        if skey not in self._series:
            self._series = {skey: multi_series(self.model, target, k)}
        s = self._series[skey]
        rows = []
        exact = self._exact(target, p)
        for r in self.regions:
            e_pt = float(s.energy(p, order=r.order))
            inside = r.contains(p)
            err = abs(e_pt - exact)
            rows.append(
                f"<tr><td>order {r.order}</td><td>{e_pt:.10g}</td><td>{err:.3g}</td>"
                f"<td>{'inside' if inside else '<b>outside</b>'}</td></tr>"
            )
        n1, n2 = self.model.coupling_names
        tol = self._tolerance()
        tol_text = f"relative tolerance {tol['rtol']:g}" if "rtol" in tol else f"absolute tolerance {tol['tol']:g}"
        self.readout.value = (
            f"<p>At ({html.escape(n1)}, {html.escape(n2)}) = ({p[0]:.6g}, {p[1]:.6g}): exact {exact:.10g} "
            f"(tracked from the origin along the straight path); {tol_text}.</p>"
            "<table><tr><th>order</th><th>perturbative</th><th>|error| here</th><th>region</th></tr>"
            + "".join(rows) + "</table>"
            "<p><small>'inside': the tolerance holds on the whole straight path from the origin to the point "
            "(boundary interpolated between the rays searched).</small></p>"
        )

    def _exact(self, target: Any, p: np.ndarray) -> float:
        t = float(np.hypot(*p))
        if t == 0.0:
            weights = target.resolve(self.model) if isinstance(target, Quantity) else {self.model.level_index(target): 1.0}
            return float(sum(w * self.model.e0[n] for n, w in weights.items()))
        ray = self.model.along(p / t)
        solver = ExactSolver(ray)
        rt = ray_target(self.model, ray, target)
        weights = rt.resolve(ray) if isinstance(rt, Quantity) else {rt: 1.0}
        with warnings.catch_warnings(record=True):
            warnings.simplefilter("always")
            return float(sum(w * solver.level_at(n, t)[0] for n, w in weights.items()))


def _key(target: Any) -> Any:
    if isinstance(target, Quantity):
        return ("q", target.name, tuple(sorted(map(str, target.weights.items()))))
    return target

