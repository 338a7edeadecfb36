"""Validity regions of two couplings against brute force; radius of convergence per ray against a closed form."""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from ptcheck import Model, transition_frequency
from ptcheck.multiseries import multi_series
from ptcheck.region import ray_convergence, validity_region

from conftest import random_hermitian


@pytest.fixture(scope="module")
def random40():
    rng = np.random.default_rng(2024)
    n = 40
    e0 = np.concatenate([[0.0], np.sort(rng.uniform(1.0, 8.0, n - 1))])
    v1 = random_hermitian(rng, n)
    v2 = random_hermitian(rng, n)
    v1 /= np.abs(np.linalg.eigvalsh(v1)).max()
    v2 /= np.abs(np.linalg.eigvalsh(v2)).max()
    return Model(np.diag(e0), [v1, v2], names=("a", "b")), np.diag(e0), v1, v2


def _brute_error(h0, v1, v2, series, order):
    """|E_series − E_exact| of the ground level at points (..., 2); exact: lowest eigvalsh (the ground level
    of a real symmetric H never crosses another level along a path, so no tracking is needed)."""

    def err(p):
        exact = np.linalg.eigvalsh(h0 + p[0] * v1 + p[1] * v2)[0]
        return abs(float(series.energy(p, order=order)) - exact)

    return err


def _brute_boundary(err, d, tol, t_max, n_grid=400):
    """First t on a fine grid with err(t d) > tol, refined by brentq (common practice, no source)."""
    ts = np.linspace(0.0, t_max, n_grid + 1)[1:]
    prev = 0.0
    for t in ts:
        if err(t * d) > tol:
            return brentq(lambda x: err(x * d) - tol, prev, t, xtol=1e-10)
        prev = t
    return math.inf


def test_region_boundary_on_every_ray_matches_brute_force(random40):
    m, h0, v1, v2 = random40
    tol = 2e-3
    r = validity_region(m, 0, 2, tol=tol, directions=12, max_directions=12)
    assert r.angles.size == 12 and r.full_circle
    err = _brute_error(h0, v1, v2, multi_series(m, 0, 2), 2)
    for th, d, t in zip(r.angles, r.directions, r.boundary):
        ref = _brute_boundary(err, d, tol, t_max=2.0 * t if np.isfinite(t) else 5.0)
        assert t == pytest.approx(ref, rel=5e-3), math.degrees(th)
    assert r.exact_solves > 0
    np.testing.assert_allclose(r.points, r.boundary[:, None] * r.directions)


def test_region_contains_matches_brute_force_on_a_grid(random40):
    # a point is valid when the error stays within tol on the whole straight path from the origin to it
    m, h0, v1, v2 = random40
    tol = 2e-3
    r = validity_region(m, 0, 2, tol=tol, refine_rtol=0.03, max_directions=96)
    err = _brute_error(h0, v1, v2, multi_series(m, 0, 2), 2)
    reach = 1.3 * np.nanmax(np.abs(r.points), axis=0)
    checked = 0
    for x in np.linspace(-reach[0], reach[0], 13):
        for y in np.linspace(-reach[1], reach[1], 13):
            p = np.array([x, y])
            if not np.any(p):
                continue
            z = p / r.scales
            th, rho = math.atan2(z[1], z[0]), float(np.hypot(*z))
            d = np.array([r.scales[0] * math.cos(th), r.scales[1] * math.sin(th)])
            t_bf = _brute_boundary(err, d, tol, t_max=1.5 * rho, n_grid=150)
            if abs(rho - t_bf) < 0.15 * min(rho, t_bf):
                continue  # too close to the boundary for a comparison between rays
            assert r.contains(p) == (rho < t_bf), (p, rho, t_bf)
            checked += 1
    assert checked > 100


def test_point_ray_is_searched_with_its_coupling(random40):
    m, *_ = random40
    p = np.array([0.3, -0.2])
    r = validity_region(m, 0, 2, rtol=0.01, directions=6, max_directions=6, point=p)
    assert r.point_ray is not None
    d = r.directions[r.point_ray]
    t = p[0] / d[0]
    np.testing.assert_allclose(t * d, p, rtol=1e-12)  # the ray goes through the point
    assert r.contains(p) == r.boundaries[r.point_ray].valid_at(t)
    assert r.angles.size == 7


def test_quantity_region_uses_the_same_combination(random40):
    m, *_ = random40
    f = transition_frequency(1, 0, name="f10")
    r = validity_region(m, f, 2, rtol=0.05, directions=4, max_directions=4)
    assert r.target == "f10" and all(s in ("found", "not_reached") for s in r.status)


def test_bad_input(random40):
    m, h0, v1, _ = random40
    with pytest.raises(ValueError, match="several couplings"):
        validity_region(Model(h0, v1), 0, 2, rtol=0.01)
    with pytest.raises(ValueError, match="exactly one of tol"):
        validity_region(m, 0, 2, rtol=0.01, tol=0.1)
    with pytest.raises(ValueError, match="directions must be"):
        validity_region(m, 0, 2, rtol=0.01, directions=np.ones((3, 3)))
    with pytest.raises(ValueError, match="scales must be two positive"):
        validity_region(m, 0, 2, rtol=0.01, scales=(1.0, -1.0))
    with pytest.raises(TypeError, match="one level or quantity"):
        validity_region(m, [0, 1], 2, rtol=0.01)


def test_radius_per_ray_two_level_closed_form():
    # H = diag(−Δ/2, Δ/2) + t (d1 σx + d2 σz): eigenvalues ±sqrt((Δ/2 − t d2)² + t² d1²) coalesce at
    # t = (Δ/2)(d2 ± i d1)/|d|², so the radius on the ray is Δ / (2|d|) (two-level closed form)
    delta = 1.0
    m = Model(np.diag([-delta / 2, delta / 2]), [[[0, 1], [1, 0]], [[1, 0], [0, -1]]], names=("x", "z"))
    rc = ray_convergence(m, 0, directions=[0.3, 1.0, 2.0, 4.0], scales=(1.0, 1.0), order=30)
    np.testing.assert_allclose(rc.radius, delta / 2, rtol=1e-6)
    for th, eps in zip(rc.angles, rc.exceptional_points):
        d = np.array([math.cos(th), math.sin(th)])
        ref = sorted([0.5 * delta * (d[1] + 1j * d[0]), 0.5 * delta * (d[1] - 1j * d[0])], key=lambda z: -z.imag)
        np.testing.assert_allclose(np.sort_complex(eps), np.sort_complex(np.array(ref)), atol=1e-8)
    np.testing.assert_allclose(np.hypot(*rc.points.T), delta / 2, rtol=1e-6)


def test_a_ray_along_an_axis_has_no_share_of_the_other_coupling():
    # level 0 is coupled only by V1; along the V2 axis its exact energy stays E0 (eigvalsh below), so the ray at
    # θ = 90° must meet a relative tolerance everywhere -- a 6e-17 share of V1 (cos 90° in floating point) would
    # make the relative error 0/0 and fail at once (common practice, no source)
    h0 = np.diag([0.0, 1.0, 2.5])
    v1 = np.array([[0, .3, 0], [.3, 0, .2], [0, .2, 0]])
    v2 = np.diag([0.0, 0.2, -0.1]) + np.array([[0, 0, 0], [0, 0, .1], [0, .1, 0]])
    assert all(np.min(np.abs(np.linalg.eigvalsh(h0 + x * v2))) == 0.0 for x in (0.5, 5.0))
    m = Model(h0, [v1, v2], names=("g", "E"))
    r = validity_region(m, 0, 2, rtol=0.01, directions=[0.0, math.pi / 2], max_directions=2)
    (i,) = np.flatnonzero(np.isclose(r.angles, math.pi / 2))
    assert r.directions[i, 0] == 0.0 and r.status[i] == "not_reached"
