"""Conditional simulation: engines and the runner that drives them.

Two engines share one interface (``prepare`` once, ``realize`` per realization):
:class:`~geosim.simulation.sequential.SequentialEngine` (sequential Gaussian
simulation, any grid size) and :class:`~geosim.simulation.exact.ExactEngine` (one
LAPACK Cholesky factor, small grids).  :func:`simulate` resolves an engine by name
through the plugin registry and runs it serially, on local processes or on Dask.
"""
from .exact import ExactEngine
from .runner import realization_rng, simulate
from .sequential import SequentialEngine

__all__ = ["simulate", "realization_rng", "SequentialEngine", "ExactEngine"]
