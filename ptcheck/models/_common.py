"""Shared pieces of the model builders: parameter checks, ladder operators, storage.

Private module; the builders validate their keyword arguments here so every
message has the same shape (``"<name> must be ...; got <value>"``).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import scipy.sparse as sp

from .. import _validation as val

#: Builders with a truncation parameter return scipy.sparse matrices when the
#: basis is larger than this (``sparse=None``); dense ndarrays otherwise.
SPARSE_AUTO_SIZE = 512

#: Largest basis a built-in builder makes (2^20 ≈ 10^6 states, as the largest
#: spin chain): each size parameter and the product of all of them are capped,
#: so that a mistyped size fails at once instead of exhausting the memory.
MAX_STATES = 2**20


def real(x: Any, name: str) -> float:
    """A finite real number (ints accepted; bool, complex and strings refused)."""
    return val.as_real(x, name)


def positive(x: Any, name: str) -> float:
    """A finite real number > 0."""
    f = real(x, name)
    if f <= 0:
        raise ValueError(f"{name} must be > 0; got {x!r}")
    return f


def nonnegative(x: Any, name: str) -> float:
    """A finite real number >= 0."""
    f = real(x, name)
    if f < 0:
        raise ValueError(f"{name} must be >= 0; got {x!r}")
    return f


def size(x: Any, name: str, minimum: int, maximum: int = MAX_STATES) -> int:
    """A truncation size or count: an int from ``minimum`` to ``maximum``.

    The default cap is :data:`MAX_STATES`; the message names the parameter and
    the cap.
    """
    k = val.check_int(x, name, minimum=minimum)
    if k > maximum:
        raise ValueError(f"{name} must be an int <= {maximum}; got {k} (the size cap of this built-in model)")
    return k


def basis_size(**sizes: int) -> int:
    """Product of the subsystem sizes, refused above :data:`MAX_STATES` before anything is built."""
    total = 1
    for k in sizes.values():
        total *= int(k)
    if total > MAX_STATES:
        what = " x ".join(f"{name} {k}" for name, k in sizes.items())
        raise ValueError(
            f"the basis would have {total} states ({what}), above the cap of {MAX_STATES} states of the "
            "built-in models; reduce one of them"
        )
    return total


def flag(x: Any, name: str) -> bool:
    """A bool (not 0/1, not a string)."""
    if not isinstance(x, (bool, np.bool_)):
        raise TypeError(f"{name} must be True or False; got {x!r}")
    return bool(x)


def sparse_choice(x: Any) -> bool | None:
    """The ``sparse`` option: True, False or None (automatic)."""
    if x is None:
        return None
    return flag(x, "sparse")


def lowering(n: int) -> sp.csr_matrix:
    """Lowering operator ``a|k⟩ = √k |k−1⟩`` on levels 0..n−1, shape (n, n), CSR."""
    return sp.diags(np.sqrt(np.arange(1, n, dtype=float)), 1, shape=(n, n), format="csr")


def finish(h0: Any, v: Any, sparse: bool | None) -> tuple[Any, Any]:
    """Return (h0, v) as CSR matrices or dense ndarrays.

    ``sparse=None`` chooses CSR when the basis is larger than
    :data:`SPARSE_AUTO_SIZE`.
    """
    n = h0.shape[0]
    use_sparse = (n > SPARSE_AUTO_SIZE) if sparse is None else sparse
    if use_sparse:
        h0s, vs = sp.csr_matrix(h0), sp.csr_matrix(v)
        h0s.eliminate_zeros()
        vs.eliminate_zeros()
        return h0s, vs
    return (h0.toarray() if sp.issparse(h0) else np.asarray(h0)), (v.toarray() if sp.issparse(v) else np.asarray(v))


def physical(scale: float, name: str) -> dict:
    """``Model`` keywords naming the physical coupling at λ = 1 (none when it is zero): display only."""
    return {"coupling_scale": scale, "coupling_name": name} if scale != 0 else {}
