"""Multilevel anharmonic (Kerr-ladder) qubits: with a resonator, or in pairs.

A Kerr ladder has levels ``E_j = ω j + α j (j − 1) / 2`` (j = 0 … n − 1) and
ladder operator ``b|j⟩ = √j |j−1⟩``: the weakly anharmonic oscillator model of
a transmon (Koch et al., Phys. Rev. A 76, 042319 (2007)).  Keeping the levels
above j = 1 is what makes the dispersive shift and the ZZ interaction come out
right; the number of levels kept is a parameter.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from ..model import Model
from . import _common as c

__all__ = ["kerr_qubit_resonator", "coupled_kerr_qubits", "kerr_ladder", "MAX_LEVELS_PER_QUBIT"]

#: Largest n_levels of :func:`coupled_kerr_qubits` (65 536 states, with many
#: exact degeneracies of H0 to resolve: seconds already).
MAX_LEVELS_PER_QUBIT = 256


def kerr_ladder(omega: float, alpha: float, n_levels: int) -> np.ndarray:
    """Kerr-ladder energies ``E_j = ω j + α j (j − 1)/2``, j = 0 … n_levels − 1, shape (n_levels,)."""
    j = np.arange(n_levels, dtype=float)
    return omega * j + alpha * j * (j - 1) / 2


def kerr_qubit_resonator(
    *,
    omega_q: float = 5.0,
    alpha: float = -0.25,
    omega_r: float = 7.0,
    g: float = 0.1,
    n_qubit: int = 4,
    n_photons: int = 10,
    rotating_wave: bool = False,
    sparse: bool | None = None,
) -> Model:
    """Kerr-ladder qubit coupled to a resonator (transmon–resonator model).

    ``H0 = Σ_j E_j |j⟩⟨j| ⊗ 1 + 1 ⊗ ω_r a†a`` with ``E_j = ω_q j + α j (j−1)/2``,
    and ``V = g (b + b†)(a + a†)``, or with ``rotating_wave=True`` the
    number-conserving ``V = g (b a† + b† a)``.

    λ = 1 is the physical coupling g.  At second order the resonator frequency
    depends on the qubit state (dispersive shift ``2χ`` with
    ``χ = g² α / (Δ (Δ + α))``, Δ = ω_q − ω_r, in the rotating-wave case).

    Parameters
    ----------
    omega_q : float, default 5.0
        Qubit 0→1 frequency ω_q > 0 (energy units, ħ = 1).
    alpha : float, default -0.25
        Anharmonicity α (energy units; negative for a transmon).
    omega_r : float, default 7.0
        Resonator frequency ω_r > 0.
    g : float, default 0.1
        Coupling g (energy units).
    n_qubit : int, default 4
        Qubit levels kept (j = 0 … n_qubit − 1), >= 2.
    n_photons : int, default 10
        Resonator Fock states kept (n = 0 … n_photons − 1), >= 2.  The basis
        n_qubit x n_photons is capped at 2^20 states.
    rotating_wave : bool, default False
        Drop the counter-rotating terms ``b a`` and ``b† a†``.
    sparse : bool or None, default None
        Return scipy.sparse matrices (None: only when the basis exceeds 512).

    Defaults are invented round numbers (transmon-like, GHz).  The truncation
    in both n_qubit and n_photons is the user's to check, e.g.
    ``truncation_check(kerr_qubit_resonator, "n_qubit", [3, 4, 6], coupling=1.0)``
    (see :func:`ptcheck.models.truncation_check`).  Keep ``n_qubit`` where the
    Kerr ladder is physical: for a transmon the ladder is a low-level
    approximation.

    Returns
    -------
    Model
        Named ``"Kerr qubit–resonator"`` (``"Kerr qubit–resonator (RWA)"``),
        ``dims = (n_qubit, n_photons)``, labels ``(j, n)``; ``coupling_scale = g``,
        ``coupling_name = "g"`` (reports show g = λ g beside λ).

    Examples
    --------
    >>> m = kerr_qubit_resonator(n_qubit=3, n_photons=3)
    >>> m.dims, m.label(0)
    ((3, 3), '|0,0⟩')
    """
    wq = c.positive(omega_q, "omega_q")
    al = c.real(alpha, "alpha")
    wr = c.positive(omega_r, "omega_r")
    gg = c.real(g, "g")
    nq = c.size(n_qubit, "n_qubit", minimum=2)
    nph = c.size(n_photons, "n_photons", minimum=2)
    c.basis_size(n_qubit=nq, n_photons=nph)
    rwa = c.flag(rotating_wave, "rotating_wave")
    sparse = c.sparse_choice(sparse)
    b = c.lowering(nq)
    a = c.lowering(nph)
    h0 = sp.kron(sp.diags(kerr_ladder(wq, al, nq)), sp.identity(nph)) + wr * sp.kron(sp.identity(nq), a.T @ a)
    if rwa:
        v = gg * (sp.kron(b, a.T) + sp.kron(b.T, a))
    else:
        v = gg * sp.kron(b + b.T, a + a.T)
    h0, v = c.finish(h0.tocsr(), v.tocsr(), sparse)
    name = "Kerr qubit–resonator (RWA)" if rwa else "Kerr qubit–resonator"
    return Model(h0, v, dims=(nq, nph), name=name, truncated=True, **c.physical(gg, "g"))


def coupled_kerr_qubits(
    *,
    omega1: float = 5.0,
    alpha1: float = -0.25,
    omega2: float = 5.4,
    alpha2: float = -0.3,
    j: float = 0.02,
    n_levels: int = 4,
    sparse: bool | None = None,
) -> Model:
    """Two Kerr-ladder qubits with exchange coupling.

    ``H0 = Σ_{k} E1_k |k⟩⟨k| ⊗ 1 + 1 ⊗ Σ_k E2_k |k⟩⟨k|`` with
    ``Ei_k = ω_i k + α_i k (k − 1)/2``, and ``V = J (b1 b2† + b1† b2)``.

    λ = 1 is the physical exchange J.  V conserves the total excitation
    number.  The static ZZ interaction ``ζ = E11 − E10 − E01 + E00`` is at
    second order ``2 J² (α1 + α2) / ((Δ + α1)(Δ − α2))``, Δ = ω1 − ω2; it
    diverges where ``|1,1⟩`` is degenerate with ``|2,0⟩`` (Δ = −α1) or
    ``|0,2⟩`` (Δ = α2), and at Δ = 0 ``|1,0⟩``, ``|0,1⟩`` are degenerate
    (block treatment).

    Parameters
    ----------
    omega1, omega2 : float, default 5.0, 5.4
        0→1 frequencies (energy units, > 0).
    alpha1, alpha2 : float, default -0.25, -0.3
        Anharmonicities (energy units).
    j : float, default 0.02
        Exchange coupling J (energy units).
    n_levels : int, default 4
        Levels kept per qubit (k = 0 … n_levels − 1), 2 …
        :data:`MAX_LEVELS_PER_QUBIT` (256).  ZZ at second
        order needs n_levels >= 3; higher orders need more.
    sparse : bool or None, default None
        Return scipy.sparse matrices (None: only when the basis exceeds 512).

    Defaults are invented round numbers (transmon-like, GHz).

    Returns
    -------
    Model
        Named ``"coupled Kerr qubits"``, ``dims = (n_levels, n_levels)``,
        labels ``(k1, k2)``; ``coupling_scale = J``, ``coupling_name = "J"``.

    Examples
    --------
    >>> coupled_kerr_qubits(n_levels=3).dims
    (3, 3)
    """
    w1 = c.positive(omega1, "omega1")
    a1 = c.real(alpha1, "alpha1")
    w2 = c.positive(omega2, "omega2")
    a2 = c.real(alpha2, "alpha2")
    jj = c.real(j, "j")
    n = c.size(n_levels, "n_levels", minimum=2, maximum=MAX_LEVELS_PER_QUBIT)
    sparse = c.sparse_choice(sparse)
    b = c.lowering(n)
    eye = sp.identity(n)
    h0 = sp.kron(sp.diags(kerr_ladder(w1, a1, n)), eye) + sp.kron(eye, sp.diags(kerr_ladder(w2, a2, n)))
    v = jj * (sp.kron(b, b.T) + sp.kron(b.T, b))
    h0, v = c.finish(h0.tocsr(), v.tocsr(), sparse)
    return Model(h0, v, dims=(n, n), name="coupled Kerr qubits", truncated=True, **c.physical(jj, "J"))
