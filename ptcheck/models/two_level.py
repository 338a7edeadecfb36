"""Two-level system: the smallest model with a finite radius of convergence."""

from __future__ import annotations

import numpy as np

from ..model import Model
from . import _common as c

__all__ = ["two_level"]


def two_level(*, delta: float = 1.0, v: float = 0.5, phase: float = 0.0) -> Model:
    """Two-level system ``H(λ) = H0 + λ V``.

    ``H0 = diag(−Δ/2, +Δ/2)`` and ``V = v (cos φ σx + sin φ σy)``, i.e.
    ``V = [[0, v e^{−iφ}], [v e^{iφ}, 0]]``.  The exact levels are
    ``±√(Δ²/4 + λ² v²)``; the Rayleigh–Schrödinger series converges for
    ``|λ| < Δ / (2|v|)`` (branch points at ``λ = ±iΔ/(2v)``).

    Parameters
    ----------
    delta : float, default 1.0
        Splitting Δ >= 0 of H0 (energy units; any unit, ħ = 1).  ``delta=0``
        gives an exactly degenerate pair.
    v : float, default 0.5
        Off-diagonal amplitude v of V (energy units).  λ = 1 is the coupling
        ``v``; λ is dimensionless.
    phase : float, default 0.0
        Phase φ of the coupling (radians); ``phase != 0`` makes V complex.

    Defaults are invented round numbers (Δ = 1, v = 1/2: radius of
    convergence exactly λ = 1).

    Returns
    -------
    Model
        Named ``"two-level system"``; basis states labelled ``"g"`` (energy
        −Δ/2) and ``"e"`` (+Δ/2).

    Examples
    --------
    >>> m = two_level(delta=2.0, v=0.1)
    >>> m.e0
    array([-1.,  1.])
    """
    d = c.nonnegative(delta, "delta")
    amp = c.real(v, "v")
    phi = c.real(phase, "phase")
    h0 = np.diag([-d / 2, d / 2])
    off = amp * np.exp(-1j * phi)
    vm = np.array([[0.0, off], [np.conj(off), 0.0]])
    if phi == 0.0:
        vm = vm.real.copy()
    return Model(h0, vm, labels=["g", "e"], name="two-level system", truncated=False)
