"""Change of support in a run: block and upscaled realizations, ranked realizations, values at points.

The outputs are checked against the realization files the run wrote, read back with rasterio and
averaged, ranked or sampled here independently of geosim.support: block means by the node centres
that fall inside each block's bounds (the block file's own geotransform), geometric means with
scipy.stats.gmean, type-7 percentiles with numpy (Hyndman and Fan 1996), point values with
rasterio's sample() (the pixel that holds the point).
"""
from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
import rasterio
import scipy.stats

import geosim
import geosim.pipeline as pipeline
from geosim.config.runspec import load_spec
from geosim.errors import InputError, SpecError

AQUIFER = Path(__file__).resolve().parent.parent / "sample_fields" / "alluvial_aquifer" / "run.toml"
SMALL = {"grid.cell": [300.0, 300.0], "simulation.workers": 1, "variogram.fit": False, "outputs.plots": False,
         "outputs.cross_validation": False, "outputs.estimate": False, "simulation.realizations": 7}


def spec_with(**more):
    return load_spec(AQUIFER, {**SMALL, **{k.replace("__", "."): v for k, v in more.items()}})


def _read(path):
    with rasterio.open(path) as src:
        return src.read(1).astype(float), src.transform, src.tags()


def _rows(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def _by_cell(values_path, node_grid, block_path, reduce):
    """Reduce the nodes whose centres fall inside each cell of the block raster (NaN nodes left out)."""
    values, _, _ = _read(values_path)
    blocks, transform, _ = _read(block_path)
    xy = node_grid.coords(active_only=False)
    inv = ~transform
    col = np.floor(inv.a * xy[:, 0] + inv.b * xy[:, 1] + inv.c).astype(int)
    row = np.floor(inv.d * xy[:, 0] + inv.e * xy[:, 1] + inv.f).astype(int)
    out = np.full(blocks.shape, np.nan)
    flat = values.ravel()
    for (r, c) in {(int(a), int(b)) for a, b in zip(row, col)}:
        v = flat[(row == r) & (col == c)]
        v = v[~np.isnan(v)]
        if v.size and not np.isnan(blocks[r, c]):
            out[r, c] = reduce(v)
    return blocks, out


@pytest.fixture(scope="module")
def supported_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("support")
    spec = spec_with(upscaling__cells=[2, 2], blocks__cells=[3, 2], blocks__min_fraction=0.3)
    result = pipeline.run(spec, out)
    grid = pipeline.make_grid(spec, pipeline.prepare_data(spec))
    return spec, result, grid, out


def test_block_and_upscaled_realizations_average_the_realization_files(supported_run):
    spec, result, grid, out = supported_run
    for i in range(7):
        node_file = out / "realizations" / f"r{i:04d}.tif"
        blocks, expected = _by_cell(node_file, grid, out / "blocks" / "realizations" / f"r{i:04d}.tif", np.mean)
        np.testing.assert_allclose(blocks, expected, rtol=2e-6, equal_nan=True)
        upscaled, expected = _by_cell(node_file, grid, out / "upscaled" / "realizations" / f"r{i:04d}.tif",
                                      scipy.stats.gmean)
        np.testing.assert_allclose(upscaled, expected, rtol=2e-6, equal_nan=True)
        assert np.isfinite(upscaled).sum() > 10
    # the model-cell size and the exponent travel with the files, with the caution
    _, transform, tags = _read(out / "upscaled" / "realizations.tif")
    assert (transform.a, -transform.e) == (600.0, 600.0)
    assert "geometric (power 0)" in tags["support"] and "cell 600 x 600 m" in tags["support_grid"]
    assert tags["caution"] == geosim.CAUTION
    report = json.loads((out / "report.json").read_text())["change_of_support"]
    assert set(report) >= {"blocks", "upscaled", "ranking", "query_points"}
    assert report["upscaled"]["decision_spread"] and "support effect" in report["blocks"]["note"]


def test_block_values_spread_less_than_the_nodes(supported_run):
    # the support effect: within each realization the block values vary less than the nodes
    _, _, _, out = supported_run
    for i in range(7):
        nodes, _, _ = _read(out / "realizations" / f"r{i:04d}.tif")
        blocks, _, _ = _read(out / "blocks" / "realizations" / f"r{i:04d}.tif")
        assert np.nanvar(np.log10(blocks)) < np.nanvar(np.log10(nodes))


def test_ranking_picks_the_realizations_nearest_each_percentile_of_the_figure(supported_run):
    _, _, _, out = supported_run
    figures = {int(r["realization"]): float(r["fraction_above"]) for r in _rows(out / "decision_figures.csv")
               if float(r["threshold"]) == 1e-4}
    ranking = _rows(out / "ranking.csv")
    assert {int(r["realization"]): float(r["figure"]) for r in ranking} == pytest.approx(figures, rel=1e-9)
    values = np.array([figures[i] for i in range(7)])
    order = sorted(range(7), key=lambda i: (values[i], i))
    assert [int(r["rank"]) for r in ranking] == [order.index(i) + 1 for i in range(7)]
    for p in (10, 50, 90):
        target = np.percentile(values, p)
        nearest = min(range(7), key=lambda i: (abs(values[i] - target), i))
        row = next(r for r in ranking if f"P{p}" in r["picked_as"].split())
        assert int(row["realization"]) == nearest
        for suffix, folder in (("", "realizations"), ("_upscaled", "upscaled/realizations")):
            picked, _, tags = _read(out / "ranked" / f"fraction_above_0.0001_P{p}_r{nearest:04d}{suffix}.tif")
            original, _, _ = _read(out / folder / f"r{nearest:04d}.tif")
            np.testing.assert_array_equal(picked, original)
            assert tags["realization"] == str(nearest) and tags["caution"] == geosim.CAUTION
    sidecar = json.loads((out / "ranking.csv-metadata.json").read_text())
    assert any("is not the P10" in n for n in sidecar["notes"]) and sidecar["dc:description"] == geosim.CAUTION


def test_values_at_points_are_the_realizations_at_the_node_holding_each_point(supported_run):
    spec, _, grid, out = supported_run
    rows = _rows(out / "query_points.csv")
    assert [r["id"] for r in rows] == ["PW-A", "PW-B", "PW-C", "PW-D"]
    with rasterio.open(out / "realizations.tif") as src:
        for r in rows:
            v = np.array(next(src.sample([(float(r["x"]), float(r["y"]))])), dtype=float)
            assert v.size == 7 and np.isfinite(v).all()
            for p in (10, 50, 90):
                assert float(r[f"P{p}"]) == pytest.approx(np.percentile(v, p), rel=1e-6)
            assert float(r["mean"]) == pytest.approx(v.mean(), rel=1e-6)
            for c in spec["outputs.cutoffs"]:
                assert float(r[f"P_above_{c:g}"]) == pytest.approx((v > c).mean())


def test_resume_keeps_and_verifies_support_outputs(tmp_path):
    spec = spec_with(upscaling__cells=[2, 2], simulation__realizations=3)
    first = pipeline.simulate(spec, out_dir=tmp_path)
    assert all("upscaled" in r["derived"] for r in first.records)
    (tmp_path / "upscaled" / "realizations" / "r0001.tif").write_bytes(b"changed")
    again = pipeline.simulate(spec, out_dir=tmp_path)
    assert again.kept == [0, 2] and again.computed == [1]
    (tmp_path / "ranked").mkdir()
    (tmp_path / "ranked" / "fraction_above_0.0001_P10_r0099.tif").write_bytes(b"an earlier pick")
    files = pipeline.summarize(spec, tmp_path, simulation=again)
    assert files["ranking"] and len(files["ranked"]) == 6
    assert sorted(p.name for p in (tmp_path / "ranked").iterdir()) == sorted(Path(p).name for p in files["ranked"])


def test_ranking_by_the_mean_of_the_domain(tmp_path):
    spec = spec_with(ranking__figure="mean", ranking__cutoff=None, upscaling__cells=[2, 2],
                     simulation__realizations=5)
    pipeline.run(spec, tmp_path)
    means = {i: np.nanmean(_read(tmp_path / "realizations" / f"r{i:04d}.tif")[0]) for i in range(5)}
    ranking = {int(r["realization"]): float(r["figure"]) for r in _rows(tmp_path / "ranking.csv")}
    assert ranking == pytest.approx(means, rel=1e-6)


# -- bad input -------------------------------------------------------------------------------

@pytest.mark.parametrize("override, message", [
    ({"upscaling.exponent": 1.5}, "upscaling.exponent: expected a number >= -1 and <= 1"),
    ({"upscaling.exponent": -2}, "upscaling.exponent: expected a number >= -1 and <= 1"),
    ({"upscaling.cells": None, "upscaling.cell": [100.0, 100.0]}, "upscaling.cell: expected sizes at least the grid "
                                                                  "cell (300 m along x)"),
    ({"blocks.size": [450.0, 600.0], "blocks.aligned": True}, "blocks.size: with aligned = true, expected whole "
                                                              "multiples of grid.cell (300 m along x)"),
    ({"blocks.size": [600.0, 600.0], "blocks.cells": [2, 2]}, "blocks: expected size (metres) or cells"),
    ({"ranking.figure": "metal"}, "ranking.figure: expected a figure this run computes (fraction_above, area, "
                                  "mean"),
    ({"ranking.cutoff": 2e-4}, "ranking.cutoff: expected one of outputs.cutoffs"),
    ({"ranking.support": "blocks"}, 'ranking.support: "blocks" needs [blocks]'),
    ({"upscaling.vertical_exponent": -1.0}, "upscaling.vertical_exponent: only when upscaling a 3-D grid"),
])
def test_bad_support_settings_are_spec_problems(override, message):
    with pytest.raises(SpecError) as err:
        load_spec(AQUIFER, {**SMALL, **override})
    assert message in str(err.value)


def test_query_points_outside_the_grid_are_listed(tmp_path):
    table = tmp_path / "wells.csv"
    table.write_text("name,lon,lat\nin,-33.2050,-38.7100\nfar,-30.0,-38.7\nfar2,-33.2,-39.5\n")
    spec = spec_with(query_points__file=str(table))
    with pytest.raises(InputError) as err:
        pipeline.simulate(spec, out_dir=tmp_path / "out")
    text = str(err.value)
    assert "2 of 3 points lie outside the grid: row 3 (far), row 4 (far2)" in text and str(table) in text
    assert not (tmp_path / "out" / "realizations").exists()


def test_non_positive_conductivity_names_the_realization_and_the_count():
    from geosim.ensemble import RealizationWriter
    from geosim.support import block_layout
    from geosim.support_outputs import SupportWriter

    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0), (4, 4))
    layout = block_layout(grid, (2.0, 2.0))
    sink = SupportWriter("upscaled", layout, RealizationWriter("unused", layout.blocks), exponent=-1.0,
                         key="upscaling.exponent")
    k = np.full(grid.shape, 1e-4)
    k[0, :3] = 0.0
    with pytest.raises(InputError) as err:
        sink(7, k)
    assert err.value.field == "upscaling.exponent"
    assert "realization 7: 3 of 16 values are zero or negative" in str(err.value)
    assert "harmonic (power -1)" in str(err.value)


def test_ranker_reads_the_figure_at_the_chosen_cut_off():
    from geosim.support_outputs import Ranker

    records = [{"index": i, "figures": {"cutoff": np.array([0.3, 0.5, 1.0]), "tonnage": np.array([9.0, 5.0, 1.0]),
                                        "metal": np.array([30.0 + i, 20.0 - i, 10.0])},
                "derived": {"blocks": {"figures": {"cutoff": [0.3, 0.5, 1.0], "metal": [1.0, 2.0 * i, 3.0]}}}}
               for i in range(4)]
    np.testing.assert_array_equal(Ranker("metal", 0.5, "point").values(records), [20.0, 19.0, 18.0, 17.0])
    np.testing.assert_array_equal(Ranker("metal", 0.5, "blocks").values(records), [0.0, 2.0, 4.0, 6.0])
    assert Ranker("metal", 0.5, "point").summary(records)["picked"] == {"P10": 3, "P50": 1, "P90": 0}


def test_horizontal_and_vertical_upscaling_of_a_layered_3d_field(tmp_path):
    # the layered medium of test_support.py through the writer: four 1 m levels of 1e-3, 1e-5, 1e-3 and
    # 1e-4 m/s give Kh = 5.275e-4 (arithmetic) and Kv = 4 / 112000 (harmonic) per 2 x 2 x 4 m cell
    # (Freeze and Cherry 1979, eqs. 2.31-2.32, from memory)
    from geosim.ensemble import RealizationWriter
    from geosim.io.geotiff import read_realization
    from geosim.support import block_layout
    from geosim.support_outputs import SupportWriter

    grid = geosim.Grid(0.0, 0.0, (1.0, 1.0, 1.0), (4, 4, 4))
    k = np.broadcast_to(np.array([1e-3, 1e-5, 1e-3, 1e-4])[:, None, None], grid.shape).copy()
    layout = block_layout(grid, (2.0, 2.0, 4.0))
    sinks = [SupportWriter(name, layout, RealizationWriter(tmp_path / name, layout.blocks), exponent=p)
             for name, p in (("upscaled", 1.0), ("upscaled_vertical", -1.0))]
    writer = RealizationWriter(tmp_path, grid, derived=sinks)
    record = writer(0, k)
    kh = read_realization([tmp_path / f for f in record["derived"]["upscaled"]["files"]], layout.blocks)
    kv = read_realization([tmp_path / f for f in record["derived"]["upscaled_vertical"]["files"]], layout.blocks)
    assert kh.shape == kv.shape == (1, 2, 2)
    np.testing.assert_allclose(kh, 5.275e-4, rtol=1e-6)          # float32 files
    np.testing.assert_allclose(kv, 4.0 / 112000.0, rtol=1e-6)
    files = writer.finish([record], stack=True)
    assert files["upscaled_vertical_summary"] and files["upscaled_realizations"]


def test_density_map_weights_block_grades_and_tonnes(tmp_path):
    from rasterio.transform import from_origin

    base = spec_with(blocks__cells=[2, 2], upscaling__cells=None, upscaling__exponent=None,
                     ranking__figure=None, ranking__cutoff=None)
    grid = pipeline.make_grid(base, pipeline.prepare_data(base))
    # 2.0 t/m3 west of the grid's middle, 3.0 east, on a raster of its own (finer, larger) lattice
    density = np.where(np.arange(400) < 200, 2.0, 3.0)[None, :].repeat(400, axis=0).astype("float32")
    middle = grid.xmin + grid.nx * grid.cell[0] / 2
    profile = dict(driver="GTiff", width=400, height=400, count=1, dtype="float32", crs=grid.crs,
                   transform=from_origin(middle - 200 * 150.0, grid.ymax + 1000.0, 150.0, 150.0))
    with rasterio.open(tmp_path / "density.tif", "w", **profile) as dst:
        dst.write(density, 1)
    spec = spec_with(blocks__cells=[2, 2], upscaling__cells=None, upscaling__exponent=None, ranking__figure=None,
                     ranking__cutoff=None, outputs__density_raster=str(tmp_path / "density.tif"),
                     outputs__thickness=10.0, simulation__realizations=2)
    pipeline.run(spec, tmp_path / "out")
    x = grid.coords(active_only=False)[:, 0].reshape(grid.shape)
    rho = np.where(x < middle, 2.0, 3.0)
    xy = grid.coords(active_only=False)
    for i in range(2):
        k, _, _ = _read(tmp_path / "out" / "realizations" / f"r{i:04d}.tif")
        blocks, transform, _ = _read(tmp_path / "out" / "blocks" / "realizations" / f"r{i:04d}.tif")
        col, row = (~transform * (xy[:, 0], xy[:, 1]))
        cell = np.floor(row).astype(int) * blocks.shape[1] + np.floor(col).astype(int)
        for r, c in zip(*np.nonzero(np.isfinite(blocks))):
            inside = (cell == r * blocks.shape[1] + c) & np.isfinite(k.ravel())
            kk, dd = k.ravel()[inside], rho.ravel()[inside]
            assert blocks[r, c] == pytest.approx((kk * dd).sum() / dd.sum(), rel=2e-6)
        rows = [r for r in _rows(tmp_path / "out" / "decision_figures.csv") if int(r["realization"]) == i]
        for row in rows:
            above = np.isfinite(k) & (k >= float(row["cutoff"]))
            assert float(row["tonnage"]) == pytest.approx((rho[above] * 300.0 * 300.0 * 10.0).sum(), rel=1e-9)
