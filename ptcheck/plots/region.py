"""Region map of two couplings: where each order meets the tolerance, nested, with convergence per ray."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._common import add_caption, add_legend, caption_text, new_axes, style_axes
from ._style import EXACT_COLOR, FLAG_COLOR, MARKER_COLOR, order_style, style

__all__ = ["RegionArtists", "plot_region"]

#: Strength of the light tint of an order's colour that fills its region.  The tints are opaque and the
#: larger regions are drawn underneath, so nested regions never mix into a brown-grey.
FILL_ALPHA = 0.16


def _tint(color: str, strength: float = FILL_ALPHA) -> tuple[float, float, float]:
    """``color`` mixed with white: an opaque light tint."""
    from matplotlib.colors import to_rgb

    r, g, b = to_rgb(color)
    return (1 - strength * (1 - r), 1 - strength * (1 - g), 1 - strength * (1 - b))


def _area(pts: np.ndarray) -> float:
    """Area of a polygon (shoelace formula); 0 for fewer than three vertices."""
    if pts.shape[0] < 3:
        return 0.0
    x, y = pts[:, 0], pts[:, 1]
    return float(0.5 * abs(np.dot(x, np.roll(y, 1)) - np.dot(y, np.roll(x, 1))))


@dataclass(frozen=True)
class RegionArtists:
    """Artists made by :func:`plot_region`.

    Attributes
    ----------
    figure, ax
    orders : tuple of int
        Orders drawn, ascending (one fill and one outline each).
    fills : tuple of Polygon
        Region of each order (vertices: the boundary points of its rays,
        rays not reached at their search limit).
    outlines : tuple of Line2D
        Boundary curve of each order, in its colour and dash pattern, with a
        dot on every ray searched.
    open_rays : tuple of Line2D
        Per order, hollow markers where the tolerance still held at the search
        limit (the region goes on beyond them).
    convergence_line : Line2D or None
        Where each ray leaves its disc of convergence (``radius × d``).
    point_marker : Line2D or None
        The coupling point asked about.
    point_ray : Line2D or None
        The ray from the origin through that point.
    caption : Text
    legend : Legend
    """

    figure: Any
    ax: Any
    orders: tuple
    fills: tuple
    outlines: tuple
    open_rays: tuple
    convergence_line: Any
    point_marker: Any
    point_ray: Any
    caption: Any
    legend: Any


def _as_regions(regions: Any) -> list:
    from ..region import ValidityRegion

    items = [regions] if isinstance(regions, ValidityRegion) else list(regions)
    if not items or not all(isinstance(r, ValidityRegion) for r in items):
        raise TypeError(f"plot_region needs ValidityRegion results (one per order); got {regions!r}")
    first = items[0]
    for r in items[1:]:
        if r.target != first.target or r.coupling_names != first.coupling_names:
            raise ValueError(
                f"plot_region draws one target on one pair of couplings; got {first.target!r} and {r.target!r}"
            )
    if len({r.order for r in items}) != len(items):
        raise ValueError(f"plot_region draws one region per order; got orders {[r.order for r in items]}")
    return sorted(items, key=lambda r: r.order)


def _vertices(region: Any) -> np.ndarray:
    """Boundary points in angle order, not-reached rays at their search limit, undefined rays dropped."""
    t = np.array(region.boundary, dtype=float)
    lim = np.array([b.max_coupling for b in region.boundaries])
    t = np.where(np.isinf(t), lim, t)
    keep = np.isfinite(t)
    pts = t[keep, None] * np.asarray(region.directions)[keep]
    if not region.full_circle:
        pts = np.vstack([[0.0, 0.0], pts])  # a sector of the plane: close it at the origin
    return pts


def plot_region(
    regions: Any,
    *,
    convergence: Any = None,
    point: Any = None,
    ax: Any = None,
    caption: str | None = None,
) -> RegionArtists:
    """Nested regions of the (λ₁, λ₂) plane where each order meets the tolerance.

    Parameters
    ----------
    regions : ValidityRegion or sequence of them
        One per order, same target and couplings (from
        :func:`ptcheck.region.validity_region`).  Each order is filled and
        outlined in its colour; a point belongs to the region of an order when
        the straight path from the origin to it stays within tolerance.
    convergence : RayConvergence, optional
        Radius of convergence per ray (:func:`ptcheck.region.ray_convergence`),
        drawn as a dotted curve: beyond it the series diverges on that ray.
    point : (2,) array_like, optional
        Your coupling point (default: the regions' own ``point``, if any).
    ax : matplotlib Axes, optional
    caption : str, optional

    Returns
    -------
    RegionArtists
    """
    items = _as_regions(regions)
    first = items[0]
    if point is None:
        point = next((r.point for r in items if r.point is not None), None)
    fig, ax, scale = new_axes(ax)
    lw = max(scale, 0.75)
    n1, n2 = first.coupling_names
    fills, outlines, opens = [], [], []
    from matplotlib.patches import Polygon

    areas = [_area(_vertices(r)) for r in items]
    depth = {i: k for k, i in enumerate(sorted(range(len(items)), key=lambda i: -areas[i]))}  # largest underneath
    with style(scale):
        for i, r in enumerate(items):
            st = order_style(r.order)
            pts = _vertices(r)
            if pts.shape[0] >= 3:
                fill = Polygon(pts, closed=True, facecolor=_tint(st["color"]), edgecolor="none",
                               zorder=1 + 0.01 * depth[i])
                ax.add_patch(fill)
            else:
                fill = None
            fills.append(fill)
            closed = np.vstack([pts, pts[:1]]) if pts.shape[0] else pts
            (ln,) = ax.plot(closed[:, 0], closed[:, 1], marker="o", markersize=3.0 * lw, label=f"order {r.order}",
                            zorder=3, **st)
            outlines.append(ln)
            far = np.array([b.status == "not_reached" for b in r.boundaries])
            lim = np.array([b.max_coupling for b in r.boundaries])
            fp = lim[far, None] * np.asarray(r.directions)[far]
            (op,) = ax.plot(fp[:, 0], fp[:, 1], linestyle="none", marker="o", markersize=7.0 * lw, color=st["color"],
                            markerfacecolor="white", zorder=4)
            opens.append(op)
        conv = None
        if convergence is not None:
            rad = np.asarray(convergence.radius, dtype=float)
            ok = np.isfinite(rad) & (rad > 0)
            cp = np.asarray(convergence.points)[ok]
            if convergence.angles.size and cp.shape[0]:
                cp = np.vstack([cp, cp[:1]])
            (conv,) = ax.plot(cp[:, 0], cp[:, 1], color=FLAG_COLOR, linestyle=(0, (1, 1.6)), linewidth=1.8 * lw,
                              label="radius of convergence (per ray)", zorder=5)
        marker = ray = None
        if point is not None:
            p = np.asarray(point, dtype=float)
            reach = max(_reach(items), float(np.hypot(*p)))
            u = p / max(float(np.hypot(*p)), 1e-300)
            (ray,) = ax.plot([0.0, 1.2 * reach * u[0]], [0.0, 1.2 * reach * u[1]], color=MARKER_COLOR,
                             linewidth=1.2 * lw, zorder=2)
            (marker,) = ax.plot([p[0]], [p[1]], linestyle="none", marker="X", markersize=12.0 * lw, color=EXACT_COLOR,
                                label=f"your point ({n1}, {n2}) = ({p[0]:.3g}, {p[1]:.3g})", zorder=6)
        ax.plot([0.0], [0.0], linestyle="none", marker="+", color=EXACT_COLOR, markersize=10.0 * lw, zorder=6)
        ax.set_xlabel(f"coupling {n1}")
        ax.set_ylabel(f"coupling {n2}")
        _limits(ax, items, point)
        style_axes(ax, scale)
        legend = add_legend(ax, scale)
        if caption is None:
            extra = ["filled: tolerance met on the straight path from the origin",
                     "hollow dots: still met at the search limit"]
            if convergence is not None:
                extra.append("dotted: radius of convergence on each ray")
            caption = caption_text(
                "validity region", model=first.model_name or "model", levels=[first.target],
                orders=[f"order {r.order}" for r in items], tol=first.tol, rtol=first.rtol, extra=extra,
            )
        cap = add_caption(ax, caption, scale)
    return RegionArtists(
        figure=fig, ax=ax, orders=tuple(r.order for r in items), fills=tuple(fills), outlines=tuple(outlines),
        open_rays=tuple(opens), convergence_line=conv, point_marker=marker, point_ray=ray, caption=cap, legend=legend,
    )


def _limits(ax: Any, items: list, point: Any) -> None:
    """View the boundaries found (and the point) with a margin; rays not reached lie at their far search limit."""
    pts = [np.asarray(r.points)[np.isfinite(np.asarray(r.boundary))] for r in items]
    pts = np.vstack([p for p in pts if p.size] or [np.zeros((0, 2))])
    if point is not None:
        pts = np.vstack([pts, np.asarray(point, dtype=float)[None, :]])
    if pts.shape[0] == 0 or not np.any(pts):
        pts = np.vstack([_vertices(r) for r in items])
    ext = np.max(np.abs(pts), axis=0) if pts.size else np.ones(2)
    ext = np.where(ext > 0, ext, np.max(ext) if np.max(ext) > 0 else 1.0)
    ax.set_xlim(-1.25 * ext[0], 1.25 * ext[0])
    ax.set_ylim(-1.25 * ext[1], 1.25 * ext[1])


def _reach(items: list) -> float:
    out = 0.0
    for r in items:
        pts = _vertices(r)
        if pts.size:
            out = max(out, float(np.max(np.hypot(pts[:, 0], pts[:, 1]))))
    return out if math.isfinite(out) and out > 0 else 1.0
