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
    assert "band: certified bracket of the error" in labels and "order 2" in labels


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
