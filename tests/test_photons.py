"""Validity boundary against photon number, against the closed form of the Jaynes–Cummings model.

Referee: the Jaynes–Cummings levels in closed form.  With H0 = ω_q|1⟩⟨1| + ω_r a†a and
V = g(σ+ a + σ− a†), the (n+1)-excitation doublet {|1,n⟩, |0,n+1⟩} has energies
(n + 1/2) ω_r + ω_q/2 ± √(Δ²/4 + λ²g²(n+1)), Δ = ω_q − ω_r (Jaynes & Cummings 1963;
dressed states as in Blais et al., Phys. Rev. A 69, 062320 (2004), Sec. II — from memory;
the same formula is in the builder's docstring).  Second-order Rayleigh–Schrödinger for
the same model (binomial expansion of the square roots): E|1,n⟩ ≈ ω_q + nω_r + λ²g²(n+1)/Δ,
E|0,n⟩ ≈ nω_r − λ²g²n/Δ.  The boundary of each photon number is found here by brute force:
the relative error on a fine grid of couplings, then brentq in the first bracket.
"""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from ptcheck import Model
from ptcheck.models import jaynes_cummings
from ptcheck.photons import photon_boundaries
from ptcheck.plots import plot_photon_boundaries

WQ, WR, G = 5.0, 6.0, 0.1  # the builder's defaults (invented round numbers); Δ = −1
DELTA = WQ - WR
S = math.copysign(1.0, DELTA)


def e1(lam, n):  # level continuously connected to |1,n⟩
    return WR * (n + 0.5) + WQ / 2 + S * math.sqrt(DELTA**2 / 4 + lam**2 * G**2 * (n + 1))


def e0(lam, n):  # level continuously connected to |0,n⟩
    if n == 0:
        return 0.0
    return WR * (n - 0.5) + WQ / 2 - S * math.sqrt(DELTA**2 / 4 + lam**2 * G**2 * n)


def transition_error(lam, n):
    """|RS2 − exact| / |exact − ω_q| of the qubit transition in the n-photon manifold."""
    exact = e1(lam, n) - e0(lam, n)
    rs2 = WQ + lam**2 * G**2 * (2 * n + 1) / DELTA
    return abs(rs2 - exact) / abs(exact - WQ)


def chi_error(lam, n):
    """|RS2 − exact| / |exact| of χ_n = ½[(E1,n+1 − E1,n) − (E0,n+1 − E0,n)]; RS2: λ²g²/Δ."""
    exact = 0.5 * ((e1(lam, n + 1) - e1(lam, n)) - (e0(lam, n + 1) - e0(lam, n)))
    return abs(lam**2 * G**2 / DELTA - exact) / abs(exact)


def brute_boundary(err, n, rtol, lam_max=20.0):
    grid = np.linspace(1e-3, lam_max, 20001)
    vals = np.array([err(x, n) for x in grid]) - rtol
    k = int(np.argmax(vals > 0))
    assert vals[k] > 0, "test set-up: the error must reach the tolerance on the grid"
    return brentq(lambda x: err(x, n) - rtol, grid[k - 1], grid[k], xtol=1e-12)


@pytest.fixture(scope="module")
def jc():
    return jaynes_cummings(n_photons=12)


def test_transition_boundary_per_photon_number_matches_closed_form(jc):
    photons = [0, 1, 3, 6]
    pb = photon_boundaries(jc, 2, rtol=0.01, photons=photons)
    assert pb.photons.tolist() == photons and pb.quantity == "transition"
    for n, b, status in zip(photons, pb.boundary, pb.status):
        assert status == "found"
        assert abs(b) == pytest.approx(brute_boundary(transition_error, n, 0.01), rel=2e-3)  # boundary xrtol 1e-3


def test_dispersive_shift_boundary_matches_closed_form(jc):
    pb = photon_boundaries(jc, 2, rtol=0.01, photons=[0, 2, 4], quantity="dispersive_shift")
    for n, b in zip(pb.photons, pb.boundary):
        assert abs(b) == pytest.approx(brute_boundary(chi_error, int(n), 0.01), rel=2e-3)


def test_critical_photon_number_and_photons_valid(jc):
    # Blais et al. 2004: n_crit = Δ²/(4g²); at coupling λ the coupling is λg
    photons = list(range(0, 8))
    pb = photon_boundaries(jc, 2, rtol=0.01, photons=photons, coupling=0.5)
    assert pb.detuning == pytest.approx(DELTA) and pb.g == pytest.approx(G)
    assert pb.n_crit == pytest.approx(DELTA**2 / (4 * (0.5 * G) ** 2))
    assert pb.critical_coupling[0] == math.inf
    assert pb.critical_coupling[1:] == pytest.approx([abs(DELTA) / (2 * G * math.sqrt(n)) for n in photons[1:]])
    # n_valid: the largest n such that every smaller n meets 1 % at λ = 0.5 (brute force on the closed form)
    ok = [brute_boundary(transition_error, n, 0.01) > 0.5 for n in photons]
    want = None
    for n, good in zip(photons, ok):
        if not good:
            break
        want = n
    assert 0 < sum(ok) < len(ok), "test set-up: the answer must lie inside the photon range checked"
    assert pb.n_valid == want
    assert f"n_crit = Δ²/(4g²) = {pb.n_crit:.3g}" in pb.summary()
    d = pb.to_dict()
    assert d["order"] == 2 and d["n_valid"] == want and d["critical_coupling"][0] == "inf"


def test_default_photons_keep_headroom_below_the_truncation(jc):
    pb = photon_boundaries(jc, 2, rtol=0.05)
    # 12 Fock states (0 … 11): photon numbers up to 9 leave the top 2 states free (ptcheck.photons.HEADROOM)
    assert pb.photons.tolist() == list(range(0, 10))
    assert photon_boundaries(jc, 2, rtol=0.05, quantity="dispersive_shift").photons.tolist() == list(range(0, 9))


def test_bad_input_is_refused_with_the_value_echoed(jc):
    with pytest.raises(ValueError, match="qubit–resonator product model"):
        photon_boundaries(Model(np.diag([0.0, 1.0]), [[0, 0.1], [0.1, 0]]), 2)
    with pytest.raises(ValueError, match=r"photon numbers \[12\] need Fock states beyond the 12 kept"):
        photon_boundaries(jc, 2, photons=[1, 12])
    with pytest.raises(ValueError, match="not both"):
        photon_boundaries(jc, 2, tol=1e-3, rtol=0.01)
    with pytest.raises(ValueError, match="quantity"):
        photon_boundaries(jc, 2, quantity="lamb")
    with pytest.raises(TypeError, match="Model"):
        photon_boundaries("jaynes_cummings", 2)


def test_photon_figure_holds_the_result(jc):
    from matplotlib.figure import Figure

    pb = photon_boundaries(jc, 2, rtol=0.01, photons=[0, 1, 2, 3])
    ax = Figure(figsize=(13.333, 7.5), layout="constrained").add_subplot()
    art = plot_photon_boundaries(pb, ax=ax, coupling_scale=100.0, coupling_unit="MHz")
    np.testing.assert_array_equal(art.boundary.get_xdata(), pb.photons)
    np.testing.assert_array_equal(art.boundary.get_ydata(), np.abs(pb.boundary))
    nn = art.critical.get_xdata()
    np.testing.assert_allclose(art.critical.get_ydata(), abs(DELTA) / (2 * G * np.sqrt(nn)))
    assert art.coupling_line.get_ydata()[0] == 1.0
    texts = [t.get_text() for t in art.legend.get_texts()]
    assert any(t.startswith("λ = 1: valid for") and f"n_crit = {pb.n_crit:.3g}" in t for t in texts)
    assert [a.get_ylabel() for a in ax.child_axes] == ["coupling (MHz)"]
    with pytest.raises(TypeError, match="PhotonBoundaries"):
        plot_photon_boundaries(object(), ax=ax)


def test_photon_numbers_on_a_process_pool_match_closed_form_and_the_serial_run(jc):
    # each photon number searched as its own task: the boundaries still match the closed form (as above) and
    # the whole result is the serial one (common practice, no source: an executor must not change answers)
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    if "fork" not in mp.get_all_start_methods():
        pytest.skip("needs fork")
    photons = [0, 1, 3]
    seen = []
    with ProcessPoolExecutor(max_workers=2, mp_context=mp.get_context("fork")) as ex:
        pooled = photon_boundaries(jc, 2, rtol=0.01, photons=photons, executor=ex, progress=lambda d, t: seen.append((d, t)))
    for n, b in zip(photons, pooled.boundary):
        assert abs(b) == pytest.approx(brute_boundary(transition_error, n, 0.01), rel=2e-3)
    assert pooled.to_dict() == photon_boundaries(jc, 2, rtol=0.01, photons=photons).to_dict()
    assert seen == [(1, 3), (2, 3), (3, 3)]


def test_block_suggestions_are_beside_the_answer_and_can_be_left_out():
    # A Kerr-ladder qubit (invented numbers): at n = 6 photons |1,6⟩ nearly meets |2,5⟩ at λ = 1, so the
    # non-degenerate boundary comes with the boundary of the near-degenerate block beside it.  Leaving
    # the suggestions out must not change the answer asked for (common practice, no source).
    from ptcheck.models import kerr_qubit_resonator

    m = kerr_qubit_resonator(omega_q=5.21, alpha=-0.232, omega_r=6.41, g=0.082, n_qubit=4, n_photons=10)
    with_s = photon_boundaries(m, 2, rtol=0.01, photons=[0, 6])
    without = photon_boundaries(m, 2, rtol=0.01, photons=[0, 6], suggestions=False)
    assert with_s.boundary.tolist() == without.boundary.tolist()
    assert with_s.status == without.status == ("found", "found")
    offered = [n for n in with_s.notes if "would treat them together" in n]
    assert offered and all(n.startswith("n = 6:") for n in offered)
    assert not any("would treat them together" in n for n in without.notes)
    # the near-degeneracy itself is still said, with the treatment that handles it
    assert any(n.startswith("n = 6:") and "treatment='block'" in n for n in without.notes)
