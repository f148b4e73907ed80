"""Cell declustering: weights known by construction, the size scan, its options."""
from __future__ import annotations

import numpy as np
import pytest

import geosim
from geosim.declustering import cell_declustering, cell_weights


def grid_plus_cluster(n_cluster: int = 9):
    """A 10 x 10 grid at 10 m spacing plus a dense cluster just north-east of node (40, 40).

    With 10 m cells and origins shifted by less than a cell from the lower-left datum,
    every cell holds exactly one grid node, and the cluster shares the cell of node (40, 40):
    100 occupied cells, so grid nodes weigh 1/100 and the 1 + n_cluster samples of the
    clustered cell 1/(100 (1 + n_cluster)) each, whatever the offset (by construction).
    """
    g = np.arange(10) * 10.0
    xx, yy = np.meshgrid(g, g)
    grid = np.column_stack([xx.ravel(), yy.ravel()])
    rng = np.random.default_rng(0)
    cluster = 40.0 + rng.uniform(0.001, 0.05, size=(n_cluster, 2))
    coords = np.vstack([grid, cluster])
    centre = np.flatnonzero((grid == [40.0, 40.0]).all(axis=1))[0]
    return coords, centre, len(grid)


def test_regular_grid_plus_cluster_weights_known_by_construction():
    coords, centre, n_grid = grid_plus_cluster(9)
    w = cell_weights(coords, 10.0, origin_shifts=8)
    expected = np.full(len(coords), 1.0 / 100)
    expected[centre] = expected[n_grid:] = 1.0 / 1000
    np.testing.assert_allclose(w, expected, rtol=1e-12)
    assert w.sum() == pytest.approx(1.0)


def test_scan_finds_a_smaller_mean_when_highs_are_clustered():
    coords, centre, n_grid = grid_plus_cluster(30)
    v = np.ones(len(coords))
    v[centre] = v[n_grid:] = 10.0
    res = cell_declustering(coords, v, size_count=12, origin_shifts=4, pick_mean="lowest")
    assert res.weights.sum() == pytest.approx(1.0) and (res.weights > 0).all()
    assert res.naive_mean == pytest.approx(v.mean())
    assert res.declustered_mean == pytest.approx(float(res.weights @ v))
    assert res.declustered_mean == pytest.approx(res.means.min())
    assert len(res.cell_sizes) == len(res.means) == 12 and np.all(np.diff(res.cell_sizes) > 0)
    # the grid alone has mean (99 + 10)/100 = 1.09; the clustered naive mean is far above it
    assert res.naive_mean > 3.0
    assert res.declustered_mean < 1.5
    assert res.cell_size in res.cell_sizes
    assert "lowest mean" in res.describe()


def test_pick_highest_mean_when_lows_are_clustered():
    coords, centre, n_grid = grid_plus_cluster(30)
    v = np.full(len(coords), 5.0)
    v[centre] = v[n_grid:] = 0.5
    res = cell_declustering(coords, v, size_count=10, origin_shifts=4, pick_mean="highest")
    assert res.declustered_mean == pytest.approx(res.means.max())
    assert res.declustered_mean > res.naive_mean + 1.0


def test_equal_weights_on_a_regular_grid_and_in_one_big_cell():
    coords, _, n_grid = grid_plus_cluster(0)
    for size in (10.0, 1000.0):
        np.testing.assert_allclose(cell_weights(coords, size, origin_shifts=5), 1.0 / n_grid)


def test_single_size_and_given_sizes():
    coords, centre, n_grid = grid_plus_cluster(9)
    v = np.arange(len(coords), dtype=float)
    res = cell_declustering(coords, v, cell_sizes=10.0)
    assert res.cell_size == 10.0 and len(res.cell_sizes) == 1
    np.testing.assert_allclose(res.weights, cell_weights(coords, 10.0))
    res = cell_declustering(coords, v, cell_sizes=[30.0, 5.0, 10.0])
    assert res.cell_sizes.tolist() == [5.0, 10.0, 30.0]


def test_vertical_cell_ratio_in_3d():
    # hole A: ten samples 1 m apart at (0, 0); hole B: one sample 100 m away (by construction)
    a = np.column_stack([np.zeros(10), np.zeros(10), np.arange(10.0)])
    coords = np.vstack([a, [[100.0, 0.0, 5.0]]])
    w = cell_weights(coords, 50.0, origin_shifts=4)  # one 50 m cell holds all of hole A
    np.testing.assert_allclose(w, np.r_[np.full(10, 1 / 20), 0.5])
    w = cell_weights(coords, 50.0, origin_shifts=4, vertical_ratio=0.02)  # 1 m thick cells
    np.testing.assert_allclose(w, np.full(11, 1 / 11))


def test_progress_and_bad_input():
    coords, _, _ = grid_plus_cluster(3)
    v = np.ones(len(coords))
    calls = []
    cell_declustering(coords, v, size_count=5, progress=lambda d, t, what: calls.append((d, t)))
    assert calls == [(i, 5) for i in range(1, 6)]
    with pytest.raises(ValueError, match="finite"):
        cell_declustering(coords, np.r_[v[:-1], np.nan])
    with pytest.raises(ValueError, match="one entry per sample"):
        cell_declustering(coords, v[:-1])
    with pytest.raises(ValueError, match="pick_mean"):
        cell_declustering(coords, v, pick_mean="median")
    with pytest.raises(ValueError, match="positive"):
        cell_declustering(coords, v, cell_sizes=[0.0, 5.0])
    with pytest.raises(ValueError, match="one horizontal position"):
        cell_declustering(np.zeros((3, 2)), [1.0, 2.0, 3.0])
    assert geosim.cell_declustering is cell_declustering
