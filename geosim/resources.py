"""The machine's limits: free disk space, available memory, and what writing errors mean.

Problems of the environment are not bugs and not bad input data: a full disk or
too little memory is a :class:`~geosim.errors.ResourceError`, a folder geosim may
not write is an :class:`~geosim.errors.InputError` naming the folder.  Both carry
the fix.  :func:`explain_os_error` turns the ``OSError`` a writer raised into one of
them; :func:`check_memory` refuses work that cannot fit before it is allocated.
"""
from __future__ import annotations

import errno
import os
import shutil
from pathlib import Path

from .errors import GeosimError, InputError, ResourceError

__all__ = ["available_memory", "free_space", "check_memory", "explain_os_error", "DISK_FULL_MARGIN"]

# a failed write into a folder with less than this free is taken to be a full disk: GDAL
# reports a full disk as a generic write failure without the errno (common practice, no source)
DISK_FULL_MARGIN = 1 << 20

_FULL = {errno.ENOSPC, errno.EDQUOT}
_DENIED = {errno.EACCES, errno.EPERM, errno.EROFS}


def available_memory() -> int | None:
    """Bytes of memory available to new allocations without swapping, or None if unknown.

    Linux's ``MemAvailable`` estimate (``/proc/meminfo``), else the free physical pages.
    """
    try:
        with open("/proc/meminfo", encoding="ascii") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    except (AttributeError, ValueError, OSError):
        return None


def free_space(folder: str | os.PathLike) -> int | None:
    """Free bytes on the file system holding ``folder`` (its nearest existing parent)."""
    path = Path(folder).absolute()
    while not path.exists() and path != path.parent:
        path = path.parent
    try:
        return shutil.disk_usage(path).free
    except OSError:
        return None


def check_memory(needed: int, what: str, *, fix: str, available: int | None = None) -> None:
    """Raise :class:`~geosim.errors.ResourceError` when ``needed`` bytes will not fit.

    ``available`` defaults to :func:`available_memory`; when that is unknown nothing is
    refused.

    Examples
    --------
    >>> import geosim.resources
    >>> geosim.resources.check_memory(10**6, "one realization", fix="larger cells", available=10**9)
    >>> geosim.resources.check_memory(10**12, "one realization", fix="larger cells", available=10**9)
    Traceback (most recent call last):
    ...
    geosim.errors.ResourceError: one realization needs more memory than this machine has available \
(needed about 1.0 TB, 1.0 GB available); fix: larger cells
    """
    available = available_memory() if available is None else available
    if available is not None and needed > available:
        raise ResourceError(f"{what} needs more memory than this machine has available", needed=int(needed),
                            available=int(available), fix=fix)


def _errnos(exc: BaseException):
    seen = set()
    while exc is not None and id(exc) not in seen:
        seen.add(id(exc))
        if isinstance(exc, OSError) and exc.errno is not None:
            yield exc.errno
        exc = exc.__cause__ or exc.__context__


def _write_failure(exc: BaseException) -> bool:
    """An OS error, or one of the errors GDAL raises through rasterio when a write fails."""
    return isinstance(exc, OSError) or type(exc).__module__.startswith("rasterio")


def explain_os_error(exc: BaseException, path: str | os.PathLike, needed: int | None = None) -> GeosimError | None:
    """The geosim error a failed write of ``path`` stands for, or None if it is not the
    environment's fault.

    A full disk (``ENOSPC``, ``EDQUOT``, or an OS or GDAL write failure with under
    :data:`DISK_FULL_MARGIN` left) becomes a :class:`~geosim.errors.ResourceError`
    naming the folder; a refused write (``EACCES``, ``EPERM``, ``EROFS``) an
    :class:`~geosim.errors.InputError` naming the folder.
    """
    folder = Path(path).parent
    codes = set(_errnos(exc))
    free = free_space(folder)
    if codes & _DENIED:
        reason = "the file system is read-only" if errno.EROFS in codes else "permission denied"
        return InputError(f"cannot write into the output folder ({reason})", file=str(folder),
                          fix="choose an output folder you can write to, or change its permissions")
    if codes & _FULL or (_write_failure(exc) and free is not None and free < DISK_FULL_MARGIN):
        return ResourceError(f"the disk is full: cannot write {Path(path).name} into this folder",
                             folder=str(folder), needed=needed, available=free,
                             fix="free space on that disk or choose an output folder on another disk, "
                                 "then rerun the same command (finished realizations are kept)")
    return None

