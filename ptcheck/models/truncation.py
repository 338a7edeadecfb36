"""Is an exact level converged in the truncation of a built-in model?

Builders with a truncation parameter (``n_photons``, ``n_qubit``, ``n_basis``,
``n_max``, …) leave the choice of size to the user; :func:`truncation_check`
rebuilds the model at growing sizes and reports whether the exact level at a
given coupling has stopped moving.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.sparse as sp

from .. import _validation as val
from ..model import Model
from . import _common as c

__all__ = ["TruncationCheck", "truncation_check", "DENSE_SOLVE_LIMIT"]

#: Bases up to this size are diagonalised densely; larger sparse ones with eigsh.
DENSE_SOLVE_LIMIT = 2000


def _readonly(a: Any) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, repr=False, eq=False)
class TruncationCheck:
    """Exact energy of one level at growing truncation sizes.

    Attributes
    ----------
    builder : str
        Name of the builder function.
    size_param : str
        The truncation parameter that was varied.
    sizes : tuple of int
        Its values, ascending (S of them).
    level : str
        The level asked for (printable: rank or label).
    coupling : float
        Coupling λ at which the exact level was computed (dimensionless).
    energies : (S,) ndarray, read-only
        Exact energy of the level at each size (energy units of the model).
    changes : (S − 1,) ndarray, read-only
        ``energies[k] − energies[k−1]`` (energy units).
    tol : float
        Largest accepted last change (energy units):
        ``max(atol, rtol · max(|energies[-1]|, scale))`` with ``scale`` the
        largest |unperturbed energy| of the smallest model.
    converged : bool
        ``|changes[-1]| <= tol``.
    note : str
        The verdict in plain words.
    """

    builder: str
    size_param: str
    sizes: tuple[int, ...]
    level: str
    coupling: float
    energies: np.ndarray
    changes: np.ndarray
    tol: float
    converged: bool
    note: str

    def __repr__(self) -> str:
        verdict = "converged" if self.converged else "NOT converged"
        return (
            f"TruncationCheck({self.builder}, {self.size_param}={list(self.sizes)}, level={self.level}, "
            f"λ={self.coupling:g}: {verdict}, last change {self.changes[-1]:.3g})"
        )

    def to_dict(self) -> dict:
        return {
            "builder": self.builder,
            "size_param": self.size_param,
            "sizes": list(self.sizes),
            "level": self.level,
            "coupling": self.coupling,
            "energies": self.energies.tolist(),
            "changes": self.changes.tolist(),
            "tol": self.tol,
            "converged": self.converged,
            "note": self.note,
        }

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{s}</td><td>{e:.12g}</td><td>{'' if k == 0 else f'{self.changes[k - 1]:.3g}'}</td></tr>"
            for k, (s, e) in enumerate(zip(self.sizes, self.energies))
        )
        return (
            f"<b>Truncation check</b> of {self.builder} over {self.size_param}, level {self.level}, "
            f"λ = {self.coupling:g}<table><tr><th>{self.size_param}</th><th>energy</th><th>change</th></tr>"
            f"{rows}</table><p>{self.note}</p>"
        )


def _resolve_builder(builder: Any) -> tuple[Callable[..., Model], str]:
    if isinstance(builder, str):
        from . import BUILDERS

        if builder not in BUILDERS:
            raise ValueError(f"unknown builder {builder!r}; known: {', '.join(sorted(BUILDERS))}")
        return BUILDERS[builder], builder
    if not callable(builder):
        raise TypeError(f"builder must be a builder function or its name; got {builder!r}")
    return builder, getattr(builder, "__name__", repr(builder))


def _exact_level(model: Model, rank: int, coupling: float) -> float:
    """Energy of rank ``rank`` (0 = lowest) in the exact spectrum of H(λ)."""
    h = model.hamiltonian(coupling)
    if sp.issparse(h) and model.n > DENSE_SOLVE_LIMIT and rank + 1 < model.n - 1:
        from scipy.sparse.linalg import eigsh

        w = eigsh(h, k=rank + 1, which="SA", return_eigenvectors=False)
        return float(np.sort(w)[rank])
    dense = h.toarray() if sp.issparse(h) else h
    return float(np.linalg.eigvalsh(dense)[rank])


def truncation_check(
    builder: Callable[..., Model] | str,
    size_param: str,
    sizes: Sequence[int],
    *,
    level: Any = 0,
    coupling: float,
    rtol: float = 1e-8,
    atol: float = 0.0,
    params: Mapping[str, Any] | None = None,
) -> TruncationCheck:
    """Rebuild a model at growing truncations; is the exact level converged?

    Parameters
    ----------
    builder : callable or str
        A builder such as :func:`ptcheck.models.rabi`, or its name in
        :data:`ptcheck.models.BUILDERS`.
    size_param : str
        Name of the builder's truncation parameter (e.g. ``"n_photons"``).
    sizes : sequence of int
        At least two values, strictly ascending.
    level : int or label, default 0
        An energy rank or a level label, resolved by ``model.level_index`` at
        each size.  The exact energy taken is the one with the same rank in
        the exact spectrum at ``coupling`` (the adiabatic continuation when
        no levels cross between 0 and the coupling).
    coupling : float
        Coupling λ (dimensionless).
    rtol : float, default 1e-8
        Relative tolerance on the last change, relative to
        ``max(|E|, scale)`` where ``scale`` is the largest |unperturbed
        energy| of the smallest model (so a level near zero energy is judged
        on the model's own energy scale).
    atol : float, default 0.0
        Absolute tolerance (energy units); the tolerance used is the larger.
    params : mapping, optional
        Other keyword arguments of the builder (not the size parameter).

    Returns
    -------
    TruncationCheck
        Energies, changes, the tolerance, ``converged`` and a note.

    Examples
    --------
    >>> from ptcheck.models import anharmonic_oscillator
    >>> r = truncation_check(anharmonic_oscillator, "n_basis", [30, 60],
    ...                      params={"kind": "quartic"}, coupling=0.1)
    >>> r.converged
    True
    """
    fn, bname = _resolve_builder(builder)
    if not isinstance(size_param, str):
        raise TypeError(f"size_param must be the name of a builder parameter (str); got {size_param!r}")
    try:
        sig = inspect.signature(fn)
    except (TypeError, ValueError):  # pragma: no cover - builtins without a signature
        sig = None
    if sig is not None and size_param not in sig.parameters:
        names = [p for p in sig.parameters if p != "sparse"]
        raise ValueError(f"{bname} has no parameter {size_param!r}; its parameters are {', '.join(names)}")
    if isinstance(sizes, (str, bytes)) or not isinstance(sizes, Sequence | np.ndarray):
        raise TypeError(f"sizes must be a sequence of ints; got {sizes!r}")
    sizes_t = tuple(val.check_int(s, "sizes entry", minimum=1) for s in sizes)
    if len(sizes_t) < 2:
        raise ValueError(f"sizes needs at least two values to compare; got {list(sizes_t)}")
    if any(b <= a for a, b in zip(sizes_t, sizes_t[1:])):
        raise ValueError(f"sizes must be strictly ascending; got {list(sizes_t)}")
    lam = val.as_coupling(coupling)
    rtol_f = c.positive(rtol, "rtol")
    atol_f = c.nonnegative(atol, "atol")
    extra = dict(params or {})
    if size_param in extra:
        raise ValueError(f"params must not contain the size parameter {size_param!r}; it is set from sizes")

    energies = []
    scale = 0.0
    for k, s in enumerate(sizes_t):
        model = fn(**extra, **{size_param: s})
        if not isinstance(model, Model):
            raise TypeError(f"builder {bname} returned {type(model).__name__}, not a Model")
        rank = model.level_index(level)
        if k == 0:
            scale = float(np.max(np.abs(model.e0)))
        energies.append(_exact_level(model, rank, lam))

    e = _readonly(energies)
    changes = _readonly(np.diff(e))
    tol = max(atol_f, rtol_f * max(abs(e[-1]), scale))
    last = abs(float(changes[-1]))
    converged = bool(last <= tol)
    what = f"level {level!r} of {bname} at λ = {lam:g}"
    step = f"{size_param} = {sizes_t[-2]} → {sizes_t[-1]}"
    if converged:
        note = f"Converged: {what} changes by {last:.2g} from {step} (tolerance {tol:.2g})."
    else:
        note = (
            f"NOT converged: {what} changes by {last:.2g} from {step}, above the tolerance {tol:.2g}. "
            f"Enlarge {size_param}; if the level keeps drifting, the truncated model may have no limit "
            "(e.g. a spectrum unbounded below, as for the cubic oscillator)."
        )
    return TruncationCheck(
        builder=bname,
        size_param=size_param,
        sizes=sizes_t,
        level=str(level),
        coupling=lam,
        energies=e,
        changes=changes,
        tol=float(tol),
        converged=converged,
        note=note,
    )
