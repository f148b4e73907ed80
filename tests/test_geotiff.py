"""GeoTIFF outputs read back with rasterio, in this process and in a fresh one."""
import functools
import json
import math
import pickle
import subprocess
import sys
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest
import rasterio
from pyproj import CRS
from shapely.geometry import Polygon

import geosim
from geosim.cautions import CAUTION
from geosim.ensemble import RealizationWriter
from geosim.errors import InputError
from geosim.io.csvw import read_csv_metadata
from geosim.io.geotiff import (read_realization, tile_size, verify_realization,
                               write_raster)
from geosim.io.report import provenance
from geosim.summaries import grade_tonnage, summarize_ensemble


def _grid(shape=(260, 300)):
    # an invented lease in UTM zone 50S; the domain is a skewed quadrilateral
    g = geosim.Grid(402000.0, 7195000.0, (12.5, 12.5), shape, crs=CRS.from_epsg(32750))
    poly = Polygon([(g.xmin + 200, g.ymin + 300), (g.xmax - 150, g.ymin + 100),
                    (g.xmax - 400, g.ymax - 200), (g.xmin + 100, g.ymax - 50)])
    return g.clip_to_polygon(poly)


def _tags():
    return provenance(seed=20261202, engine="sequential", model="  spherical sill=1 ranges=(300, 150, 10)",
                      transform="normal score (invented test transform)", inputs={"assays.csv": "ab" * 32},
                      units="g/t")


def _assert_cog(src, grid):
    assert src.crs == rasterio.crs.CRS.from_epsg(32750)
    assert src.transform == grid.transform
    assert math.isnan(src.nodata)
    assert src.dtypes[0] == "float32"
    assert src.profile["tiled"] and src.block_shapes[0] == (tile_size(grid), tile_size(grid))
    assert src.overviews(1) == [2, 4]  # 300 -> 150 -> 75 columns: halved until one 128-cell tile holds it
    structure = src.tags(ns="IMAGE_STRUCTURE")
    assert structure["LAYOUT"] == "COG" and structure["COMPRESSION"] == "DEFLATE"
    assert structure["PREDICTOR"] == "3"  # floating-point predictor
    tags = src.tags()
    assert tags["caution"] == CAUTION
    assert tags["seed"] == "20261202" and tags["engine"] == "sequential"
    assert tags["geosim_version"] == geosim.__version__
    assert json.loads(tags["input_sha256"]) == {"assays.csv": "ab" * 32}
    assert tags["variogram_model"].strip().startswith("spherical")
    assert tags["created_utc"].endswith("Z")


def test_write_raster_round_trip(tmp_path):
    grid = _grid()
    rng = np.random.default_rng(1)
    data = rng.normal(size=(2, *grid.shape))
    (path,) = write_raster(tmp_path / "two.tif", data, grid, descriptions=[("first (g/t)", "g/t"), "second"],
                           tags=_tags())
    with rasterio.open(path) as src:
        _assert_cog(src, grid)
        got = src.read()
        assert src.descriptions == ("first (g/t)", "second")
        assert src.units == ("g/t", None)  # GDAL reports an empty unit as None
        assert src.tags(1)["units"] == "g/t"
        # a value read at a node centre through the geotransform is that node's value
        (r, c) = src.index(grid.xmin + 10.5 * grid.cell[0], grid.ymax - 100.5 * grid.cell[1])
        assert (r, c) == (100, 10)
    np.testing.assert_array_equal(got[:, grid.mask], data[:, grid.mask].astype(np.float32))
    assert np.isnan(got[:, ~grid.mask]).all()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["two.tif"]


def test_existing_raster_is_not_overwritten_unless_asked(tmp_path):
    grid = _grid((40, 50))
    (path,) = write_raster(tmp_path / "a.tif", np.zeros(grid.shape), grid, descriptions=["zero"])
    before = path.read_bytes()
    with pytest.raises(InputError, match="overwrite=True"):
        write_raster(path, np.ones(grid.shape), grid, descriptions=["one"])
    assert path.read_bytes() == before
    write_raster(path, np.ones(grid.shape), grid, descriptions=["one"], overwrite=True)
    with rasterio.open(path) as src:
        assert np.nanmax(src.read(1)) == 1.0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.tif"]


def test_failed_write_leaves_nothing(tmp_path):
    grid = _grid((40, 50))
    with pytest.raises(ValueError, match="does not fit"):
        write_raster(tmp_path / "bad.tif", np.zeros((3, 3)), grid, descriptions=["x"])
    with pytest.raises(ValueError, match="band descriptions"):
        write_raster(tmp_path / "bad.tif", np.zeros(grid.shape), grid, descriptions=["x", "y"])
    assert list(tmp_path.iterdir()) == []


def test_3d_grid_writes_one_file_per_level(tmp_path):
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0, 5.0), (3, 20, 30), crs=CRS.from_epsg(32750), zmin=-100.0)
    data = np.arange(grid.size, dtype=float).reshape(grid.shape)
    paths = write_raster(tmp_path / "block.tif", data, grid, descriptions=["index"])
    assert [p.name for p in paths] == ["block_z000.tif", "block_z001.tif", "block_z002.tif"]
    with rasterio.open(paths[2]) as src:
        assert src.tags()["level"] == "2"
        assert float(src.tags()["z_bottom"]) == -90.0 and float(src.tags()["z_top"]) == -85.0
    np.testing.assert_array_equal(read_realization(paths, grid), data)
    # one existing level blocks the whole set: no level is rewritten
    paths[0].unlink()
    with pytest.raises(InputError, match="block_z001.tif"):
        write_raster(tmp_path / "block.tif", data, grid, descriptions=["index"])
    assert not paths[0].exists()


def _run_writer(tmp_path, grid, stack, executor=None, **finish):
    writer = RealizationWriter(tmp_path / "out", grid, tags=_tags(), units="g/t", back_transform=np.exp,
                               figures=functools.partial(grade_tonnage, grid=grid, cutoffs=[0.5, 1.0, 2.0],
                                                         density=2.7, thickness=5.0))
    order = [3, 0, 4, 1, 2] if len(stack) == 5 else list(range(len(stack)))
    if executor is None:
        records = [writer(i, stack[i]) for i in order]
    else:
        records = list(executor.map(writer, order, [stack[i] for i in order]))
    return writer, records, writer.finish(records, cutoffs=[1.0, 2.0], **finish)


def test_realization_writer_end_to_end(tmp_path):
    grid = _grid()
    rng = np.random.default_rng(7)
    scores = rng.normal(size=(5, *grid.shape))
    scores[:, ~grid.mask] = np.nan
    writer, records, out = _run_writer(tmp_path, grid, scores)
    values = np.exp(scores).astype(np.float32)  # what the files hold: back-transformed, float32

    assert [r["index"] for r in records] == [3, 0, 4, 1, 2]
    for r in records:
        assert verify_realization(tmp_path / "out" / r["files"][0], r["sha256"][0])
    with rasterio.open(out["realizations"][0]) as src:
        _assert_cog(src, grid)
        assert src.count == 5
        assert src.descriptions == tuple(f"realization {i} (g/t)" for i in range(5))
        np.testing.assert_array_equal(src.read(4), values[3])
    with rasterio.open(out["summary"][0]) as src:
        _assert_cog(src, grid)
        got = src.read().astype(float)
        assert len(src.descriptions) == 7
    ref = np.stack(list(summarize_ensemble(values, [1.0, 2.0]).values()))
    np.testing.assert_allclose(got[:, grid.mask], ref[:, grid.mask], rtol=2e-7)

    # decision figures: the CSV holds each realization's tonnage, computed from the data-unit field
    lines = (tmp_path / "out" / "decision_figures.csv").read_text().splitlines()
    assert read_csv_metadata(tmp_path / "out" / "decision_figures.csv")["dc:description"] == CAUTION
    header = lines[0].split(",")
    first = dict(zip(header, lines[1].split(",")))
    assert first["realization"] == "0" and float(first["cutoff"]) == 0.5
    expect = grade_tonnage(np.exp(scores[0]), grid, [0.5], density=2.7, thickness=5.0)["tonnage"][0]
    assert float(first["tonnage"]) == pytest.approx(expect, rel=1e-9)
    assert (tmp_path / "out" / "decision_spread.csv").exists()


def test_verify_realization_spots_a_change(tmp_path):
    grid = _grid((40, 50))
    writer = RealizationWriter(tmp_path, grid)
    rec = writer(0, np.zeros(grid.shape))
    path = tmp_path / rec["files"][0]
    assert verify_realization(path, rec["sha256"][0])
    with open(path, "r+b") as f:
        f.seek(-1, 2)
        last = f.read(1)
        f.seek(-1, 2)
        f.write(bytes([last[0] ^ 0xFF]))
    assert not verify_realization(path, rec["sha256"][0])
    assert not verify_realization(tmp_path / "missing.tif", rec["sha256"][0])
    with pytest.raises(InputError, match="changed"):
        writer.finish([rec])


def test_writer_runs_in_worker_processes_and_can_drop_its_files(tmp_path):
    grid = _grid((60, 70))
    rng = np.random.default_rng(3)
    scores = rng.normal(size=(4, *grid.shape))
    scores[:, ~grid.mask] = np.nan
    with ProcessPoolExecutor(max_workers=2) as pool:
        writer, records, out = _run_writer(tmp_path, grid, scores, executor=pool,
                                           keep_realization_files=False)
    assert pickle.loads(pickle.dumps(writer)).folder == writer.folder
    assert not (tmp_path / "out" / "realizations").exists()
    with rasterio.open(out["realizations"][0]) as src:
        np.testing.assert_array_equal(src.read(2), np.exp(scores[1]).astype(np.float32))


def test_3d_writer_assembles_per_level(tmp_path):
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0, 5.0), (2, 20, 30), crs=CRS.from_epsg(32750))
    rng = np.random.default_rng(5)
    scores = rng.normal(size=(3, *grid.shape))
    writer = RealizationWriter(tmp_path, grid, units="m/s")
    records = [writer(i, scores[i]) for i in range(3)]
    assert records[1]["files"] == ["realizations/r0001_z000.tif", "realizations/r0001_z001.tif"]
    out = writer.finish(records, cutoffs=[0.0])
    assert [p.rsplit("/", 1)[1] for p in out["summary"]] == ["summary_z000.tif", "summary_z001.tif"]
    with rasterio.open(out["summary"][1]) as src:
        np.testing.assert_allclose(src.read(6), (scores[:, 1].astype(np.float32) > 0).mean(0))


def test_files_open_in_a_fresh_process(tmp_path):
    grid = _grid((40, 50))
    (path,) = write_raster(tmp_path / "fresh.tif", np.full(grid.shape, 2.5), grid, descriptions=["x"],
                           tags=_tags())
    code = ("import json, sys, rasterio\n"
            "with rasterio.open(sys.argv[1]) as s:\n"
            "    print(json.dumps({'epsg': s.crs.to_epsg(), 'max': float(s.read(1, masked=True).max()),"
            " 'caution': s.tags()['caution'], 'desc': s.descriptions[0]}))\n")
    res = subprocess.run([sys.executable, "-c", code, str(path)], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    info = json.loads(res.stdout)
    assert info == {"epsg": 32750, "max": 2.5, "caution": CAUTION, "desc": "x"}


def test_writer_with_checks_draws_plots_and_gives_the_validation_section(tmp_path):
    from geosim.validation import RunChecks
    grid = _grid((60, 70))
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((200.0, 100.0)))])
    rng = np.random.default_rng(8)
    coords = grid.coords()[rng.choice(grid.n_active, 12, replace=False)]
    data_scores = rng.normal(size=12)
    checks = RunChecks(grid, model, coords, data_scores, data_values=np.exp(data_scores))
    writer = RealizationWriter(tmp_path, grid, units="g/t", back_transform=np.exp, measure=checks,
                               figures=functools.partial(grade_tonnage, grid=grid, cutoffs=[0.5, 1.0],
                                                         density=2.7, thickness=5.0))
    scores = rng.normal(size=(3, *grid.shape))
    scores[:, ~grid.mask] = np.nan
    records = [writer(i, scores[i]) for i in range(3)]
    # the measurement ran on the normal scores, the quantiles on the data-unit values
    assert records[2]["checks"]["mean"] == pytest.approx(np.nanmean(scores[2]))
    assert records[2]["checks"]["quantiles"][-1] == pytest.approx(np.nanmax(np.exp(scores[2])))
    out = writer.finish(records, cutoffs=[1.0], plots=True)
    names = sorted(p.rsplit("/", 1)[1] for p in out["plots"])
    assert names == ["decision_spread.png", "histogram_reproduction.png", "mean.png", "p10.png", "p90.png",
                     "prob_above_1.png", "std.png", "variogram_reproduction.png"]
    section = writer.validation(records)
    assert set(section) == {"histogram", "variogram", "data", "n_realizations", "extremes"}
    # the data sit at node centres but these fields ignore them: data reproduction must warn
    assert section["data"]["flag"] == "warn"
