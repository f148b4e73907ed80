"""Faults of the environment: a full disk, a folder that cannot be written, too little memory,
two runs into one folder, a killed main process, and byte-identical reruns.

Small file systems are tmpfs mounts (root only); where mounting is not possible the tests
say why and skip.  Every process a test starts is waited for or killed by its id.
"""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pytest

import geosim
import geosim.io.geotiff
import geosim.config.runspec
import geosim.pipeline
from geosim.errors import InputError, ResourceError
from geosim.grid import Grid
from geosim.io.lock import LOCK_NAME, folder_lock, lock_holder
from geosim.io.report import file_sha256
from geosim.resources import check_memory
from geosim.simulation.runner import REALIZATION_BYTES_PER_NODE, fitting_workers
from geosim_cli.main import main
from test_cli_e2e import AQUIFER, GEOSIM, SAMPLES, geosim_cmd

# 8 realizations on a 100 m grid, one worker: a run of a few seconds
SMALL = ["--set", "grid.cell=[100.0, 100.0]", "--set", "simulation.realizations=8",
         "--set", "outputs.plots=false", "--set", "simulation.workers=1"]


def _mount_tmpfs(target: Path, options: str) -> None:
    if os.geteuid() != 0:
        pytest.skip("a small file system needs a tmpfs mount, which needs root here")
    target.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "geosim-test", str(target)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs in this environment: {done.stderr.strip()}")


@pytest.fixture
def small_disk(tmp_path):
    """A 128 kB file system: room for the first outputs of a run, not for all of them."""
    target = tmp_path / "small"
    _mount_tmpfs(target, "size=128k")
    yield target
    subprocess.run(["umount", str(target)], check=False)


@pytest.fixture
def read_only_folder(tmp_path):
    """A folder nobody may write into: a read-only tmpfs (root), else one without write permission."""
    target = tmp_path / "locked"
    if os.geteuid() == 0:
        _mount_tmpfs(target, "ro,size=64k")
        yield target
        subprocess.run(["umount", str(target)], check=False)
    else:
        target.mkdir()
        target.chmod(0o555)
        yield target
        target.chmod(0o755)


def _partials(folder: Path) -> list[Path]:
    return [p for p in folder.rglob(".*") if ".partial" in p.name or p.name.endswith(".stage.tif")]


# -- full disk, unwritable folder, memory ------------------------------------------------------

def test_full_disk_exits_5_naming_the_folder_and_leaves_nothing_half_written(small_disk, capsys):
    out = small_disk / "run"
    code = main(["-q", "run", str(AQUIFER), "--out", str(out), *SMALL])
    err = capsys.readouterr().err
    assert code == 5, err
    line = next(x for x in err.splitlines() if x.startswith("geosim: error:"))
    assert "disk is full" in line and str(out) in line and "internal error" not in err
    assert not _partials(small_disk)
    # whatever was finished is complete: every GeoTIFF left opens and reads
    import rasterio
    for path in out.rglob("*.tif"):
        with rasterio.open(path) as src:
            src.read()


def test_full_disk_in_the_raster_writer_names_the_folder_and_the_size(small_disk):
    grid = Grid(0.0, 0.0, (1.0, 1.0), (400, 400))
    # random values do not compress: 640 kB of float32 cannot fit on a 128 kB disk
    values = np.random.default_rng(0).standard_normal(grid.shape)
    with pytest.raises(ResourceError) as info:
        geosim.io.geotiff.write_raster(small_disk / "big.tif", values, grid, descriptions=["noise"])
    assert info.value.folder == str(small_disk) and info.value.needed == 400 * 400 * 4
    assert "disk is full" in str(info.value)
    assert list(small_disk.iterdir()) == []


def test_unwritable_output_folder_is_bad_input_naming_it(read_only_folder, capsys):
    out = read_only_folder / "run"
    code = main(["-q", "run", str(AQUIFER), "--out", str(out), *SMALL])
    err = capsys.readouterr().err
    assert code == 2, err
    assert str(out) in err and ("read-only" in err or "permission denied" in err)
    assert "internal error" not in err


def test_memory_estimate_refuses_or_reduces_workers(notes):
    grid = Grid(0.0, 0.0, (1.0, 1.0), (1000, 1000))
    one = grid.size * REALIZATION_BYTES_PER_NODE
    assert fitting_workers(grid, None, 4, available=10 * one) == 4
    with notes("using 2 worker"):
        assert fitting_workers(grid, None, 4, available=2 * one + 1) == 2
    with pytest.raises(ResourceError, match="needs more memory"):
        fitting_workers(grid, None, 4, available=one - 1)
    check_memory(one, "x", fix="y", available=one)
    with pytest.raises(ResourceError):
        check_memory(one + 1, "x", fix="y", available=one)


def test_grid_too_large_for_memory_exits_5_before_any_work(tmp_path, capsys):
    # 0.1 m cells over a valley several km wide: billions of nodes
    code = main(["-q", "check", str(AQUIFER), "--set", "grid.cell=[0.1, 0.1]"])
    err = capsys.readouterr().err
    assert code == 5, err
    assert "needs more memory" in err and "GB available" in err and "grid.cell" in err
    # 100,000 realizations of one 256 x 256 window at 24 bytes a value: 157 GB for the summaries
    from geosim.resources import available_memory
    if (available_memory() or 0) > 157e9:
        return
    code = main(["-q", "check", str(AQUIFER), "--set", "simulation.realizations=100000"])
    err = capsys.readouterr().err
    assert code == 5 and "the summaries of 100,000 realizations" in err, err


# -- one run per folder ---------------------------------------------------------------------------

_HOLDER = """
import sys, time
from geosim.io.lock import folder_lock
with folder_lock(sys.argv[1]):
    print("held", flush=True)
    time.sleep(120)
"""


def test_lock_refuses_a_second_holder_and_is_taken_over_after_a_kill(tmp_path, notes):
    folder = tmp_path / "run"
    holder = subprocess.Popen([sys.executable, "-c", _HOLDER, str(folder)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        assert lock_holder(folder)["pid"] == holder.pid
        with pytest.raises(InputError, match=f"in use by geosim process {holder.pid}"):
            with folder_lock(folder):
                pass
        holder.send_signal(signal.SIGKILL)
        holder.wait(timeout=30)
    finally:
        if holder.poll() is None:
            holder.kill()
            holder.wait(timeout=30)
    # the kernel released the dead holder's lock; its record is stale and is reported
    with notes(f"process {holder.pid}.*ended without releasing"):
        with folder_lock(folder):
            assert lock_holder(folder)["pid"] == os.getpid()
    assert lock_holder(folder) is None
    notes.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # released cleanly: nothing to report
        with folder_lock(folder):
            pass
    assert not notes.logged()


def test_two_runs_into_one_folder_second_is_refused_first_completes(tmp_path):
    out = tmp_path / "run"
    first = subprocess.Popen(GEOSIM + ["-q", "run", str(AQUIFER), "--out", str(out), *SMALL,
                                       "--set", "simulation.realizations=30"],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 240
        while lock_holder(out) is None and first.poll() is None and time.monotonic() < deadline:
            time.sleep(0.02)
        assert first.poll() is None, "the first run ended before the second could start"
        second = geosim_cmd("-q", "run", AQUIFER, "--out", out, *SMALL, "--set", "simulation.realizations=30")
        first_out, first_err = first.communicate(timeout=300)
    finally:
        if first.poll() is None:
            first.kill()
            first.wait(timeout=30)
    assert second.returncode == 2, second.stderr
    assert f"in use by geosim process {first.pid}" in second.stderr and str(out) in second.stderr
    assert first.returncode == 0, first_err
    assert "run complete" in first_out
    report = json.loads((out / "report.json").read_text())
    assert report["realizations"]["count"] == 30


# -- no orphan workers --------------------------------------------------------------------------

def _descendants(pid: int) -> list[int]:
    children: dict[int, list[int]] = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                ppid = int((entry / "stat").read_text().rsplit(")", 1)[1].split()[1])
            except (OSError, IndexError, ValueError):
                continue
            children.setdefault(ppid, []).append(int(entry.name))
    found, todo = [], [pid]
    while todo:
        for child in children.get(todo.pop(), []):
            found.append(child)
            todo.append(child)
    return found


def _running(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return False
    return state != "Z"


_WATCHER = """
import sys, time
from geosim.simulation.runner import watch_process
watch_process(int(sys.argv[1]))
print("watching", flush=True)
time.sleep(120)
"""


def test_a_watched_process_ending_ends_the_watcher():
    main_proc = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(120)"])
    watcher = subprocess.Popen([sys.executable, "-c", _WATCHER, str(main_proc.pid)], stdout=subprocess.PIPE,
                               text=True)
    try:
        assert watcher.stdout.readline().strip() == "watching"
        time.sleep(0.5)
        assert watcher.poll() is None  # keeps running while the main process lives
        main_proc.send_signal(signal.SIGKILL)  # not reaped yet: a zombie counts as gone
        assert watcher.wait(timeout=5) == 70
    finally:
        for proc in (main_proc, watcher):
            if proc.poll() is None:
                proc.kill()
            proc.wait(timeout=30)


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="finds worker processes through /proc (Linux)")
def test_workers_exit_when_the_main_process_is_killed(tmp_path, notes):
    out = tmp_path / "run"
    main_proc = subprocess.Popen(GEOSIM + ["-q", "run", str(AQUIFER), "--out", str(out), "--set",
                                           "grid.cell=[50.0, 50.0]", "--set", "simulation.realizations=200",
                                           "--set", "outputs.plots=false", "--set", "simulation.workers=2"],
                                 stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    workers: list[int] = []
    try:
        deadline = time.monotonic() + 240
        while len(list((out / "run-state").glob("r[0-9]*.json"))) < 2 and time.monotonic() < deadline:
            assert main_proc.poll() is None, "the run ended before it could be killed"
            time.sleep(0.02)
        workers = _descendants(main_proc.pid)
        assert len(workers) >= 2  # the fork server and its workers (and the resource tracker)
        main_proc.send_signal(signal.SIGKILL)  # the main process only, not its group
        main_proc.wait(timeout=30)
        killed = time.monotonic()
        while any(_running(p) for p in workers) and time.monotonic() - killed < 5:
            time.sleep(0.05)
        alive = [p for p in workers if _running(p)]
        assert not alive, f"worker processes {alive} still running 5 s after the main process was killed"
        # and nothing more is written once they are gone
        written = sorted(p.name for p in (out / "run-state").iterdir())
        time.sleep(1.0)
        assert sorted(p.name for p in (out / "run-state").iterdir()) == written
    finally:
        if main_proc.poll() is None:
            main_proc.kill()
            main_proc.wait(timeout=30)
        for pid in workers:
            if _running(pid):
                os.kill(pid, signal.SIGKILL)
    # the killed run's lock did not outlive it: the folder resumes without --overwrite
    with notes("ended without releasing"):
        with folder_lock(out):
            pass


# -- byte-identical outputs -------------------------------------------------------------------

def test_source_date_epoch_gives_byte_identical_outputs(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")  # 2026-01-01T00:00:00Z
    spec = geosim.config.runspec.load_spec(AQUIFER, {"grid.cell": [200.0, 200.0], "simulation.realizations": 2,
                                                 "simulation.workers": 1})
    for name in ("a", "b"):
        geosim.pipeline.run(spec, tmp_path / name)
        time.sleep(1.1)  # a clock read would now differ by a second
    files = sorted(p.relative_to(tmp_path / "a") for p in (tmp_path / "a").rglob("*") if p.is_file())
    assert sum(p.suffix == ".tif" for p in files) >= 4 and any(p.suffix == ".png" for p in files)
    assert sorted(p.relative_to(tmp_path / "b") for p in (tmp_path / "b").rglob("*") if p.is_file()) == files
    for rel in files:  # rasters, tables and their sidecars, plots, model, run state: all but the report
        if rel.name != "report.json":
            assert file_sha256(tmp_path / "a" / rel) == file_sha256(tmp_path / "b" / rel), rel
    import rasterio
    with rasterio.open(tmp_path / "a" / "summary.tif") as src:
        assert src.tags()["created_utc"] == "2026-01-01T00:00:00Z"
    report = json.loads((tmp_path / "b" / "report.json").read_text())
    assert report["source_date_epoch_utc"] == "2026-01-01T00:00:00Z"
    assert report["created_utc"] > "2026-12"  # the real time of the run


def test_bad_source_date_epoch_is_refused_naming_the_variable(monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "yesterday")
    with pytest.raises(InputError, match="SOURCE_DATE_EPOCH"):
        geosim.io.report.provenance(seed=1)


def test_lock_file_does_not_make_a_folder_foreign(tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    (out / LOCK_NAME).write_text("")
    spec = geosim.config.runspec.load_spec(AQUIFER)
    geosim.pipeline.open_output(spec, out, overwrite=False, resume=True)


# -- --overwrite leaves nothing stale -----------------------------------------------------------

def _files(folder: Path) -> set[str]:
    return {p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file()}


def test_overwrite_removes_every_file_of_the_old_run_and_nothing_else(tmp_path):
    out = tmp_path / "run"
    quick = {"grid.cell": [200.0, 200.0], "simulation.realizations": 2, "simulation.workers": 1}
    first = geosim.config.runspec.load_spec(AQUIFER, {**quick, "outputs.plots": True, "outputs.estimate": True})
    geosim.pipeline.run(first, out)
    old = _files(out)
    assert any(name.endswith(".png") for name in old) and "estimate.tif" in old
    (out / "my notes.txt").write_text("kept: not written by geosim")
    second = geosim.config.runspec.load_spec(AQUIFER, {**quick, "outputs.plots": False, "outputs.estimate": False,
                                                   "simulation.seed": 5})
    with pytest.raises(InputError, match="different spec"):
        geosim.pipeline.run(second, out)
    result = geosim.pipeline.run(second, out, overwrite=True)
    new = _files(out)
    written = {Path(p).resolve().relative_to(out.resolve()).as_posix() for g in result.files.values() for p in g}
    assert not any(name.endswith(".png") for name in new) and "estimate.tif" not in new
    assert "my notes.txt" in new
    # every file is the new run's output, its realizations, its state, a CSV sidecar, or the user's
    leftover = {n for n in new - written if not n.startswith(("run-state/", "realizations/"))
                and not n.endswith(".csv-metadata.json")}
    assert leftover == {"my notes.txt"}


def test_overwrite_with_fewer_levels_leaves_no_level_files(tmp_path):
    out = tmp_path / "run"
    ore = SAMPLES / "ore_prospect" / "run.toml"
    small = {"grid.cell": [60.0, 60.0, 40.0], "simulation.realizations": 2, "simulation.workers": 1,
             "outputs.plots": False, "outputs.cross_validation": False, "outputs.estimate": False,
             "outputs.level_geotiffs": True}  # level files beside the cubes, to see which are left
    geosim.pipeline.run(geosim.config.runspec.load_spec(ore, {**small, "grid.z_range": [100.0, 340.0]}), out)
    six = _files(out)
    geosim.pipeline.run(geosim.config.runspec.load_spec(ore, {**small, "grid.z_range": [180.0, 340.0]}), out,
                        overwrite=True)
    four = _files(out)
    assert any("_z005" in n for n in six)
    assert not any("_z004" in n or "_z005" in n for n in four)
