"""Time that block averaging and upscaling add to a run, on the two sample fields.

Each sample spec is run whole (``geosim.pipeline.run``: data, variogram fit,
cross-validation, kriging, realizations, summaries, report) three times in each
configuration, alternating, one worker (so the whole run is in this process),
into fresh folders.  Times are the process's CPU time (all its
threads), which other jobs on a shared machine disturb far less than wall time;
the best of three of each is compared.  Three configurations: no change of
support, block averaging or upscaling only, and ranking and points as well.
The ore prospect runs again on a grid eight times finer with the same blocks,
where simulation, not file writing, dominates as in real jobs.

Run: ``python tests/benchmarks/bench_support.py [--realizations N] [--quick]``; the last
line is JSON.
"""
from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import geosim.pipeline as pipeline
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


def whole_run(spec_path: Path, realizations: int, leave_out: dict, more: dict, folder: Path) -> float:
    # a None value removes the key, so what a configuration leaves out wins over the case's settings
    overrides = {"simulation.workers": 1, "simulation.realizations": realizations, **more, **leave_out}
    spec = load_spec(spec_path, overrides)
    t = time.process_time()
    pipeline.run(spec, folder)
    return time.process_time() - t


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--realizations", type=int, default=None,
                        help="realizations per run (default: the sample spec's own)")
    parser.add_argument("--quick", action="store_true", help="the two sample fields only, not the finer ore grid")
    args = parser.parse_args(argv)
    results = {}
    for sample, label, more in CASES[:2] if args.quick else CASES:
        spec_path = SAMPLES / sample / "run.toml"
        n = args.realizations or load_spec(spec_path)["simulation.realizations"]
        times: dict[str, list[float]] = {name: [] for name in CONFIGS}
        with tempfile.TemporaryDirectory() as tmp:
            whole_run(spec_path, 2, {}, more, Path(tmp) / "warm")  # numba caches and imports, not timed
            for rep in range(3):
                for name, leave_out in CONFIGS.items():
                    times[name].append(whole_run(spec_path, n, leave_out, more, Path(tmp) / f"{name}-{rep}"))
        best = {name: min(t) for name, t in times.items()}
        added = {name: round(100.0 * (best[name] - best["none"]) / best["none"], 1) for name in CONFIGS}
        results[label] = {"realizations": n, "cpu_s": {k: round(v, 2) for k, v in best.items()},
                          "added_percent": added, "all_runs_cpu_s": {k: [round(t, 2) for t in v]
                                                                     for k, v in times.items()}}
        print(f"{label}: {n} realizations, whole run {best['none']:.1f} s CPU without change of support; "
              f"+{added['blocks or upscaling']:.1f} % with blocks or upscaling, +{added['all']:.1f} % with "
              "ranking and points as well")
    print(json.dumps(results))


if __name__ == "__main__":
    main()
