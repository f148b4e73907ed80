"""Tails with an infinite variance warn; the run report sets the largest simulated value
against the largest datum; the ore sample uses a bounded tail."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

import geosim
from geosim.validation import RunChecks, extremes_summary

ORE = Path(__file__).resolve().parent.parent / "sample_fields" / "ore_prospect" / "run.toml"


def test_run_checks_report_the_extremes_of_the_data_unit_fields():
    g = geosim.Grid(0.0, 0.0, (1.0, 1.0), (20, 20))
    m = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((5.0, 5.0)))])
    data = np.array([0.2, 3.0, 1.5])
    checks = RunChecks(g, m, [[0.5, 0.5], [5.5, 5.5], [10.5, 10.5]], [-1.0, 1.0, 0.0], data_values=data)
    rng = np.random.default_rng(1)
    fields = [rng.lognormal(size=g.shape) for _ in range(3)]
    fields[1][4, 4] = 420.0
    fields[2][0, :] = np.nan  # outside the domain
    measures = [checks(np.log(f), f) for f in fields]
    ext = checks.summarize(measures)["extremes"]
    assert ext["largest_datum"] == 3.0 and ext["smallest_datum"] == 0.2
    assert ext["largest_simulated"] == 420.0 and ext["realization_of_largest"] == 1
    assert ext["largest_simulated_per_realization"] == [float(np.nanmax(f)) for f in fields]
    assert ext["largest_over_largest_datum"] == pytest.approx(140.0)
    assert ext["realizations_above_largest_datum"] == sum(np.nanmax(f) > 3.0 for f in fields)
    assert ext["smallest_simulated"] == min(float(np.nanmin(f)) for f in fields)
    assert extremes_summary(data, measures) == ext


def test_spec_with_a_pareto_tail_below_exponent_2_warns_when_the_transform_is_made(notes):
    import geosim.config.runspec
    import geosim.pipeline
    heavy = geosim.config.runspec.load_spec(ORE, overrides={"transform.upper_tail": "pareto", "transform.upper": None,
                                                        "transform.upper_exponent": 2.0})
    with notes("cu_pct with exponent 2 has an infinite variance"):
        geosim.pipeline.prepare_data(heavy)
    spec = geosim.config.runspec.load_spec(ORE)
    notes.clear()
    data = geosim.pipeline.prepare_data(spec)
    assert not notes.logged()
    assert "upper tail power up to 15" in data.transform.describe()


def test_ore_run_report_sets_the_largest_simulated_value_against_the_largest_datum(tmp_path):
    import geosim.config.runspec
    import geosim.pipeline
    spec = geosim.config.runspec.load_spec(ORE, overrides={
        "simulation.realizations": 2, "simulation.workers": 1, "outputs.plots": False,
        "outputs.estimate": False, "outputs.cross_validation": False, "outputs.keep_realizations": False,
        "outputs.level_geotiffs": True})  # the per-level GeoTIFFs are read below
    result = geosim.pipeline.run(spec, tmp_path / "run")
    report = json.loads((tmp_path / "run" / "report.json").read_text())
    ext = report["validation"]["extremes"]
    data = geosim.pipeline.prepare_data(spec)
    assert ext["largest_datum"] == pytest.approx(float(data.values.max()))
    # the bounded tail of the sample's spec: nothing above 15 % Cu, and the tail is used
    assert ext["largest_datum"] < ext["largest_simulated"] <= 15.0
    import rasterio
    tops = []
    for path in sorted((tmp_path / "run").glob("realizations*.tif")):
        with rasterio.open(path) as src:
            tops.append(np.nanmax(src.read(), axis=(1, 2)))
    # float32 rasters against the float64 values measured in the worker
    np.testing.assert_allclose(np.max(tops, axis=0), ext["largest_simulated_per_realization"], rtol=1e-6)
    assert ext["largest_simulated"] == pytest.approx(float(np.max(tops)), rel=1e-6)
    assert any(n.startswith("largest simulated value") and "% Cu" in n and "largest datum 7.523" in n
               for n in result.notes)
