"""Cost and memory of the sequential kernel with realizations sharing a path (prints figures).

The block model of ``bench_blockmodel.py`` (an invented case: 3,000 composites, nested
anisotropic model, 16 data + 16 nodes) is prepared once; then ``SequentialEngine.realize_batch``
runs with groups of 1, 25 and 50 members sharing one path, every member taken (copied out) as a
worker hands it to its sink.  For each group size it prints CPU seconds (``time.process_time``
of this one-threaded process, so other jobs on a shared machine inflate it less than wall
time), CPU microseconds per node and per node and realization, and the machine's load.  The
last line is one JSON object; ``peak_rss_mib`` is this process's largest resident set (VmHWM),
reached with the largest group.

    python tests/benchmarks/bench_shared_path.py [--shape NZ NY NX] [--members 1 25 50] [--repeat 1]

The default shape 20 100 200 has 400,000 nodes; 50 100 200 is the million-node block model.
"""
from __future__ import annotations

import argparse
import json
import resource
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_blockmodel  # noqa: E402  (the case is built by the whole-job benchmark)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--shape", type=int, nargs=3, default=(20, 100, 200), metavar=("NZ", "NY", "NX"))
    parser.add_argument("--members", type=int, nargs="+", default=[1, 25, 50])
    parser.add_argument("--repeat", type=int, default=1, help="runs of each group size (the least CPU is kept)")
    args = parser.parse_args(argv)
    import geosim.pipeline as pipeline
    from geosim.config.runspec import load_spec
    from geosim.simulation.runner import path_rng, realization_rng
    from geosim.simulation.sequential import SequentialEngine

    spec = load_spec(bench_blockmodel.make_case(Path(tempfile.mkdtemp()), 2, 1, 1, tuple(args.shape)))
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    engine = SequentialEngine()
    plan = engine.prepare(data.coords, data.scores, pipeline.given_model(spec, data), grid,
                          neighbourhood=pipeline.neighbourhood(spec), hole_ids=data.samples.hole_ids)
    engine.warm_up(shared_path=True)  # the kernel of batches sharing a path
    nodes = grid.n_active
    print(f"{nodes:,} active nodes, {len(data.scores):,} data ({bench_blockmodel.load()})", flush=True)
    figures = {}
    for members in args.members:
        best = None
        for _ in range(args.repeat):
            c0 = time.process_time()
            fields = engine.realize_batch(plan, path_rng(1, 0), [realization_rng(1, i) for i in range(members)])
            for k in range(members):
                field = fields[k]  # as run_group hands each member to the sink
                del field
            del fields
            cpu = time.process_time() - c0
            best = cpu if best is None else min(best, cpu)
        per_node = best * 1e6 / nodes
        figures[str(members)] = {"cpu_s": round(best, 3), "cpu_us_per_node": round(per_node, 3),
                                 "cpu_us_per_node_realization": round(per_node / members, 4)}
        print(f"{members:3d} members: {best:.2f} CPU s, {per_node:.2f} CPU us per node, "
              f"{per_node / members:.3f} per node and realization ({bench_blockmodel.load()})", flush=True)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps({"active_nodes": nodes, "members": figures, "peak_rss_mib": round(peak, 1),
                      "load": bench_blockmodel.load()}))


if __name__ == "__main__":
    main()
