"""Figures: the artists drawn carry exactly the numbers of the engine results, and read on a projector.

Plot tests (Agg backend, explicit Axes, figures closed): they check the
presentation layer, so the expected values are the result arrays handed to
the plot functions, not physics.  Physics checks live with the engine tests.
Where a figure shows a number of its own (a level's position in the pairs
diagram, a mixing ratio), it is recomputed here from the matrices with numpy.
"""

import xml.etree.ElementTree as ET

import matplotlib
import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.colors import to_hex
from matplotlib.figure import Figure
from numpy.testing import assert_allclose, assert_array_equal
from PIL import Image

from ptcheck import Model
from ptcheck.approximants import Pade
from ptcheck.compare import compare, validity_boundary
from ptcheck.convergence import convergence, divergence_map
from ptcheck.models import jaynes_cummings
from ptcheck.plots import (
    ORDER_COLORS,
    PADE_COLORS,
    SLIDE_SIZE,
    mixing_map,
    order_color,
    order_style,
    plot_divergence,
    plot_errors,
    plot_levels,
    plot_mixing_matrix,
    plot_pairs,
    save,
    update_pairs,
)

LAM = np.linspace(0.0, 0.8, 9)
ORDER_HEX = {to_hex(c) for c in ORDER_COLORS} | {to_hex(c) for c in PADE_COLORS}


@pytest.fixture(scope="module")
def jc():
    return jaynes_cummings(n_photons=4)  # N = 8; mixing ratio of |1,0>-|0,1> is 0.1 λ: below 0.1 on [0, 0.8]


@pytest.fixture(scope="module")
def result(jc):
    return compare(jc, [(0, 0), (1, 0)], [1, 2], LAM)


@pytest.fixture(scope="module")
def bounds(jc):
    return tuple(validity_boundary(jc, (1, 0), o, tol=1e-5, max_coupling=0.8) for o in (1, 2))


@pytest.fixture
def ax():
    fig = Figure(figsize=(9.6, 5.4), layout="constrained")
    return fig.add_subplot()


def slide_axes(**kw):
    """Axes of a figure drawn at slide size (as the report draws them)."""
    fig = Figure(figsize=SLIDE_SIZE, layout="constrained")
    return fig.add_subplot(**kw)


def drawn(fig):
    fig.draw_without_rendering()
    return fig.canvas.get_renderer() if hasattr(fig.canvas, "get_renderer") else fig._get_renderer()


def _x_extent(patch):
    return patch.get_x(), patch.get_x() + patch.get_width()


# ---------------------------------------------------------------------- levels
def test_levels_lines_hold_the_result_arrays(result, ax):
    fignums = plt.get_fignums()
    art = plot_levels(result, ax=ax, coupling=0.35)
    assert art.ax is ax and art.figure is ax.figure
    assert plt.get_fignums() == fignums  # no pyplot figure made when an Axes is given
    for ti in range(2):
        assert_array_equal(art.exact[ti].get_xdata(), LAM)
        assert_array_equal(art.exact[ti].get_ydata(), result.exact[ti])
        for oi in range(2):
            assert_array_equal(art.perturbative[ti][oi].get_ydata(), result.perturbative[ti, oi])
    assert_array_equal(art.coupling_line.get_xdata(), [0.35, 0.35])
    i = int(np.argmin(np.abs(LAM - 0.35)))
    assert_array_equal(art.coupling_markers.get_xdata(), [LAM[i], LAM[i]])
    assert_array_equal(art.coupling_markers.get_ydata(), result.exact[:, i])
    cap = art.caption.get_text()
    assert "\n" not in cap
    for piece in ("Jaynes–Cummings", "N = 8", "|0,0⟩", "|1,0⟩"):
        assert piece in cap
    assert [t.get_text() for t in art.legend.get_texts()] == ["order 1", "order 2", "exact"]


def test_every_level_has_a_direct_label_at_its_curve_end(jc):
    r = compare(jc, [(0, 0), (1, 0), (0, 1), (1, 1)], [2], LAM)
    art = plot_levels(r, ax=slide_axes(), shift=True)
    assert [t.get_text() for t in art.labels] == list(r.targets)
    # each label sits at the height of its exact curve's last point unless it had to make room for a neighbour
    ax = art.ax
    lo, hi = ax.get_ylim()
    heights = [t.xy[1] for t in art.labels]
    assert min(np.diff(sorted(heights))) > 0  # no two labels on top of each other
    for t, line in zip(art.labels, art.exact):
        want = (line.get_ydata()[-1] - lo) / (hi - lo)
        assert abs(t.xy[1] - want) < 0.2
    # exact curves and their labels never take an order's colour
    for line, t in zip(art.exact, art.labels):
        assert to_hex(line.get_color()) not in ORDER_HEX and to_hex(t.get_color()) not in ORDER_HEX
    plt.close(art.figure)


def test_levels_shift_subtracts_the_unperturbed_value(result, ax):
    art = plot_levels(result, ax=ax, shift=True, targets=["|1,0⟩"], orders=[2])
    assert art.targets == ("|1,0⟩",) and art.orders == ("order 2",)
    assert_allclose(art.exact[0].get_ydata(), result.exact[1] - result.unperturbed[1], rtol=0, atol=0)
    assert_allclose(art.perturbative[0][0].get_ydata(), result.perturbative[1, 1] - result.unperturbed[1], rtol=0, atol=0)
    assert art.coupling_line is None


def test_levels_rejects_unknown_target_and_order(result, ax):
    with pytest.raises(ValueError, match="unknown target"):
        plot_levels(result, ax=ax, targets=["|5,5⟩"])
    with pytest.raises(ValueError, match="was not compared"):
        plot_levels(result, ax=ax, orders=[7])
    with pytest.raises(TypeError, match="needs a ComparisonResult"):
        plot_errors({"exact": [1.0]}, ax=ax)
    with pytest.raises(TypeError, match="needs a MixingMap"):
        plot_pairs(result, ax=ax)


def test_new_figure_only_without_axes_and_it_is_16_by_9(result):
    art = plot_levels(result)
    try:
        w, h = art.figure.get_size_inches()
        assert w / h == pytest.approx(16 / 9, rel=1e-3)
    finally:
        plt.close(art.figure)


# ---------------------------------------------------------------------- one colour per order
def test_an_order_keeps_its_colour_whatever_else_is_drawn(jc, result, bounds):
    # the same order, selected alone or among others, in the levels and errors figures
    a = plot_levels(result, ax=slide_axes(), orders=[1, 2])
    b = plot_levels(result, ax=slide_axes(), orders=[2])
    c = plot_errors(result, bounds, target="|1,0⟩", orders=[2, 1], ax=slide_axes())
    blue = order_color(2)
    assert a.perturbative[0][1].get_color() == b.perturbative[0][0].get_color() == blue
    assert c.lines[0].get_color() == blue and c.lines[1].get_color() == order_color(1)
    # ... and on the validity-boundary marks of the divergence view
    dmap = divergence_map(jc, [(1, 0)], order=12, couplings=np.linspace(0, 1, 5), orders=[2, 1], tol=1e-5)
    d = plot_divergence(dmap, ax=slide_axes())
    assert [m.get_color() for m in d.boundaries] == [order_color(2), order_color(1)]
    # distinct orders get distinct colours; Padé approximants have colours of their own
    assert len({order_color(k) for k in range(1, 7)}) == 6
    assert order_color(Pade(2, 2)) in PADE_COLORS and order_color(Pade(2, 2)) not in ORDER_COLORS
    assert order_style("order 4") == order_style(4) and order_style("Padé[2/1]") == order_style(Pade(2, 1))
    for art in (a, b, c, d):
        plt.close(art.figure)


# ---------------------------------------------------------------------- errors
def test_errors_lines_tolerance_boundaries_and_shading(result, bounds, ax):
    art = plot_errors(result, bounds, target="|1,0⟩", coupling=0.5)
    for oi, line in enumerate(art.lines):
        want = np.array(result.abs_error[1, oi], dtype=float)
        want[~(want > 0)] = np.nan  # zero error at λ = 0 is left out of the log axis
        assert_array_equal(line.get_ydata(), want)
    assert ax.get_yscale() == "linear"  # the fixture axes was not used
    assert art.ax.get_yscale() == "log"
    assert_array_equal(art.tolerance_line.get_ydata(), [1e-5, 1e-5])
    found = [b for b in bounds if b.status == "found"]
    assert found, "test set-up: expected the order-1 and order-2 boundaries inside [0, 0.8]"
    assert len(art.boundary_lines) == len(found)
    for b, line in zip(found, art.boundary_lines):
        assert_array_equal(line.get_xdata(), [b.coupling, b.coupling])
        assert line.get_ydata()[1] == 1e-5  # the segment rises to its tolerance
        assert line.get_color() == order_color(b.order)
    (band,) = art.shades  # one band: errors above the tolerance, explained in the legend
    assert band.get_path().transformed(band.get_patch_transform()).get_extents().y0 == pytest.approx(1e-5)
    texts = [t.get_text() for t in art.legend.get_texts()]
    assert "error above a tolerance" in texts
    for b in found:
        assert any(t.startswith(f"order {b.order}: λ* = {abs(b.coupling):.3g}") for t in texts)
    assert "|1,0⟩" in art.ax.get_ylabel() and "absolute" in art.ax.get_ylabel()
    plt.close(art.figure)


def test_errors_relative_axis_says_whose_error_relative_to_what(result, ax):
    art = plot_errors(result, target=0, error="relative", tol=0.01, ax=ax)
    want = np.array(result.rel_error[0, 1], dtype=float)
    want[~(want > 0)] = np.nan
    assert_array_equal(art.lines[1].get_ydata(), want)
    assert art.boundary_lines == ()
    label = art.ax.get_ylabel()
    assert "relative error of |0,0⟩" in label and "exact shift" in label
    assert "tolerance 1 %" in [t.get_text() for t in art.legend.get_texts()]


def test_several_tolerances_each_boundary_tied_to_its_own(jc, result):
    bs = [validity_boundary(jc, (1, 0), 2, tol=t, max_coupling=0.8) for t in (1e-6, 1e-5)]
    assert all(b.status == "found" for b in bs), "test set-up: both boundaries inside [0, 0.8]"
    art = plot_errors(result, bs, target="|1,0⟩", orders=[2], ax=slide_axes())
    assert art.tolerances == (1e-6, 1e-5)
    assert [ln.get_ydata()[0] for ln in art.tolerance_lines] == [1e-6, 1e-5]
    for b, seg in zip(bs, art.boundary_lines):
        k = art.tolerances.index(b.tol)
        assert seg.get_ydata()[1] == b.tol  # rises to its own tolerance line ...
        assert seg.get_linestyle() == art.tolerance_lines[k].get_linestyle()  # ... in that line's dash pattern
        assert seg.get_label().endswith(f"at {b.tol:.2g}")
    assert len(art.shades) == 2
    with pytest.raises(ValueError, match="tol must be a positive number"):
        plot_errors(result, tol=[0.01, -1], ax=slide_axes())
    plt.close(art.figure)


def test_physical_coupling_axis_and_boundaries_in_both_units(result, bounds):
    art = plot_errors(result, bounds, target="|1,0⟩", coupling_scale=66.0, coupling_unit="MHz", ax=slide_axes())
    (sec,) = art.ax.child_axes
    assert sec.get_xlabel() == "coupling (MHz)"
    b = next(b for b in bounds if b.status == "found")
    text = next(t.get_text() for t in art.legend.get_texts() if t.get_text().startswith(f"order {b.order}: λ*"))
    assert f"({abs(b.coupling) * 66.0:.3g} MHz)" in text
    # read from the result when it carries a physical coupling (getattr: the Model attribute names)
    lv = plot_levels(_with(result, coupling_scale=66.0, coupling_unit="MHz"), ax=slide_axes())
    assert [a.get_xlabel() for a in lv.ax.child_axes] == ["coupling (MHz)"]
    plt.close(art.figure)
    plt.close(lv.figure)


class _with:
    """The result with extra attributes (as a Model/result with coupling_scale would have)."""

    def __init__(self, base, **extra):
        self._base, self.__dict__["_extra"] = base, extra

    def __getattr__(self, name):
        return self._extra[name] if name in self._extra else getattr(self._base, name)


def test_errors_rejects_unknown_kind(result, ax):
    with pytest.raises(ValueError, match="error must be one of"):
        plot_errors(result, ax=ax, error="squared")


# ---------------------------------------------------------------------- legends and captions at slide size
@pytest.mark.parametrize("kind", ["levels", "errors"])
def test_legend_framed_inside_the_figure_and_off_the_data(result, bounds, kind):
    ax = slide_axes()
    art = (plot_levels(result, ax=ax, coupling=0.4) if kind == "levels"
           else plot_errors(result, bounds, target="|1,0⟩", coupling=0.4, ax=ax))
    fig = art.figure
    renderer = drawn(fig)
    leg = art.legend
    assert leg.get_frame_on() and 0.5 < leg.get_frame().get_alpha() < 1.0
    box = leg.get_window_extent(renderer)
    assert fig.bbox.contains(box.x0, box.y0) and fig.bbox.contains(box.x1, box.y1)
    curves = [ln for ln in ax.get_lines() if len(ln.get_xdata()) == LAM.size]  # the data curves (not markers, not axvlines)
    pts = np.vstack([ln.get_transform().transform(np.column_stack([ln.get_xdata(), ln.get_ydata()])) for ln in curves])
    pts = pts[np.all(np.isfinite(pts), axis=1)]
    inside = (pts[:, 0] > box.x0) & (pts[:, 0] < box.x1) & (pts[:, 1] > box.y0) & (pts[:, 1] < box.y1)
    assert not inside.any(), f"{inside.sum()} data points under the legend"
    plt.close(fig)


def test_caption_is_one_line_narrower_than_the_slide():
    long = Model(np.diag([0.0, 1.0, 2.1]), [[0, 0.1, 0], [0.1, 0, 0.1], [0, 0.1, 0]],
                 name="a model with a rather long descriptive name to push the caption past the width of a slide")
    r = compare(long, [0, 1, 2], [1, 2, 3], LAM)
    art = plot_levels(r, ax=slide_axes(), shift=True)
    assert "\n" not in art.caption.get_text()
    ext = art.caption.get_window_extent(drawn(art.figure))
    assert ext.width < art.figure.bbox.width and ext.x1 <= art.figure.bbox.x1 + 1
    assert art.caption.get_text().startswith("levels · a model")  # shortened at a separator, never mid-formula
    # a screen figure keeps the proportions when exported as a slide (fonts scale with the width)
    fig = Figure(figsize=(9.6, 5.4), layout="constrained")
    small = plot_levels(r, ax=fig.add_subplot(), shift=True)
    ext = small.caption.get_window_extent(drawn(fig))
    assert "\n" not in small.caption.get_text() and ext.width < fig.bbox.width
    plt.close(art.figure)


# ---------------------------------------------------------------------- divergence view
@pytest.fixture(scope="module")
def two_level():
    # closed form (two-level eigenvalues): EPs at λ = ±iΔ/(2|v|) = ±2i, radius 2 for both levels
    return Model(np.diag([0.0, 1.0]), [[0, 0.25], [0.25, 0]], name="two-level")


def test_divergence_map_artists(two_level, ax):
    dmap = divergence_map(two_level, [0, 1], order=16, couplings=np.linspace(0, 3, 7))
    art = plot_divergence(dmap, coupling=1.0, model_name="two-level", ax=ax)
    for i in range(2):
        assert art.discs[i].get_radius() == dmap.radius[i]
        assert art.kato_discs[i].get_radius() == dmap.kato_bound[i]
        assert_array_equal(art.exceptional_points[i].get_xdata(), dmap.exceptional_points[i].real)
        assert_array_equal(art.exceptional_points[i].get_ydata(), dmap.exceptional_points[i].imag)
        for line in art.regimes[i]:
            x, y = line.get_xdata(), line.get_ydata()
            assert_array_equal(x[np.isfinite(y)], dmap.couplings[dmap.regime[i] == line.get_gid()])
    assert_array_equal(art.coupling_marker.get_xdata(), [1.0])
    assert "two-level" in art.caption.get_text()


def test_coinciding_discs_share_one_circle_named_for_both_levels(two_level):
    # both levels of a two-level system have the same radius 2 (closed form above): one circle, both names
    art = plot_divergence([convergence(two_level, 0, 16), convergence(two_level, 1, 16)], ax=slide_axes())
    assert art.discs[0] is art.discs[1]
    texts = [t.get_text() for t in art.legend.get_texts()]
    assert any("n=0" in t and "n=1" in t and t.startswith("convergence radius 2") for t in texts)
    for c in art.discs + art.kato_discs:  # level items never wear an order colour
        assert to_hex(c.get_edgecolor()) not in ORDER_HEX
    # the view is wider than tall (16:9 figure) and circles stay round (equal aspect)
    (x0, x1), (y0, y1) = art.ax.get_xlim(), art.ax.get_ylim()
    assert (x1 - x0) >= (y1 - y0) * 0.99 and art.ax.get_aspect() == 1.0
    assert "exceptional points" in texts  # ±2i is in view
    plt.close(art.figure)


def test_far_discs_and_exceptional_points_out_of_view_are_said_so():
    # a weakly coupled distant third level: the series of level 2 converges far out (radius ~118, EPs near ±118)
    # while level 0 has its EPs at ±2i (the two-level closed form ±iΔ/(2|v|) with Δ = 1, v = 0.25, barely perturbed)
    m = Model(np.diag([0.0, 1.0, 30.0]), [[0, 0.25, 0.01], [0.25, 0, 0], [0.01, 0, 0]], name="far")
    rs = [convergence(m, k, 16) for k in (0, 2)]
    art = plot_divergence(rs, coupling=0.2, ax=slide_axes())
    texts = [t.get_text() for t in art.legend.get_texts()]
    x0, x1 = art.ax.get_xlim()
    y1 = art.ax.get_ylim()[1]
    assert rs[1].radius > np.hypot(max(abs(x0), abs(x1)), y1), "test set-up: level 2's disc lies beyond the view"
    assert any(t.startswith(f"convergence radius {rs[1].radius:.3g}") and t.endswith("(outside the view)") for t in texts)
    assert not art.discs[1].get_fill() and art.discs[1].get_facecolor()[3] == 0  # a far disc fills nothing
    assert art.out_of_view and any(t.startswith("exceptional points beyond the view: ±118") for t in texts)
    for mark in art.out_of_view:  # arrowheads sit on the edge of the view
        x, y = mark.get_xdata()[0], mark.get_ydata()[0]
        assert np.isclose(abs(y), y1) or np.isclose(x, x0) or np.isclose(x, x1)
    assert "exceptional points" in texts  # ±2i is in view
    plt.close(art.figure)


def test_divergence_from_convergence_results_has_no_strips(two_level, ax):
    r = convergence(two_level, 0, 16)
    art = plot_divergence(r, ax=ax)
    assert art.regimes == () and art.coupling_marker is None
    assert art.discs[0].get_radius() == r.radius
    with pytest.raises(TypeError, match="DivergenceMap or ConvergenceResult"):
        plot_divergence([1, 2], ax=ax)


# ---------------------------------------------------------------------- pairs
@pytest.fixture(scope="module")
def three_level():
    return Model(np.diag([0.0, 1.0, 1.05]), [[0, 0.1, 0], [0.1, 0, 0.1], [0, 0.1, 0]], name="three-level")


def test_mixing_map_ratios(three_level):
    mm = mixing_map(three_level, 0.5)
    # definition |λ V_ln| / |E_l - E_n| (ptcheck.degeneracy): 0.5*0.1/1 = 0.05, 0.5*0.1/0.05 = 1
    assert_allclose(mm.ratios[0, 1], 0.05)
    assert_allclose(mm.ratios[1, 2], 1.0)
    assert np.isnan(mm.ratios[0, 2]) and np.isnan(mm.ratios[1, 1])
    assert [(p.l, p.n) for p in mm.pairs] == [(1, 2)]  # 0.05 < threshold 0.1
    assert [b.levels for b in mm.blocks if b.size > 1] == [(1, 2)]
    rows = mm.ranked()
    assert [r["levels"] for r in rows] == [("n=1", "n=2"), ("n=0", "n=1")]
    assert rows[0]["ratio"] == pytest.approx(1.0) and rows[0]["flagged"] and rows[0]["block"] == "B1"
    assert rows[1]["gap"] == pytest.approx(1.0) and rows[1]["element"] == pytest.approx(0.1)


def test_pairs_diagram_levels_arcs_blocks_and_table(three_level):
    fig = Figure(figsize=(9.6, 5.4), layout="constrained")
    gs = fig.add_gridspec(1, 2, width_ratios=(3, 2))
    ax, tax = fig.add_subplot(gs[0, 0]), fig.add_subplot(gs[0, 1])
    lam = 0.5
    mm = mixing_map(three_level, lam)
    art = plot_pairs(mm, ax=ax, table_ax=tax)
    # each level is a horizontal segment at E_n + λ V_nn (numpy, from the matrices)
    want = np.diag(three_level.hamiltonian(lam).toarray() if hasattr(three_level.hamiltonian(lam), "toarray")
                   else three_level.hamiltonian(lam))
    for line, e in zip(art.lines, want):
        y = line.get_ydata()
        assert y[0] == y[1] == pytest.approx(e)
    assert [t.get_text() for t in art.level_labels] == ["n=0", "n=1", "n=2"]
    # arcs: one per directly coupled pair; red and solid at/above the threshold, shown from threshold/10
    assert sorted(art.arc_pairs) == [(0, 1), (1, 2)]
    arcs = dict(zip(art.arc_pairs, art.arcs))
    assert arcs[(1, 2)].get_visible() and to_hex(arcs[(1, 2)].get_color()) == "#b2182b"  # ratio 1 >= 0.1
    assert arcs[(0, 1)].get_visible() and arcs[(0, 1)].get_linestyle() != "-"  # 0.01 <= 0.05 < 0.1
    assert arcs[(1, 2)].get_linewidth() > arcs[(0, 1)].get_linewidth()
    shown = [b for b in art.block_outlines if b.get_visible()]
    assert len(shown) == 1 and [t.get_text() for t in art.block_labels if t.get_visible()] == ["B1"]
    assert art.table[0].get_text().startswith("n=1 – n=2")
    legend = [t.get_text() for t in art.legend.get_texts()]
    assert legend[0] == "mixing ratio ≥ 0.1 (threshold)"
    plt.close(fig)


def test_update_pairs_moves_the_same_artists_in_place(three_level):
    art = plot_pairs(mixing_map(three_level, 0.5))
    before = (list(art.lines), list(art.arcs), list(art.block_outlines), list(art.table), len(art.ax.get_children()))
    arc01 = dict(zip(art.arc_pairs, art.arcs))[(0, 1)]
    mm = update_pairs(art, 3.0)  # ratio of n=0–n=1 becomes 3·0.1/1 = 0.3: above the threshold
    after = (list(art.lines), list(art.arcs), list(art.block_outlines), list(art.table), len(art.ax.get_children()))
    assert all(a is b for a, b in zip(before[0] + before[1] + before[2] + before[3], after[0] + after[1] + after[2] + after[3]))
    assert before[4] == after[4]  # nothing added or removed
    assert mm.coupling == 3.0 and mm.ratios[0, 1] == pytest.approx(0.3)  # |λ V_01| / |E_0 − E_1| = 3·0.1/1
    assert to_hex(arc01.get_color()) == "#b2182b" and arc01.get_linestyle() == "-"
    h = three_level.hamiltonian(3.0)
    want = np.diag(h.toarray() if hasattr(h, "toarray") else h)
    assert [ln.get_ydata()[0] for ln in art.lines] == pytest.approx(list(want))
    assert "λ = 3" in art.caption.get_text() and "λ = 3" in art.table[-1].get_text()
    with pytest.raises(TypeError, match="PairArtists"):
        update_pairs("not artists", 1.0)
    plt.close(art.figure)


def test_mixing_matrix_view(three_level, ax):
    mm = mixing_map(three_level, 0.5)
    art = plot_mixing_matrix(mm, ax=ax)
    shown = art.image.get_array()
    assert_array_equal(np.ma.getmaskarray(shown), np.isnan(mm.ratios))
    assert_allclose(shown.compressed(), mm.ratios[np.isfinite(mm.ratios)])
    assert len(art.flagged) == 2
    assert sorted(r.get_xy() for r in art.flagged) == [(0.5, 1.5), (1.5, 0.5)]
    assert len(art.block_outlines) == 1 and art.block_outlines[0].get_xy() == (0.5, 0.5)
    assert art.block_outlines[0].get_width() == 2
    assert [t.get_text() for t in art.block_labels] == ["B1", "B1"]
    assert "B1 = block {n=1, n=2}" in art.caption.get_text()


def test_mixing_matrix_exact_degeneracy_drawn_over_the_scale(ax):
    m = Model(np.diag([0.0, 1.0, 1.0]), [[0, 0.1, 0.1], [0.1, 0.2, 0.1], [0.1, 0.1, 0]])
    mm = mixing_map(m, 0.1)
    assert np.isinf(mm.ratios[1, 2])
    art = plot_mixing_matrix(mm, ax=ax)
    assert art.image.get_array()[1, 2] > art.image.norm.vmax  # "over" colour


# ---------------------------------------------------------------------- export
@pytest.mark.parametrize("fmt", ["png", "svg", "pdf"])
def test_save_writes_a_16_by_9_slide(result, tmp_path, fmt):
    fig = Figure(figsize=(9.6, 5.4), layout="constrained")
    art = plot_levels(result, ax=fig.add_subplot(), coupling=0.4)
    size0 = tuple(fig.get_size_inches())
    cap0 = art.caption.get_fontsize()
    out = save(art, tmp_path / f"slide.{fmt}")
    data = out.path.read_bytes()
    assert out.size_inches == SLIDE_SIZE
    assert out.min_fontsize >= 12.0
    if fmt == "png":
        assert data[:8] == b"\x89PNG\r\n\x1a\n"
        with Image.open(out.path) as im:
            w, h = im.size
        assert w / h == pytest.approx(16 / 9, rel=2e-3)
        assert w == int(SLIDE_SIZE[0] * 150)
    elif fmt == "svg":
        root = ET.fromstring(data)
        assert root.tag.endswith("svg")
        assert float(root.get("width").rstrip("pt")) / float(root.get("height").rstrip("pt")) == pytest.approx(16 / 9, rel=2e-3)
    else:
        assert data[:5] == b"%PDF-"
    assert tuple(fig.get_size_inches()) == size0  # the figure on screen is left as it was
    assert art.caption.get_fontsize() == cap0


def test_save_rejects_bad_format_and_missing_folder(result, tmp_path):
    fig = Figure()
    plot_levels(result, ax=fig.add_subplot())
    with pytest.raises(ValueError, match="format must be one of"):
        save(fig, tmp_path / "slide.jpg")
    with pytest.raises(ValueError, match="does not exist"):
        save(fig, tmp_path / "nowhere" / "slide.png")
    with pytest.raises(TypeError, match="matplotlib Figure"):
        save("figure", tmp_path / "slide.png")


def test_styling_leaves_global_rcparams_alone(result, bounds, ax):
    before = dict(matplotlib.rcParams)
    plot_levels(result, ax=ax)
    plot_errors(result, bounds, target="|1,0⟩", ax=Figure().add_subplot())
    assert dict(matplotlib.rcParams) == before


def test_avoided_crossing_is_marked_at_its_coupling(ax):
    # levels 1 and 2 cross at λ = 0.2 in H0 + λ diag(V) (1 + 0.5 λ = 1.2 − 0.5 λ); V_12 = 0.01 opens a gap
    m = Model(np.diag([0.0, 1.0, 1.2]), [[0, 0.02, 0], [0.02, 0.5, 0.01], [0, 0.01, -0.5]], name="crossing")
    r = compare(m, [1], [2], np.linspace(0, 0.6, 13))
    assert r.avoided_crossings, "test set-up: the exact sweep should report the avoided crossing"
    art = plot_levels(r, ax=ax)
    lines = [a for a in art.crossings if hasattr(a, "get_xdata")]
    labels = [a for a in art.crossings if hasattr(a, "get_text")]
    assert [ln.get_xdata()[0] for ln in lines] == [ac.coupling for ac in r.avoided_crossings]
    assert lines[0].get_xdata()[0] == pytest.approx(0.2, abs=0.01)
    assert "avoided crossing n=1–n=2" in labels[0].get_text()


def test_an_order_with_no_value_draws_an_empty_line_not_an_error():
    # a Padé order asked for a level of an exactly degenerate group has no value (no scalar series): the
    # figures must still draw the other orders and keep a legend entry for it (common practice, no source)
    import numpy as np

    from ptcheck import Model, compare
    from ptcheck.plots import plot_errors, plot_levels

    m = Model(np.diag([0.0, 0.0, 1.0]), [[0, .1, .2], [.1, 0, .3], [.2, .3, 0]], name="degenerate pair (invented)")
    r = compare(m, [0], [2, "pade1/1"], np.linspace(0, .5, 11))
    assert r.treatments == ("degenerate",) and np.isnan(r.perturbative[0, 1]).all()
    for art in (plot_levels(r), plot_errors(r)):
        art.figure.canvas.draw()
        labels = [t.get_text() for t in art.figure.axes[0].get_legend().get_texts()]
        assert any("Padé" in t for t in labels) and any("order 2" in t for t in labels)
        plt.close(art.figure)
