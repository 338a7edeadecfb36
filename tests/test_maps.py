"""Validity maps: closed-form boundaries, and identical results on every executor (serial, processes, dask)."""

import json
import math
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest
from scipy.optimize import brentq

from ptcheck.maps import ValidityMap, validity_map
from ptcheck.models import two_level

V = 0.5
DELTAS = [0.8, 1.0, 1.25]
RTOL = 0.01


# Two-level system (ptcheck.models.two_level): exact ground level E = -√((Δ/2)² + λ²v²) (any QM text);
# second order RS: E2 = -Δ/2 - λ²v²/Δ.  The relative error is taken against the exact shift E + Δ/2.
def rel_error(lam, delta):
    e = -math.sqrt((delta / 2) ** 2 + (lam * V) ** 2)
    return abs((-delta / 2 - (lam * V) ** 2 / delta) - e) / abs(e + delta / 2)


def closed_form_boundary(delta):
    return brentq(lambda x: rel_error(x, delta) - RTOL, 1e-3 * delta, 0.99 * delta / (2 * V))


def scaled_two_level(*, delta, scale=1.0):
    """Module-level builder (picklable): a two-level model with both parts scaled."""
    return two_level(delta=delta * scale, v=V * scale)


COUPLINGS = np.array([0.05, 0.15, 0.3])
KW = dict(level=0, order=2, rtol=RTOL, couplings=COUPLINGS, builder_kwargs={"v": V}, treatment="nondegenerate")


@pytest.fixture(scope="module")
def serial():
    return validity_map("two_level", "delta", DELTAS, executor="serial", **KW)


def assert_same(a: ValidityMap, b: ValidityMap):
    np.testing.assert_array_equal(a.boundary, b.boundary)
    np.testing.assert_array_equal(a.errors, b.errors)
    np.testing.assert_array_equal(a.exact_solves, b.exact_solves)
    assert a.status == b.status and a.notes == b.notes


def test_serial_map_matches_closed_form(serial):
    assert serial.status == ("found",) * 3
    # boundary precision of validity_boundary: xrtol = 1e-3
    np.testing.assert_allclose(serial.boundary, [closed_form_boundary(d) for d in DELTAS], rtol=2e-3)
    expected = np.array([[rel_error(x, d) for x in COUPLINGS] for d in DELTAS])
    np.testing.assert_allclose(serial.errors, expected, rtol=1e-7)
    np.testing.assert_array_equal(serial.valid, expected <= RTOL)
    assert serial.param_values.tolist() == DELTAS and serial.target == "g"


def test_process_pool_equals_serial(serial):
    with ProcessPoolExecutor(max_workers=2) as ex:
        assert_same(validity_map("two_level", "delta", DELTAS, executor=ex, **KW), serial)
    # the default: a local pool of 2 workers, started and stopped inside the call
    seen = []
    assert_same(validity_map("two_level", "delta", DELTAS, progress=lambda d, t: seen.append((d, t)), **KW), serial)
    assert seen[-1] == (3, 3) and [d for d, _ in seen] == [1, 2, 3]


def test_module_level_builder_function_on_a_pool():
    kw = dict(KW, builder_kwargs={"scale": 2.0})
    with ProcessPoolExecutor(max_workers=2) as ex:
        pooled = validity_map(scaled_two_level, "delta", DELTAS[:2], executor=ex, **kw)
    ser = validity_map(scaled_two_level, "delta", DELTAS[:2], executor="serial", **kw)
    assert_same(pooled, ser)
    # scaling H0 and V together leaves the boundary in λ unchanged (λ multiplies v only)
    np.testing.assert_allclose(ser.boundary, [closed_form_boundary(d) for d in DELTAS[:2]], rtol=2e-3)


def test_dask_local_cluster_equals_serial(serial):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        with distributed.Client(cluster) as client:
            on_dask = validity_map("two_level", "delta", DELTAS, executor=client.get_executor(), **KW)
    assert_same(on_dask, serial)


def test_result_object(serial, tmp_path):
    d = json.loads(json.dumps(serial.to_dict(), allow_nan=False))
    assert d["param_name"] == "delta" and d["order"] == "order 2" and len(d["errors"]) == 3
    assert "delta" in repr(serial) and "<table>" in serial._repr_html_()
    assert "| delta | λ* | status |" in serial.to_markdown()
    with pytest.raises(ValueError):
        serial.boundary[0] = 1.0  # read-only


def test_plot_validity_map(serial):
    from matplotlib.figure import Figure

    from ptcheck.maps_plot import plot_validity_map

    ax = Figure().add_subplot()
    art = plot_validity_map(serial, ax=ax, mark=(1.0, 0.15))
    np.testing.assert_array_equal(art.boundary.get_ydata(), np.abs(serial.boundary))
    np.testing.assert_array_equal(art.boundary.get_xdata(), DELTAS)
    assert art.mesh is not None and art.mark.get_xdata()[0] == 1.0


def test_bad_points_are_reported_not_raised():
    vm = validity_map("two_level", "delta", [1.0, -1.0], level=0, order=2, rtol=RTOL, executor="serial",
                      treatment="nondegenerate")
    assert vm.status == ("found", "error")
    assert math.isnan(vm.boundary[1]) and any("delta = -1" in n for n in vm.notes)


def test_bad_input():
    with pytest.raises(TypeError, match="lambda or a local function"):
        validity_map(lambda delta: two_level(delta=delta), "delta", [1.0], level=0, order=2, rtol=RTOL)
    with pytest.raises(ValueError, match="unknown builder"):
        validity_map("nope", "delta", [1.0], level=0, order=2, rtol=RTOL)
    with pytest.raises(TypeError, match="unexpected keyword"):
        validity_map("two_level", "delt", [1.0], level=0, order=2, rtol=RTOL, executor="serial")
    with pytest.raises(ValueError, match="exactly one of tol or rtol"):
        validity_map("two_level", "delta", [1.0], level=0, order=2, executor="serial")
    with pytest.raises(ValueError, match="unknown level"):
        validity_map("two_level", "delta", [1.0], level="x", order=2, rtol=RTOL, executor="serial")
    with pytest.raises(ValueError, match="executor"):
        validity_map("two_level", "delta", [1.0], level=0, order=2, rtol=RTOL, executor="threads")
    with pytest.raises(ValueError, match="empty"):
        validity_map("two_level", "delta", [], level=0, order=2, rtol=RTOL)


def slow_two_level(*, delta):
    """Module-level builder (picklable) that takes a while, so that workers are busy when the call is stopped."""
    import time

    time.sleep(0.5)
    return two_level(delta=delta, v=V)


def test_interrupt_terminates_the_default_pool():
    psutil = pytest.importorskip("psutil")
    me = psutil.Process()
    before = {p.pid for p in me.children(recursive=True)}
    seen = []

    def stop(done, total):  # Ctrl-C as soon as the first value is done
        seen.extend(p for p in me.children(recursive=True) if p.pid not in before)
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        validity_map(slow_two_level, "delta", [1.0 + 0.1 * k for k in range(8)], level=0, order=2, rtol=RTOL,
                     treatment="nondegenerate", progress=stop)
    assert len(seen) >= 1  # the pool's workers were running
    _, alive = psutil.wait_procs(seen, timeout=10)
    assert alive == []
    assert {p.pid for p in me.children(recursive=True)} <= before


def test_executor_choices():
    distributed = pytest.importorskip("distributed")
    with pytest.raises(TypeError, match="executor must be a concurrent.futures.Executor"):
        validity_map("two_level", "delta", [1.0], level=0, order=2, rtol=RTOL, executor=object())
    with distributed.Client(processes=False, n_workers=1, threads_per_worker=1, dashboard_address=None) as client:
        vm = validity_map("two_level", "delta", DELTAS, executor=client, **KW)  # the Client itself is accepted
    np.testing.assert_allclose(vm.boundary, [closed_form_boundary(d) for d in DELTAS], rtol=2e-3)
