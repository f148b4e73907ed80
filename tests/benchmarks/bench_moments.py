"""Time of the multi-Gaussian moments (geosim.moments.multigaussian_moments) per million nodes.

Side by side in one run (the machine is shared; ratios are steadier than times): the
moments for transforms fitted to 80, 1,000 and 3,000 data, with and without a log step,
and with a Pareto upper tail; nodes next to data (standard deviation 0.1, few pieces
within reach, tails out of reach) and the tails alone (two data: one piece); the kriging of
the same nodes with 16 data for scale. Nodes: kriged scores N(0, 0.7^2), kriging
variances uniform in [0.05, 1]. CPU seconds of this process (``time.process_time``),
the best of three runs after a first call that compiles.

Run: ``python tests/benchmarks/bench_moments.py [--nodes N]``; the last line is JSON.
"""
from __future__ import annotations

import argparse
import json
import time

import numpy as np

import geosim
from geosim.kriging import krige
from geosim.moments import multigaussian_moments
from geosim.transforms import TransformChain


def _best(call, repeats: int = 3) -> float:
    best = np.inf
    for _ in range(repeats):
        t = time.process_time()
        call()
        best = min(best, time.process_time() - t)
    return best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nodes", type=int, default=100_000)
    nodes = parser.parse_args().nodes
    rng = np.random.default_rng(7)
    m = rng.normal(0.0, 0.7, nodes)
    v = rng.uniform(0.05, 1.0, nodes)
    figures = {}
    for n in (80, 1000, 3000):
        data = np.exp(rng.normal(size=n))
        for label, steps in (("scores", [geosim.NormalScoreTransform()]),
                             ("log", [geosim.LogTransform(), geosim.NormalScoreTransform()]),
                             ("pareto", [geosim.NormalScoreTransform(upper_tail="pareto")])):
            t = TransformChain(steps).fit(data)
            multigaussian_moments(t, m[:10], v[:10])
            figures[f"{label}_{n}_data_s_per_million"] = _best(lambda: multigaussian_moments(t, m, v)) * 1e6 / nodes
    # nodes next to data (sd 0.1) inside a wide data range: few pieces within reach, no tails
    wide = TransformChain([geosim.NormalScoreTransform()]).fit(np.arange(80.0))
    figures["near_data_sd_0.1_80_data_s_per_million"] = _best(
        lambda: multigaussian_moments(wide, np.zeros(nodes), np.full(nodes, 0.01))) * 1e6 / nodes
    two = TransformChain([geosim.NormalScoreTransform()]).fit([1.0, 2.0])
    multigaussian_moments(two, m[:10], v[:10])
    figures["tails_only_s_per_million"] = _best(lambda: multigaussian_moments(two, m, v)) * 1e6 / nodes
    # kriging of the same number of nodes, 16 of 400 data, for scale
    coords = rng.uniform(0, 1000, (400, 2))
    model = geosim.Spherical(1.0, 300.0)
    targets = rng.uniform(0, 1000, (nodes, 2))
    kw = dict(neighbourhood=geosim.Neighbourhood(max_samples=16))
    krige(coords, rng.normal(size=400), targets[:10], model, **kw)
    figures["kriging_16_data_s_per_million"] = _best(
        lambda: krige(coords, rng.normal(size=400), targets, model, **kw)) * 1e6 / nodes
    for key, value in figures.items():
        print(f"{key:40s} {value:8.2f}")
    print(json.dumps({k: round(v, 3) for k, v in figures.items()}))


if __name__ == "__main__":
    main()
