"""The unit table and the code sources of geosim.units that the run uses: a column of the point
table and a raster of codes (the other sources are tested in tests/test_units_sources.py)."""
from pathlib import Path

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

from geosim.errors import InputError
from geosim.grid import Grid
from geosim.points import read_points
from geosim.units import NODATA, NODE_SOURCES, SAMPLE_SOURCES, Unit, UnitTable, node_units, sample_units, unit_counts

TABLE = UnitTable.from_mapping({"oxide": {"code": 1}, "fresh": {"code": 2}, "cover": {"code": 9, "modelled": False}})


def test_table_codes_names_and_modelled():
    assert TABLE.codes == (1, 2, 9) and TABLE.names == ("oxide", "fresh", "cover")
    assert TABLE.modelled_codes == (1, 2)
    assert TABLE.label(2) == "fresh (2)" and TABLE.name_of(NODATA) == "nodata"
    assert not TABLE.unit(9).modelled


@pytest.mark.parametrize("token, code", [(1, 1), ("2", 2), ("2.0", 2), (9.0, 9), ("fresh", 2), (" oxide ", 1),
                                         (np.int64(9), 9)])
def test_code_of_reads_integers_and_names(token, code):
    assert TABLE.code_of(token) == code


@pytest.mark.parametrize("token, words", [("2.5", "neither an integer nor a unit name"),
                                          ("1a", "neither an integer nor a unit name"),
                                          ("", "neither an integer nor a unit name"),
                                          ("skarn", "'skarn' is not one of the run's units"),
                                          (7, "unit code 7 is not one of the run's units")])
def test_code_of_refuses_with_file_row_and_field(token, words):
    with pytest.raises(InputError) as err:
        TABLE.code_of(token, file="holes.csv", row=14, field="unit")
    text = str(err.value)
    assert words in text and "holes.csv" in text and "row 14" in text and "'unit'" in text and "fix:" in text


def test_table_refuses_repeated_codes_and_bad_names():
    with pytest.raises(ValueError, match="codes must be unique"):
        UnitTable((Unit(1, "a"), Unit(1, "b")))
    with pytest.raises(ValueError, match="names must be unique"):
        UnitTable((Unit(1, "a"), Unit(2, "a")))
    with pytest.raises(ValueError, match="start with a letter"):
        UnitTable((Unit(1, "1st"),))
    with pytest.raises(ValueError, match="0 or more"):
        UnitTable((Unit(-1, "a"),))


def _points(tmp_path: Path, units: list[str]) -> Path:
    rows = [f"P{i},{10.0 * i},{5.0 * (i % 3)},{1.0 + i},{u}" for i, u in enumerate(units)]
    path = tmp_path / "points.csv"
    path.write_text("id,x,y,grade,unit\n" + "\n".join(rows) + "\n")
    return path


def test_sample_codes_from_a_column_follow_the_file_rows(tmp_path):
    units = ["oxide", "2", "fresh", "1", "oxide", "cover"]
    samples = read_points(_points(tmp_path, units), x="x", y="y", values="grade")
    codes = sample_units(samples, {"column": "unit"}, TABLE)
    assert codes.dtype == np.int32
    assert codes.tolist() == [1, 2, 2, 1, 1, 9]
    assert unit_counts(codes, TABLE) == {1: 3, 2: 2, 9: 1}


def test_sample_codes_of_merged_samples_come_from_the_first_row(tmp_path, notes):
    # rows 2 and 3 (file lines) sit on the same spot: merged into one sample keeping row 2
    path = tmp_path / "points.csv"
    path.write_text("x,y,grade,unit\n0,0,1,oxide\n0,0,3,oxide\n50,0,2,fresh\n")
    with notes("merged 2 coincident samples"):
        samples = read_points(path, x="x", y="y", values="grade")
    assert sample_units(samples, {"column": "unit"}, TABLE).tolist() == [1, 2]


@pytest.mark.parametrize("cell, words, line", [("skarn", "not one of the run's units", 4),
                                               ("2.5", "neither an integer nor a unit name", 4),
                                               ("", "empty cell", 4)])
def test_sample_codes_refuse_bad_cells_by_row(tmp_path, cell, words, line):
    units = ["oxide", "fresh", cell, "fresh"]
    samples = read_points(_points(tmp_path, units), x="x", y="y", values="grade")
    with pytest.raises(InputError) as err:
        sample_units(samples, {"column": "unit"}, TABLE)
    assert words in str(err.value) and f"row {line}" in str(err.value) and "points.csv" in str(err.value)


def test_sample_codes_need_a_column_that_exists(tmp_path):
    samples = read_points(_points(tmp_path, ["oxide", "fresh", "oxide"]), x="x", y="y", values="grade")
    with pytest.raises(InputError, match="did you mean 'unit'"):
        sample_units(samples, {"column": "units"}, TABLE)


def test_exactly_one_source_is_named(tmp_path):
    samples = read_points(_points(tmp_path, ["oxide", "fresh", "oxide"]), x="x", y="y", values="grade")
    with pytest.raises(InputError, match="exactly one source"):
        sample_units(samples, {}, TABLE)
    grid = Grid(0.0, 0.0, (10.0, 10.0), (3, 3))
    with pytest.raises(InputError, match="exactly one source"):
        node_units(grid, {"raster": "a.tif", "polygons": "b.geojson"} if "polygons" in NODE_SOURCES
                   else {"nothing": 1}, TABLE)
    assert {"column", "intervals"} <= set(SAMPLE_SOURCES) and "raster" in NODE_SOURCES


def _codes_raster(path: Path, data: np.ndarray, nodata=None) -> Path:
    with rasterio.open(path, "w", driver="GTiff", height=data.shape[0], width=data.shape[1], count=1,
                       dtype=data.dtype, crs="EPSG:32633", transform=from_origin(1000.0, 2060.0, 20.0, 20.0),
                       nodata=nodata) as dst:
        dst.write(data, 1)
    return path


def test_node_codes_from_a_raster_cell_under_each_node(tmp_path):
    data = np.array([[1, 1, 2, 2], [1, 9, 2, 2], [-99, 2, 2, 1]], dtype=np.int16)  # 3 rows x 4 columns of 20 m
    _codes_raster(tmp_path / "units.tif", data, nodata=-99)
    # a 10 m grid over the raster plus one column beyond it to the east; one node masked out
    mask = np.ones((6, 9), dtype=bool)
    mask[0, 0] = False
    grid = Grid(1000.0, 2000.0, (10.0, 10.0), (6, 9), crs="EPSG:32633", mask=mask)
    codes = node_units(grid, {"raster": "units.tif"}, TABLE, base=tmp_path)
    assert codes.dtype == np.int32 and codes.shape == grid.shape
    expected = np.full(grid.shape, NODATA)
    for i in range(6):
        for j in range(8):
            expected[i, j] = data[i // 2, j // 2]
    expected[expected == -99] = NODATA
    expected[0, 0] = NODATA  # outside the grid's mask
    np.testing.assert_array_equal(codes, expected)
    # 3-D: the same codes on every level
    grid3 = Grid(1000.0, 2000.0, (10.0, 10.0, 5.0), (2, 6, 9), crs="EPSG:32633")
    codes3 = node_units(grid3, {"raster": str(tmp_path / "units.tif")}, TABLE)
    assert (codes3[0] == codes3[1]).all() and codes3[1, 5, 3] == 2


def test_node_codes_refuse_unknown_and_fractional_codes(tmp_path):
    grid = Grid(1000.0, 2000.0, (10.0, 10.0), (6, 8), crs="EPSG:32633")
    _codes_raster(tmp_path / "a.tif", np.array([[1, 1, 2, 2], [1, 5, 2, 2], [1, 5, 2, 1]], dtype=np.int16))
    with pytest.raises(InputError) as err:
        node_units(grid, {"raster": "a.tif"}, TABLE, base=tmp_path)
    assert "code(s) 5 of the raster (8 node(s)" in str(err.value) and "a.tif" in str(err.value)
    _codes_raster(tmp_path / "b.tif", np.array([[1, 1, 2, 2], [1, 1.5, 2, 2], [1, 2, 2, 1]], dtype=np.float32))
    with pytest.raises(InputError, match="not whole numbers"):
        node_units(grid, {"raster": "b.tif"}, TABLE, base=tmp_path)
