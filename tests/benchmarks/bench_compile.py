"""What a first run compiles, where and for how long; prints figures, the last line one JSON object.

Run:  python tests/benchmarks/bench_compile.py [--repeats 3] [--pairs 3] [--skip-run]

Two parts, each in fresh processes with an empty numba cache (``NUMBA_CACHE_DIR`` pointing
at a new folder), because a cache filled once makes every later figure a load time:

* **Kernels**: what a first run of the aquifer demo compiles (the sequential engine's
  simple-kriging single-path kernel, simple kriging, the moments), the summary kernel and the
  variogram pair loop that larger runs compile, in one process; numba's compile events
  (``numba.core.event``, "numba:compile") give the thread CPU seconds of each top-level
  kernel's compile, callees included.  ``--repeats`` fresh processes; the minimum per kernel
  is reported (other jobs on a shared machine only add to CPU time).
* **A cold run**: ``geosim run`` of the aquifer demo (coarsened, 20 realizations, 2 workers) with
  an empty, then the filled cache, ``--pairs`` times: wall seconds, the cold/warm ratio, and
  which process compiled which kernel (the main process, the two compiling-ahead processes,
  the pool workers), recorded through a ``sitecustomize`` module placed first on
  ``PYTHONPATH`` that listens to the same events in every Python process of the run.

The machine's load averages are printed beside the figures.
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
AQUIFER = ROOT / "sample_fields" / "alluvial_aquifer" / "run.toml"
SMALL = ["--set", "simulation.realizations=20", "--set", "grid.cell=[50.0, 50.0]", "--workers", "2"]

# installed in every Python process of a measured run: each top-level compile as one JSON line
LISTENER = '''
import json, os, sys, time
_folder = os.environ.get("GEOSIM_COMPILE_LOG")
if _folder:
    import importlib.abc, importlib.util
    _STARTED_AS = os.getpid()  # a process forked later (a compiling process) has another pid

    def _record(entry):
        entry.update(pid=os.getpid(), forked=os.getpid() != _STARTED_AS)
        with open(os.path.join(_folder, f"{os.getpid()}.jsonl"), "a") as f:
            f.write(json.dumps(entry) + "\\n")

    def _listen():
        from numba.core import event
        open_compiles = []

        class Listener(event.Listener):
            def on_start(self, ev):
                open_compiles.append(time.thread_time())

            def on_end(self, ev):
                cpu = time.thread_time() - open_compiles.pop()
                func = getattr((ev.data or {}).get("dispatcher"), "py_func", None)
                if func is not None and not open_compiles:
                    _record({"kernel": f"{func.__module__}.{func.__qualname__}", "cpu": cpu, "t": time.time(),
                             "argv": " ".join(sys.orig_argv[1:])[:300]})
        event.register("numba:compile", Listener())

    class _AfterNumbaEvents(importlib.abc.MetaPathFinder):
        # numba.core.event is imported with numba: listen from then on, importing nothing sooner
        def find_spec(self, name, path, target=None):
            if name != "numba.core.event":
                return None
            sys.meta_path.remove(self)
            spec = importlib.util.find_spec(name)
            run = spec.loader.exec_module

            def exec_module(module):
                run(module)
                _listen()
            spec.loader.exec_module = exec_module
            return spec
    sys.meta_path.insert(0, _AfterNumbaEvents())
'''

# what a first run of the aquifer demo compiles ahead (simple kriging, one path per realization), and the
# summary kernel that runs of at least summaries.COMPILED_BANDS_FROM values compile too
WARM_UPS = ("from geosim.simulation.sequential import SequentialEngine; import geosim.kriging, geosim.moments; "
            "import geosim.summaries, geosim.variogram.experimental; SequentialEngine().warm_up(); "
            "geosim.kriging.warm_up(('simple',)); geosim.moments.warm_up(); geosim.summaries.warm_up(); "
            "import numpy as np; from geosim.variogram.pairs import accumulate_directional as pairs; "
            "pairs(np.zeros((2, 3)), np.zeros(2), np.full(2, 2), 0, 2, np.zeros((1, 14)), 1.0, 0.5, 2, 1.0, False, "
            "*np.zeros((3, 1, 2)))")


def load() -> str:
    return "load " + " ".join(open("/proc/loadavg").read().split()[:3])


def records(folder: Path) -> list[dict]:
    return [json.loads(line) for f in sorted(folder.glob("*.jsonl")) for line in f.read_text().splitlines()]


def environment(folder: Path) -> dict:
    site = folder / "site"
    site.mkdir(parents=True, exist_ok=True)
    (site / "sitecustomize.py").write_text(LISTENER)
    (folder / "log").mkdir(exist_ok=True)
    return {**os.environ, "NUMBA_CACHE_DIR": str(folder / "numba-cache"), "GEOSIM_COMPILE_LOG": str(folder / "log"),
            "PYTHONPATH": os.pathsep.join([str(site)] + [p for p in [os.environ.get("PYTHONPATH")] if p])}


def kernels(repeats: int) -> dict[str, float]:
    """Minimum compile CPU seconds per top-level kernel of the warm-ups, over ``repeats`` processes."""
    best: dict[str, float] = {}
    for _ in range(repeats):
        folder = Path(tempfile.mkdtemp())
        try:
            out = subprocess.run([sys.executable, "-c", WARM_UPS], env=environment(folder), capture_output=True,
                                 text=True, timeout=900)
            if out.returncode != 0:
                raise RuntimeError(out.stderr[-2000:])
            for r in records(folder / "log"):
                best[r["kernel"]] = min(best.get(r["kernel"], float("inf")), r["cpu"])
        finally:
            shutil.rmtree(folder)
        print(f"kernels: {sum(best.values()):.2f} s CPU so far ({load()})", flush=True)
    return dict(sorted(best.items(), key=lambda kv: -kv[1]))


def role(record: dict, forks: list[int]) -> str:
    """Which process of a run compiled ``record``: a fork of the main process (the compiling processes
    where they are forks; ``forks`` numbers them in the order they first compiled), or one known by
    its command line (``sys.orig_argv``)."""
    argv = record["argv"]
    if record.get("forked"):
        if record["pid"] not in forks:
            forks.append(record["pid"])
        return f"ahead: fork {forks.index(record['pid']) + 1}"
    if "warm_up_engine" in argv:  # every process imports warm_up_more; the engine's calls it
        return "ahead: engine" if "warm_up_more(" in argv or "SequentialEngine" in argv else "ahead: modules"
    if "forkserver" in argv or "spawn_main" in argv:
        return "pool worker"
    return "main" if " run " in f" {argv} " else "other"


def geosim_run(out: Path, env: dict) -> float:
    script = Path(sys.executable).with_name("geosim")
    cmd = [str(script)] if script.is_file() else [sys.executable, "-m", "geosim_cli.main"]
    t0 = time.perf_counter()
    done = subprocess.run(cmd + ["run", str(AQUIFER), "--out", str(out), *SMALL], env=env, capture_output=True,
                          text=True, timeout=900)
    if done.returncode != 0:
        raise RuntimeError(done.stderr[-2000:])
    return time.perf_counter() - t0


def cold_runs(pairs: int) -> dict:
    figures = []
    for _ in range(pairs):
        folder = Path(tempfile.mkdtemp())
        try:
            env = environment(folder)
            cold = geosim_run(folder / "cold", env)
            compiled: dict[str, dict[str, float]] = {}
            forks: list[int] = []
            for r in sorted(records(folder / "log"), key=lambda r: r.get("t", 0.0)):
                where = compiled.setdefault(role(r, forks), {})
                where[r["kernel"]] = round(where.get(r["kernel"], 0.0) + r["cpu"], 2)
            shutil.rmtree(folder / "log")
            (folder / "log").mkdir()
            warm = geosim_run(folder / "warm", env)
            recompiled = sorted({r["kernel"] for r in records(folder / "log")})
        finally:
            shutil.rmtree(folder)
        figures.append({"cold_s": round(cold, 2), "warm_s": round(warm, 2), "ratio": round(cold / warm, 2),
                        "load": load(), "compiled_by": compiled, "compiled_when_warm": recompiled})
        print(json.dumps(figures[-1]), flush=True)
    return {"runs": figures}


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3, help="fresh processes for the kernel figures")
    parser.add_argument("--pairs", type=int, default=3, help="cold + warm runs of the aquifer demo")
    parser.add_argument("--skip-run", action="store_true", help="only the kernel figures")
    args = parser.parse_args()
    result = {"kernel_compile_cpu_s": {k: round(v, 2) for k, v in kernels(args.repeats).items()}}
    result["total_compile_cpu_s"] = round(sum(result["kernel_compile_cpu_s"].values()), 2)
    for name, cpu in result["kernel_compile_cpu_s"].items():
        print(f"  {cpu:6.2f} s  {name}")
    if not args.skip_run:
        result.update(cold_runs(args.pairs))
    result["load"] = load()
    print(json.dumps(result))


if __name__ == "__main__":
    main()
