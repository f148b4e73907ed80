"""Compiled Cholesky factorization and triangular solves for small dense systems.

Every local kriging and simulation system in geosim is a symmetric covariance
matrix factored as ``A = L L^T``.  The kernels here are written for C-ordered
(row-major) arrays and are compiled lazily by numba the first time they run
(``cache=True`` keeps the machine code between sessions); importing this module
compiles nothing.

The factorization is right-looking and reads and writes the lower triangle only:
at step ``k`` the pivot becomes ``l_kk = sqrt(a_kk)``, the column below it is
divided by ``l_kk``, and the trailing lower triangle is updated,
``A22 -= l21 l21^T``.  For the row-major layout used everywhere in geosim the
columns are processed in panels of four: each factored column is copied into a
contiguous row of the work buffer, and the trailing rows are then updated once
per panel with a rank-4 update whose inner loop runs along a matrix row and the
work rows (contiguous, vectorizable, four times fewer passes over the trailing
block than one column at a time).  Measured in tests/benchmarks/bench_kriging.py
it is as fast as a row-by-row (left-looking) order at order 16 and faster from
order 32.  The factorization exists only while every pivot stays positive; the
kernel reports the first pivot that is not, and the Python wrapper turns that
into :class:`geosim.errors.NotPositiveDefiniteError`.
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

from .errors import NotPositiveDefiniteError


PANEL = 4  # columns factored per sweep of the trailing block


@njit(cache=True, nogil=True, fastmath={"contract"})
def chol_partial(a, n, k, work, tol):
    """Factor the first ``k`` pivots of the leading ``n x n`` block of ``a`` (right-looking).

    Columns ``0 .. k-1`` of the lower triangle become those of ``L``; the trailing
    lower triangle (rows and columns ``k .. n-1``) becomes the Schur complement
    ``A22 - L21 L21^T``.  Bordering a covariance matrix ``C`` (order ``k``) with extra
    rows, say ``c^T`` and ``z^T``, therefore gives in one sweep ``L^{-1} c`` and
    ``L^{-1} z`` in those rows and, in the trailing block, ``a_kk - |L^{-1} c|^2`` and
    ``-(L^{-1} z)^T (L^{-1} c)``: a simple-kriging variance and (minus) its estimate,
    without separate triangular solves.

    Parameters
    ----------
    a : float64[:, ::1]
        Symmetric matrix; only the lower triangle is read and written; the strict
        upper triangle is left untouched.
    n : int
        Order of the bordered system (``a`` may be larger, as a reusable buffer).
    k : int
        Pivots to factor, ``0 <= k <= n``.
    work : float64[::1]
        Scratch vector of length >= ``4 * n`` (:data:`PANEL` contiguous column copies).
    tol : float
        A pivot ``<= tol`` stops the factorization (use 0.0 for the strict test).

    Returns
    -------
    int
        -1 on success, otherwise the index ``c`` of the first pivot that was
        ``<= tol`` (or NaN); its value (the Schur-complement pivot) is left in
        ``a[c, c]`` and rows ``< c`` hold the factor of the leading block.
    """
    if work.shape[0] < PANEL * n:
        raise ValueError("chol_partial: work must hold at least 4 * n values")
    w = work[:PANEL * n].reshape((PANEL, n))
    start = 0
    while start < k:
        e = min(start + PANEL, k)
        # factor the panel's columns, each updating the later panel columns (right-looking)
        for c in range(start, e):
            p = a[c, c]
            if not (p > tol):  # also catches NaN
                return c
            d = math.sqrt(p)
            a[c, c] = d
            inv = 1.0 / d
            wc = w[c - start]
            for i in range(c + 1, n):
                v = a[i, c] * inv
                a[i, c] = v
                wc[i] = v
            for c2 in range(c + 1, e):
                lc = wc[c2]
                for i in range(c2, n):
                    a[i, c2] -= wc[i] * lc
        if e == n:
            return -1
        for r in range(e - start, PANEL):  # a short last panel: unused copies contribute zero
            for i in range(e, n):
                w[r, i] = 0.0
        w0 = w[0]
        w1 = w[1]
        w2 = w[2]
        w3 = w[3]
        for i in range(e, n):
            u0 = w0[i]
            u1 = w1[i]
            u2 = w2[i]
            u3 = w3[i]
            row = a[i]
            for j in range(e, i + 1):
                row[j] -= u0 * w0[j] + u1 * w1[j] + u2 * w2[j] + u3 * w3[j]
        start = e
    return -1


@njit(cache=True, nogil=True)
def chol_inplace(a, n, work, tol):
    """Factor the leading ``n x n`` block of ``a`` in place (lower triangle, right-looking).

    The whole factorization of :func:`chol_partial` (``k = n``), with the same
    arguments, work size (``4 * n``) and return value: -1 on success, else the
    first pivot ``<= tol``.  On success the lower triangle holds ``L``.
    """
    return chol_partial(a, n, n, work, tol)


@njit(cache=True, nogil=True)
def forward_inplace(l, n, b):
    """Solve ``L y = b`` in place (``b`` becomes ``y``); ``L`` is lower triangular."""
    for i in range(n):
        s = b[i]
        row = l[i]
        for j in range(i):
            s -= row[j] * b[j]
        b[i] = s / row[i]


@njit(cache=True, nogil=True)
def backward_t_inplace(l, n, b):
    """Solve ``L^T x = b`` in place, reading ``L`` by rows (column sweep)."""
    for i in range(n - 1, -1, -1):
        b[i] = b[i] / l[i, i]
        bi = b[i]
        row = l[i]
        for j in range(i):
            b[j] -= row[j] * bi


# From this order on, cholesky() hands the matrix to LAPACK (scipy).  Measured in
# tests/benchmarks/bench_kriging.py with single-threaded BLAS (OPENBLAS_NUM_THREADS=1):
# the compiled loop was faster at n = 32 (LAPACK/compiled time 1.2), LAPACK dpotrf
# called from Python faster from n = 64 (1.2-1.8x), 3x at 128, 5x at 256.  Threaded
# BLAS on a busy machine was erratic from n = 128 (its threads compete for the cores).
LAPACK_ORDER = 64


def cholesky(a: np.ndarray, *, tol: float = 0.0, ids=None, context: str | None = None) -> np.ndarray:
    """Lower Cholesky factor of a symmetric positive definite matrix.

    Small matrices are factored by the compiled :func:`chol_inplace`; matrices of
    order >= :data:`LAPACK_ORDER` by LAPACK ``dpotrf`` through scipy.  Both read
    the lower triangle only and fail the same way.

    Parameters
    ----------
    a : (n, n) array_like
        Symmetric matrix; only its lower triangle is used.
    tol : float, default 0.0
        Pivots ``<= tol`` are treated as failure.
    ids : sequence, optional
        Labels of the rows (sample ids), used in the error message.
    context : str, optional
        Where the matrix came from, used in the error message.

    Returns
    -------
    (n, n) ndarray
        ``L`` with zeros above the diagonal, so that ``L @ L.T == a``.

    Raises
    ------
    NotPositiveDefiniteError
        If a pivot is not positive (or not above ``tol``).  The error names the
        failing pivot, its value and, when ``ids`` is given, the row's label.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim.linalg
    >>> geosim.linalg.cholesky(np.array([[4.0, 2.0], [2.0, 5.0]]))
    array([[2., 0.],
           [1., 2.]])
    """
    work_a = np.array(a, dtype=np.float64, order="C", copy=True)
    if work_a.ndim != 2 or work_a.shape[0] != work_a.shape[1]:
        raise ValueError(f"expected a square matrix, got shape {work_a.shape}")
    n = work_a.shape[0]
    if n >= LAPACK_ORDER:
        factor = _lapack_lower(work_a, float(tol))
        if factor is not None:
            return factor
        # failed: the compiled loop below finds the same pivot and its value for the message
    k = chol_inplace(work_a, n, np.empty(PANEL * n), float(tol))
    if k >= 0:
        involved = None
        if ids is not None:
            involved = [ids[k]]
        raise NotPositiveDefiniteError(k, work_a[k, k], involved, context)
    return np.tril(work_a)


def _lapack_lower(a: np.ndarray, tol: float) -> np.ndarray | None:
    """LAPACK lower factor of ``a`` (not modified), or None if any pivot is ``<= tol``."""
    from scipy.linalg import lapack

    factor, info = lapack.dpotrf(a, lower=1, clean=1, overwrite_a=0)
    if info != 0:
        return None
    if tol > 0.0 and not np.all(np.diag(factor) ** 2 > tol):
        return None
    return factor


def solve_spd(l: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve ``A x = b`` given the lower factor ``L`` of ``A`` (``b`` a vector)."""
    x = np.array(b, dtype=np.float64, copy=True)
    n = l.shape[0]
    lc = np.ascontiguousarray(l, dtype=np.float64)
    forward_inplace(lc, n, x)
    backward_t_inplace(lc, n, x)
    return x
