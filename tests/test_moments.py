"""Data-unit moments of a back-transformed normal variable (geosim.moments) against outside
references: scipy's adaptive quadrature on the package's own back-transform, and closed
forms derived by hand for maps whose moments are known."""
import warnings

import numpy as np
import pytest
from scipy import integrate, special

import geosim
import geosim.moments
from geosim.moments import multigaussian_moments
from geosim.transforms import TransformChain


@pytest.fixture(autouse=True, params=["numpy", "compiled"])
def moments_path(request, monkeypatch):
    """Every check runs through both ways of summing the pieces: numpy's (problems of at most
    NUMPY_MOMENTS_MAX node-evaluations, these tests' sizes) and the compiled kernel's."""
    monkeypatch.setattr(geosim.moments, "NUMPY_MOMENTS_MAX", 1 << 62 if request.param == "numpy" else -1)
    return request.param

# 25 skewed values with ties, and declustering weights of which three are zero, so the
# score table has repeated scores (zero-width pieces) and flat pieces (ties)
RNG = np.random.default_rng(20261202)
VALUES = np.round(np.exp(RNG.normal(size=25)), 1)
WEIGHTS = RNG.uniform(0.2, 1.0, 25)
WEIGHTS[[3, 9, 17]] = 0.0

TAILS = [  # (lower tail, its exponent, upper tail, its exponent): every tail kind, exponents below and above 1
    ("uniform", None, "uniform", None),
    ("power", 0.5, "power", 0.6),
    ("power", 3.0, "power", 4.0),
    ("uniform", None, "pareto", 3.0),
    ("power", 1.5, "pareto", 6.0),
]
# (kriged score, kriging standard deviation): inside the data, beside and beyond either extreme datum,
# from a node next to a datum (0.03) to one beyond the data's reach (1.0)
NODES = [(-3.5, 0.3), (-2.0, 1.0), (-0.7, 0.03), (0.0, 0.6), (0.4, 1.0), (1.3, 0.2), (2.5, 1.0), (3.5, 0.4)]


def _transform(lower_tail, lower_exponent, upper_tail, upper_exponent, log):
    ns = geosim.NormalScoreTransform(lower_tail=lower_tail, lower_exponent=lower_exponent,
                                     upper_tail=upper_tail, upper_exponent=upper_exponent)
    steps = [geosim.LogTransform(), ns] if log else [ns]
    return TransformChain(steps).fit(VALUES, WEIGHTS)


def _quad_moments(transform, m, s):
    """E and Var of transform.inverse(m + s T), T ~ N(0, 1), by scipy.integrate.quad (QUADPACK)
    between consecutive data scores (the kinks) and on the two tails, moments about the median."""
    knots = transform.steps[-1].scores_
    ref = float(transform.inverse(np.array([m]))[0])
    edges = np.unique(np.clip((knots - m) / s, -40.0, 40.0))
    edges = np.r_[-np.inf, edges[(edges > -40.0) & (edges < 40.0)], np.inf]

    def moment(j):
        f = lambda t: (float(transform.inverse(np.array([m + s * t]))[0]) - ref) ** j * np.exp(-0.5 * t * t)
        total = sum(integrate.quad(f, a, b, epsabs=1e-14, epsrel=1e-11, limit=200)[0]
                    for a, b in zip(edges[:-1], edges[1:]))
        return total / np.sqrt(2.0 * np.pi)

    first = moment(1)
    return ref + first, moment(2) - first * first


# a Pareto tail behind a log has no finite moment (test_pareto_tail_moments_are_infinite_...)
CASES = [(tails, log) for tails in TAILS for log in (False, True) if not (log and tails[2] == "pareto")]


@pytest.mark.parametrize("tails, log", CASES,
                         ids=["-".join(str(x) for x in t) + ("-log" if log else "") for t, log in CASES])
def test_moments_match_adaptive_quadrature_for_every_tail(tails, log):
    # The pieces are closed forms (exact to rounding) and the tails' rule is good to about 1e-8
    # relative at these nodes; QUADPACK is asked for 1e-11. rtol 1e-6 leaves room for both.
    t = _transform(*tails, log)
    m = np.array([n[0] for n in NODES])
    s = np.array([n[1] for n in NODES])
    mean, var = multigaussian_moments(t, m, s * s)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", integrate.IntegrationWarning)
        ref = np.array([_quad_moments(t, a, b) for a, b in NODES])
    np.testing.assert_allclose(mean, ref[:, 0], rtol=1e-6)
    np.testing.assert_allclose(var, ref[:, 1], rtol=1e-6, atol=1e-14 * ref[:, 0].max() ** 2)


def test_moments_of_a_straight_back_transform_are_those_of_a_line():
    # Data placed at 10 + 2 y_i, y_i = Phi^-1((i - 1/2)/n), get exactly the scores y_i, so the
    # back-transform is the line 10 + 2y inside the data: E = 10 + 2m, Var = 4 s^2 (the tails
    # hold less than Phi(-12) of the mass at these nodes).
    n = 400
    y = special.ndtri((np.arange(1, n + 1) - 0.5) / n)
    t = geosim.NormalScoreTransform().fit(10.0 + 2.0 * y)
    np.testing.assert_allclose(t.scores_, y, atol=1e-12)
    m = np.array([-0.8, 0.0, 0.3, 1.1])
    s = np.array([0.1, 0.2, 0.05, 0.12])
    mean, var = multigaussian_moments(t, m, s * s)
    np.testing.assert_allclose(mean, 10.0 + 2.0 * m, rtol=1e-12)
    np.testing.assert_allclose(var, 4.0 * s * s, rtol=1e-9)


def test_moments_across_one_kink_match_the_folded_normal():
    # Back-transform z = y below 0 and 3y above (one kink at a datum): z = Y + 2 Y+, and for
    # Y ~ N(m, s^2), E[Y+] = s phi(m/s) + m Phi(m/s), E[(Y+)^2] = (m^2 + s^2) Phi(m/s) + m s phi(m/s)
    # (the truncated normal's moments: Johnson, Kotz and Balakrishnan 1994, vol. 1, ch. 13, from
    # memory). 2001 data put a score at exactly 0; the tails beyond +-3.3 carry less than 1e-10
    # of the mass here.
    y = special.ndtri((np.arange(1, 2002) - 0.5) / 2001)
    t = geosim.NormalScoreTransform().fit(np.where(y < 0, y, 3.0 * y))
    m = np.array([0.0, 0.3, -0.2, 0.05])
    s = np.array([0.5, 0.4, 0.3, 0.02])
    mean, var = multigaussian_moments(t, m, s * s)
    a = m / s
    pos1 = s * np.exp(-0.5 * a * a) / np.sqrt(2 * np.pi) + m * special.ndtr(a)
    pos2 = (m * m + s * s) * special.ndtr(a) + m * s * np.exp(-0.5 * a * a) / np.sqrt(2 * np.pi)
    e1 = m + 2.0 * pos1
    e2 = (m * m + s * s) + 8.0 * pos2            # E[Y^2] + (9 - 1) E[(Y+)^2]
    np.testing.assert_allclose(mean, e1, rtol=1e-9)
    np.testing.assert_allclose(var, e2 - e1 * e1, rtol=1e-8)


def test_log_and_identity_alone_give_the_log_normal_and_normal_moments():
    # Aitchison and Brown (1957), The Lognormal Distribution, ch. 2: for X = 10^Y - offset,
    # Y ~ N(m, s^2), lam = ln 10: E = exp(lam m + lam^2 s^2 / 2) - offset,
    # Var = (exp(lam^2 s^2) - 1) exp(2 lam m + lam^2 s^2)
    m = np.array([-4.0, -1.0, 0.5])
    v = np.array([0.25, 1.0, 0.04])
    lam = np.log(10.0)
    mean, var = multigaussian_moments(geosim.LogTransform(offset=0.5), m, v)
    np.testing.assert_allclose(mean, np.exp(lam * m + lam * lam * v / 2) - 0.5, rtol=1e-12)
    np.testing.assert_allclose(var, np.expm1(lam * lam * v) * np.exp(2 * lam * m + lam * lam * v), rtol=1e-12)
    mean, var = multigaussian_moments(TransformChain([geosim.IdentityTransform()]), m, v)
    np.testing.assert_array_equal(mean, m)
    np.testing.assert_allclose(var, v, rtol=1e-15)


def test_pareto_tail_moments_are_infinite_where_the_integral_diverges(notes):
    # 1 - F(z) ~ z^-k above the largest datum and z^j grows like exp(j y^2 / 2k): E[Z^j] under
    # N(m, s^2) is finite iff j s^2 < k. With k = 2.5: s^2 = 1.0 gives both finite, 1.3 a finite
    # mean and infinite variance, 2.6 neither; behind a log no moment is finite.
    t = _transform("uniform", None, "pareto", 2.5, False)
    with notes(r"infinite at 2 of 3 nodes \(1 with an infinite mean\).*exponent 2.5"):
        mean, var = multigaussian_moments(t, np.zeros(3), np.array([1.0, 1.3, 2.6]))
    assert np.isfinite(mean[:2]).all() and np.isfinite(var[0])
    assert np.isinf(var[1:]).all() and np.isinf(mean[2])
    logged = _transform("uniform", None, "pareto", 3.0, True)
    with notes("behind a log"):
        mean, var = multigaussian_moments(logged, np.array([0.0, -2.0]), np.array([0.5, 0.01]))
    assert np.isinf(mean).all() and np.isinf(var).all()


def test_zero_variance_nan_and_broadcasting():
    t = _transform("power", 1.5, "power", 1.5, True)
    m = np.array([[0.3, np.nan], [-1.0, 2.0]])
    v = np.array([[0.0, 1.0], [np.nan, 0.0]])
    mean, var = multigaussian_moments(t, m, v)
    assert mean.shape == var.shape == (2, 2)
    np.testing.assert_array_equal(mean[[0, 1], [0, 1]], t.inverse(np.array([0.3, 2.0])))
    np.testing.assert_array_equal(var[[0, 1], [0, 1]], 0.0)
    assert np.isnan(mean[[0, 1], [1, 0]]).all() and np.isnan(var[[0, 1], [1, 0]]).all()
    # one variance for every node
    mean, var = multigaussian_moments(t, np.array([0.3, 2.0]), 0.0)
    np.testing.assert_array_equal(mean, t.inverse(np.array([0.3, 2.0])))


def test_transforms_it_cannot_take_apart_use_the_dense_rule():
    # a log-normal written as an opaque map: the composite rule over +-8.5 sd integrates the
    # smooth exp to 1e-12 (Aitchison and Brown 1957, ch. 2, as above)
    class Exp:
        inverse = staticmethod(np.exp)

    m, v = np.array([-1.0, 0.5]), np.array([0.3, 1.0])
    mean, var = multigaussian_moments(Exp, m, v)
    np.testing.assert_allclose(mean, np.exp(m + v / 2), rtol=1e-12)
    np.testing.assert_allclose(var, np.expm1(v) * np.exp(2 * m + v), rtol=1e-10)


def test_old_import_path_still_answers_with_a_warning():
    import geosim.transforms
    with pytest.warns(DeprecationWarning, match="geosim.moments.multigaussian_moments"):
        assert geosim.transforms.multigaussian_moments is multigaussian_moments


def test_numpy_and_compiled_sums_agree_to_rounding(moments_path):
    # the same pieces and tail rule summed in two orders, with erfc from scipy and from the C
    # library: equal to a few ulps of the moments' scale at 2000 random nodes per transform, every
    # tail kind, with and without a log step (the log-space branch of the scaled masses included:
    # steep pieces far from the mean), and nodes whose reach takes some pieces and not others
    if moments_path == "compiled":
        pytest.skip("one comparison of the two is enough")
    rng = np.random.default_rng(20261203)
    m = rng.uniform(-4.0, 4.0, 2000)
    s = np.exp(rng.uniform(np.log(0.01), np.log(1.5), 2000))
    for tails, log in CASES:
        t = _transform(*tails, log)
        core, log_step = geosim.moments._piecewise_form(t)
        numpy_mean, numpy_var = geosim.moments._piecewise_moments(t, core, log_step, m, s)
        kernel_mean, kernel_var = geosim.moments._piecewise_moments(t, core, log_step, m, s, compiled=True)
        scale = float(np.max(np.abs(kernel_mean)))
        np.testing.assert_allclose(numpy_mean, kernel_mean, rtol=1e-12, atol=1e-13 * scale)
        np.testing.assert_allclose(numpy_var, kernel_var, rtol=1e-10, atol=1e-13 * scale * scale)


def test_the_size_picks_the_way_and_a_first_run_compiles_nothing_for_small_ones(moments_path):
    # a few hundred samples' cross-validation and estimate take numpy's sums, a million nodes the
    # kernel; opaque transforms and a log alone never need it
    t = _transform("power", 1.5, "pareto", 6.0, False)
    knots = len(t.steps[-1].scores_) + 2 * geosim.moments.PANELS * geosim.moments.POINTS
    limit = 1 << 23
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(geosim.moments, "NUMPY_MOMENTS_MAX", limit)
        assert not geosim.moments.uses_kernel(t, limit // knots)
        assert geosim.moments.uses_kernel(t, limit // knots + 1)
        assert not geosim.moments.uses_kernel(geosim.LogTransform(), 10 ** 7)
        assert not geosim.moments.uses_kernel(type("Opaque", (), {"inverse": staticmethod(np.exp)}), 10 ** 7)
