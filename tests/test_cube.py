"""NetCDF cubes and the block-model table, checked against the GeoTIFFs of the same run.

GDAL (through rasterio's netCDF driver) is the independent reader: it must find the CRS
and the georeferencing of the GeoTIFFs in the CF grid mapping, and the same values.
"""
import json
from pathlib import Path

import numpy as np
import pytest

import geosim
import geosim.outputs
import geosim.pipeline
from geosim.io.csvw import read_csv_metadata
from geosim.io.cube import open_cube
from geosim.config.runspec import load_spec

xr = pytest.importorskip("xarray")
pytest.importorskip("netCDF4")
pd = pytest.importorskip("pandas")
rasterio = pytest.importorskip("rasterio")
zarr = pytest.importorskip("zarr")

ORE = Path(__file__).resolve().parent.parent / "sample_fields" / "ore_prospect" / "run.toml"
SMALL = {"grid.cell": [40.0, 40.0, 20.0], "simulation.realizations": 3, "simulation.workers": 1,
         "outputs.plots": False, "outputs.level_geotiffs": True, "outputs.block_model": ["csv", "parquet"],
         "outputs.block_model_realizations": True}


def _point_support_tifs(out: Path) -> list[Path]:
    """GeoTIFFs of a run at point support (the ore sample's block-support outputs are their own)."""
    return [p for p in out.rglob("*.tif") if "blocks" not in p.relative_to(out).as_posix()]


@pytest.fixture(scope="module")
def ore_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("ore") / "run"
    spec = load_spec(ORE, overrides=SMALL)
    result = geosim.pipeline.run(spec, out)
    return spec, result, out


def test_summary_cube_opens_in_xarray_with_the_grid_coordinates(ore_run):
    spec, result, out = ore_run
    grid = geosim.pipeline.make_grid(spec, geosim.pipeline.prepare_data(spec))
    ds = result.to_xarray("summary")
    z, y, x = grid.axes()
    np.testing.assert_allclose(ds.x.values, x)
    np.testing.assert_allclose(ds.y.values, y)
    np.testing.assert_allclose(ds.z.values, z)
    assert ds["mean"].dims == ("z", "y", "x") and ds["prob_above"].dims == ("cutoff", "z", "y", "x")
    assert ds.cutoff.values.tolist() == spec["outputs.cutoffs"]
    assert ds["mean"].attrs["units"] == spec["data.units"] == "% Cu"
    mapping = ds["mean"].attrs.get("grid_mapping") or ds["mean"].encoding.get("grid_mapping")
    assert mapping == "spatial_ref" and "crs_wkt" in ds["spatial_ref"].attrs
    assert ds.attrs["Conventions"] == "CF-1.8" and ds.attrs["comment"] == geosim.CAUTION
    assert ds.attrs["geosim_seed"] == str(spec["simulation.seed"])
    assert ds.z.attrs["positive"] == "up" and ds.x.attrs["standard_name"] == "projection_x_coordinate"
    np.testing.assert_array_equal(np.isfinite(ds["mean"].values), grid.mask)
    enc = ds["mean"].encoding
    assert enc["zlib"] and enc["chunksizes"][0] == 1  # chunked by level and compressed
    assert enc["complevel"] == 4 and enc["shuffle"]
    ds.close()


def test_the_realization_cube_is_uncompressed_says_so_and_holds_the_stored_values(ore_run):
    # simulated float32 noise compresses little at any zlib level: the realization cube is stored as is
    spec, result, out = ore_run
    var = geosim.outputs.variable_name(spec["data.value"])
    levels = sorted(out.glob("realizations_z*.tif"))
    with open_cube(out / "realizations.nc") as ds:
        enc = ds[var].encoding
        assert not enc["zlib"] and not enc["shuffle"]
        assert ds.attrs["geosim_storage"].endswith("uncompressed")
        assert enc["chunksizes"][:2] == (1, 1) and ds[var].dtype == np.float32
        for k in (0, 12):
            with rasterio.open(levels[k]) as level:
                np.testing.assert_array_equal(ds[var].values[:, k], level.read()[:3])


@pytest.mark.parametrize("kind, tif, variable", [("summary", "summary", "mean"), ("estimate", "estimate", "mean"),
                                                  ("realizations", "realizations", None)])
def test_gdal_reads_the_cube_where_and_as_the_geotiffs(ore_run, kind, tif, variable):
    spec, result, out = ore_run
    name = f"{kind}.nc"
    if variable is None:
        variable = geosim.outputs.variable_name(spec["data.value"])
    levels = sorted(out.glob(f"{tif}_z*.tif"))
    assert len(levels) == 13
    with rasterio.open(f"netcdf:{out / name}:{variable}") as cube:
        for k in (0, 6, 12):
            with rasterio.open(levels[k]) as level:
                assert cube.crs == level.crs and cube.crs.to_epsg() == 32750
                assert cube.transform.almost_equals(level.transform, precision=1e-9)
                assert (cube.width, cube.height) == (level.width, level.height)
                if kind == "realizations":  # GDAL bands run over (realization, z)
                    for j in range(3):
                        np.testing.assert_array_equal(cube.read(j * 13 + k + 1), level.read(j + 1))
                else:
                    np.testing.assert_array_equal(cube.read(k + 1), level.read(1))


def test_block_model_table_equals_the_cube(ore_run):
    spec, result, out = ore_run
    ds = result.to_xarray("summary")
    table = pd.read_csv(out / "block_model.csv")
    cutoffs = spec["outputs.cutoffs"]
    meta = read_csv_metadata(out / "block_model.csv")
    assert list(table.columns) == [c["name"] for c in meta["tableSchema"]["columns"]]
    assert list(table.columns[:11]) == ["x", "y", "z", "dx", "dy", "dz", "mean", "std", "P10", "P50", "P90"]
    assert [c for c in table.columns if c.startswith("prob_above_")] == [f"prob_above_{c:g}" for c in cutoffs]
    units = {c["name"]: c.get("schema:unitText") for c in meta["tableSchema"]["columns"]}
    assert units["mean"] == "% Cu" and units["dz"] == "m"
    # sorted by z, then y, then x
    keys = table[["z", "y", "x"]].to_numpy()
    assert (np.diff(keys[:, 0]) >= 0).all()
    assert np.lexsort((keys[:, 2], keys[:, 1], keys[:, 0])).tolist() == list(range(len(table)))
    # every block finds its cube cell by coordinates and carries its values
    def index(axis, values):  # CSV cells carry 10 significant digits: a millimetre here
        at = np.rint((values - axis[0]) / (axis[1] - axis[0])).astype(int)
        np.testing.assert_allclose(axis[at], values, atol=1e-3)
        return at

    k, i, j = (index(ds[a].values, table[a].to_numpy()) for a in ("z", "y", "x"))
    assert len(table) == int(np.isfinite(ds["mean"].values).sum())
    for name in ("mean", "std", "P10", "P50", "P90"):
        np.testing.assert_array_equal(table[name].to_numpy(dtype=np.float32), ds[name].values[k, i, j])
    for c_index, c in enumerate(cutoffs):
        np.testing.assert_array_equal(table[f"prob_above_{c:g}"].to_numpy(dtype=np.float32),
                                      ds["prob_above"].values[c_index, k, i, j])
    reals = result.to_xarray("realizations")
    var = geosim.outputs.variable_name(spec["data.value"])
    for r in range(3):
        np.testing.assert_array_equal(table[f"r{r:04d}"].to_numpy(dtype=np.float32), reals[var].values[r, k, i, j])
    parquet = pd.read_parquet(out / "block_model.parquet")
    pd.testing.assert_frame_equal(parquet, table, check_exact=False, rtol=1e-9, check_dtype=False)
    import pyarrow.parquet as pq
    schema = pq.read_schema(out / "block_model.parquet")
    assert schema.metadata[b"geosim:caution"].decode() == geosim.CAUTION
    assert schema.field("mean").metadata[b"unit"].decode() == "% Cu"
    ds.close()


def test_default_3d_run_writes_cubes_not_level_files(tmp_path):
    spec = load_spec(ORE, overrides={**SMALL, "outputs.level_geotiffs": False, "outputs.block_model": ["auto"],
                                     "outputs.block_model_realizations": False, "simulation.realizations": 2,
                                     "outputs.estimate": False, "outputs.cross_validation": False})
    result = geosim.pipeline.run(spec, tmp_path / "run")
    out = tmp_path / "run"
    top = sorted(p.name for p in out.iterdir())
    # no GeoTIFF and no file per realization at point support (the ore sample's block-support outputs
    # are their own): the workers wrote one store, the run one cube
    assert not _point_support_tifs(out)
    assert sorted(p.name for p in (out / "realizations").iterdir()) == ["store.zarr"]
    picks = sorted(p for p in (out / "ranked").iterdir() if "blocks" not in p.name)  # one cube per pick
    assert [p.name.split("_r")[0] for p in picks] == ["metal_0.5_P10", "metal_0.5_P50", "metal_0.5_P90"]
    var = geosim.outputs.variable_name(spec["data.value"])
    with result.to_xarray("realizations") as cube:
        for p in picks:
            with open_cube(p) as one:
                i = int(p.stem.rsplit("_r", 1)[1])
                assert one.realization.values.tolist() == [i] and one.attrs["comment"] == geosim.CAUTION
                np.testing.assert_array_equal(one[var].values[0], cube[var].values[i])
    assert {"summary.nc", "realizations.nc", "block_model.csv", "block_model.csv-metadata.json"} <= set(top)
    assert all(r["files"] == [] and r["store"]["path"] == "realizations/store.zarr" for r in
               (json.loads(f.read_text())["record"] for f in (out / "run-state").glob("r0*.json")))
    ds = result.to_xarray("realizations")
    assert ds.realization.values.tolist() == [0, 1]
    with open_cube(out / "realizations" / "store.zarr") as store:  # kept for a rerun (keep_realizations)
        np.testing.assert_array_equal(store[var].values, ds[var].values)
    ds.close()


def test_3d_run_resumes_and_extends_from_its_store(tmp_path):
    quick = {**SMALL, "outputs.level_geotiffs": False, "outputs.block_model": [], "outputs.estimate": False,
             "outputs.cross_validation": False, "simulation.realizations": 2}
    out = tmp_path / "run"
    geosim.pipeline.run(load_spec(ORE, overrides=quick), out)
    three = load_spec(ORE, overrides={**quick, "simulation.realizations": 3})
    extended = geosim.pipeline.run(three, out)
    assert extended.kept == [0, 1] and extended.computed == [2]
    # an interrupted realization: its data half there, its marker not set; only it is computed again
    store = zarr.open_group(str(out / "realizations" / "store.zarr"), mode="r+")
    store["realization_complete"][1] = 0
    resumed = geosim.pipeline.run(three, out)
    assert resumed.kept == [0, 2] and resumed.computed == [1]
    fresh = geosim.pipeline.run(three, tmp_path / "fresh")
    var = geosim.outputs.variable_name(three["data.value"])
    for kind, name in (("realizations", var), ("summary", "mean"), ("summary", "prob_above")):
        with resumed.to_xarray(kind) as got, fresh.to_xarray(kind) as want:
            np.testing.assert_array_equal(got[name].values, want[name].values)
    # without keep_realizations the store goes once the cube holds the realizations
    lean = geosim.pipeline.run(load_spec(ORE, overrides={**quick, "outputs.keep_realizations": False}),
                               tmp_path / "lean")
    assert not (tmp_path / "lean" / "realizations").exists()
    with lean.to_xarray("realizations") as ds:
        assert ds.realization.values.tolist() == [0, 1]


def test_two_dimensional_results_convert_from_geotiffs(tmp_path):
    aquifer = ORE.parent.parent / "alluvial_aquifer" / "run.toml"
    spec = load_spec(aquifer, overrides={"grid.cell": [200.0, 200.0], "simulation.realizations": 2,
                                         "simulation.workers": 1, "outputs.plots": False})
    result = geosim.pipeline.run(spec, tmp_path / "run")
    ds = result.to_xarray("summary")
    with rasterio.open(tmp_path / "run" / "summary.tif") as src:
        np.testing.assert_array_equal(ds["mean"].values, src.read(1).astype(np.float64))
        np.testing.assert_allclose(ds.x.values[:2], [src.xy(0, 0)[0], src.xy(0, 1)[0]])
        np.testing.assert_allclose(ds.y.values[0], src.xy(0, 0)[1])
    assert ds.cutoff.values.tolist() == spec["outputs.cutoffs"]
    est = geosim.pipeline.estimate(spec)
    assert "estimated" in repr(est) and "m/s" in repr(est)
    np.testing.assert_array_equal(est.to_xarray()["mean"].values, est.mean)
    with pytest.raises(ValueError, match="kind must be"):
        result.to_xarray("cube")


def test_zarr_cube_from_a_dask_cluster_equals_the_serial_netcdf(ore_run, tmp_path):
    pytest.importorskip("zarr")
    distributed = pytest.importorskip("distributed")
    spec, result, _ = ore_run
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        remote = load_spec(ORE, overrides={**SMALL, "simulation.workers": None, "outputs.cube": "zarr",
                                           "simulation.cluster": cluster.scheduler_address,
                                           "outputs.level_geotiffs": False, "outputs.block_model": []})
        zarr_run = geosim.pipeline.run(remote, tmp_path / "dask")
    assert Path(zarr_run.files["realizations_cube"][0]).name == "realizations.zarr"
    # the workers wrote their realizations into the one store: no per-realization file anywhere
    assert not (tmp_path / "dask" / "realizations").exists() and not _point_support_tifs(tmp_path / "dask")
    assert all(r["store"]["path"] == "realizations.zarr" for r in
               (json.loads(f.read_text())["record"] for f in (tmp_path / "dask" / "run-state").glob("r0*.json")))
    var = geosim.outputs.variable_name(spec["data.value"])
    for kind, name in (("realizations", var), ("summary", "mean"), ("summary", "prob_above")):
        got, want = zarr_run.to_xarray(kind), result.to_xarray(kind)
        np.testing.assert_array_equal(got[name].values, want[name].values)
        assert got[name].attrs["units"] == want[name].attrs["units"]
        np.testing.assert_array_equal(got.x.values, want.x.values)


@pytest.mark.parametrize("shape", [(7, 9), (3, 7, 9), (1, 1), (2, 1, 5)])
def test_block_model_rows_are_the_active_nodes_sorted_by_z_y_x(shape):
    # the rows come from the row-reversed grid (no sort); the reference sorts the active nodes'
    # centres with numpy's lexsort, z first, and gathers every column by that order
    from geosim.io.cube import block_model_table
    rng = np.random.default_rng(len(shape) * 10 + shape[-1])
    cell = (10.0, 5.0, 2.5)[:len(shape)]
    grid = geosim.Grid(1000.0, 2000.0, cell, shape, zmin=100.0 if len(shape) == 3 else 0.0)
    grid = grid.with_mask(rng.random(shape) > 0.3)
    values = {"a": (rng.standard_normal(shape), "a", ""), "b": (rng.standard_normal(shape).astype(np.float32), "b", "m")}
    columns, data = block_model_table(grid, values)
    xyz = grid.coords()
    order = np.lexsort(tuple(xyz[:, a] for a in range(grid.ndim)))
    assert [c.name for c in columns] == list(data)
    for a, name in enumerate("xyz"[:grid.ndim]):
        np.testing.assert_array_equal(data[name], xyz[order, a])
    for name, (v, _, _) in values.items():
        assert data[name].dtype == v.dtype
        np.testing.assert_array_equal(data[name], v[grid.mask][order])
    np.testing.assert_array_equal(data["dx"], np.full(len(order), cell[0]))
