"""Provenance and the JSON run report.

:func:`provenance` builds the one dictionary of plain-text facts that travels
with every output: as metadata tags of each GeoTIFF and as the head of the JSON
run report written by :func:`write_report`.

Provenance keys (also the GeoTIFF tag names)
--------------------------------------------
``caution``         :data:`geosim.cautions.CAUTION`
``geosim_version``  the installed geosim version
``created_utc``     creation time, UTC, ISO 8601 to the second; the time in the
                    ``SOURCE_DATE_EPOCH`` environment variable when it is set
                    (:func:`output_time`), so a rerun writes byte-identical files
``seed``            the run's seed
``engine``          the simulation engine's name
``variogram_model`` ``str(model)``, the model's text form
``transform``       ``transform.describe()``
``input_sha256``    JSON object ``{input file: SHA-256 hex digest}``
``units``           units of the simulated values (e.g. ``g/t``, ``m/s``)

Keys whose value is not given are left out; extra keys can be added.

Reproducible outputs
--------------------
``SOURCE_DATE_EPOCH`` is the reproducible-builds convention
(https://reproducible-builds.org/specs/source-date-epoch/): an integer count of
seconds since 1970-01-01 UTC that tools use instead of the current time.  With it
set, the same spec and seed give byte-identical rasters.  The JSON run report still
records the real time (``created_utc``) and the pinned one (``source_date_epoch_utc``).
"""
from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import os
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from ..cautions import CAUTION
from .atomic import atomic_output

__all__ = ["file_sha256", "provenance", "write_report", "read_report", "utc_now", "output_time"]

SOURCE_DATE_EPOCH = "SOURCE_DATE_EPOCH"


def file_sha256(path: str | os.PathLike, chunk: int = 1 << 20) -> str:
    """SHA-256 hex digest of a file's bytes, read in chunks (bounded memory).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import geosim.io.report
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "abc.txt"
    >>> _ = p.write_bytes(b"abc")
    >>> geosim.io.report.file_sha256(p)[:16]   # FIPS 180-2, appendix B.1: SHA-256("abc")
    'ba7816bf8f01cfea'
    """
    digest = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(chunk), b""):
            digest.update(block)
    return digest.hexdigest()


def _iso(moment: _dt.datetime) -> str:
    return moment.replace(microsecond=0).isoformat().replace("+00:00", "Z")


def utc_now() -> str:
    """The current UTC time as ISO 8601 to the second, e.g. ``2026-01-31T09:15:00Z``."""
    return _iso(_dt.datetime.now(_dt.timezone.utc))


def output_time() -> str:
    """The time outputs are stamped with: ``SOURCE_DATE_EPOCH`` when set, else now (UTC, ISO 8601).

    Raises
    ------
    InputError
        When ``SOURCE_DATE_EPOCH`` is set but is not a whole number of seconds.

    Examples
    --------
    >>> import os
    >>> import geosim.io.report
    >>> os.environ["SOURCE_DATE_EPOCH"] = "1767225600"
    >>> geosim.io.report.output_time()
    '2026-01-01T00:00:00Z'
    >>> del os.environ["SOURCE_DATE_EPOCH"]
    """
    text = os.environ.get(SOURCE_DATE_EPOCH, "").strip()
    if not text:
        return utc_now()
    try:
        return _iso(_dt.datetime.fromtimestamp(int(text), _dt.timezone.utc))
    except (ValueError, OverflowError, OSError):
        from ..errors import InputError
        raise InputError(f"the environment variable {SOURCE_DATE_EPOCH} is {text!r}, not a count of seconds",
                         field=SOURCE_DATE_EPOCH, fix="set it to whole seconds since 1970-01-01 UTC, e.g. "
                         "$(git log -1 --format=%ct), or unset it") from None


def _version() -> str:
    import geosim
    return geosim.__version__


def provenance(*, seed: int | None = None, engine: str | None = None, model: Any = None,
               transform: Any = None, inputs: Iterable[str | os.PathLike] | Mapping[str, str] = (),
               units: str | None = None, created: str | None = None,
               extra: Mapping[str, Any] | None = None) -> dict[str, str]:
    """The common provenance dictionary, every value a string (ready for GeoTIFF tags).

    Parameters
    ----------
    seed : int, optional
    engine : str, optional
        Engine name, e.g. ``"sequential"``.
    model : geosim.Model or str, optional
        Stored as ``str(model)``.
    transform : object with ``describe()`` or str, optional
    inputs : paths or mapping
        Input files; paths are hashed here, a mapping ``{name: sha256}`` is taken as is.
    units : str, optional
    created : str, optional
        Creation time; defaults to :func:`output_time` (now, or ``SOURCE_DATE_EPOCH``).
    extra : mapping, optional
        More keys; non-string values are stored as JSON.

    Examples
    --------
    >>> import geosim.io.report
    >>> tags = geosim.io.report.provenance(seed=42, engine="sequential", units="g/t")
    >>> tags["seed"], tags["engine"], tags["caution"].startswith("CAUTION")
    ('42', 'sequential', True)
    """
    if isinstance(inputs, Mapping):
        hashes = {str(k): str(v) for k, v in inputs.items()}
    else:
        hashes = {str(p): file_sha256(p) for p in inputs}
    tags = {"caution": CAUTION, "geosim_version": _version(), "created_utc": created or output_time()}
    if seed is not None:
        tags["seed"] = str(int(seed))
    if engine is not None:
        tags["engine"] = str(engine)
    if model is not None:
        tags["variogram_model"] = str(model)
    if transform is not None:
        tags["transform"] = transform if isinstance(transform, str) else str(transform.describe())
    if hashes:
        tags["input_sha256"] = json.dumps(hashes, sort_keys=True)
    if units is not None:
        tags["units"] = str(units)
    for key, value in (extra or {}).items():
        tags[str(key)] = value if isinstance(value, str) else json.dumps(_plain(value))
    return tags


def _plain(obj: Any) -> Any:
    """JSON-ready copy: numpy scalars and arrays to Python, NaN and infinities to None."""
    if isinstance(obj, Mapping):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _plain(obj.tolist())
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if math.isfinite(value) else None
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    return obj


def write_report(path: str | os.PathLike, report: Mapping[str, Any], overwrite: bool = False) -> Path:
    """Write the JSON run report atomically.

    ``report`` is typically ``{**provenance(...), "parameters": {...},
    "validation": {...}, "outputs": {...}}``.  The caution, geosim version and
    real creation time are set, and the caution comes first; with ``SOURCE_DATE_EPOCH``
    set, ``source_date_epoch_utc`` records the time the other outputs carry.  NumPy
    values become plain JSON; NaN and infinities become ``null``.

    Examples
    --------
    >>> import pathlib, tempfile, json
    >>> import geosim.io.report
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "run.json"
    >>> _ = geosim.io.report.write_report(p, {"seed": 7, "validation": {"ks": float("nan")}})
    >>> d = json.loads(p.read_text())
    >>> list(d)[0], d["seed"], d["validation"]["ks"]
    ('caution', 7, None)
    """
    body = {"caution": CAUTION, "geosim_version": _version()}
    body.update(_plain(dict(report)))
    body["caution"] = CAUTION
    body["created_utc"] = utc_now()
    if os.environ.get(SOURCE_DATE_EPOCH, "").strip():
        body["source_date_epoch_utc"] = output_time()
    text = json.dumps(body, indent=2, allow_nan=False) + "\n"
    with atomic_output(path, overwrite) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


def read_report(path: str | os.PathLike) -> dict:
    """Read a JSON run report back."""
    return json.loads(Path(path).read_text(encoding="utf-8"))
