"""A locally varying mean ([mean]) and a collocated secondary grid ([secondary]) in a run of several
units (geosim.units_run): each unit's trend and correlation fitted on its own data, a unit's own
table overriding them, and a run of one unit equal to the run of one domain."""
import json

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

import geosim.pipeline as pipeline
import geosim.units_run as units_run
from geosim.config.runspec import load_spec
from geosim.inputs import neighbourhood, sample_ids
from geosim.secondary import add_mean_then, secondary_grid
from geosim.simulation import realization_rng
from geosim.simulation.runner import resolve_engine
from geosim.simulation.sequential import SequentialEngine
from test_units_run import _field, _write

SECONDARY = '[mean]\ntrend = 1\n[secondary]\nfile = "survey.tif"\n'


@pytest.fixture(scope="module")
def field():
    return _field()


def _survey(folder, xy, grade):
    """An invented survey over the 600 x 400 m domain (10 m cells): a smooth surface plus a blurred
    image of the grades, so that it correlates with them."""
    y, x = np.mgrid[395.0:0.0:-10.0, 5.0:600.0:10.0]
    near = np.zeros(x.shape)
    for (px, py), g in zip(xy, np.log(grade)):
        near += g * np.exp(-((x - px) ** 2 + (y - py) ** 2) / (2 * 40.0 ** 2))
    survey = (x / 600.0 + 0.5 * np.sin(y / 60.0) + near).astype(np.float32)
    with rasterio.open(folder / "survey.tif", "w", driver="GTiff", height=40, width=60, count=1, dtype="float32",
                       crs="EPSG:32633", transform=from_origin(0.0, 400.0, 10.0, 10.0), nodata=-9999.0) as dst:
        dst.write(survey, 1)


def _band(path, band=1):
    with rasterio.open(path) as src:
        return src.read(band)


@pytest.mark.parametrize("engine, cell", [("sequential", 10.0), ("exact", 25.0)])
def test_one_unit_run_with_mean_and_secondary_equals_the_one_domain_run(tmp_path, field, engine, cell):
    """Every sample and node of one unit: the estimate, the cross-validation, the trend and the
    correlation equal the run without units bit for bit, and a realization is the one-domain
    engine's field for the unit's random stream with the trend added back before the unit's
    back-transform (the exact engine conditions on the secondary at every node: a coarser grid)."""
    xy, unit, grade = field
    one = np.ones_like(unit)
    codes = np.ones((40, 60), dtype=np.int16)
    path = _write(tmp_path / "u", xy, one, grade, codes=codes, modelled=(True, False), realizations=2, full=True,
                  extra=SECONDARY)
    _survey(tmp_path / "u", xy, grade)
    plain = tmp_path / "u" / "plain.toml"
    plain.write_text(path.read_text().split("[units]")[0] + SECONDARY)
    overrides = {"simulation.engine": engine, "grid.cell": [cell, cell]}
    units_run.run(load_spec(path, overrides), tmp_path / "units")
    pipeline.run(load_spec(plain, overrides), tmp_path / "one")
    a, b = tmp_path / "units", tmp_path / "one"
    for band in (1, 2, 3, 4):
        np.testing.assert_array_equal(_band(a / "estimate.tif", band), _band(b / "estimate.tif", band))
    assert (a / "units" / "low" / "cross_validation.csv").read_bytes() == (b / "cross_validation.csv").read_bytes()
    units_report = json.loads((a / "report.json").read_text())
    one_report = json.loads((b / "report.json").read_text())
    low = units_report["units"][0]
    assert low["mean"]["trend"]["terms"] == one_report["mean"]["trend"]["terms"]
    assert low["secondary"]["correlation"] == one_report["secondary"]["correlation"]
    assert low["secondary"]["pairs"] == len(unit)
    assert units_report["estimate"]["by_unit"]["low"]["secondary_spread"] == one_report["estimate"]["secondary_spread"]
    for scale in ("normal_scores", "data_units"):  # all units pooled: here the one unit
        assert units_report["cross_validation"][scale] == one_report["cross_validation"][scale]
    # realization 0 rebuilt from the one-domain pieces with the unit's stream, SeedSequence(seed, (0, 1))
    spec = load_spec(plain, overrides)
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    model = pipeline.variogram_model(spec, data).model
    sec = secondary_grid(spec, data.samples, data.scores, grid)
    inner = resolve_engine(engine)
    plan = inner.prepare(data.coords, data.scores, model, grid, neighbourhood=neighbourhood(spec),
                         sample_ids=sample_ids(data), **sec.engine_options(engine))
    scores = inner.realize(plan, units_run.unit_rng(realization_rng(spec["simulation.seed"], 0), 1))
    values = add_mean_then(scores[grid.mask], mean=data.mean.at_nodes(grid)[grid.mask],
                           inverse=data.transform.inverse)
    written = _band(a / "realizations" / "r0000.tif")
    np.testing.assert_array_equal(written[grid.mask], values.astype(np.float32))


def test_each_unit_fits_its_own_trend_and_correlation_and_keeps_a_hard_boundary(tmp_path, field):
    """Two units, the high one with a trend of order 2 in its own table: each trend is the least
    squares fit (numpy) to the unit's own normal scores, each correlation the Pearson coefficient
    of the unit's own residuals and secondary scores (numpy); changing the low unit's data leaves the
    high unit's estimate and realizations bit for bit unchanged."""
    xy, unit, grade = field

    def write(folder, values, soft=""):
        path = _write(folder, xy, unit, grade=values, realizations=2, full=True, soft=soft, extra=SECONDARY)
        _survey(folder, xy, grade)  # the same survey in every run
        text = path.read_text().replace("[unit.high]\ncode = 2", "[unit.high]\ncode = 2\nmean = { trend = 2 }")
        path.write_text(text)
        return path

    path = write(tmp_path / "a", grade)
    spec = load_spec(path)
    units = units_run.prepare_units(spec)
    for code, order in ((1, 1), (2, 2)):
        p = units.pieces[code]
        coords = p.data.coords - p.data.mean.trend.origin
        x, y = coords[:, 0], coords[:, 1]
        design = np.column_stack([np.ones_like(x), x, y] + ([x * x, x * y, y * y] if order == 2 else []))
        expected, *_ = np.linalg.lstsq(design, p.data.mean.scores, rcond=None)
        assert p.data.mean.trend.order == order
        np.testing.assert_allclose(p.data.mean.trend(p.data.coords), design @ expected, atol=1e-9)
        np.testing.assert_allclose(p.data.scores, p.data.mean.scores - design @ expected, atol=1e-9)
        rho = np.corrcoef(p.data.scores, p.secondary.at_data)[0, 1]
        assert p.secondary.correlation == pytest.approx(rho, abs=1e-12)
        assert p.secondary.pairs == int((unit == code).sum())
        # the secondary's transform is fitted to the unit's own nodes: standard normal there
        at_nodes = p.secondary.at_nodes[p.grid.mask]
        assert at_nodes.size == p.grid.n_active and abs(at_nodes.mean()) < 0.01
    assert units.pieces[1].secondary.correlation != pytest.approx(units.pieces[2].secondary.correlation, abs=1e-3)
    from click.testing import CliRunner

    from geosim_cli.main import cli
    checked = CliRunner().invoke(cli, ["check", str(path)])
    assert checked.exit_code == 0, checked.stderr
    for code, order in ((1, 1), (2, 2)):
        assert (f"mean: trend of order {order}; secondary correlation "
                f"{units.pieces[code].secondary.correlation:.3f}") in " ".join(checked.stdout.split())
    units_run.run(spec, tmp_path / "out")
    changed = grade.copy()
    changed[unit == 1] = changed[unit == 1][::-1] * 3.0
    units_run.run(write(tmp_path / "b", changed), tmp_path / "out_b")
    east = units.node_codes == 2
    west = units.node_codes == 1
    for name, band in (("estimate.tif", 1), ("estimate.tif", 2), ("realizations/r0000.tif", 1),
                       ("realizations/r0001.tif", 1)):
        a, b = _band(tmp_path / "out" / name, band), _band(tmp_path / "out_b" / name, band)
        assert np.array_equal(a[east], b[east])
        assert not np.allclose(a[west], b[west])
    # the high unit's realization 0 rebuilt from its piece: the sequential engine on its own data,
    # model, grid and secondary scores for its stream (seed, 0, 2), its trend added back before
    # its own back-transform
    high = units_run.fit_units(units) or units.pieces[2]
    engine = SequentialEngine()
    plan = engine.prepare(high.data.coords, high.data.scores, high.model, high.grid,
                          neighbourhood=neighbourhood(high.spec), secondary=high.secondary.at_nodes,
                          correlation=high.secondary.correlation, secondary_nodes=high.spec["secondary.nodes"])
    scores = engine.realize(plan, units_run.unit_rng(realization_rng(spec["simulation.seed"], 0), 2))
    values = high.data.transform.inverse(scores[east] + high.data.mean.trend(high.grid.coords()))
    np.testing.assert_array_equal(_band(tmp_path / "out" / "realizations" / "r0000.tif")[east],
                                  values.astype(np.float32))
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    sections = {u["name"]: u for u in report["units"]}
    assert sections["high"]["mean"]["trend"]["order"] == 2 and sections["low"]["mean"]["trend"]["order"] == 1
    assert sections["high"]["settings"]["mean"] == {"trend": 2}
    assert {"mean", "secondary"} <= set(sections["low"])


def test_soft_samples_enter_as_residuals_from_the_unit_mean(tmp_path, field):
    # a neighbour's sample across a soft contact: its value through the unit's transform minus the
    # unit's own trend at its place
    xy, unit, grade = field
    soft = 'soft = [{ units = ["low", "high"], distance = 40.0 }]'
    path = _write(tmp_path / "a", xy, unit, grade, soft=soft, extra="[mean]\ntrend = 1\n")
    low = units_run.prepare_units(load_spec(path)).pieces[1]
    near = np.array([i for i in range(len(grade)) if unit[i] == 2 and np.hypot(
        *(low.grid.coords() - xy[i]).T).min() <= 40.0])
    assert near.size >= 3
    order = np.lexsort(low.extra_coords.T[::-1])
    mine = np.lexsort(xy[near].T[::-1])
    values = np.array([float(f"{g:.6f}") for g in grade[near]])  # as written to the table
    where = np.array([[float(f"{c:.3f}") for c in p] for p in xy[near]])
    expected = low.data.transform.transform(values) - low.data.mean.trend(where)
    np.testing.assert_allclose(low.extra_scores[order], expected[mine], atol=1e-12)


def test_soft_contact_estimate_with_a_trend_is_kriging_of_residuals_worked_out_here(tmp_path, field):
    """The low unit's kriged normal score (estimate.tif band 3) with a trend and a soft contact: simple
    kriging (geosim.kriging.krige, mean 0) of residuals computed here by hand, its own samples' and
    the high unit's within 40 m, each minus the low unit's trend at its place, plus the trend at the
    node; float32 in the file, so 1e-5."""
    from geosim.kriging import krige
    xy, unit, grade = field
    soft = 'soft = [{ units = ["low", "high"], distance = 40.0 }]'
    path = _write(tmp_path / "a", xy, unit, grade, soft=soft, extra="[mean]\ntrend = 1\n", full=True,
                  realizations=1)
    units_run.run(path, tmp_path / "out")
    units = units_run.prepare_units(load_spec(path))
    units_run.fit_units(units)
    low = units.pieces[1]
    trend = low.data.mean.trend
    nodes = low.grid.coords()
    near = [i for i in range(len(grade)) if unit[i] == 2 and np.hypot(*(nodes - xy[i]).T).min() <= 40.0]
    where = np.array([[float(f"{c:.3f}") for c in xy[i]] for i in near])
    values = np.array([float(f"{grade[i]:.6f}") for i in near])
    coords = np.vstack([low.data.coords, where])
    residuals = np.concatenate([low.data.mean.scores - trend(low.data.coords),
                                low.data.transform.transform(values) - trend(where)])
    result = krige(coords, residuals, nodes, low.model, method="simple", mean=0.0,
                   neighbourhood=neighbourhood(low.spec))
    written = _band(tmp_path / "out" / "estimate.tif", 3)[units.node_codes == 1]
    np.testing.assert_allclose(written, result.estimate + trend(nodes), rtol=1e-5, atol=1e-5)


def test_a_first_run_compiles_ahead_the_engine_variant_of_each_unit(tmp_path, field):
    """The engine's kernel has a variant with a collocated secondary and one without: a run of
    several units compiles ahead each variant its modelled units use (a unit's own [secondary]
    table counts), each once; a unit left unmodelled asks for none."""
    from geosim.grid import Grid
    xy, unit, grade = field
    grid = Grid(0.0, 0.0, (10.0, 10.0), (40, 60))  # small: paths are not shared ("auto")

    def secondaries(folder, extra="", own=None, modelled=(True, True)):
        path = _write(folder, xy, unit, grade, realizations=2, extra=extra, modelled=modelled)
        _survey(folder, xy, grade)
        if own is not None:
            path.write_text(path.read_text().replace("[unit.high]\ncode = 2", f"[unit.high]\ncode = 2\n{own}"))
        variants = pipeline.engine_needs(load_spec(path), grid)
        assert all(v["kriging"] == "simple" and not v["shared_path"] for v in variants)
        return [v["secondary"] for v in variants]

    assert secondaries(tmp_path / "none") == [False]
    assert secondaries(tmp_path / "all", SECONDARY) == [True]
    assert secondaries(tmp_path / "high", own='secondary = { file = "survey.tif" }') == [False, True]
    assert secondaries(tmp_path / "low", SECONDARY, own="secondary = { correlation = 0.0 }") == [True, False]
    assert secondaries(tmp_path / "off", own='secondary = { file = "survey.tif" }', modelled=(True, False)) == [False]
