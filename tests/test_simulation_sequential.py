"""Sequential engine: local kriging, data reproduction, marginal law, variogram, agreement with exact.

Sampling-error tolerances (R independent realizations, one node):
* ensemble mean: standard error sigma / sqrt(R);
* ensemble variance: relative standard error sqrt(2 / (R - 1)) (chi-square, R - 1 dof).
We allow 4.5 standard errors (two-sided 6.8e-6 per comparison, < 1e-3 over 100 nodes);
seeds are fixed, so a pass is reproducible.
"""
import numpy as np
import pytest
from scipy import stats
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

import geosim
import independent
import pooled
from geosim.search import Neighbourhood
from geosim.simulation import realization_rng
from geosim.simulation.exact import ExactEngine
from geosim.simulation.paths import random_path
from geosim.simulation.sequential import SequentialEngine
from geosim.variogram.compiled import cov_matrix_into

Z = 4.5
KS_001 = stats.kstwobign.isf(1e-3)  # sqrt(n) D exceeds this with probability 0.001 (about 1.95)
XY = np.array([[12.0, 71.0], [47.0, 44.0], [83.0, 18.0], [21.0, 15.0], [66.0, 81.0], [55.0, 62.0]]) * 0.8
SCORES = np.array([1.3, -0.4, 0.9, -1.6, 0.2, 0.7])


def _model():
    return geosim.Nugget(0.1) + geosim.Exponential(0.9, geosim.Anisotropy((60.0, 30.0), azimuth=60.0))


def _ensemble(engine, plan, r, seed):
    return np.array([engine.realize(plan, realization_rng(seed, i)) for i in range(r)])


def test_one_node_draws_from_simple_kriging_distribution():
    # a one-node grid: every realization is mean + sd * N(0, 1) of simple kriging at that node
    grid = geosim.Grid(30.0, 30.0, (10.0, 10.0), (1, 1))
    model = geosim.Nugget(0.1) + geosim.Exponential(0.9, geosim.Anisotropy.isotropic(60.0))
    engine = SequentialEngine()
    plan = engine.prepare(XY, SCORES, model, grid, neighbourhood=Neighbourhood(max_samples=6, ranges=(500.0, 500.0)))
    r = 8000
    vals = _ensemble(engine, plan, r, 4)[:, 0, 0]
    # reference: zero-mean GP posterior = simple kriging (Rasmussen and Williams 2006, eqs. 2.23-2.24);
    # sklearn Matern(nu=0.5, l) = exp(-h/l), geosim's exponential exp(-3h/range), so l = range/3
    kernel = ConstantKernel(0.9, "fixed") * Matern(20.0, "fixed", nu=0.5) + WhiteKernel(0.1, "fixed")
    gp = GaussianProcessRegressor(kernel, alpha=1e-12, optimizer=None).fit(XY, SCORES)
    mean, std = gp.predict(grid.coords(), return_std=True)
    assert abs(vals.mean() - mean[0]) <= Z * std[0] / np.sqrt(r)
    assert abs(vals.var(ddof=1) / std[0] ** 2 - 1.0) <= Z * np.sqrt(2.0 / (r - 1))


def test_one_node_ordinary_kriging_option():
    grid = geosim.Grid(30.0, 30.0, (10.0, 10.0), (1, 1))
    model = _model()
    shifted = SCORES + 3.0
    engine = SequentialEngine()
    plan = engine.prepare(XY, shifted, model, grid, kriging="ordinary",
                          neighbourhood=Neighbourhood(max_samples=6, ranges=(500.0, 500.0)))
    # bordered ordinary kriging system (Journel and Huijbregts 1978, Mining Geostatistics, V.A; from memory)
    n = len(shifted)
    a = np.ones((n + 1, n + 1))
    a[:n, :n] = model.cov_matrix(XY)
    a[n, n] = 0.0
    b = np.append(model.cov_matrix(XY, grid.coords())[:, 0], 1.0)
    sol = np.linalg.solve(a, b)
    mean, var = sol[:n] @ shifted, model.sill - sol[:n] @ b[:n] - sol[n]
    r = 8000
    vals = _ensemble(engine, plan, r, 8)[:, 0, 0]
    assert abs(vals.mean() - mean) <= Z * np.sqrt(var / r)
    assert abs(vals.var(ddof=1) / var - 1.0) <= Z * np.sqrt(2.0 / (r - 1))
    assert mean > 2.0  # simple kriging with mean 0 would be far below


def test_ordinary_kriging_where_its_correction_is_large():
    # Three clustered samples about 60 m from the node: the unknown mean costs ordinary kriging
    # about 60 % more variance than simple kriging, and its mean follows the data (+2.5), so a
    # sign or factor slip in either correction is far outside the sampling error.  Reference:
    # the bordered system solved by numpy with covariances rebuilt in tests/independent.py.
    grid = geosim.Grid(60.0, 60.0, (10.0, 10.0), (1, 1))
    xy = np.array([[20.0, 22.0], [24.0, 21.0], [21.0, 26.0]])
    scores = np.array([2.9, 2.1, 2.6])
    model = geosim.Nugget(0.05) + geosim.Exponential(0.95, geosim.Anisotropy((90.0, 45.0), azimuth=30.0))
    mean, var, _ = independent.ordinary_kriging(model, xy, scores, grid.coords())
    _, sk_var = independent.simple_kriging(model, xy, scores, grid.coords())
    assert var[0] / sk_var[0] > 1.4 and mean[0] > 2.0
    engine = SequentialEngine()
    plan = engine.prepare(xy, scores, model, grid, kriging="ordinary",
                          neighbourhood=Neighbourhood(max_samples=3, ranges=(500.0, 500.0)))
    r = 4000
    vals = _ensemble(engine, plan, r, 12)[:, 0, 0]
    assert abs(vals.mean() - mean[0]) <= Z * np.sqrt(var[0] / r)
    assert abs(vals.var(ddof=1) / var[0] - 1.0) <= Z * np.sqrt(2.0 / (r - 1))


@pytest.mark.parametrize("model", [geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy.isotropic(40.0))]),
                                   geosim.Nugget(0.3) + geosim.Spherical(0.7, geosim.Anisotropy.isotropic(40.0))])
def test_data_reproduced_at_data_nodes(model):
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (16, 16))
    on_nodes = np.array([[2.5, 2.5], [37.5, 42.5], [77.5, 77.5], [52.5, 12.5]])
    off_nodes = np.array([[20.0, 60.0], [61.0, 31.0]])  # on cell corners: kept at their true place
    xy = np.vstack([on_nodes, off_nodes])
    scores = np.array([1.5, -2.0, 0.3, 0.9, -0.7, 1.1])
    engine = SequentialEngine()
    plan = engine.prepare(xy, scores, model, grid, neighbourhood=Neighbourhood(max_samples=8, max_nodes=12))
    rows = ((grid.ymax - on_nodes[:, 1]) / 5.0).astype(int)
    cols = (on_nodes[:, 0] / 5.0).astype(int)
    for i in range(3):
        field = engine.realize(plan, realization_rng(1, i))
        np.testing.assert_array_equal(field[rows, cols], scores[:4])
        assert np.isfinite(field).all()


def _integral_range_cells(model, cell, n=81):
    """Integral range in cells: the sum of correlations over all grid offsets.

    The number of independent pieces of information in a field of N cells is about N
    divided by it (Lantuejoul 2002, Geostatistical Simulation, section 2.3, from memory).
    """
    o = np.arange(-n, n + 1) * cell
    h = np.stack(np.meshgrid(o, o, indexing="ij"), axis=-1).reshape(-1, 2)
    return float(model.covariance(h).sum() / model.sill)


def test_realization_scores_are_standard_normal():
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (64, 64))
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy.isotropic(30.0))])
    engine = SequentialEngine()
    plan = engine.prepare(np.zeros((0, 2)), np.zeros(0), model, grid, neighbourhood=Neighbourhood(max_nodes=16))
    fields = _ensemble(engine, plan, 100, 13)
    # Spatial correlation shrinks the effective sample size of a field to N / integral range;
    # the Kolmogorov-Smirnov statistic is compared with its 0.1% critical value KS_001 / sqrt(n_eff)
    # from the asymptotic Kolmogorov distribution (scipy.stats.kstwobign; Kolmogorov 1933).
    n_eff = grid.size / _integral_range_cells(model, 5.0)
    for f in fields:
        assert stats.kstest(f.ravel(), "norm").statistic <= KS_001 / np.sqrt(n_eff)
    assert stats.kstest(fields.ravel(), "norm").statistic <= KS_001 / np.sqrt(len(fields) * n_eff)
    # The KS distance hardly notices a scale error (a 20 % variance deficit passed it), so the
    # first two moments are pooled over all nodes and fields: per field, the grid mean of x has
    # variance mean(rho) and that of x^2 variance 2 mean(rho^2) over all node pairs (normal
    # fourth moments, Isserlis 1918); fields are independent.  The second moment's standard error
    # is about 0.007 for 100 fields: a systematic 5 % variance error lies 7.3 standard errors
    # out, power > 0.99 (asserted).
    cov = lambda a, b: independent.covariance(model, a, b)  # noqa: E731
    se1 = np.sqrt(pooled.grid_pair_correlation(cov, grid.shape, grid.cell) / len(fields))
    se2 = np.sqrt(2.0 * pooled.grid_pair_correlation(cov, grid.shape, grid.cell, power=2) / len(fields))
    assert pooled.power(0.05, se2, Z) > 0.99, se2
    assert abs(fields.mean()) <= Z * se1
    assert abs(np.mean(fields ** 2) - 1.0) <= Z * se2, (np.mean(fields ** 2), se2)


def _semivariogram(field, axis, lag):
    a = field.take(range(lag, field.shape[axis]), axis=axis)
    b = field.take(range(field.shape[axis] - lag), axis=axis)
    return 0.5 * np.mean((a - b) ** 2)


def test_variogram_of_realizations_matches_model():
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (60, 60))
    # anisotropic: 75 m north-south, 40 m east-west, so the axes convention is checked too
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((75.0, 40.0), azimuth=0.0))])
    engine = SequentialEngine()
    plan = engine.prepare(np.zeros((0, 2)), np.zeros(0), model, grid, neighbourhood=Neighbourhood(max_nodes=24))
    fields = _ensemble(engine, plan, 24, 21)
    for axis, step, reach in ((0, np.array([0.0, 5.0]), 15), (1, np.array([5.0, 0.0]), 8)):
        for lag in range(1, reach + 1):
            per = np.array([_semivariogram(f, axis, lag) for f in fields])
            target = float(model.semivariance(step[None, :] * lag)[0])
            # the expected experimental semivariogram of a stationary field is the model itself;
            # its standard error over the realizations must leave room inside the 10% band
            assert per.std(ddof=1) / np.sqrt(len(per)) <= 0.04 * target
            assert abs(per.mean() / target - 1.0) <= 0.10, (axis, lag, per.mean(), target)


def _lattice_semivariogram(field, di, dj):
    """Mean half squared difference of node pairs ``(i, j)``, ``(i + di, j + dj)`` (rows run south)."""
    ny, nx = field.shape
    a = field[max(0, -di):ny - max(0, di), max(0, -dj):nx - max(0, dj)]
    b = field[max(0, di):ny - max(0, -di), max(0, dj):nx - max(0, -dj)]
    return 0.5 * np.mean((a - b) ** 2)


def test_variogram_of_realizations_along_and_across_an_oblique_major_axis():
    # Major axis at azimuth 30.  Cells 5 m east by 5 sqrt(3) m north make the node step (1 column
    # east, 1 row north) point exactly at azimuth 30 (10 m) and (3 columns east, 1 row south) at
    # azimuth 120 (17.3 m), so both directions are measured on exact node pairs.  A reversed or
    # mirrored rotation puts the major axis at 150 degrees, 60 degrees off the measured direction,
    # and halves the range seen along it.  Target: the model's semivariance from the independent
    # formulas (tests/independent.py); tolerance as in the axis-aligned test above (10 %, with the
    # replicates' standard error checked to leave room inside it).
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0 * np.sqrt(3.0)), (50, 70))
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((90.0, 30.0), azimuth=30.0))])
    engine = SequentialEngine()
    plan = engine.prepare(np.zeros((0, 2)), np.zeros(0), model, grid, neighbourhood=Neighbourhood(max_nodes=24))
    fields = _ensemble(engine, plan, 24, 41)
    for (di, dj), reach in (((-1, 1), 6), ((1, 3), 2)):
        for lag in range(1, reach + 1):
            h = np.array([[dj * lag * grid.cell[0], -di * lag * grid.cell[1]]])
            target = 1.0 - independent.covariance(model, h, np.zeros((1, 2)))[0, 0]
            per = np.array([_lattice_semivariogram(f, di * lag, dj * lag) for f in fields])
            assert per.std(ddof=1) / np.sqrt(len(per)) <= 0.04 * target
            assert abs(per.mean() / target - 1.0) <= 0.10, ((di, dj), lag, per.mean(), target)


@pytest.mark.parametrize("max_nodes,r", [(63, 1200), (16, 1200)])
def test_agrees_with_exact_engine(max_nodes, r):
    # with the whole grid in the neighbourhood sequential simulation is exact (the chain rule of
    # a Gaussian vector); with 16 nodes the screen effect keeps it within sampling error here
    grid = geosim.Grid(0.0, 0.0, (8.0, 8.0), (8, 8))
    model = _model()
    exact = ExactEngine().prepare(XY, SCORES, model, grid)
    engine = SequentialEngine()
    plan = engine.prepare(XY, SCORES, model, grid, neighbourhood=Neighbourhood(max_samples=6,
                                                                             max_nodes=max_nodes))
    vals = _ensemble(engine, plan, r, 3).reshape(r, -1)
    mean, var = exact.mean, exact.variance
    assert np.all(np.abs(vals.mean(axis=0) - mean) <= Z * np.sqrt(var / r))
    assert np.all(np.abs(vals.var(axis=0, ddof=1) / var - 1.0) <= Z * np.sqrt(2.0 / (r - 1)))


def test_pooled_moments_match_the_conditional_law():
    # Pooled over 400 nodes (tests/pooled.py): the mean of the variance ratios and a chi-square
    # of the ensemble means, with sampling errors from the simple-kriging conditional covariance
    # of the nodes (independent covariances).  Node-by-node checks at 4.5 standard errors let a
    # 10 % variance deficit pass; here the ratio's standard error is about 0.005, so a
    # systematic 5 % error is about 9 standard errors away: power > 0.999 (asserted below).
    # The 16-node neighbourhood itself costs under 1 % of variance on this grid.
    grid = geosim.Grid(0.0, 0.0, (8.0, 8.0), (20, 20))
    model = _model()
    xy = XY * 2.0
    engine = SequentialEngine()
    plan = engine.prepare(xy, SCORES, model, grid, neighbourhood=Neighbourhood(max_samples=6, max_nodes=16))
    r = 600
    vals = _ensemble(engine, plan, r, 3).reshape(r, -1)
    mean, cov = pooled.simple_kriging_law(lambda a, b: independent.covariance(model, a, b), xy, SCORES,
                                          grid.coords())
    ratio, se = pooled.variance_ratio(vals, np.diag(cov), pooled.correlation(cov))
    assert pooled.power(0.05, se, Z) > 0.999
    assert abs(ratio - 1.0) <= Z * se, (ratio, se)
    q, p = pooled.mean_chi_square(vals, mean, cov)
    assert p > 1e-4, (q, p)


def test_three_d_grid_agrees_with_exact_engine():
    grid = geosim.Grid(0.0, 0.0, (12.0, 12.0, 4.0), (3, 4, 4), zmin=100.0)
    model = geosim.Nugget(0.05) + geosim.Spherical(0.95, geosim.Anisotropy((60.0, 40.0, 10.0), azimuth=30.0,
                                                                           dip=10.0))
    xyz = np.array([[13.0, 21.0, 101.0], [34.0, 38.0, 106.0], [41.0, 9.0, 110.5], [22.0, 44.0, 103.0]])
    scores = np.array([1.1, -0.6, 0.4, 1.7])
    exact = ExactEngine().prepare(xyz, scores, model, grid)
    engine = SequentialEngine()
    plan = engine.prepare(xyz, scores, model, grid, neighbourhood=Neighbourhood(max_samples=4, max_nodes=47,
                                                                              ranges=(200.0, 200.0, 50.0)))
    r = 800
    vals = _ensemble(engine, plan, r, 17).reshape(r, -1)
    assert np.all(np.abs(vals.mean(axis=0) - exact.mean) <= Z * np.sqrt(exact.variance / r))
    assert np.all(np.abs(vals.var(axis=0, ddof=1) / exact.variance - 1.0) <= Z * np.sqrt(2.0 / (r - 1)))


def test_mask_from_polygon_gives_nan_outside():
    from shapely.geometry import Polygon
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (20, 20)).clip_to_polygon(
        Polygon([(0, 0), (100, 0), (0, 100)]))
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy.isotropic(30.0))])
    for engine in (SequentialEngine(), ExactEngine()):
        plan = engine.prepare(np.array([[20.0, 20.0]]), np.array([0.5]), model, grid)
        field = engine.realize(plan, realization_rng(0, 0))
        assert np.isnan(field[~grid.mask]).all() and np.isfinite(field[grid.mask]).all()
        assert 0 < grid.n_active < grid.size


def test_pure_nugget_is_independent_standard_normal():
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0), (40, 50))
    engine = SequentialEngine()
    plan = engine.prepare(np.zeros((0, 2)), np.zeros(0), geosim.Model([geosim.Nugget(1.0)]), grid)
    f = engine.realize(plan, realization_rng(2, 0)).ravel()
    # 2000 independent N(0,1): KS statistic below its 0.1% critical value
    assert stats.kstest(f, "norm").statistic <= KS_001 / np.sqrt(f.size)
    assert abs(np.corrcoef(f[:-1], f[1:])[0, 1]) <= Z / np.sqrt(f.size)


def test_duplicate_data_raise_with_sample_ids():
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (6, 6))
    xy = np.array([[11.0, 12.0], [11.0, 12.0], [20.0, 3.0]])
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy.isotropic(30.0))])
    engine = SequentialEngine()
    plan = engine.prepare(xy, np.array([0.1, 0.2, -0.3]), model, grid, sample_ids=["DH-7", "DH-8", "DH-9"])
    with pytest.raises(geosim.NotPositiveDefiniteError, match="sample DH-[78].*sample DH-[78]"):
        engine.realize(plan, realization_rng(0, 0))


def test_bad_inputs_are_named():
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (6, 6))
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy.isotropic(30.0))])
    engine = SequentialEngine()
    with pytest.raises(geosim.InputError, match="row 3"):
        engine.prepare(np.array([[1.0, 2.0], [3.0, 4.0], [np.nan, 1.0]]), np.zeros(3), model, grid)
    with pytest.raises(geosim.InputError, match="kriging"):
        engine.prepare(np.zeros((0, 2)), np.zeros(0), model, grid, kriging="universal")
    with pytest.raises(geosim.InputError, match="hole"):
        engine.prepare(np.array([[1.0, 2.0]]), np.zeros(1), model, grid, neighbourhood=Neighbourhood(max_per_hole=2))


def test_data_search_limits_apply():
    # the data search is geosim.search's: quadrant limits and per-hole limits shape each node's set
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (6, 6))
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy.isotropic(60.0))])
    xy = np.array([[14.0, 16.0], [13.0, 17.0], [12.0, 18.0], [16.0, 14.0], [28.0, 27.0]])
    engine = SequentialEngine()
    plain = engine.prepare(xy, np.zeros(5), model, grid, neighbourhood=Neighbourhood(max_samples=3))
    per_hole = engine.prepare(xy, np.zeros(5), model, grid, hole_ids=["A", "A", "A", "A", "B"],
                              neighbourhood=Neighbourhood(max_samples=3, max_per_hole=2))
    holes = np.array([0, 0, 0, 0, 1])
    assert (plain.data_neighbours >= 0).sum(axis=1).min() == 3
    for row in per_hole.data_neighbours:
        used = row[row >= 0]
        assert len(used) == 3 and np.bincount(holes[used], minlength=2)[0] == 2


_ANISO2 = geosim.Anisotropy((70.0, 35.0), azimuth=40.0)
_ANISO3 = geosim.Anisotropy((70.0, 35.0, 15.0), azimuth=40.0, dip=20.0, rake=10.0)


@pytest.mark.parametrize("grid,model,data", [
    (geosim.Grid(10.0, 10.0, (15.0, 15.0), (2, 3)), geosim.Nugget(0.2) + geosim.Spherical(0.8, _ANISO2), "2d"),
    (geosim.Grid(10.0, 10.0, (15.0, 15.0), (2, 3)), geosim.Exponential(0.5, _ANISO2)
     + geosim.Gaussian(0.5, geosim.Anisotropy.isotropic(50.0)), "2d"),
    (geosim.Grid(10.0, 10.0, (15.0, 15.0), (2, 3)), geosim.Nugget(0.1) + geosim.Cubic(0.9, _ANISO2), "2d"),
    (geosim.Grid(10.0, 10.0, (15.0, 15.0), (2, 3)), geosim.Nugget(0.1) + geosim.Matern(0.9, _ANISO2, 1.5), "2d"),
    (geosim.Grid(10.0, 10.0, (15.0, 15.0, 5.0), (2, 2, 2), zmin=200.0),
     geosim.Nugget(0.1) + geosim.Spherical(0.9, _ANISO3), "3d"),
    # cells so small (1e-6 m) that a node within the 1e-4-cell tolerance of a datum would be at a
    # zero lag for the nugget: the kernel then checks every node-to-datum pair for the nugget
    (geosim.Grid(1e-5, 1e-5, (1.5e-6, 1.5e-6), (2, 3)),
     geosim.Nugget(0.2) + geosim.Spherical(0.8, geosim.Anisotropy((7e-6, 3.5e-6), azimuth=40.0)), "tiny"),
])
def test_every_node_is_the_simple_kriging_draw_given_data_and_earlier_nodes(grid, model, data):
    # Deterministic check of the compiled local systems (data-data, node-data and node-node
    # covariances, factor, bordered solve) for every structure kind: with a neighbourhood that
    # takes every datum and every earlier node, node p must equal mean + sd * normal[p] of
    # simple kriging given the data and the nodes before it on the path (reference: numpy
    # solves with covariances from cov_lag, which Model.cov_matrix uses for closed forms and
    # test_variogram_structures checks against the numpy formulas; the Matern structure, read
    # from a table by the kernels, through cov_matrix_into).  Rounding only: tolerance 1e-9.
    scale = 1e-6 if data == "tiny" else 1.0
    xy = np.array([[14.0, 31.0], [52.0, 22.0], [33.0, 47.0], [61.0, 9.0], [23.0, 12.0]]) * scale
    if data == "3d":
        xy = np.column_stack([xy, [201.0, 206.0, 203.5, 208.0, 204.0]])
    scores = np.array([1.2, -0.7, 0.4, -1.5, 0.9])
    ranges = (1e-3, 1e-3) if data == "tiny" else (1e3,) * grid.ndim
    engine = SequentialEngine()
    plan = engine.prepare(xy, scores, model, grid, multigrid=0,
                          neighbourhood=Neighbourhood(max_samples=5, max_nodes=grid.n_active, ranges=ranges))
    assert plan.nugget_node_data == (data == "tiny")
    field = engine.realize(plan, realization_rng(5, 2))
    rng = realization_rng(5, 2)  # the same draws in the same order as the engine's
    path = plan.free[random_path(plan.levels, rng)]
    normals = rng.standard_normal(path.shape[0])
    nodes = grid.coords()
    values = field.ravel()[np.flatnonzero(grid.mask.ravel())]
    cov = model.cov_matrix
    if isinstance(model.structures[-1], geosim.Matern):
        def cov(a, b=None):
            b = a if b is None else b
            a3, b3 = (np.column_stack([v, np.zeros(len(v))]) for v in (a, b))
            out = np.empty((len(a), len(b)))
            cov_matrix_into(model.compiled(), a3, b3, out)
            return out
    pts, z = xy, scores
    for p, pos in enumerate(path):
        c = cov(pts, nodes[pos:pos + 1])[:, 0]
        w = np.linalg.solve(cov(pts), c)
        mean, var = w @ z, model.sill - w @ c
        assert values[pos] == pytest.approx(mean + np.sqrt(max(var, 0.0)) * normals[p], abs=1e-9)
        pts, z = np.vstack([pts, nodes[pos]]), np.append(z, values[pos])


# --- every node against a numpy reference with every limit binding ---------------------------------

def _holes_2d(rng, n_holes, per_hole):
    """Invented inclined holes seen in plan: samples 3 m apart along a random bearing."""
    xy, holes = [], []
    for h in range(n_holes):
        start = rng.uniform(5.0, 115.0, 2)
        bearing = rng.uniform(0.0, 2.0 * np.pi)
        for q in range(per_hole):
            xy.append(start + 3.0 * q * np.array([np.sin(bearing), np.cos(bearing)]))
            holes.append(f"RC-{h:02d}")
    return np.array(xy), np.array(holes)


def _holes_3d(rng, n_holes, per_hole, top):
    """Invented vertical holes: samples every 2.5 m down from ``top``."""
    xy = rng.uniform(3.0, 57.0, size=(n_holes, 2))
    z = top - 2.5 * np.arange(per_hole)
    xyz = np.column_stack([np.repeat(xy, per_hole, axis=0), np.tile(z, n_holes)])
    return xyz, np.repeat([f"DD-{h:02d}" for h in range(n_holes)], per_hole)


def _node_by_node(grid, model, xy, scores, nb, kriging, holes=None, seed=7, index=3, members=0):
    """Check every simulated node against a kriging system rebuilt with numpy.

    The reference shares only the path and the node template with the engine: the data
    neighbours come from the plain-Python selection of tests/independent.py (ellipsoid,
    sectors, per-hole limit), the simulated-node neighbours from scanning the template in
    order for nodes visited earlier until ``max_nodes`` are found, the covariances from
    the independent formulas and rotation, and the weights from ``numpy.linalg.solve`` of
    the (bordered, for ordinary kriging) system.  Rounding only: tolerance 1e-8.
    With ``members > 0`` the realizations of ``realize_batch`` (one shared path, weights
    solved once per node) are checked, each against its own deviates.
    Returns how often each limit bound, so a caller can prove the check covered them.
    """
    engine = SequentialEngine()
    plan = engine.prepare(xy, scores, model, grid, neighbourhood=nb, kriging=kriging, hole_ids=holes)
    if members:
        fields = engine.realize_batch(plan, realization_rng(seed, index),
                                      [realization_rng(seed, index + 1 + b) for b in range(members)])
    else:
        fields = [engine.realize(plan, realization_rng(seed, index))]
    rng = realization_rng(seed, index)  # the engine's draws, in the engine's order
    path = plan.free[random_path(plan.levels, rng)]
    normals = np.array([realization_rng(seed, index + 1 + b).standard_normal(path.shape[0])
                        for b in range(members)] if members else [rng.standard_normal(path.shape[0])])
    for field, deviates in zip(fields, normals):
        bound = _check_path(grid, model, xy, scores, nb, kriging, holes, plan, path, deviates, field[grid.mask])
    return bound


def _check_path(grid, model, xy, scores, nb, kriging, holes, plan, path, normals, values):
    nodes = grid.coords()
    shape3 = (1,) + grid.shape if grid.ndim == 2 else grid.shape
    where = np.full(shape3, -1)
    where[grid.mask.reshape(shape3)] = np.arange(grid.n_active)
    kji = np.argwhere(grid.mask.reshape(shape3))  # (level, row, column) of each active node
    ell = (nb.ranges, nb.azimuth, nb.dip or 0.0, nb.rake or 0.0)
    # the template holds every offset inside the search ellipsoid, nearest first
    lags = np.column_stack([plan.offsets[:, 2] * grid.cell[0], -plan.offsets[:, 1] * grid.cell[1]]
                           + ([plan.offsets[:, 0] * grid.cell[2]] if grid.ndim == 3 else []))
    r = np.linalg.norm(independent.reduced_lags(lags, *ell), axis=1)
    assert r.max() <= 1.0 + 1e-9 and np.all(np.diff(r) >= -1e-12)
    box = np.stack(np.meshgrid(*[np.arange(-n + 1, n) for n in shape3], indexing="ij"), -1).reshape(-1, 3)
    box_lags = np.column_stack([box[:, 2] * grid.cell[0], -box[:, 1] * grid.cell[1]]
                               + ([box[:, 0] * grid.cell[2]] if grid.ndim == 3 else []))
    inside = np.linalg.norm(independent.reduced_lags(box_lags, *ell), axis=1) <= 1.0 - 1e-9
    inside &= np.abs(box).any(axis=1)
    assert {tuple(o) for o in box[inside]} <= {tuple(o) for o in plan.offsets}
    done = np.zeros(grid.n_active, dtype=bool)
    bound = {"data": 0, "nodes": 0, "sectors": 0, "holes": 0}
    sill = independent.sill(model)
    for p, pos in enumerate(path):
        target = nodes[pos]
        data = independent.select_samples(xy, target, max_samples=nb.max_samples, ranges=nb.ranges,
                                          azimuth=nb.azimuth, dip=ell[2], rake=ell[3], sectors=nb.sectors,
                                          sector_limit=nb.sector_limit, holes=holes, hole_limit=nb.hole_limit)
        near = np.linalg.norm(independent.reduced_lags(xy - target, *ell), axis=1) <= 1.0
        bound["data"] += len(data) == nb.max_samples and near.sum() > nb.max_samples
        free = independent.select_samples(xy, target, max_samples=len(xy), ranges=nb.ranges, azimuth=nb.azimuth,
                                          dip=ell[2], rake=ell[3])
        capped = independent.select_samples(xy, target, max_samples=len(xy), ranges=nb.ranges,
                                            azimuth=nb.azimuth, dip=ell[2], rake=ell[3], sectors=nb.sectors,
                                            sector_limit=nb.sector_limit)
        bound["sectors"] += len(capped) < len(free)
        bound["holes"] += len(independent.select_samples(
            xy, target, max_samples=len(xy), ranges=nb.ranges, azimuth=nb.azimuth, dip=ell[2], rake=ell[3],
            holes=holes, hole_limit=nb.hole_limit)) < len(free)
        found, more = [], 0
        k, i, j = kji[pos]
        for dk, di, dj in plan.offsets:
            kk, ii, jj = k + dk, i + di, j + dj
            if not (0 <= kk < shape3[0] and 0 <= ii < shape3[1] and 0 <= jj < shape3[2]):
                continue
            q = where[kk, ii, jj]
            if q >= 0 and done[q]:
                if len(found) < nb.max_nodes:
                    found.append(q)
                else:
                    more += 1
        bound["nodes"] += more > 0
        pts = np.vstack([xy[data], nodes[found]])
        z = np.concatenate([scores[data], values[found]])
        if len(z) == 0:
            mean, var = 0.0, sill
        elif kriging == "ordinary":
            mean, var = (v[0] for v in independent.ordinary_kriging(model, pts, z, target[None, :])[:2])
        else:
            mean, var = (v[0] for v in independent.simple_kriging(model, pts, z, target[None, :]))
        assert values[pos] == pytest.approx(mean + np.sqrt(max(var, 0.0)) * normals[p], abs=1e-8), (p, pos)
        done[pos] = True
    return bound


@pytest.mark.parametrize("members", [0, 3])
@pytest.mark.parametrize("kriging", ["simple", "ordinary"])
def test_every_node_matches_numpy_with_all_limits_binding_2d(kriging, members):
    # 120 nodes, 30 samples in 10 invented holes; at most 5 data (2 per quadrant, 2 per hole) and
    # 4 simulated nodes per node, in an oblique search ellipse (azimuth 30)
    rng = np.random.default_rng(31)
    xy, holes = _holes_2d(rng, 10, 3)
    scores = rng.normal(size=len(xy)) + (1.5 if kriging == "ordinary" else 0.0)
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (10, 12))
    model = geosim.Nugget(0.1) + geosim.Spherical(0.9, geosim.Anisotropy((60.0, 25.0), azimuth=30.0))
    nb = Neighbourhood(max_samples=5, ranges=(70.0, 35.0), azimuth=30.0, sectors=4, max_per_sector=2,
                       max_per_hole=2, max_nodes=4)
    bound = _node_by_node(grid, model, xy, scores, nb, kriging, holes, members=members)
    # each limit changed the conditioning set at many nodes, so a slip in any of them shows
    assert min(bound.values()) >= 10, bound


@pytest.mark.parametrize("members", [0, 2])
@pytest.mark.parametrize("kriging", ["simple", "ordinary"])
def test_every_node_matches_numpy_with_all_limits_binding_3d(kriging, members):
    # octants, per-hole limit along vertical holes, a dipping oblique ellipsoid, node limit 6
    rng = np.random.default_rng(32)
    xyz, holes = _holes_3d(rng, 8, 5, top=119.0)
    scores = rng.normal(size=len(xyz)) + (1.0 if kriging == "ordinary" else 0.0)
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0, 4.0), (3, 6, 6), zmin=100.0)
    an = geosim.Anisotropy((50.0, 30.0, 12.0), azimuth=30.0, dip=20.0, rake=10.0)
    model = geosim.Nugget(0.05) + geosim.Exponential(0.95, an)
    nb = Neighbourhood(max_samples=6, ranges=(55.0, 35.0, 14.0), azimuth=30.0, dip=20.0, rake=10.0, sectors=8,
                       max_per_sector=2, max_per_hole=2, max_nodes=6)
    bound = _node_by_node(grid, model, xyz, scores, nb, kriging, holes, members=members)
    assert min(bound.values()) >= 10, bound
