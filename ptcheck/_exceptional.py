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
   (c) poles of Padé approximants of the series (passed in by the caller).
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

Dense linear algebra throughout; callers restrict the basis size.
Hermitian symmetry ``H(λ̄) = H(λ)†`` means EPs come in conjugate pairs with
the same branch structure; only Im λ > 0 is searched.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp

__all__ = ["EPCandidate", "ExceptionalPointSearch"]


@dataclass(frozen=True)
class EPCandidate:
    """One verified exceptional point (Im λ > 0 representative)."""

    coupling: complex
    energy: complex
    connected: bool | None  # None: continuation failed
    partner: int  # -1 when unknown
    overlap: float  # eigenvector overlap of the pair at λ*(1 + 1e-6)


class ExceptionalPointSearch:
    """EP search for one model (dense, N up to a few hundred).

    Parameters
    ----------
    e0 : (N,) ndarray
        Unperturbed energies (work basis, ascending).
    v : (N, N) ndarray
        Perturbation (work basis, dense).
    """

    def __init__(self, e0: np.ndarray, v: np.ndarray) -> None:
        self.e0 = np.asarray(e0, dtype=float)
        self.v = np.asarray(v.toarray() if sp.issparse(v) else v)
        self.n = self.e0.size
        self.scale = float(max(np.ptp(self.e0), np.max(np.abs(self.e0)), 1e-300))
        self.vscale = float(max(np.max(np.abs(self.v)), 1e-300))
        self.eig_calls = 0

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

    # ------------------------------------------------------------------ approach
    @staticmethod
    def _pair(w: np.ndarray, target: complex) -> tuple[int, int]:
        """The eigenvalue nearest ``target`` and its nearest neighbour."""
        a = int(np.argmin(np.abs(w - target)))
        dist = np.abs(w - w[a])
        dist[a] = np.inf
        return a, int(np.argmin(dist))

    def _gapsq(self, lam: complex, target: complex) -> tuple[complex, complex]:
        """(E_a - E_b)^2 for the eigenvalue a nearest ``target`` and its neighbour b; and E_a."""
        w = self.eigvals(lam)
        a, b = self._pair(w, target)
        return complex((w[a] - w[b]) ** 2), complex(w[a])

    def approach(self, lam: complex, target: complex, *, maxiter: int = 30) -> tuple[complex, complex] | None:
        """Secant iteration on (E_a - E_b)^2 from a guess; returns (λ, E) or None."""
        x0 = complex(lam)
        if x0.imag <= 0:
            x0 = complex(x0.real, abs(x0.imag) + 1e-3 * abs(x0))
        guess = x0
        x1 = x0 * (1 + 1e-3j) + 1e-12
        f0, e0 = self._gapsq(x0, target)
        f1, e1 = self._gapsq(x1, e0)
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
            f1, e1 = self._gapsq(x1, e0)
            if abs(step) <= 1e-9 * abs(x1):
                break
        if not np.isfinite(x1) or abs(x1.imag) <= 1e-10 * abs(x1):
            return None
        if x1.imag < 0:
            x1, e1 = x1.conjugate(), e1.conjugate()
        return x1, e1

    # ------------------------------------------------------------------ polish
    def polish(self, lam: complex, target: complex, *, maxiter: int = 12) -> tuple[complex, complex] | None:
        """Newton on the bordered Jordan-chain system; (λ*, E*) or None."""
        w, r = self.eig(lam)
        a, b = self._pair(w, target)
        ra, rb = r[:, a], r[:, b]
        cvec = ra.conj() / np.vdot(ra, ra)
        ta, tb = cvec @ ra, cvec @ rb
        if abs(ta) < 1e-12 or abs(tb) < 1e-12 or w[a] == w[b]:
            return None
        ra, rb = ra / ta, rb / tb
        x = 0.5 * (ra + rb)
        y = (ra - rb) / (w[a] - w[b])
        e = complex(0.5 * (w[a] + w[b]))
        n = self.n
        v = self.v
        eye = np.eye(n)
        for it in range(maxiter):
            hm = self.h(lam)
            am = hm - e * eye
            f = np.concatenate([am @ x, am @ y - x, [cvec @ x - 1, cvec @ y]])
            escale = self._escale(lam)
            res = np.linalg.norm(f[: 2 * n]) / (escale * (np.linalg.norm(x) + 1e-300))
            if it > 0 and res < 1e-12:
                break
            jac = np.zeros((2 * n + 2, 2 * n + 2), dtype=complex)
            jac[:n, :n] = am
            jac[:n, 2 * n] = -x
            jac[:n, 2 * n + 1] = v @ x
            jac[n : 2 * n, :n] = -eye
            jac[n : 2 * n, n : 2 * n] = am
            jac[n : 2 * n, 2 * n] = -y
            jac[n : 2 * n, 2 * n + 1] = v @ y
            jac[2 * n, :n] = cvec
            jac[2 * n + 1, n : 2 * n] = cvec
            try:
                d = np.linalg.solve(jac, -f)
            except np.linalg.LinAlgError:
                return None
            if not np.all(np.isfinite(d)):
                return None
            x = x + d[:n]
            y = y + d[n : 2 * n]
            e = e + d[2 * n]
            lam = lam + d[2 * n + 1]
        else:
            hm = self.h(lam)
            am = hm - e * eye
            res = np.linalg.norm(np.concatenate([am @ x, am @ y - x])) / (self._escale(lam) * (np.linalg.norm(x) + 1e-300))
        if not (np.isfinite(lam) and res < 1e-8):
            return None
        if abs(lam.imag) <= 1e-9 * abs(lam):
            return None  # Hermitian pencils have no EP on the real axis
        if lam.imag < 0:
            lam, e = lam.conjugate(), e.conjugate()
        return complex(lam), complex(e)

    # ------------------------------------------------------------------ verify
    def coalescence(self, lam: complex, energy: complex) -> tuple[bool, float]:
        """Check splitting ∝ √η and eigenvector overlap -> 1 approaching λ*."""
        splits, overlaps = [], []
        for eta in (1e-4, 1e-6):
            w, r = self.eig(lam * (1 + eta))
            a, b = np.argsort(np.abs(w - energy))[:2]
            splits.append(abs(w[a] - w[b]))
            ra, rb = r[:, a], r[:, b]
            overlaps.append(abs(np.vdot(ra, rb)) / (np.linalg.norm(ra) * np.linalg.norm(rb)))
        ratio = splits[1] / max(splits[0], 1e-300)
        ok = 0.03 < ratio < 0.3 and overlaps[1] > 0.99 and overlaps[1] >= overlaps[0] - 1e-9
        return bool(ok), float(overlaps[1])

    # ------------------------------------------------------------------ connect
    def _continue(self, lam_end: complex, t0: float, t1: float, e_start: complex, slope0: complex | None, *, max_steps: int = 600) -> complex | None:
        """Follow one eigenvalue of H(t λ_end) from t0 to t1; None if it gets lost."""
        t, e = t0, complex(e_start)
        prev: tuple[float, complex] | None = None
        span = t1 - t0
        dt = span / 40
        min_dt = abs(span) * 1e-9
        steps = 0
        while (t1 - t) * np.sign(span) > 0:
            if steps >= max_steps:
                return None
            steps += 1
            dt = float(np.sign(span)) * min(abs(dt), abs(t1 - t))
            tn = t + dt
            if prev is not None:
                pred = e + (e - prev[1]) * (dt / (t - prev[0]))
            elif slope0 is not None:
                pred = e + slope0 * dt
            else:
                pred = e
            w = self.eigvals(tn * lam_end)
            d = np.sort(np.abs(w - pred))
            k = int(np.argmin(np.abs(w - pred)))
            if d.size < 2 or d[0] <= 0.25 * d[1]:
                prev = (t, e)
                t, e = tn, complex(w[k])
                dt *= 1.5
            else:
                dt *= 0.5
                if abs(dt) < min_dt:
                    return None
        return e

    def connect(self, level: int, lam: complex, energy: complex, *, eta: float = 1e-3) -> tuple[bool | None, int]:
        """Is the EP on the branch of ``level`` along the ray from 0?  And the partner."""
        slope0 = lam * complex(self.v[level, level])
        t_end = 1.0 - eta
        e_cont = self._continue(lam, 0.0, t_end, complex(self.e0[level]), slope0)
        if e_cont is None:
            return None, -1
        w = self.eigvals(t_end * lam)
        near = np.argsort(np.abs(w - energy))[:2]
        k = int(np.argmin(np.abs(w - e_cont)))
        if k not in near:
            return False, -1
        other = int(near[0] if near[1] == k else near[1])
        e_back = self._continue(lam, t_end, 0.0, complex(w[other]), None)
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
    ) -> tuple[list[EPCandidate], int]:
        """Find, verify and connect EPs from the guesses (taken nearest first).

        Each new verified EP is checked for connection at once; guesses farther
        than ``reach_factor`` x the nearest connected EP are skipped (they
        cannot be expected to lead to a nearer one).

        Returns the connected (and not-disproved) EPs nearest first and the
        number of verified EPs found in all.
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
                e = self._continue(lam, 0.0, 1.0, complex(self.e0[level]), lam * complex(self.v[level, level]), max_steps=200)
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
