"""Change of support (geosim.support): block averages, power averages, ranking, values at points.

Each mode is checked against an exact or published reference:

* block averages: dispersion variances of unconditional realizations against the mean
  covariance over the block (Journel and Huijbregts 1978, Mining Geostatistics, chapter II.E,
  dispersion variance and Krige's additivity relation; Isaaks and Srivastava 1989, An
  Introduction to Applied Geostatistics, chapter 19 "Change of support"), and brute-force
  averages of the node centres inside each block;
* power averages: scipy.stats' arithmetic, geometric and harmonic means at 1, 0 and -1,
  the exact parallel and series results of a layered medium (Freeze and Cherry 1979,
  Groundwater, section 2.4 "Homogeneity and anisotropy", eqs. 2.31-2.32, from memory) and the
  Wiener bounds (harmonic <= any power mean <= arithmetic);
* ranking: hand-worked percentiles (Hyndman and Fan 1996, type 7);
* point values: the node whose centre is nearest, found by brute force.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg
import scipy.stats

import geosim
from geosim.errors import InputError
from geosim.support import (block_average, block_layout, block_tonnes, locate_nodes, power_average, power_mean,
                            rank_realizations, values_at)


# -- dispersion variance -----------------------------------------------------------------------

def _spherical(h: np.ndarray, a: float) -> np.ndarray:
    """Spherical covariance of unit sill and range ``a``, written out (not geosim's)."""
    r = np.minimum(h / a, 1.0)
    return 1.0 - 1.5 * r + 0.5 * r ** 3


def test_block_dispersion_variance_matches_the_mean_covariance_over_the_block():
    # 48 x 48 unit cells, spherical range 12, blocks of 6 x 6 cells (64 blocks)
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0), (48, 48))
    pts = grid.coords()
    cov = _spherical(np.hypot(*(pts[:, None, :] - pts[None, :, :]).transpose(2, 0, 1)), 12.0)
    factor = scipy.linalg.cholesky(cov + 1e-10 * np.eye(len(pts)), lower=True)
    n_real = 300
    rng = np.random.default_rng(20261202)
    fields = (factor @ rng.standard_normal((len(pts), n_real))).T.reshape(n_real, *grid.shape)

    layout = block_layout(grid, (6.0, 6.0))
    assert layout.blocks.shape == (8, 8) and layout.kept.all()
    # mean covariances (J&H 1978, II.E): over one block (every block alike) and over the domain V
    block = np.array([[x, y] for x in range(6) for y in range(6)], dtype=float)
    c_vv = _spherical(np.hypot(*(block[:, None, :] - block[None, :, :]).transpose(2, 0, 1)), 12.0).mean()
    c_VV = cov.mean()
    expected_blocks = c_vv - c_VV             # D^2(v|V) = Cbar(v,v) - Cbar(V,V)
    expected_points = 1.0 - c_VV              # D^2(.|V) = C(0) - Cbar(V,V)
    expected_within = 1.0 - c_vv              # D^2(.|v)

    between = np.empty(n_real)
    points = np.empty(n_real)
    within = np.empty(n_real)
    for r, f in enumerate(fields):
        b = block_average(f, layout)
        between[r] = b.var()                  # blocks partition V: divisor = number of blocks
        points[r] = f.var()
        within[r] = np.mean([f[6 * i:6 * i + 6, 6 * j:6 * j + 6].var() for i in range(8) for j in range(8)])
    # Krige's additivity relation holds in each realization exactly for equal blocks that partition V
    np.testing.assert_allclose(points, within + between, rtol=1e-10)
    # the means over independent realizations agree with the model within 4 standard errors
    # (standard error = spread of the per-realization figure / sqrt(n_real))
    for observed, expected in ((between, expected_blocks), (points, expected_points), (within, expected_within)):
        se = observed.std(ddof=1) / math.sqrt(n_real)
        assert abs(observed.mean() - expected) < 4 * se, (observed.mean(), expected, se)
    # and the block variance is well below the point variance (the support effect)
    assert expected_blocks < 0.75 * expected_points


def _brute_force_blocks(field, grid, start, size, shape):
    """Mean of the node centres inside each block, block by block (rows north to south)."""
    ny_b, nx_b = shape
    xs = grid.axes()[1]
    ys = grid.axes()[0]
    out = np.full(shape, np.nan)
    for bi in range(ny_b):
        y_hi = start[1] + (ny_b - bi) * size[1]
        for bj in range(nx_b):
            x_lo = start[0] + bj * size[0]
            rows = [i for i, y in enumerate(ys) if y_hi - size[1] <= y < y_hi]
            cols = [j for j, x in enumerate(xs) if x_lo <= x < x_lo + size[0]]
            vals = [field[i, j] for i in rows for j in cols if not np.isnan(field[i, j])]
            if vals:
                out[bi, bj] = np.mean(vals)
    return out


def test_any_block_size_and_origin_averages_the_nodes_inside_each_block():
    grid = geosim.Grid(100.0, 200.0, (10.0, 10.0), (7, 11))
    field = np.random.default_rng(1).normal(size=grid.shape)
    layout = block_layout(grid, (25.0, 30.0), origin=(90.0, 185.0), min_fraction=0.01)
    assert (layout.blocks.xmin, layout.blocks.ymin) == (90.0, 185.0)
    assert layout.blocks.xmax >= grid.xmax and layout.blocks.ymax >= grid.ymax
    expected = _brute_force_blocks(field, grid, (90.0, 185.0), (25.0, 30.0), layout.blocks.shape)
    np.testing.assert_allclose(block_average(field, layout), expected, rtol=1e-12)
    # 25 m blocks on 10 m cells hold 2 or 3 node columns; 30 m blocks exactly 3 rows
    assert set(np.unique(layout.nominal)) <= {6, 9}


def test_min_fraction_drops_blocks_mostly_outside_the_domain():
    mask = np.ones((4, 4), dtype=bool)
    mask[:, 3] = False            # east column outside
    mask[0, 2] = False
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0), (4, 4), mask=mask)
    field = np.where(mask, np.arange(16.0).reshape(4, 4), np.nan)
    lay = block_layout(grid, (2.0, 2.0), min_fraction=0.6)
    np.testing.assert_allclose(lay.fraction, [[1.0, 0.25], [1.0, 0.5]])
    out = block_average(field, lay)
    assert np.isnan(out[0, 1]) and np.isnan(out[1, 1])        # 1/4 and 2/4 inside: dropped
    assert out[1, 0] == np.mean([8.0, 9.0, 12.0, 13.0])
    half = block_average(field, block_layout(grid, (2.0, 2.0), min_fraction=0.5))
    assert half[1, 1] == np.mean([10.0, 14.0])                # 2/4 inside: kept, mean of the inside nodes


def test_density_weighted_block_grade_and_tonnes():
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0, 2.0), (1, 2, 2))
    grade = np.array([[[1.0, 2.0], [3.0, 4.0]]])
    density = np.array([[[2.0, 3.0], [2.5, 2.5]]])
    lay = block_layout(grid, (10.0, 10.0, 2.0))
    # grade of the block's tonnage: sum(d g) / sum(d), worked by hand = (2 + 6 + 7.5 + 10) / 10
    assert block_average(grade, lay, weights=density)[0, 0, 0] == pytest.approx(2.55)
    assert block_average(grade, lay, weights=2.7)[0, 0, 0] == pytest.approx(2.5)
    assert block_tonnes(lay, density)[0, 0, 0] == pytest.approx(50.0 * 10.0)


def test_3d_blocks_follow_levels_and_rows():
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0, 1.0), (4, 2, 2))
    field = np.arange(16.0).reshape(4, 2, 2)
    out = block_average(field, block_layout(grid, (2.0, 2.0, 2.0)))
    np.testing.assert_allclose(out.ravel(), [field[:2].mean(), field[2:].mean()])


def test_bad_block_sizes_are_refused():
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (5, 5))
    with pytest.raises(ValueError, match="smaller than the cell"):
        block_layout(grid, (5.0, 20.0))
    with pytest.raises(ValueError, match="not a whole number of cells"):
        block_layout(grid, (25.0, 20.0), aligned=True)
    with pytest.raises(ValueError, match="not on a cell edge"):
        block_layout(grid, (20.0, 20.0), origin=(3.0, 0.0), aligned=True)
    with pytest.raises(ValueError, match="2-D"):
        block_layout(grid, (20.0, 20.0, 5.0))


# -- power averages ----------------------------------------------------------------------------

def test_power_average_is_the_arithmetic_geometric_and_harmonic_mean_at_1_0_minus_1():
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0), (6, 9))
    k = 10.0 ** np.random.default_rng(3).normal(-4.0, 1.0, size=grid.shape)
    lay = block_layout(grid, (3.0, 3.0))
    blocks = [k[3 * i:3 * i + 3, 3 * j:3 * j + 3].ravel() for i in range(2) for j in range(3)]
    for p, reference in ((1, np.mean), (0, scipy.stats.gmean), (-1, scipy.stats.hmean)):
        np.testing.assert_allclose(power_average(k, lay, p).ravel(), [reference(b) for b in blocks], rtol=1e-12)
        np.testing.assert_allclose(power_mean(blocks[0], p), reference(blocks[0]), rtol=1e-12)


def test_layered_medium_gives_the_parallel_and_series_conductivities():
    # four levels 1 m thick: 1e-3 m/s (two levels), 1e-5, 1e-4; flow along layers sees the
    # thickness-weighted arithmetic mean, flow across them the harmonic mean (Freeze and Cherry
    # 1979, eqs. 2.31-2.32, from memory).  Worked by hand:
    #   Kx = (2 x 1e-3 + 1e-5 + 1e-4) / 4 = 5.275e-4;  Kz = 4 / (2/1e-3 + 1/1e-5 + 1/1e-4) = 3.5714...e-5
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0, 1.0), (4, 3, 3))
    layers = np.array([1e-3, 1e-5, 1e-3, 1e-4])
    k = np.broadcast_to(layers[:, None, None], grid.shape).copy()
    lay = block_layout(grid, (3.0, 3.0, 4.0))
    kx = power_average(k, lay, 1.0)[0, 0, 0]
    kz = power_average(k, lay, -1.0)[0, 0, 0]
    assert kx == pytest.approx(5.275e-4, rel=1e-12)
    assert kz == pytest.approx(4.0 / 112000.0, rel=1e-12)
    # every exponent in between lies inside these Wiener bounds, increasing with the exponent
    inner = [power_average(k, lay, p)[0, 0, 0] for p in np.linspace(-1.0, 1.0, 9)]
    assert kz * (1 - 1e-12) <= min(inner) and max(inner) <= kx * (1 + 1e-12)
    assert np.all(np.diff(inner) > 0)


def test_wiener_bounds_hold_for_a_random_field():
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0), (20, 20))
    k = 10.0 ** np.random.default_rng(9).normal(-4.0, 1.5, size=grid.shape)
    lay = block_layout(grid, (5.0, 4.0))
    low, high = power_average(k, lay, -1.0), power_average(k, lay, 1.0)
    for p in (-0.7, -0.2, 0.0, 1 / 3, 0.8):
        mid = power_average(k, lay, p)
        assert np.all(low <= mid * (1 + 1e-12)) and np.all(mid <= high * (1 + 1e-12))


def test_power_average_refuses_bad_exponents_and_non_positive_conductivity():
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0), (2, 2))
    lay = block_layout(grid, (2.0, 2.0))
    k = np.array([[1e-4, 0.0], [-1e-6, 1e-5]])
    with pytest.raises(ValueError, match="between -1 .* and 1"):
        power_average(np.ones(grid.shape), lay, 1.5)
    for p in (0.0, -1.0, -0.5):
        with pytest.raises(InputError, match="2 of 4 values are zero or negative"):
            power_average(k, lay, p)
    with pytest.raises(InputError, match="1 of 4 values are negative"):
        power_average(k, lay, 0.5)
    assert power_average(k, lay, 1.0)[0, 0] == pytest.approx((1e-4 - 1e-6 + 1e-5) / 4)


# -- ranking -----------------------------------------------------------------------------------

def test_ranking_picks_the_realizations_nearest_each_percentile():
    # 11 realizations with figures 0..10 in a shuffled order: type-7 P10, P50, P90 of 0..10 are
    # exactly 1, 5 and 9, so the picks are the realizations holding those figures
    figures = np.array([7.0, 1.0, 10.0, 5.0, 0.0, 9.0, 3.0, 2.0, 8.0, 6.0, 4.0])
    r = rank_realizations(figures)
    assert r.picked() == {"P10": 1, "P50": 3, "P90": 5}
    np.testing.assert_allclose(r.targets, [1.0, 5.0, 9.0])
    assert r.ranks.tolist() == [8, 2, 11, 6, 1, 10, 4, 3, 9, 7, 5]
    # five figures: P10 sits at sorted position 0.4 -> 1.8 (nearest 1.0), P90 at 3.6 -> 8.2 (nearest 9.0)
    r = rank_realizations([5.0, 1.0, 9.0, 3.0, 7.0], indices=[10, 11, 12, 13, 14])
    assert r.picked() == {"P10": 11, "P50": 10, "P90": 12}
    np.testing.assert_allclose(r.targets, [1.8, 5.0, 8.2])


def test_ranking_leaves_out_undefined_figures_and_breaks_ties_by_index():
    r = rank_realizations([2.0, np.nan, 2.0, 4.0])
    assert r.ranks.tolist() == [1, 0, 2, 3]
    assert r.picked()["P10"] == 0 and r.picked()["P90"] == 3
    with pytest.raises(ValueError, match="every realization"):
        rank_realizations([np.nan, np.nan])


# -- values at points --------------------------------------------------------------------------

def test_point_values_are_the_values_of_the_node_holding_each_point():
    mask = np.ones((5, 6), dtype=bool)
    mask[0, 0] = False
    grid = geosim.Grid(1000.0, 2000.0, (10.0, 20.0), (5, 6), mask=mask)
    field = np.where(mask, np.random.default_rng(4).normal(size=grid.shape), np.nan)
    rng = np.random.default_rng(5)
    pts = np.column_stack([rng.uniform(1000.0, 1060.0, 200), rng.uniform(2000.0, 2100.0, 200)])
    loc = locate_nodes(grid, pts)
    assert not loc.outside_grid.any()
    # brute force: the node whose centre is nearest in each axis' own units holds the point
    centres = grid.coords(active_only=False)
    nearest = np.argmin(np.abs((pts[:, None, :] - centres[None, :, :]) / np.array(grid.cell)).max(axis=2), axis=1)
    np.testing.assert_array_equal(loc.index, nearest)
    np.testing.assert_array_equal(values_at(field, loc.index), field.ravel()[nearest])
    np.testing.assert_array_equal(loc.outside_domain, ~mask.ravel()[nearest])
    out = locate_nodes(grid, np.array([[999.0, 2050.0], [1030.0, 2100.0], [1030.0, 2099.9]]))
    assert out.outside_grid.tolist() == [True, True, False] and out.index[:2].tolist() == [-1, -1]


def test_point_values_in_3d_take_the_level_too():
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0, 2.0), (3, 2, 2), zmin=10.0)
    field = np.arange(12.0).reshape(3, 2, 2)
    loc = locate_nodes(grid, np.array([[0.5, 1.5, 10.1], [1.5, 0.5, 15.9], [0.5, 0.5, 16.0]]))
    assert values_at(field, loc.index[:2]).tolist() == [0.0, 11.0]
    assert loc.outside_grid.tolist() == [False, False, True]
