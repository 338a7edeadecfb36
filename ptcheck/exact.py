"""Exact side: eigen-solvers (dense, sparse, qutip) and level tracking along the coupling.

"Level n at λ" is the exact eigenstate continuously connected to unperturbed
level n (the work-basis unit vector e_n at λ = 0).  It is followed along each
ray of couplings (λ > 0 and λ < 0 separately) by overlap continuity: states at
consecutive couplings are matched with an assignment on |⟨ψ_prev|φ⟩|², and
the step is refined (midpoints inserted, recursively) wherever the match is
ambiguous.  A crossing narrower than the refinement can resolve is followed
diabatically and reported with a :class:`~ptcheck.errors.TrackingWarning`.
"""

from __future__ import annotations

import html
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.optimize import linear_sum_assignment, minimize_scalar

from . import _validation as val
from .errors import BasisTooLargeError, TrackingWarning
from .model import DENSE_LIMIT, Model

__all__ = ["BACKENDS", "AvoidedCrossing", "ExactSweep", "ExactSolver", "track", "eigenpairs"]

#: Exact backends.  ``"auto"``: dense for N <= 1500 or a dense V, sparse otherwise.
BACKENDS = ("auto", "dense", "sparse", "qutip")
_AUTO_DENSE_MAX = 1500
_FULL_DENSE_MAX = 600  # below this a dense solve returns the whole spectrum
_AMBIGUOUS = 0.6  # an overlap |<prev|new>|^2 below this is not a clear match
_MAX_DEPTH = 14  # step refinements (2^-14 of a step) before giving up and going diabatic


def _ro(a: Any) -> np.ndarray:
    a = np.array(a)
    a.setflags(write=False)
    return a


@dataclass(frozen=True)
class AvoidedCrossing:
    """An avoided crossing met by a tracked level.

    Attributes
    ----------
    coupling : float
        Coupling λ of the smallest gap.
    min_gap : float
        Smallest gap between the two levels (energy units).
    levels : tuple of int
        The tracked level and its partner (work indices; partner ``-1`` if it
        could not be identified with an unperturbed level).
    labels : tuple of str
    """

    coupling: float
    min_gap: float
    levels: tuple
    labels: tuple

    def to_dict(self) -> dict:
        return {"coupling": self.coupling, "min_gap": self.min_gap, "levels": list(self.levels), "labels": list(self.labels)}


@dataclass(frozen=True, repr=False, eq=False)
class ExactSweep:
    """Tracked exact levels over a set of couplings.

    Attributes
    ----------
    couplings : (C,) ndarray
        Couplings in the order given.
    levels : tuple of int
        Work indices of the tracked levels (length L).
    energies : (L, C) ndarray
        Exact energies (energy units).
    states : (L, C, N) ndarray or None
        Exact states in the work basis, normalised, phase continuous along each ray.
    avoided_crossings : tuple of AvoidedCrossing
    backend : str
        Backend actually used.
    solves : int
        Exact diagonalisations used.
    notes : tuple of str
    """

    couplings: np.ndarray
    levels: tuple
    energies: np.ndarray
    states: np.ndarray | None
    avoided_crossings: tuple
    backend: str
    solves: int
    labels: tuple = ()
    notes: tuple = field(default=())

    def energy(self, level: int) -> np.ndarray:
        """Energies of one tracked level, shape (C,)."""
        if level not in self.levels:
            raise ValueError(f"level {level} was not tracked; tracked levels are {list(self.levels)}")
        return self.energies[self.levels.index(level)]

    def __repr__(self) -> str:
        return (
            f"ExactSweep(levels={list(self.levels)}, couplings={self.couplings.size}, backend={self.backend!r}, "
            f"solves={self.solves}, avoided_crossings={len(self.avoided_crossings)})"
        )

    def to_dict(self) -> dict:
        return {
            "couplings": self.couplings.tolist(),
            "levels": list(self.levels),
            "labels": list(self.labels),
            "energies": self.energies.tolist(),
            "avoided_crossings": [a.to_dict() for a in self.avoided_crossings],
            "backend": self.backend,
            "solves": self.solves,
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        ac = "".join(
            f"<li>{html.escape(' / '.join(a.labels))} at λ = {a.coupling:.4g}, min gap {a.min_gap:.3g}</li>"
            for a in self.avoided_crossings
        )
        return f"<code>{html.escape(repr(self))}</code><ul>{ac}</ul>"


class ExactSolver:
    """Exact eigenpairs of ``H0 + λV`` with caching and level tracking.

    Parameters
    ----------
    model : Model
    backend : {"auto", "dense", "sparse", "qutip"}
        ``"auto"`` uses dense LAPACK for N <= 1500 or a dense V, sparse Lanczos
        (``eigsh``, shift-invert when an energy estimate is known) otherwise.
    n_levels_hint : int, optional
        How many levels will be tracked (sizes the eigenpair window).

    Attributes
    ----------
    solves : int
        Running count of exact diagonalisations.
    backend : str
        The resolved backend.
    """

    def __init__(self, model: Model, *, backend: str = "auto", n_levels_hint: int | None = None) -> None:
        backend = val.check_choice(backend, "backend", BACKENDS)
        if backend == "auto":
            backend = "dense" if (model.n <= _AUTO_DENSE_MAX or not sp.issparse(model.v)) else "sparse"
        if backend in ("dense", "qutip") and model.n > DENSE_LIMIT:
            raise BasisTooLargeError(
                f"backend {backend!r} needs a dense {model.n} x {model.n} matrix (N > {DENSE_LIMIT}); "
                "use backend='sparse' (or 'auto') for a basis this large"
            )
        if backend == "sparse" and model.n < 3:
            backend = "dense"
        self.model = model
        self.backend = backend
        self.solves = 0
        self._hint = max(1, int(n_levels_hint or 1))
        # per ray (+1/-1): {s: {level: (energy, state)}}
        self._paths: dict[int, dict[float, dict[int, tuple[float, np.ndarray]]]] = {1: {}, -1: {}}
        self._windows: dict[float, tuple[np.ndarray, np.ndarray]] = {}
        self.notes: list[str] = []

    # ---------------------------------------------------------------- eigen-solvers
    def eigenpairs(self, coupling: float, *, k: int, sigma: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """``k`` eigenvalues (ascending) and vectors ``(N, k)`` at ``coupling``.

        The lowest ``k`` when ``sigma`` is None, else the ``k`` nearest ``sigma``.
        """
        lam = val.as_coupling(coupling)
        n = self.model.n
        k = int(min(max(k, 1), n))
        self.solves += 1
        h = self.model.hamiltonian(lam)
        if self.backend == "qutip":
            import qutip

            q = qutip.Qobj(h)
            w, vecs = q.eigenstates()
            vec = np.column_stack([v.full().ravel() for v in vecs])
            return self._select(np.asarray(w, dtype=float), vec, k, sigma)
        if self.backend == "dense" or k >= n - 1:
            hd = h.toarray() if sp.issparse(h) else h
            if n <= _FULL_DENSE_MAX or sigma is not None or k >= n:
                w, vec = sla.eigh(hd)
                return self._select(w, vec, k, sigma)
            w, vec = sla.eigh(hd, subset_by_index=[0, k - 1])
            return w, vec
        from scipy.sparse.linalg import ArpackNoConvergence, eigsh

        hs = sp.csr_matrix(h)
        try:
            if sigma is None:
                w, vec = eigsh(hs, k=k, which="SA", tol=1e-12)
            else:
                w, vec = eigsh(hs, k=k, sigma=sigma, which="LM", tol=1e-12)
        except ArpackNoConvergence as exc:  # pragma: no cover - rare
            raise RuntimeError(f"sparse eigensolver did not converge at coupling {lam:g}: {exc}") from None
        order = np.argsort(w)
        return w[order], vec[:, order]

    @staticmethod
    def _select(w: np.ndarray, vec: np.ndarray, k: int, sigma: float | None):
        if sigma is None:
            return w[:k], vec[:, :k]
        idx = np.sort(np.argsort(np.abs(w - sigma))[:k])
        return w[idx], vec[:, idx]

    def _window(self, lam: float, prev_energies: list[float]) -> tuple[np.ndarray, np.ndarray]:
        """Eigenpairs around the previous energies of the levels being followed."""
        key = float(lam)
        if key in self._windows:
            return self._windows[key]
        n = self.model.n
        if self.backend in ("dense", "qutip") and n <= _FULL_DENSE_MAX:
            out = self.eigenpairs(lam, k=n)
        else:
            pad = 6
            # how many eigenvalues lie below the highest previous energy (estimate from H0 ranks)
            top = max(prev_energies)
            rank = int(np.searchsorted(self.model.e0, top + self.model.norm_v * abs(lam), side="right"))
            k = min(n, max(rank, len(prev_energies)) + pad)
            if k <= max(3 * self._hint + pad, 40) or self.backend == "dense":
                out = self.eigenpairs(lam, k=k)
            else:
                span = max(prev_energies) - min(prev_energies)
                out = self.eigenpairs(lam, k=min(n - 1, len(prev_energies) + 2 * pad), sigma=float(np.mean(prev_energies)) - 1e-7 * (1 + span))
        self._windows[key] = out
        return out

    # ---------------------------------------------------------------- tracking core
    def _start(self, ray: int, s: float, levels: list[int]) -> tuple[float, dict[int, tuple[float, np.ndarray]]]:
        """Nearest cached point below s on this ray where all levels are known (λ = 0 always is)."""
        best = 0.0
        path = self._paths[ray]
        for s0, known in path.items():
            if best < s0 < s and all(n in known for n in levels):
                best = s0
        if best == 0.0:
            return self._origin(ray, levels, s)
        return best, path[best]

    def _origin(self, ray: int, levels: list[int], s: float) -> tuple[float, dict]:
        """Starting states: e_n at λ = 0; for exactly degenerate groups, exact states at a tiny coupling.

        Inside a degenerate group the λ → 0 limit of a branch is fixed only by V (the model's good
        states) or, where V leaves a tie, by higher orders.  The group's exact states at a coupling
        far below any structure are assigned to its levels by first-order shift along this ray, ties
        in ascending energy — the same convention as the block treatment.
        """
        known = {n: (float(self.model.e0[n]), _unit(self.model.n, n)) for n in levels}
        groups = [g for g in self.model.degenerate_groups if any(n in g for n in levels)]
        if not groups:
            return 0.0, known
        model = self.model
        nv = max(model.norm_v, 1e-300)
        eps_all = []
        for g in groups:
            d = np.abs(model.e0 - model.e0[g[0]])
            d = d[d > model.degeneracy_tol]
            eps_all.append(1e-4 * (d.min() if d.size else 1.0) / nv)
        eps = min(min(eps_all), 0.5 * s) if s > 0 else min(eps_all)
        w, vec = self._window(ray * eps, [model.e0[g[0]] for g in groups] + [known[n][0] for n in levels])
        vdiag = model.v_diagonal()
        scale = nv
        for g in groups:
            gi = np.asarray(g)
            weight = np.sum(np.abs(vec[gi, :]) ** 2, axis=0)
            cols = np.sort(np.argsort(weight)[-len(g):])
            cols = cols[np.argsort(w[cols], kind="stable")]
            key = np.round(ray * vdiag[gi] / (1e-9 * scale))
            members = gi[np.lexsort((gi, key))]
            for n, c in zip(members, cols):
                psi = vec[:, c].copy()
                ph = np.vdot(_unit(model.n, int(n)), psi)
                if abs(ph) > 1e-8:
                    psi *= np.conj(ph) / abs(ph)
                known[int(n)] = (float(w[c]), psi)
        # other levels: follow from λ = 0 to eps
        rest = [n for n in levels if not any(n in g for g in groups)]
        if rest:
            known.update(self._step(ray, 0.0, {n: known[n] for n in rest}, eps, rest))
        self._paths[ray].setdefault(eps, {}).update({n: known[n] for n in levels})
        return eps, {n: known[n] for n in levels}

    def _step(self, ray: int, s0: float, known: dict, s1: float, levels: list[int], depth: int = 0) -> dict:
        lam = ray * s1
        w, vec = self._window(lam, [known[n][0] for n in levels])
        prev = np.stack([known[n][1] for n in levels], axis=1)  # (N, L)
        ov = np.abs(prev.conj().T @ vec) ** 2  # (L, K)
        rows, cols = linear_sum_assignment(-ov)
        got = ov[rows, cols]
        second = np.array([np.max(np.delete(ov[r], c)) if ov.shape[1] > 1 else 0.0 for r, c in zip(rows, cols)])
        ambiguous = bool(np.any(got < _AMBIGUOUS) or np.any(got - second < 0.3))
        if ambiguous and depth < _MAX_DEPTH and s1 - s0 > 1e-12 * max(1.0, s1):
            mid = 0.5 * (s0 + s1)
            kn_mid = self._step(ray, s0, known, mid, levels, depth + 1)
            return self._step(ray, mid, kn_mid, s1, levels, depth + 1)
        if ambiguous:
            msg = (
                f"levels {[self.model.label(n) for n in levels]} could not be followed unambiguously near "
                f"λ = {lam:.6g} (a crossing narrower than {s1 - s0:.2g} in λ); continued by best overlap"
            )
            if msg not in self.notes:
                self.notes.append(msg)
                warnings.warn(msg, TrackingWarning, stacklevel=4)
        out = {}
        for r, c in zip(rows, cols):
            n = levels[r]
            psi = vec[:, c].copy()
            ph = np.vdot(known[n][1], psi)
            if abs(ph) > 0:
                psi *= np.conj(ph) / abs(ph)
            out[n] = (float(w[c]), psi)
        self._paths[ray].setdefault(s1, {}).update(out)
        return out

    def _follow(self, ray: int, s: float, levels: list[int]) -> dict:
        if s == 0.0:
            return {n: (float(self.model.e0[n]), _unit(self.model.n, n)) for n in levels}
        cached = self._paths[ray].get(s)
        if cached is not None and all(n in cached for n in levels):
            return cached
        s0, known = self._start(ray, s, levels)
        return self._step(ray, s0, known, s, levels)

    # ---------------------------------------------------------------- public
    def level_at(self, level: int, coupling: float) -> tuple[float, np.ndarray]:
        """Tracked exact energy and state (work basis) of unperturbed ``level`` at ``coupling``."""
        lam = val.as_coupling(coupling)
        n = self.model.level_index(level)
        ray = 1 if lam >= 0 else -1
        got = self._follow(ray, abs(lam), [n])
        return got[n]

    def track(self, levels: Any, couplings: Any, *, keep_states: bool = True, find_crossings: bool = True) -> ExactSweep:
        """Follow ``levels`` over ``couplings``; see :func:`track`."""
        idx = [self.model.level_index(k) for k in val.as_sequence(levels)]
        if not idx:
            raise ValueError("levels is empty")
        idx = list(dict.fromkeys(idx))
        self._hint = max(self._hint, len(idx))
        lam = val.as_couplings(couplings)
        n_l, n_c = len(idx), lam.size
        energies = np.empty((n_l, n_c))
        states = np.empty((n_l, n_c, self.model.n), dtype=complex if np.iscomplexobj(self.model.v.data if sp.issparse(self.model.v) else self.model.v) else float) if keep_states else None
        start_solves = self.solves
        for ray in (1, -1):
            sel = np.flatnonzero((lam > 0) if ray == 1 else (lam < 0))
            order = sel[np.argsort(np.abs(lam[sel]))]
            if order.size == 0:
                continue
            s_prev, known = self._origin(ray, idx, float(abs(lam[order[0]])))
            for ci in order:
                s = float(abs(lam[ci]))
                if s != s_prev:
                    cached = self._paths[ray].get(s)
                    if cached is not None and all(n in cached for n in idx):
                        known = cached
                    else:
                        known = self._step(ray, s_prev, known, s, idx)
                    s_prev = s
                for li, n in enumerate(idx):
                    energies[li, ci] = known[n][0]
                    if states is not None:
                        states[li, ci] = np.real_if_close(known[n][1]) if states.dtype == float else known[n][1]
        zero = np.flatnonzero(lam == 0)
        for ci in zero:
            for li, n in enumerate(idx):
                energies[li, ci] = self.model.e0[n]
                if states is not None:
                    states[li, ci] = _unit(self.model.n, n)
        crossings = self._crossings(idx, lam, energies) if find_crossings and n_c >= 3 else ()
        return ExactSweep(
            couplings=_ro(lam),
            levels=tuple(idx),
            energies=_ro(energies),
            states=_ro(states) if states is not None else None,
            avoided_crossings=tuple(crossings),
            backend=self.backend,
            solves=self.solves - start_solves,
            labels=tuple(self.model.label(n) for n in idx),
            notes=tuple(self.notes),
        )

    def _gap_partner(self, lam: float, energy: float) -> tuple[float, float]:
        w, _ = self._windows.get(float(lam)) or self._window(lam, [energy])
        d = np.abs(w - energy)
        d[np.argmin(d)] = np.inf  # the level itself
        j = int(np.argmin(d))
        return float(d[j]), float(w[j])

    def _crossings(self, idx: list[int], lam: np.ndarray, energies: np.ndarray) -> list[AvoidedCrossing]:
        out: list[AvoidedCrossing] = []
        order = np.argsort(lam)
        xs = lam[order]
        for li, n in enumerate(idx):
            es = energies[li, order]
            gaps = np.array([self._gap_partner(x, e)[0] if x != 0 else np.inf for x, e in zip(xs, es)])
            for i in range(1, len(xs) - 1):
                g0, g1, g2 = gaps[i - 1], gaps[i], gaps[i + 1]
                if not (np.isfinite(g0) and np.isfinite(g2)) or not (g1 < g0 and g1 < g2):
                    continue
                if g1 > 0.5 * max(g0, g2):
                    continue  # shallow dip: not an avoided crossing
                a, b = xs[i - 1], xs[i + 1]

                def gap_at(x: float) -> float:
                    e = self.level_at(n, x)[0]
                    return self._gap_partner(x, e)[0]

                res = minimize_scalar(gap_at, bounds=(a, b), method="bounded", options={"xatol": 1e-6 * max(1.0, abs(b)), "maxiter": 25})
                x_min, g_min = float(res.x), float(res.fun)
                e_min = self.level_at(n, x_min)[0]
                partner_e = self._gap_partner(x_min, e_min)[1]
                partner = self._identify(x_min, partner_e, exclude=n)
                pair = (n, partner)
                if any(abs(c.coupling - x_min) < 1e-6 * max(1.0, abs(x_min)) and set(c.levels) == set(pair) for c in out):
                    continue
                out.append(
                    AvoidedCrossing(
                        coupling=x_min,
                        min_gap=g_min,
                        levels=pair,
                        labels=(self.model.label(n), self.model.label(partner) if partner >= 0 else "?"),
                    )
                )
        return out

    def _identify(self, lam: float, energy: float, exclude: int) -> int:
        """Unperturbed level whose tracked energy at lam is ``energy`` (search near neighbours)."""
        e0 = self.model.e0
        cands = np.argsort(np.abs(e0 - e0[exclude]))[1:9]
        for c in cands:
            c = int(c)
            if c == exclude:
                continue
            try:
                e = self.level_at(c, lam)[0]
            except Exception:  # pragma: no cover - defensive
                continue
            if abs(e - energy) <= 1e-8 * max(1.0, abs(energy)):
                return c
        return -1


def _unit(n: int, i: int) -> np.ndarray:
    e = np.zeros(n)
    e[i] = 1.0
    return e


def track(
    model: Model,
    levels: Any,
    couplings: Any,
    *,
    backend: str = "auto",
    keep_states: bool = True,
    find_crossings: bool = True,
) -> ExactSweep:
    """Follow exact levels continuously from λ = 0 over ``couplings``.

    Parameters
    ----------
    model : Model
    levels : level key or list of them
    couplings : float or (C,) array_like
    backend : {"auto", "dense", "sparse", "qutip"}
    keep_states : bool
        Keep the exact states (L, C, N) in the result.
    find_crossings : bool
        Locate avoided crossings (a few extra solves each).

    Returns
    -------
    ExactSweep
    """
    return ExactSolver(model, backend=backend).track(levels, couplings, keep_states=keep_states, find_crossings=find_crossings)


def eigenpairs(model: Model, coupling: float, *, k: int | None = None, backend: str = "auto", sigma: float | None = None):
    """One-off exact eigenpairs: ``k`` lowest (or nearest ``sigma``); all when ``k`` is None."""
    solver = ExactSolver(model, backend=backend)
    return solver.eigenpairs(coupling, k=model.n if k is None else val.check_int(k, "k", minimum=1), sigma=sigma)
