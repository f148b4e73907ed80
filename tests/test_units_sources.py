"""Sources of unit codes: polygons, surfaces (layer cake), a cube of codes, logged-unit intervals and
compositing at contacts.  Every expected value is worked out by hand in the comments (common practice,
no source: the node-centre rule, the layer-cake rule and length-weighted compositing as documented in
geosim.units, geosim.logged_units and geosim.drillholes)."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

import geosim
from geosim.crs import parse_crs
from geosim.drillholes import composite, read_drillholes
from geosim.errors import InputError
from geosim.units import (NODATA, UnitTable, composite_by_unit, node_units, read_unit_intervals,
                          sample_units)

N = NODATA
TABLE = UnitTable.from_mapping({"oxide": {"code": 1}, "fresh": {"code": 2}, "cover": {"code": 9, "modelled": False}})


def _square(x0, y0, x1, y1):
    return {"type": "Polygon", "coordinates": [[[x0, y0], [x1, y0], [x1, y1], [x0, y1], [x0, y0]]]}


def _features(path: Path, items, crs: str | None = None) -> Path:
    doc = {"type": "FeatureCollection",
           "features": [{"type": "Feature", "properties": props, "geometry": geom} for props, geom in items]}
    if crs:
        doc["crs"] = {"type": "name", "properties": {"name": crs}}
    path.write_text(json.dumps(doc))
    return path


# a 4 x 4 grid of 10 m cells from (0, 0): node centres x = 5, 15, 25, 35 and, row 0 north, y = 35, 25, 15, 5
GRID = geosim.Grid(0.0, 0.0, (10.0, 10.0), (4, 4))


# -- polygons -------------------------------------------------------------------------------------

def test_polygons_by_the_node_centre_rule(tmp_path):
    # oxide: x 0-20 (columns 0, 1); fresh: x 20-30, y 8-40 (column 2, rows 0-2; row 3's cell, y 0-10, is
    # touched but its centre y = 5 is outside); column 3 (x = 35) is in no polygon; the two touch along x = 20
    _features(tmp_path / "u.geojson", [({"code": "oxide"}, _square(0, 0, 20, 40)),
                                       ({"code": 2}, _square(20, 8, 30, 40))])
    codes = node_units(GRID, {"polygons": "u.geojson", "attribute": "code"}, TABLE, base=tmp_path)
    expected = np.array([[1, 1, 2, N],
                         [1, 1, 2, N],
                         [1, 1, 2, N],
                         [1, 1, N, N]])
    assert codes.dtype == np.int32
    np.testing.assert_array_equal(codes, expected)
    # 3-D: the same codes on every level, and the grid's mask (outer domain, below collars) on top
    mask = np.ones((2, 4, 4), dtype=bool)
    mask[1, 0, 0] = False
    grid3 = geosim.Grid(0.0, 0.0, (10.0, 10.0, 5.0), (2, 4, 4), mask=mask)
    codes3 = node_units(grid3, {"polygons": str(tmp_path / "u.geojson")}, TABLE)
    want = np.stack([expected, expected])
    want[1, 0, 0] = N
    np.testing.assert_array_equal(codes3, want)


def test_polygons_reprojected_to_the_grid(tmp_path):
    # the polygon in UTM 33 N (a legacy 'crs' member) as the grid: x 0-24 m from the grid's edge holds the
    # centres of columns 0 and 1; column 2's cell is touched, its centre (25 m) is not inside
    utm = parse_crs(32633)
    grid = geosim.Grid(500000.0, 0.0, (10.0, 10.0), (4, 4), crs=utm)
    _features(tmp_path / "u.geojson", [({"unit": 1}, _square(500000, 0, 500024, 40))], crs="EPSG:32633")
    codes = node_units(grid, {"polygons": "u.geojson", "attribute": "unit"}, TABLE, base=tmp_path)
    assert (codes[:, :2] == 1).all() and (codes[:, 2:] == N).all()


def test_polygons_of_one_code_may_overlap(tmp_path):
    # together x 0-32: centres of columns 0-2; column 3's cell is touched, its centre (35) is outside
    _features(tmp_path / "u.geojson", [({"code": 1}, _square(0, 0, 20, 40)), ({"code": 1}, _square(10, 0, 32, 40))])
    codes = node_units(GRID, {"polygons": "u.geojson"}, TABLE, base=tmp_path)
    assert (codes[:, :3] == 1).all() and (codes[:, 3] == N).all()


def test_overlapping_polygons_of_different_codes_are_refused(tmp_path):
    # oxide x 0-20 and fresh x 15-30 share the strip x 15-20, y 0-40: 200 square metres
    path = _features(tmp_path / "u.geojson", [({"code": 1}, _square(0, 0, 20, 40)),
                                              ({"code": 2}, _square(15, 0, 30, 40))])
    with pytest.raises(InputError) as err:
        node_units(GRID, {"polygons": "u.geojson"}, TABLE, base=tmp_path)
    text = str(err.value)
    assert str(path) in text and "feature 1 (oxide (1)) and feature 2 (fresh (2)) overlap" in text
    assert "over 200 square metres" in text and "fix:" in text


@pytest.mark.parametrize("value, words", [("1.5", "neither an integer nor a unit name"),
                                          ("gravel", "not one of the run's units"),
                                          ("", "has no unit code")])
def test_polygon_codes_that_are_not_units(tmp_path, value, words):
    path = _features(tmp_path / "u.geojson", [({"code": 1}, _square(0, 0, 10, 10)),
                                              ({"code": value}, _square(20, 20, 30, 30))])
    with pytest.raises(InputError, match=words) as err:
        node_units(GRID, {"polygons": "u.geojson"}, TABLE, base=tmp_path)
    assert err.value.file == str(path) and err.value.row == 2 and err.value.field == "code"


def test_polygon_attribute_and_settings_misspelt(tmp_path):
    _features(tmp_path / "u.geojson", [({"unit_code": 1}, _square(0, 0, 10, 10))])
    with pytest.raises(InputError, match="no attribute 'code'.*unit_code"):
        node_units(GRID, {"polygons": "u.geojson"}, TABLE, base=tmp_path)
    with pytest.raises(InputError, match="'atribute' is not a setting") as err:
        node_units(GRID, {"polygons": "u.geojson", "atribute": "unit_code"}, TABLE, base=tmp_path)
    assert err.value.field == "units.nodes.atribute" and "attribute" in err.value.fix


# -- surfaces (layer cake) ------------------------------------------------------------------------

# three node columns (x = 5, 15, 25 at y = 5), ten 1 m levels from z = 0: centres 0.5, 1.5, ..., 9.5
GRID3 = geosim.Grid(0.0, 0.0, (10.0, 10.0, 1.0), (10, 1, 3))


def _surface(path: Path, values) -> str:
    data = np.asarray(values, dtype="float32").reshape(1, -1)
    with rasterio.open(path, "w", driver="GTiff", height=1, width=data.shape[1], count=1, dtype="float32",
                       transform=from_origin(0.0, 10.0, 10.0, 10.0), nodata=-9999.0) as dst:
        dst.write(data, 1)
    return path.name


def _column(codes, j):
    return codes[:, 0, j].tolist()  # level 0 (z = 0.5) first


def test_surfaces_tops_by_hand(tmp_path):
    top_a = _surface(tmp_path / "top_a.tif", [9.0, 8.0, 10.0])
    top_b = _surface(tmp_path / "top_b.tif", [5.5, 5.0, 3.0])
    codes = node_units(GRID3, {"surfaces": [top_a, top_b], "units": ["oxide", 2]}, TABLE, base=tmp_path)
    # column 0: oxide over (5.5, 9]: z 6.5, 7.5, 8.5; z = 5.5 sits on top_b, so it is fresh (the unit below);
    # fresh reaches the grid's bottom (no base given); z = 9.5 is above the top of the highest unit
    assert _column(codes, 0) == [2, 2, 2, 2, 2, 2, 1, 1, 1, N]
    # column 1: oxide (5, 8]: 5.5, 6.5, 7.5; above 8: nodata
    assert _column(codes, 1) == [2, 2, 2, 2, 2, 1, 1, 1, N, N]
    # column 2: oxide (3, 10]: 3.5 ... 9.5; fresh 0.5, 1.5, 2.5
    assert _column(codes, 2) == [2, 2, 2, 1, 1, 1, 1, 1, 1, 1]
    # one more surface, the base of the lowest unit: at or below it nodata (z = 1.5 sits on it in column 0)
    base = _surface(tmp_path / "base.tif", [1.5, 2.0, 0.0])
    codes = node_units(GRID3, {"surfaces": [top_a, top_b, base], "units": ["oxide", "fresh"]}, TABLE,
                       base=tmp_path)
    assert _column(codes, 0) == [N, N, 2, 2, 2, 2, 1, 1, 1, N]
    assert _column(codes, 1) == [N, N, 2, 2, 2, 1, 1, 1, N, N]
    assert _column(codes, 2) == [2, 2, 2, 1, 1, 1, 1, 1, 1, 1]


def test_surfaces_bases_by_hand(tmp_path):
    base_a = _surface(tmp_path / "base_a.tif", [5.5, 5.0, 3.0])
    base_b = _surface(tmp_path / "base_b.tif", [1.0, 2.0, 0.0])
    codes = node_units(GRID3, {"surfaces": [base_a, base_b], "units": [1, 2], "surface": "base"}, TABLE,
                       base=tmp_path)
    # the highest unit reaches the grid's top; below the lowest base: nodata
    assert _column(codes, 0) == [N, 2, 2, 2, 2, 2, 1, 1, 1, 1]
    assert _column(codes, 1) == [N, N, 2, 2, 2, 1, 1, 1, 1, 1]
    assert _column(codes, 2) == [2, 2, 2, 1, 1, 1, 1, 1, 1, 1]
    # a unit that pinches out (its top equals its base) holds no node; the others are unchanged
    top = _surface(tmp_path / "top.tif", [9.0, 8.0, 10.0])
    codes = node_units(GRID3, {"surfaces": [top, base_a, base_a], "units": [1, 9], "surface": "top"}, TABLE,
                       base=tmp_path)
    assert _column(codes, 0) == [N] * 6 + [1, 1, 1, N]


def test_surface_without_a_value_leaves_its_column_nodata(tmp_path):
    top_a = _surface(tmp_path / "top_a.tif", [9.0, -9999.0, 10.0])
    top_b = _surface(tmp_path / "top_b.tif", [5.0, 5.0, 3.0])
    codes = node_units(GRID3, {"surfaces": [top_a, top_b], "units": [1, 2]}, TABLE, base=tmp_path)
    assert _column(codes, 1) == [N] * 10 and _column(codes, 0)[0] == 2


def test_crossing_surfaces_say_where_and_how_many(tmp_path):
    # top_b lies above top_a at x = 15 and 25 (by 1 and 4 m): 2 columns of 10 nodes
    top_a = _surface(tmp_path / "top_a.tif", [9.0, 6.0, 3.0])
    top_b = _surface(tmp_path / "top_b.tif", [5.0, 7.0, 7.0])
    with pytest.raises(InputError) as err:
        node_units(GRID3, {"surfaces": [top_a, top_b], "units": [1, 2]}, TABLE, base=tmp_path)
    text = str(err.value)
    assert err.value.file == str(tmp_path / "top_a.tif") and "top_a.tif lies below top_b.tif" in text
    assert "at 2 node column(s) of the domain (20 node(s); by up to 4 m)" in text
    assert "(15, 5); (25, 5)" in text
    # outside the domain a crossing does not matter
    mask = np.ones(GRID3.shape, dtype=bool)
    mask[:, :, 1:] = False
    codes = node_units(GRID3.with_mask(mask), {"surfaces": [top_a, top_b], "units": [1, 2]}, TABLE, base=tmp_path)
    assert _column(codes, 0) == [2, 2, 2, 2, 2, 1, 1, 1, 1, N] and (codes[:, :, 1:] == N).all()


def test_surface_settings_refused(tmp_path):
    top_a = _surface(tmp_path / "top_a.tif", [9.0, 8.0, 10.0])
    for source, field, words in (
            ({"surfaces": [top_a], "units": [1, 2, 9]}, "units.nodes.units", "list of 1 unit"),
            ({"surfaces": [top_a], "units": ["granite"]}, "units.nodes.units", "not one of the run's units"),
            ({"surfaces": [top_a], "units": [1], "surface": "middle"}, "units.nodes.surface", '"top" or "base"'),
            ({"surfaces": top_a, "units": [1]}, "units.nodes.surfaces", "list of raster files")):
        with pytest.raises(InputError, match=words) as err:
            node_units(GRID3, source, TABLE, base=tmp_path)
        assert err.value.field == field
    with pytest.raises(InputError, match="3-D grid; this grid is 2-D"):
        node_units(GRID, {"surfaces": [top_a], "units": [1]}, TABLE, base=tmp_path)


# -- cube of codes ---------------------------------------------------------------------------------

def _cube(path: Path, grid, codes):
    from geosim.io.cube import grid_dataset, write_netcdf
    write_netcdf(path, grid_dataset(grid, {"unit": (codes.astype(float), "unit code", "")}, title="codes"))
    return path


def test_cube_on_a_coarser_grid_nearest_cell(tmp_path):
    pytest.importorskip("netCDF4")
    # cube: 2 levels of 2 m and 2 x 2 columns of 20 m; the 1 m, 10 m grid below lies inside it
    coarse = geosim.Grid(0.0, 0.0, (20.0, 20.0, 2.0), (2, 2, 2))
    data = np.array([[[1, 2], [9, np.nan]], [[2, 2], [1, 1]]])  # level 0 lowest; row 0 north
    _cube(tmp_path / "codes.nc", coarse, data)
    fine = geosim.Grid(0.0, 0.0, (10.0, 10.0, 1.0), (5, 4, 4))
    codes = node_units(fine, {"cube": "codes.nc"}, TABLE, base=tmp_path)
    # node level k (centre k + 0.5) lies in cube level k // 2; level 4 (4.5) is above the cube
    # node row r, column c lies in cube row r // 2, column c // 2
    for k in range(5):
        for r in range(4):
            for c in range(4):
                want = N if k == 4 else data[k // 2, r // 2, c // 2]
                assert codes[k, r, c] == (N if np.isnan(want) else int(want)), (k, r, c)


def test_cube_refusals(tmp_path):
    pytest.importorskip("netCDF4")
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0, 1.0), (2, 2, 2))
    _cube(tmp_path / "frac.nc", grid, np.full(grid.shape, 1.5))
    with pytest.raises(InputError, match="not whole numbers"):
        node_units(grid, {"cube": "frac.nc"}, TABLE, base=tmp_path)
    _cube(tmp_path / "seven.nc", grid, np.full(grid.shape, 7.0))
    with pytest.raises(InputError, match=r"code\(s\) 7 of the cube \(8 node"):
        node_units(grid, {"cube": "seven.nc"}, TABLE, base=tmp_path)
    with pytest.raises(InputError, match="no variable 'code'") as err:
        node_units(grid, {"cube": "seven.nc", "variable": "code"}, TABLE, base=tmp_path)
    assert err.value.field == "units.nodes.variable"
    utm = geosim.Grid(0.0, 0.0, (10.0, 10.0, 1.0), (2, 2, 2), crs=parse_crs(32633))
    _cube(tmp_path / "utm.nc", utm, np.ones(grid.shape))
    other = geosim.Grid(0.0, 0.0, (10.0, 10.0, 1.0), (2, 2, 2), crs=parse_crs(32634))
    with pytest.raises(InputError, match="does not reproject cubes"):
        node_units(other, {"cube": "utm.nc"}, TABLE, base=tmp_path)
    np.testing.assert_array_equal(node_units(utm, {"cube": "utm.nc"}, TABLE, base=tmp_path), 1)


# -- logged units and compositing at contacts ------------------------------------------------------

def _write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def _holes(tmp_path, assays: str):
    _write(tmp_path / "collars.csv", "hole_id,x,y,z,depth\nA,0,0,100,20\nB,50,0,100,20\n")
    _write(tmp_path / "assays.csv", "hole_id,from,to,cu\n" + assays)
    return read_drillholes(tmp_path / "collars.csv", None, tmp_path / "assays.csv", values="cu", crs=None)


ASSAYS = "A,0,3,1\nA,3,6,2\nA,6,10,4\n"


def test_compositing_restarts_at_each_contact_by_hand(tmp_path):
    holes = _holes(tmp_path, ASSAYS)
    _write(tmp_path / "logged.csv", "hole_id,from,to,unit\nA,0,5,oxide\nA,5,12,2\nA,12,20,fresh\n")
    logged = read_unit_intervals(tmp_path / "logged.csv", TABLE)
    c = composite_by_unit(holes, logged, 2.0)
    # oxide 0-5 holds assays 0-3 (1) and 3-5 (2, split at the contact): runs 0-2, 2-4 and the 1 m residual
    #   4-5 (kept: 1 >= 0.5 x 2): 1, (1 + 2) / 2 = 1.5, 2 at depths 1, 3, 4.5
    # fresh 5-20 (5-12 and 12-20 are one stretch) holds 5-6 (2) and 6-10 (4): runs 5-7, 7-9, 9-10:
    #   (2 + 4) / 2 = 3, 4, 4 at depths 6, 8, 9.5
    assert c.column().tolist() == [1.0, 1.5, 2.0, 3.0, 4.0, 4.0]
    assert c.attributes["unit"].tolist() == [1, 1, 1, 2, 2, 2] and c.attributes["unit"].dtype == np.int32
    assert c.attributes["from"].tolist() == [0, 2, 4, 5, 7, 9] and c.attributes["to"].tolist() == [2, 4, 5, 7, 9, 10]
    np.testing.assert_allclose(c.coords[:, 2], 100 - np.array([1, 3, 4.5, 6, 8, 9.5]))
    assert str(tmp_path / "logged.csv") in c.source
    assert "1 contact(s) in 1 hole(s); 1 assay interval(s) split at a contact" in c.notes[-1]
    # without units the run 4-6 straddles the contact: (1 x 2 + 1 x 4) / 2
    assert composite(holes, 2.0).column().tolist()[:4] == [1.0, 1.5, 2.0, 4.0]
    # the sample codes reach the run through sample_units
    assert sample_units(c, {"intervals": "logged.csv"}, TABLE).tolist() == [1, 1, 1, 2, 2, 2]


def test_a_short_stretch_is_its_own_composite(tmp_path):
    holes = _holes(tmp_path, ASSAYS)
    _write(tmp_path / "logged.csv", "hole_id,from,to,unit\nA,0,0.5,9\nA,0.5,20,1\n")
    c = composite_by_unit(holes, read_unit_intervals(tmp_path / "logged.csv", TABLE), 4.0)
    # cover 0-0.5 is one composite (its only run); oxide from 0.5: 0.5-4.5 = (2.5 x 1 + 1.5 x 2) / 4,
    # 4.5-8.5 = (1.5 x 2 + 2.5 x 4) / 4, residual 8.5-10 (1.5 < 2) merged into it: (1.5 x 2 + 4 x 4) / 5.5
    assert c.attributes["unit"].tolist() == [9, 1, 1]
    np.testing.assert_allclose(c.column(), [1.0, 5.5 / 4, 19.0 / 5.5])


def test_assay_without_a_logged_unit_is_refused(tmp_path):
    holes = _holes(tmp_path, ASSAYS + "B,0,2,5\n")
    _write(tmp_path / "logged.csv", "hole_id,from,to,unit\nA,0,5,1\nA,6,20,2\nB,0,20,1\n")
    with pytest.raises(InputError) as err:
        composite_by_unit(holes, read_unit_intervals(tmp_path / "logged.csv", TABLE), 2.0)
    text = str(err.value)
    assert err.value.file == str(tmp_path / "assays.csv")
    assert "hole 'A': the assay interval 3-6 m has no logged unit (no unit is logged over 5-6 m" in text
    assert str(tmp_path / "logged.csv") in err.value.fix
    # a hole with assays and no logged unit at all
    _write(tmp_path / "logged.csv", "hole_id,from,to,unit\nA,0,20,1\n")
    with pytest.raises(InputError, match="hole 'B'.*no unit is logged in the hole"):
        composite_by_unit(holes, read_unit_intervals(tmp_path / "logged.csv", TABLE), 2.0)
    # an interval that was not assayed may lie outside the logged units
    holes = _holes(tmp_path, ASSAYS + "A,12,14,\n")
    _write(tmp_path / "logged.csv", "hole_id,from,to,unit\nA,0,10,1\n")
    c = composite_by_unit(holes, read_unit_intervals(tmp_path / "logged.csv", TABLE), 2.0)
    assert set(c.attributes["unit"].tolist()) == {1}


def test_logged_holes_must_exist_and_fit(tmp_path):
    holes = _holes(tmp_path, ASSAYS)
    _write(tmp_path / "logged.csv", "hole_id,from,to,unit\nA,0,20,1\nC,0,5,2\n")
    with pytest.raises(InputError, match="hole 'C' of the logged units is not in the collar table") as err:
        composite_by_unit(holes, read_unit_intervals(tmp_path / "logged.csv", TABLE), 2.0)
    assert err.value.row == 3
    _write(tmp_path / "logged.csv", "hole_id,from,to,unit\nA,0,25,1\n")
    with pytest.raises(InputError, match="past the hole's total depth 20") as err:
        composite_by_unit(holes, read_unit_intervals(tmp_path / "logged.csv", TABLE), 2.0)
    assert err.value.row == 2


@pytest.mark.parametrize("rows, row, field, words", [
    ("A,0,5,1\nB,0,4,2\nA,4,9,2\n", 4, "from", "logged units of hole 'A' overlap: oxide (1) 0-5 m (row 2) and "
                                                "fresh (2) 4-9 m (row 4)"),
    ("A,0,5,1\nA,5,7,2\nA,6.5,9,2\n", 4, "from", "overlap: fresh (2) 5-7 m (row 3) and fresh (2) 6.5-9 m (row 4)"),
    ("A,0,5,1\nA,5,5,2\n", 3, "to", "'from' 5 is not less than 'to' 5"),
    ("A,-1,5,1\n", 2, "from", "above the collar"),
    ("A,0,5,1.5\n", 2, "unit", "neither an integer nor a unit name"),
    ("A,0,5,granite\n", 2, "unit", "not one of the run's units"),
])
def test_logged_units_table_errors(tmp_path, rows, row, field, words):
    path = _write(tmp_path / "logged.csv", "hole_id,from,to,unit\n" + rows)
    with pytest.raises(InputError) as err:
        read_unit_intervals(path, TABLE)
    assert words in str(err.value)
    assert (err.value.file, err.value.row, err.value.field) == (str(path), row, field)


def test_logged_units_columns_renamed(tmp_path):
    path = _write(tmp_path / "logged.csv", "HOLE;FROM_M;TO_M;LITH\nA;5;20;fresh\nA;0;5;oxide\n")
    logged = read_unit_intervals(path, TABLE, hole="HOLE", start="FROM_M", end="TO_M", code="LITH")
    assert logged.codes.tolist() == [1, 2] and logged.rows.tolist() == [3, 2] and logged.starts.tolist() == [0, 5]
    with pytest.raises(InputError, match="LITH"):
        read_unit_intervals(path, TABLE, hole="HOLE", start="FROM_M", end="TO_M")


def test_polygons_from_a_geopackage_layer(tmp_path):
    gpd = pytest.importorskip("geopandas")
    shapely = pytest.importorskip("shapely")
    utm = parse_crs(32633)
    grid = geosim.Grid(500000.0, 0.0, (10.0, 10.0), (4, 4), crs=utm)
    boxes = [shapely.box(500000, 0, 500020, 40), shapely.box(500020, 0, 500040, 40)]
    gpd.GeoDataFrame({"lith": ["oxide", "fresh"]}, geometry=boxes, crs="EPSG:32633").to_file(
        tmp_path / "u.gpkg", layer="units")
    codes = node_units(grid, {"polygons": "u.gpkg", "attribute": "lith"}, TABLE, base=tmp_path)
    np.testing.assert_array_equal(codes, np.repeat([[1, 1, 2, 2]], 4, axis=0))
    # fresh drawn 2 m into oxide: 2 x 40 = 80 square metres of overlap, refused
    boxes[1] = shapely.box(500018, 0, 500040, 40)
    gpd.GeoDataFrame({"lith": ["oxide", "fresh"]}, geometry=boxes, crs="EPSG:32633").to_file(
        tmp_path / "v.gpkg", layer="units")
    with pytest.raises(InputError, match="feature 1 .oxide .1.. and feature 2 .fresh .2.. overlap over 80 square"):
        node_units(grid, {"polygons": "v.gpkg", "attribute": "lith"}, TABLE, base=tmp_path)
