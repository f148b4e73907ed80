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

Tolerances come from the variogram model, not from a count of independent
values: realizations are spatially correlated, so their domain mean varies much
more, and their semivariances much less at short lags, than independent values
would.  Each check is built to warn on a correct run (data and realizations
drawn from the model) at most :data:`CHECK_LEVEL` (5 %) of the time;
``tests/test_method_tolerances.py`` measures that rate on simulated runs
(histogram 4-5 %, variogram 1-3 %).  Three model figures do the work
(:func:`domain_moments`, :func:`semivariance_moments`): the variance of a
statistic of one realization, for data sets drawn from the model, and the part
of it by which realizations conditioned on the same data differ (the
simple-kriging conditional covariance given the data locations, which for a
Gaussian model does not depend on the data values; up to
:data:`CONDITIONING_LIMIT` data).  By the law of total variance the mean of
``R`` realizations' statistic then has variance
``total - conditional (1 - 1/R)``.  Averages over node pairs use a seeded
subset of :data:`DOMAIN_NODES` nodes or :data:`LAG_PAIRS` pairs.

Histogram reproduction
    The mean of the realizations' domain means is compared with the
    declustered data mean (normal scores): normal, with the variance of
    (domain mean - weighted data mean) under the model, the estimation
    variance ``Cbar(D, D) - 2 sum w_i Cbar(x_i, D) + sum w_i w_j C(x_i, x_j)``
    (Journel and Huijbregts 1978, Mining Geostatistics, Academic Press, ch. II,
    estimation and dispersion variances).  The mean of the realizations'
    variances is compared with the dispersion variance ``C(0) - Cbar(D, D)``
    (the same source), with the Gaussian variance of a spatial variance, a
    quadratic form (:func:`domain_moments`), as a scaled chi-square
    (Satterthwaite 1946).  Mean and variance share the check's level
    (Bonferroni: 2.5 % each, two-sided).  Kolmogorov-Smirnov distances between
    the weighted data and each realization are reported beside the 5 %
    critical value for independent values (Smirnov 1948, "Table for estimating
    the goodness of fit of empirical distributions", Ann. Math. Stat. 19,
    279-281; asymptotic constant 1.358), for reference only.

Variogram reproduction
    Normal-score semivariogram of each realization along the grid axes (east,
    north and, in 3-D, up) at a few lags, from all pairs of active nodes at that
    exact lag (array shifts: on a grid this is exact and costs nodes x lags; the
    scattered-pair engine of :mod:`geosim.variogram.experimental` would visit
    every pair within the largest lag).  The mean over realizations is compared
    with the model's semivariance at the same lag vector (Matheron's estimator
    is unbiased for it), with the Gaussian variance of the estimator on the
    grid (Cressie 1993, Statistics for Spatial Data, sec. 2.4) split as above,
    as a scaled chi-square.  Each lag is held at ``CHECK_LEVEL / (number of
    lags)`` (Bonferroni over lags and directions), so the check as a whole
    warns on a correct run at most 5 % of the time.

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

import threading
from collections.abc import Mapping, Sequence

import numpy as np

__all__ = ["KS_CRITICAL_05", "PLOT_QUANTILES", "CHECK_LEVEL", "domain_moments", "semivariance_moments",
           "ks_distance", "weighted_cdf", "effective_count", "node_index",
           "axis_semivariogram", "RunChecks"]

KS_CRITICAL_05 = 1.358  # Smirnov (1948): two-sample KS critical constant c(alpha) for alpha = 0.05
PLOT_QUANTILES = np.linspace(0.0, 1.0, 201)  # per-realization CDF kept for plots: 0.5 % steps


#: Chance that a check warns on a run whose model is right (each check: histogram, variogram).
CHECK_LEVEL = 0.05
#: Active nodes averaged over for the model's domain covariances (a seeded random subset above it).
DOMAIN_NODES = 1200
#: Pairs per lag for the sampling variance of a realization's semivariance.
LAG_PAIRS = 300
#: Most data conditioned on exactly in the tolerances; above it the conditioning is left out,
#: which widens the tolerances (fewer false alarms, less power).
CONDITIONING_LIMIT = 3000


def _subset(n: int, size: int) -> np.ndarray:
    """Indices of at most ``size`` of ``n`` items: all, or a seeded random subset (fixed, so
    every process and every rerun computes the same tolerances)."""
    if n <= size:
        return np.arange(n)
    return np.sort(np.random.default_rng(0).choice(n, size=size, replace=False))


def _pair_mean(matrix: np.ndarray, n_total: int) -> float:
    """Mean of a symmetric quantity over all ``n_total``-squared pairs of a set, from its values
    ``matrix`` on a random subset: diagonal and off-diagonal entries are averaged apart and
    weighted by their shares 1/N and 1 - 1/N of the full set."""
    m = matrix.shape[0]
    diag = float(np.mean(np.diag(matrix)))
    if m == 1:
        return diag
    off = (float(matrix.sum()) - diag * m) / (m * (m - 1))
    return diag / n_total + off * (1.0 - 1.0 / n_total)


def _centred(c: np.ndarray, n_total: int) -> np.ndarray:
    """``A C A`` for the centring matrix ``A = I - 11'/N`` of the whole set, on the subset."""
    m = c.shape[0]
    off_rows = (c.sum(axis=1) - np.diag(c)) / max(m - 1, 1)
    rows = np.diag(c) / n_total + off_rows * (1.0 - 1.0 / n_total)
    return c - rows[:, None] - rows[None, :] + _pair_mean(c, n_total)


class _Conditioning:
    """Simple-kriging conditional covariances given the data locations,
    ``C(P, Q) - C(P, d) C_dd^-1 C(d, Q)``; for a Gaussian random function they do not depend on
    the data values.  Without data, or above :data:`CONDITIONING_LIMIT`, ``None``."""

    def __init__(self, model, data: np.ndarray):
        self.model, self.data, self.factor = model, data, None
        if 0 < data.shape[0] <= CONDITIONING_LIMIT:
            from scipy.linalg import cholesky
            cdd = model.cov_matrix(data)
            try:
                self.factor = cholesky(cdd + 1e-10 * float(model.sill) * np.eye(len(data)), lower=True,
                                       check_finite=False)
            except np.linalg.LinAlgError:
                self.factor = None

    def covariance(self, points: np.ndarray, c: np.ndarray) -> np.ndarray | None:
        if self.factor is None:
            return None
        from scipy.linalg import solve_triangular
        # C(P, d) C_dd^-1 C(d, Q) = W'W with W = L^-1 C(d, P): one triangular solve, half a cho_solve
        w = solve_triangular(self.factor, self.model.cov_matrix(points, self.data).T, lower=True,
                             check_finite=False)
        return c - w.T @ w


def _split_variance(total: float, conditional: float, n_real: int) -> float:
    """Variance, over data sets drawn from the model, of the mean of ``n_real`` realizations'
    statistic: one realization's variance ``total`` splits into a part the data fix and the
    conditional part, which averages out over the realizations (law of total variance)."""
    return max(total - conditional * (1.0 - 1.0 / n_real), 1e-300)


def domain_moments(model, grid, data_coords: np.ndarray, weights: np.ndarray | None = None, *,
                   conditioning: _Conditioning | None = None) -> dict:
    """The model's sampling moments of a realization's domain mean and variance.

    For a Gaussian random function with covariance ``C`` on the ``N`` active nodes of ``D``
    (Journel and Huijbregts 1978, Mining Geostatistics, ch. II, dispersion and estimation
    variances):

    * ``mean_covariance`` ``Cbar(D, D)``: the mean of ``C`` over all pairs of nodes;
    * ``estimation_variance``: variance of (domain mean - weighted data mean),
      ``Cbar(D, D) - 2 sum_i w_i Cbar(x_i, D) + sum_ij w_i w_j C(x_i, x_j)``, weights
      ``w`` summing to 1; ``conditional_mean_variance``: the simple-kriging variance of the
      domain mean given the data, the part of it that differs between realizations;
    * ``dispersion_variance``: the expected variance of the nodes about their own mean,
      ``C(0) - Cbar(D, D)``; ``dispersion_sd``: the standard deviation of that spatial
      variance, and ``conditional_dispersion_var`` the expected part of its variance that
      differs between realizations.  The spatial variance is the quadratic form
      ``z' A z / N``, ``A = I - 11'/N``; for a Gaussian vector ``N(mu, S)`` its variance is
      ``(2 tr(A S A S) + 4 mu' A S A mu) / N^2`` (Mathai and Provost 1992, Quadratic Forms
      in Random Variables, ch. 3; from memory); averaged over data sets the conditional
      mean ``mu`` has covariance ``S - S_c``.

    Means over node pairs use at most :data:`DOMAIN_NODES` nodes (a seeded subset).
    """
    nodes = grid.coords()
    n_nodes = nodes.shape[0]
    sub = nodes[_subset(n_nodes, DOMAIN_NODES)]
    c = model.cov_matrix(sub)
    cbar = _pair_mean(c, n_nodes)
    ac = _centred(c, n_nodes)
    disp_var = 2.0 * _pair_mean(ac * ac, n_nodes)
    xy = np.atleast_2d(np.asarray(data_coords, dtype=float))[:, :grid.ndim]
    n = xy.shape[0]
    w = np.full(n, 1.0 / n) if weights is None else np.asarray(weights, dtype=float) / np.sum(weights)
    to_domain = np.concatenate([model.cov_matrix(xy[a:a + 2000], sub).mean(axis=1) for a in range(0, n, 2000)])
    between = sum(float(w[a:a + 2000] @ model.cov_matrix(xy[a:a + 2000], xy) @ w) for a in range(0, n, 2000))
    est_var = max(cbar - 2.0 * float(w @ to_domain) + between, 0.0)
    cond = (conditioning or _Conditioning(model, xy)).covariance(sub, c)
    if cond is None:
        cond_mean_var = cond_disp_var = 0.0
    else:
        acc = _centred(cond, n_nodes)
        cond_mean_var = max(_pair_mean(cond, n_nodes), 0.0)
        cond_disp_var = 2.0 * _pair_mean(acc * acc, n_nodes) + 4.0 * _pair_mean(acc * (ac - acc), n_nodes)
    return {"mean_covariance": cbar, "estimation_variance": est_var,
            "conditional_mean_variance": cond_mean_var,
            "dispersion_variance": float(model.sill) - cbar, "dispersion_sd": float(np.sqrt(disp_var)),
            "conditional_dispersion_var": float(cond_disp_var),
            "nodes": int(n_nodes), "nodes_used": int(c.shape[0]), "conditioned": cond is not None}


def semivariance_moments(model, grid, axis: int, coord: int, step: int,
                         conditioning: _Conditioning | None = None) -> tuple[float, float]:
    """Variance of one realization's semivariance along a grid axis at ``step`` nodes, and the
    expected part of it that differs between realizations conditioned on the same data.

    Matheron's estimator ``gamma = sum d_k^2 / (2 N)`` over the ``N`` node pairs ``d_k =
    z(a_k + h) - z(a_k)`` is a quadratic form: for a Gaussian random function its variance is
    ``(1 / (2 N^2)) sum_kl K_kl^2`` with ``K_kl = Cov(d_k, d_l) = 2 C(a_k - a_l) -
    C(a_k - a_l + h) - C(a_k - a_l - h)`` (Cressie 1993, Statistics for Spatial Data, sec.
    2.4, the variance of the classical estimator under Gaussianity; from memory); given data
    it is ``(1 / (2 N^2)) sum K_c^2 + (1 / N^2) mu' K_c mu`` as in :func:`domain_moments`
    (``conditioning``: the data's :class:`_Conditioning`; without it the second figure is 0).
    The sums are averaged over at most :data:`LAG_PAIRS` pairs (a seeded subset).  NaN
    without pairs.
    """
    mask = grid.mask
    n = mask.shape[axis]
    if step >= n:
        return float("nan"), float("nan")
    head = np.take(mask, np.arange(step, n), axis=axis)
    tail = np.take(mask, np.arange(0, n - step), axis=axis)
    starts = np.argwhere(head & tail)
    if starts.size == 0:
        return float("nan"), float("nan")
    n_pairs = starts.shape[0]
    starts = starts[_subset(n_pairs, LAG_PAIRS)]
    axes = grid.axes()
    a = np.column_stack([axes[k][starts[:, k]] for k in range(grid.ndim)])[:, ::-1]  # (x, y[, z])
    h = np.zeros(grid.ndim)
    h[coord] = step * grid.cell[coord]
    pts = np.vstack([a, a + h])
    p = a.shape[0]

    def differences(cov: np.ndarray) -> np.ndarray:
        return cov[p:, p:] - cov[p:, :p] - cov[:p, p:] + cov[:p, :p]

    c = model.cov_matrix(pts)
    k = differences(c)
    total = 0.5 * _pair_mean(k * k, n_pairs)
    cond = None if conditioning is None else conditioning.covariance(pts, c)
    if cond is None:
        return total, 0.0
    kc = differences(cond)
    return total, 0.5 * _pair_mean(kc * kc, n_pairs) + _pair_mean(kc * (k - kc), n_pairs)


def _chi2_bounds(mean: float, var: float, level: float) -> tuple[float, float]:
    """Two-sided bounds at ``level`` of a positive quadratic statistic with this mean and
    variance, as a scaled chi-square ``g chi2(nu)``, ``g = var / (2 mean)``, ``nu = 2 mean^2 /
    var`` (Satterthwaite 1946, "An approximate distribution of estimates of variance
    components", Biometrics Bulletin 2(6), 110-114)."""
    from scipy.stats import chi2
    if not mean > 0:
        return 0.0, 0.0
    g, nu = var / (2.0 * mean), 2.0 * mean * mean / var
    return float(g * chi2.ppf(level / 2.0, nu)), float(g * chi2.ppf(1.0 - level / 2.0, nu))


def effective_count(weights: np.ndarray | None, n: int) -> float:
    """Effective number of weighted data, ``(sum w)^2 / sum w^2`` (``n`` without weights)."""
    if weights is None:
        return float(n)
    w = np.asarray(weights, dtype=float)
    return float(w.sum() ** 2 / (w ** 2).sum())


def weighted_cdf(a: np.ndarray, weights: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The sorted non-NaN values of ``a`` and its (weighted) empirical distribution function:
    ``cdf[j]`` is the weight share of the ``j`` smallest values (``cdf[0] = 0``)."""
    a = np.asarray(a, dtype=float).ravel()
    w = np.ones_like(a) if weights is None else np.asarray(weights, dtype=float).ravel()
    keep = ~np.isnan(a)
    a, w = a[keep], w[keep]
    order = np.argsort(a, kind="stable")
    a, w = a[order], w[order]
    return a, np.concatenate([[0.0], np.cumsum(w)]) / w.sum()


def ks_distance(a: np.ndarray, b: np.ndarray, weights_a: np.ndarray | None = None) -> float:
    """Two-sample Kolmogorov-Smirnov distance ``sup |F_a - F_b|``, with optional weights for ``a``.

    ``a`` is the short sample (the data), ``b`` may be a realization of a million
    values: ``b`` is not sorted.  ``F_a`` is a step function with a knot at each
    distinct value of ``a``; between two knots it is constant while ``F_b`` rises,
    so ``|F_a - F_b|`` is largest at a knot or just below the next one (and, past
    the last knot, at the largest ``b``).  Those values need only the counts of
    ``b`` below and at each knot (:func:`geosim.fieldstats.knot_counts`, one pass), and
    each is the very number a merge of both sorted samples evaluates at some point,
    so the distance is the same, bit for bit.

    Examples
    --------
    >>> import numpy as np, geosim.validation
    >>> geosim.validation.ks_distance(np.array([1.0, 2.0]), np.array([1.5, 2.5, 3.5, 4.5]))
    0.75
    """
    from .fieldstats import knot_counts
    a, cwa = weighted_cdf(a, weights_a)
    knots = np.unique(a)
    below, at, nb = knot_counts(b, knots)
    if nb == 0 or knots.size == 0:
        return float("nan")
    below = below[:-1]
    # at each knot (both functions' values there) and just below it (F_a of the knot before)
    at_knot = np.abs(cwa[np.searchsorted(a, knots, side="right")] - (below + at) / nb)
    before = np.abs(cwa[np.searchsorted(a, knots, side="left")] - below / nb)
    d = max(float(at_knot.max()), float(before.max()))
    if below[-1] + at[-1] < nb:  # values above the last knot: F_b reaches 1 at the largest
        d = max(d, abs(float(cwa[-1]) - 1.0))
    return d


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


def axis_semivariogram(field: np.ndarray, axis: int, steps: Sequence[int], *,
                       complete: bool | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Semivariance of a gridded field along one array axis at integer node steps.

    Every pair of non-NaN nodes ``k`` steps apart along ``axis`` counts once;
    ``gamma(k) = sum (z_a - z_b)^2 / (2 N)`` (Matheron's estimator).  Returns
    ``(gamma, npairs)``; gamma is NaN where there is no pair.  ``complete=True`` says the
    field has no NaN (every node in the domain), which saves looking for them at each lag;
    ``None`` looks once.

    Examples
    --------
    >>> import numpy as np, geosim.validation
    >>> g, n = geosim.validation.axis_semivariogram(np.arange(5.0)[None, :], 1, [1, 2])
    >>> g.tolist(), n.tolist()
    ([0.5, 2.0], [4, 3])
    """
    f = np.asarray(field, dtype=float)
    if complete is None:
        complete = not np.isnan(f).any()
    gamma = np.full(len(steps), np.nan)
    npairs = np.zeros(len(steps), dtype=np.int64)
    n = f.shape[axis]
    for i, k in enumerate(steps):
        if k >= n:
            continue
        # views, not copies: a realization of a million nodes is measured at every lag
        head = [slice(None)] * f.ndim
        tail = [slice(None)] * f.ndim
        head[axis], tail[axis] = slice(k, n), slice(0, n - k)
        d = f[tuple(head)] - f[tuple(tail)]  # NaN where either node is outside the domain
        d *= d
        if not complete:
            d = d[~np.isnan(d)]
        npairs[i] = d.size
        if d.size:
            gamma[i] = 0.5 * float(np.mean(d))
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
    ['at_data', 'extremes', 'ks', 'mean', 'quantiles', 'semivariance', 'var']
    """

    def __init__(self, grid, model, data_coords, data_scores, weights=None, data_values=None, nlags: int = 6):
        self.grid = grid
        self.data_values = None if data_values is None else np.asarray(data_values, dtype=float).ravel()
        self.model = model
        coords = np.atleast_2d(np.asarray(data_coords, dtype=float))
        self.coords = coords
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
        from .fieldstats import quantiles
        s = np.asarray(scores, dtype=float)
        active = s[~np.isnan(s)]
        axes = {"east": self.grid.ndim - 1, "north": self.grid.ndim - 2, "up": 0}
        complete = active.size == s.size  # a domain filling the grid: no NaN to leave out at any lag
        semivariance = {name: axis_semivariogram(s, axes[name], steps, complete=complete)[0].tolist()
                        for name, steps in self.steps.items()}
        out = {"ks": ks_distance(self.scores, active, self.weights),
               "mean": float(active.mean()), "var": float(active.var()),
               "semivariance": semivariance,
               "at_data": s[tuple(self.data_nodes.T)].tolist()}
        if values is not None:
            v = np.asarray(values, dtype=float)
            finite = v[~np.isnan(v)]
            out["quantiles"] = quantiles(finite, PLOT_QUANTILES).tolist()  # numpy's, without a partition
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

    def __getstate__(self) -> dict:
        # workers only measure: the model figures (with the data's factor, 72 MB for 3,000 data),
        # the lock and the thread computing them stay in the main process
        state = dict(self.__dict__)
        for key in ("_moments", "_conditioning", "_lag_moments", "_lock", "_ahead"):
            state.pop(key, None)
        return state

    def _guard(self) -> threading.RLock:
        if "_lock" not in self.__dict__:
            self._lock = threading.RLock()
        return self._lock

    def compute_ahead(self) -> None:
        """Start computing the model figures of the tolerances (:meth:`moments`, every
        :meth:`lag_moments`) on a thread of this process.

        They depend on the model, the grid and the data locations only, so a run starts
        them beside the simulation (the main process waits for its workers) instead of
        after it; :meth:`summarize` then finds them computed, or waits for them.  Several
        seconds with a few thousand data (a factor and triangular solves of their order).
        """
        def work():
            try:
                # a first run's covariance kernel may still be compiling in another process
                # (geosim.pipeline.run_job): load it once there, rather than compile it again here
                from .simulation.runner import await_compiled
                from .variogram.compiled import cov_matrix_into
                await_compiled("modules", cov_matrix_into)
                self.moments()
                for name, steps in self.steps.items():
                    for k in steps:
                        self.lag_moments(name, k)
            except Exception:  # noqa: BLE001 - computed again, and raised, by summarize in the caller's thread
                pass
        self._guard()
        self._ahead = threading.Thread(target=work, name="geosim-check-tolerances", daemon=True)
        self._ahead.start()

    def moments(self) -> dict:
        """The model's domain moments (:func:`domain_moments`), computed once."""
        with self._guard():
            if getattr(self, "_moments", None) is None:
                self._conditioning = _Conditioning(self.model, self.coords[:, :self.grid.ndim])
                self._moments = domain_moments(self.model, self.grid, self.coords, self.weights,
                                               conditioning=self._conditioning)
                self._lag_moments = {}
            return self._moments

    def lag_moments(self, name: str, k: int) -> tuple[float, float]:
        """:func:`semivariance_moments` along the named grid axis at ``k`` steps, computed once."""
        with self._guard():
            self.moments()
            if (name, k) not in self._lag_moments:
                axis = {"east": self.grid.ndim - 1, "north": self.grid.ndim - 2, "up": 0}[name]
                coord = {"east": 0, "north": 1, "up": 2}[name]
                self._lag_moments[name, k] = semivariance_moments(self.model, self.grid, axis, coord, k,
                                                                  self._conditioning)
            return self._lag_moments[name, k]

    def _histogram(self, measures) -> dict:
        from scipy.stats import norm
        n = effective_count(self.weights, self.scores.size)
        m = self.grid.n_active
        w = np.ones_like(self.scores) if self.weights is None else self.weights
        d_mean = float(np.average(self.scores, weights=w))
        d_var = float(np.average((self.scores - d_mean) ** 2, weights=w))
        ks = np.array([x["ks"] for x in measures])
        means = np.array([x["mean"] for x in measures])
        variances = np.array([x["var"] for x in measures])
        mom = self.moments()
        level = CHECK_LEVEL / 2.0  # Bonferroni: the mean and the variance share the check's level
        r = len(measures)
        mean_sd = float(np.sqrt(_split_variance(mom["estimation_variance"], mom["conditional_mean_variance"], r)))
        tol_mean = float(norm.ppf(1.0 - level / 2.0)) * mean_sd
        mean_err = float(means.mean()) - d_mean
        var_lo, var_hi = _chi2_bounds(mom["dispersion_variance"], _split_variance(
            mom["dispersion_sd"] ** 2, mom["conditional_dispersion_var"], r), level)
        var_mean = float(variances.mean())
        ok = abs(mean_err) <= tol_mean and var_lo <= var_mean <= var_hi
        return {
            "flag": _flag(ok), "level": CHECK_LEVEL,
            "mean_error": mean_err, "mean_tolerance": tol_mean,
            "realization_means": means.tolist(), "data_score_mean": d_mean,
            "variance": var_mean, "variance_bounds": [var_lo, var_hi],
            "expected_variance": mom["dispersion_variance"], "realization_variances": variances.tolist(),
            "data_score_variance": d_var, "estimation_variance_of_domain_mean": mom["estimation_variance"],
            "ks_distance": ks.tolist(),
            "ks_reference_independent": float(KS_CRITICAL_05 * np.sqrt((n + m) / (n * m))),
            "data_effective_count": n,
            "basis": (
                f"mean of the realization means against the declustered data mean: normal, with the "
                f"variance of (domain mean - data mean) under the model (Journel and Huijbregts 1978, "
                f"estimation variance from the mean covariance over the domain), less the part that "
                f"averages out over the realizations (the simple-kriging variance of the domain mean "
                f"given the data locations); mean of the realization variances against the dispersion "
                f"variance C(0) - Cbar(D, D), with its Gaussian sampling variance split the same way, as a "
                f"scaled chi-square "
                f"(Satterthwaite 1946); each at {level:g} two-sided so the check warns on a correct run "
                f"at most {CHECK_LEVEL:g} of the time (Bonferroni). KS distances are reported with the "
                f"5% critical value for independent values, for reference only: spatially correlated "
                f"values have a larger one"),
        }

    def _variogram(self, measures) -> dict:
        n_real = len(measures)
        n_tests = sum(len(steps) for steps in self.steps.values())
        level = CHECK_LEVEL / n_tests  # Bonferroni over every lag of every direction
        out = {"flag": "pass", "level": CHECK_LEVEL, "level_per_lag": level,
               "basis": (f"mean over realizations of each lag's semivariance against the model: scaled "
                         f"chi-square (Satterthwaite 1946) with the Gaussian sampling variance of "
                         f"Matheron's estimator on the grid (Cressie 1993, sec. 2.4), less the "
                         f"part that averages out over the realizations; each lag at {level:.3g} two-sided, so "
                         f"the check warns on a correct run at most {CHECK_LEVEL:g} of the time "
                         f"(Bonferroni over {n_tests} lags)"),
               "directions": {}}
        for name, steps in self.steps.items():
            g = np.array([x["semivariance"][name] for x in measures], dtype=float)
            mean = np.nanmean(g, axis=0)
            sd = np.nanstd(g, axis=0, ddof=1) if n_real > 1 else np.zeros(len(steps))
            lags = np.array([self._lag_vector(name, k) for k in steps])
            model = self.model.semivariance(lags)
            lower, upper, ok = [], [], []
            for j, k in enumerate(steps):
                total, conditional = self.lag_moments(name, k)
                lo, hi = _chi2_bounds(float(model[j]), _split_variance(total, conditional, n_real), level) \
                    if np.isfinite(total) else (np.nan, np.nan)
                lower.append(lo)
                upper.append(hi)
                ok.append(bool(lo <= mean[j] <= hi) if np.isfinite(lo) else True)
            lower, upper = np.array(lower), np.array(upper)
            out["directions"][name] = {
                "lag_m": np.linalg.norm(lags, axis=1).tolist(), "model": model.tolist(),
                "realization_mean": mean.tolist(), "realization_sd": sd.tolist(),
                "lower": lower.tolist(), "upper": upper.tolist(),
                "tolerance": np.maximum(upper - model, model - lower).tolist(),
                "per_realization": g.tolist(), "flags": [_flag(bool(b)) for b in ok]}
            if not all(ok):
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
