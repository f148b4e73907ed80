"""Search templates, node covariance tables and random paths for grid simulation.

A grid is handled internally as three axes ``(level, row, column)``; a 2-D grid is a
single level.  An *offset* is an integer step ``(dk, di, dj)`` between nodes and maps to
the lag vector ``(dj * dx, -di * dy, dk * dz)`` in metres (rows run south, levels up;
see :mod:`geosim.grid`).  On a regular grid the covariance between two nodes depends
only on their offset, so the kernels read node-to-node covariances from a table.
"""
from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..variogram import Anisotropy
from ..variogram.compiled import cov_matrix_into

#: Most covariance-table entries (float64) kept; beyond this the kernels evaluate the model.
TABLE_LIMIT = 4_000_000
# table entries computed per call of the compiled covariance loop (their lags take 24 bytes each)
TABLE_BLOCK = 65_536


def grid_axes(grid) -> tuple[tuple[int, int, int], np.ndarray, np.ndarray]:
    """``(nz, ny, nx)``, the first node centre ``(x, y, z)`` and the step per axis in metres.

    The step is ``(dx, -dy, dz)``: moving one row south lowers y.  2-D grids get one level
    at z = 0 with a nominal ``dz = 1`` that no lag ever uses.
    """
    if grid.ndim == 2:
        shape3 = (1, grid.ny, grid.nx)
        dz, z0 = 1.0, 0.0
    else:
        shape3 = tuple(grid.shape)
        dz = grid.cell[2]
        z0 = grid.zmin + 0.5 * dz
    origin = np.array([grid.xmin + 0.5 * grid.cell[0], grid.ymax - 0.5 * grid.cell[1], z0])
    step = np.array([grid.cell[0], -grid.cell[1], dz])
    return shape3, origin, step


def offset_lags(offsets: np.ndarray, step: np.ndarray) -> np.ndarray:
    """Lag vectors ``(dx, dy, dz)`` in metres of integer offsets ``(dk, di, dj)``."""
    offsets = np.asarray(offsets)
    return np.column_stack([offsets[:, 2] * step[0], offsets[:, 1] * step[1], offsets[:, 0] * step[2]])


def node_template(grid, search: Anisotropy, *, limit: int = 20_000) -> np.ndarray:
    """Offsets of the nodes inside the search ellipsoid, nearest first.

    Parameters
    ----------
    grid : geosim.grid.Grid
    search : Anisotropy
        The search ellipsoid (reduced distance <= 1 is inside).
    limit : int
        Keep at most this many offsets (the nearest).  Late in a path the first few
        dozen offsets already hold the neighbours; the limit bounds the scan early on.

    Returns
    -------
    (T, 3) int64 ndarray
        Offsets ``(dk, di, dj)`` sorted by anisotropic distance, ties by Euclidean
        distance then lexicographically (so the order is the same on every machine).
        The zero offset is excluded.

    Examples
    --------
    >>> import geosim
    >>> from geosim.simulation.paths import node_template
    >>> g = geosim.Grid(0.0, 0.0, (1.0, 1.0), (5, 5))
    >>> node_template(g, geosim.Anisotropy.isotropic(1.5))[:4].tolist()
    [[0, -1, 0], [0, 0, -1], [0, 0, 1], [0, 1, 0]]
    """
    shape3, _, step = grid_axes(grid)
    d = grid.ndim
    m = search.matrix()
    # half-extent of the ellipsoid along each axis: sqrt of the diagonal of (M_d^T M_d)^-1
    cols = [0, 1] if d == 2 else [0, 1, 2]
    md = m[:, cols]
    qinv = np.linalg.inv(md.T @ md)
    half = np.sqrt(np.diag(qinv))  # metres along x, y[, z]
    ext_j = min(int(math.floor(half[0] / abs(step[0]) + 1e-9)), shape3[2] - 1)
    ext_i = min(int(math.floor(half[1] / abs(step[1]) + 1e-9)), shape3[1] - 1)
    ext_k = 0 if d == 2 else min(int(math.floor(half[2] / step[2] + 1e-9)), shape3[0] - 1)
    box = (2 * ext_k + 1) * (2 * ext_i + 1) * (2 * ext_j + 1)
    if box > 60_000_000:
        raise InputError(f"the search ellipsoid spans {box} grid nodes", field="neighbourhood.ranges",
                         fix="give the neighbourhood smaller ranges or use a coarser grid")
    kk, ii, jj = np.meshgrid(np.arange(-ext_k, ext_k + 1), np.arange(-ext_i, ext_i + 1),
                             np.arange(-ext_j, ext_j + 1), indexing="ij")
    offsets = np.column_stack([kk.ravel(), ii.ravel(), jj.ravel()]).astype(np.int64)
    lags = offset_lags(offsets, step)
    r = np.linalg.norm(lags @ m.T, axis=1)
    e = np.linalg.norm(lags, axis=1)
    keep = (r <= 1.0 + 1e-9) & (e > 0)
    offsets, r, e = offsets[keep], r[keep], e[keep]
    order = np.lexsort((offsets[:, 2], offsets[:, 1], offsets[:, 0], np.round(e, 9), np.round(r, 12)))
    return np.ascontiguousarray(offsets[order][:limit])


def covariance_table(cm: tuple, offsets: np.ndarray, step: np.ndarray):
    """Covariances at every difference of two template offsets, or None if too large.

    Returns ``(table, centre)``: ``table[centre + o]`` is the covariance at offset ``o``
    for every ``o`` in ``[-2 E, 2 E]`` where ``E`` is the template's extent per axis; None
    for an empty template too (nothing to read).
    """
    if not len(offsets):  # no node neighbours (max_nodes 0): no node-to-node covariance is read
        return None, np.zeros(3, dtype=np.int64)
    ext = np.abs(offsets).max(axis=0)
    dims = tuple(int(4 * e + 1) for e in ext)
    if int(np.prod(dims)) > TABLE_LIMIT:
        return None, np.zeros(3, dtype=np.int64)
    table = np.empty(dims)
    centre = (2 * ext).astype(np.int64)
    step = np.asarray(step, dtype=np.float64)
    # C(lag) as the covariance of each lag with the origin, through the compiled loop every
    # covariance matrix uses (one kernel less to compile on a first run), in blocks of entries
    # so that the lags' coordinates stay small beside the table
    flat, origin = table.reshape(-1, 1), np.zeros((1, 3))
    for start in range(0, flat.shape[0], TABLE_BLOCK):
        a, b, c = np.unravel_index(np.arange(start, min(start + TABLE_BLOCK, flat.shape[0])), dims)
        lags = np.column_stack([(c - centre[2]) * step[0], (b - centre[1]) * step[1], (a - centre[0]) * step[2]])
        cov_matrix_into(cm, lags, origin, flat[start:start + TABLE_BLOCK])
    return table, centre


def path_levels(grid, offsets: np.ndarray, levels: int | None = None) -> np.ndarray:
    """Multi-grid level of every active node (coarsest first in the path).

    A node is on level ``l`` when its index along every coarsened axis is a multiple of
    ``2**l``.  Axes are coarsened only as far as the search template reaches, so the
    coarse nodes still find each other.  ``levels=None`` picks up to 3 levels; 0 gives a
    plain random path.
    """
    shape3, _, _ = grid_axes(grid)
    ext = np.abs(offsets).max(axis=0) if len(offsets) else np.zeros(3, dtype=np.int64)
    horizontal = int(min(ext[1], ext[2]))
    top = 3 if levels is None else int(levels)
    # the coarse spacing must stay within the template, and leave a few coarse neighbours
    top = max(0, min(top, int(math.floor(math.log2(horizontal / 2))) if horizontal >= 2 else 0))
    idx = np.unravel_index(np.flatnonzero(grid.mask.ravel()), grid.mask.shape)
    idx3 = idx if grid.ndim == 3 else (np.zeros_like(idx[0]),) + idx
    lev = np.zeros(idx3[0].shape, dtype=np.int8)
    for level in range(1, top + 1):
        ok = np.ones(lev.shape, dtype=bool)
        for axis in range(3):
            cap = 0 if ext[axis] == 0 else int(math.floor(math.log2(max(ext[axis], 1))))
            s = 2 ** min(level, cap)
            ok &= (idx3[axis] % s) == 0
        lev[ok] = level
    return lev


def random_path(levels: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """A random visiting order of the active nodes, coarse levels first."""
    perm = rng.permutation(levels.shape[0])
    return perm[np.argsort(-levels[perm], kind="stable")]
