"""The pipeline as library calls: transforms, multi-Gaussian moments, resume state, a small run."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

import geosim
import geosim.outputs
import geosim.pipeline as pipeline
from geosim.errors import InputError, ResourceError
from geosim.io.geotiff import read_realization
from geosim.kriging import krige
from geosim.config.runspec import load_spec

AQUIFER = Path(__file__).resolve().parent.parent / "sample_fields" / "alluvial_aquifer" / "run.toml"
# a coarse grid, few realizations, serial: the logic under test does not need more
SMALL = ["grid.cell=[300.0, 300.0]", "simulation.workers=1", "variogram.fit=false", "outputs.plots=false",
         "outputs.cross_validation=false", "outputs.estimate=false"]


def small_spec(*more):
    return load_spec(AQUIFER, SMALL + list(more))


@pytest.fixture(scope="module")
def prepared():
    spec = small_spec("simulation.realizations=3")
    data = pipeline.prepare_data(spec)
    model = pipeline.variogram_model(spec, data).model
    grid = pipeline.make_grid(spec, data)
    return data, model, grid


def test_transform_chain_round_trips_and_describes():
    k = np.array([3e-6, 2e-5, 1e-4, 7e-4, 5e-3, 1e-2])
    chain = pipeline.TransformChain([geosim.LogTransform(), geosim.NormalScoreTransform()]).fit(k)
    scores = chain.transform(k)
    assert np.all(np.diff(scores) > 0)
    np.testing.assert_allclose(chain.inverse(scores), k, rtol=1e-12)
    assert chain.describe().startswith("log10(value) then normal score")
    assert [s["kind"] for s in chain.to_dict()["steps"]] == ["log", "normal_score"]


def test_multigaussian_moments_of_a_lognormal():
    # Aitchison and Brown (1957), The Lognormal Distribution, ch. 2: for Y ~ N(m, v),
    # E[exp(Y)] = exp(m + v/2) and Var[exp(Y)] = (exp(v) - 1) exp(2m + v).
    class Exp:
        inverse = staticmethod(np.exp)

    m = np.array([-1.0, 0.0, 0.5, np.nan])
    v = np.array([0.25, 1.0, 0.0, 1.0])
    mean, var = pipeline.multigaussian_moments(Exp, m, v)
    np.testing.assert_allclose(mean[:3], np.exp(m[:3] + v[:3] / 2), rtol=1e-9)
    np.testing.assert_allclose(var[:3], (np.exp(v[:3]) - 1) * np.exp(2 * m[:3] + v[:3]), rtol=1e-6, atol=1e-15)
    assert np.isnan(mean[3]) and np.isnan(var[3])


def test_prepared_data_is_metric_declustered_and_standard_normal(prepared):
    data, model, grid = prepared
    assert data.crs.to_epsg() == 32725  # the sample field's README: UTM zone 25S
    assert data.coords.shape == (80, 2)
    np.testing.assert_allclose(data.weights.sum(), 1.0)
    # declustering weights enter the normal scores: their weighted mean is about 0
    assert abs(np.sum(data.weights * data.scores)) < 0.1
    assert any("UTM zone" in n for n in data.notes)
    assert grid.ndim == 2 and 0 < grid.n_active < grid.size  # clipped to the valley polygon


def test_a_mistyped_cell_size_is_refused_before_allocating(prepared):
    data, _, _ = prepared
    # refused for the machine's memory (exit 5) where 9.6e8 nodes do not fit, else by the node limit
    with pytest.raises((InputError, ResourceError), match=r"grid.cell"):
        pipeline.make_grid(small_spec("grid.cell=[0.2, 0.2]"), data)


def realization_values(out_dir, grid, n):
    return [read_realization([Path(out_dir) / "realizations" / f"r{i:04d}.tif"], grid) for i in range(n)]


def test_resume_extends_a_run_bit_identically(tmp_path, prepared):
    data, model, grid = prepared
    first = pipeline.simulate(small_spec("simulation.realizations=3"), data, model, grid, out_dir=tmp_path / "a")
    assert first.kept == [] and first.computed == [0, 1, 2]
    before = {i: (tmp_path / "a" / f).stat().st_mtime_ns for i, r in enumerate(first.records) for f in r["files"]}
    more = pipeline.simulate(small_spec("simulation.realizations=5"), data, model, grid, out_dir=tmp_path / "a")
    assert more.kept == [0, 1, 2] and more.computed == [3, 4]
    after = {i: (tmp_path / "a" / f).stat().st_mtime_ns for i, r in enumerate(more.records[:3]) for f in r["files"]}
    assert after == before  # kept files were not rewritten
    fresh = pipeline.simulate(small_spec("simulation.realizations=5"), data, model, grid, out_dir=tmp_path / "b")
    for x, y in zip(realization_values(tmp_path / "a", grid, 5), realization_values(tmp_path / "b", grid, 5)):
        np.testing.assert_array_equal(x, y)


def test_a_changed_realization_file_is_recomputed(tmp_path, prepared):
    data, model, grid = prepared
    spec = small_spec("simulation.realizations=2")
    pipeline.simulate(spec, data, model, grid, out_dir=tmp_path)
    target = tmp_path / "realizations" / "r0001.tif"
    target.write_bytes(target.read_bytes()[:-10] + b"0123456789")
    again = pipeline.simulate(spec, data, model, grid, out_dir=tmp_path)
    assert again.kept == [0] and again.computed == [1]


def test_another_spec_in_the_folder_is_refused_unless_overwrite(tmp_path, prepared):
    data, model, grid = prepared
    pipeline.simulate(small_spec("simulation.realizations=1"), data, model, grid, out_dir=tmp_path)
    other = small_spec("simulation.realizations=1", "simulation.seed=99")
    with pytest.raises(InputError, match=r"different spec.*\[simulation\].*--overwrite"):
        pipeline.simulate(other, data, model, grid, out_dir=tmp_path)
    replaced = pipeline.simulate(other, data, model, grid, out_dir=tmp_path, overwrite=True)
    assert replaced.kept == [] and replaced.computed == [0]
    state = json.loads((tmp_path / pipeline.STATE_DIR / "run.json").read_text())
    assert state["seed"] == 99 and state["spec_sha256"] == other.sha256


def test_a_folder_with_other_files_is_refused(tmp_path, prepared):
    data, model, grid = prepared
    (tmp_path / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="not empty"):
        pipeline.simulate(small_spec("simulation.realizations=1"), data, model, grid, out_dir=tmp_path)


def test_summarize_needs_every_realization(tmp_path, prepared):
    data, model, grid = prepared
    pipeline.simulate(small_spec("simulation.realizations=2"), data, model, grid, out_dir=tmp_path)
    with pytest.raises(InputError, match="1 of 3 realizations are missing or changed: 2"):
        pipeline.summarize(small_spec("simulation.realizations=3"), tmp_path, data=data, model=model, grid=grid)


def test_run_writes_summaries_that_match_numpy(tmp_path):
    import rasterio

    spec = small_spec("simulation.realizations=4", "outputs.estimate=true", "outputs.cross_validation=true")
    result = pipeline.run(spec, tmp_path)
    assert result.computed == [0, 1, 2, 3] and result.kept == []
    for name in ("report.json", "summary.tif", "realizations.tif", "estimate.tif", "cross_validation.csv",
                 "variogram_model.toml", "decision_spread.csv"):
        assert (tmp_path / name).is_file(), name
    report = json.loads((tmp_path / "report.json").read_text())
    assert report["caution"] == geosim.CAUTION and report["run_spec_sha256"] == spec.sha256
    assert report["realizations"]["count"] == 4 and "cross_validation" in report
    grid = pipeline.make_grid(spec, pipeline.prepare_data(spec))
    fields = np.stack(realization_values(tmp_path, grid, 4)).astype(np.float32).astype(float)
    expected = geosim.summaries.summarize_ensemble(fields, spec["outputs.cutoffs"])
    with rasterio.open(tmp_path / "summary.tif") as src:
        bands = src.read().astype(float)
    for band, (name, values) in zip(bands, expected.items()):
        np.testing.assert_allclose(band, values, rtol=1e-5, equal_nan=True, err_msg=name)
    # decision spread rows: one per threshold and figure, P10 <= P50 <= P90
    assert result.decision and all(r["P10"] <= r["P50"] <= r["P90"] for r in result.decision)


def test_estimate_is_consistent_with_its_normal_scores(prepared):
    data, model, grid = prepared
    est = pipeline.estimate(small_spec(), data, model, grid)
    inside = np.isfinite(est.scores_mean)
    assert inside.any() and not np.isfinite(est.scores_mean[~grid.mask]).any()
    # the conditional mean in data units lies inside the back-transform's range
    lo, hi = data.transform.inverse(np.array([-8.0, 8.0]))
    assert np.all((est.mean[inside] > lo) & (est.mean[inside] < hi))
    assert np.all(est.scores_variance[inside] <= model.sill + 1e-9)


def test_estimate_is_kriging_of_the_scores_with_its_data_unit_moments(prepared):
    # The normal-score bands are exactly geosim's kriging with the run's settings; the data-unit
    # bands are the mean and variance of the back-transform of N(kriged score, kriging variance).
    data, model, grid = prepared
    spec = small_spec()
    est = pipeline.estimate(spec, data, model, grid)
    ref = krige(data.coords, data.scores, grid.coords(), model, method=spec["simulation.kriging"],
                neighbourhood=pipeline.neighbourhood(spec), hole_ids=data.samples.hole_ids)
    np.testing.assert_array_equal(est.scores_mean[grid.mask], ref.estimate)
    np.testing.assert_array_equal(est.scores_variance[grid.mask], ref.variance)
    assert np.isfinite(ref.estimate).sum() > 50


def _moments_by_dense_quadrature(transform, mean, variance):
    """E and Var of transform.inverse(Y), Y ~ N(mean, variance): trapezoid rule on 40,001 points
    over +-10 sd (the back-transform is piecewise linear with kinks, so a rule that assumes a
    smooth integrand is not used; step 5e-4 sd, error far below 1e-4 here)."""
    z = np.linspace(-10.0, 10.0, 40001)
    pdf = np.exp(-0.5 * z * z) / np.sqrt(2.0 * np.pi)
    y = mean[:, None] + np.sqrt(variance)[:, None] * z[None, :]
    v = transform.inverse(y.ravel()).reshape(y.shape)
    m1 = np.trapezoid(v * pdf, z, axis=1)
    return m1, np.trapezoid(v * v * pdf, z, axis=1) - m1 ** 2


def test_estimate_data_unit_moments_match_dense_quadrature(prepared):
    data, model, grid = prepared
    est = pipeline.estimate(small_spec(), data, model, grid)
    inside = np.isfinite(est.scores_mean) & grid.mask
    m, v = est.scores_mean[inside], est.scores_variance[inside]
    pick = np.arange(0, m.size, max(1, m.size // 40))
    mean, var = _moments_by_dense_quadrature(data.transform, m[pick], v[pick])
    # the trapezoid rule's own error is below 1e-5 here (step 5e-4 sd; second order at each kink)
    np.testing.assert_allclose(est.mean[inside][pick], mean, rtol=1e-5)
    np.testing.assert_allclose(est.variance[inside][pick], var, rtol=1e-5)


ORE = AQUIFER.parent.parent / "ore_prospect" / "run.toml"


def test_below_collars_keeps_only_nodes_under_the_ground_surface():
    spec = load_spec(ORE, ["grid.cell=[40.0, 40.0, 10.0]", "domain.below_collars=true"])
    grid = pipeline.make_grid(spec, pipeline.prepare_data(spec))
    open_top = pipeline.make_grid(load_spec(ORE, ["grid.cell=[40.0, 40.0, 10.0]", "domain.below_collars=false"]))
    collars = pipeline.read_holes(spec).collars
    z = grid.coords()[:, 2]
    # no kept node is above the highest collar; every node below the lowest collar is kept
    assert z.max() <= collars[:, 2].max()
    low = open_top.coords()[:, 2] <= collars[:, 2].min()
    assert grid.mask[open_top.mask].sum() >= low.sum() > 0
    assert grid.n_active < open_top.n_active
    # at a collar's column the surface passes through the collar: the node just above it is cut
    zc, yc, xc = grid.axes()
    x0, y0, z0 = collars[0]
    j, i = np.argmin(abs(xc - x0)), np.argmin(abs(yc - y0))
    above, below = zc > z0 + 0.6 * grid.cell[2], zc < z0 - 0.6 * grid.cell[2]
    inside = open_top.mask[:, i, j]
    if inside.any():
        assert not grid.mask[above & inside, i, j].any() and grid.mask[below & inside, i, j].all()


def test_below_collars_is_refused_for_point_data():
    with pytest.raises(geosim.SpecError, match="domain.below_collars"):
        small_spec("domain.below_collars=true")


def test_metal_of_percent_grades_is_in_tonnes():
    assert geosim.outputs.metal_factor(load_spec(ORE)) == 0.01          # data.units = "% Cu"
    assert geosim.outputs.metal_factor(load_spec(ORE, ['data.units="g/t"'])) == 1.0
    assert geosim.outputs.metal_factor(load_spec(ORE, ["outputs.metal_factor=0.5"])) == 0.5
