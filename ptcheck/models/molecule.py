"""An invented polar molecule in crossed electric and magnetic fields: two couplings (Stark and Zeeman).

``H = B J² − μE cos θ − g B_x J_x`` in the rotor basis ``|J, M⟩`` (M along the
electric field, z), with two couplings:

* ``E`` (Stark): ``V_E = −μE cos θ``, coupling ``J ↔ J ± 1`` at equal M with
  ``⟨J+1, M| cos θ |J, M⟩ = √[((J+1)² − M²) / ((2J+1)(2J+3))]`` (standard
  direction-cosine element of a linear molecule; Townes and Schawlow,
  *Microwave Spectroscopy*, 1955; quoted from memory);
* ``B`` (Zeeman, field along x, perpendicular to E): ``V_B = −g B_x J_x`` with
  ``J_x = (J_+ + J_−)/2`` and ``⟨J, M±1| J_± |J, M⟩ = √[J(J+1) − M(M±1)]``
  (standard angular-momentum algebra, e.g. Sakurai, *Modern Quantum
  Mechanics*, eq. 3.5.41).

Neither field alone conserves much in common: E keeps M, B keeps J, together
they mix everything except the reflection through the plane of the two fields
(``x → −x``), which maps ``|J, M⟩ → |J, −M⟩``; it is declared as the conserved
operator ``"σ"`` (two sectors, σ = ±1).  The molecule and its numbers are
invented for demonstrations; they describe no real species.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from ..model import Model
from . import _common as c
from .rotor import cos_theta, jm_basis

__all__ = ["polar_molecule", "MAX_J"]

#: Largest rotational quantum number kept.
MAX_J = 60


def polar_molecule(
    *,
    b: float = 2.0,
    mu_e: float = 0.8,
    g_b: float = 0.25,
    j_max: int = 8,
    sparse: bool | None = None,
) -> Model:
    """Invented polar molecule: rotor ``B J(J+1)``, Stark coupling along z and Zeeman coupling along x.

    The couplings are named ``("E", "B")``: ``λ_E = 1`` is the Stark coupling
    ``μE`` (dipole moment x electric field) and ``λ_B = 1`` the Zeeman coupling
    ``g B_x`` (magnetic moment x magnetic field), both in energy units.
    Second-order shift of the ground rotor level in the electric field alone:
    ``−(μE)² / (6B)`` (Townes & Schawlow 1955); the magnetic field alone does
    not shift ``J = 0`` at any order (``J_x`` is zero there).

    Parameters
    ----------
    b : float, default 2.0
        Rotational constant B > 0 (energy units, ħ = 1).
    mu_e : float, default 0.8
        Stark coupling μE at ``λ_E = 1`` (energy units).
    g_b : float, default 0.25
        Zeeman coupling g B_x at ``λ_B = 1`` (energy units).
    j_max : int, default 8
        Rotational states kept: J = 0 … j_max, all M (``(j_max + 1)²`` states),
        1 … :data:`MAX_J`.  Check the truncation with
        :func:`ptcheck.models.truncation_check` on ``model.along(d)``.
    sparse : bool or None, default None
        CSR matrices (``None``: when the basis exceeds 512 states).

    Defaults are invented numbers (say, GHz) for demonstrations.

    Returns
    -------
    Model
        Two couplings ``("E", "B")``, labels ``(J, M)``, named
        ``"polar molecule (invented)"``, conserved reflection ``"σ"``.

    Examples
    --------
    >>> m = polar_molecule(j_max=2)
    >>> m.n, m.coupling_names, m.label(0), len(m.sectors)
    (9, ('E', 'B'), '|0,0⟩', 2)
    """
    bb = c.positive(b, "b")
    mu = c.real(mu_e, "mu_e")
    gb = c.real(g_b, "g_b")
    jm = c.size(j_max, "j_max", minimum=1, maximum=MAX_J)
    sp_choice = c.sparse_choice(sparse)
    js, ms, index = jm_basis(jm)
    n = js.size
    h0 = sp.diags(bb * js * (js + 1.0), format="csr")
    v_e = -mu * cos_theta(js, ms, index, jm)
    rz, cz, vs_b = [], [], []
    for i, (j, m) in enumerate(zip(js, ms)):
        j, m = int(j), int(m)
        if m < j:
            k = index[(j, m + 1)]
            elem = -gb * 0.5 * np.sqrt(j * (j + 1.0) - m * (m + 1.0))
            rz += [i, k]
            cz += [k, i]
            vs_b += [elem, elem]
    v_b = sp.csr_matrix((vs_b, (rz, cz)), shape=(n, n))
    mirror = sp.csr_matrix((np.ones(n), (np.arange(n), [index[(int(j), -int(m))] for j, m in zip(js, ms)])), shape=(n, n))
    h0d, v_e = c.finish(h0, v_e, sp_choice)
    _, v_b = c.finish(h0, v_b, sp_choice)
    mirror = mirror if sp.issparse(h0d) else mirror.toarray()
    labels = [(int(j), int(m)) for j, m in zip(js, ms)]
    return Model(h0d, [v_e, v_b], names=("E", "B"), labels=labels, conserved={"σ": mirror}, name="polar molecule (invented)", truncated=True)
