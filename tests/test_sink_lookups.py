"""The worker's per-realization lookups: compiled interpolation and knot counts, the KS distance from them.

The references are numpy itself (``numpy.interp``, sorting and ``searchsorted``), the
merge of both sorted samples the KS distance used before, and scipy's two-sample
statistic.  Array sizes straddle ``geosim.fieldstats.COMPILED_FROM`` so both the compiled
loops and the numpy path are checked.
"""
import numpy as np
import pytest
from scipy.stats import ks_2samp

from geosim import fieldstats
from geosim.transforms import NormalScoreTransform
from geosim.validation import ks_distance, weighted_cdf

BIG = fieldstats.COMPILED_FROM + 1234


def _same_bits(a, b):
    a, b = np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)
    return a.shape == b.shape and np.array_equal(a.view(np.int64), b.view(np.int64))


def _cases(seed, count):
    """Tables with ties, plateaus and repeated knots; values on knots, outside the table and NaN."""
    rng = np.random.default_rng(seed)
    for case in range(count):
        n = int(rng.integers(2, 3000))
        xp = np.sort(rng.standard_normal(n))
        if case % 3 == 0:
            xp = np.sort(np.round(xp, 1))  # repeated knots
        fp = np.sort(rng.lognormal(size=n)) if case % 2 else rng.standard_normal(n)
        if case % 4 == 0:
            fp[::5] = fp[0]  # plateaus
        x = 1.6 * rng.standard_normal(BIG)
        x[::9] = xp[rng.integers(0, n, x[::9].size)]  # exactly on knots
        x[::101] = np.nan
        x[5] = -0.0
        yield x, xp, fp


def test_compiled_interp_is_numpy_interp_bit_for_bit():
    for x, xp, fp in _cases(7, 40):
        assert _same_bits(fieldstats.interp(x, xp, fp), np.interp(x, xp, fp))
    # a wide table (extreme slopes) and values far outside it
    xp = np.array([-1e300, -1.0, 0.0, 1e-300, 2e-300, 1.0, 1e300])
    fp = np.array([-5.0, -1.0, 0.0, 1e300, -1e300, 3.0, 4.0])
    x = np.random.default_rng(3).standard_normal(BIG) * 1e-300
    x[:4] = [-np.inf, np.inf, 1e301, -1e301]
    assert _same_bits(fieldstats.interp(x, xp, fp), np.interp(x, xp, fp))


def test_knot_counts_equal_counts_from_a_sorted_copy():
    rng = np.random.default_rng(11)
    for size in (500, BIG):
        k = np.unique(np.round(rng.standard_normal(700), 2))
        x = rng.standard_normal(size)
        x[::7] = k[rng.integers(0, k.size, x[::7].size)]
        x[::50] = np.nan
        below, at, n = fieldstats.knot_counts(x, k)
        s = np.sort(x[~np.isnan(x)])
        assert n == s.size
        assert below.tolist() == np.searchsorted(s, k, side="left").tolist() + [s.size]
        assert at.tolist() == (np.searchsorted(s, k, side="right") - np.searchsorted(s, k, side="left")).tolist()


def _ks_by_merging(a, b, weights_a=None):
    """The KS distance as geosim computed it before: both samples sorted, both step functions
    evaluated at every point of either sample."""
    a, cwa = weighted_cdf(a, weights_a)
    b = np.asarray(b, dtype=float).ravel()
    b = np.sort(b[~np.isnan(b)])
    points = np.concatenate([a, b])
    fa = cwa[np.searchsorted(a, points, side="right")]
    fb = np.searchsorted(b, points, side="right") / b.size
    return float(np.max(np.abs(fa - fb)))


@pytest.mark.parametrize("size", [300, BIG])
def test_ks_distance_equals_the_merge_of_both_sorted_samples(size):
    rng = np.random.default_rng(size)
    for case in range(12):
        a = rng.standard_normal(int(rng.integers(5, 3000)))
        if case % 2:
            a = np.round(a, 1)  # tied data
        w = None if case % 3 == 0 else rng.uniform(0.1, 3.0, a.size)
        shift = (case % 4) * 0.05
        b = rng.standard_normal(size) + shift
        b[::13] = a[rng.integers(0, a.size, b[::13].size)]  # ties between the samples
        b[::77] = np.nan
        if case == 5:
            b = np.abs(b) + a.max() + 1.0  # every value above the data
        if case == 7:
            b = -np.abs(b) + a.min() - 1.0  # every value below
        assert ks_distance(a, b, w) == _ks_by_merging(a, b, w)


def test_ks_distance_of_a_large_sample_matches_scipy():
    # scipy.stats.ks_2samp, the two-sample statistic (reference library), unweighted
    rng = np.random.default_rng(5)
    a, b = rng.standard_normal(2000), rng.normal(0.05, 1.1, BIG)
    assert ks_distance(a, b) == pytest.approx(ks_2samp(a, b).statistic, abs=1e-12)
    a = np.round(a, 1)
    b = np.round(b, 1)  # heavy ties on both sides
    assert ks_distance(a, b) == pytest.approx(ks_2samp(a, b).statistic, abs=1e-12)


def test_back_transform_of_a_large_field_equals_it_in_small_pieces():
    # an element-wise map: pieces below COMPILED_FROM take numpy's interp, the whole field the compiled one
    rng = np.random.default_rng(9)
    values = rng.lognormal(-0.5, 0.8, 2500)
    for tail in ("uniform", "power", "pareto"):
        t = NormalScoreTransform(lower=0.0, upper_tail=tail).fit(values)
        y = 1.3 * rng.standard_normal(BIG)
        y[::17] = t.scores_[rng.integers(0, t.scores_.size, y[::17].size)]
        y[::31] = np.nan
        pieces = np.concatenate([t.inverse(p) for p in np.array_split(y, 8)])
        assert _same_bits(t.inverse(y), pieces)
        inside = (y >= t.scores_[0]) & (y <= t.scores_[-1])
        assert _same_bits(t.inverse(y)[inside], np.interp(y[inside], t.scores_, t.values_))


def test_order_statistics_are_the_sorted_values_at_their_ranks():
    rng = np.random.default_rng(21)
    for case in range(8):
        x = rng.lognormal(-0.5, 1.3, BIG) * (-1.0) ** case
        if case % 2:
            x = np.round(x, 1)  # long runs of equal values, and zeros
        if case == 3:
            x[::3] = -x[::3]
        ranks = np.unique(np.concatenate([rng.integers(0, x.size, 300), [0, x.size - 1]]))
        assert np.array_equal(fieldstats.order_statistics(x, ranks[::-1]), np.sort(x)[ranks[::-1]])
    x = np.array([np.inf, -np.inf, 1e-310, -1e-310, 0.0, -0.0, 5.0, -5.0] * 9000)
    ranks = np.arange(0, x.size, 997)
    assert np.array_equal(fieldstats.order_statistics(x, ranks), np.sort(x)[ranks])
    with pytest.raises(ValueError, match="ranks must lie"):
        fieldstats.order_statistics(x, [x.size])


def test_quantiles_are_numpy_quantile_bit_for_bit():
    from geosim.validation import PLOT_QUANTILES
    rng = np.random.default_rng(22)
    for case in range(10):
        n = BIG + int(rng.integers(0, 50000))
        x = rng.lognormal(-0.5, 1.1, n)
        if case % 2:
            x = x.astype(np.float32).astype(np.float64)  # the stored values the run checks measure
        if case % 3 == 0:
            x = np.round(x, 2) - 0.3  # ties, negative values
        q = PLOT_QUANTILES if case % 4 else np.sort(rng.uniform(0.0, 1.0, 57))
        assert _same_bits(fieldstats.quantiles(x, q), np.quantile(x, q))


def test_axis_semivariogram_of_a_complete_field_is_the_same_told_or_found():
    from geosim.validation import axis_semivariogram
    rng = np.random.default_rng(23)
    field = rng.standard_normal((4, 30, 40)).cumsum(axis=2)
    for axis in range(3):
        steps = [1, 2, 5, 50]
        told = axis_semivariogram(field, axis, steps, complete=True)
        found = axis_semivariogram(field, axis, steps)
        # the mean of every squared difference at that lag, by numpy, is the reference
        for k, g, n in zip(steps, *found):
            if k >= field.shape[axis]:
                assert np.isnan(g) and n == 0
                continue
            n_axis = field.shape[axis]
            d = np.take(field, np.arange(k, n_axis), axis) - np.take(field, np.arange(n_axis - k), axis)
            assert g == 0.5 * float(np.mean(d * d)) and n == d.size
        assert _same_bits(told[0], found[0]) and told[1].tolist() == found[1].tolist()


def test_warm_up_compiles_the_loops_the_lookups_then_use():
    fieldstats.warm_up()
    for loop in (fieldstats._interp_loop, fieldstats._count_loop, fieldstats._select_loop):
        assert len(loop.signatures) == 1
    x = np.random.default_rng(1).standard_normal(BIG)
    k = np.sort(x[:100])
    fieldstats.interp(x, k, k)
    fieldstats.knot_counts(x, k)
    fieldstats.quantiles(x, np.array([0.1, 0.9]))
    for loop in (fieldstats._interp_loop, fieldstats._count_loop, fieldstats._select_loop):
        assert len(loop.signatures) == 1  # no second specialization: warm_up passed the real types
