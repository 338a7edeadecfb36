"""A complete finite basis (``Model.truncated is False``) never gives an asymptotic series of radius 0.

For a finite matrix family H0 + λV a non-degenerate level is analytic in a disc of radius at least
d / (2‖V‖) (Kato, Perturbation Theory for Linear Operators, 1966, ch. II §3): its series converges.
"""

import numpy as np
import pytest
import scipy.sparse as sp

from ptcheck import Model, convergence
from ptcheck.models import (
    anharmonic_oscillator,
    charge_qubit,
    coupled_kerr_qubits,
    hubbard_dimer,
    jaynes_cummings,
    kerr_qubit_resonator,
    linear_rotor,
    planar_rotor,
    polar_molecule,
    rabi,
    spin_chain,
    two_level,
)
from ptcheck.report import run_check


def _pfeuty_radius(n_spins: int) -> float:
    # Uniform transverse-field Ising ring H = −Σ σz σz − λ Σ σx, even-parity ground state
    # E0(λ) = −Σ_k sqrt(1 + λ² − 2λ cos k) up to the sign of λ, k = π(2m+1)/L: branch points at
    # λ = −e^{±ik}, all on |λ| = 1 (Pfeuty, Ann. Phys. 57, 79 (1970)); the nearest is at distance 1.
    k = np.pi * (2 * np.arange(n_spins) + 1) / n_spins
    return float(np.min(np.abs(-np.exp(1j * k))))


def test_uniform_ising_ring_with_shrinking_estimates_is_convergent_not_asymptotic():
    # L = 10, order 30: the root-test radius falls from 1.39 (first half) to 0.98 (all coefficients);
    # before Model.truncated this was called asymptotic with radius 0.
    m = spin_chain(n_spins=10, kind="transverse_ising", h_z=0.0)
    assert m.truncated is False
    r = convergence(m, 0, 30, ep_search="never")
    exact = _pfeuty_radius(10)
    assert r.kind == "convergent"
    assert r.kato_bound <= r.radius <= exact * 1.03  # the smallest coefficient estimate: cautious, never above the truth
    assert any("still shrinking" in n and "more orders" in n for n in r.notes)
    assert "radius 0" not in r.summary and "asymptotic" not in r.summary
    assert "may be smaller" in r.summary


def test_uniform_ising_ring_radius_from_the_exceptional_point_matches_pfeuty():
    # The reduced-basis exceptional-point search finds a branch point of the level: the radius is its distance,
    # equal to Pfeuty's closed form |λ| = 1 (Pfeuty, Ann. Phys. 57, 79 (1970)).
    m = spin_chain(n_spins=10, kind="transverse_ising", h_z=0.0)
    r = convergence(m, 0, 30, ep_search="always")
    assert r.kind == "convergent"
    assert r.radius >= r.kato_bound
    assert r.radius == pytest.approx(_pfeuty_radius(10), rel=0.02)
    k = np.pi * (2 * np.arange(10) + 1) / 10
    assert np.min(np.abs(r.exceptional_points[0] + np.exp(1j * k))) < 1e-6  # one of λ = −e^{±ik}
    assert "reported radius is that of this exceptional point" in r.summary


def test_chain_with_site_fields_is_never_asymptotic():
    # The invented site fields h_i = 0.1 + 0.03 i on 14 spins: at order 30 the root-test radius shrinks with the
    # order (1.78 -> 1.58); the basis is the full 2^14 space, so the level is analytic for |λ| < kato_bound at
    # least (Kato 1966, ch. II) and the answer must be a finite radius above that bound.
    fields = list(np.round(0.1 + 0.03 * np.arange(14), 4))
    m = spin_chain(n_spins=14, kind="transverse_ising", h_z=fields)
    r = convergence(m, 0, 30)
    assert r.kind == "convergent"
    assert np.isfinite(r.radius) and r.radius >= r.kato_bound > 0
    assert any("still shrinking" in n for n in r.notes)
    assert "radius 0" not in r.summary and "radius of convergence is 0" not in r.summary


def test_same_matrices_without_the_flag_keep_the_cautious_asymptotic_answer():
    # A user model says nothing about truncation (None): the shrinking-radius rule still applies
    # (common practice, no source: a truncated basis of an infinite problem can hide factorial growth).
    sub = spin_chain(n_spins=10, kind="transverse_ising", h_z=0.0).restrict(0)
    user = Model(sp.diags(sub.e0).tocsr(), sub.v)
    assert user.truncated is None
    r = convergence(user, 0, 30, ep_search="never")
    assert r.kind == "asymptotic" and r.radius == 0.0
    told = Model(sp.diags(sub.e0).tocsr(), sub.v, truncated=False)
    assert convergence(told, 0, 30, ep_search="never").kind == "convergent"


def test_truncated_oscillators_stay_asymptotic():
    # Cubic anharmonic oscillator: factorial growth Γ(j + 1/2) of the λ² coefficients (Bender & Wu, Phys. Rev. D 7,
    # 1620 (1973)); a truncated basis keeps today's answer.
    m = anharmonic_oscillator(kind="cubic", n_basis=200)
    assert m.truncated is True
    r = convergence(m, 0, 40)
    assert r.kind == "asymptotic" and r.radius == 0.0


def test_report_of_a_complete_basis_never_says_divergent():
    m = spin_chain(n_spins=10, kind="transverse_ising", h_z=0.0)
    rep = run_check(m, levels=[0], orders=[2], coupling=0.1, convergence_order=30)
    text = " ".join(rep.cautions) + " ".join(rep.notes)
    assert "asymptotic" not in text and "radius 0" not in text
    assert rep.convergence[0].kind == "convergent"


@pytest.mark.parametrize(
    "build, truncated",
    [
        (lambda: spin_chain(n_spins=4), False),
        (lambda: spin_chain(n_spins=4, kind="xxz"), False),
        (two_level, False),
        (hubbard_dimer, False),
        (lambda: jaynes_cummings(n_photons=4), True),
        (lambda: rabi(n_photons=4), True),
        (lambda: kerr_qubit_resonator(n_photons=4), True),
        (lambda: coupled_kerr_qubits(n_levels=3), True),
        (lambda: anharmonic_oscillator(n_basis=6), True),
        (lambda: charge_qubit(n_max=3), True),
        (lambda: planar_rotor(m_max=3), True),
        (lambda: linear_rotor(j_max=3), True),
        (lambda: polar_molecule(j_max=2), True),
    ],
)
def test_builders_say_whether_their_basis_is_a_truncation(build, truncated):
    # common practice, no source: a photon / level / charge / angular-momentum cut-off truncates an infinite space
    m = build()
    assert m.truncated is truncated
    assert m.restrict(0).truncated is truncated
    assert m.to_dict()["truncated"] is truncated


@pytest.mark.parametrize("bad", ["no", 0, 1.0])
def test_truncated_must_be_a_bool_or_none(bad):
    with pytest.raises(TypeError, match="truncated must be True, False or None"):
        Model(np.diag([0.0, 1.0]), [[0, 0.1], [0.1, 0]], truncated=bad)
