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

Where things live: what each step writes and how (provenance, formats, the
realization writer and its change-of-support sinks, the summaries and the report)
is :mod:`geosim.outputs`; the run state (who owns an output folder, what a rerun
keeps) is :mod:`geosim.runstate`; the result classes and the descriptions the
command line prints are :mod:`geosim.results`; the transform chain and the
multi-Gaussian moments are in :mod:`geosim.transforms`.  This module only wires
the steps together.
"""
from __future__ import annotations

import logging
import math
import os
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from .config.runspec import RunSpec, load_spec
from .errors import InputError
from .outputs import (realization_writer, support_sinks, write_crossval, write_estimate, write_summaries,
                      write_variogram)
from .progress import Progress, relabel
from .results import (CrossValidation, EstimateResult, PreparedData, RunResult, SimulationResult, VariogramResult,
                      describe_data, describe_spec, extremes_note, short_note)
from .runstate import (STATE_DIR, RecordingSink, claim_folder, completed_realizations, empty_folder, folder_is_empty,
                       make_folder, open_output, read_header, resume_key, with_folder_lock)
from .transforms import TransformChain, multigaussian_moments

log = logging.getLogger("geosim")  # notes of a run at INFO; the command line shows what it chooses

__all__ = ["PreparedData", "VariogramResult", "CrossValidation", "EstimateResult", "SimulationResult",
           "RunResult", "TransformChain", "RecordingSink", "load_samples", "decluster", "fit_transform",
           "prepare_data", "make_grid", "read_domain_geometry", "neighbourhood", "experimental_variograms",
           "variogram_model", "cross_validate", "multigaussian_moments", "estimate", "simulate", "summarize",
           "run", "open_output", "completed_realizations", "resume_key",
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
                             progress=relabel(progress, "declustering sizes"))


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
        result.files.update(write_variogram(spec, result, claim_folder(spec, out_dir, overwrite)))
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
                           progress=relabel(progress, "cross-validation"))
    result = replace(result, units="normal score", weights=data.weights, scale="normal scores")
    in_data = result.in_data_units(data.transform, data.values, units=spec["data.units"])
    cv = CrossValidation(result, {"normal_scores": result.summary(), "data_units": in_data.summary()},
                         data_units=in_data)
    if out_dir is not None:
        cv.files.update(write_crossval(spec, data, model, cv, claim_folder(spec, out_dir, overwrite)))
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
        est.files.update(write_estimate(spec, data, model, est, claim_folder(spec, out_dir, overwrite)))
    return est


# -- simulation --------------------------------------------------------------------------------

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
    writer = realization_writer(spec, data, model, grid, Path(out_dir))  # reads query points: bad ones fail before writing
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
                                      realization_writer(spec, data, model, grid, out_dir))
    return write_summaries(spec, out_dir, data, model, grid, simulation, extra, progress)


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
    support_sinks(spec, grid, out_dir, {})  # bad query points or ranking region fail before the folder is claimed
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
                     sim.decision_spread(), timings, notes, grid.ndim)
