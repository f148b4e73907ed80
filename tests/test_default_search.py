"""The default search leaves no gap: the aquifer demo's cross-validation estimates every sample and
its estimate map every active cell; how many searches fell short is counted and reported."""
from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

AQUIFER = Path(__file__).resolve().parent.parent / "sample_fields" / "alluvial_aquifer" / "run.toml"


@pytest.fixture(scope="module")
def demo():
    import geosim.config.runspec
    import geosim.pipeline
    spec = geosim.config.runspec.load_spec(AQUIFER)
    data = geosim.pipeline.prepare_data(spec)
    grid = geosim.pipeline.make_grid(spec, data)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = geosim.pipeline.variogram_model(spec, data).model
    return spec, data, grid, model


def test_demo_cross_validation_estimates_every_sample(demo):
    import geosim.pipeline
    spec, data, _, model = demo
    cv = geosim.pipeline.cross_validate(spec, data, model)
    assert np.isfinite(cv.result.estimate).all() and np.isfinite(cv.result.variance).all()
    summary = cv.summary["normal_scores"]
    assert summary["estimated"] == summary["samples"] == 80 and cv.summary["data_units"]["estimated"] == 80
    # the fitted minor range (about 160 m) is shorter than the well spacing in places: those
    # searches held no other well and were widened; they are counted, not hidden
    assert 0 < summary["below_min_samples"] < 80
    assert (cv.result.n_used >= spec["search.min_samples"]).all()
    # the count is what the fixed ellipsoid finds: samples with no other sample inside it
    from geosim.search import DataSearch
    search = DataSearch(data.coords, geosim.pipeline.neighbourhood(spec), model)
    _, count = search.query(data.coords, exclude_index=np.arange(80))
    assert summary["below_min_samples"] == int(np.sum(count < spec["search.min_samples"]))


def test_demo_estimate_map_has_no_empty_active_cell(demo):
    import geosim.pipeline
    spec, data, grid, model = demo
    est = geosim.pipeline.estimate(spec, data, model, grid)
    for band in (est.scores_mean, est.scores_variance, est.mean, est.variance):
        assert np.isfinite(band[grid.mask]).all() and np.isnan(band[~grid.mask]).all()
    assert est.n_unestimated == 0 and 0 < est.n_short < grid.n_active
    # nodes far from every well: the kriging variance approaches the sill, never exceeds it
    assert est.scores_variance[grid.mask].max() <= model.sill + 1e-9


def test_fixed_search_with_simple_kriging_still_fills_every_node(demo):
    import geosim.config.runspec
    import geosim.pipeline
    import geosim.results
    spec, data, grid, model = demo
    fixed = geosim.config.runspec.load_spec(AQUIFER, overrides={"search.widen": False})
    est = geosim.pipeline.estimate(fixed, data, model, grid)
    assert est.n_unestimated == 0 and np.isfinite(est.scores_mean[grid.mask]).all()
    # nodes with no sample inside the fixed ellipsoid take the mean (0) and the sill
    alone = np.isclose(est.scores_variance[grid.mask], model.sill, rtol=0, atol=1e-12)
    assert alone.any() and np.all(est.scores_mean[grid.mask][alone] == 0.0)
    ordinary = geosim.config.runspec.load_spec(AQUIFER, overrides={"search.widen": False,
                                                               "simulation.kriging": "ordinary"})
    est_ok = geosim.pipeline.estimate(ordinary, data, model, grid)
    assert est_ok.n_unestimated == est_ok.n_short > 0
    note = geosim.results.short_note(est_ok.n_short, grid.n_active, "grid nodes", ordinary, est_ok.n_unestimated)
    assert f"{est_ok.n_short} of {grid.n_active} grid nodes had fewer than 1 sample" in note
    assert "left them without an estimate" in note


def test_run_report_and_summary_count_the_short_searches(demo, tmp_path):
    import json

    import geosim.config.runspec
    import geosim.pipeline
    spec = geosim.config.runspec.load_spec(AQUIFER, overrides={
        "simulation.realizations": 1, "simulation.workers": 1, "outputs.plots": False,
        "grid.cell": [100.0, 100.0]})
    result = geosim.pipeline.run(spec, tmp_path / "run")
    report = json.loads((tmp_path / "run" / "report.json").read_text())
    assert report["estimate"]["unestimated"] == 0 and report["estimate"]["widened"] is True
    assert report["estimate"]["below_min_samples"] > 0
    assert report["cross_validation"]["normal_scores"]["below_min_samples"] > 0
    assert report["cross_validation"]["normal_scores"]["estimated"] == 80
    lines = [n for n in result.notes if n.startswith("kriging: ")]
    assert len(lines) == 2 and "left-out samples" in lines[0] and "grid nodes" in lines[1]
    assert "widened to the nearest 1" in lines[1]
