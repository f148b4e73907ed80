"""Plain CSV tables and their "CSV on the Web" metadata sidecars.

The sidecars are checked with the ``csvw`` package (an independent implementation of
W3C 2015, "Model for Tabular Data and Metadata on the Web" and "Metadata Vocabulary
for Tabular Data"): it finds ``<name>.csv-metadata.json`` by the standard's rule,
parses every cell with the declared datatype and reports cells that do not fit.
"""
import json

import numpy as np
import pytest

import geosim
from geosim.io.csvw import Column, read_csv_metadata, sidecar_path, write_csv_table

csvw = pytest.importorskip("csvw")
pd = pytest.importorskip("pandas")

COLUMNS = [Column("hole", "drillhole name", "string"), Column("depth", "depth down the hole", unit="m"),
           Column("cu", "copper grade", unit="%"), Column("n", "assays in the composite", "integer")]
ROWS = [("DH-01", 12.5, 0.41, 3), ("DH-01", 15.0, float("nan"), 2), ("DH 02, east", 3.0, 1e-7, 1)]


def assert_valid_csvw(path):
    """The csvw reference processor locates the sidecar, parses every cell, and finds no fault."""
    table = csvw.CSVW(str(path), validate=True)
    assert table.is_valid, [str(w.message) for w in table.warnings]
    return table


def test_table_is_plain_and_sidecar_is_standard(tmp_path):
    path = write_csv_table(tmp_path / "composites.csv", COLUMNS, ROWS, title="composites",
                           provenance={"caution": geosim.CAUTION, "seed": "7", "units": "%"},
                           notes=["composited to 2.5 m"], primary_key=["hole", "depth"])
    frame = pd.read_csv(path)  # pandas defaults, no options
    assert list(frame.columns) == ["hole", "depth", "cu", "n"]
    assert frame["hole"].tolist() == ["DH-01", "DH-01", "DH 02, east"]
    assert np.isnan(frame["cu"][1]) and frame["cu"][2] == 1e-7
    assert frame["n"].dtype.kind == "i"

    table = assert_valid_csvw(path)
    rows = [r["describes"][0] for t in table.to_json()["tables"] for r in t["row"]]
    assert rows[0] == {"hole": "DH-01", "depth": 12.5, "cu": 0.41, "n": 3}
    assert "cu" not in rows[1]  # an empty cell is missing, not zero

    meta = read_csv_metadata(path)
    assert meta["@context"][0] == "http://www.w3.org/ns/csvw" and meta["url"] == "composites.csv"
    assert meta["dc:description"] == geosim.CAUTION
    assert meta["dc:creator"] == f"geosim {geosim.__version__}"
    props = {p["schema:name"]: p["schema:value"] for p in meta["schema:additionalProperty"]}
    assert props == {"seed": "7", "units": "%"}  # the caution is the description, not repeated
    cols = meta["tableSchema"]["columns"]
    assert [c["name"] for c in cols] == ["hole", "depth", "cu", "n"]
    assert [c.get("schema:unitText") for c in cols] == [None, "m", "%", None]
    assert meta["tableSchema"]["primaryKey"] == ["hole", "depth"]


def test_a_cell_that_breaks_its_datatype_is_caught_by_the_reference_processor(tmp_path):
    path = write_csv_table(tmp_path / "t.csv", COLUMNS, ROWS, title="t")
    path.write_text(path.read_text().replace("0.41", "high"))
    assert not csvw.CSVW(str(path), validate=True).is_valid


def test_nothing_is_replaced_or_half_written(tmp_path):
    target = tmp_path / "t.csv"
    sidecar_path(target).write_text("{}")
    with pytest.raises(geosim.InputError, match="overwrite"):
        write_csv_table(target, COLUMNS, ROWS, title="t")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.csv-metadata.json"]
    with pytest.raises(ValueError, match="row 1 has 2 values"):
        write_csv_table(target, COLUMNS, [ROWS[0], ("x", 1.0)], title="t", overwrite=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.csv-metadata.json"]
    write_csv_table(target, COLUMNS, ROWS, title="t", overwrite=True)
    assert json.loads(sidecar_path(target).read_text())["url"] == "t.csv"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.csv", "t.csv-metadata.json"]


def test_column_datatypes_are_checked():
    with pytest.raises(ValueError, match="datatype"):
        Column("x", "x", "float")
    assert Column("n", "count", "integer").cell(3.0) == "3"
    assert Column("v", "value").cell(np.float32(0.1)) == "0.1000000015"
    assert Column("v", "value").cell(float("inf")) == ""


def test_a_table_given_by_columns_reads_as_the_same_table_given_by_rows(tmp_path, monkeypatch):
    # columns are formatted a slice of rows at a time; slices of 7 rows split 23 rows unevenly
    import geosim.io.csvw
    monkeypatch.setattr(geosim.io.csvw, "_ROWS_AT_ONCE", 7)
    cols = [Column("x", "value", unit="m"), Column("n", "count", "integer"), Column("s", "name", "string")]
    x = np.random.default_rng(0).standard_normal(23) * 1e3
    x[3], x[11] = np.nan, np.inf
    names = [f"w,{i}" if i % 5 == 0 else f"w{i}" for i in range(23)]  # some need quoting
    by_columns = {"x": x, "n": np.arange(23.0), "s": names}
    write_csv_table(tmp_path / "columns.csv", cols, by_columns, title="t")
    write_csv_table(tmp_path / "rows.csv", cols, list(zip(x, np.arange(23.0), names)), title="t")
    text = (tmp_path / "columns.csv").read_text()
    assert text == (tmp_path / "rows.csv").read_text()
    lines = text.splitlines()
    assert len(lines) == 24 and lines[4].startswith(",") and lines[12].startswith(",")  # NaN, inf: empty
    with pytest.raises(ValueError, match="unequal length"):
        write_csv_table(tmp_path / "bad.csv", cols, {**by_columns, "n": np.arange(3.0)}, title="t")
