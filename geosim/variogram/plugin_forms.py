"""How structures without a built-in closed form are evaluated outside the kernels.

The kriging and simulation kernels are fixed functions, compiled once and cached
on disk; a plugin cannot add code to them.  Inside those kernels every structure
without a built-in closed form is read from a table of its correlation
(:meth:`geosim.variogram.Model.compiled`, linear interpolation in 4097 points),
which costs the same whatever the structure.  Outside them geosim evaluates
structures directly: covariance matrices (:meth:`~geosim.variogram.Model.cov_matrix`:
the exact engine, global kriging, the structure checks), model fitting and the
table itself.  A structure that sets ``numba_correlation``, a numba-compiled scalar
function ``rho(r, param)``, is evaluated there by compiled loops that call it
through a function pointer (:func:`add_covariance`, :func:`evaluate_compiled`;
compiled once for all plugins and cached); a structure with only a numpy
``correlation`` goes through numpy lag arrays, which is slower (see
``tests/benchmarks/bench_plugins.py``), and geosim says so once per structure kind
per process (:func:`note_numpy_only`).
"""
from __future__ import annotations

import contextlib
import logging

import numpy as np

log = logging.getLogger(__name__)

_numpy_only_noted: set[str] = set()
_correlation_kernel = None  # (correlation loop, covariance loop)
_quiet = False


def has_compiled_form(cls: type) -> bool:
    """Whether a structure class supplies ``numba_correlation`` (see the module notes)."""
    return getattr(cls, "numba_correlation", None) is not None


def evaluate_compiled(function, r, param: float = 0.0) -> np.ndarray:
    """Evaluate a compiled scalar correlation ``function(r, param)`` at every ``r``.

    Parameters
    ----------
    function : numba dispatcher
        An ``@numba.njit`` function of two float64 arguments returning float64.
    r : array_like
        Reduced distances.
    param : float
        The structure's shape parameter (ignored by structures without one).
    """
    r = np.asarray(r, dtype=np.float64)
    flat = np.ascontiguousarray(r).ravel()
    out = np.empty_like(flat)
    _kernels()[0](function, flat, float(param), out)
    return out.reshape(r.shape)


def add_covariance(structure, a: np.ndarray, b: np.ndarray, out: np.ndarray) -> None:
    """Add the covariances of a structure with a compiled form between point sets to ``out``.

    ``out[i, j] += sill * rho(|M (a_i - b_j)|)`` in one compiled loop over the pairs,
    without the lag arrays of the numpy path; :meth:`geosim.variogram.Model.cov_matrix`
    uses it for every structure that sets ``numba_correlation``.

    Parameters
    ----------
    structure : Structure
        An instance whose class sets ``numba_correlation``.
    a, b : (n, d) and (m, d) arrays
        Coordinates, d in {1, 2, 3}.
    out : (n, m) float64 C-contiguous array
    """
    function = type(structure).numba_correlation
    if function is None:
        raise ValueError(f"structure {structure.kind!r} has no compiled form (numba_correlation)")
    if a.shape[1] == 1:  # 1-D lags run along the major axis, as in Anisotropy.reduced_distance
        mat = np.zeros((3, 3))
        mat[0, 0] = 1.0 / structure.anisotropy.ranges[0]
    else:
        mat = np.ascontiguousarray(structure.anisotropy.matrix())
    _kernels()[1](function, mat, float(structure.sill), float(structure.param), as3(a), as3(b), out)


def as3(points: np.ndarray) -> np.ndarray:
    """Points ``(n, d)`` padded with zero columns to ``(n, 3)``, as the compiled loops take them."""
    p3 = np.zeros((points.shape[0], 3))
    p3[:, :points.shape[1]] = points
    return p3


def _kernels():
    """The two compiled loops, compiled on first use (cached on disk)."""
    global _correlation_kernel
    if _correlation_kernel is None:
        from numba import njit, types

        @njit(cache=True, nogil=True)
        def correlation_loop(function, r, param, out):
            for i in range(r.size):
                out[i] = function(r[i], param)

        @njit(cache=True, nogil=True)
        def covariance_loop(function, mat, sill, param, a, b, out):
            for i in range(a.shape[0]):
                for j in range(b.shape[0]):
                    dx = a[i, 0] - b[j, 0]
                    dy = a[i, 1] - b[j, 1]
                    dz = a[i, 2] - b[j, 2]
                    u = mat[0, 0] * dx + mat[0, 1] * dy + mat[0, 2] * dz
                    v = mat[1, 0] * dx + mat[1, 1] * dy + mat[1, 2] * dz
                    w = mat[2, 0] * dx + mat[2, 1] * dy + mat[2, 2] * dz
                    out[i, j] += sill * function(np.sqrt(u * u + v * v + w * w), param)

        # typed with a function pointer rather than per plugin, so each loop compiles once
        f64 = types.float64
        pointer = types.FunctionType(f64(f64, f64))
        correlation_loop.compile(types.void(pointer, f64[::1], f64, f64[::1]))
        covariance_loop.compile(types.void(pointer, f64[:, ::1], f64, f64, f64[:, ::1], f64[:, ::1],
                                           f64[:, ::1]))
        for loop in (correlation_loop, covariance_loop):
            loop.disable_compile()
        _correlation_kernel = (correlation_loop, covariance_loop)
    return _correlation_kernel


def note_numpy_only(cls: type, where: str = "") -> None:
    """Warn, once per structure kind per process, that ``cls`` has only a numpy form."""
    kind = getattr(cls, "kind", cls.__name__)
    if kind in _numpy_only_noted or has_compiled_form(cls) or _quiet:
        return
    _numpy_only_noted.add(kind)
    source = f" ({where})" if where else ""
    log.warning(
        "covariance structure %r%s supplies only a numpy form: inside the compiled kriging and simulation "
        "kernels it is read from a table like every non-built-in structure, but wherever geosim evaluates it "
        "directly (covariance matrices of the exact engine and of global kriging, fitting) it runs through "
        "numpy, which is slower. Its author can add numba_correlation(r, param) for compiled speed; see "
        "DEVELOPERS.md, 'Adding a covariance structure'.", kind, source)


@contextlib.contextmanager
def numpy_notes_held():
    """Hold back :func:`note_numpy_only` while a structure is still being checked."""
    global _quiet
    _quiet = True
    try:
        yield
    finally:
        _quiet = False
