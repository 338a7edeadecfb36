"""Panels: controls grouped by the question -> cached engine calls -> verdict, figures, readout (private).

A panel reads its controls into a :class:`~ptcheck.widgets._session.Settings`;
a change of anything heavy work depends on (model, targets, orders,
tolerances, treatment, reference, exact solver, coupling range) runs the engine through
the :class:`~ptcheck.widgets._session.Session` cache.  Only a complete answer
replaces what is shown (a :class:`~ptcheck.widgets._session.State`): when a
request fails, the previous answer stays fully usable (coupling moves, export)
and is marked as belonging to the previous request.  Moving the coupling only
moves markers and rewrites the verdict and the readout.
"""

from __future__ import annotations

import html
import re
import traceback
from collections.abc import Sequence
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from .. import _validation as val
from ..approximants import Pade, order_name
from ..degeneracy import DEFAULT_MIXING_THRESHOLD
from ..formula import formula
from ..formula_report import collect
from ..model import Model
from ..models import BUILDERS
from ..plots import SLIDE_SIZE, plot_formula, save
from ..plots._common import caption_text
from ..quantities import Quantity
from ..report import DEFAULT_BOUNDS_ABOVE, choose_reference
from ._builders import build_model, builder_defaults, format_params, parse_params
from ._controls import EXPORT_FORMATS, REFERENCE_CHOICES, SLIDER_STEPS, Controls, default_treatment
from ._readout import readout_html, values_at
from ._session import Session, Settings, State
from ._text import (
    energy_unit,
    fmt_coupling,
    fmt_input,
    fmt_number,
    fmt_physical,
    fmt_tol,
    panel_words,
    parse_number,
    physical_coupling,
    relative_to_text,
    sentence,
)
from ._verdict import verdict, verdict_html
from ._views import VIEWS, use_ipympl, write_numbers

__all__ = ["Panel", "Controls", "parse_params"]

CANVAS_CHOICES = ("auto", "ipympl", "image")
_ERROR_BOX = "border-left:4px solid #D55E00;padding:4px 10px;background:#FBEDE5;margin:2px 0"
_INFO_BOX = "border-left:4px solid #E69F00;padding:4px 10px;background:#FDF5E6;margin:2px 0"
_DONE_BOX = "border-left:4px solid #009E73;padding:4px 10px;margin:2px 0"
_CSS = """<style>
.ptcheck-stale {opacity: 0.45; filter: grayscale(60%);}
.ptcheck-tabs > .lm-TabBar .lm-TabBar-tab, .ptcheck-tabs > .p-TabBar .p-TabBar-tab
  {flex: 0 0 auto !important; min-width: 9em; max-width: none !important;}
.ptcheck-panel .widget-select-multiple select {overflow-y: auto;}
</style>"""


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "_", text).strip("_").lower() or "model"


def _as_tols(value: Any, name: str) -> tuple[float, ...]:
    vals = [value] if isinstance(value, (int, float)) else list(value)
    out = []
    for v in vals:
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not v > 0:
            raise ValueError(f"{name} must be a positive number or a sequence of them; got {value!r}")
        out.append(float(v))
    if not out:
        raise ValueError(f"{name} needs at least one value; got {value!r}")
    return tuple(sorted(set(out)))


class Panel:
    """A figure panel (or, with several views, a dashboard) for one model, headed by the verdict.

    Parameters
    ----------
    model : Model or str
        A model, or the name of a built-in builder (``ptcheck.models.BUILDERS``)
        built with ``model_params``; a builder name lets the model be changed
        from the panel (model box).
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
        Range of the coupling sweep and slider (λ, dimensionless).
    n_points : int, default 81
        Couplings in the sweep.
    tol : float or sequence of float, optional
        Absolute tolerance(s), energy units.
    rtol : float or sequence of float, optional
        Relative tolerance(s) as fractions (0.01 = 1 %) of the exact shift
        E(λ) − E(0) of a level (of the reference a quantity names).  Default
        (neither given): ``rtol=0.01``.  Give ``tol`` or ``rtol``, not both.
    treatment : str, optional
        One of ``ptcheck.treatment.TREATMENTS`` (default: the engine's default).
    backend : {"auto", "dense", "sparse", "qutip"}
    reference : {"auto", "exact", "bounds", "both"}, default "auto"
        What the perturbative values are judged against: exact solves,
        certified bounds (Kato–Temple brackets of the exact levels from
        perturbative trial states: no exact solve, for models too big to
        diagonalise; verdicts say "certified valid", "certified NOT valid" or
        "undecided", rigorous or conditional on an estimated gap), or both
        side by side.  ``"auto"``: certified bounds when the basis has more
        than ``bounds_above`` states and every level can be bracketed through
        its own series, exact solves otherwise
        (:func:`ptcheck.report.choose_reference`, as on the command line).
    bounds_above : int, default ``ptcheck.report.DEFAULT_BOUNDS_ABOVE``
        Basis size above which ``"auto"`` uses certified bounds (the command
        line's ``--bounds-above``).
    series_order : int, default 30
        Series order analysed for the divergence map.
    threshold : float
        Mixing-ratio threshold for near-degenerate pairs.
    model_params : dict, optional
        Keyword arguments of the builder (when ``model`` is a name).
    max_level_choices : int, default 12
        Levels offered in the target list (lowest first).
    shift : bool, default False
        Levels figure and readout show shifts E(λ) − E(0) instead of values.
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
        tol: float | Sequence[float] | None = None,
        rtol: float | Sequence[float] | None = None,
        treatment: str | None = None,
        backend: str = "auto",
        reference: str = "auto",
        bounds_above: int = DEFAULT_BOUNDS_ABOVE,
        series_order: int = 30,
        threshold: float = DEFAULT_MIXING_THRESHOLD,
        model_params: dict | None = None,
        max_level_choices: int = 12,
        shift: bool = False,
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
        val.check_choice(reference, "reference", [v for _, v in REFERENCE_CHOICES])
        self.bounds_above = val.check_int(bounds_above, "bounds_above", minimum=0)
        if tol is not None and rtol is not None:
            raise ValueError(f"give tol (absolute) or rtol (relative), not both; got tol={tol!r}, rtol={rtol!r}")
        relative = tol is None
        tols = _as_tols(rtol if rtol is not None else 0.01, "rtol") if relative else _as_tols(tol, "tol")
        self.raise_errors = bool(raise_errors)
        self.n_points = n_points
        self.series_order = int(series_order)
        self.threshold = float(threshold)
        self.max_level_choices = int(max_level_choices)
        self.quantities = tuple(quantities)
        start = (lo + hi) / 2 if coupling is None else float(coupling)
        self._lam = start
        self.controls = c = Controls(
            orders=orders, order_choices=order_choices, coupling=start, coupling_range=(lo, hi), tols=tols,
            relative=relative, treatment=treatment or default_treatment(), backend=backend, folder=folder,
            reference=reference,
        )
        c.shift.value = bool(shift)
        self.banner = w.HTML()
        self.message = w.HTML()
        self.stale_note = w.HTML()
        self.notes = w.HTML()
        self.readout = w.HTML()
        self.progress = w.IntProgress(value=0, min=0, max=1, description="computing", bar_style="info",
                                      layout=w.Layout(visibility="hidden"))
        self.state: State | None = None
        self.verdict: Any = None  # the banner's content (a Verdict), for the coupling shown
        self.errors: list[BaseException] = []  # every error shown, newest last (swallowed callbacks stay visible to tests)
        self._slots = {"model": "", "compute": "", "coupling": "", "tab": "", "dropped": ""}
        self._heavy_done = 0
        ipympl = use_ipympl(canvas)
        self.views = {name: VIEWS[name](ipympl) for name in self.views_spec}

        # ---- model ------------------------------------------------------------------
        self._builder_name: str | None = None
        self.model: Model | None = None
        self.session: Session | None = None
        self._model_text = ""
        self._model_params: dict | None = None
        with self._guard("model"):
            if isinstance(model, Model):
                c.model_name.options = [model.name]
                c.model_name.disabled = True
                c.model_params.disabled = True
                self._set_model(model, model.name, levels)
            elif isinstance(model, str):
                if model not in BUILDERS:
                    raise ValueError(f"unknown model {model!r}; the built-in models are {', '.join(sorted(BUILDERS))}")
                params = dict(model_params or {})
                c.model_name.options = sorted(BUILDERS)
                c.model_name.value = model
                c.model_params.value = format_params(params)
                self._builder_name = model
                self._set_model(build_model(model, params), f"{model}({format_params(params)})", levels, params)
            else:
                raise TypeError(f"model must be a ptcheck Model or a built-in model name; got {type(model).__name__}")
        self.widget = self._layout()
        self.widget.add_class("ptcheck-panel")
        # ---- callbacks ------------------------------------------------------------------
        c.coupling.observe(self._on_coupling, names="value")
        c.coupling_text.observe(self._on_coupling_text, names="value")
        for ctl in (c.levels, c.orders, c.tolerance, c.tolerance_kind, c.treatment, c.reference, c.backend, c.focus):
            ctl.observe(self._on_heavy, names="value")
        c.coupling_min.observe(self._on_range, names="value")
        c.coupling_max.observe(self._on_range, names="value")
        c.model_name.observe(self._on_builder, names="value")
        c.model_params.observe(self._on_model_params, names="value")
        c.shift.observe(self._on_shift, names="value")
        c.export_button.on_click(lambda _b: self._export_clicked())
        c.formula_button.on_click(lambda _b: self._export_clicked(formula_files=True))
        self._show_physical()
        if self.model is not None:
            self.refresh()

    # ------------------------------------------------------------------ public
    @property
    def coupling(self) -> float:
        """Current coupling λ (the slider's value, or the exact value typed in the λ box)."""
        return self._lam

    @property
    def heavy_computations(self) -> int:
        """Engine calls made so far (compare, validity boundaries, divergence maps), over every model shown."""
        return self._heavy_done + (self.session.heavy_computations if self.session is not None else 0)

    @property
    def settings(self) -> Settings | None:
        """Settings of the answer shown."""
        return self.state.settings if self.state is not None else None

    @property
    def result(self) -> Any:
        """ComparisonResult of the answer shown."""
        return self.state.result if self.state is not None else None

    @property
    def boundaries(self) -> tuple:
        """Validity boundaries of the answer shown (the 'verdict for' target)."""
        return self.state.boundaries if self.state is not None else ()

    @property
    def divergence(self) -> Any:
        return self.state.divergence if self.state is not None else None

    @property
    def stale(self) -> bool:
        """True when the answer shown is not that of the current controls (the last request failed)."""
        return bool(self._slots["model"] or self._slots["compute"])

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
        """Compute the answer to the current controls (cached) and show it; on failure keep the previous one."""
        self._slots["tab"] = ""
        with self._guard("compute"):
            s = self._read_settings()
            state = self._compute(s, self.visible_views)
            self._slots["compute"] = ""
            info = ([state.dropped] if state.dropped else []) + [reason for _, _, reason in state.unavailable]
            self._slots["dropped"] = "<br>".join(html.escape(sentence(ValueError(panel_words(t)))) for t in dict.fromkeys(info))
            self.state = state
            self._show_notes()
            for v in self.views.values():
                v.stale = True
            self._render(self.visible_views)
        self._update_text()

    def export(self, folder: str | Path | None = None, fmt: str | None = None) -> tuple[Path, ...]:
        """Write the shown figure (PNG/SVG/PDF, 16:9) and the numbers behind it (CSV, JSON).

        Figure, numbers and settings written all belong to the answer the
        figure shows (after a failed request: the previous answer, said so in
        the JSON field ``"matches_controls"``).  Returns the paths written:
        figure, CSV, JSON.
        """
        view = self.view
        if view.artists is None or view.state is None:
            raise ValueError("nothing to export yet: the figure has not been drawn (see the message above it)")
        folder = Path(folder if folder is not None else self.controls.folder.value).expanduser()
        fmt = (fmt or self.controls.export_format.value).lower()
        if fmt not in EXPORT_FORMATS:
            raise ValueError(f"export format must be one of {', '.join(EXPORT_FORMATS)}; got {fmt!r}")
        folder.mkdir(parents=True, exist_ok=True)
        st = view.state
        stem = f"ptcheck_{view.name}_{_slug(st.model.name)}"
        fig_path = folder / f"{stem}.{fmt}"
        view.set_moving_animated(False)  # animated artists are left out of saved files
        try:
            save(view.figure, fig_path)
        finally:
            view.set_moving_animated(True)
            view._background = None  # until the next full draw on screen
        rows, data = view.numbers(self)
        data = {"model": st.model.name, "model_request": st.model_text, "model_params": st.model_params, "n": st.model.n,
                "settings": self._settings_dict(st), "matches_controls": not self.stale and st is self.state,
                **({"verdict": self.verdict.to_dict()} if st is self.state and self.verdict is not None else {}), **data}
        write_numbers(rows, data, folder / f"{stem}.csv", folder / f"{stem}.json")
        view.redraw()
        return (fig_path, folder / f"{stem}.csv", folder / f"{stem}.json")

    def export_formula(self, folder: str | Path | None = None, *, order: int | None = None,
                       fmt: str | None = None) -> tuple[Path, Path, Path]:
        """Write the formula of the verdict's target with where it meets the panel's tolerances.

        :func:`ptcheck.formula` for the answer shown (its model, target,
        tolerances, treatment, exact solver, threshold and coupling range,
        searched as the panel searches its validity boundaries, so the ranges
        are the same numbers); the error curve is drawn on the panel's couplings.

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
        st = self.state
        if st is None:
            raise ValueError("nothing to export yet: no answer shown (see the message above)")
        s = st.settings
        fmt = (fmt or self.controls.export_format.value).lower()
        if fmt not in EXPORT_FORMATS:
            raise ValueError(f"export format must be one of {', '.join(EXPORT_FORMATS)}; got {fmt!r}")
        if s.reference == "bounds":
            raise ValueError("the formula's validity ranges are found with exact solves, and this answer uses certified "
                             "bounds with no exact solve; set the reference to 'exact' or 'both' to export the formula")
        if order is None:
            ints = [o for o in s.orders if not isinstance(o, Pade)]
            if not ints:
                raise ValueError("a formula is a truncated series: select an integer order (Padé approximants are not "
                                 f"exported); selected: {', '.join(order_name(o) for o in s.orders)}")
            order = max(ints)
        same = self.session is not None and st.model is self.session.model
        call = self.session._call if same else (lambda fn, *a, **k: fn(*a, **k))
        f = call(formula, st.model, s.focus, order, **({"rtol": list(s.tols)} if s.relative else {"tol": list(s.tols)}),
                 directions=s.directions, treatment=s.treatment, backend=s.backend, threshold=s.threshold,
                 coupling=s.reach, max_coupling=s.reach, couplings=s.couplings, params=st.model_params)
        unit = energy_unit(st.model)
        tols = " & ".join(fmt_tol(t, s.relative, unit) for t in s.tols)
        fx = collect([f], title=f"a panel of {st.model.name} (tolerance {tols}, treatment {s.treatment!r}, "
                                f"coupling range {s.coupling_min:g} to {s.coupling_max:g})")
        folder = Path(folder if folder is not None else self.controls.folder.value).expanduser()
        folder.mkdir(parents=True, exist_ok=True)
        stem = f"ptcheck_formula_{_slug(st.model.name)}_{_slug(f.target)}_order{f.order}"
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

    def caption(self, kind: str, state: State | None = None) -> str:
        """Caption of a figure: model, N, orders, tolerances, treatment (the rest is on the axes and in the legend)."""
        st = state or self.state
        s, r = st.settings, st.result
        unit = energy_unit(st.model)
        tols = (" & ".join(fmt_tol(t, True) for t in s.tols) if s.relative
                else " & ".join(fmt_number(t, 3) for t in s.tols) + f" {unit}")
        ref = {"bounds": "certified bounds, no exact solve", "both": "exact and certified bounds"}.get(s.reference, "")
        return caption_text(kind, model=st.model.name, n=st.model.n, orders=[order_name(o) for o in r.orders],
                            extra=[f"tolerance {tols}", f"treatment {s.treatment}", ref])

    # ------------------------------------------------------------------ internals
    @contextmanager
    def _guard(self, slot: str):
        """Show any error as a plain sentence in its message slot (and re-raise under test)."""
        try:
            yield
        except Exception as exc:  # noqa: BLE001 - shown to the user, re-raised when raise_errors
            self.errors.append(exc)
            self._slots[slot] = self._error_html(exc, slot)
            self._render_messages()
            if self.raise_errors:
                raise
        finally:
            self.progress.layout.visibility = "hidden"

    def _error_html(self, exc: BaseException, slot: str) -> str:
        text = panel_words(sentence(exc))
        detail = ""
        if not isinstance(exc, (ValueError, TypeError)):  # not bad input: where it happened, for a bug report
            tb = traceback.extract_tb(exc.__traceback__)
            where = f", in {Path(tb[-1].filename).name} line {tb[-1].lineno}" if tb else ""
            detail = f" <small style='color:#777'>({html.escape(type(exc).__name__)}{html.escape(where)})</small>"
        elif type(exc) not in (ValueError, TypeError):
            detail = f" <small style='color:#777'>({html.escape(type(exc).__name__)})</small>"
        shown = self.state.model_text if self.state is not None else None
        if slot == "model":
            head = "The model was not changed."
            tail = f" Still showing {shown}." if shown else ""
        elif slot == "coupling":
            head, tail = "The coupling was not changed.", ""
        elif slot == "tab":
            head, tail = "This figure cannot be drawn.", ""
        else:
            head, tail = "Cannot compute this.", ""
        return f"<b>{head}</b> {html.escape(text)}{html.escape(tail)}{detail}"

    def _render_messages(self) -> None:
        parts = [f"<div style='{_ERROR_BOX}'>{self._slots[k]}</div>" for k in ("model", "compute", "coupling", "tab")
                 if self._slots[k]]
        if self._slots["dropped"]:
            parts.append(f"<div style='{_INFO_BOX}'>{self._slots['dropped']}</div>")
        self.message.value = "".join(parts)
        stale = self.stale and self.state is not None
        self.stale_note.value = (
            "<div style='color:#8A5A00;font-size:13px'>⚠ Previous answer: the figure and numbers below belong to "
            f"{html.escape(self.state.model_text)} with the settings before the last change, not to the current "
            "controls.</div>" if stale else "")
        body = getattr(self, "_figure_box", None)
        if body is not None:
            (body.add_class if stale else body.remove_class)("ptcheck-stale")
        self._show_model_status()

    def _set_model(self, model: Model, text: str, levels: Sequence | None, params: dict | None = None) -> None:
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
        with self._quiet():
            c.levels.options = opts
            c.levels.value = tuple(chosen)
        if self.session is not None:
            self._heavy_done += self.session.heavy_computations
        self.model = model
        self._model_text = text
        self._model_params = None if params is None else dict(params)
        self.session = Session(model)
        self._sync_focus()

    def _sync_focus(self) -> None:
        c = self.controls
        names = [lab for lab, v in c.levels.options if v in c.levels.value]
        old = c.focus.value
        with self._quiet():
            c.focus.options = names
            c.focus.value = old if old in names else (names[0] if names else None)

    def _read_tolerances(self) -> tuple[tuple[float, ...], bool]:
        c = self.controls
        relative = bool(c.tolerance_kind.value)
        text = c.tolerance.value.strip()
        parts = [p for p in re.split(r"[,;\s]+", text) if p]
        try:
            vals = [parse_number(p.rstrip("%")) for p in parts]
        except ValueError:
            vals = []
        if not vals or not all(v > 0 and v == v and v != float("inf") for v in vals):
            raise ValueError(f"the tolerance must be one or more positive numbers separated by commas (e.g. 1, 5); got {text!r}")
        vals = sorted(set(vals))
        return tuple(v / 100.0 for v in vals) if relative else tuple(vals), relative

    def _read_settings(self) -> Settings:
        c = self.controls
        if self.model is None:
            raise ValueError("no model yet: see the model box")
        targets = tuple(c.levels.value)
        if not targets:
            raise ValueError("no target selected: choose at least one level or quantity")
        orders = tuple(c.orders.value)
        if not orders:
            raise ValueError("no order selected: choose at least one order")
        lo, hi = float(c.coupling_min.value), float(c.coupling_max.value)
        if not lo < hi:
            raise ValueError(f"the coupling range needs 'from' < 'to'; got from {lo:g} to {hi:g}")
        tols, relative = self._read_tolerances()
        reference, _ = self._reference_choice(targets, orders)
        return Settings(targets=targets, orders=orders, tols=tols, relative=relative, treatment=c.treatment.value,
                        backend=c.backend.value, coupling_min=lo, coupling_max=hi, n_points=self.n_points,
                        series_order=self.series_order, threshold=self.threshold, focus=self._focus_key(),
                        reference=reference)

    def _reference_choice(self, targets: Sequence, orders: Sequence) -> tuple[str, str]:
        """(reference, why) for these targets and orders: the control resolved ("auto" by report.choose_reference)."""
        c = self.controls
        asked = c.reference.value
        if asked == "both":
            return "both", "exact solves and certified bounds side by side, as asked"
        levels = []
        for t in targets:
            if isinstance(t, Quantity):
                levels.extend(self.model.level_index(k) for k in t.weights)
            else:
                levels.append(int(t))
        return choose_reference(self.model, sorted(set(levels)), list(orders), reference=asked,
                                bounds_above=self.bounds_above, treatment=c.treatment.value)

    def _show_reference_hint(self) -> None:
        c = self.controls
        try:
            targets, orders = tuple(c.levels.value), tuple(c.orders.value)
            _, why = self._reference_choice(targets, orders) if self.model is not None else ("", "")
        except ValueError:
            why = ""
        c.reference_hint.value = f"<small style='color:#555'>{html.escape(why)}</small>" if why else ""

    def _settings_dict(self, st: State) -> dict:
        s = st.settings
        unit = energy_unit(st.model)

        def name(t: Any) -> str:
            return str(st.model.label(t)) if isinstance(t, int) else t.name

        return {"targets": [name(t) for t in s.targets], "verdict_for": name(s.focus),
                "orders": [order_name(o) for o in st.result.orders],
                "tolerances": [fmt_tol(t, s.relative, unit) for t in s.tols],
                "tol" if not s.relative else "rtol": list(s.tols),
                "treatment": s.treatment, "backend": s.backend, "reference": s.reference,
                "reference_reason": st.reference_reason, "coupling_range": [s.coupling_min, s.coupling_max],
                "n_points": s.n_points, "coupling": self.coupling}

    def _focus_key(self) -> Any:
        c = self.controls
        for lab, v in c.levels.options:
            if lab == c.focus.value:
                return v
        raise ValueError("choose the target the verdict is about ('verdict for')")

    @property
    def error_target_name(self) -> str:
        """Name of the target whose verdict and errors are shown."""
        st = self.state
        s = st.settings
        return str(st.model.label(s.focus)) if isinstance(s.focus, int) else s.focus.name

    def _compute(self, s: Settings, views: Sequence) -> State:
        """The answer to ``s``: sweep, boundaries of the verdict target, and what the views need."""
        sess = self.session
        needs = set().union(*(v.needs for v in views))
        jobs = sess.boundary_jobs(s, tuple(o for o in s.orders))
        total = 1 + jobs + (1 if "divergence" in needs else 0)
        self.progress.max, self.progress.value = total, 0
        if total > 1:
            self.progress.layout.visibility = "visible"
        sess.notes.clear()
        self.progress.description = {"bounds": "bounds & series", "both": "exact, bounds & series"}.get(
            s.reference, "exact & series")
        result, dropped = sess.comparison(s)
        self.progress.value += 1
        self.progress.description = "validity"

        def step() -> None:
            self.progress.value += 1

        bounds, unavailable = sess.boundaries(s, tuple(result.orders), progress=step)
        _, why = self._reference_choice(s.targets, s.orders)
        state = State(model=self.model, model_text=self._model_text, model_params=self._model_params, settings=s,
                      result=result, boundaries=bounds, dropped=dropped,
                      unavailable=tuple((o, r, reason) for (o, r), reason in unavailable.items()), reference_reason=why)
        if "divergence" in needs:
            self.progress.description = "radius & EPs"
            state = state.with_divergence(sess.divergence(s))
            self.progress.value += 1
        notes = list(sess.notes) + [n for n in result.notes if not n.startswith("Exact values are exact")]
        if s.reference != "exact":
            notes.append(f"Reference: {why}.")
        return replace(state, notes=tuple(dict.fromkeys(notes)))

    def _complete(self, views: Sequence) -> None:
        """Add to the shown answer what newly visible views need (same model and settings)."""
        st = self.state
        if any("divergence" in v.needs for v in views) and st.divergence is None:
            if st.model is not self.session.model:
                raise ValueError("this figure needs a new computation; change a setting to compute it for the current model")
            self.session.notes.clear()
            self.progress.description = "radius & EPs"
            self.progress.max, self.progress.value = 1, 0
            self.progress.layout.visibility = "visible"
            self.state = st.with_divergence(self.session.divergence(st.settings), tuple(self.session.notes))
            self._show_notes()

    def _show_notes(self) -> None:
        notes = self.state.notes if self.state is not None else ()
        self.notes.value = ("<details><summary><small>notes ({})</small></summary><ul>{}</ul></details>".format(
            len(notes), "".join(f"<li><small>{html.escape(n)}</small></li>" for n in notes)) if notes else "")

    def _render(self, views: Sequence) -> None:
        for v in views:
            v.build(self, self.state)
            v.move(self, self.coupling)
            v.redraw()

    # ------------------------------------------------------------------ text: verdict, readout, hints
    def _update_text(self) -> None:
        self._render_messages()
        self._show_tolerance_hint()
        self._show_reference_hint()
        st = self.state
        if st is None:
            self.banner.value = ""
            self.readout.value = ""
            return
        s, r = st.settings, st.result
        lam = min(max(self.coupling, s.coupling_min), s.coupling_max)
        unit = energy_unit(st.model)
        shift = bool(self.controls.shift.value) and "levels" in self.views
        point = values_at(r, lam, shift=shift)
        focus = self.error_target_name
        ti = list(r.targets).index(focus)
        err = point.rel_error if s.relative else point.abs_error
        errors_at = {name: float(err[ti, oi]) for oi, name in enumerate(r.order_names)}
        undefined = [name for oi, name in enumerate(r.order_names)
                     if s.relative and s.reference != "bounds" and np.all(np.isnan(r.rel_error[ti, oi]))]
        missing = {"exact": {}, "bounds": {}}
        for o, ref, _ in st.unavailable:
            missing[ref][order_name(o)] = ("not available for this target (see the message)" if ref == "exact" else
                                           "no certified boundary for this target (see the message)")
        v = verdict(st.boundaries, target=focus, orders=r.orders, tols=s.tols, relative=s.relative, coupling=lam,
                    model=st.model, unit=unit, errors_at=errors_at, undefined=undefined, reference=s.reference,
                    unavailable=missing["bounds" if s.reference == "bounds" else "exact"],
                    uncertified=missing["bounds"] if s.reference == "both" else None)
        kind = f"relative error, in % of {relative_to_text(s.focus)}" if s.relative else f"absolute error, in {unit}"
        treat = r.treatments[ti]
        against = {"bounds": "; judged by certified bounds, no exact solve",
                   "both": "; exact solves, with certified bounds"}.get(s.reference, "")
        heading = f"Verdict for {focus} ({treat} treatment; {kind}{against})"
        self.verdict = v
        self.banner.value = verdict_html(v, heading=heading, stale=self.stale)
        refs = [relative_to_text(t) for t in r.levels]
        self.readout.value = readout_html(r, point, shift=shift,
                                          tols=s.tols, relative=s.relative, unit=unit,
                                          where=fmt_coupling(lam, st.model, digits=4), relative_to=refs)

    def _show_tolerance_hint(self) -> None:
        c = self.controls
        model = self.model
        unit = energy_unit(model)
        if [o[0] for o in c.tolerance_kind.options][1] != unit:
            with self._quiet():
                value = c.tolerance_kind.value
                c.tolerance_kind.options = [("%", True), (unit, False)]
                c.tolerance_kind.value = value
        try:
            focus = self._focus_key()
        except ValueError:
            focus = None
        if c.tolerance_kind.value:
            what = relative_to_text(focus) if focus is not None else "the exact shift"
            c.tolerance_hint.value = (f"<small style='color:#555'>error in % of {html.escape(what)}; "
                                      "one or more values</small>")
        else:
            c.tolerance_hint.value = (f"<small style='color:#555'>error |E<sub>pt</sub> − E| in {html.escape(unit)} "
                                      "(units of H0); one or more values</small>")

    def _show_physical(self) -> None:
        phys = physical_coupling(self.model)
        self.controls.coupling_physical.value = (
            f"<span style='white-space:nowrap'>{html.escape(fmt_physical(self.coupling, phys, 4))}</span>" if phys else "")

    def _show_model_status(self) -> None:
        st = self.state
        c = self.controls
        if st is None:
            c.model_status.value = "<small style='color:#D55E00'>no model shown yet</small>"
            return
        shown = f"shown: {html.escape(st.model_text)} · N = {st.model.n}"
        acc = getattr(self, "_secondary", None)
        if acc is not None:
            acc.set_title(0, f"model: {st.model_text} · N = {st.model.n}" + (" · change not applied" if self._slots["model"] else ""))
        if self._slots["model"]:
            c.model_status.value = (f"<small>{shown}</small><br><small style='color:#D55E00'>⚠ the builder and "
                                    "parameters above were not applied (see the message)</small>")
        else:
            c.model_status.value = f"<small>{shown}</small>"

    # ------------------------------------------------------------------ callbacks
    _muted = False

    @contextmanager
    def _quiet(self):
        """Set controls without their callbacks running (nests)."""
        was = self._muted
        self._muted = True
        try:
            yield
        finally:
            self._muted = was
    _setting = False
    _pinned: float | None = None

    def _on_coupling(self, change: dict) -> None:
        new = float(change["new"])
        pin = self._pinned
        if pin is not None and not self._setting and abs(new - pin) <= 0.5 * self.controls.coupling.step * (1 + 1e-6):
            # the browser's slider snapped a typed value to its step grid and sent it back: keep the typed value
            return
        if not self._setting:
            self._pinned = None
        self._move_to(new)

    def _move_to(self, lam: float) -> None:
        """Show the coupling λ: markers, verdict, readout (no engine work)."""
        c = self.controls
        self._lam = float(lam)
        with self._quiet():
            c.coupling_text.value = fmt_input(self._lam, 4)
        self._show_physical()
        self._slots["coupling"] = ""
        if self.state is None:
            self._render_messages()
            return
        with self._guard("compute"):
            for v in self.views.values():
                if v not in self.visible_views:
                    v.stale = True  # moved when its tab is shown
            for v in self.visible_views:
                if v.artists is not None:
                    v.move(self, self._lam)
                    v.redraw(full=False)
        self._update_text()

    def set_coupling(self, value: float) -> None:
        """Go to the coupling λ exactly (the slider alone moves in steps of 1/100 of the range)."""
        c = self.controls
        lam = float(value)
        if not c.coupling.min <= lam <= c.coupling.max:
            raise ValueError(f"λ = {fmt_number(lam)} is outside the range {fmt_number(c.coupling.min)} to "
                             f"{fmt_number(c.coupling.max)}; widen the range first ('range from' / 'to')")
        self._pinned = lam
        self._setting = True
        try:
            if c.coupling.value != lam:
                c.coupling.value = lam
            else:
                self._move_to(lam)
        finally:
            self._setting = False

    def _on_coupling_text(self, change: dict) -> None:
        if self._muted:
            return
        with self._guard("coupling"):
            text = str(change["new"]).strip()
            try:
                lam = parse_number(text)
            except ValueError:
                raise ValueError(f"the coupling λ must be a number; got {text!r}") from None
            self.set_coupling(lam)
        self._render_messages()

    def _on_heavy(self, change: dict) -> None:
        if self._muted:
            return
        if change["owner"] is self.controls.levels:
            self._sync_focus()
        self.refresh()

    def _on_shift(self, change: dict) -> None:
        v = self.views.get("levels")
        if v is not None and v.state is not None:
            with self._guard("compute"):
                v.build(self, v.state)
                v.move(self, self.coupling)
                if v in self.visible_views:
                    v.redraw()
        self._update_text()

    def _on_range(self, change: dict) -> None:
        c = self.controls
        lo, hi = float(c.coupling_min.value), float(c.coupling_max.value)
        if not lo < hi:
            with self._guard("compute"):
                raise ValueError(f"the coupling range needs 'from' < 'to'; got from {lo:g} to {hi:g}")
            return
        with self._quiet():
            lam = min(max(self.coupling, lo), hi)
            if lo > c.coupling.max:
                c.coupling.max, c.coupling.min = hi, lo
            else:
                c.coupling.min, c.coupling.max = lo, hi
            c.coupling.step = (hi - lo) / SLIDER_STEPS
            self._setting = True
            try:
                c.coupling.value = lam
            finally:
                self._setting = False
            c.coupling_text.value = fmt_input(lam, 4)
        self._lam = lam
        self._pinned = lam  # the browser's slider re-snaps to the new step grid: keep λ where it was
        self._show_physical()
        self.refresh()

    def _on_builder(self, change: dict) -> None:
        """A new builder: its own default parameters replace the old model's, then it is built."""
        if self._builder_name is None or self._muted:
            return
        with self._quiet():
            self.controls.model_params.value = format_params(builder_defaults(change["new"]))
        self._apply_model()

    def _on_model_params(self, change: dict) -> None:
        if self._builder_name is None or self._muted:
            return
        self._apply_model()

    def _apply_model(self) -> None:
        """Build the model the box asks for; on failure keep the shown one, working, and say so."""
        c = self.controls
        ok = False
        with self._guard("model"):
            name = c.model_name.value
            params = parse_params(c.model_params.value)
            model = build_model(name, params)
            self._builder_name = name
            self._set_model(model, f"{name}({format_params(params)})", None, params)
            self._slots["model"] = ""
            ok = True
        if ok:
            self._show_physical()
            self.refresh()
        else:
            self._update_text()

    def _export_clicked(self, *, formula_files: bool = False) -> None:
        c = self.controls
        c.export_status.value = ""
        with self._export_guard():
            paths = self.export_formula() if formula_files else self.export()
            note = "" if not self.stale else (" <b>Note:</b> these files hold the previous answer shown in the figure, "
                                              "not the current controls (the last change failed).")
            c.export_status.value = (f"<div style='{_DONE_BOX}'><small>written: "
                                     + ", ".join(html.escape(str(p)) for p in paths) + f"{note}</small></div>")

    @contextmanager
    def _export_guard(self):
        try:
            yield
        except Exception as exc:  # noqa: BLE001 - shown beside the button, re-raised when raise_errors
            self.errors.append(exc)
            self.controls.export_status.value = (f"<div style='{_ERROR_BOX}'><b>Not exported.</b> "
                                                 f"{html.escape(sentence(exc))}</div>")
            if self.raise_errors:
                raise

    # ------------------------------------------------------------------ layout
    def _layout(self) -> Any:
        import ipywidgets as w

        c = self.controls
        names = set(self.views)
        self._figure_box = w.VBox([self._body()])
        self._secondary = c.secondary_box(model_editable=self._builder_name is not None)
        left = w.VBox([
            c.what_box(focus=True),
            c.how_box(shift="levels" in names),
            self._secondary,
            self.progress,
        ], layout=w.Layout(width="370px", min_width="370px", margin="0 16px 0 0"))
        right = w.VBox([c.where_box(), self.stale_note, self._figure_box, self.readout, self.notes],
                       layout=w.Layout(flex="1 1 auto", min_width="0px"))
        return w.VBox([w.HTML(_CSS), self.banner, self.message, w.HBox([left, right], layout=w.Layout(width="100%"))],
                      layout=w.Layout(width="100%"))

    def _body(self) -> Any:
        return self.view.widget
