"""Experimental semivariograms: omnidirectional, directional, down-hole, and maps.

Definitions used throughout (stated once here):

* A pair ``(i, j)`` has lag vector ``h = x_j - x_i`` and distance ``|h|``;
  coincident samples (``|h| < 1 nm``) are skipped.
* Lag bin ``b`` (``b = 0 .. nlags - 1``) is centred at ``b * lag`` and takes
  distances in ``[centre - lag_half_width, centre + lag_half_width)``; the default
  ``lag_half_width = lag / 2`` gives contiguous bins, and bin 0 holds only the pairs
  closer than half a lag.  Centres on multiples of the lag keep regularly spaced
  data (grids, composites) in the middle of their bins, away from the edges.  A
  larger half-width makes bins overlap (a pair then counts in each bin it falls
  in).
* A :class:`Direction` is an axis (``azimuth`` clockwise from north, ``dip``
  positive downward: the convention of :mod:`geosim.variogram.anisotropy`) with
  its own frame ``u`` (the axis), ``v`` (horizontal, 90 degrees clockwise) and
  ``w`` (the third axis).  A pair belongs to the direction when, with
  ``a = |h.u|``, ``b = |h.v|``, ``c = |h.w|``: ``b <= a tan(horizontal_half_angle)``,
  ``c <= a tan(vertical_half_angle)``, ``b <= horizontal_max_offset`` and
  ``c <= vertical_max_offset``: an angular half-window and a largest offset from
  the direction line in each of the direction's two planes.  Directions are
  axes: ``h`` and ``-h`` are the same pair.  In 3-D a near-horizontal direction
  (``|dip| < 45``) gets a thin vertical window by default
  (``vertical_half_angle`` :data:`FLAT_VERTICAL_HALF_ANGLE`), so its pairs stay
  near the horizontal and the short vertical ranges of layered deposits do not
  leak into the horizontal variograms; a steep direction gets a round cone.
* The classical estimator is ``gamma = sum (z_j - z_i)^2 / (2 N)``
  (Matheron 1962).  The robust estimator of Cressie and Hawkins (1980) is
  ``gamma = [mean |z_j - z_i|^(1/2)]^4 / (2 (0.457 + 0.494 / N))``
  (Cressie 1993, Statistics for Spatial Data, eq. 2.4.12; formula and equation
  number from memory, the code is checked against a brute-force loop of it).

Cost and memory: every pair with an x-gap up to the largest lag is visited once
in compiled code, on up to four threads (chunks of rows; the kernel releases
the GIL); memory is ``O(n + chunks x directions x lags)`` (a sorted copy of the
data and small per-chunk accumulators), never ``O(n^2)``.  10,000 samples take
about a second (``tests/benchmarks/bench_variogram.py``).
"""
from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from ..retired import accepts_retired
from .anisotropy import axes

ESTIMATORS = ("matheron", "cressie-hawkins")
_WORKERS = min(4, os.cpu_count() or 1)  # threads for the pair loop
_CHUNK = 512  # rows of the outer pair loop per task (progress is reported between tasks)
# default vertical half-window of a near-horizontal direction (degrees; see the module docstring)
FLAT_VERTICAL_HALF_ANGLE = 5.0


@accepts_retired("Direction")
@dataclass(frozen=True)
class Direction:
    """A direction for directional variograms.

    Parameters
    ----------
    azimuth : float
        Degrees clockwise from north.
    dip : float
        Degrees below the horizontal (3-D data only).
    horizontal_half_angle : float
        Half-angle of the window in the direction's horizontal plane, degrees;
        90 or more switches the test off.
    vertical_half_angle : float, optional
        Half-angle of the window in the direction's vertical plane, degrees; 90
        or more switches the test off.  Default: :data:`FLAT_VERTICAL_HALF_ANGLE`
        (or ``horizontal_half_angle`` if smaller) for a near-horizontal direction
        (``|dip| < 45``), so its pairs stay near the horizontal in 3-D; the same
        as ``horizontal_half_angle`` for a steep one.  2-D data have no vertical
        offsets, so it does not matter there.
    horizontal_max_offset, vertical_max_offset : float
        Largest offset (metres) of a pair from the direction line in the
        direction's horizontal and vertical planes; ``inf`` (default) for none.

    Examples
    --------
    >>> from geosim.variogram import Direction
    >>> d = Direction(45.0, horizontal_half_angle=22.5, horizontal_max_offset=50.0)
    >>> d.azimuth, d.vertical_half_angle, Direction(0.0, 90.0).vertical_half_angle
    (45.0, 5.0, 22.5)
    """

    azimuth: float
    dip: float = 0.0
    horizontal_half_angle: float = 22.5
    vertical_half_angle: float | None = None
    horizontal_max_offset: float = np.inf
    vertical_max_offset: float = np.inf

    def __post_init__(self):
        if self.vertical_half_angle is None:
            flat = abs(float(self.dip)) < 45.0
            half = float(self.horizontal_half_angle)
            object.__setattr__(self, "vertical_half_angle", min(half, FLAT_VERTICAL_HALF_ANGLE) if flat else half)
        for name in ("azimuth", "dip", "horizontal_half_angle", "vertical_half_angle", "horizontal_max_offset",
                     "vertical_max_offset"):
            v = float(getattr(self, name))
            if np.isnan(v) or (np.isinf(v) and not name.endswith("max_offset")):
                raise ValueError(f"direction {name} must be a finite number, got {v!r}")
            object.__setattr__(self, name, v)
        if not (0.0 < self.horizontal_half_angle and 0.0 < self.vertical_half_angle):
            raise ValueError("direction half-angles must be > 0 degrees")
        if not (self.horizontal_max_offset > 0 and self.vertical_max_offset > 0):
            raise ValueError("direction max offsets must be > 0 metres")

    def vector(self) -> np.ndarray:
        """Unit vector of the axis in (east, north, up)."""
        return axes(self.azimuth, self.dip)[0]

    def _row(self) -> np.ndarray:
        r = axes(self.azimuth, self.dip)
        tan_h = np.tan(np.radians(self.horizontal_half_angle)) if self.horizontal_half_angle < 90.0 else -1.0
        tan_v = np.tan(np.radians(self.vertical_half_angle)) if self.vertical_half_angle < 90.0 else -1.0
        return np.concatenate([[0.0], r.ravel(), [tan_h, tan_v, self.horizontal_max_offset,
                                                  self.vertical_max_offset]])

    def to_dict(self) -> dict:
        """The direction and its windows (JSON-safe: no limit is null)."""
        return {"azimuth": self.azimuth, "dip": self.dip, "horizontal_half_angle": self.horizontal_half_angle,
                "vertical_half_angle": self.vertical_half_angle,
                "horizontal_max_offset": _json_float(self.horizontal_max_offset),
                "vertical_max_offset": _json_float(self.vertical_max_offset)}


@dataclass(frozen=True, eq=False)  # holds arrays: compare fields explicitly
class ExperimentalVariogram:
    """One experimental semivariogram: per lag bin, the mean lag, gamma and pair count.

    Attributes
    ----------
    centres : ndarray
        Bin centres (metres).
    lags : ndarray
        Mean pair distance in each bin (metres); NaN for empty bins.
    gamma : ndarray
        Semivariance in each bin; NaN for empty bins.
    npairs : ndarray of int
        Pairs in each bin.
    lag, lag_half_width : float
        Lag spacing and half-width of a bin (metres).
    kind : str
        ``"omnidirectional"``, ``"directional"`` or ``"downhole"``.
    direction : Direction or None
        The direction (for down-hole variograms, the mean hole axis); None
        when omnidirectional.
    estimator : str
        ``"matheron"`` or ``"cressie-hawkins"``.
    variance : float
        Sample variance of the values used (ddof=1).
    extent : float
        Diagonal of the bounding box of the samples used (metres).
    dim : int
        2 or 3.
    nsamples : int
        Samples used (rows with a missing value are left out).
    """

    centres: np.ndarray
    lags: np.ndarray
    gamma: np.ndarray
    npairs: np.ndarray
    lag: float
    lag_half_width: float
    kind: str
    direction: Direction | None
    estimator: str
    variance: float
    extent: float
    dim: int
    nsamples: int
    name: str = field(default="")

    def __len__(self) -> int:
        return len(self.centres)

    @property
    def label(self) -> str:
        """Short text naming the direction, for legends and reports."""
        if self.name:
            return self.name
        if self.kind == "omnidirectional":
            return "omnidirectional"
        d = self.direction
        text = f"azimuth {d.azimuth:g}" + (f", dip {d.dip:g}" if self.dim == 3 else "")
        return ("down-hole (" + text + ")") if self.kind == "downhole" else text

    def valid(self, min_pairs: int = 1) -> np.ndarray:
        """Boolean mask of bins with at least ``min_pairs`` pairs."""
        return self.npairs >= max(int(min_pairs), 1)

    def to_dict(self) -> dict:
        """Plain lists and numbers (for JSON reports)."""
        d = self.direction
        return {
            "label": self.label, "kind": self.kind, "estimator": self.estimator,
            "lag": self.lag, "lag_half_width": self.lag_half_width,
            "direction": None if d is None else d.to_dict(),
            "centres": self.centres.tolist(),
            "lags": [_json_float(x) for x in self.lags],
            "gamma": [_json_float(x) for x in self.gamma],
            "npairs": self.npairs.tolist(),
            "variance": self.variance, "extent": self.extent, "nsamples": self.nsamples,
        }


@dataclass(frozen=True, eq=False)
class VariogramMap:
    """Semivariance over a square of 2-D lag vectors.

    ``gamma[row, col]`` is the semivariance for lags near
    ``(dx[col], dy[row])`` (east, north); row 0 is the most southern lag, so the
    array plots with ``origin="lower"``.  Cells with fewer than ``min_pairs``
    pairs are NaN.
    """

    dx: np.ndarray
    dy: np.ndarray
    gamma: np.ndarray
    npairs: np.ndarray
    cell: float
    estimator: str
    variance: float


@accepts_retired("experimental_variogram")
def experimental_variogram(coords, values, *, lag: float, nlags: int, lag_half_width: float | None = None,
                           direction: Direction | None = None, estimator: str = "matheron",
                           progress: Callable[[int, int, str], None] | None = None
                           ) -> ExperimentalVariogram:
    """Experimental semivariogram of ``values`` at ``coords``, one direction.

    Parameters
    ----------
    coords : array_like, shape (n, 2) or (n, 3)
        Projected coordinates in metres (east, north[, up]).
    values : array_like, shape (n,)
        Values; rows with NaN are left out, so a realization on a grid with
        NaN outside the domain can be passed as it is.
    lag, nlags : float, int
        Lag spacing (metres) and number of lag bins.
    lag_half_width : float, optional
        Half-width of a bin; default ``lag / 2``.
    direction : Direction, optional
        None (default) for omnidirectional.
    estimator : {"matheron", "cressie-hawkins"}
        Classical or robust estimator (see the module docstring).
    progress : callable, optional
        ``progress(done, total, what)``, called between chunks of the pair loop.

    Returns
    -------
    ExperimentalVariogram

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.variogram import experimental_variogram
    >>> x = np.arange(10.0)
    >>> xy = np.column_stack([x, np.zeros(10)])
    >>> ev = experimental_variogram(xy, x, lag=1.0, nlags=4)
    >>> ev.centres.tolist(), ev.npairs.tolist(), ev.gamma[1:].tolist()
    ([0.0, 1.0, 2.0, 3.0], [0, 9, 8, 7], [0.5, 2.0, 4.5])
    """
    return _compute(coords, values, lag, nlags, lag_half_width, [direction], estimator, None, progress)[0]


@accepts_retired("directional_variograms")
def directional_variograms(coords, values, directions: Sequence[Direction | None], *, lag: float,
                           nlags: int, lag_half_width: float | None = None, estimator: str = "matheron",
                           progress: Callable[[int, int, str], None] | None = None
                           ) -> list[ExperimentalVariogram]:
    """Experimental semivariograms in several directions, from one pass over the pairs.

    Parameters are those of :func:`experimental_variogram`; ``directions`` is a
    sequence of :class:`Direction` (None in it means omnidirectional).  Returns
    one :class:`ExperimentalVariogram` per direction, in order.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.variogram import Direction, directional_variograms
    >>> rng = np.random.default_rng(0)
    >>> xy, z = rng.uniform(0, 100, (200, 2)), rng.normal(size=200)
    >>> evs = directional_variograms(xy, z, [Direction(0.0), Direction(90.0)], lag=10.0, nlags=5)
    >>> [ev.label for ev in evs]
    ['azimuth 0', 'azimuth 90']
    """
    if len(directions) == 0:
        raise ValueError("give at least one direction")
    return _compute(coords, values, lag, nlags, lag_half_width, list(directions), estimator, None, progress)


@accepts_retired("downhole_variogram")
def downhole_variogram(coords, values, hole_ids, *, lag: float, nlags: int,
                       lag_half_width: float | None = None,
                       estimator: str = "matheron",
                       progress: Callable[[int, int, str], None] | None = None) -> ExperimentalVariogram:
    """Semivariogram of pairs within the same drill hole (the usual way to read the nugget).

    Pairs from different holes are never combined; the lag is the straight
    distance between the two samples (their separation along the hole for
    straight holes).  The result's ``direction`` is the mean axis of the holes
    (the principal axis of their sample positions, weighted by samples).

    Parameters
    ----------
    hole_ids : array_like, shape (n,)
        Hole identifier of each sample (any hashable values).

    Other parameters are those of :func:`experimental_variogram`.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.variogram import downhole_variogram
    >>> depth = np.tile(np.arange(5.0), 2)
    >>> xyz = np.column_stack([np.repeat([0.0, 500.0], 5), np.zeros(10), -depth])
    >>> ev = downhole_variogram(xyz, depth, np.repeat(["A", "B"], 5), lag=1.0, nlags=3)
    >>> ev.npairs.tolist(), round(ev.direction.dip, 6)
    ([0, 8, 6], 90.0)
    """
    hole_ids = np.asarray(hole_ids)
    if hole_ids.ndim != 1:
        raise InputError("hole ids must be a one-dimensional array", field="hole_ids",
                         fix="pass one identifier per sample")
    return _compute(coords, values, lag, nlags, lag_half_width, [None], estimator, hole_ids, progress)[0]


@accepts_retired("variogram_map")
def variogram_map(coords, values, *, cell: float, ncells: int, min_pairs: int = 5,
                  vertical_max_offset: float = np.inf, estimator: str = "matheron",
                  progress: Callable[[int, int, str], None] | None = None) -> VariogramMap:
    """Variogram map: semivariance on a square grid of horizontal lag vectors.

    Parameters
    ----------
    cell : float
        Lag cell size (metres); cell ``(0, 0)`` is centred on the zero lag.
    ncells : int
        Cells on each side of the zero lag: the map is ``2 ncells + 1`` square.
    min_pairs : int
        Cells with fewer pairs are NaN.
    vertical_max_offset : float
        For 3-D data, pairs more than this apart vertically are left out.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.variogram import variogram_map
    >>> rng = np.random.default_rng(1)
    >>> xy = rng.uniform(0, 100, (300, 2))
    >>> vm = variogram_map(xy, xy[:, 0] / 10, cell=10.0, ncells=4)
    >>> vm.gamma.shape
    (9, 9)
    """
    from .pairs import accumulate_map

    xyz, z, _, _ = _prepare(coords, values, estimator)
    if not (np.isfinite(cell) and cell > 0) or int(ncells) < 1:
        raise ValueError(f"cell must be > 0 and ncells >= 1, got cell={cell!r}, ncells={ncells!r}")
    ncells = int(ncells)
    order = np.argsort(xyz[:, 0], kind="stable")
    xyz, z = np.ascontiguousarray(xyz[order]), np.ascontiguousarray(z[order])
    size = 2 * ncells + 1
    robust = estimator == "cressie-hawkins"

    def task(i0, i1):
        acc = np.zeros((2, size, size))
        accumulate_map(xyz, z, i0, i1, float(cell), ncells, float(vertical_max_offset), robust, acc[0], acc[1])
        return acc

    out_n, out_g = _run_chunks(len(z), task, (2, size, size), progress, "variogram map pairs")
    gamma = _finish(out_n, out_g, estimator)
    gamma[out_n < max(int(min_pairs), 1)] = np.nan
    centres = (np.arange(size) - ncells) * float(cell)
    return VariogramMap(centres, centres.copy(), gamma, out_n.astype(np.int64), float(cell),
                        estimator, _variance(z))


# internals --------------------------------------------------------------------

def _prepare(coords, values, estimator):
    if estimator not in ESTIMATORS:
        raise ValueError(f"estimator must be one of {ESTIMATORS}, got {estimator!r}")
    c = np.asarray(coords, dtype=float)
    if c.ndim != 2 or c.shape[1] not in (2, 3):
        raise InputError(f"coordinates must have shape (n, 2) or (n, 3), got {c.shape}",
                         field="coords", fix="pass projected x, y[, z] columns in metres")
    v = np.asarray(values, dtype=float)
    if v.ndim == 2 and v.shape[1] == 1:
        v = v[:, 0]
    if v.shape != (c.shape[0],):
        raise InputError(f"values must have shape ({c.shape[0]},), got {v.shape}", field="values",
                         fix="pass one value per coordinate row")
    bad = ~np.all(np.isfinite(c), axis=1)
    if bad.any():
        raise InputError("coordinates must be finite numbers", row=int(np.argmax(bad)), field="coords",
                         fix="remove or correct the row")
    keep = np.isfinite(v)
    xyz = np.zeros((int(keep.sum()), 3))
    xyz[:, :c.shape[1]] = c[keep]
    return xyz, v[keep], c.shape[1], keep


def _compute(coords, values, lag, nlags, lag_half_width, directions, estimator, hole_ids, progress):
    from .pairs import NUMPY_PAIRS_MAX, accumulate_directional, accumulate_directional_numpy

    xyz, z, dim, keep = _prepare(coords, values, estimator)
    if hole_ids is not None and hole_ids.shape != keep.shape:
        raise InputError(f"hole ids must have shape {keep.shape}, got {hole_ids.shape}", field="hole_ids",
                         fix="pass one identifier per sample")
    lag = float(lag)
    nlags = int(nlags)
    if not (np.isfinite(lag) and lag > 0) or nlags < 1:
        raise ValueError(f"lag must be > 0 and nlags >= 1, got lag={lag!r}, nlags={nlags!r}")
    half = lag / 2 if lag_half_width is None else float(lag_half_width)
    if not (np.isfinite(half) and half > 0):
        raise ValueError(f"lag_half_width must be > 0, got {lag_half_width!r}")
    for d in directions:
        if d is not None and dim == 2 and d.dip != 0.0:
            raise ValueError("2-D data: directions must have dip 0")
    rows = [np.array([1.0] + [0.0] * 9 + [-1.0, -1.0, np.inf, np.inf]) if d is None else d._row()
            for d in directions]
    dirs = np.ascontiguousarray(np.vstack(rows))
    if dim == 2:  # the vertical frame component of 2-D lags is 0; keep the dip test out of the way
        dirs[:, 11] = -1.0

    n = len(z)
    if hole_ids is None:
        order = np.argsort(xyz[:, 0], kind="stable")
        group_end = np.full(n, n, dtype=np.int64)
    else:
        codes = np.unique(hole_ids[keep], return_inverse=True)[1]
        order = np.lexsort((xyz[:, 0], codes))
        codes = codes[order]
        ends = np.flatnonzero(np.diff(codes)) + 1
        group_end = np.repeat(np.append(ends, n), np.diff(np.concatenate([[0], ends, [n]]))).astype(np.int64)
        hole_axis = _mean_hole_axis(xyz[order], codes)
    xyz = np.ascontiguousarray(xyz[order])
    z = np.ascontiguousarray(z[order])
    dmax = (nlags - 1) * lag + half
    k = len(directions)
    robust = estimator == "cressie-hawkins"

    # small data sets take numpy's pair loop (the same sums, bit for bit): no compiling on a first run
    accumulate = accumulate_directional if n * (n - 1) // 2 > NUMPY_PAIRS_MAX else accumulate_directional_numpy

    def task(i0, i1):
        acc = np.zeros((3, k, nlags))
        accumulate(xyz, z, group_end, i0, i1, dirs, lag, half, nlags, dmax, robust, acc[0], acc[1], acc[2])
        return acc

    out_n, out_d, out_g = _run_chunks(n, task, (3, k, nlags), progress, "variogram pairs")

    centres = np.arange(nlags) * lag
    extent = float(np.linalg.norm(np.ptp(xyz[:, :dim], axis=0))) if n else 0.0
    var = _variance(z)
    out = []
    for j, d in enumerate(directions):
        with np.errstate(invalid="ignore", divide="ignore"):
            mean_lag = np.where(out_n[j] > 0, out_d[j] / np.maximum(out_n[j], 1), np.nan)
        gamma = _finish(out_n[j], out_g[j], estimator)
        if hole_ids is not None:
            kind, d = "downhole", hole_axis
        else:
            kind = "omnidirectional" if d is None else "directional"
        out.append(ExperimentalVariogram(centres.copy(), mean_lag, gamma, out_n[j].astype(np.int64), lag,
                                         half, kind, d, estimator, var, extent, dim, n))
    return out


def _run_chunks(n, task, shape, progress, what):
    """Run ``task(i0, i1)`` over row chunks on a few threads (the kernels release the GIL).

    Each chunk fills its own small accumulator and the accumulators are added in
    chunk order, so the result does not depend on thread timing.
    """
    bounds = [(i0, min(n, i0 + _CHUNK)) for i0 in range(0, n, _CHUNK)]
    total = np.zeros(shape)
    if not bounds:
        return total
    task(0, 0)  # compile (or load from cache) before threads start
    workers = min(_WORKERS, len(bounds))
    with ThreadPoolExecutor(max_workers=workers) as pool:
        for (_, i1), acc in zip(bounds, pool.map(lambda b: task(*b), bounds)):
            total += acc
            if progress is not None:
                progress(i1, n, what)
    return total


def _finish(count, acc, estimator):
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = acc / count
        if estimator == "cressie-hawkins":
            gamma = mean**4 / (2.0 * (0.457 + 0.494 / count))
        else:
            gamma = mean
    return np.where(count > 0, gamma, np.nan)


def _variance(z) -> float:
    return float(np.var(z, ddof=1)) if len(z) > 1 else float("nan")


def _mean_hole_axis(xyz, codes) -> Direction:
    """Principal axis of the holes' sample positions, as a Direction (dip >= 0)."""
    scatter = np.zeros((3, 3))
    for g in np.unique(codes):
        p = xyz[codes == g]
        if len(p) < 2:
            continue
        p = p - p.mean(axis=0)
        _, _, vt = np.linalg.svd(p, full_matrices=False)
        scatter += len(p) * np.outer(vt[0], vt[0])
    if not scatter.any():
        return Direction(0.0, 90.0)
    e = np.linalg.eigh(scatter)[1][:, -1]
    if e[2] > 0:  # point the axis downward: dip is positive below the horizontal
        e = -e
    dip = float(np.degrees(np.arcsin(np.clip(-e[2], -1.0, 1.0))))
    az = float(np.degrees(np.arctan2(e[0], e[1])) % 360.0) if dip < 89.999 else 0.0
    return Direction(round(az, 9), round(dip, 9))


def _json_float(x):
    x = float(x)
    return x if np.isfinite(x) else None
