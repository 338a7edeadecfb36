"""Validity boundary against photon number, beside the dispersive critical photon number."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from ..approximants import order_name
from ._common import (
    add_caption,
    add_legend,
    add_physical_axis,
    caption_text,
    new_axes,
    physical_coupling,
    style_axes,
)
from ._style import FONT_SIZES, MARKER_COLOR, order_color, style

__all__ = ["PhotonArtists", "plot_photon_boundaries"]

_CRIT_COLOR = "#555555"


@dataclass(frozen=True)
class PhotonArtists:
    """Artists made by :func:`plot_photon_boundaries`.

    Attributes
    ----------
    figure, ax
    boundary : Line2D
        |λ*_n| against n where the boundary was found (the order's colour).
    not_reached : Line2D
        Markers at the top of the axes for photon numbers whose boundary
        lies beyond the search.
    valid_region : PolyCollection
        Below the boundary: the order meets the tolerance (shaded lightly,
        named in the legend).
    critical : Line2D
        λ_crit(n) = |Δ|/(2g√n), where n reaches the dispersive critical
        photon number (Blais et al., Phys. Rev. A 69, 062320 (2004)).
    coupling_line : Line2D
        Horizontal line at the coupling of interest.
    caption : Text
    legend : Legend
    """

    figure: Any
    ax: Any
    boundary: Any
    not_reached: Any
    valid_region: Any
    critical: Any
    coupling_line: Any
    caption: Any
    legend: Any


def plot_photon_boundaries(
    result: Any,
    *,
    ax: Any = None,
    caption: str | None = None,
    coupling_scale: float | None = None,
    coupling_unit: str | None = None,
) -> PhotonArtists:
    """Where one order holds, as a function of photon number n and coupling λ.

    Parameters
    ----------
    result : PhotonBoundaries
        From :func:`ptcheck.photons.photon_boundaries`.
    ax : matplotlib Axes, optional
    caption : str, optional
    coupling_scale, coupling_unit : float, str, optional
        Physical coupling at λ = 1 and its unit: a second coupling axis on
        the right.

    Returns
    -------
    PhotonArtists
    """
    need = ("photons", "boundary", "critical_coupling", "n_crit", "coupling")
    if not all(hasattr(result, a) for a in need):
        raise TypeError(f"plot_photon_boundaries needs a PhotonBoundaries (ptcheck.photons); got {type(result).__name__}")
    fig, ax, scale = new_axes(ax)
    lw = max(scale, 0.75)
    n = np.asarray(result.photons, dtype=float)
    b = np.abs(np.asarray(result.boundary, dtype=float))
    status = np.asarray(result.status)
    found = np.isfinite(b) & (status == "found")
    at_zero = status == "fails_at_zero"
    lam = abs(float(result.coupling))
    col = order_color(result.order)
    tol = f"{100 * result.rtol:.3g} %" if result.rtol is not None else f"{result.tol:.3g} (absolute)"
    what = "qubit transition" if result.quantity == "transition" else "dispersive shift χ_n"
    with style(scale):
        top = 1.3 * max([lam] + [float(x) for x in b[found]] or [1.0])
        fill_y = np.where(np.isinf(b), top, np.where(found, b, np.nan))
        region = ax.fill_between(n, 0.0, fill_y, color=col, alpha=0.12, linewidth=0,
                                 label=f"{order_name(result.order)} meets {tol} (shaded)")
        (line,) = ax.plot(n, np.where(found, b, np.nan), color=col, marker="o", linewidth=2.2 * lw,
                          label=f"λ*_n of the {what}, {order_name(result.order)}")
        if at_zero.any():
            ax.plot(n[at_zero], np.zeros(int(at_zero.sum())), linestyle="none", marker="x", color=col,
                    markersize=10 * lw, markeredgewidth=2 * lw, clip_on=False,
                    label="fails at any λ ≠ 0 (see notes)")
        beyond = np.isinf(b)
        (nr,) = ax.plot(n[beyond], np.full(int(beyond.sum()), top), linestyle="none", marker="^", color=col,
                        clip_on=False, label="λ*_n beyond the search" if beyond.any() else None)
        nn = np.linspace(max(n.min(), 0.0) if n.size else 0.0, max(n.max(), 1.0) if n.size else 1.0, 200)
        nn = nn[nn > 0]
        (crit,) = ax.plot(nn, abs(result.detuning) / (2 * result.g * np.sqrt(nn)), color=_CRIT_COLOR,
                          linestyle=(0, (5, 2)), linewidth=1.8 * lw,
                          label="n = n_crit = Δ²/(4λ²g²) (Blais 2004)")
        nv = "none" if result.n_valid is None else f"n ≤ {result.n_valid}"
        cl = ax.axhline(lam, color=MARKER_COLOR, linewidth=1.6 * lw,
                        label=f"λ = {lam:g}: valid for {nv}; n_crit = {result.n_crit:.3g}")
        ax.set_ylim(0.0, top)
        if n.size:
            ax.set_xlim(float(n.min()) - 0.3, float(n.max()) + 0.3)
        from matplotlib.ticker import MaxNLocator

        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_xlabel("photons in the resonator n")
        ax.set_ylabel("coupling λ")
        style_axes(ax, scale)
        sec = add_physical_axis(ax, physical_coupling(result, coupling_scale, coupling_unit), scale, which="y")
        # beside the axes (right of the physical axis, if any): the curves fill the plane
        legend = add_legend(ax, scale, loc="upper left", size=FONT_SIZES["legend"] * 0.85)
        legend.set_bbox_to_anchor((1.0, 1.0), transform=ax.transAxes)
        legend.borderaxespad = (4.8 if sec is not None else 0.6)
        if caption is None:
            caption = caption_text("validity against photon number", model=result.model_name,
                                   extra=[f"{order_name(result.order)}", f"tolerance {tol}"])
        cap = add_caption(ax, caption, scale)
    return PhotonArtists(figure=fig, ax=ax, boundary=line, not_reached=nr, valid_region=region, critical=crit,
                         coupling_line=cl, caption=cap, legend=legend)
