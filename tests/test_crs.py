"""CRS parsing, reprojection to metres and the UTM zone choice."""
from __future__ import annotations

import warnings

import numpy as np
import pytest
from pyproj import CRS, Transformer
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

import geosim
from geosim.crs import centroid_lonlat, parse_crs, to_projected, utm_crs
from geosim.errors import InputError


def test_iogp_transverse_mercator_worked_example():
    # IOGP Publication 373-7-2, Geomatics Guidance Note 7 part 2 (Coordinate Conversions and
    # Transformations including Formulas), Transverse Mercator example: OSGB 1936 / British National
    # Grid, latitude 50d30'00"N, longitude 00d30'00"E -> E = 577274.99 m, N = 69740.50 m.
    # Values recalled from memory.  Only the map projection is exercised (same datum both sides).
    xy, crs, note = to_projected(np.array([[0.5, 50.5]]), "EPSG:4277", "EPSG:27700")
    assert crs.to_epsg() == 27700
    assert xy[0, 0] == pytest.approx(577274.99, abs=0.02)
    assert xy[0, 1] == pytest.approx(69740.50, abs=0.02)
    assert note == "reprojected EPSG:4277 -> EPSG:27700"


def test_snyder_ellipsoidal_transverse_mercator_example():
    # Snyder (1987), Map Projections - A Working Manual, USGS Professional Paper 1395, worked
    # example of the ellipsoidal Transverse Mercator (Clarke 1866, central meridian 75W,
    # k0 = 0.9996, no false easting): lat 40.5N, lon 73.5W -> x = 127106.5 m, y = 4484124.4 m.
    # Values recalled from memory.  PROJ strings exercise parse_crs on PROJ text too.
    src = "+proj=longlat +ellps=clrk66 +no_defs"
    dst = "+proj=tmerc +lat_0=0 +lon_0=-75 +k=0.9996 +x_0=0 +y_0=0 +ellps=clrk66 +units=m +no_defs"
    xy, _, _ = to_projected(np.array([[-73.5, 40.5, 12.0]]), src, dst)
    assert xy[0, 0] == pytest.approx(127106.5, abs=0.1)
    assert xy[0, 1] == pytest.approx(4484124.4, abs=0.1)
    assert xy[0, 2] == 12.0  # heights pass through


@pytest.mark.parametrize("text", ["EPSG:32633", "32633", 32633, " epsg:32633 ",
                                  CRS.from_epsg(32633).to_wkt(), "+proj=utm +zone=33 +datum=WGS84 +units=m"])
def test_parse_crs_forms(text):
    crs = parse_crs(text)
    assert crs.is_projected
    assert crs.equals(CRS.from_epsg(32633), ignore_axis_order=True)


@pytest.mark.parametrize("text", ["EPSG:999999", "not a crs", "+proj=nonsense"])
def test_parse_crs_rejects_text_pyproj_cannot_read(text):
    with pytest.raises(InputError) as err:
        parse_crs(text, file="run.toml", field="crs")
    assert err.value.file == "run.toml" and err.value.field == "crs"
    assert "EPSG" in err.value.fix


def test_geographic_input_goes_to_utm_zone_of_centroid_with_warning(notes):
    lonlat = np.array([[15.1, 48.2], [15.3, 48.0]])
    with notes("UTM zone of the data centroid"):
        xy, crs, note = to_projected(lonlat, "EPSG:4326")
    assert crs.to_epsg() == 32633
    assert note == "reprojected EPSG:4326 -> EPSG:32633 (UTM zone of the data centroid)"
    # against pyproj directly (reference library)
    ref = Transformer.from_crs(4326, 32633, always_xy=True).transform(lonlat[:, 0], lonlat[:, 1])
    np.testing.assert_allclose(xy, np.column_stack(ref), atol=1e-6)


def test_southern_hemisphere_zone(notes):
    with notes():
        _, crs, _ = to_projected(np.array([[-33.2, -38.7]]), 4326)
    assert crs.to_epsg() == 32725


def test_utm_zone_agrees_with_pyproj_database():
    # pyproj's EPSG database (reference library) lists the UTM CRSs whose area of use holds a point;
    # away from zone edges and the Norway/Svalbard exceptions it must be exactly our zone
    rng = np.random.default_rng(7)
    for _ in range(8):  # each database query takes ~0.15 s
        zone = int(rng.integers(1, 61))
        lon = -180.0 + 6.0 * (zone - 1) + rng.uniform(0.5, 5.5)
        lat = float(rng.choice([-1.0, 1.0]) * rng.uniform(1.0, 55.0))
        info = query_utm_crs_info(datum_name="WGS 84", area_of_interest=AreaOfInterest(lon, lat, lon, lat))
        codes = {int(i.code) for i in info if i.name.startswith("WGS 84 / UTM zone")}
        assert utm_crs(lon, lat).to_epsg() in codes


def test_utm_zone_exceptions():
    # south-west Norway is in zone 32, Svalbard in the odd zones 31-37 (UTM grid definition, from memory)
    assert utm_crs(5.0, 60.0).to_epsg() == 32632
    assert utm_crs(2.0, 60.0).to_epsg() == 32631
    assert utm_crs(10.0, 78.0).to_epsg() == 32633
    assert utm_crs(25.0, 78.0).to_epsg() == 32635
    assert utm_crs(180.0, 0.0).to_epsg() == 32660


def test_centroid_across_the_antimeridian():
    lon, lat = centroid_lonlat(np.array([179.9, -179.9]), np.array([-17.0, -17.2]))
    assert abs(abs(lon) - 180.0) < 1e-9
    assert lat == pytest.approx(-17.1)


def test_projected_metres_pass_through_unchanged():
    xy = np.array([[500000.0, 4000000.0], [500100.0, 4000050.0]])
    out, crs, note = to_projected(xy, "EPSG:32633")
    np.testing.assert_array_equal(out, xy)
    assert note is None and crs.to_epsg() == 32633


def test_local_grid_without_crs():
    out, crs, note = to_projected(np.array([[10.0, 20.0, 5.0]]), None)
    assert crs is None and note is None and out.shape == (1, 3)
    with pytest.raises(InputError, match="target CRS was given"):
        to_projected(np.array([[10.0, 20.0]]), None, "EPSG:32633")


def test_feet_crs_needs_a_metre_target():
    # EPSG:2263, NAD83 / New York Long Island (ftUS)
    xy = np.array([[1000000.0, 200000.0]])
    with pytest.raises(InputError, match="metres"):
        to_projected(xy, "EPSG:2263")
    out, crs, note = to_projected(xy, "EPSG:2263", "EPSG:32618")
    assert crs.to_epsg() == 32618 and note.startswith("reprojected EPSG:2263")
    ref = Transformer.from_crs(2263, 32618, always_xy=True).transform(1000000.0, 200000.0)
    np.testing.assert_allclose(out[0], ref, atol=1e-6)


def test_target_must_be_projected_metres():
    with pytest.raises(InputError, match="not a projected CRS in metres"):
        to_projected(np.array([[15.0, 48.0]]), 4326, 4326)


def test_degrees_out_of_range_and_swapped_axes():
    with pytest.raises(InputError, match="swapped"):
        to_projected(np.array([[48.0, 15.0], [48.2, 95.0]]), "EPSG:4326", file="wells.csv")
    with pytest.raises(InputError, match="not degrees") as err:
        to_projected(np.array([[512000.0, 5300000.0]]), "EPSG:4326", file="wells.csv")
    assert err.value.file == "wells.csv"


def test_projected_coordinates_that_look_like_degrees_warn(notes):
    # EPSG:3857 covers the world, so small numbers are possible metres there: only a hint
    with notes("look like degrees"):
        to_projected(np.array([[15.12345, 48.21234], [15.2, 48.3]]), "EPSG:3857")
    notes.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a small survey in metres with round coordinates is fine
        to_projected(np.array([[15.1, 48.2], [15.2, 48.3]]), "EPSG:3857")
    assert not notes.logged()


def test_degrees_declared_projected_are_refused_naming_the_row():
    # (15.2 E, 48.1 N) read as metres of UTM 33 N lie 500 km west of its central meridian
    # at the equator, about longitude 10.5: outside the zone's 12-18 E (EPSG area of use)
    with pytest.raises(InputError, match="look like longitude/latitude") as err:
        to_projected(np.array([[15.2, 48.1], [15.3, 48.2]]), "EPSG:32633", file="wells.csv", rows=[7, 8])
    assert err.value.file == "wells.csv" and err.value.row == 7 and "EPSG:4326" in err.value.fix
    # New Zealand Transverse Mercator (EPSG:2193): 172.5, -43.5 as metres is off New Zealand
    with pytest.raises(InputError, match="look like longitude/latitude"):
        to_projected(np.array([[172.5, -43.5]]), "EPSG:2193")
    # the same place in real UTM metres passes untouched
    xy = np.array([[480000.0, 5300000.0]])
    assert np.array_equal(to_projected(xy, "EPSG:32633")[0], xy)


def test_projected_declared_geographic_names_the_row():
    with pytest.raises(InputError, match="not a longitude/latitude") as err:
        to_projected(np.array([[1.0, 2.0], [512000.0, 5300000.0]]), "EPSG:4326", file="wells.csv", rows=[2, 3])
    assert err.value.row == 3 and "point" not in err.value.message


def test_no_warning_when_target_given(notes):
    notes.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _, crs, note = to_projected(np.array([[15.1, 48.2]]), 4326, "EPSG:32634")
    assert not notes.logged()
    assert crs.to_epsg() == 32634 and "UTM zone of the data centroid" not in note


def test_public_names():
    assert geosim.parse_crs is parse_crs and geosim.to_projected is to_projected


def test_local_grid_that_looks_like_degrees_warns(notes):
    with notes("local grid"):
        to_projected(np.array([[15.1, 48.2], [15.2, 48.30001]]), None)
