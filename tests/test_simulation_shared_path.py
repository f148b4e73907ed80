"""Realizations sharing one random path (``realizations_per_path``): exactness, seeding, spread.

Members of a group share the path, so the sequential engine solves each node's kriging
system once and applies the weights to every member's values.  The tests check that
(1) every member's node is exactly the kriging draw given the data and the earlier nodes
(numpy reference, rounding tolerance), (2) a member depends only on the seed and its index,
(3) the ensemble agrees with the exact engine node by node within sampling error, and
(4) sharing the path does not shrink the spread between realizations of a decision figure.

Sampling-error tolerances (R realizations): an ensemble mean has standard error
sigma / sqrt(R), an ensemble variance the relative standard error sqrt(2 / (R - 1)) (chi-square
with R - 1 degrees of freedom); the log of a ratio of two independent variances has standard
deviation about sqrt(2 / (R1 - 1) + 2 / (R2 - 1)) (delta method); a correlation of M
independent pairs has standard error 1 / sqrt(M).  Z = 4.5 standard errors as in
``test_simulation_sequential.py``; seeds are fixed, so a pass is reproducible.
"""
import numpy as np
import pytest

import geosim
from geosim.search import Neighbourhood
from geosim.simulation import realization_rng
from geosim.simulation.exact import ExactEngine
from geosim.simulation.paths import random_path
from geosim.simulation.runner import AUTO_PER_PATH, path_rng
from geosim.simulation.sequential import SequentialEngine

Z = 4.5
XY = np.array([[12.0, 71.0], [47.0, 44.0], [83.0, 18.0], [21.0, 15.0], [66.0, 81.0], [55.0, 62.0]]) * 0.8
SCORES = np.array([1.3, -0.4, 0.9, -1.6, 0.2, 0.7])


def _model():
    return geosim.Nugget(0.1) + geosim.Exponential(0.9, geosim.Anisotropy((60.0, 30.0), azimuth=60.0))


@pytest.mark.parametrize("kriging", ["simple", "ordinary"])
@pytest.mark.parametrize("three_d", [False, True])
def test_every_member_is_the_kriging_draw_given_data_and_earlier_nodes(kriging, three_d):
    # Deterministic: with every datum and every earlier node in the neighbourhood, node p of
    # member b must equal mean + sd * normal_b[p] of kriging given the data and member b's
    # values at the nodes before it on the shared path.  Reference: numpy solves of the
    # simple-kriging system, or of the ordinary-kriging system bordered by the unbiasedness
    # row (Lagrange multiplier mu; variance C0 - w.c - mu); covariances from Model.cov_matrix.
    # Rounding only: tolerance 1e-9.
    if three_d:
        grid = geosim.Grid(10.0, 10.0, (15.0, 15.0, 5.0), (2, 2, 3), zmin=200.0)
        model = geosim.Nugget(0.1) + geosim.Spherical(0.9, geosim.Anisotropy((90.0, 50.0, 20.0), azimuth=30.0))
        xy = np.array([[14.0, 31.0, 201.0], [52.0, 22.0, 206.0], [33.0, 47.0, 203.5], [61.0, 9.0, 208.0]])
    else:
        grid = geosim.Grid(10.0, 10.0, (15.0, 15.0), (3, 4))
        model = _model()
        xy = np.array([[14.0, 31.0], [52.0, 22.0], [33.0, 47.0], [61.0, 9.0]])
    scores = np.array([1.2, -0.7, 0.4, -1.5])
    engine = SequentialEngine()
    plan = engine.prepare(xy, scores, model, grid, multigrid=0, kriging=kriging,
                          neighbourhood=Neighbourhood(max_samples=4, max_nodes=grid.n_active,
                                                      ranges=(1e3,) * grid.ndim))
    fields = engine.realize_batch(plan, path_rng(4, 0), [realization_rng(4, i) for i in range(3)])
    path = plan.free[random_path(plan.levels, path_rng(4, 0))]
    nodes = grid.coords()
    active = np.flatnonzero(grid.mask.ravel())
    for b, field in enumerate(fields):
        normals = realization_rng(4, b).standard_normal(path.shape[0])
        values = field.ravel()[active]
        pts, z = xy, scores
        for p, pos in enumerate(path):
            c = model.cov_matrix(pts, nodes[pos:pos + 1])[:, 0]
            cc = model.cov_matrix(pts)
            if kriging == "simple":
                w = np.linalg.solve(cc, c)
                mean, var = w @ z, model.sill - w @ c
            else:
                n = len(z)
                big = np.ones((n + 1, n + 1))
                big[:n, :n], big[n, n] = cc, 0.0
                sol = np.linalg.solve(big, np.append(c, 1.0))
                w, mu = sol[:n], sol[n]
                mean, var = w @ z, model.sill - w @ c - mu
            assert values[pos] == pytest.approx(mean + np.sqrt(max(var, 0.0)) * normals[p], abs=1e-9)
            pts, z = np.vstack([pts, nodes[pos]]), np.append(z, values[pos])


@pytest.mark.parametrize("kriging", ["simple", "ordinary"])
def test_members_equal_single_realizations_along_the_same_path(kriging):
    # With a limited neighbourhood (16 data, 12 nodes, multi-grid path), each member equals
    # what the one-realization code path (values bordering the factored system) gives for the
    # same path and normal deviates; only rounding differs (weights solved explicitly).
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0, 2.0), (4, 20, 24))
    model = geosim.Nugget(0.05) + geosim.Spherical(0.95, geosim.Anisotropy((60.0, 30.0, 8.0), azimuth=40.0))
    rng = np.random.default_rng(8)
    xyz = rng.uniform([0, 0, 0], [120, 100, 8], (40, 3))
    scores = rng.standard_normal(40)
    engine = SequentialEngine()
    plan = engine.prepare(xyz, scores, model, grid, kriging=kriging,
                          neighbourhood=Neighbourhood(max_samples=16, max_nodes=12))
    members = engine.realize_batch(plan, path_rng(2, 0), [realization_rng(2, i) for i in range(3)])
    path = plan.free[random_path(plan.levels, path_rng(2, 0))]
    for b, member in enumerate(members):
        single = engine._run(plan, path, [realization_rng(2, b)], single=True).reshape(grid.shape)
        np.testing.assert_allclose(member, single, rtol=0, atol=1e-9)


def _block_case(kriging="simple", correlation=0.0):
    """A 3-D block with 40 data, a nested model with a nugget and a spherical structure, and
    optionally a secondary variable (co-simulation)."""
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0, 2.0), (4, 18, 22))
    model = geosim.Nugget(0.05) + geosim.Spherical(0.95, geosim.Anisotropy((60.0, 30.0, 8.0), azimuth=40.0))
    rng = np.random.default_rng(8)
    xyz = rng.uniform([0, 0, 0], [110, 90, 8], (40, 3))
    secondary = rng.standard_normal(grid.shape) if correlation else None
    plan = SequentialEngine().prepare(xyz, rng.standard_normal(40), model, grid, kriging=kriging,
                                      neighbourhood=Neighbourhood(max_samples=16, max_nodes=12),
                                      secondary=secondary, correlation=correlation)
    return grid, plan


@pytest.mark.parametrize("kriging, correlation", [("simple", 0.0), ("ordinary", 0.0), ("simple", 0.6)])
def test_each_member_is_bit_identical_to_a_batch_of_itself_alone(kriging, correlation):
    # Exact: the kernel updates all members neighbour by neighbour, but each member must sum
    # its own terms in its own order and read only its own values, so member b of a batch of 5
    # equals, bit for bit, a batch holding that member alone along the same path.
    _, plan = _block_case(kriging, correlation)
    engine = SequentialEngine()
    members = engine.realize_batch(plan, path_rng(6, 0), [realization_rng(6, i) for i in range(5)])
    assert len(members) == 5
    for b in (0, 2, 4):
        (alone,) = engine.realize_batch(plan, path_rng(6, 0), [realization_rng(6, b)])
        np.testing.assert_array_equal(members[b], alone)
    assert not np.array_equal(members[0], members[1], equal_nan=True)


@pytest.mark.parametrize("batch", [True, False])
def test_drawing_the_deviates_a_chunk_at_a_time_changes_no_bit(monkeypatch, batch):
    # The deviates are drawn a chunk of the path at a time to bound memory; a numpy Generator's
    # standard_normal stream does not depend on how its draws are split, so chunks of 7 nodes
    # give the fields of one chunk, bit for bit, for a batch and for a single realization.
    from geosim.simulation import sequential
    grid, plan = _block_case()
    engine = SequentialEngine()
    assert plan.free.size > 7 * 10 and plan.free.size < sequential.PATH_CHUNK

    def run():
        if batch:
            return list(engine.realize_batch(plan, path_rng(3, 1), [realization_rng(3, i) for i in range(3)]))
        return [engine.realize(plan, realization_rng(3, 7))]
    whole = run()
    monkeypatch.setattr(sequential, "PATH_CHUNK", 7)
    for a, b in zip(whole, run(), strict=True):
        np.testing.assert_array_equal(a, b)
    assert whole[0].shape == grid.shape and np.isfinite(whole[0]).all()


@pytest.mark.parametrize("batch", [True, False])
def test_a_local_system_that_fails_names_the_same_node_whatever_the_chunks(monkeypatch, batch):
    # two data at one place make every system holding both singular; the first node on the path
    # that finds both is named, also when it lies in a later chunk of the path
    from geosim.simulation import sequential
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (14, 16))
    xy = np.array([[71.0, 9.0], [71.0, 9.0], [12.0, 60.0], [40.0, 35.0]])
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy.isotropic(30.0))])
    engine = SequentialEngine()
    plan = engine.prepare(xy, np.array([0.1, 0.2, -0.3, 0.5]), model, grid, sample_ids=["A", "B", "C", "D"],
                          neighbourhood=Neighbourhood(max_samples=2, max_nodes=4, ranges=(12.0, 12.0)))
    messages = []
    for chunk in (sequential.PATH_CHUNK, 5):
        monkeypatch.setattr(sequential, "PATH_CHUNK", chunk)
        with pytest.raises(geosim.NotPositiveDefiniteError, match="sample [AB].*sample [AB]") as err:
            if batch:
                engine.realize_batch(plan, path_rng(1, 0), [realization_rng(1, 0), realization_rng(1, 1)])
            else:
                engine.realize(plan, path_rng(1, 0))  # a single realization draws its path first
        messages.append(str(err.value))
    assert messages[0] == messages[1]
    # the failing node comes late enough on the path to lie beyond the first chunk of 5
    path = plan.free[random_path(plan.levels, path_rng(1, 0))]
    both = np.flatnonzero((plan.data_neighbours[path] >= 0).sum(axis=1) == 2)
    assert both.size and both[0] >= 5


def test_members_are_handed_over_as_separate_copies():
    # a member taken from a batch is its own C-ordered field, not a view of the batch's array,
    # so a sink may keep or change it and letting it go frees it
    grid, plan = _block_case()
    members = SequentialEngine().realize_batch(plan, path_rng(2, 0), [realization_rng(2, i) for i in range(3)])
    first, again = members[0], members[0]
    assert first.flags.c_contiguous and first.shape == grid.shape
    assert not np.shares_memory(first, again) and np.array_equal(first, again)
    first[0, 0, 0] = 99.0
    assert members[0][0, 0, 0] != 99.0
    assert [m.shape for m in members[1:]] == [grid.shape] * 2


def test_a_member_depends_only_on_the_seed_and_its_index():
    grid = geosim.Grid(0.0, 0.0, (8.0, 8.0), (12, 14))
    args = (XY, SCORES, _model(), grid)
    opts = dict(seed=21, neighbourhood=Neighbourhood(max_samples=6, max_nodes=12), realizations_per_path=4)
    full = geosim.simulate(*args, n_realizations=10, workers=1, **opts)
    alone = geosim.simulate(*args, n_realizations=10, workers=1, indices=[5], **opts)
    pair = geosim.simulate(*args, n_realizations=10, workers=1, indices=[4, 9], **opts)
    pool = geosim.simulate(*args, n_realizations=10, workers=2, **opts)
    assert np.array_equal(alone[0], full[5], equal_nan=True)
    assert np.array_equal(pair[0], full[4], equal_nan=True) and np.array_equal(pair[1], full[9], equal_nan=True)
    assert all(np.array_equal(a, b, equal_nan=True) for a, b in zip(pool, full))
    # members of a group share the path but not their values; other groups draw other paths
    assert not np.allclose(full[4], full[5])
    independent = geosim.simulate(*args, n_realizations=2, workers=1, **{**opts, "realizations_per_path": 1})
    assert not np.allclose(independent[0], full[0])


def test_engines_without_batches_are_refused():
    grid = geosim.Grid(0.0, 0.0, (8.0, 8.0), (4, 4))
    with pytest.raises(geosim.InputError, match="cannot share a path"):
        geosim.simulate(XY, SCORES, _model(), grid, n_realizations=4, seed=1, engine="exact",
                        realizations_per_path=2, workers=1)
    with pytest.raises(ValueError, match="realizations_per_path"):
        geosim.simulate(XY, SCORES, _model(), grid, n_realizations=4, seed=1, realizations_per_path=0, workers=1)


@pytest.mark.parametrize("per", [10, AUTO_PER_PATH])
def test_shared_path_ensemble_agrees_with_exact_engine(per):
    # node by node: ensemble mean and variance of 1200 realizations in groups of 10 and of
    # the "auto" size against the exact engine's simple-kriging moments (tolerances in the
    # module docstring)
    grid = geosim.Grid(0.0, 0.0, (8.0, 8.0), (8, 8))
    model = _model()
    exact = ExactEngine().prepare(XY, SCORES, model, grid)
    r = 1200
    fields = geosim.simulate(XY, SCORES, model, grid, n_realizations=r, seed=3, workers=1,
                             neighbourhood=Neighbourhood(max_samples=6, max_nodes=16), realizations_per_path=per)
    vals = np.array(fields).reshape(r, -1)
    assert np.all(np.abs(vals.mean(axis=0) - exact.mean) <= Z * np.sqrt(exact.variance / r))
    assert np.all(np.abs(vals.var(axis=0, ddof=1) / exact.variance - 1.0) <= Z * np.sqrt(2.0 / (r - 1)))


@pytest.mark.parametrize("per", [10, AUTO_PER_PATH])
def test_shared_path_ordinary_kriging_ensemble_agrees_with_independent_paths(per):
    # Ordinary kriging in a moving neighbourhood re-estimates the mean locally, so its
    # ensemble is not the exact engine's global one; the reference is the same engine with
    # a path per realization.  Two ensembles of 1200: standard errors of both add.
    grid = geosim.Grid(0.0, 0.0, (8.0, 8.0), (8, 8))
    r = 1200
    common = dict(n_realizations=r, workers=1, kriging="ordinary", neighbourhood=Neighbourhood(max_samples=6,
                                                                                               max_nodes=16))
    vals = np.array(geosim.simulate(XY, SCORES, _model(), grid, seed=3, realizations_per_path=per,
                                    **common)).reshape(r, -1)
    ref = np.array(geosim.simulate(XY, SCORES, _model(), grid, seed=4, **common)).reshape(r, -1)
    var = ref.var(axis=0, ddof=1)
    assert np.all(np.abs(vals.mean(axis=0) - ref.mean(axis=0)) <= Z * np.sqrt(2 * var / r))
    assert np.all(np.abs(np.log(vals.var(axis=0, ddof=1) / var)) <= Z * np.sqrt(4.0 / (r - 1)))


def _decision_figures(fields):
    """Domain mean and fraction of nodes above 0.5 (normal scores) of each realization."""
    vals = np.array(fields).reshape(len(fields), -1)
    return np.column_stack([vals.mean(axis=1), (vals > 0.5).mean(axis=1)])


@pytest.mark.parametrize("per", [10, AUTO_PER_PATH])
def test_sharing_a_path_does_not_shrink_the_spread_of_decision_figures(per):
    # Between-realization variance of two decision figures (domain mean, fraction above a
    # cut-off) with paths shared by 10 (and by the "auto" size) realizations against independent paths (same
    # neighbourhood): the ratio may not fall below 1 by more than Z standard deviations of
    # the log of a ratio of variances.  The members of a group must also be uncorrelated:
    # the correlation of their figures' deviations from the ensemble mean over all pairs
    # within groups stays within Z / sqrt(pairs) of 0 (a member-to-member copy of draws
    # would make it large).
    grid = geosim.Grid(0.0, 0.0, (4.0, 4.0), (16, 16))
    model = _model()
    nb = Neighbourhood(max_samples=6, max_nodes=12)
    r = 1000
    common = dict(n_realizations=r, workers=1, neighbourhood=nb)
    shared = _decision_figures(geosim.simulate(XY, SCORES, model, grid, seed=31, realizations_per_path=per,
                                               **common))
    single = _decision_figures(geosim.simulate(XY, SCORES, model, grid, seed=32, **common))
    log_ratio = np.log(shared.var(axis=0, ddof=1) / single.var(axis=0, ddof=1))
    assert np.all(log_ratio >= -Z * np.sqrt(4.0 / (r - 1))), log_ratio
    dev = (shared - shared.mean(axis=0)).reshape(r // per, per, 2)
    iu = np.triu_indices(per, 1)
    for f in range(2):
        d = dev[:, :, f]
        pairs = (d[:, :, None] * d[:, None, :])[:, iu[0], iu[1]]
        corr = pairs.mean() / d.var()
        assert abs(corr) <= Z / np.sqrt(pairs.size), (f, corr)


def test_run_spec_key_and_its_check(tmp_path):
    from geosim.config.runspec import load_spec
    (tmp_path / "wells.csv").write_text("well_id,x,y,k\nA,0,0,1\n")
    text = ('[data]\npoints = "wells.csv"\nx = "x"\ny = "y"\nvalue = "k"\ncrs = "EPSG:32633"\n'
            '[grid]\ncell = [10.0, 10.0]\n[simulation]\nrealizations = 5\nseed = 42\n')
    (tmp_path / "run.toml").write_text(text)
    spec = load_spec(tmp_path / "run.toml")
    assert spec["simulation.realizations_per_path"] == "auto"
    shared = load_spec(tmp_path / "run.toml", {"simulation.realizations_per_path": 10})
    assert shared["simulation.realizations_per_path"] == 10 and shared.sha256 != spec.sha256
    with pytest.raises(geosim.SpecError, match="realizations_per_path: expected 1 with the exact engine"):
        load_spec(tmp_path / "run.toml", {"simulation.realizations_per_path": 2, "simulation.engine": "exact"})
    with pytest.raises(geosim.SpecError, match="realizations_per_path"):
        load_spec(tmp_path / "run.toml", {"simulation.realizations_per_path": 0})


def test_auto_shares_paths_on_large_grids_only():
    # "auto" is 50 from AUTO_SHARED_NODES active nodes with an engine that shares paths, else 1
    from geosim.simulation.runner import AUTO_PER_PATH, AUTO_SHARED_NODES, per_path_for
    side = int(np.ceil(np.sqrt(AUTO_SHARED_NODES)))
    large = geosim.Grid(0.0, 0.0, (1.0, 1.0), (side, side))
    small = geosim.Grid(0.0, 0.0, (4.0, 4.0), (16, 16))
    assert per_path_for("auto", large, "sequential") == AUTO_PER_PATH == 50
    assert per_path_for("auto", large, "exact") == 1
    assert per_path_for("auto", small, "sequential") == 1
    assert per_path_for(4, small, "sequential") == 4


def test_auto_on_a_small_grid_gives_independent_paths():
    small = geosim.Grid(0.0, 0.0, (4.0, 4.0), (16, 16))
    nb = Neighbourhood(max_samples=6, max_nodes=12)
    # what simulate() uses for "auto": a small grid's run equals its run with independent paths
    auto = geosim.simulate(XY, SCORES, _model(), small, n_realizations=3, seed=5, workers=1, neighbourhood=nb,
                           realizations_per_path="auto")
    one = geosim.simulate(XY, SCORES, _model(), small, n_realizations=3, seed=5, workers=1, neighbourhood=nb)
    for a, b in zip(auto, one):
        np.testing.assert_array_equal(a, b)


def test_fewer_path_groups_than_workers_get_a_note_whose_setting_keeps_them_all_busy():
    # the note's suggestion, checked with the runner's own grouping over many cases: groups of the
    # suggested size are at least as many as the workers that can be busy (one realization each)
    from geosim.simulation.runner import _groups, idle_workers_note
    for n in range(1, 41):
        for per in range(2, 45):
            groups = len(_groups(list(range(n)), per))
            for workers in range(1, 18):
                note = idle_workers_note(n, per, groups, workers)
                busy = min(n, workers)
                assert (note is not None) == (groups < busy), (n, per, workers)
                if note:
                    suggested = int(note.split("realizations_per_path = ")[1].split()[0])
                    assert len(_groups(list(range(n)), suggested)) >= busy, note
    assert idle_workers_note(50, 1, 50, 2) is None  # independent paths: one group a realization


def test_a_run_with_idle_workers_says_so(caplog):
    # 4 realizations in one group of 4 on 2 workers: one works, and the run says what would use both
    grid = geosim.Grid(0.0, 0.0, (8.0, 8.0), (6, 7))
    opts = dict(n_realizations=4, seed=2, neighbourhood=Neighbourhood(max_samples=6, max_nodes=8))
    with caplog.at_level("WARNING", logger="geosim"):
        geosim.simulate(XY, SCORES, _model(), grid, realizations_per_path=4, workers=2, **opts)
    notes = [r.getMessage() for r in caplog.records if "workers idle" in r.getMessage()]
    assert notes and "1 group(s)" in notes[0] and "realizations_per_path = 2 would keep 2 busy" in notes[0]
    caplog.clear()
    with caplog.at_level("WARNING", logger="geosim"):
        geosim.simulate(XY, SCORES, _model(), grid, realizations_per_path=4, workers=1, **opts)
        geosim.simulate(XY, SCORES, _model(), grid, realizations_per_path=2, workers=1, **opts)
    assert not [r for r in caplog.records if "workers idle" in r.getMessage()]
