"""Both engines with a secondary variable known at every node, Markov model.

The reference is the joint Gaussian model in which the secondary is the primary scaled
plus independent noise (Almeida and Journel 1994, Mathematical Geology 26(5)): in normal
scores, C_YS(h) = b C_Y(h) and C_SS(h) = b^2 C_Y(h) + (1 - rho^2) [h = 0] with
b = rho / sqrt(sill).  Conditioning on the data and the whole secondary grid is built
here in numpy with covariances from ``independent`` (no geosim covariance code); the exact
engine must equal it, and the sequential engine must sample it when every node is in
every system.
"""
import numpy as np
import pytest

import geosim
import independent
from geosim.errors import InputError
from geosim.kriging import collocated_cokrige
from geosim.search import Neighbourhood
from geosim.simulation.exact import ExactEngine
from geosim.simulation.sequential import SequentialEngine

MODEL = geosim.Nugget(0.05) + geosim.Spherical(0.95, geosim.Anisotropy((60.0, 35.0), azimuth=30.0))


def _joint_reference(model, data_xy, z, nodes, s, rho):
    """Mean and variance of Y at ``nodes`` given Y at the data and S at every node (numpy)."""
    b = rho / np.sqrt(independent.sill(model))
    c_dd = independent.covariance(model, data_xy)
    c_nn = independent.covariance(model, nodes)
    c_dn = independent.covariance(model, data_xy, nodes)
    # conditioning vector [Y_data, S_nodes]; target Y_nodes
    k = np.block([[c_dd, b * c_dn], [b * c_dn.T, b * b * c_nn + (1 - rho ** 2) * np.eye(len(nodes))]])
    c = np.vstack([c_dn, b * c_nn])
    w = np.linalg.solve(k, c)
    return w.T @ np.concatenate([z, s]), np.diag(c_nn - c.T @ w)


def _case(shape=(6, 6), n=5, seed=1, rho=0.7):
    rng = np.random.default_rng(seed)
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), shape)
    xy = rng.uniform(0.0, 10.0 * shape[1], size=(n, 2)) + 0.37  # never on a node
    z = rng.normal(size=n)
    s = np.full(grid.shape, np.nan)
    s[grid.mask] = rng.normal(size=grid.n_active)
    return grid, xy, z, s, rho


def test_exact_engine_equals_conditioning_on_the_whole_secondary_grid():
    grid, xy, z, s, rho = _case(shape=(7, 9), n=8)
    plan = ExactEngine().prepare(xy, z, MODEL, grid, secondary=s, correlation=rho)
    mean, var = _joint_reference(MODEL, xy, z, grid.coords(), s[grid.mask], rho)
    assert np.allclose(plan.mean, mean, atol=1e-9)
    assert np.allclose(plan.variance, var, atol=1e-9)
    # and the secondary matters: primary-only moments differ
    alone = ExactEngine().prepare(xy, z, MODEL, grid)
    assert np.abs(alone.mean - plan.mean).max() > 0.1


def test_one_node_both_engines_equal_collocated_cokriging():
    # with one node the secondary elsewhere does not exist: collocated cokriging is exact
    grid, xy, z, s, rho = _case(shape=(1, 1), n=4, seed=2, rho=-0.55)
    ref = collocated_cokrige(xy, z, grid.coords(), MODEL, s[grid.mask], rho, neighbourhood="global")
    plan = ExactEngine().prepare(xy, z, MODEL, grid, secondary=s, correlation=rho)
    assert np.allclose(plan.mean, ref.estimate, atol=1e-12) and np.allclose(plan.variance, ref.variance, atol=1e-12)
    seq = SequentialEngine()
    sp = seq.prepare(xy, z, MODEL, grid, neighbourhood=Neighbourhood(max_samples=8), secondary=s, correlation=rho)
    r = 4000
    draws = np.array([seq.realize(sp, np.random.default_rng([7, i]))[0, 0] for i in range(r)])
    v = float(ref.variance[0])
    # sampling error: the mean of r draws has sd sqrt(v / r); the variance ratio sd sqrt(2 / r)
    assert abs(draws.mean() - ref.estimate[0]) < 4.0 * np.sqrt(v / r)
    assert abs(draws.var() / v - 1.0) < 4.0 * np.sqrt(2.0 / r)


@pytest.mark.parametrize("batch", [False, True])
def test_sequential_engine_with_every_node_in_every_system_samples_the_exact_model(batch):
    # every datum, every simulated node and every node's secondary in every system: the
    # sequential decomposition of the joint conditional law is then exact (no neighbourhood
    # approximation), so the ensemble moments must equal the exact engine's within sampling error
    grid, xy, z, s, rho = _case()
    exact = ExactEngine().prepare(xy, z, MODEL, grid, secondary=s, correlation=rho)
    seq = SequentialEngine()
    everything = Neighbourhood(max_samples=16, max_nodes=64, ranges=(1e4, 1e4, 1e4))
    plan = seq.prepare(xy, z, MODEL, grid, neighbourhood=everything, secondary=s, correlation=rho,
                       secondary_nodes=64)
    r = 1200
    if batch:
        fields = []
        for g in range(r // 10):
            rngs = [np.random.default_rng([9, g, k]) for k in range(10)]
            fields += seq.realize_batch(plan, np.random.default_rng([8, g]), rngs)
    else:
        fields = [seq.realize(plan, np.random.default_rng([9, i])) for i in range(r)]
    draws = np.array([f[grid.mask] for f in fields])
    mean, var = exact.mean, exact.variance
    # per node: (sample mean - mean) / sqrt(var / r) ~ N(0, 1); 36 nodes, |z| < 4.5 fails with
    # probability < 36 * 7e-6.  Sample variance / var ~ chi2(r - 1) / (r - 1), sd sqrt(2 / r).
    # (Members of a batch share a path, but each is an exact draw: their values are independent.)
    zscore = (draws.mean(axis=0) - mean) / np.sqrt(var / r)
    assert np.abs(zscore).max() < 4.5, zscore
    assert np.abs(draws.var(axis=0) / var - 1.0).max() < 4.5 * np.sqrt(2.0 / r)


def _replicates(reps=24, rho=0.6, shape=(20, 20)):
    """Truth fields with a secondary drawn from the Markov model; one realization of each engine
    (and of plain collocated co-simulation) per truth; correlations at nodes far from the data."""
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), shape)
    model = geosim.Nugget(0.05) + geosim.Spherical(0.95, geosim.Anisotropy.isotropic(50.0))
    nodes = grid.coords()
    xy = np.array([[5.3, 5.1], [15.2, 5.4], [5.6, 15.3]])
    far = np.hypot(nodes[:, 0] - 10.0, nodes[:, 1] - 10.0) > 100.0  # two ranges from every datum
    cov = independent.covariance(model, np.vstack([xy, nodes]))
    lower = np.linalg.cholesky(cov + 1e-10 * np.eye(len(cov)))
    nb = Neighbourhood(max_samples=8, max_nodes=16)
    out = {"exact": [], "sequential": [], "collocated only": []}
    for rep in range(reps):
        rng = np.random.default_rng([21, rep])
        y = lower @ rng.standard_normal(len(cov))
        s = np.full(grid.shape, np.nan)
        s[grid.mask] = rho * y[3:] + np.sqrt(1 - rho ** 2) * rng.standard_normal(grid.n_active)
        fields = {"exact": ExactEngine().realize(
                      ExactEngine().prepare(xy, y[:3], model, grid, secondary=s, correlation=rho),
                      np.random.default_rng([22, rep])),
                  "sequential": SequentialEngine().realize(
                      SequentialEngine().prepare(xy, y[:3], model, grid, neighbourhood=nb, secondary=s,
                                                 correlation=rho), np.random.default_rng([23, rep])),
                  "collocated only": SequentialEngine().realize(
                      SequentialEngine().prepare(xy, y[:3], model, grid, neighbourhood=nb, secondary=s,
                                                 correlation=rho, secondary_nodes=0),
                      np.random.default_rng([24, rep]))}
        for name, f in fields.items():
            out[name].append(np.corrcoef(f[grid.mask][far], s[grid.mask][far])[0, 1])
    return {k: np.array(v) for k, v in out.items()}


def test_ensemble_correlation_with_the_secondary_far_from_data_is_the_coefficient():
    rho = 0.6
    corr = _replicates(rho=rho)
    for name in ("exact", "sequential"):
        c = corr[name]
        # tolerance from sampling error: 4 standard errors of the mean over the replicates
        # (independent truths), plus 0.02 for the small downward bias of a sample correlation
        # over a few hundred spatially correlated nodes (the truth's own correlation with the
        # secondary over these nodes averaged 0.584 for rho = 0.6 in 30 replicates)
        tol = 4.0 * c.std(ddof=1) / np.sqrt(c.size) + 0.02
        assert abs(c.mean() - rho) < tol, (name, c.mean(), tol)
    # the collocated value alone is screened by the simulated neighbours: measured 0.46 against
    # 0.58, which is why the sequential engine adds the secondary of nodes not yet simulated
    loss = corr["exact"] - corr["collocated only"]
    assert loss.mean() > 4.0 * loss.std(ddof=1) / np.sqrt(loss.size)


@pytest.mark.parametrize("engine", [SequentialEngine, ExactEngine])
def test_zero_correlation_is_the_primary_only_run_bit_for_bit(engine):
    grid, xy, z, s, _ = _case(shape=(9, 8), n=6, seed=4)
    nb = Neighbourhood(max_samples=8, max_nodes=12)
    eng = engine()
    with_secondary = eng.prepare(xy, z, MODEL, grid, neighbourhood=nb, secondary=s, correlation=0.0)
    alone = eng.prepare(xy, z, MODEL, grid, neighbourhood=nb)
    for i in range(3):
        a = eng.realize(with_secondary, np.random.default_rng([5, i]))
        b = eng.realize(alone, np.random.default_rng([5, i]))
        assert np.array_equal(a, b, equal_nan=True)
    if engine is SequentialEngine:
        rngs = [np.random.default_rng([6, k]) for k in range(3)]
        again = [np.random.default_rng([6, k]) for k in range(3)]
        a = eng.realize_batch(with_secondary, np.random.default_rng(1), rngs)
        b = eng.realize_batch(alone, np.random.default_rng(1), again)
        assert all(np.array_equal(x, y, equal_nan=True) for x, y in zip(a, b))


@pytest.mark.parametrize("engine", [SequentialEngine, ExactEngine])
def test_engines_refuse_a_bad_secondary(engine):
    grid, xy, z, s, _ = _case(shape=(5, 5), n=4, seed=5)
    eng = engine()
    for rho in (1.0, -1.0, 1.5):
        with pytest.raises(InputError, match="strictly between -1 and 1"):
            eng.prepare(xy, z, MODEL, grid, secondary=s, correlation=rho)
    gap = s.copy()
    gap[2, 3] = np.nan
    with pytest.raises(InputError, match="no value at 1 of 25 active nodes"):
        eng.prepare(xy, z, MODEL, grid, secondary=gap, correlation=0.5)
    with pytest.raises(InputError, match="shape"):
        eng.prepare(xy, z, MODEL, grid, secondary=s[:4], correlation=0.5)
    with pytest.raises(InputError, match="simple kriging"):
        eng.prepare(xy, z, MODEL, grid, secondary=s, correlation=0.5, kriging="ordinary")
