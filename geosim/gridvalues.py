"""Values of a gridded layer (a raster map or a 3-D cube) at points: bilinear or nearest cell.

Secondary surveys and mean grids come on their own grids, in their own CRS.  They
are read at the points that need them (the simulation grid's node centres, the
samples) rather than warped as images: each point is reprojected into the layer's
CRS with pyproj when the two differ, and takes

* ``"bilinear"`` (the default): the weighted mean of the four cell centres around
  it (eight in a cube: trilinear), weights ``(1 - t)`` and ``t`` along each axis
  with ``t`` the point's fractional position between two centres (the usual
  bilinear interpolation, e.g. Press et al. 2007, Numerical Recipes, 3rd ed.,
  section 3.6, from memory).  Between the outermost centres and the layer's edge
  the edge value holds.  A corner without a value (nodata) is left out and the
  others re-weighted;
* ``"nearest"``: the value of the cell the point falls in.

A point is *covered* when the cell it falls in has a value; otherwise it gets NaN
and the caller decides whether that is an error.  Node values are point values
(realizations are simulated at node centres), so bilinear reading of a coarser
survey is a resampling to point support, not an average over the node's cell.

Layers: a single-band raster rasterio reads (GeoTIFF, ...), used at every level of
a 3-D grid; or a CF-conventions NetCDF cube (``.nc``, read with xarray, ``pip
install "geosim[cube]"``) with 1-D ``x``, ``y`` and ``z`` coordinates of cell
centres and a grid mapping holding the CRS, as :mod:`geosim.io.cube` writes.
"""
from __future__ import annotations

import logging
import os
from dataclasses import dataclass

import numpy as np

from .errors import InputError

log = logging.getLogger(__name__)

__all__ = ["Layer", "read_layer", "layer_values", "RESAMPLING"]

RESAMPLING = ("bilinear", "nearest")


@dataclass(frozen=True)
class Layer:
    """A regular grid of values with ascending cell-centre axes.

    Attributes
    ----------
    path : str
    crs : pyproj.CRS or None
    axes : tuple of (k,) ndarray
        Cell-centre coordinates, ascending: ``(y, x)`` for a map, ``(z, y, x)`` for a cube.
    values : ndarray
        Values on those axes (NaN: no value).
    variable : str
        The band or variable read.
    """

    path: str
    crs: object
    axes: tuple
    values: np.ndarray
    variable: str

    @property
    def ndim(self) -> int:
        return self.values.ndim

    @property
    def cell(self) -> tuple[float, ...]:
        """Cell size along x, y (, z), metres (or the CRS's units)."""
        steps = [float(a[1] - a[0]) if a.size > 1 else float("nan") for a in self.axes]
        return tuple(reversed(steps))

    def describe(self) -> str:
        """One line: file, shape, cell and CRS."""
        crs = "no CRS" if self.crs is None else _crs_name(self.crs)
        cell = " x ".join(f"{c:g}" for c in self.cell)
        shape = " x ".join(str(a.size) for a in reversed(self.axes))
        return f"{os.path.basename(self.path)} ({self.variable}): {shape} cells of {cell}, {crs}"


def _crs_name(crs) -> str:
    epsg = crs.to_epsg()
    return f"EPSG:{epsg}" if epsg else crs.name


def read_layer(path: str | os.PathLike, *, variable: str | None = None, field: str = "file",
               bounds: tuple[float, float, float, float] | None = None) -> Layer:
    """Read a map (first band of a raster) or a NetCDF cube as a :class:`Layer`.

    Parameters
    ----------
    path : path
    variable : str, optional
        The cube's variable (default: its only variable on ``(z, y, x)`` or ``(y, x)``).
    field : str
        The spec key that named the file, for error messages.
    bounds : (xmin, ymin, xmax, ymax), optional
        Only the part of a raster around these bounds (in its CRS) is read, with two
        cells of margin.

    Raises
    ------
    InputError
        A file that is not a readable raster or cube, a rotated raster, a cube
        without ``x``/``y`` coordinates or with a realization dimension.
    """
    path = os.fspath(path)
    if path.lower().endswith((".nc", ".nc4", ".cdf")):
        return _read_cube(path, variable, field)
    return _read_raster(path, field, bounds)


def _read_raster(path: str, field: str, bounds) -> Layer:
    import rasterio
    from pyproj import CRS
    from rasterio.errors import RasterioIOError
    from rasterio.windows import Window, from_bounds

    try:
        src = rasterio.open(path)
    except RasterioIOError as exc:
        raise InputError(f"cannot open the file as a raster ({exc})", file=path, field=field,
                         fix="give a raster rasterio can read (e.g. a GeoTIFF), or a NetCDF cube (.nc)") from None
    with src:
        t = src.transform
        if t.b != 0.0 or t.d != 0.0 or t.e >= 0.0:
            raise InputError("the raster is rotated or not north-up", file=path, field=field,
                             fix="warp it to a north-up grid first (e.g. gdalwarp)")
        window = Window(0, 0, src.width, src.height)
        if bounds is not None:
            wanted = from_bounds(*bounds, transform=t)
            c0 = max(int(np.floor(wanted.col_off)) - 2, 0)
            r0 = max(int(np.floor(wanted.row_off)) - 2, 0)
            c1 = min(int(np.ceil(wanted.col_off + wanted.width)) + 2, src.width)
            r1 = min(int(np.ceil(wanted.row_off + wanted.height)) + 2, src.height)
            if c1 > c0 and r1 > r0:
                window = Window(c0, r0, c1 - c0, r1 - r0)
        band = src.read(1, window=window, masked=True)
        values = np.ma.getdata(band).astype(np.float64)
        values[np.ma.getmaskarray(band) | ~np.isfinite(values)] = np.nan
        cols = window.col_off + np.arange(window.width) + 0.5
        rows = window.row_off + np.arange(window.height) + 0.5
        x = t.c + t.a * cols
        y = t.f + t.e * rows
        crs = None if src.crs is None else CRS.from_user_input(src.crs)
        name = src.descriptions[0] or "band 1"
    # rows run north to south; the axes ascend
    return Layer(path, crs, (y[::-1].copy(), x), values[::-1].copy(), name)


def _read_cube(path: str, variable: str | None, field: str) -> Layer:
    try:
        import xarray
    except ImportError:
        raise InputError("reading a NetCDF cube needs xarray and netCDF4", file=path, field=field,
                         fix='pip install "geosim[cube]"') from None
    from pyproj import CRS
    try:
        ds = xarray.open_dataset(path, mask_and_scale=True)
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot open the file as a NetCDF cube ({exc})", file=path, field=field,
                         fix="give a CF-conventions NetCDF file with x, y (and z) coordinates") from None
    with ds:
        names = [n for n, v in ds.data_vars.items() if {"x", "y"} <= set(v.dims)]
        if variable is None:
            if len(names) != 1:
                raise InputError(f"the cube has {len(names)} variables on x and y ({', '.join(names) or 'none'})",
                                 file=path, field=field,
                                 fix="name the one to use with the section's variable key")
            variable = names[0]
        if variable not in ds.data_vars:
            raise InputError(f"the cube has no variable {variable!r}", file=path, field=field,
                             fix=f"use one of: {', '.join(names) or 'none on x and y'}")
        da = ds[variable]
        extra = [d for d in da.dims if d not in ("z", "y", "x")]
        if extra:
            raise InputError(f"variable {variable!r} has dimensions {da.dims}; expected (z, y, x) or (y, x)",
                             file=path, field=field,
                             fix="give one field (select one realization or summary band before saving)")
        da = da.transpose(*[d for d in ("z", "y", "x") if d in da.dims])
        axes, flips = [], []
        for d in da.dims:
            a = np.asarray(ds[d].values, dtype=np.float64)
            flip = a.size > 1 and a[0] > a[-1]
            steps = np.diff(a[::-1] if flip else a)
            if steps.size and (np.any(steps <= 0) or np.ptp(steps) > 1e-6 * abs(steps.mean())):
                raise InputError(f"the cube's {d} coordinates are not evenly spaced", file=path, field=field,
                                 fix="give a cube on a regular grid")
            axes.append(a[::-1].copy() if flip else a)
            flips.append(flip)
        values = np.asarray(da.values, dtype=np.float64)
        for k, flip in enumerate(flips):
            if flip:
                values = np.flip(values, axis=k)
        mapping = da.attrs.get("grid_mapping") or ("spatial_ref" if "spatial_ref" in ds.variables else None)
        crs = None
        if mapping is not None and mapping in ds.variables:
            attrs = ds[mapping].attrs
            wkt = attrs.get("crs_wkt") or attrs.get("spatial_ref")
            crs = CRS.from_wkt(wkt) if wkt else CRS.from_cf(attrs)
    return Layer(path, crs, tuple(axes), np.ascontiguousarray(values), variable)


def layer_values(layer: Layer, points, crs=None, *, method: str = "bilinear",
                 field: str = "file") -> tuple[np.ndarray, list[str]]:
    """The layer's values at ``points``; NaN where the cell a point falls in has no value.

    Parameters
    ----------
    layer : Layer
    points : (m, d) array_like
        x, y (, z) in ``crs``; a map ignores z, a cube needs it.
    crs : CRS-like, optional
        The points' CRS; they are reprojected to the layer's when the two differ.
    method : {"bilinear", "nearest"}
    field : str
        The spec key that named the layer's file, for error messages.

    Returns
    -------
    values : (m,) ndarray
    notes : list of str
        What was done to read them (reprojection, a map used at every level).

    Examples
    --------
    >>> import numpy as np
    >>> from geosim.gridvalues import Layer, layer_values
    >>> layer = Layer("survey", None, (np.array([0.0, 10.0]), np.array([0.0, 10.0])),
    ...               np.array([[0.0, 1.0], [2.0, 3.0]]), "band 1")
    >>> layer_values(layer, [[5.0, 5.0], [2.5, 0.0], [30.0, 0.0]])[0].tolist()
    [1.5, 0.25, nan]
    """
    if method not in RESAMPLING:
        raise ValueError(f"method must be one of {RESAMPLING}, got {method!r}")
    pts = np.atleast_2d(np.asarray(points, dtype=np.float64))
    notes: list[str] = []
    if layer.ndim == 3 and pts.shape[1] < 3:
        raise InputError("a cube (3-D layer) was given for a 2-D grid", file=layer.path, field=field,
                         fix="give a map (a single-band raster) for a 2-D run")
    if layer.ndim == 2 and pts.shape[1] == 3:
        notes.append(f"{os.path.basename(layer.path)} is a map: its values are used at every level of the 3-D grid")
    x, y = pts[:, 0], pts[:, 1]
    if crs is not None and layer.crs is not None:
        from pyproj import CRS, Transformer
        source = CRS.from_user_input(crs)
        if source != layer.crs:
            x, y = Transformer.from_crs(source, layer.crs, always_xy=True).transform(x, y, errcheck=False)
            x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
            notes.append(f"{os.path.basename(layer.path)} is in {_crs_name(layer.crs)}: points reprojected from "
                         f"{_crs_name(source)} to read it")
    elif (crs is None) != (layer.crs is None):
        log.warning("%s: %s has no CRS; taking both to be in the same coordinates", layer.path,
                    "the layer" if layer.crs is None else "the grid")
    coords = [y, x] if layer.ndim == 2 else [pts[:, 2], y, x]
    return _interpolate(layer.axes, layer.values, coords, method), notes


def _positions(axis: np.ndarray, c: np.ndarray):
    """Fractional index of each coordinate along ``axis`` (cell centres), and whether it lies inside
    the layer's edge (half a cell beyond the outermost centres)."""
    if axis.size == 1:
        # one level: its thickness is unknown, so every coordinate is on it
        return np.zeros_like(c), np.isfinite(c)
    step = axis[1] - axis[0]
    f = (c - axis[0]) / step
    inside = (f >= -0.5) & (f <= axis.size - 0.5)
    return np.clip(f, 0.0, axis.size - 1.0), inside


def _interpolate(axes, values, coords, method) -> np.ndarray:
    m = coords[0].shape[0]
    out = np.full(m, np.nan)
    fracs, inside = [], np.ones(m, dtype=bool)
    for axis, c in zip(axes, coords):
        f, ok = _positions(axis, c)
        fracs.append(f)
        inside &= ok
    if not inside.any():
        return out
    fracs = [f[inside] for f in fracs]
    nearest = tuple(np.minimum(np.floor(f + 0.5), a.size - 1).astype(np.int64) for f, a in zip(fracs, axes))
    own = values[nearest]
    covered = np.isfinite(own)
    if method == "nearest":
        res = own
    else:
        lo = [np.minimum(np.floor(f), a.size - 1).astype(np.int64) for f, a in zip(fracs, axes)]
        t = [f - l for f, l in zip(fracs, lo)]
        total = np.zeros(len(own))
        weight = np.zeros(len(own))
        for corner in range(2 ** len(axes)):
            idx, w = [], np.ones(len(own))
            for k, a in enumerate(axes):
                up = (corner >> k) & 1
                idx.append(np.minimum(lo[k] + up, a.size - 1))
                w = w * (t[k] if up else 1.0 - t[k])
            v = values[tuple(idx)]
            use = np.isfinite(v) & (w > 0.0)
            total[use] += w[use] * v[use]
            weight[use] += w[use]
        with np.errstate(invalid="ignore", divide="ignore"):
            res = total / weight
    res = np.where(covered, res, np.nan)
    out[inside] = res
    return out
