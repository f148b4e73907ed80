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
  nodes) and compressed (zlib with byte shuffle in NetCDF, level 4; the store's
  default codec in Zarr), except the NetCDF realization cube: uncompressed unless
  a zlib level is asked for (its simulated noise compresses little), and its
  ``geosim_storage`` attribute says which;
* global attributes ``Conventions = "CF-1.8"``, ``title``, ``source``
  (geosim and its version), ``comment`` (the caution), and the run's
  provenance (:func:`geosim.io.report.provenance`) each as ``geosim_<key>``.

Install with ``pip install "geosim[cube]"`` (NetCDF) or ``"geosim[zarr]"``.
"""
from __future__ import annotations

import os
from collections.abc import Callable, Collection, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..cautions import CAUTION
from ..errors import InputError
from .atomic import atomic_output

__all__ = ["CF_VERSION", "CUBE_SUFFIX", "grid_coords", "grid_dataset", "summary_dataset", "write_summary_cube",
           "add_layers", "write_cube", "cube_boxes", "write_netcdf", "write_zarr", "open_cube",
           "RealizationStore", "realization_sha256", "stored_realization_ok", "block_model_table",
           "write_block_model", "summary_table_columns"]

CF_VERSION = "CF-1.8"
GRID_MAPPING = "spatial_ref"
CHUNK_XY = 512
#: zlib level of NetCDF cubes, and of the NetCDF realization cube (0: uncompressed).  Float32 simulation
#: noise compresses little at any level: 1 million nodes x 100 realizations take 400 MB uncompressed,
#: 331 MB at level 1 (348 MB without the byte shuffle) and 325 MB at level 4, and writing the cube
#: from the realization store took 2.4 s of CPU uncompressed against 9.5 s at level 1
#: (tests/benchmarks/bench_blockmodel.py's case).  A cube a fifth larger written four times faster.
COMPLEVEL, REALIZATION_COMPLEVEL = 4, 0
#: the file suffix of each cube format
CUBE_SUFFIX = {"netcdf": ".nc", "zarr": ".zarr"}


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


def _encoding(ds, netcdf: bool, complevel: int = COMPLEVEL) -> dict:
    out = {}
    for name, var in ds.data_vars.items():
        if name == GRID_MAPPING:
            continue
        chunks = tuple(1 if d in ("realization", "z") else min(CHUNK_XY, n) for d, n in zip(var.dims, var.shape))
        enc: dict[str, Any] = {"dtype": "float32", "_FillValue": np.float32(np.nan)}
        if netcdf:
            enc.update({"zlib": complevel > 0, "shuffle": complevel > 0, "chunksizes": chunks})
            if complevel > 0:
                enc["complevel"] = complevel
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


def write_netcdf(path: str | os.PathLike, ds, *, overwrite: bool = False, complevel: int = COMPLEVEL) -> Path:
    """Write a dataset of :func:`grid_dataset` as NetCDF-4 (classic data model off), atomically.

    Dask-backed variables are computed and written chunk by chunk, so a
    realization cube never sits in memory whole; ``complevel`` is the zlib level (with byte
    shuffle), 0 for none.
    """
    _need("netCDF4", "cube")
    with atomic_output(path, overwrite) as tmp, _local_dask():
        ds.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=_encoding(ds, True, complevel))
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
    """Open a cube geosim wrote (NetCDF or Zarr) with xarray, lazily.

    A realization store still being filled (or left by an interrupted run) is
    refused: its ``geosim_complete`` attribute is not ``"yes"``.
    """
    xr = _need("xarray", "cube")
    path = Path(path)
    if path.is_dir():
        ds = xr.open_zarr(path, consolidated=False)
        if ds.attrs.get(COMPLETE_ATTR, "yes") != "yes":
            ds.close()
            raise InputError("the Zarr store is not finished: a run is still writing it, or was interrupted",
                             file=str(path), fix="wait for the run to end, or re-run it with the same spec "
                                                 "and folder to complete the store")
        return ds
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


def write_summary_cube(path: str | os.PathLike, grid, bands: np.ndarray, cutoffs: Sequence[float], *,
                       units: str = "", provenance: Mapping[str, str] | None = None,
                       layers: Mapping[str, tuple] | None = None, overwrite: bool = False) -> Path:
    """Write the summary cube (:func:`summary_dataset` of ``bands`` with ``layers``, :func:`add_layers`)
    as NetCDF or Zarr, by the path's suffix (:func:`write_cube`)."""
    ds = add_layers(summary_dataset(grid, bands, cutoffs, units=units, provenance=provenance), layers)
    return write_cube(path, ds, overwrite=overwrite)


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


# -- the realization store: one chunked Zarr store that workers fill in parallel ----------------

#: Side of a store chunk in cells: one level of one realization per chunk at most this wide, so no
#: two writers ever share a chunk.
STORE_CHUNK = 256
#: Root attribute of a realization store: "no" while realizations are written, "yes" once finished.
COMPLETE_ATTR = "geosim_complete"
#: Root attribute naming the run (its resume key) whose realizations a store holds.
RUN_KEY_ATTR = "geosim_run_key"
#: Root attribute naming the store's data variable.
VARIABLE_ATTR = "geosim_variable"
#: Per-realization completion flag, set after the realization's chunks.
MARKER = "realization_complete"
#: zstd level of the realization store's chunks.
STORE_ZSTD_LEVEL = 1


def realization_sha256(values: np.ndarray) -> str:
    """SHA-256 of one realization as a store holds it (float32, C order, every NaN the same NaN)."""
    import hashlib
    return hashlib.sha256(_one_nan(np.asarray(values, dtype=np.float32))).hexdigest()


def _one_nan(a: np.ndarray) -> np.ndarray:
    """``a`` (float32) C-contiguous with every NaN the one NaN ``np.float32(np.nan)``."""
    return np.ascontiguousarray(np.where(np.isnan(a), np.float32(np.nan), a))


def _chunk_codec(meta: Mapping, dtype) -> Any:
    """The numcodecs zstd codec of a Zarr (v3) array whose chunks :func:`_write_chunks` may write
    itself: regular chunks, the default chunk keys (``c/i/j/...``), little-endian bytes then zstd,
    nothing else; ``None`` for any other layout (zarr then writes)."""
    codecs = list(meta.get("codecs") or [])
    if (meta.get("zarr_format") != 3 or meta.get("node_type") != "array" or meta.get("data_type") != np.dtype(dtype).name
            or meta.get("storage_transformers") or (meta.get("chunk_grid") or {}).get("name") != "regular"
            or meta.get("chunk_key_encoding") != {"name": "default", "configuration": {"separator": "/"}}
            or len(codecs) != 2 or codecs[0].get("name") != "bytes"
            or (codecs[0].get("configuration") or {}).get("endian", "little") != "little"
            or codecs[1].get("name") != "zstd"):
        return None
    from numcodecs import Zstd
    config = codecs[1].get("configuration") or {}
    return Zstd(level=int(config.get("level", 0)), checksum=bool(config.get("checksum", False)))


def _chunk_layout(folder: Path, dtype) -> tuple[Any, tuple[int, ...], tuple[int, ...], Any] | None:
    """``(codec, shape, chunk shape, fill value)`` of the Zarr array in ``folder`` when its chunk files
    can be written and read directly (:func:`_chunk_codec`, one realization per chunk), else ``None``."""
    import json
    try:
        meta = json.loads((folder / "zarr.json").read_text())
    except (OSError, ValueError):
        return None
    codec = _chunk_codec(meta, dtype)
    if codec is None:
        return None
    shape, chunk = tuple(meta["shape"]), tuple(meta["chunk_grid"]["configuration"]["chunk_shape"])
    if chunk[0] != 1:
        return None
    fill = meta.get("fill_value")
    return codec, shape, chunk, np.nan if fill == "NaN" else fill


def _write_chunks(folder: Path, index: int, block: np.ndarray) -> bool:
    """Write ``block`` as element ``index`` of the first axis of the Zarr array in ``folder``, chunk by
    chunk, the bytes zarr itself writes; ``False`` (nothing written) when the array's layout is not
    one :func:`_chunk_codec` knows.

    Why: zarr's own write of a realization runs every chunk through its asynchronous machinery,
    about a millisecond of CPU a chunk, several times the compression itself.  The layout is
    the Zarr v3 specification's: a chunk ``c/<index>/<j>/<k>...`` is the chunk's values in C
    order, little-endian, padded with the fill value past the array's edge, compressed with
    zstd; a chunk holding only the fill value is not stored (zarr's default,
    ``write_empty_chunks = False``).  Each chunk file is replaced atomically, as zarr does.
    """
    import contextlib
    import uuid
    layout = _chunk_layout(folder, block.dtype)
    if layout is None:
        return False
    codec, shape, chunk, fill = layout
    if shape[1:] != block.shape or not 0 <= index < shape[0]:
        return False
    counts = [-(-n // c) for n, c in zip(block.shape, chunk[1:])]
    token = uuid.uuid4().hex  # one per call: the chunk names already differ
    for pos in np.ndindex(*counts):
        box = tuple(slice(p * c, min((p + 1) * c, n)) for p, c, n in zip(pos, chunk[1:], block.shape))
        part = block[box]
        key = os.path.join(folder, "c", str(int(index)), *map(str, pos))
        if (np.isnan(part).all() if fill is np.nan else (part == fill).all()):
            with contextlib.suppress(FileNotFoundError):
                os.unlink(key)
            continue
        if part.shape != chunk[1:]:  # an edge chunk: padded to the whole chunk with the fill value
            whole = np.full(chunk[1:], fill, dtype=block.dtype)
            whole[tuple(slice(0, n) for n in part.shape)] = part
            part = whole
        data = codec.encode(np.ascontiguousarray(part, dtype=block.dtype.newbyteorder("<")))
        head, name = os.path.split(key)
        partial = os.path.join(head, f".{name}.{token}.partial")
        try:
            try:
                f = open(partial, "wb")
            except FileNotFoundError:  # the chunk's folder is made by its first write
                os.makedirs(head, exist_ok=True)
                f = open(partial, "wb")
            with f:
                f.write(data)
            os.replace(partial, key)
        except BaseException:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(partial)
            raise
    return True


def _chunk_reader(folder: Path, dtype) -> Callable[[Sequence[int], tuple[slice, ...]], np.ndarray] | None:
    """``read(indices, box) -> (len(indices), *box shape)`` array of the Zarr array in ``folder``, read
    chunk file by chunk file (the reverse of :func:`_write_chunks`); ``None`` when the array's layout
    is not one :func:`_chunk_codec` knows (zarr then reads).

    Why: zarr's read of a box of every realization goes through its asynchronous machinery chunk by
    chunk, about 2.6 s of CPU for the 5,000 chunks of a million nodes x 100 realizations, several
    times the decompression itself.  A missing chunk holds only the fill value.
    """
    layout = _chunk_layout(folder, dtype)
    if layout is None:
        return None
    codec, shape, chunk, fill = layout
    stored = np.dtype(dtype).newbyteorder("<")

    def read(indices: Sequence[int], box: tuple[slice, ...]) -> np.ndarray:
        spans = [range(*s.indices(n)) for s, n in zip(box, shape[1:])]
        if any(r.step != 1 for r in spans):
            raise ValueError(f"boxes are read with unit steps, got {box}")
        out = np.empty((len(indices),) + tuple(len(r) for r in spans), dtype=dtype)  # every cell is set below
        firsts = [r.start // c for r, c in zip(spans, chunk[1:])]
        lasts = [(r.stop - 1) // c if len(r) else r.start // c - 1 for r, c in zip(spans, chunk[1:])]
        for pos in np.ndindex(*[b - a + 1 for a, b in zip(firsts, lasts)]):
            pos = [a + p for a, p in zip(firsts, pos)]
            # the part of this chunk inside the box: where it lies in the chunk and in the output
            lo = [max(r.start, p * c) for r, p, c in zip(spans, pos, chunk[1:])]
            hi = [min(r.stop, (p + 1) * c) for r, p, c in zip(spans, pos, chunk[1:])]
            inner = tuple(slice(a - p * c, b - p * c) for a, b, p, c in zip(lo, hi, pos, chunk[1:]))
            where = tuple(slice(a - r.start, b - r.start) for a, b, r in zip(lo, hi, spans))
            for k, i in enumerate(indices):
                try:
                    with open(os.path.join(folder, "c", str(int(i)), *map(str, pos)), "rb") as f:
                        data = f.read()
                except FileNotFoundError:  # a chunk of the fill value only
                    out[(k,) + where] = fill
                    continue
                values = np.frombuffer(codec.decode(data), dtype=stored).reshape(chunk[1:])
                out[(k,) + where] = values[inner]
        return out
    return read


def _open_group(path: str | os.PathLike, mode: str = "r"):
    zarr = _need("zarr", "zarr")
    return zarr.open_group(str(path), mode=mode)


def stored_realization_ok(path: str | os.PathLike, index: int, sha256: str, run_key: str) -> bool:
    """Whether the store at ``path`` belongs to the run ``run_key``, marks realization ``index``
    complete and holds data with ``sha256`` for it (what a resumed run checks before keeping it)."""
    try:
        group = _open_group(path)
        if group.attrs.get(RUN_KEY_ATTR) != run_key:
            return False
        marker = group[MARKER]
        if not 0 <= index < marker.shape[0] or not marker[int(index)]:
            return False
        return realization_sha256(np.asarray(group[group.attrs[VARIABLE_ATTR]][int(index)])) == sha256
    except Exception:  # missing, unreadable, another layout: nothing to keep
        return False


class _BoxArray:
    """A read-only float32 array over a realization store, read box by box (:meth:`RealizationStore.box`),
    for :func:`dask.array.from_array`: ``shape`` is ``(realizations, *grid.shape)``."""

    def __init__(self, shape: tuple[int, ...], read: Callable[[list[int], tuple[slice, ...]], np.ndarray]):
        self.shape = tuple(shape)
        self.ndim = len(self.shape)
        self.dtype = np.dtype(np.float32)
        self._read = read

    def __getitem__(self, key) -> np.ndarray:
        key = key if isinstance(key, tuple) else (key,)
        key = key + (slice(None),) * (self.ndim - len(key))
        boxes, picks = [], []
        for k, n in zip(key, self.shape):  # the box around the key, then the key inside it
            if isinstance(k, slice) and k.indices(n)[2] == 1:
                start, stop, _ = k.indices(n)
                boxes.append(slice(start, max(start, stop)))
                picks.append(slice(None))
            elif isinstance(k, slice):
                boxes.append(slice(0, n))
                picks.append(k)
            else:
                k = range(n)[int(k)]
                boxes.append(slice(k, k + 1))
                picks.append(0)
        return self._read(list(range(boxes[0].start, boxes[0].stop)), tuple(boxes[1:]))[tuple(picks)]


class RealizationStore:
    """The realizations of a run in one chunked Zarr store, written in parallel by the workers.

    The layout is the realization cube's (:func:`grid_dataset`: dimensions
    ``realization, (z,) y, x``, CF coordinates, the ``spatial_ref`` grid mapping,
    caution and provenance as global attributes), with chunks of one level of one
    realization at most :data:`STORE_CHUNK` cells square.  Each realization is
    written by one worker as whole chunks, so no two writers share a chunk and no
    lock is needed; after its chunks, the worker sets its element of the
    ``realization_complete`` variable (one chunk per realization: 0 until then, 1
    after).  A resumed run keeps the realizations marked complete whose data still
    have the SHA-256 their record gives (:func:`stored_realization_ok`).  The root
    attribute ``geosim_complete`` is ``"no"`` while the store is being filled and
    ``"yes"`` once :meth:`finish` found every realization complete: :func:`open_cube`
    refuses a store that is not finished.

    The object holds only paths and small metadata, so it travels to workers
    (process pool or Dask) with the sink; the store must lie on a file system
    every worker sees.

    Parameters
    ----------
    path : path
        The store (a folder, ``.zarr``).
    grid : geosim.Grid
    name, long_name, units : str
        The data variable's name, ``long_name`` and ``units``.
    provenance : mapping, optional
        Provenance strings (global attributes ``geosim_<key>``).
    run_key : str
        Identifies the run whose realizations the store holds (the resume key): a
        store of another run is replaced, never continued.
    chunk : int
        Side of a chunk in cells (:data:`STORE_CHUNK`).

    Examples
    --------
    >>> import pathlib, tempfile, numpy as np, geosim
    >>> from geosim.io.cube import RealizationStore, open_cube
    >>> g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (3, 4))
    >>> store = RealizationStore(pathlib.Path(tempfile.mkdtemp()) / "r.zarr", g, name="k", long_name="k")
    >>> store.open(2)
    >>> sha = [store.write(i, np.full(g.shape, float(i))) for i in range(2)]
    >>> store.finish([0, 1])
    >>> ds = open_cube(store.path)
    >>> ds["k"].dims, ds["k"].values[:, 0, 0].tolist(), ds.attrs["geosim_complete"]
    (('realization', 'y', 'x'), [0.0, 1.0], 'yes')
    """

    def __init__(self, path: str | os.PathLike, grid, *, name: str, long_name: str, units: str = "",
                 provenance: Mapping[str, str] | None = None, run_key: str = "", chunk: int = STORE_CHUNK):
        self.path = Path(path)
        self.chunk = int(chunk)
        self.grid = grid
        self.name = name
        self.long_name = long_name
        self.units = units
        self.provenance = dict(provenance or {})
        self.run_key = run_key

    def __repr__(self) -> str:
        return f"RealizationStore({str(self.path)!r}, {self.name!r})"

    @property
    def chunks(self) -> tuple[int, ...]:
        """Chunk shape: one realization, one level, at most ``chunk`` cells square."""
        return (1,) + (1,) * (self.grid.ndim - 2) + tuple(min(self.chunk, n) for n in self.grid.shape[-2:])

    def matches(self) -> bool:
        """Whether the store on disk is this run's, on this grid."""
        try:
            group = _open_group(self.path)
            return (group.attrs.get(RUN_KEY_ATTR) == self.run_key
                    and tuple(group[self.name].shape[1:]) == tuple(self.grid.shape))
        except Exception:  # missing, unreadable, another layout: not this run's
            return False

    def open(self, n_realizations: int, *, keep: Collection[int] = ()) -> None:
        """Make the store ready for ``n_realizations`` (called once, by the main process, before the workers).

        The realizations in ``keep`` (verified by a resumed run) stay as they are in a
        store of this run, whose realization dimension is resized to ``n_realizations``
        (an extended run); every other realization is marked not complete, so one
        rewritten by this run counts only once its chunks are all in again.  Without
        ``keep``, or when the store is another run's, it is created empty.
        """
        import shutil
        n = int(n_realizations)
        keep = {int(i) for i in keep}
        if keep and self.matches():
            group = _open_group(self.path, "r+")
            if group[self.name].shape[0] != n:
                for var in (self.name, MARKER, "realization"):
                    group[var].resize((n,) + tuple(group[var].shape[1:]))
                group["realization"][:] = np.arange(n, dtype=np.int32)
            flags = np.asarray(group[MARKER][:])
            redo = np.array([i not in keep for i in range(n)])
            if (flags[redo] != 0).any():
                group[MARKER][:] = np.where(redo, 0, flags).astype(np.uint8)
            group.attrs[COMPLETE_ATTR] = "no"
            return
        shutil.rmtree(self.path, ignore_errors=True)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        da = _need("dask.array", "zarr")
        # lazy arrays that are never computed: only the metadata is written, so one dask chunk
        # each (the store's chunks are set by the encoding) spares building a graph of a task per
        # stored chunk, seconds on a large grid
        data = da.zeros((n,) + tuple(self.grid.shape), chunks=-1, dtype=np.float32)
        ds = grid_dataset(self.grid, {self.name: (data, self.long_name, self.units)}, realizations=range(n),
                          title="geosim conditional realizations", provenance=self.provenance)
        ds[MARKER] = (("realization",), da.zeros(n, chunks=-1, dtype=np.uint8),
                      {"long_name": "realization written completely (its chunks are all in the store)",
                       "flag_values": np.array([0, 1], dtype=np.uint8), "flag_meanings": "no yes"})
        ds.attrs.update({COMPLETE_ATTR: "no", RUN_KEY_ATTR: self.run_key, VARIABLE_ATTR: self.name})
        encoding = _encoding(ds.drop_vars(MARKER), False)
        encoding[self.name]["chunks"] = self.chunks
        # zstd at level 1: a fifth of the default level's encoding time for every realization a
        # worker writes, at a size within 3 % of it (simulated values are mostly noise)
        encoding[self.name]["compressors"] = (_need("zarr.codecs", "zarr").ZstdCodec(level=STORE_ZSTD_LEVEL),)
        encoding[MARKER] = {"chunks": (1,), "_FillValue": None}
        with _local_dask():
            ds.to_zarr(self.path, mode="w", compute=False, encoding=encoding, consolidated=False, safe_chunks=False)

    def write(self, index: int, values: np.ndarray) -> str:
        """Write realization ``index`` (its whole chunks), then mark it complete; returns its SHA-256.

        The chunks are written directly (:func:`_write_chunks`, the bytes zarr writes) when the
        store has the layout :meth:`open` makes, else through zarr."""
        import hashlib
        a = np.asarray(values, dtype=np.float32)
        if a.shape != tuple(self.grid.shape):
            raise ValueError(f"realization {index} has shape {a.shape}, the store's grid {self.grid.shape}")
        # one NaN for every empty node: a NaN's sign and payload can vary between machines and code
        # paths, and the cubes made from the store must not
        a = _one_nan(a)
        if not self.path.is_dir():  # a worker never creates the store: it would race the others
            raise ValueError(f"the realization store {self.path} is not open: call open(n_realizations) (or the "
                             "writer's open_stores) before the realizations are written")
        i = int(index)
        if not _write_chunks(self.path / self.name, i, a):
            _open_group(self.path, "r+")[self.name][i] = a
        # after the data: a realization marked complete is all there
        if not _write_chunks(self.path / MARKER, i, np.ones((), dtype=np.uint8)):
            _open_group(self.path, "r+")[MARKER][i] = 1
        return hashlib.sha256(a).hexdigest()

    def read(self, index: int) -> np.ndarray:
        """Realization ``index`` as stored (float32, ``grid.shape``), read as :meth:`box` reads.

        Only the array's own files are read (not the store's root metadata, which
        :meth:`add_layers` may be rewriting meanwhile)."""
        return self.box([int(index)], tuple(slice(0, n) for n in self.grid.shape))[0]

    def complete(self) -> np.ndarray:
        """Per realization: whether it was written completely (empty when there is no store)."""
        try:
            return np.asarray(_open_group(self.path)[MARKER][:]).astype(bool)
        except Exception:  # no store (yet), or not one of ours
            return np.zeros(0, dtype=bool)

    def box(self, indices: Sequence[int], box: tuple[slice, ...], *, zarr_only: bool = False) -> np.ndarray:
        """The values of every realization of ``indices`` in ``box`` (``(levels,) rows, cols`` slices, as
        :func:`cube_boxes` gives them): ``(len(indices), *box shape)`` float32.

        Read chunk file by chunk file (:func:`_chunk_reader`) when the store has the layout
        :meth:`open` makes, else (or with ``zarr_only``) through zarr."""
        return self._reader(zarr_only)([int(i) for i in indices], tuple(box))

    def boxes(self, indices: Sequence[int], boxes: Sequence[tuple[slice, ...]]) -> Iterator:
        """:meth:`box` of each of ``boxes`` in turn: ``(box, stack)``; memory is one box of every realization."""
        read = self._reader()
        indices = [int(i) for i in indices]
        for b in boxes:
            yield b, read(indices, tuple(b))

    def _reader(self, zarr_only: bool = False) -> Callable[[list[int], tuple[slice, ...]], np.ndarray]:
        """The reader of :meth:`box`."""
        read = None if zarr_only else _chunk_reader(self.path / self.name, np.float32)
        if read is not None:
            return read
        array = _open_group(self.path)[self.name]

        def read_zarr(indices: list[int], box: tuple[slice, ...]) -> np.ndarray:
            if indices and indices == list(range(indices[0], indices[0] + len(indices))):
                return np.asarray(array[(slice(indices[0], indices[0] + len(indices)),) + box])
            return np.stack([np.asarray(array[(i,) + box]) for i in indices])
        return read_zarr

    def finish(self, indices: Sequence[int]) -> None:
        """Check every realization of ``indices`` is complete and mark the store finished."""
        done = self.complete()
        missing = [i for i in indices if not (0 <= i < done.size and done[i])]
        if missing:
            raise InputError(f"{len(missing)} realization(s) are not complete in the store: "
                             + ", ".join(map(str, missing[:10])) + (" ..." if len(missing) > 10 else ""),
                             file=str(self.path), fix="re-run the same command to compute them")
        _open_group(self.path, "r+").attrs[COMPLETE_ATTR] = "yes"

    def dataset(self):
        """The store's realizations as a lazy :class:`xarray.Dataset` in the cube layout (no marker, no run key).

        The dask array over the store has a fixed name, so a cube written from it is
        written in the same order, and is the same file byte for byte, whichever
        folder or machine the store is in.
        """
        da = _need("dask.array", "zarr")
        array = _BoxArray((_open_group(self.path)[self.name].shape[0],) + tuple(self.grid.shape), self._reader())
        # one dask chunk holds a stored chunk's cells of every realization: one read of many chunks
        # instead of a task per chunk (at most 256 x 256 cells per realization)
        data = da.from_array(array, chunks=(array.shape[0],) + self.chunks[1:], name=f"geosim-store-{self.name}",
                             lock=False)
        return grid_dataset(self.grid, {self.name: (data, self.long_name, self.units)},
                            realizations=range(array.shape[0]), title="geosim conditional realizations",
                            provenance=self.provenance)

    def to_netcdf(self, path: str | os.PathLike, *, layers: Mapping[str, tuple] | None = None,
                  overwrite: bool = False, complevel: int = REALIZATION_COMPLEVEL) -> Path:
        """Write the finished store as the NetCDF realization cube (chunk by chunk), atomically, with
        ``layers`` added (:func:`add_layers`); ``complevel`` is the zlib level, 0 (the default) for
        an uncompressed cube, as the ``geosim_storage`` attribute says."""
        with self.dataset() as ds:
            ds.attrs["geosim_storage"] = storage_note(complevel)
            return write_netcdf(path, add_layers(ds, layers), overwrite=overwrite, complevel=complevel)

    def add_layers(self, layers: Mapping[str, tuple] | None) -> None:
        """Add fixed grid variables (:func:`add_layers`: ``name -> (array, long_name, units)``) to the store."""
        if not layers:
            return
        group = _open_group(self.path, "r+")
        ds = add_layers(grid_dataset(self.grid, {}, title="", provenance={}), layers)
        ds = ds.drop_vars([v for v in ds.variables if v not in layers])
        ds.attrs = dict(group.attrs)  # appending to a Zarr store replaces its root attributes
        with _local_dask():
            ds.to_zarr(self.path, mode="a", consolidated=False, encoding=_encoding(ds, False))

    def remove(self) -> None:
        """Delete the store."""
        import shutil
        shutil.rmtree(self.path, ignore_errors=True)


def storage_note(complevel: int) -> str:
    """How a NetCDF realization cube's values are stored, for its ``geosim_storage`` attribute."""
    codec = f"zlib level {complevel} with byte shuffle" if complevel > 0 else "uncompressed"
    return f"float32, one chunk per realization and level (at most {CHUNK_XY} x {CHUNK_XY} nodes), {codec}"


def write_cube(path: str | os.PathLike, ds, *, overwrite: bool = False) -> Path:
    """Write ``ds`` as NetCDF (``.nc``) or Zarr (``.zarr``), by the path's suffix."""
    if Path(path).suffix == ".zarr":
        return write_zarr(path, ds, overwrite=overwrite)
    return write_netcdf(path, ds, overwrite=overwrite)


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

    The grid's levels run up and its columns east, its rows south (north-up): the rows in
    reverse are the table's order, so every column is one pass over the row-reversed arrays
    (no sort of a million coordinates).
    """
    def rows_up(a: np.ndarray) -> np.ndarray:
        return np.asarray(a)[..., ::-1, :]

    inside = rows_up(grid.mask)
    axes = grid.axes()
    spatial = {"x": axes[-1], "y": axes[-2][:, None]}
    if grid.ndim == 3:
        spatial["z"] = axes[0][:, None, None]
    data = {name: rows_up(np.broadcast_to(axis, grid.shape))[inside] for name, axis in spatial.items()}
    n = len(data["x"])
    for a, name in enumerate(("dx", "dy", "dz")[:grid.ndim]):
        data[name] = np.full(n, grid.cell[a])
    for name, (values, _, _) in variables.items():
        data[name] = rows_up(values)[inside]
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
