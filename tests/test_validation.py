"""Run checks: statistics against scipy and the variogram module, flags on good and broken ensembles."""
import numpy as np
import pytest
from scipy.stats import ks_2samp

import geosim
from geosim.validation import RunChecks, axis_semivariogram, effective_count, ks_distance, node_index
from geosim.variogram import Direction, experimental_variogram


def test_ks_distance_matches_scipy_and_weights_act_as_replication():
    rng = np.random.default_rng(2)
    a, b = rng.normal(size=40), rng.normal(0.3, 1.2, size=500)
    # scipy.stats.ks_2samp: the two-sample KS statistic (reference library)
    assert ks_distance(a, b) == pytest.approx(ks_2samp(a, b).statistic, abs=1e-12)
    # integer weights must equal repeating the samples
    w = rng.integers(1, 4, size=40)
    assert ks_distance(a, b, w.astype(float)) == pytest.approx(ks_2samp(np.repeat(a, w), b).statistic, abs=1e-12)
    assert effective_count(np.ones(10), 10) == pytest.approx(10.0)
    assert effective_count(np.array([1.0, 0.0, 0.0]), 3) == pytest.approx(1.0)


def test_axis_semivariogram_matches_the_scattered_pair_engine():
    grid = geosim.Grid(0.0, 0.0, (2.0, 3.0), (25, 31))
    rng = np.random.default_rng(4)
    field = rng.normal(size=grid.shape).cumsum(axis=1)
    field[:3, :4] = np.nan
    xy = grid.coords(active_only=False)
    # east along array axis 1 (2 m steps); geosim.variogram.experimental with a tight cone is the reference
    gam, npairs = axis_semivariogram(field, 1, [1, 3, 5])
    ev = experimental_variogram(xy, field.ravel(), lag=2.0, nlags=6,
                                direction=Direction(azimuth=90.0, horizontal_half_angle=1.0, horizontal_max_offset=0.5))
    np.testing.assert_allclose(gam, ev.gamma[[1, 3, 5]], rtol=1e-10)
    np.testing.assert_array_equal(npairs, ev.npairs[[1, 3, 5]])


def test_node_index_follows_the_grid_convention():
    grid = geosim.Grid(100.0, 200.0, (10.0, 10.0), (3, 4))
    idx, inside = node_index(np.array([[105.0, 229.0], [139.9, 200.1], [99.0, 205.0]]), grid)
    assert idx[:2].tolist() == [[0, 0], [2, 3]]  # row 0 is the northern row
    assert inside.tolist() == [True, True, False]


@pytest.fixture(scope="module")
def exact_run():
    # 30 x 30 nodes, exact (LU) engine: realizations with exactly the model's covariance
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (30, 30))
    model = geosim.Model([geosim.Nugget(0.05), geosim.Spherical(0.95, geosim.Anisotropy((120.0, 60.0),
                                                                                          azimuth=90.0))])
    rng = np.random.default_rng(20261202)
    nodes = rng.choice(grid.size, size=25, replace=False)
    coords = grid.coords(active_only=False)[nodes]
    truth = geosim.simulate(np.empty((0, 2)), np.empty(0), model, grid, n_realizations=1, seed=99,
                            engine="exact", workers=1)[0]
    scores = truth.ravel()[nodes]
    fields = geosim.simulate(coords, scores, model, grid, n_realizations=30, seed=5, engine="exact", workers=1)
    return grid, model, coords, scores, fields


def test_checks_pass_on_a_correct_ensemble(exact_run):
    grid, model, coords, scores, fields = exact_run
    checks = RunChecks(grid, model, coords, scores)
    report = checks.summarize([checks(f) for f in fields])
    assert report["n_realizations"] == 30
    assert report["histogram"]["flag"] == "pass"
    assert report["variogram"]["flag"] == "pass", report["variogram"]
    assert report["data"]["flag"] == "pass"
    # data sit at node centres: conditioning is exact, up to the engine's arithmetic
    assert report["data"]["expected_bound"] == 0.0
    assert report["data"]["max_abs_difference"] < 1e-6
    east = report["variogram"]["directions"]["east"]
    assert east["lag_m"][0] == 10.0 and east["lag_m"][-1] <= 150.0  # half the 300 m extent at most


def test_checks_warn_on_broken_ensembles(exact_run):
    grid, model, coords, scores, fields = exact_run
    checks = RunChecks(grid, model, coords, scores)
    # doubled spread: variance 4 instead of 1, semivariances four times the model's
    report = checks.summarize([checks(2.0 * f) for f in fields])
    assert report["histogram"]["flag"] == "warn"
    assert report["variogram"]["flag"] == "warn"
    # realizations that ignore the data: squared differences near 2 (two independent N(0,1)) > tolerance
    other = RunChecks(grid, model, coords, -scores)
    assert other.summarize([other(f) for f in fields])["data"]["flag"] == "warn"


def test_data_off_node_centres_use_the_model_bound():
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (5, 5))
    model = geosim.Model([geosim.Nugget(0.2), geosim.Spherical(0.8, geosim.Anisotropy((50.0, 50.0)))])
    checks = RunChecks(grid, model, [[12.0, 12.0]], [1.0])
    rep = checks.summarize([checks(np.zeros(grid.shape))])
    offset = np.array([[3.0, 3.0]])  # node centre (15, 15) minus datum (12, 12)
    assert rep["data"]["expected_bound"] == pytest.approx(2.0 * float(model.semivariance(offset)[0]))


def test_tolerances_computed_ahead_on_a_thread_equal_those_computed_at_the_end(exact_run):
    # compute_ahead fills the model figures on a thread while realizations are measured (in a run:
    # while the workers simulate); the summary must be the same, bit for bit, as one computed at
    # the end, and the measuring object shipped to workers must leave the figures behind.
    import pickle
    grid, model, coords, scores, fields = exact_run
    ahead = RunChecks(grid, model, coords, scores)
    ahead.compute_ahead()
    measures = [pickle.loads(pickle.dumps(ahead))(f) for f in fields]
    shipped = pickle.loads(pickle.dumps(ahead))
    assert not hasattr(shipped, "_moments") and not hasattr(shipped, "_conditioning")
    later = RunChecks(grid, model, coords, scores)
    assert ahead.summarize(measures) == later.summarize([later(f) for f in fields])
    ahead._ahead.join(timeout=60)
    assert len(ahead._lag_moments) == sum(map(len, ahead.steps.values()))
