"""Derived quantities: χ, ZZ, exchange J, transition frequencies -- series against published closed forms."""

import json

import numpy as np
import pytest
from hypothesis import assume, given, settings, strategies as st
from numpy.testing import assert_allclose
from scipy.optimize import brentq
from scipy.special import binom

from ptcheck.compare import compare, validity_boundary
from ptcheck.errors import AmbiguousLevelError, DegenerateLevelError
from ptcheck.models import coupled_kerr_qubits, hubbard_dimer, jaynes_cummings, kerr_qubit_resonator
from ptcheck.products import product_model
from ptcheck.quantities import (
    Quantity,
    anharmonicity,
    combination,
    cross_kerr,
    dispersive_shift,
    exchange,
    leading_order_formula,
    quantity_radius,
    quantity_series,
    stark_shift,
    transition_frequency,
    zz_coupling,
)
from ptcheck.series import rs_series

# --------------------------------------------------------------------------- Jaynes–Cummings closed form
WQ, WR, G = 6.0, 5.0, 0.1  # invented values, dispersive regime g/Δ = 0.1 (qubit above the resonator)
DELTA = WQ - WR


def jc_e_pm(n, lam, sign):
    """Jaynes & Cummings, Proc. IEEE 51, 89 (1963): with H0 = ω_q|1⟩⟨1| + ω_r a†a and V = g(σ+a + σ−a†),
    the doublet {|1,n⟩, |0,n+1⟩} has E±(n) = ω_r(n + 1/2) + ω_q/2 ± √(Δ²/4 + λ²g²(n+1)), Δ = ω_q − ω_r.
    For Δ > 0, |1,n⟩ continues to E+ and |0,n+1⟩ to E−; |0,0⟩ stays at 0."""
    return WR * (n + 0.5) + WQ / 2 + sign * np.sqrt(DELTA**2 / 4 + (lam * G) ** 2 * (n + 1))


def jc_chi_exact(lam):
    # χ = (E11 − E10 − E01 + E00)/2 with E11 = E+(1), E10 = E+(0), E01 = E−(0), E00 = 0
    return (jc_e_pm(1, lam, +1) - jc_e_pm(0, lam, +1) - jc_e_pm(0, lam, -1)) / 2


def jc_chi_taylor(k_max):
    # Taylor coefficients of the closed form: χ(λ) = (√(Δ²/4 + 2g²λ²) − Δ/2)/2
    #   = (Δ/4) Σ_{j≥1} binom(1/2, j) (8 g² λ² / Δ²)^j
    c = np.zeros(k_max + 1)
    for j in range(1, k_max // 2 + 1):
        c[2 * j] = DELTA / 4 * binom(0.5, j) * (8 * G**2 / DELTA**2) ** j
    return c


def jc():
    return jaynes_cummings(omega_q=WQ, omega_r=WR, g=G, n_photons=5)


def test_jc_dispersive_shift_second_order_is_g2_over_delta():
    # Blais et al., Phys. Rev. A 69, 062320 (2004), dispersive Hamiltonian: (ω_r + χσz) a†a, χ = g²/Δ
    s = quantity_series(jc(), dispersive_shift(), 8)
    assert s.first_nonzero_order == 2
    assert_allclose(s.coefficients[2], G**2 / DELTA, rtol=1e-12)
    # every order against the Taylor expansion of the Jaynes–Cummings closed form
    assert_allclose(s.coefficients, jc_chi_taylor(8), atol=1e-15)
    # the closed form is shown beside the order-2 coefficient
    text, value = s.closed_form
    assert text.startswith("g²/Δ") and value == pytest.approx(G**2 / DELTA, rel=1e-12)
    assert s.closed_form_order == 2 and s.closed_form_coefficient == pytest.approx(G**2 / DELTA, rel=1e-12)
    assert "g²/Δ" in repr(s) and "g²/Δ" in s._repr_html_()
    assert s.leading_term == "chi ≈ 0.01 λ² (order 2)"
    assert s.labels == ("|1,1⟩", "|1,0⟩", "|0,1⟩", "|0,0⟩") and s.weights == (0.5, -0.5, -0.5, 0.5)
    assert s.treatments == ("nondegenerate",) * 4
    d = json.loads(json.dumps(s.to_dict()))
    assert d["closed_form"]["formula"] == text and d["first_nonzero_order"] == 2 and d["labels"][0] == "|1,1⟩"


def test_jc_exact_chi_from_compare_matches_the_closed_form():
    # Jaynes & Cummings, Proc. IEEE 51, 89 (1963), doublet energies (jc_e_pm above)
    m = jc()
    chi = dispersive_shift()
    lam = np.array([-0.6, -0.2, 0.3, 0.5, 0.6])  # mixing ratios below 0.1: the non-degenerate series applies
    r = compare(m, [chi, (1, 0)], [2, 4], lam, treatment="nondegenerate")
    assert r.targets == ("chi", "|1,0⟩")  # labels travel into the result
    assert_allclose(r.exact[0], jc_chi_exact(lam), rtol=1e-10, atol=1e-14)
    assert_allclose(r.exact[1], jc_e_pm(0, lam, +1), rtol=1e-12)
    # compare's perturbative side is the QuantitySeries value
    s = quantity_series(m, chi, 4)
    assert_allclose(r.perturbative[0, 0], s.energy(lam, order=2), rtol=1e-12)
    assert_allclose(r.perturbative[0, 1], s.energy(lam, order=4), rtol=1e-12)
    assert_allclose(r.perturbative[0, 0], G**2 * lam**2 / DELTA, rtol=1e-12)
    # relative error relative to χ itself (relative_to="value")
    assert_allclose(r.rel_error[0, 0], np.abs(G**2 * lam**2 / DELTA - jc_chi_exact(lam)) / np.abs(jc_chi_exact(lam)), rtol=1e-8)


def test_validity_boundary_of_chi_with_absolute_and_relative_tolerance():
    # the boundary of the order-2 formula χ ≈ g²λ²/Δ, found independently by root finding on the
    # Jaynes–Cummings closed form (Jaynes & Cummings 1963; Blais et al. 2004)
    m = jc()
    chi = dispersive_shift()
    err = lambda lam: abs(G**2 * lam**2 / DELTA - jc_chi_exact(lam))  # noqa: E731
    want_abs = brentq(lambda x: err(x) - 1e-4, 1e-3, 5.0)
    want_rel = brentq(lambda x: err(x) / abs(jc_chi_exact(x)) - 0.05, 1e-3, 5.0)
    b_abs = validity_boundary(m, chi, 2, tol=1e-4, treatment="nondegenerate")
    b_rel = validity_boundary(m, chi, 2, rtol=0.05, treatment="nondegenerate")
    assert b_abs.status == "found" and b_rel.status == "found" and b_abs.target == "chi"
    assert b_abs.coupling == pytest.approx(want_abs, rel=5e-3)
    assert b_rel.coupling == pytest.approx(want_rel, rel=5e-3)
    b_neg = validity_boundary(m, chi, 2, tol=1e-4, direction=-1, treatment="nondegenerate")
    assert b_neg.coupling == pytest.approx(-want_abs, rel=5e-3)  # χ(λ) is even in λ


def test_block_treated_levels_keep_the_taylor_coefficients_of_the_closed_form():
    # at a large coupling of interest "auto" puts |1,1⟩ and |0,2⟩ (mixing ratio > 0.1) in a block; the Taylor
    # series of χ is unique, so the coefficients are still those of the Jaynes–Cummings closed form
    s = quantity_series(jc(), dispersive_shift(), 6, coupling=2.0, treatment="auto")
    assert "near-degenerate block" in s.treatments and "nondegenerate" in s.treatments
    assert_allclose(s.coefficients, jc_chi_taylor(6), atol=1e-15)
    assert any("near-degenerate block" in n for n in s.notes)
    # the default answers the question asked: the plain series of every level, whatever the coupling of interest
    assert quantity_series(jc(), dispersive_shift(), 6, coupling=2.0).treatments == ("nondegenerate",) * 4
    # the block value (eigenvalue of the truncated H_eff) is a resummation: close to the closed form
    assert abs(s.energy(2.0, order=2) - jc_chi_exact(2.0)) < abs(G**2 * 4 / DELTA - jc_chi_exact(2.0))


def test_labels_reach_figure_captions():
    import matplotlib.pyplot as plt

    from ptcheck.plots.errors import plot_errors

    r = compare(jc(), [(1, 0), dispersive_shift()], [2], np.linspace(0.1, 0.6, 5), treatment="nondegenerate")
    art = plot_errors(r, target="|1,0⟩")
    try:
        assert art.target == "|1,0⟩" and "|1,0⟩" in art.caption.get_text()
    finally:
        plt.close(art.figure)


# --------------------------------------------------------------------------- Kerr-ladder qubit (transmon)
@pytest.mark.parametrize("alpha", [-0.3, -0.05, 0.4])
def test_kerr_qubit_dispersive_shift_matches_koch(alpha):
    # Koch et al., Phys. Rev. A 76, 042319 (2007), dispersive limit: χ = χ_01 − χ_12/2 with
    # χ_ij = g_ij²/(ω_ij − ω_r), g_01 = g, g_12 = √2 g, ω_12 = ω_q + α (α ≈ −E_C for a transmon), so
    # χ = g²/Δ − g²/(Δ + α) = g²α/(Δ(Δ + α)).  Koch's H_eff = (ω_r' + χσz) a†a has the same
    # convention as χ = (E11 − E10 − E01 + E00)/2 (resonator frequency ω_r' ± χ for the qubit in 1/0).
    # Independent check (from memory, second-order RS): E10 = ω_q + g²/Δ, E01 = ω_r − g²/Δ,
    # E11 = ω_q + ω_r + 2g²/Δ − 2g²/(Δ + α)  ⇒  (E11 − E10 − E01 + E00)/2 = g²/Δ − g²/(Δ + α).
    wq, wr, g = 5.0, 6.2, 0.07
    d = wq - wr
    m = kerr_qubit_resonator(omega_q=wq, alpha=alpha, omega_r=wr, g=g, n_qubit=4, n_photons=4, rotating_wave=True)
    s = quantity_series(m, dispersive_shift(), 4)
    want = g**2 * alpha / (d * (d + alpha))
    assert s.first_nonzero_order == 2
    assert_allclose(s.coefficients[2], want, rtol=1e-10)
    assert s.closed_form is not None and s.closed_form[1] == pytest.approx(want, rel=1e-12)
    assert s.closed_form[0].startswith("g²α/(Δ(Δ+α))")


def test_kerr_qubit_chi_tends_to_jaynes_cummings_for_large_anharmonicity():
    # Koch et al. (2007): g²α/(Δ(Δ+α)) → g²/Δ as α → ∞ (the two-level limit, Blais et al. 2004)
    d, g = 1.0, 0.1
    m = kerr_qubit_resonator(omega_q=6.0, alpha=1e5, omega_r=5.0, g=g, n_qubit=3, n_photons=4, rotating_wave=True)
    s = quantity_series(m, dispersive_shift(), 2)
    assert_allclose(s.coefficients[2], g**2 / d, rtol=2e-5)


# --------------------------------------------------------------------------- coupled qubits: ZZ
def exact_zz_kerr(w1, a1, w2, a2, j, n=4):
    """Independent exact ZZ: diagonalise two Kerr ladders with exchange j(b1 b2† + b1† b2) (np.kron, eigh),
    identifying each level by its largest overlap with the product state (unambiguous for small j)."""
    k = np.arange(n)
    b = np.diag(np.sqrt(np.arange(1.0, n)), 1)
    e1 = w1 * k + a1 * k * (k - 1) / 2
    e2 = w2 * k + a2 * k * (k - 1) / 2
    h = np.kron(np.diag(e1), np.eye(n)) + np.kron(np.eye(n), np.diag(e2)) + j * (np.kron(b, b.T) + np.kron(b.T, b))
    e, u = np.linalg.eigh(h)

    def level(k1, k2):
        return e[np.argmax(np.abs(u[k1 * n + k2]))]

    return level(1, 1) - level(1, 0) - level(0, 1) + level(0, 0)


def test_zz_of_two_level_qubits_vanishes():
    # two-level qubits with XY exchange: |0,0⟩ and |1,1⟩ are not coupled and E10 + E01 = ω1 + ω2 exactly
    # (2x2 block of the single-excitation sector), so ζ = 0 at every order (common practice, no source)
    m = coupled_kerr_qubits(omega1=5.0, omega2=5.4, j=0.02, n_levels=2)
    s = quantity_series(m, zz_coupling(), 8)
    assert s.first_nonzero_order is None
    assert_allclose(s.coefficients, 0.0, atol=1e-15)
    assert abs(s.level_coefficients[1, 2]) > 1e-4  # while the levels themselves do shift at second order
    assert "cancels" in s.leading_term


@pytest.mark.parametrize("a1,a2,d", [(-0.25, -0.3, -0.4), (-0.2, -0.2, 0.7), (0.1, -0.3, 0.5)])
def test_zz_of_kerr_ladders_matches_second_order_formula_and_exact_numerics(a1, a2, d):
    # ζ^(2) = 2J²(α1 + α2)/((Δ + α1)(Δ − α2)), Δ = ω1 − ω2 (from memory; e.g. the static ZZ of two
    # exchange-coupled transmons).  Our own derivation: E10 = ω1 + J²/Δ, E01 = ω2 − J²/Δ,
    # E11 = ω1 + ω2 + 2J²/(Δ − α2) − 2J²/(Δ + α1) (|1,1⟩ ↔ |0,2⟩, |2,0⟩ with matrix element √2 J), so
    # ζ = 2J²/(Δ − α2) − 2J²/(Δ + α1).  Outside check: exact diagonalisation at small J (exact_zz_kerr).
    w2 = 5.0
    w1 = w2 + d
    jj = 0.01
    m = coupled_kerr_qubits(omega1=w1, alpha1=a1, omega2=w2, alpha2=a2, j=jj, n_levels=4)
    s = quantity_series(m, zz_coupling(), 4)
    want = 2 * jj**2 * (a1 + a2) / ((d + a1) * (d - a2))
    assert s.first_nonzero_order == 2  # orders 0 and 1 cancel exactly
    assert_allclose(s.coefficients[:2], 0.0, atol=1e-14)
    assert_allclose(s.coefficients[2], want, rtol=1e-10)
    assert s.closed_form[1] == pytest.approx(want, rel=1e-12)
    # exact numerics at small coupling: ζ(λ)/λ² → ζ^(2), with the ζ^(4) λ⁴ correction from the series
    for lam in (0.05, 0.1):
        z = exact_zz_kerr(w1, a1, w2, a2, lam * jj)
        assert_allclose(z / lam**2, want, rtol=5e-3)
        assert_allclose(z, s.energy(lam, order=4), rtol=1e-5)


# --------------------------------------------------------------------------- Hubbard dimer: exchange
# The singly occupied pair is exactly degenerate and V splits it only at second order, so an overlap tracker
# is followed from the exact states at a tiny coupling (block convention); the exact values asserted
# below are what decides whether the branches were followed correctly.
def test_hubbard_exchange_is_4t2_over_u_and_matches_the_dimer_closed_form():
    # Anderson superexchange J = 4t²/U (P. W. Anderson, Phys. Rev. 115, 2 (1959)); exact two-site Hubbard at
    # half filling: singlet (U − √(U² + 16t²))/2, triplet 0 (the 2x2 singlet block [[0, -2t], [-2t, U]] of the
    # covalent and ionic singlets; standard derivation, from memory), so J(λ) = (√(U² + 16t²λ²) − U)/2 = (U/2) Σ_{j≥1} binom(1/2, j)(16t²λ²/U²)^j.
    t, u = 1.0, 8.0
    m = hubbard_dimer(t=t, u=u)
    j = exchange(1, 0)  # S_z = 0 sector: the singlet is the lower branch of the degenerate pair (rank 0)
    s = quantity_series(m, j, 8)
    assert s.treatments == ("degenerate", "degenerate")
    assert s.first_nonzero_order == 2
    want = np.zeros(9)
    for k in range(1, 5):
        want[2 * k] = u / 2 * binom(0.5, k) * (16 * t**2 / u**2) ** k
    assert_allclose(s.coefficients, want, atol=1e-12)
    assert s.closed_form[0].startswith("4t²/U") and s.closed_form[1] == pytest.approx(4 * t**2 / u, rel=1e-12)
    # the block eigenvalue at order 2 is already the superexchange value
    assert s.energy(1.0, order=2) == pytest.approx(4 * t**2 / u, rel=1e-10)
    # exact side of the engine against the closed form
    lam = np.array([0.2, 0.7, 1.0, 1.5])
    r = compare(m, [j], [2, 4], lam, coupling=0.3)
    assert_allclose(r.exact[0], (np.sqrt(u**2 + 16 * t**2 * lam**2) - u) / 2, rtol=1e-10)
    # same treatment as quantity_series when both judge near-degeneracy at the same coupling
    assert_allclose(r.perturbative[0, 0], quantity_series(m, j, 2, coupling=0.3).energy(lam, order=2), rtol=1e-12)
    assert_allclose(r.perturbative[0, 0], 4 * t**2 * lam**2 / u, rtol=1e-10)


def test_hubbard_triplet_members_that_v_never_touches_get_a_series_too():
    # full two-electron sector: the S_z = ±1 triplets (exactly degenerate, decoupled by spin symmetry)
    m = hubbard_dimer(t=1.0, u=8.0, sector="two_electron")
    for trip in (1, 2, 3):
        s = quantity_series(m, exchange(trip, 0), 4)
        assert_allclose(s.coefficients, [0, 0, 0.5, 0, -16 / 8**3], atol=1e-12)  # 4t²/U − 16t⁴/U³ (closed form above)


# --------------------------------------------------------------------------- resonance: block levels
def test_resonant_jc_vacuum_rabi_splitting_from_block_levels():
    # Jaynes & Cummings (1963) at Δ = 0: the n = 0 doublet splits as ω ± gλ, exactly linear in λ
    m = jaynes_cummings(omega_q=5.0, omega_r=5.0, g=G, n_photons=4)
    s = quantity_series(m, transition_frequency(2, 1, name="vacuum Rabi"), 6)
    assert s.treatments == ("degenerate", "degenerate")
    assert_allclose(s.coefficients, [0, 2 * G, 0, 0, 0, 0, 0], atol=1e-13)
    assert s.first_nonzero_order == 1 and s.leading_term == "vacuum Rabi ≈ 0.2 λ (order 1)"
    # the labels of the resonant doublet are ambiguous: reported naming the quantity, not guessed
    with pytest.raises(AmbiguousLevelError, match=r"quantity 'chi' uses level \(1, 1\)"):
        quantity_series(m, dispersive_shift(), 2)
    with pytest.raises(AmbiguousLevelError, match="quantity 'chi'"):
        compare(m, [dispersive_shift()], [2], [0.1])
    # forcing the non-degenerate series on the degenerate pair names the quantity too
    with pytest.raises(DegenerateLevelError, match="quantity 'vacuum Rabi'"):
        quantity_series(m, transition_frequency(2, 1, name="vacuum Rabi"), 2, treatment="nondegenerate")


# --------------------------------------------------------------------------- properties
def random_product_model(draw_key, d1, d2):
    rng = np.random.default_rng(draw_key)
    e1 = np.cumsum(0.5 + rng.random(d1)) - 0.5
    e2 = np.cumsum(0.37 + 0.6 * rng.random(d2))
    a = rng.normal(size=(d1, d1))
    b = rng.normal(size=(d2, d2))
    c = rng.normal(size=(d1, d1))
    return product_model([np.diag(e1), np.diag(e2)], [(0.05, [a + a.T, b + b.T]), (0.03, [c + c.T, None])]), rng


@settings(max_examples=25, deadline=None)
@given(key=st.integers(0, 2**31 - 1), d1=st.integers(2, 3), d2=st.integers(2, 3), order=st.integers(0, 5))
def test_series_of_a_quantity_is_the_combination_of_level_series(key, d1, d2, order):
    # common practice, no source: linearity of the RS expansion
    m, rng = random_product_model(key, d1, d2)
    assume(np.min(np.diff(m.e0)) > 1e-3)
    labels = [lab for lab in m.labels]
    pick = rng.choice(len(labels), size=int(rng.integers(1, len(labels) + 1)), replace=False)
    weights = {labels[i]: float(rng.normal()) for i in pick}
    q = combination("random", weights)
    s = quantity_series(m, q, order, treatment="nondegenerate")
    want = sum(w * rs_series(m, lab, order).energy_coefficients for lab, w in weights.items())
    assert_allclose(s.coefficients, want, rtol=1e-12, atol=1e-14)
    lam = np.array([-0.3, 0.1, 0.4])
    want_e = sum(w * rs_series(m, lab, order).energy(lam) for lab, w in weights.items())
    assert_allclose(s.energy(lam), want_e, rtol=1e-12, atol=1e-14)


@settings(max_examples=25, deadline=None)
@given(key=st.integers(0, 2**31 - 1), m_cancel=st.integers(1, 3))
def test_exact_cancellation_up_to_an_order_reports_the_first_nonzero_order(key, m_cancel):
    # construction: weights w in the null space of the (m+1) x m matrix of level coefficients of orders
    # 0..m−1, so Σ w E^(k) = 0 for k < m (common practice, no source)
    m, rng = random_product_model(key, 3, 3)
    assume(np.min(np.diff(m.e0)) > 1e-3)
    order = 5
    levels = rng.choice(m.n, size=m_cancel + 1, replace=False)
    c = np.array([rs_series(m, int(n), order).energy_coefficients for n in levels])
    _, sv, vt = np.linalg.svd(c[:, :m_cancel].T)
    w = vt[-1]
    survivor = abs(w @ c[:, m_cancel])
    assume(survivor > 1e-6 * (np.abs(w) @ np.abs(c[:, m_cancel])))
    q = combination("cancelling", {int(n): float(wi) for n, wi in zip(levels, w)})
    s = quantity_series(m, q, order)
    assert s.first_nonzero_order == m_cancel


# --------------------------------------------------------------------------- Quantity and constructors
def test_quantity_constructor_signature_and_validation():
    chi = Quantity("chi", {(1, 1): 0.5, (1, 0): -0.5, (0, 1): -0.5, (0, 0): 0.5})
    assert chi.weights == dispersive_shift().weights and chi.units == "" and chi.relative_to == "value"
    # a hand-made χ with the canonical weights gets the registered closed form (Blais et al. 2004: g²/Δ)
    assert leading_order_formula(jc(), chi)[1] == pytest.approx(G**2 / DELTA, rel=1e-12)
    q = Quantity("x", {(1, 0): 1, (0, 0): -1}, "GHz", "shift")
    assert q.units == "GHz" and q.relative_to == "shift" and q.kind == "combination"
    with pytest.raises(TypeError, match=r"Quantity 'bad': weight of level \(1, 0\) must be a number; got 'a'"):
        Quantity("bad", {(1, 0): "a"})
    with pytest.raises(ValueError, match=r"Quantity 'bad': weight of level 2 is not finite"):
        Quantity("bad", {2: np.inf})
    with pytest.raises(TypeError, match=r"Quantity 'bad': level 1.5 must be an energy rank"):
        Quantity("bad", {1.5: 1.0})
    with pytest.raises(ValueError, match=r"Quantity 'bad': level -1 is a negative energy rank"):
        Quantity("bad", {-1: 1.0})
    with pytest.raises(TypeError, match="weight of level 0 must be a real number"):
        Quantity("bad", {0: 1j})
    with pytest.raises(ValueError, match="non-empty mapping"):
        Quantity("bad", {})
    with pytest.raises(ValueError, match="relative_to must be one of"):
        Quantity("bad", {0: 1.0}, relative_to="energy")
    with pytest.raises(TypeError, match="closed_form must be a"):
        Quantity("bad", {0: 1.0}, closed_form=0.01)
    assert Quantity("ok", {0: 1.0}, closed_form=("a²", np.float64(2))).closed_form == ("a²", 2.0)


def test_constructors_build_the_documented_combinations():
    # definitions in the module docstring (χ: Blais et al. 2004 / Koch et al. 2007 convention)
    assert dispersive_shift().weights == {(1, 1): 0.5, (1, 0): -0.5, (0, 1): -0.5, (0, 0): 0.5}
    three = dispersive_shift(2, resonator_axis=0, n_subsystems=3)
    assert three.weights == {(1, 0, 1): 0.5, (0, 0, 1): -0.5, (1, 0, 0): -0.5, (0, 0, 0): 0.5}
    assert zz_coupling().weights == {(1, 1): 1.0, (1, 0): -1.0, (0, 1): -1.0, (0, 0): 1.0}
    assert zz_coupling((0, 2), n_subsystems=3).weights[(1, 0, 1)] == 1.0
    assert cross_kerr().kind == "cross_kerr" and cross_kerr().weights == zz_coupling().weights
    assert anharmonicity(0).weights == {(2, 0): 1.0, (1, 0): -2.0, (0, 0): 1.0}
    assert exchange("T", "S").weights == {"T": 1.0, "S": -1.0}
    f = transition_frequency((1, 0), (0, 0))
    assert f.weights == {(1, 0): 1.0, (0, 0): -1.0} and f.name == "ω(|1,0⟩→|0,0⟩)" and f.relative_to == "value"
    assert stark_shift((1, 0), (0, 0)).relative_to == "shift" and stark_shift((1, 0)).weights == {(1, 0): 1.0}
    with pytest.raises(ValueError, match="give resonator_axis"):
        dispersive_shift(0, n_subsystems=3)
    with pytest.raises(ValueError, match="qubit/resonator axes must be different"):
        dispersive_shift(1, resonator_axis=1, n_subsystems=3)
    with pytest.raises(ValueError, match="qubit axis must be in 0..1"):
        dispersive_shift(2)
    with pytest.raises(ValueError, match="upper and lower are the same level"):
        transition_frequency((1, 0), (1, 0))
    with pytest.raises(TypeError, match="zz axes must be a pair"):
        zz_coupling(0)


def test_resolve_errors_name_the_quantity_and_the_level():
    m = jc()
    with pytest.raises(ValueError, match=r"quantity 'chi3' uses level \(1, 1, 0\).*3 quantum numbers.*dims \(2, 5\)"):
        quantity_series(m, dispersive_shift(0, resonator_axis=1, n_subsystems=3, name="chi3"), 2)
    with pytest.raises(ValueError, match=r"quantity 'f' uses level \(0, 7\)"):
        quantity_series(m, transition_frequency((0, 7), (0, 0), name="f"), 2)
    with pytest.raises(ValueError, match="quantity 'zero' is identically zero"):
        quantity_series(m, combination("zero", {(0, 1): 1.0, 1: -1.0}), 2)  # (0, 1) is rank 1 (ω_r < ω_q)
    with pytest.raises(TypeError, match="quantity must be a ptcheck.Quantity"):
        quantity_series(m, (1, 0), 2)
    with pytest.raises(ValueError, match="order must be an int >= 0"):
        quantity_series(m, dispersive_shift(), -1)
    with pytest.raises(ValueError, match="treatment must be one of"):
        quantity_series(m, dispersive_shift(), 2, treatment="exact")


def test_leading_term_for_a_quantity_with_an_unperturbed_value_and_a_user_closed_form():
    # transition frequency: ω_10 = ω_q + g²/Δ λ² + ... (Jaynes–Cummings Lamb shift, Blais et al. 2004)
    f = transition_frequency((1, 0), (0, 0), closed_form=("ω_q + g²/Δ", WQ + G**2 / DELTA), closed_form_order=2)
    s = quantity_series(jc(), f, 4)
    assert s.first_nonzero_order == 0
    assert s.leading_term == "ω(|1,0⟩→|0,0⟩) ≈ 6 + 0.01 λ² (first correction at order 2)"
    assert s.closed_form == ("ω_q + g²/Δ", pytest.approx(WQ + G**2 / DELTA)) and s.closed_form_order == 2
    assert s.closed_form_coefficient == pytest.approx(G**2 / DELTA)
    # no registered closed form for an unknown model / quantity kind
    assert leading_order_formula(jc(), zz_coupling()) is None
    assert leading_order_formula(jaynes_cummings(omega_q=WQ, omega_r=WR, g=G, n_photons=5), dispersive_shift())[1] == pytest.approx(G**2 / DELTA)
    # a rabi model (counter-rotating terms) has no g²/Δ entry: the formula would be wrong there
    from ptcheck.models import rabi

    assert leading_order_formula(rabi(omega_q=WQ, omega_r=WR, g=G, n_photons=5), dispersive_shift()) is None


def test_quantity_radius_is_the_smallest_level_radius():
    m = jc()
    chi = dispersive_shift()
    radii = {m.level_index(k): r for k, r in {(1, 1): 2.0, (1, 0): 3.0, (0, 1): 1.5, (0, 0): np.inf}.items()}
    assert quantity_radius(m, chi, radii.__getitem__) == (1.5, m.level_index((0, 1)))
    r, n = quantity_radius(m, chi, lambda n: np.nan if n == m.level_index((1, 0)) else 1.0)
    assert np.isnan(r) and n == m.level_index((1, 0))
    assert quantity_radius(m, transition_frequency((0, 0), (1, 0)), lambda n: np.inf)[0] == np.inf
    with pytest.raises(ValueError, match="negative radius"):
        quantity_radius(m, chi, lambda n: -1.0)
    with pytest.raises(TypeError, match="must be a callable"):
        quantity_radius(m, chi, 3.0)
    with pytest.raises(TypeError, match="must return a number"):
        quantity_radius(m, chi, lambda n: "far")
