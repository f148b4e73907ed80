"""Compiled passes over a whole realization: lookups in a short sorted table, order statistics.

Each realization a worker finishes (a million nodes, say) is looked up in the
table of a transform (a few thousand data scores) once for its back-transform and
once for its Kolmogorov-Smirnov distance to the data, and its quantiles are kept
for the histogram-reproduction plot.  A binary search per value costs a dozen
unpredictable branches (about 100 ns a value here), and a partition for 201
quantiles several passes.  Here:

* :func:`interp` is :func:`numpy.interp` with its default ``left`` and
  ``right``, bit for bit: a value is first mapped to one of a few equal-width
  buckets spanning the table, whose first knot was found once per table, then
  stepped to its knot exactly by comparisons (so the bucket arithmetic's rounding
  does not matter), and the same arithmetic follows (slope, product, sum; the same
  fallbacks where they give NaN); NaN in, NaN out.
* :func:`knot_counts` counts values below and at each knot the same way: the step
  function a two-sample Kolmogorov-Smirnov distance needs
  (:func:`geosim.validation.ks_distance`).
* :func:`order_statistics` finds chosen ranks by radix selection on the values'
  bits, and :func:`quantiles` is :func:`numpy.quantile` (type 7) from them, with
  numpy's own interpolation steps.

Inputs below :data:`COMPILED_FROM` values go to numpy (nothing compiled for small
arrays; the results are the same).  The loops are compiled on first use (numba,
``cache=True``); ``import geosim`` does not import this module.
"""
from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["COMPILED_FROM", "interp", "knot_counts"]

#: Inputs of at least this many values use the compiled loops; smaller ones numpy.
COMPILED_FROM = 65536
_PER_KNOT = 2  # buckets per knot: about one knot per bucket where the knots are densest in normal scores


def _buckets(xp: np.ndarray) -> tuple[np.ndarray, float, float]:
    """The first knot of each bucket (the last knot at or below its left edge) and the map
    ``bucket = (x - lo) * scale``; only a starting point, so its rounding does not matter."""
    lo, hi = float(xp[0]), float(xp[-1])
    m = max(1, _PER_KNOT * xp.size)
    scale = m / (hi - lo) if hi > lo else 0.0
    edges = lo + np.arange(m) * ((hi - lo) / m)
    start = np.maximum(np.searchsorted(xp, edges, side="right") - 1, 0).astype(np.int64)
    return start, lo, scale


@njit(cache=True, nogil=True, inline="always")
def _locate(v, xp, start, lo, scale):
    """The last knot ``j`` with ``xp[j] <= v``, for ``xp[0] <= v <= xp[-1]``."""
    m = start.size
    b = int((v - lo) * scale)
    b = 0 if b < 0 else (m - 1 if b >= m else b)
    j = start[b]
    last = xp.size - 1
    while j > 0 and xp[j] > v:
        j -= 1
    while j < last and xp[j + 1] <= v:
        j += 1
    return j


@njit(cache=True, nogil=True)
def _interp_loop(x, xp, fp, slopes, start, lo, scale, out):
    last = xp.size - 1
    for i in range(x.size):
        v = x[i]
        if v != v:
            out[i] = v
        elif v > xp[last]:
            out[i] = fp[last]
        elif v < xp[0]:
            out[i] = fp[0]
        else:
            j = _locate(v, xp, start, lo, scale)
            if j == last or xp[j] == v:
                out[i] = fp[j]
            else:
                # numpy's arithmetic and its fallbacks where one direction gives NaN
                slope = slopes[j]
                r = slope * (v - xp[j]) + fp[j]
                if r != r:
                    r = slope * (v - xp[j + 1]) + fp[j + 1]
                    if r != r and fp[j] == fp[j + 1]:
                        r = fp[j]
                out[i] = r


@njit(cache=True, nogil=True)
def _count_loop(x, xp, start, lo, scale, between, equal):
    last = xp.size - 1
    n = 0
    for i in range(x.size):
        v = x[i]
        if v != v:
            continue
        n += 1
        if v < xp[0]:
            between[0] += 1
        elif v > xp[last]:
            between[last + 1] += 1
        else:
            j = _locate(v, xp, start, lo, scale)
            between[j + 1] += 1
            if xp[j] == v:
                equal[j] += 1
    return n


def interp(x, xp: np.ndarray, fp: np.ndarray) -> np.ndarray:
    """:func:`numpy.interp` (default ``left``, ``right``) of a 1-D float array, bit for bit.

    Examples
    --------
    >>> import numpy as np, geosim.fieldstats
    >>> geosim.fieldstats.interp(np.array([-1.0, 0.5, 3.0, np.nan]), np.array([0.0, 1.0, 2.0]),
    ...                     np.array([10.0, 20.0, 40.0])).tolist()
    [10.0, 15.0, 40.0, nan]
    """
    x = np.ascontiguousarray(x, dtype=np.float64)
    xp = np.ascontiguousarray(xp, dtype=np.float64)
    fp = np.ascontiguousarray(fp, dtype=np.float64)
    if x.ndim != 1 or x.size < COMPILED_FROM or xp.size < 2:
        return np.interp(x, xp, fp)
    if xp.shape != fp.shape:
        raise ValueError(f"xp and fp must have the same length, got {xp.size} and {fp.size}")
    start, lo, scale = _buckets(xp)
    out = np.empty_like(x)
    with np.errstate(divide="ignore", invalid="ignore"):  # numpy's slopes, also where knots repeat
        slopes = (fp[1:] - fp[:-1]) / (xp[1:] - xp[:-1])
    _interp_loop(x, xp, fp, slopes, start, lo, scale, out)
    return out


def knot_counts(x: np.ndarray, knots: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """How many values of ``x`` lie below and at each of the sorted, distinct ``knots``.

    Returns ``(below, at, n)``: ``below[k]`` values are smaller than ``knots[k]``
    (``below[K]``: every value), ``at[k]`` equal to it, and ``n`` values are not NaN
    (NaN values are left out).

    Examples
    --------
    >>> import numpy as np, geosim.fieldstats
    >>> below, at, n = geosim.fieldstats.knot_counts(np.array([0.5, 1.0, 1.0, 3.0, np.nan]), np.array([1.0, 2.0]))
    >>> below.tolist(), at.tolist(), n
    ([1, 3, 4], [2, 0], 4)
    """
    x = np.ascontiguousarray(x, dtype=np.float64).ravel()
    knots = np.ascontiguousarray(knots, dtype=np.float64)
    k = knots.size
    if x.size < COMPILED_FROM or k < 2:
        x = np.sort(x[~np.isnan(x)])
        below = np.searchsorted(x, knots, side="left")
        at = np.searchsorted(x, knots, side="right") - below
        return np.append(below, x.size), at, int(x.size)
    start, lo, scale = _buckets(knots)
    between = np.zeros(k + 1, dtype=np.int64)  # between[j + 1]: values in [knots[j], knots[j + 1])
    at = np.zeros(k, dtype=np.int64)
    n = _count_loop(x, knots, start, lo, scale, between, at)
    return np.cumsum(between), at, int(n)


# -- order statistics ----------------------------------------------------------------------------

_SHIFTS = np.array([53, 42, 31, 20, 9, 0], dtype=np.uint64)  # 11-bit digits of a 64-bit key, high first
_SMALL = 24  # segments this short are finished by insertion sort


@njit(cache=True, nogil=True)
def _select_loop(x, ranks, shifts, out):
    """``out[t]`` = the key of the ``ranks[t]``-th smallest of ``x`` (sorted ``ranks``): the values'
    bits as unsigned integers in the values' order (negative: all bits flipped; positive: the
    sign bit set; one zero), then most-significant-digit radix selection: only the digit
    buckets holding a wanted rank are followed, each placed at the positions of its ranks."""
    n = x.size
    bits = x.view(np.uint64)
    sign = np.uint64(1) << np.uint64(63)
    zero, one_bit = np.uint64(0), np.uint64(63)
    keys = np.empty(n, dtype=np.uint64)
    for i in range(n):
        k = bits[i]
        if k == sign:  # -0.0
            k = zero
        keys[i] = k ^ ((zero - (k >> one_bit)) | sign)
    bufs = (keys, np.empty(n, dtype=np.uint64))
    depth = shifts.size
    cap = 8 * ranks.size + 8
    s_lo = np.empty(cap, np.int64)
    s_hi = np.empty(cap, np.int64)
    s_lvl = np.empty(cap, np.int64)
    s_buf = np.empty(cap, np.int64)
    s_t0 = np.empty(cap, np.int64)
    s_t1 = np.empty(cap, np.int64)
    top = 0
    s_lo[0], s_hi[0], s_lvl[0], s_buf[0], s_t0[0], s_t1[0] = 0, n, 0, 0, 0, ranks.size
    top = 1
    hist = np.zeros(2048, np.int64)
    start = np.zeros(2049, np.int64)
    pos = np.zeros(2048, np.int64)
    needed = np.zeros(2048, np.bool_)
    mask = np.uint64(2047)
    while top > 0:
        top -= 1
        lo, hi, lvl, b, t0, t1 = s_lo[top], s_hi[top], s_lvl[top], s_buf[top], s_t0[top], s_t1[top]
        src = bufs[b]
        if hi - lo <= _SMALL or lvl == depth:
            if lvl < depth:  # insertion sort of the short segment, in place
                for i in range(lo + 1, hi):
                    v = src[i]
                    j = i - 1
                    while j >= lo and src[j] > v:
                        src[j + 1] = src[j]
                        j -= 1
                    src[j + 1] = v
            for t in range(t0, t1):  # after the last digit every key of a segment is the same
                out[t] = src[ranks[t]] if lvl < depth else src[lo]
            continue
        shift = shifts[lvl]
        hist[:] = 0
        for i in range(lo, hi):
            hist[np.intp((src[i] >> shift) & mask)] += 1
        start[0] = lo
        for d in range(2048):
            start[d + 1] = start[d] + hist[d]
        needed[:] = False
        t = t0
        d = 0
        while t < t1:
            while start[d + 1] <= ranks[t]:
                d += 1
            u = t
            while u < t1 and ranks[u] < start[d + 1]:
                u += 1
            needed[d] = True
            s_lo[top], s_hi[top], s_lvl[top], s_t0[top], s_t1[top] = start[d], start[d + 1], lvl + 1, t, u
            s_buf[top] = b if hist[d] == hi - lo else 1 - b  # one bucket holds all: nothing to move
            top += 1
            t = u
        if top > 0 and s_buf[top - 1] == b and hist[d] == hi - lo:
            continue
        dst = bufs[1 - b]
        for d in range(2048):
            pos[d] = start[d]
        for i in range(lo, hi):
            d = np.intp((src[i] >> shift) & mask)
            if needed[d]:
                dst[pos[d]] = src[i]
                pos[d] += 1


def order_statistics(x: np.ndarray, ranks) -> np.ndarray:
    """The ``ranks``-th smallest values of ``x`` (0 = the smallest), without sorting ``x``.

    ``x`` is a 1-D float array without NaN; ``-0.0`` counts as ``0.0``.  Radix selection
    on the bits of the values (ordered as integers), compiled; about two passes over
    ``x`` whatever the number of ranks.

    Examples
    --------
    >>> import numpy as np, geosim.fieldstats
    >>> geosim.fieldstats.order_statistics(np.array([3.0, -1.0, 2.0, 7.0]), [0, 2, 3]).tolist()
    [-1.0, 3.0, 7.0]
    """
    x = np.ascontiguousarray(x, dtype=np.float64).ravel()
    ranks = np.asarray(ranks, dtype=np.int64)
    order = np.argsort(ranks, kind="stable")
    wanted = ranks[order]
    if wanted.size and (wanted[0] < 0 or wanted[-1] >= x.size):
        raise ValueError(f"ranks must lie in [0, {x.size}), got {wanted[0]} ... {wanted[-1]}")
    found = np.empty(wanted.size, dtype=np.uint64)
    _select_loop(x, wanted, _SHIFTS, found)
    positive = (found >> np.uint64(63)).astype(bool)
    values = np.where(positive, found & np.uint64((1 << 63) - 1), ~found).view(np.float64)
    out = np.empty_like(values)
    out[order] = values
    return out


def quantiles(x: np.ndarray, q: np.ndarray) -> np.ndarray:
    """:func:`numpy.quantile` (method ``"linear"``, Hyndman and Fan 1996 type 7) of a 1-D float
    array without NaN, bit for bit, from :func:`order_statistics` instead of a partition.

    numpy's own steps, in its order: virtual index ``(n - 1) q``, its floor and the next
    order statistic (both the largest at or past ``n - 1``), ``gamma`` the distance to the
    floor, and its two-sided linear interpolation (from the lower value below ``gamma =
    0.5``, from the upper one at or above).

    Examples
    --------
    >>> import numpy as np, geosim.fieldstats
    >>> geosim.fieldstats.quantiles(np.array([4.0, 1.0, 3.0, 2.0]), np.array([0.0, 0.5, 1.0])).tolist()
    [1.0, 2.5, 4.0]
    """
    x = np.ascontiguousarray(x, dtype=np.float64).ravel()
    q = np.asarray(q, dtype=np.float64)
    n = x.size
    if n < COMPILED_FROM:
        return np.quantile(x, q)
    virtual = (n - 1) * q
    previous = np.floor(virtual)
    following = previous + 1
    above = virtual >= n - 1
    previous[above] = -1
    following[above] = -1
    previous, following = previous.astype(np.intp), following.astype(np.intp)
    gamma = np.asanyarray(virtual - previous, dtype=virtual.dtype)
    ranks = np.unique(np.concatenate([previous, following]) % n)
    stats = order_statistics(x, ranks)
    a, b = stats[np.searchsorted(ranks, previous % n)], stats[np.searchsorted(ranks, following % n)]
    diff = b - a
    out = np.add(a, diff * gamma)
    np.subtract(b, diff * (1 - gamma), out=out, where=gamma >= 0.5)
    return out


def warm_up() -> None:
    """Compile the loops (numba's cache keeps them) on tiny inputs of the types every run passes, for a
    compiling process ahead of the workers (:func:`geosim.simulation.runner.compile_modules_ahead`)."""
    xp = np.array([0.0, 1.0, 2.0])
    x = np.array([-1.0, 0.5, 1.0, 3.0, np.nan])
    start, lo, scale = _buckets(xp)
    _interp_loop(x, xp, xp, np.ones(2), start, lo, scale, np.empty_like(x))
    _count_loop(x, xp, start, lo, scale, np.zeros(4, dtype=np.int64), np.zeros(3, dtype=np.int64))
    _select_loop(xp, np.array([0, 2], dtype=np.int64), _SHIFTS, np.empty(2, dtype=np.uint64))
