"""Compiling the engine ahead, in another process (``geosim.simulation.runner.compile_ahead``).

Each check runs in a fresh interpreter with its own empty numba cache folder, because the
test session's cache already holds the kernels once any earlier test has simulated.
"""
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

AQUIFER = Path(__file__).resolve().parents[1] / "sample_fields" / "alluvial_aquifer" / "run.toml"

SIMULATE = textwrap.dedent("""
    import numpy as np, geosim
    from geosim.simulation.sequential import sgs_kernel
    grid = geosim.Grid(100.0, 200.0, (5.0, 5.0, 2.0), (3, 10, 12))
    model = geosim.Nugget(0.05) + geosim.Exponential(0.95, geosim.Anisotropy((40.0, 20.0, 6.0), azimuth=30.0))
    xyz, scores = np.array([[112.0, 222.0, 1.0], [140.0, 230.0, 3.0]]), np.array([0.5, -1.0])
    nb = geosim.search.Neighbourhood(max_samples=8, max_nodes=8)
    geosim.simulate(xyz, scores, model, grid, n_realizations=1, seed=4, workers=1, neighbourhood=nb)
    geosim.simulate(xyz, scores, model, grid, n_realizations=3, seed=4, workers=1, neighbourhood=nb,
                    kriging="ordinary", realizations_per_path=3)
    geosim.simulate(xyz, scores, model, grid, n_realizations=1, seed=4, workers=1, neighbourhood=nb,
                    secondary=np.linspace(-1.0, 1.0, grid.mask.size).reshape(grid.shape), correlation=0.5)
    for k in (sgs_kernel(True, False, False), sgs_kernel(False, True, False), sgs_kernel(True, False, True)):
        print(sum(k.stats.cache_hits.values()), sum(k.stats.cache_misses.values()))
""")

# the variants the fixture compiles ahead: a single path with simple kriging (the defaults), paths
# shared by realizations with ordinary kriging, and a single path with a collocated secondary
VARIANTS = ({}, {"kriging": "ordinary", "shared_path": True}, {"secondary": True})


def _python(code: str, cache: str, timeout: float = 600) -> str:
    env = {**os.environ, "NUMBA_CACHE_DIR": cache}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=timeout)
    assert out.returncode == 0, out.stderr[-3000:]
    return out.stdout


@pytest.fixture(scope="module")
def compiled_ahead(tmp_path_factory):
    """A numba cache folder filled by compile_ahead (started and waited for in a fresh process)."""
    cache = str(tmp_path_factory.mktemp("numba-ahead"))
    out = _python(textwrap.dedent(f"""
        from geosim.simulation.runner import compile_ahead
        for needs in {VARIANTS!r}:
            proc = compile_ahead("sequential", needs)
            print(proc is not None, proc.wait(timeout=540))
    """), cache)
    return cache, out.split()


def test_compile_ahead_fills_the_cache_once_with_the_variants_asked_for(compiled_ahead):
    cache, started = compiled_ahead
    assert started == ["True", "0"] * 3
    # those variants are cached now (a second call starts nothing), and no other: the kernel of
    # options no run asked for (ordinary kriging on a single path, a shared path with simple
    # kriging, a secondary on a shared path) was not compiled
    out = _python(textwrap.dedent(f"""
        from geosim.simulation.runner import compile_ahead, in_numba_cache
        from geosim.simulation.sequential import sgs_kernel
        print(*[compile_ahead("sequential", needs) for needs in {VARIANTS!r}])
        print(*[in_numba_cache(sgs_kernel(*v)) for v in [(True, False, False), (False, True, False),
                                                       (True, False, True), (True, True, False),
                                                       (False, False, False), (False, False, True)]])
    """), cache)
    assert [line.split() for line in out.splitlines()] == [["None"] * 3, ["True"] * 3 + ["False"] * 3]


def test_compile_ahead_takes_several_variants_at_once(tmp_path):
    # a run of several units hands over each variant its units use: one process compiles them in
    # turn, a variant asked for twice once, and a variant already cached not again
    out = _python(textwrap.dedent("""
        from geosim.simulation.runner import compile_ahead, in_numba_cache
        from geosim.simulation.sequential import sgs_kernel
        proc = compile_ahead("sequential", [{"secondary": True}, {}, {"secondary": True}])
        print(proc.wait(timeout=540), in_numba_cache(sgs_kernel(True, False, False)),
              in_numba_cache(sgs_kernel(True, False, True)), in_numba_cache(sgs_kernel(True, True, False)))
        print(compile_ahead("sequential", [{}, {"secondary": True}]))
        print(sum(sgs_kernel(True, False, True).stats.cache_misses.values()))
    """), str(tmp_path / "cache"))
    assert [line.split() for line in out.splitlines()] == [["0", "True", "True", "False"], ["None"], ["0"]]


def test_runs_load_the_kernels_compiled_ahead(compiled_ahead):
    # 3-D runs with a single path and simple kriging, with a shared path and ordinary kriging, and with
    # a secondary, on another grid and model than the warm-up's: every call of each variant is a cache
    # hit, none compiles
    cache, _ = compiled_ahead
    for line in _python(SIMULATE, cache).splitlines():
        hits, misses = map(int, line.split())
        assert hits >= 1 and misses == 0


def test_compiling_process_ends_with_the_main_process(tmp_path):
    # the main process is SIGKILLed while its compile_ahead process is still compiling
    script = textwrap.dedent("""
        import sys, time
        from geosim.simulation.runner import compile_ahead
        print(compile_ahead("sequential").pid, flush=True)
        time.sleep(600)
    """)
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache")}
    main = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True, env=env)
    try:
        pid = int(main.stdout.readline())
    finally:
        main.send_signal(signal.SIGKILL)
        main.wait(timeout=30)
    deadline = time.monotonic() + 5.0
    while time.monotonic() < deadline and _running(pid):
        time.sleep(0.1)
    assert not _running(pid), "the compiling process outlived the main process by more than 5 s"


def _running(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().rsplit(")", 1)[1].split()[0] != "Z"  # a zombie has ended
    except FileNotFoundError:
        return False


def test_kriging_moment_and_summary_kernels_compiled_ahead_are_loaded_by_a_run(tmp_path):
    # compile_modules_ahead's process fills the cache with the simple kriging kernel and the moments'
    # (tiny warm-up runs), compile_ahead's with the summary kernel after the engine's; kriging,
    # cross-validation, data-unit moments and summaries on other data then load them: cache hits, no
    # misses (a warm-up with other argument types would miss)
    cache = str(tmp_path / "cache")
    started = _python(textwrap.dedent("""
        from geosim.kriging import kernel_of
        from geosim.moments import _kernel
        from geosim.simulation.runner import _AHEAD, await_compiled, compile_ahead, compile_modules_ahead
        from geosim.summaries import _node_bands
        targets = [("geosim.kriging", kernel_of("simple"), {"methods": ("simple",)}), ("geosim.moments", _kernel, {})]
        proc = compile_modules_ahead("modules", targets)
        engine = compile_ahead("sequential", after=[("geosim.summaries", _node_bands)])
        await_compiled("modules", timeout=540)
        await_compiled("engine", timeout=540)
        print(proc is not None, proc.returncode, engine.returncode, "modules" in _AHEAD,
              compile_modules_ahead("modules", targets), compile_ahead("sequential", after=[("geosim.summaries", _node_bands)]))
    """), cache)
    assert started.split() == ["True", "0", "0", "False", "None", "None"]
    out = _python(textwrap.dedent("""
        import numpy as np, geosim, geosim.kriging
        from geosim.kriging import kernel_of
        from geosim.moments import _kernel
        from geosim.summaries import _node_bands
        from geosim.transforms import NormalScoreTransform
        rng = np.random.default_rng(3)
        xyz, z = rng.uniform(0, 500, (40, 3)), rng.standard_normal(40)
        model = geosim.Nugget(0.2) + geosim.Exponential(0.8, geosim.Anisotropy((300.0, 150.0, 40.0), azimuth=20.0))
        nb = geosim.search.Neighbourhood(max_samples=10)
        geosim.kriging.krige(xyz, z, xyz[:5] + 3.0, model, method="simple", neighbourhood=nb)
        cv = geosim.kriging.cross_validate(xyz, z, model, method="simple", neighbourhood=nb)
        t = NormalScoreTransform().fit(np.exp(z))
        geosim.moments.NUMPY_MOMENTS_MAX = -1  # as in a large run: 40 nodes would take numpy's moments
        cv.in_data_units(t, np.exp(z))
        # float32, as a run's files and realization store hold them; cached, so the compiled pass
        geosim.summaries.summary_bands(rng.standard_normal((7, 3, 4)).astype(np.float32), [0.1, 0.2])
        d = [kernel_of("simple"), _kernel, _node_bands]
        print(*[sum(f.stats.cache_hits.values()) for f in d], *[sum(f.stats.cache_misses.values()) for f in d])
    """), cache)
    assert [int(n) >= 1 for n in out.split()[:3]] == [True] * 3 and out.split()[3:] == ["0"] * 3


def test_a_step_waits_for_its_own_kernel_only(tmp_path):
    # await_compiled with a kernel returns once that kernel is in the cache, while the process
    # may still compile the kernels of later steps (it stays registered until it has ended);
    # without one it waits for the end
    out = _python(textwrap.dedent("""
        from geosim.kriging import kernel_of
        from geosim.moments import _kernel
        from geosim.simulation.runner import _AHEAD, await_compiled, compile_modules_ahead, in_numba_cache
        proc = compile_modules_ahead("modules", [("geosim.kriging", kernel_of("simple"), {"methods": ("simple",)}),
                                                 ("geosim.moments", _kernel, {})])
        await_compiled("modules", kernel_of("simple"), timeout=540)
        running = proc.poll() is None
        print(in_numba_cache(kernel_of("simple")), running, "modules" in _AHEAD, in_numba_cache(_kernel))
        await_compiled("modules", timeout=540)
        print(proc.returncode, "modules" in _AHEAD, in_numba_cache(_kernel), in_numba_cache(kernel_of("ordinary")))
    """), str(tmp_path / "cache"))
    first, last = [line.split() for line in out.splitlines()]
    assert first[0] == "True"
    # the moments' kernel takes about a second of CPU after the kriging kernel: still running
    # then, unless this process was starved for that long (only the registration is checked then)
    assert first[2] == "True" if first[1] == "True" else first[3] == "True"
    # and the kriging method no run asked for was not compiled
    assert last == ["0", "False", "True", "False"]


def test_the_process_waiting_for_more_takes_the_engine_once_the_grid_is_known(tmp_path):
    # a run starts the moments' kernel compiling in a process that then waits for more; compile_ahead
    # hands that same process the engine's kernel (its stdin), and the process ends after it; with
    # nothing handed over (a run that failed before its grid), end_ahead ends it after the moments
    out = _python(textwrap.dedent("""
        from geosim.moments import _kernel
        from geosim.simulation.runner import compile_ahead, compile_modules_ahead, end_ahead, in_numba_cache
        from geosim.simulation.sequential import sgs_kernel
        proc = compile_modules_ahead("engine", [("geosim.moments", _kernel, {})], more=True)
        same = compile_ahead("sequential", {"shared_path": True})
        print(same is proc, proc.wait(timeout=540), in_numba_cache(_kernel), in_numba_cache(sgs_kernel(False, False, False)))
    """), str(tmp_path / "cache"))
    assert out.split() == ["True", "0", "True", "True"]
    out = _python(textwrap.dedent("""
        import time
        from geosim.moments import _kernel
        from geosim.simulation.runner import compile_modules_ahead, end_ahead
        proc = compile_modules_ahead("engine", [("geosim.moments", _kernel, {})], more=True)
        time.sleep(0.5)
        end_ahead("engine")
        print(proc.wait(timeout=540))
    """), str(tmp_path / "cache2"))
    assert out.split() == ["0"]


def test_the_runner_waits_for_the_variant_of_its_own_run(tmp_path):
    # a stand-in compiling process that never ends is registered under "engine"; the variant of each
    # run below is in the cache already, so the runner's wait must end at once: a wait for another
    # variant (ordinary kriging, shared paths or a secondary taken wrongly) would last until its timeout
    out = _python(textwrap.dedent("""
        import subprocess, sys, time
        import numpy as np, geosim
        from geosim.simulation import runner
        grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (12, 14))
        model = geosim.Spherical(1.0, geosim.Anisotropy((40.0, 25.0)))
        xy, z, sec = np.array([[32.0, 41.0]]), np.array([0.7]), np.zeros(grid.shape)
        runs = [dict(kriging="ordinary", realizations_per_path=2), dict(secondary=sec, correlation=0.5),
                dict(realizations_per_path=2, secondary=sec, correlation=0.5)]
        for run in runs:  # compile (into the cache) each run's variant
            geosim.simulate(xy, z, model, grid, n_realizations=2, seed=1, workers=1, **run)
        stand_in = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(600)"])
        try:
            for run in runs:
                runner._AHEAD["engine"] = stand_in
                t0 = time.monotonic()
                runner.simulate(xy, z, model, grid, n_realizations=2, seed=1, workers=1, **run)
                print(time.monotonic() - t0 < 30.0)
        finally:
            stand_in.kill()
    """), str(tmp_path / "cache"), timeout=900)
    assert out.split() == ["True"] * 3


WORKER_SINK = textwrap.dedent("""
    from geosim.simulation.sequential import sgs_kernel

    def kernel_misses(index, field):
        # runs in the worker: how often this process compiled the kernel instead of loading it
        return sum(sgs_kernel(True, False, False).stats.cache_misses.values())
""")


def test_workers_load_the_kernel_being_compiled_ahead_instead_of_compiling_it(tmp_path):
    # a first run on two local workers: the runner waits for compile_ahead's kernel before it
    # starts them, so no worker compiles it (a worker that did would count a cache miss), and the
    # main process neither
    (tmp_path / "worker_sink.py").write_text(WORKER_SINK)
    script = textwrap.dedent("""
        import numpy as np, geosim
        from geosim.simulation.runner import compile_ahead
        from geosim.simulation.sequential import sgs_kernel
        from worker_sink import kernel_misses
        assert compile_ahead("sequential") is not None
        grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (20, 24))
        model = geosim.Nugget(0.1) + geosim.Spherical(0.9, geosim.Anisotropy((40.0, 25.0), azimuth=30.0))
        misses = geosim.simulate(np.array([[32.0, 41.0]]), np.array([0.7]), model, grid, n_realizations=4,
                                 seed=9, workers=2, sink=kernel_misses,
                                 neighbourhood=geosim.search.Neighbourhood(max_samples=8, max_nodes=8))
        print(*misses, sum(sgs_kernel(True, False, False).stats.cache_misses.values()))
    """)
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache"), "PYTHONPATH": str(tmp_path)}
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, env=env, timeout=600,
                         cwd=tmp_path)
    assert out.returncode == 0, out.stderr[-3000:]
    assert out.stdout.split() == ["0"] * 5


def test_variograms_of_small_data_sets_compile_no_pair_loop(tmp_path):
    # a variogram of a few hundred samples takes numpy's pair loop: nothing is compiled or loaded, so
    # a first run's variogram step waits for no compiler; a data set with more pairs than
    # NUMPY_PAIRS_MAX compiles the kernel in the calling process
    out = _python(textwrap.dedent("""
        import numpy as np
        from geosim.variogram import pairs
        from geosim.variogram.experimental import downhole_variogram, experimental_variogram
        rng = np.random.default_rng(4)
        xyz = rng.uniform(0.0, 200.0, (300, 3))
        experimental_variogram(xyz[:, :2], rng.standard_normal(300), lag=20.0, nlags=6)
        downhole_variogram(xyz, rng.standard_normal(300), np.repeat(np.arange(30), 10), lag=20.0, nlags=6,
                           estimator="cressie-hawkins")
        print(len(pairs.accumulate_directional.signatures))
        n = 800
        assert n * (n - 1) // 2 > pairs.NUMPY_PAIRS_MAX
        experimental_variogram(rng.uniform(0.0, 2000.0, (n, 2)), rng.standard_normal(n), lag=50.0, nlags=6)
        print(len(pairs.accumulate_directional.signatures), sum(pairs.accumulate_directional.stats.cache_misses.values()))
    """), str(tmp_path / "cache"))
    assert [line.split() for line in out.splitlines()] == [["0"], ["1", "1"]]


FIRST_RUN = textwrap.dedent("""
    import sys
    import geosim.pipeline
    from geosim.config.runspec import load_spec
    from geosim.kriging import kernel_of
    from geosim.linalg import chol_partial
    from geosim.moments import _kernel
    from geosim.search import _select_rows
    from geosim.simulation.sequential import sgs_kernel
    from geosim.summaries import _node_bands
    from geosim.variogram.compiled import cov_matrix_into
    from geosim.variogram.pairs import accumulate_directional
    spec = load_spec(sys.argv[1], {"simulation.realizations": 2, "grid.cell": [100.0, 100.0],
                                   "simulation.workers": 1, "outputs.plots": False})
    assert spec["variogram.fit"] and spec["outputs.cross_validation"] and spec["outputs.estimate"]
    geosim.pipeline.run(spec, sys.argv[2])
    for name, d in [("pairs", accumulate_directional), ("kriging", kernel_of("simple")), ("moments", _kernel),
                    ("engine", sgs_kernel(True, False, False)), ("search", _select_rows), ("covariance", cov_matrix_into),
                    ("bands", _node_bands)]:
        print(name, sum(d.stats.cache_hits.values()), sum(d.stats.cache_misses.values()))
    print("entries", *[len(d._cache._cache_file._load_index()) for d in (
        chol_partial, _select_rows, cov_matrix_into, sgs_kernel(True, False, False), kernel_of("simple"))])
    print("other", *[k.__name__ for k in (kernel_of("ordinary"), sgs_kernel(False, False, False),
                                          sgs_kernel(True, True, False)) if k.signatures])
""")


def test_the_main_process_of_a_first_run_compiles_none_of_the_kernels_compiled_ahead(tmp_path):
    # a first run (empty cache) with a variogram fit, cross-validation, an estimate, a simulation
    # in this process and summaries: each step that needs a kernel compiled ahead (kriging; the
    # engine's covariance, search and main kernel) waits for it and loads it, where compiling it itself would
    # count a cache miss.  Its 80 wells take numpy's pair loop and numpy's data-unit moments (the
    # estimate's too), and its summaries numpy's pass, so none of those kernels is compiled or
    # loaded, and no other variant is touched
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache")}
    out = subprocess.run([sys.executable, "-c", FIRST_RUN, str(AQUIFER), str(tmp_path / "run")], capture_output=True,
                         text=True, env=env, timeout=600, cwd=tmp_path)
    assert out.returncode == 0, out.stderr[-3000:]
    lines = out.stdout.splitlines()
    counts = {name: (int(hits), int(misses)) for name, hits, misses in map(str.split, lines[:-2])}
    assert lines[-1].split() == ["other"]
    # one cached specialization each: every process that compiled the shared pieces (the factorization,
    # the search, the covariance loop) gave them the argument types the others then loaded
    assert lines[-2].split() == ["entries"] + ["1"] * 5
    assert counts.pop("bands") == (0, 0) and counts.pop("pairs") == (0, 0)
    assert counts.pop("moments") == (0, 0)
    assert counts == {name: (counts[name][0], 0) for name in ("kriging", "engine", "search", "covariance")}
    assert all(hits >= 1 for hits, _ in counts.values())
    assert not list((tmp_path / "cache").rglob("*_node_bands*"))
    assert not list((tmp_path / "cache").rglob("*accumulate_directional*"))
    assert not list((tmp_path / "cache").rglob("moments*"))


def test_pieces_compiled_apart_are_the_ones_the_kernels_and_runs_load(tmp_path):
    # a first run's engine process compiles the factorization before anything else, then the main
    # kernel alone; the kriging process compiles what prepares the engine's run (the data search and
    # the covariance kernel) after the kriging kernel (geosim.pipeline.run_job).  Each warm-up must
    # compile the code its users load, each here in a process of its own: the kriging kernel compiled
    # after linalg.warm_up loads the factorization, the engine's own warm-up compiles neither the
    # search nor the covariance kernel, and a simulation with data and node neighbours after the
    # search's and covariance's warm-ups loads both
    cache = str(tmp_path / "cache")
    _python("from geosim import linalg; linalg.warm_up()", cache)
    out = _python(textwrap.dedent("""
        import geosim.kriging
        from geosim import search
        from geosim.linalg import chol_partial
        from geosim.simulation import sequential
        geosim.kriging.warm_up(("simple",))
        search.warm_up()
        sequential.warm_up()
        print(sum(chol_partial.stats.cache_hits.values()), sum(chol_partial.stats.cache_misses.values()))
    """), cache)
    assert out.split() == ["1", "0"]
    out = _python(textwrap.dedent("""
        import numpy as np, geosim
        from geosim.search import _select_rows
        from geosim.simulation.sequential import SequentialEngine, sgs_kernel
        from geosim.variogram.compiled import cov_matrix_into
        SequentialEngine().warm_up()
        print(len(sgs_kernel(True, False, False).signatures), len(_select_rows.signatures),
              len(cov_matrix_into.signatures))
        grid = geosim.Grid(100.0, 200.0, (5.0, 5.0), (10, 12))
        model = geosim.Nugget(0.05) + geosim.Exponential(0.95, geosim.Anisotropy((40.0, 20.0), azimuth=30.0))
        geosim.simulate(np.array([[112.0, 222.0], [140.0, 230.0]]), np.array([0.5, -1.0]), model, grid,
                        n_realizations=1, seed=4, workers=1)
        for k in (_select_rows, cov_matrix_into):
            print(sum(k.stats.cache_hits.values()), sum(k.stats.cache_misses.values()))
    """), cache)
    assert [line.split() for line in out.splitlines()] == [["1", "0", "0"], ["1", "0"], ["1", "0"]]


def test_a_kernel_counts_as_cached_only_once_its_code_is_written(tmp_path):
    # numba saves a new entry's index before its data file: a step that took the index alone for the
    # kernel would load in between, miss and compile it itself.  With the data file not (yet) there
    # the kernel is not cached; once it is, it is, and the code loads (a hit, no miss)
    out = _python(textwrap.dedent("""
        import os, subprocess, sys
        import numpy as np
        from geosim.linalg import forward_inplace
        from geosim.simulation.runner import in_numba_cache
        print(in_numba_cache(forward_inplace))
        subprocess.run([sys.executable, "-c", "import numpy as np; from geosim.linalg import forward_inplace; "
                        "forward_inplace(np.eye(2), 2, np.ones(2))"], check=True)
        cache = forward_inplace._cache._cache_file
        names = list(cache._load_index().values())
        print(in_numba_cache(forward_inplace), len(names))
        hidden = [cache._data_path(n) for n in names]
        for path in hidden:
            os.rename(path, path + ".later")
        print(in_numba_cache(forward_inplace))
        for path in hidden:
            os.rename(path + ".later", path)
        print(in_numba_cache(forward_inplace))
        forward_inplace(np.eye(3), 3, np.ones(3))
        print(sum(forward_inplace.stats.cache_hits.values()), sum(forward_inplace.stats.cache_misses.values()))
    """), str(tmp_path / "cache"))
    assert [line.split() for line in out.splitlines()] == [["False"], ["True", "1"], ["False"], ["True"], ["1", "0"]]


def test_an_index_left_by_other_source_does_not_count_as_cached(tmp_path):
    # numba keys an index on its source file's stamp and ignores one from another version of it:
    # a kernel whose index was written from other source must be compiled ahead again
    out = _python(textwrap.dedent("""
        import numpy as np
        from geosim.linalg import forward_inplace
        from geosim.simulation.runner import in_numba_cache
        forward_inplace(np.eye(2), 2, np.ones(2))
        cache = forward_inplace._cache._cache_file
        print(in_numba_cache(forward_inplace))
        overloads, stamp = cache._load_index(), cache._source_stamp
        cache._source_stamp = (0.0, 0)  # as if saved by an older geosim
        cache._save_index(overloads)
        cache._source_stamp = stamp
        print(in_numba_cache(forward_inplace))
    """), str(tmp_path / "cache"))
    assert out.split() == ["True", "False"]


def test_compiling_processes_are_forks_unless_another_thread_runs(tmp_path):
    # a fork of this process starts compiling at once (a fresh interpreter first spends about a
    # second importing); beside another Python thread, or with GEOSIM_COMPILE_FORK=0, a fresh
    # interpreter is started instead.  Each way the kernel lands in the cache
    out = _python(textwrap.dedent("""
        import os, threading
        from geosim.kriging import kernel_of
        from geosim.moments import _kernel
        from geosim.simulation import runner

        def command_line(pid):
            with open(f"/proc/{pid}/cmdline", "rb") as f:
                return f.read()

        own = command_line(os.getpid())
        procs = [runner.compile_modules_ahead("one", [("geosim.moments", _kernel, {})])]
        stop = threading.Event()
        other = threading.Thread(target=stop.wait)
        other.start()
        procs.append(runner.compile_modules_ahead("two", [("geosim.kriging", kernel_of("simple"), {"methods": ("simple",)})]))
        stop.set()
        other.join()
        os.environ["GEOSIM_COMPILE_FORK"] = "0"
        procs.append(runner.compile_modules_ahead("three", [("geosim.kriging", kernel_of("ordinary"),
                                                              {"methods": ("ordinary",)})]))
        print(*[command_line(p.pid) == own for p in procs])
        print(*[p.wait(timeout=540) for p in procs])
        print(*[runner.in_numba_cache(k) for k in (_kernel, kernel_of("simple"), kernel_of("ordinary"))])
    """), str(tmp_path / "cache"))
    assert [line.split() for line in out.splitlines()] == [["True", "False", "False"], ["0"] * 3, ["True"] * 3]


def test_a_forked_compiling_process_holds_no_other_ones_stdin(tmp_path):
    # the process that waits for more ends once its stdin is closed; one forked after it must not
    # keep a copy of that pipe open, or the first would wait for more as long as the second lives
    out = _python(textwrap.dedent("""
        import os, time
        from geosim.kriging import kernel_of
        from geosim.moments import _kernel
        from geosim.simulation import runner
        waiting = runner.compile_modules_ahead("engine", [("geosim.moments", _kernel, {})], more=True)
        later = runner.compile_modules_ahead("modules", [("geosim.kriging", kernel_of("simple"), {"methods": ("simple",)})])
        pipe = f"pipe:[{os.fstat(waiting.stdin.fileno()).st_ino}]"

        def held():  # whether the later process holds the pipe; a fork lets go of it at once
            try:
                fds = [os.readlink(f"/proc/{later.pid}/fd/{fd}") for fd in os.listdir(f"/proc/{later.pid}/fd")]
            except OSError:
                fds = []
            # one that ends (it lists no fds, not even its /dev/null stdin) was not seen without the pipe
            return pipe in fds or not fds or later.poll() is not None

        deadline = time.monotonic() + 20.0
        while held() and time.monotonic() < deadline:
            time.sleep(0.01)
        print(held(), later.poll() is None)
        runner.end_ahead("engine")
        print(waiting.wait(timeout=540), later.wait(timeout=540))
    """), str(tmp_path / "cache"))
    assert [line.split() for line in out.splitlines()] == [["False", "True"], ["0", "0"]]


def test_a_fork_after_a_finished_handover_still_compiles(tmp_path):
    # a process that ran twice (two runs in one session) keeps the first run's compiling processes
    # registered, their stdin closed; a later fork must pass over those and compile its own kernel
    out = _python(textwrap.dedent("""
        from geosim.kriging import kernel_of
        from geosim.moments import _kernel
        from geosim.simulation import runner
        waiting = runner.compile_modules_ahead("engine", [("geosim.moments", _kernel, {})], more=True)
        runner.end_ahead("engine")
        print(waiting.wait(timeout=540), waiting.stdin.closed, "engine" in runner._AHEAD)
        later = runner.compile_modules_ahead("modules", [("geosim.kriging", kernel_of("simple"), {"methods": ("simple",)})])
        print(later.wait(timeout=540), runner.in_numba_cache(kernel_of("simple")))
    """), str(tmp_path / "cache"))
    assert [line.split() for line in out.splitlines()] == [["0", "True", "True"], ["0", "True"]]
