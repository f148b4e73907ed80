"""Leave-one-out cross-validation against brute force (krige with the sample removed)."""
import numpy as np
import pytest

import geosim
from geosim.kriging import cross_validate, krige
from geosim.search import Neighbourhood
from geosim.variogram import Anisotropy


def _data(n=40, seed=0):
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 100, size=(n, 2))
    holes = np.array([f"DH{i // 4:02d}" for i in range(n)])  # 4 samples per invented hole
    return xy, rng.normal(size=n), holes


MODEL = geosim.Nugget(0.2) + geosim.Spherical(0.8, Anisotropy((60.0, 40.0), azimuth=45.0))


@pytest.mark.parametrize("method", ["simple", "ordinary"])
@pytest.mark.parametrize("nbh", [Neighbourhood(max_samples=8, sectors=4), "global"])
def test_leave_one_out_equals_kriging_without_the_sample(method, nbh):
    xy, z, _ = _data()
    cv = cross_validate(xy, z, MODEL, method=method, mean=0.1, neighbourhood=nbh)
    for i in range(len(z)):
        keep = np.arange(len(z)) != i
        ref = krige(xy[keep], z[keep], xy[i:i + 1], MODEL, method=method, mean=0.1, neighbourhood=nbh)
        # global: Dubrule (1983) closed form versus a refactored system, so rounding only
        assert cv.estimate[i] == pytest.approx(ref.estimate[0], abs=1e-9)
        assert cv.variance[i] == pytest.approx(ref.variance[0], abs=1e-9)
        assert cv.n_used[i] == ref.n_used[0]


@pytest.mark.parametrize("nbh", [Neighbourhood(max_samples=8), "global"])
def test_leave_one_hole_out(nbh):
    xy, z, holes = _data(seed=3)
    cv = cross_validate(xy, z, MODEL, method="ordinary", neighbourhood=nbh, hole_ids=holes,
                        leave_out="hole")
    for i in range(0, len(z), 3):
        keep = holes != holes[i]
        ref = krige(xy[keep], z[keep], xy[i:i + 1], MODEL, method="ordinary", neighbourhood=nbh)
        assert cv.estimate[i] == pytest.approx(ref.estimate[0], abs=1e-9)
        assert cv.variance[i] == pytest.approx(ref.variance[0], abs=1e-9)
    assert cv.sample_ids[0] == "sample 0 (hole DH00)"


def test_summary_statistics():
    xy, z, _ = _data(seed=5)
    cv = cross_validate(xy, z, MODEL, neighbourhood=Neighbourhood(max_samples=6, min_samples=3, ranges=(20.0, 20.0),
                                                                 widen=False))
    ok = np.isfinite(cv.estimate)
    # some samples have < 3 others within 20 m: ordinary kriging without widening leaves them NaN
    assert 0 < ok.sum() < len(z) and cv.summary()["below_min_samples"] == len(z) - ok.sum()
    e = cv.estimate[ok] - z[ok]
    s = cv.summary()
    assert s["samples"] == len(z) and s["estimated"] == ok.sum()
    assert s["mean_error"] == pytest.approx(e.mean())
    assert s["rmse"] == pytest.approx(np.sqrt(np.mean(e ** 2)))
    assert s["mean_standardized_squared_error"] == pytest.approx(np.mean(e ** 2 / cv.variance[ok]))
    assert s["correlation"] == pytest.approx(np.corrcoef(z[ok], cv.estimate[ok])[0, 1])


def test_standardized_errors_are_unit_variance_for_the_true_model():
    # Data drawn from the model itself: each standardized LOO error e / sigma has mean square 1
    # exactly, whatever the neighbourhood (the kriging variance is the error variance of that
    # estimator under the model).  The MSSE of one data set scatters because neighbouring errors
    # are correlated, so the tolerance comes from the spread over 25 independent data sets at the
    # same sites: the mean MSSE must lie within 3 standard errors (sd / sqrt(25)) of 1, and each
    # data set within 4 standard deviations.  A 10 % error in the kriging variance moves the mean
    # MSSE by 0.1, several of these standard errors (asserted: 3 SE < 0.06).
    rng = np.random.default_rng(21)
    xy = rng.uniform(0, 300, size=(300, 2))
    lower = np.linalg.cholesky(MODEL.cov_matrix(xy))
    fields = lower @ rng.normal(size=(300, 25))
    msse, me = [], []
    for z in fields.T:
        cv = cross_validate(xy, z, MODEL, method="simple", neighbourhood=Neighbourhood(max_samples=16))
        msse.append(cv.mean_standardized_squared_error)
        me.append(cv.mean_error / cv.rmse)
    msse = np.array(msse)
    sd = msse.std(ddof=1)
    assert 3 * sd / 5.0 < 0.06, sd
    assert abs(msse.mean() - 1.0) <= 3 * sd / 5.0, (msse.mean(), sd)
    assert np.all(np.abs(msse - 1.0) <= 4 * sd)
    assert abs(np.mean(me)) < 4 / np.sqrt(300)
