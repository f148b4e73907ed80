"""A run on a Dask cluster started the way users start one: a ``dask scheduler`` and two
``dask worker`` processes (here on loopback), against the same run on one local process.

The processes are started and stopped by the test; every wait is bounded.  Both runs pin
the time stamp (SOURCE_DATE_EPOCH), so equal computations give byte-identical files.
"""
from __future__ import annotations

import json
import os
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
START_TIMEOUT = 90.0   # seconds for the scheduler and both workers to come up
RUN_TIMEOUT = 300.0


def _dask_command() -> list[str]:
    script = Path(sys.executable).with_name("dask")
    return [str(script)] if script.is_file() else [sys.executable, "-m", "dask"]


def _geosim(*args, env) -> subprocess.CompletedProcess:
    script = Path(sys.executable).with_name("geosim")
    cmd = [str(script)] if script.is_file() else [
        sys.executable, "-c", "import sys; from geosim_cli.main import main; sys.exit(main())"]
    return subprocess.run(cmd + [str(a) for a in args], capture_output=True, text=True, timeout=RUN_TIMEOUT,
                          env=env)


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


def test_run_on_a_dask_scheduler_and_two_workers_equals_a_serial_run(tmp_path):
    from dask.distributed import Client

    env = {**os.environ, "SOURCE_DATE_EPOCH": "1767225600", "OMP_NUM_THREADS": "1"}
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
        for k in range(2):
            procs.append(subprocess.Popen(dask + ["worker", address, "--host", "127.0.0.1", "--nthreads", "1",
                                                  "--no-dashboard", "--death-timeout", "60",
                                                  "--local-directory", str(tmp_path / f"w{k}")],
                                          stdout=subprocess.DEVNULL, stderr=open(logs / f"worker{k}.log", "w"),
                                          env=env))
        with Client(address, timeout=START_TIMEOUT) as client:
            client.wait_for_workers(2, timeout=max(1.0, deadline - time.monotonic()))
            assert len(client.scheduler_info()["workers"]) == 2
        remote = _geosim("run", ORE, "--out", tmp_path / "cluster", "--cluster", address, *SMALL, env=env)
        assert remote.returncode == 0, remote.stderr
        # both worker processes are still connected after the run (none died on a task)
        with Client(address, timeout=30) as client:
            seen = client.run(os.getpid)
        assert len(set(seen.values())) == 2
    finally:
        _stop(procs)
    assert all(p.poll() is not None for p in procs)
    serial = _geosim("run", ORE, "--out", tmp_path / "serial", "--workers", "1", *SMALL, env=env)
    assert serial.returncode == 0, serial.stderr
    a, b = _outputs(tmp_path / "cluster"), _outputs(tmp_path / "serial")
    # the workers wrote their realizations into one store, from which the run wrote the cube
    assert "realizations.nc" in a and not any(n.startswith("realizations/") for n in a)
    assert any("summary" in n for n in a) and "decision_figures.csv" in a
    assert a == b
