"""GIS vector files and data frames as inputs: the same samples and domain as the CSV/GeoJSON run.

The files are written in each test with pyogrio (GDAL/OGR) and GeoPandas, the tools a
GIS user's files come from, so geosim's readers are checked against independent writers.
"""
import json
import re
import shutil
from pathlib import Path

import numpy as np
import pytest

import geosim
import geosim.pipeline
from geosim.errors import InputError
from geosim.config.runspec import load_spec
from geosim.points import read_points

pyogrio = pytest.importorskip("pyogrio")
pd = pytest.importorskip("pandas")
gpd = pytest.importorskip("geopandas")
shapely = pytest.importorskip("shapely")

AQUIFER = Path(__file__).resolve().parent.parent / "sample_fields" / "alluvial_aquifer"


def wells_frame():
    return pd.read_csv(AQUIFER / "wells.csv")


def wells_layer():
    frame = wells_frame()
    return gpd.GeoDataFrame(frame[["well_id", "k_ms"]], crs="EPSG:4326",
                            geometry=gpd.points_from_xy(frame["lon"], frame["lat"]))


def domain_layer():
    return gpd.read_file(AQUIFER / "domain.geojson")


def vector_spec(folder, points, polygon, layer=None):
    """The sample run spec with the points and domain from vector files: no x, y or crs keys."""
    text = (AQUIFER / "run.toml").read_text()
    text = text[:text.index("[query_points]")]  # its x and y name the planned wells' own columns
    text = re.sub(r'(?m)^(x|y|crs) = .*$', "", text)
    text = text.replace('points = "wells.csv"', f'points = "{points}"' + (f'\nlayer = "{layer}"' if layer else ""))
    text = text.replace('polygon = "domain.geojson"', f'polygon = "{polygon}"')
    (folder / "run.toml").write_text(text)
    return load_spec(folder / "run.toml", overrides=SMALL)


SMALL = {"grid.cell": [100.0, 100.0], "simulation.realizations": 4, "simulation.workers": 1,
         "outputs.plots": False}


@pytest.fixture(scope="module")
def csv_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("csv") / "run"
    spec = load_spec(AQUIFER / "run.toml", overrides=SMALL)
    return spec, geosim.pipeline.run(spec, out), out


def test_geopackage_run_equals_the_csv_run(csv_run, tmp_path):
    spec_csv, result_csv, out_csv = csv_run
    pyogrio.write_dataframe(wells_layer(), tmp_path / "wells.gpkg", layer="wells")
    pyogrio.write_dataframe(domain_layer(), tmp_path / "domain.gpkg", layer="valley")
    spec = vector_spec(tmp_path, "wells.gpkg", "domain.gpkg")
    result = geosim.pipeline.run(spec, tmp_path / "run")
    data, data_csv = geosim.pipeline.prepare_data(spec), geosim.pipeline.prepare_data(spec_csv)
    np.testing.assert_array_equal(data.coords, data_csv.coords)
    np.testing.assert_array_equal(data.scores, data_csv.scores)
    assert str(result.model) == str(result_csv.model)
    import rasterio
    with rasterio.open(out_csv / "summary.tif") as a, rasterio.open(tmp_path / "run" / "summary.tif") as b:
        assert a.crs == b.crs and a.transform == b.transform
        np.testing.assert_array_equal(a.read(), b.read())
    assert (tmp_path / "run" / "decision_spread.csv").read_text() == (out_csv / "decision_spread.csv").read_text()


def test_shapefile_run_equals_the_csv_run(csv_run, tmp_path):
    spec_csv, result_csv, out_csv = csv_run
    pyogrio.write_dataframe(wells_layer(), tmp_path / "wells.shp")
    pyogrio.write_dataframe(domain_layer(), tmp_path / "domain.shp")
    spec = vector_spec(tmp_path, "wells.shp", "domain.shp")
    data, data_csv = geosim.pipeline.prepare_data(spec), geosim.pipeline.prepare_data(spec_csv)
    np.testing.assert_array_equal(data.coords, data_csv.coords)
    np.testing.assert_array_equal(data.values, data_csv.values)
    assert data.crs == data_csv.crs
    grid, grid_csv = geosim.pipeline.make_grid(spec, data), geosim.pipeline.make_grid(spec_csv, data_csv)
    assert grid.shape == grid_csv.shape and grid.xmin == grid_csv.xmin
    np.testing.assert_array_equal(grid.mask, grid_csv.mask)
    result = geosim.pipeline.run(spec, tmp_path / "run")
    assert str(result.model) == str(result_csv.model)
    import rasterio
    for name in ("summary.tif", "realizations.tif", "estimate.tif"):
        with rasterio.open(out_csv / name) as a, rasterio.open(tmp_path / "run" / name) as b:
            assert a.crs == b.crs and a.transform == b.transform
            np.testing.assert_array_equal(a.read(), b.read())
    for name in ("decision_figures.csv", "decision_spread.csv", "cross_validation.csv"):
        assert (tmp_path / "run" / name).read_text() == (out_csv / name).read_text(), name


@pytest.mark.parametrize("suffix", [".geojson", ".fgb", ".parquet"])
def test_other_formats_and_frames_read_the_same_points(suffix, tmp_path):
    ref = read_points(AQUIFER / "wells.csv", x="lon", y="lat", values="k_ms", hole="well_id", crs="EPSG:4326")
    path = tmp_path / f"wells{suffix}"
    if suffix == ".parquet":
        wells_layer().to_parquet(path)  # GeoParquet written by GeoPandas/pyarrow
    else:
        pyogrio.write_dataframe(wells_layer(), path)
    for source in (path, wells_layer()):
        got = read_points(source, values="k_ms", hole="well_id")
        # FlatGeobuf's spatial index stores features in its own order
        got = got.take(np.argsort(got.hole_ids, kind="stable"))
        np.testing.assert_array_equal(got.coords, ref.coords)
        np.testing.assert_array_equal(got.values, ref.values)
        np.testing.assert_array_equal(got.hole_ids, ref.hole_ids)
        assert got.crs == ref.crs
    plain = read_points(wells_frame(), x="lon", y="lat", values="k_ms", hole="well_id", crs="EPSG:4326")
    np.testing.assert_array_equal(plain.coords, ref.coords)


def test_bad_cells_are_named_by_file_layer_feature_and_field(tmp_path):
    layer = wells_layer()
    layer["k_ms"] = layer["k_ms"].astype(object)
    layer.loc[6, "k_ms"] = "n.d."
    pyogrio.write_dataframe(layer, tmp_path / "wells.gpkg", layer="wells")
    with pytest.raises(InputError) as err:
        read_points(tmp_path / "wells.gpkg", values="k_ms")
    assert err.value.row == 7 and err.value.field == "k_ms" and "layer wells" in str(err.value)
    assert "'n.d.' is not a number" in str(err.value)
    with pytest.raises(InputError, match=r"did you mean 'k_ms'"):
        read_points(tmp_path / "wells.gpkg", values="k_ms_")
    frame = wells_frame()
    frame.loc[3, "lat"] = np.nan
    with pytest.raises(InputError) as err:
        read_points(frame, x="lon", y="lat", values="k_ms", crs=4326)
    assert err.value.row == 3 and err.value.field == "lat" and "DataFrame" in str(err.value)


def test_wrong_geometry_layer_or_crs_is_refused_clearly(tmp_path):
    pyogrio.write_dataframe(domain_layer(), tmp_path / "domain.gpkg", layer="valley")
    with pytest.raises(InputError, match="Polygon, not a point") as err:
        read_points(tmp_path / "domain.gpkg", values="name")
    assert err.value.row == 1
    pyogrio.write_dataframe(wells_layer(), tmp_path / "domain.gpkg", layer="wells", append=True)
    with pytest.raises(InputError, match="2 layers: valley, wells"):
        read_points(tmp_path / "domain.gpkg", values="k_ms")
    with pytest.raises(InputError, match="did you mean 'wells'"):
        read_points(tmp_path / "domain.gpkg", values="k_ms", layer="well")
    assert len(read_points(tmp_path / "domain.gpkg", values="k_ms", layer="wells")) == 80
    with pytest.raises(InputError, match="differs from the file's"):
        read_points(tmp_path / "domain.gpkg", values="k_ms", layer="wells", crs="EPSG:32725")
    with pytest.raises(InputError, match="no point geometry"):
        read_points(wells_frame(), values="k_ms", crs=4326)
    (tmp_path / "broken.gpkg").write_bytes(b"not a database")
    with pytest.raises(InputError, match="GDAL cannot open"):
        read_points(tmp_path / "broken.gpkg", values="k_ms")


def test_domain_layer_without_crs_is_taken_in_the_data_crs(tmp_path, notes):
    utm = domain_layer().to_crs("EPSG:32725")
    reference = geosim.domain.read_domain(AQUIFER / "domain.geojson", "EPSG:32725")
    pyogrio.write_dataframe(utm.set_crs(None, allow_override=True), tmp_path / "outline.shp")
    with notes("declares no CRS"):
        got = geosim.domain.read_domain(tmp_path / "outline.shp", "EPSG:32725")
    # the GeoJSON reader densifies lon/lat edges before projecting; GeoPandas projects the corners only
    assert got.symmetric_difference(reference).area < 1e-4 * reference.area
    from_frame = geosim.domain.read_domain(utm, "EPSG:32725")
    assert from_frame.equals(got)


def test_run_spec_keys_for_vector_files(tmp_path):
    shutil.copy(AQUIFER / "wells.csv", tmp_path / "wells.csv")
    (tmp_path / "run.toml").write_text(
        '[data]\npoints = "wells.csv"\nvalue = "k_ms"\nlayer = "a"\n[grid]\ncell = [10.0, 10.0]\n'
        '[simulation]\nrealizations = 1\nseed = 1\n')
    with pytest.raises(geosim.errors.SpecError) as err:
        load_spec(tmp_path / "run.toml")
    text = str(err.value)
    assert "data.crs: required for CSV tables" in text and "data.x: required" in text and "data.layer" in text
    assert json.dumps(True)  # the spec module stays importable without the vector extra


def test_data_frames_through_the_run_spec_equal_the_csv_run(csv_run, tmp_path):
    spec_csv, _, out_csv = csv_run
    # a GeoDataFrame brings its coordinates and CRS: the spec's x, y and crs are dropped
    spec = load_spec(AQUIFER / "run.toml", overrides={**SMALL, "data.points": wells_layer(), "data.x": None,
                                                       "data.y": None, "data.crs": None,
                                                       "domain.polygon": domain_layer()})
    assert spec["data.points"].startswith("<GeoDataFrame sha256:") and not spec.input_files().get("data.points")
    geosim.pipeline.run(spec, tmp_path / "run")
    import rasterio
    with rasterio.open(out_csv / "summary.tif") as a, rasterio.open(tmp_path / "run" / "summary.tif") as b:
        np.testing.assert_array_equal(a.read(), b.read())
    # a plain DataFrame is read with the spec's column names and CRS
    plain = load_spec(AQUIFER / "run.toml", overrides={**SMALL, "data.points": wells_frame()})
    data, data_csv = geosim.pipeline.prepare_data(plain), geosim.pipeline.prepare_data(spec_csv)
    np.testing.assert_array_equal(data.scores, data_csv.scores)
    # the spec's hash follows the frame's content, so a resumed run never mixes data
    changed = wells_frame()
    changed.loc[0, "k_ms"] *= 2.0
    assert load_spec(AQUIFER / "run.toml", overrides={**SMALL, "data.points": changed}).sha256 != plain.sha256
    assert load_spec(AQUIFER / "run.toml", overrides={**SMALL, "data.points": wells_frame()}).sha256 == plain.sha256
