"""Plain CSV tables with a "CSV on the Web" metadata sidecar.

Every table geosim writes is plain CSV: one header line, then the rows, comma
separated, UTF-8, ``\\n`` line ends, no comment lines, empty cells for missing
values.  ``pandas.read_csv(path)``, a spreadsheet or any CSV reader opens it
with its defaults.

What a table means travels beside it in ``<name>.csv-metadata.json``, the
file name a "CSV on the Web" processor looks for first (W3C Recommendation,
2015, "Model for Tabular Data and Metadata on the Web", section 5.2, and
"Metadata Vocabulary for Tabular Data", the vocabulary used here):

* ``url``: the table's file name, relative to the sidecar;
* ``dc:title``; ``dc:description``: the caution (:data:`geosim.cautions.CAUTION`);
  ``dc:creator`` (geosim and its version); ``dc:created`` (``xsd:dateTime``);
* ``schema:additionalProperty``: the run's provenance
  (:func:`geosim.io.report.provenance`), one ``schema:PropertyValue`` per key;
* ``notes``: free-text notes (e.g. a cross-validation summary);
* ``tableSchema.columns``: per column ``name``, ``titles``, ``datatype``
  (``double``, ``integer`` or ``string``), ``dc:description`` and, where it
  has one, the unit as ``schema:unitText``; ``tableSchema.primaryKey`` where
  the table has one;
* ``dialect``: header line present, comma delimiter (the defaults, stated).

The caution and provenance are thus never lines inside the table.  Table and
sidecar are written atomically, and both are complete before either is moved
into place.
"""
from __future__ import annotations

import contextlib
import csv
import json
import math
import os
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..cautions import CAUTION
from .atomic import atomic_output, check_writable

__all__ = ["Column", "sidecar_path", "write_csv_table", "read_csv_metadata"]

CSVW_CONTEXT = ["http://www.w3.org/ns/csvw", {"@language": "en"}]
DATATYPES = ("double", "integer", "string")


@dataclass(frozen=True)
class Column:
    """One column of a table: its name, what it holds, its CSVW datatype and unit.

    Examples
    --------
    >>> import geosim.io.csvw
    >>> geosim.io.csvw.Column("tonnage", "ore tonnage at or above the cut-off", unit="t")
    Column('tonnage', double, t)
    """

    name: str
    description: str
    datatype: str = "double"
    unit: str = ""

    def __post_init__(self):
        if self.datatype not in DATATYPES:
            raise ValueError(f"column {self.name!r}: datatype must be one of {DATATYPES}, found {self.datatype!r}")

    def __repr__(self) -> str:
        unit = f", {self.unit}" if self.unit else ""
        return f"Column({self.name!r}, {self.datatype}{unit})"

    def cell(self, value: Any) -> str:
        """The CSV text of one value: shortest exact-enough number, empty when missing."""
        if value is None:
            return ""
        if self.datatype == "string":
            return str(value)
        if isinstance(value, (float, np.floating)):
            v = float(value)
            if not math.isfinite(v):
                return ""
            if self.datatype == "integer":
                return str(int(v))
            return f"{v:.10g}"
        if self.datatype == "integer":
            return str(int(value))
        return f"{float(value):.10g}"

    def cells(self, values: Sequence[Any]) -> list[str]:
        """The CSV texts of a whole column, equal to :meth:`cell` of each value (numbers a column at a time)."""
        a = np.asarray(values) if self.datatype != "string" else None
        if a is None or a.ndim != 1 or a.dtype.kind != "f":
            return [self.cell(v) for v in values]
        text = [str(int(v)) for v in np.where(np.isfinite(a), a, 0).tolist()] if self.datatype == "integer" \
            else [f"{v:.10g}" for v in a.tolist()]
        for i in np.flatnonzero(~np.isfinite(a)).tolist():
            text[i] = ""
        return text

    def metadata(self) -> dict:
        out = {"name": self.name, "titles": self.name, "datatype": self.datatype,
               "dc:description": self.description}
        if self.unit:
            out["schema:unitText"] = self.unit
        return out


#: Rows formatted together when a table is given by columns.
_ROWS_AT_ONCE = 65536


def _number_rows(columns: Sequence[Column], data: Sequence[Sequence[Any]]) -> bytes:
    """The CSV text (UTF-8) of rows of number columns, each cell exactly what :meth:`Column.cells` gives.

    Each column becomes a matrix of characters, one row per table row, NUL-padded (numbers never
    hold a NUL): a column with few distinct values (coordinates, block sizes, probabilities from
    100 realizations) from the text of each distinct value, a double column by
    :func:`_double_cells` (compiled for float32 values: the stored realizations and their
    summaries), anything else from :meth:`Column.cells`.  The matrices side by side with the
    commas and line ends, without their NULs (:func:`geosim.io.numbertext.join_cells`), are the
    text: no Python string per cell.  A million-block model's table process: 2.2-2.7 s of CPU
    with these steps in numpy, 1.6-1.8 s compiled (3 pairs of runs side by side).
    """
    from .numbertext import join_cells
    rows = len(data[0]) if data else 0
    parts = []
    for j, (c, d) in enumerate(zip(columns, data)):
        a = np.asarray(d)
        few = a.ndim == 1 and a.dtype.kind in "fiu" and np.unique(a[:256]).size <= 32
        if few:
            distinct, inverse = np.unique(a, return_inverse=True)
            few = 4 * distinct.size <= rows
        if few:
            text = _text_matrix(c.cells(distinct))[inverse.ravel()]
        elif c.datatype == "double" and a.ndim == 1 and a.dtype.kind == "f":
            text = _double_cells(a, c)
        else:
            text = _text_matrix(c.cells(d))
        parts += [text, np.full((rows, 1), ord(","), dtype=np.uint8)]
    if not parts:
        return b""
    parts[-1] = np.full((rows, 1), ord("\n"), dtype=np.uint8)
    whole = np.concatenate(parts, axis=1)
    text = np.empty(whole.size, dtype=np.uint8)
    return text[:join_cells(whole, text)].tobytes()


def _text_matrix(cells: Sequence[str]) -> np.ndarray:
    """``(len(cells), width)`` uint8: the UTF-8 bytes of each cell, NUL-padded."""
    b = np.array([t.encode("utf-8") for t in cells], dtype=bytes)
    width = max(b.dtype.itemsize, 1)
    return np.frombuffer(b.astype(f"S{width}").tobytes(), dtype=np.uint8).reshape(len(cells), width)


def _double_cells(a: np.ndarray, column: Column) -> np.ndarray:
    """The cells of a double column (``format(v, ".10g")``, empty when not finite) as a NUL-padded
    uint8 matrix, one row per value: compiled (:func:`geosim.io.numbertext.g10_cells`) where
    that is exact (zeros, and float32 values and short-mantissa doubles from 0.001 to below
    1e10), by Python otherwise."""
    from .numbertext import CELL_WIDTH, g10_cells
    a = np.ascontiguousarray(a, dtype=np.float64)
    out = np.zeros((a.size, CELL_WIDTH), dtype=np.uint8)
    slow = np.zeros(a.size, dtype=np.bool_)
    if g10_cells(a, out, slow):
        rows = np.flatnonzero(slow)
        text = _text_matrix(column.cells(a[rows]))
        if text.shape[1] > CELL_WIDTH:
            out = np.concatenate([out, np.zeros((a.size, text.shape[1] - CELL_WIDTH), dtype=np.uint8)], axis=1)
        out[rows, :text.shape[1]] = text
    return out


def sidecar_path(path: str | os.PathLike) -> Path:
    """The metadata sidecar of a CSV file: ``<name>.csv-metadata.json`` beside it.

    Examples
    --------
    >>> import geosim.io.csvw
    >>> geosim.io.csvw.sidecar_path("run/decision_spread.csv").name
    'decision_spread.csv-metadata.json'
    """
    path = Path(path)
    return path.with_name(path.name + "-metadata.json")


def _metadata(path: Path, columns: Sequence[Column], title: str, provenance: Mapping[str, str],
              notes: Iterable[str], primary_key: Sequence[str]) -> dict:
    from .report import _version, utc_now

    created = provenance.get("created_utc") or utc_now()
    meta: dict[str, Any] = {
        "@context": CSVW_CONTEXT,
        "url": path.name,
        "dc:title": title,
        "dc:description": CAUTION,
        "dc:creator": f"geosim {provenance.get('geosim_version') or _version()}",
        "dc:created": {"@value": created, "@type": "xsd:dateTime"},
    }
    props = [{"@type": "schema:PropertyValue", "schema:name": k, "schema:value": str(v)}
             for k, v in provenance.items() if k != "caution"]
    if props:
        meta["schema:additionalProperty"] = props
    notes = [str(n) for n in notes]
    if notes:
        meta["notes"] = notes
    meta["dialect"] = {"header": True, "delimiter": ",", "encoding": "utf-8"}
    schema: dict[str, Any] = {"columns": [c.metadata() for c in columns]}
    if primary_key:
        schema["primaryKey"] = list(primary_key) if len(primary_key) > 1 else primary_key[0]
    meta["tableSchema"] = schema
    return meta


def write_csv_table(path: str | os.PathLike, columns: Sequence[Column],
                    rows: Iterable[Sequence[Any]] | Mapping[str, Sequence[Any]], *,
                    title: str, provenance: Mapping[str, str] | None = None, notes: Iterable[str] = (),
                    primary_key: Sequence[str] = (), overwrite: bool = False) -> Path:
    """Write a plain CSV table and its CSVW metadata sidecar, atomically.

    Parameters
    ----------
    path : str or path-like
        The CSV file; the sidecar is :func:`sidecar_path` of it.
    columns : sequence of Column
        The columns, in order.
    rows : iterable of sequences, or mapping
        One sequence of values per row, in column order (NaN and None become empty cells);
        or a mapping of column name to the column's values, formatted a column at a time
        (large tables: several times faster).
    title : str
        What the table is, for ``dc:title``.
    provenance : mapping, optional
        The run's provenance strings (:func:`geosim.io.report.provenance`).
    notes : iterable of str
        Free-text notes for the sidecar.
    primary_key : sequence of str
        Columns that identify a row.
    overwrite : bool
        Replace an existing table and sidecar.

    Returns
    -------
    pathlib.Path
        The CSV file.

    Examples
    --------
    >>> import pathlib, tempfile, json
    >>> import geosim.io.csvw
    >>> from geosim.io.csvw import Column
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> cols = [Column("well", "well name", "string"), Column("k", "conductivity", unit="m/s")]
    >>> _ = geosim.io.csvw.write_csv_table(p, cols, [("W1", 1e-4), ("W2", float("nan"))], title="wells")
    >>> p.read_text()
    'well,k\\nW1,0.0001\\nW2,\\n'
    >>> meta = json.loads(geosim.io.csvw.sidecar_path(p).read_text())
    >>> meta["url"], meta["tableSchema"]["columns"][1]["schema:unitText"]
    ('t.csv', 'm/s')
    """
    path = Path(path)
    side = sidecar_path(path)
    check_writable(path, overwrite)
    check_writable(side, overwrite)
    names = [c.name for c in columns]
    if len(set(names)) != len(names):
        raise ValueError(f"duplicate column names in {names}")
    by_columns = isinstance(rows, Mapping)
    if by_columns:
        rows = [rows[c.name] for c in columns]
        if len({len(d) for d in rows}) > 1:
            raise ValueError(f"columns of unequal length: {dict(zip(names, map(len, rows)))}")
    meta = _metadata(path, columns, title, dict(provenance or {}), notes, primary_key)
    text = json.dumps(meta, indent=2, ensure_ascii=False) + "\n"
    # both temporaries are complete before either is moved into place; the rows go into the
    # temporary as they are formatted (the text of a million-block model is over 100 MB)
    with contextlib.ExitStack() as stack:
        tmp_side = stack.enter_context(atomic_output(side, overwrite))
        tmp_csv = stack.enter_context(atomic_output(path, overwrite))
        with open(tmp_csv, "w", encoding="utf-8", newline="") as f:
            _write_rows(f, columns, rows, by_columns)
        tmp_side.write_text(text, encoding="utf-8")
    return path


def _write_rows(f, columns: Sequence[Column], rows, by_columns: bool) -> None:
    """The header and the rows of :func:`write_csv_table` into the text file ``f``: ``rows`` one
    sequence per column (``by_columns``) or one per row."""
    w = csv.writer(f, lineterminator="\n")
    w.writerow([c.name for c in columns])
    if not by_columns:
        for r, row in enumerate(rows):
            row = list(row)
            if len(row) != len(columns):
                raise ValueError(f"row {r} has {len(row)} values for {len(columns)} columns")
            w.writerow([c.cell(v) for c, v in zip(columns, row)])
        return
    # a slice of rows at a time: the text of whole columns of a million-block model would
    # hold a Python string per value (about 60 bytes each, a gigabyte for 14 columns)
    n = len(rows[0]) if rows else 0
    numbers = all(c.datatype != "string" for c in columns)  # no cell needs quoting
    f.flush()  # the header, before rows of numbers go to the bytes underneath
    for start in range(0, n, _ROWS_AT_ONCE):
        chunk = [d[start:start + _ROWS_AT_ONCE] for d in rows]
        if numbers:
            f.buffer.write(_number_rows(columns, chunk))
        else:
            w.writerows(zip(*(c.cells(d) for c, d in zip(columns, chunk))))


def read_csv_metadata(path: str | os.PathLike) -> dict:
    """The parsed sidecar of a CSV table written by :func:`write_csv_table`."""
    return json.loads(sidecar_path(path).read_text(encoding="utf-8"))
