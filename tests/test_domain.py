"""Tests of geosim.domain: GeoJSON and raster domains."""
from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pytest
import rasterio
import shapely
from pyproj import Geod, Transformer
from rasterio.transform import from_origin
from shapely.geometry import Polygon

from geosim.domain import read_domain, read_domain_raster
from geosim.errors import InputError
from geosim.grid import Grid

SAMPLES = Path(__file__).resolve().parents[1] / "sample_fields"

# a small quadrilateral in lon/lat near the central meridian of UTM zone 33 N (15 E)
RING = [[14.98, 47.50], [15.03, 47.49], [15.05, 47.53], [14.99, 47.54], [14.98, 47.50]]


def _write(tmp_path: Path, obj, name: str = "domain.geojson") -> Path:
    path = tmp_path / name
    path.write_text(obj if isinstance(obj, str) else json.dumps(obj))
    return path


def _feature(geometry: dict) -> dict:
    return {"type": "Feature", "properties": {}, "geometry": geometry}


def _collection(*geometries: dict, **extra) -> dict:
    return {"type": "FeatureCollection", "features": [_feature(g) for g in geometries], **extra}


def _to_utm33(lonlat) -> np.ndarray:
    tr = Transformer.from_crs("EPSG:4326", "EPSG:32633", always_xy=True)
    x, y = tr.transform(*np.asarray(lonlat, dtype=float).T)
    return np.column_stack([x, y])


# ---------------------------------------------------------------------------
# GeoJSON
# ---------------------------------------------------------------------------

def test_lonlat_polygon_matches_pyproj_and_geodesic_area(tmp_path):
    path = _write(tmp_path, _collection({"type": "Polygon", "coordinates": [RING]}))
    poly = read_domain(path, "EPSG:32633")
    assert isinstance(poly, Polygon) and poly.is_valid
    got = shapely.get_coordinates(poly)
    # every vertex of the file, reprojected by pyproj directly, is a vertex of the result
    for p in _to_utm33(RING):
        assert np.min(np.hypot(*(got - p).T)) < 1e-6
    # the edges were densified: straight in lon/lat (RFC 7946, Butler et al. 2016, section 3.1.1)
    assert len(got) > len(RING)
    # area against pyproj's geodesic area (Karney 2013, "Algorithms for geodesics", J. Geodesy 87).
    # Within 5 km of the central meridian the UTM scale factor is 0.9996 to 0.99960031 (k0 = 0.9996,
    # Snyder 1987, "Map Projections: A Working Manual", USGS PP 1395, eq. 8-11), so the projected area is
    # the geodesic area times k^2 = 0.99920 to within 1e-6.
    geodesic_area = abs(Geod(ellps="WGS84").geometry_area_perimeter(Polygon(RING))[0])
    assert poly.area / geodesic_area == pytest.approx(0.9996**2, rel=2e-5)


def test_feature_bare_geometry_and_collection_agree(tmp_path):
    geometry = {"type": "Polygon", "coordinates": [RING]}
    a = read_domain(_write(tmp_path, geometry, "a.geojson"), 32633)
    b = read_domain(_write(tmp_path, _feature(geometry), "b.geojson"), "32633")
    c = read_domain(_write(tmp_path, _collection(geometry), "c.geojson"), "EPSG:32633")
    d = read_domain(_write(tmp_path, {"type": "GeometryCollection", "geometries": [geometry]}, "d.geojson"),
                    "EPSG:32633")
    assert a.equals(b) and a.equals(c) and a.equals(d)


def test_several_polygons_are_united(tmp_path):
    left = [[15.0, 47.0], [15.01, 47.0], [15.01, 47.01], [15.0, 47.01], [15.0, 47.0]]
    right = [[15.02, 47.0], [15.03, 47.0], [15.03, 47.01], [15.02, 47.01], [15.02, 47.0]]
    overlapping = [[15.005, 47.0], [15.015, 47.0], [15.015, 47.01], [15.005, 47.01], [15.005, 47.0]]
    doc = _collection({"type": "Polygon", "coordinates": [left]},
                      {"type": "MultiPolygon", "coordinates": [[right], [overlapping]]})
    doc["features"].append({"type": "Feature", "properties": {}, "geometry": None})  # skipped
    geom = read_domain(_write(tmp_path, doc), "EPSG:32633")
    assert geom.geom_type == "MultiPolygon" and len(geom.geoms) == 2
    # reference: pyproj on the same polygons with the same densified edges (straight in lon/lat)
    parts = [shapely.transform(shapely.segmentize(Polygon(r), 0.001), _to_utm33) for r in (left, right, overlapping)]
    assert geom.area == pytest.approx(shapely.union_all(parts).area, rel=1e-9)


def test_legacy_crs_member_projected(tmp_path):
    xy = _to_utm33(RING)
    ring = [[float(x), float(y)] for x, y in xy]
    for name in ("EPSG:32633", "urn:ogc:def:crs:EPSG::32633"):
        doc = _collection({"type": "Polygon", "coordinates": [ring]},
                          crs={"type": "name", "properties": {"name": name}})
        path = _write(tmp_path, doc)
        same = read_domain(path, "EPSG:32633")
        assert np.allclose(shapely.get_coordinates(same), xy, atol=1e-9, rtol=0)
        # into the neighbouring zone, compared with pyproj directly (projected -> projected: no densifying)
        other = read_domain(path, "EPSG:32634")
        tr = Transformer.from_crs("EPSG:32633", "EPSG:32634", always_xy=True)
        expected = np.column_stack(tr.transform(xy[:, 0], xy[:, 1]))
        assert np.allclose(shapely.get_coordinates(other), expected, atol=1e-6, rtol=0)
    old_style = _collection({"type": "Polygon", "coordinates": [ring]},
                            crs={"type": "EPSG", "properties": {"code": 32633}})
    assert read_domain(_write(tmp_path, old_style), 32633).equals(same)


def test_legacy_geographic_crs_member_keeps_lon_first(tmp_path):
    plain = read_domain(_write(tmp_path, {"type": "Polygon", "coordinates": [RING]}, "a.geojson"), 32633)
    for name in ("EPSG:4326", "urn:ogc:def:crs:OGC:1.3:CRS84", "urn:ogc:def:crs:EPSG::4326"):
        doc = _collection({"type": "Polygon", "coordinates": [RING]},
                          crs={"type": "name", "properties": {"name": name}})
        assert read_domain(_write(tmp_path, doc, "b.geojson"), 32633).equals(plain)


def test_source_crs_argument_overrides(tmp_path):
    xy = _to_utm33(RING)
    doc = {"type": "Polygon", "coordinates": [[[float(x), float(y)] for x, y in xy]]}
    poly = read_domain(_write(tmp_path, doc), "EPSG:32633", source_crs="EPSG:32633")
    assert np.allclose(shapely.get_coordinates(poly), xy, atol=1e-9, rtol=0)


def test_holes_and_heights(tmp_path):
    hole = [[15.00, 47.51], [15.01, 47.51], [15.01, 47.52], [15.00, 47.51]]
    with_z = [[x, y, 420.0] for x, y in RING]
    poly = read_domain(_write(tmp_path, {"type": "Polygon", "coordinates": [with_z, hole]}), "EPSG:32633")
    assert not poly.has_z and len(poly.interiors) == 1
    solid = read_domain(_write(tmp_path, {"type": "Polygon", "coordinates": [RING]}, "solid.geojson"),
                        "EPSG:32633")
    hole_utm = shapely.transform(shapely.segmentize(Polygon(hole), 0.001), _to_utm33)
    assert poly.area == pytest.approx(solid.area - hole_utm.area, rel=1e-9)


def test_local_grid_without_crs(tmp_path, notes):
    local = [[1000.0, 2000.0], [1400.0, 2000.0], [1400.0, 2300.0], [1000.0, 2300.0], [1000.0, 2000.0]]
    poly = read_domain(_write(tmp_path, {"type": "Polygon", "coordinates": [local]}), None)
    assert poly.bounds == (1000.0, 2000.0, 1400.0, 2300.0)
    named = _collection({"type": "Polygon", "coordinates": [local]},
                        crs={"type": "name", "properties": {"name": "EPSG:32633"}})
    with pytest.raises(InputError, match="the data have none"):
        read_domain(_write(tmp_path, named, "named.geojson"), None)
    with notes("look like longitude/latitude"):
        read_domain(_write(tmp_path, {"type": "Polygon", "coordinates": [RING]}, "lonlat.geojson"), None)


def test_self_intersecting_polygon_is_repaired_with_a_warning(tmp_path, notes):
    bowtie = [[15.0, 47.0], [15.01, 47.01], [15.01, 47.0], [15.0, 47.01], [15.0, 47.0]]
    path = _write(tmp_path, {"type": "Polygon", "coordinates": [bowtie]})
    with notes("Self-intersection"):
        geom = read_domain(path, "EPSG:32633")
    assert geom.is_valid
    # the repaired bow tie is its two triangles: half of the square they span
    square = Polygon([[15.0, 47.0], [15.01, 47.0], [15.01, 47.01], [15.0, 47.01]])
    square_utm = shapely.transform(shapely.segmentize(square, 0.001), _to_utm33)
    assert geom.area == pytest.approx(square_utm.area / 2, rel=1e-4)


def test_valid_polygon_reads_without_warning(tmp_path, notes):
    path = _write(tmp_path, {"type": "Polygon", "coordinates": [RING]})
    notes.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        read_domain(path, "EPSG:32633")
    assert not notes.logged()


@pytest.mark.parametrize("content, expected", [
    ("{not json", "not valid JSON at line 1"),
    ("[1, 2]", "not GeoJSON"),
    ({"type": "Point", "coordinates": [15.0, 47.0]}, "holds no polygon"),
    (_collection({"type": "LineString", "coordinates": [[15.0, 47.0], [15.1, 47.1]]}), "features[0].geometry"),
    ({"type": "FeatureCollection", "features": []}, "holds no polygon"),
    ({"type": "FeatureCollection", "features": [{"type": "Polygon"}]}, "not a Feature"),
    ({"type": "Polygon", "coordinates": [[[15.0, 47.0], [15.1, 47.1]]]}, "malformed"),
    ({"type": "Polygon", "coordinates": [[[15.0, 47.0], [15.1, 47.0], [15.2, 47.0], [15.0, 47.0]]]}, "area"),
    ({"type": "Polygon", "coordinates": [[[500000.0, 5260000.0], [501000.0, 5260000.0],
                                          [501000.0, 5261000.0], [500000.0, 5260000.0]]]}, "'crs' member"),
    (_collection({"type": "Polygon", "coordinates": [RING]},
                 crs={"type": "link", "properties": {"href": "crs.txt"}}), "names no CRS"),
    (_collection({"type": "Polygon", "coordinates": [RING]},
                 crs={"type": "name", "properties": {"name": "EPSG:not-a-code"}}), "cannot read the CRS"),
])
def test_broken_files_raise_input_error_naming_the_file(tmp_path, content, expected):
    path = _write(tmp_path, content, "broken.geojson")
    with pytest.raises(InputError) as info:
        read_domain(path, "EPSG:32633")
    assert "broken.geojson" in str(info.value) and expected in str(info.value)


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="does not exist") as info:
        read_domain(tmp_path / "nowhere.geojson", "EPSG:32633")
    assert info.value.file.endswith("nowhere.geojson")


def test_sample_domains_hold_their_samples():
    ore = read_domain(SAMPLES / "ore_prospect" / "domain.geojson", "EPSG:32750")
    collars = np.genfromtxt(SAMPLES / "ore_prospect" / "collars.csv", delimiter=",", names=True,
                            dtype=None, encoding="utf-8")
    assert ore.contains(shapely.points(np.column_stack([collars["x"], collars["y"]]))).all()
    valley = read_domain(SAMPLES / "alluvial_aquifer" / "domain.geojson", 32725)
    wells = np.genfromtxt(SAMPLES / "alluvial_aquifer" / "wells.csv", delimiter=",", names=True,
                          dtype=None, encoding="utf-8")
    tr = Transformer.from_crs("EPSG:4326", "EPSG:32725", always_xy=True)
    assert valley.contains(shapely.points(np.column_stack(tr.transform(wells["lon"], wells["lat"])))).all()


# ---------------------------------------------------------------------------
# rasters
# ---------------------------------------------------------------------------

def _write_raster(path: Path, data: np.ndarray, transform, crs, nodata=None) -> Path:
    with rasterio.open(path, "w", driver="GTiff", height=data.shape[0], width=data.shape[1], count=1,
                       dtype=data.dtype, crs=crs, transform=transform, nodata=nodata) as dst:
        dst.write(data, 1)
    return path


def test_raster_same_crs_samples_the_cell_under_each_node(tmp_path):
    # 10 m raster over x 1000-1100, y 2000-2080; values 0/1/2 plus a nodata cell and a NaN cell
    data = np.zeros((8, 10), dtype=np.float32)
    data[:, :4] = 1.0
    data[2:5, 6:9] = 2.0
    data[0, 0] = -9999.0  # nodata: outside
    data[1, 1] = np.nan   # outside
    path = _write_raster(tmp_path / "mask.tif", data, from_origin(1000.0, 2080.0, 10.0, 10.0), "EPSG:32633",
                         nodata=-9999.0)
    # a 7 m grid that overhangs the raster on every side
    grid = Grid(985.0, 1990.0, (7.0, 7.0), (15, 19), crs="EPSG:32633")
    mask = read_domain_raster(path, grid)
    assert mask.shape == grid.shape and mask.dtype == bool
    yy, xx = grid.axes()
    for i, y in enumerate(yy):
        for j, x in enumerate(xx):
            col, row = int(np.floor((x - 1000.0) / 10.0)), int(np.floor((2080.0 - y) / 10.0))
            inside = 0 <= row < 8 and 0 <= col < 10 and np.isfinite(data[row, col]) \
                and data[row, col] not in (0.0, -9999.0)
            assert mask[i, j] == inside, (i, j)
    assert mask.any() and not mask.all()


def test_raster_in_lonlat_agrees_with_gdal_nearest_warp(tmp_path):
    from rasterio.warp import Resampling, reproject
    rng = np.random.default_rng(7)
    data = (rng.random((40, 50)) < 0.6).astype(np.uint8)
    src_transform = from_origin(14.99, 47.52, 0.0008, 0.0006)
    path = _write_raster(tmp_path / "mask.tif", data, src_transform, "EPSG:4326")
    x0, y0 = _to_utm33([[14.985, 47.49]])[0]
    grid = Grid(float(np.floor(x0)), float(np.floor(y0)), (23.0, 23.0), (160, 190), crs="EPSG:32633")
    mask = read_domain_raster(path, grid)
    # reference: GDAL's nearest-neighbour warp through rasterio; nodes beyond the raster get 255
    ref = np.zeros((grid.ny, grid.nx), dtype=np.uint8)
    reproject(data, ref, src_transform=src_transform, src_crs="EPSG:4326", dst_transform=grid.transform,
              dst_crs="EPSG:32633", resampling=Resampling.nearest, src_nodata=255)
    # GDAL's warper approximates the transformation on a coarse mesh (error threshold 0.125 pixel by
    # default), so nodes very near a cell edge may land in the neighbouring cell: allow 1 %
    disagree = np.mean(mask != (ref == 1))
    assert disagree < 0.01
    # among covered nodes the inside fraction matches the raster's: about 8 nodes fall in each of the
    # 2000 cells, so the fraction's sampling error is about sqrt(0.24 / 2000) = 0.011; allow 3 of it
    covered = ref != 255
    assert 0.1 < covered.mean() < 0.9
    assert mask[covered].mean() == pytest.approx(data.mean(), abs=0.033)
    assert not mask[~covered].any()


def test_raster_mask_on_3d_grid_repeats_on_every_level(tmp_path):
    data = np.array([[1, 0], [0, 1]], dtype=np.uint8)
    path = _write_raster(tmp_path / "m.tif", data, from_origin(0.0, 20.0, 10.0, 10.0), "EPSG:32633")
    grid = Grid(0.0, 0.0, (5.0, 5.0, 2.0), (3, 4, 4), crs="EPSG:32633")
    mask = read_domain_raster(path, grid)
    expected = np.kron(data.astype(bool), np.ones((2, 2), dtype=bool))
    assert mask.shape == (3, 4, 4)
    assert all((mask[k] == expected).all() for k in range(3))


def test_raster_without_crs_warns_and_uses_grid_coordinates(tmp_path, notes):
    data = np.array([[1, 0]], dtype=np.uint8)
    path = _write_raster(tmp_path / "m.tif", data, from_origin(0.0, 10.0, 10.0, 10.0), None)
    grid = Grid(0.0, 0.0, (10.0, 10.0), (1, 2), crs="EPSG:32633")
    with notes("no CRS"):
        mask = read_domain_raster(path, grid)
    assert mask.tolist() == [[True, False]]


def test_unreadable_raster_raises_input_error(tmp_path):
    path = tmp_path / "not_a_raster.tif"
    path.write_text("hello")
    grid = Grid(0.0, 0.0, (10.0, 10.0), (2, 2), crs="EPSG:32633")
    with pytest.raises(InputError, match="not_a_raster.tif"):
        read_domain_raster(path, grid)
