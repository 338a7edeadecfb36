"""A qubit coupled to one resonator mode: Jaynes–Cummings and (full) Rabi models.

Basis: qubit ⊗ resonator, ``dims = (2, n_photons)``, levels labelled ``(q, n)``
with qubit state q ∈ {0 (ground), 1 (excited)} and photon number
n = 0 … n_photons − 1.  H0 is diagonal in this basis.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from ..model import Model
from . import _common as c

__all__ = ["jaynes_cummings", "rabi"]


def _qubit_resonator(omega_q: float, omega_r: float, g: float, n_photons: int, sparse: bool | None):
    wq = c.positive(omega_q, "omega_q")
    wr = c.positive(omega_r, "omega_r")
    gg = c.real(g, "g")
    nph = c.size(n_photons, "n_photons", minimum=2, maximum=c.MAX_STATES // 2)
    sparse = c.sparse_choice(sparse)
    a = c.lowering(nph)
    eye_r = sp.identity(nph, format="csr")
    excited = sp.csr_matrix(np.array([[0.0, 0.0], [0.0, 1.0]]))
    h0 = wq * sp.kron(excited, eye_r) + wr * sp.kron(sp.identity(2), a.T @ a)
    sigma_plus = sp.csr_matrix(np.array([[0.0, 0.0], [1.0, 0.0]]))  # |1⟩⟨0|
    return h0.tocsr(), a, sigma_plus, gg, nph, sparse


def jaynes_cummings(
    *,
    omega_q: float = 5.0,
    omega_r: float = 6.0,
    g: float = 0.1,
    n_photons: int = 10,
    sparse: bool | None = None,
) -> Model:
    """Jaynes–Cummings model: a qubit exchanging quanta with a resonator.

    ``H0 = ω_q |1⟩⟨1| ⊗ 1 + 1 ⊗ ω_r a†a`` and
    ``V = g (σ+ a + σ− a†)`` with ``σ+ = |1⟩⟨0|``.

    λ = 1 is the physical coupling g (λ dimensionless).  The exact levels are
    the ground state 0 and the doublets
    ``E±(n) = ω_r (n + 1/2) + ω_q/2 ± √(Δ²/4 + λ² g² (n + 1))``, Δ = ω_q − ω_r,
    formed by ``|1, n⟩`` and ``|0, n + 1⟩`` (this H0 has no zero-point or
    −ω_q/2 offsets; add ``ω_r/2 − ω_q/2`` to compare with the ``ω_q σz/2``
    convention).  At resonance (ω_q = ω_r) the doublets are exactly degenerate
    in H0 and need the block treatment.

    Parameters
    ----------
    omega_q : float, default 5.0
        Qubit frequency ω_q > 0 (energy units, ħ = 1).
    omega_r : float, default 6.0
        Resonator frequency ω_r > 0 (energy units).
    g : float, default 0.1
        Qubit–resonator coupling g (energy units).
    n_photons : int, default 10
        Number of resonator Fock states kept (n = 0 … n_photons − 1), >= 2; at
        most 2^19 (the basis of a built-in model is capped at 2^20 states).
        Truncation: the top state ``|1, n_photons − 1⟩`` loses its partner
        ``|0, n_photons⟩``, so the highest level is not a true JC level.  The
        low-lying levels are exact because V conserves q + n.
    sparse : bool or None, default None
        Return scipy.sparse matrices (None: only when 2 · n_photons > 512).

    Defaults are invented round numbers (transmon-like values in GHz, in the
    dispersive regime g/|Δ| = 0.1).

    Returns
    -------
    Model
        Named ``"Jaynes–Cummings"``, ``dims = (2, n_photons)``, labels ``(q, n)``;
        ``coupling_scale = g``, ``coupling_name = "g"`` (reports show g = λ g
        beside λ, in the units of the energies).

    Examples
    --------
    >>> m = jaynes_cummings(n_photons=4)
    >>> m.n, m.dims, m.label(1)
    (8, (2, 4), '|1,0⟩')
    """
    h0, a, sp_plus, g, nph, sparse = _qubit_resonator(omega_q, omega_r, g, n_photons, sparse)
    v = g * (sp.kron(sp_plus, a) + sp.kron(sp_plus.T, a.T))
    h0, v = c.finish(h0, v.tocsr(), sparse)
    return Model(h0, v, dims=(2, nph), name="Jaynes–Cummings", truncated=True, **c.physical(g, "g"))


def rabi(
    *,
    omega_q: float = 5.0,
    omega_r: float = 6.0,
    g: float = 0.1,
    n_photons: int = 10,
    sparse: bool | None = None,
) -> Model:
    """Quantum Rabi model: Jaynes–Cummings plus the counter-rotating terms.

    ``H0 = ω_q |1⟩⟨1| ⊗ 1 + 1 ⊗ ω_r a†a`` and ``V = g σx (a + a†)``.

    λ = 1 is the physical coupling g.  V does not conserve q + n (only the
    parity ``(−1)^(q + n)``), so every level feels the truncation; the
    counter-rotating terms give the Bloch–Siegert shift ``+g²/(ω_q + ω_r)`` of
    the qubit frequency at second order.  Check the truncation with
    :func:`ptcheck.models.truncation_check` (size parameter ``"n_photons"``)
    for strong coupling.

    Parameters
    ----------
    omega_q, omega_r, g, n_photons, sparse
        As in :func:`jaynes_cummings` (same invented defaults).

    Returns
    -------
    Model
        Named ``"Rabi"``, ``dims = (2, n_photons)``, labels ``(q, n)``;
        ``coupling_scale = g``, ``coupling_name = "g"``.

    Examples
    --------
    >>> rabi(n_photons=6).dims
    (2, 6)
    """
    h0, a, _, g, nph, sparse = _qubit_resonator(omega_q, omega_r, g, n_photons, sparse)
    sigma_x = sp.csr_matrix(np.array([[0.0, 1.0], [1.0, 0.0]]))
    v = g * sp.kron(sigma_x, a + a.T)
    h0, v = c.finish(h0, v.tocsr(), sparse)
    return Model(h0, v, dims=(2, nph), name="Rabi", truncated=True, **c.physical(g, "g"))
