"""Simple and ordinary kriging against reference libraries, a textbook example and brute force."""
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import geosim
import independent
from geosim.errors import NotPositiveDefiniteError
from geosim.kriging import krige, krige_grid
from geosim.search import Neighbourhood
from geosim.variogram import Anisotropy

WIDE = Neighbourhood(max_samples=64, ranges=(1e6, 1e6, 1e6))


def _data(n=40, seed=0, d=2):
    rng = np.random.default_rng(seed)
    return rng.uniform(0, 100, size=(n, d)), rng.normal(size=n)


def _dense_ok(model, xy, z, t):
    """Ordinary kriging by the bordered system, covariances rebuilt independently of geosim."""
    est, var, w = independent.ordinary_kriging(model, xy, z, t[None, :])
    return w[:, 0], est[0], var[0]


@pytest.mark.parametrize("nbh", ["global", WIDE])
def test_simple_kriging_equals_sklearn_gaussian_process_exponential(nbh):
    # Reference: scikit-learn GaussianProcessRegressor with a fixed kernel, optimizer off and
    # normalize_y off, gives the zero-mean GP posterior mean and std (Rasmussen and Williams 2006,
    # Gaussian Processes for Machine Learning, eqs. 2.23-2.24), which is simple kriging with mean 0.
    # Matern(nu=0.5, l) = exp(-h/l); geosim's exponential uses exp(-3h/a), so l = a/3.
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import ConstantKernel, Matern

    xy, z = _data()
    a, sill = 45.0, 2.5
    model = geosim.Model([geosim.Exponential(sill, Anisotropy((a, a)))])
    kernel = ConstantKernel(sill, "fixed") * Matern(length_scale=a / 3.0, length_scale_bounds="fixed", nu=0.5)
    gp = GaussianProcessRegressor(kernel, alpha=1e-300, optimizer=None, normalize_y=False).fit(xy, z)
    targets = np.random.default_rng(9).uniform(0, 100, size=(50, 2))
    mu_ref, sd_ref = gp.predict(targets, return_std=True)
    res = krige(xy, z, targets, model, method="simple", mean=0.0, neighbourhood=nbh)
    assert np.allclose(res.estimate, mu_ref, rtol=1e-8, atol=1e-9)
    assert np.allclose(res.std, sd_ref, rtol=1e-7, atol=1e-8)


def test_simple_kriging_equals_sklearn_anisotropic_gaussian_with_nugget():
    # Same reference (scikit-learn GPR, fixed kernel). Axis-aligned anisotropic RBF:
    # exp(-0.5 sum (h_i/l_i)^2) equals geosim's gaussian exp(-3 r^2) with l_i = a_i / sqrt(6).
    # The nugget is sklearn's WhiteKernel: on the training diagonal and in the predictive variance
    # at new points, absent from the covariance between distinct points, as in geosim.
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import RBF, ConstantKernel, WhiteKernel

    xy, z = _data(n=35, seed=3)
    major, minor, sill, nug = 80.0, 30.0, 1.2, 0.3
    # azimuth 90: major axis due east, i.e. along x
    model = geosim.Nugget(nug) + geosim.Gaussian(sill, Anisotropy((major, minor), azimuth=90.0))
    kernel = (ConstantKernel(sill, "fixed") * RBF([major / np.sqrt(6), minor / np.sqrt(6)], "fixed")
              + WhiteKernel(nug, "fixed"))
    gp = GaussianProcessRegressor(kernel, alpha=1e-300, optimizer=None, normalize_y=False).fit(xy, z)
    targets = np.random.default_rng(4).uniform(0, 100, size=(40, 2))
    mu_ref, sd_ref = gp.predict(targets, return_std=True)
    for nbh in ("global", WIDE):
        res = krige(xy, z, targets, model, neighbourhood=nbh)
        assert np.allclose(res.estimate, mu_ref, rtol=1e-7, atol=1e-8)
        assert np.allclose(res.std, sd_ref, rtol=1e-7, atol=1e-8)


@pytest.mark.parametrize("d", [2, 3])
def test_oblique_anisotropy_equals_sklearn_on_coordinates_rotated_by_hand(d):
    # Azimuth 30 (and in 3-D dip 25, rake 15): a reversed or mis-ordered rotation changes the
    # answer here, unlike at azimuth 0 or 90.  Reference: scikit-learn's GP posterior (simple
    # kriging, Rasmussen and Williams 2006, eqs. 2.23-2.24) with axis-aligned anisotropic kernels
    # on coordinates turned into the major/minor(/third) frame by tests/independent.py (elementary
    # rotations, no geosim code).  exp(-3 sqrt(sum (h_i/a_i)^2)) is sklearn's Matern(nu=0.5) with
    # l_i = a_i / 3; exp(-3 sum (h_i/a_i)^2) is its RBF with l_i = a_i / sqrt(6).
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, WhiteKernel

    xy, z = _data(n=45, seed=17, d=d)
    angles = (30.0, 25.0, 15.0) if d == 3 else (30.0, 0.0, 0.0)
    ranges = (90.0, 25.0, 12.0)[:d]
    an = Anisotropy(ranges, *angles)
    model = geosim.Nugget(0.15) + geosim.Exponential(0.6, an) + geosim.Gaussian(0.4, an)
    frame = independent.axes_by_hand(*angles)[:d, :d] if d == 2 else independent.axes_by_hand(*angles)
    turn = lambda p: p @ frame.T  # noqa: E731  (columns: along the major, minor(, third) axes)
    a = np.array(ranges)
    kernel = (ConstantKernel(0.6, "fixed") * Matern(a / 3.0, "fixed", nu=0.5)
              + ConstantKernel(0.4, "fixed") * RBF(a / np.sqrt(6.0), "fixed") + WhiteKernel(0.15, "fixed"))
    gp = GaussianProcessRegressor(kernel, alpha=1e-300, optimizer=None, normalize_y=False).fit(turn(xy), z)
    targets = np.random.default_rng(18).uniform(0, 100, size=(40, d))
    mu_ref, sd_ref = gp.predict(turn(targets), return_std=True)
    for nbh in ("global", WIDE):
        res = krige(xy, z, targets, model, neighbourhood=nbh)
        assert np.allclose(res.estimate, mu_ref, rtol=1e-7, atol=1e-8)
        assert np.allclose(res.std, sd_ref, rtol=1e-7, atol=1e-8)
    # the check has teeth: the mirrored azimuth gives clearly different estimates
    mirrored = geosim.Nugget(0.15) + geosim.Exponential(0.6, Anisotropy(ranges, -angles[0], *angles[1:])) \
        + geosim.Gaussian(0.4, Anisotropy(ranges, -angles[0], *angles[1:]))
    assert np.abs(krige(xy, z, targets, mirrored, neighbourhood="global").estimate - mu_ref).max() > 0.05


def test_ordinary_kriging_textbook_example():
    # Isaaks and Srivastava (1989), An Introduction to Applied Geostatistics, ch. 12 (ordinary
    # kriging), the seven-sample example around the point (65E, 137N) with the exponential
    # covariance C(h) = 10 exp(-0.3 h).  Sample locations and values, the weights, the estimate
    # 592.7 ppm and the error variance 8.96 ppm^2 are recalled FROM MEMORY; the tolerances are
    # the rounding of the printed figures (3 decimals for weights, 1 for the estimate).
    xy = np.array([[61, 139], [63, 140], [64, 129], [68, 128], [71, 140], [73, 141], [75, 128]], float)
    v = np.array([477, 696, 227, 646, 606, 791, 783], float)
    # geosim's exponential uses the practical range: exp(-3 h / a) = exp(-0.3 h) gives a = 10
    model = geosim.Model([geosim.Exponential(10.0, Anisotropy((10.0, 10.0)))])
    book_w = np.array([0.173, 0.318, 0.129, 0.086, 0.151, 0.057, 0.086])
    for nbh in ("global", Neighbourhood(max_samples=7, ranges=(50.0, 50.0))):
        r = krige(xy, v, [[65.0, 137.0]], model, method="ordinary", neighbourhood=nbh,
                  return_weights=True)
        w = np.zeros(7)
        w[r.neighbours[0, :7]] = r.weights[0, :7]
        assert np.allclose(w, book_w, atol=6e-4)
        assert r.estimate[0] == pytest.approx(592.7, abs=0.06)
        assert r.variance[0] == pytest.approx(8.96, abs=0.006)


@pytest.mark.parametrize("method", ["simple", "ordinary"])
@pytest.mark.parametrize("nugget", [0.0, 0.25])
def test_exact_at_data_locations(method, nugget):
    # Kriging is an exact interpolator: at a sample the estimate is the sample value and the
    # variance 0, with or without nugget (Isaaks and Srivastava 1989, ch. 12, from memory;
    # follows from c being a column of K).
    xy, z = _data(n=30, seed=2)
    model = geosim.Nugget(nugget) + geosim.Spherical(1.0 - nugget, Anisotropy((40.0, 25.0), azimuth=30.0))
    nb = Neighbourhood(max_samples=10)
    res = krige(xy, z, xy, model, method=method, mean=0.3, neighbourhood=nb)
    assert np.allclose(res.estimate, z, atol=1e-9)
    assert np.allclose(res.variance, 0.0, atol=1e-9)


def test_ordinary_weights_sum_to_one_and_match_dense_solution():
    xy, z = _data(n=60, seed=4)
    model = geosim.Nugget(0.1) + geosim.Exponential(0.9, Anisotropy((70.0, 35.0), azimuth=120.0))
    targets = np.random.default_rng(5).uniform(0, 100, size=(30, 2))
    nb = Neighbourhood(max_samples=12, sectors=4)
    res = krige(xy, z, targets, model, method="ordinary", neighbourhood=nb, return_weights=True)
    assert np.allclose(res.weights.sum(axis=1), 1.0, atol=1e-12)
    for i, t in enumerate(targets):
        sel = res.neighbours[i, :res.n_used[i]]
        w, est, var = _dense_ok(model, xy[sel], z[sel], t)
        assert np.allclose(res.weights[i, :res.n_used[i]], w, atol=1e-10)
        assert res.estimate[i] == pytest.approx(est, abs=1e-10)
        assert res.variance[i] == pytest.approx(var, abs=1e-10)


def test_simple_kriging_matches_dense_solve_in_3d_with_mean():
    xyz, z = _data(n=50, seed=6, d=3)
    model = geosim.Nugget(0.05) + geosim.Spherical(0.95, Anisotropy((80.0, 50.0, 20.0), 40.0, 15.0, 5.0))
    targets = np.random.default_rng(7).uniform(10, 90, size=(20, 3))
    nb = Neighbourhood(max_samples=16, sectors=8, max_per_sector=3)
    res = krige(xyz, z, targets, model, mean=0.4, neighbourhood=nb, return_weights=True)
    for i, t in enumerate(targets):
        sel = res.neighbours[i, :res.n_used[i]]
        est, var = independent.simple_kriging(model, xyz[sel], z[sel], t[None, :], mean=0.4)
        assert res.estimate[i] == pytest.approx(est[0], abs=1e-10)
        assert res.variance[i] == pytest.approx(var[0], abs=1e-10)


def test_too_few_samples_ordinary_gives_nan_simple_uses_the_mean_widened_search_fills_in():
    xy = np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0]])
    model = geosim.Model([geosim.Spherical(1.0, Anisotropy((50.0, 50.0)))])
    targets = np.array([[2.0, 2.0], [55.0, 0.0], [500.0, 500.0]])
    fixed = Neighbourhood(min_samples=2, widen=False)
    res = krige(xy, [1.0, 2.0, 3.0], targets, model, method="ordinary", neighbourhood=fixed)
    assert res.n_used.tolist() == [3, 1, 0] and res.n_short == 2
    assert np.isfinite(res.estimate[0]) and np.all(np.isnan(res.estimate[1:]))
    assert np.all(np.isnan(res.variance[1:]))
    # simple kriging never leaves a target without an estimate: the one sample found (a system
    # of one) and, with none, the known mean with the full sill as variance
    res = krige(xy, [1.0, 2.0, 3.0], targets, model, mean=5.0, neighbourhood=fixed)
    c = float(model.covariance(np.array([[45.0, 0.0]]))[0])  # target 2 to its one sample (10, 0)
    assert res.estimate[1] == pytest.approx(5.0 + c * (2.0 - 5.0)) and res.variance[1] == pytest.approx(1 - c * c)
    assert res.estimate[2] == 5.0 and res.variance[2] == 1.0 and res.n_short == 2
    # the default search widens to the nearest min_samples: every target gets a system of 2
    for method in ("simple", "ordinary"):
        res = krige(xy, [1.0, 2.0, 3.0], targets, model, method=method, neighbourhood=Neighbourhood(min_samples=2))
        assert res.n_used.tolist() == [3, 2, 2] and res.n_short == 2 and np.isfinite(res.estimate).all()


def test_simple_kriging_without_data_gives_the_mean_and_the_sill():
    model = geosim.Nugget(0.25) + geosim.Spherical(0.75, Anisotropy((50.0, 50.0)))
    targets = np.array([[0.0, 0.0], [1e4, -3e3]])
    for nbh in (Neighbourhood(), Neighbourhood(widen=False), Neighbourhood(min_samples=0)):
        res = krige(np.empty((0, 2)), [], targets, model, mean=-1.5, neighbourhood=nbh)
        np.testing.assert_array_equal(res.estimate, [-1.5, -1.5])
        np.testing.assert_array_equal(res.variance, [1.0, 1.0])
        assert res.n_used.tolist() == [0, 0]


def test_coincident_samples_raise_with_ids_and_cause():
    xy = np.array([[0.0, 0.0], [10.0, 0.0], [10.0, 0.0], [0.0, 10.0]])
    model = geosim.Model([geosim.Spherical(1.0, Anisotropy((50.0, 50.0)))])
    ids = ["BH-01:1", "BH-02:1", "BH-02:2", "BH-03:1"]
    for nbh in (Neighbourhood(), "global"):
        with pytest.raises(NotPositiveDefiniteError) as err:
            krige(xy, [1.0, 2.0, 2.5, 3.0], [[5.0, 5.0]], model, neighbourhood=nbh, sample_ids=ids)
        msg = str(err.value)
        assert "BH-02:1" in msg and "BH-02:2" in msg
        assert "coincident" in msg and "no nugget" in msg


def test_regularization_is_applied_only_when_needed_and_reported(notes):
    xy = np.array([[0.0, 0.0], [10.0, 0.0], [10.0, 0.0], [0.0, 10.0], [90.0, 90.0], [95.0, 90.0]])
    z = [1.0, 2.0, 2.5, 3.0, 0.0, 1.0]
    model = geosim.Model([geosim.Spherical(1.0, Anisotropy((30.0, 30.0)))])
    targets = np.array([[5.0, 5.0], [92.0, 92.0]])
    with notes("regularized"):
        res = krige(xy, z, targets, model, regularization=1e-6)
    assert res.n_regularized == 1
    # the regularized system keeps the duplicates' average, and the clean node is untouched
    clean = krige(xy[4:], z[4:], targets[1:], model)
    assert res.estimate[1] == clean.estimate[0]
    notes.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert krige(xy[4:], z[4:], targets, model, regularization=1e-6).n_regularized == 0
    assert not notes.logged()


def test_krige_grid_clipped_by_polygon():
    from shapely.geometry import Polygon

    xy, z = _data(n=25, seed=12)
    model = geosim.Nugget(0.1) + geosim.Spherical(0.9, Anisotropy((50.0, 50.0)))
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (10, 10))
    tri = Polygon([(0, 0), (100, 0), (0, 100)])
    est, var = krige_grid(xy, z, grid, model, domain=tri, method="ordinary")
    clipped = grid.clip_to_polygon(tri)
    assert est.shape == (10, 10)
    assert np.all(np.isnan(est[~clipped.mask])) and np.all(np.isfinite(est[clipped.mask]))
    ref = krige(xy, z, clipped.coords(), model, method="ordinary")
    assert np.array_equal(est[clipped.mask], ref.estimate)
    assert np.array_equal(var[clipped.mask], ref.variance)


def test_bad_input_is_named():
    model = geosim.Model([geosim.Spherical(1.0, Anisotropy((50.0, 50.0)))])
    with pytest.raises(geosim.InputError, match="index 1 "):
        krige([[0.0, 0.0], [1.0, 1.0]], [1.0, np.nan], [[0.0, 0.0]], model)
    with pytest.raises(ValueError, match="method"):
        krige([[0.0, 0.0]], [1.0], [[0.0, 0.0]], model, method="universal")


def test_progress_is_reported():
    xy, z = _data(n=20, seed=1)
    model = geosim.Model([geosim.Spherical(1.0, Anisotropy((50.0, 50.0)))])
    calls = []
    krige(xy, z, xy + 1.0, model, progress=lambda done, total, what: calls.append((done, total, what)))
    assert calls and calls[-1] == (20, 20, "kriging nodes")


def test_threads_give_identical_results():
    xy, z = _data(n=300, seed=13)
    model = geosim.Nugget(0.1) + geosim.Spherical(0.9, Anisotropy((30.0, 15.0), azimuth=60.0))
    targets = np.random.default_rng(14).uniform(-40, 140, size=(3000, 2))
    nb = Neighbourhood(max_samples=12, min_samples=4, sectors=4)
    one = krige(xy, z, targets, model, method="ordinary", neighbourhood=nb)
    two = krige(xy, z, targets, model, method="ordinary", neighbourhood=nb, threads=2)
    assert np.isnan(one.estimate).any()  # the comparison covers nodata nodes too
    assert np.array_equal(one.estimate, two.estimate, equal_nan=True)
    assert np.array_equal(one.variance, two.variance, equal_nan=True)
    assert np.array_equal(one.n_used, two.n_used)


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 25), k=st.integers(1, 10), sectors=st.sampled_from([0, 4]),
       ordinary=st.booleans(), seed=st.integers(0, 2**31 - 1))
def test_any_configuration_matches_the_dense_system(n, k, sectors, ordinary, seed):
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 50, size=(n, 2))
    z = rng.normal(size=n)
    targets = np.vstack([rng.uniform(-10, 60, size=(4, 2)), xy[:1]])  # one target on a sample
    model = geosim.Nugget(0.2) + geosim.Exponential(0.8, Anisotropy((40.0, 20.0), azimuth=float(seed % 180)))
    res = krige(xy, z, targets, model, method="ordinary" if ordinary else "simple", mean=0.5,
                neighbourhood=Neighbourhood(max_samples=k, sectors=sectors, ranges=(200.0, 200.0)),
                return_weights=True)
    for i, t in enumerate(targets):
        sel = res.neighbours[i, :res.n_used[i]]
        assert res.n_used[i] >= 1  # a 200 m search reaches every sample
        if ordinary:
            w, est, var = _dense_ok(model, xy[sel], z[sel], t)
            assert res.weights[i].sum() == pytest.approx(1.0, abs=1e-9)
        else:
            est, var = (v[0] for v in independent.simple_kriging(model, xy[sel], z[sel], t[None, :], mean=0.5))
        assert res.estimate[i] == pytest.approx(est, abs=1e-8)
        assert res.variance[i] == pytest.approx(max(var, 0.0), abs=1e-8)
        assert 0.0 <= res.variance[i] <= model.sill + (np.inf if ordinary else 1e-12)


def test_krige_grid_3d_from_drillhole_composites():
    from shapely.geometry import box

    # three invented vertical holes, 2 m composites, per-hole limit 3
    z = np.arange(1.0, 20.0, 2.0)
    holes = np.repeat(["AX-1", "AX-2", "AX-3"], z.size)
    xyz = np.column_stack([np.repeat([12.0, 35.0, 22.0], z.size), np.repeat([10.0, 18.0, 33.0], z.size),
                           np.tile(z, 3)])
    vals = np.random.default_rng(3).lognormal(size=xyz.shape[0])
    model = geosim.Nugget(0.1) + geosim.Spherical(0.9, Anisotropy((40.0, 40.0, 8.0)))
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0, 2.0), (10, 9, 9), zmin=0.0)
    nb = Neighbourhood(max_samples=9, max_per_hole=3)
    est, var = krige_grid(xyz, vals, grid, model, domain=box(0, 0, 30, 45), method="ordinary",
                          neighbourhood=nb, hole_ids=holes)
    inside = grid.clip_to_polygon(box(0, 0, 30, 45)).mask
    assert est.shape == (10, 9, 9) and np.all(np.isnan(est[~inside]))
    ref = krige(xyz, vals, grid.with_mask(inside).coords(), model, method="ordinary", neighbourhood=nb,
                hole_ids=holes, return_weights=True)
    assert np.array_equal(est[inside], ref.estimate, equal_nan=True)
    assert np.array_equal(var[inside], ref.variance, equal_nan=True)
    assert ref.n_used.max() == 9
    hole_code = np.unique(holes, return_inverse=True)[1]
    used = ref.n_used > 0
    for row, count in zip(ref.neighbours[used], ref.n_used[used]):
        assert np.bincount(hole_code[row[:count]]).max() <= 3
