"""Secondary information in a run: a locally varying mean and a collocated secondary grid.

One method, stated once (the README's "Secondary information" says the same):

* **Transform first.**  The samples are transformed to normal scores as in any run
  (declustered, log first if asked).  The mean lives in normal-score space:
  ``[mean] trend = 1 | 2`` fits a polynomial trend in x, y (, z) to the normal
  scores by least squares (:func:`geosim.trend.fit_trend`); ``[mean] file`` gives a
  mean map or cube in *data units*, which is read at the samples and nodes
  (bilinear by default) and put through the run's own transform, value by value.
  The transform is monotone, so a local median maps exactly and a local mean only
  approximately; a mean grid is best thought of as the local typical value.
* **Residuals are modelled.**  Everything after :func:`geosim.pipeline.prepare_data`
  works on the residuals ``y - m``: the variogram fitted (its total sill is the
  residuals' declustered variance unless ``variogram.total_sill`` says otherwise),
  cross-validation, simple kriging and both engines.  The mean is added back at
  each node before the back-transform; cross-validation adds it at each sample.
* **Collocated secondary.**  ``[secondary] file`` (a map for 2-D runs, a NetCDF
  cube or a map for 3-D) is read at every node, bilinear by default, and given its
  own normal-score transform fitted to the values at the active nodes, unweighted:
  nodes are regular, so there is nothing to decluster.  The correlation coefficient
  with the primary (residual) scores is ``[secondary] correlation``, or estimated
  from the samples where the secondary has a value
  (:func:`geosim.kriging.collocated_correlation`, at least ``min_pairs``).
  Estimation is collocated simple cokriging, simulation collocated co-simulation,
  both under the Markov model (Almeida and Journel 1994, Mathematical Geology
  26(5)).  Simple kriging only.
* **Or an external drift** (``[secondary] method = "external_drift"``).  The
  primary normal score's mean is ``a + b t(u)``, with ``t`` the secondary's normal
  score (the same transform as above) and ``a``, ``b`` unknown and fitted anew
  in each neighbourhood by the kriging weights (two constraints: they sum to one
  and reproduce ``t`` at the target).  On normal scores, both of them, because
  (1) the run's variogram and the multi-Gaussian back-transform are those of
  the primary's normal scores, so the estimate and its variance give a
  conditional distribution in data units like every other estimate of the run,
  and (2) where primary and secondary scores are bi-Gaussian, as the collocated
  method assumes, the primary's expectation given the secondary is exactly
  linear in the secondary's *score*; linear in the secondary's raw values (an
  apparent resistivity spanning a decade) it rarely is.  The variogram is fitted
  to the residuals of the declustering-weighted least-squares fit of the drift
  at the samples; cross-validation and ``geosim estimate`` krige with the drift.
  Every sample needs a secondary value.  Simulation with an external drift is
  not offered: ``geosim run`` and ``geosim simulate`` refuse it.
"""
from __future__ import annotations

import contextlib
import math
import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .config.runspec import RunSpec
from .errors import InputError

__all__ = ["LocalMean", "SecondaryGrid", "local_mean", "secondary_grid", "add_mean_then", "uses_secondary_info",
           "uses_drift", "refuse_drift_simulation", "drift_fit"]


def uses_secondary_info(spec: RunSpec) -> bool:
    """Whether the spec gives a mean or a secondary grid."""
    return spec["mean.trend"] is not None or spec["mean.file"] is not None or spec["secondary.file"] is not None


def uses_drift(spec: RunSpec) -> bool:
    """Whether the spec uses its secondary grid as an external drift."""
    return spec["secondary.file"] is not None and spec["secondary.method"] == "external_drift"


def refuse_drift_simulation(spec: RunSpec, command: str) -> None:
    """Refuse to simulate a spec that uses an external drift (before anything is written)."""
    if uses_drift(spec):
        raise InputError(f'secondary.method = "external_drift" is for estimation: `geosim {command}` cannot simulate '
                         "with an external drift (its coefficients are fitted in each kriging neighbourhood, which "
                         "no engine here does)", file=spec.name, field="secondary.method",
                         fix='use `geosim estimate` and `geosim crossvalidate` with this spec, or set '
                             'secondary.method = "collocated" to simulate with the secondary')


def _where(coords: np.ndarray) -> str:
    """Where a set of points lies: their bounding box and the first one."""
    lo, hi = coords.min(axis=0), coords.max(axis=0)
    box = ", ".join(f"{a} {l:.1f} to {h:.1f}" for a, l, h in zip("xyz", lo, hi))
    first = ", ".join(f"{v:.1f}" for v in coords[0])
    return f"{box}; the first at ({first})"


def _read(spec: RunSpec, section: str, points: np.ndarray, crs) -> tuple[np.ndarray, Any, list[str]]:
    """Values of ``[section] file`` at ``points`` (NaN where it has none), the layer and notes."""
    from .gridvalues import layer_values, read_layer
    path = str(spec.resolve(spec[f"{section}.file"]))
    bounds = None if crs is None or points.shape[0] == 0 else _bounds_in_layer_crs(path, points, crs)
    layer = read_layer(path, variable=spec[f"{section}.variable"], field=f"{section}.file", bounds=bounds)
    values, notes = layer_values(layer, points, crs, method=spec[f"{section}.resampling"], field=f"{section}.file")
    return values, layer, notes


def _bounds_in_layer_crs(path: str, points: np.ndarray, crs):
    """The points' bounding box in the raster's CRS (None for a cube or an unreadable file)."""
    if path.lower().endswith((".nc", ".nc4", ".cdf")):
        return None
    import rasterio
    from pyproj import CRS, Transformer
    from rasterio.errors import RasterioIOError
    try:
        with rasterio.open(path) as src:
            target = None if src.crs is None else CRS.from_user_input(src.crs)
    except RasterioIOError:
        return None  # read_layer reports it
    x, y = points[:, 0], points[:, 1]
    source = CRS.from_user_input(crs)
    if target is not None and target != source:
        x, y = Transformer.from_crs(source, target, always_xy=True).transform(x, y, errcheck=False)
    x, y = np.asarray(x), np.asarray(y)
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        return None
    return float(x.min()), float(y.min()), float(x.max()), float(y.max())


def _resampling_note(layer, grid, method: str) -> str:
    cell = " x ".join(f"{c:g}" for c in layer.cell[:grid.ndim])
    mine = " x ".join(f"{c:g}" for c in grid.cell[:layer.ndim])
    how = "bilinear interpolation between the four cell centres around each node" if method == "bilinear" else \
        "the value of the cell each node falls in"
    if layer.ndim == 3:
        how = how.replace("four", "eight")
    return (f"{layer.describe()}: read at the {grid.n_active:,} node centres of the {mine} m grid by {how}"
            + ("" if cell == mine else f" (its cells are {cell}, the grid's {mine})"))


def _check_covered(values: np.ndarray, grid, spec: RunSpec, section: str, what: str) -> None:
    missing = grid.mask & ~np.isfinite(values)
    if missing.any():
        nodes = grid.coords()[~np.isfinite(values[grid.mask])]
        raise InputError(f"the {what} has no value at {int(missing.sum()):,} of {grid.n_active:,} active grid "
                         f"nodes ({_where(nodes)})", file=str(spec.resolve(spec[f"{section}.file"])),
                         field=f"{section}.file",
                         fix=f"give a {what} that covers the whole domain without gaps (fill its nodata cells), "
                             "or shrink the domain or grid.bounds to its extent")


def _node_values(spec: RunSpec, section: str, grid) -> tuple[np.ndarray, Any, list[str]]:
    values = np.full(grid.shape, np.nan)
    read, layer, notes = _read(spec, section, grid.coords(), grid.crs)
    values[grid.mask] = read
    return values, layer, notes + [_resampling_note(layer, grid, spec[f"{section}.resampling"])]


# -- locally varying mean -----------------------------------------------------------------------

@dataclass
class LocalMean:
    """The locally varying mean of a run, in normal scores.

    Attributes
    ----------
    kind : {"trend", "file"}
    scores : (n,) ndarray
        The samples' normal scores (before the mean is taken off).
    at_data : (n,) ndarray
        The mean at the samples.
    trend : geosim.trend.Trend or None
    notes : list of str
    """

    kind: str
    scores: np.ndarray
    at_data: np.ndarray
    trend: Any = None
    spec: Any = field(default=None, repr=False)
    transform: Any = field(default=None, repr=False)
    notes: list[str] = field(default_factory=list)
    _nodes: dict = field(default_factory=dict, repr=False)

    @property
    def residuals(self) -> np.ndarray:
        """The samples' normal scores minus the mean: what the run models."""
        return self.scores - self.at_data

    def at_nodes(self, grid) -> np.ndarray:
        """The mean at every node of ``grid`` (NaN outside the domain), in normal scores."""
        key = id(grid)
        if key not in self._nodes:
            values = np.full(grid.shape, np.nan)
            if self.kind == "trend":
                values[grid.mask] = self.trend(grid.coords())
            else:
                raw, _, notes = _node_values(self.spec, "mean", grid)
                _check_covered(raw, grid, self.spec, "mean", "mean grid")
                values[grid.mask] = _to_scores(self.transform, raw[grid.mask], self.spec, grid.coords())
                self.notes.extend(n for n in notes if n not in self.notes)
            self._nodes = {key: values}
        return self._nodes[key]

    def at_points(self, coords: np.ndarray, crs) -> np.ndarray:
        """The mean at other points than the samples (e.g. a neighbouring unit's samples across a
        soft contact), in normal scores; a mean grid must cover them."""
        if self.kind == "trend":
            return self.trend(coords)
        raw, _, _ = _read(self.spec, "mean", coords, crs)
        if not np.isfinite(raw).all():
            raise InputError(f"the mean grid has no value at {int(np.count_nonzero(~np.isfinite(raw)))} of "
                             f"{raw.size} points ({_where(coords[~np.isfinite(raw)])})",
                             file=str(self.spec.resolve(self.spec["mean.file"])), field="mean.file",
                             fix="give a mean grid that covers every sample")
        return _to_scores(self.transform, raw, self.spec, coords)

    def report(self, weights: np.ndarray | None = None, grid=None) -> dict:
        """The report's ``mean`` section: the trend fit or the mean grid's summary, and the
        residuals' statistics (declustered when ``weights`` are given)."""
        r = self.residuals
        w = np.full(r.shape, 1.0 / r.size) if weights is None else np.asarray(weights) / np.sum(weights)
        mean = float(w @ r)
        out: dict[str, Any] = {
            "method": "mean in normal-score space: " + (
                f"polynomial trend of order {self.trend.order} fitted to the normal scores by "
                + ("declustering-weighted" if weights is not None else "ordinary") + " least squares"
                if self.kind == "trend" else "mean grid in data units, put through the run's transform"),
            "residuals": {"count": int(r.size), "mean": mean, "variance": float(w @ (r - mean) ** 2),
                          "min": float(r.min()), "max": float(r.max()),
                          "weighted": weights is not None},
            "notes": list(self.notes)}
        if self.kind == "trend":
            t = self.trend
            out["trend"] = {"order": t.order, "origin": t.origin.tolist(), "terms": t.table(),
                            "r_squared": t.r_squared, "residual_variance": t.residual_variance, "samples": t.n,
                            "coordinates": "metres relative to the origin (the samples' centroid)"}
        else:
            out["file"] = str(self.spec.resolve(self.spec["mean.file"]))
        if grid is not None:
            m = self.at_nodes(grid)[grid.mask]
            out["at_nodes"] = {"mean": float(m.mean()), "std": float(m.std()), "min": float(m.min()),
                               "max": float(m.max())}
        return out


def _to_scores(transform, values: np.ndarray, spec: RunSpec, coords: np.ndarray) -> np.ndarray:
    """Mean values in data units through the run's transform, refusing those a log cannot take."""
    if spec["transform.log"] and (values <= 0).any():
        bad = values <= 0
        raise InputError(f"the mean grid has {int(bad.sum())} value(s) <= 0, which have no logarithm "
                         f"(transform.log = true) ({_where(coords[bad])})",
                         file=str(spec.resolve(spec["mean.file"])), field="mean.file",
                         fix="give the mean in data units (e.g. m/s), positive everywhere")
    return transform.transform(values)


def local_mean(spec: RunSpec, samples, transform, scores: np.ndarray, weights=None) -> LocalMean | None:
    """The spec's locally varying mean at the samples (None without ``[mean]``); a trend is
    fitted with the declustering ``weights``."""
    mean = spec["mean"]
    coords = samples.coords
    if mean["trend"] is not None:
        from .trend import fit_trend
        try:
            trend = fit_trend(coords, scores, order=mean["trend"], weights=weights)
        except InputError as exc:
            raise InputError(f"the trend cannot be fitted: {exc.message}", file=spec.name, field="mean.trend",
                             fix=exc.fix) from None
        note = (f"mean: polynomial trend of order {trend.order} fitted to the {trend.n} normal scores "
                f"(R^2 = {trend.r_squared:.3f}); the residuals are modelled")
        return LocalMean("trend", scores, trend(coords), trend=trend, spec=spec, notes=[note])
    if mean["file"] is None:
        return None
    raw, layer, notes = _read(spec, "mean", coords, samples.crs)
    missing = ~np.isfinite(raw)
    if missing.any():
        from .inputchecks import sample_label
        first = sample_label(samples, int(np.argmax(missing)))
        raise InputError(f"the mean grid has no value at {int(missing.sum())} of {raw.size} samples "
                         f"(the first: {first[2]} of {os.path.basename(first[0] or '') or 'the data'})",
                         file=str(spec.resolve(mean["file"])), field="mean.file",
                         fix="give a mean grid that covers every sample")
    at_data = _to_scores(transform, raw, spec, coords)
    notes.append(f"mean: {layer.describe()}, in data units through the run's transform; the residuals are "
                 "modelled")
    return LocalMean("file", scores, at_data, spec=spec, transform=transform, notes=notes)


def residual_sill(mean: LocalMean, weights: np.ndarray | None) -> float:
    """Declustered variance of the residuals: the total sill a fit aims at with a mean."""
    return local_variance(mean.residuals, weights)


def local_variance(values: np.ndarray, weights: np.ndarray | None) -> float:
    w = np.full(values.shape, 1.0 / values.size) if weights is None else np.asarray(weights) / np.sum(weights)
    m = float(w @ values)
    return float(w @ (values - m) ** 2)


def add_mean_then(scores: np.ndarray, *, mean: np.ndarray, inverse) -> np.ndarray:
    """``inverse(scores + mean)``: a realization's residual scores at the active nodes, the mean
    added back, in data units (the realization writer's back-transform with a mean)."""
    if scores.shape != mean.shape:
        raise ValueError(f"{scores.shape[0]} simulated values for {mean.shape[0]} nodes of the mean")
    return inverse(scores + mean)


# -- collocated secondary ------------------------------------------------------------------------

@dataclass
class SecondaryGrid:
    """A collocated secondary variable on the simulation grid.

    Attributes
    ----------
    at_nodes : ndarray of ``grid.shape``
        Normal scores of the secondary at every active node (NaN outside).
    at_data : (n,) ndarray
        Its normal scores at the samples (NaN where it has no value).
    correlation : float
        Correlation coefficient with the primary (residual) scores.
    pairs : int or None
        Samples the estimate rests on (None when the coefficient was given).
    transform : geosim.transforms.NormalScoreTransform
        Fitted to the secondary's values at the active nodes.
    notes : list of str
    file : str
    """

    at_nodes: np.ndarray
    at_data: np.ndarray
    correlation: float
    pairs: int | None
    transform: Any
    notes: list[str]
    file: str
    min_pairs: int = 0

    nodes: int = 0
    method: str = "collocated"
    drift: dict | None = None  # external drift: its least-squares fit at the samples (drift_fit)

    def engine_options(self, engine: str) -> dict:
        """The options an engine takes for the secondary (the sequential engine: also how many
        nodes not yet simulated lend it their secondary values)."""
        options = {"secondary": self.at_nodes, "correlation": self.correlation}
        if engine == "sequential":
            options["secondary_nodes"] = self.nodes
        return options

    def report(self) -> dict:
        """The report's ``secondary`` section."""
        if self.method == "external_drift":
            return {"file": self.file, "method": DRIFT_METHOD, "transform": self.transform.describe(),
                    "drift_fit": self.drift, "notes": list(self.notes)}
        out = {"file": self.file,
               "method": "estimate: collocated simple cokriging; simulation: the secondary at the node and at up "
                         f"to {self.nodes} nodes not yet simulated join each node's system (sequential engine), "
                         "or at every node (exact engine); Markov model (Almeida and Journel 1994)",
               "correlation": self.correlation,
               "correlation_source": "given" if self.pairs is None else "estimated at the samples",
               "transform": self.transform.describe() + "; fitted to the values at the active nodes, "
                                                         "unweighted (regular nodes need no declustering)",
               "notes": list(self.notes)}
        if self.pairs is not None:
            out.update(pairs=self.pairs, min_pairs=self.min_pairs)
        return out


DRIFT_METHOD = ("kriging with an external drift: the primary normal score's mean is a + b * (the secondary's "
                "normal score), a and b unknown and filtered in each neighbourhood; the variogram is the residuals' "
                "from the declustering-weighted least-squares fit of the drift")

_LAST: dict = {}  # the last secondary grid made: estimate, simulate and the report of one run share it


def secondary_grid(spec: RunSpec, samples, residuals: np.ndarray, grid) -> SecondaryGrid | None:
    """The spec's secondary grid on ``grid`` with its transform and correlation (None without one)."""
    sec = spec["secondary"]
    if sec["file"] is None:
        return None
    import hashlib
    digest = hashlib.sha256()
    for part in (spec.sha256.encode(), repr(grid).encode(), np.ascontiguousarray(grid.mask).tobytes(),
                 np.ascontiguousarray(residuals, dtype=np.float64).tobytes(),
                 np.ascontiguousarray(samples.coords).tobytes()):
        digest.update(part)
    key = (digest.hexdigest(), os.stat(spec.resolve(sec["file"])).st_mtime_ns)
    if key not in _LAST:
        _LAST.clear()
        _LAST[key] = _secondary_grid(spec, samples, residuals, grid)
    return _LAST[key]


def _secondary_grid(spec: RunSpec, samples, residuals: np.ndarray, grid) -> SecondaryGrid:
    sec = spec["secondary"]
    from .kriging import collocated_correlation
    from .transforms import NormalScoreTransform
    path = str(spec.resolve(sec["file"]))
    raw, layer, notes = _node_values(spec, "secondary", grid)
    _check_covered(raw, grid, spec, "secondary", "secondary grid")
    inside = raw[grid.mask]
    if np.ptp(inside) == 0:
        raise InputError(f"the secondary grid has the same value ({inside[0]:g}) at every active node",
                         file=path, field="secondary.file", fix="give a secondary grid that varies over the domain")
    transform = NormalScoreTransform(seed=spec["simulation.seed"], name="secondary").fit(inside)
    at_nodes = np.full(grid.shape, np.nan)
    at_nodes[grid.mask] = transform.data_scores_
    at_samples, _, more = _read(spec, "secondary", samples.coords, samples.crs)
    at_data = np.full(at_samples.shape, np.nan)
    ok = np.isfinite(at_samples)
    at_data[ok] = transform.transform(at_samples[ok])
    notes += [n for n in more if n not in notes]
    if sec["method"] == "external_drift":
        missing = ~np.isfinite(at_data)
        if missing.any():
            from .inputchecks import sample_label
            first = sample_label(samples, int(np.argmax(missing)))
            raise InputError(f"the secondary grid has no value at {int(missing.sum())} of {at_data.size} samples "
                             f"(the first: {first[2]} of {os.path.basename(first[0] or '') or 'the data'}); an "
                             "external drift must be known at every sample", file=path, field="secondary.file",
                             fix="give a secondary grid that covers every sample, or leave those samples out")
        notes.append("secondary: used as an external drift (its normal score); every sample has a value")
        return SecondaryGrid(at_nodes, at_data, math.nan, None, transform, notes, path, 0, 0, "external_drift")
    pairs = None
    rho = sec["correlation"]
    if rho is None:
        try:
            rho, pairs = collocated_correlation(residuals, at_data, min_pairs=sec["min_pairs"])
        except InputError as exc:
            raise InputError(exc.message, file=spec.name, field="secondary.correlation", fix=exc.fix) from None
        notes.append(f"secondary: correlation {rho:.3f} with the primary normal scores, estimated from {pairs} "
                     f"samples where both are known (standard error about {(1 - rho ** 2) / math.sqrt(pairs):.2f})")
    else:
        notes.append(f"secondary: correlation {rho:.3f} with the primary normal scores, as given")
    return SecondaryGrid(at_nodes, at_data, float(rho), pairs, transform, notes, path, sec["min_pairs"], sec["nodes"])


@contextlib.contextmanager
def drift_errors(secondary: SecondaryGrid):
    """Kriging with the secondary as a drift: a drift constant over a neighbourhood is reported against
    the secondary grid and the keys that change it."""
    try:
        yield
    except InputError as exc:
        if exc.field != "drift":
            raise
        raise InputError(exc.message, file=secondary.file, field="secondary.method",
                         fix="search more samples (search.max_samples, search ranges), read the grid with "
                             'resampling = "bilinear" (nearest cells are flat), or use secondary.method = '
                             '"collocated"') from None


def drift_fit(secondary: SecondaryGrid, scores: np.ndarray, weights: np.ndarray | None) -> tuple[np.ndarray, dict]:
    """Least-squares fit of the drift ``a + b t`` to the primary scores at the samples (weighted by the
    declustering ``weights``): the residuals, whose variogram the kriging needs, and the fit."""
    t = secondary.at_data
    w = np.full(t.shape, 1.0 / t.size) if weights is None else np.asarray(weights) / np.sum(weights)
    f = np.column_stack([np.ones_like(t), t])
    a, b = np.linalg.solve(f.T @ (w[:, None] * f), f.T @ (w * scores))
    residuals = scores - (a + b * t)
    total = local_variance(scores, weights)
    fit = {"intercept": float(a), "slope": float(b), "residual_variance": local_variance(residuals, weights),
           "r_squared": 1.0 - local_variance(residuals, weights) / total if total > 0 else math.nan,
           "weighted": weights is not None,
           "basis": "least squares of the primary normal scores on the secondary's, at the samples; the kriging "
                    "refits a and b in each neighbourhood"}
    secondary.drift = fit
    note = (f"external drift: a + b * secondary score fitted to the primary scores at the samples by "
            f"{'declustering-weighted ' if weights is not None else ''}least squares: a = {a:.3f}, b = {b:.3f}, "
            f"R^2 = {fit['r_squared']:.3f}; the variogram is fitted to its residuals")
    if note not in secondary.notes:
        secondary.notes.append(note)
    return residuals, fit


def collocated_leave_one_out(result, secondary: SecondaryGrid, sill: float):
    """A leave-one-out simple kriging of the residual scores turned into collocated cokriging: each
    left-out sample's moments updated with the secondary at its own location (Markov model,
    :func:`geosim.kriging.collocated_update`); samples without a secondary value keep theirs."""
    from dataclasses import replace

    from .kriging import collocated_update
    known = np.isfinite(secondary.at_data) & np.isfinite(result.estimate)
    estimate, variance = result.estimate.copy(), result.variance.copy()
    estimate[known], variance[known], _ = collocated_update(estimate[known], variance[known],
                                                            secondary.at_data[known], secondary.correlation, sill)
    return replace(result, estimate=estimate, variance=variance, method="collocated simple cokriging")


def fit_total_sill(spec: RunSpec, weights: np.ndarray | None, mean: LocalMean | None) -> float:
    """The total sill a variogram fit aims at: ``variogram.total_sill``, except that with a mean
    and the default of 1 it is the residuals' declustered variance."""
    total = spec["variogram.total_sill"]
    if mean is None or total != 1.0:
        return total
    return local_variance(mean.residuals, weights)


def krige_nodes(data_coords, residuals, grid, model, *, mean: LocalMean | None, secondary: SecondaryGrid | None,
                method: str, **options):
    """Kriging of the residual normal scores at the active nodes, with the collocated secondary when
    given and the mean added back.

    Returns
    -------
    estimate, variance : (N,) ndarray
        Normal scores and their (co)kriging variance at the active nodes.
    kriging : geosim.kriging.KrigingResult
        The primary-only kriging (its ``variance`` is the spread without the secondary).
    """
    from .kriging import collocated_cokrige, krige
    targets = grid.coords()
    if secondary is not None and secondary.method == "external_drift":
        with drift_errors(secondary):
            result = krige(data_coords, residuals, targets, model, method="external_drift", drift=secondary.at_data,
                           target_drift=secondary.at_nodes[grid.mask], **options)
        estimate, variance = result.estimate, result.variance
    elif secondary is None:
        result = krige(data_coords, residuals, targets, model, method=method, mean=0.0, **options)
        estimate, variance = result.estimate, result.variance
    else:
        co = collocated_cokrige(data_coords, residuals, targets, model, secondary.at_nodes[grid.mask],
                                secondary.correlation, **options)
        result, estimate, variance = co.kriging, co.estimate, co.variance
    if mean is not None:
        estimate = estimate + mean.at_nodes(grid)[grid.mask]
    return estimate, variance, result


def spread_comparison(transform, estimate: np.ndarray, variance: np.ndarray, kriging, mean_at_nodes) -> dict:
    """Mean spread at the nodes without and with the secondary: kriging standard deviation of the
    normal scores and the conditional standard deviation in data units (multi-Gaussian moments)."""
    from .moments import multigaussian_moments
    primary = kriging.estimate + (0.0 if mean_at_nodes is None else mean_at_nodes)
    out = {}
    for name, est, var in (("primary_only", primary, kriging.variance), ("with_secondary", estimate, variance)):
        _, data_var = multigaussian_moments(transform, est, var)
        out[name] = {"mean_std_normal_scores": float(np.mean(np.sqrt(var))),
                     "mean_std_data_units": float(np.nanmean(np.sqrt(data_var)))}
    a, b = out["primary_only"], out["with_secondary"]
    out["shrink_normal_scores"] = 1.0 - b["mean_std_normal_scores"] / a["mean_std_normal_scores"]
    out["shrink_data_units"] = 1.0 - b["mean_std_data_units"] / a["mean_std_data_units"]
    out["basis"] = ("kriging at every active node with the run's model and neighbourhood, without and with the "
                    "collocated secondary; data units from the multi-Gaussian moments of each")
    return out


def report_sections(spec: RunSpec, data, grid, summary_files=()) -> dict:
    """The report's ``mean`` and ``secondary`` sections (empty without secondary information);
    ``summary_files`` as :func:`ensemble_spread` takes them."""
    out: dict[str, Any] = {}
    if data.mean is not None:
        out["mean"] = data.mean.report(data.weights, grid)
    sec = secondary_grid(spec, data.samples, data.scores, grid)
    if sec is not None:
        out["secondary"] = sec.report()
        out["secondary"]["checks"] = (
            "the run's reproduction checks (validation) compare the realizations with the primary-only model "
            "and data; conditioned on the secondary grid too, their mean follows the secondary and their "
            "variance and variogram are smaller, so those checks may warn on a correct run")
        if len(summary_files):
            out["secondary"]["ensemble_spread"] = ensemble_spread(summary_files, log=spec["transform.log"])
    return out


def ensemble_spread(summary_files, *, log: bool) -> dict:
    """Mean spread of the realizations over the active nodes, from the summary rasters (or the summary
    bands of a run whose realizations are in a store, an array ``(bands, *grid.shape)``): standard
    deviation in data units and the P10-P90 width (``log10(P90 / P10)`` for a log-transformed variable,
    whose arithmetic standard deviation follows its level more than its uncertainty)."""
    import rasterio
    std, width = [], []
    for path in [summary_files] if isinstance(summary_files, np.ndarray) else summary_files:
        if isinstance(path, np.ndarray):
            bands = np.ma.masked_invalid(path[[1, 2, 4]].astype(np.float64))
        else:
            with rasterio.open(path) as src:
                bands = src.read([2, 3, 5], masked=True).astype(np.float64)
        std.append(np.ma.compressed(bands[0]))
        width.append(np.ma.compressed(np.log10(bands[2] / bands[1]) if log else bands[2] - bands[1]))
    return {"mean_std_data_units": float(np.concatenate(std).mean()),
            ("mean_log10_p90_over_p10" if log else "mean_p10_p90_width"): float(np.concatenate(width).mean())}
