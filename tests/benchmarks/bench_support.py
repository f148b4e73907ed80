"""Time that block averaging and upscaling add to a run, on the two sample fields.

Each sample spec is run whole (``geosim.pipeline.run``: data, variogram fit,
cross-validation, kriging, realizations, summaries, report) twice with its
change-of-support sections and twice without them (no [blocks], [upscaling],
[ranking], [query_points]), alternating, one worker (so the whole run is in
this process), into fresh folders.  Times are the process's CPU time (all its
threads), which other jobs on a shared machine disturb far less than wall time;
the best of three of each is compared.  It also
times the per-realization work alone: the block or power average of one
realization and the writing of its block GeoTIFF, against the simulation and
writing of the point-support realization.

Run: ``python tests/benchmarks/bench_support.py [--realizations N]``; the last
line is JSON.
"""
from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import numpy as np

import geosim.pipeline as pipeline
from geosim.config.runspec import load_spec

SAMPLES = Path(__file__).resolve().parents[2] / "sample_fields"
WITHOUT = {"blocks.cells": None, "upscaling.cells": None, "upscaling.exponent": None, "ranking.figure": None,
           "ranking.cutoff": None, "ranking.support": None, "query_points.file": None, "query_points.x": None,
           "query_points.y": None, "query_points.z": None, "query_points.id": None}


def whole_run(spec_path: Path, realizations: int, with_support: bool, folder: Path) -> float:
    overrides = {"simulation.workers": 1, "simulation.realizations": realizations}
    if not with_support:
        overrides.update(WITHOUT)
    spec = load_spec(spec_path, overrides)
    t = time.process_time()
    pipeline.run(spec, folder)
    return time.process_time() - t


def per_realization(spec_path: Path, folder: Path) -> dict:
    """Seconds for one realization at point support (engine + writer) and for each support sink."""
    from geosim.simulation import realization_rng
    from geosim.plugins import get

    spec = load_spec(spec_path, {"simulation.workers": 1})
    data = pipeline.prepare_data(spec)
    model = pipeline.variogram_model(spec, data).model
    grid = pipeline.make_grid(spec, data)
    writer = pipeline._writer(spec, data, model, grid, folder)
    engine = get("engines", "sequential")()
    prepared = engine.prepare(data.coords, data.scores, model, grid, neighbourhood=pipeline.neighbourhood(spec),
                              hole_ids=data.samples.hole_ids if spec["search.max_per_hole"] else None)
    field = engine.realize(prepared, realization_rng(spec["simulation.seed"], 0))  # compiles
    best = {}
    for i in range(1, 4):
        t = time.perf_counter()
        field = engine.realize(prepared, realization_rng(spec["simulation.seed"], i))
        best["simulate"] = min(best.get("simulate", np.inf), time.perf_counter() - t)
        derived, writer.derived = writer.derived, ()
        t = time.perf_counter()
        writer(i, field)
        best["write point support"] = min(best.get("write point support", np.inf), time.perf_counter() - t)
        writer.derived = derived
        values = field.copy()
        inside = ~np.isnan(field)
        values[inside] = data.transform.inverse(field[inside])
        for d in derived:
            t = time.perf_counter()
            d(i, values)
            best[d.name] = min(best.get(d.name, np.inf), time.perf_counter() - t)
    return {k: round(v, 4) for k, v in best.items()}


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--realizations", type=int, default=None,
                        help="realizations per run (default: the sample spec's own)")
    args = parser.parse_args(argv)
    results = {}
    for name in ("alluvial_aquifer", "ore_prospect"):
        spec_path = SAMPLES / name / "run.toml"
        n = args.realizations or load_spec(spec_path)["simulation.realizations"]
        times = {True: [], False: []}
        with tempfile.TemporaryDirectory() as tmp:
            whole_run(spec_path, 2, True, Path(tmp) / "warm")  # numba caches and imports, not timed
            for rep in range(3):
                for with_support in (False, True):
                    folder = Path(tmp) / f"{with_support}-{rep}"
                    times[with_support].append(whole_run(spec_path, n, with_support, folder))
            parts = per_realization(spec_path, Path(tmp) / "parts")
        without, with_ = min(times[False]), min(times[True])
        results[name] = {"realizations": n, "run_without_s": round(without, 2), "run_with_s": round(with_, 2),
                         "added_percent": round(100.0 * (with_ - without) / without, 1),
                         "all_runs_s": {k: [round(t, 2) for t in v] for k, v in
                                        (("without", times[False]), ("with", times[True]))},
                         "per_realization_s": parts}
        print(f"{name}: {n} realizations, whole run {without:.1f} s without change of support, {with_:.1f} s "
              f"with it (+{100.0 * (with_ - without) / without:.1f} %); one realization: "
              + ", ".join(f"{k} {v:.3f} s" for k, v in parts.items()))
    print(json.dumps(results))


if __name__ == "__main__":
    main()
