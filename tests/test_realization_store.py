"""The realization store: one chunked Zarr store that the workers fill in parallel.

The reference is the serial path: realization ``i`` depends only on the seed and ``i``, so
a store filled by Dask workers on a LocalCluster (loopback) must equal, value for value,
the store filled in this process, the cube read back must equal the fields the engine
returns, and the NetCDF cube written from either store must be the same file byte for byte.
A resumed run keeps exactly the realizations whose stored data still have their recorded
SHA-256 (checked here against hashlib over the float32 bytes, independently of the store).
"""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

import geosim
import geosim.crs
import geosim.outputs
import geosim.pipeline
from geosim.config.runspec import load_spec
from geosim.ensemble import RealizationWriter
from geosim.errors import InputError
from geosim.io.cube import STORE_CHUNK, RealizationStore, open_cube, realization_sha256, stored_realization_ok

xr = pytest.importorskip("xarray")
zarr = pytest.importorskip("zarr")
pytest.importorskip("netCDF4")

# 2 levels of 90 x 80 nodes in chunks of 64 cells: a level spans four chunks
GRID = geosim.Grid(500000.0, 6000000.0, (30.0, 30.0, 5.0), (2, 90, 80), crs=geosim.crs.parse_crs(32633),
                   zmin=100.0)
CHUNK = 64
DATA = np.array([[500100.0, 6000100.0, 104.0], [501500.0, 6002000.0, 109.0], [502400.0, 6001200.0, 111.0]])
SCORES = np.array([0.8, -1.1, 0.3])
MODEL = geosim.Nugget(0.05) + geosim.Spherical(0.95, geosim.Anisotropy((900.0, 500.0, 20.0), azimuth=30.0))
SEED = 4242
ORE = Path(__file__).resolve().parent.parent / "sample_fields" / "ore_prospect" / "run.toml"
QUICK = {"grid.cell": [40.0, 40.0, 20.0], "simulation.realizations": 3, "simulation.workers": 1,
         "outputs.plots": False, "outputs.level_geotiffs": False, "outputs.estimate": False,
         "outputs.cross_validation": False, "outputs.block_model": ["csv"],
         "outputs.block_model_realizations": True}


def _store(path, run_key="run-a", grid=GRID):
    return RealizationStore(path, grid, name="cu_pct", long_name="cu_pct (%), conditional realization",
                            units="%", provenance={"seed": str(SEED), "engine": "sequential"}, run_key=run_key,
                            chunk=CHUNK)


def _sha(values) -> str:
    """SHA-256 of the float32 C-order bytes with every NaN the canonical quiet NaN, by hashlib."""
    a = np.asarray(values, dtype=np.float32).copy()
    a[np.isnan(a)] = np.frombuffer(np.uint32(0x7FC00000).tobytes(), dtype=np.float32)[0]
    return hashlib.sha256(a.tobytes()).hexdigest()


_FIELDS: list = []


def _fields(n):
    """The first ``n`` realizations computed in this process (the serial reference), computed once."""
    if len(_FIELDS) < n:
        _FIELDS[:] = geosim.simulate(DATA, SCORES, MODEL, GRID, n_realizations=4, seed=SEED, workers=1)
    return _FIELDS[:n]


def test_the_store_has_the_cube_layout_and_one_chunk_per_realization_and_level(tmp_path):
    store = _store(tmp_path / "r.zarr")
    store.open(2)
    fields = _fields(2)
    for i, f in enumerate(fields):
        assert store.write(i, f) == _sha(f) == realization_sha256(f)
    store.finish([0, 1])
    ds = open_cube(store.path)
    z, y, x = GRID.axes()
    np.testing.assert_array_equal(ds.x.values, x)
    np.testing.assert_array_equal(ds.y.values, y)
    np.testing.assert_array_equal(ds.z.values, z)
    assert ds["cu_pct"].dims == ("realization", "z", "y", "x") and ds.realization.values.tolist() == [0, 1]
    assert ds["cu_pct"].attrs["units"] == "%" and ds["cu_pct"].attrs["grid_mapping"] == "spatial_ref"
    assert geosim.crs.parse_crs(ds["spatial_ref"].attrs["crs_wkt"]).to_epsg() == 32633
    assert ds.attrs["comment"] == geosim.CAUTION and ds.attrs["geosim_seed"] == str(SEED)
    assert ds.attrs["Conventions"] == "CF-1.8" and ds.attrs["geosim_complete"] == "yes"
    # float32 as stored; NaN outside the domain; every level at its own z
    np.testing.assert_array_equal(ds["cu_pct"].values, np.asarray(fields, dtype=np.float32))
    # whole chunks per realization and level: no two writers ever touch one chunk
    array = zarr.open_group(str(store.path), mode="r")["cu_pct"]
    assert array.chunks == (1, 1, CHUNK, CHUNK) and array.shape == (2, 2, 90, 80)
    default = RealizationStore(tmp_path / "default.zarr", GRID, name="cu_pct", long_name="cu_pct")
    assert default.chunks == (1, 1, 90, 80) and STORE_CHUNK == 256  # whole levels of this small grid
    # a box of two levels and a corner, as the summaries read it
    box = (slice(0, 2), slice(60, 90), slice(70, 80))
    np.testing.assert_array_equal(store.box([1, 0], box), np.asarray(fields, dtype=np.float32)[[1, 0]][:, 0:2, 60:90, 70:80])
    ds.close()


def test_the_netcdf_cube_is_uncompressed_by_default_and_compressed_at_the_asked_zlib_level(tmp_path):
    # both files hold exactly the stored float32 values; only the storage (and the note saying it) differs
    store = _store(tmp_path / "r.zarr")
    store.open(2)
    fields = _fields(2)
    for i, f in enumerate(fields):
        store.write(i, f)
    store.finish([0, 1])
    plain, packed = store.to_netcdf(tmp_path / "plain.nc"), store.to_netcdf(tmp_path / "packed.nc", complevel=1)
    with xr.open_dataset(plain) as a, xr.open_dataset(packed) as b:
        for ds in (a, b):
            np.testing.assert_array_equal(ds["cu_pct"].values, np.asarray(fields, dtype=np.float32))
        assert not a["cu_pct"].encoding["zlib"] and not a["cu_pct"].encoding["shuffle"]
        assert b["cu_pct"].encoding["zlib"] and b["cu_pct"].encoding["complevel"] == 1 and b["cu_pct"].encoding["shuffle"]
        assert a.attrs["geosim_storage"].endswith(", uncompressed")
        assert b.attrs["geosim_storage"].endswith(", zlib level 1 with byte shuffle")
        assert a["cu_pct"].encoding["chunksizes"] == b["cu_pct"].encoding["chunksizes"] == (1, 1, 90, 80)


def test_the_realization_cube_zlib_key_reaches_the_writer_and_a_bad_level_names_the_key(tmp_path):
    spec = load_spec(ORE, overrides={**QUICK, "outputs.realization_cube_zlib": 3})
    grid = geosim.pipeline.make_grid(spec, geosim.pipeline.prepare_data(spec))
    assert geosim.outputs._cube_options(spec, grid, grid, "x")["cube_complevel"] == 3
    with pytest.raises(InputError, match=r"outputs\.realization_cube_zlib.*integer >= 0 and <= 9"):
        load_spec(ORE, overrides={**QUICK, "outputs.realization_cube_zlib": 12})
    with pytest.raises(ValueError, match="zlib level 0-9"):
        RealizationWriter(tmp_path, GRID, cube="netcdf", cube_complevel=10)


def test_an_unfinished_store_is_refused_and_marks_what_is_complete(tmp_path):
    store = _store(tmp_path / "r.zarr")
    with pytest.raises(ValueError, match="not open"):  # a worker never creates the store itself
        store.write(0, _fields(1)[0])
    store.open(3)
    store.write(1, _fields(2)[1])
    assert store.complete().tolist() == [False, True, False]
    with pytest.raises(InputError, match="not finished") as err:
        open_cube(store.path)
    assert err.value.file == str(store.path)
    with pytest.raises(InputError, match="2 realization\\(s\\) are not complete in the store: 0, 2"):
        store.finish([0, 1, 2])
    assert xr.open_zarr(store.path, consolidated=False).attrs["geosim_complete"] == "no"
    # data without the marker (a worker killed between its chunks and its marker) does not count
    zarr.open_group(str(store.path), mode="r+")["cu_pct"][0] = np.asarray(_fields(1)[0], dtype=np.float32)
    assert not stored_realization_ok(store.path, 0, _sha(_fields(1)[0]), "run-a")
    assert stored_realization_ok(store.path, 1, _sha(_fields(2)[1]), "run-a")


def test_a_resumed_store_keeps_what_was_verified_and_grows_or_starts_afresh(tmp_path):
    fields = _fields(4)
    store = _store(tmp_path / "r.zarr")
    store.open(3)
    sha = [store.write(i, fields[i]) for i in range(3)]
    assert sha == [_sha(f) for f in fields[:3]]
    assert all(stored_realization_ok(store.path, i, sha[i], "run-a") for i in range(3))
    assert not stored_realization_ok(store.path, 0, sha[1], "run-a")  # another realization's data
    assert not stored_realization_ok(store.path, 0, sha[0], "run-b")  # another run's store
    assert not stored_realization_ok(store.path, 3, sha[0], "run-a")  # beyond the store
    store.open(4, keep=[0, 1])  # the same run, extended; realization 2 is to be written again
    assert store.complete().tolist() == [True, True, False, False]
    for i in (2, 3):
        store.write(i, fields[i])
    store.finish(range(4))
    with open_cube(store.path) as ds:
        assert ds.realization.values.tolist() == [0, 1, 2, 3]
        np.testing.assert_array_equal(ds["cu_pct"].values, np.asarray(fields, dtype=np.float32))
    other = _store(tmp_path / "r.zarr", run_key="run-b")  # another run's store is never continued
    other.open(4, keep=[0, 1])
    assert other.complete().tolist() == [False] * 4
    store.open(4)
    assert not stored_realization_ok(store.path, 0, sha[0], "run-a")


def test_a_changed_chunk_fails_its_checksum(tmp_path):
    fields = _fields(2)
    store = _store(tmp_path / "r.zarr")
    store.open(2)
    sha = [store.write(i, f) for i, f in enumerate(fields)]
    array = zarr.open_group(str(store.path), mode="r+")["cu_pct"]
    # one value of the last chunk of level 1 of realization 1 (rows 64-89, columns 64-79)
    changed = np.asarray(array[1, 1, 64:90, 64:80])
    r, c = np.argwhere(np.isfinite(changed))[-1]
    changed[r, c] += 1e-3
    array[1, 1, 64:90, 64:80] = changed
    assert stored_realization_ok(store.path, 0, sha[0], "run-a")
    assert not stored_realization_ok(store.path, 1, sha[1], "run-a")
    assert _sha(store.read(1)) != sha[1] and _sha(store.read(0)) == sha[0]


def _failing_data_writes(monkeypatch, index: int, ndim: int) -> None:
    """Make every write of realization ``index``'s data (an array of ``ndim`` dimensions) raise, as a
    disk that fails (or a worker killed) between a realization's chunks and its marker would; the
    store itself is real, only this one failure is injected."""
    real = zarr.Array.__setitem__
    real_chunks = geosim.io.cube._write_chunks

    def failing(self, key, value):
        first = key[0] if isinstance(key, tuple) else key
        if self.ndim == ndim and first == index:
            raise OSError(f"injected failure writing realization {index}")
        return real(self, key, value)

    def failing_chunks(folder, i, block):  # the store's own chunk writer (zarr's layout, written directly)
        if block.ndim == ndim - 1 and i == index:
            raise OSError(f"injected failure writing realization {index}")
        return real_chunks(folder, i, block)

    monkeypatch.setattr(zarr.Array, "__setitem__", failing)
    monkeypatch.setattr(geosim.io.cube, "_write_chunks", failing_chunks)


def test_a_realization_whose_data_write_fails_is_not_marked_complete(tmp_path, monkeypatch):
    fields = _fields(2)
    store = _store(tmp_path / "r.zarr")
    store.open(2)
    store.write(0, fields[0])
    with monkeypatch.context() as m:
        _failing_data_writes(m, 1, GRID.ndim + 1)
        with pytest.raises(OSError, match="injected"):
            store.write(1, fields[1])
    assert store.complete().tolist() == [True, False]
    assert not stored_realization_ok(store.path, 1, _sha(fields[1]), "run-a")
    with pytest.raises(InputError, match="1 realization\\(s\\) are not complete in the store: 1"):
        store.finish([0, 1])


def test_a_run_whose_store_write_failed_resumes_from_the_realizations_marked_complete(tmp_path, monkeypatch):
    spec = load_spec(ORE, overrides=QUICK)
    out = tmp_path / "run"
    with monkeypatch.context() as m:
        _failing_data_writes(m, 1, 4)
        with pytest.raises(Exception, match="injected"):
            geosim.pipeline.run(spec, out)
    store = RealizationStore(out / "realizations" / "store.zarr", GRID, name="x", long_name="x")
    assert store.complete().tolist() == [True, False, False]
    with pytest.raises(InputError, match="not finished"):
        open_cube(store.path)
    resumed = geosim.pipeline.run(spec, out)
    assert resumed.kept == [0] and resumed.computed == [1, 2]


def test_dask_workers_fill_one_store_that_equals_the_serial_one(tmp_path):
    distributed = pytest.importorskip("distributed")
    n = 4
    records = {}
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        for how, options in (("dask", {"client": client}), ("serial", {"workers": 1})):
            for cube in ("zarr", "netcdf"):
                folder = tmp_path / how / cube
                writer = RealizationWriter(folder, GRID, tags={"seed": str(SEED)}, units="%", cube=cube,
                                           level_geotiffs=False, variable="cu_pct", tables=(".csv",),
                                           table_realizations=True)
                writer.open_stores(n)
                records[how, cube] = geosim.simulate(DATA, SCORES, MODEL, GRID, n_realizations=n, seed=SEED,
                                                     sink=writer, **options)
                writer.finish(records[how, cube], cutoffs=[0.0])
        workers = {w["id"] for w in client.scheduler_info()["workers"].values()}
    assert len(workers) == 2
    dask_zarr, serial_zarr = tmp_path / "dask" / "zarr", tmp_path / "serial" / "zarr"
    # no file per realization anywhere: the store, the summary cube and the block-model table
    assert sorted(p.name for p in dask_zarr.iterdir()) == [
        "block_model.csv", "block_model.csv-metadata.json", "realizations.zarr", "summary.zarr"]
    assert sorted(p.name for p in (tmp_path / "dask" / "netcdf" / "realizations").iterdir()) == ["store.zarr"]
    assert [r["files"] for r in records["dask", "zarr"]] == [[]] * n
    reference = np.asarray(_fields(n), dtype=np.float32)
    assert [r["store"]["sha256"] for r in records["dask", "zarr"]] == [_sha(f) for f in reference]
    with open_cube(dask_zarr / "realizations.zarr") as got, open_cube(serial_zarr / "realizations.zarr") as want:
        np.testing.assert_array_equal(got["cu_pct"].values, want["cu_pct"].values)
        np.testing.assert_array_equal(got["cu_pct"].values, reference)
    with open_cube(dask_zarr / "summary.zarr") as got, open_cube(serial_zarr / "summary.zarr") as want:
        for name in ("mean", "std", "P10", "P50", "P90", "prob_above"):
            np.testing.assert_array_equal(got[name].values, want[name].values)
        # the mean of the cube is the mean of the realizations (float32 as stored, summed in double;
        # rounded to float32 once more: 6e-8 relative)
        np.testing.assert_allclose(got["mean"].values, reference.astype(np.float64).mean(axis=0), rtol=1e-6)
    # the NetCDF cubes and the tables are the same files byte for byte, whoever wrote the store
    for name in ("realizations.nc", "summary.nc", "block_model.csv"):
        assert (tmp_path / "dask" / "netcdf" / name).read_bytes() == (tmp_path / "serial" / "netcdf" / name).read_bytes()
    with xr.open_dataset(tmp_path / "dask" / "netcdf" / "realizations.nc") as ds:
        np.testing.assert_array_equal(ds["cu_pct"].values, reference)
        assert not ds["cu_pct"].encoding["zlib"]  # noise compresses little: stored uncompressed


def _records(out: Path) -> dict[int, dict]:
    return {json.loads(p.read_text())["index"]: json.loads(p.read_text())["record"]
            for p in (out / "run-state").glob("r0*.json")}


def test_a_resumed_run_redoes_a_changed_and_an_interrupted_realization_and_equals_a_fresh_run(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")  # the cubes' provenance times agree
    spec = load_spec(ORE, overrides=QUICK)
    out = tmp_path / "run"
    geosim.pipeline.run(spec, out)
    store = zarr.open_group(str(out / "realizations" / "store.zarr"), mode="r+")
    var = geosim.outputs.variable_name(spec["data.value"])
    # realization 1: one stored value changed after the run (its marker still set)
    values = np.asarray(store[var][1])
    k, r, c = np.argwhere(np.isfinite(values))[0]
    values[k, r, c] += 0.25
    store[var][1] = values
    # realization 2: a worker killed after its data, before its marker and its record
    store["realization_complete"][2] = 0
    (out / "run-state" / "r00002.json").unlink()
    # and a Zarr cube whose atomic write never reached its rename (a folder, swept like a file)
    (out / ".summary.zarr.partial").mkdir()
    (out / ".summary.zarr.partial" / "zarr.json").write_text("{}")
    resumed = geosim.pipeline.run(spec, out)
    assert not (out / ".summary.zarr.partial").exists()
    assert resumed.kept == [0] and resumed.computed == [1, 2]
    fresh = geosim.pipeline.run(spec, tmp_path / "fresh")
    for name in ("realizations.nc", "summary.nc", "block_model.csv"):
        assert (out / name).read_bytes() == (tmp_path / "fresh" / name).read_bytes(), name
    assert [r["store"]["sha256"] for _, r in sorted(_records(out).items())] == \
        [r["store"]["sha256"] for _, r in sorted(_records(tmp_path / "fresh").items())]
    with open_cube(out / "realizations.nc") as ds:
        assert [_sha(ds[var].values[i]) for i in range(3)] == \
            [r["store"]["sha256"] for _, r in sorted(_records(out).items())]


def test_a_run_on_a_local_cluster_writing_zarr_equals_a_serial_run(tmp_path, monkeypatch):
    distributed = pytest.importorskip("distributed")
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")
    zarr_run = {**QUICK, "outputs.cube": "zarr", "blocks.cells": [2, 2, 1]}
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        remote = geosim.pipeline.run(load_spec(ORE, overrides={**zarr_run, "simulation.workers": None,
                                                                "simulation.cluster": cluster.scheduler_address}),
                                     tmp_path / "cluster")
    serial = geosim.pipeline.run(load_spec(ORE, overrides=zarr_run), tmp_path / "serial")
    assert remote.computed == serial.computed == [0, 1, 2]
    var = geosim.outputs.variable_name(load_spec(ORE)["data.value"])
    for sub in ("", "blocks"):
        a, b = tmp_path / "cluster" / sub, tmp_path / "serial" / sub
        assert not [p for p in a.rglob("r0*") if p.parent.name != "run-state"]  # no file per realization
        with open_cube(a / "realizations.zarr") as got, open_cube(b / "realizations.zarr") as want:
            assert got.realization.values.tolist() == [0, 1, 2]
            np.testing.assert_array_equal(got[var].values, want[var].values)
            assert np.isfinite(got[var].values).any()
        with open_cube(a / "summary.zarr") as got, open_cube(b / "summary.zarr") as want:
            for name in ("mean", "std", "P10", "P50", "P90", "prob_above"):
                np.testing.assert_array_equal(got[name].values, want[name].values)
        assert (a / "block_model.csv").read_bytes() == (b / "block_model.csv").read_bytes()
    with remote.to_xarray("realizations") as ds:
        assert ds[var].dims == ("realization", "z", "y", "x")


@pytest.mark.parametrize("log", [False, True])
def test_the_ensemble_spread_of_a_store_run_equals_the_one_read_from_the_summary_rasters(tmp_path, log):
    # a run with a store keeps its summary bands in memory and may write no summary raster: the
    # report's spread computed from the bands must be the one computed from the rasters
    from geosim.io.geotiff import as_stored, write_raster
    from geosim.secondary import ensemble_spread
    from geosim.summaries import summary_band_descriptions, summary_bands
    stack = np.exp(np.asarray(_fields(4), dtype=np.float64))
    bands = as_stored(summary_bands(stack, [1.0]))
    paths = write_raster(tmp_path / "summary.tif", bands, GRID, descriptions=summary_band_descriptions([1.0], "%"))
    got, want = ensemble_spread(bands, log=log), ensemble_spread(paths, log=log)
    assert got.keys() == want.keys()
    for key in want:
        assert got[key] == pytest.approx(want[key], rel=1e-12)


@pytest.mark.parametrize("cube", ["netcdf", "zarr"])
def test_a_3d_run_of_two_units_writes_its_realizations_into_the_store_with_the_unit_codes(tmp_path, cube):
    # the units run's writer takes the same cube options as a one-unit run: no file per realization,
    # the unit codes a variable of every cube and a column of the block-model table
    import geosim.units_run as units_run
    from test_units_run import _field, _write
    xy, unit, grade = _field()
    rng = np.random.default_rng(2)
    path = _write(tmp_path / "a", xy, unit, grade, realizations=2)
    rows = (tmp_path / "a" / "pts.csv").read_text().splitlines()
    (tmp_path / "a" / "pts.csv").write_text("\n".join([rows[0] + ",z"] + [
        f"{r},{rng.uniform(0.0, 30.0):.2f}" for r in rows[1:]]) + "\n")
    path.write_text(path.read_text().replace('y = "y"', 'y = "y"\nz = "z"').replace(
        "cell = [10.0, 10.0]", "cell = [20.0, 20.0, 10.0]\nz_range = [0.0, 30.0]").replace(
        "ranges = [120.0]", "ranges = [120.0, 120.0, 30.0]").replace("ranges = [220.0]", "ranges = [220.0, 220.0, 40.0]"
        ).replace("plots = false", f'plots = false\ncube = "{cube}"'))
    spec = load_spec(path)
    out = tmp_path / "out"
    units_run.run(spec, out)
    units = units_run.prepare_units(spec)
    codes = np.where(units.grid.mask, units.node_codes, np.nan)
    assert not [p for p in out.rglob("r0*") if p.parent.name != "run-state"] and not list(out.rglob("*.tif"))
    suffix = ".nc" if cube == "netcdf" else ".zarr"
    with open_cube(out / f"realizations{suffix}") as real, open_cube(out / f"summary{suffix}") as summary:
        assert real["grade"].dims == ("realization", "z", "y", "x") and real.realization.values.tolist() == [0, 1]
        np.testing.assert_array_equal(real["unit_code"].values, codes)
        np.testing.assert_array_equal(summary["unit_code"].values, codes)
        assert real["unit_code"].attrs["long_name"] == "unit code" and real.attrs["comment"] == geosim.CAUTION
        # each unit's nodes hold that unit's values: the high-grade unit's median above the low one's
        values = real["grade"].values
        assert np.nanmedian(values[:, codes == 2]) > np.nanmedian(values[:, codes == 1])
        np.testing.assert_allclose(summary["mean"].values, values.astype(np.float64).mean(axis=0), rtol=1e-6)
        table = np.genfromtxt(out / "block_model.csv", delimiter=",", names=True)
        z, y, x = (real[c].values for c in ("z", "y", "x"))
        k, r, c = (np.searchsorted(np.sort(a), table[n]) for a, n in ((z, "z"), (y[::-1], "y"), (x, "x")))
        np.testing.assert_array_equal(table["unit_code"], codes[k, len(y) - 1 - r, c])
        # the table writes 10 significant digits: 5e-10 relative at most
        np.testing.assert_allclose(table["mean"], summary["mean"].values[k, len(y) - 1 - r, c], rtol=1e-9)
    if cube == "zarr":
        assert zarr.open_group(str(out / "realizations.zarr"), mode="r").attrs["geosim_complete"] == "yes"


def test_a_3d_store_run_with_plots_maps_the_summary_the_store_gave(tmp_path):
    # a 3-D run with the default cube and no per-level GeoTIFFs has no summary raster: the maps of
    # its plotted level are drawn from the summary bands the store gave (a run that looked for the
    # rasters failed at the end, after every realization was written)
    spec = load_spec(ORE, {**QUICK, "outputs.plots": True})
    result = geosim.pipeline.run(spec, tmp_path / "out")
    plots = [Path(p).name for p in result.files["plots"]]
    assert not result.files.get("summary")
    maps = [p for p in plots if p[0] == "z" and p[4] == "_"]
    assert len({p[:4] for p in maps}) == 1 and len(maps) >= 5, plots
    assert {"histogram_reproduction.png", "variogram_reproduction.png"} <= set(plots)
    assert all((tmp_path / "out" / p).stat().st_size > 1000 for p in plots)


def test_chunks_written_directly_are_the_files_zarr_writes(tmp_path):
    # edge chunks (90 x 80 nodes in chunks of 64), a level with no active node (a chunk of fill
    # values only, which zarr does not store) and the completion marker: realization 0 through the
    # store's own chunk writer, realization 1 the same values through zarr's array assignment
    field = _fields(1)[0].copy()
    field[1] = np.nan
    field[0, :40, :30] = np.nan
    store = _store(tmp_path / "r.zarr")
    store.open(2)
    sha = store.write(0, field)
    group = zarr.open_group(str(store.path), mode="r+")
    group["cu_pct"][1] = np.where(np.isnan(field), np.float32(np.nan), field.astype(np.float32))
    group["realization_complete"][1] = 1

    def chunks(variable, i):
        root = store.path / variable / "c" / str(i)
        return {p.relative_to(root).as_posix(): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}

    direct, by_zarr = chunks("cu_pct", 0), chunks("cu_pct", 1)
    assert sorted(direct) == sorted(by_zarr) == ["0/0/0", "0/0/1", "0/1/0", "0/1/1"]
    assert direct == by_zarr
    assert (store.path / "realization_complete" / "c" / "0").read_bytes() == \
        (store.path / "realization_complete" / "c" / "1").read_bytes()
    assert store.complete().tolist() == [True, True]
    back = store.read(0)
    assert np.array_equal(back, field.astype(np.float32), equal_nan=True)
    assert sha == _sha(back) == hashlib.sha256(np.where(np.isnan(back), np.float32(np.nan), back).tobytes()).hexdigest()
    # a chunk of a realization written again over one that became empty is removed, as zarr does
    field[0] = np.nan
    store.write(0, field)
    assert chunks("cu_pct", 0) == {}
    assert np.isnan(store.read(0)).all()


def test_a_store_of_another_layout_is_written_through_zarr(tmp_path):
    # a store whose codecs the chunk writer does not know (no compression here): zarr writes it
    store = _store(tmp_path / "r.zarr")
    group = zarr.open_group(str(store.path), mode="w")
    group.create_array("cu_pct", shape=(2,) + GRID.shape, chunks=(1, 1, CHUNK, CHUNK), dtype="float32",
                       fill_value=np.nan, compressors=None)
    group.create_array("realization_complete", shape=(2,), chunks=(1,), dtype="uint8", fill_value=0)
    field = _fields(1)[0]
    assert not geosim.io.cube._write_chunks(store.path / "cu_pct", 0, field.astype(np.float32))
    store.write(1, field)
    assert np.array_equal(store.read(1), field.astype(np.float32), equal_nan=True)
    assert store.complete().tolist() == [False, True]


def test_boxes_read_chunk_by_chunk_equal_zarr_reads(tmp_path):
    # the direct chunk reader against zarr's own: boxes across chunk edges (64-cell chunks on a
    # 90 x 80 level), a level of NaN only (chunks zarr does not store), indices out of order
    store = _store(tmp_path / "r.zarr")
    store.open(4)
    fields = [np.asarray(f, dtype=np.float32).copy() for f in _fields(3)]
    fields[1][1] = np.nan
    for i, f in zip((0, 1, 3), fields):
        store.write(i, f)
    assert not (store.path / "cu_pct" / "c" / "1" / "1").exists()  # no chunk of the fill value only
    boxes = [(slice(0, 2), slice(0, 90), slice(0, 80)), (slice(1, 2), slice(60, 70), slice(50, 79)),
             (slice(0, 1), slice(63, 65), slice(0, 1)), (slice(0, 2), slice(0, 64), slice(64, 80))]
    for indices in ([0, 1, 3], [3, 0], [2]):
        for box in boxes:
            got = store.box(indices, box)
            want = store.box(indices, box, zarr_only=True)
            assert got.dtype == want.dtype == np.float32 and got.shape == want.shape
            np.testing.assert_array_equal(got, want)
    np.testing.assert_array_equal(store.box([1], boxes[0])[0], fields[1])
    assert np.isnan(store.box([2], boxes[0])).all()  # never written: the fill value
    (box, got), _ = list(store.boxes([3, 1], boxes[1:3]))
    assert box == boxes[1]
    np.testing.assert_array_equal(got, np.stack([fields[2], fields[1]])[(slice(None),) + boxes[1]])
