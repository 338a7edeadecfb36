"""Padé approximants of a power series (numerics only).

Robust construction after Gonnet, Güttel & Trefethen, "Robust Padé
approximation via SVD", SIAM Review 55, 101 (2013): the denominator is the
null vector of the Toeplitz system, computed with an SVD so that spurious
pole–zero pairs (Froissart doublets) are removed by reducing the degree.
"""

from __future__ import annotations

import numpy as np

__all__ = ["pade_coefficients", "pade_evaluate", "pade_poles"]


def pade_coefficients(c: np.ndarray, num: int, den: int, *, rtol: float = 1e-13) -> tuple[np.ndarray, np.ndarray]:
    """Numerator ``a`` (L+1,) and denominator ``b`` (M+1,) with ``b[0] = 1``.

    Parameters
    ----------
    c : (K,) array_like
        Taylor coefficients c_0, c_1, ... with ``K >= num + den + 1``.
    num, den : int
        Degrees L and M.
    rtol : float
        Singular values below ``rtol x ‖c‖`` count as zero (degree reduction).

    Returns
    -------
    a, b : ndarray
        Polynomial coefficients in ascending powers; the degrees may be lower
        than asked when the data do not support them.
    """
    c = np.asarray(c)
    if c.size < num + den + 1:
        raise ValueError(f"Padé [{num}/{den}] needs {num + den + 1} coefficients; got {c.size}")
    c = c[: num + den + 1]
    scale = np.max(np.abs(c)) if c.size else 0.0
    if scale == 0:
        return np.zeros(1, dtype=c.dtype), np.ones(1, dtype=c.dtype)
    tol = rtol * np.linalg.norm(c)
    # Gonnet-Güttel-Trefethen: reduce degrees while the Toeplitz matrix is rank deficient
    m, n = den, num
    while True:
        if m == 0:
            a = c[: n + 1].copy()
            b = np.ones(1, dtype=c.dtype)
            break
        # rows n+1 .. n+m of the convolution: sum_j b_j c_{i-j} = 0
        col = np.array([c[i] if 0 <= i < c.size else 0 for i in range(n + 1, n + m + 1)])
        t = np.zeros((m, m + 1), dtype=c.dtype)
        for j in range(m + 1):
            for r in range(m):
                i = n + 1 + r - j
                t[r, j] = c[i] if 0 <= i < c.size else 0
        del col
        u, s, vh = np.linalg.svd(t)
        rho = int(np.sum(s > tol))
        if rho < m:
            m, n = rho, n - (m - rho)
            if n < 0:
                n = 0
            continue
        b = vh[-1].conj()
        # a_i = sum_j b_j c_{i-j}, i = 0..n
        a = np.array([sum(b[j] * c[i - j] for j in range(min(i, m) + 1)) for i in range(n + 1)])
        break
    # normalise b[0] = 1 (b[0] != 0 when the approximant is well defined at 0)
    if abs(b[0]) < 1e-300:
        raise ValueError("Padé approximant has a pole at the origin; the series data are degenerate")
    a, b = a / b[0], b / b[0]
    # trim trailing near-zero coefficients
    a = _trim(a, rtol)
    b = _trim(b, rtol)
    return a, b


def _trim(p: np.ndarray, rtol: float) -> np.ndarray:
    k = p.size
    s = np.max(np.abs(p)) if p.size else 0.0
    while k > 1 and abs(p[k - 1]) <= rtol * s:
        k -= 1
    return p[:k]


def pade_evaluate(a: np.ndarray, b: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Value of ``sum a_i x^i / sum b_j x^j``; vectorised over ``x``."""
    x = np.asarray(x)
    num = np.polynomial.polynomial.polyval(x, a)
    den = np.polynomial.polynomial.polyval(x, b)
    with np.errstate(divide="ignore", invalid="ignore"):
        return num / den


def pade_poles(b: np.ndarray) -> np.ndarray:
    """Roots of the denominator polynomial, nearest the origin first (complex)."""
    b = np.asarray(b)
    if b.size <= 1:
        return np.zeros(0, dtype=complex)
    r = np.polynomial.polynomial.polyroots(b).astype(complex)
    return r[np.argsort(np.abs(r))]
