"""Geological units (estimation domains): which unit every sample and every grid node belongs to.

A run may hold several units (an oxidised cap over fresh rock, a gravel channel in
silt), each modelled with its own statistics.  This module is the data layer of that
model: it knows the run's units (:class:`UnitTable`) and turns the sources users give
into integer codes, and nothing of how units are modelled (that is
:mod:`geosim.units_run`).

Codes
-----
Every unit has an integer code (0 or more) and a name (a letter first, then letters,
digits, ``_`` or ``-``).  Wherever a code is read (a table cell, a polygon attribute,
a raster) it may be written as the integer or as the name; :meth:`UnitTable.code_of`
reads one.  Arrays of codes are ``int32``; :data:`NODATA` (-1) marks a node or sample
of no unit (outside the domain, or not covered by the source).

Sources
-------
Node codes (:func:`node_units`, ``source`` a mapping with one of these keys):

==============  ==========================================================  =====
``raster``      a raster of codes (first band, nearest cell; 3-D grids get   2-D
                the same codes on every level)
``polygons``    a polygon layer with a code attribute (``attribute`` key)    2-D
``surfaces``    a stack of surfaces: the top (or base) of each unit, ordered 3-D
``cube``        a 3-D raster or NetCDF of codes on the grid                  3-D
==============  ==========================================================  =====

Sample codes (:func:`sample_units`, ``source`` a mapping with one key):

==============  ==========================================================
``column``      a column of the point table (the file the samples came from)
``intervals``   logged units of drillholes (hole, from, to, code); the
                composites carry them as the attribute ``"unit"``, since
                compositing restarts at each change of unit
==============  ==========================================================

Sources are looked up in :data:`NODE_SOURCES` and :data:`SAMPLE_SOURCES` (key ->
reader), so a new source is one function added there.

Examples
--------
>>> import geosim.units
>>> table = geosim.units.UnitTable.from_mapping({"oxide": {"code": 1}, "fresh": {"code": 2},
...                                             "cover": {"code": 9, "modelled": False}})
>>> table.code_of("fresh"), table.code_of("9"), table.modelled_codes
(2, 9, (1, 2))
"""
from __future__ import annotations

import os
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import InputError

__all__ = ["NODATA", "Unit", "UnitTable", "node_units", "sample_units", "NODE_SOURCES", "SAMPLE_SOURCES",
           "unit_counts"]

NODATA = -1
"""The code of a node or sample that belongs to no unit."""

_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_-]*$")
_INTEGER = re.compile(r"^[+]?\d+(\.0*)?$")


@dataclass(frozen=True)
class Unit:
    """One geological unit of a run.

    Parameters
    ----------
    code : int
        The integer code (0 or more) in tables, attributes and rasters.
    name : str
        Its name (a letter first, then letters, digits, ``_`` or ``-``); the name
        of the spec's ``[unit.<name>]`` table.
    modelled : bool
        False for units that stay nodata (waste, cover, bedrock below an aquifer).
    description : str
        Free text for reports.
    """

    code: int
    name: str
    modelled: bool = True
    description: str = ""


@dataclass(frozen=True)
class UnitTable:
    """The units of a run, in the order the spec lists them (code <-> name).

    Build with :meth:`from_mapping` (the spec's ``[unit.<name>]`` tables) or from a
    sequence of :class:`Unit`.  Codes and names are unique.
    """

    units: tuple

    def __post_init__(self):
        units = tuple(self.units)
        object.__setattr__(self, "units", units)
        codes = [u.code for u in units]
        names = [u.name for u in units]
        for u in units:
            if not isinstance(u.code, (int, np.integer)) or isinstance(u.code, bool) or u.code < 0:
                raise ValueError(f"unit {u.name!r}: code must be an integer of 0 or more, found {u.code!r}")
            if not _NAME.match(u.name):
                raise ValueError(f"unit name {u.name!r} must start with a letter and hold only letters, digits, "
                                 "'_' or '-'")
        for what, items in (("code", codes), ("name", names)):
            repeated = sorted({str(v) for v in items if items.count(v) > 1})
            if repeated:
                raise ValueError(f"unit {what}s must be unique: {', '.join(repeated)} given twice")
        if not units:
            raise ValueError("a unit table needs at least one unit")

    @classmethod
    def from_mapping(cls, tables: Mapping[str, Mapping]) -> UnitTable:
        """From ``{name: {"code": int, "modelled": bool, "description": str, ...}}`` (other keys ignored)."""
        return cls(tuple(Unit(int(t["code"]), str(name), bool(t.get("modelled", True)), str(t.get("description", "")))
                         for name, t in tables.items()))

    @property
    def codes(self) -> tuple[int, ...]:
        return tuple(u.code for u in self.units)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(u.name for u in self.units)

    @property
    def modelled_codes(self) -> tuple[int, ...]:
        return tuple(u.code for u in self.units if u.modelled)

    def unit(self, code: int) -> Unit:
        """The :class:`Unit` of ``code`` (``KeyError`` for a code not in the table)."""
        for u in self.units:
            if u.code == code:
                return u
        raise KeyError(code)

    def name_of(self, code: int) -> str:
        """The name of ``code``, or ``"nodata"`` for :data:`NODATA`."""
        return "nodata" if code == NODATA else self.unit(code).name

    def label(self, code: int) -> str:
        """``"oxide (1)"``: name and code, for messages and reports."""
        return f"{self.name_of(code)} ({code})"

    def code_of(self, token, *, file: str | None = None, row: int | None = None,
                field: str | None = None) -> int:
        """The code a cell, attribute or spec value names: an integer code or a unit name.

        Raises
        ------
        InputError
            Naming ``file``, ``row`` and ``field``: a token that is neither an integer
            nor a name, or one that names no unit of the table.
        """
        listed = ", ".join(f"{u.name} = {u.code}" for u in self.units)
        if isinstance(token, (int, np.integer)) and not isinstance(token, bool):
            code = int(token)
        elif isinstance(token, (float, np.floating)) and float(token).is_integer():
            code = int(token)
        else:
            text = str(token).strip()
            if _INTEGER.match(text):
                code = int(float(text))
            elif _NAME.match(text):
                if text in self.names:
                    return self.unit(self.codes[self.names.index(text)]).code
                raise InputError(f"unit {text!r} is not one of the run's units ({listed})", file=file, row=row,
                                 field=field, fix=f"add a [unit.{text}] table to the run spec (modelled = false to "
                                                  "leave it nodata), or correct the code")
            else:
                raise InputError(f"unit code {text!r} is neither an integer nor a unit name", file=file, row=row,
                                 field=field, fix="write the unit's integer code or its name (a letter first, "
                                                  "then letters, digits, '_' or '-')")
        if code not in self.codes:
            raise InputError(f"unit code {code} is not one of the run's units ({listed})", file=file, row=row,
                             field=field, fix="add a [unit.<name>] table with this code to the run spec "
                                              "(modelled = false to leave it nodata), or correct the code")
        return code

    def codes_of(self, tokens: Sequence, *, file: str | None = None, rows: Sequence[int] | None = None,
                 field: str | None = None) -> np.ndarray:
        """:meth:`code_of` for each token (rows name the file row of each), as int32."""
        out = np.empty(len(tokens), dtype=np.int32)
        cache: dict = {}
        for i, token in enumerate(tokens):
            key = (type(token), token)
            if key not in cache:
                cache[key] = self.code_of(token, file=file, row=None if rows is None else int(rows[i]), field=field)
            out[i] = cache[key]
        return out


def unit_counts(codes: np.ndarray, table: UnitTable) -> dict[int, int]:
    """``{code: count}`` of every unit of the table in an array of codes (zeros included)."""
    codes = np.asarray(codes)
    return {c: int(np.count_nonzero(codes == c)) for c in table.codes}


# -- node codes -----------------------------------------------------------------------------------

def node_units(grid, source: Mapping, table: UnitTable, *, base: str | os.PathLike | None = None,
               where: str = "units.nodes") -> np.ndarray:
    """The unit code of every node of ``grid``.

    Parameters
    ----------
    grid : geosim.grid.Grid
        The run's grid (its mask: the outer domain and the below-the-collars rule).
    source : mapping
        One of the keys of :data:`NODE_SOURCES` with its settings, e.g.
        ``{"raster": "units.tif"}``.
    table : UnitTable
    base : path, optional
        Folder that relative paths in ``source`` are relative to (the spec's).
    where : str
        The spec key of ``source``, for messages.

    Returns
    -------
    int32 ndarray of ``grid.shape``
        Codes of the table; :data:`NODATA` outside ``grid.mask`` and where the
        source gives no unit.

    Raises
    ------
    InputError
        Naming the file (or spec key): an unreadable source, codes that are not
        integers or names or not in ``table`` (with their count).
    """
    kinds = [k for k in NODE_SOURCES if k in source]
    if len(kinds) != 1:
        raise InputError(f"name exactly one source of node units, found {', '.join(sorted(source)) or 'none'}",
                         field=where, fix=f"give one of {', '.join(NODE_SOURCES)}")
    codes = NODE_SOURCES[kinds[0]](grid, source, table, Path(base) if base is not None else Path.cwd(), where)
    codes = np.asarray(codes, dtype=np.int32)
    if codes.shape != grid.shape:
        raise ValueError(f"node source {kinds[0]!r} gave shape {codes.shape}, the grid is {grid.shape}")
    return np.where(grid.mask, codes, np.int32(NODATA)).astype(np.int32)


def _resolve(base: Path, path) -> str:
    p = Path(os.fspath(path))
    return str(p if p.is_absolute() else base / p)


def _raster_codes(grid, source: Mapping, table: UnitTable, base: Path, where: str) -> np.ndarray:
    """Codes from the first band of a raster (nearest cell, reprojected node centres)."""
    from .domain import sample_raster
    path = _resolve(base, source["raster"])
    values = sample_raster(path, grid)
    codes = np.full(grid.shape, NODATA, dtype=np.int32)
    have = np.isfinite(values) & grid.mask
    if not have.any():
        return codes
    found = values[have]
    bad = found != np.round(found)
    if bad.any():
        raise InputError(f"{int(bad.sum())} node(s) of the domain fall in raster cells that are not whole numbers "
                         f"(e.g. {found[bad][0]:g})", file=path, field=where,
                         fix="give a raster of integer unit codes (nodata where no unit)")
    unique = np.unique(found).astype(np.int64)
    unknown = [int(u) for u in unique if int(u) not in table.codes]
    if unknown:
        n = int(np.isin(found.astype(np.int64), unknown).sum())
        raise InputError(f"code(s) {', '.join(map(str, unknown))} of the raster ({n} node(s) of the domain) are not "
                         f"among the run's units ({', '.join(table.label(c) for c in table.codes)})", file=path,
                         field=where, fix="add a [unit.<name>] table for each code (modelled = false to leave it "
                                          "nodata), or correct the raster")
    codes[have] = found.astype(np.int32)
    return codes


NODE_SOURCES: dict[str, Callable] = {"raster": _raster_codes}
"""Node-code source key -> ``reader(grid, source, table, base, where) -> int32 codes of grid.shape``."""


# -- sample codes ---------------------------------------------------------------------------------

def sample_units(samples, source: Mapping, table: UnitTable, *, where: str = "units.samples") -> np.ndarray:
    """The unit code of every sample.

    Parameters
    ----------
    samples : geosim.points.PointSet
        As read (points carry their file ``row``; composites of logged units the
        attribute ``"unit"``).
    source : mapping
        One of the keys of :data:`SAMPLE_SOURCES`, e.g. ``{"column": "unit"}``.
    table : UnitTable
    where : str
        The spec key of ``source``, for messages.

    Returns
    -------
    int32 ndarray (n,)
        A code of ``table`` for every sample (never :data:`NODATA`).

    Raises
    ------
    InputError
        Naming the file, row and column of an empty cell, a code that is neither an
        integer nor a name, or one that is not in ``table``.
    """
    kinds = [k for k in SAMPLE_SOURCES if k in source]
    if len(kinds) != 1:
        raise InputError(f"name exactly one source of sample units, found {', '.join(sorted(source)) or 'none'}",
                         field=where, fix=f"give one of {', '.join(SAMPLE_SOURCES)}")
    codes = np.asarray(SAMPLE_SOURCES[kinds[0]](samples, source, table, where), dtype=np.int32)
    if codes.shape != (len(samples),):
        raise ValueError(f"sample source {kinds[0]!r} gave {codes.shape} codes for {len(samples)} samples")
    return codes


def _column_codes(samples, source: Mapping, table: UnitTable, where: str) -> np.ndarray:
    """Codes from a column of the point table the samples were read from (matched by file row)."""
    column = source["column"]
    if "row" not in samples.attributes or not samples.source:
        raise InputError("unit codes from a column need samples read from a point table", field=where,
                         fix="for drillholes give the logged units as an interval table (units.samples = "
                             "{ intervals = ... })")
    path = samples.source[0]
    from .vector import is_frame, is_vector_path, sample_table
    if is_frame(path) or is_vector_path(path):
        table_, _ = sample_table(path, layer=source.get("layer"))
    else:
        from .tables import read_table
        table_ = read_table(path, what="point table")
    text = table_.text(column, role="unit code")
    by_row = dict(zip(table_.lines, text))
    rows = samples.attributes["row"]
    tokens = [by_row[int(r)] for r in rows]
    return table.codes_of(tokens, file=table_.path, rows=rows, field=column)


def _attribute_codes(samples, source: Mapping, table: UnitTable, where: str) -> np.ndarray:
    """Codes the samples carry as the attribute ``"unit"`` (composites of logged units)."""
    if "unit" not in samples.attributes:
        raise InputError("the samples carry no logged units", field=where,
                         fix="read the drillholes with their logged-units interval table")
    return np.asarray(samples.attributes["unit"], dtype=np.int32)


SAMPLE_SOURCES: dict[str, Callable] = {"column": _column_codes, "intervals": _attribute_codes}
"""Sample-code source key -> ``reader(samples, source, table, where) -> int32 codes (n,)``."""
