"""Adding a constant to H0 changes no error, boundary or verdict (invariance under H0 → H0 + c·1).

Common practice, no source: the spectrum of H0 + c·1 + λV is that of H0 + λV shifted by c, so every error
(perturbative shift − exact shift), every validity boundary and every verdict must be the same.  The offsets
used are multiples of 2^30 up to ~1e12 x the level spacing and the energies sit on a 2^-8 grid, so the user's
input represents H0 + c·1 exactly and any difference would be ptcheck's own rounding.  The models cover
non-degenerate levels, degenerate groups split at first order, degenerate groups split only at second order
(an exact pair that V does not couple directly: eigenpair window + overlap pairing) and several sectors.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st
from numpy.testing import assert_allclose

from ptcheck import Model, compare, validity_boundary
from ptcheck.report import run_check


@st.composite
def models(draw):
    n = draw(st.integers(4, 6))
    steps = draw(st.lists(st.integers(16, 200), min_size=n - 1, max_size=n - 1))
    e0 = np.concatenate([[0.0], np.cumsum(steps)]) / 256.0
    rng = np.random.default_rng(draw(st.integers(0, 2**31 - 1)))
    a = rng.normal(size=(n, n))
    v = 0.3 * (a + a.T) / 2
    kind = draw(st.sampled_from(["plain", "split at order 1", "split at order 2", "two sectors"]))
    if kind != "plain":
        e0[1] = e0[0]  # an exact degeneracy of the two lowest levels
    if kind == "split at order 2":
        v[0, 1] = v[1, 0] = 0.0
        v[0, 0] = v[1, 1]  # equal first-order shifts: the pair splits at second order only
    if kind == "two sectors":
        v[:2, 2:] = v[2:, :2] = 0.0
        v[0, 1] = v[1, 0] = 0.0
        v[1, 1:] = v[1:, 1] = 0.0  # level 1 alone: a one-level sector degenerate with level 0 across sectors
    k = draw(st.integers(1, 1000))
    return e0, v, float(k) * 2.0**30, kind


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(models())
def test_compare_boundary_and_verdicts_do_not_change_with_an_offset(model):
    e0, v, c, kind = model
    base, moved = Model(np.diag(e0), v), Model(np.diag(e0 + c), v)
    assert [s.size for s in base.sectors] == [s.size for s in moved.sectors]
    lam = [0.05, 0.2, 0.6]
    levels = [0, 2]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # property: equality, whatever notes the engine adds
        ra = compare(base, levels, [1, 2, 4], lam)
        rb = compare(moved, levels, [1, 2, 4], lam)
    assert ra.treatments == rb.treatments
    assert_allclose(rb.abs_error, ra.abs_error, atol=1e-12, rtol=1e-9, err_msg=kind)
    assert_allclose(rb.exact_presented - c, ra.exact_presented, atol=1e-12 + 4e-16 * c)
    for level in levels:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ba = validity_boundary(base, level, 2, tol=1e-4)
            bb = validity_boundary(moved, level, 2, tol=1e-4)
        assert ba.status == bb.status
        if np.isfinite(ba.coupling):
            assert bb.coupling == pytest.approx(ba.coupling, rel=1e-6), kind


@pytest.mark.parametrize("c", [2.0**40, 0.25e12])
def test_run_check_verdicts_do_not_change_with_an_offset(c):
    # invented 5-level model with a degenerate pair that V does not couple directly (split at order 2)
    rng = np.random.default_rng(3)
    e0 = np.array([0.0, 0.0, 20.0, 45.0, 77.0]) / 16.0
    a = rng.normal(size=(5, 5))
    v = 0.2 * (a + a.T) / 2
    v[0, 1] = v[1, 0] = 0.0
    v[1, 1] = v[0, 0]
    base, moved = Model(np.diag(e0), v), Model(np.diag(e0 + c), v)
    for lam in (0.2, 0.9):
        ra = run_check(base, [0, 1, 2], [2, 4], coupling=lam, tol=1e-4, convergence_order=10, n_points=5)
        rb = run_check(moved, [0, 1, 2], [2, 4], coupling=lam, tol=1e-4, convergence_order=10, n_points=5)
        assert [x.status for x in rb.verdicts] == [x.status for x in ra.verdicts]
        assert_allclose([x.coupling for x in rb.boundaries], [x.coupling for x in ra.boundaries], rtol=1e-6)
        assert_allclose([x.error for x in rb.verdicts], [x.error for x in ra.verdicts], rtol=1e-6, atol=1e-13)
        assert rb.exit_status == ra.exit_status
