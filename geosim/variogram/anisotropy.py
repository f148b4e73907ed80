"""Geometric anisotropy: ranges along rotated axes.

Convention (geosim's own, stated once here and tested):

* Coordinates are (east, north, up) in metres.
* ``azimuth`` is the horizontal direction of the major axis, in degrees clockwise
  from north.
* ``dip`` is the angle of the major axis below the horizontal, in degrees, positive
  downward (a major axis plunging 30 degrees has ``dip=30``).
* ``rake`` turns the minor and vertical axes about the major axis, in degrees,
  positive counter-clockwise when looking down the major axis from its origin.
  With ``dip=0, rake=0`` the minor axis is horizontal, 90 degrees clockwise from
  the azimuth, and the third axis points up.
* ``ranges = (major, minor, vertical)`` are the ranges of the structure along
  those axes; in 2-D only the first two are used.

A lag vector ``h`` has reduced length ``r = |M h|`` with
``M = diag(1/major, 1/minor, 1/vertical) @ R`` where the rows of ``R`` are the
unit major, minor and third axes.  ``r = 1`` at the range in every direction.

The ratio form of the same thing (``Anisotropy.from_ratios``) gives the major
range and the minor/major and vertical/major ratios; geosim stores only the
three ranges.  In 2-D only ``azimuth`` and the major and minor ranges matter.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def axes(azimuth: float, dip: float = 0.0, rake: float = 0.0) -> np.ndarray:
    """Rows are the unit major, minor and third axes in (east, north, up).

    Examples
    --------
    >>> import numpy as np
    >>> from geosim.variogram.anisotropy import axes
    >>> np.round(axes(90.0), 12) + 0.0   # major axis due east, minor due south
    array([[ 1.,  0.,  0.],
           [ 0., -1.,  0.],
           [ 0.,  0.,  1.]])
    """
    a, d, r = np.radians([azimuth, dip, rake])
    u = np.array([np.sin(a) * np.cos(d), np.cos(a) * np.cos(d), -np.sin(d)])
    v0 = np.array([np.cos(a), -np.sin(a), 0.0])
    w0 = np.cross(v0, u)
    v = np.cos(r) * v0 + np.sin(r) * w0
    w = np.cross(v, u)
    return np.vstack([u, v, w])


@dataclass(frozen=True)
class Anisotropy:
    """Ranges along the major, minor and third axes and the axes' orientation.

    Parameters
    ----------
    ranges : tuple of float
        ``(major, minor, vertical)`` ranges in metres, or one value for isotropy.
    azimuth, dip, rake : float
        Orientation in degrees; see the module docstring for the convention.
    """

    ranges: tuple[float, float, float]
    azimuth: float = 0.0
    dip: float = 0.0
    rake: float = 0.0

    def __post_init__(self):
        r = np.atleast_1d(np.asarray(self.ranges, dtype=float)).ravel()
        if r.size == 1:
            r = np.repeat(r, 3)
        elif r.size == 2:
            r = np.array([r[0], r[1], r[0]])
        if r.size != 3 or not np.all(np.isfinite(r)) or np.any(r <= 0):
            raise ValueError(f"ranges must be 1 to 3 positive numbers, got {self.ranges!r}")
        object.__setattr__(self, "ranges", tuple(float(x) for x in r))
        for name in ("azimuth", "dip", "rake"):
            v = getattr(self, name)
            if not np.isfinite(v):
                raise ValueError(f"{name} must be a finite angle in degrees, got {v!r}")
            object.__setattr__(self, name, float(v))

    @classmethod
    def isotropic(cls, range_: float) -> Anisotropy:
        """The same range in every direction."""
        return cls((range_, range_, range_))

    @classmethod
    def from_ratios(cls, major: float, ratio_minor: float = 1.0, ratio_vertical: float = 1.0,
                    azimuth: float = 0.0, dip: float = 0.0, rake: float = 0.0) -> Anisotropy:
        """Anisotropy from the major range and the minor/major and vertical/major ratios.

        Examples
        --------
        >>> from geosim.variogram import Anisotropy
        >>> Anisotropy.from_ratios(200.0, 0.5, 0.1, azimuth=30.0).ranges
        (200.0, 100.0, 20.0)
        """
        for name, v in (("ratio_minor", ratio_minor), ("ratio_vertical", ratio_vertical)):
            if not (np.isfinite(v) and v > 0):
                raise ValueError(f"{name} must be a positive number, got {v!r}")
        return cls((major, major * ratio_minor, major * ratio_vertical), azimuth, dip, rake)

    @property
    def major(self) -> float:
        return self.ranges[0]

    @property
    def minor(self) -> float:
        return self.ranges[1]

    @property
    def vertical(self) -> float:
        return self.ranges[2]

    @property
    def ratio_minor(self) -> float:
        """Minor range divided by major range."""
        return self.ranges[1] / self.ranges[0]

    @property
    def ratio_vertical(self) -> float:
        """Vertical (third-axis) range divided by major range."""
        return self.ranges[2] / self.ranges[0]

    @property
    def is_isotropic(self) -> bool:
        return self.ranges[0] == self.ranges[1] == self.ranges[2]

    def matrix(self) -> np.ndarray:
        """The 3x3 matrix ``M`` mapping a lag vector to reduced coordinates."""
        return np.diag(1.0 / np.asarray(self.ranges)) @ axes(self.azimuth, self.dip, self.rake)

    def reduced_distance(self, h: np.ndarray) -> np.ndarray:
        """``|M h|`` for lag vectors ``h`` of shape (..., d) with d in {1, 2, 3}."""
        h = np.asarray(h, dtype=float)
        if h.ndim == 0:
            h = h[None]
        d = h.shape[-1]
        if d == 1:
            return np.abs(h[..., 0]) / self.ranges[0]
        m = self.matrix()[:, :d]
        return np.linalg.norm(h @ m.T, axis=-1)
