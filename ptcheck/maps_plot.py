"""Figure of a :class:`ptcheck.maps.ValidityMap` (matplotlib imported lazily).

Kept apart from :mod:`ptcheck.maps` so that the engine never imports matplotlib.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = ["MapArtists", "plot_validity_map"]


@dataclass(frozen=True)
class MapArtists:
    """Artists made by :func:`plot_validity_map`.

    Attributes
    ----------
    figure, ax
        The figure and axes drawn on.
    mesh : QuadMesh or None
        Colour map of log10(error / tolerance) (None without a coupling grid).
    colorbar : Colorbar or None
    boundary : Line2D
        |λ*| against the parameter (points where it is finite).
    not_reached : Line2D
        Markers at the top of the axes where λ* was not reached.
    mark : Line2D or None
        The point passed as ``mark``.
    """

    figure: Any
    ax: Any
    mesh: Any
    colorbar: Any
    boundary: Any
    not_reached: Any
    mark: Any = None


def plot_validity_map(
    result: Any, *, ax: Any = None, colorbar: bool = True, mark: tuple[float, float] | None = None, mark_label: str = "your design"
) -> MapArtists:
    """Draw where one order is valid over (parameter, |λ|).

    With an error grid: colour = log10(error / tolerance) (blue: within
    tolerance, red: beyond), and the validity boundary |λ*| as a line; without
    one: the boundary line with the valid region below it shaded.

    Parameters
    ----------
    result : ValidityMap
    ax : matplotlib Axes, optional
        Draw here; a new figure is made only when None.
    colorbar : bool, default True
    mark : (float, float), optional
        A point (parameter value, |λ|) to mark, e.g. the design point.
    mark_label : str
        Its legend entry.

    Returns
    -------
    MapArtists
    """
    if ax is None:
        import matplotlib.pyplot as plt

        fig, ax = plt.subplots(figsize=(10.0, 5.625), layout="constrained")
    else:
        fig = ax.figure
    x = np.asarray(result.param_values, dtype=float)
    b = np.abs(np.asarray(result.boundary, dtype=float))
    mesh = cbar = None
    top = None
    if result.errors is not None and result.couplings is not None:
        y = np.abs(np.asarray(result.couplings, dtype=float))
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.log10(np.asarray(result.errors, dtype=float) / result.tolerance).T  # (C, P)
        lim = float(np.nanmax(np.abs(z[np.isfinite(z)]))) if np.any(np.isfinite(z)) else 1.0
        lim = min(max(lim, 0.5), 6.0)
        mesh = ax.pcolormesh(x, y, np.clip(z, -lim, lim), shading="nearest", cmap="RdBu_r", vmin=-lim, vmax=lim)
        if colorbar:
            cbar = fig.colorbar(mesh, ax=ax)
            cbar.set_label("log10(error / tolerance)")
        top = float(np.max(y))
        ax.set_ylim(float(np.min(y)), top)
    finite = np.isfinite(b)
    (line,) = ax.plot(x[finite], b[finite], color="k", marker="o", linewidth=2, label="validity boundary |λ*|")
    if top is None:
        top = float(np.max(b[finite])) * 1.2 if np.any(finite) else 1.0
        ax.fill_between(x[finite], 0, b[finite], color="#56B4E9", alpha=0.3, label="within tolerance")
        ax.set_ylim(0, top)
    inf = np.isinf(b)
    (nr,) = ax.plot(x[inf], np.full(int(inf.sum()), top), linestyle="none", marker="^", color="k",
                    label="λ* beyond the range searched" if inf.any() else None)
    mk = None
    if mark is not None:
        (mk,) = ax.plot([float(mark[0])], [abs(float(mark[1]))], linestyle="none", marker="*", markersize=16,
                        color="#E69F00", markeredgecolor="k", label=mark_label, zorder=5)
    ax.set_xlabel(result.param_name)
    ax.set_ylabel("|coupling λ|")
    kind = f"rtol {result.rtol:g}" if result.rtol is not None else f"tol {result.tol:g}"
    from .approximants import order_name

    ax.set_title(f"{result.target}, {order_name(result.order)} ({kind}) — model {result.builder}")
    ax.legend(loc="best", fontsize=9)
    return MapArtists(figure=fig, ax=ax, mesh=mesh, colorbar=cbar, boundary=line, not_reached=nr, mark=mk)
