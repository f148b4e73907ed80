"""Ensemble statistics and decision figures against numpy, scipy and hand calculations."""
import csv

import numpy as np
import pytest
from pyproj import CRS
from scipy.stats.mstats import mquantiles

import geosim
from geosim.cautions import CAUTION
from geosim.ensemble import summarize_realizations
from geosim.errors import InputError
from geosim.io.csvw import read_csv_metadata
from geosim.io.decision import write_decision_csv
from geosim.io.geotiff import write_raster
from geosim.summaries import (decision_rows, decision_spread, fraction_above, fraction_below, grade_tonnage,
                              sorting_network, summarize_ensemble, summarize_windows, summary_band_names,
                              summary_bands)


def _ensemble(n=9, shape=(37, 53), seed=3):
    rng = np.random.default_rng(seed)
    stack = rng.lognormal(0.0, 1.0, size=(n, *shape))
    mask = np.ones(shape, bool)
    mask[:5, :7] = False
    mask[-3:, 20:] = False
    stack[:, ~mask] = np.nan
    return stack, mask


def test_quantile_definition_is_hyndman_fan_type_7():
    # Hyndman and Fan (1996), "Sample quantiles in statistical packages", definition 7:
    # Q(p) = x[k] + (h - k)(x[k+1] - x[k]) with h = (n - 1) p (0-based). For 1..10 and p = 0.1:
    # h = 0.9, Q = 1 + 0.9 * (2 - 1) = 1.9; p = 0.9: h = 8.1, Q = 9.1; p = 0.5: 5.5 (hand calculation).
    stack = np.arange(1.0, 11.0)[::-1].reshape(10, 1, 1)
    s = summarize_ensemble(stack)
    assert s["P10"][0, 0] == pytest.approx(1.9)
    assert s["P50"][0, 0] == pytest.approx(5.5)
    assert s["P90"][0, 0] == pytest.approx(9.1)
    # scipy's mquantiles with alphap = betap = 1 is the same definition 7 (scipy docs, "R type 7")
    rng = np.random.default_rng(0)
    v = rng.normal(size=23)
    s = summarize_ensemble(v.reshape(23, 1, 1))
    ref = mquantiles(v, prob=[0.1, 0.5, 0.9], alphap=1, betap=1)
    np.testing.assert_allclose([s["P10"][0, 0], s["P50"][0, 0], s["P90"][0, 0]], ref, rtol=1e-12)


def test_summary_bands_match_numpy_and_keep_the_mask():
    stack, mask = _ensemble()
    cut = [0.5, 1.0, 3.0]
    s = summarize_ensemble(stack, cut)
    assert list(s) == summary_band_names(cut)
    v = stack[:, mask]
    np.testing.assert_allclose(s["mean"][mask], v.mean(0), rtol=1e-12)
    np.testing.assert_allclose(s["std"][mask], v.std(0, ddof=0), rtol=1e-12)
    for p in (10, 50, 90):
        np.testing.assert_allclose(s[f"P{p}"][mask], np.percentile(v, p, axis=0), rtol=1e-12)
    for c in cut:
        np.testing.assert_allclose(s[f"P(>{c:g})"][mask], (v > c).sum(0) / v.shape[0])
    for band in s.values():
        assert np.isnan(band[~mask]).all()


@pytest.mark.parametrize("n", [1, 2, 3, 4, 7, 10, 11, 50, 100, 101, 257])
def test_quantiles_by_selection_equal_numpy_exactly_with_ties_and_any_ensemble_size(n):
    # the kernel selects the two order statistics of each quantile instead of sorting; numpy's
    # "linear" method interpolates with the same formula, so the bands are the same numbers bit for
    # bit: continuous values, heavy ties (one decimal), a constant node, already sorted and reversed
    rng = np.random.default_rng(n)
    nodes = 600
    v = rng.standard_normal((n, nodes))
    v[:, 200:400] = np.round(v[:, 200:400], 1)
    v[:, 400] = 2.5
    v[:, 401] = np.arange(n)
    v[:, 402] = -np.arange(n)
    v[:, 403:420] = rng.integers(0, 3, size=(n, 17))
    bands = summary_bands(v, [0.0], threads=2, compiled=True)
    for b, p in enumerate((10, 50, 90)):
        np.testing.assert_array_equal(bands[2 + b], np.percentile(v, p, axis=0))


def _apply_network(pairs, keys):
    """Apply compare-exchange ``pairs`` to the last axis of ``keys`` with numpy (independent of the kernel)."""
    keys = keys.copy()
    for i, j in pairs:
        a, b = keys[..., i].copy(), keys[..., j].copy()
        keys[..., i], keys[..., j] = np.minimum(a, b), np.maximum(a, b)
    return keys


@pytest.mark.parametrize("n", range(1, 15))
def test_sorting_network_sorts_every_input_of_zeros_and_ones(n):
    # the zero-one principle (Knuth, TAOCP 3, 5.3.4): a comparator network sorts every input when it
    # sorts all 2**n inputs of zeros and ones; checked exhaustively for up to 14 keys
    pairs = sorting_network(n)
    assert ((pairs[:, 0] < pairs[:, 1]) & (pairs[:, 1] < n)).all() if len(pairs) else n == 1
    bits = ((np.arange(2 ** n)[:, None] >> np.arange(n)) & 1).astype(np.int8)
    np.testing.assert_array_equal(_apply_network(pairs, bits), np.sort(bits, axis=1))


@pytest.mark.parametrize("n", [15, 16, 17, 31, 50, 100, 101, 128, 200, 257])
def test_sorting_network_sorts_random_keys_and_has_batchers_size(n):
    # random keys with ties; Batcher's merge sort of 2**t keys has (t**2 - t + 4) 2**(t-2) - 1
    # comparators (Knuth, TAOCP 3, 5.3.4, eq. (9); from memory), and a network of n keys no more
    rng = np.random.default_rng(n)
    keys = rng.integers(0, n // 3 + 2, size=(200, n))
    np.testing.assert_array_equal(_apply_network(sorting_network(n), keys), np.sort(keys, axis=1))
    t = int(np.ceil(np.log2(n)))
    batcher = (t * t - t + 4) * 2 ** (t - 2) - 1
    assert len(sorting_network(n)) <= batcher
    if n == 2 ** t:
        assert len(sorting_network(n)) == batcher


def test_summary_bands_of_float32_stacks_are_those_of_their_float64_widening():
    # stores and files hold float32; the kernel reads them as they are (and float64 stacks of float32
    # values as float32), and every band is the same number as numpy's from the widened stack, on
    # nodes that are not a multiple of the kernel's lanes apart, on one thread and on three
    rng = np.random.default_rng(7)
    stack = rng.lognormal(-0.5, 0.8, size=(37, 2, 701)).astype(np.float32)
    stack[:, 1, 650:] = np.nan
    wide = stack.astype(np.float64)
    for threads in (1, 3):
        a = summary_bands(stack, [0.3, 1.0], threads, compiled=True)
        b = summary_bands(wide, [0.3, 1.0], threads, compiled=True)
        np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(a[2:5, 0], np.percentile(wide[:, 0], [10, 50, 90], axis=0))
    np.testing.assert_array_equal(a[6, 0], (wide[:, 0] > 1.0).sum(0) / 37)
    assert np.isnan(a[:, 1, 650:]).all() and not np.isnan(a[:, 1, :650]).any()


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
@pytest.mark.parametrize("n", [1, 2, 3, 7, 20, 100, 101])
def test_the_compiled_pass_and_numpy_give_the_same_bits(n, dtype):
    # small stacks take numpy's reductions and percentiles, large ones (or any once the kernel is
    # compiled) the compiled pass: every band must be the same number either way, with ties, a
    # constant node, nodes outside the domain (NaN in every realization) and lognormal values
    # (whose sums round differently in another order), on one thread and two, for float64 values
    # and float32 ones (the kernel's float32 specialization)
    rng = np.random.default_rng(100 + n)
    v = rng.lognormal(0.0, 1.5, (n, 5000)).astype(dtype)
    v[:, :300] = np.nan
    v[:, 300:1300] = np.round(v[:, 300:1300], 1)
    v[:, 1300] = 0.7
    cut = [0.1, 1.0, 1.0000001, 10.0]
    ref = summary_bands(v.reshape(n, 50, 100), cut, compiled=False)
    for threads in (1, 2):
        got = summary_bands(v.reshape(n, 50, 100), cut, threads=threads, compiled=True)
        np.testing.assert_array_equal(got, ref)
    assert np.isnan(ref[:, 0, :100]).all() and not np.isnan(ref[:, 10:]).any()


def test_summary_bands_take_the_compiled_pass_from_a_size_on_or_once_it_is_compiled(monkeypatch):
    import geosim.summaries as summaries
    calls = []
    real = summaries._compiled_bands
    monkeypatch.setattr(summaries, "_compiled_bands", lambda *a: calls.append(1) or real(*a))
    monkeypatch.setattr(summaries, "_bands_compiled", lambda: False)  # as on a first run
    summary_bands(np.ones((4, 10)))
    assert calls == []
    monkeypatch.setattr(summaries, "COMPILED_BANDS_FROM", 40)
    summary_bands(np.ones((4, 10)))
    assert calls == [1]
    monkeypatch.setattr(summaries, "COMPILED_BANDS_FROM", 1 << 22)
    monkeypatch.setattr(summaries, "_bands_compiled", lambda: True)
    summary_bands(np.ones((4, 10)))
    assert calls == [1, 1]


def test_summary_windows_of_100_realizations_equal_numpy_on_every_node():
    # the store's pass: boxes of 100 lognormal realizations (whose quantile positions 9.9, 49.5 and 89.1
    # interpolate between two order statistics) on two threads, against numpy's percentiles and moments
    rng = np.random.default_rng(2026)
    stack = rng.lognormal(-0.5, 0.8, size=(100, 3, 40, 50)).astype(np.float32)
    stack[:, :, :5, :7] = np.nan
    boxes = [((k,), stack[:, k]) for k in range(3)]
    for (k,), bands in summarize_windows(boxes, [0.3, 1.0], threads=2):
        v = stack[:, k].astype(np.float64)
        np.testing.assert_array_equal(bands[2:5], np.percentile(v, [10, 50, 90], axis=0))
        np.testing.assert_allclose(bands[0], v.mean(0), rtol=1e-12)
        np.testing.assert_array_equal(bands[6], (v > 1.0).sum(0) / 100.0 + 0 * v[0])


@pytest.mark.parametrize("compiled", [True, False])
def test_mask_must_be_shared_by_all_realizations(compiled):
    stack, _ = _ensemble(n=3)
    stack[1, 10, 10] = np.nan
    with pytest.raises(ValueError, match="domain mask"):
        summary_bands(stack, compiled=compiled)


@pytest.mark.parametrize("window", [None, 50, 97])
def test_streaming_summary_equals_numpy_on_the_same_ensemble(tmp_path, window):
    # windows smaller than, not dividing, and the same as the tile size must all give the same result
    stack, mask = _ensemble(n=7, shape=(150, 210))
    grid = geosim.Grid(400000.0, 7100000.0, (25.0, 25.0), mask.shape, crs=CRS.from_epsg(32735), mask=mask)
    paths = []
    for i, f in enumerate(stack):
        paths += write_raster(tmp_path / f"r{i}.tif", f, grid, descriptions=[f"r{i}"])
    out = summarize_realizations(paths, grid, [1.0, 2.0], tmp_path / "summary.tif", units="g/t",
                                 tags={"seed": "5"}, window=window)
    import rasterio
    with rasterio.open(out) as src:
        got = src.read().astype(float)
        assert src.descriptions[0] == "mean of realizations (g/t)"
        assert src.descriptions[5].startswith("probability above 1 g/t")
        assert src.units[:5] == ("g/t",) * 5 and src.units[5] == "fraction"
        assert src.tags()["seed"] == "5"
    ref = np.stack(list(summarize_ensemble(stack.astype(np.float32), [1.0, 2.0]).values()))
    np.testing.assert_allclose(got[:, mask], ref[:, mask], rtol=2e-7)  # float32 storage of float64 statistics
    assert np.isnan(got[:, ~mask]).all()


def test_streaming_summary_reports_progress_and_refuses_wrong_sizes(tmp_path):
    stack, mask = _ensemble(n=2, shape=(40, 30))
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), mask.shape, mask=mask)
    paths = [write_raster(tmp_path / f"r{i}.tif", f, grid, descriptions=["r"])[0] for i, f in enumerate(stack)]
    calls = []
    summarize_realizations(paths, grid, [], tmp_path / "s.tif", window=16,
                           progress=lambda d, t, w: calls.append((d, t, w)))
    assert calls[-1] == (6, 6, "summary") and len(calls) == 6  # ceil(40/16) * ceil(30/16) windows
    other = geosim.Grid(0.0, 0.0, (5.0, 5.0), (30, 40))
    with pytest.raises(InputError, match="r0.tif"):
        summarize_realizations(paths, other, [], tmp_path / "s2.tif")
    assert not (tmp_path / "s2.tif").exists()


def test_grade_tonnage_by_hand_2d_and_3d():
    g2 = geosim.Grid(0.0, 0.0, (10.0, 20.0), (2, 2), mask=np.array([[True, True], [True, False]]))
    f = np.array([[0.2, 1.5], [3.0, 99.0]])  # 99 sits outside the domain and must not count
    gt = grade_tonnage(f, g2, [0.0, 1.0, 2.0, 5.0], density=2.5, thickness=4.0)
    t_cell = 10 * 20 * 4 * 2.5  # 2000 t per cell
    np.testing.assert_allclose(gt["tonnage"], [3 * t_cell, 2 * t_cell, t_cell, 0.0])
    np.testing.assert_allclose(gt["mean_grade"][:3], [(0.2 + 1.5 + 3.0) / 3, 2.25, 3.0])
    assert np.isnan(gt["mean_grade"][3])
    np.testing.assert_allclose(gt["metal"], gt["tonnage"] * np.nan_to_num(gt["mean_grade"]))
    # cut-off is inclusive: a grade equal to the cut-off counts
    assert grade_tonnage(f, g2, [1.5], density=1.0, thickness=1.0)["tonnage"][0] == 2 * 200.0

    g3 = geosim.Grid(0.0, 0.0, (5.0, 5.0, 2.0), (2, 1, 2))
    f3 = np.array([[[1.0, 2.0]], [[3.0, 4.0]]])
    density = np.array([[[2.0, 2.0]], [[3.0, 3.0]]])
    gt3 = grade_tonnage(f3, g3, [2.5], density=density)
    assert gt3["tonnage"][0] == pytest.approx(2 * 50.0 * 3.0)
    assert gt3["mean_grade"][0] == pytest.approx(3.5)
    # % grades: 300 t at 3.5 % Cu hold 10.5 t of copper
    pct = grade_tonnage(f3, g3, [2.5], density=density, metal_factor=0.01)
    assert pct["metal"][0] == pytest.approx(300.0 * 3.5 / 100.0) and pct["tonnage"][0] == gt3["tonnage"][0]


def test_grade_tonnage_asks_for_thickness_in_2d_only():
    g2 = geosim.Grid(0.0, 0.0, (10.0, 10.0), (2, 2))
    with pytest.raises(InputError, match="thickness"):
        grade_tonnage(np.ones((2, 2)), g2, [0.5], density=2.7)
    g3 = geosim.Grid(0.0, 0.0, (10.0, 10.0, 5.0), (2, 2, 2))
    with pytest.raises(InputError, match="thickness"):
        grade_tonnage(np.ones((2, 2, 2)), g3, [0.5], density=2.7, thickness=3.0)


def test_fractions_above_and_below():
    g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (2, 3), mask=np.array([[1, 1, 1], [1, 1, 0]], bool))
    k = np.array([[1e-7, 1e-5, 1e-4], [1e-6, 1e-6, 1.0]])
    above = fraction_above(k, g, [1e-6, 1e-3])
    below = fraction_below(k, g, [1e-6, 1e-3])
    np.testing.assert_allclose(above["fraction_above"], [2 / 5, 0.0])
    np.testing.assert_allclose(below["fraction_below"], [1 / 5, 1.0])
    np.testing.assert_allclose(above["area"], [200.0, 0.0])


def test_decision_spread_matches_numpy_and_skips_nan():
    rng = np.random.default_rng(11)
    figs = []
    for _ in range(31):
        t = rng.uniform(1e5, 2e5, size=2)
        figs.append({"cutoff": np.array([0.5, 9.0]), "tonnage": t,
                     "mean_grade": np.array([rng.uniform(1, 2), np.nan if rng.random() < 0.5 else 9.5])})
    spread = decision_spread(figs)
    row = next(r for r in spread if r["cutoff"] == 0.5 and r["figure"] == "tonnage")
    t = np.array([f["tonnage"][0] for f in figs])
    assert row["n"] == 31
    np.testing.assert_allclose([row["P10"], row["P50"], row["P90"]], np.percentile(t, [10, 50, 90]))
    row = next(r for r in spread if r["cutoff"] == 9.0 and r["figure"] == "mean_grade")
    assert row["n"] == sum(not np.isnan(f["mean_grade"][1]) for f in figs)
    rows = decision_rows(figs, indices=range(100, 131))
    assert len(rows) == 62 and rows[0]["realization"] == 100 and rows[-1]["cutoff"] == 9.0


def test_decision_csv_carries_the_caution_and_reads_back(tmp_path):
    figs = [{"cutoff": np.array([1.0]), "tonnage": np.array([10.0 * i])} for i in range(5)]
    p = write_decision_csv(tmp_path / "spread.csv", decision_spread(figs), units="%")
    lines = p.read_text().splitlines()
    assert lines[0] == "cutoff,figure,n,mean,P10,P50,P90"
    meta = read_csv_metadata(p)
    assert meta["dc:description"] == CAUTION
    assert meta["tableSchema"]["columns"][0]["schema:unitText"] == "%"
    rows = list(csv.DictReader(lines))
    assert float(rows[0]["P50"]) == pytest.approx(20.0)
    with pytest.raises(InputError, match="overwrite"):
        write_decision_csv(p, decision_spread(figs))


# P(>c) counts realizations strictly above c (module docstring): a value equal to the cut-off is
# not above it.  Values and cut-offs are exact in float32, so the GeoTIFF path sees the same ties.
# Hand count per node over 4 realizations: node (0,0) holds 0.5 1.5 1.5 2.5, so P(>1.5) = 1/4 and
# P(>0.5) = 3/4; node (0,1) holds 1.5 four times, so P(>1.5) = 0 and P(>0.5) = 1.
TIES = np.array([[[0.5, 1.5]], [[1.5, 1.5]], [[1.5, 1.5]], [[2.5, 1.5]]])
TIES_ABOVE = {"P(>0.5)": [0.75, 1.0], "P(>1.5)": [0.25, 0.0]}


def test_values_exactly_at_a_cut_off_are_not_above_it():
    s = summarize_ensemble(TIES, [0.5, 1.5])
    for band, values in TIES_ABOVE.items():
        np.testing.assert_array_equal(s[band][0], values)


def test_streamed_values_exactly_at_a_cut_off_are_not_above_it(tmp_path):
    stack, want = TIES, TIES_ABOVE
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (1, 2))
    paths = [write_raster(tmp_path / f"r{i}.tif", f, grid, descriptions=["r"])[0] for i, f in enumerate(stack)]
    out = summarize_realizations(paths, grid, [0.5, 1.5], tmp_path / "summary.tif")
    import rasterio
    with rasterio.open(out) as src:
        got = src.read()
    np.testing.assert_array_equal(got[5:, 0, :], [want["P(>0.5)"], want["P(>1.5)"]])


def test_std_band_divides_by_the_number_of_realizations_streamed(tmp_path):
    # by hand: two realizations a and b have mean (a+b)/2 and std |a-b|/2 with divisor n
    # (|a-b|/sqrt(2) with n - 1); values exact in float32
    a = np.array([[1.0, 4.0, -2.0]])
    b = np.array([[3.0, 4.0, 6.0]])
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (1, 3))
    paths = [write_raster(tmp_path / f"r{i}.tif", f, grid, descriptions=["r"])[0] for i, f in enumerate((a, b))]
    out = summarize_realizations(paths, grid, [], tmp_path / "summary.tif")
    import rasterio
    with rasterio.open(out) as src:
        got = src.read()
    np.testing.assert_array_equal(got[0], [[2.0, 4.0, 2.0]])
    np.testing.assert_array_equal(got[1], [[1.0, 0.0, 4.0]])


def test_grade_tonnage_with_density_and_thickness_per_cell_by_hand():
    # Per-cell tonnes = dx * dy * thickness * density; a grade equal to the cut-off counts
    # (grade >= cut-off).  Cells (10 m x 10 m):
    #   grade   2.0  1.0  0.4       thickness 2  3  1       density 2.5 2.0 3.0
    #   grade   1.0  0.7  NaN       thickness 1  2  5       density 2.0 2.8 2.0
    # tonnes    500  600  300 / 200 560  -
    # cut-off 1.0: cells 2.0 (500 t), 1.0 (600 t), 1.0 (200 t): 1300 t, metal 1000+600+200 = 1800,
    # mean grade 1800 / 1300; cut-off 0.7: adds 0.7 (560 t): 1860 t, metal 2192.
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (2, 3))
    grade = np.array([[2.0, 1.0, 0.4], [1.0, 0.7, np.nan]])
    thickness = np.array([[2.0, 3.0, 1.0], [1.0, 2.0, 5.0]])
    density = np.array([[2.5, 2.0, 3.0], [2.0, 2.8, 2.0]])
    gt = grade_tonnage(grade, grid.with_mask(np.isfinite(grade)), [1.0, 0.7, 0.4], density=density,
                       thickness=thickness)
    np.testing.assert_allclose(gt["tonnage"], [1300.0, 1860.0, 2160.0], rtol=1e-12)
    np.testing.assert_allclose(gt["metal"], [1800.0, 2192.0, 2312.0], rtol=1e-12)
    np.testing.assert_allclose(gt["mean_grade"], [1800.0 / 1300.0, 2192.0 / 1860.0, 2312.0 / 2160.0], rtol=1e-12)


def test_fractions_at_a_threshold_count_neither_above_nor_below():
    # strictly above / strictly below (module docstring): cells equal to the threshold belong to
    # neither side, so the two fractions add to 1 minus the share of ties (by hand: 6 cells,
    # 3 equal to 2e-5, 1 above, 2 below)
    g = geosim.Grid(0.0, 0.0, (5.0, 5.0), (2, 3))
    k = np.array([[2e-5, 2e-5, 3e-4], [2e-5, 1e-6, 4e-7]])
    above = fraction_above(k, g, [2e-5])["fraction_above"][0]
    below = fraction_below(k, g, [2e-5])["fraction_below"][0]
    assert (above, below) == (1 / 6, 2 / 6)
