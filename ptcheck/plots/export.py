"""Slide export: PNG, SVG or PDF at 16:9 with fonts legible on a projector."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from matplotlib.figure import Figure
from matplotlib.text import Text

from .. import _validation as val
from ._style import SLIDE_SIZE

__all__ = ["SavedFigure", "save", "FORMATS", "MIN_FONT_SIZE", "MAX_DPI", "MAX_SIZE_INCHES", "MAX_PIXELS"]

#: Formats :func:`save` writes.
FORMATS = ("png", "svg", "pdf")
#: Smallest font (points) on a 13.33 x 7.5 in slide: text below it is enlarged.
MIN_FONT_SIZE = 12.0
#: Highest resolution accepted (dots per inch).
MAX_DPI = 1200.0
#: Largest page side accepted (inches).
MAX_SIZE_INCHES = 100.0
#: Largest PNG accepted (pixels, width x height): 200 megapixels, 0.8 GB in memory.
MAX_PIXELS = 200_000_000


@dataclass(frozen=True)
class SavedFigure:
    """What :func:`save` wrote.

    Attributes
    ----------
    path : Path
    format : str
        ``"png"``, ``"svg"`` or ``"pdf"``.
    size_inches : tuple of float
        Page size written (width, height).
    dpi : float
        Resolution (PNG pixels = size x dpi).
    min_fontsize : float
        Smallest font size (points) of the visible text written.
    """

    path: Path
    format: str
    size_inches: tuple
    dpi: float
    min_fontsize: float


def _figure_of(obj: Any) -> Figure:
    if isinstance(obj, Figure):
        return obj
    fig = getattr(obj, "figure", None)
    if isinstance(fig, Figure):
        return fig
    raise TypeError(f"save needs a matplotlib Figure or an artists object with a .figure; got {type(obj).__name__}")


def _check_save_args(path: Any, format: Any, size: Any, dpi: Any, min_fontsize: Any):  # noqa: A002
    """Validate :func:`save`'s arguments; return (Path, format, (w, h), dpi, min_fontsize)."""
    if isinstance(path, str) and not path.strip():
        raise ValueError(f"path is empty; give a file name such as 'figure.png'; got {path!r}")
    if not isinstance(path, (str, os.PathLike)):
        raise TypeError(f"path must be a file name (str or path-like); got {path!r}")
    path = Path(path)
    if path.is_dir():
        raise ValueError(f"path {str(path)!r} is a folder; give a file name inside it, such as {str(path / 'figure.png')!r}")
    if format is not None and not isinstance(format, str):
        raise TypeError(f"format must be one of {list(FORMATS)} or None; got {format!r}")
    fmt = (format or path.suffix.lstrip(".")).lower()
    if fmt not in FORMATS:
        raise ValueError(f"format must be one of {list(FORMATS)} (from the file suffix or format=); got {fmt!r} for {str(path)!r}")
    if isinstance(size, (str, bytes)) or not hasattr(size, "__len__") or len(size) != 2:
        raise TypeError(f"size must be two numbers (width, height) in inches; got {size!r}")
    w = val.check_positive(size[0], "size (width, inches)")
    h = val.check_positive(size[1], "size (height, inches)")
    if max(w, h) > MAX_SIZE_INCHES:
        raise ValueError(f"size must be at most {MAX_SIZE_INCHES:g} inches a side; got {size!r}")
    dpi = val.check_positive(dpi, "dpi")
    if dpi > MAX_DPI:
        raise ValueError(f"dpi must be at most {MAX_DPI:g}; got {dpi!r}")
    if fmt == "png" and (w * dpi) * (h * dpi) > MAX_PIXELS:
        raise ValueError(
            f"a {w:g} x {h:g} in PNG at {dpi:g} dpi would have {w * dpi * h * dpi:.3g} pixels, more than "
            f"{MAX_PIXELS:.3g}; lower dpi or size"
        )
    min_fontsize = val.check_positive(min_fontsize, "min_fontsize")
    if not path.parent.is_dir():
        raise ValueError(f"folder {str(path.parent)!r} does not exist (or is not a folder)")
    return path, fmt, (w, h), dpi, min_fontsize


def save(
    fig_or_artists: Any,
    path: str | os.PathLike,
    *,
    format: str | None = None,  # noqa: A002 - matplotlib's own word
    size: tuple[float, float] = SLIDE_SIZE,
    dpi: float = 150.0,
    min_fontsize: float = MIN_FONT_SIZE,
) -> SavedFigure:
    """Write a figure as a 16:9 slide (PNG, SVG or PDF).

    The figure is laid out at ``size`` (default 13.33 x 7.5 in, a wide slide)
    with every font scaled by ``size[0] / current width`` and raised to at
    least ``min_fontsize`` points; the figure on screen is restored afterwards.

    Parameters
    ----------
    fig_or_artists : Figure or artists object (e.g. LevelArtists)
    path : str or path-like
        Target file; the format is taken from the suffix unless ``format`` is given.
    format : {"png", "svg", "pdf"}, optional
    size : (float, float)
        Page size in inches, each side at most :data:`MAX_SIZE_INCHES` (100).
    dpi : float
        Resolution of the PNG, at most :data:`MAX_DPI` (1200); a PNG has at
        most :data:`MAX_PIXELS` pixels.
    min_fontsize : float
        Smallest font size (points) on the page.

    Raises
    ------
    TypeError, ValueError
        A bad format, size, dpi, font size or path (a folder, or a file in a
        folder that does not exist); nothing is written.

    Returns
    -------
    SavedFigure
    """
    fig = _figure_of(fig_or_artists)
    path, fmt, (w, h), dpi, min_fontsize = _check_save_args(path, format, size, dpi, min_fontsize)
    old_size = tuple(fig.get_size_inches())
    scale = w / old_size[0]
    # no pre-draw: the ticks made here carry the axis' label size, and the one draw is savefig's own
    ticks: list[tuple[Any, str, float]] = []
    tick_texts: set[int] = set()
    for ax in list(fig.axes) + [c for a in fig.axes for c in getattr(a, "child_axes", ())]:
        for name, axis in (("x", ax.xaxis), ("y", ax.yaxis)):
            major = axis.get_major_ticks()
            if major:
                size0 = float(major[0].label1.get_fontsize())
                ticks.append((ax, name, size0))
                for t in major + axis.get_minor_ticks():
                    tick_texts.update((id(t.label1), id(t.label2)))
    texts = [t for t in fig.findobj(Text) if id(t) not in tick_texts]
    old_fonts = [(t, float(t.get_fontsize())) for t in texts]
    try:
        for ax, name, s0 in ticks:
            ax.tick_params(axis=name, which="both", labelsize=max(s0 * scale, min_fontsize))
        for t, s0 in old_fonts:
            t.set_fontsize(max(s0 * scale, min_fontsize))
        fig.set_size_inches(w, h, forward=False)
        # a temporary canvas of the file's own backend: an interactive canvas on screen is not redrawn
        fig.savefig(path, format=fmt, dpi=dpi, facecolor="white", backend={"png": "agg"}.get(fmt, fmt))
        visible = [t.get_fontsize() for t, _ in old_fonts if t.get_visible() and t.get_text()]
        visible += [max(s0 * scale, min_fontsize) for _, _, s0 in ticks]
        smallest = float(min(visible)) if visible else float("nan")
    finally:
        fig.set_size_inches(*old_size, forward=False)
        for ax, name, s0 in ticks:
            ax.tick_params(axis=name, which="both", labelsize=s0)
        for t, s0 in old_fonts:
            t.set_fontsize(s0)
        fig.canvas.draw_idle()
    return SavedFigure(path=path, format=fmt, size_inches=(w, h), dpi=float(dpi), min_fontsize=smallest)
