"""Figures: the artists drawn carry exactly the numbers of the engine results.

Plot tests (Agg backend, explicit Axes, figures closed): they check the
presentation layer, so the expected values are the result arrays handed to
the plot functions, not physics.  Physics checks live with the engine tests.
"""

import xml.etree.ElementTree as ET

import matplotlib
import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.figure import Figure
from numpy.testing import assert_allclose, assert_array_equal
from PIL import Image

from ptcheck import Model
from ptcheck.compare import compare, validity_boundary
from ptcheck.convergence import divergence_map
from ptcheck.models import jaynes_cummings
from ptcheck.plots import (
    SLIDE_SIZE,
    mixing_map,
    plot_divergence,
    plot_errors,
    plot_levels,
    plot_pairs,
    save,
)

LAM = np.linspace(0.0, 0.8, 9)


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
    fig = Figure(figsize=(9.6, 5.4))
    return fig.add_subplot()


def _x_extent(patch):
    return patch.get_x(), patch.get_x() + patch.get_width()


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
    cap = art.caption.get_text().replace("\n", " ")
    for piece in ("Jaynes–Cummings", "N = 8", "|0,0⟩", "|1,0⟩", "orders 1, 2", "λ ∈ [0, 0.8]"):
        assert piece in cap
    assert [t.get_text() for t in art.legend.get_texts()] == ["order 1", "order 2", "exact"]


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
    assert len(art.boundary_lines) == len(art.shades) == len(found)
    for b, line, shade in zip(found, art.boundary_lines, art.shades):
        assert_array_equal(line.get_xdata(), [b.coupling, b.coupling])
        assert _x_extent(shade) == pytest.approx((b.coupling, 0.8))
    cap = art.caption.get_text().replace("\n", " ")
    assert "tol = 1e-05 (absolute)" in cap and "|1,0⟩" in cap
    for b in found:
        assert f"valid to |λ| = {abs(b.coupling):.3g}" in cap
    plt.close(art.figure)


def test_errors_on_given_axes_relative(result, ax):
    art = plot_errors(result, target=0, error="relative", tol=0.01, ax=ax)
    want = np.array(result.rel_error[0, 1], dtype=float)
    want[~(want > 0)] = np.nan
    assert_array_equal(art.lines[1].get_ydata(), want)
    assert art.boundary_lines == () and art.shades == ()
    assert "tol = 0.01 (relative)" in art.caption.get_text().replace("\n", " ")


def test_errors_rejects_unknown_kind(result, ax):
    with pytest.raises(ValueError, match="error must be one of"):
        plot_errors(result, ax=ax, error="squared")


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


def test_divergence_from_convergence_results_has_no_strips(two_level, ax):
    from ptcheck.convergence import convergence

    r = convergence(two_level, 0, 16)
    art = plot_divergence(r, ax=ax)
    assert art.regimes == () and art.coupling_marker is None
    assert art.discs[0].get_radius() == r.radius
    with pytest.raises(TypeError, match="DivergenceMap or ConvergenceResult"):
        plot_divergence([1, 2], ax=ax)


@pytest.fixture(scope="module")
def three_level():
    return Model(np.diag([0.0, 1.0, 1.05]), [[0, 0.1, 0], [0.1, 0, 0.1], [0, 0.1, 0]], name="three-level")


def test_mixing_map_and_pairs_figure(three_level, ax):
    mm = mixing_map(three_level, 0.5)
    # definition |λ V_ln| / |E_l - E_n| (ptcheck.degeneracy): 0.5*0.1/1 = 0.05, 0.5*0.1/0.05 = 1
    assert_allclose(mm.ratios[0, 1], 0.05)
    assert_allclose(mm.ratios[1, 2], 1.0)
    assert np.isnan(mm.ratios[0, 2]) and np.isnan(mm.ratios[1, 1])
    assert [(p.l, p.n) for p in mm.pairs] == [(1, 2)]  # 0.05 < threshold 0.1
    assert [b.levels for b in mm.blocks if b.size > 1] == [(1, 2)]
    art = plot_pairs(mm, ax=ax)
    shown = art.image.get_array()
    assert_array_equal(np.ma.getmaskarray(shown), np.isnan(mm.ratios))
    assert_allclose(shown.compressed(), mm.ratios[np.isfinite(mm.ratios)])
    assert len(art.flagged) == 2
    assert sorted(r.get_xy() for r in art.flagged) == [(0.5, 1.5), (1.5, 0.5)]
    assert len(art.block_outlines) == 1 and art.block_outlines[0].get_xy() == (0.5, 0.5)
    assert art.block_outlines[0].get_width() == 2
    assert [t.get_text() for t in art.block_labels] == ["B1", "B1"]
    assert "B1 = block {n=1, n=2}" in art.caption.get_text().replace("\n", " ")


def test_mixing_map_exact_degeneracy_drawn_over_the_scale(ax):
    m = Model(np.diag([0.0, 1.0, 1.0]), [[0, 0.1, 0.1], [0.1, 0.2, 0.1], [0.1, 0.1, 0]])
    mm = mixing_map(m, 0.1)
    assert np.isinf(mm.ratios[1, 2])
    art = plot_pairs(mm, ax=ax)
    assert art.image.get_array()[1, 2] > art.image.norm.vmax  # "over" colour


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
