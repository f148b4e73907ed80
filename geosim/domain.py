"""Domains: the outline a simulation is clipped to, read from a vector file or a raster.

A vector domain is a GeoJSON file (a FeatureCollection, a Feature or a bare
geometry) holding polygons, or a polygon layer of a GeoPackage, Shapefile,
FlatGeobuf or GeoParquet file (through :mod:`geosim.vector`; the CRS is the
file's), or a GeoPandas GeoDataFrame.  RFC 7946 says GeoJSON positions are WGS 84
longitude, latitude; older files (the 2008 GeoJSON specification) may name
another CRS in a top-level ``"crs"`` member, which is honoured.  The polygons are
united, checked, repaired when invalid (with a note on the ``geosim`` logger
saying what was wrong) and reprojected with pyproj into the CRS of the grid.

A raster domain is any file rasterio opens: nonzero cells of its first band are
inside, zero, nodata and NaN cells outside.  It is sampled at the grid's node
centres (nearest cell), reprojecting the node centres into the raster's CRS.

Examples
--------
>>> import json, pathlib, tempfile
>>> import geosim.domain
>>> square = {"type": "Polygon",
...           "coordinates": [[[15.0, 0.0], [15.01, 0.0], [15.01, 0.01], [15.0, 0.01], [15.0, 0.0]]]}
>>> path = pathlib.Path(tempfile.mkdtemp()) / "square.geojson"
>>> _ = path.write_text(json.dumps(square))
>>> poly = geosim.domain.read_domain(path, "EPSG:32633")   # UTM zone 33 N, metres
>>> [round(v) for v in poly.bounds]
[500000, 0, 501113, 1105]
"""
from __future__ import annotations

import json
import os
import logging
from pathlib import Path

import numpy as np
import shapely
from pyproj import CRS, Transformer
from shapely.geometry import MultiPolygon, Polygon

from .crs import CrsLike, parse_crs
from .errors import InputError

log = logging.getLogger(__name__)

__all__ = ["read_domain", "read_polygon_features", "read_domain_raster", "sample_raster", "below_surface"]

_LONLAT = CRS.from_user_input("OGC:CRS84")  # RFC 7946 section 4: WGS 84, longitude then latitude
# Lines between GeoJSON positions are straight in longitude/latitude (RFC 7946 section 3.1.1);
# vertices this close together keep that shape after projection to well under a metre.
_MAX_SEGMENT_DEGREES = 0.001


def read_domain(path, target_crs: CrsLike | None, *, source_crs: CrsLike | None = None,
                layer: str | int | None = None) -> Polygon | MultiPolygon:
    """Read a domain polygon from a vector file and reproject it to ``target_crs``.

    Parameters
    ----------
    path : str, path-like or geopandas.GeoDataFrame
        A GeoJSON file: a FeatureCollection, a Feature, or a bare Polygon,
        MultiPolygon or GeometryCollection; or a ``.gpkg``, ``.shp``, ``.fgb`` or
        ``.parquet`` polygon layer (or a GeoDataFrame) whose CRS is used.  Every
        polygon in it is part of the domain (they are united); features without
        geometry are skipped.
    target_crs : pyproj.CRS, int, str or None
        CRS of the result, normally the projected CRS of the data and the grid
        (``"EPSG:32750"``, ``32750``, WKT, ...).  None is for data in a local grid
        without a CRS: the file's coordinates are then taken to be in that local
        grid as they are, and the file must not name a CRS.
    source_crs : pyproj.CRS, int or str, optional
        CRS of the file's coordinates.  By default the file's legacy ``"crs"``
        member if it has one, else longitude/latitude (WGS 84) as RFC 7946 says.
        For other vector files, the file's CRS; a file without one is taken to be
        in ``target_crs`` (with a warning).  Coordinates in a geographic CRS are
        always read longitude first.
    layer : str or int, optional
        Layer of a vector file with several.

    Returns
    -------
    shapely.Polygon or shapely.MultiPolygon
        Valid, non-empty, 2-D, in ``target_crs``.

    Raises
    ------
    InputError
        If the file is missing or not JSON, is not GeoJSON, holds no polygon or
        geometries that are not polygons, names a CRS pyproj cannot read, has
        coordinates that are not longitude/latitude when they should be, or
        cannot be reprojected.  The message names the file and the feature.

    Notes
    -----
    A note (a warning of the ``geosim`` logger) says when an invalid polygon
    (self-intersecting ring, ...) was repaired with :func:`shapely.make_valid`,
    naming the problem shapely found, and when ``target_crs`` is None but the
    coordinates look like longitude/latitude.
    """
    from .vector import is_frame, is_vector_path
    if is_frame(path) or (is_vector_path(path) and Path(path).suffix.lower() != ".geojson"):
        geom, own, path = _layer_polygons(path, layer)
        doc, source_crs = _layer_crs(own, path, source_crs, target_crs)
    else:
        path = os.fspath(path)
        doc = _load_json(path)
        geom = _polygons(doc, path)
    return _bring(geom, doc, path, target_crs, source_crs)


def read_polygon_features(path, target_crs: CrsLike | None, *, attribute: str, layer: str | int | None = None
                          ) -> tuple[str, list]:
    """Each polygon feature of a vector file with one attribute, in ``target_crs``.

    Read, checked, repaired and reprojected as :func:`read_domain` does a domain,
    but feature by feature (the polygons are not united).

    Returns
    -------
    (str, list of (str, object, shapely geometry))
        The file's label, and per feature with a polygon: its name in messages
        (``"feature 3"``, counted from 1 in files), its value of ``attribute``
        (None where empty) and its (multi)polygon.

    Raises
    ------
    InputError
        As :func:`read_domain`, and for a missing attribute (with a suggestion).
    """
    from .tables import suggest
    from .vector import frame_table, is_frame, is_vector_path, read_vector
    if is_frame(path) or (is_vector_path(path) and Path(path).suffix.lower() != ".geojson"):
        vt = frame_table(path) if is_frame(path) else read_vector(path, layer=layer, what="polygon layer")
        label = vt.label
        if vt.geometry is None:
            raise InputError("the layer has no geometry column", file=label, fix="save it as a polygon layer")
        doc, source_crs = _layer_crs(vt.crs, label, None, target_crs)
        names = list(vt.columns)
        column = vt.columns.get(attribute)
        items = [(f"feature {i + vt.first_row}", None if column is None else column[i],
                  None if g is None or g.is_empty else shapely.geometry.mapping(g)) for i, g in enumerate(vt.geometry)]
    else:
        label = os.fspath(path)
        doc, source_crs = _load_json(label), None
        features = doc.get("features") if isinstance(doc, dict) and doc.get("type") == "FeatureCollection" else None
        if not isinstance(features, list):
            raise InputError("not a GeoJSON FeatureCollection", file=label, field="type",
                             fix="give a FeatureCollection of polygon features, each with the attribute")
        names = sorted({k for f in features if isinstance(f, dict) and isinstance(f.get("properties"), dict)
                        for k in f["properties"]})
        items = []
        for i, feat in enumerate(features):
            if not isinstance(feat, dict) or feat.get("type") != "Feature":
                raise InputError(f"item {i + 1} of 'features' is not a Feature", file=label, field=f"features[{i}]",
                                 fix="make every item a GeoJSON Feature")
            props = feat.get("properties") if isinstance(feat.get("properties"), dict) else {}
            items.append((f"feature {i + 1}", props.get(attribute), feat.get("geometry")))
    if attribute not in names:
        hint = suggest(attribute, names)
        raise InputError(f"the features have no attribute {attribute!r}", file=label, field=attribute,
                         fix=(hint + " " if hint else "") + f"attributes: {', '.join(names) or 'none'}")
    out = []
    for where, value, obj in items:
        if obj is None:
            continue
        parts = _polygon_parts(obj, label, where)
        if parts:
            geom = parts[0] if len(parts) == 1 else shapely.union_all(parts)
            out.append((where, value, _bring(geom, doc, f"{label}, {where}", target_crs, source_crs)))
    if not out:
        raise InputError("the file holds no polygon", file=label, fix="add polygon features")
    return label, out


def _layer_crs(own, label: str, source_crs, target_crs):
    """The CRS document and source CRS of a vector layer whose own CRS is ``own`` (None: the data's)."""
    if own is None and source_crs is None and target_crs is not None:
        log.warning("%s: the file declares no CRS; taken to be the data's (%s)", label,
                    _name(parse_crs(target_crs)))
    own = own if own is not None else target_crs
    doc = {} if own is None else {"crs": own}
    return doc, (source_crs if source_crs is not None else own)


def _bring(geom, doc, path: str, target_crs: CrsLike | None, source_crs: CrsLike | None):
    """``geom`` checked, repaired and reprojected from its file's CRS to ``target_crs``."""
    if target_crs is None:
        named = source_crs if source_crs is not None else (doc.get("crs") if isinstance(doc, dict) else None)
        if named is not None:
            raise InputError("the file names a CRS but the data have none, so it cannot be brought to them",
                             file=path, field="crs",
                             fix="give the data's CRS, or store the polygons in the data's local coordinates "
                                 "without a 'crs' member")
        xy = shapely.get_coordinates(geom)
        if np.all(np.abs(xy) <= [180.0, 90.0]) and np.ptp(xy[:, 0]) < 5.0 and np.ptp(xy[:, 1]) < 5.0:
            log.warning("%s: the polygons' coordinates look like longitude/latitude but the data have no CRS, "
                        "so they are used as local metres; give the data's CRS if they are longitude/latitude",
                        path)
        return _valid(geom, path, "as read")
    source = _source_crs(doc, path, source_crs)
    target = parse_crs(target_crs, field="target CRS")
    geographic = source.is_geographic
    if geographic:
        _check_lonlat(geom, path)
    geom = _valid(geom, path, "as read")
    if source != target:
        if geographic:
            geom = shapely.segmentize(geom, _MAX_SEGMENT_DEGREES)
        geom = _reproject(geom, source, target, path)
        geom = _valid(geom, path, f"after reprojection to {_name(target)}")
    return geom


def read_domain_raster(path: str | os.PathLike, grid) -> np.ndarray:
    """Boolean mask of the nodes of ``grid`` that fall in nonzero cells of a raster.

    Parameters
    ----------
    path : str or path-like
        A raster rasterio opens (GeoTIFF, ...).  Its first band is used: nonzero
        cells are inside the domain; zero, nodata and NaN cells are outside, and
        so is everything beyond the raster's extent.
    grid : geosim.grid.Grid
        The grid to mask, sampled as :func:`sample_raster` does.

    Returns
    -------
    bool ndarray of ``grid.shape``
        True inside.  A 3-D grid gets the same 2-D mask on every level.  Combine it
        with the grid's own mask: ``grid.with_mask(grid.mask & mask)``.

    Raises
    ------
    InputError
        If the file cannot be opened as a raster or the node centres cannot be
        reprojected into its CRS.
    """
    values = sample_raster(path, grid)
    return np.isfinite(values) & (values != 0)


def sample_raster(path: str | os.PathLike, grid) -> np.ndarray:
    """The first band of a raster at the nodes of ``grid``, as float64 (NaN where it has no value).

    Each node takes the value of the raster cell its centre falls in (nearest-cell
    resampling); node centres are reprojected to the raster's CRS when the two
    differ.  If only one of the two has a CRS, both are taken to be in it (with a
    warning).  Nodata, NaN and cells beyond the raster's extent give NaN.  A 3-D
    grid gets the same values on every level.

    Raises
    ------
    InputError
        If the file cannot be opened as a raster or the node centres cannot be
        reprojected into its CRS.
    """
    import rasterio
    from rasterio.errors import RasterioIOError
    from rasterio.windows import Window

    path = os.fspath(path)
    y_axis, x_axis = grid.axes()[-2:]
    x, y = np.meshgrid(x_axis, y_axis)
    try:
        src = rasterio.open(path)
    except RasterioIOError as exc:
        raise InputError(f"cannot open the file as a raster ({exc})", file=path,
                         fix="give a raster rasterio can read, e.g. a GeoTIFF") from None
    grid_crs = None if grid.crs is None else CRS.from_user_input(grid.crs)
    with src:
        raster_crs = None if src.crs is None else CRS.from_user_input(src.crs)
        if raster_crs is not None and grid_crs is not None and raster_crs != grid_crs:
            tr = Transformer.from_crs(grid_crs, raster_crs, always_xy=True)
            x, y = tr.transform(x, y, errcheck=False)
            if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
                raise InputError(f"the grid's node centres cannot be reprojected to the raster's CRS "
                                 f"{_name(raster_crs)}", file=path,
                                 fix="give a raster in (or near) the grid's CRS")
        elif (raster_crs is None) != (grid_crs is None):
            log.warning("%s: %s has no CRS; taking raster and grid to be in the same coordinates", path,
                        "the raster" if raster_crs is None else "the grid")
        inv = ~src.transform
        col = np.floor(inv.a * x + inv.b * y + inv.c).astype(np.int64)
        row = np.floor(inv.d * x + inv.e * y + inv.f).astype(np.int64)
        covered = (row >= 0) & (row < src.height) & (col >= 0) & (col < src.width)
        out2d = np.full(covered.shape, np.nan)
        if covered.any():
            r0, r1 = int(row[covered].min()), int(row[covered].max()) + 1
            c0, c1 = int(col[covered].min()), int(col[covered].max()) + 1
            band = src.read(1, window=Window(c0, r0, c1 - c0, r1 - r0), masked=True)
            values = band[row[covered] - r0, col[covered] - c0]
            data = np.ma.getdata(values).astype(np.float64)
            data[np.ma.getmaskarray(values)] = np.nan
            out2d[covered] = data
    if grid.ndim == 3:
        return np.broadcast_to(out2d, grid.shape).copy()
    return out2d


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------

def _load_json(path: str):
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except FileNotFoundError:
        raise InputError("the domain file does not exist", file=path, fix="check the path") from None
    except OSError as exc:
        raise InputError(f"cannot read the domain file ({exc.strerror})", file=path,
                         fix="check the path and its permissions") from None
    try:
        return json.loads(raw.decode("utf-8-sig"))
    except UnicodeDecodeError:
        raise InputError("the domain file is not UTF-8 text", file=path,
                         fix="give a GeoJSON file (UTF-8 text)") from None
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON at line {exc.lineno}, column {exc.colno} ({exc.msg})", file=path,
                         fix="give a GeoJSON file; check the file near that line") from None


def _source_crs(doc, path: str, override: CrsLike | None) -> CRS:
    if override is not None:
        return parse_crs(override, file=path, field="source CRS")
    member = doc.get("crs") if isinstance(doc, dict) else None
    if member is None:
        return _LONLAT
    # legacy forms: {"type": "name", "properties": {"name": "EPSG:32750" or an OGC URN}}
    # (GeoJSON 2008, section 3.1) and the older {"type": "EPSG", "properties": {"code": 32750}}
    props = member.get("properties") if isinstance(member, dict) else None
    kind = member.get("type") if isinstance(member, dict) else None
    text = None
    if isinstance(props, dict):
        if kind == "name":
            text = props.get("name")
        elif kind == "EPSG":
            text = props.get("code")
    if not isinstance(text, (str, int)) or isinstance(text, bool):
        raise InputError(f"the 'crs' member {json.dumps(member)[:80]} names no CRS geosim can read",
                         file=path, field="crs",
                         fix='write {"type": "name", "properties": {"name": "EPSG:nnnn"}}, remove the member '
                             "and store longitude/latitude (RFC 7946), or give the source CRS explicitly")
    crs = parse_crs(text, file=path, field="crs")
    # a legacy geographic CRS such as EPSG:4326 still means longitude first in GeoJSON
    return _LONLAT if crs.is_geographic and crs.equals(_LONLAT, ignore_axis_order=True) else crs


def _polygons(doc, path: str) -> Polygon | MultiPolygon:
    if not isinstance(doc, dict) or "type" not in doc:
        raise InputError("not GeoJSON: the top level is not an object with a 'type'", file=path,
                         fix="give a GeoJSON FeatureCollection, Feature or Polygon")
    kind = doc["type"]
    if kind == "FeatureCollection":
        features = doc.get("features")
        if not isinstance(features, list):
            raise InputError("the FeatureCollection has no 'features' list", file=path, field="features",
                             fix="add the features as a list")
        items = []
        for i, feat in enumerate(features):
            if not isinstance(feat, dict) or feat.get("type") != "Feature":
                raise InputError(f"item {i + 1} of 'features' is not a Feature", file=path,
                                 field=f"features[{i}]", fix="make every item a GeoJSON Feature")
            items.append((f"features[{i}].geometry", feat.get("geometry")))
    elif kind == "Feature":
        items = [("geometry", doc.get("geometry"))]
    elif kind in ("Polygon", "MultiPolygon", "GeometryCollection"):
        items = [(None, doc)]
    else:
        raise InputError(f"GeoJSON of type {kind!r} holds no polygon", file=path, field="type",
                         fix="give a FeatureCollection, Feature, Polygon or MultiPolygon outlining the domain")
    parts = []
    for where, obj in items:
        if obj is None:  # a Feature without location
            continue
        parts.extend(_polygon_parts(obj, path, where))
    if not parts:
        raise InputError("the file holds no polygon", file=path,
                         fix="add a Polygon or MultiPolygon outlining the domain")
    return parts[0] if len(parts) == 1 else shapely.union_all(parts)


def _polygon_parts(obj, path: str, where: str | None) -> list:
    kind = obj.get("type") if isinstance(obj, dict) else None
    if kind == "GeometryCollection":
        members = obj.get("geometries")
        if not isinstance(members, list):
            raise InputError("the GeometryCollection has no 'geometries' list", file=path, field=where,
                             fix="list the geometries")
        out = []
        for j, g in enumerate(members):
            out.extend(_polygon_parts(g, path, f"{where or ''}.geometries[{j}]".lstrip(".")))
        return out
    if kind not in ("Polygon", "MultiPolygon"):
        raise InputError(f"a {kind!r} geometry is not a polygon; a domain is an area", file=path, field=where,
                         fix="keep only Polygon or MultiPolygon geometries in the domain file")
    try:
        geom = shapely.geometry.shape(obj)
    except Exception as exc:  # shapely raises several types for malformed coordinates
        raise InputError(f"the {kind} coordinates are malformed ({exc})", file=path, field=where,
                         fix="each ring is a list of at least 4 [x, y] positions, the last equal to the first") \
            from None
    geom = shapely.force_2d(geom)
    if not np.all(np.isfinite(shapely.get_coordinates(geom))):
        raise InputError(f"the {kind} has coordinates that are not finite numbers", file=path, field=where,
                         fix="correct the coordinates")
    return [g for g in getattr(geom, "geoms", [geom]) if not g.is_empty]


def _layer_polygons(source, layer):
    """The united polygons of a vector layer or GeoDataFrame, its CRS and its label."""
    from .vector import frame_table, is_frame, read_vector
    vt = frame_table(source) if is_frame(source) else read_vector(source, layer=layer, what="domain file")
    if vt.geometry is None:
        raise InputError("the domain has no geometry column", file=vt.label, fix="save the domain as a polygon layer")
    parts = []
    for i, g in enumerate(vt.geometry):
        if g is not None and not g.is_empty:
            parts.extend(_polygon_parts(shapely.geometry.mapping(g), vt.label, f"feature {i + vt.first_row}"))
    if not parts:
        raise InputError("the layer holds no polygon", file=vt.label, fix="add a polygon outlining the domain")
    return (parts[0] if len(parts) == 1 else shapely.union_all(parts)), vt.crs, vt.label


def _check_lonlat(geom, path: str) -> None:
    xy = shapely.get_coordinates(geom)
    bad = (np.abs(xy[:, 0]) > 180.0) | (np.abs(xy[:, 1]) > 90.0)
    if bad.any():
        x, y = xy[int(np.argmax(bad))]
        raise InputError(f"position ({x:.10g}, {y:.10g}) is not a longitude/latitude in degrees, as GeoJSON "
                         "requires (RFC 7946)", file=path,
                         fix="store longitude/latitude, or name the projected CRS in a legacy 'crs' member "
                             "or as the source CRS")


def _valid(geom, path: str, when: str) -> Polygon | MultiPolygon:
    no_area = InputError(f"the domain has no area {when}", file=path,
                         fix="give polygons with at least three distinct corners")
    if geom.is_empty:
        raise no_area
    if geom.is_valid:
        if geom.area <= 0.0:
            raise no_area
        return geom
    # the area of an invalid polygon means little (a bow tie's is zero), so repair first
    reason = shapely.is_valid_reason(geom)
    repaired = shapely.make_valid(geom)
    parts = [g for g in shapely.get_parts(repaired) if isinstance(g, (Polygon, MultiPolygon))]
    repaired = shapely.union_all(parts) if parts else Polygon()
    if repaired.is_empty or repaired.area <= 0.0:
        raise InputError(f"the domain polygon is invalid ({reason}) and nothing with an area is left after "
                         "repair", file=path, fix="redraw the outline without self-intersections")
    log.warning("%s: the domain polygon was invalid %s (%s) and was repaired with shapely.make_valid to an "
                "area of %.6g (CRS units squared); check the outline", path, when, reason, repaired.area)
    return repaired


def _reproject(geom, source: CRS, target: CRS, path: str):
    tr = Transformer.from_crs(source, target, always_xy=True)

    def apply(xy):
        x, y = tr.transform(xy[:, 0], xy[:, 1], errcheck=False)
        return np.column_stack([x, y])

    out = shapely.transform(geom, apply)
    if not np.all(np.isfinite(shapely.get_coordinates(out))):
        raise InputError(f"the domain cannot be reprojected from {_name(source)} to {_name(target)}", file=path,
                         fix="check that the domain and the target CRS cover the same area")
    return out


def _name(crs: CRS) -> str:
    code = crs.to_epsg(min_confidence=90)
    return f"EPSG:{code}" if code else repr(crs.name)


def below_surface(grid, points: np.ndarray, *, file: str | None = None) -> np.ndarray:
    """Mask of the 3-D ``grid`` nodes below the surface through ``points`` (x, y, z).

    The surface is linear between the points (Delaunay triangles) and takes the nearest
    point's elevation outside their hull: a ground surface through drillhole collars.

    Raises
    ------
    InputError
        With fewer than three points, or points all in one line (no triangle to span
        a surface); ``file`` names the run spec in the message.
    """
    from scipy.interpolate import LinearNDInterpolator, NearestNDInterpolator
    xy = np.unique(np.asarray(points, dtype=float)[:, :2], axis=0)
    spread = np.linalg.svd(xy - xy.mean(axis=0), compute_uv=False) if len(xy) >= 3 else np.zeros(2)
    if len(xy) < 3 or spread[1] <= 1e-9 * spread[0]:
        found = f"{len(xy)} collar position(s)" if len(xy) < 3 else f"{len(xy)} collars in one line"
        raise InputError(f"the ground surface through the collars needs at least three collars that are not "
                         f"in one line; found {found}", file=file, field="domain.below_collars",
                         fix="set below_collars = false (and bound the grid with grid.z_range or a domain), "
                             "or add the collars of more holes")
    z, y, x = grid.axes()
    xx, yy = np.meshgrid(x, y)
    xy = np.column_stack([xx.ravel(), yy.ravel()])
    top = LinearNDInterpolator(points[:, :2], points[:, 2])(xy)
    outside = np.isnan(top)
    if outside.any():
        top[outside] = NearestNDInterpolator(points[:, :2], points[:, 2])(xy[outside])
    return z[:, None, None] <= top.reshape(grid.ny, grid.nx)[None, :, :]
