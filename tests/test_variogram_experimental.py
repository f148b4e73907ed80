"""Experimental variograms against a brute-force double loop and hand-worked cases.

The checks against the double loop run through both pair loops: the compiled kernel and the
numpy one small data sets take (``pair_loop``); a last group checks the two agree bit for bit.
"""
import math

import numpy as np
import pytest

from geosim.errors import InputError
from geosim.variogram import (Direction, directional_variograms, downhole_variogram,
                              experimental_variogram, pairs, variogram_map)
from geosim.variogram.experimental import _compute


@pytest.fixture(params=["compiled", "numpy"])
def pair_loop(request, monkeypatch):
    """Every data set through the compiled pair loop, or every one through numpy's."""
    monkeypatch.setattr(pairs, "NUMPY_PAIRS_MAX", -1 if request.param == "compiled" else 1 << 40)
    return request.param


def brute_force(coords, values, lag, nlags, lag_half_width, direction=None, robust=False, holes=None):
    """Plain double loop written straight from the definitions in the module docstring."""
    c = np.zeros((len(values), 3))
    c[:, :coords.shape[1]] = coords
    counts = np.zeros(nlags)
    dist = np.zeros(nlags)
    acc = np.zeros(nlags)
    if direction is not None:
        az, dip = math.radians(direction.azimuth), math.radians(direction.dip)
        u = np.array([math.sin(az) * math.cos(dip), math.cos(az) * math.cos(dip), -math.sin(dip)])
        v = np.array([math.cos(az), -math.sin(az), 0.0])
        w = np.cross(v, u)
    for i in range(len(values)):
        for j in range(i + 1, len(values)):
            if np.isnan(values[i]) or np.isnan(values[j]):
                continue
            if holes is not None and holes[i] != holes[j]:
                continue
            h = c[j] - c[i]
            d = math.sqrt(h @ h)
            if d < 1e-9:
                continue
            if direction is not None:
                a, b, cc = abs(h @ u), abs(h @ v), abs(h @ w)
                if direction.horizontal_half_angle < 90 and math.degrees(math.atan2(b, a)) > direction.horizontal_half_angle:
                    continue
                if coords.shape[1] == 3 and direction.vertical_half_angle < 90 and \
                        math.degrees(math.atan2(cc, a)) > direction.vertical_half_angle:
                    continue
                if b > direction.horizontal_max_offset or cc > direction.vertical_max_offset:
                    continue
            for k in range(nlags):
                centre = k * lag
                if centre - lag_half_width <= d < centre + lag_half_width:
                    counts[k] += 1
                    dist[k] += d
                    diff = values[j] - values[i]
                    acc[k] += math.sqrt(abs(diff)) if robust else 0.5 * diff * diff
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = acc / counts
        gamma = mean**4 / (2 * (0.457 + 0.494 / counts)) if robust else mean
        return counts, dist / counts, gamma


@pytest.fixture(scope="module")
def data3d():
    rng = np.random.default_rng(42)
    coords = rng.uniform(0, 100, (70, 3)) * [1.0, 1.0, 0.3]
    values = rng.lognormal(size=70)
    values[[3, 17]] = np.nan
    return coords, values


@pytest.mark.parametrize("direction", [
    None,
    Direction(30.0, 0.0, horizontal_half_angle=20.0, vertical_half_angle=15.0),
    Direction(120.0, 25.0, horizontal_half_angle=30.0, vertical_half_angle=10.0, horizontal_max_offset=15.0, vertical_max_offset=5.0),
    Direction(0.0, 90.0, horizontal_half_angle=90.0, vertical_half_angle=30.0),
])
@pytest.mark.parametrize("robust", [False, True])
@pytest.mark.parametrize("lag_half_width", [None, 9.0])
def test_matches_brute_force_3d(data3d, direction, robust, lag_half_width, pair_loop):
    coords, values = data3d
    ev = experimental_variogram(coords, values, lag=10.0, nlags=8, lag_half_width=lag_half_width, direction=direction,
                                estimator="cressie-hawkins" if robust else "matheron")
    n, lags, gamma = brute_force(coords, values, 10.0, 8, 5.0 if lag_half_width is None else lag_half_width,
                                 direction, robust)
    assert n.sum() > 0
    np.testing.assert_array_equal(ev.npairs, n)
    np.testing.assert_allclose(ev.lags, lags, rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(ev.gamma, gamma, rtol=1e-12, equal_nan=True)
    assert ev.nsamples == 68


def test_directions_in_one_pass_match_single_calls_2d(pair_loop):
    rng = np.random.default_rng(3)
    xy = rng.uniform(0, 200, (150, 2))
    z = np.sin(xy[:, 0] / 40) + rng.normal(scale=0.2, size=150)
    dirs = [None, Direction(0.0), Direction(45.0, horizontal_half_angle=10.0, horizontal_max_offset=20.0), Direction(90.0)]
    many = directional_variograms(xy, z, dirs, lag=15.0, nlags=10)
    for d, ev in zip(dirs, many):
        n, lags, gamma = brute_force(xy, z, 15.0, 10, 7.5, d)
        np.testing.assert_array_equal(ev.npairs, n)
        np.testing.assert_allclose(ev.gamma, gamma, rtol=1e-12, equal_nan=True)
        one = experimental_variogram(xy, z, lag=15.0, nlags=10, direction=d)
        np.testing.assert_array_equal(one.gamma, ev.gamma)
    # pairs along the x-trend vary more east-west than north-south at short lags
    assert many[3].gamma[2] > many[1].gamma[2]
    assert many[0].dim == 2 and many[0].kind == "omnidirectional" and many[1].kind == "directional"


def test_downhole_matches_brute_force_and_axis(pair_loop):
    rng = np.random.default_rng(5)
    holes, pts = [], []
    for h in range(6):
        top = rng.uniform(0, 300, 2)
        depth = np.arange(0, 40.0, 2.0)
        # holes plunging 60 degrees towards azimuth 135
        az, dip = math.radians(135), math.radians(60)
        pts.append(np.column_stack([top[0] + depth * math.cos(dip) * math.sin(az),
                                    top[1] + depth * math.cos(dip) * math.cos(az),
                                    100 - depth * math.sin(dip)]))
        holes += [f"DH{h}"] * len(depth)
    xyz = np.vstack(pts)
    z = rng.normal(size=len(xyz))
    ev = downhole_variogram(xyz, z, holes, lag=2.0, nlags=6)
    n, _, gamma = brute_force(xyz, z, 2.0, 6, 1.0, holes=np.array(holes))
    np.testing.assert_array_equal(ev.npairs, n)
    np.testing.assert_allclose(ev.gamma, gamma, rtol=1e-12, equal_nan=True)
    assert ev.kind == "downhole"
    assert ev.direction.azimuth == pytest.approx(135.0, abs=1e-6)
    assert ev.direction.dip == pytest.approx(60.0, abs=1e-6)


def test_hand_worked_line(pair_loop):
    # z = x on a line with unit spacing: gamma(k) = k^2 / 2 for the pairs k apart
    x = np.arange(6.0)
    ev = experimental_variogram(np.column_stack([x, 0 * x]), x, lag=2.0, nlags=3, lag_half_width=0.5)
    # bins [-0.5, 0.5), [1.5, 2.5), [3.5, 4.5) hold the lags 2 and 4 only
    assert ev.npairs.tolist() == [0, 4, 2]
    np.testing.assert_allclose(ev.gamma[1:], [2.0, 8.0])
    ev = experimental_variogram(np.column_stack([x, 0 * x]), x, lag=1.0, nlags=4)
    assert ev.npairs.tolist() == [0, 5, 4, 3]
    np.testing.assert_allclose(ev.gamma[1:], [0.5, 2.0, 4.5])
    np.testing.assert_allclose(ev.lags[1:], [1.0, 2.0, 3.0])
    assert np.isnan(ev.gamma[0]) and np.isnan(ev.lags[0])
    # lags on the bin edges: [-1, 1), [1, 3), [3, 5) hold the lags 1 and 2 (5 + 4 pairs) and 3 and 4
    # (3 + 2); none holds a lag of 5
    ev = experimental_variogram(np.column_stack([x, 0 * x]), x, lag=2.0, nlags=3, lag_half_width=1.0)
    assert ev.npairs.tolist() == [0, 9, 5]
    np.testing.assert_allclose(ev.gamma[1:], [(5 * 0.5 + 4 * 2.0) / 9, (3 * 4.5 + 2 * 8.0) / 5])


def test_nan_values_are_ignored_like_missing_rows():
    rng = np.random.default_rng(9)
    xy = rng.uniform(0, 50, (80, 2))
    z = rng.normal(size=80)
    z_nan = z.copy()
    z_nan[::7] = np.nan
    keep = np.isfinite(z_nan)
    a = experimental_variogram(xy, z_nan, lag=5.0, nlags=6)
    b = experimental_variogram(xy[keep], z[keep], lag=5.0, nlags=6)
    np.testing.assert_array_equal(a.npairs, b.npairs)
    np.testing.assert_array_equal(a.gamma, b.gamma)


def test_variogram_map_matches_brute_force():
    rng = np.random.default_rng(11)
    xy = rng.uniform(0, 60, (60, 2))
    z = rng.normal(size=60)
    cell, nc = 8.0, 3
    vm = variogram_map(xy, z, cell=cell, ncells=nc, min_pairs=1)
    n = np.zeros((2 * nc + 1,) * 2)
    g = np.zeros_like(n)
    for i in range(60):
        for j in range(60):
            if i == j:
                continue
            h = xy[j] - xy[i]
            col, row = np.floor(h / cell + 0.5).astype(int)
            if abs(col) <= nc and abs(row) <= nc:
                n[row + nc, col + nc] += 1
                g[row + nc, col + nc] += 0.5 * (z[j] - z[i]) ** 2
    np.testing.assert_array_equal(vm.npairs, n)
    with np.errstate(invalid="ignore"):
        np.testing.assert_allclose(vm.gamma, np.where(n > 0, g / n, np.nan), rtol=1e-12, equal_nan=True)
    np.testing.assert_array_equal(vm.gamma, vm.gamma[::-1, ::-1])
    assert vm.dx[nc] == 0.0 and vm.dy[-1] == nc * cell


def test_bad_input_is_named():
    with pytest.raises(InputError, match="coords"):
        experimental_variogram(np.array([[0.0, np.nan], [1.0, 1.0]]), [1.0, 2.0], lag=1.0, nlags=2)
    with pytest.raises(InputError, match="values"):
        experimental_variogram(np.zeros((3, 2)), [1.0, 2.0], lag=1.0, nlags=2)
    with pytest.raises(ValueError, match="estimator"):
        experimental_variogram(np.zeros((3, 2)), [1.0, 2.0, 3.0], lag=1.0, nlags=2, estimator="median")
    with pytest.raises(ValueError, match="dip"):
        experimental_variogram(np.zeros((3, 2)), [1.0, 2.0, 3.0], lag=1.0, nlags=2,
                               direction=Direction(0.0, 30.0))


def test_progress_reports_every_chunk():
    calls = []
    xy = np.random.default_rng(0).uniform(size=(5000, 2))
    experimental_variogram(xy, xy[:, 0], lag=0.01, nlags=3, progress=lambda d, t, w: calls.append((d, t)))
    done = [d for d, _ in calls]
    assert calls[-1] == (5000, 5000) and len(calls) >= 2 and done == sorted(done)


def test_realization_on_a_grid_against_array_shifts():
    """A field on a geosim Grid (NaN outside the domain) against the exact array-shift estimate.

    On a grid, the pairs exactly k cells apart east-west are the products of the array with
    itself shifted by k columns; a narrow direction (1 degree) and lag tolerance (a tenth of a
    cell) pick exactly those pairs.
    """
    from geosim.grid import Grid

    ny, nx, cell = 30, 40, 10.0
    rng = np.random.default_rng(12)
    mask = np.ones((ny, nx), dtype=bool)
    mask[:8, :15] = False  # a corner outside the domain
    grid = Grid(1000.0, 2000.0, (cell, cell), (ny, nx), mask=mask)
    field = np.cumsum(rng.normal(size=(ny, nx)), axis=1)  # a random walk along rows
    field[~mask] = np.nan
    east = Direction(90.0, horizontal_half_angle=1.0, horizontal_max_offset=cell / 10)
    a = experimental_variogram(grid.coords(), field[grid.mask], lag=cell, nlags=6, lag_half_width=cell / 10,
                               direction=east)
    b = experimental_variogram(grid.coords(active_only=False), field.ravel(), lag=cell, nlags=6,
                               lag_half_width=cell / 10, direction=east)
    np.testing.assert_array_equal(a.npairs, b.npairs)
    np.testing.assert_allclose(a.gamma, b.gamma, rtol=1e-12, equal_nan=True)
    for k in range(1, 6):
        d = field[:, k:] - field[:, :-k]
        d = d[np.isfinite(d)]
        assert a.npairs[k] == d.size
        assert a.gamma[k] == pytest.approx(0.5 * np.mean(d**2), rel=1e-12)
    # a random walk: gamma(k) = k / 2 (a sum of k unit steps has variance k). Sampling error: each
    # squared increment has relative variance 2, and about N / k of the N ~ 900 pairs at lag k are
    # independent, so gamma(k) has relative SE sqrt(2 k / N): 0.047 at k = 1, 0.105 at k = 5; the
    # ratio has about 0.115, and 0.25 is a little over two of those.
    assert a.gamma[5] / a.gamma[1] == pytest.approx(5.0, rel=0.25)


def _random_case(rng, trial):
    """Rows sorted by group then x (as the variogram functions sort them), with ties, coincident
    points, lags on bin edges, 2-D and 3-D layouts, one to five groups, and one to four directions."""
    n = int(rng.integers(2, 260))
    xyz = np.round(rng.uniform(0.0, 500.0, (n, 3)), int(rng.integers(0, 3)))
    lag = float(rng.uniform(5.0, 60.0))
    if trial % 4 == 1:  # a lattice with whole-number lags, many of them on bin edges
        xyz, lag = rng.integers(0, 12, (n, 3)).astype(float), float(rng.integers(1, 4))
    if trial % 3 == 0:
        xyz[:, 2] = 0.0
    groups = rng.integers(0, int(rng.integers(1, 6)), n)
    order = np.lexsort((xyz[:, 0], groups))
    xyz, groups = np.ascontiguousarray(xyz[order]), groups[order]
    ends = np.flatnonzero(np.diff(groups)) + 1
    group_end = np.repeat(np.append(ends, n), np.diff(np.concatenate([[0], ends, [n]]))).astype(np.int64)
    rows = [np.array([1.0] + [0.0] * 9 + [-1.0, -1.0, np.inf, np.inf])]
    for _ in range(int(rng.integers(0, 4))):
        rows.append(Direction(float(rng.uniform(0, 180)), float(rng.uniform(0, 60)) if trial % 3 else 0.0,
                              horizontal_half_angle=float(rng.uniform(5, 60)),
                              vertical_half_angle=float(rng.uniform(5, 60)),
                              horizontal_max_offset=float(rng.choice([np.inf, 40.0])),
                              vertical_max_offset=float(rng.choice([np.inf, 10.0])))._row())
    nlags = int(rng.integers(1, 15))
    tol = lag * float(rng.choice([0.5, 0.3, 1.2, 2.5]))  # overlapping bins too
    i0 = int(rng.integers(0, n))
    return (xyz, rng.standard_normal(n), group_end, i0, int(rng.integers(i0, n + 1)), np.vstack(rows), lag, tol,
            nlags, (nlags - 1) * lag + tol, bool(rng.integers(0, 2)))


def test_numpy_pair_loop_adds_the_kernels_sums_bit_for_bit():
    # random layouts, row ranges and accumulators that already hold sums (as a chunk's do not, but
    # the kernel's contract allows): the same bits, which needs the same operations in the same order
    rng = np.random.default_rng(20261203)
    for trial in range(80):
        case = _random_case(rng, trial)
        start = [rng.standard_normal((case[5].shape[0], case[8])) if trial % 2 else
                 np.zeros((case[5].shape[0], case[8])) for _ in range(3)]
        compiled, numpy_ = [a.copy() for a in start], [a.copy() for a in start]
        pairs.accumulate_directional(*case, *compiled)
        pairs.accumulate_directional_numpy(*case, *numpy_)
        for a, b in zip(compiled, numpy_):
            assert np.array_equal(a, b), trial


def test_variograms_of_small_data_sets_take_numpy_with_the_same_result(monkeypatch):
    # the data sets below have fewer pairs than NUMPY_PAIRS_MAX, so they take numpy's loop; forced
    # through the kernel they give the same bits, in 2-D and 3-D, by hole and robust
    rng = np.random.default_rng(8)
    xyz = rng.uniform(0.0, 300.0, (200, 3))
    z = rng.standard_normal(200)
    holes = np.repeat(np.arange(10), 20)
    assert 200 * 199 // 2 <= pairs.NUMPY_PAIRS_MAX
    args = [(xyz[:, :2], z, 25.0, 10, None, [None, Direction(30.0), Direction(120.0)], "matheron", None, None),
            (xyz, z, 25.0, 10, 20.0, [None, Direction(60.0, 20.0)], "cressie-hawkins", None, None),
            (xyz, z, 10.0, 6, None, [None], "matheron", holes, None)]
    numpy_ = [_compute(*a) for a in args]
    monkeypatch.setattr(pairs, "NUMPY_PAIRS_MAX", -1)
    for a, first in zip(args, numpy_):
        for one, other in zip(first, _compute(*a)):
            assert np.array_equal(one.npairs, other.npairs) and one.npairs.sum() > 0
            assert np.array_equal(one.gamma, other.gamma, equal_nan=True)
            assert np.array_equal(one.lags, other.lags, equal_nan=True)
