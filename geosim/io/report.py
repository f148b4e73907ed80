"""Provenance and the JSON run report.

:func:`provenance` builds the one dictionary of plain-text facts that travels
with every output: as metadata tags of each GeoTIFF and as the head of the JSON
run report written by :func:`write_report`.

Provenance keys (also the GeoTIFF tag names)
--------------------------------------------
``caution``         :data:`geosim.cautions.CAUTION`
``geosim_version``  the installed geosim version
``created_utc``     creation time, UTC, ISO 8601 to the second
``seed``            the run's seed
``engine``          the simulation engine's name
``variogram_model`` ``str(model)``, the model's text form
``transform``       ``transform.describe()``
``input_sha256``    JSON object ``{input file: SHA-256 hex digest}``
``units``           units of the simulated values (e.g. ``g/t``, ``m/s``)

Keys whose value is not given are left out; extra keys can be added.
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

__all__ = ["file_sha256", "provenance", "write_report", "read_report", "utc_now"]


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


def utc_now() -> str:
    """The current UTC time as ISO 8601 to the second, e.g. ``2026-01-31T09:15:00Z``."""
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


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
        Creation time; defaults to now (:func:`utc_now`).
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
    tags = {"caution": CAUTION, "geosim_version": _version(), "created_utc": created or utc_now()}
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
    creation time are added when missing, and the caution comes first.  NumPy
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
    body = {"caution": CAUTION, "geosim_version": _version(), "created_utc": utc_now()}
    body.update(_plain(dict(report)))
    body["caution"] = CAUTION
    text = json.dumps(body, indent=2, allow_nan=False) + "\n"
    with atomic_output(path, overwrite) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


def read_report(path: str | os.PathLike) -> dict:
    """Read a JSON run report back."""
    return json.loads(Path(path).read_text(encoding="utf-8"))
