"""Radius of convergence and growth class from Taylor coefficients (private).

Works on the energy coefficients ``c_0 … c_K`` of one level.

* Coefficients are compared on the scale fixed by the rigorous Kato disc
  (``ĉ_k = c_k r_K^k``): every ``|ĉ_k|`` is bounded by the same constant there,
  and round-off stays near machine precision of the largest ``|ĉ_k|``.
* *Pattern*: when in the tail only every p-th coefficient (``k ≡ o mod p``) is
  nonzero (p = 2: a series in λ², e.g. parity), the analysis runs on
  ``d_j = c_{o + p j}``, a series in ``μ = λ^p``; radii convert back with
  ``R_λ = R_μ^(1/p)``.
* *Root test*: least-squares fit of ``log|d_j| ≈ α - j log R + γ log j`` over the
  tail (upper envelope over ±2 neighbours, so that oscillating signs from
  complex-conjugate singularities do not matter).
* *Ratio test*: geometric mean of the last ratios ``|d_{j-1}/d_j|``.
* *Domb–Sykes*: the ratios ``r_j = d_j / d_{j-1}`` of a singularity
  ``(1 - μ/μ0)^(-g)`` lie on the line ``r_j = (1/μ0)(1 + (g-1)/j)``: a linear fit in
  ``1/j`` over the tail gives ``1/μ0`` at ``1/j = 0`` (Domb & Sykes, Proc. R.
  Soc. A 240, 214 (1957)).  When the ratios do not keep one sign (a complex
  pair of nearest singularities), the quotient
  ``(d_{j-1}² - d_j d_{j-2}) / (d_{j-2}² - d_{j-1} d_{j-3}) → 1/|μ0|²`` is
  extrapolated in 1/j instead (Hunter & Guerrieri, Stud. Appl. Math. 64, 113
  (1980)).
* *Padé*: nearest pole of the near-diagonal Padé approximant of the d-series
  that is stable against the next lower approximant and is no Froissart doublet.
* *Growth class*: ``log|r_j| ≈ a + b log j``; factorial growth gives b ≈ p,
  a convergent series b ≈ 0.  b > 0.5 → asymptotic.  A tail that falls abruptly
  to round-off (far below the extrapolation of the coefficients before it)
  → terminating.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .pade import froissart_mask, pade_coefficients, pade_evaluate, pade_poles

#: Scaled coefficients below this fraction of the largest one count as round-off.
NOISE_RTOL = 1e-11
#: Growth exponent b above which a series counts as factorially divergent.
ASYMPTOTIC_SLOPE = 0.5
#: Fewest pattern coefficients in the tail needed for estimates.
MIN_TAIL = 4


@dataclass(frozen=True)
class CoefficientAnalysis:
    kind: str
    period: int
    offset: int
    last_significant: int
    growth_exponent: float
    ratio: float
    root: float
    domb_sykes: float
    pade: float
    pade_poles: np.ndarray  # stable poles in λ (all p roots of each μ-pole)
    pade_energies: np.ndarray  # Padé value near each pole (for EP seeds)
    notes: tuple[str, ...] = field(default=())


def _nan_result(kind, p, o, k0, notes, b=np.nan):
    return CoefficientAnalysis(kind, p, o, k0, b, np.nan, np.nan, np.nan, np.nan, np.zeros(0, complex), np.zeros(0, complex), tuple(notes))


def analyse(c: np.ndarray, energy_scale: float) -> CoefficientAnalysis:
    """Growth class and radius estimates from the coefficients ``c`` (K+1,).

    ``energy_scale`` (the isolation distance of the level) sets the coupling
    scale ``s = min_k (energy_scale / |c_k|)^(1/k)`` at which the largest term
    ``|c_k| s^k`` equals it; round-off in the scaled coefficients then sits near
    machine precision of the largest one.
    """
    c = np.asarray(c, dtype=float)
    K = c.size - 1
    notes: list[str] = []
    k = np.arange(K + 1)
    mag = np.abs(c)
    nzk = np.flatnonzero(mag[1:] > 0) + 1
    if nzk.size == 0:
        return _nan_result("terminating", 1, 0, 0, ["all corrections beyond order 0 vanish"])
    es = energy_scale if np.isfinite(energy_scale) and energy_scale > 0 else float(np.max(mag[1:]))
    with np.errstate(all="ignore"):
        s = float(np.min((es / mag[nzk]) ** (1.0 / nzk)))
        cs = np.where(mag > 0, np.exp(np.log(np.where(mag > 0, mag, 1.0)) + k * np.log(s)), 0.0)
    cs[0] = 0.0
    top = float(np.max(cs))
    sig = cs > NOISE_RTOL * top
    k0 = int(np.flatnonzero(sig)[-1])

    p, o = _pattern(cs, sig, k0)

    # ---- terminating: the tail falls to round-off abruptly
    if K - k0 >= max(3, 2 * p):
        on = [j for j in range(1, k0 + 1) if sig[j] and (j - o) % p == 0]
        if len(on) >= 2:
            q = (cs[on[-1]] / cs[on[-2]]) ** (1.0 / (on[-1] - on[-2]))
        else:
            q = 1.0
        with np.errstate(over="ignore", under="ignore"):
            extrapolated = cs[k0] * q ** (K - k0)
        if extrapolated > 1e4 * NOISE_RTOL * top:
            return _nan_result("terminating", p, o, k0, [f"coefficients beyond order {k0} vanish to round-off"])
        notes.append(f"coefficients beyond order {k0} are below round-off; estimates use orders <= {k0}")

    js = np.array([j for j in range((o if o > 0 else 0), k0 + 1) if (j - o) % p == 0])
    jidx = (js - o) // p  # index in the μ-series
    d = c[js]
    pos = js >= 1
    if np.count_nonzero(pos) < MIN_TAIL + 2:
        notes.append(f"only {np.count_nonzero(pos)} usable coefficients: too few for radius estimates; ask for a higher order")
        return _nan_result("convergent", p, o, k0, notes)

    jj = jidx[pos].astype(float)
    dd = d[pos]
    mag = np.abs(dd)
    with np.errstate(divide="ignore"):
        logm = np.where(mag > 0, np.log(np.where(mag > 0, mag, 1.0)), -np.inf)
    env = np.array([np.max(logm[max(0, i - 2) : i + 3]) for i in range(logm.size)])
    half = max(MIN_TAIL, logm.size // 2)
    tail = slice(logm.size - half, logm.size)
    jt = jj[tail]
    et = env[tail]

    # ---- growth class: log|ratio| vs log j (Theil–Sen slope, robust to outliers)
    b = _growth_exponent(jj, dd, half)
    if np.isfinite(b) and b > ASYMPTOTIC_SLOPE and _confirm_factorial(jj, dd, logm, half, p):
        return _nan_result("asymptotic", p, o, k0, notes, b)

    # ---- root test: upper hull of log|d_j| + 1.5 log j (square-root branch point,
    # generic at an exceptional point, gives |d_j| ~ j^(-3/2) R^(-j) |cos(jθ + φ)|)
    corr = logm + 1.5 * np.log(jj)
    hv = _upper_hull(jj[tail], corr[tail])
    if hv.size >= 2:
        coef = _lstsq(np.column_stack([np.ones(hv.size), jj[tail][hv]]), corr[tail][hv])
        r_root_mu = float(np.exp(-coef[1])) if coef is not None else np.nan
        if coef is None and hv.size == 2:
            sl = (corr[tail][hv[1]] - corr[tail][hv[0]]) / (jj[tail][hv[1]] - jj[tail][hv[0]])
            r_root_mu = float(np.exp(-sl))
    else:
        r_root_mu = np.nan

    # ---- ratio test (last ratios, not extrapolated) and Domb–Sykes (extrapolated in 1/j)
    r_ratio_mu, r_ds_mu = _ratio_estimates(jj, dd, half)
    # ---- Padé poles
    r_pade_mu, poles_l, energies = _pade_radius(c, d, jidx, p, o)

    conv = lambda r: float(r) ** (1.0 / p) if np.isfinite(r) and r > 0 else np.nan  # noqa: E731
    return CoefficientAnalysis(
        "convergent",
        p,
        o,
        k0,
        float(b),
        conv(r_ratio_mu),
        conv(r_root_mu),
        conv(r_ds_mu),
        conv(r_pade_mu),
        poles_l,
        energies,
        tuple(notes),
    )


def _pattern(cs: np.ndarray, sig: np.ndarray, k0: int) -> tuple[int, int]:
    """Smallest period p >= 2 (and offset) such that off-pattern tail terms vanish."""
    lo = max(1, k0 // 2)
    tail = np.arange(lo, k0 + 1)
    if tail.size < 4:
        return 1, 0
    for p in (2, 3, 4):
        for o in range(p):
            on = tail[(tail - o) % p == 0]
            off = tail[(tail - o) % p != 0]
            if on.size >= 2 and not np.any(sig[off]) and np.all(sig[on]):
                return p, o
    return 1, 0


def _lstsq(a: np.ndarray, y: np.ndarray) -> np.ndarray | None:
    ok = np.isfinite(y)
    if np.count_nonzero(ok) < a.shape[1] + 1:
        return None
    sol, *_ = np.linalg.lstsq(a[ok], y[ok], rcond=None)
    return sol


def _slope(x: np.ndarray, y: np.ndarray) -> float:
    sol = _lstsq(np.column_stack([np.ones_like(x), x]), y)
    return float(sol[1]) if sol is not None else np.nan


def _regular_ratios(jj: np.ndarray, dd: np.ndarray, half: int) -> tuple[np.ndarray, np.ndarray, bool]:
    with np.errstate(divide="ignore", invalid="ignore"):
        r = dd[1:] / np.where(dd[:-1] != 0, dd[:-1], np.nan)
    n = min(half, r.size)
    rt, jt = r[-n:], jj[1:][-n:]
    regular = bool(np.all(np.isfinite(rt)) and (np.all(rt > 0) or np.all(rt < 0)))
    return rt, jt, regular


def _hg_quotient(jj: np.ndarray, dd: np.ndarray, half: int) -> tuple[np.ndarray, np.ndarray]:
    """Hunter–Guerrieri quotient (tail) and its j values."""
    num = dd[2:-1] ** 2 - dd[3:] * dd[1:-2]
    den = dd[1:-2] ** 2 - dd[2:-1] * dd[:-3]
    with np.errstate(divide="ignore", invalid="ignore"):
        h = num / den
    jh = jj[3:]
    n = min(half, h.size)
    return h[-n:], jh[-n:]


def _theil_sen(x: np.ndarray, y: np.ndarray) -> float:
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    if x.size < 3:
        return np.nan
    i, j = np.triu_indices(x.size, k=1)
    dx = x[j] - x[i]
    keep = dx != 0
    return float(np.median((y[j] - y[i])[keep] / dx[keep]))


def _growth_exponent(jj: np.ndarray, dd: np.ndarray, half: int) -> float:
    """b in |ratio_j| ~ j^b: ≈ 0 for a convergent series, ≈ p for factorial growth."""
    rt, jt, regular = _regular_ratios(jj, dd, half)
    if regular:
        return _theil_sen(np.log(jt), np.log(np.abs(rt)))
    if dd.size < 6:
        return np.nan
    h, jh = _hg_quotient(jj, dd, half)
    ok = np.isfinite(h) & (h > 0)
    return _theil_sen(np.log(jh[ok]), 0.5 * np.log(h[ok]))


def _confirm_factorial(jj: np.ndarray, dd: np.ndarray, logm: np.ndarray, half: int, p: int) -> bool:
    """Second, independent sign of factorial growth (guards against beats of several singularities).

    Regular signs: the ratios |d_j/d_{j-1}| increase steadily (>= 80 % of steps).
    Oscillating signs: the growth rate of the upper envelope of log|d_j| over the
    last third exceeds that over the middle third by more than 0.4 p (factorial
    growth: p log(5/3) ≈ 0.51 p; geometric growth: 0).
    """
    rt, _, regular = _regular_ratios(jj, dd, half)
    if regular:
        a = np.abs(rt)
        return bool(np.mean(np.diff(a) > 0) >= 0.8)
    n = jj.size
    if n < 9:
        return False
    thirds = [slice(n // 3, 2 * n // 3 + 1), slice(2 * n // 3, n)]
    slopes = []
    for sl in thirds:
        x, y = jj[sl], logm[sl]
        hv = _upper_hull(x, y)
        if hv.size < 2:
            return False
        slopes.append((y[hv[-1]] - y[hv[0]]) / (x[hv[-1]] - x[hv[0]]))
    return bool(slopes[1] - slopes[0] > 0.4 * p)


def _upper_hull(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Indices of the upper convex hull of points (x ascending), finite y only."""
    idx = [i for i in range(x.size) if np.isfinite(y[i])]
    hull: list[int] = []
    for i in idx:
        while len(hull) >= 2:
            i1, i2 = hull[-2], hull[-1]
            cross = (x[i2] - x[i1]) * (y[i] - y[i1]) - (y[i2] - y[i1]) * (x[i] - x[i1])
            if cross >= 0:
                hull.pop()
            else:
                break
        hull.append(i)
    return np.array(hull, dtype=int)


def _ratio_estimates(jj: np.ndarray, dd: np.ndarray, half: int) -> tuple[float, float]:
    """(ratio-test radius, Domb–Sykes radius) of the μ-series."""
    rt, jt, regular = _regular_ratios(jj, dd, half)
    if regular:
        ratio = float(1.0 / np.median(np.abs(rt[-3:])))
        sol = _lstsq(np.column_stack([np.ones_like(jt), 1.0 / jt]), rt)
        ds = float(1.0 / abs(sol[0])) if sol is not None and sol[0] != 0 else np.nan
        return ratio, ds
    # complex-conjugate pair: Hunter–Guerrieri quotient -> 1/|μ0|^2
    if dd.size < 6:
        return np.nan, np.nan
    h, jh = _hg_quotient(jj, dd, half)
    last = h[-3:][np.isfinite(h[-3:]) & (h[-3:] > 0)]
    ratio = float(1.0 / np.sqrt(np.median(last))) if last.size else np.nan
    # pairwise linear extrapolation in 1/j, then the median (robust to near-zero denominators)
    ext = (jh[1:] * h[1:] - jh[:-1] * h[:-1]) / (jh[1:] - jh[:-1])
    ext = ext[np.isfinite(ext) & (ext > 0)]
    if ext.size == 0:
        return ratio, np.nan
    return ratio, float(1.0 / np.sqrt(np.median(ext)))


def _pade_radius(c: np.ndarray, d: np.ndarray, jidx: np.ndarray, p: int, o: int) -> tuple[float, np.ndarray, np.ndarray]:
    """Nearest stable non-Froissart Padé pole of the μ-series; λ-poles; energies."""
    # full μ-series g(μ) = Σ_j d_j μ^j (off-pattern head terms are entire and dropped)
    g = np.zeros(int(jidx[-1]) + 1)
    g[jidx] = d
    J = g.size - 1
    if J < 4:
        return np.nan, np.zeros(0, complex), np.zeros(0, complex)
    m1 = J // 2
    l1 = J - m1
    poles = []
    for num, den in ((l1, m1), (l1 - 1, m1 - 1)):
        if den < 1:
            return np.nan, np.zeros(0, complex), np.zeros(0, complex)
        a, b = pade_coefficients(g, num, den)
        pl = pade_poles(b)
        bad = froissart_mask(a, b)
        poles.append((pl[~bad], a, b))
    top, a1, b1 = poles[0]
    low = poles[1][0]
    stable = [z for z in top if low.size and np.min(np.abs(low - z)) <= 0.05 * abs(z)]
    stable = np.array(stable, dtype=complex)
    if stable.size == 0:
        return np.nan, np.zeros(0, complex), np.zeros(0, complex)
    r_mu = float(np.min(np.abs(stable)))
    # λ-roots of each μ-pole and a rough energy there (the Padé value slightly inside)
    lam_poles, energies = [], []
    coef_full = c
    for z in stable[:6]:
        for l in range(p):
            lam = complex(z) ** (1.0 / p) * np.exp(2j * np.pi * l / p)
            lam_poles.append(lam)
            mu_in = (0.85 * lam) ** p
            val = pade_evaluate(a1, b1, mu_in) * (0.85 * lam) ** o
            head = sum(coef_full[k] * (0.85 * lam) ** k for k in range(coef_full.size) if (k - o) % p != 0)
            energies.append(complex(val + head) if np.isfinite(val) else np.nan)
    return r_mu, np.array(lam_poles, dtype=complex), np.array(energies, dtype=complex)
