"""Neighbourhood definition and data search for kriging and simulation.

The search ellipsoid (ellipse in 2-D) is turned into the unit ball by the
anisotropy matrix of :mod:`geosim.variogram.anisotropy` built from the search
radii, so a plain k-d tree (scipy ``cKDTree``) on transformed coordinates finds
the nearest samples in the anisotropic sense.  The tree returns candidates for
many targets at once, in blocks of bounded memory; the compiled
:func:`select_neighbours` then applies the exclusions and the per-sector and
per-drillhole limits for one target, and is called from inside the kriging
kernel so that selection, build, factor and solve run in one compiled loop.

Sectors (quadrants or octants) are taken in the ellipsoid's own frame: a
quadrant is a sign pattern of the lag along the major and minor axes, an octant
adds the sign along the third axis.
"""
from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numba import njit

# entries (targets x candidates) held at once per block of the candidate query
_BLOCK_ENTRIES = 1 << 21
# a sample lying exactly on the search ellipsoid counts as inside
_RADIUS_SLACK = 1e-9
# sector settings by name -> number of parts
SECTORS = {"off": 0, "quadrants": 4, "octants": 8}


@dataclass(frozen=True, repr=False)
class Neighbourhood:
    """Which samples (and previously simulated nodes) enter a local system.

    Parameters
    ----------
    max_samples : int
        Most data samples used at one node.
    min_samples : int
        Fewest data samples wanted in a kriging system.  A node whose search
        ellipsoid holds fewer is counted (``KrigingResult.n_short``) and, with
        ``widen``, takes the nearest ``min_samples`` samples in the ellipsoid's
        metric instead (the ellipsoid grown, same shape, until it holds them).
        Without ``widen``, ordinary kriging leaves such a node without an
        estimate, and simple kriging estimates it from the samples found and the
        known mean (with no sample at all: the mean, with the full sill as
        variance).  Simulation does not use it.
    ranges : tuple of float or None
        Search ellipsoid radii ``(major, minor, vertical)`` in metres. None takes
        the ranges of the model's longest structure.
    azimuth, dip, rake : float or None
        Orientation of the search ellipsoid (degrees, the convention of
        :mod:`geosim.variogram.anisotropy`). None takes the model's.
    sectors : {"off", "quadrants", "octants"} or {0, 4, 8}
        Split the search around the node into quadrants (sign patterns along the
        ellipsoid's major and minor axes) or octants (and along its third axis),
        or not at all.  Stored as the number of parts (0, 4 or 8).
    max_per_sector : int or None
        Most samples taken from one sector.  With ``sectors`` set and this left
        None, ``ceil(max_samples / sectors)`` is used, so the samples spread
        evenly around the node.
    max_per_hole : int or None
        Most samples taken from one drillhole (needs hole ids).
    max_nodes : int
        Most previously simulated nodes used at one node (simulation only).
    widen : bool
        Grow the search of a node with fewer than ``min_samples`` samples inside
        until it holds ``min_samples`` (kriging and cross-validation; default True,
        so the default search suits any data spacing).

    Examples
    --------
    >>> import geosim.search
    >>> nb = geosim.search.Neighbourhood(max_samples=24, min_samples=4, sectors=4)
    >>> nb.sector_limit
    6
    """

    max_samples: int = 16
    min_samples: int = 1
    ranges: tuple[float, ...] | None = None
    azimuth: float | None = None
    dip: float | None = None
    rake: float | None = None
    sectors: int | str = 0
    max_per_sector: int | None = None
    max_per_hole: int | None = None
    max_nodes: int = 16
    widen: bool = True

    def __post_init__(self):
        if isinstance(self.sectors, str):
            if self.sectors not in SECTORS:
                raise ValueError(f"sectors must be 'off', 'quadrants' or 'octants', got {self.sectors!r}")
            object.__setattr__(self, "sectors", SECTORS[self.sectors])
        if self.max_samples < 1 or self.min_samples < 0 or self.min_samples > self.max_samples:
            raise ValueError(f"need 0 <= min_samples <= max_samples and max_samples >= 1, got "
                             f"{self.min_samples} and {self.max_samples}")
        if self.sectors not in (0, 4, 8):
            raise ValueError(f"sectors must be 'off', 'quadrants' or 'octants' (0, 4 or 8), got {self.sectors}")
        if self.max_nodes < 0:
            raise ValueError(f"max_nodes must be >= 0, got {self.max_nodes}")
        for name in ("max_per_sector", "max_per_hole"):
            value = getattr(self, name)
            if value is not None and value < 1:
                raise ValueError(f"{name} must be None or >= 1, got {value}")

    def __repr__(self) -> str:
        """The settings that differ from the defaults, in plain numbers.

        Examples
        --------
        >>> import geosim.search
        >>> geosim.search.Neighbourhood(max_samples=24, ranges=(300.0, 120.0))
        Neighbourhood(max_samples=24, ranges=(300, 120))
        """
        import dataclasses
        parts = []
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            if value == f.default:
                continue
            if isinstance(value, tuple):
                value = "(" + ", ".join(f"{float(v):g}" for v in value) + ")"
            elif isinstance(value, float):
                value = f"{value:g}"
            else:
                value = repr(value)
            parts.append(f"{f.name}={value}")
        return f"Neighbourhood({', '.join(parts)})"

    @property
    def sector_limit(self) -> int:
        """Most samples per sector (0 when sectors are off)."""
        if self.sectors == 0:
            return 0
        if self.max_per_sector is not None:
            return int(self.max_per_sector)
        return -(-self.max_samples // self.sectors)

    @property
    def hole_limit(self) -> int:
        """Most samples per drillhole (0 when unlimited)."""
        return 0 if self.max_per_hole is None else int(self.max_per_hole)


def search_ellipsoid(neighbourhood: Neighbourhood, model=None):
    """The search ellipsoid as an :class:`~geosim.variogram.Anisotropy`.

    Ranges and angles left None in ``neighbourhood`` are taken from the model's
    longest non-nugget structure (the one with the largest major range).

    Examples
    --------
    >>> import geosim
    >>> from geosim.search import Neighbourhood, search_ellipsoid
    >>> m = geosim.Spherical(1.0, geosim.Anisotropy((300.0, 100.0, 50.0), azimuth=30.0))
    >>> search_ellipsoid(Neighbourhood(), m + geosim.Nugget(0.1)).ranges
    (300.0, 100.0, 50.0)
    >>> search_ellipsoid(Neighbourhood(ranges=(80.0, 40.0)), m).azimuth
    30.0
    """
    from .variogram import Anisotropy, Model, Structure

    ref = None
    if model is not None:
        structures = model.structures if isinstance(model, Model) else (model,) if isinstance(
            model, Structure) else tuple(model)
        ranged = [s for s in structures if s.kind != "nugget"]
        if ranged:
            ref = max(ranged, key=lambda s: max(s.anisotropy.ranges)).anisotropy
    if ref is None and (neighbourhood.ranges is None):
        raise ValueError("the search ellipsoid needs ranges: the model has no structure with a range "
                         "(pure nugget or no model); set Neighbourhood(ranges=...)")

    def pick(value, name):
        if value is not None:
            return value
        return 0.0 if ref is None else getattr(ref, name)

    ranges = neighbourhood.ranges if neighbourhood.ranges is not None else ref.ranges
    return Anisotropy(tuple(ranges), float(pick(neighbourhood.azimuth, "azimuth")),
                      float(pick(neighbourhood.dip, "dip")), float(pick(neighbourhood.rake, "rake")))


def as_xyz(coords, name: str = "coordinates") -> np.ndarray:
    """Coordinates ``(n, 2)`` or ``(n, 3)`` as a C-ordered ``(n, 3)`` float array (z = 0 in 2-D)."""
    c = np.asarray(coords, dtype=np.float64)
    if c.ndim == 1 and c.size in (2, 3):
        c = c[None, :]
    if c.ndim != 2 or c.shape[1] not in (2, 3):
        raise ValueError(f"{name} must have shape (n, 2) or (n, 3), got {c.shape}")
    out = np.zeros((c.shape[0], 3))
    out[:, :c.shape[1]] = c
    return out


def hole_codes(hole_ids, n: int) -> tuple[np.ndarray, np.ndarray | None]:
    """Integer code per sample (``-1`` without hole ids) and the distinct hole ids."""
    if hole_ids is None:
        return np.full(n, -1, dtype=np.int64), None
    ids = np.asarray(hole_ids)
    if ids.shape != (n,):
        raise ValueError(f"hole_ids must have one entry per sample ({n}), got shape {ids.shape}")
    names, codes = np.unique(ids, return_inverse=True)
    return codes.astype(np.int64).ravel(), names


class DataSearch:
    """A static spatial index of data samples for a :class:`Neighbourhood`.

    Parameters
    ----------
    coords : (n, d) array_like
        Sample coordinates, d in {2, 3}, metres.
    neighbourhood : Neighbourhood
        Limits and (optionally) the search ellipsoid.
    model : geosim.variogram.Model, optional
        Supplies the ellipsoid where the neighbourhood leaves it None.
    hole_ids : (n,) array_like, optional
        Drillhole of each sample, for ``max_per_hole`` and hole exclusion.

    Attributes
    ----------
    ellipsoid : Anisotropy
        The search ellipsoid; a sample is inside when its reduced distance is <= 1.
    xyz, frame : (n, 3) ndarray
        Coordinates, and the same in the ellipsoid's isotropic frame.
    holes : (n,) int64 ndarray
        Hole code per sample (``-1`` without hole ids).

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.search import DataSearch, Neighbourhood
    >>> pts = np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 30.0], [200.0, 0.0]])
    >>> s = DataSearch(pts, Neighbourhood(max_samples=2, ranges=(50.0, 50.0)))
    >>> idx, count = s.query([[1.0, 1.0]])
    >>> idx.tolist(), count.tolist()
    ([[0, 1]], [2])
    """

    def __init__(self, coords, neighbourhood: Neighbourhood, model=None, hole_ids=None):
        from scipy.spatial import cKDTree

        self.neighbourhood = neighbourhood
        self.xyz = as_xyz(coords, "data coordinates")
        self.ndim = np.asarray(coords).shape[-1]
        if neighbourhood.sectors == 8 and self.ndim == 2:
            raise ValueError("octant search (sectors=8) needs 3-D data; use sectors=4 in 2-D")
        self.n = self.xyz.shape[0]
        self.ellipsoid = search_ellipsoid(neighbourhood, model)
        self.matrix = self.ellipsoid.matrix()
        self.frame = self.to_frame(self.xyz)
        self.holes, self.hole_names = hole_codes(hole_ids, self.n)
        if neighbourhood.max_per_hole is not None and hole_ids is None:
            raise ValueError("max_per_hole needs hole ids; pass hole_ids= or drop the limit")
        self._tree = cKDTree(self.frame) if self.n else None

    def to_frame(self, xyz: np.ndarray) -> np.ndarray:
        """Map ``(m, 3)`` coordinates into the isotropic frame (ellipsoid -> unit ball)."""
        return np.ascontiguousarray(xyz @ self.matrix.T)

    def initial_candidates(self, exclusions: bool = False) -> int:
        """Candidates fetched per target on the first try.

        Sector and hole limits reject some candidates, so more are fetched; rows
        that still run short are fetched again with twice as many.
        """
        k = self.neighbourhood.max_samples
        nb = self.neighbourhood
        if nb.sectors or nb.max_per_hole is not None:
            k *= 3
        if exclusions:
            k += 1
        return max(1, min(self.n, k))

    def candidates(self, frame_targets: np.ndarray, k: int, workers: int = 1, *,
                   inside: bool = True) -> np.ndarray:
        """Nearest ``k`` samples inside the ellipsoid for targets already in the frame.

        Returns an ``(m, k)`` int64 array of sample indices sorted by reduced
        distance, padded with ``n`` (the number of samples) where fewer lie inside.
        ``workers`` threads share the tree query; ``inside=False`` drops the
        ellipsoid's bound (the nearest ``k`` wherever they are).
        """
        m = frame_targets.shape[0]
        if self.n == 0 or k == 0:
            return np.full((m, max(k, 1)), self.n, dtype=np.int64)
        bound = 1.0 + _RADIUS_SLACK if inside else np.inf
        _, idx = self._tree.query(frame_targets, k=k, distance_upper_bound=bound, workers=workers)
        return np.ascontiguousarray(idx.reshape(m, k), dtype=np.int64)

    def run(self, frame_targets: np.ndarray, step: Callable[[np.ndarray, np.ndarray], np.ndarray], *,
            exclusions: bool = False, progress=None, what: str = "nodes", workers: int = 1,
            inside: bool = True) -> None:
        """Drive ``step(rows, candidates) -> needs_more`` over all targets, block by block.

        ``rows`` are target indices and ``candidates`` their candidate rows.
        ``step`` returns a boolean array: rows whose candidates ran out before
        the limits were met are fetched again with twice as many candidates.
        ``progress(done, total, what)`` is called after each block; ``workers``
        threads share the candidate query; ``inside=False`` searches beyond the
        ellipsoid (see :meth:`candidates`).
        """
        m = frame_targets.shape[0]
        k0 = self.initial_candidates(exclusions)
        block = max(1, _BLOCK_ENTRIES // k0)
        for start in range(0, m, block):
            rows = np.arange(start, min(m, start + block), dtype=np.int64)
            k = k0
            while rows.size:
                more = step(rows, self.candidates(frame_targets[rows], k, workers, inside=inside))
                if k >= self.n or not np.any(more):
                    break
                rows = rows[more]
                k = min(self.n, 2 * k)
            if progress is not None:
                progress(min(m, start + block), m, what)

    def query(self, targets, *, exclude_index: Sequence[int] | None = None,
              exclude_hole: Sequence[int] | None = None, workers: int = 1) -> tuple[np.ndarray, np.ndarray]:
        """Selected samples for each target.

        Parameters
        ----------
        targets : (m, d) array_like
        exclude_index : (m,) int array_like, optional
            A sample index to leave out per target (-1 for none).
        exclude_hole : (m,) int array_like, optional
            A hole code (see :attr:`holes`) to leave out per target (-1 for none).
        workers : int
            Threads sharing the tree query (-1: all cores); the selection is the same.

        Returns
        -------
        index : (m, max_samples) int64 ndarray
            Selected sample indices, nearest first, padded with -1.
        count : (m,) int64 ndarray
        """
        txyz = as_xyz(targets, "targets")
        m = txyz.shape[0]
        tframe = self.to_frame(txyz)
        excl_idx, excl_hole = exclusion_arrays(m, exclude_index, exclude_hole)
        nb = self.neighbourhood
        index = np.full((m, nb.max_samples), -1, dtype=np.int64)
        count = np.zeros(m, dtype=np.int64)

        def step(rows, cand):
            return _select_rows(rows, cand, self.frame, self.holes, tframe, excl_idx, excl_hole,
                                nb.max_samples, nb.sectors, nb.sector_limit, nb.hole_limit, index, count)

        self.run(tframe, step, exclusions=exclude_index is not None or exclude_hole is not None, workers=workers)
        return index, count


def exclusion_arrays(m: int, exclude_index=None, exclude_hole=None) -> tuple[np.ndarray, np.ndarray]:
    """Per-target exclusion arrays (``-1`` = nothing excluded) as contiguous int64."""
    out = []
    for value in (exclude_index, exclude_hole):
        if value is None:
            out.append(np.full(m, -1, dtype=np.int64))
        else:
            a = np.ascontiguousarray(value, dtype=np.int64)
            if a.shape != (m,):
                raise ValueError(f"exclusions need one entry per target ({m}), got shape {a.shape}")
            out.append(a)
    return out[0], out[1]


@njit(cache=True, nogil=True)
def select_neighbours(cand, frame, holes, tu, tv, tw, excl_index, excl_hole, max_samples, sectors,
                      sector_limit, hole_limit, out, sector_count, hole_buf, hole_count):
    """Pick samples for one target from its candidates (nearest first).

    Parameters
    ----------
    cand : int64[:]
        Candidate sample indices sorted by reduced distance, padded with ``n``.
    frame : float64[:, ::1]
        Sample coordinates in the ellipsoid frame; ``tu, tv, tw`` the target's.
    holes : int64[:]
        Hole code per sample (-1: none).
    excl_index, excl_hole : int
        Sample index and hole code to skip (-1: none).
    max_samples, sectors, sector_limit, hole_limit : int
        Limits; 0 for sector_limit or hole_limit means unlimited.
    out : int64[:]
        Receives the selected indices (length >= max_samples).
    sector_count, hole_buf, hole_count : int64[:]
        Scratch (lengths >= 8, >= max_samples, >= max_samples).

    Returns
    -------
    count : int
        Number of samples selected.
    needs_more : bool
        True when every candidate was used up with fewer than ``max_samples``
        selected although more samples may lie inside the ellipsoid.
    """
    n = frame.shape[0]
    kc = cand.shape[0]
    for s in range(sector_count.shape[0]):
        sector_count[s] = 0
    n_holes = 0
    count = 0
    for j in range(kc):
        p = cand[j]
        if p >= n:
            return count, False
        if p == excl_index:
            continue
        h = holes[p]
        if excl_hole >= 0 and h == excl_hole:
            continue
        s = 0
        if sector_limit > 0:
            if frame[p, 0] - tu < 0.0:
                s += 1
            if frame[p, 1] - tv < 0.0:
                s += 2
            if sectors == 8 and frame[p, 2] - tw < 0.0:
                s += 4
            if sector_count[s] >= sector_limit:
                continue
        slot = -1
        if hole_limit > 0 and h >= 0:
            for q in range(n_holes):
                if hole_buf[q] == h:
                    slot = q
                    break
            if slot >= 0 and hole_count[slot] >= hole_limit:
                continue
        out[count] = p
        count += 1
        if sector_limit > 0:
            sector_count[s] += 1
        if hole_limit > 0 and h >= 0:
            if slot < 0:
                hole_buf[n_holes] = h
                hole_count[n_holes] = 1
                n_holes += 1
            else:
                hole_count[slot] += 1
        if count == max_samples:
            return count, False
    return count, kc < n


@njit(cache=True, nogil=True)
def _select_rows(rows, cand, frame, holes, tframe, excl_index, excl_hole, max_samples, sectors,
                 sector_limit, hole_limit, index, count):
    # np.empty, not np.zeros: every entry of more is set below and the scratch arrays are reset by
    # select_neighbours, and each np.zeros variant compiles a helper of its own on a first run
    more = np.empty(rows.shape[0], dtype=np.bool_)
    sector_count = np.empty(8, dtype=np.int64)
    hole_buf = np.empty(max_samples, dtype=np.int64)
    hole_count = np.empty(max_samples, dtype=np.int64)
    for i in range(rows.shape[0]):
        r = rows[i]
        c, need = select_neighbours(cand[i], frame, holes, tframe[r, 0], tframe[r, 1], tframe[r, 2],
                                    excl_index[r], excl_hole[r], max_samples, sectors, sector_limit,
                                    hole_limit, index[r], sector_count, hole_buf, hole_count)
        more[i] = need
        count[r] = c
        for q in range(c, max_samples):
            index[r, q] = -1
    return more


def warm_up() -> None:
    """Compile the data search's kernel (numba's cache keeps it) through a tiny query with a real
    run's argument types.  A first run compiles it ahead after the kriging kernel, which calls the
    same neighbour selection (:func:`geosim.pipeline.run_job`): the sequential engine's
    preparation loads it from the cache."""
    search = DataSearch(np.array([[0.0, 0.0, 0.0], [1.0, 0.5, 0.25]]),
                        Neighbourhood(max_samples=2, ranges=(2.0, 2.0, 2.0)))
    search.query(np.array([[0.5, 0.5, 0.5]]), workers=-1)
