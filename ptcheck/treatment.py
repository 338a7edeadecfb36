"""Choose the perturbative expansion of each level: non-degenerate RS or a block.

``treatment`` is one of :data:`TREATMENTS`:

- ``"nondegenerate"``: Rayleigh–Schrödinger series of the level alone
  (:func:`ptcheck.series.rs_series`).  An exactly degenerate level raises
  :class:`~ptcheck.errors.DegenerateLevelError`; a near-degenerate one (mixing
  ratio >= threshold at the coupling of interest) is computed as asked, with a
  :class:`~ptcheck.errors.NearDegenerateWarning`.
- ``"block"``: the block (quasi-degenerate) effective Hamiltonian of the
  cluster the level belongs to at the coupling of interest
  (:func:`ptcheck.blocks.block_series`); an isolated level gets a block of one.
- ``"auto"``: block for levels in a cluster of two or more at the coupling of
  interest (or exactly degenerate), non-degenerate otherwise.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from typing import Any, Protocol

import numpy as np

from . import _validation as val
from .degeneracy import DEFAULT_MIXING_THRESHOLD, mixing_ratios
from .errors import NearDegenerateWarning
from .model import Model
from .series import rs_series

__all__ = ["TREATMENTS", "LevelExpansion", "expansions"]

TREATMENTS = ("auto", "nondegenerate", "block")

#: Largest cluster 'auto' treats as a block.  Block treatments are for small
#: quasi-degenerate sets (doublets, manifolds); a cluster that percolates
#: further (e.g. a whole oscillator ladder) means no small block isolates the
#: level, and 'auto' keeps the non-degenerate series with a note.
AUTO_MAX_BLOCK = 16


class LevelExpansion(Protocol):
    """What compare / validity_boundary / convergence need from one level's expansion."""

    level: int
    label: str
    order: int
    treatment: str
    energy_coefficients: np.ndarray | None

    def energy(self, couplings: Any, order: Any = None) -> np.ndarray: ...

    def state(self, couplings: Any, order: Any = None) -> np.ndarray: ...

    def term(self, couplings: Any, k: int) -> np.ndarray: ...


def expansions(
    model: Model,
    levels: Sequence[int],
    max_order: int,
    *,
    treatment: str = "auto",
    coupling: float | None = None,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    method: str = "schrieffer-wolff",
) -> list[LevelExpansion]:
    """One expansion per level (work indices), to ``max_order``.

    Parameters
    ----------
    model : Model
    levels : sequence of int
        Work-basis level indices (already resolved).
    max_order : int
        Highest order needed.
    treatment : {"auto", "nondegenerate", "block"}
    coupling : float, optional
        Coupling of interest at which near-degeneracy is judged; ``None``
        judges exact degeneracy only.
    threshold : float
        Mixing-ratio threshold (see :mod:`ptcheck.degeneracy`).
    method : str
        Block method (see :mod:`ptcheck.blocks`).

    Returns
    -------
    list
        Objects following :class:`LevelExpansion`, in the order of ``levels``.
    """
    treatment = val.check_choice(treatment, "treatment", TREATMENTS)
    levels = [int(n) for n in levels]
    lam = 0.0 if coupling is None else abs(float(coupling))
    if treatment == "nondegenerate":
        out = []
        for n in levels:
            s = rs_series(model, n, max_order)  # raises for exact degeneracy
            if lam > 0:
                partners, ratios = mixing_ratios(model, n, lam)
                if partners.size and np.max(ratios) >= threshold:
                    k = int(np.argmax(ratios))
                    warnings.warn(
                        f"level {model.label(n)} is near-degenerate with level {model.label(int(partners[k]))} "
                        f"at coupling {lam:g} (mixing ratio {ratios[k]:.3g} >= {threshold:g}); the non-degenerate "
                        "series was forced as asked and is likely to fail there — treatment='block' handles it",
                        NearDegenerateWarning,
                        stacklevel=3,
                    )
            out.append(s)
        return out

    from .blocks import MAX_BLOCK_SIZE, block_series, find_blocks  # lazy: keeps the import graph light

    try:
        blocks = find_blocks(model, lam, threshold, levels=levels, max_size=AUTO_MAX_BLOCK if treatment == "auto" else MAX_BLOCK_SIZE)
    except ValueError:
        if treatment != "auto":
            raise
        # the near-degeneracy percolates through the spectrum (e.g. a ladder): no small block
        # isolates the level, so 'auto' keeps the non-degenerate series (compare notes the mixing)
        blocks = find_blocks(model, 0.0, threshold, levels=levels)
    block_of: dict[int, tuple[int, ...]] = {}
    for b in blocks:
        for n in b.levels:
            block_of[n] = tuple(b.levels)
    cache: dict[tuple[int, ...], Any] = {}
    out = []
    for n in levels:
        blk = block_of.get(n, (n,))
        if treatment == "auto" and len(blk) < 2:
            out.append(rs_series(model, n, max_order))
            continue
        if blk not in cache:
            cache[blk] = block_series(model, list(blk), max_order, method=method)
        out.append(cache[blk].level_expansion(n))
    return out
