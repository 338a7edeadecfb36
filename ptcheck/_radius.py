"""Radius of convergence and growth class from Taylor coefficients (private).

Works on the energy coefficients ``c_0 … c_K`` of one level.

* Coefficients are compared on a coupling scale ``s`` at which the largest
  term ``|c_k| s^k`` equals the isolation distance of the level
  (``ĉ_k = c_k s^k``); round-off then sits near machine precision of the
  largest ``|ĉ_k|``, and a tail that falls there abruptly marks a terminating
  series.
* *Pattern*: when in the tail only every p-th coefficient (``k ≡ o mod p``) is
  nonzero (p = 2: a series in λ², e.g. parity), the analysis runs on
  ``d_j = c_{o + p j}``, a series in ``μ = λ^p``; radii convert back with
  ``R_λ = R_μ^(1/p)``.
* *Root test*: slope of the upper envelope of ``log|d_j| + 1.5 log j`` over the
  tail (a line refitted to the points not far below it, so that the troughs of
  oscillating coefficients from complex-conjugate singularities do not
  matter; the 1.5 log j removes the j^(-3/2) of a square-root branch point).
* *Ratio test*: median of the last three ratios ``|d_{j-1}/d_j|`` (for
  oscillating signs: of the Hunter–Guerrieri quotient below), not extrapolated.
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
* *Growth class*: factorial growth needs two signs: ``|r_j| ~ j^b`` with
  b > 0.5 (Theil–Sen slope of log|r_j| against log j; for oscillating signs
  the rise of the envelope slope between the middle and last third), and an
  envelope slope that rises steadily over three windows of the tail by the
  amount that growth implies (beats of several singularities make it rise
  and fall).  Both are judged in the pattern index j, so Γ(j + a) growth of
  every p-th coefficient is found as well.  A root-test radius that keeps
  shrinking as orders are added is never called convergent (asymptotic, with
  a note) — unless the model is known not to be a truncated basis: a finite
  problem's level is analytic in a disc (Kato 1966, ch. II), so both signs
  then only mark the estimates as unsettled (convergent, with a note).  A tail that sits at round-off far below the trend of the
  coefficients before it → terminating.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .pade import froissart_mask, pade_coefficients, pade_poles

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
    notes: tuple[str, ...] = field(default=())
    #: estimates still shrinking with the order in a model known not to be truncated (reported as convergent)
    unsettled: bool = False


def _nan_result(kind, p, o, k0, notes, b=np.nan):
    return CoefficientAnalysis(kind, p, o, k0, b, np.nan, np.nan, np.nan, np.nan, np.zeros(0, complex), tuple(notes))


def analyse(c: np.ndarray, energy_scale: float, *, truncated: bool | None = None) -> CoefficientAnalysis:
    """Growth class and radius estimates from the coefficients ``c`` (K+1,).

    ``truncated`` is the model's :attr:`ptcheck.Model.truncated`.  For
    ``False`` (a finite problem in its complete basis) the growth class is
    never 'asymptotic': signs of factorial growth or a shrinking root-test
    radius only add a note and set ``unsettled``.

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

    # ---- terminating: the tail sits at round-off AND far below the trend of the head
    if K - k0 >= max(3, 2 * p):
        on = np.array([j for j in range(1, k0 + 1) if sig[j] and (j - o) % p == 0])
        head = np.log(cs[on])
        q = 0.0  # log growth per order; one point only: no trend (Kato: |ĉ_k| stays bounded)
        if on.size >= 2:
            hv = _upper_hull(on.astype(float), head)
            q = min(0.0, (head[hv[-1]] - head[hv[0]]) / (on[hv[-1]] - on[hv[0]])) if hv.size >= 2 else 0.0
        extrapolated = float(np.max(head[-3:])) + q * (K - k0)
        tail = float(np.max(cs[k0 + 1 :]))
        if tail == 0 or np.log(tail) < extrapolated + np.log(1e-8):
            return _nan_result("terminating", p, o, k0, [f"coefficients beyond order {k0} vanish to round-off"])
    # a gradual decay below the round-off threshold is genuine: keep every order
    k0 = K

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
    factorial = bool(np.isfinite(b) and b > ASYMPTOTIC_SLOPE and _confirm_factorial(jj, dd, b))
    if factorial and truncated is not False:
        return _nan_result("asymptotic", p, o, k0, notes, b)
    shrink = _shrinking_radius(jj, dd)
    if shrink is not None and truncated is not False:
        r_half, r_full = shrink
        notes.append(
            f"the root-test radius keeps shrinking as orders are added ({r_half ** (1.0 / p):.3g} from the first half "
            f"of the coefficients, {r_full ** (1.0 / p):.3g} from all of them): no finite radius is in sight, so the "
            "series is treated as asymptotic, not convergent"
        )
        return _nan_result("asymptotic", p, o, k0, notes, b)
    unsettled = factorial or shrink is not None
    if unsettled:
        # a finite matrix family: the level is analytic in a disc (Kato 1966, ch. II), the series converges
        seen = (
            f"the root-test radius fell from {shrink[0] ** (1.0 / p):.3g} (first half of the coefficients) to "
            f"{shrink[1] ** (1.0 / p):.3g} (all of them)"
            if shrink is not None
            else f"the coefficient ratios still grow with the order (about like k^{b:.2g})"
        )
        notes.append(
            f"the radius estimates were still shrinking as orders were added: {seen}. The basis is not a truncation, "
            "so the series converges, but its radius may be smaller than estimated; check with more orders"
        )

    # ---- root test: upper envelope of log|d_j| + 1.5 log j (square-root branch point,
    # generic at an exceptional point, gives |d_j| ~ j^(-3/2) R^(-j) |cos(jθ + φ)|)
    corr = logm + 1.5 * np.log(jj)
    fit = _upper_fit(jj[tail], corr[tail])
    r_root_mu = float(np.exp(-fit[1])) if fit is not None else np.nan

    # ---- ratio test (last ratios, not extrapolated) and Domb–Sykes (extrapolated in 1/j)
    r_ratio_mu, r_ds_mu = _ratio_estimates(jj, dd, half)
    # ---- Padé poles
    r_pade_mu, poles_l = _pade_radius(d, jidx, p)

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
        tuple(notes),
        unsettled,
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
    """b in |ratio_j| ~ j^b: ≈ 0 for a convergent series, ≈ p for factorial growth.

    Regular signs: Theil–Sen slope of log|d_j/d_{j-1}| against log j over the
    tail.  Oscillating signs: the change of the upper-envelope slope of
    log|d_j| between the middle and the last third, divided by the change of
    log j between their centres.
    """
    rt, jt, regular = _regular_ratios(jj, dd, half)
    if regular:
        return _theil_sen(np.log(jt), np.log(np.abs(rt)))
    n = jj.size
    if n < 9:
        return np.nan
    with np.errstate(divide="ignore"):
        logm = np.log(np.abs(dd))
    slopes, centres = [], []
    for sl in (slice(n // 3, 2 * n // 3 + 1), slice(2 * n // 3, n)):
        fit = _upper_fit(jj[sl], logm[sl])
        if fit is None:
            return np.nan
        slopes.append(fit[1])
        centres.append(np.mean(jj[sl]))
    return float((slopes[1] - slopes[0]) / np.log(centres[1] / centres[0]))


def _upper_fit(x: np.ndarray, y: np.ndarray, *, drop: float = 0.5, rounds: int = 6) -> tuple[float, float] | None:
    """Line through the upper envelope of (x, y): refit on points no more than
    ``drop`` below the previous fit (drops the troughs of oscillating data)."""
    keep = np.isfinite(y)
    sol = None
    for _ in range(rounds):
        if np.count_nonzero(keep) < 2:
            break
        sol = _lstsq(np.column_stack([np.ones(np.count_nonzero(keep)), x[keep]]), y[keep]) if np.count_nonzero(keep) > 2 else None
        if sol is None:
            xi, yi = x[keep], y[keep]
            sol = np.array([yi[0] - (yi[1] - yi[0]) / (xi[1] - xi[0]) * xi[0], (yi[1] - yi[0]) / (xi[1] - xi[0])])
        res = y - (sol[0] + sol[1] * x)
        new = np.isfinite(y) & (res >= -drop)
        if np.array_equal(new, keep):
            break
        keep = new
    return None if sol is None else (float(sol[0]), float(sol[1]))


def _confirm_factorial(jj: np.ndarray, dd: np.ndarray, b: float) -> bool:
    """Second, independent sign of factorial growth (guards against beats of several singularities).

    Growth like Γ(j + a)^b in the pattern index j (b = 1 for the Γ(j + ½) of
    the cubic oscillator in λ², or the Γ(j + ½) of the quartic one in λ; Bender
    & Wu 1969, 1973) gives an upper-envelope slope of log|d_j| ≈ b log j.  The
    slope must rise steadily over three windows [J/4, J/2], [J/2, 3J/4],
    [3J/4, J], each step by more than 40 % of the rise b log(centre ratio)
    that growth would give (b log(5/3) ≈ 0.51 b, b log(7/5) ≈ 0.34 b);
    geometric growth with beats between singularities rises and falls.
    """
    J = jj.size
    if J < 12:
        return False
    with np.errstate(divide="ignore"):
        logm = np.log(np.abs(dd))
    edges = [J // 4, J // 2, 3 * J // 4, J]
    slopes, centres = [], []
    for lo, hi in zip(edges[:-1], edges[1:]):
        fit = _upper_fit(jj[lo:hi], logm[lo:hi])
        if fit is None:
            return False
        slopes.append(fit[1])
        centres.append(float(np.mean(jj[lo:hi])))
    want = 0.4 * b * np.diff(np.log(centres))
    return bool(np.all(np.diff(slopes) > want))


#: A root-test radius (in the pattern variable) that drops below this fraction of its
#: value from the first half of the coefficients, monotonically, is "shrinking".
SHRINK_RATIO = 0.8


def _shrinking_radius(jj: np.ndarray, dd: np.ndarray) -> tuple[float, float] | None:
    """(radius from the first half, radius from all) when the root-test radius keeps shrinking.

    The root-test radius ``exp(−slope)`` of the upper envelope of
    ``log|d_j| + 1.5 log j`` over the second half of the first m coefficients,
    for m = J/2, 3J/4, J.  A convergent series settles (its estimates move by
    O(1/J)); factorial growth makes it fall like 1/J.  Returned only when it
    falls at every step and by more than :data:`SHRINK_RATIO` overall.
    """
    J = jj.size
    if J < 12:
        return None
    with np.errstate(divide="ignore"):
        corr = np.log(np.abs(dd)) + 1.5 * np.log(jj)
    radii = []
    for m in (J // 2, 3 * J // 4, J):
        lo = m // 2
        fit = _upper_fit(jj[lo:m], corr[lo:m])
        if fit is None:
            return None
        radii.append(float(np.exp(-fit[1])))
    r = np.array(radii)
    if np.all(np.isfinite(r)) and np.all(np.diff(r) < 0) and r[-1] < SHRINK_RATIO * r[0]:
        return float(r[0]), float(r[-1])
    return None


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


def _pade_radius(d: np.ndarray, jidx: np.ndarray, p: int) -> tuple[float, np.ndarray]:
    """Nearest stable non-Froissart Padé pole of the μ-series (radius in μ); poles in λ."""
    # μ-series g(μ) = Σ_j d_j μ^j (off-pattern head terms are entire and dropped)
    g = np.zeros(int(jidx[-1]) + 1)
    g[jidx] = d
    J = g.size - 1
    none = (np.nan, np.zeros(0, complex))
    if J < 4:
        return none
    m1 = J // 2
    l1 = J - m1
    poles = []
    for num, den in ((l1, m1), (l1 - 1, m1 - 1)):
        a, b = pade_coefficients(g, num, den)
        pl = pade_poles(b)
        poles.append(pl[~froissart_mask(a, b)])
    top, low = poles
    stable = np.array([z for z in top if low.size and np.min(np.abs(low - z)) <= 0.05 * abs(z)], dtype=complex)
    if stable.size == 0:
        return none
    r_mu = float(np.min(np.abs(stable)))
    lam_poles = [complex(z) ** (1.0 / p) * np.exp(2j * np.pi * l / p) for z in stable[:6] for l in range(p)]
    return r_mu, np.array(lam_poles, dtype=complex)
