"""What the steps of :mod:`geosim.pipeline` return, and short descriptions of a spec, its data and a run.

Plain containers: each step's result holds what it computed and the files it
wrote (``files``: output kind -> paths).  :func:`describe_spec` and
:func:`describe_data` give the (label, text) rows the command line prints;
:func:`short_note` and :func:`extremes_note` the one-line notes of a run.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from collections.abc import Mapping
from typing import Any

import numpy as np

from .config.runspec import RunSpec
from .errors import InputError

__all__ = ["PreparedData", "VariogramResult", "CrossValidation", "EstimateResult", "SimulationResult",
           "RunResult", "describe_spec", "describe_data", "short_note", "extremes_note"]


@dataclass
class PreparedData:
    """Samples ready for modelling: coordinates in metres, weights, transform and scores."""

    samples: Any                 # geosim.points.PointSet
    values: np.ndarray           # (n,) the modelled variable, data units
    weights: np.ndarray | None   # declustering weights summing to 1, or None
    declustering: Any            # the declustering result (with its scan), or None
    transform: Any               # fitted transform, data units -> normal scores
    scores: np.ndarray           # (n,) normal scores of the samples (ties distinct), minus the mean if any
    notes: list[str] = field(default_factory=list)
    mean: Any = None             # geosim.secondary.LocalMean ([mean] in the spec): scores are its residuals

    @property
    def coords(self) -> np.ndarray:
        return self.samples.coords

    @property
    def crs(self):
        return self.samples.crs


@dataclass
class VariogramResult:
    """The model used; when it was fitted, the experimental variograms and the fit; files written."""

    model: Any
    experimental: list = field(default_factory=list)
    fit: Any = None
    source: str = ""
    files: dict[str, list[str]] = field(default_factory=dict)
    ndim: int | None = None      # the grid's dimension, for the model's text

    def model_text(self) -> str:
        """The model as text, with what applies to the grid's dimension."""
        return self.model.text(self.ndim)


@dataclass
class CrossValidation:
    """Leave-one-out results in normal scores and in data units
    (:class:`geosim.kriging.CrossValidationResult`), their summaries and files.

    ``summary`` is ``{"normal_scores": {...}, "data_units": {...}}``, each with the
    declustered statistics beside the plain ones.
    """

    result: Any
    summary: dict
    files: dict[str, list[str]] = field(default_factory=dict)
    data_units: Any = None


@dataclass
class EstimateResult:
    """Kriging maps on the grid (NaN outside the domain or where too few samples were found).

    ``scores_mean`` and ``scores_variance`` are the kriged normal score and its kriging
    variance; ``mean`` and ``variance`` are the conditional mean and variance in data
    units under the multi-Gaussian model (Verly 1983, "The multigaussian approach and
    its applications to the estimation of local reserves", Mathematical Geology 15(2)):
    the moments of T^-1(Y) with Y ~ N(kriged score, kriging variance), T the transform.
    """

    scores_mean: np.ndarray
    scores_variance: np.ndarray
    mean: np.ndarray
    variance: np.ndarray
    files: dict[str, list[str]] = field(default_factory=dict)
    n_short: int = 0        # active nodes whose search held fewer than search.min_samples samples
    n_unestimated: int = 0  # active nodes left without an estimate (ordinary kriging, search not widened)
    grid: Any = field(default=None, repr=False)
    units: str = ""
    spread: dict | None = None  # with a collocated secondary: mean spread without and with it

    def __repr__(self) -> str:
        inside = np.isfinite(self.mean)
        shape = "x".join(map(str, self.mean.shape))
        mean = f", mean {float(np.mean(self.mean[inside])):.4g}" if inside.any() else ""
        unit = f" {self.units}" if self.units and mean else ""
        return f"EstimateResult({shape} nodes, {int(inside.sum())} estimated{mean}{unit})"

    def descriptions(self) -> list[tuple[str, str]]:
        """(description, unit) of the four maps as written: mean, standard deviation, score, score variance."""
        u = f" ({self.units})" if self.units else ""
        return [(f"conditional mean{u}", self.units), (f"conditional standard deviation{u}", self.units),
                ("kriged normal score", ""), ("kriging variance of the normal score", "")]

    def to_xarray(self, provenance: Mapping[str, str] | None = None):
        """The maps as a CF-conventions :class:`xarray.Dataset` (``pip install "geosim[cube]"``).

        Variables ``mean``, ``std`` (data units), ``score`` and ``score_variance``
        on ``(z,) y, x`` cell-centre coordinates, with the grid's CRS as the
        ``spatial_ref`` grid mapping (:mod:`geosim.io.cube`).
        """
        from .io.cube import grid_dataset
        (d_mean, _), (d_std, _), (d_score, _), (d_var, _) = self.descriptions()
        return grid_dataset(self.grid, {
            "mean": (self.mean, d_mean, self.units), "std": (np.sqrt(self.variance), d_std, self.units),
            "score": (self.scores_mean, d_score, "1"), "score_variance": (self.scores_variance, d_var, "1")},
            title="geosim kriging estimate", provenance=provenance)


@dataclass
class SimulationResult:
    """Records of every realization in index order, and which were kept from an earlier run."""

    records: list
    kept: list[int]
    computed: list[int]
    writer: Any

    def decision_spread(self) -> list[dict]:
        """P10/P50/P90 of each decision figure across the realizations (empty without cut-offs)."""
        from .summaries import decision_spread as spread
        figures = [r.get("figures") for r in self.records]
        return spread(figures) if figures and all(f is not None for f in figures) else []


@dataclass
class RunResult:
    """What :func:`run` did and wrote."""

    out_dir: Path
    spec_sha256: str
    files: dict[str, list[str]]
    model: Any
    kept: list[int]
    computed: list[int]
    crossval: dict | None
    decision: list[dict]
    timings: dict[str, float]
    notes: list[str]
    ndim: int = 3

    def __repr__(self) -> str:
        n = len(self.kept) + len(self.computed)
        rmse = (f", cross-validation RMSE {self.crossval['normal_scores']['rmse']:.4g} (normal scores)"
                if self.crossval else "")
        return (f"RunResult({str(self.out_dir)!r}, {n} realizations ({len(self.computed)} computed), "
                f"model {' '.join(str(self.model).split())!r}{rmse})")

    def to_xarray(self, kind: str = "summary", support: str | None = None):
        """One output as an :class:`xarray.Dataset`: ``"summary"``, ``"realizations"`` or ``"estimate"``.

        Opens the run's NetCDF or Zarr cube lazily when it wrote one; otherwise reads
        the GeoTIFF(s) into the same CF layout (``pip install "geosim[cube]"``).
        ``support`` picks the block or model-cell outputs (``"blocks"``,
        ``"upscaled"``, ``"upscaled_vertical"``) instead of the nodes'.
        """
        from .io.cube import open_cube, raster_dataset
        choices = ("summary", "realizations", "estimate")
        if kind not in choices:
            raise ValueError(f"kind must be one of {choices}, got {kind!r}")
        if support is not None and kind == "estimate":
            raise ValueError("the kriging estimate is at point support only; leave support out")
        prefix = f"{support}_" if support else ""
        cube = self.files.get("estimate" if kind == "estimate" else f"{prefix}{kind}_cube", [])
        cube = [f for f in cube if not f.endswith(".tif")]
        if cube:
            return open_cube(cube[0])
        tifs = [f for f in self.files.get(f"{prefix}{kind}", []) if f.endswith(".tif")]
        if not tifs:
            what = f"{kind} at {support} support" if support else kind
            raise InputError(f"this run wrote no {what} output", file=str(self.out_dir),
                             fix="turn the output on in [outputs] (or [blocks], [upscaling]) and run again")
        return raster_dataset(tifs, kind)


def describe_spec(spec: RunSpec) -> list[tuple[str, str]]:
    """Short (label, text) rows saying what the spec will do."""
    d, g, s = spec["data"], spec["grid"], spec["simulation"]
    if d["points"] is not None:
        source = f"points {d['points']} ({d['value']}, {d['crs']})"
    else:
        source = f"drillholes {d['collars']}, {d['intervals']} ({d['value']}, {d['crs']})"
    vg = spec["variogram"]
    variogram = ("fit to experimental variograms" if vg["fit"] else "fixed") + (
        f", from {vg['model_file']}" if vg["model_file"] else "")
    where = s["cluster"] or (f"{s['workers']} worker(s)" if s["workers"] else "all local cores")
    return [("data", source), ("variogram", variogram),
            ("grid cell", " x ".join(f"{c:g}" for c in g["cell"]) + " m"),
            ("simulation", f"{s['realizations']} realization(s), {s['engine']} engine, seed {s['seed']}, "
                           f"on {where}")]


def describe_data(data: PreparedData) -> list[tuple[str, str]]:
    """Short (label, text) rows describing prepared samples."""
    v = data.values
    rows = [("samples", f"{len(v)} in {data.coords.shape[1]}-D"),
            ("CRS", data.crs.name if data.crs is not None else "local metres"),
            ("values", f"min {v.min():.4g}, mean {v.mean():.4g}, max {v.max():.4g}")]
    if data.weights is not None:
        rows.append(("declustered mean", f"{float(np.sum(data.weights * v) / np.sum(data.weights)):.4g}"))
    rows.append(("transform", data.transform.describe()))
    rows += [("note", n) for n in data.notes]
    return rows


def short_note(short: int, total: int, what: str, spec: RunSpec, unestimated: int = 0) -> str:
    """One line saying how many kriging searches held fewer than ``search.min_samples`` samples
    and what was done about it."""
    k = spec["search.min_samples"]
    drift = spec["secondary.file"] is not None and spec["secondary.method"] == "external_drift"
    if drift:
        from .kriging import DRIFT_MIN_SAMPLES  # an external drift needs at least 3
        k = max(k, DRIFT_MIN_SAMPLES)
    if spec["search.widen"]:
        done = f"their search was widened to the nearest {k}"
    elif drift:
        done = "kriging with the external drift left them without an estimate"
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

