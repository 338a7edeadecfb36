"""One figure each: build the artists after heavy work, move markers on a coupling change (private)."""

from __future__ import annotations

import csv
import io
import json
from typing import Any

import numpy as np
from matplotlib.figure import Figure

from ..plots import mixing_map, plot_divergence, plot_errors, plot_levels, plot_pairs, update_pairs
from ..plots._common import positive_or_nan
from ..plots._style import SLIDE_SIZE, style
from ..quantities import Quantity
from ._readout import interp_linear, interp_log

__all__ = ["LevelsView", "ErrorsView", "DivergenceView", "PairsView", "VIEWS", "use_ipympl", "PANEL_SIZE"]

#: Figure size in a panel (inches at 100 dpi): 16:9 like the slides, as wide as the panel's figure column.
PANEL_SIZE = (10.4, 10.4 * SLIDE_SIZE[1] / SLIDE_SIZE[0])


def use_ipympl(canvas: str) -> bool:
    """Whether figures go on an ipympl canvas (``%matplotlib widget``) or inline images."""
    if canvas == "ipympl":
        return True
    if canvas == "image":
        return False
    import matplotlib

    backend = str(matplotlib.get_backend()).lower()
    return "ipympl" in backend or backend == "widget"


class _View:
    """A figure, its widget and the artists drawn on it."""

    name = "view"
    title = "view"
    needs = frozenset()  # which heavy results the view draws: {"comparison", "boundaries", "divergence"}

    def __init__(self, ipympl: bool, figsize: tuple[float, float] = PANEL_SIZE) -> None:
        import ipywidgets as w

        self.ipympl = ipympl
        with style(figsize[0] / SLIDE_SIZE[0]):
            self.figure = Figure(figsize=figsize, layout="constrained")
        if ipympl:
            from ipympl.backend_nbagg import Canvas, FigureManager

            canvas = Canvas(self.figure)
            FigureManager(canvas, 0)
            canvas.header_visible = False
            canvas.footer_visible = False
            canvas.resizable = False
            canvas.toolbar_position = "right"
            # no PNG snapshot of the whole figure on every frame (only used to save a static notebook):
            # halves the work of a coupling move
            canvas.syncing_data_url = False
            self.widget = canvas
        else:
            from matplotlib.backends.backend_agg import FigureCanvasAgg

            FigureCanvasAgg(self.figure)
            self.widget = w.Image(format="png", layout=w.Layout(width="100%", max_width=f"{int(figsize[0] * 100)}px"))
        self._canvas = self.figure.canvas
        self._setup_axes()
        self.artists: Any = None
        self.state: Any = None  # the answer drawn
        self.stale = True  # artists changed but not shown yet
        self._background = None
        self._cid = None

    def _setup_axes(self) -> None:
        self.ax = self.figure.add_subplot()

    # -------------------------------------------------------------- drawing
    def moving(self) -> list:
        """Artists a coupling move changes (drawn on top of a cached background)."""
        a = self.artists
        if a is None:
            return []
        return [x for x in (getattr(a, "coupling_line", None), getattr(a, "coupling_markers", None),
                            getattr(a, "coupling_marker", None)) if x is not None]

    def _on_draw(self, event: Any) -> None:
        # after every full draw on the screen canvas: keep the background, put the moving artists on it
        canvas = self.figure.canvas
        if event.canvas is not self._canvas or getattr(event, "renderer", None) is not getattr(canvas, "renderer", None):
            return  # a draw for export (temporary canvas, other size or vector renderer)
        self._background = canvas.copy_from_bbox(self.figure.bbox)
        for art in self.moving():
            if art.get_animated():
                self.figure.draw_artist(art)

    def redraw(self, *, full: bool = True) -> None:
        """Show the figure: a full draw, or (``full=False``) only the moving artists over the cached background."""
        canvas = self.figure.canvas
        if self._cid is None:
            self._cid = canvas.mpl_connect("draw_event", self._on_draw)
        moving = self.moving()
        quick = not full and self._background is not None and bool(moving) and all(a.get_animated() for a in moving)
        if quick:
            canvas.restore_region(self._background)
            for art in moving:
                self.figure.draw_artist(art)
        if self.ipympl:
            if quick:
                canvas.blit(self.figure.bbox)
            else:
                canvas.draw_idle()
        else:
            if not quick:
                canvas.draw()
            self.widget.value = _png(canvas)
        self.stale = False

    def set_moving_animated(self, flag: bool) -> None:
        for art in self.moving():
            art.set_animated(flag)

    def clear(self) -> None:
        self.ax.clear()
        self.artists = None

    def unavailable(self, text: str) -> None:
        """Replace the figure by a plain sentence (when what it needs cannot be computed)."""
        self.clear()
        self.state = None
        self.ax.set_axis_off()
        self.ax.text(0.5, 0.5, text, ha="center", va="center", transform=self.ax.transAxes, color="#8A5A00", wrap=True)
        self.figure.set_layout_engine("none")
        self._background = None

    def build(self, panel: Any, state: Any) -> None:
        """New artists for one answer (``state``), laid out once; later coupling moves keep this layout.

        The constrained layout is computed here and then frozen (layout engine
        "none"), so that a coupling move redraws without laying out again.
        """
        self.figure.set_layout_engine("constrained")
        self._background = None
        self.state = state
        self.render(panel, state)
        self.figure.draw_without_rendering()
        self.figure.set_layout_engine("none")
        self.set_moving_animated(True)

    # overridden
    def render(self, panel: Any, state: Any) -> None:  # one answer -> new artists
        raise NotImplementedError

    def move(self, panel: Any, coupling: float) -> None:  # coupling -> markers only
        raise NotImplementedError

    def numbers(self, panel: Any) -> tuple[list[dict], dict]:  # rows for CSV, dict for JSON (of self.state)
        raise NotImplementedError


def _drawable(orders: tuple, values: Any) -> list:
    """Orders with at least one finite value in ``values`` (T, O, C): an order the engine left undefined
    (e.g. a Padé approximant of a block-treated level) has nothing to draw."""
    v = np.asarray(values, dtype=float)
    return [o for oi, o in enumerate(orders) if np.any(np.isfinite(v[:, oi]))]


def _move_markers(art: Any, lines: Any, coupling: float, *, log: bool) -> None:
    """Vertical line at λ and one marker on each drawn line at λ.

    The marker heights are read off the lines themselves, interpolated as the
    axis draws them (straight segments; straight in log(value) on a log axis),
    so markers and lines agree whatever the figure function chose to draw.
    """
    if art is None or art.coupling_line is None:
        return
    art.coupling_line.set_xdata([coupling, coupling])
    if art.coupling_markers is None:
        return
    xs, ys = [], []
    for ln in lines:
        x = np.asarray(ln.get_xdata(), dtype=float)
        y = np.asarray(ln.get_ydata(), dtype=float)
        srt = np.argsort(x, kind="stable")
        x, y = x[srt], y[srt]
        lam = min(max(coupling, float(x[0])), float(x[-1]))
        v = float(interp_log(x, y, lam) if log else interp_linear(x, y, lam))
        xs.append(lam)
        ys.append(positive_or_nan([v])[0] if log else v)
    art.coupling_markers.set_data(xs, ys)


def _physical(model: Any) -> dict:
    """``coupling_scale``/``coupling_unit`` for the figures' physical coupling axis (none when the model has none)."""
    scale = getattr(model, "coupling_scale", None)
    return {} if scale is None else {"coupling_scale": scale, "coupling_unit": getattr(model, "coupling_unit", None)}


class LevelsView(_View):
    name = "levels"
    title = "levels vs coupling λ"
    needs = frozenset({"comparison"})

    def render(self, panel: Any, state: Any) -> None:
        self.clear()
        r = state.result
        self._shift = bool(panel.controls.shift.value)
        self.artists = plot_levels(r, orders=_drawable(r.orders, r.perturbative), coupling=panel.coupling, ax=self.ax,
                                   shift=self._shift, caption=panel.caption("levels vs coupling", state),
                                   **_physical(state.model))

    def move(self, panel: Any, coupling: float) -> None:
        if self.state is None:
            return
        a = self.artists
        _move_markers(a, a.exact if a.exact_known else [ln for pair in a.band_edges for ln in pair], coupling, log=False)

    def numbers(self, panel: Any) -> tuple[list[dict], dict]:
        r = self.state.result
        return r.to_rows(), {"comparison": r.to_dict(), "coupling": panel.coupling}


class ErrorsView(_View):
    name = "errors"
    title = "errors & validity boundary"
    needs = frozenset({"comparison", "boundaries"})

    def render(self, panel: Any, state: Any) -> None:
        self.clear()
        r, s = state.result, state.settings
        kind = "relative" if s.relative else "absolute"
        target = panel.error_target_name
        ti = list(r.targets).index(target)
        drawn = r.abs_error if r.reference != "bounds" else r.error_upper  # with bounds only: what has a bracket
        self.artists = plot_errors(r, state.boundaries, target=target, orders=_drawable(r.orders, drawn[ti:ti + 1]),
                                   error=kind, tol=list(s.tols), coupling=panel.coupling, ax=self.ax,
                                   caption=panel.caption(f"{kind} error of {target} vs coupling", state),
                                   **_physical(state.model))

    def move(self, panel: Any, coupling: float) -> None:
        if self.state is None:
            return
        a = self.artists
        _move_markers(a, a.lines if a.exact_known else [ln for pair in a.band_edges for ln in pair], coupling, log=True)

    def numbers(self, panel: Any) -> tuple[list[dict], dict]:
        st = self.state
        target = self.artists.target
        rows = [row for row in st.result.to_rows() if row["target"] == target]
        return rows, {"comparison": st.result.to_dict(), "boundaries": [b.to_dict() for b in st.boundaries],
                      "coupling": panel.coupling}


class DivergenceView(_View):
    name = "divergence"
    title = "exceptional points & radius of convergence"
    needs = frozenset({"divergence"})

    def render(self, panel: Any, state: Any) -> None:
        self.clear()
        self.artists = plot_divergence(state.divergence, coupling=panel.coupling, model_name=state.model.name, ax=self.ax)

    def move(self, panel: Any, coupling: float) -> None:
        if self.artists is not None and self.artists.coupling_marker is not None:
            self.artists.coupling_marker.set_data([coupling], [0.0])

    def numbers(self, panel: Any) -> tuple[list[dict], dict]:
        d = self.state.divergence
        rows = []
        for i, lab in enumerate(d.labels):
            eps = d.exceptional_points[i]
            rows.append({"level": lab, "kind": d.kinds[i], "radius": float(d.radius[i]), "kato_bound": float(d.kato_bound[i]),
                         "nearest_exceptional_point": str(complex(eps[0])) if eps.size else ""})
        return rows, {"divergence_map": d.to_dict(), "coupling": panel.coupling}


class PairsView(_View):
    name = "pairs"
    title = "near-degenerate pairs"
    needs = frozenset()

    def _setup_axes(self) -> None:
        gs = self.figure.add_gridspec(1, 2, width_ratios=(3, 2))
        self.ax = self.figure.add_subplot(gs[0, 0])
        self.table_ax = self.figure.add_subplot(gs[0, 1])

    def clear(self) -> None:
        self.ax.clear()
        self.table_ax.clear()
        self.artists = None

    def render(self, panel: Any, state: Any) -> None:
        # mixing ratios are cheap (one row of V per level): recomputed at each coupling, not counted as heavy
        s = state.settings
        levels = [t for t in s.targets if not isinstance(t, Quantity)] or None
        self.clear()
        self.map = mixing_map(state.model, panel.coupling, levels=levels, threshold=s.threshold)
        self.artists = plot_pairs(self.map, ax=self.ax, table_ax=self.table_ax)

    def move(self, panel: Any, coupling: float) -> None:
        if self.artists is None or self.map.coupling == coupling:
            return
        limits = (self.ax.get_xlim(), self.ax.get_ylim())
        self.map = update_pairs(self.artists, coupling)  # the same artists, new data
        # new axis limits change the ticks under the diagram: the cached background no longer fits
        self._limits_moved = (self.ax.get_xlim(), self.ax.get_ylim()) != limits

    def moving(self) -> list:
        """Everything the diagram changes with the coupling (drawn over a cached background)."""
        a = self.artists
        if a is None:
            return []
        arts = [*a.lines, *a.level_labels, *a.arcs, *a.block_outlines, *a.block_labels, *a.table]
        return arts + ([a.caption] if a.caption is not None else [])

    def redraw(self, *, full: bool = True) -> None:
        super().redraw(full=full or getattr(self, "_limits_moved", False))
        self._limits_moved = False

    def numbers(self, panel: Any) -> tuple[list[dict], dict]:
        return self.map.to_rows(), {"mixing_map": self.map.to_dict()}


def _png(canvas: Any) -> bytes:
    """PNG of the Agg buffer as it is (no redraw), quickly compressed."""
    from PIL import Image

    buf = io.BytesIO()
    rgb = np.ascontiguousarray(np.asarray(canvas.buffer_rgba())[..., :3])  # opaque figure: alpha carries nothing
    Image.fromarray(rgb).save(buf, format="png", compress_level=1)
    return buf.getvalue()


VIEWS = {v.name: v for v in (LevelsView, ErrorsView, DivergenceView, PairsView)}


def write_numbers(rows: list[dict], data: dict, csv_path: Any, json_path: Any) -> None:
    """CSV (one row per record) and JSON (the result's to_dict) next to the figure."""
    buf = io.StringIO()
    if rows:
        wr = csv.DictWriter(buf, fieldnames=list(rows[0]))
        wr.writeheader()
        wr.writerows(rows)
    csv_path.write_text(buf.getvalue(), encoding="utf-8")
    json_path.write_text(json.dumps(data, indent=1, ensure_ascii=False, default=str), encoding="utf-8")
