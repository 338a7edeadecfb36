"""Exact levels of a model with several couplings on a grid of coupling points.

A level of ``H0 + Σ_i λ_i V_i`` is named by the unperturbed level it comes
from, continued from the origin.  In the plane of two couplings the
continuation depends on the path (around a conical intersection the labels
swap), so ptcheck fixes it: **the straight path from the origin**, the ray the
perturbative series is summed along (see :mod:`ptcheck.multiseries`).  Each
grid point ``p`` is reached along the ray of ``d = p/|p|`` at ``t = |p|``,
tracked by the one-coupling machinery (:func:`ptcheck.exact.track` on
``model.along(d)``: overlaps, refinement at avoided crossings); points on a
common ray share one sweep.
"""

from __future__ import annotations

import html
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import _validation as val
from .exact import BACKENDS, ExactSolver
from .model import Model
from .multiseries import check_multi

__all__ = ["GridSweep", "track_grid", "MAX_GRID_POINTS"]

#: Largest number of grid points one call tracks (each needs its own ray).
MAX_GRID_POINTS = 40_000


def _ro(a: Any) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, repr=False, eq=False)
class GridSweep:
    """Exact energies of tracked levels on a grid of two couplings.

    Attributes
    ----------
    coupling_names : tuple of str
        Names of the two couplings.
    couplings1 : (C1,) ndarray, read-only
        Values of the first coupling (grid axis 1).
    couplings2 : (C2,) ndarray, read-only
        Values of the second coupling (grid axis 2).
    levels : tuple of int
        Work-basis indices of the tracked levels (L of them).
    labels : tuple of str
        Their printable names.
    energies : (L, C1, C2) ndarray, read-only
        Exact energy at ``(couplings1[i], couplings2[j])`` (energy units),
        followed along the straight path from the origin.
    shifts : (L, C1, C2) ndarray, read-only
        ``E − E0`` from offset-free energies.
    rays : int
        Number of distinct rays swept.
    solves : int
        Exact diagonalisations used in all.
    notes : tuple of str
        Tracking remarks of the rays (each once).
    keys : tuple
        The model's labels of the tracked levels (e.g. ``(0, 0)``; None where
        a level has none): :meth:`energy` accepts them too.
    """

    coupling_names: tuple[str, str]
    couplings1: np.ndarray
    couplings2: np.ndarray
    levels: tuple[int, ...]
    labels: tuple[str, ...]
    energies: np.ndarray
    shifts: np.ndarray
    rays: int
    solves: int
    notes: tuple[str, ...] = ()
    keys: tuple = ()

    def _row(self, level: Any) -> int:
        if isinstance(level, (int, np.integer)) and not isinstance(level, bool) and int(level) in self.levels:
            return self.levels.index(int(level))
        if isinstance(level, str) and level in self.labels:
            return self.labels.index(level)
        if level is not None and level in self.keys:
            return self.keys.index(level)
        raise ValueError(f"level {level!r} was not tracked on this grid; tracked levels: {list(self.levels)}")

    def energy(self, level: Any) -> np.ndarray:
        """Energies of one tracked level, shape (C1, C2)."""
        return self.energies[self._row(level)]

    def shift(self, level: Any) -> np.ndarray:
        """Shifts ``E − E0`` of one tracked level, shape (C1, C2)."""
        return self.shifts[self._row(level)]

    def __repr__(self) -> str:
        n1, n2 = self.coupling_names
        return (
            f"GridSweep(levels=[{', '.join(self.labels)}], {n1}: {self.couplings1.size} values, "
            f"{n2}: {self.couplings2.size} values, rays={self.rays}, solves={self.solves})"
        )

    def to_dict(self) -> dict:
        return {
            "coupling_names": list(self.coupling_names),
            "couplings1": self.couplings1.tolist(),
            "couplings2": self.couplings2.tolist(),
            "levels": list(self.levels),
            "labels": list(self.labels),
            "energies": self.energies.tolist(),
            "shifts": self.shifts.tolist(),
            "rays": int(self.rays),
            "solves": int(self.solves),
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return (
            f"<b>Exact grid</b>: {len(self.levels)} level(s) on {self.couplings1.size} × {self.couplings2.size} "
            f"points ({html.escape(' × '.join(self.coupling_names))}), {self.rays} rays, {self.solves} solves"
            + (f"<ul>{notes}</ul>" if notes else "")
        )


def _axis(x: Any, name: str) -> np.ndarray:
    try:
        a = np.atleast_1d(np.asarray(x, dtype=float))
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be real numbers; got {x!r}") from None
    if a.ndim != 1 or a.size == 0:
        raise ValueError(f"{name} must be a non-empty 1-D list of couplings; got shape {a.shape}")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} must be finite; got {x!r}")
    return a


def ray_of(point: np.ndarray) -> tuple[np.ndarray, float]:
    """Unit direction (rounded to 1e-12, so collinear points share it) and distance of a nonzero point."""
    t = float(np.linalg.norm(point))
    return np.round(point / t, 12), t


def track_grid(
    model: Model,
    levels: Any,
    couplings1: Any,
    couplings2: Any,
    *,
    backend: str = "auto",
) -> GridSweep:
    """Exact energies on the grid ``couplings1 × couplings2``, tracked along rays from the origin.

    Parameters
    ----------
    model : Model
        A model with two couplings.
    levels : int, label, or sequence of them
        Unperturbed levels to follow.
    couplings1, couplings2 : (C1,), (C2,) array_like
        Grid values of the two couplings (any order; 0 allowed).
    backend : {'auto', 'dense', 'sparse', 'qutip'}, default 'auto'

    Returns
    -------
    GridSweep

    Warns
    -----
    TrackingWarning
        On a ray, a crossing was narrower than the refinement can resolve.

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([-0.5, 0.5]), [[[0, 1], [1, 0]], [[1, 0], [0, -1]]], names=("x", "z"))
    >>> g = track_grid(m, [0], [0.0, 0.3], [0.0, 0.4])
    >>> round(float(g.energy(0)[1, 1]), 6)     # −sqrt((1/2 − 0.4)² + 0.3²)
    -0.316228
    """
    check_multi(model, "track_grid")
    if model.n_couplings != 2:
        raise ValueError(f"track_grid takes a model with two couplings; model {model.name!r} has {model.n_couplings}")
    val.check_choice(backend, "backend", BACKENDS)
    c1 = _axis(couplings1, "couplings1")
    c2 = _axis(couplings2, "couplings2")
    if c1.size * c2.size > MAX_GRID_POINTS:
        raise ValueError(f"the grid has {c1.size * c2.size} points, more than {MAX_GRID_POINTS}; ask for a coarser grid")
    seq = val.as_sequence(levels)
    if not seq:
        raise ValueError("levels is empty; give at least one level (energy rank or label)")
    idx = tuple(model.level_index(k) for k in seq)
    if len(set(idx)) != len(idx):
        raise ValueError(f"levels must be distinct; got {list(seq)!r} (work indices {list(idx)})")
    pts = np.stack(np.meshgrid(c1, c2, indexing="ij"), axis=-1).reshape(-1, 2)
    energies = np.empty((len(idx), pts.shape[0]))
    shifts = np.empty_like(energies)
    e0 = np.asarray(model.e0)[list(idx)]
    rays: dict[bytes, tuple[np.ndarray, list[int], list[float]]] = {}
    for k, p in enumerate(pts):
        if not np.any(p):
            energies[:, k] = e0
            shifts[:, k] = 0.0
            continue
        d, t = ray_of(p)
        entry = rays.setdefault(d.tobytes(), (d, [], []))
        entry[1].append(k)
        entry[2].append(t)
    solves = 0
    notes: list[str] = []
    for d, where, ts in rays.values():
        ray = model.along(d)
        solver = ExactSolver(ray, backend=backend, n_levels_hint=len(idx))
        sweep = solver._track([ray._ray_level(n) for n in idx], np.asarray(ts), keep_states=False, find_crossings=False, stacklevel=3)
        energies[:, where] = sweep.energies
        shifts[:, where] = sweep.shifts
        solves += sweep.solves
        for nt in sweep.notes:
            if nt not in notes:
                notes.append(nt)
    shape = (len(idx), c1.size, c2.size)
    return GridSweep(
        coupling_names=tuple(model.coupling_names),
        couplings1=_ro(c1),
        couplings2=_ro(c2),
        levels=idx,
        labels=tuple(model.label(i) for i in idx),
        energies=_ro(energies.reshape(shape)),
        shifts=_ro(shifts.reshape(shape)),
        rays=len(rays),
        solves=int(solves),
        notes=tuple(notes),
        keys=tuple(model.labels[i] for i in idx),
    )
