"""Panels: standard controls -> cached engine calls -> figures updated in place (private).

A panel reads its controls into a :class:`~ptcheck.widgets._session.Settings`;
a change of anything heavy work depends on (model, levels, orders, tolerance,
treatment, exact solver, coupling range) runs the engine through the
:class:`~ptcheck.widgets._session.Session` cache and redraws; moving the
coupling only moves markers and rewrites the readout.
"""

from __future__ import annotations

import ast
import html
import re
import traceback
from collections.abc import Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np

from ..approximants import Pade, order_name, parse_order
from ..degeneracy import DEFAULT_MIXING_THRESHOLD
from ..formula import formula
from ..formula_report import collect
from ..model import Model
from ..models import BUILDERS
from ..plots import SLIDE_SIZE, plot_formula, save
from ..plots._common import caption_text, nearest_index
from ..quantities import Quantity
from ._session import Session, Settings
from ._views import VIEWS, use_ipympl, write_numbers

__all__ = ["Panel", "Controls", "parse_params"]

TREATMENT_CHOICES = (("auto", "auto"), ("non-degenerate", "nondegenerate"), ("block", "block"))
BACKEND_CHOICES = ("auto", "dense", "sparse", "qutip")
EXPORT_FORMATS = ("png", "svg", "pdf")
CANVAS_CHOICES = ("auto", "ipympl", "image")


def parse_params(text: str) -> dict:
    """``"g=0.1, n_photons=8"`` -> ``{"g": 0.1, "n_photons": 8}`` (Python literals only)."""
    text = (text or "").strip()
    if not text:
        return {}
    try:
        call = ast.parse(f"f({text})", mode="eval").body
    except SyntaxError:
        raise ValueError(f"model parameters must look like 'g=0.1, n_photons=8'; got {text!r}") from None
    if not isinstance(call, ast.Call) or call.args:
        raise ValueError(f"model parameters must be name=value pairs; got {text!r}")
    out = {}
    for kw in call.keywords:
        if kw.arg is None:
            raise ValueError(f"model parameters must be name=value pairs; got {text!r}")
        try:
            out[kw.arg] = ast.literal_eval(kw.value)
        except ValueError:
            raise ValueError(f"model parameter {kw.arg!r} must be a plain number, bool or string; got {ast.unparse(kw.value)!r}") from None
    return out


def _fmt_params(params: dict) -> str:
    return ", ".join(f"{k}={v!r}" for k, v in params.items())


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "_", text).strip("_").lower() or "model"


class Controls:
    """The panel's widgets, by plain names (attributes hold ipywidgets)."""

    def __init__(self, *, orders: Sequence, order_choices: Sequence, coupling: float, coupling_range: tuple, tol: float,
                 relative: bool, treatment: str, backend: str, folder: str) -> None:
        import ipywidgets as w

        lo, hi = coupling_range
        wide = w.Layout(width="auto")
        style = {"description_width": "initial"}
        self.model_name = w.Dropdown(description="model", style=style, layout=w.Layout(width="280px"))
        self.model_params = w.Text(description="model parameters", placeholder="e.g. g=0.1, n_photons=8",
                                   continuous_update=False, style=style, layout=w.Layout(width="420px"))
        self.coupling = w.FloatSlider(value=coupling, min=lo, max=hi, step=(hi - lo) / 1000.0, description="coupling λ",
                                      continuous_update=True, readout_format=".4g", style=style,
                                      layout=w.Layout(width="460px"))
        self.coupling_text = w.FloatText(value=coupling, description="λ =", style=style, layout=w.Layout(width="150px"))
        self.coupling_min = w.FloatText(value=lo, description="λ from", style=style, layout=w.Layout(width="140px"))
        self.coupling_max = w.FloatText(value=hi, description="to", style=style, layout=w.Layout(width="110px"))
        self.levels = w.SelectMultiple(description="level", rows=6, style=style, layout=w.Layout(width="230px"))
        opts = []
        for o in list(order_choices) + [o for o in orders if o not in order_choices]:
            spec = parse_order(o)
            opts.append((order_name(spec).replace("order ", ""), spec))
        self.orders = w.SelectMultiple(options=opts, value=tuple(parse_order(o) for o in orders), description="order",
                                       rows=6, style=style, layout=w.Layout(width="190px"))
        self.tolerance = w.FloatLogSlider(value=tol, base=10, min=-12, max=0, step=0.25, description="tolerance",
                                          readout_format=".1e", continuous_update=False, style=style)
        self.tolerance_kind = w.ToggleButtons(options=[("absolute", False), ("relative", True)], value=bool(relative),
                                              description="tolerance is", style={"description_width": "initial",
                                                                                  "button_width": "80px"})
        self.treatment = w.Dropdown(options=TREATMENT_CHOICES, value=treatment, description="treatment", style=style)
        self.backend = w.Dropdown(options=BACKEND_CHOICES, value=backend, description="exact solver", style=style)
        self.error_target = w.Dropdown(description="error of", style=style)
        self.shift = w.Checkbox(value=False, description="show shifts E(λ) − E(0)", indent=False, layout=wide)
        self.folder = w.Text(value=str(folder), description="export to folder", style=style, layout=w.Layout(width="360px"))
        self.export_format = w.Dropdown(options=EXPORT_FORMATS, value="png", description="figure as", style=style,
                                        layout=w.Layout(width="150px"))
        self.export_button = w.Button(description="export figure + numbers", icon="download", layout=w.Layout(width="220px"))
        self.formula_button = w.Button(description="export formula", icon="download", layout=w.Layout(width="160px"),
                                       tooltip="formula of the level shown ('error of') at the highest integer order "
                                               "selected, with where it meets the tolerance: .tex, .py and figure")
        w.link((self.coupling, "value"), (self.coupling_text, "value"))


class Panel:
    """A figure panel (or, with several views, a dashboard) for one model.

    Parameters
    ----------
    model : Model or str
        A model, or the name of a built-in builder (``ptcheck.models.BUILDERS``)
        built with ``model_params``; a builder name lets the model be changed
        from the panel.
    levels : sequence of level keys, optional
        Levels selected at start (default: the two lowest).
    quantities : sequence of Quantity
        Derived quantities offered beside the levels (selected at start too).
    orders : sequence of order specs, default (1, 2, 4)
        Orders selected at start.
    order_choices : sequence of order specs
        Orders offered.
    coupling : float, optional
        Starting coupling (default: middle of ``coupling_range``).
    coupling_range : (float, float), default (0.0, 1.0)
        Range of the coupling sweep and slider.
    n_points : int, default 81
        Couplings in the sweep.
    tol : float, default 1e-3
        Tolerance (absolute in energy units, or relative with ``relative=True``).
    relative : bool, default False
    treatment : {"auto", "nondegenerate", "block"}
    backend : {"auto", "dense", "sparse", "qutip"}
    series_order : int, default 30
        Series order analysed for the divergence map.
    threshold : float
        Mixing-ratio threshold for near-degenerate pairs.
    model_params : dict, optional
        Keyword arguments of the builder (when ``model`` is a name).
    max_level_choices : int, default 12
        Levels offered in the level list (lowest first).
    folder : str, default "."
        Export folder.
    canvas : {"auto", "ipympl", "image"}
        Figure canvas: ipympl (``%matplotlib widget``) or inline PNG images;
        "auto" uses ipympl when it is the active matplotlib backend.
    raise_errors : bool, default False
        Re-raise errors after showing them (for tests: ipywidgets would
        otherwise swallow exceptions in callbacks).
    """

    views_spec: tuple[str, ...] = ("levels",)

    def __init__(
        self,
        model: Any,
        *,
        levels: Sequence | None = None,
        quantities: Sequence[Quantity] = (),
        orders: Sequence = (1, 2, 4),
        order_choices: Sequence = (1, 2, 3, 4, 6, 8, "pade2/2"),
        coupling: float | None = None,
        coupling_range: tuple[float, float] = (0.0, 1.0),
        n_points: int = 81,
        tol: float = 1e-3,
        relative: bool = False,
        treatment: str = "auto",
        backend: str = "auto",
        series_order: int = 30,
        threshold: float = DEFAULT_MIXING_THRESHOLD,
        model_params: dict | None = None,
        max_level_choices: int = 12,
        folder: str = ".",
        canvas: str = "auto",
        raise_errors: bool = False,
    ) -> None:
        import ipywidgets as w

        lo, hi = (float(coupling_range[0]), float(coupling_range[1]))
        if not lo < hi:
            raise ValueError(f"coupling_range must be (low, high) with low < high; got {coupling_range!r}")
        if canvas not in CANVAS_CHOICES:
            raise ValueError(f"canvas must be one of {list(CANVAS_CHOICES)}; got {canvas!r}")
        if not isinstance(n_points, int) or n_points < 3:
            raise ValueError(f"n_points must be an int >= 3; got {n_points!r}")
        self.raise_errors = bool(raise_errors)
        self.n_points = n_points
        self.series_order = int(series_order)
        self.threshold = float(threshold)
        self.max_level_choices = int(max_level_choices)
        self.quantities = tuple(quantities)
        self.controls = c = Controls(
            orders=orders, order_choices=order_choices, coupling=(lo + hi) / 2 if coupling is None else float(coupling),
            coupling_range=(lo, hi), tol=tol, relative=relative, treatment=treatment, backend=backend, folder=folder,
        )
        self.message = w.HTML()
        self.notes = w.HTML()
        self.readout = w.HTML()
        self.progress = w.IntProgress(value=0, min=0, max=1, description="computing", bar_style="info",
                                      layout=w.Layout(visibility="hidden"))
        self.result: Any = None
        self.boundaries: tuple = ()
        self.divergence: Any = None
        self.settings: Settings | None = None
        self._computed: set[str] = set()
        ipympl = use_ipympl(canvas)
        self.views = {name: VIEWS[name](ipympl) for name in self.views_spec}

        # ---- model ------------------------------------------------------------------
        self._builder_name: str | None = None
        self.model: Model | None = None
        self.session: Session | None = None
        with self._guard():
            if isinstance(model, Model):
                c.model_name.options = [model.name]
                c.model_name.disabled = True
                c.model_params.disabled = True
                self._set_model(model, levels)
            elif isinstance(model, str):
                if model not in BUILDERS:
                    raise ValueError(f"unknown model {model!r}; built-in models are {sorted(BUILDERS)}")
                c.model_name.options = sorted(BUILDERS)
                c.model_name.value = model
                c.model_params.value = _fmt_params(model_params or {})
                self._builder_name = model
                self._set_model(BUILDERS[model](**(model_params or {})), levels)
            else:
                raise TypeError(f"model must be a ptcheck Model or a built-in model name; got {type(model).__name__}")
        self.widget = self._layout()
        # ---- callbacks ------------------------------------------------------------------
        c.coupling.observe(self._on_coupling, names="value")
        for ctl in (c.levels, c.orders, c.tolerance, c.tolerance_kind, c.treatment, c.backend):
            ctl.observe(self._on_heavy, names="value")
        c.error_target.observe(self._on_heavy, names="value")
        c.coupling_min.observe(self._on_range, names="value")
        c.coupling_max.observe(self._on_range, names="value")
        c.model_name.observe(self._on_model, names="value")
        c.model_params.observe(self._on_model, names="value")
        c.shift.observe(self._on_shift, names="value")
        c.export_button.on_click(lambda _b: self._export_clicked())
        c.formula_button.on_click(lambda _b: self._export_clicked(formula_files=True))
        if self.model is not None:
            self.refresh()

    # ------------------------------------------------------------------ public
    @property
    def coupling(self) -> float:
        """Current coupling λ (the slider value)."""
        return float(self.controls.coupling.value)

    @property
    def heavy_computations(self) -> int:
        """Engine calls made so far (compare, validity boundaries, divergence maps)."""
        return self.session.heavy_computations if self.session is not None else 0

    @property
    def visible_views(self) -> list:
        return list(self.views.values())

    @property
    def view(self) -> Any:
        """The view shown (the selected tab of a dashboard)."""
        return self.visible_views[0]

    @property
    def figure(self) -> Any:
        return self.view.figure

    @property
    def artists(self) -> Any:
        return self.view.artists

    def refresh(self) -> None:
        """Run the heavy work the shown views need (cached) and redraw them."""
        with self._guard():
            self._computed = set()
            self.settings = self._read_settings()
            self._ensure(self.visible_views)
            for v in self.views.values():
                v.stale = True
            self._render(self.visible_views)
            self._update_readout()

    def export(self, folder: str | Path | None = None, fmt: str | None = None) -> tuple[Path, ...]:
        """Write the shown figure (PNG/SVG/PDF, 16:9) and the numbers behind it (CSV, JSON).

        Returns the paths written: figure, CSV, JSON.
        """
        view = self.view
        if view.artists is None:
            raise ValueError("nothing to export yet: the figure has not been drawn (see the message above it)")
        folder = Path(folder if folder is not None else self.controls.folder.value).expanduser()
        fmt = (fmt or self.controls.export_format.value).lower()
        if fmt not in EXPORT_FORMATS:
            raise ValueError(f"export format must be one of {list(EXPORT_FORMATS)}; got {fmt!r}")
        folder.mkdir(parents=True, exist_ok=True)
        stem = f"ptcheck_{view.name}_{_slug(self.model.name)}"
        fig_path = folder / f"{stem}.{fmt}"
        view.set_moving_animated(False)  # animated artists are left out of saved files
        try:
            save(view.figure, fig_path)
        finally:
            view.set_moving_animated(True)
            view._background = None  # until the next full draw on screen
        rows, data = view.numbers(self)
        data = {"model": self.model.name, "n": self.model.n, "settings": self._settings_dict(), **data}
        write_numbers(rows, data, folder / f"{stem}.csv", folder / f"{stem}.json")
        view.redraw()
        return (fig_path, folder / f"{stem}.csv", folder / f"{stem}.json")

    def export_formula(self, folder: str | Path | None = None, *, order: int | None = None,
                       fmt: str | None = None) -> tuple[Path, Path, Path]:
        """Write the formula of the level shown ("error of") with where it meets the panel's tolerance.

        :func:`ptcheck.formula` with the panel's target, tolerance, treatment,
        exact solver, threshold and coupling range (searched as the panel
        searches its validity boundaries, so the ranges are the same numbers);
        the error curve is drawn on the panel's couplings.

        Parameters
        ----------
        folder : str or Path, optional
            Default: the panel's export folder.
        order : int, optional
            Default: the highest integer order selected.
        fmt : {"png", "svg", "pdf"}, optional
            Format of the figure (default: the panel's "figure as").

        Returns
        -------
        (Path, Path, Path)
            ``.tex`` (equation and ranges), ``.py`` (a self-contained function)
            and the slide figure.
        """
        s = self.settings
        if s is None or self.model is None:
            raise ValueError("nothing to export yet: no model and settings (see the message above)")
        fmt = (fmt or self.controls.export_format.value).lower()
        if fmt not in EXPORT_FORMATS:
            raise ValueError(f"export format must be one of {list(EXPORT_FORMATS)}; got {fmt!r}")
        if order is None:
            ints = [o for o in s.orders if not isinstance(o, Pade)]
            if not ints:
                raise ValueError("a formula is a truncated series: select an integer order (Padé approximants are not "
                                 f"exported); selected: {', '.join(order_name(o) for o in s.orders)}")
            order = max(ints)
        reach = max(abs(s.coupling_min), abs(s.coupling_max))
        f = self.session._call(
            formula, self.model, self._error_target_key(), order, **s.tolerance_kwargs(), directions=Session._directions(s),
            treatment=s.treatment, backend=s.backend, threshold=s.threshold, coupling=reach, max_coupling=reach,
            couplings=s.couplings, params=parse_params(self.controls.model_params.value) if self._builder_name else None,
        )
        self._show_notes()
        kind = "relative" if s.relative else "absolute"
        fx = collect([f], title=f"a panel of {self.model.name} ({kind} tolerance {s.tol:g}, treatment {s.treatment!r}, "
                                f"coupling range {s.coupling_min:g} to {s.coupling_max:g})")
        folder = Path(folder if folder is not None else self.controls.folder.value).expanduser()
        folder.mkdir(parents=True, exist_ok=True)
        stem = f"ptcheck_formula_{_slug(self.model.name)}_{_slug(f.target)}_order{f.order}"
        tex, py, fig_path = folder / f"{stem}.tex", folder / f"{stem}.py", folder / f"{stem}.{fmt}"
        tex.write_text(fx.latex(), encoding="utf-8")
        py.write_text(fx.python(), encoding="utf-8")
        from matplotlib.figure import Figure  # no pyplot: no global state

        fig = Figure(figsize=SLIDE_SIZE, layout="constrained")
        plot_formula(f, ax=fig.add_subplot())
        save(fig, fig_path)
        return (tex, py, fig_path)

    def close(self) -> None:
        """Close this panel's widgets (controls, canvases, containers); other widgets are left alone."""

        def close(wid: Any) -> None:
            for child in getattr(wid, "children", ()):
                close(child)
            wid.close()

        close(self.widget)
        for v in list(self.views.values()) + list(vars(self.controls).values()):
            if hasattr(v, "widget"):
                v.widget.close()
            elif hasattr(v, "close"):
                v.close()

    def _repr_mimebundle_(self, **kwargs: Any) -> Any:
        return self.widget._repr_mimebundle_(**kwargs)

    def caption(self, kind: str, *, boundaries: Sequence = ()) -> str:
        """Caption of a figure: model, N, levels, orders, tolerance, coupling range, treatment, solver."""
        s = self.settings
        r = self.result
        extra = [f"treatment {s.treatment}", f"exact solver {s.backend}"]
        for b in boundaries:
            if b.status == "found":
                extra.append(f"{order_name(b.order)} valid to λ = {b.coupling:.3g}")
            elif b.status == "not_reached":
                extra.append(f"{order_name(b.order)} valid over the whole range")
            elif b.status == "fails_at_zero":
                extra.append(f"{order_name(b.order)} fails at any λ ≠ 0")
        return caption_text(kind, model=self.model.name, n=self.model.n, levels=list(r.targets) if r else [],
                            orders=[order_name(o) for o in s.orders], tol=None if s.relative else s.tol,
                            rtol=s.tol if s.relative else None, couplings=(s.coupling_min, s.coupling_max), extra=extra)

    # ------------------------------------------------------------------ internals
    @contextmanager
    def _guard(self):
        """Show any error as a readable message in the panel (and re-raise under test)."""
        try:
            yield
        except Exception as exc:  # noqa: BLE001 - shown to the user, re-raised when raise_errors
            self._show_error(exc)
            if self.raise_errors:
                raise
        finally:
            self.progress.layout.visibility = "hidden"

    def _show_error(self, exc: BaseException) -> None:
        kind = type(exc).__name__
        text = str(exc) or kind
        where = ""
        if not isinstance(exc, (ValueError, TypeError)):
            tb = traceback.extract_tb(exc.__traceback__)
            if tb:
                where = f" (in {Path(tb[-1].filename).name}, line {tb[-1].lineno})"
        self.message.value = (
            "<div style='border-left:4px solid #D55E00;padding:4px 8px;background:#FBEDE5'>"
            f"<b>Cannot compute this:</b> {html.escape(text)}<br><small>{html.escape(kind)}{html.escape(where)}</small></div>"
        )

    def _clear_message(self) -> None:
        self.message.value = ""

    def _set_model(self, model: Model, levels: Sequence | None) -> None:
        c = self.controls
        opts = [(model.label(i), i) for i in range(min(model.n, self.max_level_choices))]
        opts += [(q.name, q) for q in self.quantities]
        if levels is None:
            chosen = [i for _, i in opts[:2] if isinstance(i, int)] + list(self.quantities)
        else:
            chosen = [model.level_index(k) for k in levels] + list(self.quantities)
            for i in chosen:
                if isinstance(i, int) and i >= len(opts) - len(self.quantities):
                    opts.insert(len(opts) - len(self.quantities), (model.label(i), i))
        self._muted = True
        try:
            c.levels.options = opts
            c.levels.value = tuple(chosen)
        finally:
            self._muted = False
        self.model = model
        self.session = Session(model)
        self._sync_error_target()

    def _sync_error_target(self) -> None:
        c = self.controls
        names = [lab for lab, v in c.levels.options if v in c.levels.value]
        old = c.error_target.value
        self._muted = True
        try:
            c.error_target.options = names
            c.error_target.value = old if old in names else (names[0] if names else None)
        finally:
            self._muted = False

    def _read_settings(self) -> Settings:
        c = self.controls
        targets = tuple(c.levels.value)
        if not targets:
            raise ValueError("no level selected: choose at least one level or quantity")
        orders = tuple(c.orders.value)
        if not orders:
            raise ValueError("no order selected: choose at least one order")
        lo, hi = float(c.coupling_min.value), float(c.coupling_max.value)
        if not lo < hi:
            raise ValueError(f"the coupling range needs 'λ from' < 'to'; got {lo:g} and {hi:g}")
        return Settings(targets=targets, orders=orders, tol=float(c.tolerance.value), relative=bool(c.tolerance_kind.value),
                        treatment=c.treatment.value, backend=c.backend.value, coupling_min=lo, coupling_max=hi,
                        n_points=self.n_points, series_order=self.series_order, threshold=self.threshold)

    def _settings_dict(self) -> dict:
        s = self.settings
        return {"levels": [str(self.model.label(t)) if isinstance(t, int) else t.name for t in s.targets],
                "orders": [order_name(o) for o in s.orders], "tol": s.tol, "tolerance": "relative" if s.relative else "absolute",
                "treatment": s.treatment, "backend": s.backend, "coupling_range": [s.coupling_min, s.coupling_max],
                "n_points": s.n_points, "coupling": self.coupling}

    @property
    def error_target_name(self) -> str:
        return self.controls.error_target.value

    def _error_target_key(self) -> Any:
        c = self.controls
        for lab, v in c.levels.options:
            if lab == c.error_target.value:
                return v
        raise ValueError("choose the level whose error is shown ('error of')")

    def _ensure(self, views: Sequence) -> None:
        """Compute what the given views need (skips what is cached)."""
        needs = set().union(*(v.needs for v in views)) | {"comparison"}
        needs -= self._computed
        if not needs:
            return
        s = self.settings
        jobs = self.session.boundary_jobs(s, self._error_target_key()) if "boundaries" in needs else []
        total = 1 + len(jobs) + (1 if "divergence" in needs else 0)
        self.progress.max = total
        self.progress.value = 0
        if total > 1:
            self.progress.layout.visibility = "visible"
        self.session.notes.clear()
        self._clear_message()
        if "comparison" in needs:
            self.progress.description = "exact & series"
            self.result = self.session.comparison(s)
            self.progress.value += 1
            self._computed.add("comparison")
        if "boundaries" in needs:
            self.progress.description = "validity"

            def step() -> None:
                self.progress.value += 1

            self.boundaries = self.session.boundaries(s, self._error_target_key(), progress=step)
            self._computed.add("boundaries")
        if "divergence" in needs:
            self.progress.description = "radius & EPs"
            self.divergence = self.session.divergence(s)
            self.progress.value += 1
            self._computed.add("divergence")
        self._show_notes()

    def _show_notes(self) -> None:
        notes = list(self.session.notes)
        if self.result is not None:
            notes += [n for n in self.result.notes if not n.startswith("Exact values are exact")]
        self.notes.value = ("<details><summary><small>notes ({})</small></summary><ul>{}</ul></details>".format(
            len(notes), "".join(f"<li><small>{html.escape(n)}</small></li>" for n in dict.fromkeys(notes))) if notes else "")

    def _render(self, views: Sequence) -> None:
        for v in views:
            v.build(self)
            v.redraw()

    def _update_readout(self) -> None:
        r = self.result
        if r is None:
            self.readout.value = ""
            return
        lam = np.asarray(r.couplings)
        i = nearest_index(lam, self.coupling)
        s = self.settings
        err = r.rel_error if s.relative else r.abs_error
        head = "".join(f"<th style='padding:0 8px'>{html.escape(o)}</th>" for o in r.order_names)
        rows = ""
        for ti, t in enumerate(r.targets):
            cells = ""
            for oi in range(len(r.orders)):
                e = float(err[ti, oi, i])
                ok = "✓" if e <= s.tol else ("✗" if np.isfinite(e) else "–")
                col = "#009E73" if ok == "✓" else "#D55E00"
                cells += (f"<td style='padding:0 8px'>{r.perturbative[ti, oi, i]:.6g} "
                          f"<span style='color:{col}'>{ok} {e:.1e}</span></td>")
            rows += f"<tr><td>{html.escape(t)}</td><td style='padding:0 8px'>{r.exact[ti, i]:.6g}</td>{cells}</tr>"
        bl = ""
        for b in self.boundaries:
            if b.status == "found":
                bl += f"{html.escape(order_name(b.order))}: valid for |λ| < {abs(b.coupling):.4g}; "
        kind = "relative" if s.relative else "absolute"
        self.readout.value = (
            f"<b>At coupling λ = {lam[i]:.5g}</b> <small>(nearest of {lam.size} sweep points; {kind} error vs "
            f"tolerance {s.tol:.1e})</small><table><tr><th>target</th><th style='padding:0 8px'>exact</th>{head}</tr>"
            f"{rows}</table>" + (f"<small>{html.escape(b.target) if self.boundaries else ''} {bl}</small>" if bl else "")
        )

    # ------------------------------------------------------------------ callbacks
    _muted = False

    def _on_coupling(self, change: dict) -> None:
        if self.result is None:
            return
        with self._guard():
            lam = float(change["new"])
            for v in self.views.values():
                if v.artists is not None and v.name != "pairs":
                    v.move(self, lam)
                    v.stale = True
            for v in self.visible_views:
                if v.name == "pairs":
                    v.move(self, lam)  # the heat map itself changes: full redraw
                    v.redraw()
                else:
                    v.redraw(full=False)
            self._update_readout()

    def _on_heavy(self, change: dict) -> None:
        if self._muted:
            return
        if change["owner"] is self.controls.levels:
            self._sync_error_target()
        self.refresh()

    def _on_shift(self, change: dict) -> None:
        v = self.views.get("levels")
        if v is not None and self.result is not None:
            with self._guard():
                v.build(self)
                if v in self.visible_views:
                    v.redraw()

    def _on_range(self, change: dict) -> None:
        c = self.controls
        lo, hi = float(c.coupling_min.value), float(c.coupling_max.value)
        if not lo < hi:
            with self._guard():
                raise ValueError(f"the coupling range needs 'λ from' < 'to'; got {lo:g} and {hi:g}")
            return
        self._muted = True
        try:
            lam = min(max(self.coupling, lo), hi)
            if lo > c.coupling.max:
                c.coupling.max, c.coupling.min = hi, lo
            else:
                c.coupling.min, c.coupling.max = lo, hi
            c.coupling.step = (hi - lo) / 1000.0
            c.coupling.value = lam
        finally:
            self._muted = False
        self.refresh()

    def _on_model(self, change: dict) -> None:
        if self._builder_name is None or self._muted:
            return
        with self._guard():
            name = self.controls.model_name.value
            params = parse_params(self.controls.model_params.value)
            self.result = None
            self.model = None
            model = BUILDERS[name](**params)
            self._builder_name = name
            self._set_model(model, None)
        if self.model is not None:
            self.refresh()

    def _export_clicked(self, *, formula_files: bool = False) -> None:
        with self._guard():
            paths = self.export_formula() if formula_files else self.export()
            self.message.value = ("<div style='border-left:4px solid #009E73;padding:4px 8px'>written: "
                                  + ", ".join(html.escape(str(p)) for p in paths) + "</div>")

    # ------------------------------------------------------------------ layout
    def _layout(self) -> Any:
        import ipywidgets as w

        c = self.controls
        names = set(self.views)
        model_row = w.HBox([c.model_name, c.model_params])
        coupling_row = w.HBox([c.coupling, c.coupling_text, c.coupling_min, c.coupling_max])
        right = [c.tolerance, c.tolerance_kind, c.treatment, c.backend]
        if "errors" in names:
            right.append(c.error_target)
        if "levels" in names:
            right.append(c.shift)
        settings_row = w.HBox([c.levels, c.orders, w.VBox(right)])
        export_row = w.HBox([c.folder, c.export_format, c.export_button, c.formula_button])
        body = self._body()
        return w.VBox([model_row, coupling_row, settings_row, self.progress, self.message, body, self.readout,
                       self.notes, export_row])

    def _body(self) -> Any:
        return self.view.widget


