"""Coordinate reference systems: parsing user CRS text and bringing coordinates into metres.

geosim computes every distance in metres of a projected CRS.  Geographic input
(longitude/latitude) is reprojected with pyproj before anything else; when the
user names no target CRS, the UTM zone of the data centroid is chosen (WGS 84 /
UTM, EPSG:326zz north of the equator, EPSG:327zz south of it) and the choice is
reported in the returned note and as a note on the ``geosim`` logger.

Axis order: coordinates are always ``(x, y[, z])`` = (east, north[, up]), which for
geographic input means ``(longitude, latitude)``, whatever axis order the CRS
definition declares (pyproj is used with ``always_xy=True``).  Heights are left
as given: only the horizontal position is reprojected.
"""
from __future__ import annotations

import math
import logging

import numpy as np
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError

from .errors import InputError

log = logging.getLogger(__name__)

CrsLike = CRS | str | int


def parse_crs(text: CrsLike, *, file: str | None = None, field: str | None = None) -> CRS:
    """A :class:`pyproj.CRS` from an EPSG code, ``"EPSG:nnnn"``, WKT or a PROJ string.

    Parameters
    ----------
    text : pyproj.CRS, int or str
        ``32633``, ``"32633"``, ``"EPSG:32633"``, a WKT text or a PROJ string such as
        ``"+proj=utm +zone=33 +datum=WGS84"``.
    file, field : str, optional
        Where the text came from (a run spec, a command-line option), for the message.

    Raises
    ------
    InputError
        If pyproj cannot make a CRS of the text.

    Examples
    --------
    >>> import geosim.crs
    >>> geosim.crs.parse_crs("32633").to_epsg()
    32633
    """
    if isinstance(text, CRS):
        return text
    if isinstance(text, bool) or not isinstance(text, (int, str)):
        raise InputError(f"a CRS must be given as text or an EPSG number, got {type(text).__name__}",
                         file=file, field=field, fix="write e.g. 'EPSG:32633'")
    source = str(text).strip()
    if source.isdigit():
        source = f"EPSG:{source}"
    try:
        return CRS.from_user_input(source)
    except CRSError as exc:
        shown = source if len(source) <= 60 else source[:57] + "..."
        raise InputError(f"pyproj cannot read the CRS {shown!r} ({exc})", file=file, field=field,
                         fix="give an EPSG code such as 'EPSG:32633', a WKT text or a PROJ string") from None


def _horizontal(crs: CRS) -> CRS:
    """The horizontal part of a compound CRS (the CRS itself otherwise)."""
    if crs.is_compound:
        for sub in crs.sub_crs_list:
            if sub.is_geographic or sub.is_projected:
                return sub
    return crs


def _metre_factor(crs: CRS) -> float:
    """Metres per unit of the first horizontal axis of a projected CRS."""
    return float(crs.axis_info[0].unit_conversion_factor) if crs.axis_info else 1.0


def _crs_name(crs: CRS) -> str:
    code = crs.to_epsg(min_confidence=90)
    return f"EPSG:{code}" if code else repr(crs.name)


def utm_crs(lon: float, lat: float) -> CRS:
    """The WGS 84 / UTM CRS of the zone containing ``(lon, lat)``.

    Zones are 6 degrees wide starting at 180 W (zone 1), with the two published
    exceptions of the UTM grid: zone 32 is widened to 3-12 E between 56 and 64 N
    (south-west Norway), and zones 31/33/35/37 cover 72-84 N (Svalbard); from memory
    of the UTM zone definition (NGA, "The Universal Grids", DMA TM 8358.2, 1989).
    North of the equator EPSG:32601-32660, south EPSG:32701-32760.

    Examples
    --------
    >>> import geosim.crs
    >>> geosim.crs.utm_crs(15.2, 48.1).to_epsg()   # zone 33 N
    32633
    >>> geosim.crs.utm_crs(-70.6, -33.4).to_epsg()  # zone 19 S
    32719
    """
    if not (-180.0 <= lon <= 180.0 and -90.0 <= lat <= 90.0):
        raise ValueError(f"({lon}, {lat}) is not a longitude/latitude")
    zone = min(int(math.floor((lon + 180.0) / 6.0)) + 1, 60)
    if 56.0 <= lat < 64.0 and 3.0 <= lon < 12.0:
        zone = 32
    elif 72.0 <= lat <= 84.0 and 0.0 <= lon < 42.0:
        zone = 31 if lon < 9.0 else 33 if lon < 21.0 else 35 if lon < 33.0 else 37
    return CRS.from_epsg((32600 if lat >= 0.0 else 32700) + zone)


def centroid_lonlat(lon: np.ndarray, lat: np.ndarray) -> tuple[float, float]:
    """Centroid of geographic points, averaging longitude on the circle (safe across 180 degrees)."""
    lam = np.radians(np.asarray(lon, dtype=float))
    mean_lon = math.degrees(math.atan2(np.mean(np.sin(lam)), np.mean(np.cos(lam))))
    return mean_lon, float(np.mean(lat))


def to_projected(coords: np.ndarray, crs: CrsLike | None, target: CrsLike | None = None,
                 *, file: str | None = None, rows=None) -> tuple[np.ndarray, CRS | None, str | None]:
    """Coordinates in metres of a projected CRS.

    Parameters
    ----------
    coords : (n, d) array_like
        ``(x, y[, z])``; for a geographic ``crs``, ``x`` is longitude and ``y`` latitude
        in degrees.  ``z`` is passed through unchanged.
    crs : CRS-like or None
        CRS of ``coords``.  None means a local grid already in metres (e.g. a mine
        grid); the coordinates are returned unchanged.
    target : CRS-like, optional
        Projected CRS in metres to convert to.  Without it, projected input in metres
        is returned unchanged and geographic input goes to the UTM zone of its centroid.
    file : str, optional
        Input file, for error messages.
    rows : (n,) array_like of int, optional
        The file row of each point, for error messages (point numbers otherwise).

    Returns
    -------
    coords : (n, d) ndarray of float64
        In metres.
    crs : pyproj.CRS or None
        The CRS of the returned coordinates.
    note : str or None
        What was done, e.g. ``"reprojected EPSG:4326 -> EPSG:32633 (UTM zone of the
        data centroid)"``; None when nothing changed.

    Raises
    ------
    InputError
        For a CRS pyproj cannot read, a target that is not projected in metres,
        a projected CRS in other units without a target, latitudes/longitudes out
        of range (projected coordinates declared geographic), or longitudes/latitudes
        declared in a projected CRS: every point within +-180, +-90 and, read as metres
        of that CRS, outside the CRS's area of use.

    Notes
    -----
    A note (a warning of the ``geosim`` logger) says when the UTM zone is chosen
    for the user, and when coordinates said to be projected (or local) look like
    decimal degrees (within +-180 and +-90, spanning under 5 units, with digits
    below a thousandth), a hint that the CRS is wrong.

    Examples
    --------
    >>> import numpy, geosim.crs
    >>> xy, crs, note = geosim.crs.to_projected(numpy.array([[15.0, 0.0]]), "EPSG:4326")
    >>> crs.to_epsg(), round(float(xy[0, 0]), 3), round(float(xy[0, 1]), 3)
    (32633, 500000.0, 0.0)
    """
    xyz = np.array(coords, dtype=np.float64, ndmin=2)
    if xyz.ndim != 2 or xyz.shape[1] not in (2, 3):
        raise ValueError(f"coords must be (n, 2) or (n, 3), got shape {np.shape(coords)}")
    target_crs = None if target is None else parse_crs(target, file=file, field="target CRS")
    if target_crs is not None:
        h = _horizontal(target_crs)
        if not h.is_projected or not math.isclose(_metre_factor(h), 1.0):
            raise InputError(f"target CRS {_crs_name(target_crs)} is not a projected CRS in metres",
                             file=file, field="target CRS",
                             fix="name a projected CRS in metres, e.g. a UTM zone ('EPSG:32633')")
    if crs is None:
        if target_crs is not None:
            raise InputError("a target CRS was given but not the CRS of the input coordinates", file=file,
                             field="CRS", fix="name the CRS of the input coordinates")
        _warn_if_degrees(xyz, None)
        return xyz, None, None
    source = parse_crs(crs, file=file, field="CRS")
    h = _horizontal(source)
    if h.is_geographic:
        _check_lonlat(xyz, file, rows)
    elif not h.is_projected:
        raise InputError(f"CRS {_crs_name(source)} is neither geographic nor projected", file=file,
                         field="CRS", fix="give the horizontal CRS of the coordinates (geographic or projected)")
    else:
        if target_crs is None and not math.isclose(_metre_factor(h), 1.0):
            unit = h.axis_info[0].unit_name
            raise InputError(f"CRS {_crs_name(source)} measures in {unit}, geosim computes in metres",
                             file=file, field="CRS", fix="name a projected target CRS in metres")
        _check_projected(xyz, h, file, rows)
        if target_crs is None:
            _warn_if_degrees(xyz, source)
            return xyz, source, None
    chosen_for_user = target_crs is None
    if chosen_for_user:
        lon0, lat0 = centroid_lonlat(xyz[:, 0], xyz[:, 1])
        target_crs = utm_crs(lon0, lat0)
    if target_crs == source:
        return xyz, source, None
    tr = Transformer.from_crs(h, _horizontal(target_crs), always_xy=True)
    out = xyz.copy()
    out[:, 0], out[:, 1] = tr.transform(xyz[:, 0], xyz[:, 1], errcheck=False)
    bad = ~np.isfinite(out[:, :2]).all(axis=1)
    if bad.any():
        i = int(np.argmax(bad))
        where, row = _point(i, rows)
        raise InputError(f"{where}({xyz[i, 0]}, {xyz[i, 1]}) cannot be reprojected to {_crs_name(target_crs)}",
                         file=file, row=row, fix="check the coordinates and the CRS")
    note = f"reprojected {_crs_name(source)} -> {_crs_name(target_crs)}"
    if chosen_for_user:
        note += " (UTM zone of the data centroid)"
        log.warning("%s; give a target CRS to choose another", note)
    return out, target_crs, note


def _point(i: int, rows) -> tuple[str, int | None]:
    """How a message names point ``i``: by its file row when known."""
    return ("", int(rows[i])) if rows is not None else (f"point {i + 1} ", None)


def _check_lonlat(xyz: np.ndarray, file: str | None, rows=None) -> None:
    lon, lat = xyz[:, 0], xyz[:, 1]
    bad_lat = ~(np.abs(lat) <= 90.0)
    bad_lon = ~(np.abs(lon) <= 180.0)
    if bad_lat.any() or bad_lon.any():
        i = int(np.argmax(bad_lat | bad_lon))
        swapped = bool(np.all(np.abs(lon) <= 90.0) and bad_lat.any() and not bad_lon.any())
        fix = ("longitude and latitude look swapped: x is the longitude, y the latitude" if swapped
               else "the coordinates are not degrees: name the projected CRS they are in")
        where, row = _point(i, rows)
        raise InputError(f"{where}({lon[i]}, {lat[i]}) is not a longitude/latitude in degrees, as the "
                         "geographic CRS declared says", file=file, row=row, field="CRS", fix=fix)


# degrees beyond the edges of a CRS's area of use still counted as inside it
_AREA_MARGIN = 1.0


def _check_projected(xyz: np.ndarray, crs: CRS, file: str | None, rows=None) -> None:
    """Refuse longitude/latitude declared in a projected CRS.

    Numbers within +-180 and +-90 are rarely metres of a projected CRS: read as such they
    lie within 200 m of its false origin, which for most CRSs (every UTM zone, for one)
    is far outside the area the CRS is defined for.  When every point lands outside that
    area of use (with a margin of a degree) the numbers are degrees.
    """
    x, y = xyz[:, 0], xyz[:, 1]
    area = crs.area_of_use
    if area is None or not (np.all(np.abs(x) <= 180.0) and np.all(np.abs(y) <= 90.0)):
        return
    lon, lat = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(x, y, errcheck=False)
    lon, lat = np.asarray(lon, dtype=float), np.asarray(lat, dtype=float)
    west, east = area.west - _AREA_MARGIN, area.east + _AREA_MARGIN
    in_lon = (lon >= west) & (lon <= east) if west <= east else (lon >= west) | (lon <= east)
    inside = in_lon & (lat >= area.south - _AREA_MARGIN) & (lat <= area.north + _AREA_MARGIN)
    if inside.any():
        return
    where, row = _point(0, rows)
    raise InputError(f"the coordinates look like longitude/latitude, not metres of {_crs_name(crs)}: "
                     f"{where}({x[0]}, {y[0]}) read as metres of that CRS lies at longitude {lon[0]:.3f}, "
                     f"latitude {lat[0]:.3f}, outside its area of use (longitude {area.west:g} to {area.east:g}, "
                     f"latitude {area.south:g} to {area.north:g})", file=file, row=row,
                     field="CRS", fix="declare the geographic CRS of the coordinates, e.g. 'EPSG:4326' "
                     "(x = longitude, y = latitude); geosim then works in their UTM zone")


def _warn_if_degrees(xyz: np.ndarray, crs: CRS | None) -> None:
    x, y = xyz[:, 0], xyz[:, 1]
    # degrees read as metres: a spread of under 5 units, within lon/lat bounds, with the
    # sub-millimetre digits that decimal degrees carry and survey coordinates do not
    fine_digits = np.any(np.abs(xyz[:, :2] * 1000.0 - np.round(xyz[:, :2] * 1000.0)) > 1e-6)
    if len(x) > 1 and np.all(np.abs(x) <= 180.0) and np.all(np.abs(y) <= 90.0) and 0 < np.ptp(x) < 5.0 \
            and 0 < np.ptp(y) < 5.0 and fine_digits:
        where = "a local grid (no CRS)" if crs is None else _crs_name(crs)
        log.warning("coordinates span less than 5 units in %s and look like degrees; if they are "
                    "longitude/latitude, give a geographic CRS such as EPSG:4326", where)
