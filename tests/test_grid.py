"""Grid conventions: north-up rows, cell-centred nodes, polygon masks."""
import numpy as np
import pytest
import shapely
from pyproj import CRS

from geosim.grid import Grid


def test_node_centres_follow_the_north_up_convention():
    g = Grid(1000.0, 2000.0, (10.0, 20.0), (3, 4), CRS.from_epsg(32633))
    xy = g.coords().reshape(3, 4, 2)
    assert xy[0, 0].tolist() == [1005.0, 2050.0]      # row 0 is the northern row
    assert xy[2, 3].tolist() == [1035.0, 2010.0]
    t = g.transform
    # the raster transform maps pixel centres (col + 0.5, row + 0.5) to the same node centres
    assert (t @ (0.5, 0.5)) == (1005.0, 2050.0)
    assert (t @ (3.5, 2.5)) == (1035.0, 2010.0)


def test_three_d_levels_start_at_the_bottom():
    g = Grid(0.0, 0.0, (5.0, 5.0, 2.0), (3, 2, 2), zmin=100.0)
    z = g.coords()[:, 2].reshape(3, 2, 2)
    assert z[0, 0, 0] == 101.0 and z[2, 1, 1] == 105.0


def test_covering_grid_contains_the_bounds():
    g = Grid.covering((3.0, 7.0, 98.0, 51.0), (10.0, 10.0))
    assert g.xmin == 3.0 and g.xmax >= 98.0 and g.ymax >= 51.0 and g.shape == (5, 10)


def test_polygon_mask_matches_shapely_point_in_polygon():
    g = Grid(0.0, 0.0, (1.0, 1.0), (40, 50))
    # vertices off the half-cell lattice, so no node centre falls exactly on an edge
    poly = shapely.Polygon([(3.13, 2.27), (45.31, 8.07), (38.21, 37.43), (6.37, 30.11)])
    clipped = g.clip_to_polygon(poly)
    centres = g.coords(active_only=False)
    inside = shapely.contains_xy(poly, centres[:, 0], centres[:, 1]).reshape(g.shape)
    # rasterio (GDAL) burns a cell when its centre is inside: the same rule as shapely's test
    assert np.array_equal(clipped.mask, inside)
    assert clipped.n_active == pytest.approx(poly.area, rel=0.05)


def test_bad_shapes_are_refused():
    with pytest.raises(ValueError):
        Grid(0.0, 0.0, (1.0,), (3, 3))
    with pytest.raises(ValueError):
        Grid(0.0, 0.0, (1.0, 1.0), (3, 3), mask=np.ones((2, 2), bool))
