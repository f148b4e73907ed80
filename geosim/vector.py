"""GIS vector files and data frames as sample tables and domain outlines.

Point samples and domain polygons can come from the files a GIS saves:

==========================  ====================  =====================================
format                      suffix                read through
==========================  ====================  =====================================
GeoPackage                  ``.gpkg``             pyogrio (GDAL/OGR)
ESRI Shapefile              ``.shp``              pyogrio
GeoJSON                     ``.geojson``          pyogrio (domains: geosim's own reader)
FlatGeobuf                  ``.fgb``              pyogrio
GeoParquet, Parquet         ``.parquet``          pyarrow (WKB geometry, "geo" metadata)
==========================  ====================  =====================================

and, in Python, from a pandas ``DataFrame`` or a GeoPandas ``GeoDataFrame``.
Install them with ``pip install "geosim[vector]"`` (files) or
``"geosim[frames]"`` (data frames).

:func:`sample_table` turns any of them into the same
:class:`geosim.tables.CsvTable` the CSV reader makes, so every check and every
message of CSV intake applies unchanged.  Point geometries add the columns
``geometry_x``, ``geometry_y`` (and ``geometry_z`` for 3-D points); the
readers take the coordinates from them unless columns are named.  Rows in
messages count the features of the layer from 1 (a data frame's rows from 0,
as ``.iloc`` counts), and the file is named with its layer.

The CRS comes from the file (or ``GeoDataFrame.crs``) when it has one.
"""
from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .errors import InputError

__all__ = ["VECTOR_SUFFIXES", "is_vector_path", "is_frame", "VectorTable", "read_vector", "frame_table", "frame_sha256",
           "sample_table", "read_polygons", "GEOMETRY_COLUMNS"]

VECTOR_SUFFIXES = {".gpkg": "GeoPackage", ".shp": "ESRI Shapefile", ".geojson": "GeoJSON",
                   ".fgb": "FlatGeobuf", ".parquet": "(Geo)Parquet", ".geoparquet": "(Geo)Parquet"}
GEOMETRY_COLUMNS = ("geometry_x", "geometry_y", "geometry_z")


def is_vector_path(path: Any) -> bool:
    """Whether ``path`` names a file read by this module (by its suffix).

    Examples
    --------
    >>> import geosim.vector
    >>> geosim.vector.is_vector_path("wells.gpkg"), geosim.vector.is_vector_path("wells.csv")
    (True, False)
    """
    return isinstance(path, (str, os.PathLike)) and Path(path).suffix.lower() in VECTOR_SUFFIXES


def is_frame(obj: Any) -> bool:
    """Whether ``obj`` is a pandas DataFrame (a GeoDataFrame is one too), without importing pandas."""
    return any(c.__name__ == "DataFrame" and c.__module__.startswith("pandas") for c in type(obj).__mro__)


@dataclass(frozen=True)
class VectorTable:
    """Features of one layer: attribute columns, geometries and the CRS.

    ``columns`` maps attribute names to (n,) arrays (numbers, or objects for
    text); ``geometry`` is an (n,) array of shapely geometries (None where a
    feature has none) or None for a table without geometry; ``crs`` is a
    :class:`pyproj.CRS` or None; ``label`` names the source in messages
    (``"wells.gpkg, layer wells"``); ``first_row`` is the number of the first
    feature in messages (1 for files, 0 for data frames).
    """

    label: str
    columns: dict
    geometry: np.ndarray | None
    crs: Any
    first_row: int = 1

    def __len__(self) -> int:
        if self.geometry is not None:
            return len(self.geometry)
        return len(next(iter(self.columns.values()))) if self.columns else 0


def _need(module: str, extra: str, what: str):
    import importlib
    try:
        return importlib.import_module(module)
    except ImportError:
        raise InputError(f"reading {what} needs the optional package {module}", fix=f'pip install "geosim[{extra}]"'
                         ) from None


def _crs(value, label: str):
    if value is None or value == "":
        return None
    from pyproj import CRS
    from pyproj.exceptions import CRSError
    try:
        return CRS.from_user_input(value)
    except CRSError as exc:
        raise InputError(f"the file's CRS cannot be read ({exc})", file=label,
                         fix="store the layer with an EPSG CRS, or give data.crs") from None


def read_vector(path: str | os.PathLike, *, layer: str | int | None = None, what: str = "vector file"
                ) -> VectorTable:
    """Read one layer of a GIS vector file (see the module docstring for formats).

    Raises
    ------
    InputError
        If the file is missing, the format needs a package that is not installed,
        GDAL cannot read it, the layer does not exist (naming the layers there are),
        or the layer has no features.
    """
    path = os.fspath(path)
    if not Path(path).exists():
        raise InputError(f"{what} not found", file=path, fix="check the path")
    if Path(path).suffix.lower() in (".parquet", ".geoparquet"):
        table = _read_parquet(path)
    else:
        table = _read_ogr(path, layer, what)
    if len(table) == 0:
        raise InputError(f"{what} has no features", file=table.label, fix="save the layer with its features")
    return table


def _read_ogr(path: str, layer, what: str) -> VectorTable:
    pyogrio = _need("pyogrio", "vector", f"a {VECTOR_SUFFIXES.get(Path(path).suffix.lower(), 'vector')} file")
    import shapely
    try:
        layers = [str(name) for name, _ in pyogrio.list_layers(path)]
    except Exception as exc:  # GDAL's own error types vary between versions
        raise InputError(f"GDAL cannot open the {what}: {exc}", file=path,
                         fix="check that the file is complete and in the format its suffix says") from None
    if layer is None and len(layers) > 1:
        raise InputError(f"the file has {len(layers)} layers: {', '.join(layers)}", file=path,
                         fix="name the layer to read")
    if isinstance(layer, str) and layer not in layers:
        from .tables import suggest
        raise InputError(f"no layer named {layer!r}", file=path,
                         fix=f"{suggest(layer, layers)} layers in the file: {', '.join(layers)}".strip())
    name = layer if isinstance(layer, str) else layers[layer or 0]
    from pyogrio.raw import read
    meta, _, wkb, fields = read(path, layer=name)
    label = f"{path}, layer {name}" if Path(path).suffix.lower() in (".gpkg",) or len(layers) > 1 else path
    geometry = None if wkb is None else shapely.from_wkb(wkb)
    columns = {str(n): np.asarray(v) for n, v in zip(meta["fields"], fields)}
    return VectorTable(label, columns, geometry, _crs(meta.get("crs"), label))


def _read_parquet(path: str) -> VectorTable:
    pq = _need("pyarrow.parquet", "vector", "a Parquet file")
    import shapely
    try:
        table = pq.read_table(path)
    except Exception as exc:  # pyarrow raises several types for unreadable files
        raise InputError(f"pyarrow cannot read the Parquet file: {exc}", file=path,
                         fix="check that the file is complete Parquet") from None
    geo = json.loads((table.schema.metadata or {}).get(b"geo", b"null"))
    geometry, crs = None, None
    if geo:
        # GeoParquet 1.0: "primary_column" holds WKB; "crs" is PROJJSON (absent: OGC:CRS84)
        col = geo.get("primary_column", "geometry")
        info = geo.get("columns", {}).get(col, {})
        if info.get("encoding", "WKB").upper() != "WKB":
            raise InputError(f"geometry encoding {info.get('encoding')!r} is not supported", file=path,
                             field=col, fix="write the GeoParquet file with WKB geometries")
        geometry = shapely.from_wkb(table.column(col).to_pylist())
        crs = _crs(json.dumps(info["crs"]) if info.get("crs") else ("OGC:CRS84" if "crs" not in info else None),
                   path)
        table = table.drop([col])
    columns = {name: np.asarray(table.column(name).to_numpy(zero_copy_only=False)) for name in table.column_names}
    return VectorTable(path, columns, geometry, crs)


def frame_sha256(frame) -> str:
    """SHA-256 of a data frame's content: column names, values (geometries as WKB) and CRS."""
    import hashlib
    vt = frame_table(frame)
    digest = hashlib.sha256()
    for name, values in vt.columns.items():
        digest.update(name.encode() + b"\0" + "\0".join(map(_cell, values)).encode() + b"\1")
    if vt.geometry is not None:
        import shapely
        digest.update(b"".join(b"" if g is None else shapely.to_wkb(g) for g in vt.geometry))
        digest.update(str(None if vt.crs is None else vt.crs.to_wkt()).encode())
    return digest.hexdigest()


def frame_table(frame) -> VectorTable:
    """A pandas DataFrame or GeoPandas GeoDataFrame as a :class:`VectorTable` (rows from 0)."""
    geometry, crs = None, None
    name = getattr(frame, "_geometry_column_name", None)
    columns = {str(c): frame[c].to_numpy() for c in frame.columns if c != name}
    if name is not None:
        geometry = np.asarray(frame[name].to_numpy(), dtype=object)
        crs = frame.crs
    label = "GeoDataFrame" if name is not None else "DataFrame"
    return VectorTable(label, columns, geometry, crs, first_row=0)


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, (float, np.floating)):
        return "" if np.isnan(v) else repr(float(v))
    if isinstance(v, (bool, np.bool_)):
        return str(bool(v))
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    text = str(v).strip()
    return "" if text in ("<NA>", "NaT") and not isinstance(v, str) else text


def sample_table(source, *, layer: str | int | None = None, what: str = "point table"):
    """A :class:`geosim.tables.CsvTable` of a vector file, a Parquet file or a data frame.

    Point geometries become the columns ``geometry_x``, ``geometry_y`` (and
    ``geometry_z`` when the points have Z).  A feature without a geometry
    leaves those cells empty; another geometry type is an error naming the row.

    Returns
    -------
    (CsvTable, pyproj.CRS or None)
        The table and the CRS of the source.
    """
    import shapely

    from .tables import CsvTable, _check_header

    vt = frame_table(source) if is_frame(source) else read_vector(source, layer=layer, what=what)
    names = list(vt.columns)
    cols = [vt.columns[n] for n in names]
    if vt.geometry is not None:
        geom = vt.geometry
        kinds = shapely.get_type_id(geom)
        bad = np.flatnonzero((kinds != 0) & (kinds != -1))
        if bad.size:
            i = int(bad[0])
            raise InputError(f"the geometry is a {geom[i].geom_type}, not a point", file=vt.label,
                             row=i + vt.first_row, field="geometry",
                             fix="save the samples as a point layer (one point per sample)")
        has_z = bool(shapely.has_z(geom[kinds == 0]).any()) if (kinds == 0).any() else False
        xyz = np.full((len(geom), 3), np.nan)
        ok = kinds == 0
        xyz[ok] = shapely.get_coordinates(geom[ok], include_z=True)
        for j, n in enumerate(GEOMETRY_COLUMNS[:3 if has_z else 2]):
            names.append(n)
            cols.append(xyz[:, j])
    _check_header(names, vt.label, vt.first_row)
    rows = tuple(tuple(_cell(c[i]) for c in cols) for i in range(len(vt)))
    lines = tuple(range(vt.first_row, vt.first_row + len(rows)))
    if not rows:
        raise InputError(f"{what} has no rows", file=vt.label, fix="add samples")
    return CsvTable(vt.label, tuple(names), rows, lines), vt.crs


def read_polygons(path: str | os.PathLike, *, layer: str | int | None = None):
    """Polygon geometries of a vector file and its CRS, for :func:`geosim.domain.read_domain`.

    Returns ``(list of (row, geometry), crs)``; rows count features from 1.
    """
    vt = read_vector(path, layer=layer, what="domain file")
    if vt.geometry is None:
        raise InputError("the domain file has no geometry column", file=vt.label,
                         fix="save the domain as a polygon layer")
    return [(i + vt.first_row, g) for i, g in enumerate(vt.geometry)], vt.crs, vt.label
