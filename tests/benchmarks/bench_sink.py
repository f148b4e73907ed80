"""Benchmark of the per-realization work in a worker (the sink); prints figures, the last line one JSON object.

Run:  python tests/benchmarks/bench_sink.py [--shape NZ NY NX] [--calls 20] [--members 4] [--profile]

Every realization a worker finishes goes through the run's sink: the realization writer
(back-transform of the active values, float32 rounding, the realization store's chunk
writes and SHA-256, the decision figures, the run checks) and the run-state record.  This
script builds the invented block model of ``bench_blockmodel.py`` (by default 20 x 100 x 200
= 400,000 active nodes, the same data, model and outputs), computes ``--members`` realizations
of one shared path with the sequential engine, and calls the run's own sink
(``geosim.outputs.realization_writer`` wrapped in ``geosim.runstate.RecordingSink``, its
store opened as ``geosim.pipeline.simulate_into`` opens it) ``--calls`` times on them, one
process, no worker pool.

Figures: ``sink_us_per_node_realization`` (wall) and ``sink_cpu_us_per_node_realization``
(CPU seconds of this process, which other jobs on a shared machine do not inflate), and
the same per part of the sink (back-transform, store write, figures, checks, record:
``parts_us_per_node_realization``, cumulative times from cProfile over the same calls made
again, in CPU seconds of this process; the profiler adds a little of its own).  With ``--profile`` the
listing is printed too.  With ``--codecs`` the chunks of the stored realizations are compressed again with
the store's codec (zstd at zarr's default level) and with cheaper ones, and the encode and decode CPU time
per node and the compressed size are printed (``codecs`` in the JSON line).  ``uptime`` load
averages are printed beside the figures.
"""
from __future__ import annotations

import argparse
import cProfile
import json
import pstats
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import bench_blockmodel as block  # noqa: E402


def build(folder: Path, shape, members: int):
    """The run's sink on the block model, its grid, and ``members`` realizations (normal scores)."""
    import geosim.pipeline as gp
    from geosim.config.runspec import load_spec
    from geosim.outputs import realization_writer
    from geosim.runstate import RecordingSink
    from geosim.simulation.runner import path_rng, realization_rng
    from geosim.simulation.sequential import SequentialEngine
    spec = load_spec(block.make_case(folder, 100, 25, 1, shape))
    data = gp.prepare_data(spec)
    grid = gp.make_grid(spec, data)
    model = gp.given_model(spec, data)
    engine = SequentialEngine()
    plan = engine.prepare(data.coords, data.scores, model, grid, neighbourhood=gp.neighbourhood(spec),
                          hole_ids=data.samples.hole_ids)
    fields = engine.realize_batch(plan, path_rng(16016, 0), [realization_rng(16016, i) for i in range(members)])
    out = folder / "out"
    out.mkdir()
    (out / "run-state").mkdir()
    writer = realization_writer(spec, data, model, grid, out)
    writer.measure._ahead.join()  # the checks' tolerances are computed on a thread: not the sink's work
    return writer, RecordingSink(writer, out / "run-state", "bench", 16016), grid, fields


#: the sink's parts: (file name ending, function name) as cProfile sees them
PARTS = {"back_transform": ("transforms.py", "inverse"), "store_write": ("cube.py", "write"),
         "figures": ("outputs.py", "_grade_tonnage"), "checks": ("validation.py", "__call__"),
         "record": ("runstate.py", "_write_json")}


def parts(stats: pstats.Stats, seconds_to_us: float) -> dict:
    """Cumulative time of each of :data:`PARTS` in a profile, per node and realization."""
    out = {}
    for part, (file, name) in PARTS.items():
        spent = sum(v[3] for (f, _, n), v in stats.stats.items() if f.endswith(file) and n == name)
        out[part] = round(spent * seconds_to_us, 4)
    return out


def codecs(store, count: int) -> dict:
    """Encode and decode CPU ns per node and compressed size (share of raw) of the first ``count``
    stored realizations' chunks (one level each) with the store's codec and cheaper ones."""
    from numcodecs import Blosc, Zstd
    chunks = [np.ascontiguousarray(level) for i in range(count) for level in store.read(i).reshape(
        (-1,) + store.grid.shape[-2:])]
    nodes = sum(c.size for c in chunks)
    out = {}
    for name, codec in [("zstd level 0 (zarr's default, the store's)", Zstd(level=0)), ("zstd level 1", Zstd(level=1)),
                        ("blosc lz4 + shuffle", Blosc(cname="lz4", clevel=5, shuffle=Blosc.SHUFFLE))]:
        codec.encode(chunks[0])
        t = time.process_time()
        encoded = [codec.encode(c) for c in chunks]
        encode = time.process_time() - t
        t = time.process_time()
        for e in encoded:
            codec.decode(e)
        decode = time.process_time() - t
        out[name] = {"encode_ns_per_node": round(encode * 1e9 / nodes, 1), "decode_ns_per_node": round(
            decode * 1e9 / nodes, 1), "size_of_raw": round(sum(len(e) for e in encoded) / (4 * nodes), 3)}
        print(f"  {name}: {out[name]}", flush=True)
    return out


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shape", type=int, nargs=3, default=(20, 100, 200), metavar=("NZ", "NY", "NX"))
    parser.add_argument("--calls", type=int, default=20, help="sink calls timed (realization indices 0..calls-1)")
    parser.add_argument("--members", type=int, default=4, help="distinct realizations the calls cycle through")
    parser.add_argument("--profile", action="store_true", help="print the cProfile listing of the calls")
    parser.add_argument("--codecs", action="store_true", help="compare store codecs on the stored chunks")
    args = parser.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="geosim-bench-sink-"))
    try:
        writer, sink, grid, fields = build(tmp, tuple(args.shape), args.members)
        writer.open_stores(args.calls)
        sink(0, fields[0])  # first call: imports (zarr, hashlib) and compiling, not counted
        writer.open_stores(args.calls)
        print(f"{grid.n_active} active nodes, {args.calls} sink calls ({block.load()})", flush=True)
        t, c = time.perf_counter(), time.process_time()
        for i in range(args.calls):
            sink(i, fields[i % len(fields)])
        wall, cpu = time.perf_counter() - t, time.process_time() - c
        per = 1e6 / (grid.n_active * args.calls)
        result = {"active_nodes": int(grid.n_active), "calls": args.calls, "sink_s": round(wall, 3),
                  "sink_cpu_s": round(cpu, 3), "sink_us_per_node_realization": round(wall * per, 4),
                  "sink_cpu_us_per_node_realization": round(cpu * per, 4)}
        print(f"  sink {wall:.2f} s wall, {cpu:.2f} s CPU: {wall * per:.3f} us (wall), {cpu * per:.3f} us (CPU) "
              f"per node and realization ({block.load()})", flush=True)
        # the same calls again under cProfile, for the parts (the profiler adds its own overhead)
        writer.open_stores(args.calls)
        profile = cProfile.Profile(time.process_time)  # CPU seconds: other jobs on the machine do not inflate them
        profile.enable()
        for i in range(args.calls):
            sink(i, fields[i % len(fields)])
        profile.disable()
        stats = pstats.Stats(profile)
        result["parts_us_per_node_realization"] = parts(stats, per)
        if args.profile:
            stats.sort_stats("tottime").print_stats(25)
        if args.codecs:
            result["codecs"] = codecs(writer.store, min(args.calls, 4))
        result["load"] = block.load()
        print(json.dumps(result))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
