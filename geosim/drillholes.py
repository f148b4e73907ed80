"""Drillholes: collar, survey and interval tables, minimum-curvature positions, compositing.

Tables (CSV; default column names, any of which can be renamed through ``columns``)

* collar:    ``hole_id, x, y, z, depth`` (collar position and total depth along the hole, m)
* survey:    ``hole_id, depth, azimuth, dip`` (downhole orientation measurements)
* intervals: ``hole_id, from, to`` and one column per value (assays, logged properties)

Conventions
-----------
* Depths are measured along the hole from the collar, in metres.
* Azimuth: degrees clockwise from north, ``[0, 360)``; 360 is accepted as north.
* Dip: degrees from horizontal, **negative downward**: -90 is vertically down,
  0 horizontal, +90 vertically up (underground holes drilled upward), range
  ``[-90, 90]``.  This is the one place geosim uses a negative-downward dip: it
  is the usual convention of drillhole survey files.  Everywhere else (variogram
  structures, directions, search ellipsoids: :mod:`geosim.variogram.anisotropy`)
  dip is positive downward.  Files that give survey dips positive downward are
  read with ``survey_dip="positive_down"`` (run spec: ``data.survey_dip``), which
  negates them and says so in the notes.  A survey file in which every dip is
  positive (every hole pointing upward) is refused unless the convention is
  stated, because it is almost always a positive-downward file read the wrong
  way round, which would mirror every hole about the collar's horizontal plane.
* A hole without survey rows is vertical (dip -90).  When a hole's first survey is
  below the collar, its orientation holds from the collar down to it; below the
  last survey the hole continues straight.
* Positions between survey stations follow the minimum-curvature method: the
  path between two stations is the circular arc tangent to both measured
  directions (Sawaryn and Thorogood 2005, "A compendium of directional
  calculations based on the minimum curvature method", SPE Drilling & Completion
  20(1); from memory).  For a station pair with direction unit vectors ``t1``,
  ``t2`` a measured length ``L`` apart and dogleg angle ``b = angle(t1, t2)``, the
  displacement is ``L / 2 * (t1 + t2) * RF(b)`` with ``RF(b) = (2 / b) tan(b / 2)``
  (``RF -> 1`` as ``b -> 0``).  A depth between stations lies on the same arc: its
  direction is the spherical interpolation of ``t1`` and ``t2`` and its position
  the same formula over the partial length.
* In an interval table an *empty* value cell means "not assayed": it does not
  count, in particular not as zero.  Gaps between intervals are unsampled too.
"""
from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from pyproj import CRS

from .crs import CrsLike, to_projected
from .errors import InputError
from .points import PointSet, merge_coincident
from .tables import CsvTable, read_table, suggest

DEFAULT_COLUMNS = {
    "collar": {"hole_id": "hole_id", "x": "x", "y": "y", "z": "z", "depth": "depth"},
    "survey": {"hole_id": "hole_id", "depth": "depth", "azimuth": "azimuth", "dip": "dip"},
    "intervals": {"hole_id": "hole_id", "from": "from", "to": "to"},
}

# sign conventions a survey file's dips may be stated in (module docstring)
SURVEY_DIP = ("negative_down", "positive_down")
_DEPTH_TOL = 1e-3  # m; interval ends this close past the total depth are accepted (rounding)


@dataclass(frozen=True, repr=False)
class Drillholes:
    """Validated drillhole tables.

    Attributes
    ----------
    ids : (m,) str ndarray
        Hole identifiers, in collar-table order.
    collars : (m, 3) ndarray
        Collar ``(x, y, z)`` in metres of ``crs``.
    depths : (m,) ndarray
        Total depth of each hole.
    surveys : dict of str to (s, 3) ndarray
        Per hole, rows ``(depth, azimuth, dip)`` sorted by depth; holes without
        surveys are absent (vertical).
    hole : (n,) str ndarray
        Hole of each interval; intervals are sorted by hole (collar order) then depth.
    top, bottom : (n,) ndarray
        Interval ``from`` and ``to`` depths.
    values : (n, k) ndarray
        Interval values; NaN where not assayed.
    names : tuple of str
        Value names.
    crs : pyproj.CRS or None
    source : tuple of str
        The three input paths.
    notes : tuple of str
        What intake chose or changed.
    """

    ids: np.ndarray
    collars: np.ndarray
    depths: np.ndarray
    surveys: dict
    hole: np.ndarray
    top: np.ndarray
    bottom: np.ndarray
    values: np.ndarray
    names: tuple[str, ...]
    crs: CRS | None = None
    source: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    _row_of: dict = field(init=False, repr=False, compare=False)
    _slices: dict = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        ids = np.asarray(self.ids).astype(str)
        row_of = {h: i for i, h in enumerate(ids.tolist())}
        if len(row_of) != len(ids):
            raise ValueError("hole ids must be distinct")
        hole = np.asarray(self.hole).astype(str)
        try:
            which = np.array([row_of[h] for h in hole.tolist()], dtype=np.int64)
        except KeyError as exc:
            raise ValueError(f"interval of hole {exc.args[0]!r}, which has no collar") from None
        top = np.asarray(self.top, dtype=np.float64)
        order = np.lexsort((top, which))
        values = np.asarray(self.values, dtype=np.float64).reshape(len(hole), -1)
        for name, arr in (("ids", ids), ("hole", hole[order]), ("top", top[order]),
                          ("bottom", np.asarray(self.bottom, dtype=np.float64)[order]),
                          ("values", values[order]),
                          ("collars", np.asarray(self.collars, dtype=np.float64).reshape(len(ids), 3)),
                          ("depths", np.asarray(self.depths, dtype=np.float64).reshape(len(ids))),
                          ("names", tuple(self.names)), ("_row_of", row_of)):
            object.__setattr__(self, name, arr)
        # intervals are grouped by hole, so each hole's intervals are one slice
        bounds = np.searchsorted(which[order], np.arange(len(ids) + 1))
        object.__setattr__(self, "_slices", {h: slice(bounds[i], bounds[i + 1]) for h, i in row_of.items()})

    def __repr__(self) -> str:
        return (f"Drillholes({len(self.ids)} holes, {len(self.hole)} intervals, names={self.names}, "
                f"crs={None if self.crs is None else self.crs.to_string()})")

    def intervals_of(self, hole_id: str) -> np.ndarray:
        """Indices of the intervals of one hole, top to bottom (empty for an unknown hole)."""
        sl = self._slices.get(hole_id)
        return np.arange(0) if sl is None else np.arange(sl.start, sl.stop)

    def positions(self, hole_id: str, depths) -> np.ndarray:
        """``(x, y, z)`` of points at the given depths along one hole (minimum curvature)."""
        try:
            i = self._row_of[hole_id]
        except KeyError:
            raise KeyError(f"no hole {hole_id!r}; {suggest(hole_id, self.ids.tolist())}".rstrip("; ")) from None
        s = self.surveys.get(hole_id)
        if s is None:
            s = np.empty((0, 3))
        return desurvey(self.collars[i], s[:, 0], s[:, 1], s[:, 2], depths)


def direction(azimuth, dip) -> np.ndarray:
    """Unit vectors ``(east, north, up)`` of the given azimuths and dips (degrees, dip negative down).

    Examples
    --------
    >>> import geosim.drillholes as d
    >>> d.direction(90.0, -90.0).round(12).tolist()
    [[0.0, 0.0, -1.0]]
    """
    az = np.radians(np.atleast_1d(np.asarray(azimuth, dtype=np.float64)))
    dp = np.radians(np.atleast_1d(np.asarray(dip, dtype=np.float64)))
    c = np.cos(dp)
    return np.column_stack([c * np.sin(az), c * np.cos(az), np.sin(dp)])


def _ratio_factor(b: np.ndarray) -> np.ndarray:
    """``(2 / b) tan(b / 2)``, 1 in the limit ``b -> 0``."""
    b = np.asarray(b, dtype=np.float64)
    small = b < 1e-7
    safe = np.where(small, 1.0, b)
    # series 1 + b^2/12 for tiny angles avoids 0/0
    return np.where(small, 1.0 + b * b / 12.0, 2.0 / safe * np.tan(safe / 2.0))


def _slerp(t1: np.ndarray, t2: np.ndarray, b: np.ndarray, f: np.ndarray) -> np.ndarray:
    """Unit vector a fraction ``f`` of the way along the great circle from ``t1`` to ``t2``."""
    b = b[:, None]
    f = f[:, None]
    small = b < 1e-7
    sb = np.where(small, 1.0, np.sin(b))
    arc = (np.sin((1.0 - f) * b) * t1 + np.sin(f * b) * t2) / sb
    lin = (1.0 - f) * t1 + f * t2
    out = np.where(small, lin, arc)
    return out / np.linalg.norm(out, axis=1, keepdims=True)


def desurvey(collar, survey_depths, azimuths, dips, depths) -> np.ndarray:
    """Positions along a hole by the minimum-curvature method.

    Parameters
    ----------
    collar : (3,) array_like
        Collar ``(x, y, z)``.
    survey_depths, azimuths, dips : (s,) array_like
        Survey stations (depth along the hole, azimuth, dip in degrees, dip negative
        downward), ascending depths.  Empty: the hole is vertical.
    depths : (q,) array_like
        Depths along the hole (>= 0) where positions are wanted.

    Returns
    -------
    (q, 3) ndarray
        ``(x, y, z)`` of each depth.

    Examples
    --------
    >>> import geosim
    >>> geosim.desurvey([0.0, 0.0, 100.0], [0.0], [0.0], [-90.0], [0.0, 25.0]).round(9).tolist()
    [[0.0, 0.0, 100.0], [0.0, 0.0, 75.0]]
    >>> p = geosim.desurvey([0.0, 0.0, 0.0], [0.0], [90.0], [-30.0], [10.0])   # 30 degrees below east
    >>> p.round(6).tolist()
    [[8.660254, 0.0, -5.0]]
    """
    c = np.asarray(collar, dtype=np.float64).reshape(3)
    md = np.asarray(survey_depths, dtype=np.float64).ravel()
    az = np.asarray(azimuths, dtype=np.float64).ravel()
    dp = np.asarray(dips, dtype=np.float64).ravel()
    q = np.atleast_1d(np.asarray(depths, dtype=np.float64)).ravel()
    if not (len(md) == len(az) == len(dp)):
        raise ValueError("survey depths, azimuths and dips must have the same length")
    if (q < 0).any() or not np.isfinite(q).all():
        raise ValueError("depths along the hole must be finite and >= 0")
    if len(md) == 0:
        md, az, dp = np.array([0.0]), np.array([0.0]), np.array([-90.0])
    if (np.diff(md) <= 0).any():
        raise ValueError("survey depths must increase strictly")
    if md[0] > 0:
        md, az, dp = np.r_[0.0, md], np.r_[az[0], az], np.r_[dp[0], dp]
    t = direction(az, dp)
    dl = np.diff(md)
    b = np.arctan2(np.linalg.norm(np.cross(t[:-1], t[1:]), axis=1), np.einsum("ij,ij->i", t[:-1], t[1:]))
    if (b > math.pi - 1e-6).any():
        raise ValueError("two consecutive survey stations point in opposite directions")
    steps = 0.5 * dl[:, None] * (t[:-1] + t[1:]) * _ratio_factor(b)[:, None]
    stations = c + np.vstack([np.zeros(3), np.cumsum(steps, axis=0)])
    out = np.empty((len(q), 3))
    seg = np.searchsorted(md, q, side="right") - 1  # station at or above each depth
    beyond = seg >= len(md) - 1
    if beyond.any():
        out[beyond] = stations[-1] + (q[beyond] - md[-1])[:, None] * t[-1]
    inside = ~beyond
    if inside.any():
        k = seg[inside]
        s = q[inside] - md[k]
        f = s / dl[k]
        tf = _slerp(t[k], t[k + 1], b[k], f)
        out[inside] = stations[k] + 0.5 * s[:, None] * (t[k] + tf) * _ratio_factor(f * b[k])[:, None]
    return out


def column_names(columns: Mapping | None) -> dict[str, dict[str, str]]:
    """The column name of every role of every table, after the renames in ``columns``.

    ``columns`` maps a default column name to the name in the files, for every table
    that has it (``{"hole_id": "HOLE", "from": "FROM_M"}``), or a table name to such a
    mapping for that table alone (``{"collar": {"depth": "EOH"}}``); both forms mix.
    ``depth`` is a role of the collar table (total depth) and of the survey table, so
    rename it per table when the two differ.

    Raises
    ------
    InputError
        For an unknown table or role (with a suggestion) or a name that is not text.

    Examples
    --------
    >>> from geosim.drillholes import column_names
    >>> names = column_names({"hole_id": "HOLE", "collar": {"depth": "EOH"}})
    >>> names["collar"]["hole_id"], names["intervals"]["hole_id"], names["collar"]["depth"], names["survey"]["depth"]
    ('HOLE', 'HOLE', 'EOH', 'depth')
    """
    names = {table: dict(cols) for table, cols in DEFAULT_COLUMNS.items()}
    roles = sorted({role for cols in names.values() for role in cols})
    renames = []
    for key, value in (columns or {}).items():
        if isinstance(value, Mapping):
            if key not in names:
                raise InputError(f"unknown drillhole table {key!r}", field=f"columns.{key}",
                                 fix=(suggest(key, list(names)) + " " if suggest(key, list(names)) else "")
                                 + f"tables are {', '.join(names)}")
            renames += [(key, role, col, f"columns.{key}.{role}") for role, col in value.items()]
        else:
            tables = [t for t in names if key in names[t]]
            if not tables:
                hint = suggest(key, roles + list(names))
                raise InputError(f"{key!r} is not a drillhole column role", field=f"columns.{key}",
                                 fix=(hint + " " if hint else "") + f"roles are {', '.join(roles)}")
            renames += [(t, key, value, f"columns.{key}") for t in tables]
    for table, role, col, where in renames:
        if role not in names[table]:
            hint = suggest(role, list(names[table]))
            raise InputError(f"the {table} table has no column role {role!r}", field=where,
                             fix=(hint + " " if hint else "") + f"its roles are {', '.join(names[table])}")
        if not isinstance(col, str) or not col.strip():
            raise InputError(f"the column name must be text, found {col!r}", field=where,
                             fix='write the name of the column in the file, e.g. "HOLE"')
        names[table][role] = col
    return names


def _hole_index(table: CsvTable, col: str, known: dict, what: str) -> np.ndarray:
    ids = table.text(col, role="hole id").tolist()
    idx = np.empty(len(ids), dtype=np.int64)
    for i, h in enumerate(ids):
        j = known.get(h)
        if j is None:
            hint = suggest(h, list(known))
            raise InputError(f"hole {h!r} is not in the collar table", file=table.path, row=table.lines[i],
                             field=table.header[table.index(col)],
                             fix=(hint + " " if hint else "") + f"add the hole to the collar table or "
                                 f"remove its {what} rows")
        idx[i] = j
    return idx


def read_drillholes(collars: str | os.PathLike, surveys: str | os.PathLike | None,
                    intervals: str | os.PathLike, *, values: str | Sequence[str], crs: CrsLike | None,
                    target_crs: CrsLike | None = None, columns: Mapping | None = None,
                    survey_dip: str | None = None) -> Drillholes:
    """Read and check collar, survey and interval tables.

    Parameters
    ----------
    collars, surveys, intervals : path-like
        The three CSV files; ``surveys`` may be None (every hole vertical).
    values : str or sequence of str
        Value column(s) of the interval table.
    crs : CRS-like or None
        CRS of the collar coordinates; None for a local mine grid in metres.
        Geographic collars are reprojected (see :func:`geosim.crs.to_projected`).
    target_crs : CRS-like, optional
        Projected CRS in metres to work in.
    columns : mapping, optional
        Column renames (:func:`column_names`): default name -> name in the files for
        every table, e.g. ``{"hole_id": "HOLE", "from": "FROM_M"}``, and/or per table,
        e.g. ``{"collar": {"x": "east", "y": "north"}}``; roles are those of
        :data:`DEFAULT_COLUMNS`.
    survey_dip : {"negative_down", "positive_down"}, optional
        The sign convention of the survey file's dips (module docstring).  None
        (default): negative downward, and a file whose every dip is positive is
        refused with the fix; ``"positive_down"`` negates the dips (a note says
        so); ``"negative_down"`` stated explicitly accepts holes that all point
        upward (underground drilling).

    Returns
    -------
    Drillholes

    Raises
    ------
    InputError
        Naming file, row and column: missing or misspelt columns, empty or
        non-numeric cells, repeated hole ids in the collar table, non-positive
        total depth, holes missing from the collar table, survey depths repeated
        or past the hole's depth, azimuths or dips out of range, opposite
        consecutive survey directions, ``from >= to``, negative ``from``,
        intervals past the hole's depth, overlapping intervals within a hole.

        Also when every survey dip is positive and ``survey_dip`` was not given.
    """
    if survey_dip not in (None, *SURVEY_DIP):
        raise ValueError(f"survey_dip must be 'negative_down' or 'positive_down', got {survey_dip!r}")
    cols = column_names(columns)
    names = (values,) if isinstance(values, str) else tuple(values)
    if not names:
        raise ValueError("name at least one value column")
    notes: list[str] = []

    # collars -------------------------------------------------------------------
    ct = read_table(collars, what="collar table")
    cc = cols["collar"]
    ids = ct.text(cc["hole_id"], role="hole id")
    xyz = np.column_stack([ct.numbers(cc[r], role=f"collar {r}") for r in ("x", "y", "z")])
    depth = ct.numbers(cc["depth"], role="total depth")
    known: dict[str, int] = {}
    for i, h in enumerate(ids.tolist()):
        if h in known:
            raise InputError(f"hole {h!r} appears twice (first in row {ct.lines[known[h]]})", file=ct.path,
                             row=ct.lines[i], field=ct.header[ct.index(cc["hole_id"])],
                             fix="give each hole one collar row")
        known[h] = i
        if not depth[i] > 0:
            raise InputError(f"total depth {depth[i]:g} is not positive", file=ct.path, row=ct.lines[i],
                             field=ct.header[ct.index(cc["depth"])], fix="give the hole's length in metres")
    xyz, out_crs, note = to_projected(xyz, crs, target_crs, file=ct.path, rows=ct.lines)
    if note:
        notes.append(note)

    # surveys -------------------------------------------------------------------
    survey_by_hole: dict[str, np.ndarray] = {}
    sources = [ct.path]
    if surveys is not None:
        st = read_table(surveys, what="survey table")
        sources.append(st.path)
        sc = cols["survey"]
        sh = _hole_index(st, sc["hole_id"], known, "survey")
        sd = st.numbers(sc["depth"], role="survey depth")
        sa = st.numbers(sc["azimuth"], role="azimuth")
        sp = st.numbers(sc["dip"], role="dip")
        col = {r: st.header[st.index(sc[r])] for r in ("depth", "azimuth", "dip")}
        _raise_first([
            (~((sd >= 0.0) & (sd <= depth[sh] + _DEPTH_TOL)), lambda i: InputError(
                f"survey depth {sd[i]:g} is outside the hole (total depth {depth[sh[i]]:g})", file=st.path,
                row=st.lines[i], field=col["depth"], fix="correct the depth or the collar's total depth")),
            (~((sa >= 0.0) & (sa <= 360.0)), lambda i: InputError(
                f"azimuth {sa[i]:g} is outside 0-360 degrees", file=st.path, row=st.lines[i],
                field=col["azimuth"], fix="give degrees clockwise from north, 0 to 360")),
            (~((sp >= -90.0) & (sp <= 90.0)), lambda i: InputError(
                f"dip {sp[i]:g} is outside -90 to 90 degrees", file=st.path, row=st.lines[i], field=col["dip"],
                fix="give degrees from horizontal, negative downward (-90 = vertically down)")),
        ])
        if survey_dip is None and (sp > 0).any() and not (sp < 0).any():
            first = int(np.argmax(sp > 0))
            raise InputError("every survey dip is positive, so every hole would point upward from its collar "
                             "(survey dips are read negative downward)", file=st.path, row=st.lines[first],
                             field=col["dip"],
                             fix='if the file gives dips positive downward, state it with survey_dip = '
                                 '"positive_down" (data.survey_dip in a run spec); if the holes really were '
                                 'drilled upward, state survey_dip = "negative_down"')
        if survey_dip == "positive_down":
            sp = -sp
            notes.append(f"{st.path}: survey dips read as positive downward (survey_dip = \"positive_down\") "
                         "and negated to geosim's negative-downward survey convention")
        order = np.lexsort((sd, sh))
        for h_idx in np.unique(sh):
            rows = order[sh[order] == h_idx]
            d = sd[rows]
            dup = np.flatnonzero(np.diff(d) == 0)
            if len(dup):
                a, b = rows[dup[0]], rows[dup[0] + 1]
                raise InputError(f"hole {str(ids[h_idx])!r} has two surveys at depth {d[dup[0]]:g} "
                                 f"(rows {st.lines[min(a, b)]} and {st.lines[max(a, b)]})", file=st.path,
                                 row=st.lines[max(a, b)], field=col["depth"], fix="keep one survey per depth")
            tv = direction(sa[rows], sp[rows])
            cosb = np.einsum("ij,ij->i", tv[:-1], tv[1:])
            bad = np.flatnonzero(cosb < -1.0 + 1e-9)
            if len(bad):
                raise InputError(f"hole {str(ids[h_idx])!r}: consecutive surveys point in opposite directions",
                                 file=st.path, row=st.lines[rows[bad[0] + 1]], field=col["azimuth"],
                                 fix="check the azimuth and the sign of the dip")
            survey_by_hole[str(ids[h_idx])] = np.column_stack([d, np.where(sa[rows] == 360.0, 0.0, sa[rows]),
                                                               sp[rows]])

    # intervals -----------------------------------------------------------------
    it = read_table(intervals, what="interval table")
    sources.append(it.path)
    ic = cols["intervals"]
    ih = _hole_index(it, ic["hole_id"], known, "interval")
    top = it.numbers(ic["from"], role="interval from")
    bot = it.numbers(ic["to"], role="interval to")
    vals = np.column_stack([it.numbers(v, role="value", allow_missing=True) for v in names])
    fcol, tcol = it.header[it.index(ic["from"])], it.header[it.index(ic["to"])]
    _raise_first([
        (top < 0, lambda i: InputError(
            f"'from' {top[i]:g} is above the collar", file=it.path, row=it.lines[i], field=fcol,
            fix="depths are measured down the hole from 0 at the collar")),
        (~(top < bot), lambda i: InputError(
            f"'from' {top[i]:g} is not less than 'to' {bot[i]:g}", file=it.path, row=it.lines[i], field=tcol,
            fix="check the interval ends (swapped or zero length?)")),
        (bot > depth[ih] + _DEPTH_TOL, lambda i: InputError(
            f"interval ends at {bot[i]:g}, past the hole's total depth {depth[ih[i]]:g}", file=it.path,
            row=it.lines[i], field=tcol, fix="correct the interval or the collar's total depth")),
    ])
    order = np.lexsort((top, ih))
    same = ih[order][1:] == ih[order][:-1]
    overlap = np.flatnonzero(same & (top[order][1:] < bot[order][:-1] - 1e-9))
    if len(overlap):
        a, b = order[overlap[0]], order[overlap[0] + 1]
        raise InputError(f"intervals {top[a]:g}-{bot[a]:g} (row {it.lines[a]}) and {top[b]:g}-{bot[b]:g} "
                         f"(row {it.lines[b]}) of hole {str(ids[ih[a]])!r} overlap", file=it.path,
                         row=max(it.lines[a], it.lines[b]), field=fcol, fix="correct or remove one of them")
    value_names = tuple(it.header[it.index(v)] for v in names)
    with_intervals = set(np.unique(ih).tolist())
    unsampled = [h for h, i in known.items() if i not in with_intervals]
    if unsampled:
        notes.append(f"{len(unsampled)} hole(s) without intervals: {', '.join(unsampled[:10])}"
                     + (" ..." if len(unsampled) > 10 else ""))
    for j, name in enumerate(value_names):
        missing = int(np.isnan(vals[:, j]).sum())
        if missing:
            notes.append(f"{missing} of {len(vals)} intervals have no {name} value (treated as not assayed)")
    return Drillholes(ids=ids, collars=xyz, depths=depth, surveys=survey_by_hole, hole=ids[ih[order]],
                      top=top[order], bottom=bot[order], values=vals[order], names=value_names, crs=out_crs,
                      source=tuple(sources), notes=tuple(notes))


def _raise_first(checks) -> None:
    """Raise the error of the first row failing any check, checks tried in the order given.

    ``checks`` is a list of ``(bad, make)`` with ``bad`` a boolean array over rows and
    ``make(i)`` building the error for row ``i``.
    """
    bad = np.zeros(len(checks[0][0]), dtype=bool)
    for mask, _ in checks:
        bad |= mask
    if bad.any():
        i = int(np.argmax(bad))
        for mask, make in checks:
            if mask[i]:
                raise make(i)


def composite(holes: Drillholes, length: float, *, min_fraction: float = 0.5, residual: str = "merge",
              start: str = "sample", min_sampled_fraction: float = 0.5) -> PointSet:
    """Fixed-length, length-weighted composites along each hole.

    Each hole is cut into runs of ``length`` metres from its first sampled depth
    (``start="sample"``) or from the collar (``start="collar"``) down to its last
    sampled depth.  A composite's value is the length-weighted mean of the parts of
    intervals inside it, over the *sampled* length only: gaps and not-assayed
    intervals never count as zero.  Composites of different holes at the same
position (twin holes) are averaged, with a warning and a note.  The last run of a hole (the residual) is
    kept when it is at least ``min_fraction * length`` long; a shorter one is
    merged into the composite above it (``residual="merge"``; when it is the hole's
    only run it is kept) or dropped (``residual="drop"``).  Composites with no
    sampled length are left out.

    A composite stands for its whole run only when enough of it was sampled: a
    variable sampled over less than ``min_sampled_fraction`` of the run's length
    (``to - from``) is set aside there (NaN), and a composite with no variable left
    is dropped; the note says how many.  Each composite sits at the length-weighted
    centre of its sampled parts (the centroid of the sampled length along the
    hole), not at the middle of its run, so a composite sampled over its upper half
    lies in its upper half.

    Parameters
    ----------
    holes : Drillholes
    length : float
        Composite length (m), measured along the hole.
    min_fraction : float
        Shortest residual kept on its own, as a fraction of ``length`` (0 to 1).
    residual : {"merge", "drop"}
    start : {"sample", "collar"}
    min_sampled_fraction : float
        Shortest sampled length a composite keeps a variable for, as a fraction of
        the composite's length (0 to 1; default 0.5, half the length: common
        practice, no source).  0 keeps every composite with any sampled length.

    Returns
    -------
    PointSet
        3-D points at the centre of the sampled length of each composite, with
        ``hole_ids`` and attributes ``length`` (sampled length, m: the weight a
        composite carries), ``depth`` (depth of that centre), ``from`` and ``to``.
        A value is NaN where its variable was sampled over less than
        ``min_sampled_fraction`` of that composite.

    Examples
    --------
    >>> import numpy, geosim
    >>> from geosim.drillholes import Drillholes
    >>> h = Drillholes(ids=numpy.array(["A"]), collars=numpy.zeros((1, 3)), depths=numpy.array([10.0]),
    ...                surveys={}, hole=numpy.array(["A", "A"]), top=numpy.array([0.0, 1.0]),
    ...                bottom=numpy.array([1.0, 4.0]), values=numpy.array([[1.0], [3.0]]), names=("cu",))
    >>> c = geosim.composite(h, 2.0)
    >>> c.column().tolist(), c.attributes["depth"].tolist()   # (1*1 + 1*3)/2, then 3 over 2 m
    ([2.0, 3.0], [1.0, 3.0])
    """
    if start not in ("sample", "collar"):
        raise ValueError(f"start must be 'sample' or 'collar', got {start!r}")
    runs = []
    for hole_id in holes.ids.tolist():
        idx = holes.intervals_of(hole_id)
        if len(idx):
            first = 0.0 if start == "collar" else float(holes.top[idx][0])
            runs.append(CompositeRun(hole_id, holes.top[idx], holes.bottom[idx], holes.values[idx], first))
    return composite_runs(holes, runs, length, min_fraction=min_fraction, residual=residual,
                          min_sampled_fraction=min_sampled_fraction)


@dataclass(frozen=True)
class CompositeRun:
    """One stretch of a hole composited on its own: a whole hole, or one unit's part of it.

    ``top``, ``bottom`` and ``values`` are its intervals (sorted, not overlapping,
    cut to the stretch); compositing starts at ``first`` and ends at the last
    interval's bottom.  ``labels`` are attributes every composite of the run
    carries (e.g. ``{"unit": 2}``).
    """

    hole_id: str
    top: np.ndarray
    bottom: np.ndarray
    values: np.ndarray
    first: float
    labels: Mapping = field(default_factory=dict)


def composite_runs(holes: Drillholes, runs: Sequence[CompositeRun], length: float, *, min_fraction: float = 0.5,
                   residual: str = "merge", min_sampled_fraction: float = 0.5) -> PointSet:
    """Composites of each run separately (:func:`composite` is this on whole holes).

    Runs of one hole never share a composite, so a caller that cuts holes at
    contacts gets composites that never straddle one.  Parameters and result as
    :func:`composite`; each run's ``labels`` become attributes of its composites.
    """
    if not length > 0:
        raise ValueError(f"composite length must be positive, got {length}")
    if not 0.0 <= min_fraction <= 1.0:
        raise ValueError(f"min_fraction must be between 0 and 1, got {min_fraction}")
    if not 0.0 <= min_sampled_fraction <= 1.0:
        raise ValueError(f"min_sampled_fraction must be between 0 and 1, got {min_sampled_fraction}")
    if residual not in ("merge", "drop"):
        raise ValueError(f"residual must be 'merge' or 'drop', got {residual!r}")
    k = len(holes.names)
    label_keys = sorted({key for run in runs for key in run.labels})
    parts: dict[str, list] = {key: [] for key in ("coords", "values", "hole", "length", "depth", "from",
                                                  "to", *label_keys)}
    merged = dropped = undersampled = 0
    set_aside = np.zeros(k, dtype=np.int64)
    for run in runs:
        hole_id, a, b, v = run.hole_id, run.top, run.bottom, run.values
        if len(a) == 0:
            continue
        edges, how = _edges(float(run.first), float(b[-1]), float(length), min_fraction, residual)
        merged += how == "merged"
        dropped += how == "dropped"
        if len(edges) < 2:
            continue
        # cumulative sampled length and length x value are piecewise linear in depth with
        # breakpoints at interval ends; differences at the edges give exact overlaps
        xp = np.column_stack([a, b]).ravel()
        sampled = np.isfinite(v)
        lens = (b - a)[:, None] * sampled
        sums = np.where(sampled, v, 0.0) * (b - a)[:, None]
        any_len = (b - a) * sampled.any(axis=1)
        comp_len = np.empty((len(edges) - 1, k))
        comp_sum = np.empty((len(edges) - 1, k))
        for j in range(k):
            comp_len[:, j] = np.diff(np.interp(edges, xp, _cumulative(lens[:, j])))
            comp_sum[:, j] = np.diff(np.interp(edges, xp, _cumulative(sums[:, j])))
        covered = np.diff(np.interp(edges, xp, _cumulative(any_len)))
        with np.errstate(invalid="ignore", divide="ignore"):
            cv = np.where(comp_len > 1e-9, comp_sum / np.where(comp_len > 1e-9, comp_len, 1.0), np.nan)
        enough = comp_len >= min_sampled_fraction * np.diff(edges)[:, None] - 1e-9
        set_aside += ((comp_len > 1e-9) & ~enough).sum(axis=0)
        cv[~enough] = np.nan
        keep = (covered > 1e-9) & np.isfinite(cv).any(axis=1)
        undersampled += int(((covered > 1e-9) & ~keep).sum())
        if not keep.any():
            continue
        top, bottom = edges[:-1][keep], edges[1:][keep]
        centre = _sampled_centres(top, bottom, a, b, sampled.any(axis=1))
        parts["coords"].append(holes.positions(hole_id, centre))
        parts["values"].append(cv[keep])
        parts["hole"].append(np.full(keep.sum(), hole_id))
        parts["length"].append(covered[keep])
        parts["depth"].append(centre)
        parts["from"].append(top)
        parts["to"].append(bottom)
        for key in label_keys:
            parts[key].append(np.full(keep.sum(), run.labels[key]))
    if not parts["coords"] and undersampled:
        raise InputError(f"no composites: all {undersampled} were sampled over less than "
                         f"{min_sampled_fraction:g} of their {length:g} m length",
                         field="data.composites.min_sampled_fraction",
                         fix="use a shorter composite length or a smaller min_sampled_fraction")
    if not parts["coords"]:
        table = holes.source[-1] if holes.source else None
        empty = [n for j, n in enumerate(holes.names) if not np.isfinite(holes.values[:, j]).any()]
        if empty:
            raise InputError(f"the value column{'s' if len(empty) > 1 else ''} {', '.join(map(repr, empty))} "
                             "is empty in every row", file=table, field=empty[0],
                             fix="fill in the values, or name another value column")
        raise InputError("no composites: no hole has a sampled interval", file=table,
                         fix="check the interval table")
    cat = {key: np.concatenate(val) for key, val in parts.items()}
    note = (f"composited to {length:g} m along the hole ({len(cat['depth'])} composites, each at the centre "
            f"of its sampled length")
    if merged:
        note += f"; {merged} residual(s) under {min_fraction:g} x length merged into the composite above"
    if dropped:
        note += f"; {dropped} residual(s) under {min_fraction:g} x length dropped"
    if undersampled:
        note += (f"; {undersampled} composite(s) sampled over less than {min_sampled_fraction:g} of their "
                 f"length dropped")
    if k > 1 and set_aside.any():
        note += "; values set aside for the same reason: " + ", ".join(
            f"{name} {int(c)}" for name, c in zip(holes.names, set_aside) if c)
    note += ")"
    attributes = {"length": cat["length"], "depth": cat["depth"], "from": cat["from"], "to": cat["to"]}
    attributes.update({key: cat[key] for key in label_keys})
    points = PointSet(cat["coords"], cat["values"], holes.names, holes.crs, cat["hole"], attributes,
                      holes.source, holes.notes + (note,))
    # twin holes collared at the same spot give coincident composites, which kriging cannot use
    return merge_coincident(points)


def _sampled_centres(top: np.ndarray, bottom: np.ndarray, a: np.ndarray, b: np.ndarray,
                     sampled: np.ndarray) -> np.ndarray:
    """Depth of the centroid of the sampled length inside each run ``[top, bottom]``.

    Intervals ``[a, b]`` (sorted, not overlapping) count where ``sampled``.  The
    sampled length and its first moment ``integral of depth`` are cumulated to
    each edge exactly, so the cost is O((runs + intervals) log intervals).
    """
    s = sampled.astype(float)
    length_before = np.r_[0.0, np.cumsum(s * (b - a))]
    moment_before = np.r_[0.0, np.cumsum(s * 0.5 * (b * b - a * a))]

    def upto(e: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        i = np.searchsorted(a, e, side="right") - 1  # the last interval starting at or before e
        j = np.clip(i, 0, len(a) - 1)
        x = np.clip(np.minimum(e, b[j]), a[j], None)
        part = np.where(i >= 0, s[j], 0.0)
        return (length_before[j] + part * (x - a[j]) * (i >= 0),
                moment_before[j] + part * 0.5 * (x * x - a[j] * a[j]) * (i >= 0))

    l_top, m_top = upto(top)
    l_bot, m_bot = upto(bottom)
    return (m_bot - m_top) / (l_bot - l_top)


def _cumulative(x: np.ndarray) -> np.ndarray:
    """Cumulative totals at the breakpoints ``from_0, to_0, from_1, to_1, ...``."""
    after = np.cumsum(x)
    before = after - x
    return np.column_stack([before, after]).ravel()


def _edges(first: float, last: float, length: float, min_fraction: float,
           residual: str) -> tuple[np.ndarray, str]:
    span = last - first
    n_full = int(math.floor(span / length + 1e-9))
    edges = first + length * np.arange(n_full + 1)
    rest = last - edges[-1]
    if rest <= 1e-9:
        return edges, "exact"
    if rest >= min_fraction * length - 1e-9:
        return np.append(edges, last), "kept"
    if residual == "merge":
        if n_full == 0:
            return np.array([first, last]), "kept"
        edges[-1] = last
        return edges, "merged"
    return edges, "dropped"
