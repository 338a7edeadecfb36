"""Atomic, overwrite-safe file writing for reports.

A report file is written to a temporary file in the same directory and moved
into place with :func:`os.replace` (atomic on POSIX and Windows for files on one
file system), so an interrupted run never leaves a half-written report.  An
existing file with *different* content is only replaced when the caller says
so (``force=True``); the same content is fine (re-running a check is harmless).
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Mapping
from pathlib import Path

__all__ = ["ReportExistsError", "check_overwrite", "write_atomic", "write_all"]


class ReportExistsError(FileExistsError):
    """A different report already exists where a new one would be written."""


def _as_bytes(content: str | bytes) -> bytes:
    return content.encode("utf-8") if isinstance(content, str) else bytes(content)


def check_overwrite(files: Mapping[Path, str | bytes], *, force: bool) -> None:
    """Raise :class:`ReportExistsError` if any target exists with different content.

    Parameters
    ----------
    files : mapping of Path -> str or bytes
        Target path -> content it would receive.
    force : bool
        Allow replacing different content.
    """
    if force:
        return
    clash = []
    for path, content in files.items():
        p = Path(path)
        if p.is_dir():
            raise IsADirectoryError(f"cannot write the report file {str(p)!r}: it is a directory")
        if p.exists() and p.read_bytes() != _as_bytes(content):
            clash.append(str(p))
    if clash:
        names = ", ".join(repr(c) for c in clash[:3]) + (f" and {len(clash) - 3} more" if len(clash) > 3 else "")
        raise ReportExistsError(
            f"a different report already exists ({names}); pass --force (force=True) to replace it, "
            "or choose another output directory"
        )


def write_atomic(path: str | os.PathLike, content: str | bytes) -> Path:
    """Write ``content`` to ``path`` atomically (temp file in the same directory + ``os.replace``).

    Parameters
    ----------
    path : path-like
        Target file; its directory must exist.
    content : str or bytes
        Text is written as UTF-8.

    Returns
    -------
    Path
        The target path.
    """
    p = Path(path)
    data = _as_bytes(content)
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=p.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, p)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return p


def write_all(files: Mapping[Path, str | bytes], *, force: bool = False) -> list[Path]:
    """Check every target first, then write each one atomically.

    Nothing is written if any target would overwrite a different file without
    ``force``.  Files are written in the order given (put the main report last,
    so that its presence means the others are complete).

    Returns
    -------
    list of Path
        The paths written, in order.
    """
    check_overwrite(files, force=force)
    out = []
    for path, content in files.items():
        p = Path(path)
        if p.exists() and p.read_bytes() == _as_bytes(content):
            out.append(p)  # same content: leave the file (and its mtime) alone
            continue
        out.append(write_atomic(p, content))
    return out
