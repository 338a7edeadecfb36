"""The default path answers the question asked, end to end, on the models a practitioner brings.

Brute force is the referee: per-sector dense ``numpy.linalg.eigvalsh`` of matrices built here from closed-form
matrix elements (never from ptcheck's work-basis matrices), textbook formulas written out here, and fine grids
+ ``scipy.optimize.brentq`` for validity boundaries.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import brentq

from ptcheck import Model, compare, validity_boundary
from ptcheck.models import linear_rotor, spin_chain

from conftest import ising_ring

B, MU_E, J_MAX = 1.0, 0.5, 10


def rotor_sector(m: int, lam: float) -> np.ndarray:
    """Dense H of the M sector, J = |M| … J_MAX: B J(J+1) on the diagonal, −λ μE ⟨J+1, M|cos θ|J, M⟩ beside it
    with ⟨J+1, M|cos θ|J, M⟩ = √[((J+1)² − M²)/((2J+1)(2J+3))] (Townes & Schawlow, Microwave Spectroscopy,
    1955; quoted from memory)."""
    js = np.arange(abs(m), J_MAX + 1, dtype=float)
    off = np.sqrt(((js[:-1] + 1) ** 2 - m**2) / ((2 * js[:-1] + 1) * (2 * js[:-1] + 3)))
    return np.diag(B * js * (js + 1)) - lam * MU_E * (np.diag(off, 1) + np.diag(off, -1))


def stark_order2(j: int, m: int) -> float:
    """Second-order Stark coefficient (per λ²) of a linear molecule (Townes & Schawlow, Microwave Spectroscopy,
    1955): E2 = (μE)² [J(J+1) − 3M²] / [2B J(J+1)(2J−1)(2J+3)], and −(μE)²/(6B) for J = 0."""
    if j == 0:
        return -(MU_E**2) / (6 * B)
    return MU_E**2 * (j * (j + 1) - 3 * m**2) / (2 * B * j * (j + 1) * (2 * j - 1) * (2 * j + 3))


def exact_rotor(j: int, m: int, lam: float) -> float:
    # a tridiagonal sector with non-zero off-diagonal has simple eigenvalues that never cross: level (J, M) is
    # rank J − |M| of its own sector at every coupling
    return float(np.linalg.eigvalsh(rotor_sector(m, lam))[j - abs(m)])


@pytest.fixture(scope="module")
def rotor():
    return linear_rotor(b=B, mu_e=MU_E, j_max=J_MAX)


LABELS = [(j, m) for j in range(J_MAX + 1) for m in range(-j, j + 1)]


def test_rotor_compare_every_label_equals_its_own_sector(rotor):
    lam = np.array([0.3, 1.0, 2.5])
    r = compare(rotor, LABELS, [2], lam)  # the default path: treatment "standard"
    assert set(r.treatments) == {"nondegenerate"}  # (J, ±M) never mix: non-degenerate in their sectors
    assert not r.ambiguous.any()
    for i, (j, m) in enumerate(LABELS):
        assert_allclose(r.exact[i], [exact_rotor(j, m, x) for x in lam], atol=1e-11, err_msg=str((j, m)))
        if j < J_MAX:  # the top J misses its J + 1 partner in the truncated basis
            want = B * j * (j + 1) + stark_order2(j, m) * lam**2  # V has no diagonal: no first order
            assert_allclose(r.perturbative[i, 0], want, rtol=1e-13, atol=1e-13, err_msg=str((j, m)))


def _brute_boundary(j: int, m: int, rtol: float, top: float, n: int = 400) -> float:
    """First λ > 0 where |E_order2 − E_exact| > rtol |E_exact − E0| (fine grid, then brentq)."""
    e0 = B * j * (j + 1)

    def f(x):
        ex = exact_rotor(j, m, x)
        return abs(e0 + stark_order2(j, m) * x**2 - ex) - rtol * abs(ex - e0)

    grid = np.linspace(top / n, top, n)
    vals = np.array([f(x) for x in grid])
    i = int(np.flatnonzero(vals > 0)[0])
    assert i > 0, "the formula fails already on the first grid point"
    return brentq(f, grid[i - 1], grid[i], xtol=1e-10)


@pytest.mark.parametrize("label", [(0, 0), (1, 0), (1, 1), (2, 0), (2, 1), (2, 2), (3, 3)])
def test_rotor_default_boundary_equals_brute_force(rotor, label):
    rtol = 0.01
    b = validity_boundary(rotor, label, 2, rtol=rtol)
    assert b.status == "found" and b.treatment == "nondegenerate"
    want = _brute_boundary(*label, rtol, top=4.0 * abs(b.coupling))
    assert b.coupling == pytest.approx(want, rel=2e-3)


# ----------------------------------------------------------------------------- Ising chain ground doublet
L_SPINS, ORDER = 8, 16


@pytest.mark.parametrize("declared", [True, False])
def test_ising_doublet_order16_error_is_the_true_error_on_any_grid(declared):
    # transverse-field Ising ring (Pfeuty, Ann. Phys. 57, 79 (1970): critical at λ = h/J = 1); its ferromagnetic
    # ground doublet is split only at order L.  With the builder the parity is declared (each member alone in its
    # sector); with plain matrices ptcheck must use degenerate perturbation theory and pair by overlap.
    h0, v = ising_ring(L_SPINS)[:2]
    m = spin_chain(n_spins=L_SPINS) if declared else Model(h0, v, name="Ising ring, plain matrices")
    coarse = np.array([0.3, 0.5])
    fine = np.linspace(0.0, 0.5, 11)
    results = [compare(m, [0, 1], [ORDER], lam) for lam in (coarse, fine)]
    assert results[0].treatments == (("nondegenerate",) * 2 if declared else ("degenerate",) * 2)
    for r, lam in zip(results, (coarse, fine)):
        assert not r.ambiguous.any() and not r.avoided_crossings
        # brute force: dense eigvalsh of the plain matrices; the doublet is the two lowest levels, level 0 the
        # lower one for λ > 0
        ex = np.array([np.linalg.eigvalsh(h0 + x * v)[:2] for x in lam]).T
        assert_allclose(r.exact, ex, atol=1e-12)
        # the reported error is the distance to the level's own branch, far below the doublet splitting
        assert_allclose(r.abs_error[:, 0], np.abs(r.perturbative[:, 0] - ex), atol=1e-12)
        split = ex[1] - ex[0]
        big = split > 1e-9
        assert np.all(r.abs_error[:, 0, big] < 1e-2 * split[big])
    for i, x in enumerate(coarse):  # the same couplings give the same errors on both grids
        k = int(np.argmin(np.abs(fine - x)))
        assert_allclose(results[0].abs_error[:, 0, i], results[1].abs_error[:, 0, k], rtol=1e-6, atol=1e-14)
