"""Time that block averaging and upscaling add to a run, on the two sample fields.

Each sample spec is run whole (``geosim.pipeline.run``: data, variogram fit,
cross-validation, kriging, realizations, summaries, report) ``--repeats`` times
(default 5) in each configuration, alternating, one worker (so the whole run is
in this process), into fresh folders.  Times are the process's CPU time (all its
threads), which other jobs on a shared machine disturb far less than wall time.
The added time is given from the medians and from the best runs, with the
spread (lowest to highest) of each configuration beside it, since one busy
minute on a shared machine moves a single run by more than the effect measured.
Three configurations: no change of support, block averaging or upscaling only,
and ranking and points as well.

Because the difference of two noisy totals is itself noisy, the change-of-support
code is also timed inside each run: the CPU seconds spent in the support sinks
(averaging and writing each realization, in the worker), their assembly at the
end (cubes, summaries, tables), ranking, points and the support plots, as a share
of the same run's CPU time.
The ore prospect runs again on a grid eight times finer with the same blocks,
where simulation, not file writing, dominates as in real jobs.

Run: ``python tests/benchmarks/bench_support.py [--realizations N] [--quick]``; the last
line is JSON.
"""
from __future__ import annotations

import argparse
import json
import statistics
import tempfile
import time
from pathlib import Path

import geosim.pipeline as pipeline
import geosim.support_outputs as support_outputs
from geosim.config.runspec import load_spec

SAMPLES = Path(__file__).resolve().parents[2] / "sample_fields"
NO_RANKING = {"ranking.figure": None, "ranking.cutoff": None, "ranking.support": None, "query_points.file": None,
              "query_points.x": None, "query_points.y": None, "query_points.z": None, "query_points.id": None}
NO_SUPPORT = {"blocks.cells": None, "upscaling.cells": None, "upscaling.exponent": None}
# what each run leaves out: everything, ranking and points only, nothing
CONFIGS = {"none": {**NO_RANKING, **NO_SUPPORT}, "blocks or upscaling": NO_RANKING, "all": {}}
# sample field, label, overrides: the ore prospect also on a grid 8 times finer (same 30 x 30 x 10 m blocks)
CASES = [("alluvial_aquifer", "aquifer", {}),
         ("ore_prospect", "ore", {}),
         ("ore_prospect", "ore, 7.5 x 7.5 x 5 m cells", {"grid.cell": [7.5, 7.5, 5.0], "blocks.cells": [4, 4, 2]})]


# the change-of-support code of a run: (owner, attribute, what it does)
TIMED = [(support_outputs.SupportWriter, "__call__", "block or upscaled values and files, per realization"),
         (support_outputs.SupportWriter, "finish", "block or upscaled cubes, summaries and tables"),
         (support_outputs.PointSampler, "__call__", "values at points"),
         (support_outputs.PointSampler, "finish", "values at points"),
         (support_outputs.FigureProbe, "__call__", "ranking figure"),
         (support_outputs.Ranker, "__call__", "ranking table and copies"),
         (support_outputs.Ranker, "summary", "ranking table and copies")]
# functions of the job modules, looked up by name where they live: the support plots, the report's section
JOB = {"_support_plots": "support plots", "_support_report": "report section", "support_report": "report section",
       "support_plots": "support plots"}


def instrument(spent: dict[str, float]) -> None:
    """Wrap the change-of-support code so the CPU seconds spent in it add up in ``spent``."""
    import functools
    import importlib

    def timed(func, what):
        @functools.wraps(func)
        def wrapper(*args, **kwargs):
            t = time.process_time()
            try:
                return func(*args, **kwargs)
            finally:
                spent[what] = spent.get(what, 0.0) + time.process_time() - t
        return wrapper

    for owner, name, what in TIMED:
        setattr(owner, name, timed(getattr(owner, name), what))
    import geosim.support
    geosim.support.block_layout = timed(geosim.support.block_layout, "block layouts")  # imported at each use
    for module in ("geosim.pipeline", "geosim.outputs"):
        try:
            m = importlib.import_module(module)
        except ImportError:
            continue
        for name, what in JOB.items():
            if hasattr(m, name):
                setattr(m, name, timed(getattr(m, name), what))


SPENT: dict[str, float] = {}


def whole_run(spec_path: Path, realizations: int, leave_out: dict, more: dict, folder: Path,
              steps: dict | None = None) -> float:
    """CPU seconds of one whole run; the wall seconds of its steps are appended to ``steps``."""
    # a None value removes the key, so what a configuration leaves out wins over the case's settings
    overrides = {"simulation.workers": 1, "simulation.realizations": realizations, **more, **leave_out}
    spec = load_spec(spec_path, overrides)
    SPENT.clear()
    t = time.process_time()
    result = pipeline.run(spec, folder)
    cpu = time.process_time() - t
    if steps is not None:
        steps.setdefault("support code, % of the run", []).append(100.0 * sum(SPENT.values()) / cpu)
        for what, seconds in SPENT.items():
            steps.setdefault(f"support code: {what} (CPU s)", []).append(seconds)
    for step, seconds in result.timings.items():
        (steps if steps is not None else {}).setdefault(f"{step} (wall s)", []).append(seconds)
    return cpu


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--realizations", type=int, default=None,
                        help="realizations per run (default: the sample spec's own)")
    parser.add_argument("--quick", action="store_true", help="the two sample fields only, not the finer ore grid")
    parser.add_argument("--repeats", type=int, default=5, help="runs of each configuration (default 5)")
    args = parser.parse_args(argv)
    instrument(SPENT)
    results = {}
    for sample, label, more in CASES[:2] if args.quick else CASES:
        spec_path = SAMPLES / sample / "run.toml"
        n = args.realizations or load_spec(spec_path)["simulation.realizations"]
        times: dict[str, list[float]] = {name: [] for name in CONFIGS}
        steps: dict[str, dict] = {name: {} for name in CONFIGS}
        with tempfile.TemporaryDirectory() as tmp:
            whole_run(spec_path, 2, {}, more, Path(tmp) / "warm")  # numba caches and imports, not timed
            for rep in range(args.repeats):
                for name, leave_out in CONFIGS.items():
                    times[name].append(whole_run(spec_path, n, leave_out, more, Path(tmp) / f"{name}-{rep}",
                                                 steps[name]))
        best = {name: min(t) for name, t in times.items()}
        median = {name: statistics.median(t) for name, t in times.items()}
        added = {name: round(100.0 * (median[name] - median["none"]) / median["none"], 1) for name in CONFIGS}
        added_best = {name: round(100.0 * (best[name] - best["none"]) / best["none"], 1) for name in CONFIGS}
        results[label] = {"realizations": n, "cpu_s_median": {k: round(v, 2) for k, v in median.items()},
                          "cpu_s_best": {k: round(v, 2) for k, v in best.items()},
                          "added_percent_median": added, "added_percent_best": added_best,
                          "all_runs_cpu_s": {k: [round(t, 2) for t in v] for k, v in times.items()},
                          # where the time goes: the steps of each run (wall s) and the change-of-support
                          # code inside it (CPU s, and its share of the run's CPU time)
                          "steps_median": {k: {step: round(statistics.median(t), 2) for step, t in v.items()}
                                           for k, v in steps.items()}}
        spread = ", ".join(f"{k} {min(v):.1f}-{max(v):.1f}" for k, v in times.items())
        print(f"{label}: {n} realizations, whole run {median['none']:.1f} s CPU (median) without change of "
              f"support; {added['blocks or upscaling']:+.1f} % with blocks or upscaling "
              f"(best runs: {added_best['blocks or upscaling']:+.1f} %), {added['all']:+.1f} % with ranking and "
              f"points as well (best: {added_best['all']:+.1f} %); spread of the runs (s): {spread}")
        for name in ("blocks or upscaling", "all"):
            share = steps[name]["support code, % of the run"]
            print(f"  {name}: change-of-support code {statistics.median(share):.1f} % of the run's CPU time "
                  f"(median; {min(share):.1f}-{max(share):.1f} %)")
    print(json.dumps(results))


if __name__ == "__main__":
    main()
