"""Runner: engine lookup, seeding, sinks, resumed runs, process pool and Dask give identical fields."""
import numpy as np
import pytest

import geosim
from geosim import plugins
from geosim.search import Neighbourhood
from geosim.simulation import ExactEngine, SequentialEngine, realization_rng, simulate

XY = np.array([[12.0, 71.0], [47.0, 44.0], [83.0, 18.0], [21.0, 15.0]])
SCORES = np.array([1.3, -0.4, 0.9, -1.6])
MODEL = geosim.Nugget(0.1) + geosim.Spherical(0.9, geosim.Anisotropy((50.0, 30.0), azimuth=45.0))
GRID = geosim.Grid(0.0, 0.0, (4.0, 4.0), (24, 25))
NB = Neighbourhood(max_samples=4, max_nodes=12)


class FieldDigest:
    """A picklable sink: returns a small record instead of the field."""

    def __call__(self, index, field):
        return index, float(np.nansum(field)), field.tobytes()


def _run(**kw):
    args = dict(n_realizations=4, seed=2024, neighbourhood=NB)
    args.update(kw)
    return simulate(XY, SCORES, MODEL, GRID, **args)


def test_engines_resolve_through_the_plugin_registry():
    assert plugins.get("engines", "sequential") is SequentialEngine
    assert plugins.get("engines", "exact") is ExactEngine
    with pytest.raises(geosim.InputError, match="available: .*exact.*sequential"):
        _run(engine="no-such-engine", workers=1)


def test_realization_stream_is_the_spawned_child():
    expected = np.random.default_rng(np.random.SeedSequence(2024).spawn(4)[3]).standard_normal(5)
    np.testing.assert_array_equal(realization_rng(2024, 3).standard_normal(5), expected)


def test_serial_run_is_reproducible_and_resumable():
    calls = []
    full = _run(workers=1, progress=lambda d, t, w: calls.append((d, t, w)))
    assert calls == [(1, 4, "realizations"), (2, 4, "realizations"), (3, 4, "realizations"),
                     (4, 4, "realizations")]
    assert len(full) == 4 and all(f.shape == GRID.shape for f in full)
    assert not np.array_equal(full[0], full[1])
    resumed = _run(workers=1, indices=[3, 1])
    np.testing.assert_array_equal(resumed[0], full[1])  # results come back in index order
    np.testing.assert_array_equal(resumed[1], full[3])
    with pytest.raises(ValueError, match="outside"):
        _run(workers=1, indices=[4])


def test_engine_object_and_options_pass_through():
    a = _run(engine=SequentialEngine(), workers=1, multigrid=0, n_realizations=2)
    b = _run(engine="sequential", workers=1, multigrid=0, n_realizations=2)
    np.testing.assert_array_equal(a[1], b[1])
    c = _run(engine="sequential", workers=1, multigrid=2, n_realizations=2)
    assert not np.array_equal(a[1], c[1])  # the option reached the engine


def test_process_pool_matches_serial_with_a_sink():
    serial = _run(workers=1, sink=FieldDigest())
    seen = []
    pooled = _run(workers=2, sink=FieldDigest(), progress=lambda d, t, w: seen.append(d))
    assert pooled == serial  # bit-identical fields (bytes), in index order
    assert [r[0] for r in pooled] == [0, 1, 2, 3] and seen == [1, 2, 3, 4]


@pytest.fixture(scope="module")
def dask_cluster():
    distributed = pytest.importorskip("dask.distributed")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                       dashboard_address=None)
    client = distributed.Client(cluster)
    yield cluster, client
    client.close()
    cluster.close()


@pytest.mark.parametrize("engine", ["sequential", "exact"])
def test_dask_cluster_matches_serial(dask_cluster, engine):
    cluster, client = dask_cluster
    serial = _run(engine=engine, workers=1)
    on_client = _run(engine=engine, client=client)
    on_address = _run(engine=engine, client=cluster.scheduler_address, sink=FieldDigest(), indices=[2, 0])
    for a, b in zip(serial, on_client):
        np.testing.assert_array_equal(a, b)
    assert [r[0] for r in on_address] == [0, 2]
    assert on_address[1][2] == serial[2].tobytes()


def test_worker_errors_reach_the_caller(dask_cluster):
    # the error is raised in a worker process and must arrive whole (pickled with its fields)
    xy = np.vstack([XY, XY[:1]])  # a duplicated sample: local systems cannot be factored
    with pytest.raises(geosim.NotPositiveDefiniteError, match="sample 5|sample 1"):
        simulate(xy, np.append(SCORES, 0.0), MODEL.structures[1] + geosim.Nugget(0.0), GRID, n_realizations=2,
                 seed=1, client=dask_cluster[1], neighbourhood=NB)


# Connects its own client to the test cluster and calls simulate on the same data over and
# over, as a notebook session does. Run in a child process so that a hang fails the test
# (timeout) instead of stalling the suite.
_BACK_TO_BACK = """
import sys
import numpy as np
from dask.distributed import Client
sys.path.insert(0, {tests!r})
from test_simulation_runner import _run
with Client({address!r}) as client:
    first = _run(client=client, n_realizations=2)
    for _ in range(10):
        again = _run(client=client, n_realizations=2)
        assert all(np.array_equal(a, b) for a, b in zip(first, again))
print("ok")
"""


def test_repeated_calls_on_one_client_neither_hang_nor_lose_the_shared_data(dask_cluster):
    # Before each call scattered its data under a fresh key, a call could ask for the key
    # an earlier call of the same data was still releasing: the tasks waited forever or
    # were cancelled with "lost dependencies" (seen within two calls in a loop of ten).
    import os
    import subprocess
    import sys
    script = _BACK_TO_BACK.format(tests=os.path.dirname(__file__), address=dask_cluster[0].scheduler_address)
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip().endswith("ok")


class _CountingEngine:
    """Counts its realizations; each is a constant field."""

    def __init__(self):
        self.realized = []

    def realize(self, prepared, rng):
        self.realized.append(rng)
        return np.zeros((2, 3))


def test_a_task_whose_run_has_ended_computes_and_writes_nothing_further(tmp_path):
    import threading

    from geosim.errors import RunAbandoned
    from geosim.io.atomic import atomic_output, writes_wanted_while
    from geosim.simulation.runner import run_group

    engine, handed = _CountingEngine(), []
    sink = lambda i, field: handed.append(i) or i  # noqa: E731
    # wanted at first, not after the first realization: the second is neither handed over nor computed
    answers = iter([True, True, False])
    with pytest.raises(RunAbandoned, match="realization 1"):
        run_group(engine, None, sink, 5, [0, 1, 2], 1, wanted=lambda: next(answers))
    assert handed == [0] and len(engine.realized) == 1
    # computed, then found unwanted: not handed to the sink
    answers = iter([True, False])
    with pytest.raises(RunAbandoned):
        run_group(engine, None, sink, 5, [3], 1, wanted=lambda: next(answers))
    assert handed == [0] and len(engine.realized) == 2

    # an atomic write under a failed condition leaves nothing; the condition is this thread's only
    alive = True

    def write_other():
        with atomic_output(tmp_path / "other.txt") as tmp:
            tmp.write_text("another run's file")

    with writes_wanted_while(lambda: alive):
        with pytest.raises(RunAbandoned, match="late.txt"):
            with atomic_output(tmp_path / "late.txt") as tmp:
                tmp.write_text("done")
                alive = False  # the run ends while the file is written
        other = threading.Thread(target=write_other)
        other.start()
        other.join(timeout=30)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["other.txt"]
    with atomic_output(tmp_path / "after.txt") as tmp:  # outside the block: no condition
        tmp.write_text("written")
    assert (tmp_path / "after.txt").read_text() == "written"
