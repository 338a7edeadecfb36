"""Figure of a :class:`ptcheck.maps.ValidityMap` (matplotlib imported lazily).

Kept apart from :mod:`ptcheck.maps` so that the engine never imports matplotlib.
Styled like the figures of :mod:`ptcheck.plots` (fonts, framed legend, one-line
caption, the order's own colour for its boundary line).
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np

__all__ = ["MapArtists", "plot_validity_map", "PARAM_SYMBOLS", "param_label"]

#: Builder parameter -> (symbol, is an energy).  Energies take the unit given to
#: :func:`param_label` (default "energy units"); sizes and counts take none.
PARAM_SYMBOLS = MappingProxyType({
    "omega_q": ("ω_q", True), "omega_r": ("ω_r", True), "alpha": ("α", True), "g": ("g", True),
    "omega1": ("ω₁", True), "omega2": ("ω₂", True), "alpha1": ("α₁", True), "alpha2": ("α₂", True),
    "j": ("J", True), "delta": ("Δ", True), "v": ("v", True), "phase": ("phase φ", False),
    "e_c": ("E_C", True), "e_j": ("E_J", True), "n_g": ("offset charge n_g", False), "b": ("B", True),
    "v0": ("V₀", True), "h_z": ("h_z", True), "anisotropy": ("anisotropy", False), "t": ("t", True), "u": ("U", True),
    "n_photons": ("resonator states kept", False), "n_qubit": ("qubit levels kept", False),
    "n_levels": ("levels kept", False), "n_basis": ("basis states kept", False), "n_max": ("charge states |n| ≤", False),
    "m_max": ("rotor states |m| ≤", False), "n_spins": ("spins", False),
})


def param_label(name: str, unit: str | None = None) -> str:
    """Axis label of a builder parameter: ``"ω_r (GHz)"``, ``"ω_r (energy units)"``, ``"qubit levels kept"``.

    Unknown names are shown as given (with the unit when one is passed).

    Examples
    --------
    >>> param_label("omega_r", "GHz"), param_label("n_qubit")
    ('ω_r (GHz)', 'qubit levels kept')
    """
    symbol, energy = PARAM_SYMBOLS.get(name, (name, unit is not None))
    if not energy:
        return symbol
    return f"{symbol} ({unit or 'energy units'})"


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
        |λ*| against the parameter (points where it is finite), in the order's colour.
    not_reached : Line2D
        Markers at the top of the axes where λ* was not reached.
    mark : Line2D or None
        The point passed as ``mark``.
    caption : Text or None
    legend : Legend or None
    """

    figure: Any
    ax: Any
    mesh: Any
    colorbar: Any
    boundary: Any
    not_reached: Any
    mark: Any = None
    caption: Any = None
    legend: Any = None


def plot_validity_map(
    result: Any,
    *,
    ax: Any = None,
    colorbar: bool = True,
    mark: tuple[float, float] | None = None,
    mark_label: str = "your design",
    unit: str | None = None,
    param_name: str | None = None,
    caption: str | None = None,
) -> MapArtists:
    """Draw where one order is valid over (parameter, |λ|).

    With an error grid: colour = log10(error / tolerance) (blue: within
    tolerance, red: beyond), and the validity boundary |λ*| as a line; without
    one: the boundary line with the valid region below it shaded.

    Parameters
    ----------
    result : ValidityMap
    ax : matplotlib Axes, optional
        Draw here; a new 16:9 figure is made only when None.
    colorbar : bool, default True
    mark : (float, float), optional
        A point (parameter value, |λ|) to mark, e.g. the design point.
    mark_label : str
        Its legend entry.
    unit : str, optional
        Energy unit of the parameter (e.g. "GHz"); default "energy units".
    param_name : str, optional
        Axis label of the parameter; default from :data:`PARAM_SYMBOLS` and ``unit``.
    caption : str, optional
        One line above the axes; default: target, model, tolerance.

    Returns
    -------
    MapArtists
    """
    from .approximants import order_name
    from .plots._common import add_caption, add_legend, caption_text, new_axes, style_axes
    from .plots._style import FONT_SIZES, order_color, style

    fig, ax, scale = new_axes(ax)
    lw = max(scale, 0.75)
    x = np.asarray(result.param_values, dtype=float)
    b = np.abs(np.asarray(result.boundary, dtype=float))
    rel = result.rtol is not None
    tol_text = f"{100 * result.rtol:.3g} %" if rel else f"{result.tol:.3g}" + (f" {unit}" if unit else " (absolute)")
    col = order_color(result.order)
    mesh = cbar = None
    top = None
    with style(scale):
        if result.errors is not None and result.couplings is not None:
            y = np.abs(np.asarray(result.couplings, dtype=float))
            with np.errstate(divide="ignore", invalid="ignore"):
                z = np.log10(np.asarray(result.errors, dtype=float) / result.tolerance).T  # (C, P)
            lim = float(np.nanmax(np.abs(z[np.isfinite(z)]))) if np.any(np.isfinite(z)) else 1.0
            lim = min(max(lim, 0.5), 6.0)
            mesh = ax.pcolormesh(x, y, np.clip(z, -lim, lim), shading="nearest", cmap="RdBu_r", vmin=-lim, vmax=lim)
            if colorbar:
                cbar = fig.colorbar(mesh, ax=ax)
                cbar.set_label(f"log₁₀(error / {tol_text})", fontsize=FONT_SIZES["base"] * scale * 0.85)
                cbar.ax.tick_params(labelsize=FONT_SIZES["ticks"] * scale)
            top = float(np.max(y))
            ax.set_ylim(float(np.min(y)), top)
        finite = np.isfinite(b)
        (line,) = ax.plot(x[finite], b[finite], color="black", marker="o", linewidth=2.4 * lw, markerfacecolor=col,
                          markeredgecolor="black", label=f"validity boundary |λ*| of {order_name(result.order)} ({tol_text})")
        if top is None:
            top = float(np.max(b[finite])) * 1.2 if np.any(finite) else 1.0
            ax.fill_between(x[finite], 0, b[finite], color=col, alpha=0.15, label=f"within {tol_text}")
            ax.set_ylim(0, top)
        inf = np.isinf(b)
        (nr,) = ax.plot(x[inf], np.full(int(inf.sum()), top), linestyle="none", marker="^", color="black",
                        clip_on=False, label="λ* beyond the range searched" if inf.any() else None)
        mk = None
        if mark is not None:
            (mk,) = ax.plot([float(mark[0])], [abs(float(mark[1]))], linestyle="none", marker="*", markersize=18 * lw,
                            color="white", markeredgecolor="black", markeredgewidth=1.5, label=mark_label, zorder=5)
        ax.set_xlabel(param_name or param_label(result.param_name, unit))
        ax.set_ylabel("|coupling λ|")
        style_axes(ax, scale)
        ax.grid(False)
        legend = add_legend(ax, scale, size=FONT_SIZES["legend"] * 0.9)
        if caption is None:
            caption = caption_text("validity map", model=result.builder,
                                   extra=[f"{result.target}", f"{order_name(result.order)} within {tol_text}"
                                          + (" of the exact value" if rel else "")])
        cap = add_caption(ax, caption, scale)
    return MapArtists(figure=fig, ax=ax, mesh=mesh, colorbar=cbar, boundary=line, not_reached=nr, mark=mk, caption=cap,
                      legend=legend)
