"""Run specs: one TOML file that holds a whole geosim job.

A run spec names the input tables, their CRS, the transform, declustering, the
variogram (a model, a model file, or a fit request), the grid and domain, the
neighbourhood, the simulation (engine, realizations, seed, workers or a Dask
cluster) and the outputs.  :func:`load_spec` reads it with :mod:`tomllib` and
validates it *completely* before any work starts: every problem is collected
and reported at once in one :class:`~geosim.errors.SpecError`, each as
``key.path: expected ..., found ...``.

Paths inside a spec are relative to the spec file's folder.  The sections are
``[data]`` (points, or drillhole collars/surveys/intervals with
``[data.composites]``), ``[declustering]``, ``[transform]``, ``[variogram]``,
``[grid]``, ``[domain]``, ``[search]``, ``[simulation]`` and ``[outputs]``;
:func:`reference` lists every key with its expected form and default (the
command line prints it with ``geosim check --keys``), generated from
:data:`SCHEMA` so it is always current.  The sample fields' ``run.toml`` files
are complete examples.

Examples
--------
>>> import pathlib, tempfile
>>> import geosim.config.runspec
>>> folder = pathlib.Path(tempfile.mkdtemp())
>>> _ = (folder / "wells.csv").write_text("well_id,x,y,k\\nA,0,0,1\\n")
>>> _ = (folder / "run.toml").write_text('''
... [data]
... points = "wells.csv"
... x = "x"
... y = "y"
... value = "k"
... crs = "EPSG:32633"
... [grid]
... cell = [10.0, 10.0]
... [simulation]
... realizations = 5
... seed = 42
... ''')
>>> spec = geosim.config.runspec.load_spec(folder / "run.toml")
>>> spec["simulation.realizations"], spec["simulation.engine"]
(5, 'sequential')
>>> len(spec.sha256)
64
"""
from __future__ import annotations

import copy
import difflib
import hashlib
import json
import math
import os
import tomllib
import warnings
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import InputError, RetiredNameWarning, SpecError
from ..retired import retire_spec_names

__all__ = ["RunSpec", "load_spec", "spec_from_dict", "parse_overrides", "reference", "SCHEMA", "EXECUTION_KEYS",
           "has_units", "unit_spec", "unit_table"]

# Keys that change how a run executes but not what it computes; they are left out
# of the spec hash so that a run resumed with more workers keeps its realizations.
EXECUTION_KEYS = ("simulation.workers", "simulation.cluster")


# -- value checkers ----------------------------------------------------------
# Each checker takes a TOML value and returns (normalized value, None) or
# (None, "expected ...") describing the form it wanted.

def _found(value: Any) -> str:
    text = repr(value)
    if len(text) > 60:
        text = text[:57] + "..."
    kind = {str: "text", bool: "true/false", int: "integer", float: "number", list: "list",
            dict: "table"}.get(type(value), type(value).__name__)
    return f"{kind} {text}"


def _text(value):
    if isinstance(value, str) and value.strip():
        return value, None
    return None, "non-empty text"


def _path(value):
    if isinstance(value, str) and value.strip():
        return value, None
    return None, "a file path (text, relative to the spec file)"


def _bool(value):
    if isinstance(value, bool):
        return value, None
    return None, "true or false"


def _int(lo=None, hi=None):
    def check(value):
        ok = isinstance(value, int) and not isinstance(value, bool)
        if ok and (lo is None or value >= lo) and (hi is None or value <= hi):
            return value, None
        bounds = (f" >= {lo}" if lo is not None else "") + (f" and <= {hi}" if hi is not None else "")
        return None, f"an integer{bounds}"
    return check


def _per_path(value):
    if value == "auto":
        return value, None
    value, problem = _int(1, 1000)(value)
    return value, None if problem is None else f'"auto" or {problem}'


def _number(lo=None, hi=None, lo_open=False):
    def check(value):
        ok = isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
        if ok and (lo is None or (value > lo if lo_open else value >= lo)) and (hi is None or value <= hi):
            return float(value), None
        bounds = ""
        if lo is not None:
            bounds += f" {'>' if lo_open else '>='} {lo:g}"
        if hi is not None:
            bounds += f" and <= {hi:g}"
        return None, f"a number{bounds}"
    return check


def _choice(*options):
    def check(value):
        if value in options:
            return value, None
        return None, "one of " + ", ".join(f'"{o}"' for o in options)
    return check


def _numbers(sizes: tuple[int, ...], lo=None, lo_open=False, ascending=False, what="numbers"):
    one = _number(lo, lo_open=lo_open)

    def check(value):
        sizes_text = " or ".join(str(s) for s in sizes)
        wanted = f"a list of {sizes_text} {what}" + (
            f" {'>' if lo_open else '>='} {lo:g}" if lo is not None else "") + (
            ", ascending" if ascending else "")
        if not isinstance(value, list) or len(value) not in sizes:
            return None, wanted
        out = _each(one, value)
        if out is None or (ascending and any(b <= a for a, b in zip(out, out[1:]))):
            return None, wanted
        return out, None
    return check


def _counts(sizes: tuple[int, ...]):
    one = _int(1)

    def check(value):
        wanted = f"a list of {' or '.join(map(str, sizes))} whole numbers >= 1"
        out = _each(one, value) if isinstance(value, list) and len(value) in sizes else None
        return (None, wanted) if out is None else (out, None)
    return check


def _number_list(lo=None):
    one = _number(lo)

    def check(value):
        wanted = "a list of numbers" + (f" >= {lo:g}" if lo is not None else "")
        out = _each(one, value) if isinstance(value, list) else None
        return (None, wanted) if out is None else (out, None)
    return check


def _each(one, values: list):
    """``values`` checked one by one with the element check ``one``; None if any fails."""
    out = []
    for v in values:
        v, err = one(v)
        if err:
            return None
        out.append(v)
    return out


def _column_map(value):
    wanted = ('a table of column names, e.g. {hole_id = "HOLE", from = "FROM_M"}, and/or one per '
              'drillhole table, e.g. collar = {depth = "EOH"}')
    if not isinstance(value, dict):
        return None, wanted
    from ..drillholes import column_names
    try:
        column_names(value)
    except InputError as exc:
        return None, f"{wanted} ({exc.field}: {exc.message}; {exc.fix})"
    return dict(value), None


def _formats(value):
    allowed = ("auto", "csv", "parquet")
    if isinstance(value, list) and all(v in allowed for v in value) and len(set(value)) == len(value):
        return list(value), None
    return None, f"a list of formats from {', '.join(repr(a) for a in allowed)}"


@dataclass(frozen=True)
class Key:
    """One run-spec key: its checker, whether it is required, and its default."""

    check: Callable
    required: bool = False
    default: Any = None
    help: str = ""


def _coarse_grid_keys(unit: str, size_key: str) -> dict[str, Key]:
    """Keys shared by [blocks] and [upscaling]: a grid of coarser cells over the simulation grid."""
    return {
        "cells": Key(_counts((2, 3)), help=f"{unit} size in whole grid cells [nx, ny(, nz)], instead of {size_key}"),
        "origin": Key(_numbers((2, 3)), help=f"a {unit} corner [x, y(, z)] in the working CRS (default: the grid's "
                                             "lower corner)"),
        "aligned": Key(_bool, default=False, help=f"require {unit} edges on cell edges (whole cells)"),
        "min_fraction": Key(_number(0.0, 1.0, lo_open=True), default=0.5,
                            help=f"smallest fraction of a {unit}'s nodes inside the domain for it to get a value"),
    }


# section -> key -> Key.  Nested tables (data.composites) and lists of tables
# (variogram.structures, variogram.directions) are described by their own entries.
# the keys whose values name input files (checked to exist, hashed into the provenance)
INPUT_FILE_KEYS = (("data", ("points", "collars", "surveys", "intervals")),
                   ("variogram", ("model_file",)), ("domain", ("polygon", "raster")), ("outputs", ("density_raster",)),
                   ("ranking", ("region",)),
                   ("query_points", ("file",)), ("mean", ("file",)), ("secondary", ("file",)))

SCHEMA: dict[str, dict[str, Key]] = {
    "data": {
        "points": Key(_path, help="point samples: CSV, or .gpkg/.shp/.geojson/.fgb/.parquet (geosim[vector])"),
        "layer": Key(_text, help="layer of a points file with several"),
        "collars": Key(_path, help="drillhole collar CSV (hole_id, x, y, z, depth)"),
        "surveys": Key(_path, help="drillhole survey CSV (hole_id, depth, azimuth, dip)"),
        "intervals": Key(_path, help="drillhole interval CSV (hole_id, from, to, values...)"),
        "x": Key(_text, help="x (east or longitude) column of a points file (a point layer: its geometry)"),
        "y": Key(_text, help="y (north or latitude) column of a points file (a point layer: its geometry)"),
        "z": Key(_text, help="z (elevation) column of a points file"),
        "id": Key(_text, help="sample or hole identifier column"),
        "value": Key(_text, required=True, help="column of the variable to model"),
        "crs": Key(_text, help="CRS of the input coordinates (a vector file: its own when left out)"),
        "working_crs": Key(_text, default="auto", help='projected CRS to work in, or "auto"'),
        "units": Key(_text, default="", help="units of the value"),
        "columns": Key(_column_map, default={},
                       help="drillholes: default column name -> name in the files (all tables), or "
                            "collar/survey/intervals = {name = ...} for one table"),
        "survey_dip": Key(_choice("negative_down", "positive_down"),
                          help='drillholes: sign of the survey file\'s dips; default "negative_down" (-90 = '
                               'straight down), and a file whose every dip is positive is refused'),
    },
    "data.composites": {
        "length": Key(_number(0.0, lo_open=True), required=True, help="composite length in metres"),
        "min_fraction": Key(_number(0.0, 1.0), default=0.5, help="shortest residual as a fraction of length"),
        "residual": Key(_choice("merge", "drop"), default="merge", help="what to do with a short residual"),
        "min_sampled_fraction": Key(_number(0.0, 1.0), default=0.5,
                                    help="shortest sampled length a composite keeps, as a fraction of length"),
    },
    "declustering": {
        "method": Key(_choice("cells", "none"), default="cells"),
        "size_range": Key(_numbers((2,), lo=0.0, lo_open=True, ascending=True),
                          help="[smallest, largest] cell size scanned, metres (default: up to half the data extent)"),
        "size_count": Key(_int(2, 200), default=20, help="number of cell sizes scanned"),
        "origin_shifts": Key(_int(1, 100), default=8, help="grid origins averaged at each size"),
        "pick_mean": Key(_choice("lowest", "highest"), default="lowest",
                         help='"lowest" when highs were sampled preferentially, "highest" when lows were'),
    },
    "transform": {
        "log": Key(_bool, default=False, help="take log10 before the normal-score transform"),
        "lower": Key(_number(), help="lower bound of the back-transform (data units)"),
        "upper": Key(_number(), help="upper bound of the back-transform (data units)"),
        "lower_tail": Key(_choice("uniform", "power"), default="uniform",
                          help="values below the smallest datum, down to lower"),
        "upper_tail": Key(_choice("uniform", "power", "pareto"), default="uniform",
                          help='values above the largest datum: up to upper, or "pareto" (unbounded)'),
        "lower_exponent": Key(_number(0.0, lo_open=True),
                              help="exponent of the lower tail (default 1 uniform, 1.5 power)"),
        "upper_exponent": Key(_number(0.0, lo_open=True),
                              help="exponent of the upper tail (default 1 uniform, 1.5 power, 3 pareto; "
                                   "a pareto tail needs more than 2 for a finite variance)"),
    },
    "variogram": {
        "fit": Key(_bool, default=True, help="fit the structures to experimental variograms"),
        "model_file": Key(_path, help="a saved geosim model file"),
        "structures": Key(lambda v: (v, None) if isinstance(v, list) else (None, "a list of tables"),
                          help="nested structures (fixed model, or start values for the fit)"),
        "lag": Key(_number(0.0, lo_open=True), help="lag width in metres"),
        "lag_count": Key(_int(2, 500), default=15),
        "directions": Key(lambda v: (v, None) if isinstance(v, list) else (None, "a list of tables"),
                          default=[]),
        "weighting": Key(_choice("cressie", "pairs"), default="cressie"),
        "total_sill": Key(_number(0.0, lo_open=True), default=1.0,
                          help="constrain the fitted total sill (normal scores: 1)"),
    },
    "variogram.structures": {
        "kind": Key(_text, required=True),
        "sill": Key(_number(0.0), required=True),
        "ranges": Key(_numbers((1, 2, 3), lo=0.0, lo_open=True)),
        "azimuth": Key(_number(-360.0, 360.0), help="degrees clockwise from north (default 0)"),
        "dip": Key(_number(-90.0, 90.0), help="degrees below horizontal (default 0)"),
        "rake": Key(_number(-360.0, 360.0), help="degrees (default 0)"),
        "smoothness": Key(_number(0.0, lo_open=True)),
    },
    "variogram.directions": {
        "azimuth": Key(_number(-360.0, 360.0), default=0.0),
        "dip": Key(_number(-90.0, 90.0), default=0.0, help="degrees below horizontal"),
        "horizontal_half_angle": Key(_number(0.0, 90.0, lo_open=True), default=22.5,
                                     help="half-width of the window in the direction's horizontal plane, degrees"),
        "vertical_half_angle": Key(_number(0.0, 90.0, lo_open=True),
                                   help="half-width in its vertical plane, degrees (default: 5 for a "
                                        "near-horizontal direction, else horizontal_half_angle)"),
        "horizontal_max_offset": Key(_number(0.0, lo_open=True),
                                     help="largest horizontal distance of a pair off the direction line, metres"),
        "vertical_max_offset": Key(_number(0.0, lo_open=True),
                                   help="largest vertical distance of a pair off the direction line, metres"),
    },
    "grid": {
        "cell": Key(_numbers((2, 3), lo=0.0, lo_open=True), required=True, help="cell size [dx, dy(, dz)]"),
        "bounds": Key(_numbers((4,)), help="[xmin, ymin, xmax, ymax] in the working CRS"),
        "z_range": Key(_numbers((2,), ascending=True), help="[bottom, top] of a 3-D grid"),
        "padding": Key(_number(0.0), default=0.0, help="metres added around the data or domain"),
    },
    "domain": {
        "polygon": Key(_path, help="outline: GeoJSON, or .gpkg/.shp/.fgb/.parquet polygons (geosim[vector])"),
        "layer": Key(_text, help="layer of a polygon file with several"),
        "raster": Key(_path, help="raster mask, nonzero inside"),
        "below_collars": Key(_bool, default=False,
                             help="3-D drillholes: keep only nodes below the ground surface through the collars"),
    },
    "search": {
        "max_samples": Key(_int(1, 256), default=16),
        "min_samples": Key(_int(0, 256), default=1,
                           help="fewest samples wanted in a kriging system (see widen); nodes and "
                                "left-out samples with fewer are counted in the report"),
        "max_nodes": Key(_int(0, 256), default=16),
        "sectors": Key(_choice("off", "quadrants", "octants"), default="off",
                       help="split the search around each node and take samples from each part"),
        "widen": Key(_bool, default=True,
                     help="kriging: a node with fewer than min_samples in its search takes the nearest "
                          "min_samples wherever they lie (the search grown, same shape)"),
        "max_per_sector": Key(_int(1, 256)),
        "max_per_hole": Key(_int(1, 256)),
    },
    "simulation": {
        "engine": Key(_text, default="sequential"),
        "realizations": Key(_int(1, 100000), required=True),
        "seed": Key(_int(0, 2 ** 63 - 1), required=True),
        "kriging": Key(_choice("simple", "ordinary"), default="simple"),
        "realizations_per_path": Key(_per_path, default="auto",
                                     help="realizations sharing one random path (sequential engine; "
                                          "25 simulates many times faster); \"auto\": 25 on grids of "
                                          "250,000 active nodes or more, 1 below"),
        "workers": Key(_int(1, 1024)),
        "cluster": Key(_text, help="Dask scheduler address, e.g. tcp://10.0.0.5:8786"),
    },
    "outputs": {
        "cutoffs": Key(_number_list(), default=[], help="thresholds in data units"),
        "above": Key(_bool, default=True, help="decision figures above (true) or below the cut-offs"),
        "density": Key(_number(0.0, lo_open=True), help="t/m3, for tonnage above cut-off"),
        "density_raster": Key(_path, help="raster of density in t/m3 (nearest cell at each node; one map for "
                                          "every level of a 3-D grid), instead of density"),
        "metal_factor": Key(_number(0.0, lo_open=True),
                            help="metal per tonne per grade unit (default: 0.01 when data.units has %, else 1)"),
        "thickness": Key(_number(0.0, lo_open=True), help="metres, for volumes of a 2-D grid"),
        "keep_realizations": Key(_bool, default=True, help="keep the realizations a rerun can reuse: one GeoTIFF "
                                                           "per realization, or the store a NetCDF cube was "
                                                           "written from (realizations/store.zarr)"),
        "plots": Key(_bool, default=True),
        "cross_validation": Key(_bool, default=True),
        "estimate": Key(_bool, default=True, help="kriging estimate and variance maps"),
        "cube": Key(_choice("auto", "netcdf", "zarr", "none"), default="auto",
                    help='one NetCDF (or Zarr) cube per output kind; "auto": NetCDF for 3-D grids when '
                         'geosim[cube] is installed'),
        "level_geotiffs": Key(_bool, default=False,
                              help="3-D grids with a cube: also the summary, estimate and multiband realizations "
                                   "as one GeoTIFF per level (never one file per realization)"),
        "block_model": Key(_formats, default=["auto"],
                           help='block-model table formats: "csv", "parquet"; "auto": CSV for 3-D grids'),
        "block_model_realizations": Key(_bool, default=False,
                                        help="one block-model column per realization"),
        "realization_cube_zlib": Key(_int(0, 9), default=0,
                                     help="zlib level of realizations.nc: 0 (the default) stores it uncompressed; "
                                          "1 makes simulated values about a sixth smaller for about four times "
                                          "the CPU time to write"),
    },
    "blocks": {
        "size": Key(_numbers((2, 3), lo=0.0, lo_open=True),
                    help="block size [bx, by(, bz)] in metres, e.g. the selective mining unit: realizations "
                         "averaged to blocks (arithmetic mean of grades, density-weighted); leave out for none"),
        **_coarse_grid_keys("block", "size"),
    },
    "upscaling": {
        "cell": Key(_numbers((2, 3), lo=0.0, lo_open=True),
                    help="flow-model cell size [dx, dy(, dz)] in metres: realizations power-averaged to it; "
                         "leave out for none"),
        **_coarse_grid_keys("model cell", "cell"),
        "exponent": Key(_number(-1.0, 1.0), help="power-average exponent along the layering (horizontal "
                                                 "conductivity): 1 arithmetic, 0 geometric, -1 harmonic"),
        "vertical_exponent": Key(_number(-1.0, 1.0), help="3-D grids: exponent across the layering (vertical "
                                                          "conductivity), e.g. -1"),
    },
    "ranking": {
        "figure": Key(_text, help="decision figure to rank realizations by: tonnage, metal, mean_grade, "
                                  "fraction_above, fraction_below, area, volume, mean or a plugin figure; "
                                  "leave out for no ranking"),
        "cutoff": Key(_number(), help="the figure's cut-off or threshold (one of outputs.cutoffs)"),
        "support": Key(_choice("point", "blocks"), default="point",
                       help='figures of the simulation grid ("point") or of [blocks] ("blocks")'),
        "region": Key(_path, help='figure = "mean": GeoJSON polygon of the region (default: the whole domain)'),
        "percentiles": Key(_numbers((1, 2, 3, 4, 5), lo=0.0, ascending=True), default=[10.0, 50.0, 90.0],
                           help="write the realizations nearest these percentiles of the figure"),
    },
    "query_points": {
        "file": Key(_path, help="CSV of points (planned wells or holes) for P10/P50/P90 and probabilities "
                                "at each; leave out for none"),
        "x": Key(_text, help="x (east or longitude) column"),
        "y": Key(_text, help="y (north or latitude) column"),
        "z": Key(_text, help="z (elevation) column, for 3-D grids"),
        "id": Key(_text, help="point name column"),
        "crs": Key(_text, help="CRS of the points (default: data.crs)"),
    },
    # secondary information (geosim/secondary.py): plain tables, so that a unit's own table can override them
    "mean": {
        "trend": Key(_int(1, 2), help="locally varying mean: a polynomial trend of this order in x, y(, z), fitted "
                                      "to the normal scores (the residuals are modelled); leave out for none"),
        "file": Key(_path, help="locally varying mean in data units: a raster (2-D) or NetCDF cube (3-D), put "
                                "through the run's transform; instead of trend"),
        "variable": Key(_text, help="the cube's variable (default: its only one)"),
        "resampling": Key(_choice("bilinear", "nearest"), default="bilinear",
                          help="how the file is read at the nodes and samples"),
    },
    "secondary": {
        "file": Key(_path, help="secondary variable: a raster (2-D) or NetCDF cube (3-D) covering the "
                                "domain (e.g. a resistivity survey); leave out for none"),
        "method": Key(_choice("collocated", "external_drift"), default="collocated",
                      help="collocated: collocated cokriging and co-simulation (Markov model); external_drift: "
                           "kriging with the secondary's normal score as an external drift (estimate and "
                           "cross-validation only, no simulation)"),
        "variable": Key(_text, help="the cube's variable (default: its only one)"),
        "resampling": Key(_choice("bilinear", "nearest"), default="bilinear",
                          help="how the file is read at the nodes and samples"),
        "correlation": Key(_number(-1.0, 1.0),
                           help="correlation of primary and secondary normal scores, strictly between -1 and 1 "
                                "(default: estimated at the samples)"),
        "min_pairs": Key(_int(3, 100000), default=20,
                         help="fewest samples with a secondary value to estimate the correlation"),
        "nodes": Key(_int(0, 256), default=16,
                     help="sequential engine: nodes not yet simulated whose secondary values join each node's "
                          "system besides its own (0: the collocated value only)"),
    },
}
TOP_LEVEL = {"title": Key(_text, default="")}
SUBTABLES = {"data": ("composites",)}
TABLE_LISTS = {"variogram": ("structures", "directions")}


def reference() -> str:
    """Every run-spec key, section by section, with its expected form and default.

    Examples
    --------
    >>> import geosim.config.runspec
    >>> print(geosim.config.runspec.reference().splitlines()[1])
      title  non-empty text (default "")
    """
    lines = ["(top level)"]
    for k, key in TOP_LEVEL.items():
        lines.append(_reference_line(k, key))
    for section, keys in SCHEMA.items():
        kind = "list of tables" if section.split(".")[-1] in {t for v in TABLE_LISTS.values() for t in v} else "table"
        lines.append(f"[{section}]" + (f" ({kind}: [[{section}]] or {section.split('.')[-1]} = [{{...}}])"
                                       if kind != "table" else ""))
        lines += [_reference_line(k, key) for k, key in keys.items()]
    return "\n".join(lines + _unit_reference_lines())


def _reference_line(name: str, key: Key) -> str:
    _, expected = key.check(object())
    if key.required:
        tail = "required"
    elif key.default is None or key.default == {} or key.default == []:
        tail = "optional"
    else:
        tail = "default " + json.dumps(key.default)
    text = f"  {name}  {expected} ({tail})"
    return text + (f": {key.help}" if key.help else "")


@dataclass(frozen=True)
class RunSpec:
    """A validated run spec.

    Attributes
    ----------
    path : pathlib.Path or None
        The spec file (None for a spec built from a dict).
    base : pathlib.Path
        The folder relative paths are resolved against.
    values : dict
        The normalized spec: every section present, defaults filled in.
    sha256 : str
        SHA-256 of the canonical JSON form, without :data:`EXECUTION_KEYS`.
    """

    path: Path | None
    base: Path
    values: dict = field(repr=False)
    sha256: str
    frames: dict = field(default_factory=dict, repr=False, compare=False)

    def __getitem__(self, dotted: str):
        """Value at a dotted key path, e.g. ``spec["simulation.seed"]``."""
        node = self.values
        for part in dotted.split("."):
            node = node[part]
        return node

    def get(self, dotted: str, default=None):
        try:
            return self[dotted]
        except (KeyError, TypeError):
            return default

    def resolve(self, relative: str | os.PathLike) -> Path:
        """A path from the spec, made absolute against the spec's folder (a data frame given for
        the key: the frame itself)."""
        if isinstance(relative, str) and relative in self.frames:
            return self.frames[relative]
        p = Path(relative).expanduser()
        return p if p.is_absolute() else (self.base / p)

    @property
    def name(self) -> str:
        return str(self.path) if self.path is not None else "<run spec>"

    @property
    def is_drillholes(self) -> bool:
        return self.values["data"].get("collars") is not None

    def input_files(self) -> dict[str, Path]:
        """Every input file the spec names, by dotted key."""
        out = {}
        for section, keys in INPUT_FILE_KEYS:
            for key in keys:
                value = self.values[section].get(key)
                if value is not None and value not in self.frames:
                    out[f"{section}.{key}"] = self.resolve(value)
        out.update({k: self.resolve(v) for k, v in unit_input_files(self.values).items()})
        return out

    def canonical(self) -> str:
        """The canonical JSON text the hash is taken of."""
        return canonical_json(self.values)

    def to_dict(self) -> dict:
        return copy.deepcopy(self.values)


def canonical_json(values: Mapping) -> str:
    """Sorted, compact JSON of a normalized spec without :data:`EXECUTION_KEYS`."""
    trimmed = copy.deepcopy(dict(values))
    for dotted in EXECUTION_KEYS:
        section, key = dotted.split(".")
        trimmed.get(section, {}).pop(key, None)
    return json.dumps(trimmed, sort_keys=True, separators=(",", ":"), ensure_ascii=True)


def parse_overrides(items: Iterable[str] | Mapping[str, Any] | None) -> dict[str, Any]:
    """``["simulation.realizations=3", 'grid.cell=[50, 50]']`` -> ``{dotted: value}``.

    Values are read as TOML values (numbers, booleans, lists, quoted text); a value
    that is not valid TOML is taken as plain text.
    """
    if items is None:
        return {}
    if isinstance(items, Mapping):
        return dict(items)
    out = {}
    for item in items:
        key, sep, text = item.partition("=")
        key = key.strip()
        if not sep or not key:
            raise SpecError("command line", [f"{item!r}: expected key.path=value, e.g. simulation.realizations=5"])
        try:
            out[key] = tomllib.loads(f"v = {text.strip()}")["v"]
        except tomllib.TOMLDecodeError:
            out[key] = text.strip()
    return out


def load_spec(path: str | os.PathLike, overrides: Iterable[str] | Mapping[str, Any] | None = None,
              *, check_files: bool = True) -> RunSpec:
    """Read and completely validate a run-spec TOML file.

    Parameters
    ----------
    path : str or path-like
        The spec file.  Relative paths inside it are relative to its folder.
    overrides : list of "key.path=value" strings or dict, optional
        Values that replace (or add) keys before validation, e.g.
        ``{"simulation.realizations": 3}``; they are part of the spec's hash.  In a
        dict, the value None removes the key.
    check_files : bool
        Also check that every input file named in the spec exists.

    Returns
    -------
    RunSpec

    Raises
    ------
    geosim.errors.SpecError
        Listing every problem as ``key.path: expected ..., found ...``.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise SpecError(str(path), ["the run-spec file does not exist"]) from None
    except OSError as exc:
        raise SpecError(str(path), [f"cannot read the file ({exc.strerror})"]) from None
    try:
        values = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise SpecError(str(path), ["the file is not UTF-8 text; save it as UTF-8"]) from None
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(str(path), [f"not valid TOML: {exc}"]) from None
    return spec_from_dict(values, path.resolve().parent, overrides=overrides, file=path,
                          check_files=check_files)


def spec_from_dict(values: Mapping, base: str | os.PathLike = ".", *,
                   overrides: Iterable[str] | Mapping[str, Any] | None = None,
                   file: str | os.PathLike | None = None, check_files: bool = True) -> RunSpec:
    """Validate a spec given as a dict (the parsed TOML) against :data:`SCHEMA`.

    ``base`` is the folder relative paths are resolved against.  See :func:`load_spec`.
    """
    name = str(file) if file is not None else "<run spec>"
    values = copy.deepcopy(dict(values))
    problems: list[str] = []
    try:
        override_map = parse_overrides(overrides)
    except SpecError as exc:
        problems.extend(exc.problems)
        override_map = {}
    for dotted, value in override_map.items():
        parts = dotted.split(".")
        node = values
        for part in parts[:-1]:
            node = node.setdefault(part, {})
            if not isinstance(node, dict):
                problems.append(f"{dotted}: cannot override inside a non-table value")
                break
        else:
            if value is None:  # a None override removes the key (e.g. workers when a cluster is given)
                node.pop(parts[-1], None)
            else:
                node[parts[-1]] = value

    frames = _take_frames(values)
    base = Path(base)
    problems += retire_spec_names(
        values, lambda text: warnings.warn(f"{name}: {text}", RetiredNameWarning, stacklevel=4))
    out = _check_sections(values, problems)
    _check_combinations(out, problems)
    _check_units(values, out, problems)
    if check_files:
        _check_files(out, base, problems, frames)
    if problems:
        raise SpecError(name, problems)
    spec = RunSpec(path=Path(file) if file is not None else None, base=base, values=out, sha256="", frames=frames)
    object.__setattr__(spec, "sha256", hashlib.sha256(spec.canonical().encode()).hexdigest())
    return spec


def _check_table(table: Any, schema: Mapping[str, Key], where: str, problems: list[str],
                 allowed_extra: Iterable[str] = ()) -> dict:
    """Check one table; append problems; return the normalized table with defaults."""
    if not isinstance(table, dict):
        problems.append(f"{where}: expected a table, found {_found(table)}")
        return {k: copy.deepcopy(key.default) for k, key in schema.items()}
    out = {}
    extra = set(allowed_extra)
    for k, v in table.items():
        if k in schema or k in extra:
            continue
        close = difflib.get_close_matches(k, list(schema) + list(extra), n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        problems.append(f"{where}.{k}: unknown key{hint}; expected one of {', '.join(sorted(schema))}")
    for k, key in schema.items():
        full = f"{where}.{k}" if where else k
        if k not in table:
            if key.required:
                problems.append(f"{full}: required, expected {_expected(key)}, found nothing")
            out[k] = copy.deepcopy(key.default)
            continue
        value, err = key.check(table[k])
        if err:
            problems.append(f"{full}: expected {err}, found {_found(table[k])}")
            out[k] = copy.deepcopy(key.default)
        else:
            out[k] = value
    return out


def _expected(key: Key) -> str:
    probe = object()
    _, err = key.check(probe)
    return err + (f" ({key.help})" if key.help else "")


def _check_sections(values: dict, problems: list[str]) -> dict:
    out: dict[str, Any] = {}
    sections = [s for s in SCHEMA if "." not in s]
    for k in values:
        if k not in sections and k not in TOP_LEVEL and k not in UNIT_SECTIONS:
            close = difflib.get_close_matches(k, sections + list(TOP_LEVEL), n=1)
            hint = f" (did you mean [{close[0]}]?)" if close else ""
            problems.append(f"{k}: unknown section{hint}; expected sections {', '.join(sections)}")
    for k, key in TOP_LEVEL.items():
        if k in values:
            value, err = key.check(values[k])
            if err:
                problems.append(f"{k}: expected {err}, found {_found(values[k])}")
            out[k] = value if not err else key.default
        else:
            out[k] = key.default
    for section in sections:
        table = values.get(section, {})
        normalized = _check_table(table, SCHEMA[section], section, problems,
                                  allowed_extra=SUBTABLES.get(section, ()))
        if isinstance(table, dict):
            for sub in SUBTABLES.get(section, ()):
                if sub in table:
                    normalized[sub] = _check_table(table[sub], SCHEMA[f"{section}.{sub}"],
                                                   f"{section}.{sub}", problems)
                else:
                    normalized[sub] = None
            for sub in TABLE_LISTS.get(section, ()):
                items = normalized.get(sub)
                if isinstance(items, list):
                    normalized[sub] = [
                        _check_table(item, SCHEMA[f"{section}.{sub}"], f"{section}.{sub}[{i}]", problems)
                        for i, item in enumerate(items)]
        out[section] = normalized
    return out


def _check_combinations(spec: dict, problems: list[str]) -> None:
    """Rules that involve more than one key."""
    data = spec["data"]
    if data["points"] is not None and data["collars"] is not None:
        problems.append("data: expected either points = \"...\" or collars/intervals tables, found both")
    elif data["points"] is None and data["collars"] is None:
        problems.append('data: expected points = "file.csv" (point samples) or collars = "..." and '
                        'intervals = "..." (drillholes), found neither')
    from ..vector import is_vector_path
    # a GIS layer or a GeoDataFrame may carry the coordinates and the CRS itself
    vector = is_vector_path(data["points"]) or str(data["points"]).startswith("<GeoDataFrame")
    if data["crs"] is None and not vector:
        problems.append("data.crs: required for CSV tables, expected the CRS of the coordinates "
                        "(e.g. \"EPSG:32633\"), found nothing")
    if data["points"] is not None:
        for k in ("x", "y"):
            if data[k] is None and not vector:
                problems.append(f"data.{k}: required for a CSV points file, expected the column name, "
                                "found nothing")
        if data["layer"] is not None and not vector:
            problems.append("data.layer: only for a vector points file (.gpkg, ...), found it beside a CSV")
        for k in ("collars", "surveys", "intervals"):
            if data[k] is not None:
                problems.append(f"data.{k}: only for drillholes, found it beside data.points")
        if data["composites"] is not None:
            problems.append("data.composites: only for drillholes, found it beside data.points")
    if data["collars"] is not None:
        if data["intervals"] is None:
            problems.append('data.intervals: required for drillholes, expected a CSV path, found nothing')
        if data["composites"] is None:
            problems.append("data.composites: required for drillholes, expected a table such as "
                            "{ length = 2.0 } (composite length in metres), found nothing")
        for k in ("x", "y", "z"):
            if data[k] is not None:
                problems.append(f"data.{k}: only for a points file; rename drillhole columns with "
                                f"data.columns, found {data[k]!r}")
    elif data["columns"]:
        problems.append("data.columns: only for drillholes, found it beside data.points")
    if data["survey_dip"] is not None and data["surveys"] is None:
        problems.append("data.survey_dip: states the sign of survey dips, found it without data.surveys")

    decl = spec["declustering"]
    grid = spec["grid"]
    cell = grid["cell"]
    ndim = len(cell) if cell else None
    if data["collars"] is not None and ndim == 2:
        problems.append("grid.cell: expected [dx, dy, dz] for drillhole data (a 3-D grid), found 2 sizes")
    if grid["z_range"] is not None and ndim == 2:
        problems.append("grid.z_range: only for a 3-D grid (cell = [dx, dy, dz]), found a 2-D cell")
    b = grid["bounds"]
    if b is not None and not (b[2] > b[0] and b[3] > b[1]):
        problems.append(f"grid.bounds: expected [xmin, ymin, xmax, ymax] with xmax > xmin and ymax > ymin, "
                        f"found {b}")
    if spec["domain"]["polygon"] is not None and spec["domain"]["raster"] is not None:
        problems.append("domain: expected polygon or raster, found both")
    if spec["domain"]["below_collars"] and data["collars"] is None:
        problems.append("domain.below_collars: only for drillhole data (it needs collar elevations), "
                        "found it beside data.points")
    if decl["method"] == "none" and decl["size_range"] is not None:
        problems.append('declustering.size_range: only with method = "cells", found it with method = "none"')

    tr = spec["transform"]
    if tr["lower"] is not None and tr["upper"] is not None and tr["lower"] >= tr["upper"]:
        problems.append(f"transform.lower: expected a number below transform.upper ({tr['upper']:g}), "
                        f"found {tr['lower']:g}")
    if tr["upper_tail"] == "pareto" and tr["upper"] is not None:
        problems.append('transform.upper: a "pareto" upper tail is unbounded, found upper = '
                        f'{tr["upper"]:g}; remove upper or choose upper_tail = "uniform" or "power"')
    if tr["upper_tail"] == "pareto" and tr["upper_exponent"] is not None and tr["upper_exponent"] < 1.0:
        problems.append(f'transform.upper_exponent: expected a number >= 1 for a "pareto" tail (below 1 it has '
                        f'no mean), found {tr["upper_exponent"]:g}')
    if tr["log"] and tr["lower"] is not None and tr["lower"] <= 0:
        problems.append(f"transform.lower: expected a positive number with log = true, found {tr['lower']:g}")

    vg = spec["variogram"]
    if vg["model_file"] is not None and vg["structures"] is not None:
        problems.append("variogram: expected structures or model_file, found both")
    if not vg["fit"] and vg["model_file"] is None and not vg["structures"]:
        problems.append("variogram: with fit = false, expected structures = [...] or model_file = \"...\", "
                        "found neither")
    if vg["structures"] is not None and not vg["structures"]:
        problems.append("variogram.structures: expected at least one structure, found an empty list")
    kinds = _installed("structures")
    for i, s in enumerate(vg["structures"] or []):
        kind = s.get("kind")
        if kind is not None and kinds is not None and kind not in kinds:
            close = difflib.get_close_matches(kind, kinds, n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            problems.append(f"variogram.structures[{i}].kind: expected one of {', '.join(kinds)}, "
                            f"found {kind!r}{hint}")
        if kind not in (None, "nugget") and s.get("ranges") is None:
            problems.append(f"variogram.structures[{i}].ranges: required for a {kind} structure, expected "
                            "[major], [major, minor] or [major, minor, vertical] in metres, found nothing")

    search = spec["search"]
    if search["min_samples"] > search["max_samples"]:
        problems.append(f"search.min_samples: expected at most search.max_samples "
                        f"({search['max_samples']}), found {search['min_samples']}")

    sim = spec["simulation"]
    engines = _installed("engines")
    if sim["engine"] is not None and engines is not None and sim["engine"] not in engines:
        problems.append(f"simulation.engine: expected one of {', '.join(engines)}, found {sim['engine']!r}")
    if sim["workers"] is not None and sim["cluster"] is not None:
        problems.append("simulation: expected workers or cluster, found both")
    if sim["engine"] == "exact" and sim["realizations_per_path"] not in (1, "auto"):
        problems.append("simulation.realizations_per_path: expected 1 with the exact engine (it has no path), "
                        f"found {sim['realizations_per_path']}")

    out = spec["outputs"]
    if out["density"] is not None and out["density_raster"] is not None:
        problems.append("outputs: expected density (one number) or density_raster (a map), found both")
    if out["density_raster"] is not None and not out["cutoffs"]:
        problems.append("outputs.density_raster: for tonnage above outputs.cutoffs, found no cut-offs")
    if (out["density"] is not None or out["density_raster"] is not None) and ndim == 2 and out["thickness"] is None:
        problems.append("outputs.thickness: required with density on a 2-D grid, expected metres, "
                        "found nothing")
    if tr["log"] and any(c <= 0 for c in out["cutoffs"]):
        problems.append(f"outputs.cutoffs: expected positive numbers with transform.log = true, "
                        f"found {out['cutoffs']}")
    _check_support(spec, ndim, problems)
    _check_secondary(spec, problems)


def _check_secondary(spec: dict, problems: list[str]) -> None:
    """Rules of [mean] and [secondary]."""
    mean, sec, sim = spec["mean"], spec["secondary"], spec["simulation"]
    if mean["trend"] is not None and mean["file"] is not None:
        problems.append("mean: expected trend (an order) or file (a mean grid), found both")
    for section, table in (("mean", mean), ("secondary", sec)):
        if table["file"] is None:
            extra = [k for k in ("variable", "correlation") if table.get(k) is not None]
            extra += ["method"] if table.get("method", "collocated") != "collocated" else []
            if extra:
                problems.append(f"{section}.{extra[0]}: only with {section}.file, found no file")
    rho = sec["correlation"]
    if rho is not None and not -1.0 < rho < 1.0:
        problems.append(f"secondary.correlation: expected a number strictly between -1 and 1, found {rho:g}")
    drift = sec["file"] is not None and sec["method"] == "external_drift"
    if drift:
        # the drift is the mean (fitted in each neighbourhood): no other mean, no given correlation
        if mean["trend"] is not None or mean["file"] is not None:
            problems.append('mean: expected no [mean] with secondary.method = "external_drift" (the drift a + b * '
                            'secondary is the mean), found ' + ("trend" if mean["trend"] is not None else "file"))
        if rho is not None:
            problems.append('secondary.correlation: only with secondary.method = "collocated" (an external drift '
                            f'fits its coefficient in each neighbourhood), found {rho:g}')
        if spec.get("units") is not None:
            problems.append('secondary.method: expected "collocated" in a run of several units (it is run whole by '
                            '`geosim run`, and an external drift is for estimation only), found "external_drift"')
    used = mean["trend"] is not None or mean["file"] is not None or (sec["file"] is not None and not drift)
    if used and sim["kriging"] != "simple":
        problems.append('simulation.kriging: expected "simple" with a [mean] or [secondary] (the mean must be known '
                        f'at every node), found {sim["kriging"]!r}')
    if sec["file"] is not None and not drift and sim["engine"] not in ("sequential", "exact"):
        problems.append(f'simulation.engine: expected "sequential" or "exact" with a [secondary] grid, found '
                        f'{sim["engine"]!r}')


def run_figures(spec: Mapping) -> list[str]:
    """Names of the per-realization decision figures a run computes (what ``ranking.figure`` may name).

    Grade-tonnage figures with ``outputs.density``, else the fraction beyond each cut-off
    and its area (2-D) or volume (3-D); ``mean`` (of the domain or ``ranking.region``)
    always; and every installed figure plugin.
    """
    return decision_figures(spec) + ["mean"] + (_installed("figures") or [])


def decision_figures(spec: Mapping) -> list[str]:
    """The decision-table figures a run computes at each cut-off (none without ``outputs.cutoffs``)."""
    out = spec["outputs"]
    if not out["cutoffs"]:
        return []
    if out["density"] is not None or out["density_raster"] is not None:
        return ["tonnage", "mean_grade", "metal"]
    return ["fraction_above" if out["above"] else "fraction_below",
            "volume" if len(spec["grid"]["cell"] or ()) == 3 else "area"]


def _check_grid_like(section: str, key: str, spec: dict, ndim: int | None, problems: list[str]) -> None:
    """Block or model-cell sizes: one per grid axis, at least the cell, whole cells when aligned."""
    table, cell = spec[section], spec["grid"]["cell"]
    size = table[key]
    if size is not None and table["cells"] is not None:
        problems.append(f"{section}: expected {key} (metres) or cells (whole grid cells), found both")
        return
    if table["cells"] is not None and ndim is not None:
        if len(table["cells"]) != ndim:
            problems.append(f"{section}.cells: expected {ndim} counts like grid.cell, found {table['cells']}")
        size = None
    if size is None:
        if table["origin"] is not None and table["cells"] is None:
            problems.append(f"{section}.origin: only with {section}.{key} or {section}.cells, found neither")
        return
    if ndim is None:
        return
    if len(size) != ndim:
        problems.append(f"{section}.{key}: expected {ndim} sizes like grid.cell, found {size}")
        return
    for axis, (b, c) in enumerate(zip(size, cell)):
        if b < c * (1 - 1e-9):
            problems.append(f"{section}.{key}: expected sizes at least the grid cell ({c:g} m along "
                            f"{'xyz'[axis]}), found {b:g}")
        elif table["aligned"] and abs(b / c - round(b / c)) > 1e-6 * max(1.0, b / c):
            problems.append(f"{section}.{key}: with aligned = true, expected whole multiples of grid.cell "
                            f"({c:g} m along {'xyz'[axis]}), found {b:g}")
    if table["origin"] is not None and len(table["origin"]) != ndim:
        problems.append(f"{section}.origin: expected {ndim} coordinates, found {table['origin']}")


def _check_support(spec: dict, ndim: int | None, problems: list[str]) -> None:
    """Rules of [blocks], [upscaling], [ranking] and [query_points]."""
    _check_grid_like("blocks", "size", spec, ndim, problems)
    _check_grid_like("upscaling", "cell", spec, ndim, problems)
    up = spec["upscaling"]
    upscaling = up["cell"] is not None or up["cells"] is not None
    if upscaling and up["exponent"] is None:
        problems.append("upscaling.exponent: required with upscaling.cell or cells, expected a number from -1 to 1 "
                        "(1 arithmetic, 0 geometric, -1 harmonic), found nothing")
    if up["vertical_exponent"] is not None and (not upscaling or ndim != 3):
        problems.append("upscaling.vertical_exponent: only when upscaling a 3-D grid, found it "
                        + ("without upscaling.cell or cells" if not upscaling else "with a 2-D grid"))

    rank = spec["ranking"]
    figure = rank["figure"]
    if figure is None:
        for k in ("cutoff", "region"):
            if rank[k] is not None:
                problems.append(f"ranking.{k}: only with ranking.figure, found ranking.figure missing")
    else:
        names = run_figures(spec)
        if figure not in names:
            close = difflib.get_close_matches(figure, names, n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            problems.append(f"ranking.figure: expected a figure this run computes ({', '.join(names)}), found "
                            f"{figure!r}{hint}; grade-tonnage figures need outputs.density and outputs.cutoffs, "
                            "fractions need outputs.cutoffs")
        elif figure in decision_figures(spec):
            cutoffs = spec["outputs"]["cutoffs"]
            if rank["cutoff"] is None:
                problems.append(f"ranking.cutoff: required for figure {figure!r}, expected one of "
                                f"outputs.cutoffs {cutoffs}, found nothing")
            elif not any(math.isclose(rank["cutoff"], c, rel_tol=1e-12) for c in cutoffs):
                problems.append(f"ranking.cutoff: expected one of outputs.cutoffs {cutoffs} (the figure is computed "
                                f"there only), found {rank['cutoff']:g}")
        if rank["region"] is not None and figure != "mean":
            problems.append(f'ranking.region: only with figure = "mean", found figure = {figure!r}')
        if rank["support"] == "blocks" and spec["blocks"]["size"] is None and spec["blocks"]["cells"] is None:
            problems.append('ranking.support: "blocks" needs [blocks] size = [...], found no block size')
        elif rank["support"] == "blocks" and figure not in decision_figures(spec):
            problems.append(f'ranking.support: "blocks" ranks by a decision figure of the blocks (one of '
                            f'{", ".join(decision_figures(spec)) or "none: give outputs.cutoffs"}), found {figure!r}')
        if any(p > 100.0 for p in rank["percentiles"]):
            problems.append(f"ranking.percentiles: expected numbers from 0 to 100, found {rank['percentiles']}")

    q = spec["query_points"]
    if q["file"] is None:
        for k in ("x", "y", "z", "id", "crs"):
            if q[k] is not None:
                problems.append(f"query_points.{k}: only with query_points.file, found query_points.file missing")
    else:
        for k in ("x", "y"):
            if q[k] is None:
                problems.append(f"query_points.{k}: required with query_points.file, expected the column name, "
                                "found nothing")
        if ndim == 3 and q["z"] is None:
            problems.append("query_points.z: required on a 3-D grid, expected the elevation column, found nothing")
        if ndim == 2 and q["z"] is not None:
            problems.append(f"query_points.z: only for a 3-D grid, found {q['z']!r} with a 2-D grid.cell")


def _installed(group: str) -> list[str] | None:
    from .. import plugins
    try:
        return plugins.available(group)
    except Exception:  # a broken registry is reported by geosim.plugins itself, not here
        return None


def _take_frames(values: dict) -> dict:
    """Replace data frames given for ``data.points`` or ``domain.polygon`` (through overrides) by
    a text naming their content hash, so the spec's hash and resume key follow the data."""
    from ..vector import frame_sha256, is_frame
    frames = {}
    for section, key in (("data", "points"), ("domain", "polygon")):
        node = values.get(section)
        if isinstance(node, dict) and is_frame(node.get(key)):
            frame = node[key]
            kind = "GeoDataFrame" if hasattr(frame, "geometry") else "DataFrame"
            label = f"<{kind} sha256:{frame_sha256(frame)}>"
            frames[label] = frame
            node[key] = label
    return frames


def _check_files(spec: dict, base: Path, problems: list[str], frames: Mapping | None = None) -> None:
    named = [(f"{section}.{key}", spec[section].get(key)) for section, keys in INPUT_FILE_KEYS for key in keys]
    for dotted, value in named + list(unit_input_files(spec).items()):
        if value is None or value in (frames or {}):
            continue
        p = Path(value).expanduser()
        p = p if p.is_absolute() else base / p
        if not p.is_file():
            problems.append(f"{dotted}: expected an existing file (relative to the spec's "
                            f"folder {base}), found no file at {value!r}")


# -- several geological units: [units] and [unit.<name>] ------------------------------------------
# ``[units]`` says where the codes come from and how units meet; one ``[unit.<name>]`` table per
# unit gives its code and overrides any key of the top-level [declustering], [transform],
# [variogram], [search], [mean], [secondary] and the cut-offs of [outputs]; whatever a unit leaves out it takes from the
# top level.  :func:`unit_spec` gives one unit's view of the spec, so every step that builds a
# one-unit run builds each unit's piece.  A spec without these sections is normalized and hashed
# exactly as before they existed (they appear in the normalized spec only when given).
UNIT_SECTIONS = ("units", "unit")
OVERRIDABLE = ("declustering", "transform", "variogram", "search", "mean", "secondary", "outputs")
# of [outputs], a unit overrides only what is computed per unit
OUTPUT_OVERRIDES = ("cutoffs",)
# source keys that name files (resolved against the spec's folder, hashed into the provenance)
SOURCE_FILE_KEYS = ("raster", "polygons", "cube", "intervals")


def _source(value):
    from ..units import NODE_SOURCES, SAMPLE_SOURCES
    kinds = sorted(set(NODE_SOURCES) | set(SAMPLE_SOURCES))
    if isinstance(value, dict) and value:
        return dict(value), None
    return None, f"a table naming one source, e.g. {{ column = \"unit\" }} or {{ raster = \"units.tif\" }} " \
                 f"(sources: {', '.join(kinds)})"


def _pair_list(value):
    if isinstance(value, list) and all(isinstance(v, dict) for v in value):
        return [dict(v) for v in value], None
    return None, 'a list of tables such as { units = ["oxide", "fresh"], distance = 20.0 }'


def _two_units(value):
    if (isinstance(value, list) and len(value) == 2
            and all(isinstance(v, (str, int)) and not isinstance(v, bool) for v in value)):
        return list(value), None
    return None, "two unit names (or codes)"


def _unit_keys():
    units = {
        "samples": Key(_source, required=True, help="unit code of each sample: { column = \"unit\" } (a column of "
                                                    "the point table) or { intervals = \"logged_units.csv\" }"),
        "nodes": Key(_source, required=True, help="unit code of each node: { raster = \"units.tif\" }, "
                                                  "{ polygons = \"units.geojson\", attribute = \"code\" }, "
                                                  "{ surfaces = [...] } or { cube = \"...\" }"),
        "soft": Key(_pair_list, default=[], help="soft boundaries: samples of the neighbouring unit within "
                                                 "distance metres of the node's unit also condition it"),
        "min_fit_samples": Key(_int(3), default=30, help="fewest samples of a unit whose variogram is fitted "
                                                         "(common practice, no source)"),
    }
    unit = {
        "code": Key(_int(0), required=True, help="the integer code of the unit in tables and rasters"),
        "modelled": Key(_bool, default=True, help="false: the unit's nodes stay nodata (waste, cover)"),
        "description": Key(_text, default="", help="free text for the report"),
    }
    soft = {
        "units": Key(_two_units, required=True, help="the two units (names or codes) that meet"),
        "distance": Key(_number(0.0, lo_open=True), required=True,
                        help="metres from the contact (the nearest node of the other unit) within which "
                             "samples cross it"),
    }
    return units, unit, soft


UNITS_KEYS, UNIT_KEYS, SOFT_KEYS = _unit_keys()


def has_units(spec) -> bool:
    """Whether a spec (RunSpec or normalized dict) models several units."""
    values = spec if isinstance(spec, Mapping) else spec.values
    return values.get("units") is not None


def _check_units(values: Mapping, out: dict, problems: list[str]) -> None:
    """Validate ``[units]`` and ``[unit.<name>]`` of the raw spec ``values`` into ``out``.

    The cross-key rules of a whole spec (:func:`_check_combinations`) run on each
    unit's merged view, their problems prefixed ``unit.<name>:``.
    """
    units_keys, unit_keys, soft_keys = UNITS_KEYS, UNIT_KEYS, SOFT_KEYS
    given = [s for s in UNIT_SECTIONS if s in values]
    if not given:
        return
    if len(given) == 1:
        problems.append("units: expected both [units] (where codes come from) and one [unit.<name>] table per "
                        f"unit, found only [{given[0]}]")
        return
    units = _check_table(values["units"], units_keys, "units", problems)
    units["soft"] = [_check_table(item, soft_keys, f"units.soft[{i}]", problems)
                     for i, item in enumerate(units["soft"] or [])]
    from ..units import NODE_SOURCES, SAMPLE_SOURCES
    for key, registry in (("samples", SAMPLE_SOURCES), ("nodes", NODE_SOURCES)):
        source = units[key]
        if isinstance(source, dict):
            kinds = [k for k in source if k in registry]
            if len(kinds) != 1:
                problems.append(f"units.{key}: expected exactly one of {', '.join(registry)}, found "
                                f"{', '.join(sorted(source)) or 'none'}")
    raw_units = values["unit"]
    if not isinstance(raw_units, dict) or not raw_units:
        problems.append(f"unit: expected one [unit.<name>] table per unit, found {_found(raw_units)}")
        return
    tables: dict[str, dict] = {}
    for name, table in raw_units.items():
        where = f"unit.{name}"
        if not isinstance(table, dict):
            problems.append(f"{where}: expected a table, found {_found(table)}")
            continue
        own = _check_table({k: v for k, v in table.items() if k not in OVERRIDABLE}, unit_keys, where, problems)
        for section in OVERRIDABLE:
            if section not in table:
                continue
            override = table[section]
            if not isinstance(override, dict):
                problems.append(f"{where}.{section}: expected a table of [{section}] keys, found {_found(override)}")
                continue
            schema = SCHEMA[section]
            allowed = OUTPUT_OVERRIDES if section == "outputs" else tuple(schema)
            checked = {}
            for k, v in override.items():
                if k not in allowed:
                    close = difflib.get_close_matches(k, list(allowed), n=1)
                    hint = f" (did you mean {close[0]!r}?)" if close else ""
                    problems.append(f"{where}.{section}.{k}: not a key a unit can override{hint}; expected one "
                                    f"of {', '.join(allowed)}")
                    continue
                value, err = schema[k].check(v)
                if err:
                    problems.append(f"{where}.{section}.{k}: expected {err}, found {_found(v)}")
                    continue
                if section == "variogram" and k in ("structures", "directions"):
                    value = [_check_table(item, SCHEMA[f"variogram.{k}"], f"{where}.variogram.{k}[{i}]", problems)
                             for i, item in enumerate(value)]
                checked[k] = value
            own[section] = checked
        tables[name] = own
    out["units"] = units
    out["unit"] = tables
    try:
        table = unit_table(out)
    except (ValueError, TypeError) as exc:
        problems.append(f"unit: {exc}")
        return
    if not table.modelled_codes:
        problems.append("unit: expected at least one modelled unit, found every unit with modelled = false")
    for i, pair in enumerate(units["soft"]):
        names = pair.get("units") or []
        found = []
        for token in names:
            hit = [u for u in table.units if token in (u.name, u.code)]
            if not hit:
                problems.append(f"units.soft[{i}].units: expected names or codes of [unit.<name>] tables "
                                f"({', '.join(table.names)}), found {token!r}")
            elif not hit[0].modelled:
                problems.append(f"units.soft[{i}].units: {hit[0].name} is not modelled; a soft boundary joins two "
                                "modelled units")
            else:
                found.append(hit[0].code)
        if len(found) == 2 and found[0] == found[1]:
            problems.append(f"units.soft[{i}].units: expected two different units, found {names}")
    for name in tables:
        merged = merged_values(out, name)
        found: list[str] = []
        _check_combinations(merged, found)
        problems.extend(f"unit.{name}: {p}" for p in found if p not in problems)


def merged_values(values: Mapping, name: str) -> dict:
    """The normalized spec as unit ``name`` sees it: its overrides replace the top-level keys."""
    merged = copy.deepcopy(dict(values))
    for section, override in values["unit"][name].items():
        if section in OVERRIDABLE:
            merged[section] = {**merged[section], **copy.deepcopy(override)}
    return merged


def unit_spec(spec, name: str):
    """Unit ``name``'s view of a :class:`~geosim.config.runspec.RunSpec`: the same spec with the
    unit's ``[declustering]``, ``[transform]``, ``[variogram]``, ``[search]`` and cut-offs."""
    values = merged_values(spec.values, name)
    return RunSpec(path=spec.path, base=spec.base, values=values,
                   sha256=hashlib.sha256(canonical_json(values).encode()).hexdigest(), frames=spec.frames)


def unit_table(spec):
    """The :class:`geosim.units.UnitTable` of a spec's ``[unit.<name>]`` tables (spec order)."""
    from ..units import UnitTable
    values = spec if isinstance(spec, Mapping) else spec.values
    return UnitTable.from_mapping(values["unit"])


def unit_input_files(values: Mapping) -> dict[str, Any]:
    """``{"units.nodes.raster": path text, "unit.<name>.mean.file": ..., ...}``: the files the unit
    sources and the units' own tables name."""
    out = {}
    units = values.get("units")
    if not units:
        return out
    for key in ("samples", "nodes"):
        source = units.get(key) or {}
        for k in SOURCE_FILE_KEYS:
            if isinstance(source.get(k), str):
                out[f"units.{key}.{k}"] = source[k]
        if isinstance(source.get("surfaces"), list):
            for i, path in enumerate(source["surfaces"]):
                if isinstance(path, str):
                    out[f"units.{key}.surfaces[{i}]"] = path
    # files a unit's own table names (a model file, a mean or secondary grid)
    for name, table in (values.get("unit") or {}).items():
        for section, keys in INPUT_FILE_KEYS:
            override = table.get(section) if isinstance(table, Mapping) else None
            for k in keys:
                if isinstance(override, Mapping) and isinstance(override.get(k), str):
                    out[f"unit.{name}.{section}.{k}"] = override[k]
    return out


def _unit_reference_lines() -> list[str]:
    """The reference lines of the unit keys (see :func:`geosim.config.runspec.reference`)."""
    units_keys, unit_keys, soft_keys = UNITS_KEYS, UNIT_KEYS, SOFT_KEYS
    lines = ["[units] (only in a run of several units)"]
    lines += [_reference_line(k, key) for k, key in units_keys.items()]
    lines.append("[units.soft] (list of tables)")
    lines += [_reference_line(k, key) for k, key in soft_keys.items()]
    lines.append(f"[unit.<name>] (one table per unit; also {', '.join(OVERRIDABLE[:-1])} = {{...}} overriding "
                 "those sections, and outputs = { cutoffs = [...] })")
    lines += [_reference_line(k, key) for k, key in unit_keys.items()]
    return lines
