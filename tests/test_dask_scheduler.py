"""Runs on a Dask cluster started the way users start one: a ``dask scheduler`` and two
``dask worker`` processes (here on loopback), against the same run on one local process;
and what the workers do when the run's client is killed or stops the run.

The processes are started and stopped by the test; every wait is bounded.  Runs that are
compared pin the time stamp (SOURCE_DATE_EPOCH), so equal computations give
byte-identical files.
"""
from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from geosim.io.report import file_sha256

pytest.importorskip("dask.distributed")

ORE = Path(__file__).resolve().parent.parent / "sample_fields" / "ore_prospect" / "run.toml"
# coarse 3-D grid, 4 realizations in path groups of 2 (each group one task on a worker)
SMALL = ["--set", "grid.cell=[40.0, 40.0, 20.0]", "--set", "simulation.realizations=4",
         "--set", "simulation.realizations_per_path=2", "--set", "variogram.fit=false",
         "--set", "outputs.plots=false", "--set", "outputs.cross_validation=false",
         "--set", "outputs.estimate=false"]
AQUIFER = ORE.parent.parent / "alluvial_aquifer" / "run.toml"
# realizations of a few seconds each (12 m cells, 32 data + 32 nodes in each system: about
# 2.5 s on one busy core) with quick summaries: a realization is still being computed for
# seconds after the client is stopped, so one written after that would be seen
SLOW = ["--set", "grid.cell=[12.0, 12.0]", "--set", "search.max_samples=32", "--set", "search.max_nodes=32",
        "--set", "variogram.fit=false", "--set", "outputs.plots=false", "--set", "outputs.cross_validation=false",
        "--set", "outputs.estimate=false"]
# after the client is gone, time for the scheduler's release to reach the workers (it takes
# milliseconds on loopback); a realization finishing inside it may still be written
GRACE = 0.5
IDLE_TIMEOUT = 120.0  # for the workers to drop what they were computing
START_TIMEOUT = 90.0   # seconds for the scheduler and both workers to come up
RUN_TIMEOUT = 300.0


def _dask_command() -> list[str]:
    script = Path(sys.executable).with_name("dask")
    return [str(script)] if script.is_file() else [sys.executable, "-m", "dask"]


def _geosim_command() -> list[str]:
    script = Path(sys.executable).with_name("geosim")
    return [str(script)] if script.is_file() else [
        sys.executable, "-c", "import sys; from geosim_cli.main import main; sys.exit(main())"]


def _geosim(*args, env) -> subprocess.CompletedProcess:
    return subprocess.run(_geosim_command() + [str(a) for a in args], capture_output=True, text=True,
                          timeout=RUN_TIMEOUT, env=env)


def _stop(procs) -> None:
    for p in procs:
        if p.poll() is None:
            p.terminate()
    deadline = time.monotonic() + 20.0
    for p in procs:
        try:
            p.wait(timeout=max(0.1, deadline - time.monotonic()))
        except subprocess.TimeoutExpired:
            p.kill()
            p.wait(timeout=10.0)


def _outputs(folder: Path) -> dict[str, str]:
    """SHA-256 of every raster and table a run wrote (the report holds timings and is left out)."""
    return {p.relative_to(folder).as_posix(): file_sha256(p) for p in sorted(folder.rglob("*"))
            if p.suffix in (".tif", ".csv", ".nc", ".parquet")}


@contextlib.contextmanager
def _cluster(tmp_path: Path, env: dict, n_workers: int = 2):
    """A ``dask scheduler`` and ``n_workers`` ``dask worker`` processes (one thread each) on
    loopback; yields the scheduler's address and the processes, and stops them all."""
    from dask.distributed import Client

    sched_file = tmp_path / "scheduler.json"
    logs = tmp_path / "logs"
    logs.mkdir()
    dask = _dask_command()
    procs = []
    try:
        procs.append(subprocess.Popen(dask + ["scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
                                              "--scheduler-file", str(sched_file)],
                                      stdout=subprocess.DEVNULL, stderr=open(logs / "scheduler.log", "w"), env=env))
        deadline = time.monotonic() + START_TIMEOUT
        while not sched_file.is_file() and time.monotonic() < deadline:
            assert procs[0].poll() is None, (logs / "scheduler.log").read_text()
            time.sleep(0.2)
        assert sched_file.is_file(), "the scheduler did not start in time"
        address = json.loads(sched_file.read_text())["address"]
        assert address.startswith("tcp://127.0.0.1:")
        for k in range(n_workers):
            procs.append(subprocess.Popen(dask + ["worker", address, "--host", "127.0.0.1", "--nthreads", "1",
                                                  "--no-dashboard", "--death-timeout", "60",
                                                  "--local-directory", str(tmp_path / f"w{k}")],
                                          stdout=subprocess.DEVNULL, stderr=open(logs / f"worker{k}.log", "w"),
                                          env=env))
        with Client(address, timeout=START_TIMEOUT) as client:
            client.wait_for_workers(n_workers, timeout=max(1.0, deadline - time.monotonic()))
            assert len(client.scheduler_info()["workers"]) == n_workers
        yield address, procs
    finally:
        _stop(procs)
    assert all(p.poll() is not None for p in procs)


def test_run_on_a_dask_scheduler_and_two_workers_equals_a_serial_run(tmp_path):
    from dask.distributed import Client

    env = {**os.environ, "SOURCE_DATE_EPOCH": "1767225600", "OMP_NUM_THREADS": "1"}
    with _cluster(tmp_path, env) as (address, procs):
        remote = _geosim("run", ORE, "--out", tmp_path / "cluster", "--cluster", address, *SMALL, env=env)
        assert remote.returncode == 0, remote.stderr
        # both worker processes are still connected after the run (none died on a task)
        with Client(address, timeout=30) as client:
            seen = client.run(os.getpid)
        assert len(set(seen.values())) == 2
    serial = _geosim("run", ORE, "--out", tmp_path / "serial", "--workers", "1", *SMALL, env=env)
    assert serial.returncode == 0, serial.stderr
    a, b = _outputs(tmp_path / "cluster"), _outputs(tmp_path / "serial")
    # the workers wrote their realizations into one store, from which the run wrote the cube
    assert "realizations.nc" in a and not any(n.startswith("realizations/") for n in a)
    assert any("summary" in n for n in a) and "decision_figures.csv" in a
    assert a == b


# -- the client is gone: workers write nothing further --------------------------------------------

def _listing(folder: Path) -> dict[str, int]:
    """Every file under ``folder`` (hidden temporaries too) with its modification time."""
    found = {}
    for p in folder.rglob("*"):
        try:
            if p.is_file():
                found[p.relative_to(folder).as_posix()] = p.stat().st_mtime_ns
        except FileNotFoundError:  # a temporary renamed or removed while listing
            continue
    return found


def _busy(client) -> int:
    """Tasks the scheduler still holds plus tasks the workers are executing (a task the
    scheduler released while it ran is still executing until it returns)."""
    executing = client.run(lambda dask_worker: len(dask_worker.state.executing | dask_worker.state.long_running))
    return sum(executing.values()) + client.run_on_scheduler(lambda dask_scheduler: len(dask_scheduler.tasks))


def _wait_idle(client, since: float) -> float:
    """Seconds from ``since`` until the cluster holds and computes nothing (bounded)."""
    while _busy(client):
        assert time.monotonic() - since < IDLE_TIMEOUT, f"workers still busy {IDLE_TIMEOUT:.0f} s after the stop"
        time.sleep(0.05)
    return time.monotonic() - since


def _records(folder: Path) -> list[str]:
    """The realization records of the run in ``folder`` (none before it has started)."""
    return sorted(p.name for p in (folder / "run-state").glob("r[0-9]*.json"))


def test_killed_client_gets_nothing_more_written_by_dask_workers_and_resumes_equal(tmp_path):
    from dask.distributed import Client

    env = {**os.environ, "SOURCE_DATE_EPOCH": "1767225600", "OMP_NUM_THREADS": "1"}
    out = tmp_path / "run"
    # 5 realizations on 2 workers: killed after 2 are recorded, 2 are in flight and 1 waits
    args = ["run", AQUIFER, "--out", out, *SLOW, "--set", "simulation.realizations=5"]
    with _cluster(tmp_path, env) as (address, procs):
        with open(tmp_path / "killed.log", "w") as log:
            run = subprocess.Popen(_geosim_command() + [str(a) for a in args] + ["--cluster", address],
                                   stdout=subprocess.DEVNULL, stderr=log, env=env)
        try:
            deadline = time.monotonic() + RUN_TIMEOUT
            # kill as a realization is recorded: its worker has just taken the next one
            while len(_records(out)) < 2:
                assert run.poll() is None, (tmp_path / "killed.log").read_text()
                assert time.monotonic() < deadline, "no realization was recorded in time"
                time.sleep(0.01)
            run.send_signal(signal.SIGKILL)
            run.wait(timeout=30)
            killed = time.monotonic()
        finally:
            if run.poll() is None:
                run.kill()
                run.wait(timeout=30)
        time.sleep(GRACE)
        at_kill = _listing(out)
        with Client(address, timeout=30) as observer:
            idle = _wait_idle(observer, killed)
            time.sleep(1.0)
            # the realizations in flight were computed to their end and dropped, unwritten
            assert _listing(out) == at_kill, f"files written after the client was killed (idle after {idle:.1f} s)"
            assert len(observer.scheduler_info()["workers"]) == 2  # the workers themselves carry on
        kept = _records(out)
        assert 2 <= len(kept) < 5
        resumed = _geosim(*args, "--cluster", address, env=env)
        assert resumed.returncode == 0, resumed.stderr
        assert "took over the output folder" in resumed.stderr  # the killed run's lock file
    report = json.loads((out / "report.json").read_text())
    assert report["realizations"]["kept_from_earlier_run"] == [int(name[1:6]) for name in kept]
    whole = _geosim("run", AQUIFER, "--out", tmp_path / "whole", *SLOW, "--set", "simulation.realizations=5",
                    "--workers", "2", env=env)
    assert whole.returncode == 0, whole.stderr
    a, b = _outputs(out), _outputs(tmp_path / "whole")
    assert len([n for n in a if n.startswith("realizations/r")]) == 5
    assert a == b


class _Stop(Exception):
    """The user stopping a run (as Ctrl-C does) while realizations are computed."""


def _stop_after_first(done, total, what) -> None:
    if what == "realizations" and done >= 1:
        raise _Stop


def test_a_run_stopped_on_a_dask_cluster_gets_nothing_more_written(tmp_path):
    from dask.distributed import Client, LocalCluster

    import geosim.config.runspec
    import geosim.pipeline

    out = tmp_path / "run"
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster, Client(cluster) as observer:
        spec = geosim.config.runspec.load_spec(AQUIFER, SLOW[1::2] + [
            "simulation.realizations=4", f"simulation.cluster={cluster.scheduler_address}"])
        with pytest.raises(_Stop):
            geosim.pipeline.simulate(spec, out_dir=out, progress=_stop_after_first)
        stopped = time.monotonic()
        time.sleep(GRACE)
        at_stop = _listing(out)
        _wait_idle(observer, stopped)
        time.sleep(1.0)
        # realization 1 was being computed when the run stopped: it is neither written nor recorded
        assert _listing(out) == at_stop
        assert _records(out) == ["r00000.json"]
