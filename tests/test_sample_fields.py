"""Tests of the invented sample fields in sample_fields/ and of the script that makes them."""
from __future__ import annotations

import csv
import importlib.util
import json
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg

import geosim
from geosim.variogram import Model

SAMPLES = Path(__file__).resolve().parents[1] / "sample_fields"
ORE = SAMPLES / "ore_prospect"
AQUIFER = SAMPLES / "alluvial_aquifer"


@pytest.fixture(scope="module")
def script():
    spec = importlib.util.spec_from_file_location("make_sample_fields", SAMPLES / "make_sample_fields.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _rows(path: Path) -> tuple[list[str], list[list[str]]]:
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


@pytest.fixture(scope="module")
def ore_holes():
    return geosim.read_drillholes(ORE / "collars.csv", ORE / "surveys.csv", ORE / "assays.csv",
                                  values="cu_pct", crs="EPSG:32750")


@pytest.fixture(scope="module")
def wells():
    return geosim.read_points(AQUIFER / "wells.csv", x="lon", y="lat", values="k_ms", hole="well_id",
                              crs="EPSG:4326")


# ---------------------------------------------------------------------------
# the committed files
# ---------------------------------------------------------------------------

def test_ore_tables(ore_holes):
    assert _rows(ORE / "collars.csv")[0] == ["hole_id", "x", "y", "z", "depth"]
    assert _rows(ORE / "surveys.csv")[0] == ["hole_id", "depth", "azimuth", "dip"]
    assert _rows(ORE / "assays.csv")[0] == ["hole_id", "from", "to", "cu_pct"]
    h = ore_holes
    assert h.crs.to_epsg() == 32750
    assert len(h.ids) == 40 and len(set(h.ids)) == 40
    assert np.all((h.depths >= 120.0) & (h.depths <= 250.0))
    # 24 inclined holes collared at -55 to -75, two vertical holes with one row, 14 without rows
    collar_dips = {k: s[0, 2] for k, s in h.surveys.items()}
    inclined = [d for d in collar_dips.values() if d > -89.0]
    assert len(inclined) == 24 and all(-75.0 <= d <= -55.0 for d in inclined)
    assert len(collar_dips) == 26 and len(h.ids) - len(collar_dips) == 14
    for s in h.surveys.values():  # gently curving: at most 3 degrees of dip change per 100 m
        if len(s) > 1:
            assert np.all(np.abs(np.diff(s[:, 2]) / np.diff(s[:, 0])) <= 0.03 + 1e-9)
    # 1-2 m intervals, the cover unsampled, a few gaps
    length = h.bottom - h.top
    assert len(length) == 5041 and np.all((length >= 1.0 - 1e-9) & (length <= 2.0 + 1e-9))
    gaps, first = 0, []
    for hole in h.ids:
        idx = h.intervals_of(hole)
        first.append(h.top[idx[0]])
        gaps += int(np.sum(h.top[idx[1:]] > h.bottom[idx[:-1]] + 1e-9))
    assert gaps == 6 and 4.0 <= min(first) and max(first) <= 12.0
    cu = h.values[:, 0]
    assert np.all(cu > 0) and np.mean(cu) > np.median(cu)  # positive and right-skewed


def test_ore_grades_follow_the_stated_marginal(ore_holes, script):
    # y = (ln cu - mu) / sigma should be the simulated normal scores: mean 0, variance 1. Its mean is
    # checked on every 8th interval (630 values) against the standard error implied by the true model,
    # sqrt(1' C 1) / n for correlated values, allowing 3 standard errors.
    h = ore_holes
    pick = np.arange(0, len(h.top), 8)
    mid = np.empty((len(h.top), 3))
    for hole in h.ids:
        idx = h.intervals_of(hole)
        mid[idx] = h.positions(hole, (h.top[idx] + h.bottom[idx]) / 2)
    y = (np.log(h.values[pick, 0]) - script.ORE_MU) / script.ORE_SIGMA
    cov = script.ORE_MODEL.cov_matrix(mid[pick])
    se = math.sqrt(cov.sum()) / len(pick)
    assert abs(y.mean()) < 3 * se
    # Their variance: whitened with the true model, z = L^-1 y is independent N(0, 1) if the grades
    # follow it, so its mean square has standard error sqrt(2 / n) (0.056 here, 3 standard errors
    # allowed; the unwhitened variance of these correlated values would allow only +-0.3)
    lower = scipy.linalg.cholesky(cov, lower=True)
    z = scipy.linalg.solve_triangular(lower, y, lower=True)
    assert abs(np.mean(z ** 2) - 1.0) < 3 * math.sqrt(2 / len(z))


def test_ore_positions_match_geosim_desurvey(ore_holes, script):
    # two independent minimum-curvature implementations (the script's and geosim.drillholes) agree
    h = ore_holes
    for hole in h.ids:
        idx = h.intervals_of(hole)
        depths = (h.top[idx] + h.bottom[idx]) / 2
        stations = h.surveys.get(hole, np.empty((0, 3)))
        mine = script.desurvey(h.collars[list(h.ids).index(hole)], stations, depths)
        assert np.allclose(mine, h.positions(hole, depths), atol=1e-6, rtol=0)


def test_aquifer_wells(wells, script):
    header, rows = _rows(AQUIFER / "wells.csv")
    assert header == ["well_id", "lon", "lat", "k_ms"] and len(rows) == 80
    assert len({r[0] for r in rows}) == 80
    # geosim's automatic UTM choice recovers the frame the wells were made in
    assert wells.crs.to_epsg() == script.AQUIFER_EPSG == 32725
    assert len(wells) == 80 and wells.notes and "32725" in wells.notes[0]
    k = wells.column()
    assert np.all(k > 0) and 1e-7 < k.min() and k.max() < 1e-1
    # whitening with the true model: z = L^-1 y is independent N(0, 1) if the wells follow it;
    # 3 standard errors of a mean (1 / sqrt(80)) and of a variance (sqrt(2 / 80)) of 80 values
    y = (np.log10(k) - script.AQUIFER_LOG10_MEAN) / script.AQUIFER_LOG10_STD
    lower = scipy.linalg.cholesky(script.AQUIFER_MODEL.cov_matrix(wells.coords), lower=True)
    z = scipy.linalg.solve_triangular(lower, y, lower=True)
    assert abs(z.mean()) < 3 / math.sqrt(80)
    assert abs(z.var() - 1.0) < 3 * math.sqrt(2 / 80)
    # wells at least 30 m apart, as the README says
    d = np.hypot(*(wells.coords[:, None, :] - wells.coords[None, :, :]).transpose(2, 0, 1))
    assert d[np.triu_indices(80, 1)].min() >= 30.0 - 0.05


@pytest.mark.parametrize("folder", [ORE, AQUIFER])
def test_domains_are_rfc7946_lonlat(folder):
    doc = json.loads((folder / "domain.geojson").read_text())
    assert doc["type"] == "FeatureCollection" and "crs" not in doc
    geom = doc["features"][0]["geometry"]
    assert geom["type"] == "Polygon"
    ring = np.array(geom["coordinates"][0])
    assert np.all(np.abs(ring[:, 0]) <= 180) and np.all(np.abs(ring[:, 1]) <= 90)
    assert (ring[0] == ring[-1]).all()
    # exterior ring counter-clockwise (RFC 7946 section 3.1.6): positive shoelace area
    x, y = ring[:, 0], ring[:, 1]
    assert np.sum(x[:-1] * y[1:] - x[1:] * y[:-1]) > 0


@pytest.mark.parametrize("folder, name", [(ORE, "ORE"), (AQUIFER, "AQUIFER")])
def test_true_model_files_and_readmes_state_the_script_model(script, folder, name):
    model = getattr(script, f"{name}_MODEL")
    record = json.loads((folder / "true_model.json").read_text())
    assert Model.from_dicts(record["model"]) == model
    assert record["seed"] == script.SEED and record["crs"] == f"EPSG:{getattr(script, name + '_EPSG')}"
    readme = (folder / "README.md").read_text()
    assert str(model) in readme and "invented" in readme.lower()
    assert f"EPSG:{getattr(script, name + '_EPSG')}" in readme


def test_aquifer_units_agree_with_their_raster_and_readme(script):
    # each well's logged unit is the unit of the raster cell it falls in (both made by one rule),
    # and the README states both unit models
    import rasterio
    wells = geosim.read_points(AQUIFER / "wells_units.csv", x="lon", y="lat", values="k_ms", crs="EPSG:4326")
    header, rows = _rows(AQUIFER / "wells_units.csv")
    logged = [script.UNIT_CODES[r[header.index("unit")]] for r in rows]
    with rasterio.open(AQUIFER / "units.tif") as src:
        assert src.crs.to_epsg() == script.AQUIFER_EPSG
        mapped = [int(v[0]) for v in src.sample(wells.coords)]
    assert mapped == logged and set(logged) == {1, 2}
    readme = (AQUIFER / "README.md").read_text()
    assert str(script.GRAVEL_MODEL) in readme and str(script.SILT_MODEL) in readme
    record = json.loads((AQUIFER / "units_true_model.json").read_text())
    assert Model.from_dicts(record["units"]["silt"]["model"]) == script.SILT_MODEL


# ---------------------------------------------------------------------------
# the script
# ---------------------------------------------------------------------------

def test_script_desurvey_is_exact_on_a_circular_arc(script):
    # a hole in the vertical plane of azimuth 90 whose dip flattens from -60 to -40 degrees at a
    # constant rate is a circular arc, which minimum curvature reproduces exactly (Sawaryn and
    # Thorogood 2005, "A compendium of directional calculations based on the minimum curvature
    # method", SPE Drilling & Completion 20(1); from memory). Closed form for dip phi(s) = phi0 + k s:
    # east(s) = (sin phi(s) - sin phi0) / k, up(s) = -(cos phi(s) - cos phi0) / k.
    phi0, k = math.radians(-60.0), math.radians(20.0) / 200.0
    stations = np.array([[s, 90.0, math.degrees(phi0 + k * s)] for s in (0.0, 50.0, 100.0, 150.0, 200.0)])
    depths = np.array([0.0, 12.5, 50.0, 77.7, 149.0, 199.9])
    got = script.desurvey(np.array([100.0, 200.0, 300.0]), stations, depths)
    phi = phi0 + k * depths
    expected = np.column_stack([100.0 + (np.sin(phi) - math.sin(phi0)) / k, np.full(len(depths), 200.0),
                                300.0 - (np.cos(phi) - math.cos(phi0)) / k])
    assert np.allclose(got, expected, atol=1e-9, rtol=0)
    # below the last station the hole runs straight on
    tail = script.desurvey(np.zeros(3), stations, np.array([200.0, 210.0]))
    assert np.allclose(tail[1] - tail[0], 10.0 * script.direction(90.0, -40.0), atol=1e-9)


def test_script_gaussian_has_the_model_covariance(script):
    # sample covariance of 4000 independent draws at 12 points against the model's; each entry has
    # standard error at most sqrt((1 + rho^2) / 4000) <= 0.0224 for unit sill, allow 4 of them
    # (78 entries tested at once)
    rng = np.random.default_rng(11)
    pts = rng.uniform(0, 200, size=(12, 3))
    draws = np.array([script.gaussian_at(pts, script.ORE_MODEL, np.random.default_rng([11, i]))
                      for i in range(4000)])
    assert np.allclose(np.cov(draws, rowvar=False), script.ORE_MODEL.cov_matrix(pts), atol=4 * 0.0224)


def _numbers(cells: list[str]) -> np.ndarray:
    return np.array([float(c) for c in cells])


def test_committed_files_equal_what_the_script_makes(script, tmp_path, monkeypatch):
    drawn = []
    real = script._rng

    def recording(stream):
        drawn.append(stream)
        return real(stream)

    monkeypatch.setattr(script, "_rng", recording)
    script.make_all(tmp_path)
    # every step draws from its own stream: a file made from a stream another file also used would
    # be correlated with it by construction (the survey once shared the units' streams 5 and 6)
    assert sorted(drawn) == sorted(set(drawn)) == sorted(script.STREAMS)
    for folder in ("ore_prospect", "alluvial_aquifer"):
        made = sorted(p.name for p in (tmp_path / folder).iterdir())
        committed = sorted(p.name for p in (SAMPLES / folder).iterdir()
                           if p.suffix in (".csv", ".geojson", ".json", ".tif"))
        assert made == committed
        for name in made:
            new, old = tmp_path / folder / name, SAMPLES / folder / name
            if new.suffix == ".csv":
                (h_new, r_new), (h_old, r_old) = _rows(new), _rows(old)
                assert h_new == h_old and len(r_new) == len(r_old)
                assert [r[0] for r in r_new] == [r[0] for r in r_old]
                for j in range(1, len(h_new)):
                    if h_new[j] == "unit":  # unit names
                        assert [r[j] for r in r_new] == [r[j] for r in r_old]
                        continue
                    a = _numbers([r[j] for r in r_new])
                    b = _numbers([r[j] for r in r_old])
                    # another BLAS may change the last bits of the Cholesky factor, so allow one unit
                    # in the last printed digit (relative 1e-3 for the 4-digit conductivities)
                    tol = 1e-3 * np.abs(b) if h_new[j] == "k_ms" else 10.0 ** -len(r_old[0][j].split(".")[1])
                    assert np.all(np.abs(a - b) <= tol * 1.0001), (folder, name, h_new[j])
            elif new.suffix == ".tif":
                import rasterio
                with rasterio.open(new) as a, rasterio.open(old) as b:
                    assert a.crs == b.crs and a.transform == b.transform and a.tags() == b.tags()
                    if name == "resistivity_survey.tif":
                        # another BLAS may change the last bits of the factors: resistivities are
                        # stored to 0.1 ohm m, so allow one unit there
                        assert np.all(np.abs(a.read(1) - b.read(1)) <= 0.1001)
                    else:
                        assert np.array_equal(a.read(), b.read())
            elif new.name == "domain.geojson":
                a = np.array(json.loads(new.read_text())["features"][0]["geometry"]["coordinates"][0])
                b = np.array(json.loads(old.read_text())["features"][0]["geometry"]["coordinates"][0])
                assert a.shape == b.shape and np.allclose(a, b, atol=2e-7, rtol=0)
            else:
                assert json.loads(new.read_text()) == json.loads(old.read_text())
