"""Atomic, non-clobbering file output.

Every file geosim writes goes through :func:`atomic_output`: the content is
written to a temporary file in the target's own folder (so the final rename
stays on one file system) and moved into place with :func:`os.replace` only
when writing succeeded.  A failed or interrupted write leaves no half-written
file behind, and an existing output is never replaced unless the caller asks.
"""
from __future__ import annotations

import contextlib
import os
import secrets
from collections.abc import Iterator
from pathlib import Path

from ..errors import InputError

__all__ = ["atomic_output", "check_writable"]


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
        (:func:`geosim.resources.explain_os_error`).

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
    path = check_writable(path, overwrite)
    # hidden, unique and with the real suffix last: ".name.tif.3f9a1c2b.partial.tif"
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(4)}.partial{path.suffix}")
    try:
        yield tmp
        if not tmp.exists():
            raise FileNotFoundError(f"nothing was written to the temporary file {tmp} for {path}")
        check_writable(path, overwrite)
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
