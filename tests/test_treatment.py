"""The treatment each level gets (one place), pairing by overlap, and the default answering the question asked.

Brute force is the referee: dense eigvalsh / eigh of H(λ) (numpy), textbook second-order formulas written
out here, fine grids + brentq for boundaries.
"""

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import brentq

from ptcheck import Model, block_series, compare, convergence, dispersive_shift, find_blocks, validity_boundary
from ptcheck.blocks import BlockWarning
from ptcheck.models import jaynes_cummings, kerr_qubit_resonator, spin_chain
from ptcheck.quantities import quantity_series, stark_shift
from ptcheck.treatment import CheckSettings, expansions

from conftest import ising_ring


# ---------------------------------------------------------------------------------------------- Λ system
def lambda_system(o1=0.3, o2=0.4, delta=2.0):
    # two degenerate ground states |1⟩, |2⟩ (energy 0) coupled to one excited state |e⟩ at detuning Δ
    h0 = np.diag([0.0, 0.0, delta])
    v = np.array([[0, 0, o1], [0, 0, o2], [o1, o2, 0]])
    return Model(h0, v, labels=["1", "2", "e"], name="Λ system")


def test_lambda_system_effective_hamiltonian_is_adiabatic_elimination():
    # Adiabatic elimination of |e⟩: H_eff^(2)_ij = −Ω_i Ω_j / Δ in the convention V_ie = Ω_i (standard result,
    # e.g. Brion, Pedersen & Mølmer, J. Phys. A 40, 1033 (2007), second-order effective Hamiltonian)
    o1, o2, delta = 0.3, 0.4, 2.0
    m = lambda_system(o1, o2, delta)
    b = block_series(m, [0, 1], 4)
    om = np.array([o1, o2])
    assert_allclose(b.coefficients[1], 0, atol=1e-15)  # no direct coupling: the group splits only at order 2
    assert_allclose(b.coefficients[2], -np.outer(om, om) / delta, atol=1e-14)


def test_lambda_system_default_uses_degenerate_pt_and_pairs_dark_and_bright_states():
    o1, o2, delta = 0.3, 0.4, 2.0
    m = lambda_system(o1, o2, delta)
    lam = np.array([0.0, 0.5, 1.0, 2.0])
    r = compare(m, [0, 1], [2, 6], lam)
    assert r.treatments == ("degenerate", "degenerate")
    assert "order 2" in r.reasons[0] and "degenerate" in r.reasons[0]
    om2 = o1**2 + o2**2
    # closed forms: the dark state (o2|1⟩ − o1|2⟩)/√(Ω²) is uncoupled (energy 0 for every λ); the bright state and
    # |e⟩ form a two-level system with coupling λ√(Ω²): E_bright = (Δ − √(Δ² + 4λ²Ω²))/2 (two-level eigenvalues)
    bright = (delta - np.sqrt(delta**2 + 4 * lam**2 * om2)) / 2
    # at small positive λ the bright branch (−λ²Ω²/Δ) lies below the dark one (0): level 0 = bright, 1 = dark
    assert_allclose(r.exact[0], bright, atol=1e-12)
    assert_allclose(r.exact[1], 0.0, atol=1e-12)
    # brute force: the same numbers are eigenvalues of the dense H(λ)
    for c, x in enumerate(lam):
        w = np.linalg.eigvalsh(m.hamiltonian(x))
        assert np.min(np.abs(w - r.exact[0, c])) < 1e-12 and np.min(np.abs(w - r.exact[1, c])) < 1e-12
    # order 2 of degenerate PT: eigenvalues of −λ²ΩΩᵀ/Δ
    assert_allclose(r.perturbative[0, 0], -lam**2 * om2 / delta, atol=1e-14)
    assert_allclose(r.perturbative[1, 0], 0.0, atol=1e-14)
    # states paired by overlap: the perturbative dark state is the exact dark state
    assert not r.ambiguous.any()
    assert np.nanmax(r.infidelity[1]) < 1e-20
    assert np.nanmax(r.infidelity[0, :, 1]) < 1e-2


# ---------------------------------------------------------------------------------------------- Ising doublet
L_SPINS = 6


@pytest.fixture(scope="module")
def ising():
    return Model(*ising_ring(L_SPINS)[:2], name="Ising ring, plain matrices")


@pytest.mark.parametrize("declared", [False, True])
def test_ising_doublet_reports_the_true_error_on_coarse_and_fine_grids(ising, declared):
    # transverse-field Ising chain (Pfeuty, Ann. Phys. 57, 79 (1970)): the ferromagnetic ground doublet of H0 is
    # split only by flipping all L spins, i.e. at order L.  Plain matrices (nothing declared): ptcheck must find
    # the good states at order L and pair labels by overlap, whatever the coupling grid.  With the builder's
    # declared parity the doublet members lie in different sectors and each is non-degenerate there.
    m = spin_chain(n_spins=L_SPINS) if declared else ising
    coarse = np.array([0.3, 0.5])
    fine = np.linspace(0, 0.5, 11)
    rc = compare(m, [0, 1], [2 * L_SPINS], coarse)
    rf = compare(m, [0, 1], [2 * L_SPINS], fine)
    if declared:
        assert rc.treatments == ("nondegenerate", "nondegenerate")
        assert m.sector_of(0) != m.sector_of(1)
    else:
        assert rc.treatments == ("degenerate", "degenerate")
        assert f"order {L_SPINS}" in rc.reasons[0]
    h0, v = ising_ring(L_SPINS)[:2]
    for r, lam in ((rc, coarse), (rf, fine)):
        assert not r.ambiguous.any()
        # brute force: dense eigvalsh of the plain matrices; the doublet is the two lowest levels, level 0 the
        # lower one for λ > 0
        ex = np.array([np.linalg.eigvalsh(h0 + x * v)[:2] for x in lam]).T
        assert_allclose(r.exact, ex, atol=1e-12)
        split = ex[1] - ex[0]
        big = split > 1e-9
        # the reported error is the error of the branch, far below the doublet splitting it used to report
        assert np.all(r.abs_error[:, 0, big] < 1e-2 * split[big])
    # the same couplings give the same errors on both grids, to the round-off of an exact eigenvalue
    # (LAPACK's eigh is backward stable: |δE| ≲ a few ε‖H‖ ≈ 1e-14 here; Golub & Van Loan, Matrix Computations,
    # 4th ed. 2013, §8.1) -- far below the doublet splitting the old pairing reported as the error
    for i, x in enumerate(coarse):
        j = int(np.argmin(np.abs(fine - x)))
        assert_allclose(rc.abs_error[:, 0, i], rf.abs_error[:, 0, j], rtol=1e-6, atol=1e-13)


def test_no_false_hermiticity_warning_on_orders_that_vanish_by_symmetry(ising):
    # odd orders of the doublet's effective Hamiltonian vanish by symmetry; their round-off must not be
    # reported as a non-Hermitian H_eff (pytest turns warnings into errors)
    with warnings.catch_warnings():
        warnings.simplefilter("error", BlockWarning)
        b = block_series(ising, [0, 1], 2 * L_SPINS)
    assert np.all(b.hermiticity_residual < 1e-8)


# ---------------------------------------------------------------------------------------------- Kerr qubit + resonator
@pytest.fixture(scope="module")
def kerr():
    return kerr_qubit_resonator()


def _chi_brute_force(m):
    """Order-2 χ (textbook RS: E2 = Σ |V_nm|²/(E_n − E_m)) and exact χ (dense eigh, levels by largest overlap)."""
    w = dispersive_shift().resolve(m)
    v = m.v.toarray() if hasattr(m.v, "toarray") else np.asarray(m.v)
    h0 = np.diag(m.e0)

    def e2(n):
        d = m.e0[n] - m.e0
        d[n] = np.inf
        return np.sum(np.abs(v[n]) ** 2 / d)

    c0 = sum(wt * m.e0[n] for n, wt in w.items())
    c1 = sum(wt * v[n, n] for n, wt in w.items())
    c2 = sum(wt * e2(n) for n, wt in w.items())

    def exact(lam):
        e, u = np.linalg.eigh(h0 + lam * v)
        return sum(wt * e[np.argmax(np.abs(u[n]) ** 2)] for n, wt in w.items())

    return (lambda lam: c0 + lam * c1 + lam**2 * c2), exact


def _first_crossing(f, hi, n=200):
    grid = np.linspace(hi / n, hi, n)
    vals = np.array([f(x) for x in grid])
    i = np.flatnonzero(vals > 0)[0]
    return brentq(f, grid[i - 1], grid[i], xtol=1e-10) if i > 0 else 0.0


@pytest.mark.slow
def test_kerr_default_boundary_of_order2_chi_equals_brute_force(kerr):
    pert, exact = _chi_brute_force(kerr)
    for rt in (0.05, 0.01):
        ref = _first_crossing(lambda x: abs(pert(x) - exact(x)) - rt * abs(exact(x)), 4.0)
        b = validity_boundary(kerr, dispersive_shift(), 2, rtol=rt)
        assert b.status == "found" and b.treatment == "nondegenerate"
        assert b.coupling == pytest.approx(ref, rel=2e-3)
        if rt == 0.05:
            # near-degenerate partners at the boundary are suggested beside it, with their own boundary
            assert b.suggestions and all(np.isfinite(g.boundary) for g in b.suggestions)
            assert b.suggestions[0].boundary > b.coupling


@pytest.mark.slow
def test_kerr_run_check_verdicts_are_monotone_in_the_coupling(kerr):
    from ptcheck.report import run_check

    pert, exact = _chi_brute_force(kerr)
    ref = _first_crossing(lambda x: abs(pert(x) - exact(x)) - 0.01 * abs(exact(x)), 4.0)
    for lam in (0.8, 1.5, 2.0):
        r = run_check(kerr, [dispersive_shift()], [2], coupling=lam, rtol=0.01, convergence_order=12, n_points=9)
        (v,) = r.verdicts
        assert v.valid == (lam < ref) == (lam < abs(r.boundaries[0].coupling))
        assert r.exit_status == (0 if lam < ref else 1)


# ---------------------------------------------------------------------------------------------- monotone gating
ACCIDENTAL = (  # invented 3-level model whose order-2 error of level 1 comes back within 1e-3 near λ ≈ 1.18
    np.diag([1.4, 2.05, 2.5]), [[0.4, -0.15, 0.17], [-0.15, -0.12, -0.07], [0.17, -0.07, -0.25]], 1, 2, True
)


@pytest.mark.parametrize(
    "h0, v, level, order, has_dip",
    [
        # two-level system (closed form E = −√(Δ²/4 + λ²v²)), a 3-level chain, and a model whose error dips back
        # within tolerance beyond its first boundary (accidental agreement)
        (np.diag([-0.5, 0.5]), [[0, 0.25], [0.25, 0]], 0, 2, False),
        (np.diag([0.0, 1.0, 2.1]), [[0, 0.2, 0], [0.2, 0, 0.3], [0, 0.3, 0]], 1, 2, False),
        ACCIDENTAL,
    ],
)
def test_verdict_is_valid_exactly_below_the_first_boundary(h0, v, level, order, has_dip):
    from ptcheck.report import run_check

    m = Model(h0, v)
    tol = 1e-3
    s = m.series(level, order)
    # brute force: dense eigvalsh, level by energy rank (no level crossing for these models and couplings)
    grid = np.linspace(1e-3, 2.0, 2000)
    err = np.array([abs(s.energy(x, order=order) - np.linalg.eigvalsh(m.hamiltonian(x))[level]) for x in grid])
    first = grid[np.flatnonzero(err > tol)[0]]
    probes = [0.5 * first, 0.95 * first, 1.05 * first, 2.5 * first]
    dip = np.flatnonzero((err <= tol) & (grid > first))
    if dip.size:  # inside the dip the error is small, but beyond the first boundary: NOT valid
        probes.append(float(grid[dip[dip.size // 2]]))
    for lam in probes:
        r = run_check(m, [level], [order], coupling=lam, tol=tol, convergence_order=10, n_points=5)
        (v_,) = r.verdicts
        assert v_.valid == r.boundaries[0].valid_at(lam) == (lam < first)
        if lam > first and v_.error <= tol:
            assert any("only by accident" in c for c in r.cautions)
    assert bool(dip.size) == has_dip


# ---------------------------------------------------------------------------------------------- exact within its sector
def test_a_degenerate_group_that_is_a_whole_sector_is_exact_not_valid():
    # resonant Jaynes–Cummings (Jaynes & Cummings, Proc. IEEE 51, 89 (1963)): the one-excitation doublet is a whole
    # invariant sector; degenerate PT of it is exact diagonalisation, E = ω ± λg (closed form)
    from ptcheck.report import run_check

    m = jaynes_cummings(omega_q=5.0, omega_r=5.0, g=0.1, n_photons=4)
    lam = np.array([0.5, 1.0])
    r = compare(m, [1, 2], [1, 2], lam)
    assert r.treatments == ("degenerate", "degenerate") and r.exact_in_sector == (True, True)
    assert_allclose(r.exact[0], 5.0 - 0.1 * lam, atol=1e-12)
    assert any("exact within its sector" in n for n in r.notes)
    b = validity_boundary(m, 1, 2, tol=1e-6)
    assert b.status == "exact_in_sector" and np.isnan(b.coupling)
    rep = run_check(m, [1], [2], coupling=1.0, tol=1e-6, convergence_order=10, n_points=5)
    assert rep.verdicts[0].status == "exact within its sector" and not rep.valid
    assert "exact within its sector" in rep.verdicts[0].text


# ---------------------------------------------------------------------------------------------- shift quantities
def test_shift_quantity_presents_the_shift():
    # a Lamb-shift-like quantity: the change of the 0→1 transition of a three-level system coupled off-diagonally
    m = Model(np.diag([0.0, 1.0, 2.3]), [[0, 0.1, 0.05], [0.1, 0, 0.2], [0.05, 0.2, 0]])
    q = stark_shift(1, 0, name="Lamb")
    lam = np.array([0.0, 0.2, 0.5, 1.0])
    r = compare(m, [q, 1], [2, 4], lam)
    assert r.presents == ("shift", "value")
    # brute force: eigvalsh differences (levels keep their energy order here: no crossing for |λ| <= 1)
    ev = np.array([np.linalg.eigvalsh(m.hamiltonian(x)) for x in lam])
    shift = (ev[:, 1] - ev[:, 0]) - 1.0
    assert_allclose(r.exact_presented[0], shift, atol=1e-12)
    assert_allclose(r.exact[0], ev[:, 1] - ev[:, 0], atol=1e-12)
    assert_allclose(r.perturbative_presented[0], r.perturbative[0] - r.unperturbed[0], atol=1e-13)
    # a level target still presents its value
    assert_allclose(r.exact_presented[1], ev[:, 1], atol=1e-12)
    rows = [row for row in r.to_rows() if row["target"] == "Lamb" and row["order"] == "order 2"]
    assert [row["presents"] for row in rows] == ["shift"] * 4
    assert_allclose([row["exact_presented"] for row in rows], shift, atol=1e-12)
    assert rows[0]["unperturbed"] == pytest.approx(1.0)


def test_errors_do_not_change_when_a_constant_is_added_to_h0():
    # invariance under H0 → H0 + c·1 (common practice, no source): errors come from shifts
    h0 = np.diag([0.0, 1.0, 2.1])
    v = [[0, 0.2, 0], [0.2, 0, 0.3], [0, 0.3, 0]]
    lam = np.array([0.3, 0.9])
    a = compare(Model(h0, v), [0, 1], [2, 4, "pade2/2"], lam)
    b = compare(Model(h0 + 1e4 * np.eye(3), v), [0, 1], [2, 4, "pade2/2"], lam)
    assert_allclose(b.abs_error, a.abs_error, rtol=1e-6, atol=1e-10)
    assert_allclose(b.perturbative - 1e4, a.perturbative, atol=1e-10)


# ---------------------------------------------------------------------------------------------- settings, API edges
def test_settings_object_validates_once_and_lists_the_allowed_names():
    s = CheckSettings()
    assert s.treatment == "standard" and s.backend == "auto"
    with pytest.raises(ValueError, match="method must be one of.*schrieffer-wolff"):
        CheckSettings(method="magic")
    with pytest.raises(ValueError, match="method must be one of"):
        compare(Model(np.diag([0.0, 1.0]), [[0, 0.1], [0.1, 0]]), 0, 2, [0.1], method="magic")
    with pytest.raises(ValueError, match="treatment must be one of.*standard"):
        CheckSettings(treatment="bogus")
    assert s.replace(coupling=-2.0).coupling == 2.0


@pytest.mark.parametrize("fn", [compare, validity_boundary, find_blocks, convergence])
def test_non_model_is_a_type_error_naming_what_was_passed(fn):
    args = {
        compare: ([0], [2], [0.1]),
        validity_boundary: (0, 2),
        find_blocks: (0.1,),
        convergence: (0,),
    }[fn]
    kw = {"tol": 1e-3} if fn is validity_boundary else {}
    with pytest.raises(TypeError, match="Model.*got (ndarray|list)"):
        fn(np.eye(2), *args, **kw)


def test_validity_boundary_refuses_a_list_of_levels():
    m = Model(np.diag([0.0, 1.0, 2.1]), [[0, 0.2, 0], [0.2, 0, 0.3], [0, 0.3, 0]])
    with pytest.raises(TypeError, match="one level or quantity"):
        validity_boundary(m, [0, 1], 2, tol=1e-3)


def test_couplings_that_overflow_are_a_clear_error():
    m = Model(np.diag([0.0, 1.0, 2.1]), [[0, 0.2, 0], [0.2, 0, 0.3], [0, 0.3, 0]])
    with pytest.raises(ValueError, match="too large"):
        compare(m, [0], [2], [1e300])
    with pytest.raises(ValueError, match="too large"):
        validity_boundary(m, 0, 2, tol=1e-3, max_coupling=1e300)


def test_readme_first_example_runs():
    # README: compare(m, [0, 1], [1, 2, 4, "pade2/2"], np.linspace(0, 1.5, 61)) on this model
    m = Model(np.diag([0.0, 1.0, 2.1]), [[0, .2, 0], [.2, 0, .3], [0, .3, 0]])
    r = compare(m, [0, 1], [1, 2, 4, "pade2/2"], np.linspace(0, 1.5, 61))
    assert r.treatments == ("nondegenerate", "nondegenerate")
    assert np.all(np.isfinite(r.abs_error))
    ex = np.array([np.linalg.eigvalsh(m.hamiltonian(x))[:2] for x in r.couplings]).T  # no crossing here
    assert_allclose(r.exact, ex, atol=1e-12)


def test_pade_for_a_degenerate_level_is_refused_by_name_and_the_rest_still_runs():
    m = lambda_system()
    r = compare(m, [0, 2], [2, "pade1/1"], [0.2, 0.4])
    assert np.isnan(r.perturbative[0, 1]).all() and np.isfinite(r.perturbative[0, 0]).all()
    assert np.isfinite(r.perturbative[1]).all()  # |e⟩ is non-degenerate: its Padé runs
    assert any("Padé[1/1] is not available for level" in n and "degenerate treatment" in n for n in r.notes)
    with pytest.raises(ValueError, match="not available for level .* degenerate treatment"):
        validity_boundary(m, 0, "pade1/1", tol=1e-3)


def test_the_treatment_choice_is_recorded_with_its_reason():
    m = lambda_system()
    e0, e1, e2 = expansions(m, [0, 1, 2], 4)
    assert (e0.treatment, e2.treatment) == ("degenerate", "nondegenerate")
    assert e0.group == e1.group == (0, 1) and e0.choice.levels == (0, 1)
    assert "non-degenerate Rayleigh–Schrödinger" in e2.reason
    (b,) = expansions(m, [2], 4, treatment="block", coupling=5.0)
    assert b.treatment == "near-degenerate block" and "near-degenerate block" in b.reason
    qs = quantity_series(m, stark_shift(2, 0), 4)
    assert qs.treatments == ("nondegenerate", "degenerate")


def test_pairing_flags_a_pairing_without_a_clear_winner_and_never_guesses():
    # overlap assignment (common practice, no source): a 45° rotation gives equal overlaps 1/2
    from ptcheck.pairing import assign

    pert = np.eye(3)[:2]
    c, s_ = np.cos(np.pi / 4), np.sin(np.pi / 4)
    exact = np.array([[c, s_, 0.0], [-s_, c, 0.0], [0.0, 0.0, 1.0]])
    idx, amb, ov = assign(pert, exact, np.array([0.0, 1.0, 5.0]), 1e-12)
    assert amb.all() and np.allclose(ov, 0.5)
    # the same rotation between states of equal energy is harmless: any choice gives the same number
    idx, amb, _ = assign(pert, exact, np.array([1.0, 1.0, 5.0]), 1e-12)
    assert not amb.any()
    # a clear winner: small rotation
    t = 0.2
    exact = np.array([[np.cos(t), np.sin(t), 0.0], [-np.sin(t), np.cos(t), 0.0], [0.0, 0.0, 1.0]])
    idx, amb, ov = assign(pert, exact[::-1], np.array([5.0, 1.0, 0.0]), 1e-12)
    assert list(idx) == [2, 1] and not amb.any() and np.allclose(ov, np.cos(t) ** 2)
