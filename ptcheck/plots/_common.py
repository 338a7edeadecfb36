"""Shared pieces of the figure functions: axes creation, captions, small helpers.

Private module.  Nothing here computes physics: only text and indexing.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Iterable, Sequence
from typing import Any

import matplotlib as mpl
import numpy as np

from ._style import FONT_SIZES, SCREEN_SIZE, font_scale, style

__all__ = ["new_axes", "caption_text", "add_caption", "fmt_range", "fmt_tol", "positive_or_nan", "nearest_index"]


def new_axes(ax: Any, figsize: tuple[float, float] = SCREEN_SIZE) -> tuple[Any, Any, float]:
    """Return ``(figure, axes, font scale)``; a new 16:9 figure only when ``ax`` is None."""
    if ax is None:
        import matplotlib.pyplot as plt  # only here: a figure is made for the caller

        # The figure is made OUTSIDE the style context: the first pyplot figure of a session loads
        # the backend, and a notebook's inline backend then switches interactive mode on; inside an
        # rc_context that switch would be undone on exit and no later figure would be displayed.
        fig = plt.figure(figsize=figsize, layout="constrained")
        with style(figsize[0] / 13.333):
            fig.set_dpi(mpl.rcParams["figure.dpi"])
            ax = fig.add_subplot()
    else:
        fig = ax.figure
    return fig, ax, font_scale(fig)


def style_axes(ax: Any, scale: float) -> None:
    """Tick sizes and a light grid stored on the axes (so they survive later redraws)."""
    ax.tick_params(labelsize=FONT_SIZES["ticks"] * scale)
    ax.xaxis.label.set_fontsize(FONT_SIZES["base"] * scale)
    ax.yaxis.label.set_fontsize(FONT_SIZES["base"] * scale)
    ax.grid(True, color="#DDDDDD", linewidth=0.8)
    ax.set_axisbelow(True)


def fmt_range(values: Iterable[float]) -> str:
    v = np.asarray(list(values), dtype=float)
    if v.size == 0:
        return "λ: none"
    return f"λ ∈ [{v.min():.3g}, {v.max():.3g}]"


def fmt_tol(tol: float | None, rtol: float | None) -> str | None:
    if tol is not None:
        return f"tol = {tol:.2g} (absolute)"
    if rtol is not None:
        return f"tol = {rtol:.2g} (relative)"
    return None


def caption_text(
    kind: str,
    *,
    model: str,
    n: int | None = None,
    levels: Sequence[str] = (),
    orders: Sequence[str] = (),
    tol: float | None = None,
    rtol: float | None = None,
    couplings: Iterable[float] | None = None,
    extra: Sequence[str] = (),
) -> str:
    """One compact caption line (:func:`add_caption` wraps it to the figure width).

    Examples
    --------
    >>> caption_text("levels", model="two-level", n=2, levels=["n=0"], orders=["order 2"])
    'levels · two-level (N = 2) · level n=0 · order 2'
    """
    parts = [kind, f"{model} (N = {n})" if n is not None else model]
    if levels:
        names = [str(x) for x in levels]
        word = "level" if all(x.startswith(("|", "n=")) for x in names) else "target"
        parts.append((word + " " if len(names) == 1 else word + "s ") + ", ".join(names))
    if orders:
        names = [str(o).replace("order ", "") for o in orders]
        parts.append(("order " if len(names) == 1 else "orders ") + ", ".join(names))
    t = fmt_tol(tol, rtol)
    if t:
        parts.append(t)
    if couplings is not None:
        parts.append(fmt_range(couplings))
    parts.extend(str(e) for e in extra if e)
    return " · ".join(parts)


def add_caption(ax: Any, text: str, scale: float) -> Any:
    """Caption above the axes, left-aligned, in a muted colour; returns the Text.

    Wrapped (at " · " separators where possible) to about 80 % of the figure
    width, estimated from the font size (average glyph ~0.55 em).
    """
    size = FONT_SIZES["caption"] * scale
    chars = max(30, int(0.8 * ax.figure.get_figwidth() * 72.0 / (0.55 * size)))
    lines = textwrap.wrap(text, width=chars, break_long_words=False) if "\n" not in text else text.split("\n")
    return ax.annotate(
        "\n".join(lines),
        xy=(0.0, 1.0),
        xycoords="axes fraction",
        xytext=(0.0, 6.0 * scale / 0.72),
        textcoords="offset points",
        ha="left",
        va="bottom",
        fontsize=size,
        color="#444444",
        annotation_clip=False,
    )


def positive_or_nan(a: Any) -> np.ndarray:
    """Copy with non-positive and non-finite entries replaced by NaN (for log axes)."""
    a = np.array(a, dtype=float)
    a[~(np.isfinite(a) & (a > 0))] = np.nan
    return a


def nearest_index(couplings: np.ndarray, coupling: float) -> int:
    """Index of the sweep point nearest ``coupling``."""
    return int(np.argmin(np.abs(np.asarray(couplings) - coupling)))


def finite_or_none(x: Any) -> float | None:
    try:
        f = float(x)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None
