"""Divergence map: the complex coupling plane of one or several levels' series."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from matplotlib.colors import to_rgb
from matplotlib.patches import Circle

from ._common import add_caption, caption_text, new_axes, style_axes
from ._style import FLAG_COLOR, FONT_SIZES, MARKER_COLOR, OKABE_ITO, order_style, style

__all__ = ["DivergenceArtists", "plot_divergence", "REGIME_STYLES"]

#: How each real-axis regime is drawn: (line width factor, alpha, dash pattern).
REGIME_STYLES = {
    "convergent": (1.0, 1.0, "-"),
    "beyond radius": (0.45, 0.9, (0, (1, 1.2))),
    "asymptotic": (0.45, 0.9, (0, (4, 2))),
}


@dataclass(frozen=True)
class DivergenceArtists:
    """Artists made by :func:`plot_divergence`.

    Attributes
    ----------
    figure, ax
    labels : tuple of str
        Levels drawn (L).
    discs : tuple of (Circle or None)
        Convergence disc of each level (radius = the level's ``radius``);
        None where the radius is infinite, zero or unknown.
    kato_discs : tuple of Circle
        Kato lower-bound disc of each level (dotted).
    exceptional_points : tuple of Line2D
        One marker line per level: x = Re λ*, y = Im λ* of its EPs.
    regimes : tuple of tuple of Line2D
        Real-axis strips per level, one line per regime present; each line
        holds the grid couplings in that regime (others NaN) at a small
        offset below the real axis.  Empty when the input has no regimes.
    boundaries : tuple of Line2D
        Validity boundaries on the real axis (one marker line per order),
        empty when none were computed.
    coupling_marker : Line2D or None
        Current coupling on the real axis (move with ``set_data``).
    caption : Text
    legend : Legend
    """

    figure: Any
    ax: Any
    labels: tuple
    discs: tuple
    kato_discs: tuple
    exceptional_points: tuple
    regimes: tuple
    boundaries: tuple
    coupling_marker: Any
    caption: Any
    legend: Any


def _as_records(data: Any) -> dict:
    """Common view of a DivergenceMap or ConvergenceResult(s) (indexing only)."""
    if hasattr(data, "regime") and hasattr(data, "results"):
        return {
            "labels": tuple(data.labels), "radius": np.asarray(data.radius, float), "kato": np.asarray(data.kato_bound, float),
            "kinds": tuple(data.kinds), "eps": tuple(np.asarray(e) for e in data.exceptional_points),
            "couplings": np.asarray(data.couplings, float), "regime": np.asarray(data.regime), "order": data.order,
            "orders": tuple(data.orders), "boundaries": np.asarray(data.boundaries, float),
        }
    results = [data] if hasattr(data, "exceptional_points") else list(data)
    if not results or not all(hasattr(r, "exceptional_points") for r in results):
        raise TypeError(f"plot_divergence needs a DivergenceMap or ConvergenceResult(s); got {type(data).__name__}")
    return {
        "labels": tuple(r.label for r in results), "radius": np.array([r.radius for r in results], float),
        "kato": np.array([r.kato_bound for r in results], float), "kinds": tuple(r.kind for r in results),
        "eps": tuple(np.asarray(r.exceptional_points) for r in results), "couplings": None, "regime": None,
        "order": max(r.order for r in results), "orders": (), "boundaries": np.zeros((len(results), 0)),
    }


def plot_divergence(
    data: Any,
    *,
    coupling: float | None = None,
    model_name: str | None = None,
    ax: Any = None,
    caption: str | None = None,
) -> DivergenceArtists:
    """Exceptional points, convergence discs, Kato bound and real-axis regimes in the complex λ plane.

    Parameters
    ----------
    data : DivergenceMap, ConvergenceResult or sequence of ConvergenceResult
        From :func:`ptcheck.convergence.divergence_map` /
        :func:`ptcheck.convergence.convergence`.
    coupling : float, optional
        Current (real) coupling, marked on the real axis.
    model_name : str, optional
        For the caption (the results do not carry it).
    ax : matplotlib Axes, optional
    caption : str, optional

    Returns
    -------
    DivergenceArtists
    """
    rec = _as_records(data)
    fig, ax, scale = new_axes(ax)
    lw = max(scale, 0.75)
    labels = rec["labels"]
    # view: the coupling range and the nearest singularity (or the smallest disc); larger discs are clipped
    near = [x for x in rec["radius"] if math.isfinite(x) and x > 0]
    near += [float(np.min(np.abs(e))) for e in rec["eps"] if e.size]
    if not near:
        near = [x for x in rec["kato"] if math.isfinite(x) and x > 0]
    reach = [min(near)] if near else []
    if rec["couplings"] is not None and rec["couplings"].size:
        reach.append(float(np.max(np.abs(rec["couplings"]))))
    if coupling is not None:
        reach.append(abs(float(coupling)))
    extent = 1.15 * (max(reach) if reach else 1.0)
    with style(scale):
        discs, katos, eps, strips, bmarks = [], [], [], [], []
        for i, lab in enumerate(labels):
            col = order_style(i)["color"]
            r = rec["radius"][i]
            if math.isfinite(r) and r > 0:
                discs.append(ax.add_patch(Circle((0, 0), r, facecolor=(*to_rgb(col), 0.08), edgecolor=col,
                                                 linewidth=2 * lw, label=f"{lab}: radius of convergence {r:.3g}")))
            else:
                discs.append(None)
            k = rec["kato"][i]
            katos.append(ax.add_patch(Circle((0, 0), k if math.isfinite(k) else 0.0, fill=False, edgecolor=col,
                                             linestyle=(0, (1, 2)), linewidth=1.6 * lw,
                                             label=f"{lab}: Kato bound {k:.3g}" if math.isfinite(k) else None)))
            e = rec["eps"][i]
            (m,) = ax.plot(e.real, e.imag, linestyle="none", marker="X", markersize=11 * lw, color=col,
                           markeredgecolor=FLAG_COLOR if e.size else col, markeredgewidth=1.0,
                           label=f"{lab}: exceptional points" if e.size else None, zorder=5)
            eps.append(m)
        # real-axis regimes, one strip per level just below the axis
        if rec["regime"] is not None:
            x = rec["couplings"]
            for i, lab in enumerate(labels):
                col = order_style(i)["color"]
                y = -(0.025 + 0.03 * i) * extent
                row = []
                for name, (wf, alpha, dash) in REGIME_STYLES.items():
                    mask = rec["regime"][i] == name
                    if not np.any(mask):
                        continue
                    (ln,) = ax.plot(x, np.where(mask, y, np.nan), color=col, linewidth=6 * wf * lw, alpha=alpha,
                                    linestyle=dash, solid_capstyle="butt")
                    ln.set_gid(name)
                    row.append(ln)
                strips.append(tuple(row))
            for j, oname in enumerate(rec["orders"]):
                b = rec["boundaries"][:, j]
                (bm,) = ax.plot(b, [-(0.025 + 0.03 * i) * extent for i in range(len(labels))], linestyle="none",
                                marker="|", markersize=16 * lw, markeredgewidth=2.5 * lw, color=OKABE_ITO["black"],
                                label=f"validity boundary, {oname}" if j == 0 else None)
                bmarks.append(bm)
        marker = None
        if coupling is not None:
            (marker,) = ax.plot([float(coupling)], [0.0], linestyle="none", marker="D", markersize=9 * lw,
                                color=MARKER_COLOR, markeredgecolor="black", label="coupling λ", zorder=6)
        ax.axhline(0.0, color="#999999", linewidth=0.8 * lw, zorder=0)
        ax.axvline(0.0, color="#999999", linewidth=0.8 * lw, zorder=0)
        ax.set_xlim(-extent, extent)
        ax.set_ylim(-extent, extent)
        ax.set_aspect("equal", adjustable="box")
        ax.set_xlabel("Re λ")
        ax.set_ylabel("Im λ")
        style_axes(ax, scale)
        legend = ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), fontsize=FONT_SIZES["legend"] * scale * 0.85,
                           borderaxespad=0.0)
        if caption is None:
            extra = [f"series to order {rec['order']}"]
            for lab, kind, r in zip(labels, rec["kinds"], rec["radius"]):
                if kind != "convergent":
                    extra.append(f"{lab}: {kind}")
                elif math.isinf(r):
                    extra.append(f"{lab}: radius ∞")
            if rec["regime"] is not None:
                extra.append("strips below the real axis: solid = convergent, dotted = beyond radius, dashed = asymptotic")
            caption = caption_text(
                "divergence map", model=model_name or "model", levels=list(labels),
                couplings=rec["couplings"] if rec["couplings"] is not None else None, extra=extra,
            )
        cap = add_caption(ax, caption, scale)
    return DivergenceArtists(
        figure=fig, ax=ax, labels=labels, discs=tuple(discs), kato_discs=tuple(katos), exceptional_points=tuple(eps),
        regimes=tuple(strips), boundaries=tuple(bmarks), coupling_marker=marker, caption=cap, legend=legend,
    )


