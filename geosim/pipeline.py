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

Where things live: how the steps read the spec (samples, checks, grid extent and
domain, search, variogram directions and structures) is :mod:`geosim.inputs`;
what each step writes and how (provenance, formats, the realization writer and
its change-of-support sinks, the summaries and the report) is
:mod:`geosim.outputs`; the run state (who owns an output folder, what a rerun
keeps) is :mod:`geosim.runstate`; the result classes and the descriptions the
command line prints are :mod:`geosim.results`; the transform chain and the
multi-Gaussian moments are in :mod:`geosim.transforms`.  This module only wires
the steps together.
"""
from __future__ import annotations

import logging
import os
import time
from collections.abc import Callable, Mapping
from contextlib import nullcontext
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from .config.runspec import RunSpec, has_units, load_spec
from .errors import InputError
from .inputs import (check_samples, decluster, default_template, experimental_variograms, fit_transform,
                     grid_extent, load_samples, mask_domain, neighbourhood, read_domain_geometry, read_holes,
                     sample_ids, structures_model)
from .outputs import (realization_writer, support_sinks, write_crossval, write_estimate, write_summaries,
                      write_variogram)
from .progress import Progress, relabel
from .results import (CrossValidation, EstimateResult, PreparedData, RunResult, SimulationResult, VariogramResult,
                      describe_data, describe_spec, extremes_note, short_note)
from .runstate import (STATE_DIR, RecordingSink, claim_folder, completed_realizations, empty_folder, folder_is_empty,
                       make_folder, open_output, read_header, resume_key, with_folder_lock)
from .moments import multigaussian_moments
from .transforms import TransformChain

log = logging.getLogger("geosim")  # notes of a run at INFO; the command line shows what it chooses

__all__ = ["PreparedData", "VariogramResult", "CrossValidation", "EstimateResult", "SimulationResult",
           "RunResult", "TransformChain", "RecordingSink", "load_samples", "read_holes", "decluster",
           "fit_transform", "prepare_data", "prepare_samples", "make_grid", "read_domain_geometry", "neighbourhood",
           "experimental_variograms", "variogram_model", "cross_validate", "multigaussian_moments", "estimate",
           "simulate", "simulate_into", "summarize", "run", "open_output", "completed_realizations", "resume_key",
           "describe_spec", "describe_data", "STATE_DIR"]


# -- data and grid -------------------------------------------------------------------------------

def prepare_data(spec: RunSpec, progress: Progress | None = None) -> PreparedData:
    """Read, decluster and transform the samples (:func:`load_samples`, :func:`decluster`,
    :func:`fit_transform`)."""
    if has_units(spec):
        raise InputError("the run spec models several units ([units] and [unit.<name>] tables)", file=spec.name,
                         field="units", fix="run the whole job: `geosim run` (geosim.units_run.run); its steps "
                                            "cannot be run one by one")
    samples = load_samples(spec).complete(spec["data.value"])  # composites may lack the value over a gap
    return prepare_samples(spec, samples, progress)


def prepare_samples(spec: RunSpec, samples, progress: Progress | None = None) -> PreparedData:
    """Decluster and transform given samples as the spec asks (one unit's samples, in a run of
    several units; :func:`prepare_data` for all samples of the spec)."""
    name = spec["data.value"]
    values = samples.column(name)
    check_samples(spec, samples, values)  # enough values, and a log or tail bounds that fit them
    dc = decluster(spec, samples, progress)
    weights = None if dc is None else np.asarray(dc.weights, dtype=float)
    from .inputchecks import check_variability, negative_values_note
    check_variability(values, weights, name=name, samples=samples)
    transform = fit_transform(spec, values, weights)
    scores = np.asarray(transform.data_scores_, dtype=float)  # ties distinct, as the transform documents
    notes = list(samples.notes) + ([dc.describe()] if dc is not None else [])
    if not spec["transform.log"]:
        notes += [n for n in [negative_values_note(values, name=name, units=spec["data.units"], samples=samples)]
                  if n]
    from .secondary import local_mean
    mean = local_mean(spec, samples, transform, scores, weights)  # [mean]: every later step models the residuals
    if mean is not None:
        scores = mean.residuals
        notes += mean.notes
    return PreparedData(samples, values, weights, dc, transform, scores, notes, mean=mean)


def make_grid(spec: RunSpec, data: PreparedData | None = None):
    """The simulation grid: over ``grid.bounds``, else the domain, else the data (plus
    ``grid.padding``), masked by the domain polygon or raster."""
    from .grid import Grid
    data = data if data is not None else prepare_data(spec)
    geometry = read_domain_geometry(spec, data.crs)
    bounds, zrange = grid_extent(spec, data, geometry)  # refuses a grid too large for memory
    grid = Grid.covering(bounds, spec["grid.cell"], crs=data.crs, zrange=zrange, pad=spec["grid.padding"])
    return mask_domain(spec, grid, geometry)  # polygon, raster and below the collars


# -- variogram ---------------------------------------------------------------------------------

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
        model = structures_model(spec)
        where = dict(file=spec.name, field="variogram.structures")
    else:
        return default_template(data if data is not None else prepare_data(spec))
    from .secondary import uses_drift
    if not vg["fit"] and spec["mean.trend"] is None and spec["mean.file"] is None and not uses_drift(spec):
        from .inputchecks import check_score_sill  # residuals from a mean or a drift have less
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
        from .secondary import uses_drift
        collocated = spec["secondary.file"] and spec["secondary.correlation"] != 0 and not uses_drift(spec)
        secondary = grid.n_active if collocated else 0
        check_size(len(data.values) + secondary + free, file=spec.name, field="simulation.engine")
    reach = max(model.max_range, min(grid.cell))
    return check_conditioning(data.samples, grid, reach, spec_file=spec.name)


@with_folder_lock
def _preflight_notes(spec: RunSpec, data: PreparedData, grid) -> None:
    """:func:`preflight` for a step run on its own (``geosim simulate``, ``geosim estimate``):
    its refusals raise, its notes go to the ``geosim`` logger as warnings."""
    for note in preflight(spec, data, grid):
        log.warning("%s", note)


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
        from .secondary import drift_fit, fit_total_sill, secondary_grid, uses_drift
        from .variogram.fitting import fit_model
        fitted, total_sill = data, fit_total_sill(spec, data.weights, data.mean)
        if uses_drift(spec):  # the variogram of the residuals from the drift
            secondary = secondary_grid(spec, data.samples, data.scores, make_grid(spec, data))
            residuals, drift = drift_fit(secondary, data.scores, data.weights)
            fitted = replace(data, scores=residuals)
            if total_sill == 1.0:
                total_sill = drift["residual_variance"]
        experimental = experimental_variograms(spec, fitted, progress)
        try:
            fit = fit_model(experimental, template, weighting=vg["weighting"], total_sill=total_sill)
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
def cross_validate(spec: RunSpec, data: PreparedData | None = None, model=None, *, secondary=None,
                   out_dir: str | os.PathLike | None = None, overwrite: bool = False,
                   progress: Progress | None = None) -> CrossValidation:
    """Leave-one-out kriging of the normal scores with the spec's neighbourhood (for
    drillholes, every composite of the hole is left out together), and the same
    back-transformed to data units (estimate: the conditional mean).

    With a ``[secondary]`` grid the estimator is the one ``estimate`` uses: collocated simple
    cokriging with the secondary at the left-out sample (a sample without a secondary value keeps
    its simple-kriging estimate), or kriging with the external drift.  ``secondary`` (a
    :class:`geosim.secondary.SecondaryGrid`) is made from the spec when not given.

    With ``out_dir``, writes ``cross_validation.csv`` (both scales side by side) and
    ``cross_validation.png`` when ``outputs.plots`` is on.
    """
    from .kriging import cross_validate as leave_one_out, kernel_of
    from .secondary import collocated_leave_one_out, drift_errors, secondary_grid
    from .simulation.runner import await_compiled
    data = data if data is not None else prepare_data(spec, progress)
    model = _model(spec, data, model, progress)
    if secondary is None and spec["secondary.file"] is not None:
        secondary = secondary_grid(spec, data.samples, data.scores, make_grid(spec, data))
    method, drift = spec["simulation.kriging"], {}
    if secondary is not None and secondary.method == "external_drift":  # the secondary at the samples
        method, drift = "external_drift", {"drift": secondary.at_data}
    moments_ready(data.transform, len(data.scores))
    await_compiled("modules", kernel_of(method))  # a first run's kriging kernel, being compiled ahead
    with drift_errors(secondary) if drift else nullcontext():
        result = leave_one_out(data.coords, data.scores, model, method=method, mean=0.0,
                               neighbourhood=neighbourhood(spec), hole_ids=data.samples.hole_ids,
                               leave_out="hole" if spec.is_drillholes else "sample",
                               progress=relabel(progress, "cross-validation"), **drift)
    if secondary is not None and secondary.method == "collocated":
        result = collocated_leave_one_out(result, secondary, float(model.sill))
    result = replace(result, units="normal score", weights=data.weights, scale="normal scores")
    if data.mean is not None:  # the mean at each sample back on the residuals
        result = replace(result, values=data.mean.scores, estimate=result.estimate + data.mean.at_data)
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
    from .secondary import krige_nodes, secondary_grid, spread_comparison
    standalone = data is None
    data = data if data is not None else prepare_data(spec, progress)
    grid = grid if grid is not None else make_grid(spec, data)
    if standalone:
        _preflight_notes(spec, data, grid)
    model = _model(spec, data, model, progress)
    from .kriging import kernel_of
    from .simulation.runner import await_compiled
    moments_ready(data.transform, grid.n_active)
    await_compiled("modules", kernel_of(spec["simulation.kriging"]))  # a first run's, being compiled ahead
    secondary = secondary_grid(spec, data.samples, data.scores, grid)
    scores, variance, result = krige_nodes(
        data.coords, data.scores, grid, model, mean=data.mean, secondary=secondary,
        method=spec["simulation.kriging"], neighbourhood=neighbourhood(spec), hole_ids=data.samples.hole_ids,
        sample_ids=sample_ids(data), progress=progress)
    mean, var = multigaussian_moments(data.transform, scores, variance)
    maps = []
    for values in (scores, variance, mean, var):
        full = np.full(grid.shape, np.nan)
        full[grid.mask] = values
        maps.append(full)
    est = EstimateResult(*maps, n_short=result.n_short,
                         n_unestimated=int(np.count_nonzero(np.isnan(result.estimate))),
                         grid=grid, units=spec["data.units"])
    if secondary is not None and standalone:
        for note in secondary.notes:
            log.warning("%s", note)
    if secondary is not None and secondary.method == "collocated":
        est.spread = spread_comparison(data.transform, scores, variance, result,
                                       None if data.mean is None else data.mean.at_nodes(grid)[grid.mask])
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
    from .secondary import refuse_drift_simulation
    from .simulation import simulate as run_engine
    refuse_drift_simulation(spec, "simulate")
    standalone = data is None
    data = data if data is not None else prepare_data(spec, progress)
    grid = grid if grid is not None else make_grid(spec, data)
    if standalone:
        _preflight_notes(spec, data, grid)
    model = _model(spec, data, model, progress)
    # reads the query points: bad ones fail before anything is written
    writer = realization_writer(spec, data, model, grid, Path(out_dir))
    sim = spec["simulation"]
    # hole ids only when the search limits samples per hole: a plugin engine need not take them
    options = {"hole_ids": data.samples.hole_ids} if spec["search.max_per_hole"] else {}
    if sim["engine"] in ("sequential", "exact"):  # geosim's own engines name samples in their errors
        options["sample_ids"] = sample_ids(data)
        from .secondary import secondary_grid
        secondary = secondary_grid(spec, data.samples, data.scores, grid)
        options.update(secondary.engine_options(sim["engine"]) if secondary is not None else {})
    return simulate_into(spec, writer, out_dir, lambda **run: run_engine(
        data.coords, data.scores, model, grid, engine=sim["engine"], neighbourhood=neighbourhood(spec), **run,
        **options), overwrite=overwrite, resume=resume, progress=progress)


def simulate_into(spec: RunSpec, writer, out_dir: str | os.PathLike, engine: Callable, *, overwrite: bool,
                  resume: bool, progress: Callable | None) -> SimulationResult:
    """The realizations of ``spec`` that ``out_dir`` does not hold yet, computed and written by ``writer``.

    Opens the run state (:func:`open_output`), keeps the realizations an earlier run
    completed when ``resume`` (verified by SHA-256), makes the writer's stores once before
    any worker writes, and calls ``engine(**run)`` with the keywords of
    :func:`geosim.simulation.simulate` that every run shares (realizations, seed, kriging,
    workers, cluster, the recording sink, the missing indices, progress, realizations per
    path) for the missing realizations.  Serves :func:`simulate` and
    :func:`geosim.units_run.simulate_units`.
    """
    out_dir = make_folder(out_dir)
    header = open_output(spec, out_dir, overwrite=overwrite, resume=resume)
    n = spec["simulation.realizations"]
    kept = completed_realizations(out_dir, header, n) if resume else {}
    missing = [i for i in range(n) if i not in kept]
    writer.open_stores(n, kept)  # made here, once, before any worker writes into them
    sink = RecordingSink(writer, out_dir / STATE_DIR, header["resume_key"], header["seed"])
    sim = spec["simulation"]
    records = dict(kept)
    if missing:
        if hasattr(writer, "finish_modules"):  # imported while this process waits for the workers
            from .simulation.runner import import_ahead
            import_ahead(writer.finish_modules(spec["outputs.plots"]))
        new = engine(n_realizations=n, seed=sim["seed"], kriging=sim["kriging"], workers=sim["workers"],
                     client=sim["cluster"], sink=sink, indices=missing, progress=progress,
                     realizations_per_path=sim["realizations_per_path"])
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
    from .simulation.runner import await_compiled
    from .summaries import _node_bands
    await_compiled("engine", _node_bands)  # a large first run's summary kernel, compiled after the engine's
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
    def prepare(spec: RunSpec, timed: Callable):
        data = timed("read and transform data", prepare_data, spec, progress)
        grid = timed("grid and domain", make_grid, spec, data)
        data.notes.extend(timed("checks", preflight, spec, data, grid))
        return data, grid, data.notes

    def steps(spec: RunSpec, data: PreparedData, grid, out_dir: Path, timed: Callable,
              timings: dict[str, float]) -> RunResult:
        return _run_steps(spec, data, grid, out_dir, resume, progress, timed, timings)

    return run_job(spec, out_dir, prepare, steps, overwrite=overwrite, resume=resume)


def run_job(spec: RunSpec | str | os.PathLike, out_dir: str | os.PathLike, prepare: Callable, steps: Callable, *,
            overwrite: bool, resume: bool) -> RunResult:
    """The frame every whole run shares (:func:`run`, :func:`geosim.units_run.run`).

    Loads the spec, starts the step timer, runs ``prepare(spec, timed) -> (prepared, grid,
    notes)`` (reading and checking everything before the folder is touched), logs the
    notes, reads the change-of-support sinks' inputs (bad query points fail here too), then
    claims ``out_dir`` (:func:`run_in_folder`) and returns ``steps(spec, prepared, grid,
    out_dir, timed, timings)``.  ``timed(name, func, *args)`` is :func:`step_timer`'s.
    """
    from .kriging import kernel_of
    from .linalg import chol_partial
    from .search import _select_rows
    from .simulation.runner import compile_ahead, compile_modules_ahead, end_ahead, resolve_engine
    from .simulation.sequential import SequentialEngine
    from .summaries import COMPILED_BANDS_FROM, _node_bands
    from .variogram.compiled import cov_matrix_into
    if not isinstance(spec, RunSpec):
        spec = load_spec(spec)
    from .secondary import refuse_drift_simulation
    refuse_drift_simulation(spec, "run")
    out_dir = Path(out_dir)
    timings: dict[str, float] = {}
    # a first run compiles ahead in two processes, each kernel ready before the step that needs it:
    # the kriging kernel of cross-validation and the estimate, then what prepares a run of the
    # sequential engine (its data search, which calls the kriging kernel's neighbour selection, and
    # its covariance kernel); and the engine's main kernel of this run once its grid is known
    # (whether realizations share paths), and the summary kernel when the run is large enough for
    # it to pay (smaller ones use numpy).  The main kernel takes longest, so its process has nothing
    # else before it but the factorization every kernel calls (so that the kriging kernel finds it
    # cached rather than compiling it at the same time); without a kriging process it takes what
    # prepares the engine's run too.  This process compiles the data-unit moments itself, when the
    # run is large enough for their kernel, while it waits for the kriging kernel (moments_ready);
    # small data sets' moments and variograms compile nothing
    sequential = isinstance(resolve_engine(spec["simulation.engine"]), SequentialEngine)
    preparing = ([("geosim.search", _select_rows, {}), ("geosim.simulation.sequential", cov_matrix_into, {})]
                 if sequential else [])
    if spec["outputs.cross_validation"] or spec["outputs.estimate"]:
        method = spec["simulation.kriging"]
        compile_modules_ahead("modules", [("geosim.kriging", kernel_of(method), {"methods": (method,)})] + preparing)
        preparing = []
    compile_modules_ahead("engine", ([("geosim.linalg", chol_partial, {})] if sequential else []) + preparing,
                          more=True)
    timed = step_timer(timings)
    try:
        prepared, grid, notes = prepare(spec, timed)
    except BaseException:
        end_ahead("engine")  # nothing more comes: the process ends after what it has
        raise
    large = grid.n_active * spec["simulation.realizations"] >= COMPILED_BANDS_FROM
    compile_ahead(spec["simulation.engine"], engine_needs(spec, grid),
                  [("geosim.summaries", _node_bands)] if large else [])
    for note in notes:
        log.info("%s", note)
    support_sinks(spec, grid, out_dir, {})  # bad query points or ranking region fail before the folder is claimed
    log.info("%r", grid)
    return run_in_folder(spec, out_dir, overwrite, resume,
                         lambda: steps(spec, prepared, grid, out_dir, timed, timings))


def moments_ready(transform, n_nodes: int) -> None:
    """Compile the data-unit moments' kernel into numba's cache if the moments of ``n_nodes``
    nodes under ``transform`` take it (:func:`geosim.moments.uses_kernel`) and it is not there.

    Cross-validation and the estimate call this before they wait for the kriging kernel: on a
    first run that kernel is still compiling in another process (:func:`run_job`), and the wait
    is spent on the moments they need next.  With the kernel cached, or a problem small enough
    for numpy's moments, this does nothing.
    """
    from .moments import _kernel, uses_kernel, warm_up
    from .simulation.runner import in_numba_cache
    if uses_kernel(transform, n_nodes) and not in_numba_cache(_kernel):
        warm_up()


def engine_needs(spec: RunSpec, grid) -> list[dict[str, object]]:
    """The options of the spec's run on ``grid`` that select the engine kernel's variant
    (:func:`geosim.simulation.runner.compile_ahead`): the kriging, whether realizations share
    paths, and whether a collocated secondary joins (a correlation estimated from the data
    counts as one).  One mapping for each variant the run uses: a run of several units takes
    each modelled unit's own ``[secondary]``."""
    from .config.runspec import has_units, unit_spec, unit_table
    from .simulation.runner import per_path_for
    sim = spec["simulation"]
    shared = per_path_for(sim["realizations_per_path"], grid, sim["engine"]) > 1
    views = ([unit_spec(spec, u.name) for u in unit_table(spec).units if u.modelled] if has_units(spec)
             else [spec])
    variants: list[dict[str, object]] = []
    for view in views:
        variant = {"kriging": sim["kriging"], "shared_path": shared,
                   "secondary": view["secondary.file"] is not None and view["secondary.correlation"] != 0.0}
        if variant not in variants:
            variants.append(variant)
    return variants


def step_timer(timings: dict[str, float]) -> Callable:
    """``timed(name, func, *args, **kwargs)``: calls ``func``, logs its time and keeps it in ``timings``."""
    def timed(name, func, *args, **kwargs):
        t0 = time.perf_counter()
        value = func(*args, **kwargs)
        timings[name] = time.perf_counter() - t0
        log.info("%s: %.1f s", name, timings[name])
        return value
    return timed


def run_in_folder(spec: RunSpec, out_dir: Path, overwrite: bool, resume: bool, steps: Callable[[], RunResult]
                  ) -> RunResult:
    """Claim ``out_dir`` for the spec's run (or fail on another run's) before anything is written into
    it, then run ``steps``.  A run that fails before finishing a realization leaves a new folder as it
    found it, so the same folder takes the corrected spec without ``overwrite``."""
    fresh = folder_is_empty(make_folder(out_dir))
    open_output(spec, make_folder(out_dir), overwrite=overwrite, resume=resume)
    try:
        return steps()
    except BaseException:
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
        if est.spread is not None:
            extra["estimate"]["secondary_spread"] = est.spread
        notes.append(short_note(est.n_short, grid.n_active, "grid nodes", spec, est.n_unestimated))
    from .secondary import secondary_grid
    secondary = secondary_grid(spec, data.samples, data.scores, grid)
    notes += secondary.notes if secondary is not None else []
    if data.mean is not None:  # how a mean grid was read at the nodes (its notes at the samples came first)
        data.mean.at_nodes(grid)
        notes += [n for n in data.mean.notes if n not in notes]
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
