"""Checks of a run: does the ensemble reproduce the data's histogram, the variogram model and the data?

Each check gives a statistic, the tolerance it is held to, the basis of that
tolerance, and a flag: ``"pass"`` or ``"warn"`` (never an error: a warning
asks a person to look at the plots).

Work is split so that realizations never sit in memory together:
:class:`RunChecks` is a small picklable callable that measures one realization
in the worker (``checks(scores, values) -> dict`` of a few numbers; pass it to
:class:`geosim.ensemble.RealizationWriter` as ``measure``), and
:meth:`RunChecks.summarize` turns the measurements of all realizations into the
``validation`` section of the JSON run report.

Histogram reproduction
    Kolmogorov-Smirnov distance between the (declustering-weighted) data and
    each realization's active nodes.  The distance is unchanged by a monotone
    transform, so it is computed on normal scores.  Tolerance: the 5 % critical
    value of the two-sample test, ``1.358 sqrt((n + m) / (n m))`` with ``n``
    the data's effective number ``(sum w)^2 / sum w^2`` and ``m`` the number of
    nodes (Smirnov 1948, "Table for estimating the goodness of fit of empirical
    distributions", Ann. Math. Stat. 19, 279-281; asymptotic constant 1.358
    for alpha = 0.05).  Realization mean and variance of normal scores are
    compared with the data's: tolerances ``2 / sqrt(n)`` for the mean (two
    standard errors of a mean, in standard deviations) and ``2 sqrt(2 / (n - 1))``
    for the relative variance error (two standard errors of a normal sample
    variance, ``Var(s^2) = 2 sigma^4 / (n - 1)``).  These ignore spatial
    correlation, which makes the data's real sampling error larger: a warning is
    therefore a prompt to look, not a verdict.  The whole check warns when more
    than half of the realizations exceed a tolerance.

Variogram reproduction
    Normal-score semivariogram of each realization along the grid axes (east,
    north and, in 3-D, up) at a few lags, from all pairs of active nodes at that
    exact lag (array shifts: on a grid this is exact and costs nodes x lags; the
    scattered-pair engine of :mod:`geosim.variogram.experimental` would visit
    every pair within the largest lag).  The mean over realizations is compared
    with the model's semivariance at the same lag vector.  Tolerance:
    ``0.15 x sill`` (common practice, no source) plus two standard errors of
    the mean over realizations (``2 sd / sqrt(n_realizations)``); realizations
    of a finite domain fluctuate around the model (ergodic fluctuations), so
    single realizations are not flagged.

Data reproduction
    For nodes containing data, the mean squared difference between the
    simulated normal score at the node and the datum's normal score, over all
    such data and realizations.  Under the model, a node at offset ``h`` from a
    datum it is conditioned on has expected squared difference at most
    ``2 gamma(h)`` (equality for simple kriging with that datum alone; more data
    only narrow it).  Tolerance: ``2 mean(gamma(h_i)) (1 + 2 sqrt(2 / n)) + 1e-4``
    (the factor covers the sampling error of a mean of ``n`` squared normal
    differences, whose relative standard error is ``sqrt(2 / n)``; 1e-4 covers
    float32 storage).  A datum at a node centre must be reproduced exactly.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

__all__ = ["KS_CRITICAL_05", "PLOT_QUANTILES", "ks_distance", "effective_count", "node_index",
           "axis_semivariogram", "RunChecks"]

KS_CRITICAL_05 = 1.358  # Smirnov (1948): two-sample KS critical constant c(alpha) for alpha = 0.05
VARIOGRAM_SILL_FRACTION = 0.15  # common practice, no source
PLOT_QUANTILES = np.linspace(0.0, 1.0, 201)  # per-realization CDF kept for plots: 0.5 % steps


def effective_count(weights: np.ndarray | None, n: int) -> float:
    """Effective number of weighted data, ``(sum w)^2 / sum w^2`` (``n`` without weights)."""
    if weights is None:
        return float(n)
    w = np.asarray(weights, dtype=float)
    return float(w.sum() ** 2 / (w ** 2).sum())


def ks_distance(a: np.ndarray, b: np.ndarray, weights_a: np.ndarray | None = None) -> float:
    """Two-sample Kolmogorov-Smirnov distance ``sup |F_a - F_b|``, with optional weights for ``a``.

    Examples
    --------
    >>> import numpy as np, geosim.validation
    >>> geosim.validation.ks_distance(np.array([1.0, 2.0]), np.array([1.5, 2.5, 3.5, 4.5]))
    0.75
    """
    a = np.asarray(a, dtype=float).ravel()
    b = np.asarray(b, dtype=float).ravel()
    wa = np.ones_like(a) if weights_a is None else np.asarray(weights_a, dtype=float).ravel()
    keep = ~np.isnan(a)
    a, wa = a[keep], wa[keep]
    b = b[~np.isnan(b)]
    order = np.argsort(a, kind="stable")
    a, wa = a[order], wa[order]
    cwa = np.concatenate([[0.0], np.cumsum(wa)]) / wa.sum()
    b = np.sort(b)
    points = np.concatenate([a, b])
    fa = cwa[np.searchsorted(a, points, side="right")]
    fb = np.searchsorted(b, points, side="right") / b.size
    return float(np.max(np.abs(fa - fb)))


def node_index(coords: np.ndarray, grid) -> tuple[np.ndarray, np.ndarray]:
    """Grid index of the cell containing each point, and which points fall in an active cell.

    Returns ``(index, inside)``: ``index`` an ``(n, grid.ndim)`` int array in
    array-axis order, ``inside`` a boolean ``(n,)``.  A 2-D grid uses x and y only.
    """
    c = np.atleast_2d(np.asarray(coords, dtype=float))
    col = np.floor((c[:, 0] - grid.xmin) / grid.cell[0]).astype(np.int64)
    row = np.floor((grid.ymax - c[:, 1]) / grid.cell[1]).astype(np.int64)
    if grid.ndim == 2:
        idx = np.column_stack([row, col])
    else:
        lev = np.floor((c[:, 2] - grid.zmin) / grid.cell[2]).astype(np.int64)
        idx = np.column_stack([lev, row, col])
    inside = np.all((idx >= 0) & (idx < np.array(grid.shape)), axis=1)
    safe = np.where(inside[:, None], idx, 0)
    inside &= grid.mask[tuple(safe.T)]
    return idx, inside


def axis_semivariogram(field: np.ndarray, axis: int, steps: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
    """Semivariance of a gridded field along one array axis at integer node steps.

    Every pair of non-NaN nodes ``k`` steps apart along ``axis`` counts once;
    ``gamma(k) = sum (z_a - z_b)^2 / (2 N)`` (Matheron's estimator).  Returns
    ``(gamma, npairs)``; gamma is NaN where there is no pair.

    Examples
    --------
    >>> import numpy as np, geosim.validation
    >>> g, n = geosim.validation.axis_semivariogram(np.arange(5.0)[None, :], 1, [1, 2])
    >>> g.tolist(), n.tolist()
    ([0.5, 2.0], [4, 3])
    """
    f = np.asarray(field, dtype=float)
    gamma = np.full(len(steps), np.nan)
    npairs = np.zeros(len(steps), dtype=np.int64)
    for i, k in enumerate(steps):
        if k >= f.shape[axis]:
            continue
        a = np.take(f, np.arange(k, f.shape[axis]), axis=axis)
        b = np.take(f, np.arange(0, f.shape[axis] - k), axis=axis)
        d = (a - b)[~(np.isnan(a) | np.isnan(b))]
        npairs[i] = d.size
        if d.size:
            gamma[i] = 0.5 * float(np.mean(d * d))
    return gamma, npairs


def _flag(ok: bool) -> str:
    return "pass" if ok else "warn"


class RunChecks:
    """Measure realizations in the worker; summarize the run's checks in the main process.

    Parameters
    ----------
    grid : geosim.Grid
    model : geosim.Model
        The normal-score variogram model used for the simulation.
    data_coords : array (n, d)
        Data locations (metres, the grid's CRS).
    data_scores : array (n,)
        The data's normal scores.
    weights : array (n,), optional
        Declustering weights.
    data_values : array (n,), optional
        The data in data units; kept for the histogram-reproduction plot, whose
        realization curves come from the ``quantiles`` measured per realization
        (:data:`PLOT_QUANTILES` levels of the data-unit values).
    nlags : int
        Lags per grid axis for variogram reproduction (from one node step up to
        the smaller of the model's largest range along that axis's direction and
        half the grid's extent).

    Examples
    --------
    >>> import numpy as np, geosim
    >>> from geosim.validation import RunChecks
    >>> g = geosim.Grid(0.0, 0.0, (1.0, 1.0), (30, 30))
    >>> m = geosim.Spherical(1.0, geosim.Anisotropy((10.0, 10.0, 10.0)))
    >>> checks = RunChecks(g, geosim.Model([m]), [[0.5, 29.5]], [0.0])
    >>> sorted(checks(np.zeros(g.shape), np.ones(g.shape)))
    ['at_data', 'ks', 'mean', 'quantiles', 'semivariance', 'var']
    """

    def __init__(self, grid, model, data_coords, data_scores, weights=None, data_values=None, nlags: int = 6):
        self.grid = grid
        self.data_values = None if data_values is None else np.asarray(data_values, dtype=float).ravel()
        self.model = model
        coords = np.atleast_2d(np.asarray(data_coords, dtype=float))
        self.scores = np.asarray(data_scores, dtype=float).ravel()
        if coords.shape[0] != self.scores.size:
            raise ValueError(f"{coords.shape[0]} data locations but {self.scores.size} scores")
        self.weights = None if weights is None else np.asarray(weights, dtype=float).ravel()
        idx, inside = node_index(coords, grid)
        self.data_nodes = idx[inside]
        self.node_data = np.flatnonzero(inside)
        centres = np.column_stack([grid.axes()[a][self.data_nodes[:, a]] for a in range(grid.ndim)])
        # node centre offset from each datum, in (x, y[, z]) order
        self.offsets = centres[:, ::-1] - coords[inside][:, :grid.ndim]
        self.steps = self._steps(nlags)

    def _steps(self, nlags: int) -> dict[str, list[int]]:
        g = self.grid
        names = {"east": (g.ndim - 1, 0), "north": (g.ndim - 2, 1)}
        if g.ndim == 3:
            names["up"] = (0, 2)
        out = {}
        for name, (axis, coord) in names.items():
            cell = g.cell[coord]
            unit = np.zeros(g.ndim)
            unit[coord] = 1.0
            # the model's range along this axis: where the semivariance first reaches 95 % of the sill
            h = np.linspace(0.0, 3.0 * max(self.model.max_range, cell), 600)
            gam = self.model.semivariance(h[:, None] * unit)
            near_sill = gam >= 0.95 * self.model.sill
            reach = h[np.argmax(near_sill)] if near_sill.any() else h[-1]
            top = max(1, min(int(reach / cell), g.shape[axis] // 2))
            out[name] = sorted({max(1, int(round(s))) for s in np.linspace(1, top, nlags)})
        return out

    def _lag_vector(self, name: str, k: int) -> np.ndarray:
        v = np.zeros(self.grid.ndim)
        coord = {"east": 0, "north": 1, "up": 2}[name]
        v[coord] = k * self.grid.cell[coord]
        return v

    def __call__(self, scores: np.ndarray, values: np.ndarray | None = None) -> dict:
        """Measure one realization: normal scores of ``grid.shape`` (NaN outside the
        domain) and, optionally, the same field in data units."""
        s = np.asarray(scores, dtype=float)
        active = s[~np.isnan(s)]
        axes = {"east": self.grid.ndim - 1, "north": self.grid.ndim - 2, "up": 0}
        semivariance = {name: axis_semivariogram(s, axes[name], steps)[0].tolist()
                        for name, steps in self.steps.items()}
        out = {"ks": ks_distance(self.scores, active, self.weights),
               "mean": float(active.mean()), "var": float(active.var()),
               "semivariance": semivariance,
               "at_data": s[tuple(self.data_nodes.T)].tolist()}
        if values is not None:
            v = np.asarray(values, dtype=float)
            finite = v[~np.isnan(v)]
            out["quantiles"] = np.quantile(finite, PLOT_QUANTILES).tolist()
            out["extremes"] = [float(finite.min()), float(finite.max())]
        return out

    def summarize(self, measures: Sequence[Mapping]) -> dict:
        """The ``validation`` section of the run report from all realizations' measurements."""
        measures = [m for m in measures if m is not None]
        if not measures:
            raise ValueError("no realization measurements to summarize")
        out = {"histogram": self._histogram(measures), "variogram": self._variogram(measures),
               "data": self._data(measures), "n_realizations": len(measures)}
        if self.data_values is not None and all("extremes" in m for m in measures):
            out["extremes"] = extremes_summary(self.data_values, measures)
        return out

        k = int(np.argmax(highs))


    def _histogram(self, measures) -> dict:
        n = effective_count(self.weights, self.scores.size)
        m = self.grid.n_active
        w = np.ones_like(self.scores) if self.weights is None else self.weights
        d_mean = float(np.average(self.scores, weights=w))
        d_var = float(np.average((self.scores - d_mean) ** 2, weights=w))
        ks = np.array([x["ks"] for x in measures])
        # one datum, or all data equal, give no spread to compare with: those errors are NaN, not flagged
        scale = np.sqrt(d_var) if d_var > 0 else np.nan
        mean_err = (np.array([x["mean"] for x in measures]) - d_mean) / scale
        var_err = np.array([x["var"] for x in measures]) / (d_var if d_var > 0 else np.nan) - 1.0
        tol_ks = KS_CRITICAL_05 * np.sqrt((n + m) / (n * m))
        tol_mean = 2.0 / np.sqrt(n)
        tol_var = 2.0 * np.sqrt(2.0 / max(n - 1.0, 1.0))
        bad = (ks > tol_ks) | (np.abs(mean_err) > tol_mean) | (np.abs(var_err) > tol_var)
        return {
            "flag": _flag(bad.mean() <= 0.5),
            "ks_distance": ks.tolist(), "ks_tolerance": float(tol_ks),
            "mean_error_in_sd": mean_err.tolist(), "mean_tolerance": float(tol_mean),
            "variance_relative_error": var_err.tolist(), "variance_tolerance": float(tol_var),
            "realizations_flagged": int(bad.sum()),
            "data_effective_count": n, "data_score_mean": d_mean, "data_score_variance": d_var,
            "basis": "KS: Smirnov (1948) 5% two-sample critical value with the data's effective count; "
                     "mean and variance: two standard errors of independent normal data; warn when more "
                     "than half the realizations exceed a tolerance",
        }

    def _variogram(self, measures) -> dict:
        n_real = len(measures)
        out = {"flag": "pass", "sill_fraction": VARIOGRAM_SILL_FRACTION,
               "basis": "0.15 x sill (common practice, no source) + 2 standard errors of the mean "
                        "over realizations", "directions": {}}
        for name, steps in self.steps.items():
            g = np.array([x["semivariance"][name] for x in measures], dtype=float)
            mean = np.nanmean(g, axis=0)
            sd = np.nanstd(g, axis=0, ddof=1) if n_real > 1 else np.zeros(len(steps))
            lags = np.array([self._lag_vector(name, k) for k in steps])
            model = self.model.semivariance(lags)
            tol = VARIOGRAM_SILL_FRACTION * self.model.sill + 2.0 * sd / np.sqrt(n_real)
            ok = np.abs(mean - model) <= tol
            out["directions"][name] = {
                "lag_m": np.linalg.norm(lags, axis=1).tolist(), "model": model.tolist(),
                "realization_mean": mean.tolist(), "realization_sd": sd.tolist(), "tolerance": tol.tolist(),
                "per_realization": g.tolist(), "flags": [_flag(bool(b)) for b in ok]}
            if not ok.all():
                out["flag"] = "warn"
        return out

    def _data(self, measures) -> dict:
        if self.node_data.size == 0:
            return {"flag": "pass", "n_data_in_nodes": 0, "note": "no datum falls in an active node"}
        sim = np.array([x["at_data"] for x in measures], dtype=float)
        data = self.scores[self.node_data]
        msd = float(np.mean((sim - data[None, :]) ** 2))
        expected = float(np.mean(2.0 * self.model.semivariance(self.offsets)))
        n = sim.size
        tol = float(expected * (1.0 + 2.0 * np.sqrt(2.0 / n)) + 1e-4)
        return {"flag": _flag(msd <= tol), "n_data_in_nodes": int(self.node_data.size),
                "mean_squared_difference": msd, "expected_bound": expected, "tolerance": tol,
                "max_abs_difference": float(np.max(np.abs(sim - data[None, :]))),
                "basis": "2 gamma(node offset) bound under the model, with a sqrt(2/n) sampling allowance "
                         "and 1e-4 for float32 storage"}


def extremes_summary(data_values, measures: Sequence[Mapping]) -> dict:
    """The largest (and smallest) simulated value against the data's, in data units, from the
    ``extremes`` each realization's :class:`RunChecks` measure holds: an unbounded upper tail
    shows here first (its maxima grow with the number of simulated nodes)."""
    lows, highs = np.array([m["extremes"] for m in measures], dtype=float).T
    top = float(np.max(data_values))
    k = int(np.argmax(highs))
    return {"largest_datum": top, "largest_simulated": float(highs[k]), "realization_of_largest": k,
            "largest_over_largest_datum": float(highs[k] / top) if top > 0 else None,
            "realizations_above_largest_datum": int(np.sum(highs > top)),
            "largest_simulated_per_realization": highs.tolist(),
            "smallest_datum": float(np.min(data_values)), "smallest_simulated": float(lows.min()),
            "note": "values beyond the data come from the transform's tails; compare them with what "
                    "the deposit or aquifer can physically hold"}
