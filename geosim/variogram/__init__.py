"""Variograms: covariance structures, nested anisotropic models, experimental variograms, fitting."""
from .anisotropy import Anisotropy
from .model import Model
from .structures import (BUILTIN_STRUCTURES, Cubic, Exponential, Gaussian, Matern, Nugget,
                         Spherical, Structure)

__all__ = ["Anisotropy", "Model", "Structure", "Nugget", "Spherical", "Exponential", "Gaussian",
           "Cubic", "Matern", "BUILTIN_STRUCTURES"]
