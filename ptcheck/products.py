"""Models built from subsystems: ``H0 = Σ_i h_i`` on a tensor product, labelled levels.

:func:`product_model` takes one Hamiltonian per subsystem (a qubit, a
resonator mode, a transmon ladder, ...) and a list of coupling terms, and
returns a :class:`~ptcheck.model.Model` whose levels carry quantum-number
labels ``(j1, j2, ...)``.  Each subsystem Hamiltonian is diagonalised first, so
``H0`` is diagonal in the product of the subsystem eigenbases and ``j_i`` is
the eigen-rank of subsystem ``i`` (0 = its lowest level).  ``V`` is expressed
in the same product eigenbasis.  Level ``(1, 0)`` is then "subsystem 0 in its
first excited state, subsystem 1 in its ground state" -- the unperturbed
product state -- and can be used anywhere a level is accepted.

Storage: the product basis grows fast, so ``H0`` and ``V`` are built with
``scipy.sparse`` Kronecker products and handed to the model as CSR matrices
when the basis exceeds :data:`SPARSE_AUTO_SIZE` (or when ``sparse=True``).
"""

from __future__ import annotations

import numbers
from collections.abc import Mapping, Sequence
from functools import reduce
from typing import Any

import numpy as np
import scipy.sparse as sp

from . import _validation as val
from .model import Model

__all__ = ["product_model", "SPARSE_AUTO_SIZE"]

#: ``product_model(..., sparse=None)`` returns a model with sparse matrices
#: when the product basis has more states than this.
SPARSE_AUTO_SIZE = 512


def product_model(
    parts: Sequence[Any],
    couplings: Sequence[Any] = (),
    *,
    name: str | None = None,
    sparse: bool | None = None,
    hermitian_rtol: float = 1e-10,
    degeneracy_tol: float | None = None,
) -> Model:
    """Build ``H(λ) = Σ_i h_i + λ V`` on a product of subsystems, with labelled levels.

    Parameters
    ----------
    parts : sequence of (d_i, d_i) array_like, scipy.sparse matrix or qutip.Qobj
        One Hermitian Hamiltonian per subsystem, in any basis of that
        subsystem.  Each is diagonalised (ascending eigenvalues; a part that is
        already diagonal keeps its basis order), and the subsystem's levels are
        numbered ``j_i = 0 … d_i − 1`` by eigen-rank.  Energies in the user's
        units (ħ = 1).
    couplings : sequence of terms, default ()
        ``V = Σ_terms``; each term is either

        - ``(coeff, ops)``: a number ``coeff`` (real or complex) and ``ops``, a
          sequence with one entry per subsystem -- a ``(d_i, d_i)`` operator
          in the same basis as ``parts[i]``, or ``None`` for the identity --
          or a mapping ``{i: op_i}`` (missing subsystems: identity).  The term
          is ``coeff · op_0 ⊗ op_1 ⊗ …``.
        - an ``(N, N)`` operator (ndarray, scipy.sparse or Qobj) on the whole
          product space, in the product of the bases the parts were given in,
          ``N = Π d_i``.

        Single terms need not be Hermitian (``g σ+ a`` and ``g σ− a†`` may be
        given separately); their sum must be.
    name : str, optional
        Model name (default ``"product model (d_0 ⊗ d_1 ⊗ …)"``).
    sparse : bool or None, default None
        Hand CSR matrices to the model (``None``: only when ``N`` exceeds
        :data:`SPARSE_AUTO_SIZE`).
    hermitian_rtol : float, default 1e-10
        Largest allowed ``|A − A^H|`` entry relative to ``max|A|`` (parts and
        the summed ``V``).
    degeneracy_tol : float, optional
        Passed to :class:`~ptcheck.model.Model`.

    Returns
    -------
    Model
        ``dims = (d_0, d_1, …)``; level labels are tuples ``(j_0, j_1, …)``
        of subsystem eigen-ranks (printed ``|j_0,j_1⟩``).  The model's "user
        basis" (:meth:`Model.to_user_basis`) is the product of the subsystem
        eigenbases.  A label in an exactly degenerate group of ``H0`` that
        ``V`` mixes is ambiguous (:class:`~ptcheck.errors.AmbiguousLevelError`
        when used); address those levels by energy rank.

    Raises
    ------
    ValueError, TypeError
        A part is not a square Hermitian matrix of numbers; a coupling
        operator's shape does not match its subsystem; the terms do not add
        up to a Hermitian ``V``.

    Notes
    -----
    If a part has exactly degenerate eigenvalues and is not diagonal, its
    eigenbasis inside the degenerate subspace is whatever the dense
    eigensolver returns; pass that part in a basis where it is diagonal to
    control which states carry which label.

    Examples
    --------
    A qubit (ω_q = 5) coupled to a resonator (ω_r = 6, 4 Fock states) by
    ``g (σ+ a + σ− a†)``, g = 0.1:

    >>> import numpy as np
    >>> hq = np.diag([0.0, 5.0])
    >>> a = np.diag(np.sqrt([1.0, 2.0, 3.0]), 1)
    >>> hr = 6.0 * a.T @ a
    >>> sp_ = np.array([[0.0, 0.0], [1.0, 0.0]])            # σ+ = |1⟩⟨0|
    >>> m = product_model([hq, hr], [(0.1, [sp_, a]), (0.1, [sp_.T, a.T])])
    >>> m.dims, m.label(1), m.level_index((0, 1))
    ((2, 4), '|1,0⟩', 2)
    """
    if isinstance(parts, np.ndarray) or sp.issparse(parts) or val._is_qobj(parts) or not isinstance(parts, Sequence):
        raise TypeError(
            f"parts must be a sequence of subsystem Hamiltonians, e.g. [h_qubit, h_resonator]; got {type(parts).__name__}"
        )
    if len(parts) == 0:
        raise ValueError("parts is empty; give one Hamiltonian per subsystem")
    hermitian_rtol = float(val.check_positive(hermitian_rtol, "hermitian_rtol"))
    if sparse is not None and not isinstance(sparse, (bool, np.bool_)):
        raise TypeError(f"sparse must be True, False or None; got {sparse!r}")

    energies: list[np.ndarray] = []
    bases: list[np.ndarray] = []
    for i, h in enumerate(parts):
        nm = f"parts[{i}]"
        m, _ = _as_operator(h, nm)
        if m.shape[0] != m.shape[1]:
            raise ValueError(f"{nm} must be square; got shape {m.shape}")
        if m.shape[0] == 0:
            raise ValueError(f"{nm} is empty; got shape {m.shape}")
        val.check_finite(m, nm)
        val.check_hermitian(m, nm, hermitian_rtol)
        e, u = _diagonalise(m)
        energies.append(e)
        bases.append(u)
    dims = tuple(int(e.size) for e in energies)
    n = int(np.prod(dims))

    # H0: diagonal, Σ_i e_i broadcast over the product (row-major: the last subsystem runs fastest)
    total = reduce(np.add.outer, energies).reshape(n) if len(energies) > 1 else energies[0]
    terms = _coupling_terms(couplings, dims, bases, n)
    v = sp.csr_matrix((n, n), dtype=float) if not terms else reduce(lambda a, b: a + b, terms).tocsr()
    v.sum_duplicates()
    if v.nnz:
        _check_sum_hermitian(v, hermitian_rtol)

    use_sparse = (n > SPARSE_AUTO_SIZE) if sparse is None else bool(sparse)
    if use_sparse:
        h0 = sp.diags(total, format="csr")
    else:
        h0 = np.diag(total)
        v = v.toarray()
    if name is None:
        name = "product model (" + " ⊗ ".join(str(d) for d in dims) + ")"
    return Model(h0, v, dims=dims, name=name, hermitian_rtol=hermitian_rtol, degeneracy_tol=degeneracy_tol)


# ---------------------------------------------------------------------- helpers
def _as_operator(x: Any, name: str) -> tuple[Any, list | None]:
    """``_validation.as_operator`` after turning any Qobj (Dense, CSR, Dia, ...) into CSR data."""
    if val._is_qobj(x) and getattr(x, "isoper", False):
        dims = list(x.dims[0])
        m, _ = val.as_operator(x.to("csr").data_as("csr_matrix"), name)
        return m, dims
    return val.as_operator(x, name)


def _diagonalise(m: Any) -> tuple[np.ndarray, np.ndarray]:
    """Ascending eigenvalues and eigenvectors (columns) of one subsystem Hamiltonian."""
    d = m.toarray() if sp.issparse(m) else np.asarray(m)
    off = d[~np.eye(d.shape[0], dtype=bool)]
    if not np.any(off != 0):
        diag = np.real(np.diag(d)).astype(float)
        perm = np.argsort(diag, kind="stable")
        return diag[perm], np.eye(d.shape[0])[:, perm]
    e, u = np.linalg.eigh(d)
    # fix the phase of each eigenvector (largest component real and positive) so labels are reproducible
    k = np.argmax(np.abs(u), axis=0)
    ph = u[k, np.arange(u.shape[1])]
    u = u * (np.abs(ph) / ph)[None, :]
    if not np.iscomplexobj(d):
        u = np.real(u)
    return e.astype(float), u


def _is_number(x: Any) -> bool:
    return isinstance(x, numbers.Number) and not isinstance(x, (bool, np.bool_))


def _coupling_terms(couplings: Any, dims: tuple[int, ...], bases: list[np.ndarray], n: int) -> list[sp.csr_matrix]:
    """Each coupling term as an (N, N) CSR matrix in the product eigenbasis."""
    if isinstance(couplings, np.ndarray) or sp.issparse(couplings) or val._is_qobj(couplings):
        raise TypeError(
            "couplings must be a list of terms, e.g. [(g, [op_0, op_1])] or [V_full]; got a single "
            f"{type(couplings).__name__} (wrap it in a list)"
        )
    if not isinstance(couplings, Sequence):
        raise TypeError(f"couplings must be a list of terms (coeff, ops) or (N, N) operators; got {type(couplings).__name__}")
    full_basis = None
    out = []
    for t, term in enumerate(couplings):
        where = f"couplings[{t}]"
        if isinstance(term, (tuple, list)) and len(term) == 2 and _is_number(term[0]):
            coeff, ops = term
            if not np.isfinite(coeff):
                raise ValueError(f"{where}: the coefficient must be finite; got {coeff!r}")
            factors = _term_factors(ops, dims, bases, where)
            mat = reduce(lambda a, b: sp.kron(a, b, format="csr"), factors)
            out.append(sp.csr_matrix(coeff * mat))
            continue
        if isinstance(term, np.ndarray) or sp.issparse(term) or val._is_qobj(term):
            m, qdims = _as_operator(term, where)
            if m.shape != (n, n):
                raise ValueError(
                    f"{where} is a full operator of shape {m.shape}, but the product space of dims {dims} has "
                    f"N = {n} states (expected ({n}, {n}))"
                )
            if qdims is not None and len(qdims) > 1 and tuple(int(q) for q in qdims) != dims:
                raise ValueError(f"{where} is a Qobj with dims {list(qdims)}, but the parts have dims {list(dims)}")
            val.check_finite(m, where)
            if full_basis is None:
                full_basis = reduce(lambda a, b: sp.kron(a, b, format="csr"), [sp.csr_matrix(u) for u in bases])
            out.append(sp.csr_matrix(full_basis.conj().T @ sp.csr_matrix(m) @ full_basis))
            continue
        raise TypeError(
            f"{where} must be (coeff, ops) -- a number and one operator (or None) per subsystem -- or an "
            f"({n}, {n}) operator; got {_describe(term)}"
        )
    return out


def _term_factors(ops: Any, dims: tuple[int, ...], bases: list[np.ndarray], where: str) -> list[sp.csr_matrix]:
    if isinstance(ops, Mapping):
        bad = [k for k in ops if not (isinstance(k, (int, np.integer)) and not isinstance(k, bool) and 0 <= int(k) < len(dims))]
        if bad:
            raise ValueError(f"{where}: subsystem indices must be ints in 0..{len(dims) - 1}; got {bad[0]!r}")
        seq = [ops.get(i, ops.get(np.int64(i))) for i in range(len(dims))]
    elif isinstance(ops, (tuple, list)):
        if len(ops) != len(dims):
            raise ValueError(
                f"{where}: ops has {len(ops)} entries but there are {len(dims)} subsystems (dims {list(dims)}); "
                "give one operator (or None for the identity) per subsystem"
            )
        seq = list(ops)
    else:
        raise TypeError(f"{where}: ops must be a list with one operator (or None) per subsystem, or a dict {{index: op}}; got {_describe(ops)}")
    out = []
    for i, (op, d, u) in enumerate(zip(seq, dims, bases)):
        if op is None:
            out.append(sp.identity(d, format="csr"))
            continue
        nm = f"{where} operator for subsystem {i}"
        m, _ = _as_operator(op, nm)
        if m.shape != (d, d):
            raise ValueError(f"{nm} has shape {m.shape}, but subsystem {i} has dimension {d} (expected ({d}, {d}))")
        val.check_finite(m, nm)
        md = m.toarray() if sp.issparse(m) else m
        rot = u.conj().T @ md @ u
        out.append(sp.csr_matrix(_clean(rot)))
    return out


def _clean(a: np.ndarray) -> np.ndarray:
    """Zero the rounding dust a basis change leaves where an entry should vanish."""
    tol = 1e-14 * max(float(np.max(np.abs(a), initial=0.0)), 1e-300)
    return np.where(np.abs(a) > tol, a, 0)


def _check_sum_hermitian(v: sp.csr_matrix, rtol: float) -> None:
    try:
        val.check_hermitian(v, "V", rtol)
    except ValueError as exc:
        raise ValueError(
            f"the coupling terms do not add up to a Hermitian V (in the product eigenbasis): {exc}. "
            "Add the Hermitian conjugate of each non-Hermitian term (e.g. g σ− a† next to g σ+ a)."
        ) from None


def _describe(x: Any) -> str:
    if isinstance(x, np.ndarray):
        return f"an array of shape {x.shape}"
    r = repr(x)
    return r if len(r) <= 60 else r[:57] + "..."
