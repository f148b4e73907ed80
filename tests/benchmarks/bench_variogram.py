"""Experimental variogram timing and peak memory for 10,000 samples (2-D and 3-D, omni and 4 directions).

Run:  python tests/benchmarks/bench_variogram.py [n]

Prints wall time per case (best of 3, after one warm-up call that compiles the kernel),
the number of pairs visited, and the peak Python-heap memory of the call measured with
tracemalloc (numpy allocations are traced; the compiled loop allocates nothing per pair).
For scale, it also times a plain numpy all-pairs computation of the omnidirectional case
in row blocks (the obvious vectorized alternative) on the same data.
"""
import sys
import time
import tracemalloc

import numpy as np

from geosim.variogram import Direction, directional_variograms, experimental_variogram


def best_of(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def peak_mib(fn):
    tracemalloc.start()
    fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak / 2**20


def numpy_blocks(coords, values, lag, nlags, block=500):
    """All pairs by numpy broadcasting, one block of rows at a time (reference for speed)."""
    count = np.zeros(nlags)
    acc = np.zeros(nlags)
    for i0 in range(0, len(values), block):
        d = np.linalg.norm(coords[i0:i0 + block, None, :] - coords[None, :, :], axis=-1)
        g = 0.5 * (values[i0:i0 + block, None] - values[None, :]) ** 2
        b = np.floor(d / lag + 0.5).astype(np.int64)
        ok = (b < nlags) & (d > 0)
        count += np.bincount(b[ok], minlength=nlags)[:nlags]
        acc += np.bincount(b[ok], weights=g[ok], minlength=nlags)[:nlags]
    return acc / count / 1.0


def main(n=10_000):
    rng = np.random.default_rng(0)
    four = [Direction(a, horizontal_half_angle=22.5) for a in (0.0, 45.0, 90.0, 135.0)]
    print(f"experimental variograms, n = {n} samples, 15 lags reaching half the field")
    print(f"{'case':34s} {'time (s)':>9s} {'peak (MiB)':>11s} {'pairs counted':>14s}")
    for dim in (2, 3):
        coords = rng.uniform(0, 1000, (n, dim))
        if dim == 3:
            coords[:, 2] *= 0.2
        values = np.sin(coords[:, 0] / 150) + rng.normal(scale=0.5, size=n)
        lag, nlags = 500.0 / 14, 15
        experimental_variogram(coords[:50], values[:50], lag=lag, nlags=nlags)  # compile (cached)
        cases = [
            ("omnidirectional", lambda: [experimental_variogram(coords, values, lag=lag, nlags=nlags)]),
            ("4 directions, one pass", lambda: directional_variograms(coords, values, four, lag=lag,
                                                                        nlags=nlags)),
            ("robust (Cressie-Hawkins), omni", lambda: [experimental_variogram(
                coords, values, lag=lag, nlags=nlags, estimator="cressie-hawkins")]),
        ]
        for name, fn in cases:
            t, out = best_of(fn)
            pairs = sum(int(ev.npairs.sum()) for ev in out)
            print(f"{dim}-D {name:31s} {t:9.3f} {peak_mib(fn):11.1f} {pairs:14,d}")
        t_np, _ = best_of(lambda: numpy_blocks(coords, values, lag, nlags), repeat=1)
        t_c, _ = best_of(cases[0][1])
        print(f"{dim}-D numpy all-pairs in blocks (ref) {t_np:9.3f}   ratio numpy/geosim = {t_np / t_c:.1f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 10_000)
