"""Variograms: covariance structures, nested anisotropic models, experimental variograms, fitting.

Examples
--------
From samples to a fitted, saved model (normal scores, so the total sill is 1):

>>> import numpy as np
>>> import tempfile, pathlib
>>> import geosim
>>> truth = geosim.Nugget(0.1) + geosim.Spherical(0.9, geosim.Anisotropy((300.0, 100.0), azimuth=45.0))
>>> xy = np.random.default_rng(1).uniform(0, 1000, (400, 2))
>>> z = np.linalg.cholesky(truth.cov_matrix(xy)) @ np.random.default_rng(2).normal(size=400)
>>> dirs = [geosim.Direction(45.0), geosim.Direction(135.0)]
>>> evs = geosim.directional_variograms(xy, z, dirs, lag=25.0, nlags=16)
>>> template = geosim.Nugget(0.2) + geosim.Spherical(0.8, geosim.Anisotropy((200.0, 200.0), azimuth=45.0))
>>> fit = geosim.fit_model(evs, template, total_sill=1.0)
>>> fit.model_.structures[1].anisotropy.major > fit.model_.structures[1].anisotropy.minor
True
>>> path = geosim.save_model(fit.model_, pathlib.Path(tempfile.mkdtemp()) / "model.toml")
>>> geosim.load_model(path) == fit.model_
True
"""
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
