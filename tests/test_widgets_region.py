"""Region panel of two couplings: sliders move the point without engine work; settings recompute the regions.

Presentation tests: expected values are the engine results the panel holds.
"""

import numpy as np
import pytest

from ptcheck import Model
from ptcheck.exact import ExactSolver
from ptcheck.multiseries import multi_series
from ptcheck.widgets.region import RegionPanel


@pytest.fixture(scope="module")
def model():
    h0 = np.diag([0.0, 1.0, 2.5, 3.2])
    v1 = np.array([[0, 0.3, 0.1, 0], [0.3, 0, 0.2, 0.1], [0.1, 0.2, 0, 0.3], [0, 0.1, 0.3, 0]])
    v2 = np.diag([0.0, 0.4, -0.3, 0.2])
    v2[0, 2] = v2[2, 0] = 0.15
    return Model(h0, [v1, v2], names=("g", "E"), name="toy")


@pytest.fixture
def panel(model):
    p = RegionPanel(model, 0, orders=(1, 2), rtol=0.01, point=(0.4, 0.2), directions=8, max_directions=12,
                    raise_errors=True)
    yield p
    p.close()


def test_sliders_move_the_point_without_engine_work(panel, model):
    p = panel
    assert [r.order for r in p.regions] == [1, 2]
    before = p.heavy_computations
    png0 = p.view.value
    p.coupling1.value = -0.3
    p.coupling2.value = 0.5
    assert p.heavy_computations == before
    np.testing.assert_allclose(np.ravel(p.artists.point_marker.get_data()), [-0.3, 0.5])
    x, y = p.artists.point_ray.get_data()
    assert x[1] * 0.5 == pytest.approx(y[1] * -0.3)  # the ray goes through the point
    assert p.view.value != png0 and p.view.value[:8] == b"\x89PNG\r\n\x1a\n"
    # the readout holds the engine's numbers at the point
    e2 = float(multi_series(model, 0, 2).energy((-0.3, 0.5), order=2))
    assert f"{e2:.10g}" in p.readout.value
    t = float(np.hypot(-0.3, 0.5))
    ray = model.along(np.array([-0.3, 0.5]) / t)
    exact = ExactSolver(ray).level_at(0, t)[0]
    assert f"{exact:.10g}" in p.readout.value
    verdicts = ["inside" if r.contains((-0.3, 0.5)) else "outside" for r in p.regions]
    assert p.readout.value.count("outside") == verdicts.count("outside")


def test_settings_recompute_and_errors_show(panel):
    p = panel
    before = p.heavy_computations
    p.tolerance.value = 0.05
    assert p.heavy_computations == before + 2  # one region per order
    assert all(r.rtol == 0.05 for r in p.regions)
    p.orders.value = (1, 2, 3)
    assert p.heavy_computations == before + 3  # orders 1, 2 cached at this tolerance
    assert p.artists.orders == (1, 2, 3)
    p.show_convergence.value = True
    assert p.convergence_result is not None and p.artists.convergence_line is not None
    with pytest.raises(ValueError, match="at least one order"):
        p.orders.value = ()
    assert "Cannot compute this" in p.message.value


def test_refuses_a_one_coupling_model():
    with pytest.raises(ValueError, match="several couplings"):
        RegionPanel(Model(np.diag([0.0, 1.0]), [[0, 1], [1, 0]]))
