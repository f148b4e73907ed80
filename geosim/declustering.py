"""Cell declustering: weights that undo preferential (clustered) sampling.

Method (cell declustering: Journel 1983, "Nonparametric estimation of spatial
distributions", Mathematical Geology 15(3); Isaaks and Srivastava 1989, An
Introduction to Applied Geostatistics, Oxford University Press, chapter 10; both
from memory): cover the samples with a grid of cells of size
``s``; a sample in a cell holding ``n_c`` samples, among ``L`` occupied cells, gets
the weight ``1 / (L n_c)``, so every occupied cell carries the same total weight
and the weights sum to 1.  Because the result depends on where the grid starts,
the weights are averaged over ``origin_shifts`` grid origins shifted along the
diagonal by ``s * i / origin_shifts`` (``i = 0 .. origin_shifts-1``) from the lower
corner of the data.

The cell size is chosen by scanning sizes and taking the one that minimizes the
declustered mean (when highs were drilled preferentially, the usual case in
mining) or maximizes it (when lows were).  The scan is returned for plotting;
look at it: a flat curve means clustering hardly matters, and a minimum at the
largest size tried means the scan range should widen.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .retired import accepts_retired

PICK_MEAN = ("lowest", "highest")


@dataclass(frozen=True)
class DeclusteringResult:
    """Outcome of :func:`cell_declustering`.

    Attributes
    ----------
    weights : (n,) ndarray
        Declustering weights at the chosen cell size, summing to 1.
    cell_size : float
        The chosen horizontal cell size (m); the vertical size is
        ``cell_size * vertical_ratio`` for 3-D data.
    cell_sizes : (m,) ndarray
        Cell sizes scanned.
    means : (m,) ndarray
        Declustered mean at each scanned size.
    naive_mean : float
        Equal-weight mean of the values.
    declustered_mean : float
        Weighted mean at the chosen size.
    pick_mean : str
        ``"lowest"`` or ``"highest"``: which declustered mean chose the size.
    """

    weights: np.ndarray
    cell_size: float
    cell_sizes: np.ndarray
    means: np.ndarray
    naive_mean: float
    declustered_mean: float
    pick_mean: str

    def describe(self) -> str:
        return (f"cell declustering: cell {self.cell_size:g} m, the size with the {self.pick_mean} mean "
                f"over {len(self.cell_sizes)} sizes {self.cell_sizes[0]:g}-{self.cell_sizes[-1]:g} m; mean "
                f"{self.naive_mean:.4g} -> {self.declustered_mean:.4g}")


@accepts_retired("cell_weights")
def cell_weights(coords: np.ndarray, size: float, *, origin_shifts: int = 8,
                 vertical_ratio: float = 1.0) -> np.ndarray:
    """Cell declustering weights at one cell size, averaged over ``origin_shifts`` origins.

    Parameters
    ----------
    coords : (n, d) array_like
        Sample coordinates (m).
    size : float
        Horizontal cell size (m).
    origin_shifts : int
        Number of grid origins averaged.
    vertical_ratio : float
        Vertical cell size as a fraction of ``size`` (3-D data only).

    Returns
    -------
    (n,) ndarray
        Weights summing to 1.

    Examples
    --------
    >>> import numpy, geosim.declustering as d
    >>> xy = numpy.array([[0.0, 0.0], [0.1, 0.0], [10.0, 0.0]])   # two close samples, one apart
    >>> d.cell_weights(xy, 5.0, origin_shifts=1).tolist()
    [0.25, 0.25, 0.5]
    """
    xyz = _coords(coords)
    if not size > 0:
        raise ValueError(f"cell size must be positive, got {size}")
    cell = np.full(xyz.shape[1], float(size))
    if xyz.shape[1] == 3:
        cell[2] *= vertical_ratio
    low = xyz.min(axis=0)
    n = len(xyz)
    total = np.zeros(n)
    for i in range(origin_shifts):
        origin = low - cell * (i / origin_shifts)
        idx = np.floor((xyz - origin) / cell).astype(np.int64)
        keys, n_keys = _cell_keys(idx)
        if n_keys <= 16 * n:  # dense enough to count by cell number directly
            counts = np.bincount(keys, minlength=n_keys)
            per_sample, occupied = counts[keys], np.count_nonzero(counts)
        else:
            _, label, counts = np.unique(keys, return_inverse=True, return_counts=True)
            per_sample, occupied = counts[label.ravel()], len(counts)
        total += 1.0 / (occupied * per_sample)
    return total / total.sum()


@accepts_retired("cell_declustering")
def cell_declustering(coords, values, *, size_range: Sequence[float] | None = None, size_count: int = 20,
                      cell_sizes: float | Sequence[float] | None = None, origin_shifts: int = 8,
                      pick_mean: str = "lowest", vertical_ratio: float = 1.0,
                      progress=None) -> DeclusteringResult:
    """Declustering weights with the cell size chosen by a scan.

    Parameters
    ----------
    coords : (n, d) array_like
        Sample coordinates in metres.
    values : (n,) array_like
        The variable whose declustered mean steers the choice (finite values).
    size_range : (smallest, largest), optional
        Scan ``size_count`` sizes evenly spaced over this range (metres).  Default:
        from ``D / (2 size_count)`` to ``D / 2``, ``D`` the larger horizontal extent
        of the data (common practice, no source).
    size_count : int
        Number of sizes scanned over ``size_range``.
    cell_sizes : float or sequence of float, optional
        Instead of a range: one size (no scan) or the exact sizes to scan.
    origin_shifts : int
        Grid origins averaged at each size.
    pick_mean : {"lowest", "highest"}
        Choose the size with the lowest declustered mean (highs were sampled
        preferentially) or the highest (lows were).
    vertical_ratio : float
        Vertical cell size as a fraction of the horizontal size (3-D data).
    progress : callable, optional
        ``progress(done, total, what)`` after each size.

    Returns
    -------
    DeclusteringResult

    Examples
    --------
    >>> import numpy, geosim
    >>> xy = numpy.array([[0.0, 0.0], [0.1, 0.0], [0.2, 0.0], [10.0, 0.0], [20.0, 0.0]])
    >>> r = geosim.cell_declustering(xy, [5.0, 5.0, 5.0, 1.0, 1.0], cell_sizes=[0.05, 5.0], origin_shifts=1)
    >>> r.cell_size, round(r.declustered_mean, 6)   # the cluster counts once at 5 m
    (5.0, 2.333333)
    """
    xyz = _coords(coords)
    v = np.asarray(values, dtype=np.float64).ravel()
    if v.shape != (len(xyz),):
        raise ValueError(f"values must have one entry per sample ({len(xyz)}), got {v.shape}")
    if not np.isfinite(v).all():
        raise ValueError("values must be finite; remove samples without a value first")
    if pick_mean not in PICK_MEAN:
        raise ValueError(f"pick_mean must be 'lowest' or 'highest', got {pick_mean!r}")
    if origin_shifts < 1:
        raise ValueError("origin_shifts must be at least 1")
    if size_count < 1:
        raise ValueError("size_count must be at least 1")
    if cell_sizes is not None and size_range is not None:
        raise ValueError("give size_range or cell_sizes, not both")
    if cell_sizes is not None:
        scan = np.atleast_1d(np.asarray(cell_sizes, dtype=np.float64))
        if scan.ndim != 1 or not (scan > 0).all():
            raise ValueError(f"cell sizes must be positive, got {cell_sizes}")
        scan = np.sort(scan)
    elif size_range is not None:
        lo, hi = (float(s) for s in size_range)
        if not 0 < lo <= hi:
            raise ValueError(f"size_range must be (smallest, largest) with 0 < smallest <= largest, got {size_range}")
        scan = np.linspace(lo, hi, size_count)
    else:
        extent = float(np.ptp(xyz[:, :2], axis=0).max())
        if not extent > 0:
            raise ValueError("all samples share one horizontal position; nothing to decluster")
        scan = np.linspace(extent / (2 * size_count), extent / 2, size_count)
    means = np.empty(len(scan))
    all_weights = []
    for k, s in enumerate(scan):
        w = cell_weights(xyz, s, origin_shifts=origin_shifts, vertical_ratio=vertical_ratio)
        all_weights.append(w)
        means[k] = float(w @ v)
        if progress is not None:
            progress(k + 1, len(scan), "declustering cell sizes")
    # ties between sizes go to the smallest size, the least smoothing
    best = int(np.argmin(means) if pick_mean == "lowest" else np.argmax(means))
    return DeclusteringResult(all_weights[best], float(scan[best]), scan, means, float(v.mean()),
                              float(means[best]), pick_mean)


def _cell_keys(idx: np.ndarray) -> tuple[np.ndarray, int]:
    """One integer per cell from (n, d) non-negative cell indices, and the number of
    possible keys (1-D keys count much faster than rows); falls back to row labels
    when the index space exceeds int64."""
    dims = idx.max(axis=0) + 1
    space = float(np.prod(dims.astype(float)))
    if space < 2.0 ** 62:
        return np.ravel_multi_index(idx.T, dims), int(space)
    labels = np.unique(idx, axis=0, return_inverse=True)[1].ravel()
    return labels, int(labels.max()) + 1


def _coords(coords) -> np.ndarray:
    xyz = np.array(coords, dtype=np.float64, ndmin=2)
    if xyz.ndim != 2 or xyz.shape[1] not in (2, 3) or len(xyz) == 0:
        raise ValueError(f"coords must be a non-empty (n, 2) or (n, 3) array, got shape {np.shape(coords)}")
    if not np.isfinite(xyz).all():
        raise ValueError("coords must be finite")
    return xyz
