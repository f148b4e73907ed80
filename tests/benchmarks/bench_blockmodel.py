"""Benchmark of the whole 3-D job at block-model scale; prints figures, the last line one JSON object.

Run:  python tests/benchmarks/bench_blockmodel.py [--realizations 100] [--per-path auto] [--workers 2]
                                                 [--quick] [--shape NZ NY NX] [--start-pairs 3]

An invented case is built in code (the Tarnwick Deep block model: a fictitious copper body,
no real place): 3,000 composites in 60 vertical drillholes on a 200 x 100 x 50 grid of
10 x 10 x 5 m blocks (1,000,000 active nodes), a nested anisotropic model (nugget and two
spherical structures), 16 data and 16 previously simulated nodes, no octant search.  It is
written as a points CSV and a run spec and run through ``geosim.pipeline.run``, the call
behind ``geosim run`` (spec -> data -> simulation -> summaries -> written outputs;
cross-validation and the kriging estimate are switched off, plots are on), with 100
realizations on 2 local workers and the default ``realizations_per_path = "auto"`` (50 on this
grid).

Figures (wall seconds, so they include the load other jobs put on a shared machine;
``uptime`` load averages are printed beside them):

* ``end_to_end_s``: the whole ``pipeline.run``; ``simulation_s`` and ``summaries_s`` its
  steps (the workers write each realization as it is done, so writing is part of
  ``simulation_s``; ``writing_s`` is null);
* ``core_us_per_node_realization`` = end_to_end_s x workers x 1e6 / (nodes x realizations);
  ``cpu_us_per_node_realization`` the same from the CPU seconds this process and all its
  descendants used (``cpu_s``), which other jobs on the machine do not inflate;
* ``peak_rss_mib``: the largest resident set (VmHWM) of this process or any descendant
  (workers included), sampled every 0.2 s; ``peak_rss_mib_fewer`` the same for a run with a
  fifth of the realizations, to show memory does not grow with the ensemble;
* ``cold_first_run_s`` / ``warm_run_s``: ``geosim run`` of the aquifer demo (coarsened, 20
  realizations) in a fresh process with an empty and with a filled numba cache
  (``NUMBA_CACHE_DIR``); the medians of ``--start-pairs`` such pairs (3 by default, each in a new
  cache folder: one cold run on this 2-core machine varies by a few seconds with what else the
  machine does), every pair in ``cold_warm_pairs``;
* ``dask_equals_serial``: a ``dask scheduler`` and two ``dask worker`` processes on loopback
  run the block model with 4 realizations; true when every raster and table equals a serial
  run's byte for byte (time stamps pinned with SOURCE_DATE_EPOCH).
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve()
ROOT = HERE.parents[2]
AQUIFER = ROOT / "sample_fields" / "alluvial_aquifer" / "run.toml"
SHAPE = (50, 100, 200)          # levels, rows, columns
CELL = (10.0, 10.0, 5.0)
ORIGIN = (641000.0, 7512000.0, 200.0)   # EPSG:32754 (WGS 84 / UTM 54S), invented place
N_HOLES, PER_HOLE = 60, 50


def load() -> str:
    return "load " + " ".join(open("/proc/loadavg").read().split()[:3])


def make_case(folder: Path, realizations: int, per_path: int | str, workers: int | None, shape=SHAPE) -> Path:
    """Write the invented drillhole composites and the run spec into ``folder``; return the spec path."""
    rng = np.random.default_rng(20261202)
    nz, ny, nx = shape
    x0, y0, z0 = ORIGIN
    xmax, ymax, ztop = x0 + nx * CELL[0], y0 + ny * CELL[1], z0 + nz * CELL[2]
    hx = rng.uniform(x0 + 20, xmax - 20, N_HOLES)
    hy = rng.uniform(y0 + 20, ymax - 20, N_HOLES)
    z = np.linspace(z0 + 2.5, ztop - 2.5, PER_HOLE)
    xs, zs = np.repeat(hx, PER_HOLE), np.tile(z, N_HOLES)
    ys = np.repeat(hy, PER_HOLE)
    # a smooth invented grade trend along azimuth 60 plus noise; lognormal grades in % Cu
    u = (xs - x0) * np.sin(np.radians(60)) + (ys - y0) * np.cos(np.radians(60))
    y = (np.sin(u / 170.0 + 0.7) + 0.6 * np.cos((zs - z0) / 45.0) + 0.5 * np.sin((xs - x0) / 90.0 - (ys - y0) / 130.0)
         + 0.6 * rng.standard_normal(xs.size))
    y = (y - y.mean()) / y.std()
    grade = np.exp(-0.9 + 0.75 * y)
    holes = np.repeat([f"TD{i:03d}" for i in range(N_HOLES)], PER_HOLE)
    lines = ["sample,hole,x,y,z,cu_pct"] + [f"{h}-{k % PER_HOLE:02d},{h},{a:.2f},{b:.2f},{c:.2f},{g:.4f}"
                                             for k, (h, a, b, c, g) in enumerate(zip(holes, xs, ys, zs, grade))]
    (folder / "composites.csv").write_text("\n".join(lines) + "\n")
    execution = f"workers = {workers}" if workers else ""
    spec = f'''title = "Tarnwick Deep block model (invented data, benchmark)"
[data]
points = "composites.csv"
x = "x"
y = "y"
z = "z"
id = "sample"
value = "cu_pct"
units = "% Cu"
crs = "EPSG:32754"
[declustering]
method = "none"
[transform]
lower = 0.0
[variogram]
fit = false
structures = [
  {{ kind = "nugget", sill = 0.15 }},
  {{ kind = "spherical", sill = 0.55, ranges = [120.0, 70.0, 25.0], azimuth = 60.0 }},
  {{ kind = "spherical", sill = 0.30, ranges = [400.0, 220.0, 60.0], azimuth = 60.0 }},
]
[grid]
cell = [{CELL[0]}, {CELL[1]}, {CELL[2]}]
bounds = [{x0}, {y0}, {xmax}, {ymax}]
z_range = [{z0}, {ztop}]
[search]
max_samples = 16
max_nodes = 16
[simulation]
realizations = {realizations}
realizations_per_path = {per_path if str(per_path).isdigit() else f'"{per_path}"'}
seed = 16016
{execution}
[outputs]
cutoffs = [0.3, 0.5, 1.0]
density = 2.7
cross_validation = false
estimate = false
'''
    (folder / "run.toml").write_text(spec)
    return folder / "run.toml"


class PeakRss:
    """Largest VmHWM of this process and its descendants, and their CPU seconds, sampled on a thread.

    CPU seconds are the last sample of each process (user + system), so a process loses at
    most one interval's CPU between its last sample and its end.
    """

    def __init__(self, interval: float = 0.2):
        import psutil
        self._psutil = psutil
        self.interval = interval
        self.peak = 0
        self._cpu: dict[int, float] = {}
        self._start = psutil.Process().cpu_times()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _hwm(self, pid: int) -> int:
        try:
            for line in open(f"/proc/{pid}/status"):
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
        except OSError:
            pass
        return 0

    def _run(self):
        me = self._psutil.Process()
        while not self._stop.is_set():
            children = me.children(recursive=True)
            self.peak = max([self.peak, self._hwm(me.pid)] + [self._hwm(c.pid) for c in children])
            for c in children:
                try:
                    t = c.cpu_times()
                    self._cpu[c.pid] = t.user + t.system
                except self._psutil.Error:
                    pass
            self._stop.wait(self.interval)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self.peak = max(self.peak, self._hwm(os.getpid()))
        end = self._psutil.Process().cpu_times()
        self.cpu_s = (end.user + end.system - self._start.user - self._start.system) + sum(self._cpu.values())


def run_case(folder: Path, realizations: int, per_path: int | str, workers: int, shape=SHAPE) -> dict:
    import geosim.pipeline
    from geosim.config.runspec import load_spec
    spec_path = make_case(folder, realizations, per_path, workers, shape)
    spec = load_spec(spec_path)
    with PeakRss() as rss:
        t0 = time.perf_counter()
        result = geosim.pipeline.run(spec, folder / "out", overwrite=True)
        total = time.perf_counter() - t0
    grid = geosim.pipeline.make_grid(spec)
    return {"active_nodes": int(grid.n_active), "total_s": total, "timings": result.timings,
            "peak_rss_mib": rss.peak / 2 ** 20, "cpu_s": rss.cpu_s}


def geosim_cmd(args, env, timeout=900):
    script = Path(sys.executable).with_name("geosim")
    cmd = [str(script)] if script.is_file() else [sys.executable, "-m", "geosim_cli.main"]
    t0 = time.perf_counter()
    out = subprocess.run(cmd + [str(a) for a in args], capture_output=True, text=True, env=env, timeout=timeout)
    if out.returncode != 0:
        raise RuntimeError(out.stderr[-2000:])
    return time.perf_counter() - t0


def cold_and_warm(folder: Path) -> tuple[float, float]:
    """``geosim run`` of the aquifer demo with an empty, then a filled numba cache (fresh processes)."""
    env = {**os.environ, "NUMBA_CACHE_DIR": str(folder / "numba-cache")}
    small = ["--set", "simulation.realizations=20", "--set", "grid.cell=[50.0, 50.0]", "--workers", "2"]
    cold = geosim_cmd(["run", AQUIFER, "--out", folder / "cold", *small], env)
    warm = geosim_cmd(["run", AQUIFER, "--out", folder / "warm", *small], env)
    return cold, warm


def dask_equals_serial(folder: Path, per_path: int | str) -> bool:
    """The block model (4 realizations) on a dask scheduler + 2 dask workers on loopback vs one local process."""
    from geosim.io.report import file_sha256
    env = {**os.environ, "SOURCE_DATE_EPOCH": "1767225600", "OMP_NUM_THREADS": "1"}
    dask = [str(Path(sys.executable).with_name("dask"))]
    sched_file = folder / "scheduler.json"
    procs = []
    try:
        procs.append(subprocess.Popen(dask + ["scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
                                              "--scheduler-file", str(sched_file)], env=env,
                                      stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        deadline = time.monotonic() + 120
        while not sched_file.is_file():
            if time.monotonic() > deadline:
                raise RuntimeError("dask scheduler did not start")
            time.sleep(0.2)
        address = json.loads(sched_file.read_text())["address"]
        for k in range(2):
            procs.append(subprocess.Popen(dask + ["worker", address, "--host", "127.0.0.1", "--nthreads", "1",
                                                  "--no-dashboard", "--death-timeout", "60",
                                                  "--local-directory", str(folder / f"w{k}")], env=env,
                                          stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        from dask.distributed import Client
        with Client(address, timeout=120) as client:
            client.wait_for_workers(2, timeout=120)
        # one spec and one input file for both runs: the inputs' paths are part of the provenance tags
        spec = make_case(folder, 4, per_path, None)
        geosim_cmd(["run", spec, "--out", folder / "cluster", "--cluster", address], env, timeout=1800)
    finally:
        for p in procs:
            p.terminate()
        for p in procs:
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
    geosim_cmd(["run", spec, "--out", folder / "serial", "--workers", "1"], env, timeout=1800)

    def files(root):
        return {p.relative_to(root).as_posix(): file_sha256(p) for p in sorted(root.rglob("*"))
                if p.suffix in (".tif", ".csv", ".nc", ".parquet")}
    a, b = files(folder / "cluster"), files(folder / "serial")
    return bool(a) and a == b


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--realizations", type=int, default=100)
    parser.add_argument("--per-path", default="auto", help='realizations per path: a number or "auto" (the default)')
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--quick", action="store_true", help="20 realizations, no smaller run, no dask")
    parser.add_argument("--shape", type=int, nargs=3, default=SHAPE, metavar=("NZ", "NY", "NX"),
                        help="grid levels, rows, columns (default 50 100 200; 20 100 100 is a 200k-node case)")
    parser.add_argument("--dask-only", action="store_true", help="only the dask-against-serial comparison")
    parser.add_argument("--start-pairs", type=int, default=3, help="cold and warm runs of the aquifer demo (medians)")
    args = parser.parse_args()
    if args.dask_only:
        tmp = Path(tempfile.mkdtemp(prefix="geosim-bench-block-"))
        try:
            print(json.dumps({"dask_equals_serial": dask_equals_serial(tmp, args.per_path)}))
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
        return
    n = 20 if args.quick else args.realizations
    tmp = Path(tempfile.mkdtemp(prefix="geosim-bench-block-"))
    try:
        pairs = []
        for k in range(max(1, args.start_pairs)):
            print(f"cold/warm start of the aquifer demo ... ({load()})", flush=True)
            pairs.append(cold_and_warm(tmp / f"start{k}"))
            print(f"  cold {pairs[-1][0]:.1f} s, warm {pairs[-1][1]:.1f} s ({load()})", flush=True)
        cold, warm = (float(np.median(side)) for side in zip(*pairs))
        fewer = None
        if not args.quick:
            (tmp / "fewer").mkdir()
            from geosim.simulation.runner import AUTO_PER_PATH
            few = max(AUTO_PER_PATH if args.per_path == "auto" else int(args.per_path), n // 5)  # whole path groups
            fewer = run_case(tmp / "fewer", few, args.per_path, args.workers, tuple(args.shape))
            print(f"  {few} realizations: {fewer['total_s']:.1f} s, peak RSS "
                  f"{fewer['peak_rss_mib']:.0f} MiB ({load()})", flush=True)
            shutil.rmtree(tmp / "fewer")
        (tmp / "main").mkdir()
        print(f"block model, {n} realizations ... ({load()})", flush=True)
        main_run = run_case(tmp / "main", n, args.per_path, args.workers, tuple(args.shape))
        t = main_run["timings"]
        print(f"  {main_run['total_s']:.1f} s; steps: " + ", ".join(f"{k} {v:.1f} s" for k, v in t.items())
              + f" ({load()})", flush=True)
        shutil.rmtree(tmp / "main")
        same = None
        if not args.quick:
            (tmp / "dask").mkdir()
            same = dask_equals_serial(tmp / "dask", args.per_path)
            print(f"  dask scheduler + 2 workers equal to serial: {same} ({load()})", flush=True)
        nodes = main_run["active_nodes"]
        figures = {
            "active_nodes": nodes,
            "realizations": n,
            "realizations_per_path": args.per_path,
            "workers": args.workers,
            "end_to_end_s": round(main_run["total_s"], 2),
            "core_us_per_node_realization": round(main_run["total_s"] * args.workers * 1e6 / (nodes * n), 3),
            "cpu_s": round(main_run["cpu_s"], 1),
            "cpu_us_per_node_realization": round(main_run["cpu_s"] * 1e6 / (nodes * n), 3),
            "simulation_s": round(t["simulation"], 2),
            "summaries_s": round(t["summaries and report"], 2),
            "summaries_fraction": round(t["summaries and report"] / main_run["total_s"], 3),
            "writing_s": None,  # not separated from simulation_s: the workers write as they go
            "peak_rss_mib": round(main_run["peak_rss_mib"], 1),
            "peak_rss_mib_fewer": None if fewer is None else round(fewer["peak_rss_mib"], 1),
            "cold_first_run_s": round(cold, 2),
            "warm_run_s": round(warm, 2),
            "cold_warm_pairs": [[round(c, 2), round(w, 2)] for c, w in pairs],
            "dask_equals_serial": same,
            "load_end": open("/proc/loadavg").read().split()[:3],
        }
        print(json.dumps(figures))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
