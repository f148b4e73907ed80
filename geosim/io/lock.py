"""One run per output folder: an exclusive lock on the folder while a step writes there.

The lock is an operating-system lock (``flock`` on POSIX, ``msvcrt.locking`` on
Windows) on the hidden file ``.geosim-lock`` in the folder, which exists only while a
run holds it.  The kernel releases the lock when the holding process ends in any way,
SIGKILL included, so a lock file left by a dead process never blocks anyone: the next
run takes it over (and says so).  The file
records who holds the lock (process id, host, start time) for the message a second
run gets.  Within one process the lock is re-entrant, so :func:`geosim.pipeline.run`
and the steps it calls share it.
"""
from __future__ import annotations

import contextlib
import json
import os
import socket
import threading
import logging
from collections.abc import Iterator
from pathlib import Path

from ..errors import InputError

log = logging.getLogger(__name__)

__all__ = ["LOCK_NAME", "folder_lock", "lock_holder"]

LOCK_NAME = ".geosim-lock"

_HELD: dict[Path, list] = {}  # folder -> [file descriptor, depth, whether the lock created the folder]
_GUARD = threading.Lock()

try:
    import fcntl

    def _try_lock(fd: int) -> bool:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            return False
        return True

    def _unlock(fd: int) -> None:
        fcntl.flock(fd, fcntl.LOCK_UN)
except ImportError:  # Windows
    import msvcrt

    def _try_lock(fd: int) -> bool:
        os.lseek(fd, 0, os.SEEK_SET)
        try:
            msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)
        except OSError:
            return False
        return True

    def _unlock(fd: int) -> None:
        os.lseek(fd, 0, os.SEEK_SET)
        msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)


def lock_holder(folder: str | os.PathLike) -> dict | None:
    """What the lock file of ``folder`` says about its holder (``pid``, ``host``,
    ``started_utc``), or None when there is none (free, or released cleanly)."""
    try:
        text = (Path(folder) / LOCK_NAME).read_text(encoding="utf-8")
        return json.loads(text) if text.strip() else None
    except (OSError, ValueError):
        return None


def _describe(holder: dict | None) -> str:
    if not holder:
        return "another geosim run"
    return (f"geosim process {holder.get('pid')} on {holder.get('host')}, started "
            f"{holder.get('started_utc')}")


def _acquire(folder: Path) -> int:
    from .report import utc_now
    path = folder / LOCK_NAME
    while True:
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            from ..resources import explain_os_error
            raise (explain_os_error(exc, path) or exc) from exc
        if not _try_lock(fd):
            os.close(fd)
            raise InputError(f"the output folder is in use by {_describe(lock_holder(folder))}",
                             file=str(folder), fix="wait for that run to finish, or choose another --out folder")
        try:
            same = os.path.samestat(os.fstat(fd), os.stat(path))
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)  # the holder removed the file as it released it: lock the new one
    previous = lock_holder(folder)
    if previous:
        log.warning("took over the output folder %s from %s, which ended without releasing it (killed or "
                    "crashed)", folder, _describe(previous))
    me = json.dumps({"pid": os.getpid(), "host": socket.gethostname(), "started_utc": utc_now()})
    os.ftruncate(fd, 0)
    os.pwrite(fd, me.encode(), 0)
    return fd


def _release(fd: int, created: Path | None, folder: Path) -> None:
    """Remove the lock file and unlock; a folder the lock created and nothing else wrote
    into is removed too.  Both happen while still locked: a run that opened the old file
    meanwhile finds it gone once it holds the lock, and locks a new one."""
    try:
        (folder / LOCK_NAME).unlink(missing_ok=True)
        if created is not None:
            with contextlib.suppress(OSError):
                created.rmdir()  # only if empty
        _unlock(fd)
    finally:
        os.close(fd)


@contextlib.contextmanager
def folder_lock(folder: str | os.PathLike) -> Iterator[Path]:
    """Hold the exclusive lock of output folder ``folder`` (created if missing, and
    removed again if nothing was written into it).

    Raises
    ------
    InputError
        When another process holds the lock (naming it), or the folder cannot be
        created or written.

    Notes
    -----
    A note (a warning of the ``geosim`` logger) says when the lock file names a
    holder that ended without releasing it.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import geosim.io.lock
    >>> folder = pathlib.Path(tempfile.mkdtemp()) / "run"
    >>> with geosim.io.lock.folder_lock(folder):
    ...     with geosim.io.lock.folder_lock(folder):  # re-entrant in one process
    ...         pass
    >>> geosim.io.lock.lock_holder(folder) is None  # released cleanly
    True
    """
    folder = Path(folder)
    created = not folder.exists()
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        from ..resources import explain_os_error
        raise (explain_os_error(exc, folder / LOCK_NAME) or exc) from exc
    key = folder.resolve()
    with _GUARD:
        held = _HELD.get(key)
        if held is None:
            held = _HELD[key] = [_acquire(key), 0, created]
        held[1] += 1
    try:
        yield folder
    finally:
        with _GUARD:
            held[1] -= 1
            if held[1] == 0:
                del _HELD[key]
                _release(held[0], key if held[2] else None, key)
