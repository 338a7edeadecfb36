"""Panels built from Python: controls drive the engine and the figures; errors become messages.

Presentation tests: expected values are the engine results the panel holds
(the engine has its own physics tests).
"""

import json

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from ptcheck.errors import DegenerateLevelError
from ptcheck.models import jaynes_cummings
from ptcheck.quantities import Quantity
from ptcheck.widgets import Dashboard, DivergencePanel, ErrorsPanel, LevelsPanel, PairsPanel, parse_params

OPTS = dict(coupling_range=(0.0, 0.8), n_points=17, orders=(1, 2), raise_errors=True, canvas="image")


@pytest.fixture(scope="module")
def jc():
    return jaynes_cummings(n_photons=4)  # N = 8


@pytest.fixture
def levels_panel(jc):
    p = LevelsPanel(jc, coupling=0.2, **OPTS)
    yield p
    p.close()


def test_levels_panel_shows_the_comparison(levels_panel):
    p = levels_panel
    r = p.result
    assert r.targets == ("|0,0⟩", "|1,0⟩") and r.order_names == ("order 1", "order 2")
    assert_array_equal(r.couplings, np.linspace(0.0, 0.8, 17))
    for ti in range(2):
        assert_array_equal(p.artists.exact[ti].get_ydata(), r.exact[ti])
    assert p.view.widget.value[:8] == b"\x89PNG\r\n\x1a\n"
    assert "At coupling λ = 0.2" in p.readout.value
    assert p.message.value == ""


def test_moving_the_coupling_does_no_heavy_work(levels_panel):
    p = levels_panel
    before = p.heavy_computations
    png0, text0 = p.view.widget.value, p.readout.value
    p.controls.coupling.value = 0.65
    assert p.heavy_computations == before
    assert_array_equal(p.artists.coupling_line.get_xdata(), [0.65, 0.65])
    i = int(np.argmin(np.abs(p.result.couplings - 0.65)))
    assert_array_equal(p.artists.coupling_markers.get_ydata(), p.result.exact[:, i])
    assert p.view.widget.value != png0 and p.readout.value != text0
    p.controls.coupling_text.value = 0.1  # typed value drives the slider
    assert p.controls.coupling.value == pytest.approx(0.1)
    assert p.heavy_computations == before


def test_changing_orders_or_levels_recomputes(levels_panel):
    p = levels_panel
    before = p.heavy_computations
    p.controls.orders.value = (1, 2, 4)
    assert p.heavy_computations == before + 1
    assert p.result.order_names == ("order 1", "order 2", "order 4")
    assert len(p.artists.perturbative[0]) == 3
    p.controls.levels.value = (1,)
    assert p.result.targets == ("|1,0⟩",)
    assert p.controls.error_target.options == ("|1,0⟩",)
    p.controls.shift.value = True  # redraw only
    assert p.heavy_computations == before + 2
    assert_array_equal(p.artists.exact[0].get_ydata(), p.result.exact[0] - p.result.unperturbed[0])


def test_coupling_range_change_resamples(levels_panel):
    p = levels_panel
    p.controls.coupling_max.value = 0.4
    assert p.result.couplings[-1] == pytest.approx(0.4)
    assert p.controls.coupling.max == pytest.approx(0.4)
    assert p.coupling <= 0.4


def test_errors_panel_tolerance_and_boundaries(jc):
    p = ErrorsPanel(jc, levels=[(1, 0)], tol=1e-5, **OPTS)
    try:
        assert [b.tol for b in p.boundaries] == [1e-5, 1e-5]
        assert p.progress.max == 1 + 2 and p.progress.value == 3  # sweep + one boundary per order
        assert p.progress.layout.visibility == "hidden"  # shown only while working
        assert_array_equal(p.artists.tolerance_line.get_ydata(), [1e-5, 1e-5])
        before = p.heavy_computations
        p.controls.tolerance.value = 1e-3
        assert p.heavy_computations == before + 2  # one boundary per order; the sweep is cached
        assert [b.tol for b in p.boundaries] == [1e-3, 1e-3]
        p.controls.tolerance_kind.value = True
        assert [b.rtol for b in p.boundaries] == [1e-3, 1e-3]
        assert p.artists.ax.get_ylabel() == "relative error"
        drawn = [b for b in p.boundaries if b.status in ("found", "fails_at_zero")]
        assert len(p.artists.boundary_lines) == len(drawn)
        n = p.heavy_computations
        p.controls.coupling.value = 0.3
        assert p.heavy_computations == n
    finally:
        p.close()


def test_treatment_and_backend_reach_the_engine(jc):
    p = LevelsPanel(jc, levels=[(1, 0)], treatment="block", **OPTS)
    try:
        assert p.result.treatments == ("near-degenerate block",)
        p.controls.treatment.value = "nondegenerate"
        assert p.result.treatments == ("nondegenerate",)
        p.controls.backend.value = "dense"
        assert p.result.backend == "dense"
    finally:
        p.close()


def test_derived_quantity_is_offered_by_name(jc):
    q = Quantity("qubit frequency", {(1, 0): 1.0, (0, 0): -1.0})
    p = LevelsPanel(jc, levels=[(0, 0)], quantities=[q], **OPTS)
    try:
        assert "qubit frequency" in [lab for lab, _ in p.controls.levels.options]
        assert p.result.targets == ("|0,0⟩", "qubit frequency")
    finally:
        p.close()


def test_degenerate_level_with_nondegenerate_treatment_is_a_message():
    resonant = jaynes_cummings(omega_q=6.0, omega_r=6.0, n_photons=3)  # |1,0> and |0,1> exactly degenerate
    opts = dict(OPTS, raise_errors=False)
    p = LevelsPanel(resonant, levels=[1], treatment="nondegenerate", **opts)
    try:
        assert "Cannot compute this" in p.message.value
        assert "DegenerateLevelError" in p.message.value
        assert "Traceback" not in p.message.value
        p.controls.treatment.value = "block"  # the fix clears the message
        assert p.message.value == "" and p.result.treatments == ("degenerate",)
    finally:
        p.close()
    with pytest.raises(DegenerateLevelError):
        LevelsPanel(resonant, levels=[1], treatment="nondegenerate", **OPTS)


def test_bad_model_parameters_are_a_message():
    p = LevelsPanel("jaynes_cummings", model_params={"n_photons": 3}, **dict(OPTS, raise_errors=False))
    try:
        assert p.model.n == 6 and p.message.value == ""
        p.controls.model_params.value = "n_photons=3, omega_q=-1"
        assert "omega_q must be &gt; 0" in p.message.value
        p.controls.model_params.value = "n_photons=4"
        assert p.model.n == 8 and p.message.value == "" and p.result is not None
        p.raise_errors = True
        with pytest.raises(ValueError, match="model parameters must look like"):
            p.controls.model_params.value = "n_photons=="
    finally:
        p.close()
    with pytest.raises(ValueError, match="unknown model"):
        LevelsPanel("no such model", **OPTS)


def test_empty_selection_is_a_message(levels_panel):
    p = levels_panel
    p.raise_errors = False
    p.controls.orders.value = ()
    assert "no order selected" in p.message.value


def test_parse_params():
    assert parse_params("g=0.1, n_photons=8, rotating_wave=True") == {"g": 0.1, "n_photons": 8, "rotating_wave": True}
    assert parse_params("  ") == {}
    with pytest.raises(ValueError, match="plain number"):
        parse_params("g=abs(1)")


@pytest.mark.parametrize("fmt", ["png", "svg", "pdf"])
def test_export_writes_figure_and_numbers(levels_panel, tmp_path, fmt):
    paths = levels_panel.export(tmp_path / "out", fmt)
    assert [p.suffix for p in paths] == [f".{fmt}", ".csv", ".json"]
    assert all(p.exists() and p.stat().st_size > 0 for p in paths)
    header = paths[1].read_text(encoding="utf-8").splitlines()[0]
    assert header == ("target,order,treatment,coupling,presents,unperturbed,exact_presented,perturbative_presented,"
                      "exact,perturbative,abs_error,rel_error,infidelity,ambiguous")
    data = json.loads(paths[2].read_text(encoding="utf-8"))
    assert data["settings"]["orders"] == ["order 1", "order 2"]
    assert data["comparison"]["exact"] == levels_panel.result.exact.tolist()


def test_export_button_reports_the_files(levels_panel, tmp_path):
    levels_panel.controls.folder.value = str(tmp_path)
    levels_panel.controls.export_button.click()
    assert "written:" in levels_panel.message.value
    assert (tmp_path / "ptcheck_levels_jaynes_cummings.png").exists()


def test_dashboard_computes_each_tab_once(jc):
    d = Dashboard(jc, **OPTS)
    try:
        assert d.heavy_computations == 1  # the sweep behind the first tab only
        d.select("errors")
        n_err = d.heavy_computations
        assert n_err == 1 + 2  # one validity boundary per order
        assert d.artists.boundaries == tuple(b for b in d.boundaries if b.status in ("found", "fails_at_zero"))
        d.select("levels")
        d.controls.coupling.value = 0.5
        d.select("errors")  # markers caught up without engine work
        assert d.heavy_computations == n_err
        assert_array_equal(d.artists.coupling_line.get_xdata(), [0.5, 0.5])
        d.select("divergence")
        assert d.heavy_computations == n_err + 1
        assert d.artists.labels == ("|0,0⟩", "|1,0⟩")
        d.controls.coupling.value = 0.7
        assert_array_equal(d.artists.coupling_marker.get_xdata(), [0.7])
        d.select("pairs")
        d.controls.coupling.value = 0.75
        assert d.views["pairs"].map.coupling == pytest.approx(0.75)
        assert d.heavy_computations == n_err + 1
    finally:
        d.close()


def test_single_divergence_and_pairs_panels(jc):
    p = DivergencePanel(jc, series_order=12, **OPTS)
    q = PairsPanel(jc, **OPTS)
    try:
        assert p.divergence.order == 12 and p.artists.discs
        assert q.artists.image.get_array().shape == (len(q.views["pairs"].map.levels),) * 2
    finally:
        p.close()
        q.close()


# ipympl's own toolbar triggers this traitlets deprecation (third-party, not ours)
@pytest.mark.filterwarnings(r"ignore:Passing unrecognized arguments to super\(Toolbar\):DeprecationWarning")
def test_ipympl_canvas_moves_and_exports(jc, tmp_path):
    pytest.importorskip("ipympl")
    p = LevelsPanel(jc, **dict(OPTS, canvas="ipympl"))
    try:
        from ipympl.backend_nbagg import Canvas

        assert isinstance(p.view.widget, Canvas)
        p.figure.canvas.draw()  # what the browser's first frame request does: caches the background
        n = p.heavy_computations
        p.controls.coupling.value = 0.7
        assert_array_equal(p.artists.coupling_line.get_xdata(), [0.7, 0.7])
        assert p.heavy_computations == n
        fig_path = p.export(tmp_path, "png")[0]
        assert fig_path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert p.figure.canvas is p.view.widget  # the on-screen canvas is kept
        p.controls.coupling.value = 0.2  # no stale background after the export
        assert_array_equal(p.artists.coupling_line.get_xdata(), [0.2, 0.2])
    finally:
        p.close()
