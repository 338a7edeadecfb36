"""Non-degenerate Rayleigh–Schrödinger series of one level, to any order.

Recursive formulation (intermediate normalisation, ⟨n|ψ^(k)⟩ = 0 for k ≥ 1):

    E^(k)   = ⟨n| V |ψ^(k-1)⟩
    ψ^(k)   = R_n [ V ψ^(k-1) - Σ_{j=1..k} E^(j) ψ^(k-j) ],   R_n = Q_n / (E_n^(0) - H0)

(e.g. Kato, *Perturbation Theory for Linear Operators*, 1966, ch. II; the same
recursion as in most texts' derivation of the RS hierarchy).  Each order costs
one mat-vec with V plus O(k N): O(order·nnz(V) + order²·N) in all.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import _validation as val
from .approximants import OrderSpec, Pade, order_name, parse_order, required_order
from .degeneracy import DEFAULT_MIXING_THRESHOLD, mixing_ratios
from .errors import DegenerateLevelError
from .model import Model
from .pade import pade_coefficients, pade_evaluate

__all__ = ["SeriesResult", "rs_series", "check_nondegenerate"]


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.asarray(a)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, repr=False, eq=False)
class SeriesResult:
    """Rayleigh–Schrödinger series of one level.

    Attributes
    ----------
    level : int
        Work-basis index of the level.
    label : str
        Printable name of the level.
    order : int
        Highest order computed.
    energy_coefficients : (order + 1,) ndarray, read-only
        E^(0), E^(1), …, E^(order) (energy units; E(λ) = Σ_k λ^k E^(k)).
    state_coefficients : (order + 1, N) ndarray, read-only
        |ψ^(k)⟩ in the work basis, intermediate normalisation.
    treatment : str
        ``"nondegenerate"``.
    """

    level: int
    label: str
    order: int
    energy_coefficients: np.ndarray
    state_coefficients: np.ndarray
    model: Model = field(repr=False)
    treatment: str = "nondegenerate"

    # ---------------------------------------------------------------- energies
    def energy(self, couplings: Any, order: OrderSpec | None = None) -> np.ndarray:
        """Partial sum (or Padé approximant) of the energy at ``couplings``.

        Parameters
        ----------
        couplings : float or (C,) array_like
        order : int or Pade, optional
            Default: the full computed order.

        Returns
        -------
        ndarray, shape of ``couplings``
        """
        spec = self.order if order is None else parse_order(order)
        self._check_order(spec)
        lam = np.asarray(couplings, dtype=float)
        c = self.energy_coefficients
        if isinstance(spec, Pade):
            return _pade_energy(c, spec, lam)
        return np.polynomial.polynomial.polyval(lam, c[: spec + 1])

    def energies_by_order(self, couplings: Any) -> np.ndarray:
        """Partial sums for every order 0..order, shape ``(order + 1, C)``."""
        lam = val.as_couplings(couplings)
        powers = lam[None, :] ** np.arange(self.order + 1)[:, None]
        return np.cumsum(self.energy_coefficients[:, None] * powers, axis=0)

    def term(self, couplings: Any, k: int) -> np.ndarray:
        """Size of the order-k term ``|E^(k) λ^k|``, shape of ``couplings``."""
        lam = np.asarray(couplings, dtype=float)
        return np.abs(self.energy_coefficients[k] * lam**k)

    # ---------------------------------------------------------------- states
    def state(self, couplings: Any, order: OrderSpec | None = None, *, basis: str = "work") -> np.ndarray:
        """Normalised perturbative state Σ_{j≤k} λ^j |ψ^(j)⟩ / ‖·‖.

        Parameters
        ----------
        couplings : float or (C,) array_like
        order : int, optional
            Truncation order (Padé has no state; asking for one raises).
        basis : {"work", "user"}

        Returns
        -------
        ndarray, shape ``(N,)`` for a scalar coupling, else ``(C, N)``
        """
        spec = self.order if order is None else parse_order(order)
        if isinstance(spec, Pade):
            raise ValueError(f"{spec} approximates the energy only; ask for a truncation order for the state")
        self._check_order(spec)
        val.check_choice(basis, "basis", ("work", "user"))
        lam = np.asarray(couplings, dtype=float)
        flat = lam.reshape(-1)
        powers = flat[:, None] ** np.arange(spec + 1)[None, :]
        psi = powers @ self.state_coefficients[: spec + 1]
        psi = psi / np.linalg.norm(psi, axis=1, keepdims=True)
        if basis == "user":
            psi = self.model.to_user_basis(psi)
        return psi.reshape(lam.shape + (self.model.n,))

    # ---------------------------------------------------------------- misc
    def _check_order(self, spec: OrderSpec) -> None:
        need = required_order(spec)
        if need > self.order:
            raise ValueError(f"{order_name(spec)} needs coefficients up to order {need}; this series has order {self.order}")

    def __repr__(self) -> str:
        c = ", ".join(f"{x:.4g}" for x in self.energy_coefficients[:4])
        more = ", …" if self.order > 3 else ""
        return f"SeriesResult(level={self.label}, order={self.order}, E=[{c}{more}])"

    def to_dict(self) -> dict:
        return {
            "level": self.level,
            "label": self.label,
            "order": self.order,
            "treatment": self.treatment,
            "energy_coefficients": self.energy_coefficients.tolist(),
        }

    def _repr_html_(self) -> str:
        rows = "".join(f"<tr><td>{k}</td><td>{e:.10g}</td></tr>" for k, e in enumerate(self.energy_coefficients))
        return (
            f"<b>Rayleigh–Schrödinger series</b> of level {self.label} (model {self.model.name!r})"
            f"<table><tr><th>k</th><th>E<sup>(k)</sup></th></tr>{rows}</table>"
        )


def _pade_energy(c: np.ndarray, spec: Pade, lam: np.ndarray) -> np.ndarray:
    if spec.in_square:
        # E(λ) = c0 + c1 λ + λ^2 f(λ^2) is not assumed: require odd terms beyond c0 to vanish
        odd = c[1 : spec.order + 1 : 2]
        if np.max(np.abs(odd), initial=0) > 1e-12 * max(np.max(np.abs(c[: spec.order + 1])), 1e-300):
            raise ValueError(f"{spec} needs a series in λ² (odd coefficients zero); this series has odd terms")
        a, b = pade_coefficients(c[: spec.order + 1 : 2], spec.num, spec.den)
        return np.real(pade_evaluate(a, b, lam**2))
    a, b = pade_coefficients(c[: spec.order + 1], spec.num, spec.den)
    return np.real(pade_evaluate(a, b, lam))


def check_nondegenerate(model: Model, level: int, coupling: float | None = None, threshold: float = DEFAULT_MIXING_THRESHOLD) -> None:
    """Raise :class:`DegenerateLevelError` if RS would divide by ~0 for ``level``.

    Exactly degenerate partners always raise; with ``coupling`` given, a
    partner whose mixing ratio |λ V_ln| / |ΔE| is at least ``threshold`` raises too.
    """
    grp = model.degenerate_group_of(level)
    if grp is not None:
        other = next(g for g in grp if g != level)
        raise DegenerateLevelError(
            f"level {model.label(level)} is exactly degenerate with level {model.label(other)} "
            f"(|ΔE| = {abs(model.e0[level] - model.e0[other]):.3g} <= {model.degeneracy_tol:.3g}); "
            f"non-degenerate perturbation theory divides by zero here. Use the block treatment "
            f"(model.block_series({list(grp)}, order) or treatment='block').",
            (min(level, other), max(level, other)),
        )
    if coupling is None:
        return
    partners, ratios = mixing_ratios(model, level, coupling)
    if partners.size and np.max(ratios) >= threshold:
        k = int(np.argmax(ratios))
        l = int(partners[k])
        raise DegenerateLevelError(
            f"level {model.label(level)} is near-degenerate with level {model.label(l)} at coupling {coupling:g}: "
            f"mixing ratio |λ V| / |ΔE| = {ratios[k]:.3g} >= {threshold:g} "
            f"(|ΔE| = {abs(model.e0[level] - model.e0[l]):.3g}). Non-degenerate formulas are unreliable here; "
            f"use the block treatment (treatment='block' or model.block_series([{min(l, level)}, {max(l, level)}], order)).",
            (min(level, l), max(level, l)),
        )


def rs_series(
    model: Model,
    level: Any,
    order: int,
    *,
    coupling: float | None = None,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
) -> SeriesResult:
    """Rayleigh–Schrödinger energy and state corrections of one level.

    Parameters
    ----------
    model : Model
    level : int or label
        Energy rank of the unperturbed level (0 = lowest) or its label.
    order : int
        Highest order (>= 0); order 50 and beyond is fine.
    coupling : float, optional
        If given, refuse (``DegenerateLevelError``) when a partner's mixing
        ratio at this coupling is at least ``threshold``.
    threshold : float, default 0.1
        See :data:`ptcheck.degeneracy.DEFAULT_MIXING_THRESHOLD`.

    Returns
    -------
    SeriesResult

    Raises
    ------
    DegenerateLevelError
        The level is exactly degenerate (or near-degenerate at ``coupling``).

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([-0.5, 0.5]), [[0, 1], [1, 0]])
    >>> s = m.series(0, 4)
    >>> s.energy_coefficients
    array([-0.5,  0. , -1. ,  0. ,  1. ])
    """
    n = model.level_index(level)
    order = val.check_order(order, n=model.n)
    if coupling is not None:
        coupling = val.as_coupling(coupling)
    threshold = float(val.check_positive(threshold, "threshold"))
    check_nondegenerate(model, n, coupling, threshold)

    # resolvent on the level's own sector (other sectors may hold equal energies; V never reaches
    # them), from offset-free energies so that H0 -> H0 + c changes nothing
    e0 = model.e0_relative
    others = model.level_sectors != model.level_sectors[n]
    with np.errstate(divide="ignore"):
        r = 1.0 / (e0[n] - np.where(others, np.inf, e0))
    r[n] = 0.0
    dtype = np.result_type(model.dtype, np.float64)
    psi = np.zeros((order + 1, model.n), dtype=dtype)
    psi[0, n] = 1.0
    energies = np.zeros(order + 1, dtype=dtype)
    energies[0] = model.e0[n]
    v = model.v
    for k in range(1, order + 1):
        w = v @ psi[k - 1]
        energies[k] = w[n]
        # w - Σ_{j=1..k} E^(j) ψ^(k-j)
        w = w - energies[1 : k + 1] @ psi[k - 1 :: -1] if k > 1 else w - energies[1] * psi[0]
        psi[k] = r * w
        if not (np.isfinite(energies[k]) and np.all(np.isfinite(psi[k]))):
            raise FloatingPointError(
                f"Rayleigh–Schrödinger coefficients of level {model.label(n)} overflow float64 at order {k}: "
                "the radius of convergence is tiny compared with 1; ask for fewer orders or use the block treatment"
            )
    e_real = np.real(energies).astype(float)
    return SeriesResult(
        level=n,
        label=model.label(n),
        order=order,
        energy_coefficients=_readonly(e_real),
        state_coefficients=_readonly(psi),
        model=model,
    )
