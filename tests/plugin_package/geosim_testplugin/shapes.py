"""Covariance structures added to geosim from outside.

``Wave`` supplies only a compiled scalar form (``numba_correlation``); geosim's
base class vectorizes it.  ``Cauchy`` supplies only a numpy form.  ``Boxcar`` is
not a valid covariance in any dimension and ``Imposter`` takes a built-in's name:
both must be rejected at load.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit

from geosim.variogram import Structure


@njit(cache=True, nogil=True)
def wave_correlation(r, param):
    """sin(pi r) / (pi r): the hole-effect ("cardinal sine") correlation, 1 at r = 0."""
    x = math.pi * r
    if x < 1e-8:
        return 1.0
    return math.sin(x) / x


@dataclass(frozen=True)
class Wave(Structure):
    """Hole effect: rho(r) = sin(pi r) / (pi r); the range is the lag of the first zero.

    Valid (positive definite) in up to three dimensions; Chiles and Delfiner
    (2012), Geostatistics: Modeling Spatial Uncertainty, section 2.5 (cardinal
    sine model), from memory.
    """

    kind = "wave"
    numba_correlation = wave_correlation


@dataclass(frozen=True)
class Cauchy(Structure):
    """Generalized Cauchy: rho(r) = (1 + c r^2)^(-shape), c chosen so that rho(1) = 0.05.

    The range is the practical range (as for geosim's exponential); ``shape`` > 0
    sets how slowly the tail decays.  Valid in every dimension (a scale mixture of
    Gaussian correlations; Gneiting and Schlather 2004, SIAM Review 46(2), from memory).
    """

    kind = "cauchy"
    param: float = 1.0
    param_name = "shape"
    param_bounds = (0.2, 20.0)  # what fitting may try

    def __post_init__(self):
        super().__post_init__()
        if not (np.isfinite(self.param) and self.param > 0):
            raise ValueError(f"cauchy: shape must be > 0, got {self.param!r}")

    def correlation(self, r):
        r = np.asarray(r, dtype=float)
        c = 0.05 ** (-1.0 / self.param) - 1.0
        return (1.0 + c * r * r) ** (-self.param)


@dataclass(frozen=True)
class Boxcar(Structure):
    """Not a covariance: 1 inside the range, 0 outside (its spectrum has negative lobes)."""

    kind = "boxcar"

    def correlation(self, r):
        return (np.asarray(r, dtype=float) < 1.0).astype(float)


@dataclass(frozen=True)
class Imposter(Structure):
    """A valid shape registered under a built-in's name, which geosim must refuse."""

    kind = "exponential"

    def correlation(self, r):
        return np.exp(-np.asarray(r, dtype=float))
