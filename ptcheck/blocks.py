"""Block (quasi-degenerate) perturbation theory: clusters and effective Hamiltonians.

A *block* is a set of unperturbed levels that must be treated together: levels
that are exactly degenerate in ``H0``, or that a coupling mixes strongly (mixing
ratio ``|λ V_ln| / |E_l - E_n|`` at or above a threshold, see
:mod:`ptcheck.degeneracy`).  :func:`find_blocks` finds them; :func:`block_series`
builds the block's effective Hamiltonian ``H_eff(λ)`` (a ``p x p`` matrix) to
any order, with one of two published methods (:data:`METHODS`):

``"schrieffer-wolff"``
    Canonical van Vleck / Schrieffer–Wolff effective Hamiltonian
    ``H_eff = Σ_k λ^k H_eff^(k)`` (Hermitian ``p x p`` coefficients).  Computed
    from Bloch's wave operator, solved order by order (Bloch, Nucl. Phys. 6, 329
    (1958); Lindgren, J. Phys. B 7, 2441 (1974)), made Hermitian the way of
    des Cloizeaux (``H_eff = S^{-1/2} Ω† H Ω S^{-1/2}``, ``S = Ω†Ω``), which is
    the canonical van Vleck one (Shavitt & Redmon, J. Chem. Phys. 73, 5711
    (1980)).  Only products of ``V`` with ``(N, p)`` arrays are formed.
``"brillouin-wigner"``
    Löwdin partitioning / Brillouin–Wigner: the energy-dependent
    ``H_eff(E) = E_P + λ PVP + Σ_{m=2}^{k} λ^m P V (R(E) V)^{m-1} P`` with
    ``R(E) = Q (E - Q H0 Q)^{-1} Q``, each eigenvalue solved self-consistently.

Level assignment: the eigenvalues of ``H_eff(λ)`` are attached to the block's
levels by following the eigenbranches continuously from λ = 0, starting from
the eigenvectors at a tiny coupling matched to the unperturbed block basis.
Inside an exactly degenerate group the work basis already holds the good
states ordered by first-order shift (see :class:`ptcheck.model.Model`).  When V
does *not* split some levels of a group at first order (equal first-order
shifts), their labels do not name perturbed states; ptcheck then gives the
branches of those levels to them in ascending energy at small positive λ and
says so in :attr:`BlockSeries.notes`.
"""

from __future__ import annotations

import html
import warnings
from collections.abc import Hashable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp

from . import _block_numerics as num
from . import _validation as val
from .approximants import OrderSpec, Pade, order_name, parse_order
from .degeneracy import DEFAULT_MIXING_THRESHOLD, NearDegeneratePair, near_degenerate_pairs
from .errors import DegenerateLevelError, PtcheckWarning
from .model import Model

__all__ = [
    "METHODS",
    "MAX_BLOCK_SIZE",
    "Block",
    "BlockSeries",
    "BlockSolution",
    "BlockLevelExpansion",
    "BlockWarning",
    "find_blocks",
    "block_series",
]

#: Block methods accepted by :func:`block_series`.
METHODS = ("schrieffer-wolff", "brillouin-wigner")

#: Default largest block :func:`find_blocks` accepts.  A cluster that grows
#: beyond this is a sign that the coupling has left the perturbative regime for
#: a large part of the spectrum (or that the threshold is too small).
MAX_BLOCK_SIZE = 64

#: Anti-Hermitian residual of an ``H_eff^(k)`` (relative to the roundoff scale
#: of that order) above which a :class:`BlockWarning` is emitted.
HERMITICITY_RTOL = 1e-8


class BlockWarning(PtcheckWarning):
    """Numerical trouble in a block effective Hamiltonian.

    Emitted when an effective-Hamiltonian coefficient is not Hermitian to
    roundoff, when the Brillouin–Wigner self-consistency does not converge, or
    when the eigenbranches could not be followed unambiguously.
    """


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.asarray(a)
    a.setflags(write=False)
    return a


def _json_float(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


def _json_matrix(a: np.ndarray) -> Any:
    if np.iscomplexobj(a):
        return {"real": np.real(a).tolist(), "imag": np.imag(a).tolist()}
    return np.asarray(a).tolist()


# ===================================================================== clusters
@dataclass(frozen=True, repr=False)
class Block:
    """A cluster of levels to be treated together.

    Attributes
    ----------
    levels : tuple of int
        Work-basis indices, ascending.
    labels : tuple of str
        Printable names of the levels.
    pairs : tuple of NearDegeneratePair
        The pairs that tie the block together (both levels in the block), each
        with its mixing ratio at ``coupling`` (``inf`` for exact degeneracy).
        Empty for a block of one level.
    coupling : float
        Coupling λ at which the ratios were evaluated (dimensionless).
    threshold : float
        Mixing-ratio threshold used.
    """

    levels: tuple[int, ...]
    labels: tuple[str, ...]
    pairs: tuple[NearDegeneratePair, ...]
    coupling: float
    threshold: float

    @property
    def size(self) -> int:
        """Number of levels ``p``."""
        return len(self.levels)

    @property
    def max_ratio(self) -> float:
        """Largest mixing ratio among :attr:`pairs` (0 for a block of one)."""
        return max((p.ratio for p in self.pairs), default=0.0)

    def __repr__(self) -> str:
        names = ", ".join(self.labels[:6]) + (", …" if self.size > 6 else "")
        return f"Block([{names}], coupling={self.coupling:g}, max ratio={self.max_ratio:.3g})"

    def to_dict(self) -> dict:
        """JSON-safe summary (a ratio of ``None`` means exact degeneracy)."""
        return {
            "levels": list(self.levels),
            "labels": list(self.labels),
            "coupling": self.coupling,
            "threshold": self.threshold,
            "pairs": [
                {"l": p.l, "n": p.n, "ratio": _json_float(p.ratio), "exact_degeneracy": not np.isfinite(p.ratio),
                 "gap": p.gap, "coupling_element": p.coupling_element, "labels": list(p.labels)}
                for p in self.pairs
            ],
        }

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{html.escape(p.labels[0])}</td><td>{html.escape(p.labels[1])}</td>"
            f"<td>{'exact degeneracy' if not np.isfinite(p.ratio) else f'{p.ratio:.4g}'}</td></tr>"
            for p in self.pairs
        )
        return (
            f"<b>Block</b> of {self.size} level(s): {html.escape(', '.join(self.labels))} "
            f"(coupling {self.coupling:g}, threshold {self.threshold:g})"
            f"<table><tr><th>level</th><th>level</th><th>mixing ratio</th></tr>{rows}</table>"
        )


def _require_model(model: Any, caller: str) -> None:
    if not isinstance(model, Model):
        shown = repr(model)
        shown = shown if len(shown) <= 60 else shown[:57] + "..."
        raise TypeError(f"{caller} needs a ptcheck Model as its first argument; got {type(model).__name__}: {shown}")


def _resolve_levels(model: Model, levels: Any, name: str = "levels") -> list[int]:
    """Work indices of a list of level keys (ints or labels).

    A list, range or array is a sequence of levels.  A tuple is a single label
    if the model has that label, otherwise a sequence of levels.
    """
    if isinstance(levels, Block):
        return list(levels.levels)
    if isinstance(levels, tuple):
        try:
            return [model.level_index(levels)]
        except ValueError:
            seq = list(levels)
    else:
        seq = val.as_sequence(levels)
    if not seq:
        raise ValueError(f"{name} is empty; give at least one level")
    out = [model.level_index(k) for k in seq]
    if len(set(out)) != len(out):
        dup = next(k for k in out if out.count(k) > 1)
        raise ValueError(f"{name} names level {model.label(dup)} (index {dup}) more than once; got {levels!r}")
    return out


def _union_find_components(pairs: list[NearDegeneratePair]) -> list[list[int]]:
    parent: dict[int, int] = {}

    def find(a: int) -> int:
        parent.setdefault(a, a)
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    for p in pairs:
        ra, rb = find(p.l), find(p.n)
        if ra != rb:
            parent[max(ra, rb)] = min(ra, rb)
    comps: dict[int, list[int]] = {}
    for a in parent:
        comps.setdefault(find(a), []).append(a)
    return [sorted(c) for c in comps.values()]


def _too_large(model: Model, comp: Any, coupling: float, threshold: float, max_size: int) -> ValueError:
    comp = sorted(comp)
    shown = ", ".join(model.label(i) for i in comp[:8]) + (", …" if len(comp) > 8 else "")
    return ValueError(
        f"the block grows beyond max_size={max_size} levels at coupling {coupling:g} with threshold "
        f"{threshold:g} (it already holds {len(comp)} levels: {shown}). A cluster this large means the "
        "coupling mixes a large part of the spectrum: perturbation theory around it is not meaningful. "
        "Use a smaller coupling or a larger threshold (or raise max_size if you really mean it)."
    )


def find_blocks(
    model: Model,
    coupling: float,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    *,
    levels: Any = None,
    max_size: int = MAX_BLOCK_SIZE,
) -> tuple[Block, ...]:
    """Clusters of levels that a perturbative treatment must handle together.

    Two levels are tied when they are exactly degenerate in ``H0``
    (``model.degenerate_groups``) or when their mixing ratio
    ``|λ V_ln| / |E_l - E_n|`` at ``coupling`` is at least ``threshold``; blocks
    are the connected components of these ties (union–find).

    Parameters
    ----------
    model : Model
    coupling : float
        Coupling λ at which the mixing ratios are evaluated (dimensionless).
    threshold : float, default :data:`ptcheck.degeneracy.DEFAULT_MIXING_THRESHOLD`
        Smallest mixing ratio that ties two levels (0.1 is justified in
        :mod:`ptcheck.degeneracy`).
    levels : sequence of level keys, optional
        Return only the blocks containing these levels (ints or labels).  A
        level tied to nothing is returned as a block of one level.
    max_size : int, default :data:`MAX_BLOCK_SIZE`
        Largest acceptable block.

    Returns
    -------
    tuple of Block
        Sorted by their lowest level.  Without ``levels``: every block of two
        or more levels.

    Raises
    ------
    ValueError
        A block would exceed ``max_size`` levels (the message suggests a
        smaller coupling or a larger threshold), or bad input.

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([0.0, 1.0, 1.05]), [[0, .1, 0], [.1, 0, .1], [0, .1, 0]])
    >>> [b.levels for b in find_blocks(m, 0.5)]
    [(1, 2)]
    """
    _require_model(model, "find_blocks")
    lam = val.as_coupling(coupling)
    threshold = float(val.check_positive(threshold, "threshold"))
    max_size = val.check_int(max_size, "max_size", minimum=1)

    def make(comp: list[int], pairs: list[NearDegeneratePair]) -> Block:
        members = set(comp)
        own = tuple(sorted((p for p in pairs if p.l in members and p.n in members), key=lambda p: (-p.ratio, p.l, p.n)))
        return Block(tuple(comp), tuple(model.label(i) for i in comp), own, lam, threshold)

    if levels is None:
        pairs = near_degenerate_pairs(model, lam, threshold)
        comps = _union_find_components(pairs)
        for c in comps:
            if len(c) > max_size:
                raise _too_large(model, c, lam, threshold, max_size)
        return tuple(make(c, pairs) for c in sorted(comps, key=min))

    wanted = _resolve_levels(model, levels)
    blocks: list[Block] = []
    seen: set[int] = set()
    for start in wanted:
        if start in seen:
            continue
        comp = {start}
        frontier = {start}
        found: dict[tuple[int, int], NearDegeneratePair] = {}
        while frontier:
            new: set[int] = set()
            for p in near_degenerate_pairs(model, lam, threshold, levels=sorted(frontier)):
                found[(p.l, p.n)] = p
                new.update((p.l, p.n))
            frontier = new - comp
            comp |= new
            if len(comp) > max_size:
                raise _too_large(model, comp, lam, threshold, max_size)
        seen |= comp
        blocks.append(make(sorted(comp), list(found.values())))
    return tuple(sorted(blocks, key=lambda b: b.levels[0]))


# ============================================================ block series
@dataclass(frozen=True, repr=False, eq=False)
class BlockSolution:
    """Block energies and eigenvectors of ``H_eff`` at a set of couplings.

    Attributes
    ----------
    couplings : (C,) ndarray, read-only
    order : int
        Truncation order used.
    energies : (p, C) ndarray, read-only
        Energy of each block level (row, in :attr:`BlockSeries.levels` order),
        energy units.  For Brillouin–Wigner: the last iterate, also where the
        iteration did not converge (see ``converged``).
    vectors : (C, p, p) ndarray, read-only
        ``vectors[c][:, i]``: eigenvector of ``H_eff`` (block basis) of level ``i``.
    converged : (p, C) bool ndarray, read-only
        Brillouin–Wigner self-consistency reached (always True for
        Schrieffer–Wolff).
    ambiguous : bool
        Some step of the branch following could not be resolved (an avoided
        crossing narrower than the path refinement).
    shifts : (p, C) ndarray, read-only
        ``energies − E^(0)`` of each level, computed offset-free (no rounding
        of a constant carried by ``H0``).
    """

    couplings: np.ndarray
    order: int
    energies: np.ndarray
    vectors: np.ndarray
    converged: np.ndarray
    ambiguous: bool
    shifts: np.ndarray | None = None

    def __repr__(self) -> str:
        bad = int(np.size(self.converged) - np.count_nonzero(self.converged))
        extra = f", {bad} not converged" if bad else ""
        return f"BlockSolution(p={self.energies.shape[0]}, C={self.couplings.size}, order={self.order}{extra})"

    def to_dict(self) -> dict:
        return {
            "couplings": self.couplings.tolist(),
            "order": self.order,
            "energies": self.energies.tolist(),
            "converged": self.converged.tolist(),
            "ambiguous": self.ambiguous,
        }

    def _repr_html_(self) -> str:
        return html.escape(repr(self))


@dataclass(frozen=True, repr=False, eq=False)
class BlockSeries:
    """Effective Hamiltonian of a block of levels, to a given order.

    Attributes
    ----------
    levels : tuple of int
        Work-basis indices of the block's ``p`` levels, ascending.
    labels : tuple of str
        Printable names of the levels.
    order : int
        Highest order computed.
    method : str
        ``"schrieffer-wolff"`` or ``"brillouin-wigner"``.
    coefficients : (order + 1, p, p) ndarray, read-only
        Schrieffer–Wolff: ``H_eff^(k)`` (Hermitian, energy units), with
        ``H_eff(λ) = Σ_k λ^k H_eff^(k)`` in the block basis (work basis
        restricted to :attr:`levels`).  Brillouin–Wigner: the
        energy-independent part only (``E_P`` and ``PVP`` at orders 0 and 1,
        zeros above); the energy-dependent matrices are given by
        :meth:`coefficients_at`.
    hermiticity_residual : (order + 1,) ndarray, read-only
        ``‖H^(k) - H^(k)†‖ / 2`` relative to the roundoff scale of order k,
        before the stored coefficients were made exactly Hermitian
        (Schrieffer–Wolff; zeros for Brillouin–Wigner, whose matrices are
        Hermitian by construction).
    gap : float
        Smallest ``|E_p - E_q|`` between a block level and a level outside it
        (energy units; ``inf`` if the block is the whole basis).  Together with
        ``‖V‖`` it sets the coupling scale on which the block series converges.
    notes : tuple of str
        Plain-language remarks (assignment conventions, numerical issues).
    rtol, max_iter : float, int
        Brillouin–Wigner self-consistency tolerance (relative to the energy
        scale) and iteration cap.
    """

    levels: tuple[int, ...]
    labels: tuple[str, ...]
    order: int
    method: str
    coefficients: np.ndarray
    hermiticity_residual: np.ndarray
    gap: float
    notes: tuple[str, ...]
    rtol: float
    max_iter: int
    model: Model = field(repr=False)
    _sw: num.SWCoefficients = field(repr=False)
    _guess: np.ndarray = field(repr=False)
    _guess_coupling: float = field(repr=False)
    _scale: float = field(repr=False)
    _space: "_Space" = field(repr=False)
    _cache: dict = field(default_factory=dict, repr=False)
    _anchors: dict = field(default_factory=dict, repr=False)  # order -> tracked (coupling, vectors): warm starts

    treatment = "block"

    # ------------------------------------------------------------------ basics
    @property
    def size(self) -> int:
        """Number of levels ``p`` in the block."""
        return len(self.levels)

    def _order(self, order: Any) -> int:
        if order is None:
            return self.order
        if isinstance(order, Pade) or (isinstance(order, str) and not order.strip().isdigit()):
            spec = parse_order(order)
            raise ValueError(
                f"{order_name(spec)} is not available for a block: its levels have no scalar energy "
                "series here; ask for an int truncation order"
            )
        k = val.check_int(parse_order(order), "order", minimum=0)
        if k > self.order:
            raise ValueError(f"order {k} exceeds the computed order {self.order} of this block series")
        return k

    def _block_index(self, level: Any) -> int:
        n = self.model.level_index(level)
        if n not in self.levels:
            raise ValueError(f"level {self.model.label(n)} (index {n}) is not in this block {list(self.levels)}")
        return self.levels.index(n)

    # ------------------------------------------------------------- effective H
    def coefficients_at(self, energy: float) -> np.ndarray:
        """Coefficient matrices ``(order + 1, p, p)`` at energy ``E``.

        Brillouin–Wigner: ``M_m(E) = P V (R(E) V)^{m-1} P`` (``M_0 = E_P``).
        Schrieffer–Wolff: :attr:`coefficients` (they do not depend on E).
        """
        e = val.as_coupling(energy, "energy")
        if self.method == "schrieffer-wolff":
            return self.coefficients
        return _readonly(self._space.bw_matrices(self.order, np.array([e]))[0])

    def effective_hamiltonian(self, coupling: float, order: int | None = None, *, level: Any = None, energy: float | None = None) -> np.ndarray:
        """``H_eff`` truncated at ``order`` at one coupling, shape ``(p, p)``.

        Parameters
        ----------
        coupling : float
        order : int, optional
            Default: the full computed order.
        level : int or label, optional
            Brillouin–Wigner only: evaluate ``H_eff(E)`` at this level's
            self-consistent energy.  Default: the block's lowest level.
        energy : float, optional
            Brillouin–Wigner only: evaluate at this energy instead.
        """
        lam = val.as_coupling(coupling)
        k = self._order(order)
        if self.method == "schrieffer-wolff":
            if level is not None or energy is not None:
                raise ValueError("level= and energy= apply to the Brillouin–Wigner method only; this block uses Schrieffer–Wolff")
            return num.evaluate_polynomial(self.coefficients[: k + 1], np.array([lam]))[0]
        if energy is None:
            i = 0 if level is None else self._block_index(level)
            sol = self.solve([lam], order=k)
            energy = float(sol.energies[i, 0])
            if not sol.converged[i, 0]:
                warnings.warn(
                    f"Brillouin–Wigner self-consistency of level {self.labels[i]} did not converge at coupling {lam:g}; "
                    "H_eff is evaluated at the last iterate",
                    BlockWarning,
                    stacklevel=2,
                )
        else:
            energy = val.as_coupling(energy, "energy")
        mats = self._space.bw_matrices(k, np.array([energy]))[0]
        h = num.evaluate_polynomial(mats, np.array([lam]))[0]
        return 0.5 * (h + h.conj().T)

    # ------------------------------------------------------------- energies
    def solve(self, couplings: Any, order: int | None = None) -> BlockSolution:
        """Energies and ``H_eff`` eigenvectors of all block levels at ``couplings``.

        Parameters
        ----------
        couplings : float or (C,) array_like
        order : int, optional
            Truncation order (default: full).

        Returns
        -------
        BlockSolution
        """
        lam = val.as_couplings(couplings)
        k = self._order(order)
        key = ("solve", k, lam.tobytes())
        if key in self._cache:
            return self._cache[key]
        heff = self._sw.heff[: k + 1]  # offset-free (E_P relative to the model's energy offset)
        anchors = self._anchors.setdefault(k, [])
        if lam.size == 1:  # one coupling at a time (a boundary search): continue from the nearest tracked point
            tr = num.track_point(heff, float(lam[0]), self._guess, self._guess_coupling, self._scale, anchors)
        else:
            tr = num.track_branches(heff, lam, self._guess, self._guess_coupling, self._scale)
            num.remember(anchors, lam, tr)
        energies, vectors, ambiguous = tr.energies, tr.vectors, tr.ambiguous
        converged = np.ones(energies.shape, dtype=bool)
        if self.method == "brillouin-wigner" and k >= 2:
            p, c = energies.shape
            ref = np.transpose(vectors, (2, 0, 1)).reshape(p * c, p)  # (level, coupling) -> vector
            sp_ = self._space
            sol = num.bw_solve(
                sp_.e0, sp_.v, sp_.block, k, np.tile(lam, p), energies.reshape(-1), ref,
                rtol=self.rtol, max_iter=self.max_iter, scale=self._scale,
            )
            energies = sol.energies.reshape(p, c)
            vectors = np.transpose(sol.vectors.reshape(p, c, p), (1, 2, 0))
            converged = sol.converged.reshape(p, c)
        out = BlockSolution(
            couplings=_readonly(lam.copy()),
            order=k,
            energies=_readonly(np.real(energies).astype(float) + self._space.offset),
            vectors=_readonly(vectors),
            converged=_readonly(converged),
            ambiguous=ambiguous,
            shifts=_readonly(np.real(energies).astype(float) - self._space.e0[self._space.block][:, None]),
        )
        if len(self._cache) >= 32:
            self._cache.pop(next(iter(self._cache)))
        self._cache[key] = out
        return out

    def energies(self, couplings: Any, order: int | None = None) -> np.ndarray:
        """Energies of the block levels, shape ``(p, C)`` (energy units).

        Rows follow :attr:`levels`.  Each level's value is the eigenvalue of
        ``H_eff`` truncated at ``order`` on the branch that starts at that
        level at λ = 0.  Brillouin–Wigner entries whose self-consistency did
        not converge are NaN (with a :class:`BlockWarning`).
        """
        sol = self.solve(couplings, order)
        self._warn(sol)
        e = np.array(sol.energies)
        e[~sol.converged] = np.nan
        return e

    def states(self, couplings: Any, order: int | None = None) -> np.ndarray:
        """Normalised perturbative states of the block levels, shape ``(p, C, N)``, work basis.

        Schrieffer–Wolff: ``U^{(≤k)}(λ) φ_n`` with ``U = Ω S^{-1/2}`` truncated
        after λ^k and ``φ_n`` the eigenvector of ``H_eff`` truncated at order k.
        Brillouin–Wigner: ``Σ_{m≤k} λ^m (R(E) V)^m P φ_n`` at the
        self-consistent energy.  Phases follow the branch from λ = 0.
        """
        lam = val.as_couplings(couplings)
        k = self._order(order)
        sol = self.solve(lam, k)
        self._warn(sol)
        p, c, n = self.size, lam.size, self.model.n
        space = self._space
        if self.method == "schrieffer-wolff" or k < 2:
            ul = num.isometry_at(self._sw, k, lam)  # (C, M, p) on the block's sectors
            psi = space.embed(np.einsum("cnp,cpi->icn", ul, sol.vectors))
        else:
            phis = np.transpose(sol.vectors, (2, 0, 1)).reshape(p * c, p)
            rel = sol.energies.reshape(-1) - space.offset
            psi = space.embed(num.bw_states(space.e0, space.v, space.block, k, rel, np.tile(lam, p), phis))
            psi = psi.reshape(p, c, n)
        norm = np.linalg.norm(psi, axis=2, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            psi = psi / norm
        psi[~sol.converged] = np.nan
        return psi

    def _warn(self, sol: BlockSolution) -> None:
        if not np.all(sol.converged):
            bad = np.argwhere(~sol.converged)
            i, c = (int(t) for t in bad[0])
            warnings.warn(
                f"Brillouin–Wigner self-consistency did not converge for {len(bad)} (level, coupling) pair(s), "
                f"e.g. level {self.labels[i]} at coupling {sol.couplings[c]:g} (max_iter={self.max_iter}); "
                "those energies are NaN. The energy-dependent series is probably outside its range there.",
                BlockWarning,
                stacklevel=3,
            )
        if sol.ambiguous:
            warnings.warn(
                f"the eigenbranches of the block {list(self.labels)} could not be followed unambiguously at order "
                f"{sol.order} (an avoided crossing narrower than the path refinement); the level assignment may "
                "swap there",
                BlockWarning,
                stacklevel=3,
            )

    def level_expansion(self, level: Any) -> BlockLevelExpansion:
        """The expansion of one of the block's levels (level expansion protocol)."""
        i = self._block_index(level)
        return BlockLevelExpansion(level=self.levels[i], label=self.labels[i], order=self.order, block=self, _index=i)

    # ------------------------------------------------------------- output
    def __repr__(self) -> str:
        names = ", ".join(self.labels[:4]) + (", …" if self.size > 4 else "")
        return f"BlockSeries([{names}], order={self.order}, method={self.method!r})"

    def to_dict(self) -> dict:
        return {
            "levels": list(self.levels),
            "labels": list(self.labels),
            "order": self.order,
            "method": self.method,
            "treatment": self.treatment,
            "coefficients": _json_matrix(self.coefficients),
            "hermiticity_residual": self.hermiticity_residual.tolist(),
            "gap": _json_float(self.gap),
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        norms = np.linalg.norm(self.coefficients, ord=2, axis=(1, 2))
        rows = "".join(f"<tr><td>{k}</td><td>{x:.6g}</td></tr>" for k, x in enumerate(norms))
        notes = "".join(f"<li>{html.escape(s)}</li>" for s in self.notes)
        return (
            f"<b>Block series</b> ({html.escape(self.method)}) of levels {html.escape(', '.join(self.labels))} "
            f"(model {html.escape(self.model.name)!s}), order {self.order}, gap to other levels {self.gap:.4g}"
            f"<table><tr><th>k</th><th>‖H<sub>eff</sub><sup>(k)</sup>‖</th></tr>{rows}</table>"
            + (f"<ul>{notes}</ul>" if notes else "")
        )


@dataclass(frozen=True, repr=False, eq=False)
class BlockLevelExpansion:
    """One level of a block series (the level expansion protocol).

    Attributes
    ----------
    level : int
        Work-basis index.
    label : str
    order : int
        Highest order available.
    treatment : str
        ``"block"``.
    energy_coefficients : None
        A block level has no scalar energy series here: its energy is an
        eigenvalue of the truncated ``H_eff`` matrix.  Padé specs are refused.
    block : BlockSeries
        The shared block series.
    """

    level: int
    label: str
    order: int
    block: BlockSeries = field(repr=False)
    _index: int = field(repr=False)
    treatment: str = "block"
    energy_coefficients: None = None

    @property
    def method(self) -> str:
        return self.block.method

    def energy(self, couplings: Any, order: OrderSpec | None = None) -> np.ndarray:
        """Block energy of this level, shape of ``couplings`` (energy units)."""
        lam = np.asarray(couplings, dtype=float)
        e = self.block.energies(lam.reshape(-1), order)[self._index]
        return e.reshape(lam.shape)[()]

    def shift(self, couplings: Any, order: OrderSpec | None = None) -> np.ndarray:
        """``E(λ) − E^(0)`` of this level, shape of ``couplings`` (energy units; offset-free, NaN where
        Brillouin–Wigner did not converge)."""
        lam = np.asarray(couplings, dtype=float)
        sol = self.block.solve(lam.reshape(-1), order)
        self.block._warn(sol)
        s = np.where(sol.converged[self._index], sol.shifts[self._index], np.nan)
        return s.reshape(lam.shape)[()]

    def state(self, couplings: Any, order: OrderSpec | None = None) -> np.ndarray:
        """Normalised state, work basis: ``(N,)`` for a scalar coupling, else ``(C, N)``."""
        if isinstance(order, Pade):
            raise ValueError(f"{order} approximates the energy only; ask for a truncation order for the state")
        lam = np.asarray(couplings, dtype=float)
        psi = self.block.states(lam.reshape(-1), order)[self._index]
        return psi.reshape(lam.shape + (self.block.model.n,))

    def term(self, couplings: Any, k: int) -> np.ndarray:
        """Size of the order-k contribution ``‖H_eff^(k)‖₂ |λ|^k``, shape of ``couplings``.

        Brillouin–Wigner: ``‖M_k(E)‖₂ |λ|^k`` at the level's unperturbed energy E.
        """
        k = val.check_int(k, "k", minimum=0, maximum=self.order)
        lam = np.asarray(couplings, dtype=float)
        if self.block.method == "schrieffer-wolff":
            mat = self.block.coefficients[k]
        else:
            mat = self.block.coefficients_at(self.block.model.e0[self.level])[k]
        return np.linalg.norm(mat, ord=2) * np.abs(lam) ** k

    def __repr__(self) -> str:
        return f"BlockLevelExpansion(level={self.label}, order={self.order}, block={list(self.block.labels)}, method={self.method!r})"

    def to_dict(self) -> dict:
        return {
            "level": self.level,
            "label": self.label,
            "order": self.order,
            "treatment": self.treatment,
            "method": self.method,
            "block": list(self.block.levels),
        }

    def _repr_html_(self) -> str:
        return f"Level {html.escape(self.label)} in " + self.block._repr_html_()


# ================================================================ sectors of a block
@dataclass(frozen=True, eq=False)
class _Space:
    """Where a block's effective Hamiltonian lives: the sectors of its levels (private).

    Levels of other sectors never couple to the block (V is exactly zero
    between sectors), so the block numerics run on the block's sectors only
    (no division by a cross-sector energy difference) and with offset-free
    energies (``model.e0_relative``); ``offset`` is added back to energies.
    """

    levels: np.ndarray | None  # parent work indices of the kept levels (None: all)
    e0: np.ndarray  # offset-free energies of the kept levels
    v: Any  # V restricted to the kept levels
    block: np.ndarray  # positions of the block's levels among the kept levels
    offset: float
    n: int  # parent basis size

    @classmethod
    def of(cls, model: Model, block: np.ndarray) -> "_Space":
        secs = np.unique(model.level_sectors[block])
        if secs.size == int(model.level_sectors.max()) + 1:
            return cls(None, model.e0_relative, model.v, block, model.energy_offset, model.n)
        if secs.size == 1:
            sub = model.restrict(int(secs[0]))  # cached: e0 and V of the sector
            keep = np.flatnonzero(model.level_sectors == secs[0])
            return cls(keep, sub.e0_relative, sub.v, np.searchsorted(keep, block), model.energy_offset, model.n)
        keep = np.flatnonzero(np.isin(model.level_sectors, secs))
        v = model.v[keep][:, keep].tocsr() if sp.issparse(model.v) else model.v[np.ix_(keep, keep)]
        return cls(keep, model.e0_relative[keep], v, np.searchsorted(keep, block), model.energy_offset, model.n)

    def embed(self, psi: np.ndarray) -> np.ndarray:
        """Vectors on the kept levels (last axis) as N-vectors of the model."""
        if self.levels is None:
            return psi
        out = np.zeros(psi.shape[:-1] + (self.n,), dtype=psi.dtype)
        out[..., self.levels] = psi
        return out

    def bw_matrices(self, order: int, energies: np.ndarray) -> np.ndarray:
        """Brillouin–Wigner ``M_m(E)`` at absolute energies ``E``."""
        mats = num.bw_matrices(self.e0, self.v, self.block, order, np.asarray(energies, dtype=float) - self.offset)
        mats[:, 0] += self.offset * np.eye(self.block.size)
        return mats


# ================================================================ entry point
def _check_block(model: Model, block: list[int]) -> None:
    members = set(block)
    for n in block:
        grp = model.degenerate_group_of(n)
        if grp is None:
            continue
        missing = [g for g in grp if g not in members]
        if missing:
            m = missing[0]
            raise DegenerateLevelError(
                f"the block {sorted(block)} contains level {model.label(n)} (index {n}) but not level "
                f"{model.label(m)} (index {m}), which is exactly degenerate with it; a block must hold whole "
                f"degenerate groups. Add {missing} (group {list(grp)}).",
                (min(n, m), max(n, m)),
            )
    # levels of other sectors never mix with the block: equal energies there are no degeneracy
    e0 = model.e0_relative
    in_q = np.isin(model.level_sectors, np.unique(model.level_sectors[block]))
    in_q[block] = False
    if np.any(in_q):
        eq = e0[in_q]
        q_idx = np.flatnonzero(in_q)
        for n in block:
            d = np.abs(eq - e0[n])
            j = int(np.argmin(d))
            if d[j] <= model.degeneracy_tol:
                m = int(q_idx[j])
                raise DegenerateLevelError(
                    f"level {model.label(n)} (index {n}) of the block is degenerate with level {model.label(m)} "
                    f"(index {m}) outside it (|ΔE| = {d[j]:.3g} <= {model.degeneracy_tol:.3g}); add it to the block.",
                    (min(n, m), max(n, m)),
                )


def _first_order_ties(model: Model, block: list[int]) -> list[np.ndarray]:
    """Block positions of levels in one degenerate group with equal first-order shift."""
    vd = model.v_diagonal()
    vscale = val.max_abs(model.v)
    tol = 1e-9 * max(vscale, np.finfo(float).tiny)
    pos = {n: i for i, n in enumerate(block)}
    ties = []
    for grp in model.degenerate_groups:
        if grp[0] not in pos:
            continue
        run = [grp[0]]
        for a in grp[1:] + (None,):
            if a is not None and abs(vd[a] - vd[run[-1]]) <= tol:
                run.append(a)
                continue
            if len(run) > 1:
                ties.append(np.array([pos[r] for r in run]))
            run = [a] if a is not None else []
    return ties


def block_series(
    model: Model,
    levels: Any,
    order: int,
    *,
    method: str = "schrieffer-wolff",
    rtol: float = 1e-12,
    max_iter: int = 100,
) -> BlockSeries:
    """Effective Hamiltonian of a block of levels, to any order.

    Parameters
    ----------
    model : Model
    levels : list of level keys or Block
        The block's levels: energy ranks (ints) or labels, e.g. ``[2, 3]`` or
        ``[(0, 1), (1, 0)]``.  Must hold whole exactly degenerate groups.  A
        block of one level is allowed (Schrieffer–Wolff then reproduces the
        Rayleigh–Schrödinger series).  A *tuple* is read as one label when the
        model has that label, otherwise as a sequence of levels; a list is
        never ambiguous.
    order : int
        Highest order (>= 0).
    method : {"schrieffer-wolff", "brillouin-wigner"}
        See :data:`METHODS` and the module docstring.
    rtol : float, default 1e-12
        Brillouin–Wigner: convergence when ``|ε(E) - E|`` is below ``rtol`` x
        the energy scale.
    max_iter : int, default 100
        Brillouin–Wigner: iteration cap per (level, coupling).

    Returns
    -------
    BlockSeries

    Raises
    ------
    DegenerateLevelError
        The block splits an exactly degenerate group or is degenerate with a
        level outside it.
    ValueError, TypeError
        Bad levels, order or method.

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([0.0, 0.0, 5.0]), [[0, 1, 1], [1, 0, 0], [1, 0, 0]])
    >>> b = m.block_series([0, 1], 2)
    >>> np.round(b.coefficients[1], 12)     # first order: V in the good-state basis
    array([[-1.,  0.],
           [ 0.,  1.]])
    """
    _require_model(model, "block_series")
    block = sorted(_resolve_levels(model, levels))
    order = val.check_order(order, n=model.n)
    method = val.check_choice(method, "method", METHODS)
    rtol = float(val.check_positive(rtol, "rtol"))
    max_iter = val.check_int(max_iter, "max_iter", minimum=1)
    _check_block(model, block)

    idx = np.asarray(block, dtype=int)
    space = _Space.of(model, idx)
    sw = num.sw_coefficients(space.e0, space.v, space.block, order)  # offset-free, on the block's sectors
    if sw.finite_order < order:
        raise FloatingPointError(
            f"the block effective Hamiltonian of {[model.label(i) for i in block]} overflows float64 at order "
            f"{sw.finite_order + 1}: the series' radius of convergence is tiny compared with 1; ask for fewer orders"
        )
    notes: list[str] = []
    bad = np.flatnonzero(sw.residual > HERMITICITY_RTOL)
    if bad.size:
        msg = (
            f"H_eff^(k) is not Hermitian to roundoff at order(s) {bad.tolist()} (relative anti-Hermitian residual up "
            f"to {np.max(sw.residual):.3g}); the stored coefficients are the Hermitian parts"
        )
        notes.append(msg)
        warnings.warn(msg, BlockWarning, stacklevel=2)

    # scales: the gap to the rest of the block's sectors, V's size on the block, energies
    e0 = space.e0
    in_q = np.ones(e0.size, dtype=bool)
    in_q[space.block] = False
    ep = e0[space.block]
    gap = float(np.min(np.abs(e0[in_q][:, None] - ep[None, :]))) if np.any(in_q) else np.inf
    intra = np.abs(ep[:, None] - ep[None, :])
    intra = intra[intra > model.degeneracy_tol]
    gaps = [g for g in (gap, float(np.min(intra)) if intra.size else np.inf) if np.isfinite(g)]
    basis = np.zeros((e0.size, idx.size))
    basis[space.block, np.arange(idx.size)] = 1.0
    vcol = float(np.max(np.linalg.norm(np.asarray(space.v @ basis), axis=0)))
    # energy scale of the block (tolerances of the branch matching and of Brillouin–Wigner)
    escale = float(max(np.max(np.abs(ep)), np.ptp(ep), vcol, gap if np.isfinite(gap) else 0.0, np.finfo(float).tiny))
    if vcol > 0 and gaps:
        lam_scale = min(gaps) / (2.0 * vcol)
    else:
        lam_scale = 1.0 / vcol if vcol > 0 else 1.0
    vd = model.v_diagonal()
    ties = _first_order_ties(model, block)
    # distinct first-order shifts inside degenerate groups: keep the guess coupling well below
    # the coupling at which higher orders could reorder them
    dv = []
    for grp in model.degenerate_groups:
        if grp[0] in block:
            d = np.diff(vd[list(grp)])
            dv.extend(d[d > 1e-9 * max(vcol, np.finfo(float).tiny)].tolist())
    factor = min(1.0, min(dv) / vcol) if (dv and vcol > 0) else 1.0
    guess_coupling = max(1e-3 * lam_scale * factor, 1e-9 * lam_scale)
    guess = num.guess_vectors(sw.heff, guess_coupling, ties, escale)
    for ts in ties:
        names = ", ".join(model.label(block[i]) for i in ts)
        notes.append(
            f"levels {names} are exactly degenerate with equal first-order shifts: V does not split them at first "
            "order, so their labels do not name perturbed states; their branches are assigned in ascending "
            "energy at small positive coupling"
        )

    absolute = sw.heff.copy()
    absolute[0] += space.offset * np.eye(idx.size)
    if method == "schrieffer-wolff":
        coefficients = absolute
        residual = sw.residual
    else:
        coefficients = np.zeros_like(sw.heff)
        coefficients[0] = absolute[0]
        if order >= 1:
            coefficients[1] = sw.heff[1]
        residual = np.zeros(order + 1)
        notes.append(
            "Brillouin–Wigner: coefficients hold the energy-independent part (orders 0 and 1) only; "
            "the energy-dependent matrices are given by coefficients_at(E). Eigenvalues are solved "
            "self-consistently, started from (and matched by eigenvector to) the Schrieffer–Wolff result "
            "of the same order"
        )
    return BlockSeries(
        levels=tuple(block),
        labels=tuple(model.label(i) for i in block),
        order=order,
        method=method,
        coefficients=_readonly(coefficients),
        hermiticity_residual=_readonly(np.asarray(residual, dtype=float)),
        gap=gap,
        notes=tuple(notes),
        rtol=rtol,
        max_iter=max_iter,
        model=model,
        _sw=sw,
        _guess=guess,
        _guess_coupling=float(guess_coupling),
        _scale=escale,
        _space=space,
    )
