"""The realization store: one chunked Zarr store that the workers fill in parallel.

The reference is the serial path: realization ``i`` depends only on the seed and ``i``, so
a store filled by Dask workers on a LocalCluster (loopback) must equal, value for value,
the store filled in this process, and the cube read back must equal the fields the
engine returns.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import geosim
import geosim.crs
from geosim.ensemble import RealizationWriter
from geosim.io.cube import STORE_CHUNK, RealizationStore, open_cube, realization_sha256
from geosim.errors import InputError

xr = pytest.importorskip("xarray")
zarr = pytest.importorskip("zarr")

# 2 levels of 90 x 80 nodes in chunks of 64 cells: a level spans four chunks
GRID = geosim.Grid(500000.0, 6000000.0, (30.0, 30.0, 5.0), (2, 90, 80), crs=geosim.crs.parse_crs(32633),
                   zmin=100.0)
CHUNK = 64
DATA = np.array([[500100.0, 6000100.0, 104.0], [501500.0, 6002000.0, 109.0], [502400.0, 6001200.0, 111.0]])
SCORES = np.array([0.8, -1.1, 0.3])
MODEL = geosim.Nugget(0.05) + geosim.Spherical(0.95, geosim.Anisotropy((900.0, 500.0, 20.0), azimuth=30.0))
SEED = 4242


def _store(path, run_key="run-a", grid=GRID):
    return RealizationStore(path, grid, name="cu_pct", long_name="cu_pct (%), conditional realization",
                            units="%", provenance={"seed": str(SEED), "engine": "sequential"}, run_key=run_key,
                            chunk=CHUNK)


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
        store.write(i, f)
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
    # float32 as stored; NaN outside the domain
    np.testing.assert_array_equal(ds["cu_pct"].values, np.asarray(fields, dtype=np.float32))
    # whole chunks per realization and level: no two writers ever touch one chunk
    array = zarr.open_group(str(store.path), mode="r")["cu_pct"]
    assert array.chunks == (1, 1, CHUNK, CHUNK) and array.shape == (2, 2, 90, 80)
    assert store.n_windows == 2 * 2 * 2
    default = RealizationStore(tmp_path / "default.zarr", GRID, name="cu_pct", long_name="cu_pct")
    assert default.chunks == (1, 1, 90, 80) and STORE_CHUNK == 256  # whole levels of this small grid
    ds.close()


def test_an_unfinished_store_is_refused_and_marks_what_is_complete(tmp_path):
    store = _store(tmp_path / "r.zarr")
    store.open(3)
    store.write(1, _fields(2)[1])
    assert store.complete().tolist() == [False, True, False]
    with pytest.raises(InputError, match="not finished") as err:
        open_cube(store.path)
    assert err.value.file == str(store.path)
    with pytest.raises(InputError, match="2 realization\\(s\\) are not complete in the store: 0, 2"):
        store.finish([0, 1, 2])
    assert xr.open_zarr(store.path, consolidated=False).attrs["geosim_complete"] == "no"


def test_a_resumed_store_keeps_its_realizations_and_grows_or_starts_afresh(tmp_path):
    fields = _fields(4)
    store = _store(tmp_path / "r.zarr")
    store.open(2)
    sha = [store.write(i, fields[i]) for i in range(2)]
    assert sha == [realization_sha256(f) for f in fields[:2]]
    store.open(4, keep=True)  # the same run, extended
    assert store.complete().tolist() == [True, True, False, False]
    assert all(store.verify(i, sha[i]) for i in range(2)) and not store.verify(0, sha[1])
    for i in (2, 3):
        store.write(i, fields[i])
    store.finish(range(4))
    with open_cube(store.path) as ds:
        assert ds.realization.values.tolist() == [0, 1, 2, 3]
        np.testing.assert_array_equal(ds["cu_pct"].values, np.asarray(fields, dtype=np.float32))
    other = _store(tmp_path / "r.zarr", run_key="run-b")  # another run's store is never continued
    other.open(4, keep=True)
    assert other.complete().tolist() == [False] * 4
    store.open(4, keep=False)
    assert not store.verify(0, sha[0])


def test_dask_workers_fill_one_store_that_equals_the_serial_one(tmp_path):
    distributed = pytest.importorskip("distributed")
    n = 4
    stores, records = {}, {}
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        for how, options in (("dask", {"client": client}), ("serial", {"workers": 1})):
            folder = tmp_path / how
            store = _store(folder / "realizations.zarr")
            store.open(n)
            writer = RealizationWriter(folder, GRID, tags={"seed": str(SEED)}, units="%", store=store, cube="zarr",
                                       geotiffs=False)
            records[how] = geosim.simulate(DATA, SCORES, MODEL, GRID, n_realizations=n, seed=SEED, sink=writer,
                                           **options)
            writer.finish(records[how], cutoffs=[0.0])
            stores[how] = folder
        workers = {w["id"] for w in client.scheduler_info()["workers"].values()}
    assert len(workers) == 2
    # no per-realization files anywhere: the store and the summary cube only
    assert sorted(p.name for p in (tmp_path / "dask").iterdir()) == ["realizations.zarr", "summary.zarr"]
    assert [r["sha256"] for r in records["dask"]] == [[]] * n
    assert [r["store"]["sha256"] for r in records["dask"]] == [r["store"]["sha256"] for r in records["serial"]]
    with open_cube(stores["dask"] / "realizations.zarr") as got, \
            open_cube(stores["serial"] / "realizations.zarr") as want:
        np.testing.assert_array_equal(got["cu_pct"].values, want["cu_pct"].values)
        reference = np.asarray(_fields(n), dtype=np.float32)
        np.testing.assert_array_equal(got["cu_pct"].values, reference)
    with open_cube(stores["dask"] / "summary.zarr") as got, open_cube(stores["serial"] / "summary.zarr") as want:
        for name in ("mean", "std", "P10", "P50", "P90", "prob_above"):
            np.testing.assert_array_equal(got[name].values, want[name].values)
        # the mean of the cube equals the mean of the realizations (float32 as stored, summed in double)
        np.testing.assert_allclose(got["mean"].values, reference.astype(np.float64).mean(axis=0), rtol=1e-6)
