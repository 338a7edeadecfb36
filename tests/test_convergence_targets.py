"""Convergence of levels treated with an effective Hamiltonian, and of derived quantities."""

import numpy as np
import pytest

import ptcheck
from ptcheck import Model, convergence, models


def test_hubbard_block_radius_from_dimer_branch_points():
    # singlet E(λ) = (U - sqrt(U^2 + 16 t^2 λ^2))/2 (closed form of the two-site Hubbard model at half
    # filling) has branch points at λ = ±iU/(4t): the singlet branch of the degenerate group converges for |λ| < U/(4t)
    t, u = 1.0, 8.0
    m = models.hubbard_dimer(t=t, u=u)
    r = convergence(m, 0, 20)
    assert r.treatment == "degenerate" and r.kind == "convergent"
    assert r.radius == pytest.approx(u / (4 * t), rel=0.02)
    assert r.kato_bound <= r.radius * (1 + 1e-9)
    assert "Kato" in r.summary and "degenerate group" in r.summary
    # the near-degenerate block on request at λ = 1 ties in the ionic states: that block is the whole (4-state)
    # half-filled S_z = 0 space, so its effective Hamiltonian is λV itself and terminates at order 1
    rb = convergence(m, 0, 20, treatment="block", coupling=1.0)
    assert rb.treatment == "near-degenerate block" and rb.kind == "terminating"
    assert "exact within its sector" in rb.reason


def test_exactly_degenerate_pair_terminates():
    # H0 = 0 on a degenerate pair, V = σx: the whole space is the group, H_eff = λV exactly
    m = Model(np.zeros((2, 2)), [[0, 1.0], [1.0, 0]])
    r = convergence(m, 0, 10)
    assert r.treatment == "degenerate" and r.kind == "terminating" and np.isinf(r.radius)
    assert "exact within its sector" in r.reason


def test_quantity_radius_is_the_smallest_level_radius():
    # Jaynes–Cummings: the n-excitation doublet has branch points at λ = ±iΔ/(2 g sqrt(n)) (closed form,
    # Jaynes & Cummings, Proc. IEEE 51, 89 (1963)); χ uses |1,1> (n = 2), |1,0>, |0,1> (n = 1), |0,0>
    wq, wr, g = 5.0, 6.0, 0.1
    m = models.jaynes_cummings(omega_q=wq, omega_r=wr, g=g, n_photons=6)
    delta = abs(wq - wr)
    r = convergence(m, ptcheck.dispersive_shift(), 30)
    assert r.radius == pytest.approx(delta / (2 * g * np.sqrt(2)), rel=1e-3)
    assert r.limiting_level == m.level_index((1, 1))
    radii = dict(r.level_radii)
    assert radii["|1,0⟩"] == pytest.approx(delta / (2 * g), rel=1e-3)
    assert r.label == "chi" and "limited by level |1,1⟩" in r.summary
    assert r.to_dict()["limiting_level"] == r.limiting_level


def test_bad_treatment():
    m = Model(np.diag([0.0, 1.0]), [[0, 0.1], [0.1, 0]])
    with pytest.raises(ValueError, match="treatment must be one of"):
        convergence(m, 0, 10, treatment="magic")
