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
from .logged_units import UnitIntervals, composite_by_unit, read_unit_intervals

__all__ = ["NODATA", "Unit", "UnitTable", "node_units", "sample_units", "NODE_SOURCES", "SAMPLE_SOURCES",
           "unit_counts", "UnitIntervals", "read_unit_intervals", "composite_by_unit"]

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
    _check_keys(source, ("raster",), where)
    path = _resolve(base, source["raster"])
    return _checked_codes(sample_raster(path, grid), grid, table, path, where, "raster")


def _checked_codes(values: np.ndarray, grid, table: UnitTable, path: str, where: str, what: str) -> np.ndarray:
    """Float codes read at the nodes (NaN: no unit) as int32, refusing fractions and codes not in the table."""
    codes = np.full(grid.shape, NODATA, dtype=np.int32)
    have = np.isfinite(values) & grid.mask
    if not have.any():
        return codes
    found = values[have]
    bad = found != np.round(found)
    if bad.any():
        raise InputError(f"{int(bad.sum())} node(s) of the domain fall in {what} cells that are not whole numbers "
                         f"(e.g. {found[bad][0]:g})", file=path, field=where,
                         fix="give integer unit codes (nodata where no unit)")
    unique = np.unique(found).astype(np.int64)
    unknown = [int(u) for u in unique if int(u) not in table.codes]
    if unknown:
        n = int(np.isin(found.astype(np.int64), unknown).sum())
        raise InputError(f"code(s) {', '.join(map(str, unknown))} of the {what} ({n} node(s) of the domain) are "
                         f"not among the run's units ({', '.join(table.label(c) for c in table.codes)})", file=path,
                         field=where, fix="add a [unit.<name>] table for each code (modelled = false to leave it "
                                          "nodata), or correct the file")
    codes[have] = found.astype(np.int32)
    return codes


def _check_keys(source: Mapping, allowed: Sequence[str], where: str) -> None:
    from .tables import suggest
    for key in source:
        if key not in allowed:
            hint = suggest(key, list(allowed))
            raise InputError(f"{key!r} is not a setting of this source", field=f"{where}.{key}",
                             fix=(hint + " " if hint else "") + f"its settings are {', '.join(allowed)}")


def _text_setting(source: Mapping, key: str, where: str, default: str | None = None) -> str:
    value = source.get(key, default)
    if not isinstance(value, str) or not value.strip():
        raise InputError(f"expected text, found {value!r}", field=f"{where}.{key}",
                         fix=f'write {key} = "..." (a name in quotes)')
    return value


def _polygon_codes(grid, source: Mapping, table: UnitTable, base: Path, where: str) -> np.ndarray:
    """Codes from polygon features with a code attribute, by the node-centre rule.

    A node takes the code of the polygon its centre falls in (the rule of
    :meth:`geosim.grid.Grid.clip_to_polygon`); nodes in no polygon get
    :data:`NODATA`.  Polygons of different codes must not overlap (touching is
    fine); polygons of one code may.  A 3-D grid gets the same codes on every level.
    """
    import shapely
    from rasterio.features import rasterize

    from .domain import read_polygon_features
    _check_keys(source, ("polygons", "attribute", "layer"), where)
    attribute = _text_setting(source, "attribute", where, "code")
    layer = source.get("layer")
    path = _resolve(base, source["polygons"])
    label, features = read_polygon_features(path, grid.crs, attribute=attribute, layer=layer)
    coded = []
    for name, value, geom in features:
        row = int(name.split()[-1])
        empty = value is None or (isinstance(value, float) and np.isnan(value)) or str(value).strip() == ""
        if empty:
            raise InputError(f"{name} has no unit code", file=label, row=row, field=attribute,
                             fix="give every polygon its unit's code or name, or remove the polygon")
        coded.append((name, table.code_of(value, file=label, row=row, field=attribute), geom))
    tree = shapely.STRtree([g for _, _, g in coded])
    left, right = tree.query([g for _, _, g in coded], predicate="intersects")
    for i, j in zip(left.tolist(), right.tolist()):
        if i >= j or coded[i][1] == coded[j][1]:
            continue
        common = coded[i][2].intersection(coded[j][2])
        if common.area > 1e-9 * min(coded[i][2].area, coded[j][2].area):
            x, y = common.representative_point().coords[0]
            raise InputError(f"{coded[i][0]} ({table.label(coded[i][1])}) and {coded[j][0]} "
                             f"({table.label(coded[j][1])}) overlap over {common.area:.6g} square metres "
                             f"(e.g. at x = {x:.10g}, y = {y:.10g})", file=label, row=int(coded[j][0].split()[-1]),
                             field=attribute,
                             fix="redraw the contact so the polygons only touch, or give them the same code")
    codes2d = rasterize([(g, c) for _, c, g in coded], out_shape=(grid.ny, grid.nx), transform=grid.transform,
                        fill=NODATA, all_touched=False, dtype="int32")
    return np.broadcast_to(codes2d, grid.shape).copy() if grid.ndim == 3 else codes2d


def _surface_codes(grid, source: Mapping, table: UnitTable, base: Path, where: str) -> np.ndarray:
    """Codes of a 3-D grid from a stack of surfaces: the layer-cake model.

    ``surfaces`` lists rasters of elevation (m, the grid's vertical datum) from the
    highest down and ``units`` the units from the highest down.  With
    ``surface = "top"`` (the default) surface ``i`` is the top of unit ``i``: the
    lowest unit reaches down to the bottom of the grid, unless one more surface is
    listed, the base of the lowest unit.  With ``surface = "base"`` surface ``i``
    is the base of unit ``i``: the highest unit reaches up to the top of the grid
    (the domain and the below-the-collars rule clip it), unless one more surface
    is listed first, the top of the highest unit.  A node belongs to the unit
    whose base lies below its centre and whose top lies at or above it (a centre
    exactly on a surface is in the unit below it); nodes above the top of the
    highest unit or below the base of the lowest get :data:`NODATA`, and so does
    every node of a column where a surface has no value.  Surfaces may meet
    (a unit pinches out) but not cross.
    """
    from .domain import sample_raster
    from .grid import Grid
    _check_keys(source, ("surfaces", "units", "surface"), where)
    if grid.ndim != 3:
        raise InputError("surfaces give the units of a 3-D grid; this grid is 2-D", field=f"{where}.surfaces",
                         fix="give the units as polygons or a raster of codes, or make the grid 3-D")
    files, names = source.get("surfaces"), source.get("units")
    kind = _text_setting(source, "surface", where, "top")
    if kind not in ("top", "base"):
        raise InputError(f"surface must be \"top\" or \"base\", found {kind!r}", field=f"{where}.surface",
                         fix='say whether each raster is the top of its unit ("top") or its base ("base")')
    if not isinstance(files, list) or not files or not all(isinstance(f, str) for f in files):
        raise InputError(f"expected a list of raster files, found {files!r}", field=f"{where}.surfaces",
                         fix='list the surfaces from the highest down, e.g. surfaces = ["top_sand.tif", '
                             '"top_clay.tif"]')
    if not isinstance(names, list) or len(names) not in (len(files), len(files) - 1) or not names:
        raise InputError(f"expected a list of {len(files)} unit(s) (or {len(files) - 1}, with one extra "
                         f"bounding surface), found {names!r}", field=f"{where}.units",
                         fix="list the unit of each surface from the highest down, by name or code")
    codes_of = [table.code_of(n, field=f"{where}.units") for n in names]
    paths = [_resolve(base, f) for f in files]
    level = Grid(grid.xmin, grid.ymin, grid.cell[:2], grid.shape[1:], grid.crs)
    stack = np.stack([sample_raster(p, level) for p in paths])  # (surfaces, ny, nx), from the highest down
    active = grid.mask.any(axis=0)
    columns = np.meshgrid(grid.axes()[2], grid.axes()[1])
    for k in range(len(paths) - 1):
        upper, lower = stack[k], stack[k + 1]
        crossed = active & (upper < lower)
        if crossed.any():
            n_nodes = int(grid.mask[:, crossed].sum())
            where_xy = "; ".join(f"({columns[0][r, c]:.10g}, {columns[1][r, c]:.10g})"
                                 for r, c in np.argwhere(crossed)[:3])
            raise InputError(f"the surfaces cross: {files[k]} lies below {files[k + 1]}, the next one down, at "
                             f"{int(crossed.sum())} node column(s) of the domain ({n_nodes} node(s); by up to "
                             f"{float(np.max((lower - upper)[crossed])):.6g} m), e.g. at (x, y) = {where_xy}",
                             file=paths[k], field=f"{where}.surfaces",
                             fix="list the surfaces from the highest down and check their elevations; where a "
                                 "unit is absent its top and base are equal")
    n = len(names)
    inf = np.full(stack.shape[1:], np.inf)
    if kind == "top":
        tops = list(stack[:n])
        bases = list(stack[1:n + 1]) + ([-inf] if len(paths) == n else [])
    else:
        bases = list(stack[-n:])
        tops = ([inf] if len(paths) == n else []) + list(stack[:len(paths) - 1 if len(paths) == n else n])
    known = np.isfinite(stack).all(axis=0)
    z = grid.axes()[0][:, None, None]
    codes = np.full(grid.shape, NODATA, dtype=np.int32)
    for code, top, bottom in zip(codes_of, tops, bases):
        codes[(z > bottom) & (z <= top) & known] = code
    return codes


def _cube_codes(grid, source: Mapping, table: UnitTable, base: Path, where: str) -> np.ndarray:
    """Codes of a 3-D grid from a NetCDF cube of codes laid out as geosim writes them (:mod:`geosim.io.cube`).

    ``variable`` (default ``"unit"``) has dimensions ``(z, y, x)`` on regular
    coordinate axes ``z``, ``y``, ``x`` (cell centres in metres).  Each node takes
    the code of the cube cell its centre falls in (nearest cell, no reprojection:
    a cube with a CRS other than the grid's is refused); NaN, fill values and nodes
    beyond the cube get :data:`NODATA`.
    """
    _check_keys(source, ("cube", "variable"), where)
    if grid.ndim != 3:
        raise InputError("a cube gives the units of a 3-D grid; this grid is 2-D", field=f"{where}.cube",
                         fix="give the units of a 2-D grid as polygons or a raster of codes")
    name = _text_setting(source, "variable", where, "unit")
    path = _resolve(base, source["cube"])
    if not Path(path).exists():
        raise InputError("the cube of unit codes does not exist", file=path, field=f"{where}.cube",
                         fix="check the path")
    try:
        import xarray as xr
    except ImportError:
        raise InputError("reading a cube of codes needs the optional package xarray", file=path,
                         fix='pip install "geosim[cube]"') from None
    try:
        ds = xr.open_dataset(path, mask_and_scale=True)
    except Exception as exc:  # the engines raise several types for unreadable files
        raise InputError(f"cannot open the file as a NetCDF cube ({exc})", file=path, field=f"{where}.cube",
                         fix="give a NetCDF file with a (z, y, x) variable of codes") from None
    with ds:
        if name not in ds.data_vars:
            from .tables import suggest
            hint = suggest(name, list(ds.data_vars))
            raise InputError(f"the cube has no variable {name!r}", file=path, field=f"{where}.variable",
                             fix=(hint + " " if hint else "") + f"variables: {', '.join(map(str, ds.data_vars))}")
        var = ds[name]
        if set(var.dims) != {"z", "y", "x"}:
            raise InputError(f"variable {name!r} has dimensions {', '.join(var.dims)}, not z, y, x", file=path,
                             field=f"{where}.variable", fix="give the codes on a (z, y, x) cube")
        _same_crs(ds, var, grid, path, where)
        var = var.transpose("z", "y", "x")
        index = [_cell_index(np.asarray(ds[axis].values, dtype=float), node, path, axis)
                 for axis, node in zip(("z", "y", "x"), grid.axes())]
        values = np.asarray(var.values, dtype=np.float64)
    k, j, i = np.meshgrid(*index, indexing="ij")
    inside = (k >= 0) & (j >= 0) & (i >= 0)
    found = np.full(grid.shape, np.nan)
    found[inside] = values[k[inside], j[inside], i[inside]]
    return _checked_codes(found, grid, table, path, where, "cube")


def _cell_index(centres: np.ndarray, nodes: np.ndarray, path: str, axis: str) -> np.ndarray:
    """Index of the cell of a regular axis of cell centres holding each node (-1 beyond the axis)."""
    if len(centres) == 1:
        raise InputError(f"the cube has one cell along {axis}, so its cell size is unknown", file=path, field=axis,
                         fix="give a cube of at least two cells along each axis")
    step = np.diff(centres)
    if not np.allclose(step, step[0], rtol=1e-6, atol=1e-6 * abs(step[0])) or step[0] == 0:
        raise InputError(f"the cube's {axis} coordinates are not evenly spaced", file=path, field=axis,
                         fix="give a cube on a regular grid")
    idx = np.floor((nodes - (centres[0] - step[0] / 2)) / step[0]).astype(np.int64)
    return np.where((idx >= 0) & (idx < len(centres)), idx, -1)


def _same_crs(ds, var, grid, path: str, where: str) -> None:
    from pyproj import CRS
    mapping = var.attrs.get("grid_mapping")
    wkt = ds[mapping].attrs.get("crs_wkt") if mapping in ds.variables else None
    if wkt is None or grid.crs is None:
        return
    cube_crs = CRS.from_wkt(wkt)
    if not cube_crs.equals(grid.crs, ignore_axis_order=True):
        raise InputError(f"the cube is in {cube_crs.name!r}, the grid in {CRS.from_user_input(grid.crs).name!r}",
                         file=path, field=f"{where}.cube",
                         fix="write the cube of codes in the grid's CRS (geosim does not reproject cubes)")


NODE_SOURCES: dict[str, Callable] = {"raster": _raster_codes, "polygons": _polygon_codes,
                                     "surfaces": _surface_codes, "cube": _cube_codes}
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
