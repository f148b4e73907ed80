"""Configuration: the run spec (:mod:`geosim.config.runspec`), what a run computes and how.

Examples
--------
>>> import geosim.config
>>> geosim.config.load_spec is geosim.config.runspec.load_spec
True
"""
from .runspec import EXECUTION_KEYS, SCHEMA, RunSpec, load_spec, parse_overrides, reference, spec_from_dict

__all__ = ["RunSpec", "load_spec", "spec_from_dict", "parse_overrides", "reference", "SCHEMA", "EXECUTION_KEYS"]
