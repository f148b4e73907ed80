"""Variograms: covariance structures, nested anisotropic models, experimental variograms, fitting."""
from .anisotropy import Anisotropy
from .experimental import (Direction, ExperimentalVariogram, VariogramMap, directional_variograms,
                           downhole_variogram, experimental_variogram, variogram_map)
from .model import Model
from .structures import (BUILTIN_STRUCTURES, Cubic, Exponential, Gaussian, Matern, Nugget,
                         Spherical, Structure)

__all__ = ["Anisotropy", "Model", "Structure", "Nugget", "Spherical", "Exponential", "Gaussian",
           "Cubic", "Matern", "BUILTIN_STRUCTURES", "Direction", "ExperimentalVariogram",
           "VariogramMap", "experimental_variogram", "directional_variograms", "downhole_variogram",
           "variogram_map"]
