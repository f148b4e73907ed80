"""Model files: a covariance model as a small, human-readable TOML document.

geosim's own layout, one table per structure, in the order of the model::

    # geosim covariance model
    #   nugget sill=0.1
    # + spherical sill=0.9 ranges=(120, 60, 120) azimuth=30 dip=0 rake=0
    format = "geosim-model 1"
    caution = "CAUTION: ..."

    [[structure]]
    kind = "nugget"
    sill = 0.1

    [[structure]]
    kind = "spherical"
    sill = 0.9
    ranges = [120.0, 60.0, 120.0]   # major, minor, vertical (metres)
    azimuth = 30.0                  # degrees; see geosim.variogram.anisotropy
    dip = 0.0
    rake = 0.0

Numbers are written with Python's shortest exact ``repr``, so a model read
back equals the model written.  The shape parameter of a structure that has one
is a key named after it (``smoothness = 1.5`` for Matern).  The comment lines
are the model's text form, for a reader; the loader ignores them.
"""
from __future__ import annotations

import json
import math
import os
import re
import tomllib
from pathlib import Path

from ..cautions import CAUTION
from ..errors import InputError
from .model import Model

FORMAT = "geosim-model 1"
_ANGLES = ("azimuth", "dip", "rake")


def dumps_model(model: Model) -> str:
    """The model file text of ``model``.

    Examples
    --------
    >>> import geosim
    >>> from geosim.variogram import Nugget, Spherical, dumps_model, loads_model
    >>> m = Nugget(0.1) + Spherical(0.9, 120.0)
    >>> loads_model(dumps_model(m)) == m
    True
    """
    lines = ["# geosim covariance model"]
    lines += ["# " + line for line in str(model).splitlines()]
    lines += [f"format = {json.dumps(FORMAT)}", f"caution = {json.dumps(CAUTION)}"]
    for d in model.to_dicts():
        lines += ["", "[[structure]]", f"kind = {json.dumps(d.pop('kind'))}", f"sill = {_num(d.pop('sill'))}"]
        if "ranges" in d:
            lines.append("ranges = [" + ", ".join(_num(r) for r in d.pop("ranges"))
                         + "]   # major, minor, vertical (metres)")
            for a in _ANGLES:
                lines.append(f"{a} = {_num(d.pop(a))}")
        for k, v in d.items():
            lines.append(f"{k} = {_num(v)}")
    return "\n".join(lines) + "\n"


def save_model(model: Model, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write ``model`` to ``path`` atomically; an existing file is kept unless ``overwrite``.

    Returns the path written.
    """
    from ..io.atomic import atomic_output

    text = dumps_model(model)
    with atomic_output(path, overwrite=overwrite) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


def load_model(path: str | os.PathLike, *, registry: dict | None = None) -> Model:
    """Read a model file written by :func:`save_model` (or by hand in the same layout).

    Parameters
    ----------
    registry : dict, optional
        ``kind -> Structure class``; default every installed structure
        (plugins included, see :mod:`geosim.plugins`).

    Raises
    ------
    InputError
        Naming the file, the line and the key at fault, and what would fix it.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("model file not found", file=str(path),
                         fix="check the path, or write one with geosim.variogram.save_model") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"not a text file ({exc.reason})", file=str(path),
                         fix="give a geosim model file (UTF-8 TOML)") from None
    return loads_model(text, source=str(path), registry=registry)


def loads_model(text: str, *, source: str | None = None, registry: dict | None = None) -> Model:
    """Parse model file text; ``source`` names it in error messages."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise InputError(f"not valid TOML: {exc}", file=source, row=int(m.group(1)) if m else None,
                         fix="correct the syntax (key = value, [[structure]] headers)") from None
    keys = _key_lines(text)
    fmt = doc.get("format")
    if fmt != FORMAT:
        raise InputError(f"format is {fmt!r}, expected {FORMAT!r}", file=source, row=keys.get((None, "format")),
                         field="format", fix=f'start the file with format = "{FORMAT}"')
    unknown = sorted(set(doc) - {"format", "caution", "structure"})
    if unknown:
        raise InputError(f"unknown top-level key {unknown[0]!r}", file=source,
                         row=keys.get((None, unknown[0])), field=unknown[0],
                         fix="remove it; structures go in [[structure]] tables")
    items = doc.get("structure")
    if not isinstance(items, list) or not items:
        raise InputError("no [[structure]] table", file=source, field="structure",
                         fix="add at least one [[structure]] table with kind and sill")
    if registry is None:
        from ..plugins import structures as installed_structures
        registry = installed_structures()
    dicts = []
    for i, item in enumerate(items):
        def fail(msg, key, fix, i=i):
            raise InputError(f"structure {i + 1}: {msg}", file=source,
                             row=keys.get((i, key), keys.get((i, None))), field=key, fix=fix)

        kind = item.get("kind")
        if kind not in registry:
            fail(f"unknown kind {kind!r}", "kind", "use one of " + ", ".join(sorted(registry)))
        cls = registry[kind]
        allowed = {"kind", "sill"} | ({"ranges", *_ANGLES} if kind != "nugget" else set())
        if cls.param_name:
            allowed.add(cls.param_name)
        for key in item:
            if key not in allowed:
                fail(f"unexpected key {key!r} for kind {kind!r}", key, "remove it; allowed: "
                     + ", ".join(sorted(allowed)))
        sill = item.get("sill")
        if not _is_number(sill) or sill < 0:
            fail(f"sill must be a number >= 0, got {sill!r}", "sill", "write e.g. sill = 0.5")
        if kind != "nugget":
            ranges = item.get("ranges")
            if not (isinstance(ranges, list) and 1 <= len(ranges) <= 3
                    and all(_is_number(r) and r > 0 for r in ranges)):
                fail(f"ranges must be a list of 1 to 3 positive numbers, got {ranges!r}", "ranges",
                     "write e.g. ranges = [120.0, 60.0, 20.0] (major, minor, vertical in metres)")
            for a in _ANGLES:
                if a in item and not _is_number(item[a]):
                    fail(f"{a} must be a number, got {item[a]!r}", a,
                         f"write the angle in degrees, e.g. {a} = 0.0")
        if cls.param_name and cls.param_name in item and not _is_number(item[cls.param_name]):
            fail(f"{cls.param_name} must be a number, got {item[cls.param_name]!r}", cls.param_name,
                 f"write e.g. {cls.param_name} = 1.5")
        d = {k: v for k, v in item.items()}
        try:
            Model.from_dicts([d], registry=registry)
        except (ValueError, TypeError) as exc:
            fail(str(exc), cls.param_name if cls.param_name in item else None,
                 "correct the structure's values")
        dicts.append(d)
    return Model.from_dicts(dicts, registry=registry)


def _num(x) -> str:
    x = float(x)
    if not math.isfinite(x):
        raise ValueError(f"cannot write the non-finite number {x!r} to a model file")
    return repr(x)


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _key_lines(text: str) -> dict:
    """(structure index or None, key) -> 1-based line; (index, None) -> its header line."""
    out = {}
    block = None
    count = -1
    for n, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if re.match(r"\[\[\s*structure\s*\]\]", s):
            count += 1
            block = count
            out[(block, None)] = n
            continue
        m = re.match(r"([A-Za-z0-9_-]+)\s*=", s)
        if m:
            out.setdefault((block, m.group(1)), n)
    return out
