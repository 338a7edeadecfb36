"""Region map figure: the artists carry the numbers of the region results (presentation checks, no physics)."""

import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.figure import Figure

from ptcheck import Model
from ptcheck.plots import plot_region
from ptcheck.region import ray_convergence, validity_region


@pytest.fixture(scope="module")
def regions():
    h0 = np.diag([0.0, 1.0, 2.5, 3.2])
    v1 = np.array([[0, 0.3, 0.1, 0], [0.3, 0, 0.2, 0.1], [0.1, 0.2, 0, 0.3], [0, 0.1, 0.3, 0]])
    v2 = np.diag([0.0, 0.4, -0.3, 0.2])
    v2[0, 2] = v2[2, 0] = 0.15
    m = Model(h0, [v1, v2], names=("g", "E"), name="toy")
    p = (0.5, 0.3)
    rs = [validity_region(m, 0, k, rtol=0.01, directions=8, max_directions=12, point=p) for k in (1, 2)]
    rc = ray_convergence(m, 0, directions=8, order=24)
    return m, rs, rc, p


def test_artists_carry_the_boundary_points(regions):
    _, rs, rc, p = regions
    fig = Figure()
    ax = fig.add_subplot()
    art = plot_region(rs, convergence=rc, ax=ax)
    assert art.orders == (1, 2) and len(art.fills) == 2 and len(art.outlines) == 2
    for r, ln, fill in zip(rs, art.outlines, art.fills):
        found = np.isfinite(r.boundary)
        xy = np.column_stack(ln.get_data())[:-1]  # closed curve: last point repeats the first
        t = np.where(np.isinf(r.boundary), [b.max_coupling for b in r.boundaries], r.boundary)
        np.testing.assert_allclose(xy, t[np.isfinite(t), None] * r.directions[np.isfinite(t)])
        np.testing.assert_allclose(fill.get_xy()[: xy.shape[0]], xy)
        assert found.any()
    # the point and its ray
    np.testing.assert_allclose(np.ravel(art.point_marker.get_data()), p)
    x, y = art.point_ray.get_data()
    assert x[0] == 0.0 and y[0] == 0.0 and x[1] * p[1] == pytest.approx(y[1] * p[0])
    # convergence: radius × direction on every ray with a finite radius
    ok = np.isfinite(rc.radius) & (rc.radius > 0)
    np.testing.assert_allclose(np.column_stack(art.convergence_line.get_data())[: ok.sum()], rc.points[ok])
    assert "validity region" in art.caption.get_text() and "toy" in art.caption.get_text()
    assert [t.get_text() for t in art.legend.get_texts()][:2] == ["order 1", "order 2"]


def test_new_figure_and_bad_input(regions):
    m, rs, _, _ = regions
    art = plot_region(rs[0])
    assert art.figure is not None and art.point_marker is not None
    plt.close(art.figure)
    with pytest.raises(TypeError, match="ValidityRegion"):
        plot_region([1, 2])
    with pytest.raises(ValueError, match="one region per order"):
        plot_region([rs[0], rs[0]])
