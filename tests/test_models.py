"""Built-in model builders against closed forms and published values.

Every physics check names its source beside it.
"""

import numpy as np
import pytest
import scipy.sparse as sp
from numpy.testing import assert_allclose
from scipy.sparse.linalg import eigsh
from scipy.special import mathieu_a, mathieu_b

from ptcheck import AmbiguousLevelError, Model
from ptcheck.models import (
    BUILDERS,
    TruncationCheck,
    anharmonic_oscillator,
    charge_qubit,
    coupled_kerr_qubits,
    hubbard_dimer,
    jaynes_cummings,
    kerr_qubit_resonator,
    planar_rotor,
    rabi,
    spin_chain,
    truncation_check,
    two_level,
)


def exact(model, coupling):
    """All exact levels of H(λ) (dense), ascending."""
    h = model.hamiltonian(coupling)
    return np.linalg.eigvalsh(h.toarray() if sp.issparse(h) else h)


def exact_of(model, label, coupling):
    """Exact level with the same rank as the unperturbed level `label` (no crossings assumed)."""
    return exact(model, coupling)[model.level_index(label)]


# --------------------------------------------------------------------------- contract
NAMES = {
    "two_level": "two-level system",
    "jaynes_cummings": "Jaynes–Cummings",
    "rabi": "Rabi",
    "kerr_qubit_resonator": "Kerr qubit–resonator",
    "coupled_kerr_qubits": "coupled Kerr qubits",
    "anharmonic_oscillator": "quartic oscillator (λ x⁴)",
    "charge_qubit": "charge qubit",
    "planar_rotor": "planar rotor",
    "linear_rotor": "linear rotor in a field",
    "spin_chain": "transverse-field Ising chain",
    "hubbard_dimer": "Hubbard dimer",
    "polar_molecule": "polar molecule (invented)",
}


def test_registry_names_every_builder():
    assert set(BUILDERS) == set(NAMES)


@pytest.mark.parametrize("key", sorted(NAMES))
def test_builder_contract(key):
    # common practice, no source: every builder gives a Hermitian Model with its documented name and labels
    m = BUILDERS[key]()
    assert isinstance(m, Model)
    assert m.name == NAMES[key]
    h = (m.along((1.0,) * m.n_couplings) if m.n_couplings > 1 else m).hamiltonian(0.7)
    hd = h.toarray() if sp.issparse(h) else h
    assert np.max(np.abs(hd - hd.conj().T)) <= 1e-12 * np.max(np.abs(hd))
    # every level is labelled, except those of a degenerate group that V mixes (Model's rule); a pair of
    # states combined by a declared involution is named after both states
    assert all(lab is not None or i in m.ambiguous_levels or "+" in m.label(i) or "−" in m.label(i) for i, lab in enumerate(m.labels))
    if m.dims is not None:
        assert int(np.prod(m.dims)) == m.n
        assert all(len(lab) == len(m.dims) for lab in m.labels if lab is not None)


@pytest.mark.parametrize(
    "call, exc, words",
    [
        (lambda: two_level(delta=-1.0), ValueError, "delta must be >= 0; got -1.0"),
        (lambda: two_level(v=float("nan")), ValueError, "v must be finite; got nan"),
        (lambda: jaynes_cummings(n_photons=1), ValueError, "n_photons must be an int >= 2; got 1"),
        (lambda: jaynes_cummings(n_photons=2.5), TypeError, "n_photons must be an int >= 2; got 2.5"),
        (lambda: jaynes_cummings(g=1j), TypeError, "g must be a real number; got 1j"),
        (lambda: rabi(omega_r=0.0), ValueError, "omega_r must be > 0; got 0.0"),
        (lambda: rabi(sparse="yes"), TypeError, "sparse must be True or False; got 'yes'"),
        (lambda: kerr_qubit_resonator(rotating_wave=1), TypeError, "rotating_wave must be True or False; got 1"),
        (lambda: kerr_qubit_resonator(alpha="big"), TypeError, "alpha must be a real number; got 'big'"),
        (lambda: coupled_kerr_qubits(n_levels=1), ValueError, "n_levels must be an int >= 2; got 1"),
        (lambda: anharmonic_oscillator(kind="sextic"), ValueError, "got 'sextic'"),
        (lambda: anharmonic_oscillator(kind="quartic", n_basis=4), ValueError, "n_basis must be an int >= 5; got 4"),
        (lambda: charge_qubit(e_c=-2), ValueError, "e_c must be > 0; got -2"),
        (lambda: planar_rotor(m_max=0), ValueError, "m_max must be an int >= 1; got 0"),
        (lambda: spin_chain(n_spins=2), ValueError, "n_spins must be an int >= 3; got 2"),
        (lambda: spin_chain(n_spins=40), ValueError, "n_spins must be an int <= 20; got 40"),
        (lambda: spin_chain(kind="heisenberg"), ValueError, "got 'heisenberg'"),
        (lambda: spin_chain(anisotropy=2.0), ValueError, "anisotropy applies to kind='xxz' only"),
        (lambda: spin_chain(n_spins=4, h_z=[0.1, 0.2]), ValueError, "one field per site (4); got 2 values"),
        (lambda: spin_chain(boundary="twisted"), ValueError, "got 'twisted'"),
        (lambda: hubbard_dimer(sector="three_electron"), ValueError, "got 'three_electron'"),
    ],
)
def test_bad_parameters_raise_clear_errors(call, exc, words):
    with pytest.raises(exc) as info:
        call()
    assert words in str(info.value)


def test_unknown_keyword_is_refused():
    with pytest.raises(TypeError, match="n_photon"):
        jaynes_cummings(n_photon=5)


def test_sparse_storage_automatic_and_forced():
    assert not jaynes_cummings(n_photons=10).is_sparse
    assert jaynes_cummings(n_photons=300).is_sparse  # 600 states > 512
    assert charge_qubit(n_max=3, sparse=True).is_sparse


# --------------------------------------------------------------------------- two-level
def test_two_level_closed_form():
    # closed form of a 2x2 Hermitian matrix (textbook): E = ±√(Δ²/4 + λ² v²), any phase
    m = two_level(delta=1.3, v=0.4, phase=0.7)
    assert np.iscomplexobj(m.v)
    for lam in (0.2, 1.0, 3.0):
        r = np.sqrt(1.3**2 / 4 + (lam * 0.4) ** 2)
        assert_allclose(exact(m, lam), [-r, r], rtol=1e-13)
    assert m.level_index("g") == 0


# --------------------------------------------------------------------------- qubit + resonator
def test_jaynes_cummings_full_spectrum():
    # Jaynes & Cummings, Proc. IEEE 51, 89 (1963): doublets
    # E±(n) = ω_r (n + 1/2) + ω_q/2 ± √(Δ²/4 + g²(n + 1)) in our H0 convention (no σz/2 offset),
    # plus the ground state 0 and the unpaired top state |1, N−1⟩ of the truncation.
    wq, wr, g, nph = 5.0, 6.0, 0.3, 8
    m = jaynes_cummings(omega_q=wq, omega_r=wr, g=g, n_photons=nph)
    assert m.dims == (2, nph)
    expected = [0.0, wq + wr * (nph - 1)]
    for n in range(nph - 1):
        r = np.sqrt((wq - wr) ** 2 / 4 + g**2 * (n + 1))
        expected += [wr * (n + 0.5) + wq / 2 + s * r for s in (-1, 1)]
    assert_allclose(exact(m, 1.0), np.sort(expected), rtol=1e-12, atol=1e-12)


def test_jaynes_cummings_resonance_is_degenerate():
    # common practice, no source: at ω_q = ω_r the pairs |1,n⟩, |0,n+1⟩ are degenerate in H0
    m = jaynes_cummings(omega_q=5.0, omega_r=5.0, n_photons=4)
    assert len(m.degenerate_groups) == 3
    assert all(len(grp) == 2 for grp in m.degenerate_groups)


def test_rabi_bloch_siegert_shift():
    # Bloch & Siegert, Phys. Rev. 57, 522 (1940); vacuum form g²/(ω_q + ω_r) as in
    # Forn-Díaz et al., Phys. Rev. Lett. 105, 237001 (2010): the counter-rotating terms raise the
    # qubit frequency by g²/(ω_q + ω_r) at second order relative to Jaynes–Cummings.
    wq, wr, g = 5.0, 6.3, 1e-3
    kw = dict(omega_q=wq, omega_r=wr, g=g, n_photons=6)
    freq = {}
    for name, builder in (("rabi", rabi), ("jc", jaynes_cummings)):
        m = builder(**kw)
        freq[name] = exact_of(m, (1, 0), 1.0) - exact_of(m, (0, 0), 1.0)
    assert_allclose(freq["rabi"] - freq["jc"], g**2 / (wq + wr), rtol=1e-4)
    # and the JC qubit frequency has the dispersive (Lamb) shift g²/Δ (same source, second order)
    assert_allclose(freq["jc"] - wq, g**2 / (wq - wr), rtol=1e-4)


# --------------------------------------------------------------------------- Kerr ladders
def test_kerr_ladder_levels_labels_dims():
    # Kerr ladder E_j = ω_q j + α j(j−1)/2 (Koch et al., Phys. Rev. A 76, 042319 (2007), Sec. III, from memory)
    wq, al, wr = 5.0, -0.25, 7.0
    m = kerr_qubit_resonator(omega_q=wq, alpha=al, omega_r=wr, n_qubit=3, n_photons=3)
    assert m.dims == (3, 3)
    expected = {(j, n): wq * j + al * j * (j - 1) / 2 + wr * n for j in range(3) for n in range(3)}
    assert sorted(m.labels) == sorted(expected)
    for lab, e in expected.items():
        assert m.e0[m.level_index(lab)] == pytest.approx(e, abs=1e-12)
    assert m.label(m.level_index((2, 0))) == "|2,0⟩"
    assert m.name == "Kerr qubit–resonator"
    assert kerr_qubit_resonator(rotating_wave=True).name == "Kerr qubit–resonator (RWA)"


def test_kerr_rotating_wave_single_excitation_doublet():
    # closed form of the 2x2 block {|1,0⟩, |0,1⟩} (V conserves excitations; JC 1963 with n = 0)
    wq, wr, g = 5.0, 5.2, 0.1
    m = kerr_qubit_resonator(omega_q=wq, alpha=-0.3, omega_r=wr, g=g, n_qubit=4, n_photons=4, rotating_wave=True)
    r = np.sqrt((wq - wr) ** 2 / 4 + g**2)
    assert_allclose(exact(m, 1.0)[1:3], [(wq + wr) / 2 - r, (wq + wr) / 2 + r], rtol=1e-12)


def test_kerr_dispersive_shift():
    # Koch et al., Phys. Rev. A 76, 042319 (2007), Sec. III (from memory): χ = χ01 − χ12/2 with
    # χ_ij = g_ij²/(ω_ij − ω_r), g_12 = √2 g, i.e. χ = g² α / (Δ (Δ + α)); the resonator frequency
    # differs by 2χ between qubit states 1 and 0.
    wq, al, wr, g = 5.0, -0.25, 7.0, 1e-3
    m = kerr_qubit_resonator(omega_q=wq, alpha=al, omega_r=wr, g=g, n_qubit=4, n_photons=4, rotating_wave=True)
    e = {lab: exact_of(m, lab, 1.0) for lab in [(0, 0), (0, 1), (1, 0), (1, 1)]}
    two_chi = (e[1, 1] - e[1, 0]) - (e[0, 1] - e[0, 0])
    d = wq - wr
    assert_allclose(two_chi, 2 * g**2 * al / (d * (d + al)), rtol=1e-4)


def test_coupled_kerr_zz():
    # second-order RS by hand (from memory; the standard transmon ZZ expression):
    # ζ = E11 − E10 − E01 + E00 = 2 J² (α1 + α2) / ((Δ + α1)(Δ − α2)), Δ = ω1 − ω2
    w1, a1, w2, a2, j = 5.0, -0.25, 5.4, -0.3, 1e-3
    m = coupled_kerr_qubits(omega1=w1, alpha1=a1, omega2=w2, alpha2=a2, j=j, n_levels=4)
    assert m.dims == (4, 4)
    e = {lab: exact_of(m, lab, 1.0) for lab in [(0, 0), (0, 1), (1, 0), (1, 1)]}
    zeta = e[1, 1] - e[1, 0] - e[0, 1] + e[0, 0]
    d = w1 - w2
    assert_allclose(zeta, 2 * j**2 * (a1 + a2) / ((d + a1) * (d - a2)), rtol=1e-3)


# --------------------------------------------------------------------------- oscillator
def test_oscillator_linear_shift_exact():
    # completing the square (textbook): H = p²/2 + (x + λ)²/2 − λ²/2, so E_n = n + 1/2 − λ²/2
    m = anharmonic_oscillator(kind="linear", n_basis=60)
    lam = 0.5
    assert_allclose(exact(m, lam)[:5], np.arange(5) + 0.5 - lam**2 / 2, rtol=0, atol=1e-10)


def test_oscillator_quadratic_exact():
    # frequency renormalisation (textbook): p²/2 + (1 + 2λ) x²/2 has E_n = (n + 1/2) √(1 + 2λ)
    m = anharmonic_oscillator(kind="quadratic", n_basis=80)
    for lam in (-0.3, 0.4):
        assert_allclose(exact(m, lam)[:4], (np.arange(4) + 0.5) * np.sqrt(1 + 2 * lam), rtol=1e-10)


def test_quartic_matrix_elements_exact_despite_truncation():
    # ladder-operator algebra with x = (a + a†)/√2 (e.g. Sakurai & Napolitano, Modern Quantum
    # Mechanics, Sec. 2.3; off-diagonal elements worked out by hand):
    # ⟨n|x⁴|n⟩ = (6n² + 6n + 3)/4, ⟨n+2|x⁴|n⟩ = (2n + 3)/2 √((n+1)(n+2)),
    # ⟨n+4|x⁴|n⟩ = √((n+1)(n+2)(n+3)(n+4))/4 — for every kept state, including the top ones.
    nb = 12
    m = anharmonic_oscillator(kind="quartic", n_basis=nb)
    v = np.asarray(m.v.toarray() if sp.issparse(m.v) else m.v)
    n = np.arange(nb)
    assert_allclose(np.diag(v), (6 * n**2 + 6 * n + 3) / 4, rtol=1e-13)
    k = n[:-2]
    assert_allclose(np.diag(v, 2), (2 * k + 3) / 2 * np.sqrt((k + 1) * (k + 2)), rtol=1e-13)
    k = n[:-4]
    assert_allclose(np.diag(v, 4), np.sqrt((k + 1) * (k + 2) * (k + 3) * (k + 4)) / 4, rtol=1e-13)
    assert np.count_nonzero(np.abs(v) > 1e-12) == nb + 2 * (nb - 2) + 2 * (nb - 4)


def test_quartic_ground_energy_published():
    # Hioe & Montroll, J. Math. Phys. 16, 1945 (1975), table of p² + x² + g x⁴ (value from memory):
    # g = 1 → E0 = 1.392351641530. Ours is (p² + x²)/2 + λ x⁴ = half of it with g = 2λ.
    m = anharmonic_oscillator(kind="quartic", n_basis=100)
    assert_allclose(exact(m, 0.5)[0], 1.392351641530 / 2, rtol=1e-11)


# --------------------------------------------------------------------------- charge qubit
@pytest.mark.parametrize("e_j", [0.5, 5.0, 20.0])
def test_charge_qubit_matches_mathieu(e_j):
    # Koch et al., Phys. Rev. A 76, 042319 (2007) (Mathieu form of the Cooper-pair-box spectrum) and
    # Abramowitz & Stegun ch. 20 (characteristic values): with φ = 2z, a = E/E_C and q = −E_J/(2E_C);
    # n_g = 0 → π-periodic (a_{2r}, b_{2r}); n_g = 1/2 → π-antiperiodic (a_{2r+1}, b_{2r+1}).
    # a_{2r}, b_{2r} are even in q and {a_{2r+1}, b_{2r+1}} maps onto itself under q → −q.
    ec = 1.3
    q = e_j / (2 * ec)
    periodic = [mathieu_a(2 * r, q) for r in range(5)] + [mathieu_b(2 * r, q) for r in range(1, 5)]
    antiperiodic = [mathieu_a(2 * r + 1, q) for r in range(5)] + [mathieu_b(2 * r + 1, q) for r in range(5)]
    for n_g, ref in ((0.0, periodic), (0.5, antiperiodic), (1.0, periodic)):
        m = charge_qubit(e_c=ec, e_j=e_j, n_g=n_g, n_max=20)
        assert_allclose(exact(m, 1.0)[:6], ec * np.sort(ref)[:6], rtol=1e-9, atol=1e-9)


def test_charge_qubit_basis_and_degeneracies():
    # common practice, no source: H0 = 4 E_C (n − n_g)²; ±n degenerate at n_g = 0, (0, 1) at n_g = 1/2
    m = charge_qubit(e_c=1.0, n_g=0.0, n_max=3)
    assert m.n == 7
    assert m.e0[m.level_index((-2,))] == pytest.approx(16.0)
    assert (1, 2) in m.degenerate_groups
    half = charge_qubit(n_g=0.5, n_max=3)
    assert half.degenerate_groups[0] == (0, 1)
    with pytest.raises(AmbiguousLevelError):  # V mixes |0⟩ and |1⟩ at first order
        half.level_index((1,))


def test_planar_rotor_matches_mathieu():
    # −B d²/dθ² − V0 cos θ, θ = 2z: a = 4E/B, q = −2V0/B (Abramowitz & Stegun ch. 20, eq. 20.1.1 form)
    b, v0 = 2.0, 3.0
    q = 2 * v0 / b
    ref = np.sort([mathieu_a(2 * r, q) for r in range(4)] + [mathieu_b(2 * r, q) for r in range(1, 4)])
    m = planar_rotor(b=b, v0=v0, m_max=15)
    assert_allclose(exact(m, 1.0)[:5], b / 4 * ref[:5], rtol=1e-10)


# --------------------------------------------------------------------------- spin chains
def tfim_even_parity_ground(n, h):
    """Ground energy of −Σ σz σz − h Σ σx on a periodic ring of n sites (J = 1).

    Pfeuty, Ann. Phys. 57, 79 (1970): single-fermion energies Λ_k = 2√(1 + h² − 2h cos k).
    For a finite ring the ground state lies in the even-fermion-parity sector, whose momenta are
    antiperiodic, k = π(2m + 1)/n, m = 0..n−1 (Lieb, Schultz & Mattis, Ann. Phys. 16, 407 (1961)):
    E0 = −½ Σ_k Λ_k.
    """
    k = np.pi * (2 * np.arange(n) + 1) / n
    return -np.sum(np.sqrt(1 + h**2 - 2 * h * np.cos(k)))


@pytest.mark.parametrize("h", [0.3, 1.0, 1.7])
def test_transverse_ising_ground_energy_free_fermions(h):
    n = 14
    m = spin_chain(n_spins=n)  # λ = h/J with J = 1
    e0 = eigsh(m.hamiltonian(h), k=1, which="SA", return_eigenvectors=False, tol=1e-12)[0]
    assert_allclose(e0, tfim_even_parity_ground(n, h), rtol=1e-11)


def test_transverse_ising_standard_split_degenerate_doublet():
    # common practice, no source: H0 = −J Σ σz σz has the ground doublet all-↑ / all-↓ (energy −N J)
    # with h_z = 0 the spin-flip parity Π σx is conserved: the doublet members (|↑…↑⟩ ± |↓…↓⟩)/√2 lie in
    # different sectors, so they are no degeneracy for perturbation theory
    m = spin_chain(n_spins=6, j=0.5)
    assert m.symmetry_degeneracies[0] == (0, 1)
    assert m.sector_of(0) != m.sector_of(1)
    assert all(0 not in g and 1 not in g for g in m.degenerate_groups)
    assert_allclose(m.e0[:2], [-3.0, -3.0])
    assert (m.label(0), m.label(1)) == ("|0,0,0,0,0,0⟩+|1,1,1,1,1,1⟩", "|0,0,0,0,0,0⟩−|1,1,1,1,1,1⟩")
    # a longitudinal field makes all-↑ the unique H0 ground state (energy −N J − N h_z)
    f = spin_chain(n_spins=6, j=0.5, h_z=0.1)
    assert f.labels[0] == (0,) * 6 and f.e0[1] - f.e0[0] > 0.1
    assert_allclose(f.e0[0], -3.0 - 0.6)


def test_open_chain_ising_energy():
    # common practice, no source: open chain of N sites has N − 1 bonds
    m = spin_chain(n_spins=5, boundary="open")
    assert_allclose(m.e0[0], -4.0)


def test_heisenberg_ring_of_four():
    # angular-momentum addition (textbook): on a 4-site ring Σ S_i·S_{i+1} = (S1+S3)·(S2+S4)
    # = ½[S² − S13² − S24²] ≥ ½(0 − 2 − 2) = −2; with σ = 2S, J Σ σ·σ has E0 = −8J.
    m = spin_chain(n_spins=4, kind="xxz", j=0.7)
    assert m.name == "XXZ chain"
    assert_allclose(exact(m, 1.0)[0], -8 * 0.7, rtol=1e-12)


def test_spin_chain_fourteen_spins_sparse():
    # sizes only (the build is fast; no timing assertion): N · 2^N spin flips for V
    n = 14
    fields = 0.1 + 0.013 * np.arange(n) ** 1.5  # invented site fields: lift the H0 degeneracies
    m = spin_chain(n_spins=n, h_z=fields)
    assert m.is_sparse and sp.issparse(m.v)
    assert m.n == 2**n and m.dims == (2,) * n
    assert m.v.nnz == n * 2**n
    assert not m.degenerate_groups


# --------------------------------------------------------------------------- Hubbard dimer
@pytest.mark.parametrize("t, u", [(1.0, 8.0), (0.5, 1.0), (1.0, 0.3)])
def test_hubbard_dimer_spectrum(t, u):
    # closed form of the two-site Hubbard model at half filling (the 2x2 singlet block [[0, -2t], [-2t, U]]
    # of the covalent and ionic singlets; standard derivation, from memory): singlets (U ∓ √(U² + 16t²))/2 and U,
    # triplet 0 (one S_z = 0 state in the sz0 sector, three in the full sector).
    r = np.sqrt(u**2 + 16 * t**2)
    m = hubbard_dimer(t=t, u=u)
    assert_allclose(exact(m, 1.0), np.sort([(u - r) / 2, 0.0, u, (u + r) / 2]), atol=1e-12)
    full = hubbard_dimer(t=t, u=u, sector="two_electron")
    assert full.n == 6
    assert_allclose(exact(full, 1.0), np.sort([(u - r) / 2, 0.0, 0.0, 0.0, u, (u + r) / 2]), atol=1e-12)


def test_hubbard_dimer_labels():
    # common practice, no source: doubly occupied states cost U
    m = hubbard_dimer(u=8.0)
    assert m.e0[m.level_index("↑↓,0")] == pytest.approx(8.0)
    assert m.e0[m.level_index("↑,↓")] == pytest.approx(0.0)


# --------------------------------------------------------------------------- truncation check
def test_truncation_check_converged_quartic():
    # Hioe & Montroll 1975 value again (from memory): the check must converge onto it
    r = truncation_check(anharmonic_oscillator, "n_basis", [40, 70, 100], params={"kind": "quartic"}, coupling=0.5)
    assert isinstance(r, TruncationCheck)
    assert r.converged and r.energies.shape == (3,) and r.changes.shape == (2,)
    assert_allclose(r.energies[-1], 1.392351641530 / 2, rtol=1e-11)
    assert not r.energies.flags.writeable
    assert r.to_dict()["converged"] is True and "Converged" in r.note


def test_truncation_check_cubic_never_converges():
    # common practice, no source: x² /2 + λ x³ is unbounded below, so the truncated spectrum has
    # spurious low states that sink as the basis grows
    r = truncation_check("anharmonic_oscillator", "n_basis", [40, 60, 80], params={"kind": "cubic"}, coupling=0.1)
    assert not r.converged
    assert r.changes[-1] < -1.0  # spurious states come down as the basis grows
    assert "NOT converged" in r.note


def test_truncation_check_by_label_in_rabi():
    # common practice, no source: at weak coupling the low Rabi levels converge fast in n_photons;
    # the label (1, 0) is resolved at every size
    r = truncation_check(rabi, "n_photons", [4, 8, 12], level=(1, 0), coupling=1.0, params={"g": 0.2})
    assert r.converged and r.level == "(1, 0)"


@pytest.mark.parametrize(
    "kwargs, exc, words",
    [
        (dict(builder="spin_glass", size_param="n", sizes=[2, 3]), ValueError, "unknown builder 'spin_glass'"),
        (dict(builder=rabi, size_param="n_basis", sizes=[2, 3]), ValueError, "rabi has no parameter 'n_basis'"),
        (dict(builder=rabi, size_param="n_photons", sizes=[4]), ValueError, "at least two values"),
        (dict(builder=rabi, size_param="n_photons", sizes=[6, 4]), ValueError, "strictly ascending; got [6, 4]"),
        (dict(builder=rabi, size_param="n_photons", sizes=[4, 6], rtol=0), ValueError, "rtol must be > 0; got 0"),
        (
            dict(builder=rabi, size_param="n_photons", sizes=[4, 6], params={"n_photons": 3}),
            ValueError,
            "must not contain the size parameter",
        ),
    ],
)
def test_truncation_check_bad_input(kwargs, exc, words):
    with pytest.raises(exc) as info:
        truncation_check(coupling=0.1, **kwargs)
    assert words in str(info.value)
