"""Change-of-support outputs of a run: sinks fed each realization in the worker, and their files.

The realization writer (:class:`geosim.ensemble.RealizationWriter`) hands each
realization, in data units and exactly as stored, to its ``derived`` sinks:

* :class:`SupportWriter`: block averages (mining) or power-average upscaling
  (groundwater) of the realization (:mod:`geosim.support`), written on the block
  grid by a realization writer of its own in ``<folder>/<name>/`` with the same
  layout as the point-support outputs: ``realizations/r0007.tif``,
  ``realizations.tif``, ``summary.tif``, ``decision_figures.csv``,
  ``decision_spread.csv`` and maps (with a cube: a realization store of its
  own, ``summary.nc``, ``realizations.nc`` and the block-model table);
* :class:`PointSampler`: the values at the nodes holding given points; its
  ``finish`` writes ``query_points.csv``;
* :class:`FigureProbe`: one figure per realization to rank by (the mean of a
  region, or a plugin figure).

:class:`Ranker` runs in the writer's ``finish``: it ranks the realizations by the
chosen figure, writes ``ranking.csv`` and copies the realizations nearest the
figure's percentiles (and their block or upscaled forms) to ``ranked/``.

Each sink keeps only small arrays, so realizations still never sit in memory
together, and each result is in the realization's record, so a resumed run
keeps it.
"""
from __future__ import annotations

import os
import shutil
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

import numpy as np

from .errors import InputError
from .io.atomic import atomic_output
from .io.geotiff import level_paths
from .io.support_tables import write_point_summary_csv, write_ranking_csv
from .summaries import tonnage_above
from .support import (block_average, describe_power, locate_nodes, point_summary, power_average, rank_realizations,
                      ranking_note, values_at)

__all__ = ["SupportWriter", "PointSampler", "FigureProbe", "Ranker", "block_grade_tonnage", "read_query_points"]


def block_grade_tonnage(field: np.ndarray, *, tonnes: np.ndarray, cutoffs: Sequence[float],
                        metal_factor: float) -> dict[str, np.ndarray]:
    """Grade-tonnage figures of one realization's blocks (``tonnes`` from :func:`geosim.support.block_tonnes`)."""
    return tonnage_above(field, tonnes, cutoffs, metal_factor)


class SupportWriter:
    """Block averages or power averages of each realization, written on the block grid.

    Parameters
    ----------
    name : str
        Output sub-folder and record key (``"blocks"``, ``"upscaled"``).
    layout : geosim.support.BlockLayout
    writer : geosim.ensemble.RealizationWriter
        Built on ``layout.blocks`` in ``<folder>/<name>``, without a back-transform.
    exponent : float, optional
        Power-average exponent (upscaling); None for the arithmetic block mean.
    weights : float or array of the grid's shape, optional
        Block-mean weights (density).
    key : str
        The run-spec key named when a realization cannot be averaged.
    """

    def __init__(self, name: str, layout, writer, *, exponent: float | None = None, weights=None, key: str = ""):
        self.name = name
        self.layout = layout
        self.writer = writer
        self.exponent = exponent
        self.weights = weights
        self.key = key

    @property
    def grid(self):
        return self.layout.blocks

    def average(self, index: int, values: np.ndarray) -> np.ndarray:
        """The block values of realization ``index``."""
        if self.exponent is None:
            return block_average(values, self.layout, self.weights)
        try:
            return power_average(values, self.layout, self.exponent, self.weights)
        except InputError as exc:
            raise InputError(f"realization {index}: {exc.message} ({describe_power(self.exponent)})",
                             field=self.key or exc.field, fix=exc.fix) from None

    def __call__(self, index: int, values: np.ndarray) -> dict:
        record = self.writer(index, self.average(index, values))
        record["files"] = [f"{self.name}/{f}" for f in record["files"]]
        if record.get("store"):  # paths relative to the run's folder, as the point-support record's
            record["store"] = {**record["store"], "path": f"{self.name}/{record['store']['path']}"}
        return record

    def finish(self, records: Sequence[Mapping], *, indices: Sequence[int], cutoffs: Sequence[float] = (),
               stack: bool = True, plots: bool = False, progress=None) -> dict[str, list[str]]:
        own = [{**r, "files": [f.split("/", 1)[1] for f in r["files"]]} for r in records]
        files = self.writer.finish(own, cutoffs=cutoffs, stack=stack, keep_realization_files=True, plots=plots,
                                   progress=progress)
        files.pop("realization_files", None)
        return {f"{self.name}_{kind}": paths for kind, paths in files.items()}


class PointSampler:
    """The values of each realization at the nodes holding given points; ``query_points.csv`` at the end."""

    name = "query_points"

    def __init__(self, folder: str | os.PathLike, ids: Sequence[str], coords: np.ndarray, index: np.ndarray, *,
                 units: str = "", tags: Mapping[str, str] | None = None, notes: Sequence[str] = (),
                 overwrite: bool = False):
        self.folder = Path(folder)
        self.ids = list(ids)
        self.coords = np.asarray(coords, dtype=float)
        self.index = np.asarray(index, dtype=np.int64)
        self.units = units
        self.tags = dict(tags or {})
        self.notes = list(notes)
        self.overwrite = overwrite

    def __call__(self, index: int, values: np.ndarray) -> dict:
        return {"values": values_at(values, self.index).tolist()}

    def finish(self, records: Sequence[Mapping], *, indices: Sequence[int], cutoffs: Sequence[float] = (),
               **_) -> dict[str, list[str]]:
        samples = np.array([r["values"] for r in records], dtype=float).reshape(len(records), len(self.ids))
        path = write_point_summary_csv(self.folder / "query_points.csv", self.ids, self.coords,
                                       point_summary(samples, cutoffs), units=self.units,
                                       n_realizations=len(records), provenance=self.tags, notes=self.notes,
                                       overwrite=self.overwrite)
        return {"query_points": [str(path)]}


class FigureProbe:
    """One figure of each realization (``func(values) -> float``), kept for ranking."""

    name = "ranking_figure"

    def __init__(self, func: Callable[[np.ndarray], float]):
        self.func = func

    def __call__(self, index: int, values: np.ndarray) -> dict:
        return {"value": float(self.func(values))}

    def finish(self, records, **_) -> dict:
        return {}


class Ranker:
    """Ranks the realizations by one figure and writes ``ranking.csv`` and ``ranked/``.

    Parameters
    ----------
    figure : str
        A figure of the decision tables (``metal``, ``tonnage``, ``fraction_above``...)
        read at ``cutoff``, or any figure a :class:`FigureProbe` computed (``mean``,
        a plugin's).
    cutoff : float, optional
        The row of the decision figures (cut-off or threshold).
    source : str
        ``"point"`` (the realization's own figures), a :class:`SupportWriter` name
        (``"blocks"``: its figures) or ``FigureProbe.name``.
    percentiles : sequence of float
    unit : str
        Unit of the figure, for the table.
    tags : mapping
        Provenance for the files.
    """

    def __init__(self, figure: str, cutoff: float | None, source: str, percentiles: Sequence[float] = (10, 50, 90),
                 *, unit: str = "", tags: Mapping[str, str] | None = None, overwrite: bool = False):
        self.figure = figure
        self.cutoff = cutoff
        self.source = source
        self.percentiles = tuple(float(p) for p in percentiles)
        self.unit = unit
        self.tags = dict(tags or {})
        self.overwrite = overwrite

    @property
    def label(self) -> str:
        """``metal_0.5``, ``mean``: the figure and its cut-off, as in file names."""
        return self.figure if self.cutoff is None else f"{self.figure}_{self.cutoff:g}"

    def values(self, records: Sequence[Mapping]) -> np.ndarray:
        """The figure of each record."""
        if self.source == FigureProbe.name:
            return np.array([r["derived"][self.source]["value"] for r in records], dtype=float)
        out = []
        for r in records:
            figs = r["figures"] if self.source == "point" else r["derived"][self.source]["figures"]
            key = next(iter(figs))
            levels = np.asarray(figs[key], dtype=float)
            k = int(np.argmin(np.abs(levels - self.cutoff)))
            out.append(float(np.asarray(figs[self.figure], dtype=float)[k]))
        return np.array(out)

    def __call__(self, writer, records: Sequence[Mapping]) -> dict[str, list[str]]:
        indices = [r["index"] for r in records]
        ranking = rank_realizations(self.values(records), indices, self.percentiles)
        picked = ranking.picked()
        what = self.figure if self.cutoff is None else f"{self.figure} at {self.cutoff:g}"
        note = ranking_note(what)
        table = write_ranking_csv(writer.folder / "ranking.csv", indices, ranking.figures, ranking.ranks, picked,
                                  figure=what, unit=self.unit, provenance=self.tags, notes=[note],
                                  overwrite=self.overwrite)
        by_index = {r["index"]: r for r in records}
        folder = writer.folder / "ranked"
        folder.mkdir(exist_ok=True)
        for old in [*folder.glob("*.tif"), *folder.glob("*.nc"), *folder.glob("*.zarr")]:
            shutil.rmtree(old) if old.is_dir() else old.unlink()  # picks of an earlier finish
        written = []
        outputs = [("", writer, lambda r: r["files"])]
        outputs += [(f"_{d.name}", d.writer, lambda r, n=d.name: r["derived"][n]["files"])
                    for d in writer.derived if isinstance(d, SupportWriter)]
        for label, i in picked.items():
            for suffix, source, files in outputs:
                # the realization as its own file(s), with provenance and caution; ranking.csv and its
                # sidecar say what the pick means
                stem = folder / f"{self.label}_{label}_r{i:04d}{suffix}"
                if source.store is not None:
                    written += _store_pick(source, i, stem)
                    continue
                for path, target in zip(files(by_index[i]), level_paths(stem.with_name(stem.name + ".tif"),
                                                                        source.grid)):
                    with atomic_output(target, overwrite=True) as tmp:  # one GeoTIFF per level, copied whole
                        shutil.copyfile(writer.folder / path, tmp)
                    written.append(target)
        return {"ranking": [str(table)], "ranked": [str(p) for p in written]}

    def summary(self, records: Sequence[Mapping]) -> dict:
        """The report's ranking section."""
        indices = [r["index"] for r in records]
        ranking = rank_realizations(self.values(records), indices, self.percentiles)
        what = self.figure if self.cutoff is None else f"{self.figure} at {self.cutoff:g}"
        return {"figure": what, "support": self.source, "unit": self.unit,
                "percentiles": {f"P{p:g}": float(t) for p, t in zip(self.percentiles, ranking.targets)},
                "picked": ranking.picked(), "note": ranking_note(what)}


def _store_pick(writer, index: int, stem: Path) -> list[Path]:
    """Realization ``index`` of ``writer``'s realization store as a cube of its own (``stem`` + the cube
    suffix) and, where the writer writes GeoTIFFs (2-D, or ``level_geotiffs``), as GeoTIFF(s) too."""
    from .io.cube import CUBE_SUFFIX, write_cube
    from .io.geotiff import write_raster
    with writer.store.dataset() as ds:
        out = [write_cube(stem.with_name(stem.name + CUBE_SUFFIX[writer.cube]), ds.sel(realization=[index]),
                          overwrite=True)]
    if writer.level_geotiffs:
        u = f" ({writer.units})" if writer.units else ""
        out += write_raster(stem.with_name(stem.name + ".tif"), writer.store.read(index).astype(np.float64),
                            writer.grid, descriptions=[(f"realization {index}{u}", writer.units)],
                            tags={**writer.tags, "realization": str(index)}, overwrite=True)
    return out


def read_query_points(path: str | os.PathLike, grid, *, x: str, y: str, z: str | None = None,
                      id: str | None = None, crs=None) -> tuple[list[str], np.ndarray, np.ndarray]:
    """Read a table of points and find the node holding each.

    Returns ``(ids, coords in the grid's CRS, flat node indices)``.  Points outside
    the grid or at nodes outside the domain raise :class:`~geosim.errors.InputError`
    listing them (file rows and names), never dropped silently.
    """
    from .crs import to_projected
    from .tables import read_table

    table = read_table(path, what="query point table")
    cols = [table.numbers(x, role="x coordinate"), table.numbers(y, role="y coordinate")]
    if z is not None:
        cols.append(table.numbers(z, role="z coordinate"))
    rows = list(table.lines)
    ids = list(table.text(id, role="point name")) if id is not None else [f"row {r}" for r in rows]
    coords, _, _ = to_projected(np.column_stack(cols), crs, grid.crs, file=table.path)
    if len(coords) == 0:
        raise InputError("the table holds no points", file=table.path, fix="add rows or remove [query_points]")
    where = locate_nodes(grid, coords)
    for mask, what in ((where.outside_grid, "outside the grid"), (where.outside_domain, "outside the domain")):
        if mask.any():
            bad = np.flatnonzero(mask)
            shown = ", ".join(f"row {rows[i]} ({ids[i]})" for i in bad[:10]) + (" ..." if bad.size > 10 else "")
            raise InputError(f"{bad.size} of {len(coords)} points lie {what}: {shown}", file=table.path,
                             row=rows[bad[0]], fix="remove those points, or widen grid.bounds or the domain")
    return ids, coords, where.index
