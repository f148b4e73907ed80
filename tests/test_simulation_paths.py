"""Search template, node covariance table and multi-grid path of the sequential engine."""
import numpy as np
import pytest
from numba import njit

import geosim
from geosim.simulation.paths import covariance_table, grid_axes, node_template, offset_lags, path_levels, \
    random_path
from geosim.simulation.sequential import _data_covariances
from geosim.variogram.compiled import cov_lag


def test_template_is_the_ellipse_sorted_by_anisotropic_distance():
    grid = geosim.Grid(0.0, 0.0, (10.0, 5.0), (40, 40))
    search = geosim.Anisotropy((60.0, 25.0), azimuth=30.0)
    offsets = node_template(grid, search)
    _, _, step = grid_axes(grid)
    lags = offset_lags(offsets, step)
    r = np.linalg.norm(lags @ search.matrix().T, axis=1)
    assert np.all(np.diff(r) >= -1e-12) and r.max() <= 1.0 + 1e-9
    # every offset of the box inside the ellipse is there (brute force over a wider box)
    o = np.arange(-15, 16)
    di, dj = np.meshgrid(o, o, indexing="ij")
    box = np.column_stack([np.zeros(di.size, dtype=int), di.ravel(), dj.ravel()])
    rb = np.linalg.norm(offset_lags(box, step) @ search.matrix().T, axis=1)
    inside = box[(rb <= 1.0) & (np.abs(box).sum(axis=1) > 0)]
    assert {tuple(v) for v in inside} == {tuple(v) for v in offsets}
    # the farthest offsets lie along the major axis, 30 degrees east of north (row -1 is north)
    far = lags[np.argsort(np.linalg.norm(lags, axis=1))[-4:]]
    bearing = np.degrees(np.arctan2(far[:, 0], far[:, 1])) % 180.0
    assert np.all(np.abs(bearing - 30.0) <= 8.0), bearing


def test_covariance_table_matches_the_model():
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0, 2.0), (6, 12, 12))
    model = geosim.Nugget(0.2) + geosim.Exponential(0.8, geosim.Anisotropy((50.0, 30.0, 6.0), azimuth=20.0, dip=5.0))
    offsets = node_template(grid, geosim.Anisotropy((40.0, 30.0, 5.0), azimuth=20.0, dip=5.0))
    _, _, step = grid_axes(grid)
    table, centre = covariance_table(model.compiled(), offsets, step)
    diffs = offsets[::7, None, :] - offsets[None, ::5, :]
    diffs = diffs.reshape(-1, 3)
    got = table[tuple((centre + diffs).T)]
    np.testing.assert_allclose(got, model.covariance(offset_lags(diffs, step)), rtol=1e-12, atol=1e-15)


def test_multigrid_path_visits_coarse_nodes_first():
    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0), (33, 40))
    offsets = node_template(grid, geosim.Anisotropy.isotropic(20.0))
    levels = path_levels(grid, offsets)
    assert levels.max() == 3
    rows, cols = np.unravel_index(np.arange(grid.size), grid.shape)
    assert np.array_equal(levels == 3, (rows % 8 == 0) & (cols % 8 == 0))
    path = random_path(levels, np.random.default_rng(4))
    assert np.array_equal(np.sort(path), np.arange(grid.size))
    assert np.all(np.diff(levels[path]) <= 0)
    assert np.array_equal(path_levels(grid, offsets, 0), np.zeros(grid.size))


@njit
def _cov_lag_rows(cm, lags, out):
    # the reference: cov_lag called on each lag vector as it is, one by one
    for i in range(lags.shape[0]):
        out[i] = cov_lag(cm, lags[i, 0], lags[i, 1], lags[i, 2])


MODELS = [geosim.Nugget(0.1) + geosim.Spherical(0.5, geosim.Anisotropy((37.0, 21.0, 9.0), azimuth=33.0, dip=-7.0,
                                                                       rake=11.0))
          + geosim.Gaussian(0.4, geosim.Anisotropy((80.0, 80.0, 12.0), azimuth=120.0)),
          # a tabulated structure: the kernels interpolate its table
          geosim.Nugget(0.1) + geosim.Matern(0.9, geosim.Anisotropy((40.0, 20.0, 7.0), azimuth=15.0), param=1.5)]


@pytest.mark.parametrize("model", MODELS, ids=["closed-forms", "tabulated"])
def test_covariance_table_has_the_bits_of_cov_lag_at_each_offset(model):
    # the sequential kernel takes node-node covariances from the table when it exists and calls
    # cov_lag otherwise; the table is filled through cov_matrix_into (lag minus a zero origin),
    # which must give exactly cov_lag's bits at (dj dx, di dy, dk dz)
    cm = model.compiled()
    for grid in (geosim.Grid(0.0, 0.0, (10.0, 10.0, 2.0), (6, 12, 12)), geosim.Grid(3.0, 7.0, (7.3, 4.1), (40, 50))):
        offsets = node_template(grid, geosim.Anisotropy((40.0, 30.0, 5.0), azimuth=20.0, dip=5.0))
        _, _, step = grid_axes(grid)
        table, centre = covariance_table(cm, offsets, step)
        k, i, j = (np.indices(table.shape).reshape(3, -1).T - centre).T
        lags = np.column_stack([j * step[0], i * step[1], k * step[2]])
        want = np.empty(len(lags))
        _cov_lag_rows(cm, lags, want)
        assert np.array_equal(table.ravel(), want)


@pytest.mark.parametrize("model", MODELS, ids=["closed-forms", "tabulated"])
def test_data_covariances_have_the_bits_of_cov_lag_and_are_symmetric(model):
    # the engine's data-data matrix (used below DATA_COV_LIMIT data) against cov_lag at x_i - x_j
    # for i >= j, which is what the kernel evaluates above the limit
    cm = model.compiled()
    rng = np.random.default_rng(8)
    xyz = np.column_stack([rng.uniform(0, 300, 120), rng.uniform(0, 300, 120), rng.uniform(0, 30, 120)])
    xyz[7] = xyz[3]  # a repeated point: the nugget enters at zero lag
    got = _data_covariances(cm, xyz)
    i, j = np.tril_indices(len(xyz))
    want = np.empty(len(i))
    _cov_lag_rows(cm, xyz[i] - xyz[j], want)
    assert np.array_equal(got[i, j], want) and np.array_equal(got, got.T)
    assert got[7, 3] == got[3, 3] == model.sill
