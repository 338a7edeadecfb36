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
    "MAX_BASIS_SIZE",
    "MAX_NONZEROS",
    "MAX_ORDER",
    "SERIES_MEMORY_BUDGET",
    "as_operator",
    "check_square_pair",
    "check_finite",
    "check_hermitian",
    "check_int",
    "check_matrix_size",
    "check_order",
    "check_positive",
    "check_choice",
    "as_couplings",
    "as_coupling",
    "as_direction",
]

#: Highest perturbative order accepted anywhere (series, blocks, comparisons,
#: validity boundaries, convergence diagnosis, command line).  The work grows
#: like order² for a Rayleigh–Schrödinger series and faster for a block series
#: (order 1000 of a two-level block already takes tens of seconds), so an order
#: of 10⁶ would run for days: it is refused instead.
MAX_ORDER = 1000

#: Memory allowed for the state coefficients of one series, in bytes (2 GiB):
#: ``(order + 1) x N x 16`` bytes (complex double) must not exceed it.
SERIES_MEMORY_BUDGET = 2 * 2**30

#: Largest basis size N accepted for a model (about 4.2 million states, four
#: times the largest built-in spin chain).
MAX_BASIS_SIZE = 2**22

#: Largest number of stored entries of one sparse matrix (200 million: about
#: 2.4 GB in CSR form).
MAX_NONZEROS = 200_000_000


def _is_qobj(x: Any) -> bool:
    mod = type(x).__module__
    return mod.startswith("qutip") and hasattr(x, "full") and hasattr(x, "dims")


def _gb(n_bytes: float) -> str:
    return f"{n_bytes / 1e9:.3g} GB"


def _shape_of(x: Any) -> tuple | None:
    """The shape an input declares without converting it (None if it has none)."""
    shape = getattr(x, "shape", None)
    if shape is None:
        return None
    try:
        return tuple(int(d) for d in shape)
    except (TypeError, ValueError):
        return None


def check_matrix_size(shape: tuple, name: str, *, dense: bool, max_dense: int | None = None, itemsize: int = 8) -> None:
    """Refuse a matrix shape ptcheck cannot hold (checked before any copy is made).

    At most :data:`MAX_BASIS_SIZE` rows and columns; a dense matrix (``dense``)
    at most ``max_dense``; ``itemsize`` (bytes per entry) is used in the message.
    """
    if len(shape) != 2:
        return  # the caller reports the wrong number of dimensions
    n = max(shape)
    if n > MAX_BASIS_SIZE:
        raise ValueError(
            f"{name} has shape {shape}: a basis of more than {MAX_BASIS_SIZE} states is beyond ptcheck's limit; "
            "reduce the truncation or restrict the model to a symmetry sector"
        )
    if dense and max_dense is not None and n > max_dense:
        raise ValueError(
            f"{name} is a dense {shape[0]} x {shape[1]} matrix ({_gb(float(itemsize) * shape[0] * shape[1])}): dense "
            f"matrices are accepted up to N = {max_dense}. Give it as a sparse matrix instead (scipy.sparse, e.g. "
            "scipy.sparse.csr_array of its nonzero entries; a sparse qutip.Qobj; or a file written with "
            "scipy.sparse.save_npz), with h0 diagonal"
        )


def as_operator(
    x: Any, name: str, *, max_dense: int | None = None
) -> tuple[np.ndarray | sp.csr_matrix, list | None]:
    """Convert a user matrix (ndarray, array_like, scipy.sparse, qutip.Qobj).

    The size is checked before anything is converted or copied: at most
    :data:`MAX_BASIS_SIZE` rows and columns, at most :data:`MAX_NONZEROS`
    stored entries for a sparse matrix, and at most ``max_dense`` rows and
    columns for a dense one.

    Parameters
    ----------
    x : (N, N) array_like, scipy.sparse matrix or qutip.Qobj
    name : str
        Name used in error messages (``"h0"``, ``"v"``).
    max_dense : int, optional
        Largest N accepted for a dense matrix (no limit when None).

    Returns
    -------
    matrix : (N, N) float or complex ndarray, or CSR matrix
    dims : list of int or None
        A ``Qobj``'s subsystem dimensions (``None`` otherwise).
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
        shape = _shape_of(x)
        if shape is not None:
            check_matrix_size(shape, name, dense=is_dense, max_dense=max_dense)
            if not is_dense and _qobj_nnz(x) > MAX_NONZEROS:
                raise ValueError(f"{name} has more than {MAX_NONZEROS} stored entries; ptcheck cannot hold it")
        x = x.full() if is_dense else x.to("csr").data_as("csr_matrix")
    if sp.issparse(x):
        if x.ndim != 2:  # pragma: no cover - sparse is always 2-D
            raise ValueError(f"{name} must be a 2-D matrix; got {x.ndim}-D")
        check_matrix_size(tuple(x.shape), name, dense=False, max_dense=max_dense)
        if x.nnz > MAX_NONZEROS:
            raise ValueError(
                f"{name} has {x.nnz} stored entries (shape {x.shape}); ptcheck accepts at most {MAX_NONZEROS}"
            )
        if not np.issubdtype(x.dtype, np.number) or x.dtype == np.bool_:
            raise TypeError(f"{name} must hold numbers; got dtype {x.dtype}")
        m = sp.csr_matrix(x)
        m = m.astype(np.result_type(m.dtype, np.float64), copy=False)
        m.sum_duplicates()
        return m, dims
    shape = _shape_of(x)
    if shape is not None:
        check_matrix_size(shape, name, dense=True, max_dense=max_dense, itemsize=_itemsize(x))
    try:
        a = np.asarray(x)
    except Exception as exc:  # ragged lists and the like
        raise TypeError(f"{name} could not be read as a matrix: {exc}") from None
    if a.dtype == object or not np.issubdtype(a.dtype, np.number) or a.dtype == np.bool_:
        raise TypeError(f"{name} must hold numbers; got dtype {a.dtype}")
    if a.ndim != 2:
        raise ValueError(f"{name} must be a 2-D matrix; got shape {a.shape}")
    check_matrix_size(a.shape, name, dense=True, max_dense=max_dense, itemsize=a.dtype.itemsize)
    a = a.astype(np.result_type(a.dtype, np.float64), copy=False)
    return a, dims


def _itemsize(x: Any) -> int:
    try:
        return int(np.dtype(x.dtype).itemsize)
    except Exception:  # no numpy dtype: assume float64
        return 8


def _qobj_nnz(x: Any) -> int:
    try:
        return int(x.data.num_elements if hasattr(x.data, "num_elements") else x.data.nnz)
    except Exception:  # unknown data layer: the CSR conversion will tell
        return 0


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
    """Largest absolute entry (stored entries of a sparse matrix); 0 when there is none."""
    data = m.data if sp.issparse(m) else np.asarray(m)
    if data.size == 0:
        return 0.0
    if np.iscomplexobj(data):
        return float(np.max(np.abs(data)))
    return float(max(np.max(data), -np.min(data)))  # no array of absolute values


def check_hermitian(m: Any, name: str, rtol: float, *, scale: float = 0.0) -> None:
    """Raise unless every entry of ``m`` matches the conjugate of its mirror entry.

    Each pair is judged on its own scale::

        |m[i,j] - conj(m[j,i])| <= rtol * max(|m[i,j]|, |m[j,i]|) + N * eps * S

    where ``eps`` is the float64 machine epsilon and ``S = max(max|m|, scale)``:
    the last term accepts the rounding noise of a matrix computed in floating
    point (pass the scale of the other operator of the model as ``scale``, so
    that noise on the scale of H0 is accepted in V).  A small entry is not
    excused by a large one elsewhere: ``v[1,0] = 0.2`` with ``v[0,1] = 0.1`` is
    refused even next to an entry ``1e10``.
    """
    n = int(m.shape[0])
    big = max(max_abs(m), float(scale))
    floor = n * np.finfo(float).eps * big
    if sp.issparse(m) and _hermitian_same_pattern(m, rtol, floor):
        return
    if sp.issparse(m):
        d = abs(m - m.conj().T).tocsr()
        if d.nnz == 0:
            return
        a = abs(m)
        excess = (d - rtol * a.maximum(a.T)).tocoo()
        if excess.nnz == 0:
            return
        k = int(np.argmax(excess.data))
        worst, i, j = float(excess.data[k]), int(excess.row[k]), int(excess.col[k])
        if worst <= floor:
            return
        aij, aji = m[i, j], m[j, i]
    else:
        a = np.abs(m)
        excess = np.abs(m - m.conj().T) - rtol * np.maximum(a, a.T)
        flat = int(np.argmax(excess))
        i, j = divmod(flat, m.shape[1])
        if float(excess[i, j]) <= floor:
            return
        aij, aji = m[i, j], m[j, i]
    diff = abs(aij - np.conj(aji))
    allowed = rtol * max(abs(aij), abs(aji)) + floor
    raise ValueError(
        f"{name} is not Hermitian: |{name}[{i},{j}] - conj({name}[{j},{i}])| = {diff:.3g} with "
        f"{name}[{i},{j}] = {_num(aij)} and {name}[{j},{i}] = {_num(aji)} (allowed {allowed:.3g}: "
        f"hermitian_rtol {rtol:g} of the larger of the two, plus rounding noise)"
    )


def _hermitian_same_pattern(m: Any, rtol: float, floor: float) -> bool:
    """Fast O(nnz) pass of :func:`check_hermitian` for a sparse matrix whose pattern is symmetric.

    One transpose (a counting sort, no sum of matrices) and an entrywise
    comparison of the stored values; returns False when the patterns differ or
    some pair fails, so that the general path finds and reports the worst pair.
    """
    a = m.tocsr() if m.format != "csr" else m
    if not a.has_sorted_indices or not a.has_canonical_format:
        return False
    t = a.T.tocsr()  # counting sort: sorted indices, the same number of entries
    if t.nnz != a.nnz or not (np.array_equal(t.indptr, a.indptr) and np.array_equal(t.indices, a.indices)):
        return False
    x, y = a.data, (t.data if not np.iscomplexobj(t.data) else np.conj(t.data))
    if np.array_equal(x, y):  # exactly Hermitian (the usual case): one pass, no temporaries
        return True
    return bool(np.all(np.abs(x - y) <= rtol * np.maximum(np.abs(x), np.abs(y)) + floor))


def _num(x: Any) -> str:
    x = complex(x)
    return f"{x.real:.6g}" if x.imag == 0 else f"{x:.6g}"


def check_optional_flag(x: Any, name: str) -> bool | None:
    """True, False or None (unknown); anything else (0/1, strings) is refused."""
    if x is None:
        return None
    if not isinstance(x, (bool, np.bool_)):
        raise TypeError(f"{name} must be True, False or None; got {x!r}")
    return bool(x)


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


def check_order(order: Any, *, n: int | None = None, minimum: int = 0, name: str = "order") -> int:
    """A perturbative order: an int from ``minimum`` to :data:`MAX_ORDER` (1000).

    With the basis size ``n`` given, the state coefficients of a series to
    this order, ``(order + 1) x n x 16`` bytes, must also fit in
    :data:`SERIES_MEMORY_BUDGET` (2 GiB).  Both limits are checked before any
    work starts, so that a mistyped order fails at once instead of running for
    hours or exhausting the memory.
    """
    k = check_int(order, name, minimum=minimum)
    if k > MAX_ORDER:
        raise ValueError(
            f"{name} {k} is beyond the limit of {MAX_ORDER} orders (the work grows like the order squared); "
            f"ask for at most {MAX_ORDER}"
        )
    if n is not None:
        need = (k + 1) * int(n) * 16
        if need > SERIES_MEMORY_BUDGET:
            fit = max(SERIES_MEMORY_BUDGET // (16 * int(n)) - 1, 0)
            raise ValueError(
                f"{name} {k} on a basis of N = {n} states needs {_gb(need)} for the series coefficients, more than "
                f"the budget of {_gb(SERIES_MEMORY_BUDGET)}; ask for at most order {fit} on this basis"
            )
    return k


def check_positive(x: Any, name: str, *, allow_none: bool = False) -> float | None:
    """A finite real number > 0 (bool, complex and strings refused)."""
    if x is None and allow_none:
        return None
    if isinstance(x, (bool, np.bool_, str, bytes, complex, np.complexfloating)):
        raise TypeError(f"{name} must be a positive number; got {x!r}")
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
    if isinstance(x, (bool, np.bool_, str, bytes)) or getattr(x, "dtype", None) == np.bool_:
        raise TypeError(f"{name} must be real numbers; got {x!r}")
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


def as_direction(x: Any, m: int, names: Sequence[str] = ()) -> np.ndarray:
    """A direction in the space of m couplings: m real finite numbers, not all zero; shape (m,)."""
    shown = repr(x)
    shown = shown if len(shown) <= 80 else shown[:77] + "..."
    what = f"({', '.join(names)})" if len(names) == m else f"{m} couplings"
    try:
        d = np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"direction must be {m} real numbers, one per coupling {what}; got {shown}") from None
    if d.shape != (m,):
        raise ValueError(f"direction must be {m} numbers, one per coupling {what}; got shape {d.shape}: {shown}")
    if not np.all(np.isfinite(d)):
        raise ValueError(f"direction must be finite; got {shown}")
    if not np.any(d != 0):
        raise ValueError(f"direction must not be zero (it sets the ray t·d from the origin); got {shown}")
    return d
