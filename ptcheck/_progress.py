"""A small text progress bar for long runs of the command line.

Engine functions that take a while accept ``progress``: a callable
``progress(done, total)`` called after each finished unit of work.
:class:`ProgressBar` is such a callable; it draws on a stream (stderr by
default) only when that stream is a terminal, so logs and pipes stay clean.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from typing import IO

__all__ = ["ProgressBar", "ProgressCallback", "report_progress"]

#: The signature engine functions accept for ``progress``.
ProgressCallback = Callable[[int, int], None]


def report_progress(progress: ProgressCallback | None, done: int, total: int) -> None:
    """Call ``progress(done, total)`` if a callback was given."""
    if progress is not None:
        progress(done, total)


class ProgressBar:
    """Progress bar ``label [#####.....] 5/10  3.2 s`` on a terminal; silent otherwise.

    Parameters
    ----------
    label : str
        Text in front of the bar.
    stream : file-like, optional
        Where to draw (default ``sys.stderr`` at the time of the call).
    enabled : bool, optional
        Force drawing on or off; default: only when ``stream.isatty()``.
    width : int, default 30
        Bar width in characters.

    Examples
    --------
    >>> bar = ProgressBar("maps", enabled=False)
    >>> bar(1, 4); bar(4, 4); bar.close()
    """

    def __init__(self, label: str = "", *, stream: IO[str] | None = None, enabled: bool | None = None, width: int = 30) -> None:
        self.label = label
        self.stream = sys.stderr if stream is None else stream
        if enabled is None:
            isatty = getattr(self.stream, "isatty", None)
            enabled = bool(isatty and isatty())
        self.enabled = enabled
        self.width = int(width)
        self._t0 = time.perf_counter()
        self._drawn = False

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled:
            return
        total = max(int(total), 1)
        done = min(max(int(done), 0), total)
        fill = int(round(self.width * done / total))
        bar = "#" * fill + "." * (self.width - fill)
        dt = time.perf_counter() - self._t0
        self.stream.write(f"\r{self.label} [{bar}] {done}/{total}  {dt:.1f} s")
        self.stream.flush()
        self._drawn = True

    def close(self) -> None:
        """End the bar's line (if anything was drawn)."""
        if self.enabled and self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False

    def __enter__(self) -> ProgressBar:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
