"""A run of several geological units (estimation domains), joined into one model.

A run spec with ``[units]`` and ``[unit.<name>]`` tables (see
:mod:`geosim.config.runspec`) is run here, by the same steps as a run of one
unit, applied to each unit's piece and then joined:

1. every sample and every grid node gets a unit code (:mod:`geosim.units`);
2. each modelled unit is declustered, transformed, fitted and cross-validated on
   its own samples only, with the unit's view of the spec
   (:func:`geosim.config.runspec.unit_spec`: its overrides, else the top level);
3. each unit is simulated on its own nodes in its own normal-score space; the
   engine of the spec runs once per unit (:class:`UnitsEngine`), and realization
   ``i`` of the unit with code ``u`` draws from
   ``numpy.random.SeedSequence(seed, spawn_key=(i, u))``, the child ``u`` spawned
   from realization ``i``'s own sequence, so adding, removing or reordering units,
   or running them on other workers, never changes the others.  With
   ``simulation.realizations_per_path = p > 1`` realizations of a group
   ``g = i // p`` share paths as in a run of one unit: unit ``u`` draws its path
   from ``SeedSequence(seed, spawn_key=(PATH_STREAM, g, u))``
   (:data:`geosim.simulation.runner.PATH_STREAM`), so each unit has its own path and
   still depends on nothing but the seed, ``i``, ``p`` and ``u``;
4. the unit fields are joined into one realization, back-transformed unit by unit
   (:class:`UnitsBackTransform`) and written by the usual realization writer, every
   raster gaining a last band of unit codes; summaries and decision figures are
   given in total and per unit, and the report has one section per unit.

A ``[mean]`` and a ``[secondary]`` (top level, or a unit's own table) work per unit:
the trend is fitted to the unit's own normal scores (a mean grid goes through its own
transform), the secondary's transform is fitted on the unit's nodes and its correlation
estimated from the unit's samples (:func:`geosim.secondary.secondary_grid` on the unit's
piece); the unit's mean is added back at its nodes before its back-transform.

Boundaries
----------
*Hard* (the default): a node is conditioned by samples of its own unit only, and
its unit's simulated nodes only.  Changing the data of one unit leaves every node
of every other unit bit-for-bit unchanged.

*Soft* (``units.soft = [{ units = [a, b], distance = d }]``): samples of ``b``
whose distance to the nearest node of ``a`` is at most ``d`` metres also condition
``a`` (and the other way round).  They enter ``a``'s normal-score space through
``a``'s own transform (their values are transformed by the transform fitted to
``a``'s samples) and take part in ``a``'s search like ``a``'s samples; they are
not used for ``a``'s declustering, transform or variogram; with a mean in ``a``
they enter as residuals from it.  Samples of ``b``
farther than ``d`` from every node of ``a`` have no influence on ``a`` at all.
"""
from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .config.runspec import OVERRIDABLE, RunSpec, has_units, unit_spec, unit_table
from .errors import InputError
from .inputs import load_samples, neighbourhood, read_holes, sample_ids
from .outputs import metal_unit
from .pipeline import cross_validate, make_grid, prepare_samples, preflight, simulate_into, variogram_model
from .progress import relabel
from .results import PreparedData, RunResult, SimulationResult
from .runstate import make_folder, with_folder_lock
from .units import NODATA, UnitTable, composite_by_unit, node_units, read_unit_intervals, sample_units

__all__ = ["UnitPiece", "UnitsModel", "UnitsEngine", "UnitsPlan", "UnitsBackTransform", "UnitsMeasure",
           "unit_rng", "load_unit_samples", "prepare_units", "fit_units", "pooled_crossval", "simulate_units", "run"]


# -- the units' pieces --------------------------------------------------------------------------

@dataclass
class UnitPiece:
    """One modelled unit of a run: its view of the spec, its samples, nodes and model."""

    code: int
    name: str
    spec: RunSpec                 # the unit's view (its overrides, else the top level)
    data: PreparedData            # its own samples, declustered and transformed
    grid: Any                     # the run's grid, masked to the unit's nodes
    model: Any = None
    variogram: Any = None         # VariogramResult
    crossval: Any = None          # CrossValidation
    extra_coords: np.ndarray | None = None   # soft-boundary samples of neighbouring units
    extra_scores: np.ndarray | None = None   # ... in this unit's normal scores
    extra_labels: list = field(default_factory=list)
    extra_holes: np.ndarray | None = None
    soft: list = field(default_factory=list)  # report: neighbour, distance, samples taken
    secondary: Any = None         # its collocated secondary grid (geosim.secondary.SecondaryGrid), or None

    def conditioning(self) -> tuple[np.ndarray, np.ndarray]:
        """Coordinates and normal scores of every sample that conditions the unit (own + soft)."""
        if self.extra_coords is None or not len(self.extra_coords):
            return self.data.coords, self.data.scores
        return (np.vstack([self.data.coords, self.extra_coords]),
                np.concatenate([self.data.scores, self.extra_scores]))

    def labels(self) -> list[str]:
        return sample_ids(self.data) + list(self.extra_labels)

    def hole_ids(self):
        own = self.data.samples.hole_ids
        if own is None:
            return None
        extra = self.extra_holes if self.extra_holes is not None else np.array([], dtype=own.dtype)
        return np.concatenate([own, extra])


@dataclass
class UnitsModel:
    """Everything a run of several units prepares before simulating."""

    table: UnitTable
    samples: Any                  # all samples (PointSet)
    sample_codes: np.ndarray      # (n,) int32
    grid: Any                     # the run's grid: the outer domain
    node_codes: np.ndarray        # int32 of grid.shape, NODATA outside the domain
    pieces: dict                  # code -> UnitPiece, modelled units in the spec's order
    notes: list = field(default_factory=list)

    @property
    def modelled_grid(self):
        """The run's grid masked to the nodes of modelled units."""
        return self.grid.with_mask(np.isin(self.node_codes, list(self.pieces)))

    def text(self, ndim: int | None = None) -> str:
        """Each unit's model, one line each."""
        return "\n".join(f"{p.name}: {' '.join(p.model.text(ndim).split())}" for p in self.pieces.values())

    def transform_text(self) -> str:
        return "; ".join(f"{p.name}: {p.data.transform.describe()}" for p in self.pieces.values())

    def __str__(self) -> str:
        return self.text()


def _refuse_steps(spec: RunSpec) -> None:
    if not has_units(spec):
        raise InputError("the run spec has no [units] table", file=spec.name, field="units",
                         fix="run it with geosim.pipeline.run, or add [units] and [unit.<name>] tables")


def load_unit_samples(spec: RunSpec):
    """All samples of the spec with the value present, and their unit codes.

    Point samples take their codes from ``units.samples``; drillholes logged with
    units (``units.samples = { intervals = ... }``) are composited so that no
    composite straddles a contact (:func:`geosim.units.composite_by_unit`).
    """
    table = unit_table(spec)
    source = spec["units.samples"]
    name = spec["data.value"]
    if "intervals" in source:
        columns = {"hole": "hole", "from": "start", "to": "end", "code": "code"}  # spec key -> keyword
        logged = read_unit_intervals(spec.resolve(source["intervals"]), table,
                                     **{columns[k]: source[k] for k in columns if k in source})
        comp = spec["data.composites"]
        samples = composite_by_unit(read_holes(spec), logged, comp["length"], min_fraction=comp["min_fraction"],
                                    residual=comp["residual"], min_sampled_fraction=comp["min_sampled_fraction"])
    else:
        samples = load_samples(spec)
    samples = samples.complete(name)
    return samples, sample_units(samples, source, table)


def _sample_file(samples) -> str | None:
    return samples.source[-1] if samples.source else None


def prepare_units(spec: RunSpec, progress=None) -> UnitsModel:
    """Codes of samples and nodes, and each modelled unit's data, model and cross-validation.

    Raises
    ------
    InputError
        A unit with samples but no nodes, or nodes but no samples; a unit with too
        few samples to simulate, or to fit a variogram (with the count, and the
        advice to give a fixed model or merge units).
    """
    _refuse_steps(spec)
    table = unit_table(spec)
    samples, codes = load_unit_samples(spec)
    where = _sample_file(samples)
    everything = PreparedData(samples, samples.column(spec["data.value"]), None, None, None, None)
    grid = make_grid(spec, everything)
    nodes = node_units(grid, spec["units.nodes"], table, base=spec.base)
    notes: list[str] = [n for n in samples.notes]
    column = spec["units.samples"].get("column", "units.samples")
    counts = {c: int(np.count_nonzero(codes == c)) for c in table.codes}
    node_counts = {c: int(np.count_nonzero(nodes == c)) for c in table.codes}
    dropped = [c for c in table.codes if counts[c] and not table.unit(c).modelled]
    if dropped:
        notes.append("samples of units not modelled are left out: " + ", ".join(
            f"{counts[c]} of {table.label(c)}" for c in dropped))
    for c in table.modelled_codes:
        unit = table.unit(c)
        if counts[c] and not node_counts[c]:
            raise InputError(f"{counts[c]} sample(s) are of unit {table.label(c)}, but no grid node of the domain is",
                             file=where, field=column,
                             fix=f"check the node codes ({_source_text(spec['units.nodes'])}) and the grid, or "
                                 f"set modelled = false in [unit.{unit.name}]")
        if node_counts[c] and not counts[c]:
            raise InputError(f"{node_counts[c]} grid node(s) are of unit {table.label(c)}, but no sample is",
                             file=spec.name, field=f"unit.{unit.name}",
                             fix=f"add samples of the unit, or set modelled = false in [unit.{unit.name}] to "
                                 "leave its nodes nodata")
        if not counts[c]:
            notes.append(f"unit {table.label(c)} has neither samples nor grid nodes")
    unknown = int(np.count_nonzero(grid.mask & (nodes == NODATA)))
    if unknown:
        notes.append(f"{unknown} of {grid.n_active} nodes of the domain have no unit and stay nodata")
    pieces: dict[int, UnitPiece] = {}
    for c in table.modelled_codes:
        if not counts[c]:
            continue
        unit = table.unit(c)
        uspec = unit_spec(spec, unit.name)
        n = counts[c]
        if n < 3:
            raise InputError(f"unit {table.label(c)} has {n} sample(s); simulating it needs at least 3",
                             file=where, field=column,
                             fix=f"merge it with a neighbouring unit (give both one code), or set modelled = false "
                                 f"in [unit.{unit.name}]")
        if uspec["variogram.fit"] and n < spec["units.min_fit_samples"]:
            raise InputError(f"unit {table.label(c)} has {n} samples, too few to fit a variogram (fewest: "
                             f"units.min_fit_samples = {spec['units.min_fit_samples']})", file=where, field=column,
                             fix=f"give the unit a fixed model ([unit.{unit.name}] variogram = {{ fit = false, "
                                 "structures = [...] }), or merge it with a neighbouring unit (give both one code)")
        own = samples.take(np.flatnonzero(codes == c))
        data = prepare_samples(uspec, own, relabel(progress, f"{unit.name}: declustering sizes"))
        pieces[c] = UnitPiece(c, unit.name, uspec, data, grid.with_mask(nodes == c))
    _soft_samples(spec, table, samples, codes, pieces)
    from .secondary import secondary_grid
    for p in pieces.values():
        if p.data.mean is not None:
            notes.extend(f"{p.name}: {n}" for n in p.data.mean.notes)
        # the secondary's transform on the unit's nodes, its correlation with the unit's own residuals
        p.secondary = _named(p, secondary_grid, p.spec, p.data.samples, p.data.scores, p.grid)
        if p.secondary is not None:
            notes.extend(f"{p.name}: {n}" for n in p.secondary.notes)
        notes.extend(f"{p.name}: {n}" for n in preflight(p.spec, p.data, p.grid))
    return UnitsModel(table, samples, codes, grid, nodes, pieces, notes)


def _named(piece: UnitPiece, step, *args, **kwargs):
    """``step(*args, **kwargs)``, its input errors naming the unit (its own settings or the top-level
    ones it takes)."""
    try:
        return step(*args, **kwargs)
    except InputError as exc:
        raise InputError(f"unit {piece.name}: {exc.message}", file=exc.file, row=exc.row,
                         field=f"unit.{piece.name}.{exc.field}" if exc.field else None, fix=exc.fix) from None


def _source_text(source: Mapping) -> str:
    return ", ".join(f"{k} = {v!r}" for k, v in source.items())


def _soft_samples(spec: RunSpec, table: UnitTable, samples, codes: np.ndarray, pieces: Mapping) -> None:
    """Give each unit of a soft boundary the samples of its neighbour within the distance of its nodes,
    in its own normal scores."""
    from scipy.spatial import cKDTree
    from .inputchecks import sample_label
    for pair in spec["units.soft"]:
        a, b = (table.code_of(t, file=spec.name, field="units.soft") for t in pair["units"])
        d = float(pair["distance"])
        for own, other in ((a, b), (b, a)):
            if own not in pieces or other not in pieces:
                continue
            piece = pieces[own]
            nodes = piece.grid.coords()
            candidates = np.flatnonzero(codes == other)
            dist, _ = cKDTree(nodes).query(samples.coords[candidates][:, : nodes.shape[1]])
            take = candidates[dist <= d]
            if take.size:
                # a neighbour's sample on an own sample would make the kriging systems singular
                near, _ = cKDTree(piece.data.coords).query(samples.coords[take])
                take = take[near > 1e-3]
            values = samples.column(spec["data.value"])[take]
            scores = piece.data.transform.transform(values) if take.size else np.empty(0)
            if take.size and piece.data.mean is not None:  # residuals from this unit's own mean
                scores = scores - _named(piece, piece.data.mean.at_points, samples.coords[take], samples.crs)
            labels = []
            for i in take:
                file, row, text = sample_label(samples, int(i))
                labels.append((f"{Path(file).name} {text}" if row is not None and file else text)
                              + f" ({table.name_of(other)}, across the contact)")
            piece.extra_coords = (samples.coords[take] if piece.extra_coords is None
                                  else np.vstack([piece.extra_coords, samples.coords[take]]))
            piece.extra_scores = (np.asarray(scores, dtype=float) if piece.extra_scores is None
                                  else np.concatenate([piece.extra_scores, scores]))
            piece.extra_labels += labels
            if samples.hole_ids is not None:
                holes = samples.hole_ids[take]
                piece.extra_holes = holes if piece.extra_holes is None else np.concatenate([piece.extra_holes, holes])
            piece.soft.append({"neighbour": table.name_of(other), "distance_m": d, "samples_taken": int(take.size),
                               "rule": "neighbour's samples within the distance of this unit's nodes, in this "
                                       "unit's normal scores (its transform applied to their values)"})


def fit_units(units: UnitsModel, progress=None) -> None:
    """Each unit's variogram model and, when the outputs ask, its cross-validation (own samples)."""
    for p in units.pieces.values():
        p.variogram = _named(p, variogram_model, p.spec, p.data, progress=progress)
        p.model = p.variogram.model
        if p.spec["outputs.cross_validation"]:
            p.crossval = cross_validate(p.spec, p.data, p.model, secondary=p.secondary, progress=progress)


def pooled_crossval(units: UnitsModel) -> dict | None:
    """The cross-validation of every modelled unit taken together (None without any).

    Each unit's left-out samples keep the estimates of their own unit's model, search and
    transform; the figures are those of all of them pooled, in normal scores (each unit's
    own, all standard normal) and in data units.  Declustering weights are relative within
    a unit, so the pooled figures are plain (the declustered ones are per unit).
    ``{"normal_scores": {...}, "data_units": {...}, "by_unit": {name: the unit's summary}}``.
    """
    from dataclasses import replace
    done = [p for p in units.pieces.values() if p.crossval is not None]
    if not done:
        return None

    def pool(parts, scale: str):
        return replace(parts[0], coords=np.vstack([r.coords for r in parts]),
                       values=np.concatenate([r.values for r in parts]),
                       estimate=np.concatenate([r.estimate for r in parts]),
                       variance=np.concatenate([r.variance for r in parts]),
                       n_used=np.concatenate([r.n_used for r in parts]),
                       sample_ids=[i for r in parts for i in r.sample_ids], weights=None,
                       model_text="each unit's own model", n_short=sum(r.n_short for r in parts), scale=scale)

    out = {"normal_scores": pool([p.crossval.result for p in done], "normal scores").summary(),
           "data_units": pool([p.crossval.data_units for p in done], "data units").summary(),
           "by_unit": {p.name: p.crossval.summary for p in done}}
    out["basis"] = ("leave-one-out kriging of each unit's samples by its own model and search, pooled over the "
                    f"units {', '.join(p.name for p in done)}; declustered figures are per unit")
    return out


# -- simulation ---------------------------------------------------------------------------------

def unit_rng(rng: np.random.Generator, code: int) -> np.random.Generator:
    """The generator of unit ``code`` within a realization: the child ``code`` spawned from the
    realization's own :class:`numpy.random.SeedSequence` (spawn key ``(i, code)``)."""
    ss = rng.bit_generator.seed_seq
    return np.random.default_rng(np.random.SeedSequence(ss.entropy, spawn_key=tuple(ss.spawn_key) + (int(code),)))


@dataclass
class UnitPart:
    """What the engine needs of one unit: its conditioning data, model, grid and search."""

    code: int
    coords: np.ndarray
    scores: np.ndarray
    model: Any
    grid: Any
    neighbourhood: Any
    options: dict


@dataclass
class UnitsPlan:
    """The prepared plans of every unit (picklable)."""

    engine: Any
    codes: tuple
    prepared: tuple
    node_codes: np.ndarray


class UnitsEngine:
    """An engine that runs another engine once per unit and joins the fields.

    ``prepare(..., parts=[UnitPart, ...])`` prepares each unit with the inner
    engine; ``realize(plan, rng)`` realizes each with :func:`unit_rng` and puts
    each unit's nodes into one field (NaN elsewhere); ``realize_batch`` does the
    same for a group of realizations sharing paths, one path per unit.
    """

    name = "units"

    def __init__(self, engine: str = "sequential"):
        self.engine = engine

    def prepare(self, data_coords, data_scores, model, grid, *, neighbourhood=None, kriging="simple",
                parts: Sequence[UnitPart] = (), node_codes=None) -> UnitsPlan:
        from .simulation.runner import resolve_engine
        inner = resolve_engine(self.engine)
        prepared = tuple(inner.prepare(p.coords, p.scores, p.model, p.grid, neighbourhood=p.neighbourhood,
                                       kriging=kriging, **p.options) for p in parts)
        return UnitsPlan(inner, tuple(p.code for p in parts), prepared, np.asarray(node_codes, dtype=np.int32))

    def realize(self, plan: UnitsPlan, rng: np.random.Generator) -> np.ndarray:
        out = np.full(plan.node_codes.shape, np.nan)
        for code, prepared in zip(plan.codes, plan.prepared):
            field = plan.engine.realize(prepared, unit_rng(rng, code))
            inside = plan.node_codes == code
            out[inside] = field[inside]
        return out

    @property
    def realize_batch(self):
        """Realizations sharing random paths (``realizations_per_path > 1``), when the inner engine
        can: each unit draws its own path from :func:`unit_rng` of the group's path generator
        (spawn key ``(PATH_STREAM, group, code)``) and each member's values from :func:`unit_rng`
        of its own generator, so a unit's member depends only on the seed, its index, the group
        size and the unit.  Absent (``hasattr`` is False) for an inner engine without batches.
        """
        from .simulation.runner import resolve_engine
        if not hasattr(resolve_engine(self.engine), "realize_batch"):
            raise AttributeError(f"engine {self.engine!r} cannot share a path between realizations")
        return self._realize_batch

    def _realize_batch(self, plan: UnitsPlan, path_rng: np.random.Generator,
                       rngs: Sequence[np.random.Generator]) -> list[np.ndarray]:
        out = [np.full(plan.node_codes.shape, np.nan) for _ in rngs]
        for code, prepared in zip(plan.codes, plan.prepared):
            fields = plan.engine.realize_batch(prepared, unit_rng(path_rng, code), [unit_rng(r, code) for r in rngs])
            inside = plan.node_codes == code
            for joined, field in zip(out, fields):
                joined[inside] = field[inside]
        return out


class UnitsBackTransform:
    """Normal scores to data units, each node through its own unit's transform (picklable).

    Called with the active values of a joined field in C order (as the realization
    writer does); ``codes`` are the unit codes of those nodes in the same order, and
    ``mean`` (optional, same order) each node's unit's locally varying mean, added to
    the simulated residual before the back-transform (0 in a unit without one).
    """

    def __init__(self, codes: np.ndarray, transforms: Mapping[int, Any], mean: np.ndarray | None = None):
        self.codes = np.asarray(codes, dtype=np.int32)
        self.transforms = dict(transforms)
        self.mean = None if mean is None else np.asarray(mean, dtype=float)

    def __call__(self, scores: np.ndarray) -> np.ndarray:
        scores = np.asarray(scores, dtype=float)
        if scores.shape != self.codes.shape:
            raise ValueError(f"{scores.size} values to back-transform for {self.codes.size} nodes of modelled units")
        if self.mean is not None:
            scores = scores + self.mean
        out = np.empty_like(scores)
        for code, transform in self.transforms.items():
            sel = self.codes == code
            out[sel] = transform.inverse(scores[sel])
        return out


class UnitsMeasure:
    """Per-unit reproduction checks and decision figures of one realization (picklable sink part).

    ``checks`` maps code -> :class:`geosim.validation.RunChecks` on the unit's grid;
    ``figures`` code -> a figures callable on the unit's grid (or None).
    """

    def __init__(self, masks: Mapping[int, np.ndarray], checks: Mapping[int, Any], figures: Mapping[int, Any]):
        self.masks = dict(masks)
        self.checks = dict(checks)
        self.figures = dict(figures)

    def __call__(self, scores: np.ndarray, values: np.ndarray) -> dict:
        out = {}
        for code, mask in self.masks.items():
            s = np.where(mask, scores, np.nan)
            v = np.where(mask, values, np.nan)
            fig = self.figures.get(code)
            out[str(code)] = {"checks": self.checks[code](s, v),
                              "figures": None if fig is None else fig(v)}
        return {"units": out}

    def summarize_units(self, measures: Sequence[Mapping]) -> dict:
        """code -> the unit's ``validation`` section (:meth:`geosim.validation.RunChecks.summarize`)."""
        return {code: self.checks[code].summarize([m["units"][str(code)]["checks"] for m in measures])
                for code in self.masks}


def _parts(spec: RunSpec, units: UnitsModel) -> list[UnitPart]:
    parts = []
    for p in units.pieces.values():
        coords, scores = p.conditioning()
        options: dict[str, Any] = {}
        if p.spec["search.max_per_hole"]:
            options["hole_ids"] = p.hole_ids()
        if spec["simulation.engine"] in ("sequential", "exact"):
            options["sample_ids"] = p.labels()
            if p.secondary is not None:
                options.update(p.secondary.engine_options(spec["simulation.engine"]))
        parts.append(UnitPart(p.code, coords, scores, p.model, p.grid, neighbourhood(p.spec), options))
    return parts


def _provenance(spec: RunSpec, units: UnitsModel, extra: Mapping[str, Any] | None = None) -> dict[str, str]:
    """The run's provenance (:func:`geosim.outputs.provenance_tags` of a one-unit run), with every
    unit's model and transform."""
    from types import SimpleNamespace

    from .outputs import _provenance as one_unit
    return one_unit(spec, SimpleNamespace(transform=units.transform_text()), units, extra)


def _tags(spec: RunSpec, units: UnitsModel) -> dict[str, str]:
    return _provenance(spec, units, {"run_spec_sha256": spec.sha256,
                                     "unit_codes": {p.name: p.code for p in units.pieces.values()}})


def _writer(spec: RunSpec, units: UnitsModel, out_dir: Path):
    from .ensemble import RealizationWriter
    from .outputs import _cube_options, _figures, support_sinks
    from .validation import RunChecks
    grid = units.modelled_grid
    tags = _tags(spec, units)
    derived, ranking = support_sinks(spec, grid, out_dir, tags)
    transforms = {c: p.data.transform for c, p in units.pieces.items()}
    back = UnitsBackTransform(units.node_codes[grid.mask], transforms, _unit_means(units))
    checks = {c: RunChecks(p.grid, p.model, p.data.coords, p.data.scores, weights=p.data.weights,
                           data_values=p.data.values) for c, p in units.pieces.items()}
    figures = {c: _figures(p.spec, p.grid) for c, p in units.pieces.items()}
    measure = UnitsMeasure({c: p.grid.mask for c, p in units.pieces.items()}, checks, figures)
    return RealizationWriter(out_dir, grid, tags=tags, units=spec["data.units"], back_transform=back,
                             figures=_figures(spec, grid), measure=measure, metal_unit=metal_unit(spec),
                             overwrite=True, derived=derived, ranking=ranking,
                             layers=[(_code_layer(units), "unit code", "")],
                             **_cube_options(spec, grid, grid, "conditional realization"))


def _unit_means(units: UnitsModel) -> np.ndarray | None:
    """Each modelled node's unit mean in normal scores, in the C order of the modelled grid's active
    nodes (0 in units without one); None when no unit has a mean."""
    if all(p.data.mean is None for p in units.pieces.values()):
        return None
    mean = np.zeros(units.grid.shape)
    for p in units.pieces.values():
        if p.data.mean is not None:
            mean[p.grid.mask] = p.data.mean.at_nodes(p.grid)[p.grid.mask]
    return mean[units.modelled_grid.mask]


def simulate_units(spec: RunSpec, units: UnitsModel, out_dir: str | os.PathLike, *, overwrite: bool = False,
                   resume: bool = True, progress=None) -> SimulationResult:
    """Every unit's realizations, joined and written into ``out_dir`` (resumable like a one-unit run)."""
    from .simulation import simulate as run_engine
    out_dir = make_folder(out_dir)
    writer = _writer(spec, units, out_dir)
    everything = units.samples
    return simulate_into(spec, writer, out_dir, lambda **run: run_engine(
        everything.coords, np.zeros(len(everything)), None, units.modelled_grid,
        engine=UnitsEngine(spec["simulation.engine"]), parts=_parts(spec, units), node_codes=units.node_codes,
        **run), overwrite=overwrite, resume=resume, progress=progress)


# -- estimate, summaries and report -------------------------------------------------------------

def estimate_units(spec: RunSpec, units: UnitsModel, out_dir: Path | None = None) -> dict[str, list[str]]:
    """Kriging of each unit's normal scores on its own nodes (its conditioning samples, its model and
    search), joined; with ``out_dir``, ``estimate.tif`` (per level for 3-D) or the estimate cube,
    each with the unit-code layer.  Returns the files and the per-unit counts of short searches."""
    from .outputs import CUBE_SUFFIX, cube_format, level_geotiffs
    from .secondary import krige_nodes, spread_comparison
    from .results import EstimateResult
    from .moments import multigaussian_moments
    grid = units.grid
    maps = [np.full(grid.shape, np.nan) for _ in range(4)]
    counts = {}
    for p in units.pieces.values():
        coords, scores = p.conditioning()
        estimate, variance, result = krige_nodes(
            coords, scores, p.grid, p.model, mean=p.data.mean, secondary=p.secondary,
            method=p.spec["simulation.kriging"], neighbourhood=neighbourhood(p.spec), hole_ids=p.hole_ids(),
            sample_ids=p.labels())
        mean, var = multigaussian_moments(p.data.transform, estimate, variance)
        for target, values in zip(maps, (estimate, variance, mean, var)):
            target[p.grid.mask] = values
        counts[p.name] = {"below_min_samples": int(result.n_short),
                          "unestimated": int(np.count_nonzero(np.isnan(result.estimate)))}
        if p.secondary is not None:
            counts[p.name]["secondary_spread"] = spread_comparison(
                p.data.transform, estimate, variance, result,
                None if p.data.mean is None else p.data.mean.at_nodes(p.grid)[p.grid.mask])
    est = EstimateResult(*maps, n_short=sum(c["below_min_samples"] for c in counts.values()),
                         n_unestimated=sum(c["unestimated"] for c in counts.values()), grid=grid,
                         units=spec["data.units"])
    files: dict[str, list[str]] = {"estimate": []}
    if out_dir is not None:
        from .io.cube import add_layers
        from .io.geotiff import write_raster
        tags = _tags(spec, units)
        codes = _code_layer(units)
        if level_geotiffs(spec, grid):
            bands = np.stack([est.mean, np.sqrt(est.variance), est.scores_mean, est.scores_variance, codes])
            written = write_raster(out_dir / "estimate.tif", bands, grid,
                                   descriptions=list(est.descriptions()) + [("unit code", "")], tags=tags,
                                   overwrite=True)
            files["estimate"] += [str(p) for p in written]
        fmt = cube_format(spec, grid)
        if fmt is not None:
            from .io.cube import write_cube
            ds = add_layers(est.to_xarray(provenance=tags), {"unit_code": (codes, "unit code", "")})
            files["estimate"].append(str(write_cube(out_dir / f"estimate{CUBE_SUFFIX[fmt]}", ds, overwrite=True)))
    return {"files": files, "by_unit": counts, "result": est}


def _code_layer(units: UnitsModel) -> np.ndarray:
    """Unit codes of the domain's nodes as floats (NaN outside the domain), the layer every raster gains."""
    return np.where(units.grid.mask, units.node_codes, np.nan).astype(float)


def _sample_statistics(p: UnitPiece) -> dict:
    v = p.data.values
    w = p.data.weights
    out = {"count": int(v.size), "mean": float(v.mean()), "std": float(v.std()), "min": float(v.min()),
           "max": float(v.max())}
    if w is not None:
        out["declustered_mean"] = float(np.average(v, weights=w))
        out["declustered_std"] = float(np.sqrt(np.average((v - out["declustered_mean"]) ** 2, weights=w)))
    return out


def _unit_files(spec: RunSpec, units: UnitsModel, out_dir: Path) -> dict[str, list[str]]:
    """Each unit's model file, variogram plot and cross-validation table in ``units/<name>/``."""
    from .io.crossval import plot_crossval, write_crossval_csv
    from .variogram.modelfile import save_model
    files: dict[str, list[str]] = {"unit_models": [], "unit_cross_validation": [], "unit_plots": []}
    tags = _tags(spec, units)
    for p in units.pieces.values():
        folder = out_dir / "units" / p.name
        folder.mkdir(parents=True, exist_ok=True)
        files["unit_models"].append(str(save_model(p.model, folder / "variogram_model.toml", overwrite=True)))
        if p.variogram.experimental and spec["outputs.plots"]:
            from .variogram.plots import plot_variogram
            files["unit_plots"].append(str(plot_variogram(p.variogram.experimental, p.model,
                                                          path=folder / "variogram.png", overwrite=True)))
        if p.crossval is not None:
            files["unit_cross_validation"].append(str(write_crossval_csv(
                p.crossval.result, folder / "cross_validation.csv", overwrite=True,
                data_units=p.crossval.data_units, provenance=tags)))
            if spec["outputs.plots"]:
                files["unit_plots"].append(str(plot_crossval(p.crossval.result, folder / "cross_validation.png",
                                                             overwrite=True, data_units=p.crossval.data_units,
                                                             log=p.spec["transform.log"])))
    return files


def _decision_by_unit(spec: RunSpec, units: UnitsModel, records: Sequence[Mapping], out_dir: Path,
                      tags: Mapping[str, str]) -> tuple[dict[str, list[str]], dict[str, list]]:
    """``decision_figures_by_unit.csv`` and ``decision_spread_by_unit.csv`` (unit column first)."""
    from .io.csvw import Column, write_csv_table
    from .io.decision import decision_columns
    from .summaries import decision_rows, decision_spread
    indices = [int(r["index"]) for r in records]
    per_unit, spreads = [], {}
    spread_rows = []
    for p in units.pieces.values():
        figures = [r["checks"]["units"][str(p.code)]["figures"] for r in records]
        if not figures or any(f is None for f in figures):
            continue
        figures = [{k: np.asarray(v) for k, v in f.items()} for f in figures]
        per_unit += [{"unit": p.name, **row} for row in decision_rows(figures, indices)]
        spreads[p.name] = decision_spread(figures)
        spread_rows += [{"unit": p.name, **row} for row in spreads[p.name]]
    if not per_unit:
        return {}, spreads
    unit_col = Column("unit", "geological unit (the name of its [unit.<name>] table)", "string", "")
    written = []
    for name, rows, title, key in (
            ("decision_figures_by_unit.csv", per_unit, "decision figures per realization, per unit", 3),
            ("decision_spread_by_unit.csv", spread_rows, "decision figures per unit: spread across realizations",
             None)):
        header = list(rows[0])
        columns = [unit_col] + decision_columns(header[1:], spec["data.units"], metal_unit(spec))
        primary = header[:key] if key else ["unit", header[1], "figure"]
        written.append(str(write_csv_table(out_dir / name, columns, ([r.get(k) for k in header] for r in rows),
                                           title=title, provenance=tags, primary_key=primary, overwrite=True)))
    return {"decision_by_unit": written}, spreads


def summarize_units(spec: RunSpec, units: UnitsModel, simulation: SimulationResult, out_dir: Path,
                    extra: Mapping[str, Any] | None = None, progress=None) -> dict[str, list[str]]:
    """Joined rasters (with the unit-code layer), total and per-unit decision figures, per-unit
    reproduction checks and plots, and the report with one section per unit."""
    from .io import plots
    from .outputs import _support_plots, _support_report, close_outputs
    from .secondary import report_sections
    from .simulation.runner import per_path_for
    from .summaries import decision_spread
    out = spec["outputs"]
    records = simulation.records
    writer = simulation.writer
    files = writer.finish(records, cutoffs=out["cutoffs"], stack=True, keep_realization_files=True,
                          plots=out["plots"], progress=relabel(progress, "summary windows"))
    tags = _tags(spec, units)
    grid = units.modelled_grid
    measures = [r["checks"] for r in records]
    validation = writer.measure.summarize_units(measures)
    by_unit_files, spreads = _decision_by_unit(spec, units, records, out_dir, tags)
    files.update(by_unit_files)
    files.update(_unit_files(spec, units, out_dir))
    if out["plots"]:
        for p in units.pieces.values():
            folder = out_dir / "units" / p.name
            quantiles = [r["checks"]["units"][str(p.code)]["checks"].get("quantiles") for r in records]
            if all(q is not None for q in quantiles):
                files["unit_plots"].append(str(plots.plot_histogram_reproduction(
                    p.data.values, [np.asarray(q, dtype=float) for q in quantiles],
                    folder / "histogram_reproduction.png", weights=p.data.weights, units=spec["data.units"],
                    overwrite=True)))
            files["unit_plots"].append(str(plots.plot_variogram_reproduction(
                validation[p.code]["variogram"], folder / "variogram_reproduction.png", model=p.model,
                ndim=grid.ndim, overwrite=True)))
            figures = [r["checks"]["units"][str(p.code)]["figures"] for r in records]
            if figures and all(f is not None for f in figures):
                files["unit_plots"].append(str(plots.plot_decision_spread(
                    [{k: np.asarray(v) for k, v in f.items()} for f in figures], folder / "decision_spread.png",
                    units=spec["data.units"], overwrite=True)))
        files.setdefault("plots", [])
        files["plots"] += [str(x) for x in _support_plots(spec, writer, records, out_dir)]
    sections = []
    for unit in units.table.units:
        entry: dict[str, Any] = {"name": unit.name, "code": unit.code, "modelled": unit.modelled,
                                 "description": unit.description,
                                 "nodes": int(np.count_nonzero(units.node_codes == unit.code)),
                                 "samples": int(np.count_nonzero(units.sample_codes == unit.code))}
        p = units.pieces.get(unit.code)
        if p is not None:
            vg = p.variogram
            entry.update({
                "data": _sample_statistics(p),
                "declustering": p.data.declustering.describe() if p.data.declustering is not None else "none",
                "transform": p.data.transform.describe(),
                "variogram": {"model": vg.model_text() if vg.ndim else p.model.text(grid.ndim), "source": vg.source,
                              **({"fit": vg.fit.to_dict()} if vg.fit is not None else {})},
                "settings": {k: v for k, v in spec["unit"][unit.name].items() if k in OVERRIDABLE},
                "soft_boundaries": p.soft,
                "validation": validation[p.code],
                **report_sections(p.spec, p.data, p.grid)})
            if p.crossval is not None:
                entry["cross_validation"] = p.crossval.summary
            if unit.name in spreads:
                entry["decision_spread"] = spreads[unit.name]
        sections.append(entry)
    report = dict(_provenance(spec, units))
    report.update({"title": spec["title"], "run_spec": spec.name, "run_spec_sha256": spec.sha256,
                   "parameters": spec.to_dict(), "samples": int(len(units.samples)), "notes": list(units.notes),
                   "grid": {"shape": list(grid.shape), "cell": list(grid.cell), "active_nodes": units.grid.n_active,
                            "modelled_nodes": grid.n_active,
                            "crs": grid.crs.to_string() if grid.crs is not None else None},
                   "realizations": {"count": len(records), "kept_from_earlier_run": simulation.kept,
                                    "per_path": per_path_for(spec["simulation.realizations_per_path"], grid,
                                                             UnitsEngine(spec["simulation.engine"]))},
                   "seeding": "realization i of the unit with code u draws from SeedSequence(seed, spawn_key=(i, u))",
                   "units": sections})
    figures = [r.get("figures") for r in records]
    if figures and all(f is not None for f in figures):
        report["decision_spread"] = decision_spread(figures)
    support = _support_report(writer, records)
    if support:
        report["change_of_support"] = support
    if extra:
        report.update(extra)
    return close_outputs(spec, grid, out_dir, files, report)


@with_folder_lock
def run(spec: RunSpec | str | os.PathLike, out_dir: str | os.PathLike, *, overwrite: bool = False,
        resume: bool = True, progress=None) -> RunResult:
    """Run the whole job of a run spec with several units into ``out_dir``.

    As :func:`geosim.pipeline.run` (same folder rules, resume and outputs), with
    each unit modelled on its own and the results joined; see the module docstring.

    Returns
    -------
    RunResult
        ``model`` is the :class:`UnitsModel` (its ``text()`` lists each unit's model).
    """
    from .pipeline import run_job

    def prepare(spec: RunSpec, timed):
        units = timed("read data and units", prepare_units, spec, progress)
        return units, units.modelled_grid, units.notes

    def steps(spec: RunSpec, units: UnitsModel, grid, out_dir: Path, timed, timings) -> RunResult:
        return _run_steps(spec, units, out_dir, resume, progress, timed, timings)

    return run_job(spec, out_dir, prepare, steps, overwrite=overwrite, resume=resume)


def _run_steps(spec, units, out_dir, resume, progress, timed, timings) -> RunResult:
    from .results import extremes_note, short_note
    timed("variograms and cross-validation", fit_units, units, progress)
    extra: dict[str, Any] = {}
    notes = list(units.notes)
    files: dict[str, list[str]] = {}
    for p in units.pieces.values():
        if p.crossval is not None:
            s = p.crossval.summary["normal_scores"]
            notes.append(f"{p.name}: " + short_note(s["below_min_samples"], s["samples"], "left-out samples", p.spec))
    crossval = pooled_crossval(units)
    if crossval is not None:
        extra["cross_validation"] = {k: v for k, v in crossval.items() if k != "by_unit"}
    if spec["outputs.estimate"]:
        est = timed("kriging estimate", estimate_units, spec, units, out_dir)
        files.update(est["files"])
        extra["estimate"] = {"active_nodes": units.modelled_grid.n_active, "by_unit": est["by_unit"]}
    sim = timed("simulation", simulate_units, spec, units, out_dir, resume=resume, progress=progress)
    files.update(timed("summaries and report", summarize_units, spec, units, sim, out_dir, extra, progress))
    from .validation import extremes_summary
    for p in units.pieces.values():
        checks = [r["checks"]["units"][str(p.code)]["checks"] for r in sim.records]
        if all("extremes" in c for c in checks):
            notes.append(f"{p.name}: " + extremes_note(extremes_summary(p.data.values, checks), spec["data.units"]))
    return RunResult(out_dir, spec.sha256, files, units, sim.kept, sim.computed, crossval, sim.decision_spread(),
                     timings, notes, units.grid.ndim)


def describe_units(units: UnitsModel) -> list[tuple[str, str]]:
    """Rows for the command line: each unit's samples, nodes and settings, and the notes."""
    rows = []
    for unit in units.table.units:
        nodes = int(np.count_nonzero(units.node_codes == unit.code))
        samples = int(np.count_nonzero(units.sample_codes == unit.code))
        p = units.pieces.get(unit.code)
        if p is None:
            text = f"not modelled: {nodes} nodes stay nodata" + (f", {samples} samples left out" if samples else "")
        else:
            soft = sum(s["samples_taken"] for s in p.soft)
            text = (f"{samples} samples, {nodes} nodes; variogram "
                    f"{'fitted' if p.spec['variogram.fit'] else 'fixed'}; {p.data.transform.describe()}"
                    + (f"; {soft} samples of neighbours across soft contacts" if soft else ""))
            if p.data.mean is not None:
                text += (f"; mean: trend of order {p.data.mean.trend.order}" if p.data.mean.kind == "trend"
                         else "; mean: grid")
            if p.secondary is not None:
                text += f"; secondary correlation {p.secondary.correlation:.3f}"
        rows.append((f"unit {units.table.label(unit.code)}", text))
    rows.append(("grid", " x ".join(map(str, units.grid.shape)) + f" nodes, {units.grid.n_active} inside the "
                 f"domain, {units.modelled_grid.n_active} of modelled units"))
    rows += [("note", n) for n in units.notes]
    return rows
