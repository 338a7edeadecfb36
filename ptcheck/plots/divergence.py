"""Divergence map: the complex coupling plane of one or several levels' series."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from matplotlib.patches import Circle

from .._format import clean_complex, fmt_complex
from ._common import add_caption, add_legend, caption_text, new_axes, style_axes, text_width
from ._style import FONT_SIZES, MARKER_COLOR, NEUTRAL_DASHES, order_color, style

__all__ = ["DivergenceArtists", "plot_divergence", "REGIME_STYLES"]

#: Neutral tones of the discs, exceptional points and strips (colours belong to the orders).
DISC_COLOR = "#333333"
KATO_COLOR = "#777777"
EP_COLOR = "#000000"
STRIP_COLOR = "#555555"

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
        None where the radius is infinite, zero or unknown.  Levels whose
        radii coincide share one Circle (one line style, one legend entry
        naming all of them).
    kato_discs : tuple of Circle
        Kato lower-bound disc of each level (dotted; shared like ``discs``).
    exceptional_points : tuple of Line2D
        One marker line per level: x = Re λ*, y = Im λ* of its EPs.
    regimes : tuple of tuple of Line2D
        Real-axis strips per level, one line per regime present; each line
        holds the grid couplings in that regime (others NaN) at a small
        offset below the real axis.  Empty when the input has no regimes.
    boundaries : tuple of Line2D
        Validity boundaries on the real axis (one marker line per order, in
        the order's colour), empty when none were computed.
    coupling_marker : Line2D or None
        Current coupling on the real axis (move with ``set_data``).
    caption : Text
    legend : Legend
    out_of_view : tuple of Line2D
        Arrowheads at the edge of the view pointing at exceptional points
        beyond it (the legend names the nearest ones).
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
    out_of_view: tuple = ()


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


def _groups(values: np.ndarray) -> list[tuple[float, list[int]]]:
    """Indices of finite positive values grouped when equal to 1e-6 (relative), ascending."""
    out: list[tuple[float, list[int]]] = []
    for i in np.argsort(values, kind="stable"):
        v = float(values[i])
        if not (math.isfinite(v) and v > 0):
            continue
        if out and math.isclose(out[-1][0], v, rel_tol=1e-6):
            out[-1][1].append(int(i))
        else:
            out.append((v, [int(i)]))
    return out


def _names(labels: tuple, idx: list[int]) -> str:
    return ", ".join(labels[i] for i in idx)


def plot_divergence(
    data: Any,
    *,
    coupling: float | None = None,
    model_name: str | None = None,
    ax: Any = None,
    caption: str | None = None,
) -> DivergenceArtists:
    """Exceptional points, convergence discs, Kato bound and real-axis regimes in the complex λ plane.

    The window is as wide as the axes (equal aspect, x range widened to fill a
    16:9 figure) and reaches just past the nearest singularity and the
    couplings of interest.  Discs are outlines in neutral tones, told apart by
    line style; levels sharing a radius share one circle and one legend
    entry; a disc larger than the window is listed as "outside the view".
    The smallest disc is lightly shaded: there every series drawn converges.
    Exceptional points beyond the window get an arrow at its edge.  Colours
    are kept for the orders (validity boundaries on the real-axis strips).

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
    # the window must hold the nearest singularity (or the smallest disc) and the couplings of interest
    near = [x for x in rec["radius"] if math.isfinite(x) and x > 0]
    near += [float(np.min(np.abs(e))) for e in rec["eps"] if e.size]
    if not near:
        near = [x for x in rec["kato"] if math.isfinite(x) and x > 0]
    right = [min(near)] if near else [1.0]
    if rec["couplings"] is not None and rec["couplings"].size:
        right.append(float(np.max(np.abs(rec["couplings"]))))
    if coupling is not None:
        right.append(abs(float(coupling)))
    y_half = 1.25 * (min(near) if near else max(right))
    x_lo, x_hi = -y_half, max(y_half, 1.1 * max(right))
    y_half = max(y_half, 0.25 * (x_hi - x_lo))  # a long coupling range must not flatten the window
    with style(scale):
        discs: list[Any] = [None] * len(labels)
        katos: list[Any] = [None] * len(labels)
        groups = _groups(rec["radius"])
        disc_names = {}
        for g, (r, idx) in enumerate(groups):
            circ = ax.add_patch(Circle(
                (0, 0), r, fill=False, edgecolor=DISC_COLOR, linewidth=2.0 * lw, linestyle=NEUTRAL_DASHES[g % len(NEUTRAL_DASHES)],
                label=f"convergence radius {r:.3g}: {_names(labels, idx)}",
            ))
            disc_names[circ] = r
            for i in idx:
                discs[i] = circ
        if groups:
            r0 = groups[0][0]
            inside = "every series drawn converges" if len(labels) > 1 else "the series converges"
            ax.add_patch(Circle((0, 0), r0, facecolor=DISC_COLOR, alpha=0.06, linewidth=0, zorder=0,
                                label=f"shaded: {inside}"))
        for k, idx in _groups(rec["kato"]):
            circ = ax.add_patch(Circle((0, 0), k, fill=False, edgecolor=KATO_COLOR, linestyle=(0, (1, 2)),
                                       linewidth=1.6 * lw, label=f"Kato bound {k:.3g}: {_names(labels, idx)}"))
            for i in idx:
                katos[i] = circ
        for i in range(len(labels)):  # zero / infinite Kato bounds: an empty circle keeps the tuple complete
            if katos[i] is None:
                katos[i] = ax.add_patch(Circle((0, 0), 0.0, fill=False, visible=False))
        eps = []
        for i in range(len(labels)):
            e = rec["eps"][i]
            (m,) = ax.plot(e.real, e.imag, linestyle="none", marker="X", markersize=12 * lw, color=EP_COLOR,
                           markeredgecolor="white", markeredgewidth=1.0, zorder=5)
            eps.append(m)
        ep_proxy = None
        if any(e.size for e in rec["eps"]):
            (ep_proxy,) = ax.plot([], [], linestyle="none", marker="X", markersize=12 * lw, color=EP_COLOR,
                                  markeredgecolor="white", label="exceptional points")
        # real-axis regimes, one strip per level just below the axis
        strips, bmarks = [], []
        if rec["regime"] is not None:
            x = rec["couplings"]
            for i, lab in enumerate(labels):
                y = -(0.03 + 0.065 * i) * y_half
                row = []
                for name, (wf, alpha, dash) in REGIME_STYLES.items():
                    mask = rec["regime"][i] == name
                    if not np.any(mask):
                        continue
                    (ln,) = ax.plot(x, np.where(mask, y, np.nan), color=STRIP_COLOR, linewidth=6 * wf * lw, alpha=alpha,
                                    linestyle=dash, solid_capstyle="butt")
                    ln.set_gid(name)
                    row.append(ln)
                strips.append(tuple(row))
                if x.size:
                    ax.annotate(lab, xy=(float(np.nanmin(x)), y), xytext=(-5.0 * scale / 0.72, 0.0),
                                textcoords="offset points", ha="right", va="center",
                                fontsize=FONT_SIZES["caption"] * scale * 0.9, color=STRIP_COLOR)
            present = [n for n in REGIME_STYLES if any(np.any(rec["regime"][i] == n) for i in range(len(labels)))]
            for name in present:
                wf, alpha, dash = REGIME_STYLES[name]
                ax.plot([], [], color=STRIP_COLOR, linewidth=4 * wf * lw, alpha=alpha, linestyle=dash,
                        label=f"strip below the axis: {name}")
            for j, oname in enumerate(rec["orders"]):
                b = rec["boundaries"][:, j]
                (bm,) = ax.plot(b, [-(0.03 + 0.065 * i) * y_half for i in range(len(labels))], linestyle="none",
                                marker="|", markersize=16 * lw, markeredgewidth=3 * lw, color=order_color(oname),
                                label=f"validity boundary, {oname}", zorder=6)
                bmarks.append(bm)
        marker = None
        if coupling is not None:
            (marker,) = ax.plot([float(coupling)], [0.0], linestyle="none", marker="D", markersize=9 * lw,
                                color=MARKER_COLOR, markeredgecolor="black", label=f"coupling λ = {float(coupling):.3g}", zorder=6)
        ax.axhline(0.0, color="#999999", linewidth=0.8 * lw, zorder=0)
        ax.axvline(0.0, color="#999999", linewidth=0.8 * lw, zorder=0)
        ax.set_xlabel("Re λ")
        ax.set_ylabel("Im λ")
        style_axes(ax, scale)
        # the legend beside the axes fixes the box; equal aspect, and the x range grows (centred) to fill it
        legend = _legend_beside(ax, scale)
        mid = 0.5 * (x_lo + x_hi)
        window = (x_lo, x_hi, y_half)
        base = {c: c.get_label() for c in disc_names}
        ep_label = ep_proxy.get_label() if ep_proxy is not None else None
        out_arrows: list[Any] = []
        for attempt in range(2):  # estimate, then the laid-out box
            aspect = _box_aspect(ax, legend, scale, laid_out=attempt == 1)
            height = max(2 * y_half, (x_hi - x_lo) / aspect)
            width = height * aspect
            window = (mid - width / 2, mid + width / 2, height / 2)
            for circ, r in disc_names.items():
                circ.set_label(base[circ] + ("" if _circle_visible(r, window) else " (outside the view)"))
            if ep_proxy is not None:
                seen = any(_in_window(z, window) for z, _, _ in _ep_clusters(rec, labels))
                ep_proxy.set_label(ep_label if seen else "_" + ep_label)
            for m in out_arrows:
                m.remove()
            out_arrows = _out_of_view_marks(ax, rec, labels, window, scale)
            legend = _legend_beside(ax, scale)
            ax.set_xlim(window[0], window[1])
            ax.set_ylim(-window[2], window[2])
        ax.set_aspect("equal", adjustable="box")
        _label_eps(ax, rec, labels, window, scale)
        if caption is None:
            extra = [f"series to order {rec['order']}"]
            for lab, kind, r in zip(labels, rec["kinds"], rec["radius"]):
                if kind != "convergent":
                    extra.append(f"{lab}: {kind}")
                elif math.isinf(r):
                    extra.append(f"{lab}: radius ∞")
            caption = caption_text("complex coupling plane", model=model_name or "model", extra=extra)
        cap = add_caption(ax, caption, scale)
    return DivergenceArtists(
        figure=fig, ax=ax, labels=labels, discs=tuple(discs), kato_discs=tuple(katos), exceptional_points=tuple(eps),
        regimes=tuple(strips), boundaries=tuple(bmarks), coupling_marker=marker, caption=cap, legend=legend,
        out_of_view=tuple(out_arrows),
    )


def _legend_beside(ax: Any, scale: float) -> Any:
    """Framed legend to the right of the axes, inside the figure (the plane keeps its space)."""
    legend = add_legend(ax, scale, loc="upper left", size=FONT_SIZES["legend"] * 0.85)
    legend.set_bbox_to_anchor((1.01, 1.0), transform=ax.transAxes)
    return legend


def _in_window(z: complex, window: tuple[float, float, float]) -> bool:
    return window[0] <= z.real <= window[1] and abs(z.imag) <= window[2]


def _circle_visible(r: float, window: tuple[float, float, float]) -> bool:
    """Does a circle of radius r about 0 cross the window (not wholly outside it)?"""
    x0, x1, yh = window
    far = max(math.hypot(x, yh) for x in (x0, x1))
    return r <= far

def _box_aspect(ax: Any, legend: Any, scale: float, *, laid_out: bool = False) -> float:
    """Width / height of the axes box with the legend to its right.

    ``laid_out``: run the figure's layout engine once (constrained layout)
    and read the box; otherwise (or without a layout engine) estimate it
    from the legend's text width and usual margins.  ``adjustable="box"``
    absorbs what is left.
    """
    fig = ax.figure
    engine = fig.get_layout_engine()
    if laid_out and engine is not None and getattr(engine, "adjust_compatible", True) is False:
        engine.execute(fig)
        pos = ax.get_position()
        w, h = pos.width * fig.get_figwidth(), pos.height * fig.get_figheight()
        return max(w / h, 0.8) if h > 0 else 1.0
    size = FONT_SIZES["legend"] * 0.85 * scale
    texts = [t.get_text() for t in legend.get_texts()]
    legend_pt = (max((text_width(t, size) for t in texts), default=0.0) + 5.0 * size) if texts else 0.0
    fig_w, fig_h = fig.get_figwidth() * 72.0, fig.get_figheight() * 72.0
    w = fig_w - legend_pt - 95.0 * scale
    h = fig_h - 85.0 * scale
    return max(w / h, 0.8) if h > 0 else 1.0


def _ep_clusters(rec: dict, labels: tuple) -> list[tuple[complex, list[str], bool]]:
    """Exceptional points with Im ≥ 0 (their conjugates mirror them), merged across levels.

    Returns (z, level names, mirrored): ``mirrored`` when −conj(z) is one too
    (written ``±Re + Im i``).
    """
    out: list[tuple[complex, list[str]]] = []
    for i, lab in enumerate(labels):
        for z in rec["eps"][i]:
            z = clean_complex(complex(z))
            if z.imag < 0:
                continue
            for w, names in out:
                if abs(w - z) <= 1e-6 * max(abs(z), 1e-300):
                    if lab not in names:
                        names.append(lab)
                    break
            else:
                out.append((z, [lab]))
    merged: list[tuple[complex, list[str], bool]] = []
    for z, names in out:
        twin = complex(-z.real, z.imag)
        if z.real < 0 and any(abs(w - twin) <= 1e-6 * abs(z) for w, _ in out):
            continue  # written with its twin
        mirrored = z.real > 0 and any(abs(w - complex(-z.real, z.imag)) <= 1e-6 * abs(z) for w, _ in out)
        merged.append((z, names, mirrored))
    return merged


def _fmt_ep(z: complex, mirrored: bool) -> str:
    return "±" + fmt_complex(z) if mirrored else fmt_complex(z)


def _label_eps(ax: Any, rec: dict, labels: tuple, window: tuple[float, float, float], scale: float) -> None:
    x0, x1, _ = window
    for z, names, mirrored in _ep_clusters(rec, labels):
        if _in_window(z, window):
            # text runs toward the middle of the view, so it never leaves the axes for the legend beside them
            right_half = z.real > x0 + 0.5 * (x1 - x0)
            ax.annotate(f"{_fmt_ep(z, mirrored)}: {', '.join(names)}", xy=(z.real, z.imag),
                        xytext=((-9.0 if right_half else 9.0) * scale / 0.72, 0.0), textcoords="offset points",
                        ha="right" if right_half else "left", va="center", fontsize=FONT_SIZES["caption"] * scale * 0.9,
                        color=EP_COLOR, bbox={"boxstyle": "round,pad=0.15", "facecolor": "white", "edgecolor": "none",
                                              "alpha": 0.85}, zorder=6)


def _out_of_view_marks(ax: Any, rec: dict, labels: tuple, window: tuple[float, float, float], scale: float) -> list[Any]:
    """Arrowheads at the edge of the window pointing at exceptional points beyond it (one legend entry).

    The legend entry names the nearest two (and how many more).
    """
    x0, x1, yh = window
    outside = sorted(((z, n, m) for z, n, m in _ep_clusters(rec, labels) if not _in_window(z, window)),
                     key=lambda p: abs(p[0]))
    marks = []
    for k, (z, names, mirrored) in enumerate(outside):
        pts = [z] + ([complex(-z.real, z.imag)] if mirrored else [])
        for p in pts:
            fx = ((x1 if p.real > 0 else x0) / p.real) if p.real else math.inf
            fy = (yh / p.imag) if p.imag else math.inf
            f = min(fx, fy)
            edge = complex(p.real * f, p.imag * f)
            marker = ("^" if p.imag > 0 else "v") if fy <= fx else (">" if p.real > 0 else "<")
            (m,) = ax.plot([edge.real], [edge.imag], linestyle="none", marker=marker, markersize=11 * max(scale, 0.75),
                           color=EP_COLOR, clip_on=False, zorder=7)
            marks.append(m)
    if outside:
        texts = [f"{_fmt_ep(z, m)} ({', '.join(n)})" for z, n, m in outside[:2]]
        more = f" and {len(outside) - 2} more" if len(outside) > 2 else ""
        marks[0].set_label("exceptional points beyond the view: " + "; ".join(texts) + more)
    return marks
