"""Cell declustering: weights that undo preferential (clustered) sampling.

Method (cell declustering: Journel 1983, "Nonparametric estimation of spatial
distributions", Mathematical Geology 15(3); Isaaks and Srivastava 1989, An
Introduction to Applied Geostatistics, Oxford University Press, chapter 10; both
from memory): cover the samples with a grid of cells of size
``s``; a sample in a cell holding ``n_c`` samples, among ``L`` occupied cells, gets
the weight ``1 / (L n_c)``, so every occupied cell carries the same total weight
and the weights sum to 1.  Because the result depends on where the grid starts,
the weights are averaged over ``n_offsets`` grid origins shifted along the
diagonal by ``s * i / n_offsets`` (``i = 0 .. n_offsets-1``) from the lower corner
of the data.

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
    sizes : (m,) ndarray
        Cell sizes scanned.
    means : (m,) ndarray
        Declustered mean at each scanned size.
    naive_mean : float
        Equal-weight mean of the values.
    declustered_mean : float
        Weighted mean at the chosen size.
    objective : str
        ``"min"`` or ``"max"``.
    """

    weights: np.ndarray
    cell_size: float
    sizes: np.ndarray
    means: np.ndarray
    naive_mean: float
    declustered_mean: float
    objective: str

    def describe(self) -> str:
        return (f"cell declustering: cell {self.cell_size:g} m chosen to {self.objective}imize the mean "
                f"over {len(self.sizes)} sizes {self.sizes[0]:g}-{self.sizes[-1]:g} m; mean "
                f"{self.naive_mean:.4g} -> {self.declustered_mean:.4g}")


def cell_weights(coords: np.ndarray, size: float, *, n_offsets: int = 8,
                 vertical_ratio: float = 1.0) -> np.ndarray:
    """Cell declustering weights at one cell size, averaged over ``n_offsets`` origins.

    Parameters
    ----------
    coords : (n, d) array_like
        Sample coordinates (m).
    size : float
        Horizontal cell size (m).
    n_offsets : int
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
    >>> d.cell_weights(xy, 5.0, n_offsets=1).tolist()
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
    for i in range(n_offsets):
        origin = low - cell * (i / n_offsets)
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


def cell_declustering(coords, values, *, sizes: float | Sequence[float] | None = None,
                      n_sizes: int = 24, n_offsets: int = 8, objective: str = "min",
                      vertical_ratio: float = 1.0, progress=None) -> DeclusteringResult:
    """Declustering weights with the cell size chosen by a scan.

    Parameters
    ----------
    coords : (n, d) array_like
        Sample coordinates in metres.
    values : (n,) array_like
        The variable whose declustered mean steers the choice (finite values).
    sizes : float or sequence of float, optional
        One size (no scan) or the sizes to scan.  Default: ``n_sizes`` sizes evenly
        spaced from ``D / (2 n_sizes)`` to ``D / 2``, ``D`` the larger horizontal
        extent of the data (common practice, no source).
    n_sizes : int
        Number of sizes in the default scan.
    n_offsets : int
        Grid origins averaged at each size.
    objective : {"min", "max"}
        Choose the size with the smallest declustered mean (highs were sampled
        preferentially) or the largest (lows were).
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
    >>> r = geosim.cell_declustering(xy, [5.0, 5.0, 5.0, 1.0, 1.0], sizes=[0.05, 5.0], n_offsets=1)
    >>> r.cell_size, round(r.declustered_mean, 6)   # the cluster counts once at 5 m
    (5.0, 2.333333)
    """
    xyz = _coords(coords)
    v = np.asarray(values, dtype=np.float64).ravel()
    if v.shape != (len(xyz),):
        raise ValueError(f"values must have one entry per sample ({len(xyz)}), got {v.shape}")
    if not np.isfinite(v).all():
        raise ValueError("values must be finite; remove samples without a value first")
    if objective not in ("min", "max"):
        raise ValueError(f"objective must be 'min' or 'max', got {objective!r}")
    if n_offsets < 1:
        raise ValueError("n_offsets must be at least 1")
    if sizes is None:
        extent = float(np.ptp(xyz[:, :2], axis=0).max())
        if not extent > 0:
            raise ValueError("all samples share one horizontal position; nothing to decluster")
        scan = np.linspace(extent / (2 * n_sizes), extent / 2, n_sizes)
    else:
        scan = np.atleast_1d(np.asarray(sizes, dtype=np.float64))
        if scan.ndim != 1 or not (scan > 0).all():
            raise ValueError(f"cell sizes must be positive, got {sizes}")
        scan = np.sort(scan)
    means = np.empty(len(scan))
    all_weights = []
    for k, s in enumerate(scan):
        w = cell_weights(xyz, s, n_offsets=n_offsets, vertical_ratio=vertical_ratio)
        all_weights.append(w)
        means[k] = float(w @ v)
        if progress is not None:
            progress(k + 1, len(scan), "declustering cell sizes")
    # ties between sizes go to the smallest size, the least smoothing
    best = int(np.argmin(means) if objective == "min" else np.argmax(means))
    return DeclusteringResult(all_weights[best], float(scan[best]), scan, means, float(v.mean()),
                              float(means[best]), objective)


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
