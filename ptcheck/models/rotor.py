"""Polar linear rotor in a static electric field (Stark effect), in its |J, M⟩ basis.

``H = B J² − μE cos θ`` with ``H0 = B J(J+1)`` (diagonal) and
``V = −μE cos θ``.  The direction cosine couples ``J ↔ J ± 1`` at equal M,

    ⟨J+1, M| cos θ |J, M⟩ = √[((J+1)² − M²) / ((2J+1)(2J+3))],

the standard direction-cosine matrix element of a linear molecule (e.g. C. H.
Townes and A. L. Schawlow, *Microwave Spectroscopy*, 1955, chapter on the Stark
effect; quoted from memory).  ``M`` is conserved: each M is one symmetry sector
(the graph of H0 and V already splits them; the builder also declares the
operator ``M`` so that sectors carry its value in their names).  The levels
``(J, ±M)`` are degenerate for every field but never mix, so perturbation
theory treats each ``(J, M)`` as non-degenerate in its sector.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from ..model import Model
from . import _common as c

__all__ = ["linear_rotor", "MAX_J"]

#: Largest rotational quantum number kept ((J_max + 1)² = 40 401 states).
MAX_J = 200


def linear_rotor(
    *,
    b: float = 1.0,
    mu_e: float = 0.5,
    j_max: int = 10,
    sparse: bool | None = None,
) -> Model:
    """Linear rotor ``H0 = B J(J+1)`` perturbed by a static field ``V = −μE cos θ``.

    λ multiplies the field: λ = 1 is the physical Stark coupling ``μE``
    (dipole moment x field, energy units).  Second-order Stark shift of a
    linear molecule (Townes & Schawlow, *Microwave Spectroscopy*, 1955):
    ``E2(J, M) = (μE)² [J(J+1) − 3M²] / [2B J(J+1)(2J−1)(2J+3)]`` and
    ``E2(0, 0) = −(μE)² / (6B)``.

    Parameters
    ----------
    b : float, default 1.0
        Rotational constant B > 0 (energy units, ħ = 1).
    mu_e : float, default 0.5
        Stark coupling μE (energy units): dipole moment times field.
    j_max : int, default 10
        Rotational states kept: J = 0 … j_max, all M (``(j_max + 1)²`` states),
        1 … :data:`MAX_J`.  Level J feels the truncation at order
        ``2 (j_max − J) + 2`` of the series and, exactly, through
        ``(μE / B j_max)^{2(j_max − J)}``: check with
        :func:`ptcheck.models.truncation_check`.
    sparse : bool or None, default None
        CSR matrices (``None``: when the basis exceeds 512 states).

    Defaults are invented round numbers.

    Returns
    -------
    Model
        Named ``"linear rotor in a field"``, labels ``(J, M)``, one sector per M
        (declared conserved operator ``"M"``); ``coupling_scale = μE``,
        ``coupling_name = "μE"`` (reports show μE = λ μE beside λ).

    Examples
    --------
    >>> m = linear_rotor(j_max=2)
    >>> m.n, m.label(0), [s.name for s in m.sectors]
    (9, '|0,0⟩', ['M 0', 'M -1', 'M +1', 'M -2', 'M +2'])
    """
    bb = c.positive(b, "b")
    mu = c.real(mu_e, "mu_e")
    jm = c.size(j_max, "j_max", minimum=1, maximum=MAX_J)
    sp_choice = c.sparse_choice(sparse)
    js, ms, index = jm_basis(jm)
    h0 = sp.diags(bb * js * (js + 1.0), format="csr")
    v = -mu * cos_theta(js, ms, index, jm)
    m_op = sp.diags(ms.astype(float), format="csr")
    h0, v = c.finish(h0, v, sp_choice)
    m_op = m_op if sp.issparse(h0) else m_op.toarray()
    labels = [(int(j), int(m)) for j, m in zip(js, ms)]
    return Model(h0, v, labels=labels, conserved={"M": m_op}, name="linear rotor in a field", truncated=True, **c.physical(mu, "μE"))


def jm_basis(j_max: int) -> tuple[np.ndarray, np.ndarray, dict]:
    """The |J, M⟩ basis J = 0 … j_max, all M: (J of each state, M of each state, (J, M) → index)."""
    js = np.concatenate([np.full(2 * j + 1, j) for j in range(j_max + 1)])
    ms = np.concatenate([np.arange(-j, j + 1) for j in range(j_max + 1)])
    return js, ms, {(int(j), int(m)): i for i, (j, m) in enumerate(zip(js, ms))}


def cos_theta(js: np.ndarray, ms: np.ndarray, index: dict, j_max: int) -> sp.csr_matrix:
    """cos θ in the |J, M⟩ basis: ⟨J+1, M|cos θ|J, M⟩ = sqrt(((J+1)² − M²) / ((2J+1)(2J+3))), real symmetric."""
    rows, cols, vals = [], [], []
    for i, (j, m) in enumerate(zip(js, ms)):
        if j < j_max:
            k = index[(int(j) + 1, int(m))]
            elem = np.sqrt(((j + 1.0) ** 2 - m**2) / ((2.0 * j + 1.0) * (2.0 * j + 3.0)))
            rows += [i, k]
            cols += [k, i]
            vals += [elem, elem]
    return sp.csr_matrix((vals, (rows, cols)), shape=(js.size, js.size))
