"""Test plugin for geosim: covariance structures and a writer registered through entry points."""
