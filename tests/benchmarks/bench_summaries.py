"""Memory and time of the streaming summary: 1,000 x 1,000 grid, 10 vs 50 realizations.

Writes the realization files once into a temporary folder, then summarizes the
first 10 and all 50 in separate fresh processes, each reporting its peak
resident memory (``ru_maxrss``) and the peak of NumPy/Python allocations
(``tracemalloc``).  Streaming keeps memory near window x realizations
(256 x 256 x 50 float32 = 13 MB) instead of grid x realizations
(1e6 x 50 float64 = 400 MB for an in-memory stack).

Run: ``python tests/benchmarks/bench_summaries.py``
"""
from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

SHAPE = (1000, 1000)
COUNTS = (10, 50)

CHILD = r"""
import json, resource, sys, time, tracemalloc
from pathlib import Path
import numpy as np
import rasterio
import geosim
from geosim.ensemble import summarize_realizations
folder, n = Path(sys.argv[1]), int(sys.argv[2])
grid = geosim.Grid(500000.0, 6000000.0, (10.0, 10.0), (1000, 1000))
paths = sorted(folder.glob("r*.tif"))[:n]
with rasterio.open(paths[0]) as src:      # baseline: libraries loaded and one file opened
    src.read(1, window=((0, 1), (0, 1)))
base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
tracemalloc.start()
t = time.perf_counter()
summarize_realizations(paths, grid, [0.0, 1.0], folder / f"summary_{n}.tif")
seconds = time.perf_counter() - t
peak_py = tracemalloc.get_traced_memory()[1]
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print(json.dumps({"n": n, "seconds": seconds, "baseline_rss_mb": base / 1024, "peak_rss_mb": peak / 1024,
                  "peak_numpy_mb": peak_py / 2**20}))
"""


def main() -> None:
    import numpy as np

    import geosim
    from geosim.io.geotiff import write_raster

    grid = geosim.Grid(500000.0, 6000000.0, (10.0, 10.0), SHAPE)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        rng = np.random.default_rng(0)
        t = time.perf_counter()
        for i in range(max(COUNTS)):
            # smooth-ish fields compress like real realizations, unlike white noise
            field = np.cumsum(rng.normal(size=SHAPE), axis=1) * 0.05
            write_raster(folder / f"r{i:04d}.tif", field, grid, descriptions=[f"realization {i}"])
        print(f"wrote {max(COUNTS)} realization files of {SHAPE[0]} x {SHAPE[1]} in "
              f"{time.perf_counter() - t:.1f} s")
        results = []
        for n in COUNTS:
            out = subprocess.run([sys.executable, "-c", CHILD, str(folder), str(n)], check=True,
                                 capture_output=True, text=True)
            results.append(json.loads(out.stdout))
        for r in results:
            grew = r["peak_rss_mb"] - r["baseline_rss_mb"]
            print(f"{r['n']:3d} realizations: {r['seconds']:6.1f} s, peak RSS {r['peak_rss_mb']:7.1f} MB "
                  f"(baseline {r['baseline_rss_mb']:.1f} MB, growth {grew:.1f} MB), "
                  f"peak NumPy allocations {r['peak_numpy_mb']:.1f} MB")
        a, b = results
        growth = [(r["peak_rss_mb"] - r["baseline_rss_mb"]) for r in results]
        print(f"ratio {b['n']}/{a['n']} realizations: NumPy peak x{b['peak_numpy_mb'] / a['peak_numpy_mb']:.2f}, "
              f"RSS growth x{growth[1] / max(growth[0], 1e-9):.2f} (realizations x{b['n'] / a['n']:.0f}); "
              f"an in-memory float64 stack would need {b['n'] * SHAPE[0] * SHAPE[1] * 8 / 2**20:.0f} MB")


if __name__ == "__main__":
    main()
