"""The local pool's server imports, once, what the processes it forks need
(``geosim.simulation.runner.pool_context``, ``RealizationWriter.pool_modules``).

Each run-level check runs in a fresh interpreter: the pool's server is one per process, and
an earlier test of the session may have started it with other modules.
"""
import os
import subprocess
import sys
import textwrap

import geosim
from geosim.ensemble import RealizationWriter
from geosim.runstate import RecordingSink

# a module that notes which process imports it, and whether numba's compiler is set up there
# already (its built-in implementations installed), and a sink that names it to the pool's server
PROBE = textwrap.dedent("""
    import os
    from numba.core.imputils import builtin_registry
    from numba.core.registry import cpu_target
    ready = builtin_registry in cpu_target.target_context._registries
    with open(os.environ["PROBE_LOG"], "a") as f:
        f.write(f"{os.getpid()} {ready}\\n")
""")
PROBE_SINK = textwrap.dedent("""
    import os

    class ProbeSink:
        def pool_modules(self):
            return ["pool_probe"]

        def __call__(self, index, field):
            import pool_probe  # already imported in a process forked from the server: no new line
            return os.getpid()
""")


def test_a_writer_names_its_store_and_cube_libraries_and_the_recording_sink_passes_them_on(tmp_path):
    grid = geosim.Grid(0.0, 0.0, (5.0, 5.0, 2.0), (2, 3, 4))
    cubes = RealizationWriter(tmp_path / "a", grid, cube="netcdf")
    plain = RealizationWriter(tmp_path / "b", geosim.Grid(0.0, 0.0, (5.0, 5.0), (3, 4)))
    assert cubes.pool_modules() == ["geosim.ensemble", "zarr", "dask.array", "xarray", "netCDF4"]
    assert RealizationWriter(tmp_path / "c", grid, cube="zarr").pool_modules()[-1] == "xarray"
    assert plain.pool_modules() == ["geosim.ensemble"]
    assert RecordingSink(cubes, tmp_path / "state", "key", 1).pool_modules() == cubes.pool_modules()


def test_the_pool_server_imports_what_the_sink_names_once_for_every_worker(tmp_path):
    # a run on two local workers: the server, started before the engine prepares, imports the
    # sink's module once; the workers forked from it find it imported (one line in the log, from the
    # server's pid), and it takes the geosim modules of the engine and the sink besides.  The
    # server has set numba's compiler up before (pool_server, imported ahead of the sink's module),
    # so the workers forked from it do not do it each
    (tmp_path / "pool_probe.py").write_text(PROBE)
    (tmp_path / "probe_sink.py").write_text(PROBE_SINK)
    script = textwrap.dedent("""
        import numpy as np, geosim
        from multiprocessing import forkserver
        from probe_sink import ProbeSink
        grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (12, 14))
        model = geosim.Spherical(1.0, geosim.Anisotropy((40.0, 25.0), azimuth=30.0))
        pids = geosim.simulate(np.array([[32.0, 41.0]]), np.array([0.7]), model, grid, n_realizations=4,
                               seed=9, workers=2, sink=ProbeSink(),
                               neighbourhood=geosim.search.Neighbourhood(max_samples=8, max_nodes=8))
        server = forkserver._forkserver
        print(len(set(pids)), server._forkserver_pid, *server._preload_modules)
    """)
    log = tmp_path / "probe.log"
    env = {**os.environ, "PYTHONPATH": str(tmp_path), "PROBE_LOG": str(log)}
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, env=env, timeout=600,
                         cwd=tmp_path)
    assert out.returncode == 0, out.stderr[-3000:]
    workers, server, *preload = out.stdout.split()
    assert workers == "2"
    assert log.read_text().split() == [server, "True"]
    assert preload == ["geosim.simulation.runner", "geosim.simulation.pool_server", "geosim.simulation.sequential",
                       "pool_probe"]


def test_the_preload_keeps_geosim_classes_modules_and_every_library_named_once():
    from multiprocessing import forkserver

    from geosim.simulation.runner import pool_context
    before = list(forkserver._forkserver._preload_modules)
    try:
        ctx = pool_context("geosim.simulation.sequential", "__main__", None,
                           libraries=["geosim.ensemble", "zarr", "geosim.simulation.runner"])
        if ctx.get_start_method() == "forkserver":
            assert forkserver._forkserver._preload_modules == [
                "geosim.simulation.runner", "geosim.simulation.pool_server", "geosim.simulation.sequential",
                "geosim.ensemble", "zarr"]
        else:
            assert ctx.get_start_method() == "spawn"
    finally:
        forkserver._forkserver._preload_modules = before


def test_importing_pool_server_sets_numbas_compiler_up_in_that_process():
    # in a fresh interpreter: not set up after importing the runner, set up after pool_server
    script = textwrap.dedent("""
        from numba.core.imputils import builtin_registry
        from numba.core.registry import cpu_target
        import geosim.simulation.runner
        before = builtin_registry in cpu_target.target_context._registries
        import geosim.simulation.pool_server
        print(before, builtin_registry in cpu_target.target_context._registries)
    """)
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr[-3000:]
    assert out.stdout.split() == ["False", "True"]
