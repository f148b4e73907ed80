"""Point samples: the :class:`PointSet` every later step works on, and point intake.

A point table has one sample per row: coordinates, one or more value columns
and optionally a hole (or well) identifier.  It is a CSV file, a GIS vector file
(GeoPackage, Shapefile, GeoJSON, FlatGeobuf, GeoParquet; see :mod:`geosim.vector`)
or a pandas DataFrame / GeoPandas GeoDataFrame.  :func:`read_points` checks every
cell, reprojects geographic coordinates to metres (see :mod:`geosim.crs`) and
merges coincident samples, recording what it did in ``PointSet.notes``.
"""
from __future__ import annotations

import os
import logging
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np
from pyproj import CRS

from .crs import CrsLike, parse_crs, to_projected
from .errors import InputError
from .tables import read_table
from .vector import GEOMETRY_COLUMNS

log = logging.getLogger(__name__)


@dataclass(frozen=True, repr=False)
class PointSet:
    """Samples at points: coordinates in metres, values, and where they came from.

    Parameters
    ----------
    coords : (n, d) float64 ndarray
        ``(x, y[, z])`` = (east, north[, up]) in metres of ``crs``.
    values : (n, k) float64 ndarray
        One column per variable.  Composites may hold NaN where a variable was not
        assayed over the composite; :meth:`complete` drops those rows.
    names : tuple of str
        The ``k`` variable names.
    crs : pyproj.CRS or None
        CRS of ``coords``; None for a local grid in metres.
    hole_ids : (n,) str ndarray or None
        Hole or well of each sample.
    attributes : dict of str to (n,) ndarray
        Per-sample extras; composites carry ``length`` (sampled length, m),
        ``depth`` (mid-point depth along the hole, m), ``from`` and ``to``.
    source : tuple of str
        Input paths.
    notes : tuple of str
        What intake chose or changed, in order.

    Examples
    --------
    >>> import numpy, geosim
    >>> p = geosim.PointSet(numpy.array([[0.0, 0.0], [10.0, 0.0]]), numpy.array([[1.0], [3.0]]), ("cu",))
    >>> len(p), p.ndim, p.column().tolist()
    (2, 2, [1.0, 3.0])
    """

    coords: np.ndarray
    values: np.ndarray
    names: tuple[str, ...]
    crs: CRS | None = None
    hole_ids: np.ndarray | None = None
    attributes: dict = field(default_factory=dict)
    source: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    def __post_init__(self):
        coords = np.array(self.coords, dtype=np.float64, ndmin=2)
        if coords.ndim != 2 or coords.shape[1] not in (2, 3):
            raise ValueError(f"coords must be (n, 2) or (n, 3), got shape {np.shape(self.coords)}")
        n = coords.shape[0]
        values = np.asarray(self.values, dtype=np.float64)
        if values.ndim == 1:
            values = values[:, None]
        if values.ndim != 2 or values.shape[0] != n:
            raise ValueError(f"values must be (n, k) with n = {n}, got shape {np.shape(self.values)}")
        names = (self.names,) if isinstance(self.names, str) else tuple(str(s) for s in self.names)
        if len(names) != values.shape[1] or len(set(names)) != len(names):
            raise ValueError(f"need {values.shape[1]} distinct value names, got {names}")
        if not np.isfinite(coords).all():
            raise ValueError("coords must be finite")
        hole_ids = None
        if self.hole_ids is not None:
            hole_ids = np.asarray(self.hole_ids).astype(str)
            if hole_ids.shape != (n,):
                raise ValueError(f"hole_ids must be ({n},), got shape {hole_ids.shape}")
        attributes = {}
        for key, arr in dict(self.attributes).items():
            arr = np.asarray(arr)
            if arr.shape != (n,):
                raise ValueError(f"attribute {key!r} must be ({n},), got shape {arr.shape}")
            attributes[str(key)] = arr
        object.__setattr__(self, "coords", coords)
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "names", names)
        object.__setattr__(self, "hole_ids", hole_ids)
        object.__setattr__(self, "attributes", attributes)
        object.__setattr__(self, "source", tuple(str(s) for s in self.source))
        object.__setattr__(self, "notes", tuple(str(s) for s in self.notes))

    def __len__(self) -> int:
        return self.coords.shape[0]

    def __repr__(self) -> str:
        crs = "None" if self.crs is None else self.crs.to_string()
        holes = "" if self.hole_ids is None else f", holes={len(np.unique(self.hole_ids))}"
        return f"PointSet(n={len(self)}, d={self.ndim}, names={self.names}, crs={crs}{holes})"

    @property
    def ndim(self) -> int:
        """2 or 3: the number of coordinate columns."""
        return self.coords.shape[1]

    def column(self, name: str | None = None) -> np.ndarray:
        """One value column as an (n,) array; ``name`` may be omitted when there is only one."""
        if name is None:
            if len(self.names) != 1:
                raise KeyError(f"this point set has {len(self.names)} value columns "
                               f"({', '.join(self.names)}); name one")
            return self.values[:, 0]
        try:
            return self.values[:, self.names.index(name)]
        except ValueError:
            raise KeyError(f"no value column {name!r}; columns: {', '.join(self.names)}") from None

    def take(self, index) -> PointSet:
        """The samples selected by an integer index or a boolean mask, with everything else kept."""
        idx = np.asarray(index)
        return replace(self, coords=self.coords[idx], values=self.values[idx],
                       hole_ids=None if self.hole_ids is None else self.hole_ids[idx],
                       attributes={k: v[idx] for k, v in self.attributes.items()})

    def complete(self, name: str | None = None) -> PointSet:
        """The samples where ``name`` (or, if None, every value column) is not NaN."""
        vals = self.values if name is None else self.column(name)[:, None]
        keep = np.isfinite(vals).all(axis=1)
        return self if keep.all() else self.take(keep)

    def with_note(self, note: str) -> PointSet:
        """A copy with one more note."""
        return replace(self, notes=self.notes + (note,))


def read_points(path, *, x: str | None = None, y: str | None = None, z: str | None = None,
                values: str | Sequence[str], hole: str | None = None, crs: CrsLike | None = None,
                target_crs: CrsLike | None = None, duplicates: str = "average",
                tolerance: float = 1e-3, layer: str | int | None = None) -> PointSet:
    """Read point samples from a CSV file, a GIS vector file or a data frame.

    Parameters
    ----------
    path : path-like, pandas.DataFrame or geopandas.GeoDataFrame
        A CSV file (comma, semicolon or tab separated; header in the first row), a
        vector file (``.gpkg``, ``.shp``, ``.geojson``, ``.fgb``, ``.parquet``;
        :mod:`geosim.vector`) or a data frame with the same columns.
    x, y : str, optional
        Column names of the coordinates; for a geographic CRS, ``x`` is the
        longitude and ``y`` the latitude column.  Leave them out to take the
        coordinates of a point layer's geometry (``geometry_x``, ``geometry_y``).
    z : str, optional
        Column of elevations (metres, up positive); ``"geometry_z"`` for the Z of
        3-D points.
    values : str or sequence of str
        Value column(s).  Every cell must hold a finite number.
    hole : str, optional
        Column of hole or well identifiers.
    crs : CRS-like or None
        CRS of the coordinates (EPSG code, WKT or PROJ text).  None takes the CRS
        of a vector file or GeoDataFrame that declares one, and otherwise declares
        a local grid already in metres.  A CRS that contradicts the file's is an
        error.
    target_crs : CRS-like, optional
        Projected CRS in metres to work in.  Geographic input without it goes to
        the UTM zone of the data centroid (reported in ``notes`` and on the ``geosim`` logger).
    duplicates : {"average", "error"}
        What to do with samples at the same position (within ``tolerance`` metres
        after reprojection): average them (with a note, also logged)
        or raise :class:`InputError` naming the rows.  Coincident samples make the
        kriging covariance singular, so they are never kept as they are.
    tolerance : float
        Distance in metres below which two samples count as coincident.
    layer : str or int, optional
        Layer of a vector file with several.

    Returns
    -------
    PointSet
        With the attribute ``row``: the file row of each sample (of the first one, for
        merged samples), so later checks can point back into the file.  Rows of a
        vector file count its features from 1; rows of a data frame count from 0.

    Raises
    ------
    InputError
        Naming file, row and column: missing or misspelt columns (with suggestions),
        empty or non-numeric cells, ``nan``/``inf`` written in a cell, unreadable
        CRS text, coordinates that are not degrees under a geographic CRS.
    """
    if duplicates not in ("average", "error"):
        raise ValueError(f"duplicates must be 'average' or 'error', got {duplicates!r}")
    names = (values,) if isinstance(values, str) else tuple(values)
    if not names:
        raise ValueError("name at least one value column")
    table, crs = _point_table(path, crs, layer, x is None and y is None)
    x, y = (GEOMETRY_COLUMNS[0], GEOMETRY_COLUMNS[1]) if x is None and y is None else (x, y)
    if x is None or y is None:
        raise InputError("name both coordinate columns or neither", file=table.path,
                         field="y" if y is None else "x",
                         fix="give x and y, or leave both out to use a point layer's geometry")
    cols = [table.numbers(x, role="x coordinate"), table.numbers(y, role="y coordinate")]
    if z is not None:
        cols.append(table.numbers(z, role="z coordinate"))
    vals = np.column_stack([table.numbers(v, role="value") for v in names])
    ids = None if hole is None else table.text(hole, role="hole id")
    coords, out_crs, note = to_projected(np.column_stack(cols), crs, target_crs, file=table.path,
                                         rows=table.lines)
    notes = [] if note is None else [note]
    points = PointSet(coords, vals, tuple(table.header[table.index(v)] for v in names), out_crs, ids,
                      {"row": np.array(table.lines, dtype=np.int64)}, (table.path,), tuple(notes))
    return merge_coincident(points, tolerance=tolerance, mode=duplicates)


def _point_table(source, crs: CrsLike | None, layer, from_geometry: bool):
    """The table of a CSV file, vector file or data frame, and the CRS to read it in."""
    from .vector import is_frame, is_vector_path, sample_table
    if not (is_frame(source) or is_vector_path(source)):
        if from_geometry:
            raise InputError("a CSV file has no geometry to take coordinates from", file=os.fspath(source),
                             field="x", fix="name the x and y columns")
        return read_table(source, what="point table"), crs
    table, own = sample_table(source, layer=layer)
    if from_geometry and GEOMETRY_COLUMNS[0] not in table.header:
        raise InputError("the layer has no point geometry to take coordinates from", file=table.path, field="x",
                         fix=f"name the x and y columns (columns: {', '.join(table.header)})")
    if crs is None or own is None:
        return table, own if crs is None else crs
    given = parse_crs(crs, field="crs")
    if not given.equals(own, ignore_axis_order=True):
        raise InputError(f"the CRS given ({given.to_string()}) differs from the file's ({own.to_string()})",
                         file=table.path, field="crs",
                         fix="leave the CRS out to use the file's, or correct the file's CRS in a GIS")
    return table, own


def merge_coincident(points: PointSet, *, tolerance: float = 1e-3, mode: str = "average") -> PointSet:
    """Merge samples closer than ``tolerance`` metres by averaging them.

    Groups are the connected components of the "closer than tolerance" relation.
    Values and floating-point attributes are averaged (NaN ignored); the first
    sample's hole id and other attributes (such as its file ``row``) are kept.  A
    note (in ``notes`` and on the ``geosim`` logger) reports how many samples were
    merged.  With ``mode="error"`` the first coincident pair raises :class:`InputError` naming
    both file rows (the ``row`` attribute; sample numbers when it is absent).
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components
    from scipy.spatial import cKDTree

    n = len(points)
    pairs = cKDTree(points.coords).query_pairs(r=tolerance, output_type="ndarray") if n > 1 \
        else np.empty((0, 2), dtype=int)
    if len(pairs) == 0:
        return points
    lines = points.attributes.get("row")
    rows = np.arange(1, n + 1) if lines is None else lines
    file = points.source[0] if len(points.source) == 1 else None
    where = "rows" if lines is not None else "samples"
    if mode == "error":
        i, j = sorted(pairs[0])
        raise InputError(f"{where} {rows[i]} and {rows[j]} are at the same position "
                         f"(within {tolerance} m)", file=file, row=int(rows[j]) if lines is not None else None,
                         fix="remove or average one of them, or read with duplicates='average'")
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    n_groups, label = connected_components(graph, directed=False)
    # keep groups in order of their first sample so output order follows the file
    first = np.full(n_groups, n)
    np.minimum.at(first, label, np.arange(n))
    order = np.argsort(first, kind="stable")
    relabel = np.empty(n_groups, dtype=int)
    relabel[order] = np.arange(n_groups)
    label = relabel[label]
    counts = np.bincount(label, minlength=n_groups)

    def average(a: np.ndarray) -> np.ndarray:
        a = a.reshape(n, -1)
        ok = np.isfinite(a)
        sums = np.zeros((n_groups, a.shape[1]))
        hits = np.zeros((n_groups, a.shape[1]))
        np.add.at(sums, label, np.where(ok, a, 0.0))
        np.add.at(hits, label, ok)
        with np.errstate(invalid="ignore", divide="ignore"):
            return sums / hits

    keep = np.sort(first)
    # measured quantities are averaged; labels and integer bookkeeping (file rows) keep the first
    attributes = {k: (average(v)[:, 0] if np.issubdtype(v.dtype, np.floating) else v[keep])
                  for k, v in points.attributes.items()}
    merged = int(n - n_groups)
    example = [int(r) for r in rows[label == label[pairs[0][0]]][:3]]
    if points.hole_ids is not None:
        holes = sorted(set(points.hole_ids[label == label[pairs[0][0]]].tolist()))
        where = f"holes {', '.join(holes)}, " + where
    note = (f"merged {merged + int((counts > 1).sum())} coincident samples into "
            f"{int((counts > 1).sum())} (averaged; e.g. {where} {', '.join(map(str, example))})")
    log.warning("%s%s", note, f" in {file}" if file else "")
    return replace(points, coords=average(points.coords), values=average(points.values),
                   hole_ids=None if points.hole_ids is None else points.hole_ids[keep],
                   attributes=attributes, notes=points.notes + (note,))


def check_positive(points: PointSet, name: str | None = None, *, why: str = "a log transform") -> None:
    """Raise :class:`InputError` at the first sample whose value ``name`` is not > 0.

    The error names the file and row (from the ``row`` attribute that :func:`read_points`
    sets) or, for drillhole composites, the hole and depth.  NaN values are ignored.
    """
    v = points.column(name)
    bad = v <= 0
    if not bad.any():
        return
    i = int(np.argmax(bad))
    field_name = name if name is not None else points.names[0]
    file = points.source[0] if len(points.source) == 1 else None
    row = int(points.attributes["row"][i]) if "row" in points.attributes else None
    where = ""
    if row is None and points.hole_ids is not None:
        depth = points.attributes.get("depth")
        where = f" (hole {points.hole_ids[i]}" + (f", depth {depth[i]:g} m)" if depth is not None else ")")
        file = None
    raise InputError(f"value {v[i]:g}{where} is not positive, which {why} needs", file=file, row=row,
                     field=field_name, fix="correct or remove non-positive values (a value below detection is "
                                           "usually entered as half the detection limit), or choose no log")
