"""Cost of a collocated secondary in the sequential engine, on the aquifer sample (prints figures).

CPU seconds per realization and CPU microseconds per node (``time.process_time``, so the load of a
shared machine counts less than in wall time), one worker, for: the primary alone, the collocated
value alone (``secondary_nodes = 0``) and the default (the secondary of 16 nodes not yet simulated
in each node's system as well).

    python tests/benchmarks/bench_secondary.py [--realizations N]
"""
import argparse
import tempfile
import time
from pathlib import Path

import geosim.pipeline as pipeline
from geosim.config.runspec import load_spec
from geosim.demo import copy_sample
from geosim.secondary import secondary_grid
from geosim.simulation import simulate


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--realizations", type=int, default=4)
    n = parser.parse_args(argv).realizations
    folder = copy_sample("alluvial_aquifer", Path(tempfile.mkdtemp()) / "aquifer")
    spec = load_spec(folder / "run_secondary.toml")
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    model = pipeline.variogram_model(spec, data).model
    sec = secondary_grid(spec, data.samples, data.scores, grid)
    nb = pipeline.neighbourhood(spec)
    cases = (("primary only", {}),
             ("collocated value only", dict(sec.engine_options("sequential"), secondary_nodes=0)),
             (f"secondary of {spec['secondary.nodes']} nodes", sec.engine_options("sequential")))
    print(f"{grid.n_active:,} active nodes, {len(data.values)} samples, correlation {sec.correlation:.3f}")
    for label, options in cases:
        simulate(data.coords, data.scores, model, grid, n_realizations=1, seed=1, neighbourhood=nb, workers=1,
                 **options)  # compiles
        t0 = time.process_time()
        simulate(data.coords, data.scores, model, grid, n_realizations=n, seed=1, neighbourhood=nb, workers=1,
                 **options)
        cpu = (time.process_time() - t0) / n
        print(f"{label}: {cpu:.3f} CPU s per realization, {cpu / grid.n_active * 1e6:.1f} CPU us per node")


if __name__ == "__main__":
    main()
