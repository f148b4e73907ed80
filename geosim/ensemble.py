"""Writing an ensemble: the realization writer sink and what it assembles at the end.

:class:`RealizationWriter` (registered as the ``geotiff`` writer) writes each
realization in the worker as a COG (:mod:`geosim.io.geotiff`); its ``finish``
stacks them, streams the summary rasters (:func:`summarize_realizations`:
windows read by :mod:`geosim.io.geotiff`, statistics from
:mod:`geosim.summaries`, written back by :mod:`geosim.io.geotiff`), writes the
decision CSVs (:mod:`geosim.io.decision`) and draws the figures
(:mod:`geosim.io.plots`).  This module puts those together; each of them
either computes or writes, and none imports this one.

Realization writer layout (see :class:`RealizationWriter`)::

    <folder>/realizations/r0000.tif ...   one single-band file per realization
    <folder>/realizations.tif             all realizations, band i+1 = realization i
    <folder>/summary.tif                  mean, std, P10, P50, P90, P(>cutoff)...
    <folder>/decision_figures.csv         figures per realization and cut-off
    <folder>/decision_spread.csv          P10/P50/P90 of each figure
    <folder>/*.png                        with finish(plots=True): maps and checks

For 3-D grids the rasters get ``_z000``... per level (``realizations_z000.tif``,
``summary_z000.tif``, ``realizations/r0007_z000.tif``).  A writer given a
``cube`` format writes no file per realization: every worker writes its
realizations into one chunked Zarr store (:class:`geosim.io.cube.RealizationStore`;
``realizations.zarr`` itself for Zarr cubes, ``realizations/store.zarr`` for NetCDF
ones), and ``finish`` makes ``summary.nc`` and ``realizations.nc`` (or ``.zarr``)
from it, with the per-level GeoTIFFs only on request (``level_geotiffs``; always
in 2-D).  Hidden temporaries
(``.<name>.<hex>.partial<suffix>``, ``.<name>.<hex>.stage.tif``) exist only while
a file is being written; a killed run may leave them, and they can be deleted.
"""
from __future__ import annotations

import contextlib
import os
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

import numpy as np

from .errors import InputError
from .io import plots as io_plots
from .io.atomic import check_writable
from .io.decision import write_decision_csv
from .io.cube import CUBE_SUFFIX, RealizationStore
from .io.geotiff import (GDAL_SETTINGS, STORED_DTYPE, as_stored, assemble_realizations, grid_windows, level_grid,
                         level_paths, level_tags, open_checked, read_realization, read_windows, verify_realization,
                         with_layers, write_raster, write_windows)
from .io.report import file_sha256
from .summaries import (decision_rows, decision_spread, summarize_windows, summary_band_descriptions,
                        summary_band_names)

__all__ = ["RealizationWriter", "summarize_realizations", "record_files", "remove_outputs"]


def summarize_realizations(paths: Sequence[str | os.PathLike], grid, cutoffs: Sequence[float],
                           out_path: str | os.PathLike, units: str = "",
                           tags: Mapping[str, str] | None = None, window: int | None = None,
                           overwrite: bool = False,
                           progress: Callable[[int, int, str], None] | None = None,
                           layers: Sequence[tuple[np.ndarray, str, str]] = ()) -> Path:
    """Stream single-band realization GeoTIFFs into a summary GeoTIFF (COG layout).

    Reads all ``paths`` one window at a time (memory is about
    ``window**2 x len(paths)`` values), computes the bands of
    :func:`summarize_ensemble` and writes them, described and with units, to
    ``out_path`` atomically.

    Parameters
    ----------
    paths : sequence of path
        One single-band GeoTIFF per realization, all on ``grid`` (2-D; for a
        3-D grid call once per level with that level's files and 2-D grid).
    grid : geosim.Grid
        2-D grid of the files (checked against each file's size).
    cutoffs : sequence of float
    out_path : path
    units : str
        Units of the realization values.
    tags : mapping, optional
        Provenance tags (see :func:`geosim.io.report.provenance`).
    window : int, optional
        Window side in cells; defaults to the files' tile size.
    overwrite : bool
    progress : callable, optional
        ``progress(done, total, "summary")`` after each window.
    layers : sequence, optional
        ``(array of the grid's shape, description, unit)`` written as last bands
        (e.g. unit codes).
    """
    if len(paths) < 1:
        raise ValueError("no realization files to summarize")
    if grid.ndim != 2:
        raise ValueError("summarize_realizations works on one 2-D level; call it per level of a 3-D grid")
    with open_checked(paths[0], grid) as first:
        block = first.block_shapes[0][0] if first.profile.get("tiled") else 256
    win = int(window or block)
    windows = grid_windows(grid, win)
    bands = with_layers(summarize_windows(read_windows(paths, grid, windows), cutoffs), layers)
    return write_windows(out_path, grid, len(summary_band_names(cutoffs)) + len(layers), bands,
                         total=sum(1 for _ in windows()),
                         descriptions=summary_band_descriptions(cutoffs, units) + [(d, u) for _, d, u in layers],
                         tags=tags,
                         overwrite=overwrite, progress=progress, what="summary")


def record_files(record: Mapping) -> list[tuple[str, str]]:
    """``(file relative to the writer's folder, SHA-256)`` of one realization record, derived outputs included."""
    pairs = list(zip(record.get("files", []), record.get("sha256", [])))
    for sub in (record.get("derived") or {}).values():
        pairs += list(zip(sub.get("files", []), sub.get("sha256", [])))
    return pairs


def record_stores(record: Mapping) -> list[tuple[str, str]]:
    """``(realization store relative to the writer's folder, SHA-256 of the realization in it)`` of one
    realization record, derived outputs included (see :class:`geosim.io.cube.RealizationStore`)."""
    subs = [record] + list((record.get("derived") or {}).values())
    return [(s["store"]["path"], s["store"]["sha256"]) for s in subs if s.get("store")]


def remove_outputs(paths: Sequence[str | os.PathLike]) -> None:
    """Delete files and realization stores (folders), then their folders once empty."""
    import shutil
    paths = [Path(p) for p in paths]
    for p in paths:
        shutil.rmtree(p, ignore_errors=True) if p.is_dir() else p.unlink(missing_ok=True)
    for folder in {p.parent for p in paths}:
        with contextlib.suppress(OSError):
            folder.rmdir()


class RealizationWriter:
    """Picklable sink that writes each realization in the worker, and assembles at the end.

    Parameters
    ----------
    folder : path
        Output folder (created if missing).  Per-realization files go to
        ``folder/realizations/``.
    grid : geosim.Grid
    tags : mapping
        Provenance tags (:func:`geosim.io.report.provenance`).
    units : str
        Units of the written values.
    back_transform : callable, optional
        Applied in the worker to the active values of each field (normal scores
        to data units), e.g. a fitted transform's ``inverse``.
    figures : callable, optional
        ``figures(field) -> dict`` of decision figures for one realization in
        data units, e.g. ``functools.partial(geosim.summaries.grade_tonnage,
        grid=grid, cutoffs=[0.5, 1.0], density=2.7)``.  ``field`` holds exactly
        the float32 values the raster stores (:func:`geosim.io.geotiff.as_stored`),
        so the figures can be recomputed from the file.
    measure : callable, optional
        ``measure(normal_scores, values) -> dict`` of per-realization validation
        statistics (see :class:`geosim.validation.RunChecks`).
    metal_unit : str
        Unit of the ``metal`` decision figure, for the decision tables' metadata.
    overwrite : bool
        Replace existing outputs.
    derived : sequence, optional
        Sinks fed each realization in data units after it is written (change of
        support, values at points; :mod:`geosim.support_outputs`): each has a
        ``name``, is called ``d(index, values) -> record`` in the worker (``files``
        and ``sha256`` in the record, if any, relative to ``folder``) and has
        ``finish(records, indices=, cutoffs=, stack=, plots=, progress=) -> dict``
        and ``realization_files(record) -> list``.
    ranking : callable, optional
        ``ranking(writer, records) -> dict`` of files, run by ``finish`` after
        everything else is assembled and before realization files are removed.
    layers : sequence, optional
        ``(array of grid.shape, description, unit)``: fixed layers (e.g. unit codes)
        written as last bands of each realization's file (GeoTIFF realizations), and
        added by ``finish`` to ``realizations.tif`` and ``summary.tif`` (last bands), to
        the cubes (variables named after the description: ``unit_code``) and to the
        block-model tables (columns of the same names).
    cube : {"netcdf", "zarr"}, optional
        Write the realizations into one realization store instead of one file each
        (:class:`geosim.io.cube.RealizationStore`), and assemble ``summary`` and
        ``realizations`` cubes (:mod:`geosim.io.cube`) from it.
    level_geotiffs : bool
        With ``cube`` on a 3-D grid, also write the per-level GeoTIFF stacks and
        summaries (always written without a cube, and in 2-D).
    store : path, optional
        Where the realization store of a writer with ``cube`` lies; by default
        ``realizations.zarr`` (the Zarr cube itself) or ``realizations/store.zarr``
        (NetCDF: the cube is written from it at the end).
    run_key : str
        Names the run in the store (:class:`geosim.io.cube.RealizationStore`), so a
        resumed run continues only its own store.
    variable : str
        Name of the realization variable in the cubes.
    long_name : str, optional
        Its long name (default: ``"<variable> (<units>), conditional realization"``).
    tables : sequence of str
        Suffixes (``".csv"``, ``".parquet"``) of block-model tables to write
        (:func:`geosim.io.cube.write_block_model`): one row per active node of
        ``grid`` with the summary.
    table_realizations : bool
        Add one column per realization to those tables.
    cube_complevel : int
        zlib level (0-9) of the NetCDF realization cube; 0, the default, stores it
        uncompressed (:data:`geosim.io.cube.REALIZATION_COMPLEVEL`).

    Notes
    -----
    ``writer(index, field)`` returns a record ``{"index", "files", "sha256",
    "figures", "checks"}`` (``files`` relative to ``folder``; with ``cube`` no files
    and ``"store": {"path", "sha256"}``), and ``"derived"`` (name -> record) with
    ``derived`` sinks.  Before the workers start, :meth:`open_stores` makes the
    stores ready.  ``finish`` takes the records of all realizations.
    """

    def __init__(self, folder: str | os.PathLike, grid, *, tags: Mapping[str, str] | None = None,
                 units: str = "", back_transform: Callable[[np.ndarray], np.ndarray] | None = None,
                 figures: Callable[[np.ndarray], dict] | None = None,
                 measure: Callable[[np.ndarray, np.ndarray], dict] | None = None, metal_unit: str = "",
                 overwrite: bool = False, derived: Sequence = (), ranking: Callable | None = None,
                 layers: Sequence[tuple[np.ndarray, str, str]] = (), cube: str | None = None,
                 level_geotiffs: bool = True, variable: str = "value", long_name: str | None = None,
                 tables: Sequence[str] = (), table_realizations: bool = False,
                 store: str | os.PathLike | None = None, run_key: str = "", cube_complevel: int = 0):
        self.folder = Path(folder)
        self.grid = grid
        self.tags = dict(tags or {})
        self.units = units
        self.back_transform = back_transform
        self.figures = figures
        self.measure = measure
        self.metal_unit = metal_unit
        self.overwrite = overwrite
        self.derived = tuple(derived)
        self.ranking = ranking
        self.layers = tuple(layers)
        if cube is not None and cube not in CUBE_SUFFIX:
            raise ValueError(f"cube must be one of {sorted(CUBE_SUFFIX)} or None, got {cube!r}")
        self.cube = cube
        self.level_geotiffs = level_geotiffs or grid.ndim == 2 or cube is None
        self.variable = variable
        u = f" ({units})" if units else ""
        self.long_name = long_name or f"{variable}{u}, conditional realization"
        self.tables = tuple(tables)
        self.table_realizations = table_realizations
        if not (isinstance(cube_complevel, int) and 0 <= cube_complevel <= 9):
            raise ValueError(f"cube_complevel must be a zlib level 0-9, got {cube_complevel!r}")
        self.cube_complevel = cube_complevel
        self.store = None
        if cube is not None:
            where = store or self.folder / ("realizations.zarr" if cube == "zarr" else "realizations/store.zarr")
            self.store = RealizationStore(where, grid, name=variable, long_name=self.long_name, units=units,
                                          provenance=self.tags, run_key=run_key)
        self.summary = None  # the summary bands (float32 values) once finish computed them from the store
        self._writing = None  # (process pool, futures) of files still being written by processes of their own

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        state["_writing"] = None  # a pool and its futures do not travel
        return state

    @property
    def layer_variables(self) -> dict[str, tuple[np.ndarray, str, str]]:
        """The ``layers`` as cube variables and table columns: ``name -> (array, description, unit)``."""
        import re
        return {re.sub(r"\W+", "_", d).strip("_") or "layer": (a, d, u) for a, d, u in self.layers}

    def _level_layers(self, k: int) -> list[tuple[np.ndarray, str, str]]:
        """The ``layers`` of level ``k`` (the whole layer in 2-D)."""
        return [(a if self.grid.ndim == 2 else a[k], d, u) for a, d, u in self.layers]

    def stores(self, *, staging: bool = False) -> list[RealizationStore]:
        """The realization stores of this writer and of its derived writers (change of support);
        with ``staging`` only those a NetCDF cube is written from (not outputs themselves)."""
        own = [] if self.store is None or (staging and self.cube != "netcdf") else [self.store]
        return own + [s for d in self.derived if hasattr(d, "writer") for s in d.writer.stores(staging=staging)]

    def open_stores(self, n_realizations: int, kept: Sequence[int] = ()) -> None:
        """Make every realization store ready for ``n_realizations`` before the workers write,
        keeping the realizations ``kept`` (verified by a resumed run); see
        :meth:`geosim.io.cube.RealizationStore.open`."""
        for store in self.stores():
            store.open(n_realizations, keep=kept)

    def pool_modules(self) -> list[str]:
        """What the processes forked from the local pool's server import: this module (a worker
        unpickles the writer) and, with a cube, the store's and the cubes' libraries (the workers
        write the store, the processes of :meth:`_aside` the cubes from it).  The server imports
        them once while the engine prepares (:func:`geosim.simulation.runner.simulate`), where each
        process forked had imported them itself (about 0.85 s of CPU in the one writing the NetCDF
        cube after the workers)."""
        return ["geosim.ensemble"] + self._cube_libraries()

    def _cube_libraries(self) -> list[str]:
        """The libraries of the realization store and the cubes (none without a cube)."""
        if self.cube is None:
            return []
        return ["zarr", "dask.array", "xarray"] + (["netCDF4"] if self.cube == "netcdf" else [])

    def finish_modules(self, plots: bool = False) -> list[str]:
        """The libraries :meth:`finish` and :meth:`validation` import (rasters, cubes, tables, the
        checks' statistics and, with ``plots``, figures), those of the derived writers included: a caller imports them while the workers
        simulate (:func:`geosim.simulation.runner.import_ahead`)."""
        modules = ["rasterio"] + (["scipy.stats"] if self.measure is not None else [])  # the checks' tolerances
        modules += self._cube_libraries()
        if ".parquet" in self.tables:
            modules.append("pyarrow.parquet")
        if plots:
            modules += ["matplotlib.figure", "matplotlib.backends.backend_agg", "matplotlib.colors",
                        "matplotlib.patches", "matplotlib.patheffects"]
        for d in self.derived:
            if hasattr(d, "writer"):
                modules += [m for m in d.writer.finish_modules(plots) if m not in modules]
        return modules

    def __call__(self, index: int, field: np.ndarray) -> dict:
        scores = np.asarray(field, dtype=np.float64)
        if scores.shape != self.grid.shape:
            raise ValueError(f"realization {index} has shape {scores.shape}, the grid {self.grid.shape}")
        # the float32 values the raster or store holds, one NaN outside the domain; figures and checks
        # see exactly these (as float64), so a figure recomputed from the file agrees, also at a
        # cut-off on a plateau of equal values
        stored = np.full(scores.shape, np.nan, dtype=STORED_DTYPE)
        inside = ~np.isnan(scores)
        whole = bool(inside.all())  # a domain filling the grid: no gathering and scattering
        active = scores.ravel() if whole else scores[inside]
        active = active if self.back_transform is None else self.back_transform(active)
        if whole:
            stored[...] = active.reshape(scores.shape)
        else:
            stored[inside] = active
        values = stored.astype(np.float64)
        if self.store is not None:  # whole chunks of the one store: no file per realization
            record = {"index": int(index), "files": [], "sha256": [],
                      "store": {"path": os.path.relpath(self.store.path, self.folder),
                                "sha256": self.store.write(index, stored)}}
        else:
            (self.folder / "realizations").mkdir(parents=True, exist_ok=True)
            target = self.folder / "realizations" / f"r{index:04d}.tif"  # write_raster adds _z000... in 3-D
            u = f" ({self.units})" if self.units else ""
            bands = np.stack([values] + [a for a, _, _ in self.layers]) if self.layers else values
            written = write_raster(target, bands, self.grid, descriptions=[(f"realization {index}{u}", self.units)]
                                   + [(d, unit) for _, d, unit in self.layers],
                                   tags={**self.tags, "realization": str(index)}, overwrite=self.overwrite)
            record = {"index": int(index), "files": [str(p.relative_to(self.folder)) for p in written],
                      "sha256": [file_sha256(p) for p in written]}
        record.update({"figures": None if self.figures is None else self.figures(values),
                       "checks": None if self.measure is None else self.measure(scores, values)})
        if self.derived:
            record["derived"] = {d.name: d(index, values) for d in self.derived}
        return record

    def finish(self, records: Sequence[Mapping], *, cutoffs: Sequence[float] = (),
               stack: bool = True, keep_realization_files: bool = True, plots: bool = False,
               progress: Callable[[int, int, str], None] | None = None, wait: bool = True) -> dict[str, list[str]]:
        """Assemble the multiband realization COG(s), the summary raster(s) and decision CSVs.

        Parameters
        ----------
        records : sequence of dict
            What ``writer(index, field)`` returned, for every realization.
        cutoffs : sequence of float
            Exceedance-probability cut-offs for the summary raster.
        stack : bool
            Write ``realizations.tif`` (per level for 3-D) with one band per realization.
        keep_realization_files : bool
            Keep ``realizations/r*.tif`` (or the NetCDF cube's store) after assembly
            (they let a resumed run skip finished realizations); False removes them
            once everything else is written.  A Zarr cube's store is the
            realization cube and stays.
        plots : bool
            Also draw PNGs (:mod:`geosim.io.plots`): summary maps (per level,
            prefixed ``z000_``... for 3-D), ``decision_spread.png`` and, when
            ``measure`` is a :class:`geosim.validation.RunChecks`,
            ``variogram_reproduction.png`` and ``histogram_reproduction.png``.
        progress : callable, optional
        wait : bool
            Return once every file is written.  The NetCDF realization cube, the summary
            cube and the block-model tables of a realization store are written by processes
            of their own (beside the summary pass and plots of this one); with False,
            ``finish`` may return before they are done, so they overlap the caller's work
            too, and the caller calls :meth:`wait` before it uses them or removes the
            realization store.

        Returns
        -------
        dict
            Output kind -> list of paths written.
        """
        records = sorted(records, key=lambda r: r["index"])
        if not records:
            raise ValueError("no realization records to assemble")
        for r in records:
            for f, sha in record_files(r):
                if not verify_realization(self.folder / f, sha):
                    raise InputError("realization file is missing or changed since it was written",
                                     file=str(self.folder / f), fix="re-run that realization")
        indices = [r["index"] for r in records]
        out: dict[str, list[str]] = {
            "realization_files": [str(self.folder / f) for r in records for f, _ in record_files(r)]
            + [str(s.path) for s in self.stores(staging=True)]}
        try:
            out.update(self._assemble(records, cutoffs, stack, plots, progress))
            if not keep_realization_files or wait:
                self.wait()
        except BaseException:
            self.wait(raise_error=False)  # nothing goes on writing after a failure
            raise
        if not keep_realization_files:
            remove_outputs(out.pop("realization_files"))
        return out

    def wait(self, *, raise_error: bool = True) -> None:
        """Wait for the files ``finish`` has written in processes of its own (the NetCDF realization
        cube, the summary cube, the block-model tables); re-raise the first error."""
        writing, self._writing = self._writing, None
        if writing is not None:
            pool, futures = writing
            errors = [f.exception() for f in futures]
            pool.shutdown()
            error = next((e for e in errors if e is not None), None)
            if error is not None and raise_error:
                raise error

    def _aside(self, func: Callable, *args, **kwargs) -> None:
        """Start ``func(*args, **kwargs)`` in a process of its own; :meth:`wait` collects it.

        After the workers end both cores are free, and the writes made from the finished store
        and its summary (the NetCDF realization cube, the summary cube, the block-model tables)
        run in two processes beside this one's decision tables and figures.  Processes, not
        threads: HDF5 is not safe for threads (a file handle another thread lets go would reach
        it unlocked), and formatting a table's numbers holds the GIL.  They fork from the
        workers' server (:func:`geosim.simulation.runner.pool_context`) and end at once when
        this process does, as the workers do.
        """
        from concurrent.futures import ProcessPoolExecutor

        from .simulation.runner import pool_context
        if self._writing is None:
            self._writing = (ProcessPoolExecutor(2, mp_context=pool_context(libraries=self.pool_modules()),
                                                 initializer=start_aside, initargs=(os.getpid(),)), [])
        pool, futures = self._writing
        futures.append(pool.submit(func, *args, **kwargs))

    def _assemble(self, records, cutoffs, stack, plots, progress) -> dict[str, list[str]]:
        """What :meth:`finish` makes, except the removal of the realization files."""
        import rasterio

        indices = [r["index"] for r in records]
        out: dict[str, list[str]] = {}
        with rasterio.Env(**GDAL_SETTINGS):  # no folder listing on each of the many opens below
            if self.store is not None:
                out.update(self._assemble_store(indices, cutoffs, stack, progress))
            else:
                out.update(self._assemble_geotiffs(records, cutoffs, stack, progress))
        figures = [r["figures"] for r in records]
        if all(f is not None for f in figures):
            rows = decision_rows(figures, indices)
            meta = {"units": self.units, "metal_unit": self.metal_unit, "provenance": self.tags}
            p1 = write_decision_csv(self.folder / "decision_figures.csv", rows, self.overwrite, **meta)
            p2 = write_decision_csv(self.folder / "decision_spread.csv", decision_spread(figures), self.overwrite,
                                    **meta)
            out["decision"] = [str(p1), str(p2)]
        if plots:
            out["plots"] = [str(p) for p in self.plots(records, out.get("summary", []), cutoffs)]
        for d in self.derived:
            out.update(d.finish([r["derived"][d.name] for r in records], indices=indices, cutoffs=cutoffs,
                                stack=stack, plots=plots, progress=progress))
        if self.ranking is not None:
            out.update(self.ranking(self, records))
        return out

    def _assemble_geotiffs(self, records, cutoffs, stack, progress) -> dict[str, list[str]]:
        """Per-level multiband realizations and summaries from GeoTIFF realizations; the tables from them."""
        out: dict[str, list[str]] = {"summary": []}
        if stack:
            out["realizations"] = []
        indices = [r["index"] for r in records]
        for k in range(self.grid.nz if self.grid.ndim == 3 else 1):
            g2 = level_grid(self.grid, k)
            files = [self.folder / r["files"][k] for r in records]
            tags = {**self.tags, **level_tags(self.grid, k)}
            layers = self._level_layers(k)
            if stack:
                target = level_paths(self.folder / "realizations.tif", self.grid)[k]
                assemble_realizations(files, g2, target, units=self.units, tags=tags, indices=indices,
                                      overwrite=self.overwrite, progress=progress, layers=layers)
                out["realizations"].append(str(target))
            target = level_paths(self.folder / "summary.tif", self.grid)[k]
            summarize_realizations(files, g2, cutoffs, target, units=self.units, tags=tags,
                                   overwrite=self.overwrite, progress=progress, layers=layers)
            out["summary"].append(str(target))
        if self.tables:
            bands = np.stack([read_realization(out["summary"], self.grid, band=b + 1)
                              for b in range(len(summary_band_names(cutoffs)))])
            paths = [[self.folder / f for f in r["files"]] for r in records]
            out.update(self._tables(indices, cutoffs, bands, lambda j: read_realization(paths[j], self.grid)))
        return out

    def _assemble_store(self, indices, cutoffs, stack, progress) -> dict[str, list[str]]:
        """Summary and realization cubes from the realization store, streamed box by box (whole levels
        of a small grid, windows of one level of a large one); the GeoTIFFs only with ``level_geotiffs``.

        The summary bands are kept, as their files store them (float32), in
        ``self.summary`` for the plots.
        """
        import functools

        from .io.cube import cube_boxes, write_summary_cube
        self.store.finish(indices)
        suffix = CUBE_SUFFIX[self.cube]
        layers = self.layer_variables
        out: dict[str, list[str]] = {}
        if self.cube == "netcdf":
            target = check_writable(self.folder / "realizations.nc", self.overwrite)  # refused here, not later
            self._aside(self.store.to_netcdf, target, layers=layers, overwrite=self.overwrite,
                        complevel=self.cube_complevel)
            out["realizations_cube"] = [str(target)]
        bands = np.full((len(summary_band_names(cutoffs)),) + self.grid.shape, np.nan)
        boxes = cube_boxes(self.grid)
        # the workers have ended: the compiled per-node pass runs on a thread per core
        threads = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
        for done, (box, b) in enumerate(summarize_windows(self.store.boxes(indices, boxes), cutoffs, threads),
                                        start=1):
            bands[(slice(None),) + box] = b
            if progress is not None:
                progress(done, len(boxes), "summary")
        self.summary = bands = as_stored(bands)
        tables = self._tables(indices, cutoffs, bands)  # in a process of its own, from here on
        if self.level_geotiffs and stack:
            for k in range(self.grid.nz if self.grid.ndim == 3 else 1):
                target = level_paths(self.folder / "realizations.tif", self.grid)[k]
                assemble_realizations(indices, level_grid(self.grid, k), target, units=self.units, indices=indices,
                                      tags={**self.tags, **level_tags(self.grid, k)}, overwrite=self.overwrite,
                                      layers=self._level_layers(k),
                                      read=functools.partial(_store_windows, store=self.store, level=k))
                out.setdefault("realizations", []).append(str(target))
        if self.level_geotiffs:
            out["summary"] = [str(p) for p in write_raster(
                self.folder / "summary.tif", np.concatenate([bands] + [a[None] for a, _, _ in self.layers]),
                self.grid, tags=self.tags, overwrite=self.overwrite,
                descriptions=summary_band_descriptions(cutoffs, self.units) + [(d, u) for _, d, u in self.layers])]
        target = self.folder / f"summary{suffix}"
        if self.cube == "netcdf":
            check_writable(target, self.overwrite)  # refused here, not in the process that writes it
        self._aside(write_summary_cube, target, self.grid, bands, cutoffs, units=self.units, provenance=self.tags,
                    layers=layers, overwrite=self.overwrite)
        out["summary_cube"] = [str(target)]
        if self.cube != "netcdf":
            self.store.add_layers(layers)
            out["realizations_cube"] = [str(self.store.path)]
        out.update(tables)
        return out

    def _tables(self, indices, cutoffs, bands, reader: Callable[[int], np.ndarray] | None = None
                ) -> dict[str, list[str]]:
        """The block-model tables (with ``tables``) of the summary ``bands``; ``reader(j)`` gives the j-th
        realization for the realization columns.  Without ``reader`` the realizations are read from
        the store, and the tables are written in a process of their own (:meth:`_aside`), refused
        here if they exist."""
        if not self.tables:
            return {}
        from .io.csvw import sidecar_path
        paths = [self.folder / f"block_model{s}" for s in self.tables]
        if reader is None:
            for p in paths:
                check_writable(p, self.overwrite)
                if p.suffix == ".csv":
                    check_writable(sidecar_path(p), self.overwrite)
            self._aside(self._write_tables, paths, indices, cutoffs, bands)
        else:
            self._write_tables(paths, indices, cutoffs, bands, reader)
        return {"block_model": [str(p) for p in paths]}

    def _write_tables(self, paths: Sequence[Path], indices, cutoffs, bands,
                      reader: Callable[[int], np.ndarray] | None = None) -> None:
        """Write the block-model tables ``paths`` (:meth:`_tables`)."""
        from .io.cube import summary_table_columns, write_block_model
        table = summary_table_columns(bands, cutoffs, self.units, self.layer_variables)
        if self.table_realizations:
            for j, i in enumerate(indices):
                values = self.store.read(i) if reader is None else reader(j)
                table[f"r{i:04d}"] = (np.asarray(values, dtype=np.float64), f"realization {i}", self.units)
        for p in paths:
            write_block_model(p, self.grid, table, provenance=self.tags, overwrite=self.overwrite)

    def validation(self, records: Sequence[Mapping]) -> dict | None:
        """The run report's ``validation`` section from the records' measurements (None without ``measure``)."""
        checks = [r.get("checks") for r in records]
        if not hasattr(self.measure, "summarize") or any(c is None for c in checks):
            return None
        return self.measure.summarize(checks)

    def plots(self, records: Sequence[Mapping], summaries: Sequence[str | os.PathLike],
              cutoffs: Sequence[float] = (), *, levels: Sequence[int] | None = None,
              log: bool = False, validation: Mapping | None = None) -> list[Path]:
        """Draw the ensemble's PNGs into the folder (:mod:`geosim.io.plots`).

        Parameters
        ----------
        records : sequence of dict
            The realization records, in index order.
        summaries : sequence of path
            The summary raster of each level, as ``finish`` returns them (not read when
            ``finish`` computed the summary from the realization store).
        cutoffs : sequence of float
            The summaries' exceedance cut-offs.
        levels : sequence of int, optional
            Levels whose summary is mapped (prefixed ``z000_``... for 3-D grids); all by default.
        log : bool
            Map values on a logarithmic colour scale.
        validation : mapping, optional
            :meth:`validation` of ``records``, when the caller has it already.

        Returns
        -------
        list of Path
            Summary maps; ``histogram_reproduction.png`` and ``variogram_reproduction.png``
            when ``measure`` is a :class:`geosim.validation.RunChecks`; ``decision_spread.png``
            with decision figures.
        """
        out = []
        names = summary_band_names(cutoffs)
        every = range(self.grid.nz if self.grid.ndim == 3 else 1) if self.summary is not None else range(len(summaries))
        for k in every if levels is None else levels:
            g2 = level_grid(self.grid, k)
            if self.summary is not None:
                level = self.summary if self.grid.ndim == 2 else self.summary[:, k]
                summary = {name: level[b].astype(np.float64) for b, name in enumerate(names)}
            else:
                with open_checked(summaries[k], g2) as src:
                    summary = {name: src.read(b + 1).astype(np.float64) for b, name in enumerate(names)}
            prefix = "" if self.grid.ndim == 2 else f"z{k:03d}_"
            out += io_plots.plot_summary_maps(summary, g2, self.folder, units=self.units, prefix=prefix, log=log,
                                              overwrite=self.overwrite)
        section = self.validation(records) if validation is None else validation
        if section is not None:
            samples = [r["checks"].get("quantiles") for r in records]
            if self.measure.data_values is not None and all(q is not None for q in samples):
                out.append(io_plots.plot_histogram_reproduction(
                    self.measure.data_values, samples, self.folder / "histogram_reproduction.png",
                    weights=self.measure.weights, units=self.units, overwrite=self.overwrite))
            out.append(io_plots.plot_variogram_reproduction(section["variogram"],
                                                            self.folder / "variogram_reproduction.png",
                                                            model=self.measure.model, ndim=self.grid.ndim,
                                                            overwrite=self.overwrite))
        figures = [r["figures"] for r in records]
        if figures and all(f is not None for f in figures):
            out.append(io_plots.plot_decision_spread(figures, self.folder / "decision_spread.png", units=self.units,
                                                     overwrite=self.overwrite))
        return out


def start_aside(parent: int) -> None:
    """Set up a process of :meth:`RealizationWriter._aside`: it ends when process ``parent`` does
    (:func:`geosim.simulation.runner.watch_process`), and it does not import Dask's distributed
    scheduler.

    xarray's ``to_netcdf`` asks which Dask scheduler is active, and xarray and Dask find out by
    importing ``distributed`` when it is installed: 0.4-0.5 s of CPU in each process that writes
    a NetCDF cube (on the 1M-node benchmark), at the end of a run when both cores are busy.
    These processes compute with Dask's synchronous scheduler only
    (:func:`geosim.io.cube.write_netcdf`), and no client can be active in them, so the answer
    without the import is the same ("threaded").  ``None`` in ``sys.modules`` makes ``import
    distributed`` raise ImportError, which both libraries catch as "not installed".  Nothing is
    changed when ``distributed`` is already imported.
    """
    import sys

    from .simulation.runner import watch_process
    watch_process(parent)
    sys.modules.setdefault("distributed", None)


def _store_windows(indices, grid, windows, *, store: RealizationStore, level: int):
    """The realizations ``indices`` of one level of ``store`` window by window, in the call form of
    :func:`geosim.io.geotiff.read_windows` (``(window, stack (len(indices), h, w))``)."""
    lead = (slice(level, level + 1),) if store.grid.ndim == 3 else ()
    for w in windows():
        box = lead + (slice(w.row_off, w.row_off + w.height), slice(w.col_off, w.col_off + w.width))
        yield w, store.box(indices, box).reshape(len(indices), w.height, w.width)
