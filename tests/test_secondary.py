"""Secondary information: simple kriging with a locally varying mean, polynomial trends,
collocated simple cokriging under the Markov model.  Every reference is built here with
numpy from the published equations and covariances rebuilt by ``independent`` (no geosim
covariance code)."""
import numpy as np
import pytest

import geosim
import independent
from geosim.errors import InputError
from geosim.kriging import collocated_cokrige, collocated_correlation, collocated_update, krige, krige_varying_mean
from geosim.search import Neighbourhood
from geosim.trend import fit_trend, trend_terms

WIDE = Neighbourhood(max_samples=64, ranges=(1e6, 1e6, 1e6))
LOCAL = Neighbourhood(max_samples=8, ranges=(40.0, 40.0, 40.0))


def _model(sill=1.7):
    return geosim.Nugget(0.1 * sill) + geosim.Spherical(0.9 * sill, geosim.Anisotropy((55.0, 30.0), azimuth=30.0))


def _case(n=30, m=12, seed=3):
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 100, size=(n, 2))
    t = rng.uniform(-10, 110, size=(m, 2))
    return rng, xy, rng.normal(size=n), t


# ---- simple kriging with a locally varying mean ------------------------------------------

def _scatter(weights, neighbours, n):
    """Per-target weights by sample index (padding dropped)."""
    full = np.zeros((weights.shape[0], n))
    for j in range(weights.shape[0]):
        keep = neighbours[j] >= 0
        full[j, neighbours[j, keep]] = weights[j, keep]
    return full


def _sk_varying_mean_reference(model, xy, z, t, dm, tm):
    # Goovaerts 1997, Geostatistics for Natural Resources Evaluation, section 6.1 (SK with
    # varying local means, from memory): z*(u) = m(u) + sum_a w_a [z(u_a) - m(u_a)],
    # sum_b w_b C(u_a - u_b) = C(u_a - u), variance C(0) - sum_a w_a C(u_a - u).
    k = independent.covariance(model, xy)
    c = independent.covariance(model, xy, t)
    w = np.linalg.solve(k, c)
    return tm + w.T @ (z - dm), independent.sill(model) - np.sum(w * c, axis=0), w


@pytest.mark.parametrize("nbh", ["global", WIDE])
def test_varying_mean_equals_numpy_reference(nbh):
    rng, xy, z, t = _case()
    model = _model()
    dm = 0.02 * xy[:, 0] - 0.5 + rng.normal(scale=0.3, size=len(z))
    tm = 0.02 * t[:, 0] - 0.5 + rng.normal(scale=0.3, size=len(t))
    r = krige_varying_mean(xy, z + dm, t, model, dm, tm, neighbourhood=nbh, return_weights=True)
    est, var, w = _sk_varying_mean_reference(model, xy, z + dm, t, dm, tm)
    np.testing.assert_allclose(r.estimate, est, rtol=0, atol=1e-10)
    np.testing.assert_allclose(r.variance, var, rtol=0, atol=1e-10)
    np.testing.assert_allclose(_scatter(r.weights, r.neighbours, len(z)), w.T, atol=1e-10)
    assert r.method == "simple" and np.isnan(r.mean)


def test_varying_mean_is_not_a_constant_mean():
    # the mean at the target and at the samples both matter: shifting only the target mean
    # shifts the estimate by exactly that amount, shifting a sample's mean moves it by -w
    _, xy, z, t = _case()
    model = _model()
    dm, tm = np.zeros(len(z)), np.zeros(len(t))
    base = krige_varying_mean(xy, z, t, model, dm, tm, neighbourhood="global", return_weights=True)
    up = krige_varying_mean(xy, z, t, model, dm, tm + 2.0, neighbourhood="global")
    np.testing.assert_allclose(up.estimate - base.estimate, 2.0, atol=1e-12)
    dm2 = dm.copy()
    dm2[4] = 1.0
    moved = krige_varying_mean(xy, z, t, model, dm2, tm, neighbourhood="global")
    np.testing.assert_allclose(moved.estimate - base.estimate, -base.weights[:, 4], atol=1e-12)


def test_constant_varying_mean_matches_simple_kriging_with_that_mean():
    _, xy, z, t = _case()
    model = _model()
    a = krige_varying_mean(xy, z, t, model, np.full(len(z), 0.7), np.full(len(t), 0.7), neighbourhood=LOCAL)
    b = krige(xy, z, t, model, mean=0.7, neighbourhood=LOCAL)
    np.testing.assert_allclose(a.estimate, b.estimate, atol=1e-12)
    np.testing.assert_array_equal(a.variance, b.variance)


def test_varying_mean_without_samples_is_the_local_mean_and_the_sill():
    model = _model()
    r = krige_varying_mean([[0.0, 0.0]], [5.0], [[5000.0, 0.0], [0.0, 9000.0]], model, [1.0], [3.0, -2.0],
                           neighbourhood=LOCAL)
    np.testing.assert_array_equal(r.estimate, [3.0, -2.0])
    np.testing.assert_allclose(r.variance, independent.sill(model))


@pytest.mark.parametrize("dm, tm, field", [
    ([0.0, 0.0], [0.0], "mean at the samples"),
    ([0.0, 0.0, 0.0], [np.nan], "mean at the targets"),
])
def test_varying_mean_bad_input_names_the_field(dm, tm, field):
    with pytest.raises(InputError) as err:
        krige_varying_mean([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]], [1.0, 2.0, 3.0], [[2.0, 2.0]], _model(),
                           dm, tm, neighbourhood="global")
    assert err.value.field == field and err.value.fix


# ---- polynomial trend ---------------------------------------------------------------------

def _raw_design(xyz, order):
    # written out term by term, in the order of trend_terms
    cols = [np.ones(len(xyz))] + [xyz[:, i] for i in range(xyz.shape[1])]
    if order == 2:
        d = xyz.shape[1]
        cols += [xyz[:, i] * xyz[:, j] for i in range(d) for j in range(i, d)]
    return np.column_stack(cols)


def test_trend_terms_are_named_in_a_stated_order():
    assert trend_terms(3, 1) == ("1", "x", "y", "z")
    assert trend_terms(3, 2) == ("1", "x", "y", "z", "x*x", "x*y", "x*z", "y*y", "y*z", "z*z")


def test_noise_free_quadratic_trend_is_recovered_exactly_3d():
    rng = np.random.default_rng(1)
    xyz = rng.uniform([500000.0, 6200000.0, -300.0], [502000.0, 6203000.0, 50.0], size=(60, 3))

    def truth(p):
        x, y, z = (p[:, 0] - 501000.0) / 1000.0, (p[:, 1] - 6201500.0) / 1000.0, p[:, 2] / 100.0
        return 2.0 + 0.8 * x - 0.3 * y + 0.5 * z + 0.2 * x * x - 0.1 * x * z + 0.05 * y * y

    t = fit_trend(xyz, truth(xyz), order=2)
    other = rng.uniform([500000.0, 6200000.0, -300.0], [502000.0, 6203000.0, 50.0], size=(20, 3))
    np.testing.assert_allclose(t(other), truth(other), rtol=0, atol=1e-8)
    assert t.r_squared == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(t.residuals(xyz, truth(xyz)), 0.0, atol=1e-8)


def test_trend_coefficients_and_standard_errors_equal_the_textbook_least_squares():
    # Draper and Smith 1998, Applied Regression Analysis, 3rd ed., chapter 5 (from memory):
    # beta = (X'X)^-1 X'z, s^2 = RSS / (n - p), Cov(beta) = s^2 (X'X)^-1; here in the frame of
    # the sample centroid, built independently with numpy.linalg.lstsq and inv
    rng = np.random.default_rng(2)
    xy = rng.uniform(0, 800, size=(80, 2))
    z = 3.0 + 0.004 * xy[:, 0] - 0.002 * xy[:, 1] + 1e-6 * xy[:, 0] * xy[:, 1] + rng.normal(scale=0.4, size=80)
    t = fit_trend(xy, z, order=2)
    x = _raw_design(xy - xy.mean(axis=0), 2)
    beta, rss, *_ = np.linalg.lstsq(x, z, rcond=None)
    s2 = float(rss[0]) / (80 - 6)
    se = np.sqrt(np.diag(s2 * np.linalg.inv(x.T @ x)))
    np.testing.assert_allclose(t.coefficients, beta, rtol=1e-9, atol=1e-14)
    np.testing.assert_allclose(t(xy), x @ beta, rtol=0, atol=1e-9)
    np.testing.assert_allclose(t.residuals(xy, z), z - x @ beta, rtol=0, atol=1e-9)
    np.testing.assert_allclose(t.standard_errors, se, rtol=1e-9)
    assert t.residual_variance == pytest.approx(s2, rel=1e-12)
    assert t.r_squared == pytest.approx(1 - float(rss[0]) / np.sum((z - z.mean()) ** 2), rel=1e-12)
    assert [row["term"] for row in t.table()] == list(trend_terms(2, 2))


def test_trend_from_a_known_trend_is_recovered_within_its_standard_error():
    # one fixed-seed fit: every coefficient within 3 standard errors of the truth (each has a
    # 0.27 % chance to miss under the model's own sampling distribution)
    rng = np.random.default_rng(11)
    xy = rng.uniform(0, 1000, size=(150, 2))
    a, bx, by = 10.0, 0.003, -0.006
    z = a + bx * xy[:, 0] + by * xy[:, 1] + rng.normal(scale=0.5, size=150)
    t = fit_trend(xy, z, order=1)
    o = t.origin
    truth = np.array([a + bx * o[0] + by * o[1], bx, by])
    assert np.all(np.abs(t.coefficients - truth) < 3 * t.standard_errors)


def test_trend_standard_errors_give_the_stated_coverage():
    # 2000 independent fits of 8 samples (5 degrees of freedom, where s^2 = RSS / (n - p) and
    # RSS / n differ by a factor 0.625): the share of 95 % intervals, with the Student t quantile
    # from scipy.stats, holding the true slope is 0.95 with binomial sd
    # sqrt(0.95 * 0.05 / 2000) = 0.0049; the tolerance is 4 sd
    from scipy.stats import t as student

    rng = np.random.default_rng(5)
    xy = rng.uniform(0, 500, size=(8, 2))
    q = student.ppf(0.975, 8 - 3)
    hits = 0
    for _ in range(2000):
        z = 1.0 + 0.01 * xy[:, 0] + rng.normal(scale=2.0, size=8)
        t = fit_trend(xy, z)
        hits += abs(t.coefficients[1] - 0.01) < q * t.standard_errors[1]
    assert abs(hits / 2000 - 0.95) < 4 * np.sqrt(0.95 * 0.05 / 2000)


@pytest.mark.parametrize("xy, order, field", [
    (np.column_stack([np.arange(10.0), 2 * np.arange(10.0)]), 1, "order"),   # on a line
    (np.random.default_rng(0).uniform(size=(5, 2)), 2, "order"),             # 6 terms, 5 samples
    (np.random.default_rng(0).uniform(size=(20, 2)), 3, "order"),
])
def test_trend_bad_input_is_refused_with_a_fix(xy, order, field):
    with pytest.raises(InputError) as err:
        fit_trend(xy, np.ones(len(xy)), order=order)
    assert err.value.field == field and err.value.fix


def test_trend_refuses_missing_values():
    xy = np.random.default_rng(0).uniform(size=(20, 2))
    z = np.ones(20)
    z[7] = np.nan
    with pytest.raises(InputError, match="index 7"):
        fit_trend(xy, z)


# ---- collocated simple cokriging, Markov model --------------------------------------------

def _joint_conditioning(model, xy, z, t, s, rho, mean, smean, svar):
    """Estimate, variance and weights from the joint covariance of [Y(u_a), S(u0)] and Y(u0).

    Markov model (Almeida and Journel 1994, Mathematical Geology 26(5)):
    C_YS(h) = rho sqrt(C_S(0) / C_Y(0)) C_Y(h).  Simple cokriging with the primary samples and
    the collocated secondary (Goovaerts 1997, section 6.2, from memory) is the conditional
    expectation of the Gaussian vector: w = K^-1 k, variance C_Y(0) - w.k.
    """
    c0 = independent.sill(model)
    b = rho * np.sqrt(svar / c0)
    n = len(z)
    out_e, out_v, out_w = [], [], []
    for j in range(len(t)):
        k = np.empty((n + 1, n + 1))
        k[:n, :n] = independent.covariance(model, xy)
        cy = independent.covariance(model, xy, t[j:j + 1])[:, 0]
        k[:n, n] = k[n, :n] = b * cy
        k[n, n] = svar
        rhs = np.append(cy, b * c0)
        w = np.linalg.solve(k, rhs)
        out_e.append(mean + w[:n] @ (z - mean) + w[n] * (s[j] - smean))
        out_v.append(c0 - w @ rhs)
        out_w.append(w)
    return np.array(out_e), np.array(out_v), np.array(out_w)


@pytest.mark.parametrize("rho", [-0.7, 0.35, 0.9])
def test_collocated_cokriging_equals_the_joint_gaussian_system(rho):
    rng, xy, z, t = _case()
    model = _model(sill=1.7)
    s = rng.normal(loc=4.0, scale=1.5, size=len(t))
    r = collocated_cokrige(xy, z + 0.3, t, model, s, rho, mean=0.3, secondary_mean=4.0, secondary_variance=2.25,
                           neighbourhood="global", return_weights=True)
    est, var, w = _joint_conditioning(model, xy, z + 0.3, t, s, rho, 0.3, 4.0, 2.25)
    np.testing.assert_allclose(r.estimate, est, atol=1e-10)
    np.testing.assert_allclose(r.variance, var, atol=1e-10)
    np.testing.assert_allclose(r.secondary_weight, w[:, -1], atol=1e-10)
    np.testing.assert_allclose(r.weights, w[:, :-1], atol=1e-10)
    # the secondary can only help: the variance never exceeds the primary-only one
    assert np.all(r.variance <= r.kriging.variance + 1e-12)


def test_collocated_cokriging_equals_full_cokriging_with_every_secondary_datum():
    # Full simple cokriging with the secondary known at the target AND at every sample, under
    # the same Markov model: S = b Y + E with E uncorrelated in space, so C_S(h) = b^2 C_Y(h) +
    # (C_S(0) - b^2 C_Y(0)) [h = 0].  The collocated primary screens the secondary at the samples
    # (their weights are zero; Almeida and Journel 1994, the Markov screening hypothesis), so the
    # full system gives the collocated weights and variance.
    rng, xy, z, t = _case(n=20, m=6, seed=8)
    model = _model(sill=1.3)
    rho, svar = 0.6, 1.0
    c0 = independent.sill(model)
    b = rho * np.sqrt(svar / c0)
    s_data = b * z + rng.normal(scale=0.5, size=len(z))
    s_t = rng.normal(size=len(t))
    r = collocated_cokrige(xy, z, t, model, s_t, rho, neighbourhood="global", return_weights=True)
    n = len(z)
    for j in range(len(t)):
        pts = np.vstack([xy, xy, t[j:j + 1]])
        cyy = independent.covariance(model, xy)
        cy0 = independent.covariance(model, xy, t[j:j + 1])[:, 0]
        k = np.empty((2 * n + 1, 2 * n + 1))
        k[:n, :n] = cyy
        k[:n, n:2 * n] = k[n:2 * n, :n] = b * cyy
        k[n:2 * n, n:2 * n] = b * b * cyy + (svar - b * b * c0) * np.eye(n)
        k[:n, 2 * n] = k[2 * n, :n] = b * cy0
        k[n:2 * n, 2 * n] = k[2 * n, n:2 * n] = b * b * cy0
        k[2 * n, 2 * n] = svar
        rhs = np.concatenate([cy0, b * cy0, [b * c0]])
        w = np.linalg.solve(k, rhs)
        assert pts.shape[0] == len(w)
        np.testing.assert_allclose(w[n:2 * n], 0.0, atol=1e-9)
        np.testing.assert_allclose(r.weights[j], w[:n], atol=1e-9)
        assert r.secondary_weight[j] == pytest.approx(w[2 * n], abs=1e-9)
        assert r.variance[j] == pytest.approx(c0 - w @ rhs, abs=1e-9)
        assert r.estimate[j] == pytest.approx(w[:n] @ z + w[n:2 * n] @ s_data + w[2 * n] * s_t[j], abs=1e-9)


def test_collocated_cokriging_with_a_local_search_solves_the_system_of_the_neighbours():
    rng, xy, z, t = _case(n=60, m=25, seed=4)
    model = _model(sill=1.0)
    s = rng.normal(size=len(t))
    r = collocated_cokrige(xy, z, t, model, s, 0.5, neighbourhood=LOCAL, return_weights=True)
    for j in range(len(t)):
        sel = r.kriging.neighbours[j]
        sel = sel[sel >= 0]
        if len(sel) == 0:
            continue
        est, var, w = _joint_conditioning(model, xy[sel], z[sel], t[j:j + 1], s[j:j + 1], 0.5, 0.0, 0.0, 1.0)
        assert r.estimate[j] == pytest.approx(est[0], abs=1e-10)
        assert r.variance[j] == pytest.approx(var[0], abs=1e-10)
        np.testing.assert_allclose(r.weights[j, :len(sel)], w[0, :-1], atol=1e-10)
    # a target without samples is the secondary regression: b s with variance C(0)(1 - rho^2)
    lone = collocated_cokrige([[0.0, 0.0]], [1.0], [[9000.0, 0.0]], model, [2.0], 0.5, neighbourhood=LOCAL)
    assert lone.estimate[0] == pytest.approx(0.5 * 2.0, abs=1e-12)
    assert lone.variance[0] == pytest.approx(1.0 - 0.25, abs=1e-12)


def test_zero_correlation_is_primary_only_simple_kriging_bit_for_bit():
    rng, xy, z, t = _case(n=60, m=40, seed=6)
    model = _model()
    s = rng.normal(size=len(t))
    for nbh in (LOCAL, "global"):
        r = collocated_cokrige(xy, z, t, model, s, 0.0, mean=0.2, neighbourhood=nbh)
        sk = krige(xy, z, t, model, mean=0.2, neighbourhood=nbh)
        np.testing.assert_array_equal(r.estimate, sk.estimate)
        np.testing.assert_array_equal(r.variance, sk.variance)
        np.testing.assert_array_equal(r.secondary_weight, 0.0)


def test_collocated_cokriging_with_a_varying_mean_works_on_residuals():
    rng, xy, z, t = _case(seed=9)
    model = _model(sill=1.0)
    dm = 0.01 * xy[:, 1]
    tm = 0.01 * t[:, 1]
    s = rng.normal(size=len(t))
    r = collocated_cokrige(xy, z + dm, t, model, s, -0.45, data_mean=dm, target_mean=tm, neighbourhood="global")
    est, var, _ = _joint_conditioning(model, xy, z, t, s, -0.45, 0.0, 0.0, 1.0)
    np.testing.assert_allclose(r.estimate, est + tm, atol=1e-10)
    np.testing.assert_allclose(r.variance, var, atol=1e-10)


@pytest.mark.parametrize("rho", [1.0, -1.0, 1.2, float("nan")])
def test_correlation_outside_minus_one_one_is_refused(rho):
    with pytest.raises(InputError) as err:
        collocated_cokrige([[0.0, 0.0]], [1.0], [[1.0, 1.0]], _model(), [0.0], rho)
    assert err.value.field == "rho" and "between -1 and 1" in err.value.fix
    with pytest.raises(InputError):
        collocated_update([0.0], [1.0], [0.0], rho, 1.0)


def test_secondary_with_gaps_or_wrong_length_is_refused():
    with pytest.raises(InputError, match="secondary"):
        collocated_cokrige([[0.0, 0.0]], [1.0], [[1.0, 1.0], [2.0, 2.0]], _model(), [0.0], 0.5)
    with pytest.raises(InputError, match="index 1"):
        collocated_cokrige([[0.0, 0.0]], [1.0], [[1.0, 1.0], [2.0, 2.0]], _model(), [0.0, np.inf], 0.5)


# ---- the correlation coefficient from collocated pairs ------------------------------------

def test_collocated_correlation_equals_scipy_pearson_and_counts_the_pairs():
    # Reference: scipy.stats.pearsonr (Pearson product-moment correlation) on the complete pairs
    from scipy.stats import pearsonr

    rng = np.random.default_rng(12)
    p = rng.normal(size=200)
    s = 0.6 * p + 0.8 * rng.normal(size=200)
    s[[3, 50, 51]] = np.nan        # samples outside the secondary grid
    p[9] = np.nan
    rho, n = collocated_correlation(p, s)
    keep = np.isfinite(p) & np.isfinite(s)
    assert n == 196
    assert rho == pytest.approx(pearsonr(p[keep], s[keep])[0], abs=1e-12)
    # and the population value 0.6 within 4 standard errors (1 - 0.36) / sqrt(196) = 0.046
    assert abs(rho - 0.6) < 4 * 0.64 / np.sqrt(196)


def test_collocated_correlation_needs_enough_pairs():
    rng = np.random.default_rng(0)
    p, s = rng.normal(size=30), rng.normal(size=30)
    s[:15] = np.nan
    with pytest.raises(InputError, match="only 15 samples") as err:
        collocated_correlation(p, s, min_pairs=20)
    assert err.value.field == "rho"
    assert collocated_correlation(p, s, min_pairs=15)[1] == 15


@pytest.mark.parametrize("s", [np.arange(30.0) * 2 + 1, np.full(30, 4.0)])
def test_collocated_correlation_refuses_a_degenerate_secondary(s):
    with pytest.raises(InputError) as err:
        collocated_correlation(np.arange(30.0), s)
    assert err.value.field == "rho" and err.value.fix
