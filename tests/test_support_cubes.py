"""Block and upscaled outputs of 3-D grids as CF NetCDF cubes, and as per-level GeoTIFFs on request.

The writer's cubes are checked against block values computed here from the point-support
fields with numpy alone (aligned blocks are a reshape and a mean; geometric and harmonic
means by scipy.stats.gmean and hmean), against numpy's type-7 percentiles (Hyndman and Fan
1996), and read back through GDAL's netCDF driver (rasterio) for the georeferencing, as
tests/test_cube.py does for the point-support cubes.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import rasterio
import scipy.stats

import geosim
import geosim.crs
import geosim.errors
import geosim.summaries
import geosim.pipeline as pipeline
from geosim.cautions import CAUTION
from geosim.config.runspec import load_spec
from geosim.ensemble import RealizationWriter
from geosim.support import block_layout
from geosim.support_outputs import Ranker, SupportWriter

xr = pytest.importorskip("xarray")
pytest.importorskip("netCDF4")

ORE = Path(__file__).resolve().parent.parent / "sample_fields" / "ore_prospect" / "run.toml"
CUTOFFS = (0.8, 1.2)


def _grid():
    # 4 levels of 4 x 6 nodes, 10 x 10 x 5 m cells, two nodes outside the domain
    mask = np.ones((4, 4, 6), dtype=bool)
    mask[0, 0, :2] = False
    return geosim.Grid(500000.0, 7000000.0, (10.0, 10.0, 5.0), (4, 4, 6), crs=geosim.crs.parse_crs(32750),
                       zmin=100.0, mask=mask)


def _fields(grid, n):
    rng = np.random.default_rng(11)
    out = []
    for _ in range(n):
        f = np.exp(rng.normal(0.0, 0.5, grid.shape))
        out.append(np.where(grid.mask, f, np.nan))
    return out


def _blocks_by_reshape(field, reduce):
    """2 x 2 x 2 nodes per block of the grid above: (2, 2, 3) blocks, NaN nodes left out."""
    out = np.empty((2, 2, 3))
    for k in range(2):
        for r in range(2):
            for c in range(3):
                v = field[2 * k:2 * k + 2, 2 * r:2 * r + 2, 2 * c:2 * c + 2].ravel()
                out[k, r, c] = reduce(v[~np.isnan(v)])
    return out


def _writer(tmp_path, grid, *, level_geotiffs=False, ranking=None):
    layout = block_layout(grid, (20.0, 20.0, 10.0), min_fraction=0.5)
    sinks = []
    for name, p in (("blocks", None), ("upscaled", 0.0), ("upscaled_vertical", -1.0)):
        tags = {"caution": CAUTION, "support": name, "support_exponent": "" if p is None else f"{p:g}"}
        writer = RealizationWriter(tmp_path / name, layout.blocks, tags=tags, units="g/t", cube="netcdf",
                                   level_geotiffs=level_geotiffs, variable="au",
                                   figures=lambda v, g=layout.blocks: geosim.summaries.fraction_above(v, g, [1.0]))
        sinks.append(SupportWriter(name, layout, writer, exponent=p))
    return RealizationWriter(tmp_path, grid, units="g/t", derived=sinks, ranking=ranking), layout


def _written(writer, fields):
    """The records of ``fields`` written through ``writer``, its stores opened first as a run does."""
    writer.open_stores(len(fields))
    return [writer(i, f) for i, f in enumerate(fields)]


def test_block_cubes_hold_the_block_values_and_their_summary(tmp_path):
    grid = _grid()
    fields = _fields(grid, 5)
    writer, layout = _writer(tmp_path, grid)
    records = _written(writer, fields)
    files = writer.finish(records, cutoffs=CUTOFFS)
    stored = [np.asarray(f, dtype=np.float32).astype(float) for f in fields]  # as the point files hold them
    for name, reduce in (("blocks", np.mean), ("upscaled", scipy.stats.gmean),
                         ("upscaled_vertical", scipy.stats.hmean)):
        folder = tmp_path / name
        # one store for all realizations (no file per realization), none of the per-level GeoTIFFs
        assert sorted(p.name for p in (folder / "realizations").iterdir()) == ["store.zarr"]
        assert not list(folder.rglob("*.tif")) and not list(folder.rglob("r0*"))
        expected = np.stack([_blocks_by_reshape(f, reduce) for f in stored])
        with xr.open_dataset(folder / "realizations.nc") as ds:
            np.testing.assert_allclose(ds["au"].values, expected, rtol=2e-6)
            assert ds["au"].dims == ("realization", "z", "y", "x")
            assert ds["realization"].values.tolist() == [0, 1, 2, 3, 4]
            # block centres: 20 m blocks from the grid's corner, y descending, 10 m levels from 100 m
            assert ds.x.values.tolist() == [500010.0, 500030.0, 500050.0]
            assert ds.y.values.tolist() == [7000030.0, 7000010.0]
            assert ds.z.values.tolist() == [105.0, 115.0]
            assert ds["au"].attrs["units"] == "g/t" and ds["au"].attrs["grid_mapping"] == "spatial_ref"
            assert ds.attrs["comment"] == CAUTION and ds.attrs["Conventions"] == "CF-1.8"
            assert ds.attrs["geosim_support"] == name
        with xr.open_dataset(folder / "summary.nc") as ds:
            np.testing.assert_allclose(ds["mean"].values, expected.mean(axis=0), rtol=2e-6)
            np.testing.assert_allclose(ds["P90"].values, np.percentile(expected, 90, axis=0), rtol=2e-6)
            for k, c in enumerate(CUTOFFS):
                np.testing.assert_allclose(ds["prob_above"].values[k], (expected > c).mean(axis=0), atol=1e-7)
        assert files[f"{name}_summary_cube"] == [str(folder / "summary.nc")]
        assert (folder / "decision_figures.csv").is_file()


def test_block_cube_lies_where_gdal_places_the_block_grid(tmp_path):
    grid = _grid()
    writer, layout = _writer(tmp_path, grid)
    records = _written(writer, _fields(grid, 2))
    writer.finish(records, cutoffs=CUTOFFS)
    with rasterio.open(f"netcdf:{tmp_path / 'blocks' / 'summary.nc'}:mean") as src:
        assert src.crs.to_epsg() == 32750
        assert src.transform.almost_equals(layout.blocks.transform)
        assert (src.height, src.width) == (2, 3)


def test_level_geotiffs_on_request_equal_the_cube(tmp_path):
    grid = _grid()
    writer, layout = _writer(tmp_path, grid, level_geotiffs=True)
    records = _written(writer, _fields(grid, 3))
    files = writer.finish(records, cutoffs=CUTOFFS)
    assert [Path(p).name for p in files["blocks_summary"]] == ["summary_z000.tif", "summary_z001.tif"]
    for k in range(2):
        with rasterio.open(tmp_path / "blocks" / f"summary_z{k:03d}.tif") as src, \
                xr.open_dataset(tmp_path / "blocks" / "summary.nc") as ds:
            np.testing.assert_array_equal(src.read(1), ds["mean"].values[k].astype(np.float32))
            assert src.tags()["z_bottom"] == f"{100.0 + 10.0 * k:g}"
        with rasterio.open(tmp_path / "blocks" / f"realizations_z{k:03d}.tif") as src, \
                xr.open_dataset(tmp_path / "blocks" / "realizations.nc") as ds:
            assert src.count == 3
            np.testing.assert_array_equal(src.read(), ds["au"].values[:, k])


def test_ranked_block_realizations_are_cubes_of_their_own(tmp_path):
    grid = _grid()
    ranking = Ranker("fraction_above", 1.0, "blocks", (10, 50, 90))
    writer, _ = _writer(tmp_path, grid, ranking=ranking)
    records = _written(writer, _fields(grid, 5))
    files = writer.finish(records, cutoffs=CUTOFFS)
    picked = ranking.summary(records)["picked"]
    blocks = [p for p in files["ranked"] if p.endswith("_blocks.nc")]
    assert sorted(Path(p).name for p in blocks) == sorted(
        f"fraction_above_1_{label}_r{i:04d}_blocks.nc" for label, i in picked.items())
    with xr.open_dataset(tmp_path / "blocks" / "realizations.nc") as every:
        for label, i in picked.items():
            with xr.open_dataset(tmp_path / "ranked" / f"fraction_above_1_{label}_r{i:04d}_blocks.nc") as pick:
                assert pick["realization"].values.tolist() == [i]
                np.testing.assert_array_equal(pick["au"].values[0], every["au"].values[i])
                assert pick.attrs["comment"] == CAUTION and pick["au"].attrs["units"] == "g/t"


def test_ore_run_writes_block_cubes_and_no_level_geotiffs(tmp_path):
    spec = load_spec(ORE, {"grid.cell": [40.0, 40.0, 20.0], "simulation.realizations": 3, "outputs.plots": False,
                           "simulation.workers": 1, "variogram.fit": False, "outputs.cross_validation": False,
                           "outputs.estimate": False, "blocks.cells": [2, 2, 1]})
    result = pipeline.run(spec, tmp_path)
    blocks = tmp_path / "blocks"
    assert not list(blocks.rglob("*.tif"))
    ranked = sorted(p.name for p in (tmp_path / "ranked").glob("*_blocks*"))  # the point forms keep their own
    assert len(ranked) == 3 and all(name.endswith("_blocks.nc") for name in ranked)
    assert (blocks / "block_model.csv").is_file()
    with xr.open_dataset(blocks / "summary.nc") as summary, xr.open_dataset(blocks / "realizations.nc") as real:
        assert summary["mean"].dims == ("z", "y", "x") and summary.sizes["z"] == 13
        assert summary.x.values[1] - summary.x.values[0] == 80.0  # 2 x 40 m blocks
        np.testing.assert_allclose(summary["mean"].values, real["cu_pct"].values.mean(axis=0), rtol=1e-6)
        assert summary.attrs["geosim_support_grid"].startswith("origin ")
        assert "block average" in summary.attrs["geosim_support"]
        assert summary.attrs["geosim_seed"] == "7340"
    # each block value is the mean of the point realization's nodes inside it (read from the point cube,
    # nodes placed in blocks by the cubes' own coordinates); no file per realization at either support
    assert not [p for p in tmp_path.rglob("r0*") if p.parent.name != "run-state"]
    with xr.open_dataset(blocks / "realizations.nc") as real, xr.open_dataset(tmp_path / "realizations.nc") as pt:
        cube, bx, by = real["cu_pct"].values, 80.0, 80.0
        x0, y1 = float(real.x.values[0]) - bx / 2, float(real.y.values[0]) + by / 2
        points, px, py = pt["cu_pct"].values.astype(float), pt.x.values, pt.y.values
    for i in range(3):
        for k in range(cube.shape[1]):
            nodes = points[i, k]  # blocks of one level (blocks.cells = [2, 2, 1])
            col = np.broadcast_to(np.floor((px - x0) / bx).astype(int)[None, :], points.shape[-2:])
            row = np.broadcast_to(np.floor((y1 - py) / by).astype(int)[:, None], points.shape[-2:])
            for r, c in zip(*np.nonzero(np.isfinite(cube[i, k]))):
                inside = nodes[(row == r) & (col == c)]
                assert cube[i, k, r, c] == pytest.approx(np.nanmean(inside), rel=2e-6)
    report = json.loads((tmp_path / "report.json").read_text())
    assert report["change_of_support"]["blocks"]["blocks_with_values"] > 0
    assert result.files["blocks_summary_cube"] == [str(blocks / "summary.nc")]
    with result.to_xarray("realizations", support="blocks") as ds, \
            xr.open_dataset(blocks / "realizations.nc") as real:
        np.testing.assert_array_equal(ds["cu_pct"].values, real["cu_pct"].values)
    with pytest.raises(geosim.errors.InputError, match="no summary at upscaled support"):
        result.to_xarray("summary", support="upscaled")


def test_2d_upscaled_cubes_beside_the_geotiffs_when_a_cube_is_asked(tmp_path):
    # 2-D runs keep their GeoTIFFs; outputs.cube = "netcdf" adds the cubes, at every support
    grid = geosim.Grid(500000.0, 7000000.0, (25.0, 25.0), (4, 6), crs=geosim.crs.parse_crs(32725))
    layout = block_layout(grid, (50.0, 50.0))
    up = RealizationWriter(tmp_path / "upscaled", layout.blocks, units="m/s", cube="netcdf", variable="k")
    writer = RealizationWriter(tmp_path, grid, derived=[SupportWriter("upscaled", layout, up, exponent=0.0)])
    rng = np.random.default_rng(5)
    fields = [10.0 ** rng.normal(-4.0, 0.5, grid.shape) for _ in range(4)]
    files = writer.finish(_written(writer, fields), cutoffs=[1e-4])
    stored = [np.asarray(f, dtype=np.float32).astype(float) for f in fields]
    expected = np.stack([scipy.stats.gmean(f.reshape(2, 2, 3, 2), axis=(1, 3)) for f in stored])
    with rasterio.open(tmp_path / "upscaled" / "realizations.tif") as src, \
            xr.open_dataset(tmp_path / "upscaled" / "realizations.nc") as ds:
        np.testing.assert_allclose(src.read(), expected, rtol=2e-6)
        np.testing.assert_array_equal(ds["k"].values, src.read())
        assert ds["k"].dims == ("realization", "y", "x")
    assert files["upscaled_summary_cube"] and files["upscaled_summary"]


@pytest.mark.parametrize("shape, nodes", [((26, 20, 20), 65536), ((3, 700, 300), 65536), ((5, 4, 6), 50),
                                          ((7, 9), 10), ((7, 9), 100)])
def test_cube_boxes_tile_the_grid_once_within_the_node_budget(shape, nodes):
    from geosim.io.cube import cube_boxes
    cell = (1.0,) * len(shape)
    grid = geosim.Grid(0.0, 0.0, cell, shape)
    count = np.zeros(shape, dtype=int)
    for box in cube_boxes(grid, nodes):
        count[box] += 1
        assert count[box].size <= nodes
    assert (count == 1).all()
