"""What a run writes and how: the output configuration of the job.

:mod:`geosim.pipeline` says which steps run and in what order; this module turns
the spec's ``[outputs]``, ``[blocks]``, ``[upscaling]``, ``[query_points]`` and
``[ranking]`` into the files each step writes:

==============================  ==========================================================
:func:`provenance_tags`         the provenance every output file carries
:func:`write_variogram`         ``variogram_model.toml`` and ``variogram.png``
:func:`write_crossval`          ``cross_validation.csv`` and ``.png``
:func:`write_estimate`          ``estimate.tif`` (per level) and the estimate cube
:func:`realization_writer`      the sink writing each realization, with its decision
                                figures, run checks and change-of-support sinks
:func:`support_sinks`           blocks, upscaling, query points and the ranking figure
:func:`write_summaries`         stacks, summary rasters, decision tables, plots, cubes,
                                block-model tables and ``report.json``
:func:`cube_format`             which cube (NetCDF, Zarr) and tables a grid gets, and
:func:`level_geotiffs`,         whether its rasters are GeoTIFF
:func:`block_model_formats`
:func:`metal_factor`,           the metal figure's factor and unit
:func:`metal_unit`
==============================  ==========================================================

Writing itself is done by :mod:`geosim.io` (handed computed arrays) and by the
realization writer of :mod:`geosim.ensemble`; this module only decides what goes
where.
"""
from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .config.runspec import RunSpec
from .errors import InputError
from .io.cube import CUBE_SUFFIX
from .progress import Progress, relabel
from .results import CrossValidation, EstimateResult, PreparedData, SimulationResult, VariogramResult
from .runstate import input_checksums

log = logging.getLogger(__name__)

__all__ = ["provenance_tags", "write_variogram", "write_crossval", "write_estimate", "realization_writer",
           "support_sinks", "write_summaries", "metal_factor", "metal_unit", "CUBE_SUFFIX", "cube_format",
           "level_geotiffs", "block_model_formats", "variable_name"]


# -- provenance ------------------------------------------------------------------------------------

def _provenance(spec: RunSpec, data: PreparedData, model, extra: Mapping[str, str] | None = None) -> dict[str, str]:
    """:func:`geosim.io.report.provenance` of the run, its input checksums (those of the run
    state, :func:`geosim.runstate.input_checksums`) listed by file path."""
    from .io.report import provenance
    paths = spec.input_files()
    inputs = {str(paths[key]): sha for key, sha in input_checksums(spec).items()}
    return provenance(seed=spec["simulation.seed"], engine=spec["simulation.engine"],
                      model=model.text(len(spec["grid.cell"])), transform=data.transform, inputs=inputs,
                      units=spec["data.units"] or None, extra=extra)


def provenance_tags(spec: RunSpec, data: PreparedData, model) -> dict[str, str]:
    """The provenance tags every output file of the run carries."""
    return _provenance(spec, data, model, extra={"run_spec_sha256": spec.sha256})


# -- the files of the modelling steps ------------------------------------------------------------

def write_variogram(spec: RunSpec, result: VariogramResult, out_dir: Path) -> dict[str, list[str]]:
    """``variogram_model.toml`` and, for a fitted model with ``outputs.plots``, ``variogram.png``."""
    from .variogram.modelfile import save_model
    files = {"model": [str(save_model(result.model, out_dir / "variogram_model.toml", overwrite=True))]}
    if result.experimental and spec["outputs.plots"]:
        from .variogram.plots import plot_variogram
        files["variogram_plot"] = [str(plot_variogram(result.experimental, result.model,
                                                      path=out_dir / "variogram.png", overwrite=True))]
    return files


def write_crossval(spec: RunSpec, data: PreparedData, model, cv: CrossValidation,
                   out_dir: Path) -> dict[str, list[str]]:
    """``cross_validation.csv`` (both scales side by side) and, with ``outputs.plots``, its PNG."""
    from .io.crossval import plot_crossval, write_crossval_csv
    written = [str(write_crossval_csv(cv.result, out_dir / "cross_validation.csv", overwrite=True,
                                      data_units=cv.data_units, provenance=provenance_tags(spec, data, model)))]
    if spec["outputs.plots"]:
        written.append(str(plot_crossval(cv.result, out_dir / "cross_validation.png", overwrite=True,
                                         data_units=cv.data_units, log=spec["transform.log"])))
    return {"cross_validation": written}


def write_estimate(spec: RunSpec, data: PreparedData, model, est: EstimateResult,
                   out_dir: Path) -> dict[str, list[str]]:
    """``estimate.tif`` (per level for 3-D) and the estimate cube, as the outputs ask: conditional
    mean and standard deviation in data units, kriged normal score and its kriging variance."""
    from .io.geotiff import write_raster
    grid = est.grid
    tags = provenance_tags(spec, data, model)
    written = []
    if level_geotiffs(spec, grid):
        bands = np.stack([est.mean, np.sqrt(est.variance), est.scores_mean, est.scores_variance])
        descriptions = [(text, unit) for text, unit in est.descriptions()]
        written += [str(p) for p in write_raster(out_dir / "estimate.tif", bands, grid, descriptions=descriptions,
                                                 tags=tags, overwrite=True)]
    fmt = cube_format(spec, grid)
    if fmt is not None:
        from .io.cube import write_cube
        written.append(str(write_cube(out_dir / f"estimate{CUBE_SUFFIX[fmt]}", est.to_xarray(provenance=tags),
                                      overwrite=True)))
    return {"estimate": written}


# -- the realizations ----------------------------------------------------------------------------

def _figures(spec: RunSpec, grid):
    """The per-realization decision figures the outputs ask for, as a picklable callable."""
    import functools

    from . import summaries
    out = spec["outputs"]
    if not out["cutoffs"]:
        return None
    density = _density(spec, grid)
    if density is not None:
        thickness = out["thickness"] if grid.ndim == 2 else None
        return functools.partial(_grade_tonnage, grid=grid, cutoffs=tuple(out["cutoffs"]),
                                 density=density, thickness=thickness, metal_factor=metal_factor(spec))
    func = summaries.fraction_above if out["above"] else summaries.fraction_below
    return functools.partial(func, grid=grid, thresholds=tuple(out["cutoffs"]))


def _density(spec: RunSpec, grid) -> float | np.ndarray | None:
    """``outputs.density``, or the density raster at every node (NaN outside the domain), or None."""
    out = spec["outputs"]
    if out["density_raster"] is None:
        return out["density"]
    from .domain import sample_raster
    path = spec.resolve(out["density_raster"])
    density = sample_raster(path, grid)
    bad = grid.mask & ~(density > 0)
    if bad.any():
        raise InputError(f"the density raster has no positive value at {int(bad.sum())} of {grid.n_active} "
                         "nodes inside the domain", file=str(path), field="outputs.density_raster",
                         fix="give a density (t/m3) over the whole domain")
    return np.where(grid.mask, density, np.nan)


def _grade_tonnage(field, *, grid, cutoffs, density, thickness, metal_factor):
    from .summaries import grade_tonnage
    return grade_tonnage(field, grid, cutoffs, density, thickness, metal_factor)


def metal_factor(spec: RunSpec) -> float:
    """Metal per tonne of ore per grade unit: ``outputs.metal_factor``, else 0.01 for %
    grades (metal in tonnes) and 1 otherwise (g/t grades give grams)."""
    if spec["outputs.metal_factor"] is not None:
        return spec["outputs.metal_factor"]
    return 0.01 if "%" in (spec["data.units"] or "") else 1.0


def metal_unit(spec: RunSpec) -> str:
    """Unit of the metal figure: tonnes for % grades at factor 0.01, grams for g/t at factor 1,
    else the product written out."""
    units, factor = spec["data.units"] or "", metal_factor(spec)
    if "%" in units and factor == 0.01:
        return "t"
    if units.replace(" ", "") in ("g/t", "gpt") and factor == 1.0:
        return "g"
    return f"t x {units or 'grade unit'} x {factor:g}"


def cube_format(spec: RunSpec, grid) -> str | None:
    """``"netcdf"``, ``"zarr"`` or None: the cube the outputs ask for (``outputs.cube``).

    ``"auto"`` is NetCDF for 3-D grids when xarray, netCDF4, zarr (the realization store)
    and dask are installed (``geosim[cube]``), and nothing (GeoTIFF per level, with a
    note) otherwise.
    """
    fmt = spec["outputs.cube"]
    if fmt == "none" or (fmt == "auto" and grid.ndim == 2):
        return None
    if fmt == "auto":
        import importlib.util
        if not all(importlib.util.find_spec(m) for m in ("xarray", "netCDF4", "zarr", "dask")):
            log.warning('3-D outputs are written as one GeoTIFF per level; pip install "geosim[cube]" for one '
                        "NetCDF cube per output kind")
            return None
        return "netcdf"
    return fmt


def level_geotiffs(spec: RunSpec, grid) -> bool:
    """Whether rasters are written as GeoTIFF: always in 2-D; in 3-D without a cube or when asked."""
    return grid.ndim == 2 or cube_format(spec, grid) is None or spec["outputs.level_geotiffs"]


def block_model_formats(spec: RunSpec, grid) -> list[str]:
    """Suffixes of the block-model tables to write: ``"auto"`` is CSV for 3-D grids."""
    out = []
    for fmt in spec["outputs.block_model"]:
        fmt = ("csv" if grid.ndim == 3 else None) if fmt == "auto" else fmt
        if fmt is not None and f".{fmt}" not in out:
            out.append(f".{fmt}")
    return out


def variable_name(name: str) -> str:
    """A CF-safe variable name (letters, digits, underscores; a letter first)."""
    import re
    clean = re.sub(r"\W", "_", name) or "value"
    return clean if clean[0].isalpha() else f"v_{clean}"


def realization_writer(spec: RunSpec, data: PreparedData, model, grid, out_dir: Path):
    """The :class:`geosim.ensemble.RealizationWriter` of the run: data units, provenance, the decision
    figures of ``[outputs]``, the reproduction checks and the sinks of :func:`support_sinks`."""
    from .ensemble import RealizationWriter
    from .validation import RunChecks
    tags = provenance_tags(spec, data, model)
    derived, ranking = support_sinks(spec, grid, out_dir, tags)
    back = data.transform.inverse
    if data.mean is not None:  # realizations are residuals: the mean goes back on before the back-transform
        import functools

        from .secondary import add_mean_then
        back = functools.partial(add_mean_then, mean=data.mean.at_nodes(grid)[grid.mask], inverse=back)
    checks = RunChecks(grid, model, data.coords, data.scores, weights=data.weights, data_values=data.values)
    checks.compute_ahead()  # the tolerances' model figures, beside the simulation
    # overwrite=True: the folder was checked to belong to this run before anything is written
    return RealizationWriter(out_dir, grid, tags=tags, units=spec["data.units"],
                             back_transform=back, figures=_figures(spec, grid), measure=checks,
                             metal_unit=metal_unit(spec), overwrite=True, derived=derived, ranking=ranking,
                             **_cube_options(spec, grid, grid, "conditional realization"))


def _cube_options(spec: RunSpec, sim_grid, grid, what: str) -> dict[str, Any]:
    """The writer's cube, GeoTIFF and table settings for realizations of ``what`` on ``grid`` (the
    formats follow the simulation grid ``sim_grid``): with a cube the realizations go into a
    realization store, ``realizations.zarr`` itself (Zarr) or one the NetCDF cube is written from."""
    from .runstate import resume_key
    units = spec["data.units"]
    u = f" ({units})" if units else ""
    return {"cube": cube_format(spec, sim_grid), "level_geotiffs": level_geotiffs(spec, sim_grid),
            "variable": variable_name(spec["data.value"]), "long_name": f"{spec['data.value']}{u}, {what}",
            "tables": block_model_formats(spec, sim_grid),
            "table_realizations": spec["outputs.block_model_realizations"], "run_key": resume_key(spec),
            "cube_complevel": spec["outputs.realization_cube_zlib"]}


def _layout(spec: RunSpec, grid, section: str, key: str):
    """The :class:`geosim.support.BlockLayout` of ``[blocks]`` or ``[upscaling]``, or None."""
    from .support import block_layout
    table = spec[section]
    if table[key] is None and table["cells"] is None:
        return None
    size = table[key] or [n * c for n, c in zip(table["cells"], grid.cell)]
    try:
        return block_layout(grid, size, origin=table["origin"], min_fraction=table["min_fraction"],
                            aligned=table["aligned"] or table["cells"] is not None)
    except ValueError as exc:
        raise InputError(str(exc), file=spec.name, field=f"{section}.{key}",
                         fix="give sizes of at least one cell per axis (whole cells with aligned = true)") from None


def _support_writer(spec: RunSpec, name: str, layout, out_dir: Path, tags: Mapping[str, str], *, figures=None,
                    exponent: float | None = None, weights=None, key: str = "", what: str):
    from .ensemble import RealizationWriter
    from .support_outputs import SupportWriter
    grid = layout.blocks
    own = {**tags, "support": what, "support_grid": (
        f"origin {', '.join(f'{o:.10g}' for o in (grid.xmin, grid.ymin) + ((grid.zmin,) if grid.ndim == 3 else ()))}, "
        f"cell {' x '.join(f'{c:g}' for c in grid.cell)} m, shape {' x '.join(map(str, grid.shape))}, "
        f"min_fraction {layout.min_fraction:g}")}
    if exponent is not None:
        own["support_exponent"] = f"{exponent:g}"
    # the cube and raster forms of the point-support outputs (layout.grid is the simulation grid)
    writer = RealizationWriter(out_dir / name, grid, tags=own, units=spec["data.units"], figures=figures,
                               metal_unit=metal_unit(spec), overwrite=True,
                               **_cube_options(spec, layout.grid, grid,
                                               f"{what.split(':')[0]} of a conditional realization"))
    return SupportWriter(name, layout, writer, exponent=exponent, weights=weights, key=key)


def support_sinks(spec: RunSpec, grid, out_dir: Path, tags: Mapping[str, str]) -> tuple[list, Any]:
    """The change-of-support sinks the spec asks for (blocks, upscaling, query points, ranking figure)
    and the ranker, for the realization writer."""
    import functools

    from . import summaries
    from .support import block_tonnes, describe_power
    from .support_outputs import FigureProbe, PointSampler, Ranker, block_grade_tonnage, read_query_points
    out = spec["outputs"]
    derived = []
    blocks = _layout(spec, grid, "blocks", "size")
    if blocks is not None:
        figures, density = None, _density(spec, grid)
        if out["cutoffs"] and density is not None:
            thickness = out["thickness"] if grid.ndim == 2 else None
            figures = functools.partial(block_grade_tonnage, tonnes=block_tonnes(blocks, density, thickness),
                                        cutoffs=tuple(out["cutoffs"]), metal_factor=metal_factor(spec))
        elif out["cutoffs"]:
            func = summaries.fraction_above if out["above"] else summaries.fraction_below
            figures = functools.partial(func, grid=blocks.blocks, thresholds=tuple(out["cutoffs"]))
        weighting = ", weighted by the density map" if isinstance(density, np.ndarray) else ""
        derived.append(_support_writer(spec, "blocks", blocks, out_dir, tags, figures=figures, weights=density,
                                       what=f"block average: arithmetic mean of the nodes in each block{weighting}"))
    upscaled = _layout(spec, grid, "upscaling", "cell")
    if upscaled is not None:
        up = spec["upscaling"]
        figures = None
        if out["cutoffs"] and out["density"] is None and out["density_raster"] is None:
            func = summaries.fraction_above if out["above"] else summaries.fraction_below
            figures = functools.partial(func, grid=upscaled.blocks, thresholds=tuple(out["cutoffs"]))
        along = "horizontal (along the layering)" if grid.ndim == 3 else "in the plane of the grid"
        derived.append(_support_writer(spec, "upscaled", upscaled, out_dir, tags, figures=figures,
                                       exponent=up["exponent"], key="upscaling.exponent",
                                       what=f"upscaled {along}: {describe_power(up['exponent'])}"))
        if up["vertical_exponent"] is not None:
            derived.append(_support_writer(spec, "upscaled_vertical", upscaled, out_dir, tags,
                                           exponent=up["vertical_exponent"], key="upscaling.vertical_exponent",
                                           what=f"upscaled vertical (across the layering): "
                                                f"{describe_power(up['vertical_exponent'])}"))
    q = spec["query_points"]
    if q["file"] is not None:
        ids, coords, index = read_query_points(spec.resolve(q["file"]), grid, x=q["x"], y=q["y"], z=q["z"],
                                               id=q["id"], crs=q["crs"] or spec["data.crs"] or _samples_crs(spec))
        derived.append(PointSampler(out_dir, ids, coords, index, units=spec["data.units"], tags=tags,
                                    overwrite=True))
    rank = spec["ranking"]
    if rank["figure"] is None:
        return derived, None
    if rank["figure"] in _DECISION_FIGURES:
        source, unit = ("point" if rank["support"] == "point" else "blocks"), _figure_unit(spec, rank["figure"])
    else:
        derived.append(FigureProbe(_probe(spec, grid, rank)))
        source, unit = FigureProbe.name, spec["data.units"] if rank["figure"] == "mean" else ""
    cutoff = rank["cutoff"] if rank["figure"] in _DECISION_FIGURES else None
    return derived, Ranker(rank["figure"], cutoff, source, rank["percentiles"], unit=unit, tags=tags,
                           overwrite=True)


_DECISION_FIGURES = ("tonnage", "mean_grade", "metal", "fraction_above", "fraction_below", "area", "volume")


def _samples_crs(spec: RunSpec):
    """The CRS the samples' own vector file or data frame carries (None for CSV and drillholes):
    tables such as the query points default to it when neither they nor ``data.crs`` name one."""
    from .vector import is_frame, is_vector_path, read_vector
    if spec["data.points"] is None:
        return None
    source = spec.resolve(spec["data.points"])
    if is_frame(source):
        return getattr(source, "crs", None)
    if not is_vector_path(source):
        return None
    return read_vector(source, layer=spec["data.layer"]).crs


def _figure_unit(spec: RunSpec, figure: str) -> str:
    return {"tonnage": "t", "mean_grade": spec["data.units"], "metal": metal_unit(spec), "area": "m2",
            "volume": "m3"}.get(figure, "")


def _probe(spec: RunSpec, grid, rank: Mapping):
    """The per-realization figure to rank by: the mean over a region (or the domain), or a plugin's."""
    import functools

    from .support import region_mean
    if rank["figure"] == "mean":
        mask = grid.mask
        if rank["region"] is not None:
            from .domain import read_domain
            mask = grid.clip_to_polygon(read_domain(spec.resolve(rank["region"]), grid.crs)).mask
            if not mask.any():
                raise InputError("no grid node of the domain falls inside the ranking region",
                                 file=str(spec.resolve(rank["region"])), field="ranking.region",
                                 fix="check the polygon and its CRS")
        return functools.partial(region_mean, mask=mask)
    from .plugins import get
    return functools.partial(_plugin_figure, func=get("figures", rank["figure"]), grid=grid)


def _plugin_figure(values, *, func, grid) -> float:
    return float(func(values, grid))


# -- summaries and report ------------------------------------------------------------------------

def write_summaries(spec: RunSpec, out_dir: Path, data: PreparedData, model, grid, simulation: SimulationResult,
                    extra: Mapping[str, Any] | None = None, progress: Progress | None = None) -> dict[str, list[str]]:
    """Everything made from the finished realizations: multiband realizations, summary rasters,
    decision tables, plots, cubes, block-model tables and ``report.json`` (with ``extra`` sections).

    Returns output kind -> list of paths.
    """
    from .simulation.runner import per_path_for
    n = spec["simulation.realizations"]
    out = spec["outputs"]
    # the NetCDF realization cube may still be written (by a process of its own) while the report and
    # plots are made
    files = simulation.writer.finish(simulation.records, cutoffs=out["cutoffs"], stack=True,
                                     keep_realization_files=True, progress=relabel(progress, "summary windows"),
                                     wait=False)
    try:
        report = _provenance(spec, data, model)  # the report gives run_spec_sha256 beside the spec itself
        report.update({"title": spec["title"], "run_spec": spec.name, "run_spec_sha256": spec.sha256,
                       "parameters": spec.to_dict(), "samples": int(len(data.values)), "notes": list(data.notes),
                       "grid": {"shape": list(grid.shape), "cell": list(grid.cell), "active_nodes": grid.n_active,
                                "crs": grid.crs.to_string() if grid.crs is not None else None},
                       "realizations": {"count": n, "kept_from_earlier_run": simulation.kept,
                                        "per_path": per_path_for(spec["simulation.realizations_per_path"], grid,
                                                                 spec["simulation.engine"])}})
        validation = simulation.writer.validation(simulation.records)
        if validation is not None:
            report["validation"] = validation
        support = _support_report(simulation.writer, simulation.records)
        if support:
            report["change_of_support"] = support
        from .secondary import report_sections
        summary = simulation.writer.summary  # the bands, when the realizations are in a store
        report.update(report_sections(spec, data, grid, files.get("summary", ()) if summary is None else summary))
        if extra:
            report.update(extra)
        if out["plots"]:
            # the summary maps of one level of a 3-D grid: the one nearest the samples' mean elevation
            files["plots"] = [str(p) for p in simulation.writer.plots(
                simulation.records, files.get("summary", []), out["cutoffs"], levels=[_plot_level(data, grid)],
                log=spec["transform.log"], validation=validation)]
            files["plots"] += [str(p) for p in _support_plots(spec, simulation.writer, simulation.records, out_dir)]
    except BaseException:
        simulation.writer.wait(raise_error=False)  # nothing goes on writing after a failure
        raise
    simulation.writer.wait()
    return close_outputs(spec, grid, out_dir, files, report)


def close_outputs(spec: RunSpec, grid, out_dir: Path, files: dict[str, list[str]], report: Mapping) -> dict:
    """Remove what the outputs do not keep (realization files and the realization stores NetCDF
    cubes were written from, per-level GeoTIFFs beside a cube) and write the JSON run report; returns
    ``files`` without the removed ones."""
    from .ensemble import remove_outputs
    from .io.report import write_report
    if not spec["outputs.keep_realizations"]:
        remove_outputs(files.pop("realization_files"))  # block and upscaled ones too, and NetCDF cubes' stores
    if not level_geotiffs(spec, grid):
        for kind in ("summary", "realizations"):
            for f in files.pop(kind, []):
                Path(f).unlink()
    files["report"] = [str(write_report(out_dir / "report.json", report, overwrite=True))]
    return files


def _support_report(writer, records: Sequence[Mapping]) -> dict:
    """The report's ``change_of_support`` section: each support's grid and decision spread, the ranking."""
    from .summaries import decision_spread as spread
    from .support_outputs import PointSampler, SupportWriter
    section: dict[str, Any] = {}
    for d in writer.derived:
        if isinstance(d, SupportWriter):
            g = d.grid
            entry = {"method": d.writer.tags["support"], "grid": d.writer.tags["support_grid"],
                     "blocks_with_values": int(g.mask.sum()), "description": d.layout.describe()}
            figures = [r["derived"][d.name].get("figures") for r in records]
            if figures and all(f is not None for f in figures):
                entry["decision_spread"] = spread(figures)
            section[d.name] = entry
        elif isinstance(d, PointSampler):
            section["query_points"] = {"points": len(d.ids), "table": "query_points.csv"}
    if writer.ranking is not None:
        section["ranking"] = writer.ranking.summary(records)
    if "blocks" in section:
        section["blocks"]["note"] = ("block values average the nodes inside each block, so their spread is "
                                     "smaller than the nodes' (the support effect): compare decision_spread here "
                                     "with the point-support decision_spread.csv")
    return section


def _support_plots(spec: RunSpec, writer, records: Sequence[Mapping], out_dir: Path) -> list:
    """Decision figures at point support beside block or upscaled support (one PNG per support)."""
    from .io import plots
    from .support_outputs import SupportWriter
    point = [r.get("figures") for r in records]
    if not point or any(f is None for f in point):
        return []
    written = []
    cell = " x ".join(f"{c:g}" for c in writer.grid.cell)
    for d in writer.derived:
        figures = [r["derived"][d.name].get("figures") for r in records] if isinstance(d, SupportWriter) else []
        if figures and all(f is not None for f in figures):
            size = " x ".join(f"{c:g}" for c in d.grid.cell)
            written.append(plots.plot_support_comparison(
                {f"nodes ({cell} m cells)": point, f"{d.name.replace('_', ' ')} ({size} m)": figures},
                out_dir / f"support_{d.name}.png", units=spec["data.units"], overwrite=True))
    return written


def _plot_level(data: PreparedData, grid) -> int:
    """The level of a 3-D grid mapped in the PNGs: the one nearest the samples' mean elevation."""
    if grid.ndim == 2:
        return 0
    z = grid.axes()[0]
    return int(np.argmin(np.abs(z - data.coords[:, 2].mean())))
