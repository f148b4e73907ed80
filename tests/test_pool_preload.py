"""The local pool's server imports, once, what the processes it forks need
(``geosim.simulation.runner.pool_context``, ``RealizationWriter.pool_modules``).

Each run-level check runs in a fresh interpreter: the pool's server is one per process, and
an earlier test of the session may have started it with other modules.
"""
import os
import subprocess
import sys
import textwrap

import numpy as np

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


# a module whose function, run in a process of RealizationWriter._aside, writes a summary cube and
# notes what the process holds of Dask's distributed scheduler afterwards
ASIDE_PROBE = textwrap.dedent("""
    import os, sys
    import numpy as np
    import geosim
    from geosim.io.cube import write_summary_cube

    def bands(grid):
        return np.arange(7 * grid.size, dtype=np.float32).reshape((7,) + grid.shape) / np.float32(50)

    def write_and_note(path):
        grid = geosim.Grid(0.0, 0.0, (5.0, 5.0, 2.0), (3, 4, 5))
        write_summary_cube(path, grid, bands(grid), [0.5, 1.0], units="g/t")
        if "distributed" not in sys.modules:
            held = "absent"
        else:
            held = "blocked" if sys.modules["distributed"] is None else "imported"
        with open(os.environ["PROBE_LOG"], "a") as f:
            f.write(f"{os.getpid()} {held}\\n")
""")
ASIDE_RUN = textwrap.dedent("""
    import os, sys
    import geosim
    from geosim.ensemble import RealizationWriter, start_aside
    import aside_probe
    how, out = sys.argv[1], sys.argv[2]
    if how == "aside":  # through the writer's own pool, forked from the pool's server
        writer = RealizationWriter(out + ".folder", geosim.Grid(0.0, 0.0, (5.0, 5.0, 2.0), (3, 4, 5)), cube="netcdf")
        writer._aside(aside_probe.write_and_note, out)
        writer.wait()
    elif how == "start":  # here, after the set-up of such a process
        start_aside(os.getpid())
        aside_probe.write_and_note(out)
    else:  # here, as any process writes
        aside_probe.write_and_note(out)
    print(os.getpid())
""")


def _aside_probe(tmp_path, how: str, name: str) -> tuple[str, str, str]:
    """Run ASIDE_RUN in a fresh interpreter; (its pid, the writing process's pid, what it noted)."""
    (tmp_path / "aside_probe.py").write_text(ASIDE_PROBE)
    log = tmp_path / f"{name}.log"
    env = {**os.environ, "PYTHONPATH": str(tmp_path), "PROBE_LOG": str(log)}
    out = subprocess.run([sys.executable, "-c", ASIDE_RUN, how, str(tmp_path / f"{name}.nc")],
                         capture_output=True, text=True, env=env, timeout=600, cwd=tmp_path)
    assert out.returncode == 0, out.stderr[-3000:]
    writer, noted = log.read_text().split()
    return out.stdout.strip(), writer, noted


def test_a_process_writing_aside_writes_netcdf_without_importing_dasks_distributed_scheduler(tmp_path):
    # xarray's to_netcdf imports distributed (installed with the test extras) to ask which scheduler
    # runs; a process of the writer's pool is set up so that it does not (start_aside), and writes
    main_pid, writer_pid, noted = _aside_probe(tmp_path, "aside", "aside")
    assert writer_pid != main_pid
    assert noted == "blocked"
    _same_values(tmp_path / "aside.nc")


def test_the_cube_written_without_distributed_is_the_cube_written_with_it(tmp_path):
    # the same summary cube from a process set up by start_aside and from a plain one, which imports
    # distributed as xarray asks: the same variables, values, encodings and attributes
    _, _, plain = _aside_probe(tmp_path, "plain", "plain")
    _, _, started = _aside_probe(tmp_path, "start", "start")
    assert (plain, started) == ("imported", "blocked")
    import xarray as xr
    with xr.open_dataset(tmp_path / "plain.nc", engine="netcdf4") as a, \
            xr.open_dataset(tmp_path / "start.nc", engine="netcdf4") as b:
        assert a.identical(b)
        def encodings(ds):  # how each variable is stored (not the file it came from); repr: NaN fill values
            return {k: {e: repr(x) for e, x in v.encoding.items() if e != "source"} for k, v in ds.variables.items()}
        assert encodings(a) == encodings(b)
        assert encodings(a)["mean"]["zlib"] == "True" and encodings(a)["mean"]["chunksizes"] == "(1, 4, 5)"
    _same_values(tmp_path / "start.nc")


def _same_values(path) -> None:
    """The cube at ``path`` holds the probe's bands, bit for bit (float32)."""
    import xarray as xr
    bands = np.arange(7 * 60, dtype=np.float32).reshape(7, 3, 4, 5) / np.float32(50)
    with xr.open_dataset(path, engine="netcdf4") as ds:
        for k, name in enumerate(["mean", "std", "P10", "P50", "P90"]):
            assert np.array_equal(ds[name].values, bands[k]), name
        assert np.array_equal(ds["prob_above"].values, bands[5:])
        assert ds["prob_above"].dims == ("cutoff", "z", "y", "x")
