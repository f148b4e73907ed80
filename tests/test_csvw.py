"""Plain CSV tables and their "CSV on the Web" metadata sidecars.

The sidecars are checked with the ``csvw`` package (an independent implementation of
W3C 2015, "Model for Tabular Data and Metadata on the Web" and "Metadata Vocabulary
for Tabular Data"): it finds ``<name>.csv-metadata.json`` by the standard's rule,
parses every cell with the declared datatype and reports cells that do not fit.
"""
import json
import math

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


def test_a_table_of_numbers_has_the_cells_of_the_row_by_row_table_and_reads_back_exactly(tmp_path, monkeypatch):
    # number columns are formatted by one template per slice of rows, and columns with few distinct
    # values once per value: every kind of column a block model has, slices of 50 over 230 rows
    import geosim.io.csvw
    monkeypatch.setattr(geosim.io.csvw, "_ROWS_AT_ONCE", 50)
    rng = np.random.default_rng(3)
    n = 230
    grade = rng.lognormal(-0.9, 2.0, n).astype(np.float32)  # float32 as the stored realizations
    std = rng.standard_normal(n) * 1e4
    std[[7, 60, 61]] = np.nan, np.inf, -np.inf  # missing cells in a column of many values
    data = {"x": np.repeat([641005.0, 641015.0, -0.0, 5e-324], [100, 60, 40, 30]),  # few distinct values
            "dx": np.full(n, 10.0),
            "grade": grade, "std": std,
            "prob": rng.integers(0, 101, n) / 100.0,  # fractions of 100 realizations
            "units": np.where(np.arange(n) % 3 == 0, np.nan, np.arange(n) % 4).astype(float),
            "count": np.floor(rng.standard_normal(n) * 50)}
    cols = [Column(k, k) for k in data if k != "count"] + [Column("count", "count", "integer")]
    write_csv_table(tmp_path / "columns.csv", cols, data, title="t")
    rows = list(zip(*(data[c.name].tolist() for c in cols)))
    write_csv_table(tmp_path / "rows.csv", cols, rows, title="t")
    assert (tmp_path / "columns.csv").read_text() == (tmp_path / "rows.csv").read_text()
    back = pd.read_csv(tmp_path / "columns.csv")
    assert back["grade"].to_numpy().astype(np.float32).tobytes() == grade.tobytes()  # 10 digits: float32 exact
    np.testing.assert_array_equal(back["x"], data["x"])
    np.testing.assert_array_equal(back["prob"], data["prob"])
    assert back["std"].isna().to_numpy()[[7, 60, 61]].all() and back["std"].isna().sum() == 3
    assert back["units"].isna().sum() == len(range(0, n, 3))
    np.testing.assert_array_equal(back["count"], data["count"])


def test_double_cells_are_pythons_own_formatting_of_every_kind_of_value():
    # the column formatter computes the ten significant digits of float32 values, and of doubles
    # whose scaled product is exact, by float64 arithmetic; Python's correctly rounded
    # format(v, ".10g") (David Gay's dtoa, round half to even) is the reference: values across 24
    # decades of both signs, powers of ten and their float32 neighbours, exact ties at the
    # eleventh digit (odd multiples of 2**-13 and below), values that round up to the next power
    # of ten, zeros, doubles of short mantissa (coordinates to 1/64 m, eleven-digit integers),
    # doubles of full mantissa (Python formats those; near decimal ties too) and non-finite ones
    from geosim.io.csvw import _double_cells
    rng = np.random.default_rng(11)
    spread = rng.uniform(-12, 12, 200_000)
    values = [(np.sign(rng.standard_normal(spread.size)) * 10.0 ** spread).astype(np.float32)]
    tens = (10.0 ** np.arange(-5, 12)).astype(np.float32)
    values += [tens, np.nextafter(tens, np.float32(np.inf)), np.nextafter(tens, np.float32(0))]
    ties = np.array([m / 2.0 ** s for s in range(1, 40) for m in range(1, 600, 2)])
    values += [ties[ties.astype(np.float32) == ties].astype(np.float32)]
    values += [np.array([9 / 8192, 9.99999999e-4, 9999999999.0, 0.0, -0.0, 123456789.0], dtype=np.float32)]
    # decimal ties at the eleventh digit as the nearest doubles and their neighbours: their scaled
    # products are not exact, and rounding the rounded product would miss some of them
    near = np.concatenate([(rng.integers(10**9, 10**10, 1000) + 0.5) / 10.0**q for q in range(3, 13)])
    values += [near, np.nextafter(near, 0), np.nextafter(near, np.inf)]
    a = np.concatenate([v.astype(np.float64) for v in values])
    short = np.concatenate([7512000.0 + rng.integers(0, 2**16, 5000) / 64, rng.integers(0, 10**11, 2000) / 1.0,
                            1e9 - rng.integers(0, 50, 50) / 64, np.nextafter(1e10, 0) - np.arange(0, 4096, 512)])
    a = np.concatenate([a, short, -a, rng.standard_normal(1000) * 1e3, [np.nan, np.inf, -np.inf, 1e300, 5e-324]])
    column = Column("v", "v")
    cells = _double_cells(a, column)
    got = [bytes(row[row != 0]).decode() for row in cells]
    expected = [format(v, ".10g") if np.isfinite(v) else "" for v in a.tolist()]
    assert got == expected
    assert got[-5:] == ["", "", "", "1e+300", "4.940656458e-324"]
    assert format(9 / 8192, ".10g") == "0.001098632812"  # a tie at the eleventh digit, rounded to even


def test_the_compiled_cells_take_float32_values_and_short_doubles_and_leave_the_rest_to_python():
    # which values the compiled formatter writes itself: float32 values and doubles of short mantissa
    # in 0.001 <= |v| < 1e10 and zeros; full-mantissa doubles (whose scaled product is not exact),
    # values out of the fixed-notation range and 1e10 - tiny (rounds to exponent notation) are not
    from geosim.io.numbertext import CELL_WIDTH, g10_cells
    rng = np.random.default_rng(12)
    edges = [0.0, -0.0, float(np.float32(0.001)), 9999999999.0]
    taken = np.concatenate([rng.lognormal(0, 4, 3000).astype(np.float32).astype(np.float64),
                            641000.0 + rng.integers(0, 2**20, 3000) / 256, edges])
    taken = taken[(taken == 0) | ((taken >= 1e-3) & (taken < 1e10))]
    left = np.concatenate([rng.uniform(1, 2, 1000) / 3, [1e-4, 1e10, 9999999999.9, 123.4, 0.1]])
    for values, slow_expected in ((taken, 0), (-left, left.size)):
        out = np.zeros((values.size, CELL_WIDTH), dtype=np.uint8)
        slow = np.zeros(values.size, dtype=np.bool_)
        assert g10_cells(values, out, slow) == slow_expected == slow.sum()
        assert not out[slow].any()  # a row left to Python stays NUL, its sign too
    assert format(9999999999.9, ".10g") == "1e+10"


def test_a_block_model_of_float32_columns_reads_as_the_row_by_row_table(tmp_path, monkeypatch):
    # the block model's own columns: coordinates, sizes, float32 statistics of many values (some out
    # of the fixed-notation range, some missing) and probabilities; slices of 1,000 rows
    import geosim.io.csvw
    monkeypatch.setattr(geosim.io.csvw, "_ROWS_AT_ONCE", 1000)
    rng = np.random.default_rng(5)
    n = 4321
    stats = rng.lognormal(-1.0, 3.0, (3, n)).astype(np.float32)
    stats[0, 17] = np.nan
    stats[1, :40] = -stats[1, :40]
    stats[2, :6] = [10.0, 100.0, 2500.0, 1e9, 123456789.0, 0.5]  # zeros before the point stay
    data = {"x": 641005.0 + 10 * (np.arange(n) % 200), "y": 7512005.0 + 10 * (np.arange(n) // 200),
            "dx": np.full(n, 10.0), "mean": stats[0], "std": stats[1], "P10": stats[2],
            "prob": (rng.integers(0, 101, n) / 100).astype(np.float32)}
    cols = [Column(k, k) for k in data]
    write_csv_table(tmp_path / "columns.csv", cols, data, title="t")
    rows = list(zip(*(data[c.name].tolist() for c in cols)))
    write_csv_table(tmp_path / "rows.csv", cols, rows, title="t")
    assert (tmp_path / "columns.csv").read_bytes() == (tmp_path / "rows.csv").read_bytes()
    back = pd.read_csv(tmp_path / "columns.csv")
    assert back["std"].to_numpy().astype(np.float32).tobytes() == stats[1].tobytes()
    assert back["mean"].isna().sum() == 1


def test_the_decimal_exponents_estimate_from_the_binary_one_is_exact_for_every_double():
    # _decimal takes floor((e - 1) log10 2) as the first guess of the decimal exponent; with log10(2)
    # rounded to double it must equal the exact floor for every binary exponent of a double
    from decimal import Decimal, getcontext

    from geosim.io.numbertext import _LOG10_2
    getcontext().prec = 50
    exact = Decimal(2).log10()
    assert [n for n in range(-1100, 1100) if math.floor(n * _LOG10_2) != math.floor(Decimal(n) * exact)] == []
