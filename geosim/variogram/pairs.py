"""Compiled pair accumulation for experimental variograms.

The kernels visit every pair ``i < j`` once, without ever holding a list of
pairs: points arrive sorted by group (drill hole, or one group for all) and then
by x, so the inner loop stops as soon as the x-gap exceeds the largest lag of
interest.  Each pair adds its contribution to small accumulator arrays (one row
per direction, one column per lag bin), so memory is ``O(n + directions x lags)``
whatever the number of pairs.  Compiled lazily on first call (``cache=True``).
"""
from __future__ import annotations

import math

from numba import njit

_TINY2 = 1e-18  # squared metres: coincident samples carry no direction and no lag


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
