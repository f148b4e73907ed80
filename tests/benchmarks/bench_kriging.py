"""Per-node cost of kriging a 1,000 x 1,000 grid with 16 and 32 neighbours.

Prints microseconds per node for simple, ordinary and external-drift kriging, split into the
candidate search (k-d tree query in the ellipsoid frame) and the compiled
select-build-factor-solve loop, the compiled Cholesky against LAPACK at a
few orders (the crossover behind ``geosim.linalg.LAPACK_ORDER``), and the cost
of one covariance evaluation inlined against called.  Numba
compilation is excluded (warm-up call first).  Wall-clock figures on a shared
machine are noisy: read the ratios, and rerun on a quiet machine for absolute
numbers.

    python tests/benchmarks/bench_kriging.py            # full 1,000 x 1,000 grid
    python tests/benchmarks/bench_kriging.py --rows 100 # 100 rows, scaled up
"""
from __future__ import annotations

import argparse
import math
import os
import time

import numpy as np
from numba import njit

import geosim
from geosim.kriging import krige
from geosim.linalg import chol_inplace
from geosim.search import DataSearch, Neighbourhood


def _search_seconds(search: DataSearch, targets: np.ndarray) -> float:
    tframe = search.to_frame(np.column_stack([targets, np.zeros(len(targets))]))
    k = search.initial_candidates()
    block = max(1, (1 << 21) // k)
    t0 = time.perf_counter()
    for start in range(0, len(tframe), block):
        search.candidates(tframe[start:start + block], k)
    return time.perf_counter() - t0


@njit
def _factor_many(a, buf, reps):
    """Copy and factor ``reps`` times inside compiled code, as the kriging loop does."""
    n = a.shape[0]
    status = 0
    for _ in range(reps):
        for i in range(n):
            for j in range(i + 1):
                buf[i, j] = a[i, j]
        status += chol_inplace(buf, n, 0.0)
    return status


def _cholesky_table(orders=(16, 32, 64, 128, 256)) -> None:
    from scipy.linalg import lapack

    rng = np.random.default_rng(0)
    print("\nCholesky of one n x n matrix (microseconds): compiled chol_inplace called in a compiled loop"
          " vs LAPACK dpotrf called from Python via scipy")
    for n in orders:
        x = rng.normal(size=(n, n))
        a = x @ x.T + n * np.eye(n)
        buf = np.empty_like(a)
        reps = max(20, 2_000_000 // (n * n))
        _factor_many(a, buf, 1)
        t0 = time.perf_counter()
        assert _factor_many(a, buf, reps) == -reps
        ours = (time.perf_counter() - t0) / reps
        t0 = time.perf_counter()
        for _ in range(reps):
            lapack.dpotrf(a, lower=1, clean=0, overwrite_a=0)
        theirs = (time.perf_counter() - t0) / reps
        print(f"  n={n:4d}  compiled {ours * 1e6:9.1f}  LAPACK {theirs * 1e6:9.1f}  ratio {ours / theirs:5.2f}")


def _cov_lag_table(model) -> None:
    from geosim.variogram.compiled import cov_lag

    called = njit(cov_lag.py_func)  # the same function compiled as a real (not inlined) call

    def make_loop(f):
        @njit
        def loop(cm, n):
            s = 0.0
            for i in range(n):
                s += f(cm, 0.001 * i, 3.0, 0.0)
            return s
        return loop

    cm = model.compiled()
    print("\ncov_lag per evaluation inside a compiled loop (nanoseconds):")
    for name, f in (("inlined (as shipped)", cov_lag), ("real call", called)):
        loop = make_loop(f)
        loop(cm, 10)
        best = math.inf
        for _ in range(3):
            t0 = time.perf_counter()
            loop(cm, 2_000_000)
            best = min(best, time.perf_counter() - t0)
        print(f"  {name:22s} {best / 2e6 * 1e9:6.1f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1000, help="grid rows to krige (of 1000), scaled up")
    ap.add_argument("--samples", type=int, default=2000, help="number of data samples")
    ap.add_argument("--chunk", type=int, default=50, help="rows per timed chunk")
    args = ap.parse_args()

    rng = np.random.default_rng(42)
    # an invented 10 km x 10 km prospect, 10 m cells
    side, cells = 10_000.0, 1000
    data = rng.uniform(0, side, size=(args.samples, 2))
    model = geosim.Nugget(0.15) + geosim.Spherical(0.85, geosim.Anisotropy((2500.0, 1200.0), azimuth=30.0))
    values = np.linalg.cholesky(model.cov_matrix(data) + 1e-9 * np.eye(args.samples)) @ rng.normal(
        size=args.samples)
    grid = geosim.Grid(0.0, 0.0, (side / cells, side / cells), (args.rows, cells))
    targets = grid.coords()
    m = len(targets)
    scaled = "" if m == cells * cells else " (figures scaled up to 1,000,000)"
    print(f"grid {args.rows} x {cells} = {m:,} nodes{scaled}, {args.samples} samples, "
          f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores (shared machine)")

    krige(data, values, targets[:100], model, method="simple")  # compile (cached) before timing
    krige(data, values, targets[:100], model, method="ordinary")

    def drift(xy):  # an invented smooth secondary survey
        return np.sin(xy[:, 0] / 1500.0) + xy[:, 1] / 5000.0
    krige(data, values, targets[:100], model, method="external_drift", drift=drift(data),
          target_drift=drift(targets[:100]))
    # time the grid in chunks of rows: the median and the fastest chunk resist other users' bursts
    chunks = [targets[i:i + args.chunk * cells] for i in range(0, m, args.chunk * cells)]
    print(f"timed in {len(chunks)} chunks of {args.chunk} rows; per-node figures: median chunk (fastest chunk)")
    for k in (16, 32):
        nb = Neighbourhood(max_samples=k)
        search = DataSearch(data, nb, model)
        search_us = np.array([_search_seconds(search, c) / len(c) for c in chunks]) * 1e6
        for method in ("simple", "ordinary", "external_drift"):
            total_us = []
            for c in chunks:
                extra = {} if method != "external_drift" else {"drift": drift(data), "target_drift": drift(c)}
                t0 = time.perf_counter()
                res = krige(data, values, c, model, method=method, neighbourhood=nb, **extra)
                total_us.append((time.perf_counter() - t0) / len(c) * 1e6)
                assert np.isfinite(res.estimate).all()
            total_us = np.array(total_us)
            med, best = np.median(total_us), total_us.min()
            print(f"K={k:2d} {method:14s}: {med:6.2f} ({best:6.2f}) us/node = search {np.median(search_us):5.2f} "
                  f"({search_us.min():5.2f}) + select/build/factor/solve {med - np.median(search_us):6.2f}; "
                  f"1,000,000 nodes ~ {med:.1f} s")
    _cholesky_table()
    _cov_lag_table(model)


if __name__ == "__main__":
    main()
