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
    # every name is a module that exists (a misspelt one would be skipped silently at run time)
    import importlib.util
    for name in modules:
        if importlib.util.find_spec(name.split(".")[0]) is not None:
            assert importlib.util.find_spec(name) is not None, name
