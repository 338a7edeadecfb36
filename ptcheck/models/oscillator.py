"""Harmonic oscillator perturbed by a power of the position, x^k."""

from __future__ import annotations

import scipy.sparse as sp

from .. import _validation as val
from ..model import Model
from . import _common as c

__all__ = ["anharmonic_oscillator", "OSCILLATOR_KINDS"]

#: kind -> (power k of x, model name)
OSCILLATOR_KINDS: dict[str, tuple[int, str]] = {
    "linear": (1, "displaced oscillator (λ x)"),
    "quadratic": (2, "oscillator with λ x²"),
    "cubic": (3, "cubic oscillator (λ x³)"),
    "quartic": (4, "quartic oscillator (λ x⁴)"),
}


def position_power(power: int, n_basis: int) -> sp.csr_matrix:
    """Exact matrix ``⟨m| x^power |n⟩`` for m, n < n_basis, shape (n_basis, n_basis), CSR.

    ``x = (a + a†)/√2``.  Built as a product in a basis of ``n_basis + power``
    states and then cut: a path of ``power`` ladder steps between two kept
    states never climbs more than ``power`` levels above them, so every kept
    element is exact (this is ``P x^k P``, not ``(P x P)^k``).
    """
    big = n_basis + power
    a = c.lowering(big)
    x = (a + a.T) / 2**0.5
    xk = sp.identity(big, format="csr")
    for _ in range(power):
        xk = xk @ x
    return sp.csr_matrix(xk[:n_basis, :n_basis])


def anharmonic_oscillator(*, kind: str = "quartic", n_basis: int = 60, sparse: bool | None = None) -> Model:
    """Harmonic oscillator with a perturbation ``λ x^k``.

    ``H0 = a†a + 1/2`` (ω = m = ħ = 1; energies in units of ħω, lengths in
    units of √(ħ/mω)) and ``V = x^k`` with ``x = (a + a†)/√2``:

    - ``"linear"`` (k = 1): exact E_n = n + 1/2 − λ²/2 (complete the square);
    - ``"quadratic"`` (k = 2): exact E_n = (n + 1/2) √(1 + 2λ); radius of
      convergence 1/2 (branch point at λ = −1/2);
    - ``"cubic"`` (k = 3): no bound states for λ ≠ 0; the series is asymptotic;
    - ``"quartic"`` (k = 4): radius of convergence zero (Bender & Wu), the
      classic divergent-but-Padé/Borel-summable series.

    λ is dimensionless (coefficient of x^k in these units); λ = 1 has no
    special meaning here.

    Parameters
    ----------
    kind : {"quartic", "cubic", "quadratic", "linear"}, default "quartic"
    n_basis : int, default 60
        Number of oscillator states kept (n = 0 … n_basis − 1), >= k + 1
        and at most 2^20 (the size cap of the built-in models).
    sparse : bool or None, default None
        Return scipy.sparse matrices (None: only when n_basis > 512).

    Notes
    -----
    Truncation: V holds the exact matrix elements ``⟨m|x^k|n⟩`` of all kept
    states (built in a basis of ``n_basis + k`` states, then cut), so every
    perturbative coefficient of a low level is exact as long as the orders
    used reach no state above ``n_basis`` (order p of level n touches states
    up to ``n + p k``).  The *exact* levels of the truncated matrix are
    variational upper bounds that converge from above for the quartic case
    and never converge for the cubic one (its spectrum is unbounded below:
    states far up in the truncated basis come down).  Check with
    ``truncation_check(anharmonic_oscillator, "n_basis", [40, 60, 80],
    params={"kind": "quartic"}, coupling=0.1)`` (see
    :func:`ptcheck.models.truncation_check`).

    Returns
    -------
    Model
        Named e.g. ``"quartic oscillator (λ x⁴)"``; levels labelled ``(n,)``.

    Examples
    --------
    >>> m = anharmonic_oscillator(kind="quartic", n_basis=10)
    >>> round(float(m.v[0, 0]), 12)  # ⟨0|x⁴|0⟩ = 3/4
    0.75
    """
    kind = val.check_choice(kind, "kind", OSCILLATOR_KINDS)
    power, name = OSCILLATOR_KINDS[kind]
    nb = c.size(n_basis, "n_basis", minimum=power + 1)
    sparse = c.sparse_choice(sparse)
    h0 = sp.diags([k + 0.5 for k in range(nb)], format="csr")
    v = position_power(power, nb)
    h0, v = c.finish(h0, v, sparse)
    return Model(h0, v, labels=[(k,) for k in range(nb)], name=name, truncated=True)
