"""Interactive panels (ipywidgets) over ptcheck's engine and figures, headed by the verdict.

A thin skin: standard controls -> the same engine functions the command line
uses -> the figures of :mod:`ptcheck.plots`, updated in place.  Every panel
opens with a verdict banner: for the chosen target, each order and each
tolerance, whether the order is valid at the current coupling and up to which
λ* (and physical coupling, when the model has ``coupling_scale`` and
``coupling_unit``).  Controls are grouped by the question they answer: what
(targets, orders, tolerances), where (the coupling and its range), how
(treatment, exact solver); the model and export boxes are folded away.

Heavy work (``compare`` sweep, validity boundaries, divergence map) runs only
when what it depends on changes; moving the coupling moves markers and
rewrites the verdict and the readout (values at the exact λ, interpolated as
the figure draws its lines).  Only a complete answer replaces the one shown:
after a failed request the previous answer stays usable and is marked as such,
and the error stays on screen until it is fixed.  ``raise_errors=True``
re-raises errors (for tests).

- :class:`LevelsPanel`: levels (or derived quantities) vs coupling λ.
- :class:`ErrorsPanel`: error per order vs λ, tolerances, validity boundaries.
- :class:`DivergencePanel`: exceptional points, radius of convergence, Kato bound.
- :class:`PairsPanel`: near-degenerate pairs at the current λ, blocks chosen.
- :class:`Dashboard`: all four as tabs sharing one set of controls.

Use ``%matplotlib widget`` (ipympl) for the fast in-place canvas; otherwise
the figures are shown as inline PNG images.

Examples
--------
>>> from ptcheck.widgets import Dashboard                       # doctest: +SKIP
>>> Dashboard("jaynes_cummings", model_params={"n_photons": 6})  # doctest: +SKIP
"""

from __future__ import annotations

from typing import Any

from ._builders import parse_params
from ._panel import Controls, Panel

__all__ = ["Controls", "Dashboard", "DivergencePanel", "ErrorsPanel", "LevelsPanel", "PairsPanel", "Panel", "parse_params"]


class LevelsPanel(Panel):
    """Levels or derived quantities vs coupling λ: exact and perturbative (see :class:`Panel`)."""

    views_spec = ("levels",)


class ErrorsPanel(Panel):
    """Error of each order vs λ with tolerance and validity boundaries (see :class:`Panel`)."""

    views_spec = ("errors",)


class DivergencePanel(Panel):
    """Complex-λ map: exceptional points, radius of convergence, Kato bound (see :class:`Panel`)."""

    views_spec = ("divergence",)


class PairsPanel(Panel):
    """Mixing ratios of near-degenerate pairs at the current λ, blocks chosen (see :class:`Panel`)."""

    views_spec = ("pairs",)


class Dashboard(Panel):
    """All four figures as tabs over one set of controls (see :class:`Panel`).

    Only the selected tab's heavy work runs; the others catch up when selected.
    """

    views_spec = ("levels", "errors", "divergence", "pairs")

    def _body(self) -> Any:
        import ipywidgets as w

        views = list(self.views.values())
        self.tabs = w.Tab(children=[v.widget for v in views], titles=[v.title for v in views])
        self.tabs.add_class("ptcheck-tabs")
        self.tabs.observe(self._on_tab, names="selected_index")
        return self.tabs

    @property
    def visible_views(self) -> list:
        tabs = getattr(self, "tabs", None)
        views = list(self.views.values())
        return [views[tabs.selected_index or 0]] if tabs is not None else views[:1]

    def select(self, name: str) -> None:
        """Show the tab of a view by name: "levels", "errors", "divergence" or "pairs"."""
        names = list(self.views)
        if name not in names:
            raise ValueError(f"unknown tab {name!r}; tabs are {names}")
        self.tabs.selected_index = names.index(name)

    def _on_tab(self, change: dict) -> None:
        self._slots["tab"] = ""
        if self.state is None:
            return
        with self._guard("tab"):
            (v,) = self.visible_views
            try:
                self._complete([v])
            except Exception:
                v.unavailable(f"No {v.title} for these settings: see the message above.")
                v.redraw()
                raise
            if v.artists is None or v.state is not self.state:
                v.build(self, self.state)
                v.move(self, self.coupling)
                v.redraw()
            elif v.stale:
                v.move(self, self.coupling)
                v.redraw()
        self._update_text()
