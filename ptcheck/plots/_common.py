"""Shared pieces of the figure functions: axes creation, captions, small helpers.

Private module.  Nothing here computes physics: only text and indexing.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Sequence
from typing import Any

import matplotlib as mpl
import numpy as np

from ._style import FONT_SIZES, LEGEND_STYLE, SCREEN_SIZE, font_scale, style

__all__ = [
    "new_axes", "caption_text", "add_caption", "fit_line", "text_width", "add_legend", "sci_text", "log_axis",
    "physical_coupling", "fmt_physical", "add_physical_axis", "fmt_range", "fmt_tol", "positive_or_nan", "nearest_index",
]


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
    """One compact caption line (:func:`add_caption` shortens it to fit the figure width).

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
    """One-line caption above the axes (its title, left-aligned, muted colour); returns the Text.

    Never wrapped: when the line would be wider than the figure allows, the
    trailing " · "-separated parts are dropped (whole parts only, so no
    formula is cut in two); details belong in the report text.  As a title,
    the caption stays above a secondary (physical coupling) axis.
    """
    size = FONT_SIZES["caption"] * scale
    pos = ax.get_position()
    avail = 0.97 * (1.0 - pos.x0) * ax.figure.get_figwidth() * 72.0
    line = fit_line(" ".join(str(text).split()), size, avail)
    return ax.set_title(line, loc="left", fontsize=size, color="#444444", pad=6.0 * scale / 0.72)


@functools.lru_cache(maxsize=1024)
def text_width(text: str, fontsize: float) -> float:
    """Width of one line of text in points (Agg font metrics, default font family; cached)."""
    from matplotlib.backends.backend_agg import RendererAgg
    from matplotlib.font_manager import FontProperties

    w, _, _ = RendererAgg(1, 1, 72.0).get_text_width_height_descent(text, FontProperties(size=fontsize), ismath=False)
    return float(w)


def fit_line(text: str, fontsize: float, width_pt: float) -> str:
    """``text`` shortened to fit ``width_pt`` points on one line.

    Drops trailing " · " parts first; a first part that alone is too wide is
    cut at a word boundary and ends with "…".

    Examples
    --------
    >>> fit_line("levels · model · orders 1, 2", 10.0, 1e4)
    'levels · model · orders 1, 2'
    """
    parts = text.split(" · ")
    while len(parts) > 1 and text_width(" · ".join(parts), fontsize) > width_pt:
        parts.pop()
    line = " · ".join(parts)
    if text_width(line, fontsize) <= width_pt:
        return line
    words = line.split(" ")
    while len(words) > 1 and text_width(" ".join(words) + " …", fontsize) > width_pt:
        words.pop()
    return " ".join(words) + " …"


def add_legend(ax: Any, scale: float, *, handles: Sequence[Any] | None = None, labels: Sequence[str] | None = None,
               loc: str = "best", ncols: int = 1, size: float | None = None) -> Any:
    """Framed, semi-opaque legend inside the axes ("best": the corner with least data under it)."""
    kw = dict(LEGEND_STYLE)
    kw.update(loc=loc, ncols=ncols, fontsize=(size or FONT_SIZES["legend"]) * scale)
    if handles is not None:
        leg = ax.legend(handles, labels if labels is not None else [h.get_label() for h in handles], **kw)
    else:
        leg = ax.legend(**kw)
    leg.set_zorder(10)
    return leg


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def sci_text(x: float) -> str:
    """Plain-text scientific notation with superscripts: ``10⁻³``, ``2×10⁻³`` (no mathtext).

    Examples
    --------
    >>> sci_text(1e-3), sci_text(2e-3), sci_text(1.0), sci_text(3.0)
    ('10⁻³', '2×10⁻³', '10⁰', '3')
    """
    if x == 0 or not math.isfinite(x):
        return f"{x:g}"
    e = math.floor(math.log10(abs(x)) + 1e-9)
    m = x / 10.0**e
    power = "10" + str(e).translate(_SUPERSCRIPT)
    if abs(abs(m) - 1.0) < 1e-6:
        return ("−" if m < 0 else "") + power
    if e == 0:
        return f"{x:.3g}"
    return f"{m:.3g}×{power}"


def log_axis(axis: Any) -> None:
    """Log-scale ticks for errors spanning many decades: one labelled tick per decade, plain-text labels.

    Labels read ``10⁻³`` (no mathtext parsing on every draw); no minor ticks
    (eight per decade over ten decades are noise, and each tick costs a draw).
    """
    from matplotlib.ticker import LogFormatter, LogLocator, NullLocator

    class _Formatter(LogFormatter):
        def _num_to_string(self, x: float, vmin: float, vmax: float) -> str:
            return sci_text(x)

    axis.set_major_locator(LogLocator(base=10.0, numticks=12))
    axis.set_major_formatter(_Formatter(labelOnlyBase=False))
    axis.set_minor_locator(NullLocator())


def physical_coupling(source: Any, scale: float | None = None, unit: str | None = None) -> tuple[float, str] | None:
    """(coupling_scale, coupling_unit) given, or read from ``source`` (a Model or result); None if absent.

    ``coupling_scale`` is the physical coupling at λ = 1 in ``coupling_unit``
    (e.g. 66.0, "MHz"), as on :class:`ptcheck.Model`.
    """
    scale = scale if scale is not None else getattr(source, "coupling_scale", None)
    unit = unit if unit is not None else getattr(source, "coupling_unit", None)
    if scale is None:
        return None
    f = finite_or_none(scale)
    if f is None or f == 0:
        return None
    return f, str(unit or "")


def fmt_physical(coupling: float, phys: tuple[float, str] | None) -> str:
    """``"0.798"`` or, with a physical coupling, ``"0.798 (65.4 MHz)"``, ``"14 (1148 MHz)"``."""
    text = plain3(coupling)
    if phys is not None and math.isfinite(coupling):
        text += f" ({plain3(coupling * phys[0])}{' ' + phys[1] if phys[1] else ''})"
    return text


def plain3(x: float) -> str:
    """Three significant digits without an exponent between 1e-3 and 1e5 (``1148``, ``0.798``).

    Examples
    --------
    >>> plain3(1148.2), plain3(0.7981), plain3(82.0), plain3(2e-5)
    ('1148', '0.798', '82', '2e-05')
    """
    if not math.isfinite(x) or x == 0 or not (1e-3 <= abs(x) < 1e5):
        return f"{x:.3g}"
    p = max(0, 2 - math.floor(math.log10(abs(x))))
    text = f"{x:.{p}f}"
    return text.rstrip("0").rstrip(".") if "." in text else text


def add_physical_axis(ax: Any, phys: tuple[float, str] | None, scale: float, *, which: str = "x") -> Any:
    """Secondary axis (top or right) in physical coupling units; None without a physical coupling."""
    if phys is None:
        return None
    k, unit = phys
    fwd, inv = (lambda x: x * k), (lambda y: y / k)
    sec = ax.secondary_xaxis("top", functions=(fwd, inv)) if which == "x" else ax.secondary_yaxis("right", functions=(fwd, inv))
    label = f"coupling ({unit})" if unit else f"coupling (λ = 1 ↔ {k:g})"
    (sec.set_xlabel if which == "x" else sec.set_ylabel)(label, fontsize=FONT_SIZES["caption"] * scale, color="#444444")
    sec.tick_params(labelsize=FONT_SIZES["ticks"] * scale * 0.85, colors="#444444")
    return sec


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
