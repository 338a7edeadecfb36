"""One place for input checks and their messages.

Every public entry point validates its arguments here, once, and echoes what it
received in the error message.  Private helpers trust their inputs.
"""

from __future__ import annotations

import numbers
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np
import scipy.sparse as sp

__all__ = [
    "as_operator",
    "check_square_pair",
    "check_finite",
    "check_hermitian",
    "check_int",
    "check_positive",
    "check_choice",
    "as_couplings",
    "as_coupling",
]


def _is_qobj(x: Any) -> bool:
    mod = type(x).__module__
    return mod.startswith("qutip") and hasattr(x, "full") and hasattr(x, "dims")


def as_operator(x: Any, name: str) -> tuple[np.ndarray | sp.csr_matrix, list | None]:
    """Convert a user matrix (ndarray, array_like, scipy.sparse, qutip.Qobj).

    Returns the matrix (dense ndarray or CSR) and, for a ``Qobj``, its
    subsystem dimensions (``None`` otherwise).
    """
    dims = None
    if _is_qobj(x):
        if not getattr(x, "isoper", True):
            raise ValueError(f"{name} must be an operator; got a Qobj of type {x.type!r}")
        dims = list(x.dims[0])
        try:
            import qutip

            is_dense = isinstance(x.data, qutip.data.Dense)
        except Exception:  # pragma: no cover - very old qutip
            is_dense = True
        x = x.full() if is_dense else x.to("csr").data_as("csr_matrix")
    if sp.issparse(x):
        m = sp.csr_matrix(x)
        if m.ndim != 2:  # pragma: no cover - sparse is always 2-D
            raise ValueError(f"{name} must be a 2-D matrix; got {m.ndim}-D")
        if not np.issubdtype(m.dtype, np.number) or m.dtype == np.bool_:
            raise TypeError(f"{name} must hold numbers; got dtype {m.dtype}")
        m = m.astype(np.result_type(m.dtype, np.float64), copy=False)
        m.sum_duplicates()
        return m, dims
    try:
        a = np.asarray(x)
    except Exception as exc:  # ragged lists and the like
        raise TypeError(f"{name} could not be read as a matrix: {exc}") from None
    if a.dtype == object or not np.issubdtype(a.dtype, np.number) or a.dtype == np.bool_:
        raise TypeError(f"{name} must hold numbers; got dtype {a.dtype}")
    if a.ndim != 2:
        raise ValueError(f"{name} must be a 2-D matrix; got shape {a.shape}")
    a = a.astype(np.result_type(a.dtype, np.float64), copy=False)
    return a, dims


def check_square_pair(h0: Any, v: Any) -> int:
    """Both matrices square, non-empty and of the same shape; return N."""
    for name, m in (("h0", h0), ("v", v)):
        if m.shape[0] != m.shape[1]:
            raise ValueError(f"{name} must be square; got shape {m.shape}")
        if m.shape[0] == 0:
            raise ValueError(f"{name} is empty; got shape {m.shape}")
    if h0.shape != v.shape:
        raise ValueError(f"h0 and v must have the same shape; got {h0.shape} and {v.shape}")
    return int(h0.shape[0])


def check_finite(m: Any, name: str) -> None:
    data = m.data if sp.issparse(m) else m
    bad = ~np.isfinite(data)
    if np.any(bad):
        if sp.issparse(m):
            coo = m.tocoo()
            k = int(np.flatnonzero(~np.isfinite(coo.data))[0])
            i, j, val = int(coo.row[k]), int(coo.col[k]), coo.data[k]
        else:
            i, j = (int(t) for t in np.argwhere(bad)[0])
            val = m[i, j]
        raise ValueError(f"{name} has a non-finite entry: {name}[{i},{j}] = {val}")


def max_abs(m: Any) -> float:
    data = m.data if sp.issparse(m) else m
    return float(np.max(np.abs(data))) if data.size else 0.0


def check_hermitian(m: Any, name: str, rtol: float) -> None:
    """Raise if ``m`` differs from its conjugate transpose by more than ``rtol`` x max|m|."""
    scale = max_abs(m)
    tol = rtol * max(scale, 1e-300)
    if sp.issparse(m):
        d = (m - m.conj().T).tocoo()
        if d.nnz == 0:
            return
        k = int(np.argmax(np.abs(d.data)))
        worst, i, j = float(abs(d.data[k])), int(d.row[k]), int(d.col[k])
    else:
        d = np.abs(m - m.conj().T)
        flat = int(np.argmax(d))
        i, j = divmod(flat, m.shape[1])
        worst = float(d[i, j])
    if worst > tol:
        raise ValueError(
            f"{name} is not Hermitian: |{name}[{i},{j}] - conj({name}[{j},{i}])| = {worst:.3g} "
            f"(allowed {rtol:g} x max|{name}| = {tol:.3g})"
        )


def check_int(x: Any, name: str, *, minimum: int | None = None, maximum: int | None = None) -> int:
    if isinstance(x, bool) or not isinstance(x, numbers.Integral):
        lo = f" >= {minimum}" if minimum is not None else ""
        raise TypeError(f"{name} must be an int{lo}; got {x!r}")
    x = int(x)
    if minimum is not None and x < minimum:
        raise ValueError(f"{name} must be an int >= {minimum}; got {x}")
    if maximum is not None and x > maximum:
        raise ValueError(f"{name} must be an int <= {maximum}; got {x}")
    return x


def check_positive(x: Any, name: str, *, allow_none: bool = False) -> float | None:
    if x is None and allow_none:
        return None
    try:
        f = float(x)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a positive number; got {x!r}") from None
    if not np.isfinite(f) or f <= 0:
        raise ValueError(f"{name} must be a positive finite number; got {x!r}")
    return f


def check_choice(x: Any, name: str, allowed: Iterable[str]) -> str:
    allowed = tuple(allowed)
    if x not in allowed:
        raise ValueError(f"{name} must be one of {', '.join(map(repr, allowed))}; got {x!r}")
    return str(x)


def as_real(x: Any, name: str) -> float:
    """A finite real number (ints accepted; bool, complex and strings refused)."""
    if isinstance(x, (bool, np.bool_, complex, np.complexfloating)):
        raise TypeError(f"{name} must be a real number; got {x!r}")
    try:
        f = float(x)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a real number; got {x!r}") from None
    if not np.isfinite(f):
        raise ValueError(f"{name} must be finite; got {x!r}")
    return f


def as_coupling(x: Any, name: str = "coupling") -> float:
    """A finite real coupling λ."""
    return as_real(x, name)


def as_couplings(x: Any, name: str = "couplings") -> np.ndarray:
    """1-D float array of finite couplings (a scalar becomes shape (1,))."""
    try:
        a = np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be real numbers; got {x!r}") from None
    if a.ndim == 0:
        a = a.reshape(1)
    if a.ndim != 1:
        raise ValueError(f"{name} must be a scalar or 1-D; got shape {a.shape}")
    if a.size == 0:
        raise ValueError(f"{name} is empty")
    if not np.all(np.isfinite(a)):
        k = int(np.flatnonzero(~np.isfinite(a))[0])
        raise ValueError(f"{name} must be finite; {name}[{k}] = {a[k]}")
    return a


def as_sequence(x: Any) -> Sequence:
    """Wrap a scalar or a tuple label into a list; keep lists as they are."""
    if isinstance(x, (list, np.ndarray, range)):
        return list(x)
    return [x]
