"""A third-party decision figure: the range of values in one realization."""
from __future__ import annotations

import numpy as np


def value_range(values: np.ndarray, grid) -> float:
    """Largest minus smallest value inside the domain (NaN outside is skipped)."""
    inside = np.asarray(values)[grid.mask]
    return float(np.nanmax(inside) - np.nanmin(inside))
