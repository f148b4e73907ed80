"""Test plugin for geosim: covariance structures, an engine and a writer registered through entry points."""
