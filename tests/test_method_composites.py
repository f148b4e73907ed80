"""Composites: a minimum sampled fraction, and each composite at the centre of its samples."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from geosim.drillholes import Drillholes, composite, read_drillholes

SAMPLES = Path(__file__).resolve().parent.parent / "sample_fields" / "ore_prospect"


def one_hole(top, bottom, values, names=("cu",)):
    values = np.asarray(values, dtype=float).reshape(len(top), -1)
    return Drillholes(ids=np.array(["H"]), collars=np.array([[0.0, 0.0, 100.0]]), depths=np.array([50.0]),
                      surveys={}, hole=np.full(len(top), "H"), top=np.asarray(top, dtype=float),
                      bottom=np.asarray(bottom, dtype=float), values=values, names=names)


def test_a_composite_holding_a_sliver_of_sample_is_dropped_and_counted():
    # runs of 4 m from 0: [0,4] fully sampled; [4,8] holds 0.1 m of sample; [8,12] holds 2.5 m
    h = one_hole([0.0, 4.0, 9.0], [4.0, 4.1, 11.5], [1.0, 30.0, 2.0])
    c = composite(h, 4.0)
    np.testing.assert_allclose(c.column(), [1.0, 2.0])
    np.testing.assert_allclose(c.attributes["from"], [0.0, 8.0])
    assert "1 composite(s) sampled over less than 0.5 of their length dropped" in c.notes[-1]
    # 0 keeps every composite with any sample, as before
    np.testing.assert_allclose(composite(h, 4.0, min_sampled_fraction=0.0).column(), [1.0, 30.0, 2.0])
    with pytest.raises(ValueError, match="min_sampled_fraction"):
        composite(h, 4.0, min_sampled_fraction=1.5)


def test_a_composite_sits_at_the_centre_of_its_samples():
    # [0,4] sampled over 0-1 and 2-3 (1 m each): centre (0.5 + 2.5) / 2 = 1.5, not the run's 2.0;
    # [4,8] sampled over 4-7 only: centre 5.5, not 6.0
    h = one_hole([0.0, 2.0, 4.0], [1.0, 3.0, 7.0], [1.0, 3.0, 5.0])
    c = composite(h, 4.0)
    np.testing.assert_allclose(c.attributes["depth"], [1.5, 5.5])
    # a vertical hole without surveys: z = collar z - depth
    np.testing.assert_allclose(c.coords[:, 2], [98.5, 94.5])
    np.testing.assert_allclose(c.attributes["length"], [2.0, 3.0])


def test_each_variable_needs_its_own_sampled_fraction():
    # cu assayed over the whole run, au over a quarter of it: au is set aside there, cu kept
    h = one_hole([0.0, 1.0], [1.0, 4.0], [[1.0, 0.2], [2.0, np.nan]], names=("cu", "au"))
    c = composite(h, 4.0)
    assert len(c) == 1
    np.testing.assert_allclose(c.column("cu"), [(1.0 + 3 * 2.0) / 4])
    assert np.isnan(c.column("au")[0])
    assert "au 1" in c.notes[-1]


def test_sampled_centres_against_a_brute_force_integral():
    # random gappy intervals: the centre equals a midpoint-rule integral of depth over sampled length
    rng = np.random.default_rng(11)
    gaps, sizes = rng.uniform(0, 2, 60), rng.uniform(0.1, 3, 60)
    top = np.cumsum(gaps + np.r_[0, sizes[:-1]])
    bottom = top + sizes
    vals = np.where(rng.uniform(size=60) < 0.2, np.nan, rng.uniform(0, 5, 60))
    c = composite(one_hole(top, bottom, vals), 5.0, min_sampled_fraction=0.0)
    t = np.linspace(0, bottom[-1] + 1, 2_000_001)
    mid = 0.5 * (t[1:] + t[:-1])
    i = np.searchsorted(top, mid, side="right") - 1
    on = (i >= 0) & (mid < bottom[np.clip(i, 0, None)]) & np.isfinite(vals[np.clip(i, 0, None)])
    for f, to, d in zip(c.attributes["from"], c.attributes["to"], c.attributes["depth"]):
        sel = on & (mid >= f) & (mid < to)
        # the midpoint rule on a 3e-5 m step is exact to about one step at the interval ends
        assert abs(mid[sel].mean() - d) < 1e-3


def test_the_ore_prospect_reports_dropped_composites():
    h = read_drillholes(SAMPLES / "collars.csv", SAMPLES / "surveys.csv", SAMPLES / "assays.csv",
                        values="cu_pct", crs="EPSG:32750")
    c = composite(h, 4.0)
    frac = c.attributes["length"] / (c.attributes["to"] - c.attributes["from"])
    assert frac.min() >= 0.5 - 1e-9
    every = composite(h, 4.0, min_sampled_fraction=0.0)
    dropped = len(every) - len(c)
    assert dropped > 0 and f"{dropped} composite(s) sampled over less than 0.5" in c.notes[-1]


def test_the_run_spec_sets_the_minimum_sampled_fraction():
    import geosim.pipeline as pipeline
    from geosim.config.runspec import load_spec
    spec = load_spec(SAMPLES / "run.toml", ["data.composites.min_sampled_fraction=0.9"])
    strict = pipeline.load_samples(spec)
    loose = pipeline.load_samples(load_spec(SAMPLES / "run.toml", ["data.composites.min_sampled_fraction=0"]))
    assert len(strict) < len(loose)
    assert any("less than 0.9 of their length dropped" in n for n in strict.notes)
