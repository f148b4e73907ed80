"""Tied data (a spike of equal values, e.g. below detection) get the distinct scores the transform documents."""
from __future__ import annotations

import numpy as np

import geosim.pipeline as pipeline
from geosim.config.runspec import load_spec


def spike_spec(tmp_path, n=2000, spike=0.6, seed=5):
    """Points with ``spike`` of the values equal to a detection limit, the rest log-normal above it."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0.0, 1000.0, size=(n, 2))
    v = np.round(rng.lognormal(0.0, 1.0, size=n) + 0.5, 3)
    v[: int(spike * n)] = 0.25  # half a detection limit of 0.5, as below-detection assays are entered
    rows = "\n".join(f"{a:.3f},{b:.3f},{c}" for (a, b), c in zip(xy, v))
    (tmp_path / "pts.csv").write_text("x,y,grade\n" + rows + "\n")
    (tmp_path / "run.toml").write_text(
        'title = "spike"\n[data]\npoints = "pts.csv"\nx = "x"\ny = "y"\nvalue = "grade"\ncrs = "EPSG:32633"\n'
        '[declustering]\nmethod = "none"\n'
        '[variogram]\nfit = false\nstructures = [{ kind = "spherical", sill = 1.0, ranges = [300.0, 300.0] }]\n'
        '[grid]\ncell = [100.0, 100.0]\n[simulation]\nrealizations = 1\nseed = 7\n')
    return load_spec(tmp_path / "run.toml"), v


def test_a_spike_of_equal_values_keeps_unit_variance_scores(tmp_path):
    spec, v = spike_spec(tmp_path)
    data = pipeline.prepare_data(spec)
    n = data.scores.size
    # Distinct Hazen-position scores of n values have mean 0 and a variance just below 1
    # (1 - O(log n / n)); a sample variance of n independent standard normal values has standard
    # error sqrt(2 / n), so 3 of those bound the variance from sampling error.  Tie-mean scores
    # of a 60 % spike lose 0.6 Var(Z | Z < Phi^-1(0.6)) = 0.25 of it (truncated normal moments).
    assert abs(data.scores.var() - 1.0) < 3.0 * np.sqrt(2.0 / n)
    assert abs(data.scores.mean()) < 3.0 / np.sqrt(n)
    # every datum has its own score, and the scores back-transform to the data exactly
    assert np.unique(data.scores).size == n
    np.testing.assert_allclose(data.transform.inverse(data.scores), v, rtol=1e-12)
    # the spike's scores are the lowest 60 %, in the seeded random order
    spike = v == 0.25
    assert data.scores[spike].max() < data.scores[~spike].min()
    again = pipeline.prepare_data(spec)
    np.testing.assert_array_equal(again.scores, data.scores)



def test_the_transform_chain_keeps_distinct_scores_of_tied_data():
    import geosim
    v = np.array([0.01, 0.01, 0.01, 0.01, 0.2, 0.5, 1.3, 2.0])
    chain = pipeline.TransformChain([geosim.LogTransform(), geosim.NormalScoreTransform(seed=3)]).fit(v)
    ns = geosim.NormalScoreTransform(seed=3).fit(np.log10(v))
    # the same scores as the normal score transform's own seeded tie order, not the tie's mean
    np.testing.assert_array_equal(chain.data_scores_, ns.data_scores_)
    assert np.unique(chain.data_scores_[:4]).size == 4
    np.testing.assert_allclose(chain.inverse(chain.data_scores_), v, rtol=1e-12)
