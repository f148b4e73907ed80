"""Decision figures are computed from exactly the float32 values the rasters store."""
from __future__ import annotations

import functools

import numpy as np
import rasterio

import geosim
from geosim.ensemble import RealizationWriter
from geosim.summaries import fraction_above, grade_tonnage


def plateau(scores):
    # a spike of tied data back-transforms to a plateau of equal values: here 0.7 below score 0
    # and 0.1 just above it; neither is a float32 number (float32(0.7) < 0.7 < float32(0.1) + ...)
    s = np.asarray(scores, dtype=float)
    return np.where(s < 0.0, 0.7, np.where(s < 0.5, 0.1, 0.1 + s))


def written_and_reported(tmp_path, figures):
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (20, 30))
    writer = RealizationWriter(tmp_path, grid, back_transform=plateau, figures=figures)
    field = np.random.default_rng(2).standard_normal(grid.shape)
    record = writer(0, field)
    with rasterio.open(tmp_path / record["files"][0]) as src:
        stored = src.read(1)
    assert stored.dtype == np.float32
    return grid, stored.astype(np.float64), record["figures"]


def test_grade_tonnage_matches_a_hand_count_on_the_written_raster(tmp_path):
    cut = [0.1, 0.7]
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (20, 30))
    _, stored, got = written_and_reported(tmp_path, functools.partial(grade_tonnage, grid=grid, cutoffs=cut,
                                                                      density=2.5, thickness=2.0))
    # by hand on the values as read: cells at or above the cut-off, 10 x 10 x 2 m x 2.5 t/m^3 each
    for k, c in enumerate(cut):
        above = stored >= c
        np.testing.assert_array_equal(got["tonnage"][k], above.sum() * 500.0)
        np.testing.assert_array_equal(got["mean_grade"][k], stored[above].mean())
    # the plateau at 0.7 is stored as float32(0.7) < 0.7, so no cell of it reaches the 0.7 cut-off
    assert got["tonnage"][1] == (stored > 0.7).sum() * 500.0


def test_fraction_above_matches_a_hand_count_on_the_written_raster(tmp_path):
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (20, 30))
    _, stored, got = written_and_reported(tmp_path, functools.partial(fraction_above, grid=grid,
                                                                      thresholds=[0.1, 0.7]))
    for k, c in enumerate([0.1, 0.7]):
        # strictly above: the plateau at 0.1 is stored as float32(0.1) > 0.1, so it counts
        np.testing.assert_array_equal(got["fraction_above"][k], (stored > c).mean())
