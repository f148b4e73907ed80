"""Benchmark: a plugin structure with a compiled (numba) form against the same shape in numpy only.

The shape is the test plugin's hole effect, rho(r) = sin(pi r) / (pi r), once as the
plugin ships it (``numba_correlation``) and once as a numpy-only structure
(``numpy.sinc``), next to a built-in closed form compiled into geosim (the ``builtin``
column: spherical, except exponential in the ``cheap_cov_matrix`` row).  Measured side
by side in one run, the calls taking turns (the machine is shared, so the ratios mean
more than the times):

* ``correlation``: 2,000,000 reduced distances through ``Structure.correlation``;
* ``cov_matrix``: a 3,000 x 3,000 covariance matrix of the structure alone
  (``Model.cov_matrix``: the exact engine's, global kriging's and the load check's cost);
* ``exact_prepare``: the exact engine's one-time work (nugget + structure) on a
  40 x 40 grid with 100 data;
* ``table``: ``Model.compiled()`` (the kernels' table of the structure);
* ``cheap_cov_matrix``: the same 3,000 x 3,000 matrix for a cheap shape, exp(-3 r), as a
  compiled-form plugin, a numpy-only plugin and the built-in exponential;
* ``sequential``: one sequential realization of a 200 x 200 grid; inside that fixed
  kernel both plugin forms run from the same kind of table.

Run: ``python tests/benchmarks/bench_plugins.py``.  The last line is one JSON object.
"""
from __future__ import annotations

import json
import logging
import math
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numba import njit

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "plugin_package"))

import geosim  # noqa: E402
import geosim.plugins  # noqa: E402
from geosim.search import Neighbourhood  # noqa: E402
from geosim.variogram import Anisotropy, Exponential, Model, Nugget, Spherical, Structure  # noqa: E402
from geosim_testplugin.shapes import Wave  # noqa: E402


@dataclass(frozen=True)
class WaveNumpy(Wave):
    """The same hole effect with only a numpy form."""

    kind = "wave_numpy"
    numba_correlation = None

    def correlation(self, r):
        return np.sinc(np.asarray(r, dtype=float))


@njit(cache=True, nogil=True)
def decay_correlation(r, param):
    return math.exp(-3.0 * r)


@dataclass(frozen=True)
class DecayCompiled(Structure):
    """A cheap shape (the exponential's) as a plugin with a compiled form."""

    kind = "decay"
    numba_correlation = decay_correlation


@dataclass(frozen=True)
class DecayNumpy(Structure):
    """The same cheap shape with only a numpy form."""

    kind = "decay_numpy"

    def correlation(self, r):
        return np.exp(-3.0 * np.asarray(r, dtype=float))


def interleaved(calls: dict, repeat: int) -> dict:
    """Shortest wall time (s) of each call, the calls taking turns so load changes hit all alike."""
    for fn in calls.values():
        fn()  # warm-up: numba compilation and caches
    best = {k: float("inf") for k in calls}
    for _ in range(repeat):
        for k, fn in calls.items():
            t = time.perf_counter()
            fn()
            best[k] = min(best[k], time.perf_counter() - t)
    return best


def model_of(cls, nugget=True):
    s = cls(0.9 if nugget else 1.0, Anisotropy((300.0, 150.0), azimuth=30.0))
    return Nugget(0.1) + s if nugget else Model([s])


def main():
    logging.getLogger("geosim").setLevel(logging.ERROR)  # the numpy-only note is the point here
    rng = np.random.default_rng(1)
    r = rng.uniform(0.0, 10.0, 2_000_000)
    pts = rng.uniform(0.0, 2000.0, (3000, 2))
    grid_small = geosim.Grid(0.0, 0.0, (45.0, 45.0), (40, 40))
    data = rng.uniform(0.0, 1800.0, (100, 2))
    scores = rng.standard_normal(100)
    grid_big = geosim.Grid(0.0, 0.0, (10.0, 10.0), (200, 200))
    hood = Neighbourhood(max_samples=16, max_nodes=16)
    exact = geosim.plugins.get("engines", "exact")()
    sequential = geosim.plugins.get("engines", "sequential")()
    kinds = {"compiled": Wave, "numpy": WaveNumpy, "builtin": Spherical}
    alone = {k: model_of(cls, nugget=False) for k, cls in kinds.items()}
    models = {k: model_of(cls) for k, cls in kinds.items()}
    plugin_only = {k: m for k, m in models.items() if k != "builtin"}

    figures = {
        "correlation_s": interleaved({k: (lambda s=cls(1.0, 1.0): s.correlation(r))
                                      for k, cls in kinds.items()}, 5),
        "cov_matrix_s": interleaved({k: (lambda m=m: m.cov_matrix(pts)) for k, m in alone.items()}, 3),
        "exact_prepare_s": interleaved({k: (lambda m=m: exact.prepare(data, scores, m, grid_small,
                                                                      neighbourhood=hood))
                                        for k, m in models.items()}, 5),
        "table_s": interleaved({k: m.compiled for k, m in plugin_only.items()}, 5),
    }
    cheap = {"compiled": DecayCompiled, "numpy": DecayNumpy, "builtin": Exponential}
    figures["cheap_cov_matrix_s"] = interleaved(
        {k: (lambda m=model_of(cls, nugget=False): m.cov_matrix(pts)) for k, cls in cheap.items()}, 3)
    prepared = {k: sequential.prepare(data, scores, m, grid_big, neighbourhood=hood) for k, m in models.items()}
    figures["sequential_realization_s"] = interleaved(
        {k: (lambda p=p: sequential.realize(p, np.random.default_rng(0))) for k, p in prepared.items()}, 5)

    for what, row in figures.items():
        print(f"{what:26s} " + "  ".join(f"{k} {v:.4f}" for k, v in row.items()))
    ratios = {f"numpy_over_compiled_{what[:-2]}": row["numpy"] / row["compiled"] for what, row in figures.items()}
    ratios.update({f"compiled_over_builtin_{what[:-2]}": row["compiled"] / row["builtin"]
                   for what, row in figures.items() if "builtin" in row})
    for k, v in ratios.items():
        print(f"{k:45s} {v:.2f}")
    print(json.dumps({**{f"{k}_{what}": v for what, row in figures.items() for k, v in row.items()}, **ratios}))


if __name__ == "__main__":
    main()
