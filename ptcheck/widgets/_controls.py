"""The panel's controls, grouped by the question they answer (private).

- what: targets, orders, tolerances, the target the verdict is about;
- where: the coupling (slider, typed value, physical value) and the range swept;
- how: treatment, reference (exact solves, certified bounds, both) and exact solver (and shifts
  vs energies in the levels figure);
- the model box and the export box, secondary (collapsed).
"""

from __future__ import annotations

import inspect
from collections.abc import Sequence
from typing import Any

from ..approximants import order_name, parse_order
from ..compare import compare
from ..exact import BACKENDS
from ..treatment import TREATMENTS
from ._text import fmt_input

__all__ = ["Controls", "EXPORT_FORMATS", "REFERENCE_CHOICES", "treatment_choices", "default_treatment", "SLIDER_STEPS"]

EXPORT_FORMATS = ("png", "svg", "pdf")
#: Arrow-key steps across the coupling range.
SLIDER_STEPS = 100

_TREATMENT_WORDS = {
    "standard": "standard (RS, degenerate PT)",
    "nondegenerate": "non-degenerate RS",
    "block": "near-degenerate block",
    "auto": "auto (block if near-degenerate)",
}


#: (label, value) of the reference control: what the perturbative values are judged against.
#: "auto" is resolved by :func:`ptcheck.report.choose_reference` (the one place that decides).
REFERENCE_CHOICES = (
    ("auto", "auto"),
    ("exact", "exact"),
    ("certified bounds", "bounds"),
    ("both", "both"),
)


def treatment_choices() -> list[tuple[str, str]]:
    """(label, name) for every treatment the engine accepts (``ptcheck.treatment.TREATMENTS``)."""
    return [(_TREATMENT_WORDS.get(t, t), t) for t in TREATMENTS]


def default_treatment() -> str:
    """The engine's own default treatment (that of :func:`ptcheck.compare.compare`)."""
    return inspect.signature(compare).parameters["treatment"].default


def _section(title: str) -> Any:
    import ipywidgets as w

    return w.HTML(f"<div style='font-size:12px;letter-spacing:.08em;color:#555;border-bottom:1px solid #DDD;"
                  f"margin:6px 0 2px 0'>{title}</div>")


class Controls:
    """The panel's widgets, by plain names (attributes hold ipywidgets)."""

    def __init__(self, *, orders: Sequence, order_choices: Sequence, coupling: float, coupling_range: tuple,
                 tols: Sequence[float], relative: bool, treatment: str, backend: str, folder: str,
                 reference: str = "auto") -> None:
        import ipywidgets as w

        lo, hi = coupling_range
        style = {"description_width": "initial"}
        # ---- what
        self.levels = w.SelectMultiple(rows=8, layout=w.Layout(width="170px", margin="0 12px 0 0"))
        opts = []
        for o in list(order_choices) + [o for o in orders if o not in order_choices]:
            spec = parse_order(o)
            opts.append((order_name(spec).replace("order ", ""), spec))
        self.orders = w.SelectMultiple(options=opts, value=tuple(parse_order(o) for o in orders), rows=len(opts),
                                       layout=w.Layout(width="130px"))
        self.focus = w.Dropdown(description="verdict for", style=style, layout=w.Layout(width="310px"))
        shown = [100.0 * t if relative else t for t in tols]
        self.tolerance = w.Text(value=", ".join(fmt_input(t, 4) for t in shown), description="tolerance",
                                continuous_update=False, placeholder="e.g. 1, 5", style=style,
                                layout=w.Layout(width="180px"))
        self.tolerance_kind = w.Dropdown(options=[("%", True), ("energy units", False)], value=bool(relative),
                                         layout=w.Layout(width="125px"))
        self.tolerance_hint = w.HTML()
        # ---- where
        self.coupling = w.FloatSlider(value=coupling, min=lo, max=hi, step=(hi - lo) / SLIDER_STEPS, description="coupling λ",
                                      continuous_update=True, readout=False, style=style,
                                      layout=w.Layout(flex="1 1 auto", min_width="260px"))
        self.coupling_text = w.Text(value=fmt_input(coupling, 4), description="λ =", continuous_update=False,
                                    style=style, layout=w.Layout(width="120px"))
        self.coupling_physical = w.HTML(layout=w.Layout(min_width="0px"))
        self.coupling_min = w.FloatText(value=lo, description="range from", style=style, layout=w.Layout(width="160px"))
        self.coupling_max = w.FloatText(value=hi, description="to", style=style, layout=w.Layout(width="100px"))
        # ---- how
        choices = treatment_choices()
        names = [v for _, v in choices]
        self.treatment = w.Dropdown(options=choices, value=treatment if treatment in names else names[0],
                                    description="treatment", style=style, layout=w.Layout(width="340px"))
        self.reference = w.Dropdown(options=list(REFERENCE_CHOICES), value=reference, description="reference",
                                    style=style, layout=w.Layout(width="340px"),
                                    tooltip="what the perturbative values are judged against: exact solves, certified "
                                            "bounds (Kato–Temple brackets, no exact solve) or both")
        self.reference_hint = w.HTML()
        self.backend = w.Dropdown(options=list(BACKENDS), value=backend, description="exact solver", style=style,
                                  layout=w.Layout(width="340px"))
        self.shift = w.Checkbox(value=False, description="levels figure: shifts E(λ) − E(0)", indent=False,
                                layout=w.Layout(width="auto"))
        # ---- model box
        self.model_name = w.Dropdown(description="builder", style=style, layout=w.Layout(width="340px"))
        self.model_params = w.Textarea(description="parameters", placeholder="e.g. g=0.1, n_photons=8",
                                       continuous_update=False, rows=2, style=style, layout=w.Layout(width="340px"))
        self.model_status = w.HTML()
        # ---- export box
        self.folder = w.Text(value=str(folder), description="folder", style=style, layout=w.Layout(width="340px"))
        self.export_format = w.Dropdown(options=EXPORT_FORMATS, value="png", description="figure as", style=style,
                                        layout=w.Layout(width="160px"))
        self.export_button = w.Button(description="export figure + numbers", icon="download", layout=w.Layout(width="220px"))
        self.formula_button = w.Button(description="export formula", icon="download", layout=w.Layout(width="160px"),
                                       tooltip="formula of the verdict's target at the highest integer order selected, "
                                               "with where it meets the tolerances: .tex, .py and figure")
        self.export_status = w.HTML()

    # ------------------------------------------------------------------ groups
    def what_box(self, *, focus: bool) -> Any:
        import ipywidgets as w

        lists = w.HBox([
            w.VBox([w.HTML("<small>targets</small>"), self.levels]),
            w.VBox([w.HTML("<small>orders</small>"), self.orders]),
        ])
        items = [_section("WHAT"), lists]
        if focus:
            items.append(self.focus)
        items += [w.HBox([self.tolerance, self.tolerance_kind]), self.tolerance_hint]
        return w.VBox(items)

    def how_box(self, *, shift: bool) -> Any:
        import ipywidgets as w

        return w.VBox([_section("HOW"), self.treatment, self.reference, self.reference_hint, self.backend]
                      + ([self.shift] if shift else []))

    def where_box(self) -> Any:
        import ipywidgets as w

        label = w.HTML("<span style='font-size:12px;letter-spacing:.08em;color:#555'>WHERE</span>",
                       layout=w.Layout(width="64px", min_width="64px"))
        return w.HBox([label, self.coupling, self.coupling_text, self.coupling_physical, self.coupling_min, self.coupling_max],
                      layout=w.Layout(align_items="center", width="100%", border_bottom="1px solid #DDD",
                                      margin="0 0 6px 0"))

    def secondary_box(self, *, model_editable: bool) -> Any:
        import ipywidgets as w

        model = w.VBox(([self.model_name, self.model_params] if model_editable else []) + [self.model_status])
        export = w.VBox([self.folder, self.export_format, w.HBox([self.export_button, self.formula_button]),
                         self.export_status])
        acc = w.Accordion(children=[model, export], titles=("model", "export"), selected_index=None)
        return acc
