"""Compiled covariance evaluation for the kriging and simulation kernels.

The kernels receive a model as the tuple returned by
:meth:`geosim.variogram.Model.compiled` and call :func:`cov_lag` for each lag.
Compiled lazily on first use (``cache=True``); importing compiles nothing.
"""
from __future__ import annotations

import math

from numba import njit

from .codes import CUBIC, EXPONENTIAL, GAUSSIAN, NUGGET, SPHERICAL, TABULATED

ZERO_LAG2 = 1e-18  # squared metres: lags shorter than 1 nm are "the same place"


# not inline="always": scalars only, so a call costs no reference counting and LLVM inlines it
# into the callers' loops anyway, while numba's inlining copied its IR into every site (a tenth
# of the engine kernel's IR, compiled again in each kernel on a first run)
@njit(cache=True, nogil=True)
def analytic_correlation(code, r):
    """Unit correlation of a built-in closed-form structure at reduced distance ``r``.

    Spherical, exponential, gaussian and cubic; 0.0 for any other code (the nugget and
    tabulated structures are handled by the callers).
    """
    if code == SPHERICAL:
        if r < 1.0:
            return 1.0 - r * (1.5 - 0.5 * r * r)
    elif code == EXPONENTIAL:
        return math.exp(-3.0 * r)
    elif code == GAUSSIAN:
        return math.exp(-3.0 * r * r)
    elif code == CUBIC:
        if r < 1.0:
            r2 = r * r
            return 1.0 - r2 * (7.0 - r * (8.75 - r2 * (3.5 - 0.75 * r2)))
    return 0.0


@njit(cache=True, nogil=True, inline="always")
def tabulated_correlation(tables, steps, j, r):
    """Correlation of tabulated structure ``j`` at reduced distance ``r`` (linear interpolation)."""
    t = r / steps[j]
    i = int(t)
    last = tables.shape[1] - 1
    if i >= last:
        return tables[j, last]
    f = t - i
    return (1.0 - f) * tables[j, i] + f * tables[j, i + 1]


# inline="always": kernels call this per matrix entry; a real call costs a reference-count
# round trip on each of cm's six arrays, 7x the covariance itself (tests/benchmarks/bench_kriging.py)
@njit(cache=True, nogil=True, inline="always")
def cov_lag(cm, dx, dy, dz):
    """Covariance of the compiled model ``cm`` at the lag vector (dx, dy, dz)."""
    codes, sills, mats, params, tables, steps = cm
    c = 0.0
    zero = dx * dx + dy * dy + dz * dz <= ZERO_LAG2
    for j in range(codes.shape[0]):
        code = codes[j]
        s = sills[j]
        if code == NUGGET:
            if zero:
                c += s
            continue
        u = mats[j, 0, 0] * dx + mats[j, 0, 1] * dy + mats[j, 0, 2] * dz
        v = mats[j, 1, 0] * dx + mats[j, 1, 1] * dy + mats[j, 1, 2] * dz
        w = mats[j, 2, 0] * dx + mats[j, 2, 1] * dy + mats[j, 2, 2] * dz
        r = math.sqrt(u * u + v * v + w * w)
        if code == TABULATED:
            c += s * tabulated_correlation(tables, steps, j, r)
        else:
            c += s * analytic_correlation(code, r)
    return c


@njit(cache=True, nogil=True)
def cov_matrix_into(cm, a, b, out):
    """Fill ``out[i, j] = C(a[i] - b[j])`` for 3-column coordinate arrays."""
    for i in range(a.shape[0]):
        for j in range(b.shape[0]):
            out[i, j] = cov_lag(cm, a[i, 0] - b[j, 0], a[i, 1] - b[j, 1], a[i, 2] - b[j, 2])
