"""Reading CSV tables: the one place every geosim CSV reader goes through.

A :class:`CsvTable` holds the header and the text cells of a file; its methods
find columns by name (suggesting close matches when a name is misspelt) and turn
columns into numbers or labels, raising :class:`geosim.errors.InputError` that
names the file, the row and the column and says what would fix it.

Conventions
-----------
* Row numbers in messages are *line numbers of the file* as a spreadsheet or text
  editor shows them: the header is row 1, the first data row is row 2.
* The delimiter is detected from the header line (comma, semicolon or tab);
  the encoding is UTF-8, with or without a byte-order mark.
* Column names match exactly after stripping surrounding blanks; failing that, a
  unique case-insensitive match is accepted.
* An empty cell is *missing*.  Text such as ``NaN``, ``inf`` or ``NA`` is not a
  number and is rejected: leave the cell empty where a reader accepts missing
  values, or remove the row.
"""
from __future__ import annotations

import csv
import difflib
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .errors import InputError

_DELIMITERS = (",", ";", "\t")


@dataclass(frozen=True)
class CsvTable:
    """The text cells of a CSV file, with the file line number of every row.

    Parameters
    ----------
    path : str
        The file the table came from (used in error messages).
    header : tuple of str
        Column names, stripped of surrounding blanks.
    rows : tuple of tuple of str
        Data cells, stripped; short rows are padded with empty cells.
    lines : tuple of int
        File row number of each data row (header = 1).
    """

    path: str
    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    lines: tuple[int, ...]

    def __len__(self) -> int:
        return len(self.rows)

    def has(self, name: str) -> bool:
        """Whether a column called ``name`` exists (same matching rules as :meth:`index`)."""
        try:
            self.index(name)
        except InputError:
            return False
        return True

    def index(self, name: str, *, role: str | None = None) -> int:
        """Position of column ``name``; raise :class:`InputError` with suggestions if absent.

        Parameters
        ----------
        name : str
            Column name as the user gave it.
        role : str, optional
            What the column is for (``"x coordinate"``), for the message.
        """
        key = name.strip()
        if key in self.header:
            return self.header.index(key)
        folded = [i for i, h in enumerate(self.header) if h.casefold() == key.casefold()]
        if len(folded) == 1:
            return folded[0]
        close = _close(key, self.header)
        what = f" ({role})" if role else ""
        fix = (f"did you mean {' or '.join(repr(c) for c in close)}? " if close else "") + \
            f"columns in the file are: {', '.join(repr(h) for h in self.header)}"
        raise InputError(f"no column named {name!r}{what}", file=self.path, row=1, field=name, fix=fix)

    def text(self, name: str, *, role: str | None = None, allow_missing: bool = False) -> np.ndarray:
        """Column ``name`` as an array of stripped strings; empty cells are errors unless allowed."""
        j = self.index(name, role=role)
        out = np.array([r[j] for r in self.rows], dtype=object)
        if not allow_missing:
            for r, line in zip(self.rows, self.lines):
                if r[j] == "":
                    raise InputError("empty cell", file=self.path, row=line, field=self.header[j],
                                     fix="fill in the cell or remove the row")
        return out.astype(str)

    def numbers(self, name: str, *, role: str | None = None, allow_missing: bool = False) -> np.ndarray:
        """Column ``name`` parsed as float64.

        Parameters
        ----------
        name : str
            Column name.
        role : str, optional
            What the column is for, for messages.
        allow_missing : bool
            If True, empty cells become NaN (e.g. an interval that was not assayed);
            otherwise an empty cell is an error.

        Raises
        ------
        InputError
            On an empty cell (unless allowed), on text that is not a number, and on
            ``nan`` or ``inf`` written out, naming file, row and column.
        """
        j = self.index(name, role=role)
        col = self.header[j]
        out = np.empty(len(self.rows), dtype=np.float64)
        for i, (r, line) in enumerate(zip(self.rows, self.lines)):
            cell = r[j]
            if cell == "":
                if allow_missing:
                    out[i] = np.nan
                    continue
                raise InputError("empty cell where a number is needed", file=self.path, row=line,
                                 field=col, fix="fill in the value or remove the row")
            out[i] = parse_number(cell, file=self.path, row=line, field=col,
                                  missing_hint="leave the cell empty" if allow_missing else "remove the row")
        return out


def parse_number(cell: str, *, file: str | None = None, row: int | None = None, field: str | None = None,
                 missing_hint: str = "remove the row") -> float:
    """Parse one cell as a finite float, or raise :class:`InputError` naming where it is.

    Examples
    --------
    >>> parse_number(" 1.5e2 ")
    150.0
    """
    text = cell.strip()
    try:
        value = float(text)
    except ValueError:
        fix = "use a plain number with a point as decimal separator"
        if "," in text and text.replace(",", "", 1).replace("-", "", 1).isdigit():
            fix = "use a point, not a comma, as decimal separator"
        raise InputError(f"{text!r} is not a number", file=file, row=row, field=field, fix=fix) from None
    if not math.isfinite(value):
        raise InputError(f"{text!r} is not a finite number", file=file, row=row, field=field,
                         fix=f"give a measured value or {missing_hint}")
    return value


def read_table(path: str | os.PathLike, *, what: str = "table") -> CsvTable:
    """Read a CSV file into a :class:`CsvTable`.

    Parameters
    ----------
    path : path-like
        The file.
    what : str
        What the table is (``"collar table"``), for messages.

    Raises
    ------
    InputError
        If the file cannot be read, has no header, repeats a column name, or has
        no data rows.
    """
    path = os.fspath(path)
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            text = fh.read()
    except FileNotFoundError:
        raise InputError(f"{what} not found", file=path, fix="check the path") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{what} is not UTF-8 text ({exc.reason} at byte {exc.start})", file=path,
                         fix="save the file as CSV UTF-8") from None
    except OSError as exc:
        raise InputError(f"cannot read {what}: {exc.strerror}", file=path) from None
    first = next((ln for ln in text.splitlines() if ln.strip()), "")
    delimiter = max(_DELIMITERS, key=first.count)
    # the reader's line_num tracks file lines even when a quoted cell spans lines
    reader = csv.reader(text.splitlines(keepends=True), delimiter=delimiter)
    header: tuple[str, ...] | None = None
    rows, numbers = [], []
    for rec in reader:
        if not any(c.strip() for c in rec):
            continue
        cells = tuple(c.strip() for c in rec)
        line = reader.line_num
        if header is None:
            header = cells
            _check_header(header, path, line)
            width = len(header)
            continue
        if len(cells) > width and any(cells[width:]):
            raise InputError(f"{len(cells)} cells but the header has {width} columns", file=path, row=line,
                             fix=f"quote cells that contain the delimiter {delimiter!r} or remove extra cells")
        rows.append(cells[:width] + ("",) * (width - len(cells)))
        numbers.append(line)
    if header is None:
        raise InputError(f"{what} is empty", file=path, fix="give a header row and data rows")
    if not rows:
        raise InputError(f"{what} has a header but no data rows", file=path, fix="add data rows")
    return CsvTable(path, header, tuple(rows), tuple(numbers))


def _check_header(header: Sequence[str], path: str, line: int) -> None:
    seen: dict[str, int] = {}
    for j, name in enumerate(header):
        if not name:
            raise InputError(f"column {j + 1} has no name", file=path, row=line, fix="name every column")
        key = name.casefold()
        if key in seen:
            raise InputError(f"column name {name!r} appears twice", file=path, row=line, field=name,
                             fix="give every column a distinct name")
        seen[key] = j


def suggest(name: str, choices: Sequence[str]) -> str:
    """A ``"did you mean ...?"`` phrase for ``name`` among ``choices``, or ``""``.

    Examples
    --------
    >>> suggest("DH-01", ["DH-001", "RC-7"])
    "did you mean 'DH-001'?"
    """
    close = _close(name, choices)
    return f"did you mean {' or '.join(repr(c) for c in close)}?" if close else ""


def _close(name: str, choices: Sequence[str]) -> list[str]:
    """Up to three choices that look like ``name``, ignoring case."""
    by_folded: dict[str, str] = {}
    for c in choices:
        by_folded.setdefault(str(c).casefold(), str(c))
    hits = difflib.get_close_matches(str(name).casefold(), list(by_folded), n=3, cutoff=0.6)
    return [by_folded[h] for h in hits]
