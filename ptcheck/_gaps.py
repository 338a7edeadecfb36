"""Per-level engine of :mod:`ptcheck.bounds`: gaps, Kato–Temple intervals, identification.

Notation: level n (work index = unperturbed energy rank), E_(k)(λ) the k-th
exact eigenvalue of H(λ) in ascending order.  A *gap* is a pair (α, β) with
α ≥ E_(n−1)(λ) and β ≤ E_(n+1)(λ).

Inequalities used (each re-derived here from ⟨(H − a)(H − b)⟩_ψ = r² + (ρ − a)(ρ − b)
for a normalised ψ with ρ = ⟨H⟩_ψ and r = ‖(H − ρ)ψ‖):

- Weinstein / Krylov–Bogoliubov: some eigenvalue lies in [ρ − r, ρ + r]
  (D. H. Weinstein, PNAS 20, 529 (1934)); more generally within ‖(H − t)ψ‖ of any t.
- Kato–Temple: if α < ρ < β and (α, β) holds at most the one eigenvalue E,
  then ρ − r²/(β − ρ) ≤ E ≤ ρ + r²/(ρ − α) (G. Temple, Proc. R. Soc. A 119, 276
  (1928); T. Kato, J. Phys. Soc. Japan 4, 334 (1949)).  With α ≥ E_(n−1) and
  β ≤ E_(n+1) the eigenvalue is E_(n), whatever the trial state.
- Weyl: E_(k)(H0 + λV) ∈ E0_k + [λ-range of spec(λV)], and E_(k)(λ') − E_(k)(λ)
  ∈ (λ' − λ)·[v_min, v_max] for λ' ≥ λ (H. Weyl, Math. Ann. 71, 441 (1912)).
- Poincaré / Cauchy interlacing: the j-th smallest Ritz value of any subspace
  is ≥ E_(j).

Identification (the interval is about the level that carries the label, i.e.
the branch continuous from the unperturbed level): E_(n) is that branch on
[0, λ] if E_(n) stays separated from E_(n±1) on the whole path.  At a node μ
with rank-n interval [lo, hi] the separation is at least
sep = min(β − hi, lo − α); by Weyl it persists on |μ' − μ| < sep / (v_max − v_min).
The walk places nodes until these windows cover the path (see :meth:`LevelEngine.walk`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ._krylov import deflated_spectrum, refine
from ._trial import EPS, OperatorScales, SeriesTrial
from .errors import DegenerateLevelError
from .model import Model

#: Gap sources of :func:`ptcheck.error_bounds` (a positive number = ``"given"``).
GAP_KINDS = ("auto", "weyl", "neighbours", "estimate")


@dataclass(frozen=True)
class Settings:
    """Options of one bounds computation, validated at the public edge."""

    gap: str
    gap_value: float | None
    trial_order: int
    krylov_steps: int
    lanczos_steps: int | None  # None: 20 + 4 n for level n, at most N
    seed: int
    max_nodes: int = 20000
    max_estimate_nodes: int = 48


@dataclass
class _Node:
    """A point of the identification walk: |λ|, the proven separation there, and its kind."""

    s: float
    sep: float
    rigorous: bool


@dataclass
class Walk:
    """Identification along one ray: nodes and the reach of their windows."""

    direction: int
    nodes: list = field(default_factory=list)
    rigorous_reach: float = 0.0
    reach: float = 0.0
    stalled: bool = False
    phase: str = "rigorous"
    estimate_nodes: int = 0


def _temple(rho, r, d_rho, alpha, beta):
    """Kato–Temple interval (lo, hi) and its validity mask; ρ known to ± d_rho."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ok = (rho - d_rho > alpha) & (rho + d_rho < beta)
        lo = (rho - d_rho) - r**2 / (beta - rho - d_rho)
        hi = (rho + d_rho) + r**2 / (rho - d_rho - alpha)
    lo = np.where(ok, lo, -np.inf)
    hi = np.where(ok, hi, np.inf)
    return lo, hi, ok


class LevelEngine:
    """Bounds machinery for one non-degenerate level."""

    def __init__(self, model: Model, level: int, settings: Settings, scales: OperatorScales) -> None:
        self.model, self.n, self.settings, self.scales = model, level, settings, scales
        self.trial = SeriesTrial(model, level, settings.trial_order, scales)
        self.mat_vecs = self.trial.mat_vecs
        self.notes: list[str] = []
        self._neighbours: dict[int, SeriesTrial | None] = {}
        self._estimates: dict[float, tuple[float, float, float]] = {}
        self._walks: dict[int, Walk] = {}
        self._warm: np.ndarray | None = None
        self._rng = np.random.default_rng(settings.seed)
        e0 = model.e0
        self.dv = scales.v_max - scales.v_min
        self.sep0 = min(e0[level + 1] - e0[level] if level + 1 < model.n else np.inf,
                        e0[level] - e0[level - 1] if level > 0 else np.inf)

    # ---------------------------------------------------------------- Weyl
    def weyl_rank(self, lam: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
        """Rigorous range of E_(k)(λ) (Weyl); by convention E_(−1) = −inf and E_(N) = +inf."""
        if k < 0:
            return np.full(lam.shape, -np.inf), np.full(lam.shape, -np.inf)
        if k >= self.model.n:
            return np.full(lam.shape, np.inf), np.full(lam.shape, np.inf)
        a, b = self.scales.shift_range(lam)
        e = self.model.e0[k]
        return e + a, e + b

    def weyl_gap(self, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        alpha = self.weyl_rank(lam, self.n - 1)[1]
        beta = self.weyl_rank(lam, self.n + 1)[0]
        return alpha, beta

    # ---------------------------------------------------------------- neighbours
    def _neighbour(self, k: int) -> SeriesTrial | None:
        if k not in self._neighbours:
            trial = None
            if 0 <= k < self.model.n:
                try:
                    trial = SeriesTrial(self.model, k, self.settings.trial_order, self.scales)
                    self.mat_vecs += trial.mat_vecs
                except (DegenerateLevelError, FloatingPointError) as exc:
                    self.notes.append(
                        f"Neighbouring level {self.model.label(k)} has no usable series ({type(exc).__name__}); "
                        "the gap on that side comes from Weyl's inequality alone."
                    )
            self._neighbours[k] = trial
        return self._neighbours[k]

    def _worth(self, k: int, outer: int) -> bool:
        """With gap "auto": build neighbour k's trial only if it can beat Weyl.

        Its Kato–Temple interval needs Weyl's bound on the next level out
        (``outer``); that is only useful when the next spacing out is at least
        half the level's own spacing to k.
        """
        if self.settings.gap == "neighbours" or not 0 <= outer < self.model.n:
            return True
        e0 = self.model.e0
        return abs(e0[outer] - e0[k]) >= 0.5 * abs(e0[k] - e0[self.n])

    def neighbour_gap(self, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(α, β) from the neighbours' own Kato–Temple intervals, closed by Weyl one level further out."""
        alpha, beta = self.weyl_gap(lam)
        n = self.n
        up = self._neighbour(n + 1) if n + 1 < self.model.n and self._worth(n + 1, n + 2) else None
        if up is not None:
            rho, r, d = up.evaluate(lam)
            beta_next = self.weyl_rank(lam, self.n + 2)[0]
            lo, _, ok = _temple(rho, r, d, np.full(lam.shape, -np.inf), beta_next)
            beta = np.where(ok, np.maximum(beta, lo), beta)
        down = self._neighbour(n - 1) if n > 0 and self._worth(n - 1, n - 2) else None
        if down is not None:
            rho, r, d = down.evaluate(lam)
            alpha_next = self.weyl_rank(lam, self.n - 2)[1]
            _, hi, ok = _temple(rho, r, d, alpha_next, np.full(lam.shape, np.inf))
            alpha = np.where(ok, np.minimum(alpha, hi), alpha)
        return alpha, beta

    def rigorous_gap(self, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(α, β, kind) from the rigorous source asked for (weyl, or weyl + neighbours)."""
        aw, bw = self.weyl_gap(lam)
        if self.settings.gap == "weyl":
            return aw, bw, np.full(lam.shape, "weyl", dtype=object)
        a, b = self.neighbour_gap(lam)
        kind = np.where((b > bw) | (a < aw), "neighbours", "weyl").astype(object)
        return a, b, kind

    # ---------------------------------------------------------------- estimate (Lanczos)
    def estimate_at(self, coupling: float) -> tuple[float, float]:
        """Estimated (α, β) at one coupling from a deflated Lanczos run (Ritz values of H with the trial removed)."""
        key = float(coupling)
        if key in self._estimates:
            return self._estimates[key][:2]
        psi = self.trial.best_vector(key)
        start = self._rng.standard_normal(self.model.n)
        if self._warm is not None:
            start = self._warm + 0.1 * start / np.sqrt(self.model.n)
        steps = self.settings.lanczos_steps or min(20 + 4 * self.n, self.model.n)
        h_norm = float(self.scales.h_scale(np.array(key)))
        res = deflated_spectrum(self.model, key, psi, steps, start, keep=self.n, h_norm=h_norm)
        self.mat_vecs += res.mat_vecs
        self._warm = res.warm
        w, rr = res.ritz_values, res.residuals
        if self.n == 0:
            alpha = -np.inf
        else:
            alpha = float(w[self.n - 1]) if w.size >= self.n else np.inf
        beta = float(w[self.n] - rr[self.n]) if w.size > self.n else -np.inf
        aw, bw = self.weyl_gap(np.array([key]))
        alpha, beta = min(alpha, float(aw[0])), max(beta, float(bw[0]))
        rho = float(self.trial.evaluate(np.array([key]))[0][0])
        self._estimates[key] = (alpha, beta, min(beta - rho, rho - alpha))
        return alpha, beta

    def transported_estimate(self, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Estimated (α, β) at couplings from the nearest Lanczos node, moved by Weyl's slope bound.

        A node is reused within half its gap divided by ‖V‖'s bound; farther away a
        new Lanczos run is made at the coupling itself.
        """
        alpha = np.full(lam.shape, -np.inf if self.n == 0 else np.inf)
        beta = np.full(lam.shape, -np.inf)
        v_big = max(abs(self.scales.v_min), abs(self.scales.v_max), 1e-300)
        for i, x in enumerate(lam):
            mu = min(self._estimates, key=lambda m: abs(m - x), default=None)
            if mu is None or not abs(x - mu) <= 0.5 * max(self._estimates[mu][2], 0.0) / v_big:
                self.estimate_at(float(x))
                mu = float(x)
            a_mu, b_mu, _ = self._estimates[mu]
            d = x - mu
            lo_shift, hi_shift = min(d * self.scales.v_min, d * self.scales.v_max), max(d * self.scales.v_min, d * self.scales.v_max)
            if self.n > 0:
                alpha[i] = a_mu + hi_shift
            beta[i] = b_mu + lo_shift
        aw, bw = self.weyl_gap(lam)
        return np.minimum(alpha, aw), np.maximum(beta, bw)

    # ---------------------------------------------------------------- intervals
    def interval(self, lam: np.ndarray, alpha: np.ndarray, beta: np.ndarray, *, krylov: bool = False):
        """Rigorous range of E_(n) given (α, β): Kato–Temple with every trial, intersected, ∩ Weyl.

        Trials: the series state, every Ritz pair of span{ψ^(0..K)}, and (``krylov``)
        a Krylov refinement.  Each valid Kato–Temple interval contains E_(n), so
        their intersection does too.  ``alpha`` is lowered in place by the Ritz
        values (interlacing).  Returns lo, hi, rho, r, ok (shape of ``lam``),
        with (rho, r) the trial giving the narrowest interval.
        """
        rho, r, d = self.trial.evaluate(lam)
        ritz, rr, dr = self.trial.subspace(lam)
        h_pad = 8 * EPS * self.scales.h_scale(lam)
        if self.n > 0 and ritz.shape[1] >= self.n:
            # Poincaré: E_(n−1) ≤ the largest Rayleigh quotient on the span of the n lowest Ritz vectors,
            # which exceeds the computed θ_(n−1) by at most the rounding of the n × n projection
            pad = self.n * np.max(dr[:, : self.n], axis=1) + h_pad
            np.minimum(alpha, ritz[:, self.n - 1] + pad, out=alpha)
        lo, hi, ok = _temple(rho, r, d, alpha, beta)
        l2, h2, ok2 = _temple(ritz, rr, dr, alpha[:, None], beta[:, None])
        width = np.where(ok, hi - lo, np.inf)
        w2 = np.where(ok2, h2 - l2, np.inf)
        best = np.argmin(w2, axis=1)
        idx = np.arange(lam.size)
        better = w2[idx, best] < width
        rho = np.where(better, ritz[idx, best], rho)
        r = np.where(better, rr[idx, best], r)
        lo = np.maximum(lo, np.max(l2, axis=1, initial=-np.inf))
        hi = np.minimum(hi, np.min(h2, axis=1, initial=np.inf))
        ok = ok | np.any(ok2, axis=1)
        if krylov and self.settings.krylov_steps > 0:
            for i, x in enumerate(lam):
                ref = refine(self.model, float(x), self.trial.best_vector(float(x)), self.settings.krylov_steps)
                self.mat_vecs += ref.mat_vecs
                dk = 8 * EPS * float(self.scales.h_scale(np.array(x)))
                if self.n > 0 and ref.ritz_values.size >= self.n:
                    alpha[i] = min(alpha[i], float(ref.ritz_values[self.n - 1]) + ref.ritz_values.size * dk)
                l3, h3, ok3 = _temple(np.array(ref.value), np.array(ref.residual + dk), np.array(dk), np.array(alpha[i]), np.array(beta[i]))
                if ok3:
                    if float(h3 - l3) < hi[i] - lo[i]:
                        rho[i], r[i] = ref.value, ref.residual
                    lo[i], hi[i] = max(lo[i], float(l3)), min(hi[i], float(h3))
                    ok[i] = True
        wl, wh = self.weyl_rank(lam, self.n)
        lo = np.maximum(lo, wl) - h_pad
        hi = np.minimum(hi, wh) + h_pad
        return lo, hi, rho, r, ok

    def given_gap(self, lam: np.ndarray, delta: float) -> tuple[np.ndarray, np.ndarray]:
        """(α, β) from a user gap δ around the labelled level, via the Weinstein interval about E_K.

        The labelled level lies in [E_K − U, E_K + U] while 2U < δ (continuity from λ = 0: no other
        eigenvalue can enter an interval narrower than the gap); beyond that only Weyl's bounds remain.
        """
        c = self.trial.centre(lam)
        u = self.trial.residual_bound(lam)
        aw, bw = self.weyl_gap(lam)
        ok = 2.0 * u < delta
        return np.where(ok, np.minimum(c + u - delta, aw), aw), np.where(ok, np.maximum(c - u + delta, bw), bw)

    # ---------------------------------------------------------------- identification walk
    def _node(self, s: float, direction: int, use_estimate: bool) -> _Node:
        lam = np.array([direction * s])
        if use_estimate:
            a, b = self.estimate_at(float(lam[0]))
            alpha, beta, rig = np.array([a]), np.array([b]), False
        else:
            alpha, beta, _ = self.rigorous_gap(lam)
            rig = True
        lo, hi, _, _, ok = self.interval(lam, alpha, beta)  # lowers alpha by the Ritz values
        sep = float(min(beta[0] - hi[0], lo[0] - alpha[0])) if ok[0] else -np.inf
        return _Node(s, sep, rig)

    def walk(self, direction: int, extent: float) -> Walk:
        """Cover [0, extent] along ``direction`` with separation windows (see module notes).

        Rigorous gaps are used while they give windows; with gap ``"auto"`` or
        ``"estimate"`` the walk goes on with Lanczos estimates (conditional).
        Walks are kept and extended on later calls.
        """
        w = self._walks.get(direction)
        if w is None:
            w = Walk(direction)
            w.nodes.append(_Node(0.0, self.sep0, True))
            w.rigorous_reach = w.reach = self._window(self.sep0)
            self._walks[direction] = w
            w.phase = "estimate" if self.settings.gap == "estimate" else "rigorous"
        allow_estimate = self.settings.gap in ("auto", "estimate")
        while w.reach < extent and not w.stalled:
            last = w.nodes[-1].s
            min_progress = 1e-6 * extent
            step = 0.95 * (w.reach - last)
            placed = False
            tries = 0
            while step > min_progress:
                if w.phase == "estimate":  # each try costs a Lanczos run: few halvings, bounded count
                    tries += 1
                    w.estimate_nodes += 1
                    if tries > 4 or w.estimate_nodes > self.settings.max_estimate_nodes:
                        break
                s = min(last + step, extent)
                node = self._node(s, direction, w.phase == "estimate")
                win = self._window(node.sep)
                if s + win > w.reach + min_progress:
                    w.nodes.append(node)
                    w.reach = s + win
                    if w.phase == "rigorous":
                        w.rigorous_reach = w.reach
                    placed = True
                    break
                step *= 0.5
            if placed and len(w.nodes) <= self.settings.max_nodes:
                continue
            if not placed and w.phase == "rigorous" and allow_estimate:
                w.phase = "estimate"  # rigorous windows have shrunk to nothing: go on with estimates
                continue
            w.stalled = True
        return w

    def gap_floor(self, direction: int, s: float, *, rigorous_only: bool = False) -> float:
        """Lower bound on the exact gap around E_(n) over the whole path [0, s] (walk envelope).

        Each node μ_i bounds the gap by sep_i − (v_max − v_min)|μ − μ_i| (Weyl); the
        envelope of these tents is minimised exactly (falling and rising parts are
        single lines between consecutive nodes).  −inf if no walk covers [0, s].
        """
        w = self._walks.get(direction)
        if w is None:
            return -np.inf
        reach = w.rigorous_reach if rigorous_only else w.reach
        if reach < s:
            return -np.inf
        nodes = [nd for nd in w.nodes if nd.rigorous or not rigorous_only]
        mu = np.array([nd.s for nd in nodes])
        sep = np.array([nd.sep for nd in nodes])
        dv = self.dv
        if dv <= 0:
            return float(np.max(sep))
        pre = np.maximum.accumulate(sep + dv * mu)  # falling line through the best node on the left
        suf = np.maximum.accumulate((sep - dv * mu)[::-1])[::-1]  # rising line from the right
        vals = [sep[0]]
        for i in range(mu.size):
            a = mu[i]
            if a > s:
                break
            b = min(mu[i + 1], s) if i + 1 < mu.size else s
            if i + 1 < mu.size:
                x = np.clip((pre[i] - suf[i + 1]) / (2 * dv), a, b)
                vals.append(max(pre[i] - dv * x, suf[i + 1] + dv * x))
                if b == s:
                    vals.append(max(pre[i] - dv * s, suf[i + 1] + dv * s))
            else:
                vals.append(pre[i] - dv * b)
        return float(min(vals))

    def _window(self, sep: float) -> float:
        """Half-width in λ over which a proven separation ``sep`` persists (Weyl)."""
        if not np.isfinite(sep):
            return np.inf if sep > 0 else 0.0
        if sep <= 0:
            return 0.0
        if self.dv <= 0:
            return np.inf
        return sep / self.dv
