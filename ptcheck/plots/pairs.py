"""Near-degenerate pairs: a level diagram at one coupling, and the matrix of mixing ratios.

:func:`plot_pairs` (the default view) draws the levels at the coupling as
horizontal lines, grouped in columns (symmetry sector, or excitation number
of a product model), joins the pairs whose mixing ratio is large by arcs
(width and opacity by ratio; the threshold in the legend), outlines the
near-degenerate blocks a block treatment would use (suggested beside the
answer, computed on request), and, on a second Axes, lists the
pairs ranked by ratio.  :func:`update_pairs` moves an existing diagram to
another coupling in place (for sliders).  :func:`plot_mixing_matrix` keeps
the heat map of the same :class:`MixingMap`.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from matplotlib.colors import LogNorm
from matplotlib.lines import Line2D
from matplotlib.patches import FancyBboxPatch, Rectangle

from ..blocks import find_blocks
from ..degeneracy import DEFAULT_MIXING_THRESHOLD, mixing_ratios, near_degenerate_pairs
from ._common import add_caption, add_legend, caption_text, new_axes, style_axes
from ._style import FLAG_COLOR, FONT_SIZES, MIXING_CMAP, OKABE_ITO, style

__all__ = ["MixingMap", "mixing_map", "PairArtists", "plot_pairs", "update_pairs", "MatrixArtists", "plot_mixing_matrix"]


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
    energies : (K,) ndarray
        ``E_l⁽⁰⁾ + λ V_ll`` of each level shown (energy units): where the
        diagram draws it (the diagonal of H(λ) in the work basis).
    columns : tuple of str
        Column of each level in the diagram: its symmetry sector (models
        with more than one), else its excitation number (product models), else "".
    model : Model
        The model (kept for :func:`update_pairs`; not serialised).
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
    energies: np.ndarray = field(default_factory=lambda: _ro(np.zeros(0)))
    columns: tuple = field(default=())
    model: Any = field(default=None, repr=False, compare=False)

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
            "energies": [float(e) for e in self.energies], "columns": list(self.columns),
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

    def ranked(self, limit: int | None = None) -> list[dict]:
        """Coupled pairs among the levels shown, largest mixing ratio first (the diagram's table).

        Each row: ``levels`` (two names), ``ratio`` (``inf``: exact
        degeneracy), ``gap`` = |E_l⁽⁰⁾ − E_m⁽⁰⁾| and ``element`` = |V_lm|
        (energy units; read from the pairs' records where flagged),
        ``flagged`` (ratio >= threshold) and ``block`` ("B1", ... or "").
        """
        block_of = {}
        for bi, blk in enumerate(b for b in self.blocks if b.size > 1):
            for lv in blk.levels:
                block_of[int(lv)] = f"B{bi + 1}"
        e0 = self._e0()
        rows = []
        k = len(self.levels)
        for a in range(k):
            for b in range(a + 1, k):
                r = max(_nan_to(self.ratios[a, b]), _nan_to(self.ratios[b, a]))
                if r < 0:
                    continue
                la, lb = int(self.levels[a]), int(self.levels[b])
                gap = abs(e0[a] - e0[b])
                if self.model is not None:
                    element = float(abs(self.model.v_element(la, lb)))
                else:
                    element = r * gap / abs(self.coupling) if math.isfinite(r) and self.coupling != 0 else float("nan")
                same = block_of.get(la) if block_of.get(la) == block_of.get(lb) else ""
                rows.append({"levels": (self.labels[a], self.labels[b]), "ratio": r, "gap": gap, "element": element,
                             "flagged": bool(r >= self.threshold), "block": same or ""})
        rows.sort(key=lambda d: -d["ratio"])
        return rows[:limit] if limit is not None else rows

    def _e0(self) -> np.ndarray:
        if self.model is not None:
            return np.asarray(self.model.e0)[self.levels]
        return np.asarray(self.energies, dtype=float)

    def _repr_html_(self) -> str:
        items = "".join(f"<li>{html.escape(p.labels[0])} – {html.escape(p.labels[1])}: "
                        f"{'exact degeneracy' if not np.isfinite(p.ratio) else f'{p.ratio:.3g}'}</li>" for p in self.pairs)
        return f"<b>Mixing ratios</b> at λ = {self.coupling:g} (threshold {self.threshold:g})<ul>{items}</ul>"


def _nan_to(x: float, value: float = -1.0) -> float:
    return value if math.isnan(float(x)) else float(x)


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
    return _map_at(model, sorted(set(shown)), asked, lam, threshold, blocks)


def _map_at(model: Any, shown: list[int], asked: list[int], lam: float, threshold: float, blocks: Any = None) -> MixingMap:
    """The map of a fixed set of levels at one coupling (engine functions only)."""
    if blocks is None:
        blocks = find_blocks(model, lam, threshold, levels=asked)
    pos = {lv: a for a, lv in enumerate(shown)}
    ratios = np.full((len(shown), len(shown)), np.nan)
    for lv in shown:
        partners, r = mixing_ratios(model, lv, lam)
        for p, rr in zip(partners.tolist(), r.tolist()):
            if p in pos and p != lv:
                ratios[pos[lv], pos[p]] = rr
    pairs = tuple(p for p in near_degenerate_pairs(model, lam, threshold, levels=shown) if p.l in pos and p.n in pos)
    idx = np.array(shown, dtype=int)
    energies = np.asarray(model.e0, dtype=float)[idx] + lam * model.v_diagonal()[idx]
    return MixingMap(
        model_name=model.name, n=model.n, coupling=lam, threshold=threshold, levels=_ro(idx),
        labels=tuple(model.label(i) for i in shown), ratios=_ro(ratios), pairs=pairs, blocks=tuple(blocks),
        asked=tuple(asked), energies=_ro(energies), columns=_columns(model, shown), model=model,
    )


def _columns(model: Any, shown: list[int]) -> tuple:
    """Diagram column of each level: sector name, else excitation number (product labels), else ""."""
    sectors = getattr(model, "sectors", None)
    sector_of = getattr(model, "sector_of", None)
    if sectors is not None and sector_of is not None and len(sectors) > 1:
        return tuple(str(getattr(sectors[sector_of(lv)], "name", sector_of(lv))) for lv in shown)
    labels = model.labels
    if model.dims and len(model.dims) > 1 and all(isinstance(labels[lv], tuple) for lv in shown):
        return tuple(f"{sum(int(q) for q in labels[lv])} excitation{'s' if sum(int(q) for q in labels[lv]) != 1 else ''}"
                     for lv in shown)
    return tuple("" for _ in shown)




# ---------------------------------------------------------------------- level diagram
#: Arcs below ``threshold / ARC_FLOOR`` are not drawn.
ARC_FLOOR = 10.0
#: Rows of the ranked table drawn beside the diagram.
TABLE_ROWS = 8
_WEAK_COLOR = "#6E6E6E"
_LEVEL_COLOR = "#222222"
_BLOCK_COLOR = OKABE_ITO["black"]


@dataclass(frozen=True)
class PairArtists:
    """Artists made by :func:`plot_pairs` (the level diagram); :func:`update_pairs` moves them in place.

    Attributes
    ----------
    figure, ax
    table_ax : Axes or None
        Axes of the ranked table (None when not asked for).
    mixing : MixingMap
        The map drawn first (levels, labels, threshold, model for updates).
    lines : tuple of Line2D
        One horizontal segment per level shown, at ``MixingMap.energies``.
    level_labels : tuple of Text
        Name of each level, above its segment.
    arcs : tuple of Line2D
        One curve per directly coupled pair of levels shown (``arc_pairs``);
        width and opacity grow with the mixing ratio; red and solid at or
        above the threshold, grey and dashed from threshold/10 to it,
        hidden below.
    arc_pairs : tuple of (int, int)
        Positions (into ``MixingMap.levels``) joined by each arc.
    block_outlines : tuple of FancyBboxPatch
        A pool of dashed outlines; the first ones surround the blocks of two
        or more levels chosen at the coupling, the others are hidden.
    block_labels : tuple of Text
        "B1", "B2", ... beside the outlines (same pool).
    table : tuple of Text
        Cells of the ranked table (``TABLE_ROWS`` rows × 4 columns, then
        the table's title); empty without ``table_ax``.
    caption : Text
    legend : Legend
        Arc styles and the threshold; below the table when there is one.
    """

    figure: Any
    ax: Any
    table_ax: Any
    mixing: MixingMap
    lines: tuple
    level_labels: tuple
    arcs: tuple
    arc_pairs: tuple
    block_outlines: tuple
    block_labels: tuple
    table: tuple
    caption: Any
    legend: Any


def _slots(mmap: MixingMap) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """x centre and half-width of each level's segment; column names.

    Columns in order of first appearance by energy; inside a column, levels
    closer in energy than 4 % of the span sit side by side.
    """
    cols = list(dict.fromkeys(mmap.columns or ("",) * len(mmap.levels)))
    col_of = [cols.index(c) for c in (mmap.columns or ("",) * len(mmap.levels))]
    e = np.asarray(mmap.energies, dtype=float)
    span = float(np.ptp(e)) if e.size > 1 and np.ptp(e) > 0 else 1.0
    centre = np.zeros(len(e))
    half = np.full(len(e), 0.36)
    for c in range(len(cols)):
        members = sorted((i for i in range(len(e)) if col_of[i] == c), key=lambda i: e[i])
        clusters: list[list[int]] = []
        for i in members:
            if clusters and e[i] - e[clusters[-1][-1]] < 0.04 * span:
                clusters[-1].append(i)
            else:
                clusters.append([i])
        for cl in clusters:
            m = len(cl)
            w = 0.72 / m
            for j, i in enumerate(cl):
                centre[i] = c - 0.36 + w * (j + 0.5)
                half[i] = 0.42 * w
    return centre, half, cols


def _arc(p0: np.ndarray, p2: np.ndarray, bulge: np.ndarray, n: int = 24) -> np.ndarray:
    """Quadratic Bézier from p0 to p2 whose control point is the midpoint moved by ``bulge``; (n, 2)."""
    t = np.linspace(0.0, 1.0, n)[:, None]
    c = 0.5 * (p0 + p2) + bulge
    return (1 - t) ** 2 * p0 + 2 * (1 - t) * t * c + t**2 * p2


def _arc_style(r: float, threshold: float, lw: float) -> dict:
    """Visibility, colour, width, opacity and dash of an arc of mixing ratio r."""
    if not (r >= threshold / ARC_FLOOR):
        return {"visible": False}
    if r >= threshold:
        strength = 1.0 if not math.isfinite(r) else min(math.log10(r / threshold) / 1.0, 1.0)
        return {"visible": True, "color": FLAG_COLOR, "linewidth": lw * (2.0 + 2.5 * strength), "alpha": 0.75 + 0.25 * strength,
                "linestyle": "-"}
    strength = math.log10(r * ARC_FLOOR / threshold)  # 0 at the floor, 1 at the threshold
    return {"visible": True, "color": _WEAK_COLOR, "linewidth": lw * (0.8 + 0.8 * strength), "alpha": 0.3 + 0.4 * strength,
            "linestyle": (0, (3, 2))}


def plot_pairs(
    mmap: MixingMap,
    *,
    ax: Any = None,
    table_ax: Any = None,
    caption: str | None = None,
    cax: Any = None,
    colorbar: Any = None,
) -> PairArtists:
    """Level diagram of near-degenerate pairs at one coupling, with a ranked table beside it.

    Parameters
    ----------
    mmap : MixingMap
        From :func:`mixing_map`.
    ax : matplotlib Axes, optional
        Draw the diagram here; a new 16:9 figure (diagram and table side by
        side) is made only when None.
    table_ax : matplotlib Axes, optional
        Draw the ranked table (largest ratios first, :meth:`MixingMap.ranked`)
        here.  Default: none when ``ax`` is given.
    caption : str, optional
    cax, colorbar : optional
        Accepted from callers written for the former heat-map view and
        ignored (the diagram has no colour bar; ``cax`` is hidden).  The heat
        map is :func:`plot_mixing_matrix`.

    Returns
    -------
    PairArtists
        Move it to another coupling with :func:`update_pairs`.
    """
    if not isinstance(mmap, MixingMap):
        raise TypeError(f"plot_pairs needs a MixingMap (from ptcheck.plots.mixing_map); got {type(mmap).__name__}")
    if cax is not None:
        cax.set_axis_off()
    if ax is None:
        fig, ax, scale = new_axes(None)
        gs = ax.get_subplotspec().subgridspec(1, 2, width_ratios=(3, 2))
        ax.set_subplotspec(gs[0, 0])
        table_ax = fig.add_subplot(gs[0, 1])
    else:
        fig, ax, scale = new_axes(ax)
    lw = max(scale, 0.75)
    fs = FONT_SIZES["caption"] * scale
    centre, half, cols = _slots(mmap)
    e = np.asarray(mmap.energies, dtype=float)
    k = len(mmap.levels)
    with style(scale):
        lines, names = [], []
        for i in range(k):
            (ln,) = ax.plot([centre[i] - half[i], centre[i] + half[i]], [e[i], e[i]], color=_LEVEL_COLOR,
                            linewidth=2.4 * lw, solid_capstyle="butt", zorder=3,
                            gid=str(int(mmap.levels[i])))
            lines.append(ln)
            names.append(ax.annotate(mmap.labels[i], xy=(centre[i], e[i]), xytext=(0.0, 3.0 * scale / 0.72),
                                     textcoords="offset points", ha="center", va="bottom", fontsize=fs * 0.9,
                                     color=_LEVEL_COLOR, zorder=4))
        pairs = [(a, b) for a in range(k) for b in range(a + 1, k)
                 if not (np.isnan(mmap.ratios[a, b]) and np.isnan(mmap.ratios[b, a]))]
        arcs = []
        for a, b in pairs:
            (arc,) = ax.plot([], [], solid_capstyle="round", zorder=2)
            arcs.append(arc)
        pool = max(1, k // 2)
        outlines = [ax.add_patch(FancyBboxPatch((0, 0), 0, 0, boxstyle="round,pad=0,rounding_size=0.04", fill=False,
                                                edgecolor=_BLOCK_COLOR, linestyle=(0, (4, 2)), linewidth=1.4 * lw,
                                                visible=False, zorder=1)) for _ in range(pool)]
        blabels = [ax.text(0, 0, "", fontsize=fs, fontweight="bold", color=_BLOCK_COLOR, ha="left", va="bottom",
                           visible=False, zorder=4) for _ in range(pool)]
        ax.set_xlim(-0.6, len(cols) - 0.4)
        ax.set_xticks(range(len(cols)), labels=[c or "levels" for c in cols], fontsize=fs)
        ax.tick_params(axis="x", length=0)
        ax.set_ylabel("E⁽⁰⁾ + λ V_nn (units of H0)")
        style_axes(ax, scale)
        ax.grid(False, axis="x")
        ax.spines["bottom"].set_visible(False)
        handles = [
            Line2D([], [], color=FLAG_COLOR, linewidth=3.5 * lw, label=f"mixing ratio ≥ {mmap.threshold:g} (threshold)"),
            Line2D([], [], color=_WEAK_COLOR, linewidth=1.2 * lw, linestyle=(0, (3, 2)), alpha=0.6,
                   label=f"{mmap.threshold / ARC_FLOOR:g} ≤ ratio < {mmap.threshold:g}"),
            Rectangle((0, 0), 1, 1, fill=False, edgecolor=_BLOCK_COLOR, linestyle=(0, (4, 2)), linewidth=1.4 * lw,
                      label="near-degenerate block (suggested; on request)"),
        ]
        table = _make_table(table_ax, scale) if table_ax is not None else ()
        if table_ax is not None:  # below the table: never over a level (and no "best" search on every draw)
            legend = add_legend(table_ax, scale, handles=handles, loc="lower left", size=FONT_SIZES["legend"] * 0.85)
        else:
            legend = add_legend(ax, scale, handles=handles, loc="upper right", size=FONT_SIZES["legend"] * 0.85)
        if caption is None:
            caption = caption_text("near-degenerate pairs", model=mmap.model_name, n=mmap.n,
                                   extra=[f"λ = {mmap.coupling:.3g}"])
        cap = add_caption(ax, caption, scale)
    art = PairArtists(figure=fig, ax=ax, table_ax=table_ax, mixing=mmap, lines=tuple(lines), level_labels=tuple(names),
                      arcs=tuple(arcs), arc_pairs=tuple(pairs), block_outlines=tuple(outlines), block_labels=tuple(blabels),
                      table=tuple(table), caption=cap, legend=legend)
    _apply(art, mmap, centre, half, caption_is_default=True)
    return art


def update_pairs(artists: PairArtists, coupling: float) -> MixingMap:
    """Move a level diagram to another coupling, in place; return the new map.

    Recomputes the mixing ratios, flagged pairs and blocks of the same levels
    (:func:`mixing_map`'s engine calls) and updates the existing artists with
    ``set_data``/``set_*``: no artist is made or removed, nothing is cleared.
    The caller redraws (``canvas.draw_idle()``).

    Parameters
    ----------
    artists : PairArtists
        From :func:`plot_pairs`.
    coupling : float
        The new coupling λ.

    Returns
    -------
    MixingMap
        The map at ``coupling`` (same levels as drawn).
    """
    from .. import _validation as val

    if not isinstance(artists, PairArtists):
        raise TypeError(f"update_pairs needs the PairArtists of plot_pairs; got {type(artists).__name__}")
    first = artists.mixing
    if first.model is None:
        raise ValueError("this MixingMap carries no model (made by hand?); build it with ptcheck.plots.mixing_map")
    lam = val.as_coupling(coupling)
    mmap = _map_at(first.model, [int(x) for x in first.levels], list(first.asked), lam, first.threshold)
    centre, half, _ = _slots(first)  # columns and slots stay where they were first drawn
    _apply(artists, mmap, centre, half, caption_is_default=False)
    return mmap


def _apply(art: PairArtists, mmap: MixingMap, centre: np.ndarray, half: np.ndarray, *, caption_is_default: bool) -> None:
    """Set every artist of the diagram from ``mmap`` (positions, arcs, blocks, table, caption)."""
    scale = max(art.figure.get_figwidth() / 13.333, 0.75)
    e = np.asarray(mmap.energies, dtype=float)
    for i, ln in enumerate(art.lines):
        ln.set_data([centre[i] - half[i], centre[i] + half[i]], [e[i], e[i]])
        art.level_labels[i].xy = (centre[i], e[i])
    span = float(np.ptp(e)) if e.size > 1 and np.ptp(e) > 0 else 1.0
    lo, hi = float(np.min(e)), float(np.max(e))
    pad = 0.15 * (hi - lo) if hi > lo else max(abs(hi), 1.0) * 0.1
    ylim = (lo - pad, hi + (1.6 if art.table else 3.0) * pad)  # room for the legend when it is on the diagram
    xlim = art.ax.get_xlim()
    # arcs are shaped in inches of the axes box, so they look the same in any data units
    pos_box = art.ax.get_position()
    box = np.array([pos_box.width * art.figure.get_figwidth(), pos_box.height * art.figure.get_figheight()])
    lo_xy = np.array([xlim[0], ylim[0]])
    unit = np.array([xlim[1] - xlim[0], ylim[1] - ylim[0]]) / box  # data per inch
    for arc, (a, b) in zip(art.arcs, art.arc_pairs):
        r = max(_nan_to(mmap.ratios[a, b]), _nan_to(mmap.ratios[b, a]))
        st = _arc_style(r, mmap.threshold, scale)
        arc.set_visible(st.pop("visible"))
        if not arc.get_visible():
            continue
        arc.set(**st)
        pa = (np.array([centre[a], e[a]]) - lo_xy) / unit
        pb = (np.array([centre[b], e[b]]) - lo_xy) / unit
        chord = pb - pa
        length = float(np.hypot(*chord)) or 1e-9
        if abs(chord[0]) < 0.3 * abs(chord[1]):  # one above the other: from their right ends, bowing right
            pa = pa + np.array([half[a] / unit[0], 0.0])
            pb = pb + np.array([half[b] / unit[0], 0.0])
            bulge = np.array([0.12 + 0.3 * length, 0.0])
        else:  # side by side or in other columns: centre to centre, bowing below the chord
            normal = np.array([chord[1], -chord[0]]) / length
            if normal[1] > 0:
                normal = -normal
            bulge = normal * (0.1 + 0.25 * length)
        pts = _arc(pa, pb, bulge) * unit + lo_xy
        arc.set_data(pts[:, 0], pts[:, 1])
    pos = {int(lv): i for i, lv in enumerate(mmap.levels)}
    blocks = [blk for blk in mmap.blocks if blk.size > 1]
    for j, (box, text) in enumerate(zip(art.block_outlines, art.block_labels)):
        members = [pos[int(lv)] for lv in blocks[j].levels if int(lv) in pos] if j < len(blocks) else []
        if not members:
            box.set_visible(False)
            text.set_visible(False)
            continue
        x0 = min(centre[i] - half[i] for i in members) - 0.05
        x1 = max(centre[i] + half[i] for i in members) + 0.05
        y0 = min(e[i] for i in members) - 0.05 * span
        y1 = max(e[i] for i in members) + 0.09 * span
        box.set_bounds(x0, y0, x1 - x0, y1 - y0)
        box.set_visible(True)
        text.set_position((x0, y1))
        text.set_text(f"B{j + 1}")
        text.set_visible(True)
    art.ax.set_ylim(*ylim)
    if art.table:
        _fill_table(art.table, mmap)
    if not caption_is_default and art.caption is not None:
        text = art.caption.get_text()
        if "λ = " in text:
            head, _, rest = text.partition("λ = ")
            tail = rest.split(" · ", 1)
            art.caption.set_text(head + f"λ = {mmap.coupling:.3g}" + (" · " + tail[1] if len(tail) > 1 else ""))


def _make_table(tax: Any, scale: float) -> list[Any]:
    """Empty cells of the ranked table (filled by :func:`_fill_table`)."""
    fs = FONT_SIZES["caption"] * scale
    tax.set_axis_off()
    xs = (0.0, 0.52, 0.74, 0.9)
    heads = ("pair", "ratio", "|ΔE⁽⁰⁾|", "|V|")
    cells = []
    top = 0.9
    step = 0.8 / (TABLE_ROWS + 1)
    for c, (x, h) in enumerate(zip(xs, heads)):
        tax.text(x, top, h, transform=tax.transAxes, fontsize=fs, fontweight="bold", ha="left", va="center", color="#333333")
    for r in range(TABLE_ROWS):
        for c, x in enumerate(xs):
            cells.append(tax.text(x, top - step * (r + 1), "", transform=tax.transAxes, fontsize=fs, ha="left", va="center",
                                  color="#333333"))
    cells.append(tax.text(0.0, 0.98, "", transform=tax.transAxes, fontsize=fs, ha="left", va="center", color="#444444"))
    return cells


def _fill_table(cells: tuple, mmap: MixingMap) -> None:
    rows = mmap.ranked(TABLE_ROWS)
    for r in range(TABLE_ROWS):
        row = rows[r] if r < len(rows) else None
        texts = ("", "", "", "") if row is None else (
            " – ".join(row["levels"]) + (f"  ({row['block']})" if row["block"] else ""),
            "∞" if not math.isfinite(row["ratio"]) else f"{row['ratio']:.3g}",
            f"{row['gap']:.3g}", f"{row['element']:.3g}",
        )
        for c, t in enumerate(texts):
            cell = cells[4 * r + c]
            cell.set_text(t)
            cell.set_color(FLAG_COLOR if row is not None and row["flagged"] else "#333333")
    cells[-1].set_text(f"pairs ranked by mixing ratio at λ = {mmap.coupling:.3g}" if rows else
                       f"no coupled pairs among the levels shown at λ = {mmap.coupling:.3g}")


# ---------------------------------------------------------------------- matrix view
@dataclass(frozen=True)
class MatrixArtists:
    """Artists made by :func:`plot_mixing_matrix`.

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




def plot_mixing_matrix(
    mmap: MixingMap,
    *,
    ax: Any = None,
    cax: Any = None,
    colorbar: bool = True,
    caption: str | None = None,
    vmin: float = 1e-3,
) -> MatrixArtists:
    """Heat map of mixing ratios with flagged pairs outlined and blocks marked (the matrix view).

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
    MatrixArtists
    """
    if not isinstance(mmap, MixingMap):
        raise TypeError(f"plot_mixing_matrix needs a MixingMap (from ptcheck.plots.mixing_map); got {type(mmap).__name__}")
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
            col = _BLOCK_COLOR
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
            caption = caption_text("mixing ratios", model=mmap.model_name, n=mmap.n,
                                   extra=[f"λ = {mmap.coupling:.3g}"] + extra[2:] + extra[:2])
        cap = add_caption(ax, caption, scale)
    return MatrixArtists(figure=fig, ax=ax, image=im, colorbar=cbar, flagged=tuple(flagged), block_outlines=tuple(outlines),
                       block_labels=tuple(labels), caption=cap)
