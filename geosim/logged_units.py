"""Logged units of drillholes: the unit of every stretch of a hole, and composites that never straddle a contact.

A logged-units table is a CSV file beside the assays, one row per logged interval::

    hole_id,from,to,unit
    DH01,0,12.5,oxide
    DH01,12.5,80,fresh

Depths are along the hole from the collar, as in the interval table of
:mod:`geosim.drillholes`; the code is a unit's integer code or its name (read by
:meth:`geosim.units.UnitTable.code_of`).  Touching rows of the same unit are one
stretch; a *contact* is where the unit changes down a hole.

:func:`composite_by_unit` cuts every hole at its contacts (assay intervals that
straddle one are split at it, each part keeping the assay's value) and composites
each stretch of one unit on its own with :func:`geosim.drillholes.composite_runs`,
so compositing restarts at each change of unit.  Every assayed interval must be
logged over its whole length: an assay with no logged unit is refused, since
silently dropping it or guessing its unit would both bias the unit's statistics.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, replace

import numpy as np

from .drillholes import CompositeRun, Drillholes, composite_runs
from .errors import InputError
from .points import PointSet
from .tables import read_table, suggest

__all__ = ["UnitIntervals", "read_unit_intervals", "composite_by_unit"]

_TOL = 1e-6  # m; interval ends closer than this are the same depth (rounding in logging software)


@dataclass(frozen=True)
class UnitIntervals:
    """A logged-units table, sorted by hole then depth.

    Attributes
    ----------
    hole_ids : (n,) str ndarray
    starts, ends : (n,) float64 ndarray
        ``from`` and ``to`` depths along the hole (m).
    codes : (n,) int32 ndarray
        Unit codes of the run's :class:`geosim.units.UnitTable`.
    rows : (n,) int64 ndarray
        File row of each interval (header = row 1), for messages.
    file : str
        The table's path.
    """

    hole_ids: np.ndarray
    starts: np.ndarray
    ends: np.ndarray
    codes: np.ndarray
    rows: np.ndarray
    file: str

    def of_hole(self, hole_id: str) -> np.ndarray:
        """Indices of one hole's intervals, top to bottom."""
        return np.flatnonzero(self.hole_ids == hole_id)


def read_unit_intervals(path: str | os.PathLike, table, *, hole: str = "hole_id", start: str = "from",
                        end: str = "to", code: str = "unit") -> UnitIntervals:
    """Read and check a logged-units table.

    Parameters
    ----------
    path : path-like
        The CSV file.
    table : geosim.units.UnitTable
        The run's units; every code is read by its ``code_of``.
    hole, start, end, code : str
        Column names of the hole id, the ``from`` and ``to`` depths and the unit.

    Returns
    -------
    UnitIntervals

    Raises
    ------
    InputError
        Naming file, row and column: a missing column (with a suggestion), an empty
        or non-numeric depth, a negative ``from``, ``from`` not less than ``to``, a
        code that is neither an integer nor a unit name or not one of the run's
        units, and two intervals of one hole that overlap (both rows named).

    Examples
    --------
    >>> import pathlib, tempfile, geosim.units
    >>> from geosim.logged_units import read_unit_intervals
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "logged.csv"
    >>> _ = path.write_text("hole_id,from,to,unit\\nA,0,5,cap\\nA,5,20,2\\n")
    >>> units = geosim.units.UnitTable.from_mapping({"cap": {"code": 1}, "fresh": {"code": 2}})
    >>> read_unit_intervals(path, units).codes.tolist()
    [1, 2]
    """
    t = read_table(path, what="logged-units table")
    ids = t.text(hole, role="hole id")
    top = t.numbers(start, role="unit from")
    bottom = t.numbers(end, role="unit to")
    fcol, tcol, ccol = (t.header[t.index(c)] for c in (start, end, code))
    lines = np.asarray(t.lines, dtype=np.int64)
    codes = table.codes_of(t.text(code, role="unit code").tolist(), file=t.path, rows=lines, field=ccol)
    for bad, message, field, fix in (
            (top < 0, "'from' {a:g} is above the collar", fcol,
             "depths are measured down the hole from 0 at the collar"),
            (~(top < bottom), "'from' {a:g} is not less than 'to' {b:g}", tcol,
             "check the interval ends (swapped or zero length?)")):
        if bad.any():
            i = int(np.argmax(bad))
            raise InputError(message.format(a=top[i], b=bottom[i]), file=t.path, row=int(lines[i]), field=field,
                             fix=fix)
    order = np.lexsort((top, ids))
    same = ids[order][1:] == ids[order][:-1]
    overlap = np.flatnonzero(same & (top[order][1:] < bottom[order][:-1] - _TOL))
    if len(overlap):
        i, j = order[overlap[0]], order[overlap[0] + 1]
        label = table.label
        raise InputError(f"logged units of hole {str(ids[i])!r} overlap: {label(int(codes[i]))} {top[i]:g}-"
                         f"{bottom[i]:g} m (row {lines[i]}) and {label(int(codes[j]))} {top[j]:g}-{bottom[j]:g} m "
                         f"(row {lines[j]})", file=t.path, row=int(max(lines[i], lines[j])), field=fcol,
                         fix="give every depth of a hole one unit: correct the contact depth in one of the rows")
    return UnitIntervals(ids[order].astype(str), top[order], bottom[order], codes[order], lines[order], t.path)


def _stretches(intervals: UnitIntervals, idx: np.ndarray) -> list[tuple[float, float, int]]:
    """One hole's logged intervals as stretches of one unit: touching rows of the same code joined."""
    out: list[list] = []
    for i in idx:
        a, b, c = float(intervals.starts[i]), float(intervals.ends[i]), int(intervals.codes[i])
        if out and out[-1][2] == c and abs(out[-1][1] - a) <= _TOL:
            out[-1][1] = b
        else:
            out.append([a, b, c])
    return [tuple(s) for s in out]


def composite_by_unit(holes: Drillholes, intervals: UnitIntervals, length: float, *, min_fraction: float = 0.5,
                      residual: str = "merge", min_sampled_fraction: float = 0.5) -> PointSet:
    """Composites that never straddle a contact, each with its unit.

    Every hole is cut into stretches of one logged unit; assay intervals that
    straddle a contact are split at it.  Each stretch is composited on its own
    from its first assayed depth, exactly as :func:`geosim.drillholes.composite`
    composites a whole hole (``length``, ``min_fraction``, ``residual`` and
    ``min_sampled_fraction`` mean the same), so a stretch shorter than
    ``min_fraction * length`` is one short composite of its own.

    Parameters
    ----------
    holes : Drillholes
        The assays (:func:`geosim.drillholes.read_drillholes`).
    intervals : UnitIntervals
        The logged units (:func:`read_unit_intervals`).
    length, min_fraction, residual, min_sampled_fraction
        As :func:`geosim.drillholes.composite`.

    Returns
    -------
    PointSet
        As :func:`geosim.drillholes.composite`, with the attribute ``"unit"``
        (int32 code of each composite) and the logged-units file added to
        ``source``; a note counts the contacts and the assays split at them.

    Raises
    ------
    InputError
        A logged hole that has no collar, a logged interval past the hole's total
        depth (naming the logged-units row), or an assayed interval (one with any
        value) not logged over its whole length, naming the hole, the assay
        interval and the stretch without a unit.
    """
    known = set(holes.ids.tolist())
    depth_of = dict(zip(holes.ids.tolist(), holes.depths.tolist()))
    for i, h in enumerate(intervals.hole_ids.tolist()):
        if h not in known:
            hint = suggest(h, sorted(known))
            raise InputError(f"hole {h!r} of the logged units is not in the collar table", file=intervals.file,
                             row=int(intervals.rows[i]),
                             fix=(hint + " " if hint else "") + "add the hole to the collar table or remove its "
                                                                "logged rows")
        if intervals.ends[i] > depth_of[h] + 1e-3:
            raise InputError(f"logged unit ends at {intervals.ends[i]:g}, past the hole's total depth "
                             f"{depth_of[h]:g}", file=intervals.file, row=int(intervals.rows[i]),
                             fix="correct the interval or the collar's total depth")
    assays = holes.source[-1] if holes.source else None
    runs: list[CompositeRun] = []
    contacts = split = 0
    contact_holes = set()
    for hole_id in holes.ids.tolist():
        idx = holes.intervals_of(hole_id)
        if len(idx) == 0:
            continue
        a, b, v = holes.top[idx], holes.bottom[idx], holes.values[idx]
        stretches = _stretches(intervals, intervals.of_hole(hole_id))
        _check_logged(hole_id, a, b, np.isfinite(v).any(axis=1), stretches, assays, intervals.file)
        changes = sum(1 for s, t in zip(stretches, stretches[1:]) if abs(s[1] - t[0]) <= _TOL and s[2] != t[2])
        contacts += changes
        if changes:
            contact_holes.add(hole_id)
        for s, e, code in stretches:
            inside = (b > s + _TOL) & (a < e - _TOL)
            if not inside.any():
                continue
            top, bottom = np.maximum(a[inside], s), np.minimum(b[inside], e)
            split += int((a[inside] < s - _TOL).sum())  # each straddling assay counted once, below
            runs.append(CompositeRun(hole_id, top, bottom, v[inside], float(top[0]), {"unit": code}))
    points = composite_runs(holes, runs, length, min_fraction=min_fraction, residual=residual,
                            min_sampled_fraction=min_sampled_fraction)
    attributes = dict(points.attributes)
    attributes["unit"] = attributes["unit"].astype(np.int32)
    note = (f"compositing restarted at each change of logged unit ({contacts} contact(s) in "
            f"{len(contact_holes)} hole(s); {split} assay interval(s) split at a contact)")
    return replace(points, attributes=attributes, source=points.source + (intervals.file,),
                   notes=points.notes + (note,))


def _check_logged(hole_id: str, a: np.ndarray, b: np.ndarray, assayed: np.ndarray, stretches: list,
                  assays: str | None, logged: str) -> None:
    """Refuse an assayed interval of one hole with a stretch that no logged unit covers."""
    edges = [(-np.inf, -np.inf)] + [(s, e) for s, e, _ in stretches] + [(np.inf, np.inf)]
    gaps = [(edges[k][1], edges[k + 1][0]) for k in range(len(edges) - 1) if edges[k + 1][0] - edges[k][1] > _TOL]
    for lo, hi in gaps:
        hit = np.flatnonzero(assayed & (b > lo + _TOL) & (a < hi - _TOL))
        if len(hit):
            i = int(hit[0])
            gap_from, gap_to = max(lo, a[i]), min(hi, b[i])
            where = "no unit is logged in the hole" if not stretches else \
                f"no unit is logged over {gap_from:g}-{gap_to:g} m"
            raise InputError(f"hole {hole_id!r}: the assay interval {a[i]:g}-{b[i]:g} m has no logged unit ({where}; "
                             f"{len(hit)} assay interval(s) of the hole fall there)", file=assays,
                             fix=f"log the unit of that stretch in {logged}, or remove the assay")
