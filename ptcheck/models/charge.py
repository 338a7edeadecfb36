"""Cosine potential in the charge (angular-momentum) basis: charge qubit, planar rotor.

``H = 4 E_C (n̂ − n_g)² − E_J cos φ`` with ``e^{iφ}|n⟩ = |n+1⟩``, so
``−E_J cos φ = −(E_J/2) Σ_n (|n+1⟩⟨n| + |n⟩⟨n+1|)``, in the charge basis
n = −n_max … n_max.

Exact levels (Mathieu connection).  With φ = 2z the Schrödinger equation
becomes Mathieu's equation ``y'' + (a − 2q cos 2z) y = 0`` with
``a = E / E_C`` and ``q = −E_J / (2 E_C)``.  The wave function picks up
``e^{−2πi n_g}`` when φ → φ + 2π (gauge ψ = e^{i n_g φ} χ), i.e.
y(z + π) = e^{−2πi n_g} y(z):

- n_g = 0 (π-periodic y): ``E = E_C a_{2r}(q)`` (r >= 0) and ``E_C b_{2r}(q)``
  (r >= 1);
- n_g = 1/2 (π-antiperiodic y): ``E = E_C a_{2r+1}(q)`` and ``E_C b_{2r+1}(q)``
  (r >= 0);

general n_g needs characteristic values of non-integer order (Koch et al.,
"Charge-insensitive qubit design derived from the Cooper pair box",
Phys. Rev. A 76, 042319 (2007)).  Even-order values
do not depend on the sign of q, and the odd-order set {a_{2r+1}, b_{2r+1}}
is mapped onto itself by q → −q, so ``scipy.special.mathieu_a/mathieu_b`` at
``q = E_J/(2 E_C) >= 0`` give the levels.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from ..model import Model
from . import _common as c

__all__ = ["charge_qubit", "planar_rotor", "MAX_CHARGE"]

#: Largest n_max / m_max built (20 001 states; every pair ±n is degenerate in H0,
#: and resolving 10⁴ pairs already takes seconds).
MAX_CHARGE = 10_000


def _cosine_model(b: float, v0: float, offset: float, n_max: int, sparse: bool | None, name: str) -> Model:
    n = np.arange(-n_max, n_max + 1, dtype=float)
    h0 = sp.diags(b * (n - offset) ** 2, format="csr")
    size = n.size
    v = sp.diags([np.full(size - 1, -v0 / 2)] * 2, [1, -1], shape=(size, size), format="csr")
    h0, v = c.finish(h0, v, sparse)
    return Model(h0, v, labels=[(int(k),) for k in n], name=name, truncated=True)


def charge_qubit(
    *,
    e_c: float = 1.0,
    e_j: float = 1.0,
    n_g: float = 0.0,
    n_max: int = 10,
    sparse: bool | None = None,
) -> Model:
    """Cooper-pair box (charge qubit) in the charge basis.

    ``H0 = 4 E_C (n − n_g)²`` (diagonal) and
    ``V = −(E_J/2) Σ_n (|n⟩⟨n+1| + |n+1⟩⟨n|) = −E_J cos φ``, n = −n_max … n_max.

    λ = 1 is the physical Josephson energy E_J (λ dimensionless); the
    expansion in λ is the charge-regime expansion, trustworthy for
    ``λ E_J ≪ E_C`` away from charge degeneracies.  At n_g = 0 the states
    ``±n`` are exactly degenerate in H0 (split only at order 2|n|); at
    n_g = 1/2 the pair ``n = 0, 1`` is degenerate and mixed at first order
    (block treatment).  Exact levels for n_g = 0 and 1/2: Mathieu
    characteristic values, see the module docstring.

    Parameters
    ----------
    e_c : float, default 1.0
        Charging energy E_C > 0 (energy units, ħ = 1).
    e_j : float, default 1.0
        Josephson energy E_J > 0 (energy units).
    n_g : float, default 0.0
        Offset charge n_g (Cooper pairs, dimensionless).
    n_max : int, default 10
        Charge states kept: n = −n_max … n_max (2 n_max + 1 states), 1 …
        :data:`MAX_CHARGE` (10 000).
        The truncation error of the low levels falls off faster than
        exponentially in n_max once 4 E_C n_max² ≫ E_J; check with
        ``truncation_check(charge_qubit, "n_max", [5, 10, 15], coupling=1.0)``
        (see :func:`ptcheck.models.truncation_check`).
    sparse : bool or None, default None
        Return scipy.sparse matrices (None: only when the basis exceeds 512).

    Defaults are invented round numbers (E_J = E_C: between the charge and
    transmon regimes).

    Returns
    -------
    Model
        Named ``"charge qubit"``; levels labelled by charge ``(n,)``.

    Examples
    --------
    >>> m = charge_qubit(n_g=0.25, n_max=2)
    >>> m.label(0)
    '|0⟩'
    """
    ec = c.positive(e_c, "e_c")
    ej = c.positive(e_j, "e_j")
    ng = c.real(n_g, "n_g")
    nmax = c.size(n_max, "n_max", minimum=1, maximum=MAX_CHARGE)
    return _cosine_model(4 * ec, ej, ng, nmax, c.sparse_choice(sparse), "charge qubit")


def planar_rotor(*, b: float = 1.0, v0: float = 1.0, m_max: int = 10, sparse: bool | None = None) -> Model:
    """Planar rotor in a cosine potential, in the angular-momentum basis.

    ``H0 = B m²`` (``= −B d²/dθ²``) and ``V = −V0 cos θ =
    −(V0/2) Σ_m (|m⟩⟨m+1| + |m+1⟩⟨m|)``, m = −m_max … m_max.  This is
    :func:`charge_qubit` with ``4 E_C = B``, ``E_J = V0``, ``n_g = 0``;
    exact levels ``E = (B/4) a_{2r}(2V0/B)`` and ``(B/4) b_{2r}(2V0/B)``.

    λ = 1 is the physical potential depth V0.

    Parameters
    ----------
    b : float, default 1.0
        Rotational constant B > 0 (energy units).
    v0 : float, default 1.0
        Potential amplitude V0 > 0 (energy units).
    m_max : int, default 10
        Angular momenta kept: m = −m_max … m_max, 1 … :data:`MAX_CHARGE`
        (10 000).
    sparse : bool or None, default None
        Return scipy.sparse matrices (None: only when the basis exceeds 512).

    Defaults are invented round numbers.

    Returns
    -------
    Model
        Named ``"planar rotor"``; levels labelled ``(m,)``.  The pairs ±m are
        exactly degenerate in H0.
    """
    bb = c.positive(b, "b")
    v = c.positive(v0, "v0")
    mmax = c.size(m_max, "m_max", minimum=1, maximum=MAX_CHARGE)
    return _cosine_model(bb, v, 0.0, mmax, c.sparse_choice(sparse), "planar rotor")
