"""Cost of a run of several units with and without shared paths, on the aquifer's two-unit sample
(prints figures).

CPU seconds per realization and CPU microseconds per node (``time.process_time``, so the load of a
shared machine counts less than in wall time), one worker, of the joined simulation (both units,
each its own plan) with a path per realization and with ``realizations_per_path`` of 10, side by side
in one run.

    python tests/benchmarks/bench_units.py [--realizations N] [--cell METRES]
"""
import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

import geosim.units_run as units_run
from geosim.config.runspec import load_spec
from geosim.demo import copy_sample
from geosim.simulation import simulate


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--realizations", type=int, default=20)
    parser.add_argument("--cell", type=float, default=25.0)
    args = parser.parse_args(argv)
    folder = copy_sample("alluvial_aquifer", Path(tempfile.mkdtemp()) / "aquifer")
    spec = load_spec(folder / "run_units.toml", {"grid.cell": [args.cell, args.cell]})
    units = units_run.prepare_units(spec)
    units_run.fit_units(units)
    grid = units.modelled_grid
    common = dict(seed=1, engine=units_run.UnitsEngine("sequential"), workers=1,
                  parts=units_run._parts(spec, units), node_codes=units.node_codes)
    coords, zeros = units.samples.coords, np.zeros(len(units.samples))
    sizes = ", ".join(f"{p.name} {p.grid.n_active:,}" for p in units.pieces.values())
    print(f"{grid.n_active:,} nodes of modelled units ({sizes}), {len(units.samples)} samples")
    simulate(coords, zeros, None, grid, n_realizations=2, realizations_per_path=2, **common)  # compiles
    cpu = {}
    for per_path in (1, 10):
        t0 = time.process_time()
        simulate(coords, zeros, None, grid, n_realizations=args.realizations, realizations_per_path=per_path,
                 **common)
        cpu[per_path] = (time.process_time() - t0) / args.realizations
        print(f"realizations_per_path = {per_path}: {cpu[per_path]:.3f} CPU s per realization, "
              f"{cpu[per_path] / grid.n_active * 1e6:.1f} CPU us per node")
    print(f"shared paths: {cpu[1] / cpu[10]:.1f} times faster per realization")


if __name__ == "__main__":
    main()
