"""Which perturbative expansion each level gets, and why: the one place for that decision.

``treatment`` (what the caller asks for) is one of :data:`TREATMENTS`:

- ``"standard"`` (default): the perturbation theory a practitioner writes
  down.  A level that is not degenerate with another level of its sector gets
  the non-degenerate Rayleigh–Schrödinger series
  (:func:`ptcheck.series.rs_series`); a level in an exactly degenerate group
  gets degenerate perturbation theory: the Schrieffer–Wolff effective
  Hamiltonian of *that group only*, its good states resolved at the order
  where the group splits (which can be any order, e.g. order L for the ground
  doublet of an Ising chain of L sites).
- ``"nondegenerate"``: the Rayleigh–Schrödinger series of every level; an
  exactly degenerate level raises :class:`~ptcheck.errors.DegenerateLevelError`,
  a near-degenerate one warns (:class:`~ptcheck.errors.NearDegenerateWarning`).
- ``"block"``: the near-degenerate block (quasi-degenerate effective
  Hamiltonian, :func:`ptcheck.blocks.block_series`) of the cluster the level
  belongs to at the coupling of interest (mixing ratio >= threshold, see
  :mod:`ptcheck.degeneracy`).
- ``"auto"``: ``"block"`` for levels in a cluster of two or more at the
  coupling of interest, ``"standard"`` otherwise.

The treatment *used* for a level (recorded in results with a ``reason``) is
one of ``"nondegenerate"``, ``"degenerate"`` or ``"near-degenerate block"``
(:data:`USED`).  A block (degenerate group or near-degenerate cluster) that is
a whole invariant sector of ``H0 + λV`` is exact diagonalisation of that
sector, not a perturbative approximation: the expansion says so
(``exact_in_sector``), and callers never report it as an order meeting a
tolerance.

Every expansion also gives the *shift* ``E(λ) − E(0)`` computed without the
unperturbed energy (so results do not change when a constant is added to
``H0``); a Padé approximant is built from the shift series.
"""

from __future__ import annotations

import html
import math
import warnings
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field, replace
from typing import Any, Protocol

import numpy as np

from . import _block_numerics as num
from . import _validation as val
from ._good_states import Branch, group_branches, natural_scales
from .approximants import OrderSpec, Pade, order_name, parse_order
from .blocks import HERMITICITY_RTOL, MAX_BLOCK_SIZE, METHODS, BlockWarning, _Space, block_series, find_blocks
from .degeneracy import DEFAULT_MIXING_THRESHOLD, mixing_ratios
from .errors import NearDegenerateWarning
from .exact import BACKENDS
from .model import Model
from .pade import pade_coefficients, pade_evaluate
from .series import SeriesResult, rs_series

__all__ = [
    "TREATMENTS",
    "DEFAULT_TREATMENT",
    "USED",
    "NONDEGENERATE",
    "DEGENERATE",
    "NEAR_DEGENERATE",
    "EXACT_IN_SECTOR",
    "CheckSettings",
    "TreatmentChoice",
    "Suggestion",
    "LevelExpansion",
    "PadeUnavailableError",
    "expansions",
    "expansion_map",
    "limiting_partner",
    "smallest_block",
    "whole_sector",
    "require_model",
]

#: Treatments a caller can ask for.
TREATMENTS = ("standard", "nondegenerate", "block", "auto")
#: The default everywhere (compare, validity_boundary, convergence, quantities, reports).
DEFAULT_TREATMENT = "standard"

NONDEGENERATE = "nondegenerate"
DEGENERATE = "degenerate"
NEAR_DEGENERATE = "near-degenerate block"
#: Treatments that results record as used.
USED = (NONDEGENERATE, DEGENERATE, NEAR_DEGENERATE)
#: What a block that is a whole invariant sector is.
EXACT_IN_SECTOR = "exact within its sector"

#: Largest cluster 'auto' treats as a block.  Block treatments are for small
#: quasi-degenerate sets (doublets, manifolds); a cluster that percolates
#: further (e.g. a whole oscillator ladder) means no small block isolates the
#: level, and 'auto' keeps the standard treatment with a note.
AUTO_MAX_BLOCK = 16

#: Eigenvalues of a degenerate group's ``H_eff(λ) − E0`` closer than this
#: fraction of its norm are numerically degenerate while the branches are followed.
_CLUSTER_RTOL = 1e-10


class PadeUnavailableError(ValueError):
    """A Padé approximant was asked for a level whose treatment has no scalar series."""


def require_model(model: Any, caller: str) -> Model:
    """Raise TypeError unless ``model`` is a :class:`Model` (message names what was passed)."""
    if not isinstance(model, Model):
        shown = repr(model)
        shown = shown if len(shown) <= 60 else shown[:57] + "..."
        raise TypeError(f"{caller} needs a ptcheck Model as its first argument; got {type(model).__name__}: {shown}")
    return model


# ====================================================================== settings
@dataclass(frozen=True)
class CheckSettings:
    """How a check is run: one small object instead of long parameter lists.

    Parameters
    ----------
    treatment : {"standard", "nondegenerate", "block", "auto"}, default "standard"
        See the module docstring.
    backend : {"auto", "dense", "sparse", "qutip"}, default "auto"
        Exact solver (:mod:`ptcheck.exact`).
    threshold : float, default :data:`ptcheck.degeneracy.DEFAULT_MIXING_THRESHOLD`
        Mixing ratio |λV|/|ΔE| at which a partner counts as near-degenerate
        (clusters of "block"/"auto", notes and suggestions).
    method : {"schrieffer-wolff", "brillouin-wigner"}, default "schrieffer-wolff"
        Method of near-degenerate blocks.  The degenerate treatment of an exact
        group is always Schrieffer–Wolff (diagonalise the effective Hamiltonian
        truncated at order k).
    coupling : float or None, default None
        Coupling of interest |λ| (dimensionless): where "block"/"auto" judge
        near-degeneracy and where suggestions are made.  Stored as |λ|.
    xrtol : float, default 1e-3
        Relative precision of a validity boundary.
    max_coupling : float or None, default None
        Largest |λ| a validity boundary search reaches (None: 100 x the
        level's isolation distance / ‖V‖).
    """

    treatment: str = DEFAULT_TREATMENT
    backend: str = "auto"
    threshold: float = DEFAULT_MIXING_THRESHOLD
    method: str = "schrieffer-wolff"
    coupling: float | None = None
    xrtol: float = 1e-3
    max_coupling: float | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "treatment", val.check_choice(self.treatment, "treatment", TREATMENTS))
        object.__setattr__(self, "backend", val.check_choice(self.backend, "backend", BACKENDS))
        object.__setattr__(self, "method", val.check_choice(self.method, "method", METHODS))
        object.__setattr__(self, "threshold", float(val.check_positive(self.threshold, "threshold")))
        object.__setattr__(self, "xrtol", float(val.check_positive(self.xrtol, "xrtol")))
        if self.xrtol >= 1:
            raise ValueError(f"xrtol must be below 1 (a relative precision); got {self.xrtol!r}")
        if self.coupling is not None:
            object.__setattr__(self, "coupling", abs(val.as_coupling(self.coupling)))
        if self.max_coupling is not None:
            object.__setattr__(self, "max_coupling", float(val.check_positive(self.max_coupling, "max_coupling")))

    def replace(self, **changes: Any) -> CheckSettings:
        """A copy with some settings changed (validated again)."""
        return replace(self, **changes)

    def to_dict(self) -> dict:
        return asdict(self)


# ====================================================================== choices
@dataclass(frozen=True)
class TreatmentChoice:
    """The expansion a level gets, and why.

    Attributes
    ----------
    level : int
        Work-basis index.
    label : str
    treatment : str
        One of :data:`USED`.
    levels : tuple of int
        Levels expanded together (the degenerate group or the near-degenerate
        block; ``(level,)`` for the non-degenerate series).
    reason : str
        Why, in plain words.
    exact_in_sector : bool
        The block is a whole invariant sector: its energies are exact
        diagonalisation, not a perturbative approximation.
    """

    level: int
    label: str
    treatment: str
    levels: tuple[int, ...]
    reason: str
    exact_in_sector: bool = False

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class Suggestion:
    """A treatment that would fix a near-degenerate partner limiting the answer (beside it, never in its place).

    Attributes
    ----------
    target : str
        The target (level label or quantity name) the suggestion is about.
    level, partner : int
        Work indices of the level and of the partner that limits its series.
    label, partner_label : str
    mixing_ratio : float
        |λ V| / |ΔE| of the pair at ``coupling``.
    coupling : float
        |λ| at which the pair was judged (the coupling of interest, or the
        validity boundary found).
    threshold : float
        Mixing-ratio threshold.
    threshold_coupling : float
        |λ| at which the ratio reaches the threshold (``threshold x |ΔE| / |V|``).
    block : tuple of int
        The smallest near-degenerate block containing the level at ``coupling``.
    block_labels : tuple of str
    exact_in_sector : bool
        That block is a whole invariant sector (exact diagonalisation of it).
    boundary : float
        Validity boundary (|λ|) of the block treatment for the same order and
        tolerance; NaN when not computed (no tolerance, e.g. in ``compare``),
        ``inf`` when not reached.
    boundary_status : str
        Status of that search (``"not computed"`` when none was made).
    text : str
        The suggestion in one sentence.
    """

    target: str
    level: int
    label: str
    partner: int
    partner_label: str
    mixing_ratio: float
    coupling: float
    threshold: float
    threshold_coupling: float
    block: tuple[int, ...]
    block_labels: tuple[str, ...]
    exact_in_sector: bool = False
    boundary: float = math.nan
    boundary_status: str = "not computed"
    text: str = ""

    def to_dict(self) -> dict:
        d = asdict(self)
        for k in ("mixing_ratio", "coupling", "threshold_coupling", "boundary"):
            x = d[k]
            d[k] = x if math.isfinite(x) else str(x)
        d["block"] = list(self.block)
        d["block_labels"] = list(self.block_labels)
        return d

    def _repr_html_(self) -> str:
        return html.escape(self.text)


def limiting_partner(model: Model, level: int, group: Sequence[int], coupling: float, threshold: float) -> tuple[int, float] | None:
    """The partner outside ``group`` with the largest mixing ratio >= ``threshold`` at ``coupling``, or None."""
    if coupling == 0:
        return None
    partners, ratios = mixing_ratios(model, level, coupling)
    keep = ~np.isin(partners, list(group))
    partners, ratios = partners[keep], ratios[keep]
    if partners.size == 0 or np.max(ratios) < threshold:
        return None
    k = int(np.argmax(ratios))
    return int(partners[k]), float(ratios[k])


def smallest_block(model: Model, level: int, coupling: float, threshold: float) -> tuple[int, ...] | None:
    """The smallest near-degenerate block containing ``level`` at ``coupling`` (None if it grows too large)."""
    try:
        (blk,) = find_blocks(model, coupling, threshold, levels=[level])
    except ValueError:
        return None
    return tuple(blk.levels)


# ====================================================================== expansions
class LevelExpansion(Protocol):
    """What compare / validity_boundary / convergence need from one level's expansion.

    ``energy`` = ``E^(0) + shift``; ``shift`` is ``E(λ) − E^(0)`` computed
    without ``E^(0)``; ``state`` is the normalised perturbative state in the work
    basis; ``term`` the size of the order-k contribution; ``pairing_order`` the
    truncation order whose states pair the level with an exact state inside its
    group (:mod:`ptcheck.pairing`); ``starts_on_good_states`` says whether the
    group's unperturbed work states are already its good states (else its exact
    partners are found in a window of eigenpairs).
    """

    level: int
    label: str
    order: int
    treatment: str
    reason: str
    group: tuple[int, ...]
    exact_in_sector: bool
    pairing_order: int
    energy_coefficients: np.ndarray | None
    starts_on_good_states: bool

    def energy(self, couplings: Any, order: Any = None) -> np.ndarray: ...

    def shift(self, couplings: Any, order: Any = None) -> np.ndarray: ...

    def state(self, couplings: Any, order: Any = None) -> np.ndarray: ...

    def term(self, couplings: Any, k: int) -> np.ndarray: ...


def _spec(order: Any, default: int) -> OrderSpec:
    return default if order is None else parse_order(order)


def _check_order(spec: OrderSpec, have: int) -> int:
    need = spec.order if isinstance(spec, Pade) else int(spec)
    if need > have:
        raise ValueError(f"{order_name(spec)} needs coefficients up to order {need}; this expansion has order {have}")
    return need


@dataclass(frozen=True, repr=False, eq=False)
class SeriesExpansion:
    """Non-degenerate Rayleigh–Schrödinger expansion of one level (wraps :class:`SeriesResult`)."""

    series: SeriesResult
    choice: TreatmentChoice
    pairing_order: int = 0

    @property
    def level(self) -> int:
        return self.series.level

    @property
    def label(self) -> str:
        return self.series.label

    @property
    def order(self) -> int:
        return self.series.order

    @property
    def treatment(self) -> str:
        return self.choice.treatment

    @property
    def reason(self) -> str:
        return self.choice.reason

    @property
    def group(self) -> tuple[int, ...]:
        return (self.series.level,)

    @property
    def exact_in_sector(self) -> bool:
        return False

    @property
    def starts_on_good_states(self) -> bool:
        return True

    @property
    def energy_coefficients(self) -> np.ndarray:
        return self.series.energy_coefficients

    def shift(self, couplings: Any, order: Any = None) -> np.ndarray:
        """``E(λ) − E^(0)`` (energy units), shape of ``couplings``; Padé of the shift series."""
        spec = _spec(order, self.order)
        _check_order(spec, self.order)
        lam = np.asarray(couplings, dtype=float)
        c = np.array(self.series.energy_coefficients, dtype=float)
        c[0] = 0.0
        if isinstance(spec, Pade):
            return _pade_shift(c, spec, lam, self.label)
        return np.polynomial.polynomial.polyval(lam, c[: spec + 1])

    def energy(self, couplings: Any, order: Any = None) -> np.ndarray:
        return self.series.energy_coefficients[0] + self.shift(couplings, order)

    def state(self, couplings: Any, order: Any = None) -> np.ndarray:
        return self.series.state(couplings, order)

    def term(self, couplings: Any, k: int) -> np.ndarray:
        return self.series.term(couplings, k)

    def __repr__(self) -> str:
        return f"SeriesExpansion(level={self.label}, order={self.order})"


def _pade_shift(c: np.ndarray, spec: Pade, lam: np.ndarray, label: str) -> np.ndarray:
    """Padé approximant of the shift series ``c`` (``c[0] = 0``)."""
    if spec.in_square:
        odd = c[1 : spec.order + 1 : 2]
        if np.max(np.abs(odd), initial=0) > 1e-12 * max(np.max(np.abs(c[: spec.order + 1])), 1e-300):
            raise ValueError(f"{spec} needs a series in λ² (odd coefficients zero); the series of level {label} has odd terms")
        a, b = pade_coefficients(c[: spec.order + 1 : 2], spec.num, spec.den)
        return np.real(pade_evaluate(a, b, lam**2))
    a, b = pade_coefficients(c[: spec.order + 1], spec.num, spec.den)
    return np.real(pade_evaluate(a, b, lam))


def _no_pade(spec: OrderSpec, label: str, treatment: str) -> None:
    if isinstance(spec, Pade):
        raise PadeUnavailableError(
            f"{spec} is not available for level {label}: it uses the {treatment} treatment, whose energies are "
            "eigenvalues of an effective Hamiltonian, not a scalar series; ask for an int truncation order"
        )


class _DegenerateGroup:
    """Schrieffer–Wolff effective Hamiltonian of one exactly degenerate group, branches from its good states."""

    def __init__(self, model: Model, levels: tuple[int, ...], order: int) -> None:
        self.model = model
        self.levels = levels
        idx = np.asarray(levels, dtype=int)
        # the group lies in one sector: the numerics run on that sector alone, offset-free (other sectors
        # never couple to it, and their equal energies are no degeneracy)
        self.space = space = _Space.of(model, idx)
        e0 = space.e0
        sw = num.sw_coefficients(e0, space.v, space.block, order)
        if sw.finite_order < order:
            raise FloatingPointError(
                f"the effective Hamiltonian of the degenerate group {[model.label(i) for i in levels]} overflows "
                f"float64 at order {sw.finite_order + 1}: its radius of convergence is tiny compared with 1; ask for fewer orders"
            )
        bad = np.flatnonzero(sw.residual > HERMITICITY_RTOL)
        if bad.size:
            warnings.warn(
                f"H_eff^(k) of the degenerate group {[model.label(i) for i in levels]} is not Hermitian to round-off "
                f"at order(s) {bad.tolist()} (relative anti-Hermitian residual up to {np.max(sw.residual):.3g}); "
                "its Hermitian parts are used",
                BlockWarning,
                stacklevel=4,
            )
        self.sw = sw
        ep = e0[space.block]
        ref = float(np.mean(ep))
        self.offsets = ref - ep  # shift of level i = eigenvalue of H_eff − ref + offsets[i]
        hs = np.array(sw.heff)
        hs[0] = np.diag(ep - ref).astype(hs.dtype)
        self.hs = hs
        in_q = np.ones(e0.size, dtype=bool)
        in_q[space.block] = False
        self.gap = float(np.min(np.abs(e0[in_q][:, None] - ep[None, :]))) if np.any(in_q) else math.inf
        nv = model.norm_v if space.levels is None else model.restrict(int(model.level_sectors[idx[0]])).norm_v
        self.branches: list[Branch] = group_branches(np.asarray(sw.heff), natural_scales(nv, self.gap, order))
        self.guess = np.column_stack([b.vector for b in self.branches]).astype(np.result_type(hs.dtype, float))
        lam_scale = (self.gap / (2 * nv) if np.isfinite(self.gap) else 1.0 / nv) if nv > 0 else 1.0
        self.guess_coupling = 1e-6 * lam_scale
        self.scale = float(max(nv, np.finfo(float).tiny))
        self._cache: dict = {}

    def split_order(self) -> int | None:
        orders = [b.split_order for b in self.branches]
        if any(o is None for o in orders):
            return None
        return max(orders)

    def solve(self, lam: np.ndarray, k: int) -> num.TrackResult:
        key = (k, lam.tobytes())
        if key not in self._cache:
            if len(self._cache) >= 32:
                self._cache.pop(next(iter(self._cache)))
            self._cache[key] = num.track_branches(
                self.hs[: k + 1], lam, self.guess, self.guess_coupling, self.scale, cluster_rtol=_CLUSTER_RTOL
            )
        return self._cache[key]

    def shifts(self, lam: np.ndarray, k: int) -> np.ndarray:
        """(p, C) shifts E − E^(0) of the group's levels at order k."""
        return self.solve(lam, k).energies + self.offsets[:, None]

    def states(self, lam: np.ndarray, k: int) -> np.ndarray:
        """(p, C, N) normalised perturbative states at order k (work basis)."""
        tr = self.solve(lam, k)
        ul = num.isometry_at(self.sw, k, lam)  # (C, M, p) on the group's sector
        psi = np.einsum("cnp,cpi->icn", ul, tr.vectors)
        return self.space.embed(psi / np.linalg.norm(psi, axis=2, keepdims=True))


@dataclass(frozen=True, repr=False, eq=False)
class GroupExpansion:
    """One level of an exactly degenerate group: degenerate perturbation theory."""

    level: int
    label: str
    order: int
    choice: TreatmentChoice
    energy_coefficients: np.ndarray | None
    pairing_order: int
    _group: _DegenerateGroup = field(repr=False)
    _index: int = field(repr=False)

    @property
    def treatment(self) -> str:
        return self.choice.treatment

    @property
    def reason(self) -> str:
        return self.choice.reason

    @property
    def group(self) -> tuple[int, ...]:
        return self._group.levels

    @property
    def exact_in_sector(self) -> bool:
        return self.choice.exact_in_sector

    @property
    def effective_hamiltonian(self) -> np.ndarray:
        """(order + 1, d, d) read-only: ``H_eff^(k)`` of the group (Schrieffer–Wolff, energy units) in the
        work basis of :attr:`group`; the level's energy is the eigenvalue of ``Σ_k λ^k H_eff^(k)`` on its branch."""
        h = np.array(self._group.sw.heff)
        h[0] += self._group.space.offset * np.eye(h.shape[1], dtype=h.dtype)  # the numerics are offset-free
        h.setflags(write=False)
        return h

    @property
    def good_states(self) -> np.ndarray:
        """(d, d) read-only: column i is the good state of branch i (λ → 0+ limit of its eigenvector) in the
        work basis of :attr:`group`; branch i belongs to level ``group[i]``."""
        g = np.array(self._group.guess)
        g.setflags(write=False)
        return g

    @property
    def starts_on_good_states(self) -> bool:
        """The group's work-basis states are already its good states (so exact tracking can start from them)."""
        guess = np.abs(np.asarray(self._group.guess))
        return bool(np.all(np.max(guess, axis=0) > 1 - 1e-9))

    def _k(self, order: Any) -> int:
        spec = _spec(order, self.order)
        _no_pade(spec, self.label, self.treatment)
        return _check_order(spec, self.order)

    def shift(self, couplings: Any, order: Any = None) -> np.ndarray:
        k = self._k(order)
        lam = np.asarray(couplings, dtype=float)
        return self._group.shifts(lam.reshape(-1), k)[self._index].reshape(lam.shape)[()]

    def energy(self, couplings: Any, order: Any = None) -> np.ndarray:
        return self._group.model.e0[self.level] + self.shift(couplings, order)

    def state(self, couplings: Any, order: Any = None) -> np.ndarray:
        k = self._k(order)
        lam = np.asarray(couplings, dtype=float)
        psi = self._group.states(lam.reshape(-1), k)[self._index]
        return psi.reshape(lam.shape + (self._group.model.n,))

    def term(self, couplings: Any, k: int) -> np.ndarray:
        k = val.check_int(k, "k", minimum=0, maximum=self.order)
        return np.linalg.norm(self._group.hs[k], ord=2) * np.abs(np.asarray(couplings, dtype=float)) ** k

    def __repr__(self) -> str:
        return f"GroupExpansion(level={self.label}, order={self.order}, group={list(self.group)})"


@dataclass(frozen=True, repr=False, eq=False)
class BlockExpansion:
    """One level of a near-degenerate block (wraps :class:`~ptcheck.blocks.BlockLevelExpansion`)."""

    inner: Any
    choice: TreatmentChoice
    pairing_order: int = 1
    energy_coefficients: None = None

    @property
    def level(self) -> int:
        return self.inner.level

    @property
    def label(self) -> str:
        return self.inner.label

    @property
    def order(self) -> int:
        return self.inner.order

    @property
    def block(self) -> Any:
        return self.inner.block

    @property
    def treatment(self) -> str:
        return self.choice.treatment

    @property
    def reason(self) -> str:
        return self.choice.reason

    @property
    def group(self) -> tuple[int, ...]:
        return tuple(self.inner.block.levels)

    @property
    def exact_in_sector(self) -> bool:
        return self.choice.exact_in_sector

    @property
    def starts_on_good_states(self) -> bool:
        """A block's levels are followed from their own unperturbed states (no window of eigenpairs)."""
        return True

    def _k(self, order: Any) -> int:
        spec = _spec(order, self.order)
        _no_pade(spec, self.label, self.treatment)
        return _check_order(spec, self.order)

    def energy(self, couplings: Any, order: Any = None) -> np.ndarray:
        return self.inner.energy(couplings, self._k(order))

    def shift(self, couplings: Any, order: Any = None) -> np.ndarray:
        return self.inner.shift(couplings, self._k(order))

    def state(self, couplings: Any, order: Any = None) -> np.ndarray:
        return self.inner.state(couplings, self._k(order))

    def term(self, couplings: Any, k: int) -> np.ndarray:
        return self.inner.term(couplings, k)

    def __repr__(self) -> str:
        return f"BlockExpansion(level={self.label}, order={self.order}, block={list(self.group)})"


# ====================================================================== the decision
def _names(model: Model, levels: Sequence[int]) -> str:
    return ", ".join(model.label(i) for i in levels)


def whole_sector(model: Model, levels: Sequence[int]) -> bool:
    """True when ``levels`` (two or more) span whole invariant sectors of ``H0 + λV`` (``model.sectors``)."""
    levels = {int(i) for i in levels}
    if len(levels) < 2:
        return False
    touched = np.unique(model.level_sectors[sorted(levels)])
    return int(np.isin(model.level_sectors, touched).sum()) == len(levels)


def _exact_note(model: Model, levels: Sequence[int]) -> str:
    return (
        f"; {EXACT_IN_SECTOR}: the block ({_names(model, levels)}) is a whole invariant sector of H0 + λV, so its "
        "'order k' energies are exact diagonalisation of that sector from order 1 on, not a perturbative approximation"
    )


def expansions(
    model: Model,
    levels: Sequence[int],
    max_order: int,
    *,
    settings: CheckSettings | None = None,
    treatment: str | None = None,
    coupling: float | None = None,
    threshold: float | None = None,
    method: str | None = None,
) -> list[LevelExpansion]:
    """One expansion per level (work indices), to ``max_order``; the one place that decides it.

    Parameters
    ----------
    model : Model
    levels : sequence of int
        Work-basis level indices (already resolved).
    max_order : int
        Highest order needed.
    settings : CheckSettings, optional
        Treatment, threshold, method and coupling of interest.  The other
        keywords override single fields (for one-off calls).

    Returns
    -------
    list
        Objects following :class:`LevelExpansion`, in the order of ``levels``;
        each records its :class:`TreatmentChoice` (treatment used and reason).
        Levels of one group or block share one effective Hamiltonian.
    """
    s = _settings(settings, treatment=treatment, coupling=coupling, threshold=threshold, method=method)
    levels = [int(n) for n in levels]
    found = expansion_map(model, levels, max_order, settings=s)
    return [found[n] for n in levels]


def _settings(settings: CheckSettings | None, **overrides: Any) -> CheckSettings:
    s = settings if settings is not None else CheckSettings()
    changes = {k: v for k, v in overrides.items() if v is not None}
    return s.replace(**changes) if changes else s


def expansion_map(model: Model, levels: Sequence[int], max_order: int, *, settings: CheckSettings) -> dict[int, LevelExpansion]:
    """Expansions of ``levels`` and of every other member of their groups/blocks (needed to pair states)."""
    s = settings
    lam = 0.0 if s.coupling is None else s.coupling
    groups: dict[tuple[int, ...], _DegenerateGroup] = {}
    blocks: dict[tuple[int, ...], Any] = {}
    block_of: dict[int, tuple[int, ...]] = {}
    if s.treatment in ("block", "auto"):
        block_of = _near_degenerate_blocks(model, [int(n) for n in levels], lam, s)
    out: dict[int, LevelExpansion] = {}
    todo = [int(n) for n in levels]
    while todo:
        n = todo.pop(0)
        if n in out:
            continue
        grp = model.degenerate_group_of(n)
        blk = block_of.get(n)
        if s.treatment == "nondegenerate":
            e: LevelExpansion = _series(model, n, max_order, s, lam, asked=True)
        elif blk is not None and not (grp is not None and tuple(blk) == tuple(grp)) and (len(blk) > 1 or s.treatment == "block"):
            e = _block(model, n, blk, max_order, s, lam, blocks)
        elif grp is not None:
            e = _degenerate(model, n, tuple(grp), max_order, s, lam, groups)
        else:
            e = _series(model, n, max_order, s, lam, asked=False)
        out[n] = e
        todo.extend(m for m in e.group if m not in out and m not in todo)
    return out


def _near_degenerate_blocks(model: Model, levels: list[int], lam: float, s: CheckSettings) -> dict[int, tuple[int, ...]]:
    cap = AUTO_MAX_BLOCK if s.treatment == "auto" else MAX_BLOCK_SIZE
    try:
        found = find_blocks(model, lam, s.threshold, levels=levels, max_size=cap)
    except ValueError:
        if s.treatment != "auto":
            raise
        # the near-degeneracy percolates through the spectrum (e.g. a ladder): no small block isolates
        # the level, so 'auto' keeps the standard treatment (compare notes the mixing)
        return {}
    out: dict[int, tuple[int, ...]] = {}
    for b in found:
        for n in b.levels:
            out[n] = tuple(b.levels)
    return out


def _series(model: Model, n: int, order: int, s: CheckSettings, lam: float, *, asked: bool) -> SeriesExpansion:
    series = rs_series(model, n, order)  # raises DegenerateLevelError for an exactly degenerate level
    if asked:
        reason = "treatment='nondegenerate': the Rayleigh–Schrödinger series, as asked"
        if lam > 0:
            lim = limiting_partner(model, n, (n,), lam, s.threshold)
            if lim is not None:
                warnings.warn(
                    f"level {model.label(n)} is near-degenerate with level {model.label(lim[0])} at coupling {lam:g} "
                    f"(mixing ratio {lim[1]:.3g} >= {s.threshold:g}); the non-degenerate series was forced as asked "
                    "and is likely to fail there — treatment='block' handles it",
                    NearDegenerateWarning,
                    stacklevel=4,
                )
    elif s.treatment == "standard":
        reason = "not degenerate with another level of its sector: the non-degenerate Rayleigh–Schrödinger series"
    else:
        reason = (
            f"treatment={s.treatment!r}: no partner reaches mixing ratio {s.threshold:g} at |λ| = {lam:g}, so the level "
            "keeps the non-degenerate Rayleigh–Schrödinger series"
        )
    choice = TreatmentChoice(n, model.label(n), NONDEGENERATE, (n,), reason)
    return SeriesExpansion(series, choice)


def _degenerate(model: Model, n: int, grp: tuple[int, ...], order: int, s: CheckSettings, lam: float, cache: dict) -> GroupExpansion:
    if grp not in cache:
        cache[grp] = _DegenerateGroup(model, grp, order)
    g = cache[grp]
    i = grp.index(n)
    b = g.branches[i]
    others = [j for j in grp if j != n]
    split = g.split_order()
    if b.split_order is not None:
        how = f"good states resolved at order {b.split_order}, where the group splits"
    elif b.coefficients is not None:
        how = f"the group does not split within the {order} orders computed (its branches are equal to that order)"
    else:
        how = "the group's good states are not resolved (a higher order mixes a sub-cluster with the rest of the group)"
    reason = (
        f"exactly degenerate with {_names(model, others)} in H0: degenerate perturbation theory (Schrieffer–Wolff "
        f"effective Hamiltonian of that group only; {how}; branches attached to the group's levels in ascending "
        "energy at small positive λ)"
    )
    guess = np.abs(np.asarray(g.guess))
    if not np.all(np.max(guess, axis=0) > 1 - 1e-9):
        reason += (
            "; the good states are superpositions of the group's unperturbed states, so the labels of the group "
            "name a branch by this convention, not an unperturbed state"
        )
    if s.treatment in ("block", "auto"):
        reason = f"treatment={s.treatment!r}: no near-degenerate partner beyond its exact degenerate group at |λ| = {lam:g}; " + reason
    exact = whole_sector(model, grp)
    if exact:
        reason += _exact_note(model, grp)
    choice = TreatmentChoice(n, model.label(n), DEGENERATE, grp, reason, exact)
    coeffs = None if b.coefficients is None else np.concatenate([[model.e0[n]], b.coefficients])
    if coeffs is not None:
        coeffs.setflags(write=False)
    pairing = max(1, split if split is not None else max(1, order))
    return GroupExpansion(
        level=n, label=model.label(n), order=order, choice=choice, energy_coefficients=coeffs,
        pairing_order=min(pairing, order) if order > 0 else 0, _group=g, _index=i,
    )


def _block(model: Model, n: int, blk: tuple[int, ...], order: int, s: CheckSettings, lam: float, cache: dict) -> BlockExpansion:
    if blk not in cache:
        cache[blk] = block_series(model, list(blk), order, method=s.method)
    if len(blk) == 1:
        reason = (
            f"treatment='block': no partner reaches mixing ratio {s.threshold:g} at |λ| = {lam:g}; a near-degenerate "
            "block of one level (the same series as Rayleigh–Schrödinger)"
        )
    else:
        reason = (
            f"treatment={s.treatment!r}: {NEAR_DEGENERATE} ({_names(model, blk)}) tied by mixing ratios >= "
            f"{s.threshold:g} at |λ| = {lam:g} ({s.method} effective Hamiltonian)"
        )
    exact = whole_sector(model, blk)
    if exact:
        reason += _exact_note(model, blk)
    choice = TreatmentChoice(n, model.label(n), NEAR_DEGENERATE, blk, reason, exact)
    return BlockExpansion(cache[blk].level_expansion(n), choice, pairing_order=min(1, order))
