"""Cross-validation in data units beside normal scores, labelled, with declustered statistics."""
from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import geosim
import geosim.pipeline as pipeline
from geosim.io.crossval import crossval_figure, plot_crossval, write_crossval_csv
from geosim.io.csvw import read_csv_metadata
from geosim.config.runspec import load_spec
from geosim.kriging import cross_validate

AQUIFER = Path(__file__).resolve().parent.parent / "sample_fields" / "alluvial_aquifer" / "run.toml"
FAST = ["grid.cell=[300.0, 300.0]", "simulation.workers=1", "variogram.fit=false"]


def test_data_unit_estimate_is_the_back_transformed_conditional_mean():
    # log-normal check (Aitchison and Brown 1957, The Lognormal Distribution, ch. 2): for Y ~ N(m, v)
    # and values 10^Y, E = 10^m exp((ln 10)^2 v / 2) and Var = E^2 (exp((ln 10)^2 v) - 1)
    rng = np.random.default_rng(8)
    xy = rng.uniform(0, 500, size=(60, 2))
    y = rng.normal(size=60)
    model = geosim.Nugget(0.2) + geosim.Spherical(0.8, geosim.Anisotropy((200.0, 200.0)))
    cv = cross_validate(xy, y, model, method="simple")
    k = 10.0 ** y
    du = cv.in_data_units(geosim.LogTransform(), k, units="m/s")
    ln10 = math.log(10.0)
    expected = 10.0 ** cv.estimate * np.exp(ln10 ** 2 * cv.variance / 2)
    np.testing.assert_allclose(du.estimate, expected, rtol=1e-6)
    np.testing.assert_allclose(du.variance, expected ** 2 * (np.exp(ln10 ** 2 * cv.variance) - 1), rtol=1e-4)
    np.testing.assert_allclose(du.error, du.estimate - k)
    assert du.units == "m/s" and du.scale == "data units"
    s = du.summary()
    assert s["rmse"] == pytest.approx(np.sqrt(np.mean((expected - k) ** 2)), rel=1e-6)


def test_declustered_statistics_stand_beside_the_plain_ones():
    rng = np.random.default_rng(3)
    xy = rng.uniform(0, 300, size=(40, 2))
    model = geosim.Nugget(0.3) + geosim.Spherical(0.7, geosim.Anisotropy((100.0, 100.0)))
    w = rng.uniform(0.2, 1.0, 40)
    from dataclasses import replace
    cv = replace(cross_validate(xy, rng.normal(size=40), model), weights=w / w.sum())
    s = cv.summary()
    e = cv.estimate - cv.values
    ww = w / w.sum()
    assert s["declustered_mean_error"] == pytest.approx(np.sum(ww * e), rel=1e-12)
    assert s["declustered_rmse"] == pytest.approx(np.sqrt(np.sum(ww * e * e)), rel=1e-12)
    assert s["declustered_mean_value"] == pytest.approx(np.sum(ww * cv.values), rel=1e-12)
    assert s["mean_error"] == pytest.approx(e.mean(), rel=1e-12)


@pytest.fixture(scope="module")
def aquifer_cv(tmp_path_factory):
    out = tmp_path_factory.mktemp("cv")
    spec = load_spec(AQUIFER, FAST)
    data = pipeline.prepare_data(spec)
    return spec, data, pipeline.cross_validate(spec, data, out_dir=out, overwrite=True), out


def test_the_run_writes_both_scales_labelled(aquifer_cv):
    spec, data, cv, out = aquifer_cv
    assert set(cv.summary) == {"normal_scores", "data_units"}
    assert cv.summary["normal_scores"]["units"] == "normal score"
    assert cv.summary["data_units"]["units"] == "m/s"
    assert "declustered_rmse" in cv.summary["data_units"]
    path = out / "cross_validation.csv"
    meta = read_csv_metadata(path)
    units = {c["name"]: c.get("schema:unitText") for c in meta["tableSchema"]["columns"]}
    assert units["value"] == units["estimate"] == units["error"] == "m/s"
    assert units["score"] == units["score_estimate"] == "normal score"
    assert any(n.startswith("summary in data units (m/s") and "declustered_rmse=" in n for n in meta["notes"])
    assert any(n.startswith("summary in normal scores") for n in meta["notes"])
    rows = list(csv.DictReader(path.read_text().splitlines()))
    # every row: data-unit estimate = back-transformed conditional mean of its kriged score
    est = np.array([float(r["score_estimate"]) if r["score_estimate"] else np.nan for r in rows])
    var = np.array([float(r["score_kriging_variance"]) if r["score_kriging_variance"] else np.nan for r in rows])
    mean, _ = pipeline.multigaussian_moments(data.transform, est, var)
    got = np.array([float(r["estimate"]) if r["estimate"] else np.nan for r in rows])
    np.testing.assert_allclose(got, mean, rtol=1e-6)
    np.testing.assert_allclose([float(r["value"]) for r in rows], data.values, rtol=1e-9)


def test_the_plot_says_which_axes_are_normal_scores(aquifer_cv):
    from PIL import Image
    _, data, cv, out = aquifer_cv
    fig = crossval_figure(cv.result, data_units=cv.data_units, log=True)
    labels = [ax.get_xlabel() for ax in fig.axes] + [ax.get_ylabel() for ax in fig.axes]
    assert any("m/s" in t and "data units" in t for t in labels)
    assert sum("normal score" in t for t in labels) >= 3
    assert fig.axes[0].get_xscale() == "log"
    png = plot_crossval(cv.result, out / "again.png", data_units=cv.data_units)
    with Image.open(png) as im:
        assert im.text["Description"] == geosim.CAUTION  # the key every other geosim plot uses


def test_the_command_prints_data_units_and_normal_scores(tmp_path):
    from geosim_cli.main import cli
    args = ["crossvalidate", str(AQUIFER), "--out", str(tmp_path / "o")] + [a for f in FAST for a in ("--set", f)]
    res = CliRunner().invoke(cli, args, prog_name="geosim")
    assert res.exit_code == 0, res.output
    assert "data units (m/s): RMSE" in res.output and "normal scores: RMSE" in res.output
    assert "declustered RMSE" in res.output
