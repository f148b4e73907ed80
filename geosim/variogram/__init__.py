"""Variograms: covariance structures, nested anisotropic models, experimental variograms, fitting."""
from .anisotropy import Anisotropy
from .experimental import (Direction, ExperimentalVariogram, VariogramMap, directional_variograms,
                           downhole_variogram, experimental_variogram, variogram_map)
from .fitting import FitResult, fit_model, parameter_names
from .model import Model
from .modelfile import dumps_model, load_model, loads_model, save_model
from .plots import plot_variogram, plot_variogram_map
from .structures import (BUILTIN_STRUCTURES, Cubic, Exponential, Gaussian, Matern, Nugget,
                         Spherical, Structure)

__all__ = ["Anisotropy", "Model", "Structure", "Nugget", "Spherical", "Exponential", "Gaussian",
           "Cubic", "Matern", "BUILTIN_STRUCTURES", "Direction", "ExperimentalVariogram",
           "VariogramMap", "experimental_variogram", "directional_variograms", "downhole_variogram",
           "variogram_map", "FitResult", "fit_model", "parameter_names",
           "dumps_model", "loads_model", "save_model", "load_model", "plot_variogram",
           "plot_variogram_map"]
