"""Spin-1/2 chains as sparse matrices (bit arithmetic, no dense intermediate).

Basis: the 2^N products of σz eigenstates, in Kronecker order (site 0 is the
most significant factor).  Level labels are tuples ``(s_0, …, s_{N−1})`` with
``s_i = 0`` for ↑ (σz = +1) and ``1`` for ↓ (σz = −1), as ``qutip.basis(2, 0)``
is ↑.  H0 is always diagonal in this basis; V flips spins.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import scipy.sparse as sp

from .. import _validation as val
from ..model import Model
from . import _common as c

__all__ = ["spin_chain", "SPIN_CHAIN_KINDS", "MAX_SPINS"]

SPIN_CHAIN_KINDS = ("transverse_ising", "xxz")

#: Largest chain built (2^20 ≈ 10^6 states).
MAX_SPINS = 20


def _fields(h_z: Any, n: int) -> np.ndarray:
    if np.ndim(h_z) == 0:
        return np.full(n, c.real(h_z, "h_z"))
    if isinstance(h_z, (str, bytes)):
        raise TypeError(f"h_z must be a real number or a sequence of {n} real numbers; got {h_z!r}")
    vals = list(h_z)
    if len(vals) != n:
        raise ValueError(f"h_z must have one field per site ({n}); got {len(vals)} values: {h_z!r}")
    return np.array([c.real(x, f"h_z[{i}]") for i, x in enumerate(vals)])


def spin_chain(
    *,
    n_spins: int = 8,
    kind: str = "transverse_ising",
    j: float = 1.0,
    h_z: float | Sequence[float] = 0.0,
    anisotropy: float | None = None,
    boundary: str = "periodic",
) -> Model:
    """Spin-1/2 chain ``H(λ) = H0 + λ V`` (scipy.sparse CSR).

    ``kind="transverse_ising"`` (ferromagnetic, J > 0)::

        H0 = −J Σ_i σz_i σz_{i+1} − Σ_i h_i σz_i ,   V = −J Σ_i σx_i

    so that ``H = −J Σ σz σz − h Σ σx − Σ h_i σz`` with **λ = h/J** (the
    transverse field in units of J; the critical point of the uniform chain
    is λ = 1).  With ``h_z = 0`` (the standard split) the model declares the
    conserved spin-flip parity ``P = Π σx`` (sectors ``"parity +1"`` and
    ``"parity -1"``): the H0 ground doublet (all ↑ / all ↓) becomes the pair
    ``(|↑…↑⟩ ± |↓…↓⟩)/√2``, one level in each sector (split only at order
    N), and each is non-degenerate in its sector; the domain-wall manifolds
    stay degenerate inside each sector.  A longitudinal field ``h_z > 0``
    breaks the parity and makes the H0 ground state (all ↑) non-degenerate;
    site-dependent fields (a sequence, e.g. the invented
    ``h_z = [0.1, 0.13, 0.17, …]``) also lift the degeneracies of the excited
    manifolds.

    ``kind="xxz"`` (antiferromagnetic for J > 0)::

        H0 = J Δ Σ_i σz_i σz_{i+1} − Σ_i h_i σz_i ,
        V  = J Σ_i (σx_i σx_{i+1} + σy_i σy_{i+1}) = 2J Σ_i (σ+_i σ−_{i+1} + h.c.)

    λ multiplies the transverse (flip-flop) exchange: λ = 1 with
    ``anisotropy`` Δ = 1 is the isotropic Heisenberg chain J Σ σ·σ.
    H0 is the Ising chain, whose Néel ground state is doubly degenerate
    unless fields break the symmetry.  The flip-flop exchange conserves
    ``Σ σz``, so each magnetisation is a component of the coupling graph (a
    sector); with ``h_z = 0`` the spin-flip parity ``Π σx`` is declared too:
    it splits the zero-magnetisation sector (Néel pair) into ``"parity ±1"``
    and has no value on the others (it maps magnetisation m to −m).

    Parameters
    ----------
    n_spins : int, default 8
        Number of sites N (basis size 2^N); 3 … 20 for a periodic chain,
        2 … 20 for an open one.
    kind : {"transverse_ising", "xxz"}, default "transverse_ising"
    j : float, default 1.0
        Exchange J (energy units, ħ = 1); sets the energy unit.
    h_z : float or sequence of N floats, default 0.0
        Longitudinal field h_i on each site (energy units).
    anisotropy : float, optional
        Ising anisotropy Δ of ``kind="xxz"`` (default 1.0); not accepted for
        the transverse Ising chain.
    boundary : {"periodic", "open"}, default "periodic"

    Defaults are invented round numbers.  No truncation: the basis is the
    full 2^N space.  Finite-size effects are the user's to check on
    intensive quantities (energy per site, gaps);
    :func:`ptcheck.models.truncation_check` compares total energies, which
    grow with N, so it is not the tool for them.

    Returns
    -------
    Model
        Named ``"transverse-field Ising chain"`` or ``"XXZ chain"``,
        ``dims = (2,) * N``, labels ``(s_0, …, s_{N−1})`` (a parity pair is
        named after both states, e.g. ``"|0,0,0,0⟩+|1,1,1,1⟩"``); sparse.

    Examples
    --------
    >>> m = spin_chain(n_spins=4)
    >>> m.n, m.is_sparse, [s.name for s in m.sectors], m.symmetry_degeneracies[0]
    (16, True, ['parity +1', 'parity -1'], (0, 1))
    >>> m.label(0)
    '|0,0,0,0⟩+|1,1,1,1⟩'
    """
    kind = val.check_choice(kind, "kind", SPIN_CHAIN_KINDS)
    boundary = val.check_choice(boundary, "boundary", ("periodic", "open"))
    n = c.size(n_spins, "n_spins", minimum=3 if boundary == "periodic" else 2, maximum=MAX_SPINS)
    jj = c.real(j, "j")
    fields = _fields(h_z, n)
    if kind == "transverse_ising":
        if anisotropy is not None:
            raise ValueError(f"anisotropy applies to kind='xxz' only; got anisotropy={anisotropy!r} for kind={kind!r}")
        zz_coef = -jj
    else:
        zz_coef = jj * (1.0 if anisotropy is None else c.real(anisotropy, "anisotropy"))

    dim = 1 << n
    states = np.arange(dim, dtype=np.int32)  # 2^20 states at most: 32-bit indices
    shift = [n - 1 - i for i in range(n)]  # site i <-> bit n-1-i (site 0 most significant)
    bonds = [(i, i + 1) for i in range(n - 1)] + ([(n - 1, 0)] if boundary == "periodic" else [])

    def bit(i: int) -> np.ndarray:  # 0 for ↑ (σz = +1), 1 for ↓ at site i
        return (states >> shift[i]) & 1

    def unlike(i: int, k: int) -> np.ndarray:  # 1 where sites i and k differ (σz_i σz_k = −1)
        return ((states >> shift[i]) ^ (states >> shift[k])) & 1

    walls = np.zeros(dim, dtype=np.int32)
    for i, k in bonds:
        walls += unlike(i, k)
    diag = zz_coef * (len(bonds) - 2.0 * walls)  # Σ_bonds σz_i σz_k = (bonds) − 2 (unlike bonds)
    for i in range(n):
        if fields[i] != 0.0:
            diag -= fields[i] * (1.0 - 2.0 * bit(i))
    h0 = sp.csr_matrix((diag, states, np.arange(dim + 1, dtype=np.int32)), shape=(dim, dim))

    conserved = {}
    if kind == "transverse_ising":
        # every state has n single flips: CSR built directly (sorted columns, no duplicates)
        cols = states[:, None] ^ (np.int32(1) << np.arange(n, dtype=np.int32))[None, :]
        cols.sort(axis=1)
        indptr = np.arange(0, dim * n + 1, n, dtype=np.int32 if dim * n < 2**31 else np.int64)
        v = sp.csr_matrix((np.full(dim * n, -jj), cols.ravel(), indptr), shape=(dim, dim))
        name = "transverse-field Ising chain"
    else:
        rows, cols, vals = [], [], []
        for i, k in bonds:
            flip = unlike(i, k).astype(bool)
            src = states[flip]
            rows.append(src)
            cols.append(src ^ ((1 << shift[i]) | (1 << shift[k])))
            vals.append(np.full(src.size, 2.0 * jj))
        v = sp.csr_matrix(
            (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(dim, dim)
        )
        v.sum_duplicates()
        v.eliminate_zeros()
        name = "XXZ chain"
    if not np.any(fields):
        # spin-flip parity Π σx: |s⟩ -> |s̄⟩ (all bits flipped); a longitudinal field breaks it
        conserved["parity"] = sp.csr_matrix((np.ones(dim), states ^ (dim - 1), np.arange(dim + 1, dtype=np.int32)), shape=(dim, dim))
    # Hermitian, finite and parity-commuting by construction: the input checks are skipped (Model._trusted)
    return Model._trusted(h0, v, dims=(2,) * n, name=name, conserved=conserved or None, truncated=False)
