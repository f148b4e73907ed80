"""The whole geosim job as library calls: one function per step, and :func:`run` for all.

Each command of the ``geosim`` command line is one call here, so a script can do
exactly what the command line does::

    import geosim.config.runspec, geosim.pipeline
    spec = geosim.config.runspec.load_spec("sample_fields/alluvial_aquifer/run.toml")
    result = geosim.pipeline.run(spec, "geosim-demo")

Steps, in the order :func:`run` calls them:

==========================  =========================================================
:func:`prepare_data`        read samples (points or composited drillholes), reproject,
                            decluster, fit the transform to normal scores
:func:`make_grid`           the grid over the bounds, the domain or the data, masked
                            by the domain
:func:`variogram_model`     a model from the spec, a model file, or fitted to
                            experimental variograms of the normal scores
:func:`cross_validate`      leave-one-out kriging of the normal scores
:func:`estimate`            kriging maps of the conditional mean and variance
:func:`simulate`            realizations written one file each, resumable
:func:`summarize`           multiband realizations, summary raster, decision figures,
                            plots and the JSON run report
==========================  =========================================================

Where things live: the run state (who owns an output folder, what a rerun keeps)
is :mod:`geosim.runstate`; the result classes and the descriptions the command
line prints are :mod:`geosim.results`; the transform chain and the multi-Gaussian
moments are in :mod:`geosim.transforms`; the realization writer is
:mod:`geosim.ensemble`.  This module only wires the steps together.
"""
from __future__ import annotations

import contextlib
import logging
import math
import os
import time
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .config.runspec import RunSpec, load_spec
from .errors import InputError
from .results import (CrossValidation, EstimateResult, PreparedData, RunResult, SimulationResult, VariogramResult,
                      describe_data, describe_spec)
from .runstate import (STATE_DIR, RecordingSink, claim_folder, completed_realizations, empty_folder, folder_is_empty,
                       make_folder, open_output, read_header, resume_key, with_folder_lock)
from .transforms import TransformChain, multigaussian_moments

Progress = Callable[[int, int, str], None]

log = logging.getLogger("geosim")  # notes of a run at INFO; the command line shows what it chooses

__all__ = ["PreparedData", "VariogramResult", "CrossValidation", "EstimateResult", "SimulationResult",
           "RunResult", "TransformChain", "RecordingSink", "load_samples", "decluster", "fit_transform",
           "prepare_data", "make_grid", "read_domain_geometry", "neighbourhood", "experimental_variograms",
           "variogram_model", "cross_validate", "multigaussian_moments", "estimate", "simulate", "summarize",
           "run", "decision_spread", "provenance_tags", "open_output", "completed_realizations", "resume_key",
           "describe_spec", "describe_data", "STATE_DIR"]

# a guard against a mistyped cell size (one realization of 2e8 float64 nodes is 1.6 GB)
MAX_NODES = 200_000_000


# -- data -------------------------------------------------------------------------------------

def load_samples(spec: RunSpec):
    """Read the samples the spec names, in metres of a projected CRS.

    Points come from one CSV; drillholes from collar, survey and interval tables,
    desurveyed and composited to ``data.composites.length``.

    Returns
    -------
    geosim.points.PointSet
    """
    d = spec["data"]
    crs, target = _spec_crs(spec)
    if d["points"] is not None:
        from .points import read_points
        return read_points(spec.resolve(d["points"]), x=d["x"], y=d["y"], z=d["z"], values=d["value"],
                           hole=d["id"], crs=crs, target_crs=target, layer=d["layer"])
    from .drillholes import composite
    from .inputchecks import upward_holes_note
    comp = d["composites"]
    holes = read_holes(spec)
    samples = composite(holes, comp["length"], min_fraction=comp["min_fraction"], residual=comp["residual"],
                        min_sampled_fraction=comp["min_sampled_fraction"])
    note = upward_holes_note(holes, surface_collars=spec["domain.below_collars"])
    return samples if note is None else samples.with_note(note)


def _spec_crs(spec: RunSpec):
    """``data.crs`` (None: the data file's own) and ``data.working_crs`` (None for "auto")
    as CRSs; unreadable text is an error naming the spec key, not the data file."""
    from .crs import parse_crs
    d = spec["data"]
    crs = None if d["crs"] is None else parse_crs(d["crs"], file=spec.name, field="data.crs")
    target = None if d["working_crs"] == "auto" else parse_crs(d["working_crs"], file=spec.name,
                                                                 field="data.working_crs")
    return crs, target


def read_holes(spec: RunSpec):
    """The drillhole tables the spec names (:class:`geosim.drillholes.Drillholes`), in metres."""
    from .drillholes import read_drillholes
    d = spec["data"]
    crs, target = _spec_crs(spec)
    return read_drillholes(spec.resolve(d["collars"]),
                           None if d["surveys"] is None else spec.resolve(d["surveys"]),
                           spec.resolve(d["intervals"]), values=d["value"], crs=crs, target_crs=target,
                           columns=d["columns"] or None, survey_dip=d["survey_dip"])


def decluster(spec: RunSpec, samples, progress: Progress | None = None):
    """Cell declustering of the samples as the spec asks, or None for ``method = "none"``."""
    dc = spec["declustering"]
    if dc["method"] == "none" or len(samples) < 3:
        return None
    from .declustering import cell_declustering
    values = samples.column(spec["data.value"])
    return cell_declustering(samples.coords, values, size_range=dc["size_range"], size_count=dc["size_count"],
                             origin_shifts=dc["origin_shifts"], pick_mean=dc["pick_mean"],
                             progress=_relabel(progress, "declustering sizes"))


def fit_transform(spec: RunSpec, values: np.ndarray, weights: np.ndarray | None = None) -> TransformChain:
    """The transform to normal scores the spec asks for, fitted to the data (and weights)."""
    from .transforms import LogTransform, NormalScoreTransform
    tr = spec["transform"]
    name = spec["data.value"]
    lower, upper = tr["lower"], tr["upper"]
    steps = []
    if tr["log"]:
        steps.append(LogTransform(base=10.0, name=name))
        lower = None if lower is None else math.log10(lower)
        upper = None if upper is None else math.log10(upper)
    steps.append(NormalScoreTransform(lower=lower, upper=upper, lower_tail=tr["lower_tail"],
                                      upper_tail=tr["upper_tail"], lower_exponent=tr["lower_exponent"],
                                      upper_exponent=tr["upper_exponent"], seed=spec["simulation.seed"],
                                      name=name))
    return TransformChain(steps).fit(values, weights)


def _check_transform_inputs(spec: RunSpec, samples, values: np.ndarray) -> None:
    """Values a log has none of, and tail bounds inside the data, named by file row and in
    the units the spec gave (the transforms would see them as log10 and sample numbers)."""
    from .inputchecks import sample_label
    tr, name = spec["transform"], spec["data.value"]
    if tr["log"] and (values <= 0.0).any():
        i = int(np.argmax(values <= 0.0))
        file, row, where = sample_label(samples, i)
        raise InputError(f"{'' if row else where + ': '}value {values[i]:g} has no logarithm (transform.log = true)",
                         file=file, row=row, field=name,
                         fix="correct or remove non-positive values (a value below detection is usually entered "
                             "as half the detection limit), or set transform.log = false")
    bounds = (("lower", tr["lower"], int(np.argmin(values)), lambda b, v: b > v, "above the smallest"),
              ("upper", tr["upper"], int(np.argmax(values)), lambda b, v: b < v, "below the largest"))
    for key, bound, i, wrong, relation in bounds:
        if bound is None or not wrong(bound, values[i]):
            continue
        where = sample_label(samples, i)
        raise InputError(f"transform.{key} is {bound:g}, {relation} value {values[i]:g} of {name!r} "
                         f"({where[0]}, {where[2]})", file=spec.name, field=f"transform.{key}",
                         fix=f"set transform.{key} {'at or below' if key == 'lower' else 'at or above'} "
                             f"{values[i]:g}, or correct that value")


def prepare_data(spec: RunSpec, progress: Progress | None = None) -> PreparedData:
    """Read, decluster and transform the samples (:func:`load_samples`, :func:`decluster`,
    :func:`fit_transform`)."""
    name = spec["data.value"]
    samples = load_samples(spec).complete(name)  # composites may lack the value over a gap
    values = samples.column(name)
    value_file = samples.source[-1] if samples.source else None  # the points or the interval table
    if len(values) == 0:
        raise InputError(f"the value column {name!r} is empty in every row", file=value_file, field=name,
                         fix="fill in the values, or name another column in data.value")
    if len(values) < 3:
        raise InputError(f"only {len(values)} usable samples of {name!r}; simulation needs at least 3",
                         file=value_file, field=name, fix="check the value column and the composite settings")
    _check_transform_inputs(spec, samples, values)
    dc = decluster(spec, samples, progress)
    weights = None if dc is None else np.asarray(dc.weights, dtype=float)
    from .inputchecks import check_variability, negative_values_note
    check_variability(values, weights, name=name, samples=samples)
    transform = fit_transform(spec, values, weights)
    scores = transform.data_scores_  # ties distinct, as the transform documents
    notes = list(samples.notes) + ([dc.describe()] if dc is not None else [])
    if not spec["transform.log"]:
        notes += [n for n in [negative_values_note(values, name=name, units=spec["data.units"], samples=samples)]
                  if n]
    return PreparedData(samples, values, weights, dc, transform, np.asarray(scores, dtype=float), notes)


# -- grid and domain ----------------------------------------------------------------------------

def read_domain_geometry(spec: RunSpec, crs):
    """The domain polygon in the working CRS, or None when the spec names none."""
    path = spec["domain.polygon"]
    if path is None:
        return None
    from .domain import read_domain
    return read_domain(spec.resolve(path), crs, layer=spec["domain.layer"])


# the summaries hold every realization of one window (at most 256 x 256 cells, the tile size) at
# a time: the float32 values read, a float64 copy and the sorted copy percentiles need, rounded up
SUMMARY_WINDOW = 256
SUMMARY_BYTES_PER_VALUE = 24


def make_grid(spec: RunSpec, data: PreparedData | None = None):
    """The simulation grid: over ``grid.bounds``, else the domain, else the data (plus
    ``grid.padding``), masked by the domain polygon or raster."""
    from .grid import Grid
    data = data if data is not None else prepare_data(spec)
    g = spec["grid"]
    geometry = read_domain_geometry(spec, data.crs)
    coords = data.coords
    if g["bounds"] is not None:
        bounds = tuple(g["bounds"])
    elif geometry is not None:
        bounds = geometry.bounds
    else:
        bounds = (coords[:, 0].min(), coords[:, 1].min(), coords[:, 0].max(), coords[:, 1].max())
    if len(g["cell"]) == 2 and coords.shape[1] == 3:
        raise InputError("the samples are 3-D but grid.cell has two sizes", file=spec.name, field="grid.cell",
                         fix="give cell = [dx, dy, dz]")
    zrange = None
    if len(g["cell"]) == 3:
        if g["z_range"] is not None:
            zrange = tuple(g["z_range"])
        elif coords.shape[1] == 3:
            zrange = (coords[:, 2].min(), coords[:, 2].max())
        else:
            raise InputError("a 3-D grid needs z_range = [bottom, top] for 2-D samples", file=spec.name,
                             field="grid.z_range", fix="give grid.z_range or a 2-D cell [dx, dy]")
    extent = [bounds[2] - bounds[0], bounds[3] - bounds[1]] + ([zrange[1] - zrange[0]] if zrange else [])
    nodes = math.prod(math.ceil((e + 2 * g["padding"]) / c) for e, c in zip(extent, g["cell"]))
    from .resources import check_memory
    from .simulation.runner import REALIZATION_BYTES_PER_NODE
    check_memory(nodes * REALIZATION_BYTES_PER_NODE, f"one realization of a grid of {nodes:,} nodes",
                 fix="choose larger grid.cell or smaller grid.bounds, or run on a machine with more memory")
    n = spec["simulation.realizations"]
    check_memory(n * SUMMARY_WINDOW**2 * SUMMARY_BYTES_PER_VALUE,
                 f"the summaries of {n:,} realizations (read {SUMMARY_WINDOW} x {SUMMARY_WINDOW} cells at a time)",
                 fix="run fewer realizations, or on a machine with more memory")
    if nodes > MAX_NODES:
        raise InputError(f"the grid would have {nodes:.3g} nodes (more than {MAX_NODES:.0e})", file=spec.name,
                         field="grid.cell", fix="choose larger cells or smaller grid.bounds")
    grid = Grid.covering(bounds, g["cell"], crs=data.crs, zrange=zrange, pad=g["padding"])
    if geometry is not None:
        grid = grid.clip_to_polygon(geometry)
    if spec["domain.raster"] is not None:
        from .domain import read_domain_raster
        mask = read_domain_raster(spec.resolve(spec["domain.raster"]), grid)
        grid = grid.with_mask(grid.mask & np.broadcast_to(mask, grid.shape))
    if spec["domain.below_collars"] and grid.ndim == 3:
        from .domain import below_surface
        grid = grid.with_mask(grid.mask & below_surface(grid, read_holes(spec).collars, file=spec.name))
    if grid.n_active == 0:
        raise InputError("no grid node falls inside the domain", file=spec.name, field="domain",
                         fix="check the domain file, its CRS and grid.bounds")
    return grid


def neighbourhood(spec: RunSpec):
    """The :class:`geosim.search.Neighbourhood` of ``[search]``."""
    from .search import Neighbourhood
    s = spec["search"]
    return Neighbourhood(max_samples=s["max_samples"], min_samples=s["min_samples"], sectors=s["sectors"],
                         max_per_sector=s["max_per_sector"], max_per_hole=s["max_per_hole"],
                         max_nodes=s["max_nodes"], widen=s["widen"])


def _relabel(progress: Progress | None, label: str) -> Progress | None:
    """A progress callback that reports under ``label`` whatever a step calls its work."""
    if progress is None:
        return None
    return lambda done, total, what: progress(done, total, label)


# -- variogram ---------------------------------------------------------------------------------

def _structures_model(spec: RunSpec):
    from .plugins import structures as registered
    from .variogram import Model
    dicts = [{k: v for k, v in item.items() if v is not None} for item in spec["variogram.structures"]]
    try:
        return Model.from_dicts(dicts, registered())
    except (ValueError, TypeError) as exc:
        raise InputError(str(exc), file=spec.name, field="variogram.structures",
                         fix="check each structure's kind, sill, ranges and angles") from None


def _default_template(data: PreparedData):
    """Start values for a fit when the spec gives none: 0.1 nugget + 0.9 spherical, ranges a
    third of the data extent (common practice, no source)."""
    from .variogram import Anisotropy, Nugget, Spherical
    span = np.ptp(data.coords, axis=0)
    horizontal = max(float(np.hypot(span[0], span[1])) / 3.0, 1.0)
    vertical = max(float(span[2]) / 3.0, 1.0) if span.size == 3 else horizontal
    return Nugget(0.1) + Spherical(0.9, Anisotropy((horizontal, horizontal, vertical)))


def experimental_variograms(spec: RunSpec, data: PreparedData, progress: Progress | None = None) -> list:
    """Experimental variograms of the normal scores in the spec's directions (omnidirectional
    when it names none)."""
    from .variogram.experimental import Direction, directional_variograms
    vg = spec["variogram"]
    lag = vg["lag"]
    if lag is None:
        # half the diagonal of the data's horizontal extent, split into lag_count bins
        # (common practice, no source)
        lag = float(np.hypot(*np.ptp(data.coords[:, :2], axis=0))) / 2.0 / vg["lag_count"]
    directions = [Direction(d["azimuth"], d["dip"], horizontal_half_angle=d["horizontal_half_angle"],
                            vertical_half_angle=d["vertical_half_angle"],
                            horizontal_max_offset=d["horizontal_max_offset"] or np.inf,
                            vertical_max_offset=d["vertical_max_offset"] or np.inf)
                  for d in spec["variogram.directions"]] or [None]
    return directional_variograms(data.coords, data.scores, directions, lag=lag, nlags=vg["lag_count"],
                                  progress=progress)


def given_model(spec: RunSpec, data: PreparedData | None = None):
    """The model the spec gives: from ``variogram.model_file`` or ``variogram.structures``
    (the start values of a fit), else the default start values for ``data``.

    A fixed (not fitted) model must have the sills of normal scores (summing to 1).
    """
    vg = spec["variogram"]
    if vg["model_file"] is not None:
        from .variogram.modelfile import load_model
        model = load_model(spec.resolve(vg["model_file"]))
        where = dict(file=str(spec.resolve(vg["model_file"])), field="structure sills")
    elif vg["structures"]:
        model = _structures_model(spec)
        where = dict(file=spec.name, field="variogram.structures")
    else:
        return _default_template(data if data is not None else prepare_data(spec))
    if not vg["fit"]:
        from .inputchecks import check_score_sill
        check_score_sill(model, **where)
    return model


def preflight(spec: RunSpec, data: PreparedData, grid) -> list[str]:
    """Everything :func:`run` would refuse before computing, checked now; returns notes.

    The spec's model (or a fit's start values) loads and is valid, a fixed model has
    the sills of normal scores, the exact engine's matrix is within its limit, and
    enough samples lie within reach of the grid (the model's longest range) to
    condition it (:mod:`geosim.inputchecks`).  ``geosim
    check`` runs this after :func:`prepare_data` and :func:`make_grid`.
    """
    from .inputchecks import check_conditioning
    model = given_model(spec, data)
    if spec["simulation.engine"] == "exact":
        from .simulation.exact import check_size
        from .simulation.validate import coincident_nodes
        coords3 = np.zeros((len(data.coords), 3))
        coords3[:, : data.coords.shape[1]] = data.coords
        free = grid.n_active - len(coincident_nodes(coords3, grid)[0])
        check_size(len(data.values) + free, file=spec.name, field="simulation.engine")
    reach = max(model.max_range, min(grid.cell))
    return check_conditioning(data.samples, grid, reach, spec_file=spec.name)


@with_folder_lock
def _preflight_notes(spec: RunSpec, data: PreparedData, grid) -> None:
    """:func:`preflight` for a step run on its own (``geosim simulate``, ``geosim estimate``):
    its refusals raise, its notes go to the ``geosim`` logger as warnings."""
    for note in preflight(spec, data, grid):
        log.warning("%s", note)


def sample_ids(data: PreparedData) -> list[str]:
    """A label per sample for messages: its file and row (``wells.csv row 14``), or its hole
    and depths for composites."""
    from .inputchecks import sample_label
    labels = []
    for i in range(len(data.values)):
        file, row, text = sample_label(data.samples, i)
        labels.append(f"{Path(file).name} {text}" if row is not None and file else text)
    return labels


def variogram_model(spec: RunSpec, data: PreparedData | None = None, *, out_dir: str | os.PathLike | None = None,
                    overwrite: bool = False, progress: Progress | None = None) -> VariogramResult:
    """The covariance model of the normal scores: from a model file, from the spec's
    structures, or fitted to experimental variograms (the structures or model file giving
    start values).

    With ``out_dir``, the model is saved as ``variogram_model.toml`` and, when it was
    fitted and ``outputs.plots`` is on, the variograms are plotted to ``variogram.png``.
    """
    vg = spec["variogram"]
    if not vg["fit"]:
        result = VariogramResult(given_model(spec), source=vg["model_file"] or "run spec")
    else:
        data = data if data is not None else prepare_data(spec, progress)
        template = given_model(spec, data)
        from .variogram.fitting import fit_model
        experimental = experimental_variograms(spec, data, progress)
        try:
            fit = fit_model(experimental, template, weighting=vg["weighting"], total_sill=vg["total_sill"])
        except InputError as exc:
            raise InputError(f"the variogram cannot be fitted: {exc.message}", file=spec.name, field="variogram",
                             fix="choose variogram.lag and lag_count so that more lags hold pairs, or give a "
                                 "fixed model (variogram.fit = false)") from None
        result = VariogramResult(fit.model_, experimental, fit, source="fitted")
    result.ndim = len(spec["grid.cell"])
    if out_dir is not None:
        from .variogram.modelfile import save_model
        out_dir = claim_folder(spec, out_dir, overwrite)
        result.files["model"] = [str(save_model(result.model, out_dir / "variogram_model.toml", overwrite=True))]
        if result.experimental and spec["outputs.plots"]:
            from .variogram.plots import plot_variogram
            result.files["variogram_plot"] = [str(plot_variogram(result.experimental, result.model,
                                                                 path=out_dir / "variogram.png",
                                                                 overwrite=True))]
    return result


def _model(spec: RunSpec, data: PreparedData | None, model, progress):
    return model if model is not None else variogram_model(spec, data, progress=progress).model


# -- kriging -----------------------------------------------------------------------------------

@with_folder_lock
def cross_validate(spec: RunSpec, data: PreparedData | None = None, model=None, *,
                   out_dir: str | os.PathLike | None = None, overwrite: bool = False,
                   progress: Progress | None = None) -> CrossValidation:
    """Leave-one-out kriging of the normal scores with the spec's neighbourhood (for
    drillholes, every composite of the hole is left out together), and the same
    back-transformed to data units (estimate: the conditional mean).

    With ``out_dir``, writes ``cross_validation.csv`` (both scales side by side) and
    ``cross_validation.png`` when ``outputs.plots`` is on.
    """
    from dataclasses import replace

    from .kriging import cross_validate as leave_one_out
    data = data if data is not None else prepare_data(spec, progress)
    model = _model(spec, data, model, progress)
    result = leave_one_out(data.coords, data.scores, model, method=spec["simulation.kriging"], mean=0.0,
                           neighbourhood=neighbourhood(spec), hole_ids=data.samples.hole_ids,
                           leave_out="hole" if spec.is_drillholes else "sample",
                           progress=_relabel(progress, "cross-validation"))
    result = replace(result, units="normal score", weights=data.weights, scale="normal scores")
    in_data = result.in_data_units(data.transform, data.values, units=spec["data.units"])
    cv = CrossValidation(result, {"normal_scores": result.summary(), "data_units": in_data.summary()},
                         data_units=in_data)
    if out_dir is not None:
        from .io.crossval import plot_crossval, write_crossval_csv
        out_dir = claim_folder(spec, out_dir, overwrite)
        cv.files["cross_validation"] = [str(write_crossval_csv(
            result, out_dir / "cross_validation.csv", overwrite=True, data_units=in_data,
            provenance=provenance_tags(spec, data, model)))]
        if spec["outputs.plots"]:
            cv.files["cross_validation"].append(str(plot_crossval(
                result, out_dir / "cross_validation.png", overwrite=True, data_units=in_data,
                log=spec["transform.log"])))
    return cv


@with_folder_lock
def estimate(spec: RunSpec, data: PreparedData | None = None, model=None, grid=None, *,
             out_dir: str | os.PathLike | None = None, overwrite: bool = False,
             progress: Progress | None = None) -> EstimateResult:
    """Kriging of the normal scores at every active grid node, with data-unit moments.

    With ``out_dir``, writes ``estimate.tif`` (per level for 3-D): conditional mean and
    standard deviation in data units, kriged normal score and its kriging variance.
    """
    from .kriging import krige
    standalone = data is None
    data = data if data is not None else prepare_data(spec, progress)
    grid = grid if grid is not None else make_grid(spec, data)
    if standalone:
        _preflight_notes(spec, data, grid)
    model = _model(spec, data, model, progress)
    result = krige(data.coords, data.scores, grid.coords(), model, method=spec["simulation.kriging"],
                   mean=0.0, neighbourhood=neighbourhood(spec), hole_ids=data.samples.hole_ids,
                   sample_ids=sample_ids(data), progress=progress)
    mean, var = multigaussian_moments(data.transform, result.estimate, result.variance)
    maps = []
    for values in (result.estimate, result.variance, mean, var):
        full = np.full(grid.shape, np.nan)
        full[grid.mask] = values
        maps.append(full)
    est = EstimateResult(*maps, n_short=result.n_short,
                         n_unestimated=int(np.count_nonzero(np.isnan(result.estimate))),
                         grid=grid, units=spec["data.units"])
    if out_dir is not None:
        from .io.geotiff import write_raster
        out_dir = claim_folder(spec, out_dir, overwrite)
        tags = provenance_tags(spec, data, model)
        est.files["estimate"] = []
        if level_geotiffs(spec, grid):
            bands = np.stack([est.mean, np.sqrt(est.variance), est.scores_mean, est.scores_variance])
            descriptions = [(text, unit) for text, unit in est.descriptions()]
            written = write_raster(out_dir / "estimate.tif", bands, grid, descriptions=descriptions, tags=tags,
                                   overwrite=True)
            est.files["estimate"] += [str(p) for p in written]
        fmt = cube_format(spec, grid)
        if fmt is not None:
            from .io.cube import write_cube
            path = write_cube(out_dir / f"estimate{CUBE_SUFFIX[fmt]}", est.to_xarray(provenance=tags),
                              overwrite=True)
            est.files["estimate"].append(str(path))
    return est


# -- simulation --------------------------------------------------------------------------------

def _inputs(spec: RunSpec) -> dict[str, str]:
    """{input file path: SHA-256} for provenance."""
    from .io.report import file_sha256
    return {str(path): file_sha256(path) for path in spec.input_files().values()}


def provenance_tags(spec: RunSpec, data: PreparedData, model) -> dict[str, str]:
    """The provenance tags every raster of the run carries."""
    from .io.report import provenance
    return provenance(seed=spec["simulation.seed"], engine=spec["simulation.engine"],
                      model=model.text(len(spec["grid.cell"])),
                      transform=data.transform, inputs=_inputs(spec), units=spec["data.units"] or None,
                      extra={"run_spec_sha256": spec.sha256})


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


CUBE_SUFFIX = {"netcdf": ".nc", "zarr": ".zarr"}


def cube_format(spec: RunSpec, grid) -> str | None:
    """``"netcdf"``, ``"zarr"`` or None: the cube the outputs ask for (``outputs.cube``).

    ``"auto"`` is NetCDF for 3-D grids when xarray, netCDF4 and dask are installed
    (``geosim[cube]``), and nothing (GeoTIFF per level, with a warning) otherwise.
    """
    fmt = spec["outputs.cube"]
    if fmt == "none" or (fmt == "auto" and grid.ndim == 2):
        return None
    if fmt == "auto":
        import importlib.util
        if not all(importlib.util.find_spec(m) for m in ("xarray", "netCDF4", "dask")):
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


def _variable_name(name: str) -> str:
    """A CF-safe variable name (letters, digits, underscores; a letter first)."""
    import re
    clean = re.sub(r"\W", "_", name) or "value"
    return clean if clean[0].isalpha() else f"v_{clean}"


def _checks(data: PreparedData, model, grid):
    """The per-realization reproduction checks of :mod:`geosim.validation`."""
    from .validation import RunChecks
    return RunChecks(grid, model, data.coords, data.scores, weights=data.weights, data_values=data.values)


def _writer(spec: RunSpec, data: PreparedData, model, grid, out_dir: Path):
    from .ensemble import RealizationWriter
    tags = provenance_tags(spec, data, model)
    derived, ranking = _support_sinks(spec, grid, out_dir, tags)
    # overwrite=True: the folder was checked to belong to this run before anything is written
    return RealizationWriter(out_dir, grid, tags=tags, units=spec["data.units"],
                             back_transform=data.transform.inverse, figures=_figures(spec, grid),
                             measure=_checks(data, model, grid), metal_unit=metal_unit(spec), overwrite=True,
                             derived=derived, ranking=ranking)


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
    writer = RealizationWriter(out_dir / name, grid, tags=own, units=spec["data.units"], figures=figures,
                               metal_unit=metal_unit(spec), overwrite=True)
    return SupportWriter(name, layout, writer, exponent=exponent, weights=weights, key=key)


def _support_sinks(spec: RunSpec, grid, out_dir: Path, tags: Mapping[str, str]) -> tuple[list, Any]:
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


@with_folder_lock
def simulate(spec: RunSpec, data: PreparedData | None = None, model=None, grid=None, *,
             out_dir: str | os.PathLike, overwrite: bool = False, resume: bool = True,
             progress: Progress | None = None) -> SimulationResult:
    """Compute the spec's realizations into ``out_dir/realizations/``, keeping verified ones.

    Parameters
    ----------
    spec : RunSpec
    data, model, grid : optional
        From :func:`prepare_data`, :func:`variogram_model` and :func:`make_grid`;
        computed from the spec when not given.
    out_dir : path
        The run's output folder (created if missing).
    overwrite : bool
        Replace a run of another spec in ``out_dir``.
    resume : bool
        Keep realizations an earlier run of the same spec completed (verified by SHA-256).
    progress : callable, optional
        ``progress(done, total, "realizations")``.
    """
    from .simulation import simulate as run_engine
    standalone = data is None
    data = data if data is not None else prepare_data(spec, progress)
    grid = grid if grid is not None else make_grid(spec, data)
    if standalone:
        _preflight_notes(spec, data, grid)
    model = _model(spec, data, model, progress)
    writer = _writer(spec, data, model, grid, Path(out_dir))  # reads query points: bad ones fail before writing
    out_dir = make_folder(out_dir)
    header = open_output(spec, out_dir, overwrite=overwrite, resume=resume)
    n = spec["simulation.realizations"]
    kept = completed_realizations(out_dir, header, n) if resume else {}
    missing = [i for i in range(n) if i not in kept]
    sink = RecordingSink(writer, out_dir / STATE_DIR, header["resume_key"], header["seed"])
    sim = spec["simulation"]
    # hole ids only when the search limits samples per hole: a plugin engine need not take them
    options = {"hole_ids": data.samples.hole_ids} if spec["search.max_per_hole"] else {}
    if sim["engine"] in ("sequential", "exact"):  # geosim's own engines name samples in their errors
        options["sample_ids"] = sample_ids(data)
    records = dict(kept)
    if missing:
        new = run_engine(data.coords, data.scores, model, grid, n_realizations=n, seed=sim["seed"],
                         engine=sim["engine"], neighbourhood=neighbourhood(spec), kriging=sim["kriging"],
                         workers=sim["workers"], client=sim["cluster"], sink=sink, indices=missing,
                         progress=progress, realizations_per_path=sim["realizations_per_path"], **options)
        records.update(zip(missing, new))
    elif progress is not None:
        progress(n, n, "realizations")
    return SimulationResult([records[i] for i in range(n)], sorted(kept), missing, writer)


# -- summaries and report -----------------------------------------------------------------------

@with_folder_lock
def summarize(spec: RunSpec, out_dir: str | os.PathLike, *, data: PreparedData | None = None, model=None,
              grid=None, simulation: SimulationResult | None = None, extra: Mapping[str, Any] | None = None,
              progress: Progress | None = None) -> dict[str, list[str]]:
    """Multiband realizations, summary raster, decision figures and the JSON run report.

    Without ``simulation``, the realizations are the ones a :func:`simulate` of the same
    spec completed in ``out_dir`` (every one must be there and verify).

    Returns output kind -> list of paths.
    """
    from .io.report import provenance, write_report
    out_dir = Path(out_dir)
    data = data if data is not None else prepare_data(spec, progress)
    model = _model(spec, data, model, progress)
    grid = grid if grid is not None else make_grid(spec, data)
    n = spec["simulation.realizations"]
    if simulation is None:
        header = read_header(out_dir)
        if header is None or header.get("resume_key") != resume_key(spec):
            raise InputError("the folder holds no realizations of this run spec", file=str(out_dir),
                             fix="run `geosim simulate` (or `geosim run`) with this spec and folder first")
        kept = completed_realizations(out_dir, header, n)
        missing = [i for i in range(n) if i not in kept]
        if missing:
            shown = ", ".join(map(str, missing[:10])) + (" ..." if len(missing) > 10 else "")
            raise InputError(f"{len(missing)} of {n} realizations are missing or changed: {shown}",
                             file=str(out_dir), fix="rerun `geosim simulate` with the same spec to complete them")
        simulation = SimulationResult([kept[i] for i in range(n)], sorted(kept), [],
                                      _writer(spec, data, model, grid, out_dir))
    out = spec["outputs"]
    files = simulation.writer.finish(simulation.records, cutoffs=out["cutoffs"], stack=True,
                                     keep_realization_files=True, progress=_relabel(progress, "summary windows"))
    report = dict(provenance(seed=spec["simulation.seed"], engine=spec["simulation.engine"],
                      model=model.text(len(spec["grid.cell"])),
                             transform=data.transform, inputs=_inputs(spec), units=spec["data.units"] or None))
    report.update({"title": spec["title"], "run_spec": spec.name, "run_spec_sha256": spec.sha256,
                   "parameters": spec.to_dict(), "samples": int(len(data.values)), "notes": list(data.notes),
                   "grid": {"shape": list(grid.shape), "cell": list(grid.cell), "active_nodes": grid.n_active,
                            "crs": grid.crs.to_string() if grid.crs is not None else None},
                   "realizations": {"count": n, "kept_from_earlier_run": simulation.kept}})
    checks = [r.get("checks") for r in simulation.records]
    if all(c is not None for c in checks):
        report["validation"] = _checks(data, model, grid).summarize(checks)
    support = _support_report(simulation.writer, simulation.records)
    if support:
        report["change_of_support"] = support
    if extra:
        report.update(extra)
    if out["plots"]:
        files["plots"] = [str(p) for p in _summary_plots(spec, data, model, grid, out_dir, simulation.records,
                                                         report.get("validation"))]
        files["plots"] += [str(p) for p in _support_plots(spec, simulation.writer, simulation.records, out_dir)]
    files.update(_cubes_and_tables(spec, grid, out_dir, simulation.records, files,
                                   provenance_tags(spec, data, model)))
    if not out["keep_realizations"]:
        removed = [Path(f) for f in files.pop("realization_files")]  # block and upscaled ones too
        for f in removed:
            f.unlink()
        for folder in {f.parent for f in removed}:
            with contextlib.suppress(OSError):
                folder.rmdir()
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


def _cubes_and_tables(spec: RunSpec, grid, out_dir: Path, records: Sequence[Mapping], files: Mapping,
                      tags: Mapping[str, str]) -> dict[str, list[str]]:
    """The summary and realization cubes and the block-model tables, from the run's GeoTIFFs."""
    from .io.geotiff import read_realization
    from .summaries import summary_band_names
    fmt, tables = cube_format(spec, grid), block_model_formats(spec, grid)
    if fmt is None and not tables:
        return {}
    out = spec["outputs"]
    units = spec["data.units"]
    cutoffs = list(out["cutoffs"])
    bands = np.stack([read_realization(files["summary"], grid, band=b + 1)
                      for b in range(len(summary_band_names(cutoffs)))])
    paths = [[out_dir / f for f in r["files"]] for r in records]
    indices = [int(r["index"]) for r in records]
    written: dict[str, list[str]] = {}
    if fmt is not None:
        from .io.cube import realizations_dataset, summary_dataset, write_cube
        name = _variable_name(spec["data.value"])
        u = f" ({units})" if units else ""

        def reader(j: int) -> np.ndarray:
            return read_realization(paths[j], grid).astype(np.float32)

        suffix = CUBE_SUFFIX[fmt]
        written["summary_cube"] = [str(write_cube(out_dir / f"summary{suffix}", summary_dataset(
            grid, bands, cutoffs, units=units, provenance=tags), overwrite=True))]
        written["realizations_cube"] = [str(write_cube(out_dir / f"realizations{suffix}", realizations_dataset(
            grid, reader, indices, name=name, long_name=f"{spec['data.value']}{u}, conditional realization",
            units=units, provenance=tags), overwrite=True))]
    if tables:
        from .io.cube import summary_variables, write_block_model
        variables, _ = summary_variables(bands, cutoffs, units)
        variables.pop("prob_above", None)
        table = {k: (v, d, u) for k, (v, d, u) in variables.items()}
        for c, band in zip(cutoffs, bands[5:]):
            table[f"prob_above_{c:g}"] = (band, f"probability above {c:g} (fraction 0-1 of realizations)", "")
        if out["block_model_realizations"]:
            for i, p in zip(indices, paths):
                table[f"r{i:04d}"] = (read_realization(p, grid), f"realization {i}", units)
        written["block_model"] = [str(write_block_model(out_dir / f"block_model{s}", grid, table, provenance=tags,
                                                        overwrite=True)) for s in tables]
    return written


def _plot_level(data: PreparedData, grid) -> int:
    """The level of a 3-D grid mapped in the PNGs: the one nearest the samples' mean elevation."""
    if grid.ndim == 2:
        return 0
    z = grid.axes()[0]
    return int(np.argmin(np.abs(z - data.coords[:, 2].mean())))


def _summary_plots(spec: RunSpec, data: PreparedData, model, grid, out_dir: Path, records: Sequence[Mapping],
                   validation: Mapping | None) -> list[Path]:
    """Maps of the summary (one level for 3-D grids), reproduction and decision-spread plots."""
    import rasterio

    from .io import plots
    from .io.geotiff import level_grid, level_paths
    from .summaries import summary_band_names
    units = spec["data.units"]
    k = _plot_level(data, grid)
    g2 = level_grid(grid, k)
    with rasterio.open(level_paths(out_dir / "summary.tif", grid)[k]) as src:
        summary = dict(zip(summary_band_names(spec["outputs.cutoffs"]), src.read().astype(float)))
    prefix = "" if grid.ndim == 2 else f"z{k:03d}_"
    written = list(plots.plot_summary_maps(summary, g2, out_dir, units=units, prefix=prefix,
                                           log=spec["transform.log"], overwrite=True))
    quantiles = [r["checks"]["quantiles"] for r in records if r.get("checks") and "quantiles" in r["checks"]]
    if quantiles:
        written.append(plots.plot_histogram_reproduction(
            data.values, [np.asarray(q, dtype=float) for q in quantiles], out_dir / "histogram_reproduction.png",
            weights=data.weights, units=units, overwrite=True))
    if validation:
        written.append(plots.plot_variogram_reproduction(validation["variogram"],
                                                         out_dir / "variogram_reproduction.png", model=model,
                                                         ndim=grid.ndim, overwrite=True))
    figures = [r.get("figures") for r in records]
    if figures and all(f is not None for f in figures):
        written.append(plots.plot_decision_spread(figures, out_dir / "decision_spread.png", units=units,
                                                  overwrite=True))
    return written


# -- the whole job -----------------------------------------------------------------------------

@with_folder_lock
def run(spec: RunSpec | str | os.PathLike, out_dir: str | os.PathLike, *, overwrite: bool = False,
        resume: bool = True, progress: Progress | None = None) -> RunResult:
    """Run the whole job of a run spec into ``out_dir``.

    Parameters
    ----------
    spec : RunSpec or path
        A spec from :func:`geosim.config.runspec.load_spec`, or the path of one.
    out_dir : path
        Output folder, created if missing.  A folder holding a run of the same spec
        is resumed; one holding another run raises :class:`~geosim.errors.InputError`
        unless ``overwrite``.
    overwrite : bool
        Replace another run's outputs in ``out_dir``.
    resume : bool
        Keep verified realizations of an interrupted run of the same spec.
    progress : callable, optional
        ``progress(done, total, what)`` for long steps.

    Returns
    -------
    RunResult
    """
    if not isinstance(spec, RunSpec):
        spec = load_spec(spec)
    out_dir = Path(out_dir)
    timings: dict[str, float] = {}

    def timed(name, func, *args, **kwargs):
        t0 = time.perf_counter()
        value = func(*args, **kwargs)
        timings[name] = time.perf_counter() - t0
        log.info("%s: %.1f s", name, timings[name])
        return value

    data = timed("read and transform data", prepare_data, spec, progress)
    for note in data.notes:
        log.info("%s", note)
    grid = timed("grid and domain", make_grid, spec, data)
    data.notes.extend(timed("checks", preflight, spec, data, grid))
    _support_sinks(spec, grid, out_dir, {})  # bad query points or ranking region fail before the folder is claimed
    fresh = folder_is_empty(make_folder(out_dir))
    log.info("%r", grid)
    # claim the folder (or fail on another run's) before anything is written into it
    open_output(spec, make_folder(out_dir), overwrite=overwrite, resume=resume)
    try:
        return _run_steps(spec, data, grid, out_dir, resume, progress, timed, timings)
    except BaseException:
        # a run that failed before finishing a realization leaves a new folder as it found it,
        # so the same folder takes the corrected spec without --overwrite
        if fresh and not any((out_dir / STATE_DIR).glob("r[0-9]*.json")):
            empty_folder(out_dir)
        raise


def _run_steps(spec, data, grid, out_dir, resume, progress, timed, timings) -> RunResult:
    mine = dict(out_dir=out_dir, progress=progress)
    vg = timed("variogram", variogram_model, spec, data, **mine)
    files = dict(vg.files)
    extra: dict[str, Any] = {"variogram": {"model": vg.model_text(), "source": vg.source}}
    if vg.fit is not None:
        extra["variogram"]["fit"] = vg.fit.to_dict()
    crossval = None
    if spec["outputs.cross_validation"]:
        cv = timed("cross-validation", cross_validate, spec, data, vg.model, **mine)
        crossval = extra["cross_validation"] = cv.summary
        files.update(cv.files)
    notes = list(data.notes)
    if crossval is not None:
        scores = crossval["normal_scores"]
        notes.append(short_note(scores["below_min_samples"], scores["samples"], "left-out samples", spec))
    if spec["outputs.estimate"]:
        est = timed("kriging estimate", estimate, spec, data, vg.model, grid, **mine)
        files.update(est.files)
        extra["estimate"] = {"active_nodes": grid.n_active, "below_min_samples": est.n_short,
                             "unestimated": est.n_unestimated, "min_samples": spec["search.min_samples"],
                             "widened": spec["search.widen"]}
        notes.append(short_note(est.n_short, grid.n_active, "grid nodes", spec, est.n_unestimated))
    sim = timed("simulation", simulate, spec, data, vg.model, grid, out_dir=out_dir, resume=resume,
                progress=progress)
    files.update(timed("summaries and report", summarize, spec, out_dir, data=data, model=vg.model, grid=grid,
                       simulation=sim, extra=extra, progress=progress))
    checks = [r.get("checks") for r in sim.records]
    if checks and all(c is not None and "extremes" in c for c in checks):
        from .validation import extremes_summary
        notes.append(extremes_note(extremes_summary(data.values, checks), spec["data.units"]))
    return RunResult(out_dir, spec.sha256, files, vg.model, sim.kept, sim.computed, crossval,
                     decision_spread(sim), timings, notes, grid.ndim)


def short_note(short: int, total: int, what: str, spec: RunSpec, unestimated: int = 0) -> str:
    """One line saying how many kriging searches held fewer than ``search.min_samples`` samples
    and what was done about it."""
    k = spec["search.min_samples"]
    if spec["search.widen"]:
        done = f"their search was widened to the nearest {k}"
    elif spec["simulation.kriging"] == "simple":
        done = "simple kriging estimated them from the samples found and the mean"
    else:
        done = "ordinary kriging left them without an estimate"
    text = f"kriging: {short} of {total} {what} had fewer than {k} sample(s) in the search"
    text += f"; {done}" if short else ""
    return text + (f"; {unestimated} without an estimate" if unestimated else "")


def extremes_note(extremes: Mapping[str, Any], units: str | None = None) -> str:
    """One line comparing the largest simulated value with the largest datum."""
    u = f" {units}" if units else ""
    ratio = extremes["largest_over_largest_datum"]
    return (f"largest simulated value {extremes['largest_simulated']:.4g}{u} (realization "
            f"{extremes['realization_of_largest']}) against the largest datum {extremes['largest_datum']:.4g}{u}"
            + (f" ({ratio:.2f} times)" if ratio is not None else "")
            + f"; {extremes['realizations_above_largest_datum']} realization(s) exceed the largest datum")


def decision_spread(simulation: SimulationResult) -> list[dict]:
    """P10/P50/P90 of each decision figure across the realizations (empty without cut-offs)."""
    from .summaries import decision_spread as spread
    figures = [r.get("figures") for r in simulation.records]
    return spread(figures) if figures and all(f is not None for f in figures) else []


