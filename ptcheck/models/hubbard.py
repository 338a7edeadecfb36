"""Two-site Hubbard model at half filling (two electrons)."""

from __future__ import annotations

from functools import reduce

import numpy as np

from .. import _validation as val
from ..model import Model
from . import _common as c

__all__ = ["hubbard_dimer", "HUBBARD_SECTORS"]

# fermionic modes in the order used for signs: 1↑, 1↓, 2↑, 2↓
_MODES = {"1u": 0, "1d": 1, "2u": 2, "2d": 3}

#: sector -> ordered (label, occupied modes) of the basis states c†_{m1} c†_{m2} |0⟩ (m1 < m2)
HUBBARD_SECTORS: dict[str, tuple[tuple[str, tuple[str, str]], ...]] = {
    "sz0": (
        ("↑,↓", ("1u", "2d")),
        ("↓,↑", ("1d", "2u")),
        ("↑↓,0", ("1u", "1d")),
        ("0,↑↓", ("2u", "2d")),
    ),
    "two_electron": (
        ("↑,↓", ("1u", "2d")),
        ("↓,↑", ("1d", "2u")),
        ("↑↓,0", ("1u", "1d")),
        ("0,↑↓", ("2u", "2d")),
        ("↑,↑", ("1u", "2u")),
        ("↓,↓", ("1d", "2d")),
    ),
}


def _annihilators() -> list[np.ndarray]:
    """Jordan–Wigner annihilation operators of the 4 modes on the 16-state Fock space."""
    a = np.array([[0.0, 1.0], [0.0, 0.0]])  # |1⟩ -> |0⟩ on one mode (occupation basis 0, 1)
    zsign = np.diag([1.0, -1.0])
    eye = np.eye(2)
    ops = []
    for m in range(4):
        factors = [zsign] * m + [a] + [eye] * (3 - m)
        ops.append(reduce(np.kron, factors))
    return ops


def hubbard_dimer(*, t: float = 1.0, u: float = 8.0, sector: str = "sz0") -> Model:
    """Two-site Hubbard model with two electrons.

    ``H0 = U Σ_i n_{i↑} n_{i↓}`` and ``V = −t Σ_σ (c†_{1σ} c_{2σ} + c†_{2σ} c_{1σ})``.

    λ = 1 is the physical hopping amplitude t (λ dimensionless); the
    expansion in λ is the strong-coupling (large-U) expansion.  Basis states
    are ``c†_{m1} c†_{m2} |0⟩`` with modes ordered 1↑, 1↓, 2↑, 2↓ (m1 before
    m2), labelled ``"↑,↓"``, ``"↓,↑"`` (one electron per site), ``"↑↓,0"``,
    ``"0,↑↓"`` (doubly occupied site), and in the full two-electron sector
    also ``"↑,↑"``, ``"↓,↓"``.

    The singly occupied states are exactly degenerate in H0 (energy 0) and V
    does not mix them at first order: the block treatment gives the
    Heisenberg exchange ``J = 4t²/U`` at second order.  Exact singlet ground
    energy ``(U − √(U² + 16 t²))/2``.

    Parameters
    ----------
    t : float, default 1.0
        Hopping amplitude t (energy units, ħ = 1).
    u : float, default 8.0
        On-site repulsion U (energy units; negative U is attraction).
    sector : {"sz0", "two_electron"}, default "sz0"
        ``"sz0"``: the 4 states with S_z = 0; ``"two_electron"``: all 6
        two-electron states (adds the S_z = ±1 triplets, which V leaves
        untouched).

    Defaults are invented round numbers (U/t = 8, deep in the Mott regime).

    Returns
    -------
    Model
        Named ``"Hubbard dimer"``.

    Examples
    --------
    >>> m = hubbard_dimer()
    >>> m.e0
    array([0., 0., 8., 8.])
    """
    tt = c.real(t, "t")
    uu = c.real(u, "u")
    sector = val.check_choice(sector, "sector", HUBBARD_SECTORS)
    cs = _annihilators()
    vac = np.zeros(16)
    vac[0] = 1.0  # all modes empty: first Kronecker index
    basis = []
    labels = []
    for label, (m1, m2) in HUBBARD_SECTORS[sector]:
        basis.append(cs[_MODES[m1]].T @ (cs[_MODES[m2]].T @ vac))
        labels.append(label)
    b = np.array(basis).T  # (16, S), orthonormal columns
    num = [ci.T @ ci for ci in cs]
    h0_fock = uu * (num[0] @ num[1] + num[2] @ num[3])
    hop = sum(cs[s1].T @ cs[s2] for s1, s2 in ((0, 2), (1, 3)))
    v_fock = -tt * (hop + hop.T)
    h0 = b.T @ h0_fock @ b
    v = b.T @ v_fock @ b
    return Model(h0, v, labels=labels, name="Hubbard dimer", truncated=False)
