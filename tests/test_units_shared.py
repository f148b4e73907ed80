"""A run of several units with realizations sharing random paths, on a Dask cluster, and the
cross-validation of all units together (geosim.units_run).

Sampling-error tolerances of the ensemble test (R realizations): an ensemble mean has standard
error sigma / sqrt(R), an ensemble variance the relative standard error sqrt(2 / (R - 1))
(chi-square with R - 1 degrees of freedom); Z = 4.5 standard errors as in
``test_simulation_shared_path.py``, with fixed seeds so a pass is reproducible.  Realizations of a
group share a path, so they are not independent of each other: the groups are (R / 10 of them),
and the tolerance of the variance is taken over the groups' count, the more cautious bound.
"""
import csv
import json
import math
from dataclasses import replace

import numpy as np
import pytest
import rasterio

import geosim.units_run as units_run
from geosim.config.runspec import load_spec
from geosim.search import Neighbourhood
from geosim.simulation import realization_rng, simulate
from geosim.simulation.exact import ExactEngine
from geosim.simulation.runner import path_rng
from geosim.simulation.sequential import SequentialEngine
from test_units_run import _field, _write

Z = 4.5


@pytest.fixture(scope="module")
def field():
    return _field()


def _units(spec_path, overrides=None):
    spec = load_spec(spec_path, overrides or {})
    units = units_run.prepare_units(spec)
    units_run.fit_units(units)
    return spec, units


def _shared(spec, units, n, per_path, indices=None, workers=1, parts=None):
    return simulate(units.samples.coords, np.zeros(len(units.samples)), None, units.modelled_grid,
                    n_realizations=n, seed=spec["simulation.seed"], indices=indices,
                    engine=units_run.UnitsEngine("sequential"), workers=workers, realizations_per_path=per_path,
                    parts=parts or units_run._parts(spec, units), node_codes=units.node_codes)


def test_shared_path_member_of_a_unit_draws_from_the_unit_streams(tmp_path, field):
    # realization i of unit u, in a group g = i // p: the inner engine's batch with the path of
    # SeedSequence(seed, spawn_key=(PATH_STREAM, g, u)) and the values of (i, u); worked out here
    # with the sequential engine on the unit's own part, bit for bit
    xy, unit, grade = field
    spec, units = _units(_write(tmp_path / "a", xy, unit, grade))
    seed, p, n = spec["simulation.seed"], 3, 7
    joined = _shared(spec, units, n, p)
    engine = SequentialEngine()
    for part in units_run._parts(spec, units):
        plan = engine.prepare(part.coords, part.scores, part.model, part.grid, neighbourhood=part.neighbourhood,
                              **part.options)
        inside = units.node_codes == part.code
        for g in range(math.ceil(n / p)):
            members = list(range(g * p, min(n, (g + 1) * p)))
            own = engine.realize_batch(plan, units_run.unit_rng(path_rng(seed, g), part.code),
                                       [units_run.unit_rng(realization_rng(seed, i), part.code) for i in members])
            for i, f in zip(members, own):
                assert np.array_equal(joined[i][inside], f[inside])
    # a member does not depend on which others are computed with it, nor on the workers
    alone = _shared(spec, units, n, p, indices=[4])
    assert np.array_equal(alone[0], joined[4], equal_nan=True)
    pooled = _shared(spec, units, n, p, workers=2)
    assert all(np.array_equal(a, b, equal_nan=True) for a, b in zip(pooled, joined))
    # units draw their own paths: unit 2 with unit 1's path generator gives another field
    other = engine.realize_batch(plan, units_run.unit_rng(path_rng(seed, 0), 1),
                                 [units_run.unit_rng(realization_rng(seed, 0), part.code)])
    assert not np.allclose(other[0][inside], joined[0][inside])


def test_shared_path_hard_boundary_is_bit_for_bit(tmp_path, field):
    # changing unit 1's data, leaving it out or listing the units the other way round leaves
    # every node of unit 2 unchanged, with paths shared by groups of 4
    xy, unit, grade = field
    spec, units = _units(_write(tmp_path / "a", xy, unit, grade))
    ref = _shared(spec, units, 6, 4)
    changed = grade.copy()
    changed[unit == 1] = changed[unit == 1][::-1] * 3.0
    runs = [_units(_write(tmp_path / "b", xy, unit, changed)),
            _units(_write(tmp_path / "c", xy, unit, grade, modelled=(False, True))),
            _units(_write(tmp_path / "d", xy, unit, grade, order=(2, 1)))]
    east, west = units.node_codes == 2, units.node_codes == 1
    fields = [_shared(s, u, 6, 4) for s, u in runs]
    for i, r in enumerate(ref):
        for f in fields:
            assert np.array_equal(r[east], f[i][east])
        assert not np.allclose(r[west], fields[0][i][west])   # unit 1 did change
        assert np.isnan(fields[1][i][west]).all()             # not modelled: nodata
        assert np.array_equal(r, fields[2][i], equal_nan=True)


def test_shared_path_ensemble_of_each_unit_agrees_with_the_exact_engine(tmp_path, field):
    # 1000 realizations in groups of 10, node by node against the conditional mean and variance
    # of each unit's own data and model given by the exact engine (global simple kriging).  Every
    # datum of the unit and every earlier node are in each search, so the sequential engine draws
    # from the same distribution and only sampling error remains (tolerances in the docstring).
    xy, unit, grade = field
    spec, units = _units(_write(tmp_path / "a", xy, unit, grade), {"grid.cell": [50.0, 50.0]})
    everything = Neighbourhood(max_samples=128, max_nodes=64, ranges=(1e4, 1e4))
    parts = [replace(p, neighbourhood=everything) for p in units_run._parts(spec, units)]
    assert all(len(p.scores) <= 128 and p.grid.n_active <= 64 for p in parts)
    r, p = 1000, 10
    fields = np.array(_shared(spec, units, r, p, parts=parts))
    for part in parts:
        exact = ExactEngine().prepare(part.coords, part.scores, part.model, part.grid)
        vals = fields[:, part.grid.mask]
        assert vals.shape[1] >= 40 and np.isfinite(vals).all()
        assert np.all(np.abs(vals.mean(axis=0) - exact.mean) <= Z * np.sqrt(exact.variance / r))
        assert np.all(np.abs(vals.var(axis=0, ddof=1) / exact.variance - 1.0) <= Z * np.sqrt(2.0 / (r / p - 1)))


def _pixels(path):
    with rasterio.open(path) as src:
        return src.read()


@pytest.fixture(scope="module")
def dask_cluster():
    distributed = pytest.importorskip("dask.distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        yield cluster


@pytest.mark.parametrize("per_path", [1, 2])
def test_units_run_on_a_dask_cluster_equals_the_serial_run(tmp_path, field, dask_cluster, per_path):
    # every raster's pixels and every CSV table byte for byte (the provenance differs only in the
    # spec's hash: the cluster address is part of the spec)
    xy, unit, grade = field
    path = _write(tmp_path / "a", xy, unit, grade, realizations=4)
    serial = units_run.run(load_spec(path, {"simulation.realizations_per_path": per_path}), tmp_path / "serial")
    remote = units_run.run(load_spec(path, {"simulation.realizations_per_path": per_path, "simulation.workers": None,
                                            "simulation.cluster": dask_cluster.scheduler_address}),
                           tmp_path / "dask")
    assert remote.computed == serial.computed == [0, 1, 2, 3]
    report = json.loads((tmp_path / "dask" / "report.json").read_text())
    assert report["realizations"]["per_path"] == per_path
    rasters = sorted(p.relative_to(tmp_path / "serial") for p in (tmp_path / "serial").rglob("*.tif"))
    tables = sorted(p.relative_to(tmp_path / "serial") for p in (tmp_path / "serial").rglob("*.csv"))
    assert len(rasters) >= 6 and len(tables) >= 4
    for name in rasters:
        np.testing.assert_array_equal(_pixels(tmp_path / "dask" / name), _pixels(tmp_path / "serial" / name))
    for name in tables:
        assert (tmp_path / "dask" / name).read_bytes() == (tmp_path / "serial" / name).read_bytes()


def _csv(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def test_command_line_summary_gives_cross_validation_per_unit_and_in_total(tmp_path, field):
    # the pooled figures are worked out here from each unit's own cross-validation table:
    # the RMSE of all left-out samples is sqrt(sum of squared errors / count) over both tables
    from click.testing import CliRunner

    from geosim_cli.main import cli
    xy, unit, grade = field
    path = _write(tmp_path / "a", xy, unit, grade, realizations=2, full=True)
    done = CliRunner().invoke(cli, ["run", str(path), "--out", str(tmp_path / "out")])
    assert done.exit_code == 0, done.stderr
    text = done.stdout
    assert "cross-validation, unit low" in text and "cross-validation, unit high" in text
    assert "cross-validation, all units" in text
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    total = report["cross_validation"]
    errors = {"normal_scores": []}
    for name in ("low", "high"):
        rows = _csv(tmp_path / "out" / "units" / name / "cross_validation.csv")
        section = next(u for u in report["units"] if u["name"] == name)
        assert section["cross_validation"]["normal_scores"]["samples"] == len(rows)
        errors["normal_scores"] += [float(r["score_estimate"]) - float(r["score"]) for r in rows
                                    if r["score_estimate"] not in ("", "nan")]
    e = np.array(errors["normal_scores"])
    assert total["normal_scores"]["samples"] == len(unit)
    assert total["normal_scores"]["rmse"] == pytest.approx(math.sqrt(np.mean(e ** 2)), rel=1e-5)
    assert total["normal_scores"]["mean_error"] == pytest.approx(e.mean(), abs=1e-6)
    assert "declustered_rmse" not in total["normal_scores"]   # weights are relative within a unit


def test_auto_shares_paths_in_units_runs_only_with_an_engine_that_can():
    # "auto": 50 per path on a grid of 250,000 active nodes or more, when the inner engine has batches
    from geosim.grid import Grid
    from geosim.simulation.runner import per_path_for
    large = Grid(0.0, 0.0, (1.0, 1.0), (500, 500))
    assert per_path_for("auto", large, units_run.UnitsEngine("sequential")) == 50
    assert per_path_for("auto", large, units_run.UnitsEngine("exact")) == 1
    assert not hasattr(units_run.UnitsEngine("exact"), "realize_batch")
    with pytest.raises(Exception, match="cannot share a path"):
        simulate(np.zeros((1, 2)), np.zeros(1), None, Grid(0.0, 0.0, (1.0, 1.0), (4, 4)), n_realizations=2,
                 seed=1, engine=units_run.UnitsEngine("exact"), realizations_per_path=2, workers=1)
