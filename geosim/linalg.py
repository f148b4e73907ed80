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
pivots are taken four at a time (a 4 x 4 tile): the rows below a factored tile
are solved against it with its ten entries held in registers, and the trailing
lower triangle then takes one rank-4 update per tile, row by row (four times
fewer passes over it than one pivot at a time).  The factorization exists only
while every pivot stays positive; the kernel reports the first pivot that is
not, and the Python wrapper turns that into
:class:`geosim.errors.NotPositiveDefiniteError`.
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

from .errors import NotPositiveDefiniteError


TILE = 4  # pivots factored per sweep of the trailing block


@njit(cache=True, nogil=True, fastmath={"contract"})
def chol_partial(a, n, k, tol):
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
    tol : float
        A pivot ``<= tol`` stops the factorization (use 0.0 for the strict test).

    Returns
    -------
    int
        -1 on success, otherwise the index ``c`` of the first pivot that was
        ``<= tol`` (or NaN); its value (the Schur-complement pivot) is left in
        ``a[c, c]`` and rows ``< c`` hold the factor of the leading block.

    Notes
    -----
    Pivots are taken :data:`TILE` (4) at a time.  The 4 x 4 diagonal tile is factored
    column by column; every row below it then solves ``x L_tile^T = row`` with the four
    factor entries held in registers, and the trailing lower triangle takes one rank-4
    update, row by row.  Measured while writing it (orders 16 and 32, best of 15
    alternating runs), this was about 20 % faster than the same rank-4 scheme that
    first copied each factored column into a contiguous work buffer, and 25 % faster
    than a row-by-row (left-looking) order; tests/benchmarks/bench_kriging.py prints
    its time against LAPACK.  When ``k`` is not a multiple of 4 the last one to three
    pivots are taken one at a time.
    """
    o = 0
    while o < k:
        e = min(o + TILE, k)
        full = e - o == TILE
        # the diagonal tile, column by column; a short last tile (k not a multiple of 4)
        # updates every row below it the same way and ends the factorization
        end = e if full else n
        for c in range(o, e):
            p = a[c, c]
            if not (p > tol):  # also catches NaN
                return c
            d = math.sqrt(p)
            a[c, c] = d
            inv = 1.0 / d
            for i in range(c + 1, end):
                a[i, c] *= inv
            for i in range(c + 1, end):
                lic = a[i, c]
                for j in range(c + 1, i + 1):
                    a[i, j] -= lic * a[j, c]
        if not full:
            break
        l10 = a[o + 1, o]
        l20 = a[o + 2, o]
        l21 = a[o + 2, o + 1]
        l30 = a[o + 3, o]
        l31 = a[o + 3, o + 1]
        l32 = a[o + 3, o + 2]
        i0 = 1.0 / a[o, o]
        i1 = 1.0 / a[o + 1, o + 1]
        i2 = 1.0 / a[o + 2, o + 2]
        i3 = 1.0 / a[o + 3, o + 3]
        # the rows below: x L_tile^T = row, by forward substitution
        for r in range(e, n):
            x0 = a[r, o] * i0
            x1 = (a[r, o + 1] - l10 * x0) * i1
            x2 = (a[r, o + 2] - l20 * x0 - l21 * x1) * i2
            a[r, o] = x0
            a[r, o + 1] = x1
            a[r, o + 2] = x2
            a[r, o + 3] = (a[r, o + 3] - l30 * x0 - l31 * x1 - l32 * x2) * i3
        # the trailing lower triangle: one rank-4 update
        for r in range(e, n):
            u0 = a[r, o]
            u1 = a[r, o + 1]
            u2 = a[r, o + 2]
            u3 = a[r, o + 3]
            for j in range(e, r + 1):
                a[r, j] -= u0 * a[j, o] + u1 * a[j, o + 1] + u2 * a[j, o + 2] + u3 * a[j, o + 3]
        o = e
    return -1


@njit(cache=True, nogil=True)
def chol_inplace(a, n, tol):
    """Factor the leading ``n x n`` block of ``a`` in place (lower triangle, right-looking).

    The whole factorization of :func:`chol_partial` (``k = n``), with the same return
    value: -1 on success, else the first pivot ``<= tol``.  On success the lower
    triangle holds ``L``.
    """
    return chol_partial(a, n, n, tol)


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


def warm_up() -> None:
    """Compile the factorization (numba's cache keeps it) with the argument types the kriging and
    simulation kernels call it with.  A first run compiles it ahead before anything else in the
    engine's process (:func:`geosim.pipeline.run_job`), so the kriging kernel, compiled at the same
    time in another process, loads it rather than compiling it too."""
    chol_partial(np.eye(2), 2, 2, 0.0)


# From this order on, cholesky() hands the matrix to LAPACK (scipy).  Measured in
# tests/benchmarks/bench_kriging.py with single-threaded BLAS (OPENBLAS_NUM_THREADS=1):
# the compiled tiles were faster up to n = 32 (LAPACK/compiled time 4.5 at 16, 1.6 at
# 32, call overhead included), LAPACK dpotrf called from Python faster from n = 64
# (1.2x), 2x at 128, 3.4x at 256.  Threaded BLAS on a busy machine was erratic from
# n = 128 (its threads compete for the cores).
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
    k = chol_inplace(work_a, n, float(tol))
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
