"""Self-describing cubes: CF-conventions NetCDF-4 and Zarr through xarray.

One dataset per output kind (``estimate``, ``summary``, ``realizations``),
laid out as the CF conventions (version 1.8) describe:

* dimensions ``(realization,) (z,) y, x``; coordinate variables ``x``, ``y``
  (``projection_x_coordinate`` / ``projection_y_coordinate``, metres, cell
  centres, ``y`` descending: north-up like the GeoTIFFs) and, in 3-D, ``z``
  (``height``, metres, positive up, level 0 lowest) with cell bounds;
* a grid-mapping variable ``spatial_ref`` carrying the CRS as CF attributes
  (:meth:`pyproj.CRS.to_cf`), as ``crs_wkt`` and as GDAL's ``spatial_ref`` and
  ``GeoTransform`` attributes, so GDAL, rasterio, QGIS and ArcGIS place the
  cube exactly where the GeoTIFFs of the same run lie; every data variable
  names it in ``grid_mapping``;
* per variable ``long_name`` and ``units``; NaN (``_FillValue``) outside the domain;
  float32, chunked (one realization and level per chunk at most 512 x 512
  nodes) and compressed (zlib level 4 with byte shuffle in NetCDF, the
  store's default codec in Zarr);
* global attributes ``Conventions = "CF-1.8"``, ``title``, ``source``
  (geosim and its version), ``comment`` (the caution), and the run's
  provenance (:func:`geosim.io.report.provenance`) each as ``geosim_<key>``.

Install with ``pip install "geosim[cube]"`` (NetCDF) or ``"geosim[zarr]"``.
"""
from __future__ import annotations

import os
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..cautions import CAUTION
from ..errors import InputError
from .atomic import atomic_output

__all__ = ["CF_VERSION", "CUBE_SUFFIX", "grid_coords", "grid_dataset", "summary_dataset", "realizations_dataset",
           "write_cube", "write_realization_cube", "cube_boxes", "read_cube_boxes", "read_cube_windows",
           "read_cube_values", "write_ensemble_cubes",
           "write_netcdf", "write_zarr", "open_cube", "block_model_table", "write_block_model",
           "summary_table_columns"]

CF_VERSION = "CF-1.8"
GRID_MAPPING = "spatial_ref"
CHUNK_XY = 512
#: the file suffix of each cube format
CUBE_SUFFIX = {"netcdf": ".nc", "zarr": ".zarr"}
#: realization cubes up to this size (float32) are stacked in memory rather than streamed through Dask
SMALL_CUBE_BYTES = 32 * 2**20


def _need(module: str, extra: str):
    import importlib
    try:
        return importlib.import_module(module)
    except ImportError:
        raise InputError(f"writing or reading cubes needs the optional package {module}",
                         fix=f'pip install "geosim[{extra}]"') from None


def grid_mapping_attrs(grid) -> dict[str, Any]:
    """CF grid-mapping attributes of the grid's CRS plus GDAL's ``spatial_ref`` and ``GeoTransform``."""
    t = grid.transform
    attrs: dict[str, Any] = {}
    if grid.crs is not None:
        attrs.update({k: v for k, v in grid.crs.to_cf().items() if v is not None})
        wkt = grid.crs.to_wkt()
        attrs["crs_wkt"] = wkt
        attrs["spatial_ref"] = wkt
    else:
        attrs["long_name"] = "local grid in metres, no CRS"
    attrs["GeoTransform"] = " ".join(repr(float(v)) for v in (t.c, t.a, t.b, t.f, t.d, t.e))
    return attrs


def grid_coords(grid) -> dict[str, Any]:
    """The coordinate variables of a grid as ``{name: (dims, values, attrs)}``."""
    axes = grid.axes()
    y, x = axes[-2], axes[-1]
    out = {
        "x": (("x",), x, {"standard_name": "projection_x_coordinate", "long_name": "x (east) of cell centre",
                          "units": "m", "axis": "X"}),
        "y": (("y",), y, {"standard_name": "projection_y_coordinate", "long_name": "y (north) of cell centre",
                          "units": "m", "axis": "Y"}),
    }
    if grid.ndim == 3:
        z = axes[0]
        out["z"] = (("z",), z, {"standard_name": "height", "long_name": "elevation of level centre",
                                "units": "m", "axis": "Z", "positive": "up", "bounds": "z_bounds"})
        out["z_bounds"] = (("z", "nv"), np.column_stack([z - grid.cell[2] / 2, z + grid.cell[2] / 2]), {})
    return out


def grid_dataset(grid, variables: Mapping[str, tuple], *, title: str,
                 provenance: Mapping[str, str] | None = None, realizations: Sequence[int] | None = None):
    """An :class:`xarray.Dataset` of grid variables with CF coordinates, grid mapping and attributes.

    Parameters
    ----------
    grid : geosim.Grid
    variables : mapping
        ``name -> (data, long_name, units)``; ``data`` has ``grid.shape``, or
        ``(len(realizations),) + grid.shape`` with ``realizations``; numpy or dask.
    title : str
        The dataset's title.
    provenance : mapping, optional
        The run's provenance strings, stored as ``geosim_<key>`` global attributes.
    realizations : sequence of int, optional
        Realization indices: adds the ``realization`` dimension.

    Examples
    --------
    >>> import numpy as np, geosim
    >>> from geosim.io.cube import grid_dataset
    >>> g = geosim.Grid(500000.0, 6000000.0, (10.0, 10.0), (2, 3), crs=geosim.crs.parse_crs(32633))
    >>> ds = grid_dataset(g, {"mean": (np.ones(g.shape), "mean grade", "g/t")}, title="demo")
    >>> ds["mean"].dims, ds["mean"].attrs["grid_mapping"], ds.x.values.tolist()
    (('y', 'x'), 'spatial_ref', [500005.0, 500015.0, 500025.0])
    """
    xr = _need("xarray", "cube")
    spatial = ("z", "y", "x")[3 - grid.ndim:]
    dims = (("realization",) if realizations is not None else ()) + spatial
    coords = {k: (d, v, a) for k, (d, v, a) in grid_coords(grid).items()}
    if realizations is not None:
        coords["realization"] = (("realization",), np.asarray(realizations, dtype=np.int32),
                                 {"long_name": "realization index (depends only on the seed and the index)"})
    data_vars = {}
    for name, (data, long_name, units) in variables.items():
        attrs = {"long_name": long_name, "grid_mapping": GRID_MAPPING}
        if units:
            attrs["units"] = units
        data_vars[name] = (dims, data, attrs)
    data_vars[GRID_MAPPING] = ((), np.int32(0), grid_mapping_attrs(grid))
    attrs = {"Conventions": CF_VERSION, "title": title, "comment": CAUTION}
    for key, value in (provenance or {}).items():
        if key == "caution":
            continue
        attrs["source" if key == "geosim_version" else f"geosim_{key}"] = (
            f"geosim {value}" if key == "geosim_version" else str(value))
    if "source" not in attrs:
        from .report import _version
        attrs["source"] = f"geosim {_version()}"
    attrs["caution"] = CAUTION
    ds = xr.Dataset(data_vars, coords=coords, attrs=attrs)
    return ds.set_coords([c for c in ("z_bounds",) if c in ds])


def _encoding(ds, netcdf: bool) -> dict:
    out = {}
    for name, var in ds.data_vars.items():
        if name == GRID_MAPPING:
            continue
        chunks = tuple(1 if d in ("realization", "z") else min(CHUNK_XY, n) for d, n in zip(var.dims, var.shape))
        enc: dict[str, Any] = {"dtype": "float32", "_FillValue": np.float32(np.nan)}
        if netcdf:
            enc.update({"zlib": True, "complevel": 4, "shuffle": True, "chunksizes": chunks})
        else:
            enc["chunks"] = chunks
        out[name] = enc
    for c in ("x", "y", "z", "z_bounds"):
        if c in ds.variables:
            out[c] = {"_FillValue": None}
    return out


def _local_dask():
    """Lazy reads run in this process, one at a time, even when a Dask client is active."""
    import contextlib
    try:
        import dask
    except ImportError:
        return contextlib.nullcontext()
    return dask.config.set(scheduler="synchronous")


def write_netcdf(path: str | os.PathLike, ds, *, overwrite: bool = False) -> Path:
    """Write a dataset of :func:`grid_dataset` as NetCDF-4 (classic data model off), atomically.

    Dask-backed variables are computed and written chunk by chunk, so a
    realization cube never sits in memory whole.
    """
    _need("netCDF4", "cube")
    with atomic_output(path, overwrite) as tmp, _local_dask():
        ds.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=_encoding(ds, True))
    return Path(path)


def write_zarr(path: str | os.PathLike, ds, *, overwrite: bool = False, region: Callable | None = None) -> Path:
    """Write a dataset of :func:`grid_dataset` as a Zarr store (a folder), atomically."""
    import shutil
    _need("zarr", "zarr")
    path = Path(path)
    if path.exists() and not overwrite:
        raise InputError("the output store already exists and would be overwritten", file=str(path),
                         fix="choose another name, remove it, or pass overwrite=True / --overwrite")
    tmp = path.with_name(f".{path.name}.partial")
    shutil.rmtree(tmp, ignore_errors=True)
    try:
        with _local_dask():
            ds.to_zarr(tmp, mode="w", encoding=_encoding(ds, False), consolidated=False)
        if path.exists():
            shutil.rmtree(path)
        os.replace(tmp, path)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return path


def open_cube(path: str | os.PathLike):
    """Open a cube geosim wrote (NetCDF or Zarr) with xarray, lazily."""
    xr = _need("xarray", "cube")
    path = Path(path)
    if path.is_dir():
        return xr.open_zarr(path, consolidated=False)
    return xr.open_dataset(path, engine="netcdf4")


def summary_variables(bands: np.ndarray, cutoffs: Sequence[float], units: str) -> tuple[dict, dict]:
    """Summary bands ``(5 + len(cutoffs), *grid.shape)`` as cube variables, and extra coordinates.

    The exceedance probabilities become one variable ``prob_above`` over a
    ``cutoff`` dimension, since cut-off values make poor variable names.
    """
    from ..summaries import SUMMARY_PERCENTILES
    u = f" ({units})" if units else ""
    out = {"mean": (bands[0], f"mean of realizations{u}", units),
           "std": (bands[1], f"standard deviation of realizations (divisor n){u}", units)}
    for j, p in enumerate(SUMMARY_PERCENTILES):
        out[f"P{p:g}"] = (bands[2 + j], f"P{p:g}: {p:g}% of realizations fall below{u}", units)
    coords = {}
    if len(cutoffs):
        out["prob_above"] = (bands[5:], "probability above the cut-off (fraction 0-1 of realizations)", "1")
        coords["cutoff"] = (("cutoff",), np.asarray(cutoffs, dtype=float),
                            {"long_name": "cut-off", **({"units": units} if units else {})})
    return out, coords


def summary_dataset(grid, bands: np.ndarray, cutoffs: Sequence[float], *, units: str = "",
                    provenance: Mapping[str, str] | None = None, title: str = "geosim ensemble summary"):
    """The summary cube: mean, std, P10, P50, P90 and ``prob_above(cutoff, ...)``."""
    variables, coords = summary_variables(np.asarray(bands), cutoffs, units)
    prob = variables.pop("prob_above", None)
    ds = grid_dataset(grid, variables, title=title, provenance=provenance)
    if prob is not None:
        spatial = ds["mean"].dims
        ds = ds.assign_coords({k: v for k, v in coords.items()})
        ds["prob_above"] = (("cutoff",) + spatial, prob[0],
                            {"long_name": prob[1], "units": prob[2], "grid_mapping": GRID_MAPPING})
    return ds


def add_layers(ds, layers: Mapping[str, tuple] | None):
    """``ds`` with fixed grid variables added (``name -> (array of the grid's shape, long_name, units)``),
    e.g. the unit code of every node beside realizations or summaries."""
    spatial = tuple(d for d in ("z", "y", "x") if d in ds.dims)
    for name, (data, long_name, units) in (layers or {}).items():
        attrs = {"long_name": long_name, "grid_mapping": GRID_MAPPING}
        if units:
            attrs["units"] = units
        ds[name] = (spatial, np.asarray(data), attrs)
    return ds


def realizations_dataset(grid, reader: Callable[[int], np.ndarray], indices: Sequence[int], *, name: str,
                         long_name: str, units: str = "", provenance: Mapping[str, str] | None = None):
    """The realization cube, read lazily one realization at a time (``reader(j)`` gives the j-th)."""
    da = _need("dask.array", "zarr")
    import dask
    parts = [da.from_delayed(dask.delayed(reader)(j), shape=grid.shape, dtype=np.float32)
             for j in range(len(indices))]
    chunks = (1,) + (1,) * (grid.ndim - 2) + tuple(min(CHUNK_XY, n) for n in grid.shape[-2:])
    stack = da.stack(parts).rechunk(chunks)
    return grid_dataset(grid, {name: (stack, long_name, units)}, realizations=indices,
                        title="geosim conditional realizations", provenance=provenance)


def write_cube(path: str | os.PathLike, ds, *, overwrite: bool = False) -> Path:
    """Write ``ds`` as NetCDF (``.nc``) or Zarr (``.zarr``), by the path's suffix."""
    if Path(path).suffix == ".zarr":
        return write_zarr(path, ds, overwrite=overwrite)
    return write_netcdf(path, ds, overwrite=overwrite)


# -- one realization per file -------------------------------------------------------------------

def write_realization_cube(path: str | os.PathLike, values: np.ndarray, grid, *, index: int, name: str,
                           long_name: str, units: str = "", provenance: Mapping[str, str] | None = None,
                           overwrite: bool = False) -> Path:
    """One realization of a 3-D grid as one NetCDF cube (the layout of :func:`grid_dataset`).

    What a worker writes per realization instead of one GeoTIFF per level: one
    file, one realization on the ``realization`` dimension, read back level by
    level (:func:`read_cube_windows`) to assemble the run's cubes.
    """
    data = np.asarray(values, dtype=np.float32)[None]
    ds = grid_dataset(grid, {name: (data, long_name, units)}, realizations=[int(index)],
                      title="geosim conditional realization", provenance=provenance)
    return write_netcdf(path, ds, overwrite=overwrite)


def _first_variable(ds):
    """The data variable of a per-realization cube (the one that is not the grid mapping)."""
    return next(v for n, v in ds.variables.items() if v.dimensions[:1] == ("realization",))


def read_cube_values(path: str | os.PathLike) -> np.ndarray:
    """The values of a cube of :func:`write_realization_cube` as float64 of the grid's shape (NaN outside)."""
    netCDF4 = _need("netCDF4", "cube")
    with netCDF4.Dataset(path) as ds:
        var = _first_variable(ds)
        var.set_auto_mask(False)
        return np.asarray(var[0], dtype=np.float64)


def cube_boxes(grid, nodes: int = 256 * 256) -> list[tuple[slice, ...]]:
    """Boxes ``(levels, rows, cols)`` of a 3-D grid (``(rows, cols)`` in 2-D) of at most about ``nodes``
    nodes that tile it: whole levels stacked while they fit, else windows of one level.

    Reading every realization one box at a time keeps memory at ``nodes`` values per
    realization, and reads a small grid (blocks, model cells) in one pass.
    """
    ny, nx = grid.shape[-2:]
    if ny * nx <= nodes:
        planes = [(slice(0, ny), slice(0, nx))]
        depth = max(1, nodes // (ny * nx))
    else:
        side = max(1, int(np.sqrt(nodes)))
        planes = [(slice(r, min(r + side, ny)), slice(c, min(c + side, nx)))
                  for r in range(0, ny, side) for c in range(0, nx, side)]
        depth = 1
    if grid.ndim == 2:
        return planes
    return [(slice(k, min(k + depth, grid.nz)),) + plane for k in range(0, grid.nz, depth) for plane in planes]


def read_cube_boxes(paths: Sequence[str | os.PathLike], boxes: Sequence[tuple[slice, ...]]) -> Any:
    """Every cube's values in one box at a time: ``(box, stack (len(paths), *box shape) float32)``.

    The counterpart of :func:`geosim.io.geotiff.read_windows` for files of
    :func:`write_realization_cube`; ``boxes`` as from :func:`cube_boxes`.
    Memory is one box of every file.
    """
    netCDF4 = _need("netCDF4", "cube")
    for box in boxes:
        stack = np.empty((len(paths),) + tuple(b.stop - b.start for b in box), dtype=np.float32)
        for i, p in enumerate(paths):
            with netCDF4.Dataset(p) as ds:
                var = _first_variable(ds)
                var.set_auto_mask(False)
                stack[i] = var[(0,) + box]
        yield box, stack


def read_cube_windows(paths: Sequence[str | os.PathLike], level: int | None,
                      windows: Callable[[], Any]) -> Any:
    """:func:`read_cube_boxes` of the rasterio windows ``windows()`` of one level (None in 2-D), as
    ``(window, stack (len(paths), h, w))``: the call form of :func:`geosim.io.geotiff.read_windows`."""
    wins = list(windows())
    boxes = [((slice(level, level + 1),) if level is not None else ())
             + (slice(w.row_off, w.row_off + w.height), slice(w.col_off, w.col_off + w.width)) for w in wins]
    for w, (_, stack) in zip(wins, read_cube_boxes(paths, boxes)):
        yield w, stack.reshape(len(paths), w.height, w.width)


def write_ensemble_cubes(folder: str | os.PathLike, grid, suffix: str, *, bands: np.ndarray,
                         cutoffs: Sequence[float], reader: Callable[[int], np.ndarray], indices: Sequence[int],
                         name: str, long_name: str, units: str = "", provenance: Mapping[str, str] | None = None,
                         overwrite: bool = False, layers: Mapping[str, tuple] | None = None) -> dict[str, list[str]]:
    """A run's ``summary`` and ``realizations`` cubes (``suffix`` ``.nc`` or ``.zarr``) in ``folder``.

    ``bands`` are the summary bands (:func:`geosim.summaries.summary_bands`) of
    the grid; ``reader(j)`` gives the j-th realization, read when that chunk is
    written (all at once when they take at most :data:`SMALL_CUBE_BYTES`); ``layers`` are added to both
    (:func:`add_layers`).  Returns ``{"summary_cube": [path], "realizations_cube": [path]}``.
    """
    folder = Path(folder)
    summary = write_cube(folder / f"summary{suffix}", add_layers(summary_dataset(
        grid, bands, cutoffs, units=units, provenance=provenance), layers), overwrite=overwrite)
    if len(indices) * grid.size * 4 <= SMALL_CUBE_BYTES:  # blocks, model cells: no task graph
        stack = grid_dataset(grid, {name: (np.stack([reader(j) for j in range(len(indices))]), long_name, units)},
                             realizations=indices, title="geosim conditional realizations", provenance=provenance)
    else:
        stack = realizations_dataset(grid, reader, indices, name=name, long_name=long_name, units=units,
                                     provenance=provenance)
    realizations = write_cube(folder / f"realizations{suffix}", add_layers(stack, layers), overwrite=overwrite)
    return {"summary_cube": [str(summary)], "realizations_cube": [str(realizations)]}


# -- block model table --------------------------------------------------------------------------

def block_model_columns(grid, variables: Sequence[tuple[str, str, str]]):
    """The :class:`geosim.io.csvw.Column` list of a block-model table."""
    from .csvw import Column
    cols = [Column("x", "x (east) of the block centroid", unit="m"),
            Column("y", "y (north) of the block centroid", unit="m")]
    if grid.ndim == 3:
        cols.append(Column("z", "z (elevation) of the block centroid", unit="m"))
    cols += [Column("dx", "block size along x", unit="m"), Column("dy", "block size along y", unit="m")]
    if grid.ndim == 3:
        cols.append(Column("dz", "block size along z", unit="m"))
    cols += [Column(name, description, unit=unit) for name, description, unit in variables]
    return cols


def summary_table_columns(bands: np.ndarray, cutoffs: Sequence[float], units: str,
                          layers: Mapping[str, tuple] | None = None) -> dict[str, tuple[np.ndarray, str, str]]:
    """Block-model columns of the summary bands: mean, std, P10, P50, P90, the ``layers`` (e.g. unit
    codes, as :func:`add_layers` takes them) and ``prob_above_<cut-off>``."""
    variables, _ = summary_variables(bands, cutoffs, units)
    variables.pop("prob_above", None)
    table = dict(variables)
    table.update(layers or {})
    for c, band in zip(cutoffs, bands[5:]):
        table[f"prob_above_{c:g}"] = (band, f"probability above {c:g} (fraction 0-1 of realizations)", "")
    return table


def block_model_table(grid, variables: Mapping[str, tuple[np.ndarray, str, str]]):
    """Columns and rows of the active blocks, sorted by z, then y, then x (all ascending).

    ``variables`` maps a column name to ``(array of grid.shape, description, unit)``.
    Returns ``(columns, data)`` with ``data`` a dict of 1-D arrays in row order.
    """
    xyz = grid.coords()
    order = np.lexsort(tuple(xyz[:, a] for a in range(grid.ndim)))  # last key (z, or y) sorts first
    data = {"x": xyz[order, 0], "y": xyz[order, 1]}
    if grid.ndim == 3:
        data["z"] = xyz[order, 2]
    n = len(order)
    for a, name in enumerate(("dx", "dy", "dz")[:grid.ndim]):
        data[name] = np.full(n, grid.cell[a])
    mask = grid.mask
    for name, (values, _, _) in variables.items():
        data[name] = np.asarray(values)[mask][order]
    columns = block_model_columns(grid, [(k, d, u) for k, (_, d, u) in variables.items()])
    return columns, data


def write_block_model(path: str | os.PathLike, grid, variables: Mapping[str, tuple[np.ndarray, str, str]], *,
                      provenance: Mapping[str, str] | None = None, overwrite: bool = False) -> Path:
    """Write the block-model table as CSV (with its CSVW sidecar) or Parquet, by the path's suffix.

    Parquet files carry the caution and provenance as key-value metadata of the
    file (``geosim:caution``, ``geosim:<key>``) and each column's description
    and unit as field metadata (``description``, ``unit``).
    """
    from .csvw import write_csv_table
    columns, data = block_model_table(grid, variables)
    notes = ["one row per active block (grid node), sorted by z, then y, then x, ascending; "
             "x, y, z are block centroids; empty cells: the statistic is undefined"]
    if Path(path).suffix == ".parquet":
        return _write_parquet(path, columns, data, provenance or {}, notes, overwrite)
    return write_csv_table(path, columns, data, title="geosim block model", provenance=provenance,
                           notes=notes, primary_key=[c.name for c in columns[:grid.ndim]], overwrite=overwrite)


def _write_parquet(path, columns, data, provenance, notes, overwrite) -> Path:
    pa = _need("pyarrow", "vector")
    pq = _need("pyarrow.parquet", "vector")
    fields = []
    for c in columns:
        meta = {"description": c.description}
        if c.unit:
            meta["unit"] = c.unit
        fields.append(pa.field(c.name, pa.float64(), metadata=meta))
    meta = {"geosim:caution": CAUTION, "geosim:title": "geosim block model", "geosim:notes": " ".join(notes)}
    meta.update({f"geosim:{k}": str(v) for k, v in provenance.items() if k != "caution"})
    table = pa.table([pa.array(data[c.name], type=pa.float64()) for c in columns],
                     schema=pa.schema(fields, metadata=meta))
    with atomic_output(path, overwrite) as tmp:
        pq.write_table(table, tmp, compression="zstd")
    return Path(path)


def raster_dataset(paths: Sequence[str | os.PathLike], kind: str):
    """GeoTIFF outputs (one file, or one per level) read into the layout of :func:`grid_dataset`.

    ``kind`` is ``"summary"`` (bands mean, std, P10, P50, P90, P(>c)...),
    ``"realizations"`` (band i = realization i) or ``"estimate"``.
    """
    import rasterio
    from pyproj import CRS

    from ..grid import Grid
    levels = []
    for p in paths:
        with rasterio.open(p) as src:
            levels.append((src.read().astype(np.float64), src.descriptions, src.tags(), src.transform, src.crs,
                           [src.tags(b + 1).get("units", "") for b in range(src.count)]))
    data, descriptions, tags, t, crs, units = levels[0]
    nb, ny, nx = data.shape
    if len(levels) > 1:
        zs = [(float(lv[2]["z_bottom"]), float(lv[2]["z_top"])) for lv in levels]
        grid = Grid(t.c, t.f + t.e * ny, (t.a, -t.e, zs[0][1] - zs[0][0]), (len(levels), ny, nx),
                    CRS.from_wkt(crs.to_wkt()) if crs else None, zmin=zs[0][0])
        stack = np.stack([lv[0] for lv in levels], axis=1)  # bands, z, y, x
    else:
        grid = Grid(t.c, t.f + t.e * ny, (t.a, -t.e), (ny, nx), CRS.from_wkt(crs.to_wkt()) if crs else None)
        stack = data
    provenance = {k: v for k, v in tags.items() if k not in ("level", "z_bottom", "z_top")}
    unit = next((u for u in units if u and u != "fraction"), "")
    if kind == "summary":
        import re
        cutoffs = [float(m.group(1)) for d in descriptions[5:]
                   if (m := re.match(r"probability above (\S+)", d or ""))]
        return summary_dataset(grid, stack, cutoffs, units=unit, provenance=provenance)
    if kind == "realizations":
        return grid_dataset(grid, {"realization": (stack, "conditional realization", unit)},
                            realizations=list(range(nb)), title="geosim conditional realizations",
                            provenance=provenance)
    names = ("mean", "std", "score", "score_variance")
    return grid_dataset(grid, {n: (stack[b], descriptions[b] or n, units[b]) for b, n in enumerate(names[:nb])},
                        title="geosim kriging estimate", provenance=provenance)
