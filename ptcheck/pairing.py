"""Which exact state carries a level's label: the one place that decides it.

Outside degenerate and near-degenerate groups a level's exact partner is the
tracked exact level (:mod:`ptcheck.exact`: continuity in λ from the
unperturbed state).  Inside a group (the levels expanded together, see
:mod:`ptcheck.treatment`) the tracker alone cannot tell the members apart when
the group is exactly degenerate and split only at a high order, and a
perturbative branch and an exact level can be followed along different paths.
There the group's exact states are paired with its perturbative states at
every coupling by an assignment on the overlaps ``|⟨ψ_pt|ψ_exact⟩|²``
(``scipy.optimize.linear_sum_assignment``), the perturbative states taken at
the expansion's ``pairing_order`` (the order at which the group's good states
are resolved).

A pairing is *clear* when the assigned overlap is at least
:data:`CLEAR_FACTOR` times every competing overlap (other exact states for the
same level, other levels for the same exact state).  When it is not clear and
the competing exact energies differ by more than round-off, the value is
*ambiguous*: it is flagged (``ambiguous``) and reported as NaN, never guessed.

Exact candidates of a group:

* groups whose work-basis states are already the good states (split at first
  order, or near-degenerate blocks): the tracked exact levels of its members;
* exactly degenerate groups split only at a higher order: the exact
  eigenpairs nearest the group's perturbative energies at each coupling
  (a window of the group's size plus :data:`WINDOW_PAD` on each side), since
  the tracker starts from unperturbed states that are not the good states.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._tracking import assign as _max_overlap_assignment
from .exact import ExactSolver

__all__ = ["CLEAR_FACTOR", "WINDOW_PAD", "PairedLevels", "assign", "sweep", "at", "uses_window"]

#: The assigned overlap must be at least this many times every competitor.
CLEAR_FACTOR = 2.0
#: Extra exact eigenpairs on each side of a windowed group.
WINDOW_PAD = 2


@dataclass(frozen=True)
class PairedLevels:
    """Exact values carried by each level's label, over a set of couplings.

    Attributes
    ----------
    levels : tuple of int
        Work indices (L).
    energies, shifts : (L, C) ndarray
        Exact energy and exact shift ``E(λ) − E^(0)`` (energy units); NaN where ambiguous.
    states : (L, C, N) ndarray or None
        Paired exact states (work basis).
    ambiguous : (L, C) bool ndarray
        The pairing had no clear winner (value reported as NaN).
    overlap : (L, C) ndarray
        ``|⟨ψ_pt|ψ_exact⟩|²`` of the pairing (NaN outside groups).
    avoided_crossings : tuple
    backend : str
    solves : int
    notes : tuple of str
    """

    levels: tuple[int, ...]
    energies: np.ndarray
    shifts: np.ndarray
    states: np.ndarray | None
    ambiguous: np.ndarray
    overlap: np.ndarray
    avoided_crossings: tuple
    backend: str
    solves: int
    notes: tuple[str, ...]

    def row(self, level: int) -> int:
        return self.levels.index(level)


def assign(pert: np.ndarray, exact: np.ndarray, energies: np.ndarray, energy_tol: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pair G perturbative states with M >= G exact candidates.

    Parameters
    ----------
    pert : (G, N) ndarray
    exact : (M, N) ndarray
    energies : (M,) ndarray
        Exact energies of the candidates.
    energy_tol : float
        Candidates whose energies differ by at most this are interchangeable
        (a swap between them changes no number beyond round-off).

    Returns
    -------
    index : (G,) int ndarray
        Candidate paired with each perturbative state.
    ambiguous : (G,) bool ndarray
    overlap : (G,) ndarray
    """
    w = np.abs(np.conj(pert) @ exact.T) ** 2  # (G, M)
    index = _max_overlap_assignment(w)
    ambiguous = np.zeros(pert.shape[0], dtype=bool)
    overlap = w[np.arange(pert.shape[0]), index]
    for i, j in enumerate(index):
        cut = overlap[i] / CLEAR_FACTOR
        alt = [k for k in range(w.shape[1]) if k != j and w[i, k] > cut]
        alt += [int(index[r]) for r in range(w.shape[0]) if r != i and w[r, j] > cut]
        if any(abs(energies[k] - energies[j]) > energy_tol for k in alt):
            ambiguous[i] = True
    return index, ambiguous, overlap


def uses_window(expansion: Any) -> bool:
    """True when a group's exact candidates come from an eigenpair window (see module docstring)."""
    return len(expansion.group) >= 2 and not expansion.starts_on_good_states


def _groups(exps: Mapping[int, Any], levels: Sequence[int]) -> list[tuple[int, ...]]:
    seen: dict[tuple[int, ...], None] = {}
    for n in levels:
        g = tuple(exps[n].group)
        if len(g) > 1:
            seen[g] = None
    return list(seen)


def _energy_tol(solver: ExactSolver, lam: float) -> float:
    """Shifts of candidates closer than this are interchangeable (round-off of the offset-free problem)."""
    m = solver.model
    e0 = m.e0_relative
    scale = float(max(np.max(np.abs(e0)), np.ptp(e0))) + abs(lam) * m.norm_v
    return 64 * np.finfo(float).eps * max(scale, np.finfo(float).tiny)


def _relative_e0(model: Any, group: tuple[int, ...]) -> np.ndarray:
    """``E0[n] − E0[group[0]]`` of the group's levels, without the rounding of an energy offset."""
    e0 = model.e0_relative
    return np.array([e0[n] - e0[group[0]] for n in group])


def _window(solver: ExactSolver, exps: Mapping[int, Any], group: tuple[int, ...], lam: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact eigenpairs of the group's sector nearest its perturbative energies: (shifts from E0[group[0]], (k, N))."""
    m = solver.model
    k_pair = exps[group[0]].pairing_order
    d = _relative_e0(m, group)
    target = float(np.mean([d[i] + float(exps[g].shift(lam, k_pair)) for i, g in enumerate(group)]))
    size = int(np.count_nonzero(m.level_sectors == m.level_sectors[group[0]]))
    k = min(size, len(group) + 2 * WINDOW_PAD)
    s, v = solver.shifts_near(group[0], lam, k=k, shift=target)
    return np.asarray(s, dtype=float), np.asarray(v).T


def sweep(solver: ExactSolver, exps: Mapping[int, Any], levels: Sequence[int], couplings: np.ndarray, *, keep_states: bool) -> PairedLevels:
    """Exact values of ``levels`` (and of the members of their groups) over ``couplings``, paired."""
    model = solver.model
    lam = np.asarray(couplings, dtype=float)
    groups = _groups(exps, levels)
    window = {g for g in groups if uses_window(exps[g[0]])}
    members = [n for g in groups for n in g]
    all_levels = list(dict.fromkeys(list(levels) + members))
    tracked = [n for n in all_levels if not any(n in g for g in window)]
    need_states = keep_states or any(g not in window for g in groups)
    L, C = len(all_levels), lam.size
    energies = np.full((L, C), np.nan)
    shifts = np.full((L, C), np.nan)
    states = np.zeros((L, C, model.n), dtype=np.result_type(model.dtype, float)) if need_states or window else None
    ambiguous = np.zeros((L, C), dtype=bool)
    overlap = np.full((L, C), np.nan)
    row = {n: i for i, n in enumerate(all_levels)}
    crossings: tuple = ()
    notes: list[str] = []
    solves0 = solver.solves
    backend = solver.backend

    if tracked:
        sw = solver.track(tracked, lam, keep_states=need_states)
        crossings = tuple(sw.avoided_crossings)
        notes.extend(sw.notes)
        backend = sw.backend
        for i, n in enumerate(tracked):
            energies[row[n]] = sw.energies[i]
            shifts[row[n]] = sw.shifts[i]
            if states is not None and sw.states is not None:
                states[row[n]] = sw.states[i]

    for g in groups:
        rows = [row[n] for n in g]
        k_pair = exps[g[0]].pairing_order
        pert = np.stack([np.asarray(exps[n].state(lam, k_pair)).reshape(C, model.n) for n in g])  # (G, C, N)
        d = _relative_e0(model, g)
        for c in range(C):
            if lam[c] == 0.0:
                for n in g:
                    energies[row[n], c] = model.e0[n]
                    shifts[row[n], c] = 0.0
                    overlap[row[n], c] = 1.0
                    if states is not None:
                        states[row[n], c] = pert[g.index(n), c]
                continue
            # candidates as shifts from E0[g[0]] (offset-free), energies only for display
            if g in window:
                cand_s, cand_v = _window(solver, exps, g, float(lam[c]))
                cand_e = model.e0[g[0]] + cand_s
            else:
                cand_e = energies[rows, c].copy()
                cand_s = shifts[rows, c] + d
                cand_v = states[rows, c].copy()
            idx, amb, ov = assign(pert[:, c], cand_v, cand_s, _energy_tol(solver, float(lam[c])))
            for i, n in enumerate(g):
                j = int(idx[i])
                energies[row[n], c] = cand_e[j]
                shifts[row[n], c] = cand_s[j] - d[i]
                overlap[row[n], c] = ov[i]
                ambiguous[row[n], c] = amb[i]
                if states is not None:
                    states[row[n], c] = cand_v[j]
    energies[ambiguous] = np.nan
    shifts[ambiguous] = np.nan
    if np.any(ambiguous):
        bad = sorted({all_levels[i] for i in np.flatnonzero(ambiguous.any(axis=1))})
        notes.append(
            f"The pairing of perturbative and exact states is ambiguous (no clear overlap winner) for level(s) "
            f"{', '.join(model.label(n) for n in bad)} at {int(np.count_nonzero(ambiguous.any(axis=0)))} coupling(s); "
            "their exact values and errors are left undefined (NaN) there rather than guessed."
        )
    return PairedLevels(
        levels=tuple(all_levels),
        energies=energies,
        shifts=shifts,
        states=states if keep_states else None,
        ambiguous=ambiguous,
        overlap=overlap,
        avoided_crossings=crossings,
        backend=backend,
        solves=solver.solves - solves0,
        notes=tuple(dict.fromkeys(notes)),
    )


def at(solver: ExactSolver, exps: Mapping[int, Any], levels: Sequence[int], coupling: float) -> tuple[dict[int, float], dict[int, bool]]:
    """Exact shifts ``E(λ) − E^(0)`` of ``levels`` at one coupling, paired; and which are ambiguous.

    Uses the solver's cached path points (cheap for the many probes of a
    boundary search).
    """
    model = solver.model
    lam = float(coupling)
    shifts: dict[int, float] = {}
    amb: dict[int, bool] = {}
    if lam == 0.0:
        return {n: 0.0 for n in levels}, {n: False for n in levels}
    groups = _groups(exps, levels)
    grouped = {n for g in groups for n in g}
    for n in levels:
        if n in grouped:
            continue
        shifts[n] = float(solver.shift_at(n, lam))
        amb[n] = False
    for g in groups:
        k_pair = exps[g[0]].pairing_order
        pert = np.stack([np.asarray(exps[n].state(lam, k_pair)).reshape(model.n) for n in g])
        d = _relative_e0(model, g)
        if uses_window(exps[g[0]]):
            cand_s, cand_v = _window(solver, exps, g, lam)
        else:
            cand_v = np.stack([solver.level_at(n, lam)[1] for n in g])
            cand_s = np.array([float(solver.shift_at(n, lam)) for n in g]) + d
        idx, a, _ = assign(pert, cand_v, cand_s, _energy_tol(solver, lam))
        for i, n in enumerate(g):
            shifts[n] = float(cand_s[int(idx[i])]) - float(d[i])
            amb[n] = bool(a[i])
    return {n: shifts[n] for n in levels}, {n: amb[n] for n in levels}
