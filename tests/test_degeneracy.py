"""Near-degenerate pairs ranked by mixing ratio."""

import numpy as np
import pytest
import scipy.sparse as sp

from ptcheck import Model
from ptcheck.degeneracy import DEFAULT_MIXING_THRESHOLD, near_degenerate_pairs


def _chain():
    e0 = np.array([0.0, 1.0, 1.05, 3.0])
    v = np.zeros((4, 4))
    for i, j, x in [(0, 1, 0.1), (1, 2, 0.1), (2, 3, 0.2), (0, 3, 0.3)]:
        v[i, j] = v[j, i] = x
    return e0, v


@pytest.mark.parametrize("sparse", [False, True])
def test_pairs_ranked_by_ratio(sparse):
    e0, v = _chain()
    m = Model(sp.diags(e0) if sparse else np.diag(e0), sp.csr_matrix(v) if sparse else v)
    lam = 0.5
    pairs = near_degenerate_pairs(m, lam, threshold=0.01)
    # ratio = |λ V_ln| / |ΔE| (definition)
    expected = sorted(
        [((0, 1), lam * 0.1 / 1.0), ((1, 2), lam * 0.1 / 0.05), ((2, 3), lam * 0.2 / 1.95), ((0, 3), lam * 0.3 / 3.0)],
        key=lambda t: -t[1],
    )
    assert [(p.l, p.n) for p in pairs] == [k for k, _ in expected]
    np.testing.assert_allclose([p.ratio for p in pairs], [r for _, r in expected])
    # default threshold keeps only the strongly mixed pair(s)
    assert [(p.l, p.n) for p in near_degenerate_pairs(m, lam)] == [(1, 2)]
    assert DEFAULT_MIXING_THRESHOLD == 0.1
    only = near_degenerate_pairs(m, lam, 0.01, levels=[3])
    assert {(p.l, p.n) for p in only} == {(2, 3), (0, 3)}


def test_exact_degeneracy_always_reported():
    m = Model(np.diag([0.0, 0.0, 2.0]), np.array([[0, 0.2, 0.1], [0.2, 0, 0], [0.1, 0, 0]]))
    pairs = near_degenerate_pairs(m, 1e-6)
    assert (pairs[0].l, pairs[0].n) == (0, 1) and pairs[0].ratio == np.inf


def test_bad_threshold_and_coupling():
    e0, v = _chain()
    m = Model(np.diag(e0), v)
    with pytest.raises(ValueError, match="threshold must be a positive"):
        near_degenerate_pairs(m, 0.1, -1)
    with pytest.raises(ValueError, match="coupling must be finite"):
        near_degenerate_pairs(m, np.nan)
