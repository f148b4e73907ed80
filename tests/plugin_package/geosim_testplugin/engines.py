"""A third-party simulation engine, registered through ``geosim.engines``."""
from __future__ import annotations

import numpy as np


class MarginalEngine:
    """Draws each node independently from its simple- or ordinary-kriging distribution.

    Not a spatial simulation: nodes are uncorrelated with one another.  It reproduces
    the kriging mean and variance node by node, which makes it easy to check, and it
    exists to exercise geosim's engine entry points from outside.
    """

    name = "marginal"

    def prepare(self, data_coords, data_scores, model, grid, *, neighbourhood=None, kriging="simple",
                **options):
        from geosim.kriging import krige
        result = krige(data_coords, data_scores, grid.coords(), model, method=kriging, neighbourhood="global")
        return {"mask": grid.mask, "mean": result.estimate, "sd": np.sqrt(np.maximum(result.variance, 0.0))}

    def realize(self, prepared, rng):
        field = np.full(prepared["mask"].shape, np.nan)
        field[prepared["mask"]] = prepared["mean"] + prepared["sd"] * rng.standard_normal(prepared["mean"].size)
        return field
