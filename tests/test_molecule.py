"""The invented polar molecule with two couplings (Stark along z, Zeeman along x) against closed forms."""

import numpy as np
import pytest

from ptcheck.models import BUILDERS, linear_rotor, polar_molecule
from ptcheck.multiseries import multi_series


def test_stark_alone_second_order_shift_of_the_ground_level():
    # E2(0,0) = −(μE)²/(6B) (Townes & Schawlow, Microwave Spectroscopy, 1955); B alone never shifts J = 0
    m = polar_molecule(b=2.0, mu_e=0.8, g_b=0.25, j_max=8)
    s = multi_series(m, (0, 0), 6)
    assert s.energy_coefficients[2, 0] == pytest.approx(-(0.8**2) / (6 * 2.0), rel=1e-12)
    np.testing.assert_allclose(s.energy_coefficients[0, 1:], 0.0, atol=1e-15)
    # along the E axis the series is the linear rotor's one-coupling series
    rotor = linear_rotor(b=2.0, mu_e=0.8, j_max=8).series((0, 0), 6).energy_coefficients
    np.testing.assert_allclose(s.along((1.0, 0.0)), rotor, rtol=1e-12, atol=1e-15)
    assert s.energy_coefficients[2, 2] != 0.0  # the mixed term a hand derivation drops


def test_zeeman_alone_is_the_spectrum_of_jx():
    # eigenvalues of J_x on a J multiplet are −J … J (standard angular momentum): E = B J(J+1) − λ g m
    m = polar_molecule(b=2.0, mu_e=0.8, g_b=0.25, j_max=3)
    lam = 0.7
    exact = np.linalg.eigvalsh(m.along((0.0, 1.0)).hamiltonian(lam))
    ref = np.sort([2.0 * j * (j + 1) - lam * 0.25 * mm for j in range(4) for mm in range(-j, j + 1)])
    np.testing.assert_allclose(exact, ref, atol=1e-12)


def test_registered_and_declares_its_reflection():
    assert BUILDERS["polar_molecule"] is polar_molecule
    m = polar_molecule(j_max=2)
    assert m.conserved_names == ("σ",) and len(m.sectors) == 2
    assert m.coupling_names == ("E", "B")
    with pytest.raises(ValueError, match="j_max"):
        polar_molecule(j_max=0)
