"""Exact (LU) engine: moments against simple and ordinary kriging, covariance, errors.

Tolerances come from sampling error of R independent realizations at one node:
* the ensemble mean has standard error sigma / sqrt(R);
* the ensemble variance (R - 1 degrees of freedom) has relative standard error
  sqrt(2 / (R - 1)) (chi-square sampling distribution);
* a sample covariance with known mean 0 of two standard normals with correlation rho
  has variance (1 + rho^2) / R.
We allow 4.5 standard errors: with about 100 comparisons per test the chance of a false
alarm is about 100 * 6.8e-6 < 1e-3, and the seeds are fixed anyway.
"""
import numpy as np
import pytest
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

import geosim
import independent
import pooled
from geosim.simulation.exact import ExactEngine

Z = 4.5

DATA_XY = np.array([[12.0, 71.0], [47.0, 44.0], [83.0, 18.0], [21.0, 15.0], [66.0, 81.0], [55.0, 62.0]])
DATA_Z = np.array([1.3, -0.4, 0.9, -1.6, 0.2, 0.7])


def _grid():
    g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (9, 10))
    mask = np.ones(g.shape, dtype=bool)
    mask[0, :3] = False  # a masked corner must come back as NaN
    return g.with_mask(mask)


def _model():
    return geosim.Nugget(0.1) + geosim.Exponential(0.9, geosim.Anisotropy.isotropic(60.0))


def _sklearn_simple_kriging(xy, z, nodes):
    """Simple kriging (mean 0) through scikit-learn's Gaussian-process posterior.

    A zero-mean GP posterior with a fixed kernel is simple kriging: Rasmussen and
    Williams 2006, Gaussian Processes for Machine Learning, eqs. 2.23-2.24.  sklearn's
    Matern(nu=0.5, l) is exp(-h / l); geosim's exponential uses the practical range,
    exp(-3 h / range), so l = range / 3.  WhiteKernel is the nugget (zero off the
    diagonal, included in the prediction variance as in geosim's nugget).
    """
    kernel = ConstantKernel(0.9, "fixed") * Matern(60.0 / 3.0, "fixed", nu=0.5) + WhiteKernel(0.1, "fixed")
    gp = GaussianProcessRegressor(kernel, alpha=1e-12, optimizer=None, normalize_y=False).fit(xy, z)
    mean, std = gp.predict(nodes, return_std=True)
    return mean, std**2


def test_prepared_moments_equal_simple_kriging():
    grid = _grid()
    plan = ExactEngine().prepare(DATA_XY, DATA_Z, _model(), grid)
    mean, var = _sklearn_simple_kriging(DATA_XY, DATA_Z, grid.coords())
    np.testing.assert_allclose(plan.mean, mean, atol=1e-9)
    np.testing.assert_allclose(plan.variance, var, atol=1e-9)
    # and geosim's own kriging with a global neighbourhood gives the same moments
    from geosim.kriging import krige
    result = krige(DATA_XY, DATA_Z, grid.coords(), _model(), method="simple", neighbourhood="global")
    np.testing.assert_allclose(plan.mean, result.estimate, atol=1e-9)
    np.testing.assert_allclose(plan.variance, result.variance, atol=1e-9)


def test_ensemble_mean_and_variance_match_simple_kriging():
    grid = _grid()
    engine = ExactEngine()
    plan = engine.prepare(DATA_XY, DATA_Z, _model(), grid)
    r = 3000
    fields = np.array([engine.realize(plan, geosim.simulation.realization_rng(5, i)) for i in range(r)])
    assert np.isnan(fields[:, 0, :3]).all() and np.isfinite(fields[:, grid.mask]).all()
    mean, var = _sklearn_simple_kriging(DATA_XY, DATA_Z, grid.coords())
    vals = fields[:, grid.mask]
    assert np.all(np.abs(vals.mean(axis=0) - mean) <= Z * np.sqrt(var / r))
    assert np.all(np.abs(vals.var(axis=0, ddof=1) / var - 1.0) <= Z * np.sqrt(2.0 / (r - 1)))
    _pooled_checks(vals, *pooled.simple_kriging_law(lambda a, b: independent.covariance(_model(), a, b),
                                                    DATA_XY, DATA_Z, grid.coords()))


def _pooled_checks(vals, mean, cov):
    """Pooled over the nodes (tests/pooled.py), with sampling errors from the nodes' conditional law.

    On this grid the mean squared conditional correlation of two nodes is about 0.03, so
    3,000 realizations give the mean variance ratio a standard error of about 0.0045: a
    systematic 5 % variance error lies 11 standard errors out, power > 0.999 (asserted).
    """
    ratio, se = pooled.variance_ratio(vals, np.diag(cov), pooled.correlation(cov))
    assert pooled.power(0.05, se, Z) > 0.999, se
    assert abs(ratio - 1.0) <= Z * se, (ratio, se)
    q, p = pooled.mean_chi_square(vals, mean, cov)
    assert p > 1e-4, (q, p)


def test_unconditional_covariance_matches_model():
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (1, 30))
    model = geosim.Spherical(1.0, geosim.Anisotropy.isotropic(60.0))
    engine = ExactEngine()
    plan = engine.prepare(np.zeros((0, 2)), np.zeros(0), model, grid)
    r = 4000
    fields = np.array([engine.realize(plan, geosim.simulation.realization_rng(9, i))[0] for i in range(r)])
    for lag in range(0, 16):
        rho = float(model.covariance(np.array([[5.0 * lag, 0.0]]))[0])
        for start in (0, 7, 14):
            cov = np.mean(fields[:, start] * fields[:, start + lag])  # the mean is known to be 0
            assert abs(cov - rho) <= Z * np.sqrt((1.0 + rho**2) / r), (lag, start, cov, rho)
    # pooled: the realizations whitened by the model's covariance (tests/pooled.py) have mean
    # square 1 with standard error sqrt(2 / (R N)) = 0.004, so a systematic 5 % variance error is
    # 12 standard errors out, power > 0.999 (asserted); the lag checks above let it pass
    ratio, se = pooled.whitened_variance(fields, 0.0, independent.covariance(model, grid.coords()))
    assert pooled.power(0.05, se, Z) > 0.999
    assert abs(ratio - 1.0) <= Z * se, (ratio, se)


def _ordinary_kriging(model, xy, z, nodes):
    """Ordinary kriging by the bordered system, covariances rebuilt without geosim (tests/independent.py)."""
    return independent.ordinary_kriging(model, xy, z, nodes)[:2]


def test_ordinary_kriging_option_matches_bordered_system():
    grid = _grid()
    model = _model()
    shifted = DATA_Z + 2.5  # a local mean far from 0: only ordinary kriging follows it
    engine = ExactEngine()
    plan = engine.prepare(DATA_XY, shifted, model, grid, kriging="ordinary")
    mean, var = _ordinary_kriging(model, DATA_XY, shifted, grid.coords())
    from geosim.kriging import krige
    result = krige(DATA_XY, shifted, grid.coords(), model, method="ordinary", neighbourhood="global")
    np.testing.assert_allclose(result.estimate, mean, atol=1e-9)
    np.testing.assert_allclose(result.variance, var, atol=1e-9)
    r = 3000
    vals = np.array([engine.realize(plan, geosim.simulation.realization_rng(2, i))[grid.mask] for i in range(r)])
    assert np.all(np.abs(vals.mean(axis=0) - mean) <= Z * np.sqrt(var / r))
    assert np.all(np.abs(vals.var(axis=0, ddof=1) / var - 1.0) <= Z * np.sqrt(2.0 / (r - 1)))
    _pooled_checks(vals, *pooled.ordinary_kriging_law(lambda a, b: independent.covariance(model, a, b),
                                                      DATA_XY, shifted, grid.coords()))
    assert mean.mean() > 1.5  # the test means something: simple kriging would pull towards 0


def test_ordinary_realization_is_the_unconditional_draw_conditioned_by_ordinary_kriging():
    # One realization rebuilt without geosim: the joint covariance of data and nodes from
    # tests/independent.py, numpy's Cholesky factor L, u = L w with the realization's own normal
    # deviates w, then y = u_nodes + W' (z - u_data), W the ordinary-kriging weights of the bordered
    # system (conditioning by kriging: Journel and Huijbregts 1978, Mining Geostatistics, section
    # VII, from memory). Three clustered data far from mean 0: the unbiasedness term carries much
    # of the weight, so a wrong sign or size of it moves every node.
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (6, 7))
    model = _model()
    xy = np.array([[31.0, 22.0], [36.0, 27.0], [33.0, 31.0]])
    z = np.array([2.4, 3.1, 2.7])
    engine = ExactEngine()
    plan = engine.prepare(xy, z, model, grid, kriging="ordinary")
    nodes = grid.coords()
    factor = np.linalg.cholesky(independent.covariance(model, np.vstack([xy, nodes])))
    _, _, weights = independent.ordinary_kriging(model, xy, z, nodes)
    # the unbiasedness term matters here: simple kriging (mean 0) differs by more than 1 somewhere
    assert np.abs(weights.T @ z - independent.simple_kriging(model, xy, z, nodes)[0]).max() > 1.0
    for i in range(3):
        w = geosim.simulation.realization_rng(11, i).standard_normal(len(z) + len(nodes))
        u = factor @ w
        expected = u[len(z):] + weights.T @ (z - u[:len(z)])
        field = engine.realize(plan, geosim.simulation.realization_rng(11, i))
        np.testing.assert_allclose(field[grid.mask], expected, atol=1e-8)


def test_datum_on_a_node_is_reproduced_and_not_singular():
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (5, 5))
    xy = np.array([[25.0, 25.0], [5.0, 45.0]])  # centres of nodes (2, 2) and (0, 0)
    for model in (geosim.Spherical(1.0, geosim.Anisotropy.isotropic(30.0)), _model()):
        field = ExactEngine().realize(ExactEngine().prepare(xy, np.array([0.8, -1.1]), model, grid),
                                      np.random.default_rng(0))
        assert field[2, 2] == 0.8 and field[0, 0] == -1.1


def test_duplicate_data_fail_clearly():
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (4, 4))
    xy = np.array([[12.0, 13.0], [31.0, 7.0], [12.0, 13.0]])
    model = geosim.Spherical(1.0, geosim.Anisotropy.isotropic(30.0))
    with pytest.raises(geosim.NotPositiveDefiniteError, match="sample 3"):
        ExactEngine().prepare(xy, np.array([0.1, 0.2, 0.3]), model, grid)


def test_refuses_large_systems_and_bad_input():
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0), (200, 200))
    model = geosim.Spherical(1.0, geosim.Anisotropy.isotropic(30.0))
    with pytest.raises(geosim.InputError, match="sequential"):
        ExactEngine().prepare(np.zeros((0, 2)), np.zeros(0), model, grid)
    with pytest.raises(geosim.InputError, match="row 2"):
        ExactEngine().prepare(np.array([[1.0, 1.0], [2.0, 3.0]]), np.array([0.0, np.nan]), model,
                              geosim.Grid(0.0, 0.0, (1.0, 1.0), (5, 5)))
    with pytest.raises(geosim.InputError, match="2-D"):
        ExactEngine().prepare(np.ones((2, 3)), np.zeros(2), model, geosim.Grid(0.0, 0.0, (1.0, 1.0), (5, 5)))
