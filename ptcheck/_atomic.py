"""Report folders written as a whole: nothing lost, nothing mixed.

:func:`write_folder` writes every file of a report into a fresh sibling folder
(``.<name>.ptcheck-new-<random>``) and then swaps it with the target in one
step: an atomic exchange of the two folders where the system offers it
(``renameat2(RENAME_EXCHANGE)`` on Linux), otherwise two renames made while
SIGINT and SIGTERM are held back.  The previous report is removed only after
the swap succeeded.  So at any moment the target holds either the previous
report or the new one, complete.

- **Lock.** One writer per target at a time: a second writer at the same
  moment fails at once with :class:`ReportBusyError` (nothing written).  The
  lock is an advisory ``flock`` on ``.<name>.ptcheck-lock`` beside the target,
  removed afterwards (a killed writer's lock is released by the system).
- **Signals.** SIGINT and SIGTERM are held back while the folder is being
  written (when called from the main thread): one that arrives meanwhile
  stops the writing between two files, the partial folder is removed, and the
  signal is then raised again for its own handler.  One that arrives during
  the swap is raised after it.
- **What may be replaced.** A folder is a report when it carries the marker
  file ``.ptcheck-report`` (its fingerprint and file list) or, for reports of
  earlier versions, when every entry looks like a report file.  A folder with
  anything else in it is never replaced, even with ``force``.  A report with
  the same fingerprint (same settings and results) is replaced without
  ``force``; a different one only with ``force``.  A byte-identical report is
  left untouched.
- **Permissions** follow the umask (folders 0777 & ~umask, files 0666 & ~umask).
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import secrets
import shutil
import signal
import sys
import threading
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path

__all__ = [
    "MARKER",
    "FolderState",
    "ReportBusyError",
    "ReportExistsError",
    "ReportFolderError",
    "check_target",
    "folder_state",
    "write_folder",
]

#: Marker file of a report folder: JSON with the report's fingerprint and file list.
MARKER = ".ptcheck-report"

_NEW, _OLD, _LOCK = "ptcheck-new", "ptcheck-old", "ptcheck-lock"


class ReportExistsError(FileExistsError):
    """A different report already exists where a new one would be written."""


class ReportBusyError(BlockingIOError):
    """Another process is writing a report into the same folder right now."""


class ReportFolderError(ValueError):
    """The output folder cannot hold a report (a file, the current folder, or foreign files)."""


@dataclass(frozen=True)
class FolderState:
    """What an output folder holds now.

    Attributes
    ----------
    kind : str
        ``"absent"``, ``"empty"``, ``"report"`` or ``"foreign"`` (entries that
        are not part of a ptcheck report; listed in ``foreign``).
    fingerprint : str or None
        The report's fingerprint (None when unknown).
    files : tuple of str
        Entries of the folder (without the marker).
    foreign : tuple of str
        Entries that belong to no report.
    """

    kind: str
    fingerprint: str | None = None
    files: tuple = ()
    foreign: tuple = ()


# ---------------------------------------------------------------------- target
def check_target(path: str | os.PathLike) -> Path:
    """The absolute output folder, or a clear error.

    Refused: an empty name, a path that is a file, the file-system root, and
    the current folder or one that contains it (the whole folder is replaced).
    """
    if isinstance(path, str) and not path.strip():
        raise ReportFolderError(f"the output folder name is empty; got {path!r}")
    if not isinstance(path, (str, os.PathLike)):
        raise TypeError(f"the output folder must be a path (str or path-like); got {path!r}")
    p = Path(os.path.abspath(os.fspath(path)))
    if p.is_symlink():
        p = Path(os.path.realpath(p))
    if p.parent == p:
        raise ReportFolderError(f"the output folder cannot be the file-system root; got {str(path)!r}")
    if p.exists() and not p.is_dir():
        raise ReportFolderError(f"the output folder {str(path)!r} is a file")
    cwd = Path(os.path.realpath(os.getcwd()))
    real = Path(os.path.realpath(p))
    if real == cwd or real in cwd.parents:
        raise ReportFolderError(
            f"the output folder {str(path)!r} is the current folder or contains it; the report folder is replaced "
            "as a whole, so give a folder of its own (e.g. --out my-report)"
        )
    return p


def folder_state(
    target: Path,
    *,
    report_file: Callable[[str], bool],
    legacy_fingerprint: Callable[[Path], str | None] | None = None,
) -> FolderState:
    """Classify what ``target`` holds (see :class:`FolderState`).

    ``report_file(name)`` tells whether a file name can belong to a report of
    an earlier version (no marker); ``legacy_fingerprint(folder)`` computes such
    a report's fingerprint (None when unknown).
    """
    if not target.exists():
        return FolderState("absent")
    entries = sorted(e.name for e in os.scandir(target))
    files = tuple(e for e in entries if e != MARKER)
    if not entries:
        return FolderState("empty")
    marker = _read_marker(target)
    if marker is not None:
        listed = set(marker["files"])
        foreign = tuple(e for e in files if e not in listed or (target / e).is_dir())
        return FolderState("foreign" if foreign else "report", marker["fingerprint"], files, foreign)
    foreign = tuple(e for e in files if (target / e).is_dir() or not report_file(e))
    if foreign:
        return FolderState("foreign", None, files, foreign)
    fp = legacy_fingerprint(target) if legacy_fingerprint is not None else None
    return FolderState("report", fp, files)


def _read_marker(target: Path) -> dict | None:
    try:
        d = json.loads((target / MARKER).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(d, dict) or not isinstance(d.get("files"), list) or not isinstance(d.get("fingerprint"), str):
        return None
    return d


def _refuse_foreign(target: Path, state: FolderState) -> None:
    names = ", ".join(repr(n) for n in state.foreign[:5]) + (" and more" if len(state.foreign) > 5 else "")
    raise ReportFolderError(
        f"the output folder {str(target)!r} holds entries that are not part of a ptcheck report ({names}); "
        "the report folder is replaced as a whole, so choose another folder or move them away"
    )


# ---------------------------------------------------------------------- signals
@contextlib.contextmanager
def _signals_held() -> Iterator[Callable[[], bool]]:
    """Hold SIGINT and SIGTERM back; yield a "did one arrive?" check.

    While the block runs, their handlers are replaced by one that only notes
    the signal (main thread only: elsewhere nothing is held).  When the block
    ends the handlers are restored and each noted signal is raised again, so
    its own handler runs then (KeyboardInterrupt for SIGINT, termination for a
    default SIGTERM, ...).  Ignored signals stay ignored.
    """
    if threading.current_thread() is not threading.main_thread():
        yield lambda: False
        return
    caught: list[int] = []

    def note(signum: int, frame: object) -> None:
        caught.append(signum)

    previous = {}
    for sig in (signal.SIGINT, signal.SIGTERM):
        handler = signal.getsignal(sig)
        if handler is None or handler is signal.SIG_IGN:
            continue  # not handled from Python, or ignored: leave it as it is
        previous[sig] = handler
        signal.signal(sig, note)
    try:
        yield lambda: bool(caught)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        for sig in dict.fromkeys(caught):
            signal.raise_signal(sig)


class _Stopped(Exception):
    """A held signal arrived while the new folder was being written."""


# ---------------------------------------------------------------------- lock
@contextlib.contextmanager
def _locked(target: Path) -> Iterator[None]:
    """Exclusive, non-blocking lock of ``target`` (a sibling lock file, removed afterwards)."""
    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX: no lock
        yield
        return
    lock = target.parent / f".{target.name}.{_LOCK}"
    while True:
        fd = os.open(lock, os.O_RDWR | os.O_CREAT, 0o666)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            os.close(fd)
            if exc.errno in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
                raise ReportBusyError(
                    f"another ptcheck process is writing a report into {str(target)!r} right now; "
                    "nothing was written (try again when it is done)"
                ) from None
            raise
        try:
            same = os.path.samestat(os.fstat(fd), os.stat(lock))
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)  # the file was removed by the previous holder in between: lock the new one
    try:
        yield
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(lock)
        os.close(fd)


# ---------------------------------------------------------------------- swap
def _exchange(a: Path, b: Path) -> bool:
    """Swap two folders atomically (Linux renameat2); False when not available here."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        fn = libc.renameat2
    except (OSError, AttributeError):
        return False
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    fn.restype = ctypes.c_int
    at_fdcwd, rename_exchange = -100, 2
    if fn(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP, errno.EOPNOTSUPP):
        return False  # kernel or file system without exchange
    raise OSError(err, os.strerror(err), str(b))


def _swap_in(new: Path, target: Path) -> Path | None:
    """Put ``new`` in place of ``target``; return where the previous folder now is (or None)."""
    if not target.exists():
        os.rename(new, target)
        return None
    if _exchange(new, target):
        return new  # the previous report is now at the staging name
    old = _sibling(target, _OLD)
    os.rename(target, old)
    try:
        os.rename(new, target)
    except BaseException:
        os.rename(old, target)  # put the previous report back
        raise
    return old


def _sibling(target: Path, tag: str) -> Path:
    return target.parent / f".{target.name}.{tag}-{secrets.token_hex(4)}"


def _recover(target: Path) -> None:
    """Tidy after a writer that was killed outright: restore a previous report left aside, drop staging folders."""
    prefix = f".{target.name}."
    leftovers = [e for e in os.scandir(target.parent) if e.name.startswith(prefix) and e.is_dir(follow_symlinks=False)]
    olds = [Path(e.path) for e in leftovers if e.name.startswith(prefix + _OLD + "-")]
    for e in leftovers:
        if e.name.startswith(prefix + _NEW + "-"):
            shutil.rmtree(e.path, ignore_errors=True)
    if olds and not target.exists():
        os.rename(olds.pop(), target)
    for p in olds:
        shutil.rmtree(p, ignore_errors=True)


def _fsync_dir(path: Path) -> None:
    with contextlib.suppress(OSError, AttributeError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _same_bytes(target: Path, contents: Mapping[str, bytes]) -> bool:
    try:
        names = {e.name for e in os.scandir(target)}
        if names != set(contents):
            return False
        return all((target / n).read_bytes() == data for n, data in contents.items())
    except OSError:
        return False


# ---------------------------------------------------------------------- writing
def write_folder(
    target: str | os.PathLike,
    files: Mapping[str, str | bytes],
    *,
    fingerprint: str,
    force: bool = False,
    report_file: Callable[[str], bool] = lambda name: False,
    legacy_fingerprint: Callable[[Path], str | None] | None = None,
) -> list[Path]:
    """Write a report folder as a whole (see the module docstring).

    Parameters
    ----------
    target : path-like
        The report folder; its parent folders are created if missing.
    files : mapping of str -> str or bytes
        File name (no folders) -> content; text is written as UTF-8.
    fingerprint : str
        Identity of the report (settings and results): an existing report with
        the same fingerprint is replaced without ``force``.
    force : bool
        Replace a report with a different fingerprint.
    report_file, legacy_fingerprint : callable, optional
        Recognise a report folder of an earlier version (no marker file).

    Returns
    -------
    list of Path
        The report's files, in the order of ``files``.

    Raises
    ------
    ReportExistsError
        A different report is there and ``force`` is False.
    ReportBusyError
        Another process is writing into the same folder.
    ReportFolderError
        The folder is unusable or holds entries that are not part of a report.
    """
    target = check_target(target)
    for name in files:
        if not name or name in (".", "..", MARKER) or "/" in name or os.sep in name:
            raise ValueError(f"report file names must be plain file names; got {name!r}")
    contents = {name: (c.encode("utf-8") if isinstance(c, str) else bytes(c)) for name, c in files.items()}
    marker = {"ptcheck_report": 1, "fingerprint": fingerprint, "files": sorted(contents)}
    contents[MARKER] = (json.dumps(marker, indent=1) + "\n").encode("utf-8")
    paths = [target / name for name in files]

    target.parent.mkdir(parents=True, exist_ok=True)
    stopped = False
    with _signals_held() as signal_arrived, _locked(target):
        _recover(target)
        state = folder_state(target, report_file=report_file, legacy_fingerprint=legacy_fingerprint)
        if state.kind == "foreign":
            _refuse_foreign(target, state)
        if state.kind == "report":
            if _same_bytes(target, contents):
                return paths  # the same report, byte for byte: leave it (and its times) alone
            if state.fingerprint != fingerprint and not force:
                shown = ", ".join(repr(n) for n in state.files[:3]) + (" ..." if len(state.files) > 3 else "")
                raise ReportExistsError(
                    f"a different report already exists in {str(target)!r} ({shown}); pass --force (force=True) "
                    "to replace it, or choose another output folder"
                )
        new = _sibling(target, _NEW)
        os.mkdir(new)
        try:
            for name, data in contents.items():
                if signal_arrived():
                    raise _Stopped
                with open(new / name, "xb") as fh:
                    fh.write(data)
                    fh.flush()
                    os.fsync(fh.fileno())
            _fsync_dir(new)
            if signal_arrived():
                raise _Stopped
            previous = _swap_in(new, target)
        except _Stopped:
            shutil.rmtree(new, ignore_errors=True)
            stopped = True
        except BaseException:
            shutil.rmtree(new, ignore_errors=True)
            raise
        else:
            _fsync_dir(target.parent)
            if previous is not None:
                shutil.rmtree(previous, ignore_errors=True)
    # the held signal has been delivered here; its handler normally raised already
    if stopped:
        raise KeyboardInterrupt(f"interrupted while writing the report; {str(target)!r} was left as it was")
    return paths
