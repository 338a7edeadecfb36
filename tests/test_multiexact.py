"""Exact levels on a grid of two couplings: tracked along rays, against per-sector eigvalsh."""

import numpy as np
import pytest

from ptcheck import Model
from ptcheck.multiexact import track_grid


def test_grid_levels_follow_their_sector_through_crossings():
    # sector A = {0, 2} (V1 couples them), sector B = {1} (V2 moves it down through level 0 and 2's range);
    # referee: eigvalsh of each sector's 2x2 / 1x1 block (common practice, no source)
    h0 = np.diag([0.0, 1.0, 2.0])
    v1 = np.zeros((3, 3))
    v1[0, 2] = v1[2, 0] = 0.7
    v2 = np.diag([0.2, -3.0, 0.5])
    m = Model(h0, [v1, v2], names=("g", "f"))
    c1 = np.linspace(-1.0, 1.0, 9)
    c2 = np.linspace(0.0, 1.2, 7)
    g = track_grid(m, [0, 1, 2], c1, c2)
    assert g.energies.shape == (3, 9, 7)
    for i, a in enumerate(c1):
        for j, b in enumerate(c2):
            block = np.array([[0.0 + 0.2 * b, 0.7 * a], [0.7 * a, 2.0 + 0.5 * b]])
            lo, hi = np.linalg.eigvalsh(block)
            np.testing.assert_allclose(g.energy(0)[i, j], lo, atol=1e-12)
            np.testing.assert_allclose(g.energy(2)[i, j], hi, atol=1e-12)
            np.testing.assert_allclose(g.energy(1)[i, j], 1.0 - 3.0 * b, atol=1e-12)
    np.testing.assert_allclose(g.shift(1), g.energy(1) - 1.0, atol=1e-12)
    assert g.rays <= 9 * 7 and g.solves >= 0


def test_collinear_points_share_one_ray():
    m = Model(np.diag([-0.5, 0.5]), [[[0, 1], [1, 0]], [[1, 0], [0, -1]]], names=("x", "z"))
    g = track_grid(m, 0, [0.0, 0.1, 0.2, 0.4], [0.0, 0.1, 0.2, 0.4])
    # the diagonal points share the ray (1, 1)/√2; closed form −sqrt((1/2 − z)² + x²) (two-level eigenvalues)
    x, z = np.meshgrid(g.couplings1, g.couplings2, indexing="ij")
    np.testing.assert_allclose(g.energy(0), -np.sqrt((0.5 - z) ** 2 + x**2), atol=1e-12)
    assert g.rays < 15


def test_bad_input():
    m = Model(np.diag([-0.5, 0.5]), [[[0, 1], [1, 0]], [[1, 0], [0, -1]]])
    with pytest.raises(ValueError, match="couplings1 must be a non-empty"):
        track_grid(m, 0, [], [0.1])
    with pytest.raises(ValueError, match="couplings2 must be finite"):
        track_grid(m, 0, [0.1], [np.inf])
    with pytest.raises(ValueError, match="several couplings"):
        track_grid(Model(np.diag([0.0, 1.0]), [[0, 1], [1, 0]]), 0, [0.1], [0.1])
    with pytest.raises(ValueError, match="distinct"):
        track_grid(m, [0, 0], [0.1], [0.1])
