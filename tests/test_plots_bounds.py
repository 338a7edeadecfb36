"""Certified brackets in the errors and levels figures, and certified numbers printed toward safety.

Figures are checked against the result they draw (its own physics is tested in
test_bounds.py / test_reference_bounds.py) and, where a number is a
certificate, against the closed-form two-level model (Sakurai, Modern Quantum
Mechanics (1994), §5.1).
"""

import math
from decimal import Decimal

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from matplotlib.figure import Figure
from numpy.testing import assert_allclose

from ptcheck import Model, compare, validity_boundary
from ptcheck._format import fmt_certified_range, fmt_interval, fmt_toward
from ptcheck.plots import plot_errors, plot_levels


@pytest.fixture
def ax():
    fig = Figure(figsize=(9.6, 5.4))
    yield fig.add_subplot()
    fig.clear()


def two_level() -> Model:
    return Model(np.diag([-0.5, 0.5]), [[0.0, 0.5], [0.5, 0.0]], name="two-level")


LAM = np.linspace(0.0, 1.0, 21)


def num(text: str) -> float:
    return float(text.replace("−", "-"))


# ---------------------------------------------------------------- numbers printed toward safety
@given(st.floats(min_value=1e-8, max_value=1e8, allow_nan=False), st.integers(min_value=1, max_value=6))
def test_fmt_toward_never_overstates_a_certificate(x, digits):
    # common practice, no source: a certified lower end is rounded down, an upper end up
    down, up = num(fmt_toward(x, digits)), num(fmt_toward(x, digits, up=True))
    assert Decimal(repr(down)) <= Decimal(repr(x)) <= Decimal(repr(up))
    assert up - down <= 10.0 ** (math.floor(math.log10(x)) - digits + 2)  # one unit in the last digit shown
    assert num(fmt_toward(-x, digits)) == -down  # toward zero on both sides


@given(st.floats(min_value=-1e4, max_value=1e4, allow_nan=False), st.floats(min_value=0.0, max_value=1e3))
def test_printed_intervals_contain_the_certified_ones(low, width):
    high = low + width
    a, b = fmt_interval(low, high)
    assert Decimal(repr(num(a))) <= Decimal(repr(low)) and Decimal(repr(high)) <= Decimal(repr(num(b)))
    if low > 0:
        a, b = fmt_certified_range(low, high)
        assert num(a) <= low and high <= num(b)


# ---------------------------------------------------------------- errors figure
def test_errors_figure_draws_the_brackets_beside_the_exact_error(ax):
    r = compare(two_level(), [0], [2, 4], LAM, reference="both")
    a = plot_errors(r, error="absolute", ax=ax, coupling=0.5)
    assert len(a.bands) == 2 and a.exact_known
    for k in range(2):
        lo, hi = a.band_edges[k]
        up = r.error_upper[0, k]
        assert_allclose(hi.get_ydata(), np.where(up > 0, up, np.nan))
        # closed form: |E_2 − E| with E = −√(¼ + λ²/4), E_2 = −½ − λ²/4 (order 4 adds +λ⁴/16) lies in each bracket
        exact = -np.sqrt(0.25 + 0.25 * LAM**2)
        series = -0.5 - 0.25 * LAM**2 + (LAM**4 / 16 if k == 1 else 0.0)
        err = np.abs(series - exact)
        assert np.all(r.error_lower[0, k] <= err + 1e-12) and np.all(err <= r.error_upper[0, k] + 1e-12)
    labels = [t.get_text() for t in a.legend.get_texts()]
    assert "band: certified bracket of each order's error" in labels and "order 2" in labels


def test_errors_figure_with_bounds_only_names_orders_by_their_brackets(ax):
    r = compare(two_level(), [0], [2], LAM, reference="bounds")
    b = validity_boundary(two_level(), 0, 2, rtol=0.01, reference="bounds", max_coupling=1.0, coupling=1.0)
    a = plot_errors(r, [b], error="relative", ax=ax, coupling=0.5)
    assert not a.exact_known and np.isnan(a.lines[0].get_ydata()).all()
    assert a.band_edges[0][1].get_label() == "order 2"
    assert a.certified == (b,)
    seg = a.certified_lines[0]
    assert_allclose(seg.get_xdata(), [b.coupling, b.coupling])  # valid below this line
    lo, hi = fmt_certified_range(b.coupling, b.certified_not)
    assert seg.get_label().startswith(f"order 2: certified valid below λ = {lo}, not valid from {hi}")
    assert num(lo) <= b.coupling and b.certified_not <= num(hi)
    assert_allclose(a.certified_lines[1].get_xdata(), [b.certified_not] * 2)  # failure certified from this one
    # the markers sit on both ends of the bracket at the nearest sweep point
    i = int(np.argmin(np.abs(LAM - 0.5)))
    assert_allclose(np.sort(a.coupling_markers.get_ydata()), [r.rel_error_lower[0, 0, i], r.rel_error_upper[0, 0, i]])


def test_bands_need_a_result_with_bounds(ax):
    r = compare(two_level(), [0], [2], LAM)
    with pytest.raises(ValueError, match="bands=True needs a comparison with certified bounds"):
        plot_errors(r, ax=ax, bands=True)
    with pytest.raises(ValueError, match="bands=True needs a comparison with certified bounds"):
        plot_levels(r, ax=ax, bands=True)
    assert plot_errors(r, ax=ax).bands == ()


# ---------------------------------------------------------------- levels figure
def test_levels_figure_with_bounds_only_draws_brackets_in_place_of_exact_curves(ax):
    r = compare(two_level(), [0, 1], [2], LAM, reference="bounds")
    a = plot_levels(r, ax=ax, coupling=0.5)
    assert not a.exact_known and len(a.bands) == 2
    for ti in range(2):
        lo, hi = a.band_edges[ti]
        assert_allclose(lo.get_ydata(), r.exact_lower[ti])
        assert_allclose(hi.get_ydata(), r.exact_upper[ti])
    exact = np.array([-np.sqrt(0.25 + 0.25 * LAM**2), np.sqrt(0.25 + 0.25 * LAM**2)])  # closed form
    assert np.all(r.exact_lower <= exact + 1e-12) and np.all(exact <= r.exact_upper + 1e-12)
    lo_y, hi_y = ax.get_ylim()
    assert lo_y < exact.min() and exact.max() < hi_y  # the view holds the brackets
    assert "exact" not in [t.get_text() for t in a.legend.get_texts()]
    assert [t.get_text() for t in a.labels] == list(r.targets)


def test_errors_legend_says_a_statement_once_for_all_tolerances(ax):
    lam = np.linspace(0.0, 0.3, 21)
    r = compare(two_level(), [0], [1, 2, 4], lam, reference="bounds")
    bs = [validity_boundary(two_level(), 0, o, rtol=t, reference="bounds", max_coupling=0.3, coupling=0.3)
          for o in (1, 2, 4) for t in (0.01, 0.05)]
    a = plot_errors(r, bs, error="relative", ax=ax)
    texts = [t.get_text() for t in a.legend.get_texts()]
    assert [t for t in texts if t.startswith("order 4:")] == ["order 4: certified valid beyond λ = 0.3 at 1 % and 5 %"]
    assert [t for t in texts if t.startswith("order 1:")] == ["order 1: fails at any λ ≠ 0 at 1 % and 5 %"]
    # closed form (Sakurai 1994, §5.1): E = −√(¼ + λ²/4); order 1 adds nothing to −½, order 4 is −½ − λ²/4 + λ⁴/16
    shift = 0.5 - np.sqrt(0.25 + 0.25 * lam[1:] ** 2)
    assert np.all(np.abs(-0.25 * lam[1:] ** 2 + lam[1:] ** 4 / 16 - shift) / np.abs(shift) < 0.01)
    assert np.all(np.abs(0.0 - shift) / np.abs(shift) > 0.05)
    # both failures of order 1 are still drawn, one per tolerance
    assert sum(ln.get_label().startswith(("order 1:", "_order 1:")) for ln in a.boundary_lines) == 2
    # one neutral swatch names every order's band
    (swatch,) = [h for h, t in zip(a.legend.legend_handles, texts) if t.startswith("band:")]
    assert swatch.get_facecolor()[:3] == pytest.approx((0x8C / 255,) * 3)


def test_levels_legend_says_when_no_bracket_is_wider_than_the_line(ax):
    # brackets of the two-level model are ~1e-12 wide: invisible under the curve, and the legend says so
    r = compare(two_level(), [0, 1], [2], np.linspace(0.0, 0.3, 21), reference="bounds")
    a = plot_levels(r, ax=ax)
    ax.figure.canvas.draw()
    texts = [t.get_text() for t in a.legend.get_texts()]
    assert "certified bracket of the exact value (thinner than the line)" in texts

    def widest_points(res, artists):
        lo, hi = artists.band_edges[0]
        pix = ax.transData.transform(np.c_[np.zeros(len(res.couplings)), hi.get_ydata()])[:, 1] - \
            ax.transData.transform(np.c_[np.zeros(len(res.couplings)), lo.get_ydata()])[:, 1]
        return float(np.nanmax(pix)) * 72.0 / ax.figure.dpi

    assert widest_points(r, a) < 0.1
    # an invented six-level model (made-up numbers): level 1's bracket is wide near λ = 1, and the band is seen
    g = np.random.default_rng(7).normal(size=(6, 6))
    m = Model(np.diag([0.0, 1.0, 1.7, 2.6, 3.1, 4.0]), 0.25 * (g + g.T), name="invented six-level")
    ax.clear()
    r = compare(m, [1], [2], np.linspace(0.0, 1.0, 21), reference="bounds")
    a = plot_levels(r, ax=ax)
    ax.figure.canvas.draw()
    texts = [t.get_text() for t in a.legend.get_texts()]
    assert "certified bracket of the exact value" in texts
    assert widest_points(r, a) > 20.0
    (swatch,) = [h for h, t in zip(a.legend.legend_handles, texts) if t.startswith("certified bracket")]
    assert swatch.get_edgecolor()[:3] == (0.0, 0.0, 0.0)  # drawn with the black edges the figure shows
