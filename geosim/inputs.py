"""What a run reads and how: the spec's data, domain, grid, search and variogram settings as
library objects, and the refusals of a spec that cannot work.

:mod:`geosim.pipeline` says which steps run and in what order; the steps read the spec
through these:

=================================  ==========================================================
:func:`load_samples`               points, or drillholes desurveyed and composited
                                   (:func:`read_holes`), in metres of a projected CRS
:func:`check_samples`              enough values; a log and tail bounds that fit them
:func:`decluster`                  cell declustering weights
:func:`fit_transform`              the transform to normal scores
:func:`read_domain_geometry`       the domain polygon
:func:`grid_extent`                bounds and levels of the grid, refused when too large
:func:`mask_domain`                the grid masked by the domain polygon, raster and collars
:func:`neighbourhood`              the search of ``[search]``
:func:`experimental_variograms`    variograms of the normal scores in the spec's directions
:func:`structures_model`,          the model the spec writes out, or start values of a fit
:func:`default_template`
:func:`sample_ids`                 a label per sample for messages
=================================  ==========================================================
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from .config.runspec import RunSpec
from .errors import InputError
from .progress import Progress, relabel
from .results import PreparedData
from .transforms import TransformChain

__all__ = ["load_samples", "read_holes", "check_samples", "decluster", "fit_transform", "read_domain_geometry",
           "grid_extent", "mask_domain", "neighbourhood", "experimental_variograms", "structures_model",
           "default_template", "sample_ids", "MAX_NODES"]

# a guard against a mistyped cell size (one realization of 2e8 float64 nodes is 1.6 GB)
MAX_NODES = 200_000_000


# -- samples -------------------------------------------------------------------------------------

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


def check_samples(spec: RunSpec, samples, values: np.ndarray) -> None:
    """Refuse too few values, values a log has none of, and tail bounds inside the data, named
    by file row and in the units the spec gave (the transforms would see them as log10 and
    sample numbers)."""
    from .inputchecks import sample_label
    tr, name = spec["transform"], spec["data.value"]
    value_file = samples.source[-1] if samples.source else None  # the points or the interval table
    if len(values) == 0:
        raise InputError(f"the value column {name!r} is empty in every row", file=value_file, field=name,
                         fix="fill in the values, or name another column in data.value")
    if len(values) < 3:
        raise InputError(f"only {len(values)} usable samples of {name!r}; simulation needs at least 3",
                         file=value_file, field=name, fix="check the value column and the composite settings")
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


# -- grid and domain ---------------------------------------------------------------------------------

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


def grid_extent(spec: RunSpec, data: PreparedData, geometry) -> tuple[tuple, tuple | None]:
    """``(bounds, zrange)`` of the grid: ``grid.bounds``, else the domain ``geometry``, else the
    data; ``zrange`` None for a 2-D grid.  Refuses a grid whose one realization or whose
    summaries exceed the available memory, or with more than :data:`MAX_NODES` nodes."""
    g = spec["grid"]
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
    return bounds, zrange


def mask_domain(spec: RunSpec, grid, geometry):
    """``grid`` masked by the domain polygon ``geometry``, the domain raster and, in 3-D with
    ``domain.below_collars``, the ground surface through the collars; refuses an empty domain."""
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


# -- search and variogram ----------------------------------------------------------------------------

def neighbourhood(spec: RunSpec):
    """The :class:`geosim.search.Neighbourhood` of ``[search]``."""
    from .search import Neighbourhood
    s = spec["search"]
    return Neighbourhood(max_samples=s["max_samples"], min_samples=s["min_samples"], sectors=s["sectors"],
                         max_per_sector=s["max_per_sector"], max_per_hole=s["max_per_hole"],
                         max_nodes=s["max_nodes"], widen=s["widen"])


def structures_model(spec: RunSpec):
    """The model ``variogram.structures`` writes out, from every installed structure."""
    from .plugins import structures as registered
    from .variogram import Model
    dicts = [{k: v for k, v in item.items() if v is not None} for item in spec["variogram.structures"]]
    try:
        return Model.from_dicts(dicts, registered())
    except (ValueError, TypeError) as exc:
        raise InputError(str(exc), file=spec.name, field="variogram.structures",
                         fix="check each structure's kind, sill, ranges and angles") from None


def default_template(data: PreparedData):
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


def sample_ids(data: PreparedData) -> list[str]:
    """A label per sample for messages: its file and row (``wells.csv row 14``), or its hole
    and depths for composites."""
    from .inputchecks import sample_label
    labels = []
    for i in range(len(data.values)):
        file, row, text = sample_label(data.samples, i)
        labels.append(f"{Path(file).name} {text}" if row is not None and file else text)
    return labels
