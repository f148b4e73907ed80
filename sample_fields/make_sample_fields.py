"""Make geosim's two invented sample fields from known models, with a fixed seed.

Both scenarios are invented: the place names are fictitious and the coordinates
were put in open sea on purpose, so that nobody mistakes them for a real deposit
or aquifer.  Each field is an exact unconditional Gaussian simulation *at the
sample locations*: the covariance matrix of all sample points under the true
model, its lower Cholesky factor ``L`` (LAPACK, through scipy), and ``y = L z``
for a vector ``z`` of independent standard normal numbers.  ``y`` is in
normal-score units (mean 0, variance = total sill = 1) and is turned into grades
or conductivities by a log-normal marginal.  Because that marginal is monotone,
a normal-score transform of the published values gives back ``y`` up to the
rounding of the CSV files, so variogram fitting on the data should recover the
true model within sampling error.

Run from the repository root to remake the committed files (they are
overwritten with identical content)::

    python sample_fields/make_sample_fields.py

or write a fresh copy elsewhere with ``--out FOLDER``.
"""
from __future__ import annotations

import argparse
import csv
import io
import json
import math
import re
from pathlib import Path

import numpy as np
import scipy.linalg
import shapely
from pyproj import Transformer
from shapely.geometry import MultiPoint, Point, Polygon, mapping
from shapely.geometry.polygon import orient

from geosim.io.atomic import atomic_output
from geosim.variogram import Anisotropy, Exponential, Model, Nugget, Spherical
from geosim.variogram.compiled import cov_matrix_into

SEED = 20261202
HERE = Path(__file__).resolve().parent

# ---------------------------------------------------------------------------
# The true models and marginals (the READMEs quote them; tests check that they agree)
# ---------------------------------------------------------------------------

ORE_NAME = "Quenbarrow Ridge copper prospect"
ORE_EPSG = 32750  # WGS 84 / UTM zone 50S
ORE_MODEL = Nugget(0.15) + Spherical(0.85, Anisotropy((180.0, 90.0, 40.0), azimuth=60.0))
# copper % = exp(mu + sigma * y): mean exp(mu + sigma^2 / 2) = 0.6 %, median exp(mu) ~ 0.44 %
ORE_SIGMA = 0.8
ORE_MU = math.log(0.6) - ORE_SIGMA**2 / 2.0

AQUIFER_NAME = "Lirravel Valley alluvial aquifer"
AQUIFER_EPSG = 32725  # WGS 84 / UTM zone 25S, the zone of the wells' lon/lat centroid
AQUIFER_MODEL = Nugget(0.1) + Exponential(0.9, Anisotropy((1500.0, 300.0), azimuth=30.0))
# log10(K in m/s) = mean + std * y
AQUIFER_LOG10_MEAN = -4.0
AQUIFER_LOG10_STD = 0.8
# the invented resistivity survey: survey normal score s = rho * y + sqrt(1 - rho^2) * e, with e a Gaussian
# field independent of y (the part of resistivity that conductivity does not explain: clay content of the
# fines, pore-water salinity, survey noise), and resistivity = 10 ** (log10_median + log10_std * s) ohm m:
# coarser, more permeable sediment is more resistive, so the correlation is positive
SURVEY_CORRELATION = 0.7
SURVEY_NOISE_MODEL = Nugget(0.3) + Exponential(0.7, Anisotropy((800.0, 800.0)))
SURVEY_LOG10_MEDIAN = 1.9  # about 80 ohm m
SURVEY_LOG10_STD = 0.25
SURVEY_CELL = 100.0  # metres
# invented planned wells (name, lon, lat) and hole targets (name, x, y, z in EPSG:32750)
AQUIFER_PLANNED = [("PW-A", -33.2050, -38.7100), ("PW-B", -33.1950, -38.6950), ("PW-C", -33.2150, -38.7250),
                   ("PW-D", -33.1880, -38.6850)]
ORE_PLANNED = [("PH-1 at 250 m", 454900.0, 5460000.0, 250.0), ("PH-2 at 280 m", 455050.0, 5460050.0, 280.0),
               ("PH-3 at 230 m", 455000.0, 5459950.0, 230.0)]


# one random stream per step, never shared, so that a change to one file leaves the others as they are
# (tests/test_sample_fields.py checks that no stream is drawn twice)
STREAMS = {1: "ore prospect: collars and holes", 2: "ore prospect: grades", 3: "aquifer: well positions",
           4: "aquifer: conductivity", 5: "aquifer units: gravel", 6: "aquifer units: silt",
           7: "resistivity survey: conductivity at the survey cells", 8: "resistivity survey: its own part"}


def _rng(stream: int) -> np.random.Generator:
    """Independent random stream ``stream`` of the fixed seed (one of ``STREAMS``)."""
    if stream not in STREAMS:
        raise ValueError(f"stream {stream} is not one of STREAMS; add it there")
    return np.random.default_rng(np.random.SeedSequence(SEED, spawn_key=(stream,)))


def gaussian_at(points: np.ndarray, model: Model, rng: np.random.Generator) -> np.ndarray:
    """Exact unconditional simulation of ``model`` at ``points``: ``L z`` with ``C = L L^T``."""
    xyz = np.zeros((points.shape[0], 3))
    xyz[:, :points.shape[1]] = points
    cov = np.empty((len(xyz), len(xyz)))
    cov_matrix_into(model.compiled(), xyz, xyz, cov)  # Model.cov_matrix, compiled: 5000 points in ~1 s
    lower = scipy.linalg.cholesky(cov, lower=True, overwrite_a=True, check_finite=False)
    return lower @ rng.standard_normal(points.shape[0])


# ---------------------------------------------------------------------------
# Minimum-curvature desurvey (kept here so the script does not depend on geosim.drillholes)
# ---------------------------------------------------------------------------

def direction(azimuth: np.ndarray, dip: np.ndarray) -> np.ndarray:
    """Unit vectors (east, north, up) of azimuth (clockwise from north) and dip (negative down)."""
    a, d = np.radians(azimuth), np.radians(dip)
    return np.stack([np.cos(d) * np.sin(a), np.cos(d) * np.cos(a), np.sin(d)], axis=-1)


def _slerp(t1: np.ndarray, t2: np.ndarray, f: float) -> np.ndarray:
    """Direction a fraction ``f`` of the way along the great circle from ``t1`` to ``t2``."""
    beta = math.acos(min(1.0, max(-1.0, float(t1 @ t2))))
    if beta < 1e-9:
        return t1.copy()
    return (math.sin((1 - f) * beta) * t1 + math.sin(f * beta) * t2) / math.sin(beta)


def _arc_step(t1: np.ndarray, t2: np.ndarray, length: float) -> np.ndarray:
    """Displacement along a circular arc of ``length`` from direction ``t1`` to ``t2``."""
    beta = math.acos(min(1.0, max(-1.0, float(t1 @ t2))))
    ratio = 1.0 if beta < 1e-9 else 2.0 / beta * math.tan(beta / 2.0)
    return 0.5 * length * ratio * (t1 + t2)


def desurvey(collar: np.ndarray, stations: np.ndarray, depths: np.ndarray) -> np.ndarray:
    """Positions at ``depths`` along a hole by minimum curvature.

    Parameters
    ----------
    collar : (3,) array
        Collar (x, y, z).
    stations : (m, 3) array
        Survey rows ``(depth, azimuth, dip)`` sorted by depth; ``m = 0`` means vertical.
    depths : (n,) array
        Down-hole depths to locate.

    The first station's direction holds from the collar down to it, the last one's
    below it; between stations the hole is a circular arc, so a point inside an
    interval is reached by an arc to the interpolated (slerped) direction.
    """
    if len(stations) == 0:
        stations = np.array([[0.0, 0.0, -90.0]])
    sd = stations[:, 0]
    dirs = direction(stations[:, 1], stations[:, 2])
    # station positions
    pos = np.empty((len(sd), 3))
    pos[0] = collar + sd[0] * dirs[0]
    for k in range(1, len(sd)):
        pos[k] = pos[k - 1] + _arc_step(dirs[k - 1], dirs[k], sd[k] - sd[k - 1])
    out = np.empty((len(depths), 3))
    for i, d in enumerate(depths):
        k = int(np.searchsorted(sd, d, side="right")) - 1
        if k < 0:
            out[i] = collar + d * dirs[0]
        elif k == len(sd) - 1:
            out[i] = pos[k] + (d - sd[k]) * dirs[k]
        else:
            f = (d - sd[k]) / (sd[k + 1] - sd[k])
            t = _slerp(dirs[k], dirs[k + 1], f)
            out[i] = pos[k] + _arc_step(dirs[k], t, d - sd[k])
    return out


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------

def _write_text(path: Path, text: str) -> None:
    with atomic_output(path, overwrite=True) as tmp:
        tmp.write_text(text, encoding="utf-8", newline="")


def _write_csv(path: Path, header: list[str], rows: list[list]) -> None:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows(rows)
    _write_text(path, buf.getvalue())


def _write_json(path: Path, obj) -> None:
    text = json.dumps(obj, indent=1)
    # one coordinate pair per line keeps the files short and their diffs readable
    text = re.sub(r"\[\s+(-?[\d.e+-]+),\s+(-?[\d.e+-]+)\s+\]", r"[\1, \2]", text)
    _write_text(path, text + "\n")


def _domain_feature_collection(poly_projected: Polygon, epsg: int, name: str) -> dict:
    """RFC 7946 FeatureCollection of one polygon: lon/lat, counter-clockwise exterior."""
    to_lonlat = Transformer.from_crs(epsg, 4326, always_xy=True)
    ll = shapely.transform(poly_projected, lambda xy: np.column_stack(to_lonlat.transform(xy[:, 0], xy[:, 1])))
    ll = orient(shapely.set_precision(ll, 1e-7), sign=1.0)  # ~1 cm grid; RFC 7946 ring order
    geometry = mapping(ll)
    return {"type": "FeatureCollection",
            "features": [{"type": "Feature",
                          "properties": {"name": name, "note": "invented outline for testing; not a real place"},
                          "geometry": geometry}]}


def _true_model_record(model: Model, marginal: dict, crs: str, how: str) -> dict:
    return {"model": model.to_dicts(), "model_text": str(model), "units": "normal scores",
            "marginal": marginal, "crs": crs, "seed": SEED, "how": how}


# ---------------------------------------------------------------------------
# (a) ore prospect
# ---------------------------------------------------------------------------

def make_ore_prospect(out: Path) -> None:
    rng = _rng(1)
    out.mkdir(parents=True, exist_ok=True)
    centre = np.array([455000.0, 5460000.0])
    strike = np.radians(60.0)
    along = np.array([math.sin(strike), math.cos(strike)])          # azimuth 60
    across = np.array([math.sin(strike + math.pi / 2), math.cos(strike + math.pi / 2)])  # azimuth 150

    # 8 drill lines across strike, 5 holes per line, two dropped and two infill holes
    sites = [(line, pos) for line in range(8) for pos in range(5)]
    for drop in sorted(rng.choice(len(sites), 2, replace=False), reverse=True):
        sites.pop(int(drop))
    sites += [(3.5, 2.0), (4.5, 2.5)]
    holes = []
    for n, (line, pos) in enumerate(sites):
        u = (line - 3.5) * 55.0 + rng.uniform(-8, 8)
        v = (pos - 2.0) * 45.0 + rng.uniform(-8, 8)
        xy = centre + u * along + v * across
        z = 340.0 + 12.0 * math.sin(u / 90.0) + 0.04 * v + rng.uniform(-1.5, 1.5)
        holes.append({"id": f"QR{n + 1:03d}", "xyz": np.array([xy[0], xy[1], z]),
                      "depth": round(float(rng.uniform(120, 250)), 1)})
    holes = [{**h, "xyz": np.round(h["xyz"], 2)} for h in holes]

    # 24 inclined holes towards about azimuth 330 (across strike) that flatten and turn gently;
    # of the 16 vertical holes, 2 have a single survey row, the rest none
    order = rng.permutation(len(holes))
    inclined, vertical_rows = set(order[:24].tolist()), set(order[24:26].tolist())
    survey_rows = []
    for k, h in enumerate(holes):
        if k in inclined:
            az0, dip0 = rng.uniform(322, 338), rng.uniform(-75, -55)
            daz, ddip = rng.uniform(1.0, 4.0), rng.uniform(1.0, 3.0)  # degrees per 100 m
            depths = np.append(np.arange(0.0, h["depth"], 30.0), h["depth"])
            rows = [[round(float(d), 1), round(float((az0 + daz * d / 100) % 360), 2),
                     round(float(dip0 + ddip * d / 100), 2)] for d in depths]
        elif k in vertical_rows:
            rows = [[0.0, 0.0, -90.0]]
        else:
            rows = []
        h["stations"] = np.array(rows, dtype=float).reshape(-1, 3)
        survey_rows += [[h["id"], *r] for r in rows]

    # assay intervals, in decimetres so that from/to stay exact: unsampled cover, then 1-2 m
    # runs, with one unsampled gap (core loss) in six holes
    gap_holes = set(rng.choice(len(holes), 6, replace=False).tolist())
    intervals = []  # (hole index, from, to)
    for k, h in enumerate(holes):
        end = int(round(h["depth"] * 10))
        top = int(rng.integers(40, 121))
        gap = None
        if k in gap_holes:
            g0 = int(rng.integers(top + 200, end - 300))
            gap = (g0, g0 + int(rng.integers(30, 121)))
        while top + 10 <= end:
            if gap and gap[0] <= top < gap[1]:
                top = gap[1]
                continue
            length = int(rng.choice([10, 15, 20], p=[0.5, 0.2, 0.3]))
            bottom = min(top + length, end)
            intervals.append((k, top / 10, bottom / 10))
            top = bottom

    mids = np.empty((len(intervals), 3))
    for k, h in enumerate(holes):
        idx = [i for i, iv in enumerate(intervals) if iv[0] == k]
        depths = np.array([(intervals[i][1] + intervals[i][2]) / 2 for i in idx])
        mids[idx] = desurvey(h["xyz"], h["stations"], depths)

    y = gaussian_at(mids, ORE_MODEL, _rng(2))
    cu = np.exp(ORE_MU + ORE_SIGMA * y)

    _write_csv(out / "collars.csv", ["hole_id", "x", "y", "z", "depth"],
               [[h["id"], f"{h['xyz'][0]:.2f}", f"{h['xyz'][1]:.2f}", f"{h['xyz'][2]:.2f}", f"{h['depth']:.1f}"]
                for h in holes])
    _write_csv(out / "surveys.csv", ["hole_id", "depth", "azimuth", "dip"],
               [[r[0], f"{r[1]:.1f}", f"{r[2]:.2f}", f"{r[3]:.2f}"] for r in survey_rows])
    _write_csv(out / "assays.csv", ["hole_id", "from", "to", "cu_pct"],
               [[holes[k]["id"], f"{a:.1f}", f"{b:.1f}", f"{c:.3f}"] for (k, a, b), c in zip(intervals, cu)])

    # outline: collars and the surface projection of every hole trace, with a 40 m margin
    trace = np.vstack([desurvey(h["xyz"], h["stations"], np.linspace(0, h["depth"], 6)) for h in holes])
    outline = MultiPoint(trace[:, :2]).convex_hull.buffer(40.0, quad_segs=4).simplify(2.0)
    outline = shapely.segmentize(outline, 25.0)
    _write_json(out / "domain.geojson", _domain_feature_collection(outline, ORE_EPSG, ORE_NAME))
    # planned hole targets, for P10/P50/P90 at given points (query_points in run.toml)
    if not all(outline.contains(Point(x, y)) for _, x, y, _ in ORE_PLANNED):
        raise RuntimeError("a planned hole target lies outside the prospect outline")
    _write_csv(out / "planned_holes.csv", ["target", "x", "y", "z"],
               [[name, f"{x:.1f}", f"{y:.1f}", f"{z:.1f}"] for name, x, y, z in ORE_PLANNED])
    _write_json(out / "true_model.json", _true_model_record(
        ORE_MODEL, {"kind": "lognormal", "variable": "cu_pct", "mu": ORE_MU, "sigma": ORE_SIGMA,
                    "formula": "cu_pct = exp(mu + sigma * y)"},
        f"EPSG:{ORE_EPSG}", "exact Gaussian simulation at assay interval mid-points (minimum curvature)"))


# ---------------------------------------------------------------------------
# (b) alluvial aquifer
# ---------------------------------------------------------------------------

def _valley_frame(centre: np.ndarray):
    a = math.radians(30.0)
    along = np.array([math.sin(a), math.cos(a)])        # azimuth 30, down the valley
    across = np.array([math.cos(a), -math.sin(a)])      # azimuth 120

    def axis(u):  # meandering valley and channel axis, offset across the valley (m)
        return 300.0 * np.sin(2 * np.pi * u / 6000.0)

    def half_width(u):
        return 1200.0 + 250.0 * np.sin(2 * np.pi * u / 5000.0 + 0.7)

    def to_xy(u, v):
        return centre + np.multiply.outer(u, along) + np.multiply.outer(v, across)

    return axis, half_width, to_xy


def make_alluvial_aquifer(out: Path) -> None:
    rng = _rng(3)
    out.mkdir(parents=True, exist_ok=True)
    centre = np.array([482500.0, 5716000.0])  # UTM 25S, near lon -33.2, lat -38.7 (open sea)
    axis, half_width, to_xy = _valley_frame(centre)
    u_edge = np.arange(-3500.0, 3500.1, 100.0)
    left = to_xy(u_edge, axis(u_edge) + half_width(u_edge))
    right = to_xy(u_edge[::-1], axis(u_edge[::-1]) - half_width(u_edge[::-1]))
    valley = Polygon(np.vstack([left, right]))

    # 30 wells in three well fields on the channel, 15 more along the channel, 35 anywhere
    # on the valley floor; at least 30 m apart
    wells: list[np.ndarray] = []

    def add(u, v):
        p = to_xy(np.array(u), np.array(v))
        if valley.contains(shapely.Point(p)) and all(np.hypot(*(p - q)) >= 30.0 for q in wells):
            wells.append(p)
            return True
        return False

    for u_field in (-1800.0, 200.0, 2100.0):
        placed = 0
        while placed < 10:
            placed += add(u_field + rng.normal(0, 120), axis(u_field) + rng.normal(0, 80))
    while len(wells) < 45:
        u = rng.uniform(-3300, 3300)
        add(u, axis(u) + rng.normal(0, 120))
    while len(wells) < 80:
        u = rng.uniform(-3400, 3400)
        add(u, axis(u) + rng.uniform(-1, 1) * half_width(u))
    xy = np.array(wells)

    y = gaussian_at(xy, AQUIFER_MODEL, _rng(4))
    k = 10.0 ** (AQUIFER_LOG10_MEAN + AQUIFER_LOG10_STD * y)

    to_lonlat = Transformer.from_crs(AQUIFER_EPSG, 4326, always_xy=True)
    lon, lat = to_lonlat.transform(xy[:, 0], xy[:, 1])
    zone = int((np.mean(lon) + 180.0) // 6.0) + 1
    if zone != AQUIFER_EPSG - 32700 or np.mean(lat) >= 0:
        raise RuntimeError(f"wells' centroid lies in UTM zone {zone}, not in EPSG:{AQUIFER_EPSG}")
    _write_csv(out / "wells.csv", ["well_id", "lon", "lat", "k_ms"],
               [[f"LV{i + 1:02d}", f"{a:.7f}", f"{b:.7f}", f"{c:.3e}"] for i, (a, b, c) in enumerate(zip(lon, lat, k))])
    make_aquifer_units(out, xy, (lon, lat), valley)
    _write_json(out / "domain.geojson", _domain_feature_collection(valley, AQUIFER_EPSG, AQUIFER_NAME))
    # planned wells, for P10/P50/P90 at given points (query_points in run.toml)
    px, py = Transformer.from_crs(4326, AQUIFER_EPSG, always_xy=True).transform(
        [p[1] for p in AQUIFER_PLANNED], [p[2] for p in AQUIFER_PLANNED])
    if not all(valley.contains(Point(x, y)) for x, y in zip(px, py)):
        raise RuntimeError("a planned well lies outside the valley outline")
    _write_csv(out / "planned_wells.csv", ["name", "lon", "lat"],
               [[name, f"{a:.4f}", f"{b:.4f}"] for name, a, b in AQUIFER_PLANNED])
    _write_survey(out / "resistivity_survey.tif", valley, xy, y)
    _write_json(out / "true_model.json", _true_model_record(
        AQUIFER_MODEL, {"kind": "lognormal", "variable": "k_ms", "log10_mean": AQUIFER_LOG10_MEAN,
                        "log10_std": AQUIFER_LOG10_STD, "formula": "k_ms = 10 ** (log10_mean + log10_std * y)"},
        f"EPSG:{AQUIFER_EPSG}", "exact Gaussian simulation at the wells in UTM, then lon/lat with pyproj"))


# Two units of the same aquifer, for a run of several units (run_units.toml): the channel belt of
# gravel and sand, within CHANNEL_HALF_WIDTH of the meandering channel axis, and the overbank silt and
# clay around it, each with its own model and marginal
CHANNEL_HALF_WIDTH = 250.0  # metres across the valley
UNIT_CODES = {"gravel": 1, "silt": 2}
GRAVEL_MODEL = Nugget(0.1) + Exponential(0.9, Anisotropy((1800.0, 300.0), azimuth=30.0))
GRAVEL_LOG10_MEAN, GRAVEL_LOG10_STD = -3.3, 0.5
SILT_MODEL = Nugget(0.2) + Spherical(0.8, Anisotropy((700.0, 700.0)))
SILT_LOG10_MEAN, SILT_LOG10_STD = -5.2, 0.6
UNITS_CELL = 25.0  # metres, the cells of the unit-code raster


def make_aquifer_units(out: Path, xy: np.ndarray, lonlat: tuple, valley: Polygon) -> None:
    """The channel-belt and overbank units of the aquifer: the wells' values drawn again from each
    unit's own model and marginal (``wells_units.csv``), and the unit code of every 25 m cell
    (``units.tif``, EPSG:32725)."""
    import rasterio
    from rasterio.transform import from_origin
    centre = np.array([482500.0, 5716000.0])
    axis, _, _ = _valley_frame(centre)
    a = math.radians(30.0)
    along, across = np.array([math.sin(a), math.cos(a)]), np.array([math.cos(a), -math.sin(a)])

    def code_at(points: np.ndarray) -> np.ndarray:
        u, v = (points - centre) @ along, (points - centre) @ across
        return np.where(np.abs(v - axis(u)) <= CHANNEL_HALF_WIDTH, UNIT_CODES["gravel"], UNIT_CODES["silt"])

    unit = code_at(xy)
    log10k = np.empty(len(xy))
    for code, model, mean, std, stream in ((1, GRAVEL_MODEL, GRAVEL_LOG10_MEAN, GRAVEL_LOG10_STD, 5),
                                           (2, SILT_MODEL, SILT_LOG10_MEAN, SILT_LOG10_STD, 6)):
        sel = unit == code
        log10k[sel] = mean + std * gaussian_at(xy[sel], model, _rng(stream))
    names = {c: n for n, c in UNIT_CODES.items()}
    lon, lat = lonlat
    _write_csv(out / "wells_units.csv", ["well_id", "lon", "lat", "k_ms", "unit"],
               [[f"LV{i + 1:02d}", f"{x:.7f}", f"{y:.7f}", f"{10.0 ** k:.3e}", names[int(c)]]
                for i, (x, y, k, c) in enumerate(zip(lon, lat, log10k, unit))])
    x0, y0, x1, y1 = (math.floor(b / UNITS_CELL) * UNITS_CELL if i < 2 else math.ceil(b / UNITS_CELL) * UNITS_CELL
                      for i, b in enumerate(valley.bounds))
    nx, ny = int(round((x1 - x0) / UNITS_CELL)), int(round((y1 - y0) / UNITS_CELL))
    cx = x0 + (np.arange(nx) + 0.5) * UNITS_CELL
    cy = y1 - (np.arange(ny) + 0.5) * UNITS_CELL
    gx, gy = np.meshgrid(cx, cy)
    codes = code_at(np.column_stack([gx.ravel(), gy.ravel()])).reshape(ny, nx).astype(np.uint8)
    with atomic_output(out / "units.tif", overwrite=True) as tmp:
        with rasterio.open(tmp, "w", driver="GTiff", height=ny, width=nx, count=1, dtype="uint8",
                           crs=f"EPSG:{AQUIFER_EPSG}", transform=from_origin(x0, y1, UNITS_CELL, UNITS_CELL),
                           nodata=0, compress="deflate") as dst:
            dst.write(codes, 1)
            dst.set_band_description(1, "unit code: 1 gravel (channel belt), 2 silt (overbank)")
    _write_json(out / "units_true_model.json", {
        "units": {name: {"code": code, **_true_model_record(model, {
            "kind": "lognormal", "variable": "k_ms", "log10_mean": mean, "log10_std": std,
            "formula": "k_ms = 10 ** (log10_mean + log10_std * y)"}, f"EPSG:{AQUIFER_EPSG}",
            "exact Gaussian simulation of the unit's model at its wells in UTM")}
            for name, code, model, mean, std in (("gravel", 1, GRAVEL_MODEL, GRAVEL_LOG10_MEAN, GRAVEL_LOG10_STD),
                                                 ("silt", 2, SILT_MODEL, SILT_LOG10_MEAN, SILT_LOG10_STD))},
        "channel_half_width_m": CHANNEL_HALF_WIDTH, "unit_raster_cell_m": UNITS_CELL})


def _write_survey(path: Path, valley: Polygon, wells: np.ndarray, y_wells: np.ndarray) -> None:
    """An invented electrical resistivity survey over the valley, correlated with log10 K.

    The conductivity field's normal score is simulated at the survey's cell centres given its
    values at the wells (exact conditional Gaussian simulation under the true model), then mixed
    with an independent field: ``s = rho y + sqrt(1 - rho^2) e``, so that the survey's normal
    score has variance 1 and correlation ``rho`` with ``y`` at every point (the Markov model's
    assumption holds by construction).
    """
    import rasterio
    from rasterio.transform import from_origin

    from geosim.cautions import CAUTION

    xmin, ymin, xmax, ymax = valley.bounds
    x0 = math.floor((xmin - SURVEY_CELL) / SURVEY_CELL) * SURVEY_CELL
    y1 = math.ceil((ymax + SURVEY_CELL) / SURVEY_CELL) * SURVEY_CELL
    nx = int(math.ceil((xmax + SURVEY_CELL - x0) / SURVEY_CELL))
    ny = int(math.ceil((y1 - (ymin - SURVEY_CELL)) / SURVEY_CELL))
    cx = x0 + SURVEY_CELL * (np.arange(nx) + 0.5)
    cy = y1 - SURVEY_CELL * (np.arange(ny) + 0.5)
    cells = np.column_stack([np.tile(cx, ny), np.repeat(cy, nx)])
    # y at the cells given y at the wells: mean C_cw C_ww^-1 y_w, covariance C_cc - C_cw C_ww^-1 C_wc
    c_ww = AQUIFER_MODEL.cov_matrix(wells)
    c_cw = AQUIFER_MODEL.cov_matrix(cells, wells)
    factor = scipy.linalg.cho_factor(c_ww, lower=True)
    mean = c_cw @ scipy.linalg.cho_solve(factor, y_wells)
    cond = AQUIFER_MODEL.cov_matrix(cells) - c_cw @ scipy.linalg.cho_solve(factor, c_cw.T)
    cond[np.diag_indices_from(cond)] += 1e-9  # round-off at cells on top of a well
    lower = scipy.linalg.cholesky(cond, lower=True, overwrite_a=True, check_finite=False)
    y_cells = mean + lower @ _rng(7).standard_normal(len(cells))
    e = gaussian_at(cells, SURVEY_NOISE_MODEL, _rng(8))
    s = SURVEY_CORRELATION * y_cells + math.sqrt(1.0 - SURVEY_CORRELATION**2) * e
    ohm_m = 10.0 ** (SURVEY_LOG10_MEDIAN + SURVEY_LOG10_STD * s)
    profile = dict(driver="GTiff", width=nx, height=ny, count=1, dtype="float32", crs=f"EPSG:{AQUIFER_EPSG}",
                   transform=from_origin(x0, y1, SURVEY_CELL, SURVEY_CELL), nodata=-9999.0, compress="deflate",
                   predictor=3)
    with atomic_output(path, overwrite=True) as tmp:
        with rasterio.open(tmp, "w", **profile) as dst:
            dst.write(np.round(ohm_m, 1).reshape(ny, nx).astype(np.float32), 1)
            dst.set_band_description(1, "apparent resistivity (ohm m), invented survey")
            dst.update_tags(caution=CAUTION, note="invented survey for testing; not a real place",
                            correlation_with_log10_k=str(SURVEY_CORRELATION))
            dst.update_tags(1, units="ohm m")


def make_all(out: Path = HERE) -> None:
    """Write both scenarios into ``out/ore_prospect`` and ``out/alluvial_aquifer``."""
    out = Path(out)
    make_ore_prospect(out / "ore_prospect")
    make_alluvial_aquifer(out / "alluvial_aquifer")


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", type=Path, default=HERE,
                        help="folder to write the scenarios into (default: beside this script)")
    args = parser.parse_args(argv)
    make_all(args.out)
    print(f"wrote the sample fields into {args.out}")


if __name__ == "__main__":
    main()
