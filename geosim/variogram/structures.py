"""Covariance structures: unit correlation functions of the reduced distance.

Each structure is a correlation ``rho(r)`` of the reduced lag length ``r`` (see
:mod:`geosim.variogram.anisotropy`), scaled by its sill.  The *range convention*
of each structure is stated in its docstring:

==============  =====================================  ==============================
structure       rho(r), r = h / range                  range means
==============  =====================================  ==============================
nugget          1 at h = 0, else 0                     (no range)
spherical       1 - 1.5 r + 0.5 r^3  (r < 1), else 0   the distance where rho = 0
exponential     exp(-3 r)                              practical range (rho = 0.05)
gaussian        exp(-3 r^2)                            practical range (rho = 0.05)
cubic           1 - 7r^2 + 35/4 r^3 - 7/2 r^5          the distance where rho = 0
                + 3/4 r^7  (r < 1), else 0
matern          2^(1-nu)/Gamma(nu) (sqrt(2 nu) r)^nu   the *scale parameter*, not a
                K_nu(sqrt(2 nu) r)                     practical range
==============  =====================================  ==============================

Every built-in structure has an integer ``code`` (:mod:`geosim.variogram.codes`)
used by the compiled kernels in :mod:`geosim.variogram.compiled`.  Codes >= 100
belong to plugin structures.  The base class :class:`Structure` lives with the
sums of structures in :mod:`geosim.variogram.model` (``a + b`` makes a model);
it is re-exported here.  The classes below register themselves in
:data:`BUILTIN_STRUCTURES` and, like plugin structures, in the
``geosim.structures`` entry-point group (``pyproject.toml``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from .codes import CUBIC, EXPONENTIAL, GAUSSIAN, MATERN, NUGGET, SPHERICAL, TABULATED  # noqa: F401
from .model import BUILTIN_STRUCTURES, Structure

__all__ = ["Structure", "Nugget", "Spherical", "Exponential", "Gaussian", "Cubic", "Matern",
           "BUILTIN_STRUCTURES", "NUGGET", "SPHERICAL", "EXPONENTIAL", "GAUSSIAN", "CUBIC", "MATERN",
           "TABULATED"]


@dataclass(frozen=True)
class Nugget(Structure):
    """Pure nugget: variance at zero lag only (measurement error, micro-scale)."""

    kind = "nugget"
    code = NUGGET

    def correlation(self, r):
        # the same "same place" threshold as the compiled kernel (1 nm)
        return (np.asarray(r, dtype=float) <= 1e-9).astype(float)


@dataclass(frozen=True)
class Spherical(Structure):
    """Spherical: reaches the sill exactly at the range."""

    kind = "spherical"
    code = SPHERICAL

    def correlation(self, r):
        r = np.minimum(np.asarray(r, dtype=float), 1.0)
        return 1.0 - 1.5 * r + 0.5 * r**3


@dataclass(frozen=True)
class Exponential(Structure):
    """Exponential with *practical* range: rho(range) = exp(-3) ~ 0.05."""

    kind = "exponential"
    code = EXPONENTIAL

    def correlation(self, r):
        return np.exp(-3.0 * np.asarray(r, dtype=float))


@dataclass(frozen=True)
class Gaussian(Structure):
    """Gaussian with *practical* range: rho(range) = exp(-3) ~ 0.05."""

    kind = "gaussian"
    code = GAUSSIAN

    def correlation(self, r):
        r = np.asarray(r, dtype=float)
        return np.exp(-3.0 * r * r)


@dataclass(frozen=True)
class Cubic(Structure):
    """Cubic: smooth at the origin, reaches the sill exactly at the range."""

    kind = "cubic"
    code = CUBIC

    def correlation(self, r):
        r = np.minimum(np.asarray(r, dtype=float), 1.0)
        r2 = r * r
        return 1.0 - r2 * (7.0 - r * (8.75 - r2 * (3.5 - 0.75 * r2)))


@dataclass(frozen=True)
class Matern(Structure):
    """Matern with smoothness ``param`` (nu > 0); the range is the *scale parameter*.

    ``nu = 0.5`` is the exponential with practical range ``3 * scale``; as ``nu``
    grows it tends to a Gaussian shape.
    """

    kind = "matern"
    code = MATERN
    param: float = 1.5
    param_name = "smoothness"

    def __post_init__(self):
        super().__post_init__()
        if not (np.isfinite(self.param) and 0.05 <= self.param <= 20.0):
            raise ValueError(f"matern: smoothness must be between 0.05 and 20, got {self.param!r}")

    def correlation(self, r):
        r = np.asarray(r, dtype=float)
        nu = self.param
        x = np.sqrt(2.0 * nu) * r
        with np.errstate(invalid="ignore", over="ignore"):
            out = (2.0 ** (1.0 - nu) / special.gamma(nu)) * x**nu * special.kv(nu, x)
        out = np.where(x < 1e-10, 1.0, out)
        return np.nan_to_num(out, nan=0.0, posinf=0.0)


BUILTIN_STRUCTURES.update({cls.kind: cls for cls in (Nugget, Spherical, Exponential, Gaussian, Cubic, Matern)})
