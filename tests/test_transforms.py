"""Normal score, log and identity transforms."""
from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats

import geosim
from geosim.errors import InputError
from geosim.transforms import IdentityTransform, LogTransform, NormalScoreTransform, transform_from_dict


def test_scores_are_normal_quantiles_of_midpoint_plotting_positions():
    # reference: scipy.stats.norm.ppf of the plotting positions (i - 1/2)/n, the midpoint rule
    # (Hazen 1914, "Storage to be provided in impounding reservoirs for municipal water supply",
    # Trans. ASCE 77; from memory)
    rng = np.random.default_rng(3)
    v = rng.lognormal(size=50)
    t = NormalScoreTransform().fit(v)
    ranks = stats.rankdata(v)  # distinct values: ranks 1..n
    np.testing.assert_allclose(t.data_scores_, stats.norm.ppf((ranks - 0.5) / len(v)), rtol=0, atol=1e-12)
    np.testing.assert_allclose(t.transform(v), t.data_scores_, atol=1e-12)
    np.testing.assert_allclose(t.inverse(t.data_scores_), v, rtol=1e-12)


def test_weighted_plotting_positions_by_hand():
    # sorted weights 0.5, 0.25, 0.25 -> p = 0.25, 0.625, 0.875 (cumulative minus half own weight)
    t = NormalScoreTransform().fit([3.0, 1.0, 2.0], weights=[1.0, 2.0, 1.0])
    np.testing.assert_allclose(t.probabilities_, [0.25, 0.625, 0.875])
    np.testing.assert_allclose(t.data_scores_, stats.norm.ppf([0.875, 0.25, 0.625]))


def test_scores_match_the_true_distribution_within_sampling_error():
    # n log-normal values: Phi(score_i) is the empirical cdf (midpoint rule) and must lie within the
    # Dvoretzky-Kiefer-Wolfowitz band of the true cdf (Massart 1990, Ann. Probab. 18(3): P(sup|F_n - F|
    # > e) <= 2 exp(-2 n e^2)); at alpha = 1e-3, e = sqrt(ln(2/alpha) / (2n)); add 1/(2n) for the midpoint.
    n, alpha = 2000, 1e-3
    rng = np.random.default_rng(11)
    y_true = rng.standard_normal(n)
    v = np.exp(0.3 + 0.9 * y_true)
    scores = NormalScoreTransform().fit_transform(v)
    eps = np.sqrt(np.log(2 / alpha) / (2 * n)) + 0.5 / n
    assert np.max(np.abs(stats.norm.cdf(scores) - stats.norm.cdf(y_true))) < eps


def test_ties_get_distinct_reproducible_scores():
    v = np.array([1.0, 0.5, 0.5, 0.5, 2.0, 0.5])
    a = NormalScoreTransform(seed=4).fit(v).data_scores_
    b = NormalScoreTransform(seed=4).fit(v).data_scores_
    np.testing.assert_array_equal(a, b)
    assert len(np.unique(a)) == len(v)
    expected = stats.norm.ppf((np.arange(1, 7) - 0.5) / 6)
    np.testing.assert_allclose(np.sort(a), expected)
    # ties take the four lowest scores; "order" assigns them in input order
    o = NormalScoreTransform(ties="order").fit(v).data_scores_
    np.testing.assert_allclose(o[[1, 2, 3, 5]], expected[:4])
    # a new value equal to the tie maps to the mean score of the tie
    t = NormalScoreTransform().fit(v)
    assert t.transform([0.5])[0] == pytest.approx(expected[:4].mean())


def test_back_transform_interpolates_linearly_inside_the_data():
    t = NormalScoreTransform().fit([1.0, 2.0, 4.0, 8.0])
    y = t.scores_
    mid = 0.25 * y[1] + 0.75 * y[2]
    assert t.inverse([mid])[0] == pytest.approx(0.25 * 2.0 + 0.75 * 4.0)
    grid = np.linspace(-5, 5, 401)
    assert np.all(np.diff(t.inverse(grid)) >= 0)


def test_linear_tails_by_hand():
    v = np.array([2.0, 3.0, 5.0, 6.0])  # p1 = 1/8, pn = 7/8
    t = NormalScoreTransform(lower=0.0, upper=10.0).fit(v)
    # lower: v = lo + (v1 - lo) P / p1; at P = p1/2 -> 1.0
    assert t.inverse([stats.norm.ppf(1 / 16)])[0] == pytest.approx(1.0)
    # upper: v = vn + (hi - vn)(P - pn)/(1 - pn); at P = pn + (1 - pn)/4 -> 7.0
    assert t.inverse([stats.norm.ppf(7 / 8 + 1 / 32)])[0] == pytest.approx(7.0)
    assert t.inverse([-40.0])[0] == pytest.approx(0.0) and t.inverse([40.0])[0] == pytest.approx(10.0)


def test_power_and_pareto_tails_by_hand(notes):
    v = np.array([2.0, 3.0, 5.0, 6.0])
    t = NormalScoreTransform(lower=0.0, upper=10.0, lower_tail="power", lower_exponent=2.0,
                             upper_tail="power", upper_exponent=0.5).fit(v)
    # lower power: v = lo + (v1 - lo)(P/p1)^(1/k); P/p1 = 1/4, k 2 -> 2 * 0.5 = 1.0
    assert t.inverse([stats.norm.ppf(1 / 32)])[0] == pytest.approx(1.0)
    # upper power: v = vn + (hi - vn) r^(1/k), r = 1/4, k 1/2 -> 6 + 4/16 = 6.25
    assert t.inverse([stats.norm.ppf(7 / 8 + 1 / 32)])[0] == pytest.approx(6.25)
    with notes("infinite variance"):
        h = NormalScoreTransform(upper_tail="pareto", upper_exponent=2.0).fit(v)
    # 1 - F(v) = (1 - pn)(vn / v)^k; 1 - P = (1 - pn)/4 and k 2 -> v = 2 vn = 12
    assert h.inverse([stats.norm.isf(1 / 32)])[0] == pytest.approx(12.0)
    assert np.isfinite(h.inverse([8.0])[0]) and h.inverse([8.0])[0] > 12.0


@pytest.mark.parametrize("kw", [{}, {"lower_tail": "power", "lower_exponent": 3.0},
                                {"upper_tail": "power", "upper_exponent": 2.0},
                                {"upper_tail": "pareto", "upper_exponent": 2.2}])
def test_forward_and_inverse_agree_in_the_tails(kw):
    rng = np.random.default_rng(5)
    v = rng.lognormal(size=30)
    t = NormalScoreTransform(**kw).fit(v)
    new = np.concatenate([np.linspace(t.lower_ + 1e-3, v.min(), 5), np.linspace(v.min(), v.max(), 20),
                          np.linspace(v.max(), v.max() * 1.05, 5)])
    np.testing.assert_allclose(t.inverse(t.transform(new)), new, rtol=1e-9, atol=1e-9)


def test_default_bounds_and_checks():
    t = NormalScoreTransform().fit([1.0, 2.0, 11.0])
    assert t.lower_ == 0.0 and t.upper_ == pytest.approx(12.0)  # range 10, pad 1, clipped at 0
    assert NormalScoreTransform().fit([-5.0, 5.0]).lower_ == pytest.approx(-6.0)
    with pytest.raises(InputError, match="lower bound"):
        NormalScoreTransform(lower=2.0).fit([1.0, 3.0])
    with pytest.raises(InputError, match="upper bound"):
        NormalScoreTransform(upper=2.0).fit([1.0, 3.0])
    with pytest.raises(InputError, match="Pareto"):
        NormalScoreTransform(upper_tail="pareto").fit([-3.0, -1.0])
    with pytest.raises(InputError, match="value 2 is nan"):
        NormalScoreTransform().fit([1.0, np.nan])
    with pytest.raises(ValueError):
        NormalScoreTransform(upper_tail="pareto", upper_exponent=0.5)
    with pytest.raises(RuntimeError):
        NormalScoreTransform().transform([1.0])


def test_scalar_and_nan_inputs_keep_their_shape():
    t = NormalScoreTransform().fit([1.0, 2.0, 3.0])
    assert np.ndim(t.transform(2.0)) == 0 and np.ndim(t.inverse(0.0)) == 0
    assert np.isnan(t.transform([np.nan, 2.0])[0]) and np.isnan(t.inverse([np.nan])[0])
    assert t.transform(np.ones((2, 3)) * 2).shape == (2, 3)


def test_log_transform():
    t = LogTransform().fit([1e-6, 1e-4])
    np.testing.assert_allclose(t.transform([1e-5, 1e-3]), [-5.0, -3.0])
    np.testing.assert_allclose(t.inverse([-5.0]), [1e-5])
    assert LogTransform(base=np.e, offset=1.0).transform([np.e - 1.0])[0] == pytest.approx(1.0)
    with pytest.raises(InputError) as err:
        LogTransform(name="k_ms").fit([1e-5, 0.0, 2e-5])
    assert err.value.field == "k_ms" and "sample 2" in str(err.value) and "detection" in err.value.fix
    with pytest.raises(InputError):
        LogTransform().transform([-1.0])


def test_identity_transform():
    t = IdentityTransform().fit([1.0])
    assert t.transform([2.5]).tolist() == [2.5] and t.describe().startswith("identity")


@pytest.mark.parametrize("make", [lambda: IdentityTransform(), lambda: LogTransform(base=10, offset=0.5),
                                  lambda: NormalScoreTransform(upper_tail="pareto", seed=9)])
def test_to_dict_round_trip_through_json(make):
    rng = np.random.default_rng(2)
    v = np.round(rng.lognormal(size=40), 1)  # rounding makes ties
    w = rng.uniform(0.5, 2.0, size=40)
    t = make().fit(v, w)
    back = transform_from_dict(json.loads(json.dumps(t.to_dict())))
    probe = np.linspace(0.05, 3 * v.max(), 50)
    np.testing.assert_allclose(back.transform(probe), t.transform(probe), rtol=1e-12, atol=1e-12)
    y = np.linspace(-4, 4, 33)
    np.testing.assert_allclose(back.inverse(y), t.inverse(y), rtol=1e-12)
    assert back.describe() == t.describe()


def test_describe_names_the_choices():
    t = NormalScoreTransform(upper_tail="pareto", name="cu_pct").fit([0.1, 0.5, 1.0], [1, 2, 3])
    text = t.describe()
    assert "cu_pct" in text and "declustering weights" in text and "pareto" in text
    with pytest.raises(ValueError, match="unknown transform kind"):
        transform_from_dict({"kind": "box-cox"})
    assert geosim.NormalScoreTransform is NormalScoreTransform


def test_zero_weights_in_a_tie_do_not_break_the_lookup():
    t = NormalScoreTransform(ties="order").fit([1.0, 1.0, 2.0, 3.0], weights=[0.0, 0.0, 1.0, 1.0])
    assert np.isfinite(t.transform([1.0, 1.5, 2.5])).all()


def test_pareto_tail_warns_exactly_when_its_variance_is_infinite(notes):
    """A Pareto tail 1 - F(v) = c v^-k has a finite variance only for k > 2 (Johnson, Kotz and
    Balakrishnan 1994, Continuous Univariate Distributions, vol. 1, ch. 20, from memory): checked
    here against scipy's Pareto distribution too."""
    for k, infinite in ((1.5, True), (2.0, True), (2.01, False), (3.0, False)):
        assert np.isinf(stats.pareto(k).var()) == infinite
        notes.clear()
        t = NormalScoreTransform(upper_tail="pareto", upper_exponent=k, name="cu_pct")
        logged = notes.logged()
        assert bool(logged) == infinite, k
        if infinite:
            assert "cu_pct" in logged[0] and f"exponent {k:g}" in logged[0] and "above 2" in logged[0]
        assert ("infinite variance" in t.fit([0.5, 1.0, 2.0]).describe()) == infinite
    # bounded tails never warn, whatever their exponent
    notes.clear()
    NormalScoreTransform(upper_tail="power", upper_exponent=0.5)
    assert not notes.logged()
    assert NormalScoreTransform(upper_tail="pareto").upper_exponent == 3.0  # the default is finite


def test_pareto_tail_reproduces_the_pareto_distribution_above_the_largest_datum():
    """Above v_n the back-transform of standard normal scores is a Pareto law with index k:
    P(V > v | V > v_n) = (v_n / v)^k; compared with scipy.stats.pareto by a KS test (n = 4000
    tail draws, 1 % level: a correct tail fails 1 time in 100 (fixed seed))."""
    v = np.arange(1.0, 21.0)
    t = NormalScoreTransform(upper_tail="pareto", upper_exponent=3.0).fit(v)
    pn = t.probabilities_[-1]
    rng = np.random.default_rng(5)
    y = stats.norm.ppf(pn + (1 - pn) * rng.uniform(size=4000))
    tail = t.inverse(y) / v[-1]
    assert stats.kstest(tail, stats.pareto(3.0).cdf).pvalue > 0.01
