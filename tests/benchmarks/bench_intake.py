"""Intake throughput: drillhole reading and compositing, declustering, normal scores.

Run: python tests/benchmarks/bench_intake.py [n_holes]
Prints seconds per step for a synthetic project of ``n_holes`` inclined holes with
1 m intervals (default 400 holes of 200 m, 80 000 intervals).
"""
from __future__ import annotations

import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

import geosim


def make_tables(folder: Path, n_holes: int, rng: np.random.Generator) -> tuple[Path, Path, Path]:
    ids = [f"H{i:04d}" for i in range(n_holes)]
    xy = rng.uniform(0, 2000, size=(n_holes, 2)) + [400000.0, 6000000.0]
    collars = folder / "collars.csv"
    collars.write_text("hole_id,x,y,z,depth\n" + "".join(
        f"{h},{x:.2f},{y:.2f},300,200\n" for h, (x, y) in zip(ids, xy)))
    surveys = folder / "surveys.csv"
    surveys.write_text("hole_id,depth,azimuth,dip\n" + "".join(
        f"{h},{d},{(40 + d / 20) % 360:.2f},{-60 + d / 40:.2f}\n" for h in ids for d in range(0, 201, 30)))
    intervals = folder / "intervals.csv"
    grades = rng.lognormal(-0.5, 0.8, size=(n_holes, 200))
    intervals.write_text("hole_id,from,to,cu_pct\n" + "".join(
        f"{h},{d},{d + 1},{grades[i, d]:.3f}\n" for i, h in enumerate(ids) for d in range(200)))
    return collars, surveys, intervals


def timed(label: str, fn):
    t0 = time.perf_counter()
    out = fn()
    print(f"{label:<44s} {time.perf_counter() - t0:8.3f} s")
    return out


def main() -> None:
    n_holes = int(sys.argv[1]) if len(sys.argv) > 1 else 400
    rng = np.random.default_rng(1)
    with tempfile.TemporaryDirectory() as tmp:
        c, s, i = make_tables(Path(tmp), n_holes, rng)
        holes = timed(f"read_drillholes ({n_holes * 200} intervals)",
                      lambda: geosim.read_drillholes(c, s, i, values="cu_pct", crs="EPSG:32750"))
        comps = timed("composite to 2 m", lambda: geosim.composite(holes, 2.0))
    print(f"  {len(comps)} composites")
    values = comps.column()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        dc = timed("cell_declustering (24 sizes x 8 offsets)",
                   lambda: geosim.cell_declustering(comps.coords, values, vertical_ratio=0.1))
    t = timed("NormalScoreTransform.fit (weighted)",
              lambda: geosim.NormalScoreTransform(upper_tail="pareto").fit(values, dc.weights))
    y = rng.standard_normal(1_000_000)
    timed("inverse of 1e6 scores", lambda: t.inverse(y))


if __name__ == "__main__":
    main()
