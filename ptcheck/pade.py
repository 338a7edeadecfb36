"""Padé approximants of a power series (numerics only).

Robust construction after Gonnet, Güttel & Trefethen, "Robust Padé
approximation via SVD", SIAM Review 55, 101 (2013) (their Algorithm 2):

* the series variable is first rescaled, ``x = s t``, so that the rescaled
  coefficients are of comparable size (the approximant itself does not depend
  on ``s``; only the rank decisions below do);
* the denominator ``b`` is a null vector of the ``M x (M + 1)`` Toeplitz block
  of the coefficients, computed with an SVD; while that block is
  rank-deficient (singular values below ``rtol x ‖c‖``) the degrees are
  reduced, ``M -> rank``, ``L -> L - (M - rank)``.  This is what removes
  spurious pole–zero pairs (Froissart doublets) and makes a terminating series
  come back as the polynomial it is;
* common factors ``x^j`` of numerator and denominator are cancelled and
  negligible trailing coefficients trimmed.

The functions never raise on singular Toeplitz systems: the degree reduction
always ends at a valid approximant (at worst the truncated Taylor polynomial,
``M = 0``).
"""

from __future__ import annotations

import numpy as np
import scipy.linalg as sla

__all__ = ["pade_coefficients", "pade_evaluate", "pade_poles", "pade_zeros", "froissart_mask", "series_scale"]

_SQRT_EPS = float(np.sqrt(np.finfo(float).eps))


def series_scale(c: np.ndarray) -> float:
    """A variable scale ``s`` that balances the Taylor coefficients.

    ``s = min_k (ref / |c_k|)^(1/k)`` over the nonzero ``c_k`` (k >= 1), with
    ``ref`` the size of the leading coefficient (``|c_0|``, or the first nonzero
    one).  In the variable ``t = x / s`` no coefficient exceeds ``ref``.  For a
    series with radius of convergence R, ``s`` is roughly R; for a factorially
    growing series it shrinks with the number of coefficients.  Tiny round-off
    tails are not amplified (the minimum over k keeps ``s`` small).

    Returns 1.0 when there is nothing to balance (fewer than two nonzero
    coefficients).
    """
    c = np.asarray(c)
    mag = np.abs(c)
    nz = np.flatnonzero(mag > 0)
    if nz.size < 2:
        return 1.0
    ref = mag[nz[0]]
    k = np.arange(c.size)
    sel = nz[nz > nz[0]]
    with np.errstate(over="ignore", divide="ignore"):
        cand = (ref / mag[sel]) ** (1.0 / (k[sel] - nz[0]))
    cand = cand[np.isfinite(cand) & (cand > 0)]
    if cand.size == 0:
        return 1.0
    s = float(np.min(cand))
    return s if np.isfinite(s) and s > 0 else 1.0


def pade_coefficients(
    c: np.ndarray, num: int, den: int, *, rtol: float = 1e-13, scale: float | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Numerator ``a`` (≤ L+1,) and denominator ``b`` (≤ M+1,) with ``b[0] = 1``.

    Parameters
    ----------
    c : (K,) array_like
        Taylor coefficients c_0, c_1, ... with ``K >= num + den + 1``.
    num, den : int
        Degrees L and M asked for.
    rtol : float, default 1e-13
        Singular values below ``rtol x ‖c‖`` (rescaled coefficients) count as
        zero: the degrees are reduced until the Toeplitz block has full rank.
    scale : float, optional
        Variable scale ``s`` (see :func:`series_scale`, the default).

    Returns
    -------
    a, b : ndarray
        Polynomial coefficients in ascending powers of the *original*
        variable; the degrees may be lower than asked when the data do not
        support them (e.g. a terminating series gives ``b = [1]``).

    Examples
    --------
    >>> a, b = pade_coefficients([1.0, 1.0, 1.0, 1.0], 1, 1)   # 1/(1 - x)
    >>> np.round(a, 12), np.round(b, 12)
    (array([1.]), array([ 1., -1.]))
    """
    c = np.asarray(c)
    if c.ndim != 1:
        raise ValueError(f"Padé coefficients must be a 1-D array; got shape {c.shape}")
    if num < 0 or den < 0:
        raise ValueError(f"Padé degrees must be >= 0; got [{num}/{den}]")
    if c.size < num + den + 1:
        raise ValueError(f"Padé [{num}/{den}] needs {num + den + 1} coefficients; got {c.size}")
    c = c[: num + den + 1]
    dtype = np.result_type(c.dtype, np.float64)
    c = c.astype(dtype)
    if not np.all(np.isfinite(c)):
        raise ValueError("Padé coefficients must be finite")
    if np.max(np.abs(c), initial=0.0) == 0:
        return np.zeros(1, dtype=dtype), np.ones(1, dtype=dtype)
    s = series_scale(c) if scale is None else float(scale)
    if not (np.isfinite(s) and s > 0):
        raise ValueError(f"Padé scale must be a positive finite number; got {scale!r}")
    powers = s ** np.arange(c.size, dtype=float)
    cs = c * powers
    a, b = _ggt(cs, num, den, rtol)
    # back to the original variable x = s t
    a = a / s ** np.arange(a.size, dtype=float)
    b = b / s ** np.arange(b.size, dtype=float)
    return a, b


def _ggt(c: np.ndarray, m: int, n: int, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """Gonnet–Güttel–Trefethen Algorithm 2 (numerator degree m, denominator n)."""
    ts = tol * np.linalg.norm(c)
    if np.max(np.abs(c[: m + 1])) <= tol * np.max(np.abs(c)):
        # numerator data vanish to working accuracy: r = 0
        return np.zeros(1, dtype=c.dtype), np.ones(1, dtype=c.dtype)
    row = np.zeros(n + 1, dtype=c.dtype)
    row[0] = c[0]
    while True:
        if n == 0:
            a = c[: m + 1].copy()
            b = np.ones(1, dtype=c.dtype)
            break
        z = sla.toeplitz(c[: m + n + 1], row[: n + 1])
        cmat = z[m + 1 : m + n + 1, :]
        sv = np.linalg.svd(cmat, compute_uv=False)
        rho = int(np.sum(sv > ts))
        if rho == n:
            _, _, vh = np.linalg.svd(cmat)
            b = vh[-1].conj()
            # reweighting step of GGT: better relative accuracy of small b_j
            d = np.abs(b) + _SQRT_EPS
            q, _ = np.linalg.qr((cmat * d[None, :]).T, mode="complete")
            b = d * q[:, n]
            b = b / np.linalg.norm(b)
            a = z[: m + 1, : n + 1] @ b
            # cancel a common factor x^lam (leading zeros of b)
            lead = np.flatnonzero(np.abs(b) > tol)
            lam = int(lead[0]) if lead.size else 0
            b, a = b[lam:], a[lam:]
            b = b[: int(np.flatnonzero(np.abs(b) > tol)[-1]) + 1]
            break
        m, n = m - (n - rho), rho
        if m < 0:
            # the data support no approximant beyond the constant term
            m = 0
    keep = np.flatnonzero(np.abs(a) > ts)
    a = a[: int(keep[-1]) + 1] if keep.size else np.zeros(1, dtype=c.dtype)
    if not np.all(np.isfinite(a)) or a.size == 0:
        a = np.zeros(1, dtype=c.dtype)
    return a / b[0], b / b[0]


def pade_evaluate(a: np.ndarray, b: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Value of ``sum a_i x^i / sum b_j x^j``; vectorised over ``x``.

    Returns ``inf``/``nan`` exactly at poles (no warning).
    """
    x = np.asarray(x)
    num = np.polynomial.polynomial.polyval(x, a)
    den = np.polynomial.polynomial.polyval(x, b)
    with np.errstate(divide="ignore", invalid="ignore"):
        return num / den


def pade_poles(b: np.ndarray) -> np.ndarray:
    """Roots of the denominator polynomial, nearest the origin first (complex)."""
    return _roots(b)


def pade_zeros(a: np.ndarray) -> np.ndarray:
    """Roots of the numerator polynomial, nearest the origin first (complex)."""
    return _roots(a)


def _roots(p: np.ndarray) -> np.ndarray:
    p = np.asarray(p)
    if p.size <= 1 or not np.any(p[1:] != 0):
        return np.zeros(0, dtype=complex)
    k = int(np.flatnonzero(p != 0)[-1])
    r = np.polynomial.polynomial.polyroots(p[: k + 1]).astype(complex)
    return r[np.argsort(np.abs(r), kind="stable")]


def froissart_mask(a: np.ndarray, b: np.ndarray, *, rtol: float = 1e-6) -> np.ndarray:
    """Which poles of ``a/b`` are Froissart doublets (spurious pole–zero pairs).

    A pole ``p`` counts as spurious when a zero of the numerator lies within
    ``rtol x max(|p|, 1e-300)`` of it (default: a millionth of its distance
    from the origin): the pair nearly cancels and carries no information about
    the function (Gonnet, Güttel & Trefethen 2013, §1).  The tolerance is
    tight on purpose: along a branch cut genuine poles and zeros interlace at
    small but finite spacing and must not be discarded.

    Returns
    -------
    (P,) bool ndarray
        Aligned with :func:`pade_poles` (nearest pole first); True = spurious.
    """
    poles = pade_poles(b)
    zeros = pade_zeros(a)
    if poles.size == 0 or zeros.size == 0:
        return np.zeros(poles.size, dtype=bool)
    dist = np.min(np.abs(poles[:, None] - zeros[None, :]), axis=1)
    return dist <= rtol * np.maximum(np.abs(poles), 1e-300)
