"""PointSet and CSV point intake, including the shared table reader."""
from __future__ import annotations

import csv
import warnings
from pathlib import Path

import numpy as np
import pytest
from pyproj import Transformer

import geosim
from geosim.errors import InputError
from geosim.points import PointSet, merge_coincident, read_points
from geosim.tables import read_table

SAMPLES = Path(__file__).resolve().parents[1] / "sample_fields"


def write(path: Path, text: str) -> str:
    path.write_text(text, encoding="utf-8")
    return str(path)


@pytest.fixture
def table(tmp_path):
    return write(tmp_path / "pts.csv",
                 "id,east,north,elev,au_gpt,ag_gpt\n"
                 "S1,1000,2000,50,1.5,10\n"
                 "S2,1010,2000,51,2.5,12\n"
                 "S3,1020,2010,49,0.5,8\n")


def test_read_points_2d_and_3d(table):
    p = read_points(table, x="east", y="north", values="au_gpt", crs=None)
    assert len(p) == 3 and p.ndim == 2 and p.names == ("au_gpt",)
    np.testing.assert_array_equal(p.column(), [1.5, 2.5, 0.5])
    assert p.crs is None and p.source == (table,) and p.notes == ()
    p3 = read_points(table, x="east", y="north", z="elev", values=["au_gpt", "ag_gpt"], hole="id",
                     crs="EPSG:32633")
    assert p3.coords.shape == (3, 3) and p3.crs.to_epsg() == 32633
    np.testing.assert_array_equal(p3.column("ag_gpt"), [10, 12, 8])
    assert p3.hole_ids.tolist() == ["S1", "S2", "S3"]


def test_semicolon_and_tab_delimiters_and_bom(tmp_path):
    a = write(tmp_path / "a.csv", "\ufeffx;y;v\n1;2;3\n4;5;6\n")
    b = write(tmp_path / "b.csv", "x\ty\tv\n1\t2\t3\n4\t5\t6\n")
    for f in (a, b):
        p = read_points(f, x="x", y="y", values="v", crs=None)
        np.testing.assert_array_equal(p.coords, [[1, 2], [4, 5]])


def test_misspelt_column_names_file_row_and_suggestion(table):
    with pytest.raises(InputError) as err:
        read_points(table, x="east", y="nrth", values="au_gpt", crs=None)
    e = err.value
    assert e.file == table and e.row == 1 and e.field == "nrth"
    assert "did you mean 'north'" in e.fix


def test_column_names_match_case_insensitively(table):
    p = read_points(table, x="EAST", y="North", values="AU_GPT", crs=None)
    assert p.names == ("au_gpt",)


@pytest.mark.parametrize("cell, message", [("abc", "not a number"), ("nan", "not a finite number"),
                                           ("inf", "not a finite number"), ("", "empty cell"),
                                           ("1,5", "not a number")])
def test_bad_value_cells_name_row_and_column(tmp_path, cell, message):
    f = write(tmp_path / "bad.csv", f'x,y,v\n0,0,1\n1,0,2\n2,0,"{cell}"\n')
    with pytest.raises(InputError, match=message) as err:
        read_points(f, x="x", y="y", values="v", crs=None)
    assert err.value.row == 4 and err.value.field == "v" and err.value.file == f
    if cell == "1,5":
        assert "decimal separator" in err.value.fix


def test_row_numbers_count_blank_lines(tmp_path):
    f = write(tmp_path / "gaps.csv", "x,y,v\n0,0,1\n\n1,0,oops\n")
    with pytest.raises(InputError) as err:
        read_points(f, x="x", y="y", values="v", crs=None)
    assert err.value.row == 4


def test_table_structure_errors(tmp_path):
    with pytest.raises(InputError, match="not found"):
        read_table(tmp_path / "missing.csv")
    with pytest.raises(InputError, match="empty"):
        read_table(write(tmp_path / "empty.csv", "\n\n"))
    with pytest.raises(InputError, match="no data rows"):
        read_table(write(tmp_path / "head.csv", "x,y,v\n"))
    with pytest.raises(InputError, match="appears twice"):
        read_table(write(tmp_path / "dup.csv", "x,y,X\n1,2,3\n"))
    with pytest.raises(InputError, match="4 cells") as err:
        read_table(write(tmp_path / "wide.csv", "x,y,v\n1,2,3\n1,2,3,4\n"))
    assert err.value.row == 3


def test_geographic_wells_are_reprojected(tmp_path, notes):
    f = write(tmp_path / "wells.csv", "well,lon,lat,k\nW1,15.10,48.20,1e-5\nW2,15.12,48.21,3e-5\n")
    with notes("UTM zone"):
        p = read_points(f, x="lon", y="lat", values="k", hole="well", crs="EPSG:4326")
    assert p.crs.to_epsg() == 32633
    assert p.notes == ("reprojected EPSG:4326 -> EPSG:32633 (UTM zone of the data centroid)",)
    ref = np.column_stack(Transformer.from_crs(4326, 32633, always_xy=True).transform([15.10, 15.12],
                                                                                       [48.20, 48.21]))
    np.testing.assert_allclose(p.coords, ref, atol=1e-6)


def test_bad_crs_text_is_an_input_error(table):
    with pytest.raises(InputError, match="cannot read the CRS"):
        read_points(table, x="east", y="north", values="au_gpt", crs="EPSG:12345678")


def test_coincident_samples_are_averaged_with_warning_and_note(tmp_path, notes):
    f = write(tmp_path / "dup.csv", "h,x,y,v\nA,0,0,1\nB,10,0,2\nC,0,0.0004,4\nD,20,0,5\nE,10,0,6\n")
    with notes("merged 4 coincident samples into 2"):
        p = read_points(f, x="x", y="y", values="v", hole="h", crs=None)
    assert len(p) == 3
    # groups keep the order of their first row; the first row's hole id stays
    np.testing.assert_allclose(p.column(), [2.5, 4.0, 5.0])
    assert p.hole_ids.tolist() == ["A", "B", "D"]
    np.testing.assert_allclose(p.coords[0], [0.0, 0.0002])
    assert any("merged 4 coincident samples" in n and "rows 2, 4" in n for n in p.notes)


def test_coincident_samples_error_mode_names_rows(tmp_path):
    f = write(tmp_path / "dup.csv", "x,y,v\n0,0,1\n5,5,2\n0,0,4\n")
    with pytest.raises(InputError, match="rows 2 and 4 are at the same position") as err:
        read_points(f, x="x", y="y", values="v", crs=None, duplicates="error")
    assert err.value.row == 4


def test_merge_keeps_distinct_points(notes):
    p = PointSet(np.array([[0.0, 0.0], [0.01, 0.0]]), np.array([1.0, 2.0]), ("v",))
    notes.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert merge_coincident(p, tolerance=1e-3) is p
    assert not notes.logged()


def test_pointset_contract():
    p = PointSet(np.array([[0.0, 0.0, 1.0], [1.0, 1.0, 2.0], [2.0, 2.0, 3.0]]),
                 np.array([[1.0, np.nan], [2.0, 5.0], [3.0, 6.0]]), ("a", "b"),
                 hole_ids=["H1", "H1", "H2"], attributes={"length": [1.0, 2.0, 2.0]})
    assert p.values.dtype == np.float64 and p.hole_ids.dtype.kind == "U"
    with pytest.raises(KeyError, match="name one"):
        p.column()
    with pytest.raises(KeyError, match="no value column 'c'"):
        p.column("c")
    sub = p.complete("b")
    assert len(sub) == 2 and sub.attributes["length"].tolist() == [2.0, 2.0]
    assert p.take([2]).hole_ids.tolist() == ["H2"]
    assert p.with_note("x").notes == ("x",)
    assert "n=3" in repr(p)
    with pytest.raises(ValueError):
        PointSet(np.zeros((2, 2)), np.zeros((3, 1)), ("v",))
    with pytest.raises(ValueError):
        PointSet(np.zeros((2, 2)), np.zeros((2, 1)), ("v",), attributes={"w": [1.0]})


def test_reads_the_aquifer_sample_field(notes):
    wells = SAMPLES / "alluvial_aquifer" / "wells.csv"
    if not wells.exists():
        pytest.skip("sample_fields not present")
    with open(wells, newline="") as fh:
        rows = list(csv.DictReader(fh))
    with notes():
        p = read_points(wells, x="lon", y="lat", values="k_ms", hole="well_id", crs="EPSG:4326")
    assert len(p) == len(rows)
    assert p.crs.is_projected and "UTM zone" in p.notes[0]
    assert (p.column() > 0).all()
    # reprojection agrees with pyproj directly (reference library)
    lon = np.array([float(r["lon"]) for r in rows])
    lat = np.array([float(r["lat"]) for r in rows])
    ref = Transformer.from_crs(4326, p.crs, always_xy=True).transform(lon, lat)
    np.testing.assert_allclose(p.coords, np.column_stack(ref), atol=1e-6)
    assert geosim.read_points is read_points


def test_rows_travel_with_samples_and_check_positive_names_them(tmp_path, notes):
    from geosim.points import check_positive
    f = write(tmp_path / "k.csv", "x,y,k\n0,0,1e-5\n10,0,2e-5\n0,0,3e-5\n20,0,0\n")
    with notes():
        p = read_points(f, x="x", y="y", values="k", crs=None)
    assert p.attributes["row"].tolist() == [2, 3, 5]  # merged rows keep the first row number
    with pytest.raises(InputError, match="not positive") as err:
        check_positive(p, "k")
    assert err.value.file == f and err.value.row == 5 and err.value.field == "k"
    check_positive(p.take([0, 1]), "k")
