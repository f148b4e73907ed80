"""Package-level promises: a light import, one caution text, clear error messages."""
import subprocess
import sys
from pathlib import Path

import pytest

import geosim
from geosim.errors import InputError, NotPositiveDefiniteError

ROOT = Path(__file__).resolve().parents[1]


def test_import_loads_no_heavy_dependency():
    # "import geosim compiles nothing": numba, scipy, matplotlib, rasterio, dask and the optional
    # table, vector and cube libraries must not be imported until a feature that needs them is used.
    code = ("import sys, geosim; heavy = [m for m in ('numba', 'scipy', 'matplotlib', 'rasterio', "
            "'dask', 'distributed', 'pandas', 'geopandas', 'pyarrow', 'pyogrio', 'xarray', 'netCDF4', "
            "'h5netcdf', 'zarr', 'tqdm', 'shapely', 'pyproj') if m in sys.modules]; print(','.join(heavy))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_lazy_public_names_resolve():
    for name in geosim._LAZY:
        assert getattr(geosim, name) is not None, name
    with pytest.raises(AttributeError):
        geosim.no_such_thing  # noqa: B018


def test_caution_names_the_decisions_and_the_professionals():
    text = geosim.CAUTION.lower()
    for phrase in ("sparse samples", "safety-critical", "slope stability", "foundations", "water supply",
                   "contamination", "resource statements", "local codes", "reporting standards",
                   "qualified professionals"):
        assert phrase in text, phrase


def test_readme_carries_the_caution_verbatim():
    readme = (ROOT / "README.md").read_text()
    assert geosim.CAUTION in " ".join(readme.split())


def test_input_error_names_file_row_field_and_fix():
    err = InputError("value 'abc' is not a number", file="assays.csv", row=7, field="cu_pct",
                     fix="correct the cell")
    assert str(err) == "assays.csv, row 7, field 'cu_pct': value 'abc' is not a number; fix: correct the cell"
    assert isinstance(err, ValueError)


def test_not_positive_definite_error_names_cause_and_samples():
    err = NotPositiveDefiniteError(3, -1e-9, ids=["DH07:12", "DH07:13"], context="kriging at node 5")
    text = str(err)
    assert "pivot 3" in text and "DH07:12" in text and "coincident" in text and "nugget" in text
