"""Compiled pair accumulation for experimental variograms.

The kernels visit every pair ``i < j`` once, without ever holding a list of
pairs: points arrive sorted by group (drill hole, or one group for all) and then
by x, so the inner loop stops as soon as the x-gap exceeds the largest lag of
interest.  Each pair adds its contribution to small accumulator arrays (one row
per direction, one column per lag bin), so memory is ``O(n + directions x lags)``
whatever the number of pairs.  Compiled lazily on first call (``cache=True``).

:func:`accumulate_directional_numpy` gives the same sums, bit for bit, without compiling:
the variograms of small data sets take it, so a first run does not wait for the compiler
(:func:`geosim.variogram.experimental.experimental_variogram`).
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

_TINY2 = 1e-18  # squared metres: coincident samples carry no direction and no lag
# data sets with at most this many pairs take accumulate_directional_numpy: a few tens of MB held
# at once and tens of milliseconds, against about half a second of CPU compiling the kernel
NUMPY_PAIRS_MAX = 1 << 18


@njit(cache=True, nogil=True)
def accumulate_directional(xyz, z, group_end, i0, i1, dirs, lag, tol, nlags, dmax, robust,
                           out_n, out_d, out_g):
    """Add the pairs whose first point is in ``[i0, i1)`` to the accumulators.

    Parameters
    ----------
    xyz : float64[n, 3]
        Coordinates sorted by group then by x.
    z : float64[n]
        Values in the same order.
    group_end : int64[n]
        One past the last index of the group of each point.
    dirs : float64[k, 14]
        One row per direction: ``omni, u(3), v(3), w(3), tan_az, tan_dip,
        band_h, band_v``; ``omni = 1`` accepts every pair, a tangent ``< 0``
        switches its angular test off.
    lag, tol : float
        Bin ``b`` is centred at ``b * lag`` and accepts distances in
        ``[centre - tol, centre + tol)``.
    robust : bool
        Accumulate ``sqrt|dz|`` (Cressie-Hawkins) instead of ``dz^2 / 2``.
    out_n, out_d, out_g : float64[k, nlags]
        Pair counts, sums of distances, sums of the increment statistic.
    """
    ndir = dirs.shape[0]
    dmax2 = dmax * dmax
    for i in range(i0, i1):
        xi = xyz[i, 0]
        yi = xyz[i, 1]
        zi = xyz[i, 2]
        for j in range(i + 1, group_end[i]):
            dx = xyz[j, 0] - xi
            if dx > dmax:
                break
            dy = xyz[j, 1] - yi
            dzz = xyz[j, 2] - zi
            d2 = dx * dx + dy * dy + dzz * dzz
            if d2 > dmax2 or d2 <= _TINY2:
                continue
            d = math.sqrt(d2)
            t = d / lag
            b_lo = max(0, int(math.floor(t - tol / lag)))
            b_hi = min(nlags - 1, int(math.floor(t + tol / lag)) + 1)
            if b_lo > b_hi:
                continue
            diff = z[j] - z[i]
            val = math.sqrt(abs(diff)) if robust else 0.5 * diff * diff
            for k in range(ndir):
                if dirs[k, 0] == 0.0:
                    a = abs(dx * dirs[k, 1] + dy * dirs[k, 2] + dzz * dirs[k, 3])
                    bb = abs(dx * dirs[k, 4] + dy * dirs[k, 5] + dzz * dirs[k, 6])
                    cc = abs(dx * dirs[k, 7] + dy * dirs[k, 8] + dzz * dirs[k, 9])
                    if dirs[k, 10] >= 0.0 and bb > a * dirs[k, 10]:
                        continue
                    if dirs[k, 11] >= 0.0 and cc > a * dirs[k, 11]:
                        continue
                    if bb > dirs[k, 12] or cc > dirs[k, 13]:
                        continue
                for b in range(b_lo, b_hi + 1):
                    c = b * lag
                    if c - tol <= d < c + tol:
                        out_n[k, b] += 1.0
                        out_d[k, b] += d
                        out_g[k, b] += val


def accumulate_directional_numpy(xyz, z, group_end, i0, i1, dirs, lag, tol, nlags, dmax, robust,
                                 out_n, out_d, out_g):
    """:func:`accumulate_directional` with numpy: the same arguments and the same sums, bit for bit.

    Every pair ``i < j`` of the rows is held at once (memory grows with their number, so
    this suits small data sets).  The kernel's arithmetic is repeated operation by operation
    (neither contracts a multiply and an add), and each accumulator takes its pairs in the
    kernel's order (``i``, then ``j``) through ``numpy.add.at``, which adds in index order.
    """
    rows = np.arange(i0, i1, dtype=np.int64)
    counts = np.maximum(group_end[i0:i1] - rows - 1, 0)
    i = np.repeat(rows, counts)
    j = np.arange(i.size, dtype=np.int64) - np.repeat(np.cumsum(counts) - counts, counts) + i + 1
    dx = xyz[j, 0] - xyz[i, 0]
    dy = xyz[j, 1] - xyz[i, 1]
    dzz = xyz[j, 2] - xyz[i, 2]
    d2 = dx * dx + dy * dy + dzz * dzz
    # the kernel's break at dx > dmax skips the same pairs: x ascends within a group
    keep = np.flatnonzero((dx <= dmax) & (d2 <= dmax * dmax) & (d2 > _TINY2))
    i, j, dx, dy, dzz, d2 = i[keep], j[keep], dx[keep], dy[keep], dzz[keep], d2[keep]
    d = np.sqrt(d2)
    t = d / lag
    b_lo = np.maximum(0, np.floor(t - tol / lag).astype(np.int64))
    b_hi = np.minimum(nlags - 1, np.floor(t + tol / lag).astype(np.int64) + 1)
    diff = z[j] - z[i]
    val = np.sqrt(np.abs(diff)) if robust else 0.5 * diff * diff
    width = int((b_hi - b_lo).max()) + 1 if keep.size else 0
    pos, kk, bb = [], [], []
    for k in range(dirs.shape[0]):
        ok = np.ones(keep.size, dtype=bool)
        if dirs[k, 0] == 0.0:
            a = np.abs(dx * dirs[k, 1] + dy * dirs[k, 2] + dzz * dirs[k, 3])
            b = np.abs(dx * dirs[k, 4] + dy * dirs[k, 5] + dzz * dirs[k, 6])
            c = np.abs(dx * dirs[k, 7] + dy * dirs[k, 8] + dzz * dirs[k, 9])
            if dirs[k, 10] >= 0.0:
                ok &= ~(b > a * dirs[k, 10])
            if dirs[k, 11] >= 0.0:
                ok &= ~(c > a * dirs[k, 11])
            ok &= ~((b > dirs[k, 12]) | (c > dirs[k, 13]))
        for offset in range(width):
            bins = b_lo + offset
            centre = bins * lag
            hit = np.flatnonzero(ok & (bins <= b_hi) & (centre - tol <= d) & (d < centre + tol))
            pos.append(hit)
            kk.append(np.full(hit.size, k, dtype=np.int64))
            bb.append(bins[hit])
    if not pos:
        return
    pos = np.concatenate(pos)
    order = np.argsort(pos, kind="stable")  # pair order; one pair meets each accumulator once at most
    pos, kk, bb = pos[order], np.concatenate(kk)[order], np.concatenate(bb)[order]
    np.add.at(out_n, (kk, bb), 1.0)
    np.add.at(out_d, (kk, bb), d[pos])
    np.add.at(out_g, (kk, bb), val[pos])


@njit(cache=True, nogil=True)
def accumulate_map(xyz, z, i0, i1, cell, ncells, band_v, robust, out_n, out_g):
    """Variogram-map pairs of points ``[i0, i1)``; points sorted by x.

    Cell ``(row, col)`` of the ``(2 ncells + 1)`` square holds lags with
    ``dy ~ (row - ncells) * cell`` and ``dx ~ (col - ncells) * cell``; each pair
    is added at ``h`` and ``-h`` so the map is symmetric.  Pairs whose vertical
    separation exceeds ``band_v`` are skipped (3-D data).
    """
    n = xyz.shape[0]
    reach = (ncells + 0.5) * cell
    for i in range(i0, i1):
        for j in range(i + 1, n):
            dx = xyz[j, 0] - xyz[i, 0]
            if dx >= reach:
                break
            dy = xyz[j, 1] - xyz[i, 1]
            dzz = xyz[j, 2] - xyz[i, 2]
            if abs(dzz) > band_v or abs(dy) >= reach:
                continue
            if dx * dx + dy * dy + dzz * dzz <= _TINY2:
                continue
            col = int(math.floor(dx / cell + 0.5))
            row = int(math.floor(dy / cell + 0.5))
            diff = z[j] - z[i]
            val = math.sqrt(abs(diff)) if robust else 0.5 * diff * diff
            out_n[ncells + row, ncells + col] += 1.0
            out_g[ncells + row, ncells + col] += val
            out_n[ncells - row, ncells - col] += 1.0
            out_g[ncells - row, ncells - col] += val
