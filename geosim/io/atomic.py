"""Atomic, non-clobbering file output.

Every file geosim writes goes through :func:`atomic_output`: the content is
written to a temporary file in the target's own folder (so the final rename
stays on one file system) and moved into place with :func:`os.replace` only
when writing succeeded.  A failed or interrupted write leaves no half-written
file behind, and an existing output is never replaced unless the caller asks.

A task running for someone else (a realization on a Dask worker) may set a condition
for its thread with :func:`writes_wanted_while`: once the condition fails (the run's
client is gone), :func:`atomic_output` moves nothing into place and raises
:class:`~geosim.errors.RunAbandoned`, so a run that has ended gets no further files.
"""
from __future__ import annotations

import contextlib
import os
import secrets
import threading
from collections.abc import Callable, Iterator
from pathlib import Path

from ..errors import InputError, RunAbandoned

__all__ = ["atomic_output", "check_writable", "writes_wanted_while", "check_wanted"]

# this thread's condition for writing (a task's "is my run still alive?"), if any
_WANTED = threading.local()


@contextlib.contextmanager
def writes_wanted_while(wanted: Callable[[], bool]) -> Iterator[None]:
    """Let files written in this thread reach their place only while ``wanted()`` is true.

    Within the block, :func:`atomic_output` calls ``wanted()`` before it starts and again
    just before it moves a finished file into place; when it returns False the
    temporary file is removed and :class:`~geosim.errors.RunAbandoned` is raised.  The
    condition belongs to the calling thread only (a Dask worker runs tasks of several
    clients in its threads), and blocks nest.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import geosim.io.atomic
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> with geosim.io.atomic.writes_wanted_while(lambda: False):
    ...     with geosim.io.atomic.atomic_output(folder / "late.txt") as tmp:
    ...         _ = tmp.write_text("nobody waits for this")
    Traceback (most recent call last):
    ...
    geosim.errors.RunAbandoned: the run that asked for ... has ended; nothing was written
    >>> list(folder.iterdir())
    []
    """
    previous = getattr(_WANTED, "check", None)
    _WANTED.check = wanted
    try:
        yield
    finally:
        _WANTED.check = previous


def check_wanted(what: str | os.PathLike) -> None:
    """Raise :class:`~geosim.errors.RunAbandoned` if this thread's condition for writing
    (:func:`writes_wanted_while`) no longer holds; ``what`` names the output for the message.
    Writers that do not go through :func:`atomic_output` call it before each write."""
    wanted = getattr(_WANTED, "check", None)
    if wanted is not None and not wanted():
        raise RunAbandoned(f"the run that asked for {os.fspath(what)} has ended; nothing was written")


def check_writable(path: str | os.PathLike, overwrite: bool = False) -> Path:
    """Raise :class:`~geosim.errors.InputError` if ``path`` cannot be written.

    The folder must exist, and an existing file is refused unless ``overwrite``.
    Returns ``path`` as a :class:`pathlib.Path`.
    """
    path = Path(path)
    if path.is_dir():
        raise InputError("the output path is a folder, not a file", file=str(path),
                         fix="give a file name inside the folder")
    if path.exists() and not overwrite:
        raise InputError("the output file already exists and would be overwritten", file=str(path),
                         fix="choose another name, remove the file, or pass overwrite=True / --overwrite")
    parent = path.parent
    if not parent.is_dir():
        raise InputError(f"the output folder {str(parent)!r} does not exist", file=str(path),
                         fix="create the folder first or choose another output path")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputError("cannot write into the output folder (permission denied)", file=str(parent),
                         fix="choose an output folder you can write to, or change its permissions")
    return path


@contextlib.contextmanager
def atomic_output(path: str | os.PathLike, overwrite: bool = False) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; move it into place on success.

    Parameters
    ----------
    path : str or path-like
        The final output file.  Its folder must exist.
    overwrite : bool
        Replace an existing ``path``.  When False (the default) an existing file
        raises :class:`~geosim.errors.InputError` before anything is written, and
        again at the end if the file appeared meanwhile.

    Yields
    ------
    pathlib.Path
        A path in the same folder that does not exist yet and keeps ``path``'s
        suffix (so writers that infer a format from the extension work).  Write
        the whole file there.  On normal exit it is renamed to ``path`` with
        :func:`os.replace`; on any exception it is removed and the exception
        propagates, except that a full disk becomes a
        :class:`~geosim.errors.ResourceError` and a write the file system refuses an
        :class:`~geosim.errors.InputError`, both naming the folder
        (:func:`geosim.resources.explain_os_error`).  Under :func:`writes_wanted_while`, a
        condition that fails before the rename raises
        :class:`~geosim.errors.RunAbandoned` and leaves no file.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import geosim.io.atomic
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> with geosim.io.atomic.atomic_output(folder / "notes.txt") as tmp:
    ...     _ = tmp.write_text("hello")
    >>> (folder / "notes.txt").read_text()
    'hello'
    >>> sorted(p.name for p in folder.iterdir())
    ['notes.txt']
    """
    check_wanted(path)
    path = check_writable(path, overwrite)
    # hidden, unique and with the real suffix last: ".name.tif.3f9a1c2b.partial.tif"
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(4)}.partial{path.suffix}")
    try:
        yield tmp
        if not tmp.exists():
            raise FileNotFoundError(f"nothing was written to the temporary file {tmp} for {path}")
        check_writable(path, overwrite)
        check_wanted(path)
        os.replace(tmp, path)
    except BaseException as exc:
        error = None
        if isinstance(exc, Exception):  # judged before the partial file frees its space
            from ..resources import explain_os_error
            error = explain_os_error(exc, path)
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        if error is not None:
            raise error from exc
        raise
