"""A run of several geological units (geosim.units_run): hard boundaries exact, soft boundaries
limited to their distance, per-unit seeds, each unit's histogram and variogram reproduced, the
joined outputs and the bad-input errors."""
import json
import math
from pathlib import Path

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin
from scipy.stats import norm

import geosim.units_run as units_run
from geosim.config.runspec import load_spec
from geosim.errors import InputError, SpecError
from geosim.simulation import simulate
from geosim.variogram import Anisotropy, Exponential, Model, Nugget, Spherical

# two known models and marginals (invented): a low-grade unit west of x = 300 m, a high-grade one east
MODELS = {1: Nugget(0.15) + Exponential(0.85, Anisotropy((120.0, 120.0))),
          2: Nugget(0.05) + Spherical(0.95, Anisotropy((220.0, 220.0)))}
MARGINALS = {1: (0.0, 0.5), 2: (1.5, 0.3)}  # grade = exp(mu + sigma * y)
TOML_MODELS = {
    1: '[{ kind = "nugget", sill = 0.15 }, { kind = "exponential", sill = 0.85, ranges = [120.0] }]',
    2: '[{ kind = "nugget", sill = 0.05 }, { kind = "spherical", sill = 0.95, ranges = [220.0] }]'}


def _field(n: int = 160, seed: int = 5):
    """Samples of a two-unit field: an exact Gaussian simulation of each unit's model at its samples
    (Cholesky of the model covariance), then each unit's log-normal marginal."""
    rng = np.random.default_rng(seed)
    xy = np.column_stack([rng.uniform(5.0, 595.0, n), rng.uniform(5.0, 395.0, n)])
    unit = np.where(xy[:, 0] < 300.0, 1, 2)
    grade = np.empty(n)
    for code, model in MODELS.items():
        sel = unit == code
        cov = model.cov_matrix(xy[sel], xy[sel])
        y = np.linalg.cholesky(cov + 1e-10 * np.eye(sel.sum())) @ rng.standard_normal(sel.sum())
        mu, sigma = MARGINALS[code]
        grade[sel] = np.exp(mu + sigma * y)
    return xy, unit, grade


def _write(folder: Path, xy, unit, grade, *, names=("low", "high"), extra: str = "", codes=None,
           order=(1, 2), realizations: int = 3, soft: str = "", modelled=(True, True), full: bool = False) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    label = {1: names[0], 2: names[1]}
    rows = [f"S{i},{x:.3f},{y:.3f},{g:.6f},{u if isinstance(u, str) else label[int(u)]}" for i, ((x, y), u, g) in
            enumerate(zip(xy, unit, grade))]
    (folder / "pts.csv").write_text("id,x,y,grade,unit\n" + "\n".join(rows) + "\n")
    if codes is None:
        codes = np.ones((40, 60), dtype=np.int16)
        codes[:, 30:] = 2
    with rasterio.open(folder / "units.tif", "w", driver="GTiff", height=codes.shape[0], width=codes.shape[1],
                       count=1, dtype=codes.dtype, crs="EPSG:32633", transform=from_origin(0.0, 400.0, 10.0, 10.0),
                       nodata=-1) as dst:
        dst.write(codes, 1)
    tables = {c: f"[unit.{label[c]}]\ncode = {c}\nmodelled = {'true' if modelled[c - 1] else 'false'}\n"
                 f"variogram = {{ structures = {TOML_MODELS[c]} }}\n" for c in (1, 2)}
    (folder / "run.toml").write_text(f'''
title = "two invented units"
[data]
points = "pts.csv"
x = "x"
y = "y"
value = "grade"
units = "g/t"
crs = "EPSG:32633"
[grid]
cell = [10.0, 10.0]
bounds = [0.0, 0.0, 600.0, 400.0]
[declustering]
method = "none"
[variogram]
fit = false
structures = {TOML_MODELS[1]}
[search]
max_samples = 12
max_nodes = 12
[simulation]
realizations = {realizations}
seed = 4242
workers = 1
[outputs]
cutoffs = [1.0, 4.0]
plots = false
cross_validation = {'true' if full else 'false'}
estimate = {'true' if full else 'false'}
[units]
samples = {{ column = "unit" }}
nodes = {{ raster = "units.tif" }}
{soft}
{extra}
''' + "\n".join(tables[c] for c in order))
    return folder / "run.toml"


def _fields(spec_path, indices=(0, 1, 2), workers=1):
    """Joined normal-score fields of a units run (library level, no files)."""
    spec = load_spec(spec_path)
    units = units_run.prepare_units(spec)
    units_run.fit_units(units)
    fields = simulate(units.samples.coords, np.zeros(len(units.samples)), None, units.modelled_grid,
                      n_realizations=max(indices) + 1, seed=spec["simulation.seed"], indices=list(indices),
                      engine=units_run.UnitsEngine("sequential"), workers=workers,
                      parts=units_run._parts(spec, units), node_codes=units.node_codes)
    return units, fields


@pytest.fixture(scope="module")
def field():
    return _field()


def test_hard_boundary_other_units_data_leave_a_unit_bit_for_bit_unchanged(tmp_path, field):
    xy, unit, grade = field
    base, a = _fields(_write(tmp_path / "a", xy, unit, grade))
    changed = grade.copy()
    changed[unit == 1] = changed[unit == 1][::-1] * 3.0  # unit 1's data changed completely
    _, b = _fields(_write(tmp_path / "b", xy, unit, changed))
    east = base.node_codes == 2
    west = base.node_codes == 1
    for fa, fb in zip(a, b):
        assert np.array_equal(fa[east], fb[east])          # bit for bit
        assert not np.allclose(fa[west], fb[west])         # unit 1 did change
        assert np.isnan(fa[~base.grid.mask]).all()


def test_seeds_do_not_depend_on_other_units_their_order_or_workers(tmp_path, field):
    xy, unit, grade = field
    units, ref = _fields(_write(tmp_path / "a", xy, unit, grade))
    _, reordered = _fields(_write(tmp_path / "b", xy, unit, grade, order=(2, 1)))
    _, alone = _fields(_write(tmp_path / "c", xy, unit, grade, modelled=(False, True)))
    _, pooled = _fields(_write(tmp_path / "d", xy, unit, grade), workers=2)
    east = units.node_codes == 2
    for r, o, s, p in zip(ref, reordered, alone, pooled):
        assert np.array_equal(r, o, equal_nan=True)
        assert np.array_equal(r[east], s[east])
        assert np.isnan(s[units.node_codes == 1]).all()    # not modelled: nodata
        assert np.array_equal(r, p, equal_nan=True)


def test_unit_generator_is_the_spawned_child_of_the_realization():
    # realization i of unit u: SeedSequence(seed).spawn(...)[i].spawn(...)[u] (numpy's spawn keys)
    from geosim.simulation.runner import realization_rng
    rng = units_run.unit_rng(realization_rng(99, 3), 2)
    child = np.random.SeedSequence(99).spawn(4)[3].spawn(3)[2]
    assert rng.random() == np.random.default_rng(child).random()


def test_soft_boundary_reaches_only_the_stated_distance(tmp_path, field):
    xy, unit, grade = field
    d = 40.0
    soft = f'soft = [{{ units = ["low", "high"], distance = {d} }}]'
    units, ref = _fields(_write(tmp_path / "a", xy, unit, grade, soft=soft))
    # unit 1's nodes end at x = 300 (cell centres up to 295): a sample of unit 2 reaches them within d
    # of the nearest unit-1 node centre, worked out here by brute force
    nodes = units.pieces[1].grid.coords()
    dist = np.array([np.hypot(*(nodes - p).T).min() for p in xy])
    near = (unit == 2) & (dist <= d)
    far = (unit == 2) & (dist > d)
    assert near.sum() >= 3 and far.sum() >= 30
    assert units.pieces[1].soft[0]["samples_taken"] == near.sum()
    assert len(units.pieces[1].extra_scores) == near.sum()
    west = units.node_codes == 1
    beyond = grade.copy()
    beyond[far] *= 5.0   # unit 2 samples beyond the distance: no influence on unit 1
    _, b = _fields(_write(tmp_path / "b", xy, unit, beyond, soft=soft))
    within = grade.copy()
    within[near] = 0.5   # unit 2 samples within it (now inside unit 1's range of grades): unit 1 changes
    _, c = _fields(_write(tmp_path / "c", xy, unit, within, soft=soft))
    _, hard = _fields(_write(tmp_path / "d", xy, unit, grade))
    for r, fb, fc, h in zip(ref, b, c, hard):
        assert np.array_equal(r[west], fb[west])
        assert not np.allclose(r[west], fc[west])
        assert not np.allclose(r[west], h[west])           # the soft samples do condition unit 1


def test_soft_samples_enter_through_the_node_unit_transform(tmp_path, field):
    xy, unit, grade = field
    soft = 'soft = [{ units = ["low", "high"], distance = 40.0 }]'
    units = units_run.prepare_units(load_spec(_write(tmp_path / "a", xy, unit, grade, soft=soft)))
    low = units.pieces[1]
    values = np.array([grade[i] for i in range(len(grade)) if unit[i] == 2 and np.hypot(
        *(low.grid.coords() - xy[i]).T).min() <= 40.0])
    np.testing.assert_array_equal(np.sort(low.extra_scores), np.sort(low.data.transform.transform(values)))
    # high grades seen through the low unit's transform are far in its upper tail
    assert np.median(low.extra_scores) > 1.0


def test_each_unit_reproduces_its_own_histogram_and_variogram(tmp_path, field):
    """Two units from two known models: each unit's realizations against its own model.

    Histogram: the median of a unit's simulated grades, mapped through the unit's true marginal
    to a normal score, z.  The data are one draw of the true field, whose mean over the unit's
    domain D is itself random with variance Cbar(D, D), the mean covariance over D (dispersion of
    the domain mean; Journel and Huijbregts 1978); the realizations reproduce the data's level
    within the run's own tolerance for the domain mean (its histogram check).  So |z| must stay
    within 3 standard deviations of that sum, sqrt(Cbar(D, D) + tolerance^2).  The same median
    read through the other unit's marginal must fall outside it (a swapped transform fails).
    The run's histogram check (mean and variance of the normal scores within sampling bounds)
    must pass too.  Variogram: the run's check (semivariance moments under the model along the grid axes) must
    pass for each unit.
    """
    xy, unit, grade = field
    spec_path = _write(tmp_path / "a", xy, unit, grade, realizations=12)
    result = units_run.run(spec_path, tmp_path / "out")
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    sections = {u["code"]: u for u in report["units"]}
    with rasterio.open(tmp_path / "out" / "realizations.tif") as src:
        stack = src.read().astype(float)
    codes = stack[-1]
    units = units_run.prepare_units(load_spec(spec_path))
    for code, (mu, sigma) in MARGINALS.items():
        hist = sections[code]["validation"]["histogram"]
        nodes = units.pieces[code].grid.coords()
        cbar = float(MODELS[code].cov_matrix(nodes, nodes).mean())
        bound = 3.0 * math.sqrt(cbar + hist["mean_tolerance"] ** 2)
        median = np.median(stack[:-1][:, codes == code])
        z = (np.log(median) - mu) / sigma
        assert abs(z) <= bound, (code, z, bound)
        other_mu, other_sigma = MARGINALS[3 - code]
        assert abs((np.log(median) - other_mu) / other_sigma) > bound
        # the run's own histogram check: mean and variance of each realization's normal scores
        # within bounds from their sampling spread (geosim.validation, chi-square bounds)
        assert hist["flag"] == "pass", (code, hist["variance"], hist["variance_bounds"])
        assert sections[code]["validation"]["variogram"]["flag"] == "pass"
    assert "low:" in result.model.text(2) and "high:" in result.model.text(2)


def test_joined_outputs_carry_unit_codes_and_per_unit_figures(tmp_path, field):
    xy, unit, grade = field
    units_run.run(_write(tmp_path / "a", xy, unit, grade, realizations=2, full=True), tmp_path / "out")
    out = tmp_path / "out"
    with rasterio.open(out / "summary.tif") as src:
        assert src.descriptions[-1] == "unit code"
        codes = src.read(src.count)
    with rasterio.open(out / "estimate.tif") as src:
        assert src.descriptions[-1] == "unit code"
        np.testing.assert_array_equal(src.read(src.count), codes)
    with rasterio.open(tmp_path / "a" / "units.tif") as src:
        np.testing.assert_array_equal(codes, src.read(1).astype(float))
    with rasterio.open(out / "realizations" / "r0001.tif") as src:  # each realization's own file too
        assert src.count == 2 and src.descriptions[-1] == "unit code"
        np.testing.assert_array_equal(src.read(2), codes)
    # per-unit decision figures add up to the total: areas above a cut-off are additive
    total = {(int(r["realization"]), float(r["threshold"])): float(r["area"]) for r in _csv(out / "decision_figures.csv")}
    by_unit: dict = {}
    for r in _csv(out / "decision_figures_by_unit.csv"):
        key = (int(r["realization"]), float(r["threshold"]))
        by_unit[key] = by_unit.get(key, 0.0) + float(r["area"])
    assert by_unit.keys() == total.keys()
    for key, area in total.items():
        assert by_unit[key] == pytest.approx(area)
    report = json.loads((out / "report.json").read_text())
    assert [u["name"] for u in report["units"]] == ["low", "high"]
    # all units' cross-validation pooled: counts add, and mean errors and mean squared errors are
    # the per-unit ones weighted by the samples each unit estimated
    for scale in ("normal_scores", "data_units"):
        parts = [u["cross_validation"][scale] for u in report["units"]]
        total = report["cross_validation"][scale]
        n = np.array([p["estimated"] for p in parts])
        assert total["estimated"] == n.sum() and total["samples"] == len(unit)
        assert total["mean_error"] == pytest.approx(n @ [p["mean_error"] for p in parts] / n.sum())
        assert total["rmse"] ** 2 == pytest.approx(n @ np.square([p["rmse"] for p in parts]) / n.sum())
    for section in report["units"]:
        assert {"data", "declustering", "transform", "variogram", "cross_validation", "validation",
                "decision_spread"} <= set(section)
        assert section["nodes"] == 1200 and section["samples"] == int((unit == section["code"]).sum())
    assert (out / "units" / "low" / "cross_validation.csv").exists()
    assert (out / "units" / "high" / "variogram_model.toml").exists()
    # resumed with one more realization: the two written are kept (their per-unit records read back)
    more = units_run.run(load_spec(tmp_path / "a" / "run.toml", {"simulation.realizations": 3}), out)
    assert more.kept == [0, 1] and more.computed == [2]
    assert len({r["realization"] for r in _csv(out / "decision_figures_by_unit.csv")}) == 3


def _csv(path):
    import csv
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


# -- bad input --------------------------------------------------------------------------------

def test_sample_code_not_in_the_spec(tmp_path, field):
    xy, unit, grade = field
    u = unit.astype(object)
    u[7] = "skarn"
    path = _write(tmp_path / "a", xy, u, grade)
    with pytest.raises(InputError) as err:
        units_run.prepare_units(load_spec(path))
    text = str(err.value)
    assert "pts.csv" in text and "row 9" in text and "'unit'" in text and "'skarn' is not one of" in text


def test_sample_code_with_no_nodes(tmp_path, field):
    xy, unit, grade = field
    codes = np.ones((40, 60), dtype=np.int16)  # the raster knows only unit 1
    with pytest.raises(InputError, match=r"are of unit high \(2\), but no grid node of the domain is"):
        units_run.prepare_units(load_spec(_write(tmp_path / "a", xy, unit, grade, codes=codes)))


def test_nodes_of_a_modelled_unit_without_samples(tmp_path, field):
    xy, unit, grade = field
    with pytest.raises(InputError, match=r"1200 grid node\(s\) are of unit high \(2\), but no sample is"):
        units_run.prepare_units(load_spec(_write(tmp_path / "a", xy, np.ones_like(unit), grade)))


def test_too_few_samples_to_fit_a_variogram(tmp_path, field):
    xy, unit, grade = field
    keep = (unit == 2) | (np.arange(len(unit)) % 8 == 0)  # unit 1 keeps about 10 samples
    path = _write(tmp_path / "a", xy[keep], unit[keep], grade[keep])
    path.write_text(path.read_text().replace("variogram = { structures = ", "variogram = { fit = true, structures = ", 1))
    spec = load_spec(path)
    n = int(((unit == 1) & keep).sum())
    with pytest.raises(InputError) as err:
        units_run.prepare_units(spec)
    text = str(err.value)
    assert f"unit low (1) has {n} samples, too few to fit a variogram" in text
    assert "fixed model" in text and "merge it with a neighbouring unit" in text and "pts.csv" in text


def test_spec_errors_of_units(tmp_path, field):
    xy, unit, grade = field
    path = _write(tmp_path / "a", xy, unit, grade, soft='soft = [{ units = ["low", "granite"], distance = 5.0 }]')
    with pytest.raises(SpecError) as err:
        load_spec(path)
    assert "units.soft[0].units" in str(err.value) and "'granite'" in str(err.value)
    text = path.read_text().replace('soft = [{ units = ["low", "granite"], distance = 5.0 }]', "")
    path.write_text(text.replace("[unit.high]\ncode = 2", "[unit.high]\ncode = 1"))
    with pytest.raises(SpecError, match="unit codes must be unique"):
        load_spec(path)
    path.write_text(text.replace("[unit.high]\ncode = 2", "[unit.high]\ncode = 2\ntransform = { lowr = 0.0 }"))
    with pytest.raises(SpecError, match=r"unit.high.transform.lowr: not a key a unit can override \(did you mean "
                                        r"'lower'\?\)"):
        load_spec(path)


def test_a_spec_without_units_is_normalized_as_before(tmp_path, field):
    xy, unit, grade = field
    path = _write(tmp_path / "a", xy, unit, grade)
    lines = path.read_text().split("[units]")[0]
    plain = tmp_path / "plain.toml"
    plain.write_text(lines.replace('"pts.csv"', f'"{(tmp_path / "a" / "pts.csv").as_posix()}"'))
    spec = load_spec(plain)
    assert "units" not in spec.values and "unit" not in spec.values
    assert not {"units", "unit"} & set(json.loads(spec.canonical()))
    with pytest.raises(InputError, match="no \\[units\\] table"):
        units_run.prepare_units(spec)
    with_units = load_spec(path)
    import geosim.pipeline
    with pytest.raises(InputError, match="models several units"):
        geosim.pipeline.prepare_data(with_units)


def test_back_transform_takes_each_node_through_its_own_unit_transform():
    # two log-normal units: back-transformed values of a unit's nodes are the inverse of its own
    # transform, checked against the closed form of a log-normal quantile (exp(mu + sigma z))
    from geosim.transforms import NormalScoreTransform
    rng = np.random.default_rng(8)
    transforms = {}
    for code, (mu, sigma) in MARGINALS.items():
        data = np.exp(mu + sigma * norm.ppf((np.arange(2000) + 0.5) / 2000))
        transforms[code] = NormalScoreTransform().fit(data)
    codes = np.array([1, 2, 2, 1, 2, 1] * 50, dtype=np.int32)
    scores = rng.uniform(-2.0, 2.0, codes.size)
    values = units_run.UnitsBackTransform(codes, transforms)(scores)
    for code, (mu, sigma) in MARGINALS.items():
        sel = codes == code
        # 2000 data at their plotting positions: the inverse is exact to the spacing of the data
        np.testing.assert_allclose(values[sel], np.exp(mu + sigma * scores[sel]), rtol=0.01)
    with pytest.raises(ValueError, match="299 values to back-transform for 300 nodes"):
        units_run.UnitsBackTransform(codes, transforms)(scores[:-1])


def test_sample_field_with_units_runs_from_the_command_line(tmp_path):
    """The aquifer's two-unit spec through `geosim run` (2 realizations, 100 m cells): exit 0, the
    caution, one report section per unit, every CSV plain with a valid CSVW sidecar."""
    import shutil

    from test_cli_e2e import assert_plain_tables, geosim_cmd
    shutil.copytree(Path(__file__).resolve().parents[1] / "sample_fields" / "alluvial_aquifer", tmp_path / "aq")
    out = tmp_path / "out"
    done = geosim_cmd("run", tmp_path / "aq" / "run_units.toml", "--out", out, "--set", "grid.cell=[100.0, 100.0]",
                      "--set", "simulation.realizations=2", "--set", "outputs.plots=false",
                      "--set", "simulation.workers=1")
    assert done.returncode == 0, done.stderr
    assert "CAUTION" in done.stderr and "variogram model per unit" in done.stdout
    report = json.loads((out / "report.json").read_text())
    assert [u["name"] for u in report["units"]] == ["gravel", "silt"]
    assert report["units"][1]["variogram"]["source"] == "run spec"
    with rasterio.open(out / "summary.tif") as src:
        assert src.descriptions[-1] == "unit code"
        codes = src.read(src.count)
    assert set(np.unique(codes[np.isfinite(codes)])) == {1.0, 2.0}
    assert_plain_tables(out, [
        "decision_figures.csv", "decision_spread.csv", "decision_figures_by_unit.csv",
        "decision_spread_by_unit.csv", "units/gravel/cross_validation.csv", "units/silt/cross_validation.csv"])
    checked = geosim_cmd("check", tmp_path / "aq" / "run_units.toml")
    assert checked.returncode == 0 and "unit gravel (1)" in checked.stdout and "unit silt (2)" in checked.stdout


def test_three_dimensional_units_and_the_plan_size(tmp_path, field):
    """A 3-D grid: the raster's codes on every level, each unit simulated on its own nodes, the unit
    band in each level's summary; the memory check counts every unit's plan."""
    from geosim.simulation.runner import plan_bytes
    xy, unit, grade = field
    rng = np.random.default_rng(2)
    path = _write(tmp_path / "a", xy, unit, grade, realizations=2)
    table = path.read_text()
    rows = (tmp_path / "a" / "pts.csv").read_text().splitlines()
    (tmp_path / "a" / "pts.csv").write_text("\n".join([rows[0] + ",z"] + [
        f"{r},{rng.uniform(0.0, 30.0):.2f}" for r in rows[1:]]) + "\n")
    path.write_text(table.replace('y = "y"', 'y = "y"\nz = "z"').replace(
        "cell = [10.0, 10.0]", "cell = [20.0, 20.0, 10.0]\nz_range = [0.0, 30.0]").replace(
        "ranges = [120.0]", "ranges = [120.0, 120.0, 30.0]").replace("ranges = [220.0]", "ranges = [220.0, 220.0, 40.0]"
        ).replace("plots = false", 'plots = false\ncube = "none"'))
    spec = load_spec(path)
    units = units_run.prepare_units(spec)
    assert units.node_codes.shape == (3, 20, 30)
    assert (units.node_codes[0] == units.node_codes[2]).all() and set(np.unique(units.node_codes)) == {1, 2}
    units_run.fit_units(units)
    plan = units_run.UnitsEngine("sequential").prepare(None, None, None, units.modelled_grid,
                                                       parts=units_run._parts(spec, units),
                                                       node_codes=units.node_codes)
    assert plan_bytes(plan) > sum(plan_bytes(p) for p in plan.prepared[:1]) > 0
    result = units_run.run(spec, tmp_path / "out")
    assert result.ndim == 3
    for k in range(3):
        with rasterio.open(tmp_path / "out" / f"summary_z{k:03d}.tif") as src:
            assert src.descriptions[-1] == "unit code"
            np.testing.assert_array_equal(src.read(src.count), units.node_codes[k].astype(float))
    blocks = _csv(tmp_path / "out" / "block_model.csv")  # 3-D: a block-model table, with each node's unit
    assert len(blocks) == 1800 and {float(b["unit_code"]) for b in blocks} == {1.0, 2.0}
