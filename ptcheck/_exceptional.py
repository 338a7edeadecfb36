"""Exceptional points of ``H(λ) = H0 + λ V`` at complex λ (private numerics).

An exceptional point (EP) is a complex coupling λ* at which two eigenvalues
*and* their eigenvectors coalesce: ``H(λ*)`` has a 2 x 2 Jordan block.  For a
Hermitian pencil these are the only singularities of the eigenvalue branches
(square-root branch points), so the radius of convergence of the
Rayleigh–Schrödinger series of level n is the distance to the nearest EP on
the branch of level n continued from λ = 0 (Kato 1966, ch. II §1; the
eigenvalues of a finite matrix pencil are algebraic functions of λ).

Method
------
1. *Guesses.*  (a) Two-level estimates: for every partner m the EPs of the
   2 x 2 pencil spanned by the unperturbed states n, m,
   ``λ = -Δ / (δ ∓ 2 i |V_nm|)`` with ``Δ = E_m - E_n``, ``δ = V_mm - V_nn``;
   (b) near-crossings of the real-λ spectrum: at a local minimum of the gap of
   two adjacent levels, the hyperbola ``gap² = g² + a (λ - λc)²`` fitted to
   three grid points has its zeros at ``λc ± i g / √a``;
   (c) poles of Padé approximants of the series (passed in by the caller);
   (d) zeros of the discriminant of quadratic Padé approximants of the series
   (:func:`branch_point_guesses`), which place square-root branch points
   directly.
2. *Approach.*  Secant iteration on ``f(λ) = (E_a(λ) - E_b(λ))²``, with E_a
   the eigenvalue followed from the guess's energy (nearest the previous E_a)
   and E_b its nearest neighbour; ``f`` is analytic with a simple zero at an EP.
3. *Polish.*  Newton on the bordered Jordan-chain ("defective eigenvalue")
   system in the unknowns ``(x, y, E, λ)``::

       (H(λ) - E) x = 0,   (H(λ) - E) y = x,   cᵀx = 1,   cᵀy = 0,

   whose solution is a regular (simple) root at a generic EP2, so Newton
   converges quadratically; at a non-defective double eigenvalue it has no
   solution.
4. *Verify.*  Approaching λ* along ``λ*(1 + η)``, the pair's splitting must
   shrink like √η and the overlap of the two eigenvectors must tend to 1.
5. *Connect.*  Continue the eigenvalue of level n from λ = 0 (where it is
   ``E_n^(0)``) along the straight ray to λ* in adaptive steps (a step is
   accepted only when the eigenvalue nearest the prediction is at least four
   times closer than the next one).  The EP belongs to the level when the
   continued eigenvalue is one of the coalescing pair near λ*.  The partner
   is found by continuing the other member of the pair back to λ = 0.

Dense linear algebra (one LU factorisation of ``H(λ) - σ`` per step) in
:class:`ExceptionalPointSearch`; :class:`ReducedExceptionalPointSearch` runs
the same search on a reduced pencil and refines it with products of the sparse
V only, for models too large to factorise.
Hermitian symmetry ``H(λ̄) = H(λ)†`` means EPs come in conjugate pairs with
the same branch structure; only Im λ > 0 is searched.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp

__all__ = ["EPCandidate", "ExceptionalPointSearch", "ReducedExceptionalPointSearch", "branch_point_guesses"]


@dataclass(frozen=True)
class EPCandidate:
    """One verified exceptional point (Im λ > 0 representative)."""

    coupling: complex
    energy: complex
    connected: bool | None  # None: continuation failed
    partner: int  # -1 when unknown
    overlap: float  # eigenvector overlap of the pair at λ*(1 + 1e-6)


def branch_point_guesses(coefficients: np.ndarray, *, count: int = 4) -> list[complex]:
    """Square-root branch points of a series from quadratic Padé approximants (Im λ >= 0).

    R. E. Shafer, "On quadratic approximation", SIAM J. Numer. Anal. 11, 447
    (1974): polynomials P, Q, R of degree d with ``P E² + Q E + R = O(λ^(K+1))``
    for the series ``E(λ) = Σ_k c_k λ^k``; the approximant ``E = (-Q ± √(Q² -
    4PR)) / 2P`` has square-root branch points at the zeros of the discriminant
    ``Q² - 4PR``, where an eigenvalue branch has its EPs.  The coefficients are
    rescaled by the root-test radius first; the nearest ``count`` zeros of the
    two largest degrees the coefficients allow are returned (guesses only).
    """
    c = np.asarray(coefficients, dtype=float)
    k = c.size - 1
    nz = np.flatnonzero(np.abs(c[1:]) > 0) + 1
    if k < 5 or nz.size < 3:
        return []
    rho = float(np.median(np.abs(c[nz[-3:]]) ** (-1.0 / nz[-3:])))
    if not (np.isfinite(rho) and rho > 0):
        return []
    cs = c * rho ** np.arange(k + 1)
    out: list[complex] = []
    top = (k - 1) // 3
    for deg in (top, top - 1):
        if deg < 1:
            continue
        out += _shafer_roots(cs, deg)[:count]
    roots = [complex(z.real, abs(z.imag)) * rho for z in out if np.isfinite(z) and abs(z) > 1e-9]
    roots.sort(key=abs)
    return roots


def _shafer_roots(c: np.ndarray, deg: int) -> list[complex]:
    """Zeros of Q² - 4PR of the degree-``deg`` quadratic Padé approximant, nearest first."""
    k = c.size - 1
    sq = np.convolve(c, c)[: k + 1]
    m = deg + 1
    rows = min(k + 1, 3 * m - 1)
    a = np.zeros((rows, 3 * m))
    for i in range(rows):
        for j in range(min(i, deg) + 1):
            a[i, j] = sq[i - j]
            a[i, m + j] = c[i - j]
        if i <= deg:
            a[i, 2 * m + i] = 1.0
    _, _, vh = np.linalg.svd(a)
    x = vh[-1]
    p_, q_, r_ = x[:m], x[m : 2 * m], x[2 * m :]
    poly = np.polynomial.polynomial
    disc = poly.polysub(poly.polymul(q_, q_), 4.0 * poly.polymul(p_, r_))
    disc = np.trim_zeros(disc, "b")
    if disc.size < 2:
        return []
    z = poly.polyroots(disc)
    return sorted((complex(v) for v in z), key=abs)


class ExceptionalPointSearch:
    """EP search for one model (dense matrices; one LU factorisation per step).

    Parameters
    ----------
    e0 : (N,) ndarray
        Unperturbed energies (work basis, ascending).
    v : (N, N) ndarray
        Perturbation (work basis, dense).
    solver : {'auto', 'inverse', 'full'}, default 'auto'
        How the eigenvalues near a target are computed at a complex coupling:
        ``'inverse'`` by block inverse iteration on ``H(λ) - σ`` (one LU
        factorisation, warm-started from the vectors of the previous step);
        ``'full'`` by a full dense eigendecomposition (``scipy.linalg.eig``),
        the reference the inverse iteration is tested against; ``'auto'``:
        ``'full'`` for N <= :attr:`FULL_MAX` (where one small ``eig`` costs less
        than the Python overhead of the iteration), else ``'inverse'``.
    """

    #: largest N for which solver='auto' takes full eigendecompositions
    FULL_MAX = 48

    #: vectors in the inverse-iteration block (the pair, plus guards that place the next eigenvalue)
    BLOCK = 4
    #: largest number of inverse iterations per shift
    MAX_INVERSE_ITER = 40

    def __init__(self, e0: np.ndarray, v: np.ndarray, *, solver: str = "auto") -> None:
        self.e0 = np.asarray(e0, dtype=float)
        self.v = np.asarray(v.toarray() if sp.issparse(v) else v)
        self.n = self.e0.size
        self.scale = float(max(np.ptp(self.e0), np.max(np.abs(self.e0)), 1e-300))
        self.vscale = float(max(np.max(np.abs(self.v)), 1e-300))
        self.solver = solver if solver != "auto" else ("full" if self.n <= self.FULL_MAX else "inverse")
        self.eig_calls = 0  # full dense eigendecompositions
        self.factorisations = 0  # LU factorisations of H(λ) - σ
        self._rng = np.random.default_rng(7)

    # ------------------------------------------------------------------ basics
    def h(self, lam: complex) -> np.ndarray:
        h = lam * self.v
        h = h.astype(np.result_type(h.dtype, complex), copy=False)
        h[np.diag_indices(self.n)] += self.e0
        return h

    def eigvals(self, lam: complex) -> np.ndarray:
        self.eig_calls += 1
        return sla.eigvals(self.h(lam), check_finite=False)

    def eig(self, lam: complex) -> tuple[np.ndarray, np.ndarray]:
        self.eig_calls += 1
        return sla.eig(self.h(lam), check_finite=False)

    def _escale(self, lam: complex) -> float:
        return self.scale + abs(lam) * self.vscale

    # ------------------------------------------------------------------ eigenvalues near a target
    def local(
        self,
        lam: complex,
        sigma: complex,
        start: np.ndarray | None = None,
        *,
        count: int | None = None,
        rtol: float = 1e-12,
        offset: float | None = None,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Eigenvalues of ``H(λ)`` nearest ``σ``, nearest first.

        Returns ``(values (p,), vectors (N, p), block (N, p))``: with the
        ``'inverse'`` solver the Ritz pairs of block inverse iteration on
        ``H(λ) - σ`` (one LU factorisation; ``start`` warm-starts the block,
        e.g. with the block of the previous step) and the orthonormal block
        itself, to pass on as the next ``start``; with ``'full'`` the nearest
        eigenpairs of a full eigendecomposition (and the vectors again in
        place of the block: a full solve takes no start).  Vectors have unit
        norm.
        The iteration stops when the sum and product of the two nearest Ritz
        values (smooth even where the two coalesce) change by less than
        ``rtol`` x the spectral scale.  The factorised shift sits ``offset``
        (default 1e-9 x scale) off ``σ``, which may be an eigenvalue; the
        invariant subspace of a coalescing pair is resolved best with a larger
        offset (e.g. 1e-3 x scale): the inverse of a Jordan block amplifies its
        two directions by 1/offset² and 1/offset.
        """
        p = min(count or self.BLOCK, self.n)
        if self.solver == "full" or p >= self.n - 1:
            w, r = self.eig(lam)
            order = np.argsort(np.abs(w - sigma), kind="stable")[:p]
            x = r[:, order] / np.linalg.norm(r[:, order], axis=0)
            if self.solver == "full":  # the block only ever comes back as a start, which full solves ignore
                return w[order], x, x
            return w[order], x, np.linalg.qr(x)[0]  # (near a coalescence the span is poorly resolved)
        escale = self._escale(lam)
        shift = sigma + self._nudge(escale if offset is None else offset / 1e-9)
        a, lu = self._shifted(lam, shift)  # a = H(λ) - shift
        q = self._start_block(start, p)
        prev = None
        theta = s = None
        for _ in range(self.MAX_INVERSE_ITER):
            q, _ = np.linalg.qr(sla.lu_solve(lu, q, check_finite=False))
            t = q.conj().T @ (a @ q)
            t[np.diag_indices(p)] += shift
            theta, s = np.linalg.eig(t)
            order = np.argsort(np.abs(theta - sigma), kind="stable")
            theta, s = theta[order], s[:, order]
            key = np.array([theta[0] + theta[1], theta[0] * theta[1] / escale]) if p > 1 else theta[:1]
            if prev is not None and (
                np.all(np.abs(key - prev[0]) <= rtol * escale)
                # the nearest two as a set (their order may flip when the second and third are equidistant)
                or all(np.min(np.abs(prev[1] - z)) <= rtol * escale for z in theta[:2])
            ):
                break
            prev = (key, theta)
        x = q @ s
        x /= np.linalg.norm(x, axis=0)
        return theta, x, q

    @staticmethod
    def _nudge(escale: float) -> complex:
        """A hair off the requested shift: σ may sit on an eigenvalue (at an EP it does)."""
        return 1e-9 * escale * complex(np.cos(0.7), np.sin(0.7))

    def _shifted(self, lam: complex, shift: complex) -> tuple[np.ndarray, Any]:
        """``H(λ) - shift`` and its LU factorisation."""
        self.factorisations += 1
        a = lam * self.v
        if not np.iscomplexobj(a):
            a = a.astype(complex)
        a[np.diag_indices(self.n)] += self.e0 - shift
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", sla.LinAlgWarning)  # a near-singular shift is what inverse iteration wants
            return a, sla.lu_factor(a, check_finite=False)

    def _start_block(self, start: np.ndarray | None, p: int) -> np.ndarray:
        cols = [] if start is None else [np.asarray(start).reshape(self.n, -1)]
        have = 0 if start is None else cols[0].shape[1]
        if have < p:
            cols.append(self._rng.standard_normal((self.n, p - have)) + 1j * self._rng.standard_normal((self.n, p - have)))
        q, _ = np.linalg.qr(np.hstack(cols)[:, :p])
        return q

    # ------------------------------------------------------------------ guesses
    def pair_guesses(self, level: int, count: int = 6) -> list[tuple[complex, complex]]:
        """Two-level EP estimates (λ, E) with Im λ > 0, nearest first."""
        n = level
        out = []
        vnn = float(np.real(self.v[n, n]))
        for m in range(self.n):
            if m == n:
                continue
            q = abs(self.v[n, m])
            if q == 0:
                continue
            dlt = self.e0[m] - self.e0[n]
            dv = float(np.real(self.v[m, m])) - vnn
            for sgn in (1, -1):
                lam = -dlt / (dv - sgn * 2j * q)
                if lam.imag <= 0:
                    continue
                e = self.e0[n] + lam * vnn + 0.5 * (dlt + lam * dv)
                out.append((complex(lam), complex(e)))
        out.sort(key=lambda t: abs(t[0]))
        return out[:count]

    def crossing_guesses(self, level: int, reach: float, *, points: int = 61, window: int = 2) -> list[tuple[complex, complex]]:
        """EP estimates from avoided crossings of the real spectrum in |λ| <= reach."""
        if not (np.isfinite(reach) and reach > 0) or self.n < 2:
            return []
        lams = np.linspace(-reach, reach, 2 * points + 1)
        lo = max(0, level - window)
        hi = min(self.n - 1, level + window)
        vals = np.empty((lams.size, hi - lo + 1))
        vh = self.v if np.iscomplexobj(self.v) else self.v.real
        for i, lam in enumerate(lams):
            hmat = lam * vh
            hmat[np.diag_indices(self.n)] += self.e0
            vals[i] = sla.eigh(hmat, eigvals_only=True, subset_by_index=[lo, hi], check_finite=False)
        gaps = np.diff(vals, axis=1)
        out = []
        for j in range(gaps.shape[1]):
            g = gaps[:, j]
            for i in range(1, lams.size - 1):
                if g[i] < g[i - 1] and g[i] <= g[i + 1]:
                    # fit gap^2 = A + B (λ - λi) + C (λ - λi)^2 through three points
                    h_ = lams[1] - lams[0]
                    y0, y1, y2 = g[i - 1] ** 2, g[i] ** 2, g[i + 1] ** 2
                    cc = (y0 - 2 * y1 + y2) / (2 * h_**2)
                    bb = (y2 - y0) / (2 * h_)
                    if cc <= 0:
                        continue
                    lc = lams[i] - bb / (2 * cc)
                    gmin2 = y1 - bb**2 / (4 * cc)
                    gmin = np.sqrt(max(gmin2, (1e-8 * g[i]) ** 2))
                    lam = complex(lc, gmin / np.sqrt(cc))
                    e = complex(0.5 * (vals[i, j] + vals[i, j + 1]))
                    out.append((lam, e))
        out.sort(key=lambda t: abs(t[0]))
        return out

    def ray_guesses(self, level: int, reach: float, *, rays: int = 12) -> list[tuple[complex, complex]]:
        """EP estimates where the level's branch, followed from 0 along rays, meets a neighbour.

        The branch is continued outwards along ``rays`` rays ``λ = t reach
        e^{iθ}`` of the upper half plane; near a branch point another
        eigenvalue comes close to it.  Each interior local minimum of that
        distance along a ray (and the point where a ray is blocked) is a guess,
        with the branch's value there.  Costs about ``rays`` x 30 shifted
        solves: meant for small (reduced) pencils.
        """
        out = []
        for k in range(rays):
            ray = reach * complex(np.cos((k + 0.5) * np.pi / rays), np.sin((k + 0.5) * np.pi / rays))
            record: list = []
            e = self._continue(ray, 0.0, 1.0, complex(self.e0[level]), ray * complex(self.v[level, level]), max_steps=120,
                               when_blocked="stop", record=record)
            gaps = [p[2] for p in record]
            for i in range(1, len(record) - 1):
                if gaps[i] < gaps[i - 1] and gaps[i] <= gaps[i + 1]:
                    out.append((complex(record[i][0] * ray), complex(record[i][1])))
            if e is not None and record and record[-1][0] < 1.0:
                out.append((complex(record[-1][0] * ray), complex(record[-1][1])))
        out.sort(key=lambda t: abs(t[0]))
        return out

    # ------------------------------------------------------------------ approach
    def _gapsq(self, lam: complex, target: complex, start: np.ndarray | None) -> tuple[complex, complex, complex, np.ndarray]:
        """``(E_a - E_b)²``, ``E_a``, ``(E_a + E_b)/2`` and the block, for the eigenvalue a nearest ``target`` and its nearest neighbour b."""
        w, _, q = self.local(lam, target, start)
        a = w[0]
        b = w[1 + int(np.argmin(np.abs(w[1:] - a)))]
        return complex((a - b) ** 2), complex(a), complex(0.5 * (a + b)), q

    def approach(self, lam: complex, target: complex, *, maxiter: int = 30) -> tuple[complex, complex] | None:
        """Secant iteration on (E_a - E_b)^2 from a guess; returns (λ, E) or None."""
        x0 = complex(lam)
        if x0.imag <= 0:
            x0 = complex(x0.real, abs(x0.imag) + 1e-3 * abs(x0))
        guess = x0
        x1 = x0 * (1 + 1e-3j) + 1e-12
        f0, e0, _, q = self._gapsq(x0, target, None)
        f1, e1, _, q = self._gapsq(x1, e0, q)
        for _ in range(maxiter):
            den = f1 - f0
            if den == 0:
                break
            step = -f1 * (x1 - x0) / den
            lim = 0.5 * max(abs(x1), 1e-12)
            if abs(step) > lim:
                step *= lim / abs(step)
            x0, f0, e0 = x1, f1, e1
            x1 = x1 + step
            if abs(x1 - guess) > 0.75 * abs(guess):
                return None  # wandered off: the guess was not near an EP of this pair
            f1, e1, _, q = self._gapsq(x1, e0, q)
            if abs(step) <= 1e-9 * abs(x1):
                break
        if not np.isfinite(x1) or abs(x1.imag) <= 1e-10 * abs(x1):
            return None
        if x1.imag < 0:
            x1, e1 = x1.conjugate(), e1.conjugate()
        return x1, e1

    # ------------------------------------------------------------------ polish
    def polish(self, lam: complex, target: complex, *, maxiter: int = 12) -> tuple[complex, complex] | None:
        """Secant on the pair's discriminant ``(E_a - E_b)²`` to full precision; (λ*, E*) or None.

        The discriminant of the coalescing pair is analytic in λ with a simple
        zero at a generic EP2, so the secant iteration converges
        superlinearly; a non-defective double eigenvalue gives a double zero
        and is rejected later by :meth:`coalescence`.
        """
        x0 = complex(lam)
        f0, e0, c0, q = self._gapsq(x0, target, None)
        x1 = x0 * (1 + 1e-7j)
        f1, e1, c1, q = self._gapsq(x1, e0, q)
        for _ in range(maxiter):
            den = f1 - f0
            if den == 0 or f1 == 0:
                break
            step = -f1 * (x1 - x0) / den
            if abs(step) > 0.1 * abs(x1):
                return None  # not converging towards a nearby coalescence
            x0, f0 = x1, f1
            x1 = x1 + step
            f1, e1, c1, q = self._gapsq(x1, e1, q)
            if abs(step) <= 1e-14 * abs(x1):
                break
        escale = self._escale(x1)
        if not (np.isfinite(x1) and abs(f1) <= 1e-12 * escale**2):
            return None
        if abs(x1.imag) <= 1e-9 * abs(x1):
            return None  # Hermitian pencils have no EP on the real axis
        if x1.imag < 0:
            x1, c1 = x1.conjugate(), c1.conjugate()
        return complex(x1), complex(c1)

    # ------------------------------------------------------------------ verify
    def coalescence(self, lam: complex, energy: complex) -> tuple[bool, float]:
        """Check splitting ∝ √η and eigenvector overlap -> 1 approaching λ*."""
        splits, overlaps = [], []
        q = None
        for eta in (1e-4, 1e-6):
            w, r, q = self.local(lam * (1 + eta), energy, q)
            splits.append(abs(w[0] - w[1]))
            overlaps.append(abs(np.vdot(r[:, 0], r[:, 1])))
        ratio = splits[1] / max(splits[0], 1e-300)
        ok = 0.03 < ratio < 0.3 and overlaps[1] > 0.99 and overlaps[1] >= overlaps[0] - 1e-9
        return bool(ok), float(overlaps[1])

    # ------------------------------------------------------------------ connect
    def _continue(
        self,
        lam_end: complex,
        t0: float,
        t1: float,
        e_start: complex,
        slope0: complex | None,
        *,
        max_steps: int = 600,
        first_step: float | None = None,
        branch_point: float | None = None,
        when_blocked: str = "fail",
        record: list | None = None,
    ) -> complex | None:
        """Follow one eigenvalue of H(t λ_end) from t0 to t1; None if it gets lost.

        A step is accepted when the eigenvalue nearest the prediction
        (extrapolation through the last accepted points) is at least four times
        closer to it than the next one; otherwise the step is halved.  Each
        step is one shifted solve near the prediction, warm-started from the
        previous step's block.  The step grows faster where the prediction was
        far better than needed.  ``branch_point``: a t where the eigenvalue
        has a square-root branch point (an EP at the end of the ray); steps
        then stay below 0.6 x the distance to it.  ``when_blocked='stop'``
        returns the last accepted value instead of None when the path is
        blocked (eight halvings in a row, or steps below 1e-3 of the span: the
        branch met a coalescence).  ``record``: a list that receives the
        accepted ``(t, value, distance to the nearest other eigenvalue)``.
        """
        t, e = t0, complex(e_start)
        hist: list[tuple[float, complex]] = []
        span = t1 - t0
        dt = first_step if first_step is not None else span / 20
        min_dt = abs(span) * 1e-9
        steps = 0
        rejected = 0
        q = None
        while (t1 - t) * np.sign(span) > 0:
            if steps >= max_steps:
                return None
            steps += 1
            size = min(abs(dt), abs(t1 - t))
            if branch_point is not None and (branch_point - t) * span > 0:
                size = min(size, max(0.6 * abs(branch_point - t), min_dt))
            dt = float(np.sign(span)) * size
            tn = t + dt
            pred = self._predict(hist, t, e, tn, slope0)
            w, _, qn = self.local(tn * lam_end, pred, q, count=3, rtol=1e-10)
            d = np.abs(w - pred)
            if d.size < 2 or d[0] <= 0.25 * d[1]:
                hist = (hist + [(t, e)])[-2:]
                t, e, q = tn, complex(w[0]), qn
                if record is not None:
                    record.append((t, e, float(np.min(np.abs(w[1:] - w[0]))) if w.size > 1 else math.inf))
                dt *= 2.0 if d.size < 2 or d[0] <= 0.02 * d[1] else 1.5
                rejected = 0
            else:
                dt *= 0.5
                rejected += 1
                if when_blocked == "stop" and (rejected >= 8 or abs(dt) < 1e-3 * abs(span)):
                    return e
                if abs(dt) < min_dt:
                    return None
        return e

    @staticmethod
    def _predict(hist: list[tuple[float, complex]], t: float, e: complex, tn: float, slope0: complex | None) -> complex:
        """Value at ``tn`` extrapolated through the last accepted points (Lagrange, up to quadratic)."""
        pts = hist + [(t, e)]
        if len(pts) == 1:
            return e + (slope0 * (tn - t) if slope0 is not None else 0.0)
        out = 0.0j
        for i, (ti, ei) in enumerate(pts):
            weight = 1.0
            for j, (tj, _) in enumerate(pts):
                if j != i:
                    weight *= (tn - tj) / (ti - tj)
            out += weight * ei
        return complex(out)

    def connect(self, level: int, lam: complex, energy: complex, *, eta: float = 1e-3, record: list | None = None) -> tuple[bool | None, int]:
        """Is the EP on the branch of ``level`` along the ray from 0?  And the partner.

        ``record`` receives the accepted ``(t, value, gap)`` points of the
        branch's continuation from 0 towards the EP.
        """
        slope0 = lam * complex(self.v[level, level])
        t_end = 1.0 - eta
        e_cont = self._continue(lam, 0.0, t_end, complex(self.e0[level]), slope0, branch_point=1.0, record=record)
        if e_cont is None:
            return None, -1
        pair, _, _ = self.local(t_end * lam, energy, count=3)
        mine, _, _ = self.local(t_end * lam, e_cont, count=2)
        escale = self._escale(lam)
        hit = [i for i in (0, 1) if abs(pair[i] - mine[0]) <= 1e-6 * max(abs(pair[0] - pair[1]), 1e-12 * escale)]
        if not hit:
            return False, -1
        other = pair[1 - hit[0]]
        e_back = self._continue(lam, t_end, 0.0, complex(other), None, first_step=-2.0 * eta)
        if e_back is None:
            return True, -1
        partner = int(np.argmin(np.abs(self.e0 - e_back.real)))
        if partner == level:
            return True, -1
        return True, partner

    # ------------------------------------------------------------------ driver
    def search(
        self,
        level: int,
        guesses: list[tuple[complex, complex | None]],
        *,
        max_points: int = 4,
        reach_factor: float = 1.5,
        seeds: np.ndarray | None = None,
    ) -> tuple[list[EPCandidate], int]:
        """Find, verify and connect EPs from the guesses (taken nearest first).

        Each new verified EP is checked for connection at once; guesses farther
        than ``reach_factor`` x the nearest connected EP are skipped (they
        cannot be expected to lead to a nearer one).

        Returns the connected (and not-disproved) EPs nearest first and the
        number of verified EPs found in all.  ``seeds`` is accepted for the
        interface of :class:`ReducedExceptionalPointSearch` and not used.
        """
        found: list[tuple[complex, complex]] = []
        out: list[EPCandidate] = []
        best = np.inf
        guesses = sorted(guesses, key=lambda t: abs(t[0]))
        for lam, e in guesses:
            if not np.isfinite(lam) or lam == 0:
                continue
            if abs(lam) > reach_factor * best or len(out) >= max_points:
                break
            lam = complex(lam)
            if lam.imag < 0:
                lam = lam.conjugate()
                e = None if e is None else complex(e).conjugate()
            if any(abs(lam - f[0]) <= 1e-3 * abs(lam) for f in found):
                continue  # this guess sits on an EP already found
            if e is None:
                # follow the level's own branch towards the guess: the pair to chase contains it
                e = self._continue(lam, 0.0, 1.0, complex(self.e0[level]), lam * complex(self.v[level, level]), max_steps=200,
                                   when_blocked="stop")
            target = complex(self.e0[level]) if e is None else complex(e)
            got = self.approach(lam, target)
            if got is None:
                continue
            pol = self.polish(*got)
            if pol is None:
                continue
            lam_ep, e_ep = pol
            tol_l = 1e-6 * abs(lam_ep)
            tol_e = 1e-6 * self._escale(lam_ep)
            if any(abs(lam_ep - f[0]) <= tol_l and abs(e_ep - f[1]) <= tol_e for f in found):
                continue
            ok, ov = self.coalescence(lam_ep, e_ep)
            if not ok:
                continue
            found.append((lam_ep, e_ep))
            conn, partner = self.connect(level, lam_ep, e_ep)
            if conn is False:
                continue
            out.append(EPCandidate(lam_ep, e_ep, conn, partner, ov))
            if conn:
                best = min(best, abs(lam_ep))
        out.sort(key=lambda c: abs(c.coupling))
        return out, len(found)


class ReducedExceptionalPointSearch:
    """EP search for sparse models beyond dense sizes: a reduced basis refined by residuals.

    The pencil ``(H0, V)`` is projected onto a subspace ``W`` (orthonormal
    columns, Rayleigh–Ritz): ``W`` starts from the unperturbed state of the
    level, those of its most strongly coupled partners and the
    Rayleigh–Schrödinger corrections of the level (``seeds``: their span
    reproduces the energy series to high order, Wigner's 2n + 1 rule).  The
    dense search (:class:`ExceptionalPointSearch`) runs on the small reduced
    pencil; each EP it finds is lifted to the full space, where the residual
    ``‖H(λ*) Z - Z T‖`` of its two-dimensional invariant subspace ``Z`` is
    measured.  Until it is below ``RTOL`` x the spectral scale the basis is
    enriched with the residual divided by the diagonal of ``H(λ*) - E*`` (the
    correction of Davidson's method) and two Krylov powers of it, and the EP is
    polished again in the larger reduced pencil.  The level's branch is
    followed from λ = 0 in the reduced pencil (where it starts exactly at
    ``E_n^(0)``: the unperturbed state is a basis vector), and checked in the
    full space at four points of the ray (residual of the lifted eigenvector
    below ``PATH_RTOL`` x scale); a failed check enriches the basis there.  An
    EP whose path cannot be certified is returned with ``connected=None``.

    Only products with the sparse V are used (no factorisation), so the cost
    grows linearly with N; memory holds the basis, at most ``MAX_BASIS``
    complex N-vectors.

    Parameters
    ----------
    e0 : (N,) ndarray
        Unperturbed energies (work basis, ascending).
    v : (N, N) sparse matrix
        Perturbation (work basis).
    """

    MAX_ROUNDS = 40
    RTOL = 1e-8
    PATH_RTOL = 1e-6
    PARTNERS = 6
    SEED_ORDERS = 40

    def __init__(self, e0: np.ndarray, v: Any) -> None:
        self.e0 = np.asarray(e0, dtype=float)
        self.v = sp.csr_matrix(v)
        self.n = self.e0.size
        self.scale = float(max(np.ptp(self.e0), np.max(np.abs(self.e0)), 1e-300))
        self.vscale = float(max(np.max(np.abs(self.v.data)) if self.v.nnz else 0.0, 1e-300))
        self.vdiag = np.real(self.v.diagonal())
        self.max_basis = int(max(60, min(400, 2**28 // (32 * max(self.n, 1)))))
        self.products = 0  # products of V with N-vectors
        self._reach = math.nan

    def _escale(self, lam: complex) -> float:
        return self.scale + abs(lam) * self.vscale

    # ------------------------------------------------------------------ guesses
    def pair_guesses(self, level: int, count: int = 6) -> list[tuple[complex, complex]]:
        """Two-level EP estimates (λ, E) with Im λ > 0, nearest first (see :class:`ExceptionalPointSearch`)."""
        row = self.v.getrow(level)
        out = []
        vnn = float(self.vdiag[level])
        for m, q in zip(row.indices, np.abs(row.data)):
            if m == level or q == 0:
                continue
            dlt = self.e0[m] - self.e0[level]
            dv = float(self.vdiag[m]) - vnn
            for sgn in (1, -1):
                lam = -dlt / (dv - sgn * 2j * q)
                if lam.imag > 0:
                    out.append((complex(lam), complex(self.e0[level] + lam * vnn + 0.5 * (dlt + lam * dv))))
        out.sort(key=lambda t: abs(t[0]))
        return out[:count]

    def crossing_guesses(self, level: int, reach: float, **_: Any) -> list[tuple[complex, complex]]:
        """Real-axis crossings are looked for in the reduced pencil; here only ``reach`` is kept."""
        self._reach = float(reach)
        return []

    # ------------------------------------------------------------------ basis
    def _start_basis(self, level: int, seeds: np.ndarray | None) -> np.ndarray:
        row = self.v.getrow(level)
        with np.errstate(divide="ignore"):
            strength = np.abs(row.data) / np.maximum(np.abs(self.e0[row.indices] - self.e0[level]), 1e-300)
        partners = [int(m) for m in row.indices[np.argsort(-strength)] if m != level][: self.PARTNERS]
        nearest = [int(m) for m in np.argsort(np.abs(self.e0 - self.e0[level]), kind="stable")[: self.PARTNERS + 1]]
        units = list(dict.fromkeys([level] + partners + nearest))  # the likely partners: coupled or close
        w = np.zeros((self.n, len(units)), dtype=complex)
        w[units, np.arange(len(units))] = 1.0
        if seeds is not None and len(seeds) > 1:
            extra = np.array(np.asarray(seeds)[1 : self.SEED_ORDERS + 1].T, dtype=complex)
            w = self._extend(w, extra)
        return w

    def _extend(self, w: np.ndarray, c: np.ndarray) -> np.ndarray:
        """``w`` with the columns of ``c`` orthonormalised against it (dependent directions dropped)."""
        c = c / np.maximum(np.linalg.norm(c, axis=0), 1e-300)
        for _ in range(2):
            c = c - w @ (w.conj().T @ c)
        g = c.conj().T @ c
        s, u = np.linalg.eigh((g + g.conj().T) / 2)
        keep = s > 1e-10  # the columns had unit norm before the projection: absolute threshold
        c = c @ (u[:, keep] / np.sqrt(s[keep]))
        room = self.max_basis - w.shape[1]
        return np.hstack([w, c[:, : max(room, 0)]])

    def _apply_h(self, lam: complex, z: np.ndarray) -> np.ndarray:
        self.products += z.shape[1] if z.ndim == 2 else 1
        return (self.e0[:, None] * z if z.ndim == 2 else self.e0 * z) + lam * (self.v @ z)

    def _reduce(self, w: np.ndarray, vw: np.ndarray, level: int) -> tuple[ExceptionalPointSearch, np.ndarray, int]:
        h0r = w.conj().T @ (self.e0[:, None] * w)
        vr = w.conj().T @ vw
        d, u = np.linalg.eigh((h0r + h0r.conj().T) / 2)
        vv = u.conj().T @ ((vr + vr.conj().T) / 2) @ u
        # inverse iteration at any size: its block spans a coalescing pair's invariant subspace, which the
        # (nearly parallel) eigenvectors of a full eigendecomposition do not resolve
        return ExceptionalPointSearch(d, vv, solver="inverse"), u, int(np.argmin(np.abs(d - self.e0[level])))

    def _residual(self, red: ExceptionalPointSearch, w: np.ndarray, u: np.ndarray, lam: complex, energy: complex, count: int) -> tuple[float, np.ndarray, np.ndarray]:
        """Relative residual of the lifted invariant subspace of the ``count`` reduced eigenvalues nearest ``energy``."""
        _, _, q = red.local(lam, energy, count=count, offset=1e-3 * red._escale(lam))
        z = w @ (u @ q)
        hz = self._apply_h(lam, z)
        r = hz - z @ (z.conj().T @ hz)
        return float(np.linalg.norm(r) / self._escale(lam)), r, z

    def _corrections(self, lam: complex, energy: complex, r: np.ndarray) -> np.ndarray:
        d = self.e0 + lam * self.vdiag - energy
        tiny = 1e-12 * self._escale(lam)
        d = np.where(np.abs(d) < tiny, tiny, d)
        p = r / d[:, None]
        hp = self._apply_h(lam, p)
        return np.hstack([p, hp, self._apply_h(lam, hp)])

    # ------------------------------------------------------------------ driver
    def search(
        self,
        level: int,
        guesses: list[tuple[complex, complex | None]],
        *,
        max_points: int = 4,
        reach_factor: float = 1.5,
        seeds: np.ndarray | None = None,
    ) -> tuple[list[EPCandidate], int]:
        """Nearest EPs on the branch of ``level`` (see the class docstring); same return as the dense search."""
        w = self._start_basis(level, seeds)
        self.products += w.shape[1]
        vw = self.v @ w
        cands: list[tuple[complex, complex]] = []
        certified: dict[int, bool] = {}
        n_verified = 0
        red = u = lr = None
        for _ in range(self.MAX_ROUNDS):
            red, u, lr = self._reduce(w, vw, level)
            if not cands:
                cands, n_verified = self._global(red, lr, guesses, max_points, reach_factor)
                if not cands:
                    return [], n_verified
            else:
                polished = [red.polish(lam, e) for lam, e in cands]
                cands = [c for c in polished if c is not None]  # a spurious EP of a poorer basis may vanish
                if not cands:
                    cands, n_verified = self._global(red, lr, guesses, max_points, reach_factor)
                    if not cands:
                        return [], n_verified
            new = []
            for lam, e in cands:
                res, r, _ = self._residual(red, w, u, lam, e, 2)
                if res > self.RTOL:
                    new.append(self._corrections(lam, e, r))
            if not new:
                more, n_verified = self._global(red, lr, guesses + [(lam, e) for lam, e in cands], max_points, reach_factor)
                nearer = [c for c in more if abs(c[0]) < min(abs(z) for z, _ in cands) * (1 - 1e-6)
                          and all(abs(c[0] - z) > 1e-6 * abs(z) for z, _ in cands)]
                if nearer:
                    cands = sorted(cands + nearer, key=lambda t: abs(t[0]))[:2]
                    continue
                new = self._check_paths(red, w, u, lr, cands, certified)
                if not new:
                    break
            before = w.shape[1]
            w = self._extend(w, np.hstack(new))
            if w.shape[1] == before:
                break  # no room or nothing new: stop with what is certified
            self.products += w.shape[1] - before
            vw = np.hstack([vw, self.v @ w[:, before:]])
        if u.shape[0] != w.shape[1]:  # the rounds ran out after an enrichment: reduce once more
            red, u, lr = self._reduce(w, vw, level)
            cands = [red.polish(lam, e) or (lam, e) for lam, e in cands]
        out = []
        for i, (lam, e) in enumerate(cands):
            res, _, _ = self._residual(red, w, u, lam, e, 2)
            if res > 1e3 * self.RTOL:
                continue  # never converged: not reported
            ok, ov = red.coalescence(lam, e)
            if not ok:
                continue
            conn, partner_r = red.connect(lr, lam, e)
            if conn is False:
                continue
            if conn and not certified.get(i, False):
                conn = None
            partner = -1
            if partner_r >= 0:  # the partner's reduced state at λ = 0, lifted: an unperturbed state?
                z = w @ u[:, partner_r]
                m = int(np.argmax(np.abs(z)))
                if abs(z[m]) ** 2 > 0.5 and abs(red.e0[partner_r] - self.e0[m]) <= 1e-8 * self.scale:
                    partner = m
            out.append(EPCandidate(lam, e, conn, partner, ov))
        out.sort(key=lambda c: abs(c.coupling))
        return out, max(n_verified, len(out))

    def _global(self, red: ExceptionalPointSearch, lr: int, guesses: list, max_points: int, reach_factor: float) -> tuple[list[tuple[complex, complex]], int]:
        """Connected EPs of the reduced pencil from all guesses, nearest two first."""
        reach = self._reach if np.isfinite(self._reach) else 2.0 * min((abs(g[0]) for g in guesses if g[0]), default=1.0)
        g = list(guesses) + red.pair_guesses(lr) + red.crossing_guesses(lr, reach, points=25) + red.ray_guesses(lr, reach, rays=8)
        g = sorted(g, key=lambda t: abs(t[0]))[:16]
        eps, n_verified = red.search(lr, g, max_points=max_points, reach_factor=reach_factor)
        return [(c.coupling, c.energy) for c in eps if c.connected is not False][:2], n_verified

    def _check_paths(self, red: ExceptionalPointSearch, w: np.ndarray, u: np.ndarray, lr: int, cands: list, certified: dict) -> list[np.ndarray]:
        """Full-space residuals of the branch at four points of each ray; corrections where too large."""
        new = []
        for i, (lam, e) in enumerate(cands):
            record: list = []
            conn, _ = red.connect(lr, lam, e, record=record)
            if conn is not True or not record:
                certified[i] = False
                continue
            ok = True
            for frac in (0.25, 0.5, 0.75, 0.95):
                t, val, _ = min(record, key=lambda p: abs(p[0] - frac))
                res, r, _ = self._residual(red, w, u, t * lam, val, 1)
                if res > self.PATH_RTOL:
                    ok = False
                    new.append(self._corrections(t * lam, val, r))
            certified[i] = ok
        return new
