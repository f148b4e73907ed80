"""The step after the workers: what the main process imports while it waits, and the block-model
tables written in a process of their own (compared byte for byte with the table written here)."""
from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

import geosim
import geosim.crs
from geosim.ensemble import RealizationWriter
from geosim.simulation.runner import import_ahead

GRID = geosim.Grid(500000.0, 6000000.0, (30.0, 30.0, 5.0), (2, 30, 40), crs=geosim.crs.parse_crs(32633), zmin=100.0)


def test_import_ahead_imports_on_a_thread_and_skips_what_is_missing():
    # a fresh interpreter: the modules are not imported yet, and the thread imports them
    code = ("import sys; from geosim.simulation.runner import import_ahead; "
            "assert 'json.tool' not in sys.modules and 'wave' not in sys.modules; "
            "t = import_ahead(['json.tool', 'no_such_module_here', 'wave']); t.join(60); "
            "assert not t.is_alive() and t.daemon; print('json.tool' in sys.modules, 'wave' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["True", "True"]


def test_finish_modules_name_what_the_writer_will_import(tmp_path):
    plain = RealizationWriter(tmp_path / "a", GRID)
    assert plain.finish_modules() == ["rasterio"]
    netcdf = RealizationWriter(tmp_path / "b", GRID, cube="netcdf", tables=(".csv", ".parquet"))
    modules = netcdf.finish_modules(plots=True)
    for name in ("rasterio", "xarray", "zarr", "dask.array", "netCDF4", "pyarrow.parquet", "matplotlib.figure",
                 "matplotlib.backends.backend_agg"):
        assert name in modules
    assert "netCDF4" not in RealizationWriter(tmp_path / "c", GRID, cube="zarr").finish_modules()
    assert "scipy.stats" in RealizationWriter(tmp_path / "d", GRID, measure=lambda s, v: {}).finish_modules()
    # every name is a module that exists (a misspelt one would be skipped silently at run time)
    import importlib.util
    for name in modules:
        if importlib.util.find_spec(name.split(".")[0]) is not None:
            assert importlib.util.find_spec(name) is not None, name


CUTOFFS = [0.0, 0.5]
TAGS = {"created_utc": "2026-01-01T00:00:00Z", "seed": "77"}


def _finished_store_writer(folder, **options) -> tuple[RealizationWriter, list[np.ndarray], list[dict]]:
    """A writer with a NetCDF cube whose store holds 3 realizations, each written as a worker would."""
    pytest.importorskip("netCDF4")
    data = np.array([[500100.0, 6000100.0, 104.0], [500900.0, 6000700.0, 106.0]])
    model = geosim.Spherical(1.0, geosim.Anisotropy((500.0, 300.0, 20.0), azimuth=30.0))
    fields = geosim.simulate(data, np.array([0.8, -0.4]), model, GRID, n_realizations=3, seed=77, workers=1)
    writer = RealizationWriter(folder, GRID, cube="netcdf", tags=TAGS, units="g/t", **options)
    writer.open_stores(3)
    records = [writer(i, f) for i, f in enumerate(fields)]
    return writer, [np.asarray(f, dtype=np.float32) for f in fields], records


def test_tables_written_in_a_process_of_their_own_equal_the_ones_written_here(tmp_path):
    # the reference: the same summary and realization columns written by this process, straight
    # from the stored float32 values (summary_bands, rounded to float32 as the files store them)
    from geosim.io.csvw import sidecar_path
    from geosim.io.cube import summary_table_columns, write_block_model
    from geosim.io.geotiff import as_stored
    from geosim.summaries import summary_bands
    suffixes = (".csv", ".parquet") if _has("pyarrow") else (".csv",)
    writer, stored, records = _finished_store_writer(tmp_path / "run", tables=suffixes, table_realizations=True)
    files = writer.finish(records, cutoffs=CUTOFFS, stack=False)
    assert files["block_model"] == [str(tmp_path / "run" / f"block_model{s}") for s in suffixes]
    table = summary_table_columns(as_stored(summary_bands(np.stack(stored), CUTOFFS)), CUTOFFS, "g/t")
    for i, f in enumerate(stored):
        table[f"r{i:04d}"] = (f.astype(np.float64), f"realization {i}", "g/t")
    (tmp_path / "ref").mkdir()
    for s in suffixes:
        ref = write_block_model(tmp_path / "ref" / f"block_model{s}", GRID, table, provenance=TAGS)
        got = tmp_path / "run" / f"block_model{s}"
        if s == ".csv":
            assert got.read_bytes() == ref.read_bytes()
            assert sidecar_path(got).read_bytes() == sidecar_path(ref).read_bytes()
        else:
            import pyarrow.parquet as pq
            assert pq.read_table(got).equals(pq.read_table(ref))
            assert pq.read_schema(got).metadata == pq.read_schema(ref).metadata
    # the summary cube, written by the same processes, is the file written here from the same bands
    from geosim.io.cube import write_summary_cube
    ref = write_summary_cube(tmp_path / "ref" / "summary.nc", GRID, as_stored(summary_bands(np.stack(stored), CUTOFFS)),
                             CUTOFFS, units="g/t", provenance=TAGS)
    assert files["summary_cube"] == [str(tmp_path / "run" / "summary.nc")]
    assert (tmp_path / "run" / "summary.nc").read_bytes() == ref.read_bytes()
    # the realization columns really are the realizations: the rows of the active nodes by z, then
    # y ascending (the grid's rows run north to south), then x
    csv = np.genfromtxt(tmp_path / "run" / "block_model.csv", delimiter=",", names=True)
    assert GRID.mask.all()
    np.testing.assert_array_equal(csv["r0002"].astype(np.float32), stored[2][:, ::-1, :].ravel())


def test_an_existing_table_is_refused_before_the_table_process_starts(tmp_path):
    from geosim.errors import InputError
    writer, _, records = _finished_store_writer(tmp_path / "run", tables=(".csv",))
    existing = tmp_path / "run" / "block_model.csv"
    existing.write_text("kept\n")
    with pytest.raises(InputError, match="block_model.csv"):
        writer.finish(records, cutoffs=CUTOFFS, stack=False)
    assert existing.read_text() == "kept\n"
    assert writer._writing is None  # the cube's process was waited for after the failure


def _has(module: str) -> bool:
    import importlib.util
    return importlib.util.find_spec(module) is not None
