"""Change of support: block averages, power-average upscaling, ranked realizations, values at points.

Realizations are simulated at point support (one value per grid node), while
decisions are taken on volumes.  This module carries one finished realization,
in data units, to the support of the decision; it computes only (arrays in,
arrays out) and opens no file.  The run's sinks call it once per realization in
the worker, so an ensemble is never held in memory.

Blocks
------
:func:`block_layout` lays a grid of blocks over the simulation grid: blocks of a
given size from an origin (default: the grid's lower corner), covering the whole
grid.  A block is discretized by the grid nodes whose centres fall inside it
(half-open: ``x0 <= x < x0 + bx``), so any block size is allowed, not only
multiples of the cell; with ``aligned=True`` the size and origin must fall on
cell edges.  A block's *fraction inside* is the number of its nodes in the domain
over the number of node centres the block would hold on the grid's lattice; a
block is kept when it is at least ``min_fraction``.

* :func:`block_average`: arithmetic mean of the nodes of each block, optionally
  weighted by density (the density-weighted mean is the grade of the block's
  tonnage, the quantity that averages linearly).
* :func:`block_tonnes`: tonnes of each block (domain nodes only: cell volume x
  density), for grade-tonnage figures at block support.
* :func:`power_average`: ``(mean(k^p))^(1/p)`` over each block, the geometric mean
  at ``p = 0``; ``p`` in [-1, 1].  A power mean of exponent 1 is the arithmetic
  mean, the effective conductivity of flow along layers; -1 the harmonic mean,
  across layers; every exponent in between lies inside these (the Wiener bounds).

Ranking and points
------------------
* :func:`rank_realizations`: ranks the realizations by one scalar figure and picks
  the realization whose figure is nearest each percentile of that figure
  (Hyndman and Fan 1996 type 7, as :mod:`geosim.summaries`).  A realization so
  picked is the P10 (or P50, P90) of that figure only, not of any other.
* :func:`locate_nodes` finds the node that holds each point (the cell it falls
  in) and reports points outside the grid or the domain; :func:`values_at` reads
  a realization there; :func:`point_summary` gives P10/P50/P90, mean, spread and
  probabilities above cut-offs across realizations at each point.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .errors import InputError

__all__ = ["BlockLayout", "block_layout", "block_average", "block_tonnes", "power_average", "power_mean",
           "region_mean", "Ranking", "rank_realizations", "NodeLocation", "locate_nodes", "values_at",
           "point_summary", "describe_power", "ranking_note", "POWER_NAMES"]

# exponents with a name of their own
POWER_NAMES = {1.0: "arithmetic", 0.0: "geometric", -1.0: "harmonic"}
_EDGE = 1e-9  # relative slack for node centres and block edges computed in floating point


@dataclass(frozen=True)
class BlockLayout:
    """Blocks over a simulation grid, and which nodes discretize each block.

    Attributes
    ----------
    grid : geosim.Grid
        The fine (simulation) grid.
    blocks : geosim.Grid
        The block grid: one cell per block, same CRS; its mask marks the kept
        blocks (fraction inside at least ``min_fraction``).
    node_block : ndarray of int
        Flat index (C order of ``blocks.shape``) of the block holding each active
        node of ``grid``, in the order of ``grid.coords()``.
    nodes_inside : ndarray of int, ``blocks.shape``
        Domain nodes in each block.
    nominal : ndarray of int, ``blocks.shape``
        Node centres each block holds on the grid's lattice (inside the domain or not).
    min_fraction : float
    """

    grid: object
    blocks: object
    node_block: np.ndarray
    nodes_inside: np.ndarray
    nominal: np.ndarray
    min_fraction: float

    @property
    def fraction(self) -> np.ndarray:
        """Fraction of each block's nodes inside the domain (0 to 1), ``blocks.shape``."""
        return self.nodes_inside / np.maximum(self.nominal, 1)

    @property
    def kept(self) -> np.ndarray:
        """True for the blocks that get a value."""
        return self.blocks.mask

    def describe(self) -> str:
        size = " x ".join(f"{c:g}" for c in self.blocks.cell)
        return (f"blocks of {size} m ({self.blocks.mask.sum()} of {self.blocks.size} blocks hold at least "
                f"{self.min_fraction:g} of their nodes inside the domain)")


def _axis_start(lo: float, origin: float, size: float) -> float:
    """The edge of the block at or below ``lo`` on the lattice ``origin + k size``."""
    return origin + math.floor((lo - origin) / size + _EDGE) * size


def _axis_index(centres: np.ndarray, start: float, size: float) -> np.ndarray:
    return np.floor((centres - start) / size + _EDGE).astype(np.int64)


def _axis_counts(lo: float, cell: float, start: float, size: float, n_blocks: int) -> np.ndarray:
    """Node centres of the infinite lattice ``lo + (j + 1/2) cell`` inside each block of an axis."""
    j0 = math.floor((start - lo) / cell) - 1
    j1 = math.ceil((start + n_blocks * size - lo) / cell) + 1
    centres = lo + (np.arange(j0, j1) + 0.5) * cell
    index = _axis_index(centres, start, size)
    index = index[(index >= 0) & (index < n_blocks)]
    return np.bincount(index, minlength=n_blocks)


def _is_multiple(a: float, b: float) -> bool:
    q = a / b
    return abs(q - round(q)) <= 1e-6 * max(1.0, abs(q))


def block_layout(grid, size: Sequence[float], *, origin: Sequence[float] | None = None,
                 min_fraction: float = 0.5, aligned: bool = False) -> BlockLayout:
    """Blocks of ``size`` over ``grid``.

    Parameters
    ----------
    grid : geosim.Grid
        The simulation grid (2-D or 3-D).
    size : sequence of float
        Block size ``(bx, by)`` or ``(bx, by, bz)`` in metres, one per grid axis;
        each at least the cell size along that axis.
    origin : sequence of float, optional
        A block corner ``(x, y[, z])`` (e.g. a mine block model's origin); blocks
        repeat from it in both directions and cover the grid.  Default: the grid's
        lower corner ``(xmin, ymin[, zmin])``.
    min_fraction : float
        Smallest fraction of a block's nodes inside the domain for the block to get
        a value (0 < min_fraction <= 1).
    aligned : bool
        Require block edges on cell edges: size a whole number of cells and the
        origin on the grid's cell lattice.

    Returns
    -------
    BlockLayout

    Examples
    --------
    >>> import numpy as np, geosim
    >>> from geosim.support import block_layout, block_average
    >>> g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (4, 6))
    >>> lay = block_layout(g, (20.0, 20.0))
    >>> lay.blocks.shape
    (2, 3)
    >>> block_average(np.arange(24.0).reshape(4, 6), lay)
    array([[ 3.5,  5.5,  7.5],
           [15.5, 17.5, 19.5]])
    """
    from .grid import Grid

    size = tuple(float(s) for s in size)
    if len(size) != grid.ndim:
        raise ValueError(f"block size has {len(size)} values, the grid is {grid.ndim}-D")
    if not 0.0 < min_fraction <= 1.0:
        raise ValueError(f"min_fraction must be in (0, 1], got {min_fraction}")
    for axis, (s, c) in enumerate(zip(size, grid.cell)):
        if not s >= c * (1 - 1e-9):
            raise ValueError(f"block size {s:g} m along {'xyz'[axis]} is smaller than the cell ({c:g} m)")
    lows = (grid.xmin, grid.ymin) + ((grid.zmin,) if grid.ndim == 3 else ())
    origin = lows if origin is None else tuple(float(o) for o in origin)
    if len(origin) != grid.ndim:
        raise ValueError(f"block origin has {len(origin)} values, the grid is {grid.ndim}-D")
    if aligned:
        for axis, (s, c, o, lo) in enumerate(zip(size, grid.cell, origin, lows)):
            if not _is_multiple(s, c):
                raise ValueError(f"block size {s:g} m along {'xyz'[axis]} is not a whole number of cells "
                                 f"({c:g} m)")
            if not _is_multiple(o - lo, c):
                raise ValueError(f"block origin {o:g} along {'xyz'[axis]} is not on a cell edge of the grid")
    highs = (grid.xmax, grid.ymax) + ((grid.zmin + grid.nz * grid.cell[2],) if grid.ndim == 3 else ())
    starts = [_axis_start(lo, o, s) for lo, o, s in zip(lows, origin, size)]
    counts = [max(1, math.ceil((hi - st) / s - _EDGE)) for hi, st, s in zip(highs, starts, size)]
    # per-axis block index of each node, in array-axis order (z,) y, x; rows run north to south
    axes = grid.axes()
    ix = _axis_index(axes[-1], starts[0], size[0])
    iy = counts[1] - 1 - _axis_index(axes[-2], starts[1], size[1])
    nx_b, ny_b = counts[0], counts[1]
    per_axis = [iy, ix]
    shape = (ny_b, nx_b)
    nominal_axes = [_axis_counts(lows[1], grid.cell[1], starts[1], size[1], ny_b)[::-1],
                    _axis_counts(lows[0], grid.cell[0], starts[0], size[0], nx_b)]
    if grid.ndim == 3:
        per_axis.insert(0, _axis_index(axes[0], starts[2], size[2]))
        shape = (counts[2],) + shape
        nominal_axes.insert(0, _axis_counts(lows[2], grid.cell[2], starts[2], size[2], counts[2]))
    mesh = np.meshgrid(*per_axis, indexing="ij")
    node_block = np.ravel_multi_index(tuple(m.ravel() for m in mesh), shape)[grid.mask.ravel()]
    inside = np.bincount(node_block, minlength=math.prod(shape)).reshape(shape)
    nominal = np.ones(shape, dtype=np.int64)
    for axis, n in enumerate(nominal_axes):
        nominal = nominal * n.reshape([-1 if a == axis else 1 for a in range(len(shape))])
    kept = (inside > 0) & (inside >= min_fraction * nominal - 1e-9)
    block_grid = Grid(starts[0], starts[1], size, shape, grid.crs,
                      starts[2] if grid.ndim == 3 else 0.0, mask=kept)
    return BlockLayout(grid, block_grid, node_block, inside, nominal, float(min_fraction))


def _active(field, layout: BlockLayout, what: str) -> np.ndarray:
    f = np.asarray(field, dtype=np.float64)
    if f.shape != layout.grid.shape:
        raise ValueError(f"{what} has shape {f.shape}, the grid {layout.grid.shape}")
    return f[layout.grid.mask]


def _weights(weights, layout: BlockLayout) -> np.ndarray | None:
    if weights is None:
        return None
    w = np.asarray(weights, dtype=np.float64)
    if w.ndim == 0:
        return None  # a constant weight leaves every mean unchanged
    return _active(w, layout, "weights")


def _to_blocks(sums: np.ndarray, layout: BlockLayout) -> np.ndarray:
    out = sums.reshape(layout.blocks.shape)
    return np.where(layout.kept, out, np.nan)


def _block_sums(values: np.ndarray, layout: BlockLayout, weights: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    n = layout.blocks.size
    if weights is None:
        total = np.bincount(layout.node_block, weights=values, minlength=n)
        return total, layout.nodes_inside.ravel().astype(np.float64)
    return (np.bincount(layout.node_block, weights=weights * values, minlength=n),
            np.bincount(layout.node_block, weights=weights, minlength=n))


def block_average(field: np.ndarray, layout: BlockLayout, weights: float | np.ndarray | None = None) -> np.ndarray:
    """Arithmetic (optionally weighted) mean of each block's domain nodes.

    Parameters
    ----------
    field : array of ``layout.grid.shape``
        One realization in data units (grades), NaN outside the domain.
    layout : BlockLayout
    weights : float or array of ``layout.grid.shape``, optional
        Per-node weights, e.g. dry bulk density for the grade of the block's
        tonnage; a single number weighs every node alike.

    Returns
    -------
    ndarray of ``layout.blocks.shape``
        NaN for blocks not kept.
    """
    v = _active(field, layout, "field")
    total, weight = _block_sums(v, layout, _weights(weights, layout))
    with np.errstate(invalid="ignore", divide="ignore"):
        return _to_blocks(total / weight, layout)


def block_tonnes(layout: BlockLayout, density: float | np.ndarray, thickness: float | np.ndarray | None = None
                 ) -> np.ndarray:
    """Tonnes of each block: the volume of its domain nodes times their density.

    ``thickness`` (metres) turns the cell areas of a 2-D grid into volumes; a 3-D
    grid uses ``dz``.  NaN for blocks not kept.
    """
    g = layout.grid
    if g.ndim == 3:
        volume = np.full(g.shape, g.cell[0] * g.cell[1] * g.cell[2])
    else:
        if thickness is None:
            raise ValueError("a 2-D grid needs a thickness to turn cell areas into volumes")
        volume = np.broadcast_to(g.cell[0] * g.cell[1] * np.asarray(thickness, dtype=float), g.shape)
    tonnes = _active(volume * np.broadcast_to(np.asarray(density, dtype=float), g.shape), layout, "density")
    return _to_blocks(np.bincount(layout.node_block, weights=tonnes, minlength=layout.blocks.size), layout)


def _check_exponent(exponent: float) -> float:
    p = float(exponent)
    if not (math.isfinite(p) and -1.0 <= p <= 1.0):
        raise ValueError(f"the power-average exponent must be between -1 (harmonic) and 1 (arithmetic), got {p:g}")
    return p


def _check_positive(values: np.ndarray, p: float) -> None:
    bad = (values <= 0) if p <= 0 else (values < 0)
    count = int(np.count_nonzero(bad))
    if count:
        name = POWER_NAMES.get(p, f"power {p:g}")
        need = "positive" if p <= 0 else "non-negative"
        raise InputError(f"{count} of {values.size} values are {'zero or negative' if p <= 0 else 'negative'} "
                         f"(smallest {float(values.min()):.4g}); the {name} mean needs {need} values",
                         field="exponent", fix="conductivities must be positive: model log10 of the variable "
                         "(transform.log = true) or give transform.lower > 0")


def power_mean(values: np.ndarray, exponent: float, weights: np.ndarray | None = None, axis=None) -> np.ndarray:
    """Weighted power mean ``(sum w v^p / sum w)^(1/p)``; geometric at ``p = 0``.

    Examples
    --------
    >>> import numpy as np
    >>> from geosim.support import power_mean
    >>> k = np.array([1.0, 4.0, 16.0])
    >>> [round(float(power_mean(k, p)), 6) for p in (1, 0, -1)]
    [7.0, 4.0, 2.285714]
    """
    p = _check_exponent(exponent)
    v = np.asarray(values, dtype=np.float64)
    _check_positive(v[~np.isnan(v)], p)
    w = np.ones_like(v) if weights is None else np.broadcast_to(np.asarray(weights, dtype=np.float64), v.shape)
    with np.errstate(divide="ignore"):
        if p == 0.0:
            return np.exp(np.sum(w * np.log(v), axis=axis) / np.sum(w, axis=axis))
        return (np.sum(w * v ** p, axis=axis) / np.sum(w, axis=axis)) ** (1.0 / p)


def power_average(field: np.ndarray, layout: BlockLayout, exponent: float,
                  weights: np.ndarray | None = None) -> np.ndarray:
    """Power average of exponent ``p`` over each block (upscaling a conductivity).

    ``p = 1`` arithmetic, ``0`` geometric, ``-1`` harmonic, any value in between
    allowed.  Raises :class:`~geosim.errors.InputError` with the count of
    non-positive values when ``p <= 0`` (negative values when ``p > 0``, except
    ``p = 1``), since those means are not defined there.

    Returns
    -------
    ndarray of ``layout.blocks.shape``, NaN for blocks not kept.
    """
    p = _check_exponent(exponent)
    v = _active(field, layout, "field")
    if p != 1.0:
        _check_positive(v[~np.isnan(v)], p)
    w = _weights(weights, layout)
    with np.errstate(invalid="ignore", divide="ignore"):
        if p == 0.0:
            total, weight = _block_sums(np.log(v), layout, w)
            return _to_blocks(np.exp(total / weight), layout)
        total, weight = _block_sums(v ** p if p != 1.0 else v, layout, w)
        return _to_blocks((total / weight) ** (1.0 / p), layout)


def region_mean(field: np.ndarray, mask: np.ndarray) -> float:
    """Mean of a realization over the nodes where ``mask`` is True (NaN ignored)."""
    f = np.asarray(field, dtype=np.float64)
    v = f[np.asarray(mask, dtype=bool) & ~np.isnan(f)]
    return float(v.mean()) if v.size else float("nan")


# -- ranking -----------------------------------------------------------------------------------

@dataclass(frozen=True)
class Ranking:
    """Realizations ranked by one figure.

    Attributes
    ----------
    indices : ndarray of int
        Realization indices, in the order the figures were given.
    figures : ndarray of float
        The figure of each realization (NaN where it is undefined).
    ranks : ndarray of int
        1 for the smallest figure; ties in index order; 0 where the figure is NaN.
    percentiles : tuple of float
    targets : ndarray of float
        The figure's percentiles across the realizations (type 7).
    picks : ndarray of int
        For each percentile, the realization index whose figure is nearest it
        (the lower index on a tie).
    """

    indices: np.ndarray
    figures: np.ndarray
    ranks: np.ndarray
    percentiles: tuple
    targets: np.ndarray
    picks: np.ndarray

    def picked(self) -> dict[str, int]:
        """``{"P10": index, ...}``."""
        return {f"P{p:g}": int(i) for p, i in zip(self.percentiles, self.picks)}


def rank_realizations(figures: Sequence[float], indices: Sequence[int] | None = None,
                      percentiles: Sequence[float] = (10.0, 50.0, 90.0)) -> Ranking:
    """Rank realizations by a figure and pick those nearest its percentiles.

    Examples
    --------
    >>> from geosim.support import rank_realizations
    >>> r = rank_realizations([5.0, 1.0, 9.0, 3.0, 7.0])
    >>> r.picked(), r.ranks.tolist()
    ({'P10': 1, 'P50': 0, 'P90': 2}, [3, 1, 5, 2, 4])
    """
    from .summaries import QUANTILE_METHOD

    v = np.asarray(figures, dtype=np.float64).ravel()
    idx = np.arange(v.size) if indices is None else np.asarray(indices, dtype=np.int64).ravel()
    if idx.size != v.size:
        raise ValueError(f"{v.size} figures but {idx.size} indices")
    ok = ~np.isnan(v)
    if not ok.any():
        raise ValueError("the figure is undefined (NaN) in every realization; nothing to rank")
    order = np.flatnonzero(ok)[np.lexsort((idx[ok], v[ok]))]
    ranks = np.zeros(v.size, dtype=np.int64)
    ranks[order] = np.arange(1, order.size + 1)
    pct = tuple(float(p) for p in percentiles)
    targets = np.percentile(v[ok], pct, method=QUANTILE_METHOD)
    picks = []
    for t in targets:
        candidates = np.flatnonzero(ok)
        distance = np.abs(v[candidates] - t)
        best = candidates[np.lexsort((idx[candidates], distance))[0]]
        picks.append(idx[best])
    return Ranking(idx, v, ranks, pct, np.asarray(targets), np.asarray(picks, dtype=np.int64))


# -- points ------------------------------------------------------------------------------------

@dataclass(frozen=True)
class NodeLocation:
    """Which node holds each point.

    ``index`` is the flat node index (C order of the grid shape), -1 for points
    outside the grid; ``outside_grid`` and ``outside_domain`` are boolean masks
    (a point in the grid whose node is outside the domain mask is outside the domain).
    """

    index: np.ndarray
    outside_grid: np.ndarray
    outside_domain: np.ndarray


def locate_nodes(grid, coords: np.ndarray) -> NodeLocation:
    """The node whose cell holds each point ``(x, y[, z])`` (cells are half-open at their upper edges).

    Examples
    --------
    >>> import numpy as np, geosim
    >>> from geosim.support import locate_nodes
    >>> g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (2, 3))
    >>> locate_nodes(g, np.array([[25.0, 15.0], [5.0, 5.0], [31.0, 5.0]])).index.tolist()
    [2, 3, -1]
    """
    c = np.asarray(coords, dtype=np.float64)
    if c.ndim != 2 or c.shape[1] != grid.ndim:
        raise ValueError(f"points have shape {c.shape}, expected (n, {grid.ndim}) for a {grid.ndim}-D grid")
    j = np.floor((c[:, 0] - grid.xmin) / grid.cell[0]).astype(np.int64)
    i = grid.ny - 1 - np.floor((c[:, 1] - grid.ymin) / grid.cell[1]).astype(np.int64)
    parts, sizes = [i, j], [grid.ny, grid.nx]
    if grid.ndim == 3:
        parts.insert(0, np.floor((c[:, 2] - grid.zmin) / grid.cell[2]).astype(np.int64))
        sizes.insert(0, grid.nz)
    outside = np.zeros(len(c), dtype=bool)
    for part, n in zip(parts, sizes):
        outside |= (part < 0) | (part >= n)
    index = np.full(len(c), -1, dtype=np.int64)
    if (~outside).any():
        index[~outside] = np.ravel_multi_index(tuple(p[~outside] for p in parts), grid.shape)
    off_domain = np.zeros(len(c), dtype=bool)
    off_domain[~outside] = ~grid.mask.ravel()[index[~outside]]
    return NodeLocation(index, outside, off_domain)


def values_at(field: np.ndarray, index: np.ndarray) -> np.ndarray:
    """A realization's values at flat node indices (from :func:`locate_nodes`)."""
    return np.asarray(field, dtype=np.float64).ravel()[np.asarray(index, dtype=np.int64)]


def point_summary(samples: np.ndarray, cutoffs: Sequence[float] = ()) -> dict[str, np.ndarray]:
    """Mean, spread, P10/P50/P90 and P(>c) at each point across realizations.

    ``samples`` is ``(n_realizations, n_points)``; returns ``{band name: (n_points,)}``
    with the names and definitions of :func:`geosim.summaries.summary_band_names`.
    """
    from .summaries import summary_band_names, summary_bands

    s = np.asarray(samples, dtype=np.float64)
    if s.ndim != 2 or s.shape[0] < 1:
        raise ValueError(f"expected samples (n_realizations, n_points), got shape {s.shape}")
    return dict(zip(summary_band_names(cutoffs), summary_bands(s, cutoffs)))


def describe_power(exponent: float) -> str:
    """``"geometric (power 0)"``, ``"power 0.33"``: how an exponent reads in reports."""
    p = float(exponent)
    return f"{POWER_NAMES[p]} (power {p:g})" if p in POWER_NAMES else f"power mean, exponent {p:g}"


def ranking_note(figure: str) -> str:
    """The sentence every ranking output carries."""
    return (f"realizations are ranked by {figure} alone: the one picked as P10 (P50, P90) of {figure} is not "
            "the P10 (P50, P90) of any other figure, nor of the values at any place")

