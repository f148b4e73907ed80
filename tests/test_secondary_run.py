"""Secondary information through the whole job: [mean] and [secondary] in run specs, grids read
at nodes and samples, bad input, and the aquifer's resistivity survey."""
import json
import shutil
from pathlib import Path

import numpy as np
import pytest
import rasterio
from pyproj import Transformer
from rasterio.transform import from_origin
from scipy.interpolate import RegularGridInterpolator

import geosim.pipeline as pipeline
from geosim.config.runspec import load_spec
from geosim.errors import InputError, SpecError
from geosim.gridvalues import layer_values, read_layer
from geosim.kriging import collocated_cokrige, krige_varying_mean
from geosim.outputs import realization_writer

# the clone's sample fields (CI imports geosim from the clone beside a regular install)
AQUIFER = Path(__file__).resolve().parents[1] / "sample_fields" / "alluvial_aquifer"
EPSG = "EPSG:32725"  # the aquifer's working CRS


def _raster(path, values, x0, y1, cell, crs=EPSG, nodata=-9999.0):
    values = np.asarray(values, dtype=np.float32)
    with rasterio.open(path, "w", driver="GTiff", width=values.shape[1], height=values.shape[0], count=1,
                       dtype="float32", crs=crs, transform=from_origin(x0, y1, cell, cell), nodata=nodata) as dst:
        dst.write(values, 1)
    return path


# ---- reading grids at points --------------------------------------------------------------

def test_bilinear_and_nearest_reading_equal_scipy_and_rasterio(tmp_path):
    rng = np.random.default_rng(0)
    values = rng.normal(size=(30, 40))
    path = _raster(tmp_path / "r.tif", values, 1000.0, 5000.0, 10.0)
    pts = np.column_stack([rng.uniform(1005.0, 1395.0, 200), rng.uniform(4705.0, 4995.0, 200)])
    layer = read_layer(path)
    got, notes = layer_values(layer, pts, EPSG)
    # reference: scipy's regular-grid linear interpolation on the cell centres (y ascending)
    xc = 1000.0 + 10.0 * (np.arange(40) + 0.5)
    yc = 5000.0 - 10.0 * (np.arange(30) + 0.5)
    ref = RegularGridInterpolator((yc[::-1], xc), values.astype(np.float32)[::-1].astype(float))(pts[:, ::-1])
    assert np.allclose(got, ref, atol=1e-9) and notes == []
    # nearest: the cell a point falls in, as rasterio's sample() reads it
    near, _ = layer_values(layer, pts, EPSG, method="nearest")
    with rasterio.open(path) as src:
        ref = np.array([v[0] for v in src.sample(pts)], dtype=float)
    assert np.array_equal(near, ref)


def test_reading_reprojects_points_and_marks_uncovered_and_nodata_cells(tmp_path):
    values = np.arange(20.0 * 20.0).reshape(20, 20)
    values[5, 5] = -9999.0
    path = _raster(tmp_path / "r.tif", values, 480000.0, 5720000.0, 100.0)
    layer = read_layer(path)
    xy = np.array([[480550.0, 5719450.0], [480150.0, 5719850.0], [470000.0, 5719850.0], [480040.0, 5719990.0]])
    lon, lat = Transformer.from_crs(EPSG, "EPSG:4326", always_xy=True).transform(xy[:, 0], xy[:, 1])
    in_lonlat, notes = layer_values(layer, np.column_stack([lon, lat]), "EPSG:4326")
    direct, _ = layer_values(layer, xy, EPSG)
    assert np.allclose(in_lonlat, direct, equal_nan=True, atol=1e-6)
    assert "reprojected" in notes[0]
    # the nodata cell, a point beyond the raster; inside the edge half-cell the edge value holds
    assert np.isnan(direct[0]) and np.isnan(direct[2]) and direct[3] == values[0, 0]
    # a valid cell next to a nodata corner: the other corners re-weighted
    assert np.isfinite(direct[1])


def test_cube_is_read_trilinear(tmp_path):
    xarray = pytest.importorskip("xarray")
    pytest.importorskip("netCDF4")
    rng = np.random.default_rng(1)
    z, y, x = np.arange(4) * 5.0 + 2.5, np.arange(6)[::-1] * 10.0 + 5.0, np.arange(7) * 10.0 + 5.0
    values = rng.normal(size=(4, 6, 7))
    ds = xarray.Dataset({"grade": (("z", "y", "x"), values)}, coords={"z": z, "y": y, "x": x})
    ds.to_netcdf(tmp_path / "c.nc")
    pts = np.column_stack([rng.uniform(5, 65, 50), rng.uniform(5, 55, 50), rng.uniform(2.5, 17.5, 50)])
    got, _ = layer_values(read_layer(tmp_path / "c.nc"), pts)
    ref = RegularGridInterpolator((z, y[::-1], x), values[:, ::-1, :])(pts[:, ::-1])
    assert np.allclose(got, ref, atol=1e-12)
    with pytest.raises(InputError, match="2-D grid"):
        layer_values(read_layer(tmp_path / "c.nc"), pts[:, :2])


# ---- the job ------------------------------------------------------------------------------

@pytest.fixture()
def aquifer(tmp_path):
    """The aquifer sample on 100 m cells, two realizations, no extra outputs (fast)."""
    for f in AQUIFER.iterdir():
        if f.is_file():
            shutil.copy(f, tmp_path / f.name)

    def spec(extra="", name="run.toml", **overrides):
        text = (tmp_path / name).read_text() + "\n" + extra
        path = tmp_path / f"spec_{abs(hash(extra)) % 10**8}.toml"
        path.write_text(text)
        base = {"grid.cell": [100.0, 100.0], "simulation.realizations": 2, "simulation.workers": 1}
        base.update(overrides)
        return load_spec(path, base)
    spec.folder = tmp_path
    return spec


def test_trend_run_models_the_residuals_everywhere(aquifer):
    spec = aquifer("[mean]\ntrend = 1\n")
    plain = pipeline.prepare_data(aquifer())
    data = pipeline.prepare_data(spec)
    m = data.mean
    assert np.allclose(m.scores, plain.scores) and np.allclose(data.scores, plain.scores - m.at_data)
    # weighted least squares with the declustering weights: weighted residuals have mean zero
    assert abs(float(np.sum(data.weights * data.scores)) / np.sum(data.weights)) < 1e-10
    grid = pipeline.make_grid(spec, data)
    vg = pipeline.variogram_model(spec, data)
    # the fit aims at the residuals' declustered variance, not 1
    w = data.weights / data.weights.sum()
    assert abs(vg.model.sill - float(w @ (data.scores - w @ data.scores) ** 2)) < 1e-6
    est = pipeline.estimate(spec, data, vg.model, grid)
    ref = krige_varying_mean(data.coords, m.scores, grid.coords(), vg.model, m.at_data, m.at_nodes(grid)[grid.mask],
                             neighbourhood=pipeline.neighbourhood(spec))
    assert np.allclose(est.scores_mean[grid.mask], ref.estimate, atol=1e-10)
    assert np.allclose(est.scores_variance[grid.mask], ref.variance, atol=1e-10)
    cv = pipeline.cross_validate(spec, data, vg.model)
    assert np.allclose(cv.result.values, m.scores)  # reported against the samples' own scores
    # realizations are residuals: the writer adds the trend at each node before the back-transform
    writer = realization_writer(spec, data, vg.model, grid, aquifer.folder / "out")
    assert np.allclose(writer.back_transform(np.zeros(grid.n_active)),
                       data.transform.inverse(m.at_nodes(grid)[grid.mask]), rtol=1e-12)


def test_mean_grid_run_adds_the_mean_back_before_the_back_transform(aquifer, tmp_path):
    # a mean grid of 1e-4 m/s everywhere: through the run's transform, one normal score at every node
    _raster(aquifer.folder / "mean.tif", np.full((110, 110), 1e-4), 476000.0, 5722000.0, 100.0)
    spec = aquifer('[mean]\nfile = "mean.tif"\n')
    data = pipeline.prepare_data(spec)
    level = float(data.transform.transform(np.array([1e-4]))[0])
    assert np.allclose(data.mean.at_data, level, atol=1e-6)
    grid = pipeline.make_grid(spec, data)
    assert np.allclose(data.mean.at_nodes(grid)[grid.mask], level, atol=1e-6)
    vg = pipeline.variogram_model(spec, data)
    out = tmp_path / "out"
    sim = pipeline.simulate(spec, data, vg.model, grid, out_dir=out)
    writer = sim.writer
    # the writer's back-transform puts the mean back: residual 0 maps to the mean grid's value
    zero = writer.back_transform(np.zeros(grid.n_active))
    assert np.allclose(zero, 1e-4, rtol=1e-5)


def test_mean_grid_with_a_gap_inside_the_domain_is_refused_with_count_and_place(aquifer):
    values = np.full((110, 110), 1e-4)
    values[50:53, 60:63] = -9999.0  # a hole of 3 x 3 cells in the valley, x 482000-482300, y 5716700-5717000
    _raster(aquifer.folder / "mean.tif", values, 476000.0, 5722000.0, 100.0)
    spec = aquifer('[mean]\nfile = "mean.tif"\n')
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    nodes = grid.coords()
    hole = nodes[(nodes[:, 0] >= 482000) & (nodes[:, 0] < 482300) & (nodes[:, 1] > 5716700) & (nodes[:, 1] <= 5717000)]
    assert len(hole) > 0
    with pytest.raises(InputError) as err:
        data.mean.at_nodes(grid)
    text = str(err.value)
    assert "mean.tif" in text and "mean.file" in text
    assert f"no value at {len(hole)} of {grid.n_active:,} active grid nodes" in text
    assert (f"x {hole[:, 0].min():.1f} to {hole[:, 0].max():.1f}, y {hole[:, 1].min():.1f} to "
            f"{hole[:, 1].max():.1f}") in text


def test_secondary_grid_not_covering_the_domain_is_refused(aquifer):
    with rasterio.open(AQUIFER / "resistivity_survey.tif") as src:
        values, t = src.read(1), src.transform
    values[:, :20] = -9999.0  # the western strip of the survey is missing
    _raster(aquifer.folder / "cut.tif", values, t.c, t.f, t.a)
    spec = aquifer('[secondary]\nfile = "cut.tif"\n')
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    with pytest.raises(InputError, match=r"secondary grid has no value at [\d,]+ of [\d,]+ active grid nodes \(x "):
        pipeline.estimate(spec, data, None, grid)


@pytest.mark.parametrize("extra, message", [
    ("[secondary]\nfile = \"resistivity_survey.tif\"\ncorrelation = 1.0\n", "strictly between -1 and 1"),
    ("[secondary]\nfile = \"resistivity_survey.tif\"\ncorrelation = -1.0\n", "strictly between -1 and 1"),
    ("[secondary]\nfile = \"resistivity_survey.tif\"\n[simulation]\n", None),
    ("[mean]\ntrend = 1\nfile = \"resistivity_survey.tif\"\n", "expected trend"),
    ("[secondary]\ncorrelation = 0.5\n", "only with secondary.file"),
])
def test_bad_secondary_settings_are_spec_errors(aquifer, extra, message):
    if message is None:  # ordinary kriging with a secondary
        with pytest.raises(SpecError, match='expected "simple"'):
            aquifer(extra.replace("[simulation]\n", ""), **{"simulation.kriging": "ordinary"})
        return
    with pytest.raises(SpecError, match=message):
        aquifer(extra)


def test_too_few_pairs_to_estimate_the_correlation_is_refused(aquifer):
    spec = aquifer('[secondary]\nfile = "resistivity_survey.tif"\nmin_pairs = 200\n')
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    with pytest.raises(InputError, match="only 80 samples have both"):
        pipeline.estimate(spec, data, None, grid)


def test_secondary_in_another_crs_is_reprojected_with_a_note(aquifer):
    # the survey warped to lon/lat would need resampling twice; instead: the same survey values
    # stored in a CRS 1000 m false-easting apart gives the same node values
    with rasterio.open(AQUIFER / "resistivity_survey.tif") as src:
        values, t = src.read(1), src.transform
    shifted = "+proj=tmerc +lat_0=0 +lon_0=-33 +k=0.9996 +x_0=501000 +y_0=10000000 +datum=WGS84 +units=m +no_defs"
    _raster(aquifer.folder / "shifted.tif", values, t.c + 1000.0, t.f, t.a, crs=shifted)
    a = aquifer('[secondary]\nfile = "resistivity_survey.tif"\n')
    b = aquifer('[secondary]\nfile = "shifted.tif"\n')
    data = pipeline.prepare_data(a)
    grid = pipeline.make_grid(a, data)
    from geosim.secondary import secondary_grid
    sa = secondary_grid(a, data.samples, data.scores, grid)
    sb = secondary_grid(b, data.samples, data.scores, grid)
    assert np.allclose(sa.at_nodes, sb.at_nodes, equal_nan=True, atol=1e-9)
    assert any("reprojected" in n for n in sb.notes) and not any("reprojected" in n for n in sa.notes)


def test_job_estimate_is_collocated_cokriging_and_zero_correlation_is_primary_only(aquifer, tmp_path):
    spec = aquifer('[secondary]\nfile = "resistivity_survey.tif"\n')
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    vg = pipeline.variogram_model(spec, data)
    from geosim.secondary import secondary_grid
    sec = secondary_grid(spec, data.samples, data.scores, grid)
    est = pipeline.estimate(spec, data, vg.model, grid)
    ref = collocated_cokrige(data.coords, data.scores, grid.coords(), vg.model, sec.at_nodes[grid.mask],
                             sec.correlation, neighbourhood=pipeline.neighbourhood(spec))
    assert np.allclose(est.scores_mean[grid.mask], ref.estimate, atol=1e-12)
    assert est.spread["with_secondary"]["mean_std_normal_scores"] < est.spread["primary_only"]["mean_std_normal_scores"]
    # correlation 0: realization files byte-identical to the run without the secondary
    zero = aquifer('[secondary]\nfile = "resistivity_survey.tif"\ncorrelation = 0.0\n')
    alone = aquifer()
    files = []
    for s, name in ((zero, "zero"), (alone, "alone")):
        d = pipeline.prepare_data(s)
        sim = pipeline.simulate(s, d, vg.model, grid, out_dir=tmp_path / name)
        values = []
        for r in sim.records:
            for f in r["files"]:
                with rasterio.open(tmp_path / name / f) as src:
                    values.append(src.read(1))
        files.append(values)
    assert all(np.array_equal(a, b, equal_nan=True) for a, b in zip(*files)) and len(files[0]) == 2


def test_aquifer_survey_run_reports_the_correlation_and_the_shrinking_spread(aquifer, tmp_path):
    spec = load_spec(aquifer.folder / "run_secondary.toml",
                     {"grid.cell": [100.0, 100.0], "simulation.realizations": 3, "simulation.workers": 1,
                      "outputs.plots": False})
    pipeline.run(spec, tmp_path / "run")
    report = json.loads((tmp_path / "run" / "report.json").read_text())
    sec = report["secondary"]
    # the survey was made with correlation 0.7 to the true field (make_sample_fields.py); the
    # estimate from 80 wells has a standard error of about (1 - 0.49) / sqrt(80) = 0.06, and the
    # wells' scores are the declustered transform of 4-digit values: allow 4 standard errors
    assert sec["pairs"] == 80 and abs(sec["correlation"] - 0.7) < 4 * 0.06
    spread = report["estimate"]["secondary_spread"]
    assert spread["shrink_normal_scores"] > 0.05 and spread["shrink_data_units"] > 0.05
    assert "mean_log10_p90_over_p10" in sec["ensemble_spread"]


# ---- the secondary as an external drift -------------------------------------------------------

DRIFT = '[secondary]\nfile = "resistivity_survey.tif"\nmethod = "external_drift"\n'


def test_external_drift_estimate_and_cross_validation_krige_with_the_secondary_scores(aquifer):
    from geosim.kriging import cross_validate, krige_external_drift
    from geosim.secondary import secondary_grid
    spec = aquifer(DRIFT)
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    sec = secondary_grid(spec, data.samples, data.scores, grid)
    assert sec.method == "external_drift" and np.isfinite(sec.at_data).all()
    # the variogram is fitted to the residuals of the drift: weighted least squares in numpy
    # (sqrt-weighted rows through numpy.linalg.lstsq), its total sill their declustered variance
    w = data.weights / data.weights.sum()
    f = np.column_stack([np.ones(len(data.scores)), sec.at_data])
    coef = np.linalg.lstsq(f * np.sqrt(w)[:, None], data.scores * np.sqrt(w), rcond=None)[0]
    resid = data.scores - f @ coef
    vg = pipeline.variogram_model(spec, data)
    assert abs(vg.model.sill - float(w @ (resid - w @ resid) ** 2)) < 1e-6 and vg.model.sill < 0.9
    assert abs(sec.drift["slope"] - coef[1]) < 1e-10 and sec.drift["slope"] > 0  # resistive = permeable
    # and the experimental variograms are the residuals' (their sample variance, not the scores')
    assert all(abs(e.variance - np.var(resid, ddof=1)) < 1e-9 for e in vg.experimental)
    nb = pipeline.neighbourhood(spec)
    est = pipeline.estimate(spec, data, vg.model, grid)
    ref = krige_external_drift(data.coords, data.scores, grid.coords(), vg.model, sec.at_data,
                               sec.at_nodes[grid.mask], neighbourhood=nb)
    assert np.allclose(est.scores_mean[grid.mask], ref.estimate, atol=1e-12)
    assert np.allclose(est.scores_variance[grid.mask], ref.variance, atol=1e-12)
    assert est.spread is None and np.isfinite(est.mean[grid.mask]).all()
    cv = pipeline.cross_validate(spec, data, vg.model)
    loo = cross_validate(data.coords, data.scores, vg.model, method="external_drift", drift=sec.at_data,
                         neighbourhood=nb, hole_ids=data.samples.hole_ids)
    assert cv.result.method == "external_drift" and np.allclose(cv.result.estimate, loo.estimate, atol=1e-12)
    # the drift follows the survey: with neighbourhoods of 16 wells, where the drift varies enough to
    # fit its coefficient, the left-out wells are estimated better than by simple kriging without it
    # (RMSE of the scores 0.78 against 0.86 on these 100 m nodes; deterministic data, no sampling tolerance)
    wide, plain = aquifer(DRIFT, **{"search.min_samples": 16}), aquifer(**{"search.min_samples": 16})
    with_drift = pipeline.cross_validate(wide, data, vg.model).summary["normal_scores"]
    pd = pipeline.prepare_data(plain)
    alone = pipeline.cross_validate(plain, pd, pipeline.variogram_model(plain, pd).model).summary["normal_scores"]
    assert with_drift["rmse"] < alone["rmse"] - 0.05


def test_external_drift_refuses_simulation_before_writing_anything(aquifer, tmp_path):
    spec = aquifer(DRIFT)
    for call in (lambda: pipeline.run(spec, tmp_path / "run"),
                 lambda: pipeline.simulate(spec, out_dir=tmp_path / "sim")):
        with pytest.raises(InputError) as err:
            call()
        assert err.value.field == "secondary.method" and "cannot simulate" in str(err.value)
        assert 'secondary.method = "collocated"' in err.value.fix
    assert not (tmp_path / "run").exists() and not (tmp_path / "sim").exists()


@pytest.mark.parametrize("extra, message", [
    (DRIFT + "correlation = 0.5\n", 'secondary.correlation: only with secondary.method = "collocated"'),
    (DRIFT + "[mean]\ntrend = 1\n", 'mean: expected no \\[mean\\] with secondary.method = "external_drift"'),
    ('[secondary]\nmethod = "external_drift"\n', "secondary.method: only with secondary.file"),
    ('[secondary]\nfile = "resistivity_survey.tif"\nmethod = "drift"\n', "secondary.method"),
])
def test_bad_external_drift_settings_are_spec_errors(aquifer, extra, message):
    with pytest.raises(SpecError, match=message):
        aquifer(extra)


def test_external_drift_needs_the_secondary_at_every_sample_and_a_varying_one(aquifer):
    with rasterio.open(AQUIFER / "resistivity_survey.tif") as src:
        values, t = src.read(1), src.transform
    spec = aquifer(DRIFT)
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    # a survey that misses the first well's cell and its neighbours (the domain is covered otherwise)
    x, y = data.coords[0]
    col, row = int((x - t.c) / t.a), int((y - t.f) / t.e)
    holed = values.copy()
    holed[row - 1:row + 2, col - 1:col + 2] = -9999.0
    _raster(aquifer.folder / "holed.tif", holed, t.c, t.f, t.a)
    holed_spec = aquifer(DRIFT.replace("resistivity_survey", "holed"))
    with pytest.raises(InputError, match="active grid nodes"):  # nodes of the domain in the hole
        pipeline.cross_validate(holed_spec, data)
    # the nodes in the hole left out of the grid: the grid is covered, the well is not
    from geosim.secondary import secondary_grid
    nodes = grid.coords()
    near = (np.abs(nodes[:, 0] - x) < 2.5 * t.a) & (np.abs(nodes[:, 1] - y) < 2.5 * t.a)  # the hole and a margin
    mask = grid.mask.copy()
    mask[grid.mask] = ~near
    with pytest.raises(InputError) as err:
        secondary_grid(holed_spec, data.samples, data.scores, grid.with_mask(mask))
    text = str(err.value)
    wc, wr = ((data.coords[:, 0] - t.c) / t.a).astype(int), ((data.coords[:, 1] - t.f) / t.e).astype(int)
    inside = int(np.sum((np.abs(wc - col) <= 1) & (np.abs(wr - row) <= 1)))  # wells in the hole's cells
    assert inside > 1 and f"no value at {inside} of 80 samples (the first: row 2 of wells.csv)" in text
    assert "every sample" in text
    assert err.value.field == "secondary.file"
    # the same value at every well: the drift cannot be told from the mean
    flat = values.copy()  # the survey as it is, except 80 ohm m in every cell holding a well
    cols = ((data.coords[:, 0] - t.c) / t.a).astype(int)
    rows = ((data.coords[:, 1] - t.f) / t.e).astype(int)
    flat[rows, cols] = 80.0
    _raster(aquifer.folder / "flat.tif", flat, t.c, t.f, t.a)
    flat_spec = aquifer(DRIFT.replace("resistivity_survey", "flat") + 'resampling = "nearest"\n')
    with pytest.raises(InputError) as err:
        pipeline.estimate(flat_spec, data, None, grid)
    assert "same value" in str(err.value) and err.value.field == "secondary.method"


def test_grids_of_another_resolution_are_resampled_by_the_stated_method_with_a_note(aquifer, tmp_path):
    # the survey's 100 m cells read at the nodes of a 50 m grid: the method and both cell sizes are
    # stated; on a 100 m grid only the method
    from geosim.secondary import secondary_grid
    for resampling, how in (("bilinear", "by bilinear interpolation between the four cell centres around each node"),
                            ("nearest", "by the value of the cell each node falls in")):
        text = f'[secondary]\nfile = "resistivity_survey.tif"\nresampling = "{resampling}"\n'
        for cell, extra in (([50.0, 50.0], " (its cells are 100 x 100, the grid's 50 x 50)"), ([100.0, 100.0], "")):
            spec = aquifer(text, **{"grid.cell": cell})
            data = pipeline.prepare_data(spec)
            grid = pipeline.make_grid(spec, data)
            notes = secondary_grid(spec, data.samples, data.scores, grid).notes
            size = f"{cell[0]:g} x {cell[1]:g}"
            note = [n for n in notes if "node centres" in n]
            assert note and note[0].endswith(f"read at the {grid.n_active:,} node centres of the {size} m grid "
                                             f"{how}{extra}"), note
    # a mean grid of 200 m cells on the 100 m grid: the same note, in the mean's notes and the run's
    _raster(aquifer.folder / "mean.tif", np.full((55, 55), 1e-4), 476000.0, 5722000.0, 200.0)
    spec = aquifer('[mean]\nfile = "mean.tif"\nresampling = "nearest"\n', **{"outputs.plots": False})
    result = pipeline.run(spec, tmp_path / "run")
    note = "by the value of the cell each node falls in (its cells are 200 x 200, the grid's 100 x 100)"
    assert any(n.endswith(note) for n in result.notes)


def test_a_mean_grid_that_misses_samples_is_refused_naming_the_first(aquifer):
    data = pipeline.prepare_data(aquifer())
    values = np.full((110, 110), 1e-4)
    rows = ((5722000.0 - data.coords[:, 1]) // 100).astype(int)
    cols = ((data.coords[:, 0] - 476000.0) // 100).astype(int)
    values[rows[4], cols[4]] = -9999.0  # the fifth well's cell (and any other well in it) without a value
    missing = np.flatnonzero((rows == rows[4]) & (cols == cols[4]))
    _raster(aquifer.folder / "mean.tif", values, 476000.0, 5722000.0, 100.0)
    with pytest.raises(InputError) as err:
        pipeline.prepare_data(aquifer('[mean]\nfile = "mean.tif"\nresampling = "nearest"\n'))
    text = str(err.value)
    # wells.csv rows count the header as row 1
    assert f"the mean grid has no value at {missing.size} of 80 samples (the first: row {missing[0] + 2} of " \
           "wells.csv)" in text
    assert err.value.field == "mean.file" and "covers every sample" in err.value.fix


def test_cross_validation_with_a_collocated_secondary_is_leave_one_out_collocated_cokriging(aquifer):
    from geosim.secondary import secondary_grid
    spec = aquifer('[secondary]\nfile = "resistivity_survey.tif"\n')
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    model = pipeline.variogram_model(spec, data).model
    sec = secondary_grid(spec, data.samples, data.scores, grid)
    cv = pipeline.cross_validate(spec, data, model)
    assert cv.result.method == "collocated simple cokriging"
    nb = pipeline.neighbourhood(spec)
    for i in range(0, 80, 7):  # each left-out well from the others and the survey at the well
        keep = np.arange(80) != i
        ref = collocated_cokrige(data.coords[keep], data.scores[keep], data.coords[i:i + 1], model,
                                 sec.at_data[i:i + 1], sec.correlation, neighbourhood=nb)
        assert abs(cv.result.estimate[i] - ref.estimate[0]) < 1e-12
        assert abs(cv.result.variance[i] - ref.variance[0]) < 1e-12
    # the survey helps the left-out wells too; and a coefficient of 0 is the primary-only table
    alone = pipeline.cross_validate(aquifer(), data, model)
    assert cv.summary["normal_scores"]["rmse"] < alone.summary["normal_scores"]["rmse"]
    zero = pipeline.cross_validate(aquifer('[secondary]\nfile = "resistivity_survey.tif"\ncorrelation = 0.0\n'),
                                   data, model)
    assert np.array_equal(zero.result.estimate, alone.result.estimate)
    assert np.array_equal(zero.result.variance, alone.result.variance)


def test_a_cube_given_for_a_2d_run_is_refused_naming_the_key(aquifer):
    xarray = pytest.importorskip("xarray")
    pytest.importorskip("netCDF4")
    x, y = np.arange(476050.0, 487000.0, 100.0), np.arange(5711050.0, 5722000.0, 100.0)
    ds = xarray.Dataset({"rho": (("z", "y", "x"), np.ones((2, y.size, x.size)))},
                        coords={"z": [0.0, 10.0], "y": y, "x": x})
    ds.to_netcdf(aquifer.folder / "survey.nc")
    spec = aquifer('[secondary]\nfile = "survey.nc"\n')
    data = pipeline.prepare_data(spec)
    with pytest.raises(InputError) as err:
        pipeline.estimate(spec, data, None, pipeline.make_grid(spec, data))
    assert "2-D grid" in str(err.value) and err.value.field == "secondary.file"
