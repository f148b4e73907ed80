"""Neighbourhood definition for kriging and simulation.

The search itself (spatial index, sectors, per-hole limits) is implemented
beside the kriging and simulation kernels that use it.
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Neighbourhood:
    """Which samples (and previously simulated nodes) enter a local system.

    Parameters
    ----------
    max_samples : int
        Most data samples used at one node.
    min_samples : int
        Fewest data samples for an estimate; nodes with fewer get nodata.
    ranges : tuple of float or None
        Search ellipsoid radii ``(major, minor, vertical)`` in metres. None takes
        the ranges of the model's longest structure.
    azimuth, dip, rake : float or None
        Orientation of the search ellipsoid (degrees, the convention of
        :mod:`geosim.variogram.anisotropy`). None takes the model's.
    sectors : int
        0 for no sectors, 4 for quadrants (2-D), 8 for octants (3-D).
    max_per_sector : int or None
        Most samples taken from one sector.
    max_per_hole : int or None
        Most samples taken from one drillhole (needs hole ids).
    max_nodes : int
        Most previously simulated nodes used at one node (simulation only).
    """

    max_samples: int = 16
    min_samples: int = 1
    ranges: tuple[float, ...] | None = None
    azimuth: float | None = None
    dip: float | None = None
    rake: float | None = None
    sectors: int = 0
    max_per_sector: int | None = None
    max_per_hole: int | None = None
    max_nodes: int = 16

    def __post_init__(self):
        if self.max_samples < 1 or self.min_samples < 0 or self.min_samples > self.max_samples:
            raise ValueError(f"need 0 <= min_samples <= max_samples and max_samples >= 1, got "
                             f"{self.min_samples} and {self.max_samples}")
        if self.sectors not in (0, 4, 8):
            raise ValueError(f"sectors must be 0, 4 or 8, got {self.sectors}")
        if self.max_nodes < 0:
            raise ValueError(f"max_nodes must be >= 0, got {self.max_nodes}")
