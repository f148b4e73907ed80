"""geosim: geostatistical conditional simulation from borehole data to uncertainty maps.

The public API is re-exported here and loaded on first use, so ``import geosim``
stays fast and compiles nothing.

Examples
--------
>>> import geosim
>>> geosim.CAUTION.startswith("CAUTION")
True
"""
from __future__ import annotations

import importlib
from importlib.metadata import PackageNotFoundError, version as _dist_version

from .cautions import CAUTION
from .errors import GeosimError, GeosimWarning, InputError, NotPositiveDefiniteError, SpecError

# Notes for the user (choices geosim made, data it changed) are WARNING records of the "geosim"
# logger and its children; a run's steps and timings are INFO records.  No handler is attached here:
# where the application configures no logging, Python's last-resort handler prints the notes on
# stderr (as warnings were shown before); logging.getLogger("geosim").setLevel(logging.ERROR)
# silences them, and any handler captures them.  The command line attaches its own.

try:
    __version__ = _dist_version("geosim")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0+unknown"

# public name -> module that defines it; add new public names here
_LAZY = {
    "Grid": "geosim.grid",
    "Anisotropy": "geosim.variogram",
    "Model": "geosim.variogram",
    "Structure": "geosim.variogram",
    "Nugget": "geosim.variogram",
    "Spherical": "geosim.variogram",
    "Exponential": "geosim.variogram",
    "Gaussian": "geosim.variogram",
    "Cubic": "geosim.variogram",
    "Matern": "geosim.variogram",
    "Direction": "geosim.variogram",
    "ExperimentalVariogram": "geosim.variogram",
    "VariogramMap": "geosim.variogram",
    "experimental_variogram": "geosim.variogram",
    "directional_variograms": "geosim.variogram",
    "downhole_variogram": "geosim.variogram",
    "variogram_map": "geosim.variogram",
    "fit_model": "geosim.variogram",
    "FitResult": "geosim.variogram",
    "save_model": "geosim.variogram",
    "load_model": "geosim.variogram",
    "plot_variogram": "geosim.variogram",
    "plot_variogram_map": "geosim.variogram",
    "cholesky": "geosim.linalg",
    "Neighbourhood": "geosim.search",
    "DataSearch": "geosim.search",
    "krige": "geosim.kriging",
    "krige_grid": "geosim.kriging",
    "cross_validate": "geosim.kriging",
    "KrigingResult": "geosim.kriging",
    "CrossValidationResult": "geosim.kriging",
    "PointSet": "geosim.points",
    "read_points": "geosim.points",
    "parse_crs": "geosim.crs",
    "to_projected": "geosim.crs",
    "Drillholes": "geosim.drillholes",
    "read_drillholes": "geosim.drillholes",
    "desurvey": "geosim.drillholes",
    "composite": "geosim.drillholes",
    "cell_declustering": "geosim.declustering",
    "NormalScoreTransform": "geosim.transforms",
    "LogTransform": "geosim.transforms",
    "IdentityTransform": "geosim.transforms",
    "transform_from_dict": "geosim.transforms",
    "read_domain": "geosim.domain",
    "read_domain_raster": "geosim.domain",
    "simulate": "geosim.simulation",
    "SequentialEngine": "geosim.simulation",
    "ExactEngine": "geosim.simulation",
    "atomic_output": "geosim.io.atomic",
    "write_raster": "geosim.io.geotiff",
    "RealizationWriter": "geosim.ensemble",
    "verify_realization": "geosim.io.geotiff",
    "provenance": "geosim.io.report",
    "write_report": "geosim.io.report",
    "file_sha256": "geosim.io.report",
    "summarize_ensemble": "geosim.summaries",
    "summarize_realizations": "geosim.ensemble",
    "grade_tonnage": "geosim.summaries",
    "fraction_above": "geosim.summaries",
    "fraction_below": "geosim.summaries",
    "decision_rows": "geosim.summaries",
    "decision_spread": "geosim.summaries",
    "write_decision_csv": "geosim.io.decision",
    "RunChecks": "geosim.validation",
    "plot_summary_maps": "geosim.io.plots",
    "plot_histogram_reproduction": "geosim.io.plots",
    "plot_variogram_reproduction": "geosim.io.plots",
    "plot_decision_spread": "geosim.io.plots",
    "RunSpec": "geosim.config.runspec",
    "load_spec": "geosim.config.runspec",
    "RunResult": "geosim.pipeline",
    "run": "geosim.pipeline",
}

__all__ = ["CAUTION", "GeosimError", "GeosimWarning", "InputError", "NotPositiveDefiniteError",
           "SpecError", "__version__", *_LAZY]


def __getattr__(name: str):
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'geosim' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
