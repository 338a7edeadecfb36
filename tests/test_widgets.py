"""Panels built from Python: controls drive the engine and the figures; errors become messages that stay.

Presentation checks compare what the panel shows with the engine results it
holds (the engine has its own physics tests).  The verdict banner is a default
answer, so it is refereed by brute force on a two-level model (closed form +
fine grid + brentq).  Every test fails if a widget callback swallowed an
exception (ipywidgets logs exceptions raised in button callbacks instead of
raising them).
"""

import json
import logging

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

import ipywidgets
from conftest import two_level_rs2_boundary

from ptcheck import Model
from ptcheck.errors import DegenerateLevelError
from ptcheck.models import jaynes_cummings, rabi
from ptcheck.quantities import Quantity
from ptcheck.widgets import Dashboard, DivergencePanel, ErrorsPanel, LevelsPanel, PairsPanel, parse_params
from ptcheck.widgets._text import fmt_error

OPTS = dict(coupling_range=(0.0, 0.8), n_points=17, orders=(1, 2), raise_errors=True, canvas="image")


def _swallowed(caplog) -> list[str]:
    return [r.getMessage() for r in caplog.records if "Exception in callback" in r.getMessage()]


@pytest.fixture(autouse=True)
def no_swallowed_callback_errors(caplog):
    """Fail any test in which a widget callback raised and ipywidgets only logged it."""
    caplog.set_level(logging.WARNING)
    yield
    assert _swallowed(caplog) == []


@pytest.fixture(scope="module")
def jc():
    return jaynes_cummings(n_photons=4)  # N = 8


@pytest.fixture
def levels_panel(jc):
    p = LevelsPanel(jc, levels=[(1, 0), (0, 1)], coupling=0.2, **OPTS)
    yield p
    p.close()


def two_level(v: float = 0.5) -> Model:
    return Model(np.diag([-0.5, 0.5]), [[0.0, v], [v, 0.0]], name="two-level")




# ---------------------------------------------------------------- the callback detector itself
def test_swallowed_callback_error_is_detected(caplog):
    # a callback that raises inside ipywidgets' button dispatcher is only logged: the detector must see it
    b = ipywidgets.Button()
    b.on_click(lambda _b: 1 / 0)
    b.click()
    assert len(_swallowed(caplog)) == 1
    caplog.clear()  # (so that this deliberate case does not fail the autouse check)


# ---------------------------------------------------------------- verdict against brute force
def test_verdict_follows_the_two_level_rs2_boundary():
    lam1, lam5 = two_level_rs2_boundary(0.5, 0.01), two_level_rs2_boundary(0.5, 0.05)
    p = LevelsPanel(two_level(), levels=[0], orders=(2,), rtol=(0.01, 0.05), coupling_range=(0.0, 2.0), n_points=41,
                    treatment="nondegenerate",  # the series the brute force checks (no block)
                    raise_errors=True, canvas="image")
    try:
        (line,) = p.verdict.orders
        assert_allclose(line.reach, (lam1, lam5), rtol=5e-3)  # validity_boundary's default xrtol is 1e-3
        heavy = p.heavy_computations
        p.set_coupling(0.97 * lam1)
        assert p.verdict.orders[0].meets == (True, True) and "it meets both" in p.verdict.orders[0].text
        p.set_coupling(0.5 * (lam1 + lam5))
        assert p.verdict.orders[0].meets == (False, True)
        assert "it meets 5 %, not 1 %" in p.verdict.orders[0].text and "◐" in p.banner.value
        p.set_coupling(1.03 * lam5)
        assert p.verdict.orders[0].meets == (False, False) and "it meets neither" in p.verdict.orders[0].text
        assert f"λ* = {lam1:.3g}" in p.banner.value and f"λ* = {lam5:.3g}" in p.banner.value
        assert p.heavy_computations == heavy  # the banner follows the coupling without engine work
    finally:
        p.close()


def test_verdict_on_the_negative_side_uses_that_side_s_boundary():
    lam1 = two_level_rs2_boundary(0.5, 0.01)  # E(−λ) = E(λ) for this model: the same |λ*| on both sides
    p = LevelsPanel(two_level(), levels=[0], orders=(2,), rtol=0.01, coupling_range=(-1.0, 1.0), n_points=41,
                    treatment="nondegenerate", raise_errors=True, canvas="image")
    try:
        p.set_coupling(-0.95 * lam1)
        assert p.verdict.orders[0].meets == (True,)
        assert f"down to λ* = −{lam1:.3g}" in p.verdict.orders[0].text
        p.set_coupling(-1.05 * lam1)
        assert p.verdict.orders[0].meets == (False,)
    finally:
        p.close()


def test_single_tolerance_sentence_and_physical_coupling():
    m = Model(np.diag([-0.5, 0.5]), [[0.0, 0.5], [0.5, 0.0]], name="two-level", coupling_scale=66.0,
              coupling_unit="MHz")  # λ = 1 is g = 66 MHz
    lam1 = two_level_rs2_boundary(0.5, 0.01)
    p = LevelsPanel(m, levels=[0], orders=(2,), rtol=0.01, coupling_range=(0.0, 1.0), n_points=41, raise_errors=True,
                    treatment="nondegenerate",
                    canvas="image")
    try:
        p.set_coupling(0.5)
        text = p.verdict.orders[0].text
        assert text.startswith(f"order 2 meets 1 % up to λ* = {lam1:.3g} (g = {66 * lam1:.3g} MHz)")
        assert text.endswith("at λ = 0.5 (g = 33 MHz) it does not.")
        assert "g = 33 MHz" in p.controls.coupling_physical.value
        assert "coupling (MHz)" in [c.get_xlabel() for c in p.artists.ax.child_axes]  # the figure's physical axis
        p.set_coupling(0.1)
        assert p.verdict.orders[0].text.endswith("at λ = 0.1 (g = 6.6 MHz) it does.")
    finally:
        p.close()


# ---------------------------------------------------------------- figure and readout at the exact coupling
def test_levels_panel_shows_the_comparison(levels_panel):
    p = levels_panel
    r = p.result
    assert r.targets == ("|1,0⟩", "|0,1⟩") and r.order_names == ("order 1", "order 2")
    assert_array_equal(r.couplings, np.linspace(0.0, 0.8, 17))
    for ti in range(2):
        assert_array_equal(p.artists.exact[ti].get_ydata(), r.exact[ti])
    assert p.view.widget.value[:8] == b"\x89PNG\r\n\x1a\n"
    assert "At λ = 0.2" in p.readout.value
    assert p.message.value == "" and "Verdict for |1,0⟩" in p.banner.value


def test_markers_and_readout_at_the_exact_coupling(levels_panel):
    p = levels_panel
    before = p.heavy_computations
    png0, text0 = p.view.widget.value, p.readout.value
    p.controls.coupling.value = 0.4321  # between sweep points (step 0.05)
    assert p.heavy_computations == before
    assert_array_equal(p.artists.coupling_line.get_xdata(), [0.4321, 0.4321])
    mx, my = p.artists.coupling_markers.get_data()
    assert_array_equal(mx, [0.4321, 0.4321])
    for ti, line in enumerate(p.artists.exact):  # each marker sits on its drawn (straight-segment) line
        assert my[ti] == pytest.approx(np.interp(0.4321, line.get_xdata(), line.get_ydata()), rel=1e-12)
    assert p.view.widget.value != png0 and p.readout.value != text0
    assert "At λ = 0.4321" in p.readout.value
    exact_text = f"{np.interp(0.4321, p.result.couplings, p.result.exact[0]):.6g}".replace("-", "−")
    assert exact_text in p.readout.value


def test_error_markers_sit_on_the_log_axis_lines(jc):
    p = ErrorsPanel(jc, levels=[(1, 0)], tol=1e-5, **OPTS)
    try:
        p.set_coupling(0.3333)
        _, my = p.artists.coupling_markers.get_data()
        for line, y in zip(p.artists.lines, my):
            x, yl = line.get_xdata(), line.get_ydata()
            expected = np.exp(np.interp(0.3333, x, np.log(yl)))  # straight on a log axis
            assert y == pytest.approx(expected, rel=1e-10)
    finally:
        p.close()


def test_slider_steps_and_rounded_coupling_box(levels_panel):
    c = levels_panel.controls
    assert c.coupling.step == pytest.approx((0.8 - 0.0) / 100)  # arrow keys: a visible step
    c.coupling.value = 0.99600000001 * 0.8
    assert c.coupling_text.value == "0.7968"  # 4 significant digits, not the raw float
    c.coupling_text.value = "0.1234"  # a typed value is kept exactly, off the step grid
    assert levels_panel.coupling == 0.1234
    c.coupling.value = 0.12  # ... even when the browser's slider sends back its snapped value
    assert levels_panel.coupling == 0.1234 and "At λ = 0.1234" in levels_panel.readout.value
    c.coupling.value = 0.2  # a real move
    assert levels_panel.coupling == 0.2


def test_typed_coupling_typo_is_a_message_that_stays(levels_panel):
    p = levels_panel
    p.raise_errors = False
    p.controls.coupling_text.value = "0.3x"
    assert "The coupling was not changed" in p.message.value and "0.3x" in p.message.value
    p.controls.coupling_text.value = "5"
    assert "outside the range" in p.message.value
    p.controls.coupling.value = 0.4
    assert p.message.value == ""


# ---------------------------------------------------------------- heavy work only when needed
def test_changing_orders_or_levels_recomputes(levels_panel):
    p = levels_panel
    before = p.heavy_computations
    p.controls.orders.value = (1, 2, 4)
    assert p.heavy_computations == before + 2  # the sweep + the new order's boundary
    assert p.result.order_names == ("order 1", "order 2", "order 4")
    assert len(p.artists.perturbative[0]) == 3
    p.controls.levels.value = (1,)
    assert p.result.targets == ("|1,0⟩",)
    assert p.controls.focus.options == ("|1,0⟩",)
    n = p.heavy_computations
    p.controls.shift.value = True  # redraw only
    assert p.heavy_computations == n
    assert_array_equal(p.artists.exact[0].get_ydata(), p.result.exact[0] - p.result.unperturbed[0])
    assert "shift E(λ) − E(0)" in p.readout.value


def test_coupling_range_change_resamples(levels_panel):
    p = levels_panel
    p.controls.coupling_max.value = 0.4
    assert p.result.couplings[-1] == pytest.approx(0.4)
    assert p.controls.coupling.max == pytest.approx(0.4)
    assert p.controls.coupling.step == pytest.approx(0.004)
    assert p.coupling <= 0.4


def test_errors_panel_tolerances_and_boundaries(jc):
    p = ErrorsPanel(jc, levels=[(1, 0)], tol=1e-5, **OPTS)
    try:
        assert [b.tol for b in p.boundaries] == [1e-5, 1e-5]
        assert p.progress.max == 1 + 2 and p.progress.value == 3  # sweep + one boundary per order
        assert p.progress.layout.visibility == "hidden"  # shown only while working
        assert_array_equal(p.artists.tolerance_line.get_ydata(), [1e-5, 1e-5])
        assert "energy units" in p.controls.tolerance_hint.value
        before = p.heavy_computations
        p.controls.tolerance.value = "1e-3, 1e-2"
        assert p.heavy_computations == before + 4  # one boundary per order and tolerance; the sweep is cached
        assert sorted({b.tol for b in p.boundaries}) == [1e-3, 1e-2]
        assert [ln.get_ydata()[0] for ln in p.artists.tolerance_lines] == [1e-3, 1e-2]  # both in the figure
        p.controls.tolerance_kind.value = True
        assert sorted({b.rtol for b in p.boundaries}) == [1e-5, 1e-4]  # "1e-3, 1e-2" read as percent
        assert "% of the exact shift E(λ) − E(0)" in p.controls.tolerance_hint.value
        assert p.artists.ax.get_ylabel().startswith("relative error")
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


def test_treatment_choices_come_from_the_engine(levels_panel):
    from ptcheck.treatment import TREATMENTS

    assert [v for _, v in levels_panel.controls.treatment.options] == list(TREATMENTS)


def test_derived_quantity_is_offered_by_name(jc):
    q = Quantity("qubit frequency", {(1, 0): 1.0, (0, 0): -1.0})
    p = LevelsPanel(jc, levels=[(0, 0)], quantities=[q], **OPTS)
    try:
        assert "qubit frequency" in [lab for lab, _ in p.controls.levels.options]
        assert p.result.targets == ("|0,0⟩", "qubit frequency")
        p.controls.focus.value = "qubit frequency"
        assert "of the exact value of qubit frequency" in p.controls.tolerance_hint.value
        assert {b.target for b in p.boundaries} == {"qubit frequency"}
    finally:
        p.close()


# ---------------------------------------------------------------- words: undefined errors, digits
def test_undefined_relative_error_reads_as_words(jc):
    # |0,0> of the Jaynes–Cummings model does not move: its relative error is undefined everywhere
    p = LevelsPanel(jc, levels=[(0, 0)], rtol=0.01, **OPTS)
    try:
        assert "undefined (shift ≈ 0)" in p.readout.value
        assert "nan" not in p.readout.value.lower() and "nan" not in p.banner.value.lower()
        assert all(o.meets == (None,) and "no verdict" in o.text for o in p.verdict.orders)
    finally:
        p.close()


def test_error_digits_never_read_equal_to_a_different_tolerance():
    assert fmt_error(1.04e-3, [1e-3], False) == "0.00104"
    assert fmt_error(1.0004e-3, [1e-3], False) == "0.0010004"
    assert fmt_error(0.0099999, [0.01], True) == "0.99999 %"
    assert fmt_error(1.0, [0.01], True) == "100 %"


# ---------------------------------------------------------------- model box: typos, failures, switches
def test_parameter_typo_shows_a_message_that_stays_and_the_shown_model_keeps_working(tmp_path):
    p = LevelsPanel("jaynes_cummings", model_params={"n_photons": 3}, **dict(OPTS, raise_errors=False))
    try:
        assert p.model.n == 6 and p.message.value == ""
        result = p.result
        p.controls.model_params.value = "n_photons=five"
        msg = p.message.value
        assert "The model was not changed" in msg and "n_photons" in msg and "five" in msg
        assert "Still showing jaynes_cummings(n_photons=3)" in msg
        p.refresh()  # the message stays
        assert p.message.value == msg
        assert "not applied" in p.controls.model_status.value
        heavy = p.heavy_computations
        p.controls.coupling.value = 0.55  # the shown model still moves
        assert_array_equal(p.artists.coupling_line.get_xdata(), [0.55, 0.55])
        assert p.heavy_computations == heavy and p.result is result
        paths = p.export(tmp_path)
        data = json.loads(paths[2].read_text(encoding="utf-8"))
        assert data["model_request"] == "jaynes_cummings(n_photons=3)" and data["n"] == 6
        assert data["matches_controls"] is False
        assert data["comparison"]["exact"] == result.exact.tolist()
        p.controls.model_params.value = "n_photons=4"
        assert p.model.n == 8 and p.message.value == "" and p.result.n == 8
        assert "not applied" not in p.controls.model_status.value
    finally:
        p.close()


def test_failed_build_lists_the_valid_parameters():
    p = LevelsPanel("jaynes_cummings", model_params={"n_photons": 3}, **dict(OPTS, raise_errors=False))
    try:
        p.controls.model_params.value = "n_photon=4"
        assert "jaynes_cummings has no parameter n_photon" in p.message.value
        assert "omega_q, omega_r, g, n_photons" in p.message.value
        assert "unexpected keyword" not in p.message.value
        p.controls.model_params.value = "n_photons=3, omega_q=-1"
        assert "omega_q must be &gt; 0" in p.message.value and p.model.n == 6
        p.raise_errors = True
        with pytest.raises(ValueError, match="model parameters must look like"):
            p.controls.model_params.value = "n_photons=="
    finally:
        p.close()
    with pytest.raises(ValueError, match="unknown model"):
        LevelsPanel("no such model", **OPTS)


def test_switching_builders_resets_the_parameters():
    p = LevelsPanel("jaynes_cummings", model_params={"n_photons": 3}, **OPTS)
    try:
        p.controls.model_name.value = "two_level"
        assert parse_params(p.controls.model_params.value) == {"delta": 1.0, "v": 0.5, "phase": 0.0}
        assert p.model.n == 2 and p.result.n == 2 and p.message.value == ""
        assert "two_level(delta=1.0, v=0.5, phase=0.0)" in p.controls.model_status.value
    finally:
        p.close()


# ---------------------------------------------------------------- failed requests and export
def test_export_after_a_failed_recompute_writes_one_consistent_state(levels_panel, tmp_path):
    p = levels_panel
    p.raise_errors = False
    shown = p.state
    p.controls.orders.value = (1, 2, 4)
    p.controls.tolerance.value = "1, x"  # fails: the previous answer stays, marked
    assert "Cannot compute this" in p.message.value and "1, x" in p.message.value
    assert p.state.settings.orders == (1, 2, 4) and p.stale
    assert "Previous answer" in p.stale_note.value and "Previous request" in p.banner.value
    p.controls.folder.value = str(tmp_path)
    p.controls.export_button.click()
    assert "written:" in p.controls.export_status.value and "previous answer" in p.controls.export_status.value
    assert "Cannot compute this" in p.message.value  # the error is still there
    data = json.loads((tmp_path / "ptcheck_levels_jaynes_cummings.json").read_text(encoding="utf-8"))
    assert data["settings"]["orders"] == data["comparison"]["orders"] == ["order 1", "order 2", "order 4"]
    assert data["settings"]["tolerances"] == ["1 %"] and data["matches_controls"] is False
    assert shown is not p.state  # the orders change itself had succeeded before the typo
    p.controls.tolerance.value = "1"
    assert p.message.value == "" and not p.stale and p.stale_note.value == ""


def test_export_refusal_is_a_message_beside_the_button(jc, tmp_path):
    p = LevelsPanel(jc, **dict(OPTS, raise_errors=False))
    try:
        p.controls.folder.value = str(tmp_path)
        p.controls.export_format.options = ("png", "svg", "pdf", "bmp")
        p.controls.export_format.value = "bmp"
        p.controls.export_button.click()
        assert "Not exported" in p.controls.export_status.value and "bmp" in p.controls.export_status.value
        assert not list(tmp_path.iterdir())
    finally:
        p.close()


@pytest.mark.parametrize("fmt", ["png", "svg", "pdf"])
def test_export_writes_figure_and_numbers(levels_panel, tmp_path, fmt):
    paths = levels_panel.export(tmp_path / "out", fmt)
    assert [p.suffix for p in paths] == [f".{fmt}", ".csv", ".json"]
    assert all(p.exists() and p.stat().st_size > 0 for p in paths)
    header = paths[1].read_text(encoding="utf-8").splitlines()[0]
    assert {"target", "order", "coupling", "exact", "perturbative", "abs_error", "rel_error"} <= set(header.split(","))
    data = json.loads(paths[2].read_text(encoding="utf-8"))
    assert data["settings"]["orders"] == ["order 1", "order 2"] and data["matches_controls"] is True
    assert [o["order"] for o in data["verdict"]["orders"]] == ["order 1", "order 2"]
    assert data["verdict"]["coupling"] == levels_panel.coupling
    assert data["comparison"]["exact"] == levels_panel.result.exact.tolist()


def test_export_button_reports_the_files(levels_panel, tmp_path):
    levels_panel.controls.folder.value = str(tmp_path)
    levels_panel.controls.export_button.click()
    assert "written:" in levels_panel.controls.export_status.value
    assert (tmp_path / "ptcheck_levels_jaynes_cummings.png").exists()


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


def test_pade_for_a_block_level_leaves_it_out_with_a_message():
    # |1,0> and |0,1> 50 MHz apart: a near-degenerate block (inside a larger parity sector of the Rabi model)
    near = rabi(omega_q=5.95, omega_r=6.0, n_photons=3)
    d = Dashboard(near, levels=[1], tol=1e-3, **dict(OPTS, orders=(2, "pade2/2"), treatment="block"))
    try:
        oi = d.result.order_names.index("order 2")  # the other order is compared
        assert np.all(np.isfinite(d.result.perturbative[0, oi]))
        assert "Padé[2/2]" in d.message.value and "Cannot compute" not in d.message.value
        verdicts = {o.order: o for o in d.verdict.orders}
        assert None not in verdicts["order 2"].meets
        assert "Padé[2/2]" not in verdicts or verdicts["Padé[2/2]"].meets == (None,)
        d.select("divergence")
        assert d.artists is not None and d.artists.discs  # the divergence tab is drawn
    finally:
        d.close()


def test_empty_selection_is_a_message(levels_panel):
    p = levels_panel
    p.raise_errors = False
    p.controls.orders.value = ()
    assert "No order selected" in p.message.value


def test_parse_params():
    assert parse_params("g=0.1, n_photons=8, rotating_wave=True") == {"g": 0.1, "n_photons": 8, "rotating_wave": True}
    assert parse_params("  ") == {}
    with pytest.raises(ValueError, match="must be a number, True/False or a quoted text; got abs"):
        parse_params("g=abs(1)")


# ---------------------------------------------------------------- dashboard and the other panels
def test_dashboard_computes_each_tab_once(jc, tmp_path):
    d = Dashboard(jc, **OPTS)
    try:
        assert d.heavy_computations == 1 + 2  # the sweep + one validity boundary per order (the verdict)
        d.select("errors")
        assert d.heavy_computations == 3
        assert d.artists.boundaries == tuple(b for b in d.boundaries if b.status in ("found", "fails_at_zero"))
        d.select("levels")
        d.controls.coupling.value = 0.5
        d.select("errors")  # markers caught up without engine work
        assert d.heavy_computations == 3
        assert_array_equal(d.artists.coupling_line.get_xdata(), [0.5, 0.5])
        d.select("divergence")
        assert d.heavy_computations == 4
        assert d.artists.labels == ("|0,0⟩", "|1,0⟩")
        d.controls.coupling.value = 0.7
        assert_array_equal(d.artists.coupling_marker.get_xdata(), [0.7])
        d.select("pairs")
        d.controls.coupling.value = 0.75
        assert d.views["pairs"].map.coupling == pytest.approx(0.75)
        assert d.heavy_computations == 4
        fig, rows, data = d.export(tmp_path)  # the diagram at the coupling shown, with its numbers
        assert fig.stat().st_size > 0 and json.loads(data.read_text(encoding="utf-8"))["mixing_map"]["coupling"] == 0.75
    finally:
        d.close()


def test_single_divergence_and_pairs_panels(jc):
    p = DivergencePanel(jc, series_order=12, **OPTS)
    q = PairsPanel(jc, **OPTS)
    try:
        assert p.divergence.order == 12 and p.artists.discs
        assert len(q.artists.lines) == len(q.views["pairs"].map.levels)  # the level diagram: one line per level
        # a coupling move updates the same artists in place (no clear, no redraw from scratch)
        art, heavy = q.artists, q.heavy_computations
        cells = [t.get_text() for t in art.table]
        q.controls.coupling.value = 0.75
        assert q.artists is art and q.views["pairs"].artists is art
        assert q.views["pairs"].map.coupling == pytest.approx(0.75)
        assert [t.get_text() for t in art.table] != cells  # the ranked ratios grow with λ
        assert q.heavy_computations == heavy
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
