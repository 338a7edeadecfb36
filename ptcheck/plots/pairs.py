"""Near-degenerate pairs: heat map of mixing ratios, flagged pairs and the blocks chosen."""

from __future__ import annotations

import html
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from matplotlib.colors import LogNorm
from matplotlib.patches import Rectangle

from ..blocks import find_blocks
from ..degeneracy import DEFAULT_MIXING_THRESHOLD, mixing_ratios, near_degenerate_pairs
from ._common import add_caption, caption_text, new_axes
from ._style import FLAG_COLOR, FONT_SIZES, MIXING_CMAP, OKABE_ITO, style

__all__ = ["MixingMap", "mixing_map", "PairArtists", "plot_pairs"]


def _ro(a: Any) -> np.ndarray:
    a = np.array(a)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, repr=False, eq=False)
class MixingMap:
    """Mixing ratios among a few levels at one coupling, with flagged pairs and blocks.

    Gathered from :func:`ptcheck.degeneracy.mixing_ratios`,
    :func:`ptcheck.degeneracy.near_degenerate_pairs` and
    :func:`ptcheck.blocks.find_blocks` (no new numerics).

    Attributes
    ----------
    model_name : str
    n : int
        Basis size N.
    coupling : float
        Coupling λ at which the ratios are evaluated.
    threshold : float
        Mixing-ratio threshold that flags a pair.
    levels : (K,) int ndarray
        Work-basis indices shown (ascending unperturbed energy).
    labels : tuple of str
        Their names.
    ratios : (K, K) ndarray
        ``ratios[a, b] = |λ V_lm| / |E_l − E_m|`` for ``l = levels[a]``,
        ``m = levels[b]``; ``inf`` for an exact degeneracy, NaN where the
        levels are not coupled directly (and on the diagonal).
    pairs : tuple of NearDegeneratePair
        Flagged pairs (ratio >= threshold) among the levels shown.
    blocks : tuple of Block
        Blocks containing the levels asked for (blocks of one included).
    asked : tuple of int
        The levels asked for (work indices).
    """

    model_name: str
    n: int
    coupling: float
    threshold: float
    levels: np.ndarray
    labels: tuple
    ratios: np.ndarray
    pairs: tuple
    blocks: tuple
    asked: tuple = field(default=())

    def __repr__(self) -> str:
        return (f"MixingMap({self.model_name!r}, coupling={self.coupling:g}, {len(self.levels)} levels, "
                f"{len(self.pairs)} flagged pair(s), blocks={[b.levels for b in self.blocks if b.size > 1]})")

    def to_dict(self) -> dict:
        r = np.where(np.isnan(self.ratios), None, np.where(np.isinf(self.ratios), "inf", self.ratios))
        return {
            "model": self.model_name, "n": self.n, "coupling": self.coupling, "threshold": self.threshold,
            "levels": self.levels.tolist(), "labels": list(self.labels), "ratios": r.tolist(),
            "pairs": [{"l": p.l, "n": p.n, "ratio": p.ratio if np.isfinite(p.ratio) else "inf",
                       "labels": list(p.labels)} for p in self.pairs],
            "blocks": [b.to_dict() for b in self.blocks], "asked": list(self.asked),
        }

    def to_rows(self) -> list[dict]:
        """One row per ordered pair of levels shown (for CSV)."""
        rows = []
        for a, la in enumerate(self.levels):
            for b, lb in enumerate(self.levels):
                if a != b:
                    rows.append({"coupling": self.coupling, "level": self.labels[a], "partner": self.labels[b],
                                 "ratio": float(self.ratios[a, b]), "flagged": bool(self.ratios[a, b] >= self.threshold)})
        return rows

    def _repr_html_(self) -> str:
        items = "".join(f"<li>{html.escape(p.labels[0])} – {html.escape(p.labels[1])}: "
                        f"{'exact degeneracy' if not np.isfinite(p.ratio) else f'{p.ratio:.3g}'}</li>" for p in self.pairs)
        return f"<b>Mixing ratios</b> at λ = {self.coupling:g} (threshold {self.threshold:g})<ul>{items}</ul>"


def mixing_map(
    model: Any,
    coupling: float,
    *,
    levels: Any = None,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    neighbours: int = 2,
    max_levels: int = 16,
) -> MixingMap:
    """Collect the mixing ratios among the levels near the ones of interest.

    Parameters
    ----------
    model : Model
    coupling : float
        Coupling λ.
    levels : sequence of level keys, optional
        Levels of interest; the map shows them, the members of their blocks
        and ``neighbours`` levels on each side in energy (at most
        ``max_levels`` in all).  Default: the lowest ``max_levels`` levels.
    threshold : float
        Mixing-ratio threshold (see :mod:`ptcheck.degeneracy`).
    neighbours, max_levels : int

    Returns
    -------
    MixingMap
    """
    from .. import _validation as val

    lam = val.as_coupling(coupling)
    threshold = float(val.check_positive(threshold, "threshold"))
    max_levels = val.check_int(max_levels, "max_levels", minimum=2)
    neighbours = val.check_int(neighbours, "neighbours", minimum=0)
    if levels is None:
        asked = list(range(min(model.n, max_levels)))
        blocks = find_blocks(model, lam, threshold, levels=asked)
        shown = list(asked)
    else:
        asked = [model.level_index(k) for k in val.as_sequence(levels)]
        if not asked:
            raise ValueError("levels is empty; give at least one level")
        blocks = find_blocks(model, lam, threshold, levels=asked)
        must = list(dict.fromkeys(asked + [i for b in blocks for i in b.levels]))
        extra = [j for i in asked for j in range(i - neighbours, i + neighbours + 1) if 0 <= j < model.n]
        shown = list(dict.fromkeys(must + [j for j in extra if j not in must]))[: max(max_levels, len(must))]
    shown = sorted(set(shown))
    pos = {lv: a for a, lv in enumerate(shown)}
    ratios = np.full((len(shown), len(shown)), np.nan)
    for lv in shown:
        partners, r = mixing_ratios(model, lv, lam)
        for p, rr in zip(partners.tolist(), r.tolist()):
            if p in pos and p != lv:
                ratios[pos[lv], pos[p]] = rr
    pairs = tuple(p for p in near_degenerate_pairs(model, lam, threshold, levels=shown) if p.l in pos and p.n in pos)
    return MixingMap(
        model_name=model.name, n=model.n, coupling=lam, threshold=threshold, levels=_ro(np.array(shown, dtype=int)),
        labels=tuple(model.label(i) for i in shown), ratios=_ro(ratios), pairs=pairs, blocks=tuple(blocks),
        asked=tuple(asked),
    )


@dataclass(frozen=True)
class PairArtists:
    """Artists made by :func:`plot_pairs`.

    Attributes
    ----------
    figure, ax
    image : AxesImage
        Heat map; its array equals ``MixingMap.ratios`` (masked where NaN;
        ``inf`` drawn as ``10 x`` the top of the colour scale, in the "over" colour).
    colorbar : Colorbar or None
    flagged : tuple of Rectangle
        Outline of each flagged cell (both (l, m) and (m, l)), in the order of ``MixingMap.pairs``.
    block_outlines : tuple of Rectangle
        One per block of two or more levels: around the cells of its levels
        when they are adjacent in the map, otherwise around each member's
        diagonal cell.
    block_labels : tuple of Text
        "B1", "B2", ... on the diagonal cells of block members.
    caption : Text
    """

    figure: Any
    ax: Any
    image: Any
    colorbar: Any
    flagged: tuple
    block_outlines: tuple
    block_labels: tuple
    caption: Any


_BLOCK_COLORS = (OKABE_ITO["bluish green"], OKABE_ITO["reddish purple"], OKABE_ITO["orange"], OKABE_ITO["sky blue"])


def plot_pairs(
    mmap: MixingMap,
    *,
    ax: Any = None,
    cax: Any = None,
    colorbar: bool = True,
    caption: str | None = None,
    vmin: float = 1e-3,
) -> PairArtists:
    """Heat map of mixing ratios with flagged pairs outlined and blocks marked.

    Parameters
    ----------
    mmap : MixingMap
        From :func:`mixing_map`.
    ax : matplotlib Axes, optional
    cax : matplotlib Axes, optional
        Axes for the colour bar (default: taken from ``ax``).
    colorbar : bool, default True
    caption : str, optional
    vmin : float
        Smallest ratio on the colour scale (log scale).

    Returns
    -------
    PairArtists
    """
    if not isinstance(mmap, MixingMap):
        raise TypeError(f"plot_pairs needs a MixingMap (from ptcheck.plots.mixing_map); got {type(mmap).__name__}")
    fig, ax, scale = new_axes(ax)
    k = len(mmap.levels)
    r = np.asarray(mmap.ratios, dtype=float)
    finite = r[np.isfinite(r)]
    vmax = max(float(finite.max()) if finite.size else 1.0, 10 * mmap.threshold, 1.0)
    cmap = MIXING_CMAP.with_extremes(bad="#F2F2F2", over="#1B1B3A", under="#FFFFFF")
    lw = max(scale, 0.75) * 2.0
    fs = FONT_SIZES["caption"] * scale
    with style(scale):
        # imshow masks inf like NaN: draw exact degeneracies above the scale (the "over" colour) instead
        shown = np.where(np.isposinf(r), 10.0 * vmax, r)
        im = ax.imshow(shown, cmap=cmap,
                       norm=LogNorm(vmin=vmin, vmax=vmax), interpolation="nearest", aspect="equal")
        cbar = None
        if colorbar:
            cbar = fig.colorbar(im, ax=None if cax is not None else ax, cax=cax, extend="both")
            cbar.set_label("mixing ratio |λV| / |ΔE|  (dark: exact degeneracy)", fontsize=fs)
            cbar.ax.tick_params(labelsize=fs)
            cbar.ax.axhline(mmap.threshold, color=FLAG_COLOR, linewidth=lw)
        ax.set_xticks(range(k), labels=list(mmap.labels), rotation=90, fontsize=fs)
        ax.set_yticks(range(k), labels=list(mmap.labels), fontsize=fs)
        ax.set_xlabel("level")
        ax.set_ylabel("level")
        ax.xaxis.label.set_fontsize(FONT_SIZES["base"] * scale)
        ax.yaxis.label.set_fontsize(FONT_SIZES["base"] * scale)
        pos = {int(lv): a for a, lv in enumerate(mmap.levels)}
        flagged = []
        for p in mmap.pairs:
            for a, b in ((pos[p.l], pos[p.n]), (pos[p.n], pos[p.l])):
                flagged.append(ax.add_patch(Rectangle((b - 0.5, a - 0.5), 1, 1, fill=False, edgecolor=FLAG_COLOR, linewidth=lw)))
        outlines, labels = [], []
        for bi, blk in enumerate(b for b in mmap.blocks if b.size > 1):
            col = _BLOCK_COLORS[bi % len(_BLOCK_COLORS)]
            idx = sorted(pos[i] for i in blk.levels if i in pos)
            if not idx:
                continue
            if idx == list(range(idx[0], idx[-1] + 1)):
                outlines.append(ax.add_patch(Rectangle((idx[0] - 0.5, idx[0] - 0.5), len(idx), len(idx), fill=False,
                                                       edgecolor=col, linewidth=lw, linestyle="--")))
            else:
                for a in idx:
                    outlines.append(ax.add_patch(Rectangle((a - 0.5, a - 0.5), 1, 1, fill=False, edgecolor=col,
                                                           linewidth=lw, linestyle="--")))
            for a in idx:
                labels.append(ax.text(a, a, f"B{bi + 1}", ha="center", va="center", fontsize=fs, color=col,
                                      fontweight="bold"))
        if caption is None:
            nb = [b for b in mmap.blocks if b.size > 1]
            extra = [f"threshold {mmap.threshold:g}", f"{len(mmap.pairs)} flagged pair(s)"]
            extra += [f"B{i + 1} = block {{{', '.join(b.labels)}}}" for i, b in enumerate(nb)]
            caption = caption_text("near-degenerate pairs", model=mmap.model_name, n=mmap.n,
                                   levels=[mmap.labels[list(mmap.levels).index(a)] for a in mmap.asked if a in pos],
                                   extra=[f"λ = {mmap.coupling:.3g}"] + extra)
        cap = add_caption(ax, caption, scale)
    return PairArtists(figure=fig, ax=ax, image=im, colorbar=cbar, flagged=tuple(flagged), block_outlines=tuple(outlines),
                       block_labels=tuple(labels), caption=cap)
