"""Regular grids of cell-centred nodes, with a domain mask.

Convention: a 2-D grid has shape ``(ny, nx)`` with row 0 the *northern* row, as in
a north-up raster; a 3-D grid has shape ``(nz, ny, nx)`` with level 0 the *lowest*
level.  Node ``(i, j)`` sits at ``x = xmin + (j + 0.5) dx``,
``y = ymax - (i + 0.5) dy``; level ``k`` at ``z = zmin + (k + 0.5) dz``.
``mask`` is True for nodes inside the domain.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from pyproj import CRS


@dataclass(frozen=True, repr=False)
class Grid:
    """A north-up grid of cell-centred nodes.

    Parameters
    ----------
    xmin, ymin : float
        South-west corner of the grid extent (cell edges, not centres).
    cell : tuple of float
        ``(dx, dy)`` or ``(dx, dy, dz)`` cell size in CRS units (metres).
    shape : tuple of int
        ``(ny, nx)`` or ``(nz, ny, nx)``.
    crs : pyproj.CRS or None
    zmin : float
        Bottom of the lowest level (3-D grids only).
    mask : bool ndarray of ``shape`` or None
        True inside the domain; None means every node is active.
    """

    xmin: float
    ymin: float
    cell: tuple
    shape: tuple
    crs: CRS | None = None
    zmin: float = 0.0
    mask: np.ndarray | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        shape = tuple(int(s) for s in self.shape)
        cell = tuple(float(c) for c in self.cell)
        if len(shape) not in (2, 3) or len(cell) != len(shape) or any(s < 1 for s in shape) or any(
                not c > 0 for c in cell):
            raise ValueError(f"grid needs 2 or 3 positive sizes and cells, got shape {self.shape} cell {self.cell}")
        object.__setattr__(self, "shape", shape)
        object.__setattr__(self, "cell", cell)
        if self.mask is None:
            object.__setattr__(self, "mask", np.ones(shape, dtype=bool))
        else:
            m = np.asarray(self.mask, dtype=bool)
            if m.shape != shape:
                raise ValueError(f"mask shape {m.shape} does not match grid shape {shape}")
            object.__setattr__(self, "mask", m)

    def __repr__(self) -> str:
        """Short form: sizes, cells, origin, CRS name and active nodes (no WKT).

        Examples
        --------
        >>> import geosim, geosim.crs
        >>> geosim.Grid(431000.0, 6120000.0, (25.0, 25.0), (40, 60), crs=geosim.crs.parse_crs(32750))
        Grid(60 x 40 cells of 25 x 25 m, origin (431000, 6120000), EPSG:32750, 2400 of 2400 active)
        """
        sizes = " x ".join(str(n) for n in self.shape[::-1])
        cells = " x ".join(f"{c:g}" for c in self.cell)
        origin = ", ".join(f"{v:.10g}" for v in ((self.xmin, self.ymin) + ((self.zmin,) if self.ndim == 3 else ())))
        if self.crs is None:
            crs = "local metres"
        else:
            code = self.crs.to_epsg(min_confidence=90)
            crs = f"EPSG:{code}" if code else repr(self.crs.name)
        return f"Grid({sizes} cells of {cells} m, origin ({origin}), {crs}, {self.n_active} of {self.size} active)"

    @property
    def ndim(self) -> int:
        return len(self.shape)

    @property
    def nx(self) -> int:
        return self.shape[-1]

    @property
    def ny(self) -> int:
        return self.shape[-2]

    @property
    def nz(self) -> int:
        return self.shape[0] if self.ndim == 3 else 1

    @property
    def xmax(self) -> float:
        return self.xmin + self.nx * self.cell[0]

    @property
    def ymax(self) -> float:
        return self.ymin + self.ny * self.cell[1]

    @property
    def size(self) -> int:
        return int(np.prod(self.shape))

    @property
    def n_active(self) -> int:
        return int(self.mask.sum())

    @property
    def transform(self):
        """rasterio Affine of one level (north-up)."""
        from affine import Affine
        return Affine(self.cell[0], 0.0, self.xmin, 0.0, -self.cell[1], self.ymax)

    def axes(self) -> tuple[np.ndarray, ...]:
        """Node centre coordinates along each array axis, in array-axis order."""
        x = self.xmin + (np.arange(self.nx) + 0.5) * self.cell[0]
        y = self.ymax - (np.arange(self.ny) + 0.5) * self.cell[1]
        if self.ndim == 2:
            return (y, x)
        z = self.zmin + (np.arange(self.nz) + 0.5) * self.cell[2]
        return (z, y, x)

    def coords(self, active_only: bool = True) -> np.ndarray:
        """Node centres as an (N, d) array of (x, y[, z]) in C order of the grid."""
        ax = self.axes()
        mesh = np.meshgrid(*ax, indexing="ij")
        if self.ndim == 2:
            pts = np.column_stack([mesh[1].ravel(), mesh[0].ravel()])
        else:
            pts = np.column_stack([mesh[2].ravel(), mesh[1].ravel(), mesh[0].ravel()])
        return pts[self.mask.ravel()] if active_only else pts

    def with_mask(self, mask) -> Grid:
        return Grid(self.xmin, self.ymin, self.cell, self.shape, self.crs, self.zmin, mask)

    @classmethod
    def covering(cls, bounds, cell, *, crs=None, zrange=None, pad: float = 0.0) -> Grid:
        """The smallest grid of the given cell size covering ``(xmin, ymin, xmax, ymax)``."""
        xmin, ymin, xmax, ymax = bounds
        cell = tuple(float(c) for c in cell)
        xmin, ymin, xmax, ymax = xmin - pad, ymin - pad, xmax + pad, ymax + pad
        nx = max(1, int(np.ceil((xmax - xmin) / cell[0] - 1e-9)))
        ny = max(1, int(np.ceil((ymax - ymin) / cell[1] - 1e-9)))
        if zrange is None:
            return cls(xmin, ymin, cell[:2], (ny, nx), crs)
        nz = max(1, int(np.ceil((zrange[1] - zrange[0]) / cell[2] - 1e-9)))
        return cls(xmin, ymin, cell, (nz, ny, nx), crs, float(zrange[0]))

    def clip_to_polygon(self, geometry) -> Grid:
        """Mask out nodes whose centres fall outside a shapely (multi)polygon."""
        from rasterio.features import geometry_mask
        inside2d = ~geometry_mask([geometry], out_shape=(self.ny, self.nx), transform=self.transform,
                                  all_touched=False)
        mask = inside2d if self.ndim == 2 else np.broadcast_to(inside2d, self.shape).copy()
        return self.with_mask(mask & self.mask)
