"""Kriging with an external drift (geosim.kriging): the bordered system built in numpy, the
regression-kriging form of the same estimator, cross-validation and bad input."""
import numpy as np
import pytest

import geosim
from geosim.errors import InputError
from geosim.kriging import cross_validate, krige, krige_external_drift
from geosim.search import Neighbourhood

MODEL2 = geosim.Nugget(0.1) + geosim.Spherical(0.9, geosim.Anisotropy((80.0, 40.0), azimuth=30.0))
MODEL3 = geosim.Nugget(0.05) + geosim.Exponential(0.95, geosim.Anisotropy((90.0, 60.0, 20.0), azimuth=45.0))


def _case(d=2, n=40, m=25, seed=0):
    rng = np.random.default_rng(seed)
    lo, hi = np.zeros(d), np.array([200.0, 150.0, 40.0][:d])
    xyz = rng.uniform(lo, hi, size=(n, d))
    targets = rng.uniform(lo, hi, size=(m, d))
    # a drift variable that varies smoothly with position, and values with a drift in it
    def s(p):
        return 3.0 + 0.02 * p[:, 0] - 0.01 * p[:, 1] + np.sin(p[:, 0] / 30.0)
    z = 1.5 + 0.8 * s(xyz) + rng.normal(scale=0.5, size=n)
    return xyz, z, targets, s(xyz), s(targets)


def _bordered(model, xyz, z, targets, sd, st):
    """The external-drift system written out (Wackernagel 2003, Multivariate Geostatistics, 3rd ed.,
    chapter 38, from memory): [[K, 1, s], [1', 0, 0], [s', 0, 0]] [w; mu] = [c; 1; s0]."""
    n = len(z)
    big = np.zeros((n + 2, n + 2))
    big[:n, :n] = model.cov_matrix(xyz)
    big[:n, n] = big[n, :n] = 1.0
    big[:n, n + 1] = big[n + 1, :n] = sd
    est, var, wts = [], [], []
    c0 = model.sill
    for t, s0 in zip(targets, st):
        rhs = np.concatenate([model.cov_matrix(xyz, t[None, :])[:, 0], [1.0, s0]])
        sol = np.linalg.solve(big, rhs)
        w = sol[:n]
        wts.append(w)
        est.append(w @ z)
        var.append(c0 - sol @ rhs)  # C(0) - w'c - mu1 - mu_s s0
    return np.array(est), np.array(var), np.array(wts)


@pytest.mark.parametrize("d, model", [(2, MODEL2), (3, MODEL3)])
def test_global_external_drift_equals_the_bordered_system_in_numpy(d, model):
    xyz, z, targets, sd, st = _case(d)
    ref_est, ref_var, ref_w = _bordered(model, xyz, z, targets, sd, st)
    got = krige_external_drift(xyz, z, targets, model, sd, st, neighbourhood="global", return_weights=True)
    assert got.method == "external_drift"
    assert np.allclose(got.estimate, ref_est, atol=1e-9)
    assert np.allclose(got.variance, ref_var, atol=1e-9)
    assert np.allclose(got.weights, ref_w, atol=1e-9)
    # the constraints themselves: weights sum to one and reproduce the drift at the target
    assert np.allclose(got.weights.sum(axis=1), 1.0) and np.allclose(got.weights @ sd, st)


@pytest.mark.parametrize("d, model", [(2, MODEL2), (3, MODEL3)])
def test_local_external_drift_solves_the_bordered_system_of_the_neighbours(d, model):
    xyz, z, targets, sd, st = _case(d, n=60)
    nb = Neighbourhood(max_samples=12, ranges=(400.0, 400.0, 400.0))
    got = krige(xyz, z, targets, model, method="external_drift", drift=sd, target_drift=st, neighbourhood=nb,
                return_weights=True)
    for i in range(len(targets)):
        sel = got.neighbours[i][got.neighbours[i] >= 0]
        assert len(sel) == 12
        e, v, w = _bordered(model, xyz[sel], z[sel], targets[i:i + 1], sd[sel], st[i:i + 1])
        assert abs(got.estimate[i] - e[0]) < 1e-9 and abs(got.variance[i] - v[0]) < 1e-9
        assert np.allclose(got.weights[i, :12], w[0], atol=1e-9)


def test_external_drift_equals_regression_kriging_with_generalized_least_squares():
    # the same estimator in another form: the drift's coefficients by generalized least squares,
    # then simple kriging of the residuals (Hengl, Heuvelink and Rossiter 2007, About regression-
    # kriging: from equations to case studies, Computers & Geosciences 33(10), from memory)
    xyz, z, targets, sd, st = _case(2, n=50, seed=3)
    k_inv = np.linalg.inv(MODEL2.cov_matrix(xyz))
    f = np.column_stack([np.ones(len(z)), sd])
    beta = np.linalg.solve(f.T @ k_inv @ f, f.T @ k_inv @ z)
    c = MODEL2.cov_matrix(xyz, targets)
    ref = np.column_stack([np.ones(len(st)), st]) @ beta + c.T @ k_inv @ (z - f @ beta)
    got = krige_external_drift(xyz, z, targets, MODEL2, sd, st, neighbourhood="global")
    assert np.allclose(got.estimate, ref, atol=1e-9)
    # the variance exceeds ordinary kriging's: b is not known either
    ok = krige(xyz, z, targets, MODEL2, method="ordinary", neighbourhood="global")
    assert np.all(got.variance >= ok.variance - 1e-12) and np.any(got.variance > ok.variance + 1e-3)


def test_drift_offset_and_scale_do_not_change_the_estimate():
    # the constraints span the same functions for s and 1e6 + 250 s: the same weights, to rounding
    xyz, z, targets, sd, st = _case(2, seed=5)
    nb = Neighbourhood(max_samples=10, ranges=(400.0, 400.0))
    a = krige_external_drift(xyz, z, targets, MODEL2, sd, st, neighbourhood=nb)
    b = krige_external_drift(xyz, z, targets, MODEL2, 1e6 + 250.0 * sd, 1e6 + 250.0 * st, neighbourhood=nb)
    assert np.allclose(a.estimate, b.estimate, atol=1e-7) and np.allclose(a.variance, b.variance, atol=1e-7)


def test_external_drift_is_an_exact_interpolator_and_follows_the_drift_far_from_data():
    xyz, z, _, sd, _ = _case(2, seed=7)
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((60.0, 60.0)))])
    at = krige_external_drift(xyz, z, xyz[:5], model, sd, sd[:5], neighbourhood="global")
    assert np.allclose(at.estimate, z[:5], atol=1e-9) and np.allclose(at.variance, 0.0, atol=1e-9)
    # beyond every range the estimate is the generalized-least-squares drift a + b s0
    f = np.column_stack([np.ones(len(z)), sd])
    k_inv = np.linalg.inv(model.cov_matrix(xyz))
    a, b = np.linalg.solve(f.T @ k_inv @ f, f.T @ k_inv @ z)
    far = krige_external_drift(xyz, z, [[5000.0, 5000.0]], model, sd, [10.0], neighbourhood="global")
    assert abs(far.estimate[0] - (a + 10.0 * b)) < 1e-9


@pytest.mark.parametrize("nb", ["global", Neighbourhood(max_samples=14, ranges=(400.0, 400.0))])
def test_cross_validation_with_a_drift_equals_kriging_each_sample_from_the_others(nb):
    xyz, z, _, sd, _ = _case(2, n=35, seed=11)
    cv = cross_validate(xyz, z, MODEL2, method="external_drift", drift=sd, neighbourhood=nb)
    assert cv.method == "external_drift"
    for i in range(len(z)):
        keep = np.arange(len(z)) != i
        ref = krige_external_drift(xyz[keep], z[keep], xyz[i:i + 1], MODEL2, sd[keep], sd[i:i + 1],
                                   neighbourhood=nb)
        assert abs(cv.estimate[i] - ref.estimate[0]) < 1e-8 and abs(cv.variance[i] - ref.variance[0]) < 1e-8


def test_a_drift_constant_over_a_neighbourhood_is_refused_naming_target_and_samples():
    xyz, z, targets, sd, st = _case(2, n=30)
    flat = sd.copy()
    near = np.argsort(np.hypot(*(xyz - targets[0]).T))[:6]
    flat[near] = 4.25  # the six samples nearest the first target share one drift value
    nb = Neighbourhood(max_samples=6, ranges=(400.0, 400.0))
    with pytest.raises(InputError) as err:
        krige_external_drift(xyz, z, targets, MODEL2, flat, st, neighbourhood=nb, sample_ids=[f"w{i}" for i in
                                                                                             range(30)])
    text = str(err.value)
    assert "target 0" in text and "same value (4.25) at all 6 samples" in text and f"w{near[0]}" in text
    assert "max_samples" in err.value.fix
    # the same drift everywhere: refused before any system is built, in both forms
    for form in ("global", nb):
        with pytest.raises(InputError, match="same value"):
            krige_external_drift(xyz, z, targets, MODEL2, np.full(30, 2.0), st, neighbourhood=form)
    # cross-validation: a sample whose five nearest others share its drift value
    around = np.argsort(np.hypot(*(xyz - xyz[0]).T))[:6]
    flat = sd.copy()
    flat[around] = 4.25
    with pytest.raises(InputError, match=r"left-out sample w0: the drift has the same value \(4.25\) at all 5"):
        cross_validate(xyz, z, MODEL2, method="external_drift", drift=flat, sample_ids=[f"w{i}" for i in range(30)],
                       neighbourhood=Neighbourhood(max_samples=5, ranges=(400.0, 400.0)))


def test_bad_drift_input_is_refused():
    xyz, z, targets, sd, st = _case(2)
    with pytest.raises(InputError, match="external drift at the samples"):
        krige_external_drift(xyz, z, targets, MODEL2, sd[:-1], st)
    bad = st.copy()
    bad[3] = np.nan
    with pytest.raises(InputError, match="external drift at the targets"):
        krige_external_drift(xyz, z, targets, MODEL2, sd, bad)
    with pytest.raises(ValueError, match="needs drift"):
        krige(xyz, z, targets, MODEL2, method="external_drift")
    with pytest.raises(ValueError, match="for method='external_drift'"):
        krige(xyz, z, targets, MODEL2, method="ordinary", drift=sd, target_drift=st)


def test_a_drift_takes_at_least_three_samples_widening_the_search_if_asked():
    # two samples within 10 m of the target, the others 100 m and more away
    xyz = np.array([[0.0, 0.0], [2.0, 0.0], [100.0, 0.0], [0.0, 120.0], [150.0, 150.0]])
    z, sd = np.array([1.0, 2.0, 0.5, -1.0, 0.3]), np.array([0.0, 1.0, 3.0, 2.0, 5.0])
    narrow = Neighbourhood(max_samples=8, ranges=(10.0, 10.0), widen=False)
    got = krige_external_drift(xyz, z, [[1.0, 0.0]], MODEL2, sd, [0.5], neighbourhood=narrow)
    assert np.isnan(got.estimate[0]) and got.n_used[0] == 2 and got.n_short == 1
    wide = Neighbourhood(max_samples=8, ranges=(10.0, 10.0), widen=True)
    got = krige_external_drift(xyz, z, [[1.0, 0.0]], MODEL2, sd, [0.5], neighbourhood=wide)
    ref, _, _ = _bordered(MODEL2, xyz[:3], z[:3], np.array([[1.0, 0.0]]), sd[:3], np.array([0.5]))
    assert got.n_used[0] == 3 and abs(got.estimate[0] - ref[0]) < 1e-9
