"""Compiled text of numbers, for the large tables of :mod:`geosim.io.csvw` (a million-block model).

Two kernels, each compiled once for one set of argument types (numba's cache keeps them):

* :func:`g10_cells` writes ``format(v, ".10g")`` of each double it can compute exactly and marks
  the others for Python's own formatting;
* :func:`join_cells` drops the NUL padding of a matrix of cells, leaving the text.

Kept apart from :mod:`geosim.io.csvw` so that the small tables (cross-validation, decision
figures) are written without importing numba.
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["CELL_WIDTH", "g10_cells", "join_cells"]

#: Bytes of the widest cell :func:`g10_cells` writes: a sign, "0.00" and ten digits.
CELL_WIDTH = 15

#: Powers of ten 10**0 .. 10**12, all exact in float64.
_POW10 = 10.0 ** np.arange(13)

#: log10(2) to double precision: ``floor(n * _LOG10_2)`` equals the exact ``floor(n log10(2))`` for
#: every binary exponent ``n`` of a double (checked for -1100 <= n < 1100).
_LOG10_2 = 0.30102999566398114

#: 2**27 + 1: Veltkamp's constant, which splits a double into two halves of at most 26 bits.
_SPLIT = 134217729.0


@njit(cache=True, nogil=True)
def _product_error(a: float, b: float, p: float) -> float:
    """``a * b - p`` exactly, for ``p`` the rounded product ``a * b`` (Dekker's two-product without a
    fused multiply-add: T. J. Dekker, 1971, "A floating-point technique for extending the
    available precision", Numerische Mathematik 18, 224-242).  Zero exactly when ``p`` is."""
    c = _SPLIT * a
    ah = c - (c - a)
    al = a - ah
    c = _SPLIT * b
    bh = c - (c - b)
    bl = b - bh
    return ((ah * bh - p) + ah * bl + al * bh) + al * bl


#: What :func:`_decimal` gives for a value it cannot write exactly.
_SLOW = 99


@njit(cache=True, nogil=True)
def _decimal(w: float, digits: np.ndarray) -> int:
    """The decimal exponent ``k`` of the ten significant digits of ``w > 0``, which go into
    ``digits``; :data:`_SLOW` unless ``0.001 <= w < 1e10`` and ``w * 10**(9 - k)`` is exact."""
    if not (1e-3 <= w < 1e10):
        return _SLOW
    # k from the binary exponent (w = f 2**e, 0.5 <= f < 1): log10(w) lies in [(e - 1) log10(2), e log10(2)),
    # so this k is the decimal exponent or one less, which the test of p mends
    k = min(max(int(math.floor((math.frexp(w)[1] - 1) * _LOG10_2)), -3), 9)
    p = w * _POW10[9 - k]
    if p >= 1e10:
        k += 1
        p = w * _POW10[9 - k]
    if not (1e9 <= p < 1e10) or _product_error(w, _POW10[9 - k], p) != 0.0:
        return _SLOW
    d = np.rint(p)  # the exact product rounded half to even
    if d >= 1e10:  # 9.9999999995 and above: the next power of ten
        d = 1e9
        k += 1
        if k > 9:  # 1e10 and above print in exponent notation
            return _SLOW
    m = np.int64(d)
    high, low = m // 100_000, m % 100_000  # two halves of five digits: shorter chains of divisions
    for j in range(4, -1, -1):
        digits[j] = high % 10
        high //= 10
        digits[j + 5] = low % 10
        low //= 10
    return k


@njit(cache=True, nogil=True)
def g10_cells(a: np.ndarray, out: np.ndarray, slow: np.ndarray) -> int:
    """Write the text of ``format(a[i], ".10g")`` into ``out[i]`` (a zero-filled uint8 row of
    :data:`CELL_WIDTH` bytes, NUL after the text) where it is exact; return how many are not.

    The cell is computed for zeros (``0``, ``-0``) and for ``0.001 <= |v| < 1e10`` when
    ``|v| * 10**(9 - k)``, the integer of the ten significant digits (``k`` the decimal
    exponent), is exact in float64: rounded half to even (``numpy.rint``) it is the correctly
    rounded decimal Python prints, in fixed notation with trailing zeros dropped.  Every float32
    value qualifies (24 + 28 bits, 5**12 < 2**28), and so do doubles of short mantissa
    (coordinates such as 7512001.25).  Non-finite values are left empty; any other value sets
    ``slow[i]`` and its row stays NUL, for the caller to format.
    """
    digits = np.zeros(10, dtype=np.int64)
    n_slow = 0
    for i in range(a.size):
        v = a[i]
        if not np.isfinite(v):
            continue
        w = abs(v)
        k = _decimal(w, digits) if w != 0.0 else 0
        if k == _SLOW:
            slow[i] = True
            n_slow += 1
            continue
        pos = 0
        if np.signbit(v):
            out[i, 0] = 45  # "-"
            pos = 1
        if w == 0.0:
            out[i, pos] = 48
            continue
        last = 9
        while last > 0 and digits[last] == 0:
            last -= 1
        if k >= 0:
            last = max(last, k)  # the integer part's zeros stay
            for j in range(k + 1):
                out[i, pos] = 48 + digits[j]
                pos += 1
            if last > k:
                out[i, pos] = 46  # "."
                pos += 1
        else:
            out[i, pos] = 48
            out[i, pos + 1] = 46
            pos += 2
            for j in range(-k - 1):
                out[i, pos] = 48
                pos += 1
        for j in range(max(k + 1, 0), last + 1):
            out[i, pos] = 48 + digits[j]
            pos += 1
    return n_slow


@njit(cache=True, nogil=True)
def join_cells(cells: np.ndarray, out: np.ndarray) -> int:
    """Copy the non-NUL bytes of the C-ordered uint8 matrix ``cells`` into ``out`` (at least
    ``cells.size`` long), in order; return how many."""
    flat = cells.ravel()
    n = 0
    for i in range(flat.size):
        b = flat[i]
        if b != 0:
            out[n] = b
            n += 1
    return n
