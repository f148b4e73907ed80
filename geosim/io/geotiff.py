"""GeoTIFF output in Cloud-Optimized layout, and the realization writer sink.

Every raster geosim writes is float32, tiled, DEFLATE-compressed with the
floating-point predictor (TIFF predictor 3), with overviews (average
resampling), nodata NaN outside the domain, the grid's CRS and geotransform,
a description and a unit for every band, and the provenance tags of
:func:`geosim.io.report.provenance`.  Files are first written as a tiled
GeoTIFF beside the target, then copied with GDAL's COG driver into the atomic
temporary file of :func:`geosim.io.atomic.atomic_output`, so a reader never sees
a half-written file.

Tiles are 256 x 256 cells, or 128 x 128 when the grid's longer side is under
512 cells (GDAL's COG driver asks for at least 128).  Overviews halve the
resolution until the image fits in one tile, so a grid that fits in a single
tile has none.

Multiband files are pixel-interleaved (GDAL's COG driver before GDAL 3.11
writes no other layout): one tile holds every band at those cells, which
suits reading the whole ensemble at a place; a tile of ``n`` realizations
decompresses to ``tile^2 x 4 x n`` bytes (26 MB for 100).  To look at single
realizations of a very large ensemble, keep the per-realization files.

3-D grids are written as one file per level, named with ``_z`` and the level
number (level 0 lowest), e.g. ``r0007_z000.tif``; each level file carries the
tags ``level``, ``z_bottom`` and ``z_top`` (metres).

Reading goes window by window too (:func:`read_windows`), so an ensemble of
any size is read with bounded memory; what is computed from it is computed
elsewhere (:mod:`geosim.summaries`) and handed back as arrays
(:func:`write_windows`).  The realization writer that puts these together is
:class:`geosim.ensemble.RealizationWriter`.
"""
from __future__ import annotations

import contextlib
import os
import secrets
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .._forward import forward
from ..errors import InputError
from ..resources import DISK_FULL_MARGIN, explain_os_error, free_space
from .atomic import atomic_output, check_writable
from .report import file_sha256

__all__ = ["tile_size", "level_grid", "level_paths", "grid_windows", "write_raster", "write_bands",
           "write_windows", "open_checked", "read_windows", "verify_realization", "assemble_realizations",
           "read_realization", "level_tags"]

# GDAL settings for every file geosim writes, and for reading the realization files back:
# no .aux.xml side files, and no listing of the folder on open (GDAL lists it to look for
# side files; in a folder of thousands of realization files that listing cost more than
# reading the file).  GDAL's settings are per thread.
GDAL_SETTINGS = {"GDAL_PAM_ENABLED": "NO", "GDAL_DISABLE_READDIR_ON_OPEN": "EMPTY_DIR"}

_COG_OPTIONS = {"COMPRESS": "DEFLATE", "PREDICTOR": "YES", "OVERVIEW_RESAMPLING": "AVERAGE",
                "BIGTIFF": "IF_SAFER"}


def tile_size(grid) -> int:
    """Tile side in cells: 256, or 128 when the grid's longer side is under 512 cells."""
    return 256 if max(grid.nx, grid.ny) >= 512 else 128


def level_grid(grid, k: int):
    """The 2-D grid of level ``k`` of a 3-D grid (its mask is that level's)."""
    from ..grid import Grid
    if grid.ndim == 2:
        return grid
    return Grid(grid.xmin, grid.ymin, grid.cell[:2], grid.shape[1:], grid.crs, mask=grid.mask[k])


def level_tags(grid, k: int) -> dict[str, str]:
    """Tags of level ``k`` of a 3-D grid (``level``, ``z_bottom``, ``z_top``); none for 2-D."""
    if grid.ndim == 2:
        return {}
    bottom = grid.zmin + k * grid.cell[2]
    return {"level": str(k), "z_bottom": f"{bottom:.6g}", "z_top": f"{bottom + grid.cell[2]:.6g}"}


def _crs(grid):
    return None if grid.crs is None else grid.crs.to_wkt()


def grid_windows(grid, size: int) -> Callable[[], Iterator]:
    """A callable returning rasterio Windows of ``size`` cells that tile the 2-D ``grid`` row by row."""
    def gen():
        from rasterio.windows import Window
        for r0 in range(0, grid.ny, size):
            for c0 in range(0, grid.nx, size):
                yield Window(c0, r0, min(size, grid.nx - c0), min(size, grid.ny - r0))
    return gen


def write_bands(out_path: str | os.PathLike, grid, n_bands: int, windows: Callable[[], Iterator],
                compute: Callable[[Any], np.ndarray], *, descriptions: Sequence[tuple[str, str] | str],
                tags: Mapping[str, str] | None = None, overwrite: bool = False,
                progress: Callable[[int, int, str], None] | None = None, what: str = "raster") -> Path:
    """Write a multiband COG window by window, computing each window with ``compute``.

    Parameters
    ----------
    out_path : path
    grid : geosim.Grid
        2-D grid (one level).
    n_bands : int
    windows : callable
        Returns an iterator of rasterio ``Window`` objects covering the grid.
    compute : callable
        ``compute(window) -> array (n_bands, window.height, window.width)``.
    descriptions, tags, overwrite, progress, what
        As for :func:`write_windows`.
    """
    blocks = ((w, compute(w)) for w in windows())
    return write_windows(out_path, grid, n_bands, blocks, total=sum(1 for _ in windows()),
                         descriptions=descriptions, tags=tags, overwrite=overwrite, progress=progress,
                         what=what)


def write_windows(out_path: str | os.PathLike, grid, n_bands: int, blocks: Iterable[tuple[Any, np.ndarray]],
                  *, total: int, descriptions: Sequence[tuple[str, str] | str],
                  tags: Mapping[str, str] | None = None, overwrite: bool = False,
                  progress: Callable[[int, int, str], None] | None = None, what: str = "raster") -> Path:
    """Write a multiband COG from computed windows; the writer behind the others.

    Parameters
    ----------
    out_path : path
    grid : geosim.Grid
        2-D grid (one level).
    n_bands : int
    blocks : iterable of ``(window, array)``
        rasterio ``Window`` objects covering the grid, each with its computed
        array ``(n_bands, window.height, window.width)``; consumed once, in order.
    total : int
        Number of windows, for ``progress``.
    descriptions : sequence
        Per band, ``(description, unit)`` or a description alone.
    tags : mapping, optional
        Dataset tags (provenance).
    overwrite : bool
    progress : callable, optional
        ``progress(done, total, what)`` after each window.
    what : str
        Label passed to ``progress``.
    """
    import rasterio
    import rasterio.shutil

    if grid.ndim != 2:
        raise ValueError("write_windows writes one 2-D level; use level_grid() for 3-D grids")
    if len(descriptions) != n_bands:
        raise ValueError(f"{len(descriptions)} band descriptions for {n_bands} bands")
    out_path = check_writable(out_path, overwrite)
    block = tile_size(grid)
    profile = dict(driver="GTiff", width=grid.nx, height=grid.ny, count=n_bands, dtype="float32",
                   crs=_crs(grid), transform=grid.transform, nodata=np.nan, tiled=True,
                   blockxsize=block, blockysize=block, compress="deflate", predictor=3,
                   interleave="band", bigtiff="if_safer")
    stage = out_path.with_name(f".{out_path.name}.{secrets.token_hex(4)}.stage.tif")
    with atomic_output(out_path, overwrite) as final, rasterio.Env(**GDAL_SETTINGS):
        try:
            with rasterio.open(stage, "w", **profile) as dst:
                for done, (w, data) in enumerate(blocks, start=1):
                    data = np.asarray(data, dtype=np.float32)
                    if data.shape != (n_bands, w.height, w.width):
                        raise ValueError(f"computed window has shape {data.shape}, expected "
                                         f"{(n_bands, w.height, w.width)}")
                    dst.write(data, window=w)
                    if progress is not None:
                        progress(done, total, what)
                units = []
                for b, d in enumerate(descriptions, start=1):
                    text, unit = (d, "") if isinstance(d, str) else d
                    dst.set_band_description(b, text)
                    units.append(unit)
                    if unit:
                        dst.update_tags(b, units=unit)
                dst.units = tuple(units)
                if tags:
                    dst.update_tags(**{k: str(v) for k, v in tags.items()})
            # the tiled stage feeds GDAL's COG driver, which adds overviews and orders the file
            rasterio.shutil.copy(stage, final, driver="COG", BLOCKSIZE=block, **_COG_OPTIONS)
            if (free_space(final.parent) or 0) < DISK_FULL_MARGIN:
                _read_back(final)  # GDAL's COG driver can report success on a full disk
        except Exception as exc:  # judged while the stage still holds its space
            error = explain_os_error(exc, out_path, needed=n_bands * grid.size * 4)
            if error is None:
                raise
            raise error from exc
        finally:
            stage.unlink(missing_ok=True)
    return out_path


def _read_back(path: Path) -> None:
    """Read every block of a written GeoTIFF, so a truncated file raises."""
    import rasterio
    with rasterio.open(path) as src:
        for _, window in src.block_windows(1):
            src.read(window=window)


#: The number type of every raster geosim writes.
STORED_DTYPE = np.float32


def as_stored(values: np.ndarray) -> np.ndarray:
    """``values`` rounded to what a raster stores (:data:`STORED_DTYPE`), as float64.

    Figures computed from these equal figures recomputed from the written file
    in double precision.

    Examples
    --------
    >>> import numpy as np
    >>> from geosim.io.geotiff import as_stored
    >>> float(as_stored(np.array([0.7]))[0]) == float(np.float32(0.7))
    True
    """
    return np.asarray(values, dtype=STORED_DTYPE).astype(np.float64)


def write_raster(path: str | os.PathLike, data: np.ndarray, grid, *,
                 descriptions: Sequence[tuple[str, str] | str], tags: Mapping[str, str] | None = None,
                 overwrite: bool = False) -> list[Path]:
    """Write an in-memory array as COG file(s).

    ``data`` has ``grid.shape`` (one band) or ``(n_bands, *grid.shape)``.  For
    a 3-D grid one file per level is written (``<stem>_z000<suffix>``, ...);
    the list of written paths is returned.

    Examples
    --------
    >>> import pathlib, tempfile, numpy as np, rasterio, geosim
    >>> from geosim.io.geotiff import write_raster
    >>> from pyproj import CRS
    >>> g = geosim.Grid(500000.0, 6000000.0, (10.0, 10.0), (200, 300), crs=CRS.from_epsg(32633))
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "ones.tif"
    >>> _ = write_raster(p, np.ones(g.shape), g, descriptions=[("ones", "m")])
    >>> with rasterio.open(p) as src:
    ...     src.descriptions, src.profile["tiled"], src.overviews(1)
    (('ones',), True, [2, 4])
    """
    a = np.asarray(data, dtype=STORED_DTYPE)
    if a.shape == grid.shape:
        a = a[None]
    if a.shape[1:] != grid.shape:
        raise ValueError(f"data of shape {a.shape} does not fit grid shape {grid.shape}")
    targets = level_paths(path, grid)
    for target in targets:  # refuse before writing any level, so a set of levels is never half replaced
        check_writable(target, overwrite)
    out = []
    for k, target in enumerate(targets):
        g2 = level_grid(grid, k)
        level = a if grid.ndim == 2 else a[:, k]
        level = np.where(g2.mask, level, np.nan).astype(np.float32)
        t = {**(tags or {}), **level_tags(grid, k)}
        out.append(write_bands(target, g2, level.shape[0], grid_windows(g2, tile_size(g2)),
                               lambda w, lv=level: lv[:, w.row_off:w.row_off + w.height,
                                                      w.col_off:w.col_off + w.width],
                               descriptions=descriptions, tags=t, overwrite=overwrite))
    return out


def level_paths(path: str | os.PathLike, grid) -> list[Path]:
    """The file(s) a raster of ``grid`` occupies: ``path`` itself, or one per level for 3-D."""
    path = Path(path)
    if grid.ndim == 2:
        return [path]
    return [path.with_name(f"{path.stem}_z{k:03d}{path.suffix}") for k in range(grid.nz)]


@contextlib.contextmanager
def open_checked(path: str | os.PathLike, grid):
    """Open a raster for reading and check it has the 2-D ``grid``'s size.

    Raises :class:`~geosim.errors.InputError` naming the file when it is
    missing, unreadable or of another size.
    """
    import rasterio
    from rasterio.errors import RasterioIOError

    try:
        src = rasterio.open(path)
    except RasterioIOError as err:
        raise InputError(f"cannot open the raster: {err}", file=str(path),
                         fix="check the path, or re-run the realizations that wrote it") from err
    with src:
        if (src.height, src.width) != (grid.ny, grid.nx):
            raise InputError(f"raster is {src.height} x {src.width} cells, the grid {grid.ny} x {grid.nx}",
                             file=str(path), fix="use files written for this grid")
        yield src


def read_windows(paths: Sequence[str | os.PathLike], grid,
                 windows: Callable[[], Iterator]) -> Iterator[tuple[Any, np.ndarray]]:
    """Every file's values at one window at a time: ``(window, stack (len(paths), h, w) float32)``.

    ``paths`` are single-band rasters of the 2-D ``grid`` (checked as
    :func:`open_checked` does); ``windows`` is a callable as from
    :func:`grid_windows`.  Memory is one window of every file.
    """
    for w in windows():
        stack = np.empty((len(paths), w.height, w.width), dtype=np.float32)
        for i, p in enumerate(paths):
            with open_checked(p, grid) as src:
                stack[i] = src.read(1, window=w)
        yield w, stack


def verify_realization(path: str | os.PathLike, expected_sha256: str) -> bool:
    """True when ``path`` exists and its SHA-256 is ``expected_sha256``.

    Used to keep completed realizations when a run is resumed.
    """
    path = Path(path)
    return path.is_file() and file_sha256(path) == expected_sha256.lower()


def read_realization(paths: Sequence[str | os.PathLike], grid, band: int = 1) -> np.ndarray:
    """Read one realization back as an array of ``grid.shape`` (level files for 3-D)."""
    levels = []
    for k, p in enumerate(paths):
        with open_checked(p, level_grid(grid, k)) as src:
            levels.append(src.read(band).astype(np.float64))
    return levels[0] if grid.ndim == 2 else np.stack(levels)


def assemble_realizations(paths: Sequence[str | os.PathLike], grid, out_path: str | os.PathLike, *,
                          units: str = "", tags: Mapping[str, str] | None = None,
                          indices: Sequence[int] | None = None, overwrite: bool = False,
                          progress: Callable[[int, int, str], None] | None = None,
                          layers: Sequence[tuple[np.ndarray, str, str]] = (),
                          read: Callable = read_windows) -> Path:
    """Stack single-band realization files of one 2-D level into one multiband COG.

    Band ``b`` holds ``paths[b - 1]`` and is described "realization i" with
    ``i`` from ``indices`` (default 0, 1, ...); ``layers`` (``(array of the 2-D
    grid's shape, description, unit)``, e.g. unit codes) follow as last bands.
    Memory is one window of every band (``tile_size(grid)**2 x len(paths)`` values).
    ``read(paths, grid, windows)`` reads the files window by window
    (:func:`read_windows`: GeoTIFFs).
    """
    indices = list(range(len(paths))) if indices is None else list(indices)
    u = f" ({units})" if units else ""
    descriptions = [(f"realization {i}{u}", units) for i in indices] + [(d, unit) for _, d, unit in layers]
    size = tile_size(grid)

    windows = grid_windows(grid, size)
    return write_windows(out_path, grid, len(paths) + len(layers),
                         with_layers(read(paths, grid, windows), layers),
                         total=sum(1 for _ in windows()), descriptions=descriptions, tags=tags,
                         overwrite=overwrite, progress=progress, what="realizations")


def with_layers(blocks: Iterable[tuple[Any, np.ndarray]], layers: Sequence[tuple[np.ndarray, str, str]]
                ) -> Iterator[tuple[Any, np.ndarray]]:
    """Each window's stack with the same window of every 2-D layer appended as further bands."""
    for w, stack in blocks:
        if layers:
            rows = slice(int(w.row_off), int(w.row_off) + int(w.height))
            cols = slice(int(w.col_off), int(w.col_off) + int(w.width))
            stack = np.concatenate([stack, np.stack([np.asarray(a)[rows, cols] for a, _, _ in layers]
                                                    ).astype(stack.dtype)])
        yield w, stack


# moved up to geosim.ensemble, which puts rasters, statistics and figures together;
# the old path works for one release
__getattr__ = forward(__name__, {"RealizationWriter": "geosim.ensemble"})
