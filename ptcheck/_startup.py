"""Quiet start-up of the command line (imported first by ``ptcheck/__init__.py``).

Importing the package takes a moment (numpy, scipy).  When this process *is*
the ptcheck command (``python -m ptcheck ...`` or the ``ptcheck`` script),
Ctrl-C or SIGTERM during that moment ends the process with one line on stderr
and the exit status 130 / 143, instead of a traceback; nothing has been
written yet.  :func:`ptcheck.cli.main` takes signal handling over as soon as
it starts, and hands it back when it returns (the same one line then covers
the last instants before the process exits).  In any other process (a
notebook, a script or a test importing ptcheck) this module does nothing.
"""

from __future__ import annotations

import os
import signal
import sys

__all__: list[str] = []


def _is_command_line() -> bool:
    """This process was started as ``python -m ptcheck`` or as the ``ptcheck`` script."""
    names = ("ptcheck", "ptcheck.__main__", "ptcheck.cli")
    orig = list(getattr(sys, "orig_argv", []))
    i = 1
    while i < len(orig):
        arg = orig[i]
        if arg == "-m":
            return i + 1 < len(orig) and orig[i + 1] in names
        if arg.startswith("-m"):
            return arg[2:] in names
        if arg in ("-X", "-W"):  # options followed by a value
            i += 2
            continue
        if arg.startswith("-c") or not arg.startswith("-") or arg == "-":
            break
        i += 1
    script = os.path.basename(sys.argv[0]) if sys.argv else ""
    return os.path.splitext(script)[0] in ("ptcheck", "ptcheck-script")


def _quit(signum: int, frame: object) -> None:
    what = "terminated" if signum == signal.SIGTERM else "interrupted"
    try:
        sys.stderr.write(f"ptcheck: error: {what} while starting or finishing; no report was being written\n")
        sys.stderr.flush()
    finally:
        os._exit(128 + signum)


if _is_command_line():
    try:
        signal.signal(signal.SIGINT, _quit)
        signal.signal(signal.SIGTERM, _quit)
    except ValueError:  # pragma: no cover - not the main thread
        pass
