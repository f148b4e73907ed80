"""A drillhole run with logged units and a layer cake of surfaces, end to end: an invented oxidised
cap over fresh rock on the ore sample field (sample_fields/ore_prospect), through `geosim run`.

The contact is an invented dipping plane; each hole's logged contact is the depth where the hole
crosses it (the hole's own desurveyed path), so the logged units and the surfaces tell one story.
The surfaces are GeoTIFFs written here with rasterio; the checks read them back with rasterio at
each node centre, independently of geosim's surface reader."""
import csv
import json
import shutil
from pathlib import Path

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

import geosim.units_run as units_run
from geosim.config.runspec import load_spec
from geosim.inputs import read_holes

FIELD = Path(__file__).resolve().parents[1] / "sample_fields" / "ore_prospect"
CRS = "EPSG:32750"
X0, Y0, Z0 = 455000.0, 5460000.0, 291.3   # the contact plane passes through (X0, Y0, Z0)
GX, GY = -0.06, 0.035                       # its gradient: dips gently to the east, rises to the north
CAP_TOP = 420.0                             # top of the cap: above every collar (the collars bound it)
RASTER = (454500.0, 5460500.0, 5.0, 160, 160)  # west, north, cell, rows, columns: covers the domain
UNITS = '''
[units]
samples = { intervals = "logged_units.csv" }
nodes = { surfaces = ["cap_top.tif", "contact.tif"], units = ["cap", "fresh"], surface = "top" }

[unit.cap]
code = 1
description = "oxidised cap (invented)"

[unit.fresh]
code = 2
description = "fresh rock (invented)"
'''
# a small grid and two realizations keep the run short; the spec's own variogram, not fitted
SETTINGS = ["grid.cell=[40.0, 40.0, 20.0]", "grid.z_range=[200.0, 340.0]", "simulation.realizations=2",
            "simulation.workers=1", "outputs.plots=false", "variogram.fit=false", "outputs.cross_validation=false",
            "outputs.estimate=false", 'outputs.cube="none"']


def _plane(x, y):
    return Z0 + GX * (np.asarray(x) - X0) + GY * (np.asarray(y) - Y0)


def _surface(path: Path, values: np.ndarray) -> None:
    west, north, cell, rows, cols = RASTER
    with rasterio.open(path, "w", driver="GTiff", height=rows, width=cols, count=1, dtype="float64", crs=CRS,
                       transform=from_origin(west, north, cell, cell), nodata=-9999.0) as dst:
        dst.write(values, 1)


def _build(folder: Path) -> dict[str, float]:
    """The field copied with the units added: surfaces, logged units (cap above the contact, fresh
    below it down to the hole's end, in two rows per unit to test joining) and the spec."""
    shutil.copytree(FIELD, folder)
    west, north, cell, rows, cols = RASTER
    xc = west + (np.arange(cols) + 0.5) * cell
    yc = north - (np.arange(rows) + 0.5) * cell
    contact = _plane(*np.meshgrid(xc, yc))
    _surface(folder / "contact.tif", contact)
    _surface(folder / "cap_top.tif", np.full((rows, cols), CAP_TOP))
    spec = load_spec(folder / "run.toml")
    holes = read_holes(spec)
    depths_of = {}
    lines = ["hole_id,from,to,unit"]
    for hole_id, total in zip(holes.ids.tolist(), holes.depths.tolist()):
        d = np.linspace(0.0, total, int(total * 20) + 1)
        xyz = holes.positions(hole_id, d)
        below = xyz[:, 2] <= _plane(xyz[:, 0], xyz[:, 1])
        assert below.any() and not below[0]  # every hole starts in the cap and reaches fresh rock
        k = int(np.argmax(below))
        c = round(float(d[k]), 2)
        depths_of[hole_id] = c
        half = round(c / 2.0, 2)
        lines += [f"{hole_id},0,{half},cap", f"{hole_id},{half},{c},1",
                  f"{hole_id},{c},{total:g},fresh"]
    (folder / "logged_units.csv").write_text("\n".join(lines) + "\n")
    text = (folder / "run.toml").read_text()  # blocks, ranking and query points left out: a shorter run
    (folder / "run.toml").write_text(text[:text.index("[blocks]")] + UNITS)
    return depths_of


def _run(folder: Path, out: Path):
    from test_cli_e2e import geosim_cmd
    args = [a for s in SETTINGS for a in ("--set", s)]
    done = geosim_cmd("run", folder / "run.toml", "--out", out, *args)
    assert done.returncode == 0, done.stderr
    return done


@pytest.fixture(scope="module")
def field(tmp_path_factory):
    root = tmp_path_factory.mktemp("cap")
    contacts = _build(root / "a")
    done = _run(root / "a", root / "out_a")
    return root, contacts, done


def _logged_unit(contacts, hole, depth):
    return np.where(np.asarray(depth) < np.asarray([contacts[h] for h in hole]), 1, 2)


def test_composites_never_straddle_the_contact(field):
    root, contacts, _ = field
    samples, codes = units_run.load_unit_samples(load_spec(root / "a" / "run.toml"))
    hole = samples.hole_ids
    top, bottom = samples.attributes["from"], samples.attributes["to"]
    c = np.asarray([contacts[h] for h in hole])
    assert set(np.unique(codes)) == {1, 2}
    assert ((bottom <= c + 1e-6) | (top >= c - 1e-6)).all()              # no composite crosses its contact
    np.testing.assert_array_equal(codes, _logged_unit(contacts, hole, (top + bottom) / 2.0))
    np.testing.assert_array_equal(codes, _logged_unit(contacts, hole, samples.attributes["depth"]))
    # the cap's two logged rows (one by name, one by code) are one stretch: no composite ends at the
    # mid-cap break unless a 4 m composite edge falls there by chance (the breaks are at arbitrary depths)
    half = np.asarray([round(contacts[h] / 2.0, 2) for h in hole])
    ends_at_half = np.isclose(bottom, half, atol=1e-6) & (codes == 1)
    assert ends_at_half.sum() <= 2
    # the assays run across every contact, so a hole's last cap composite ends exactly at its contact
    # (a residual is merged into it); undersampled ones may be dropped, hence at least half the holes
    assert np.isclose(bottom, c, atol=1e-6).sum() >= len(contacts) // 2


def test_nodes_follow_the_surfaces_and_outputs_carry_the_codes(field):
    root, _, _ = field
    spec = load_spec(root / "a" / "run.toml", {"grid.cell": [40.0, 40.0, 20.0], "grid.z_range": [200.0, 340.0]})
    units = units_run.prepare_units(spec)
    grid, codes = units.grid, units.node_codes
    z, y, x = np.meshgrid(*grid.axes(), indexing="ij")
    with rasterio.open(root / "a" / "contact.tif") as src:  # the contact under each node, read by rasterio
        contact = np.array([v[0] for v in src.sample(zip(x.ravel(), y.ravel()))]).reshape(x.shape)
    active = grid.mask
    assert (codes[active] >= 1).all() and (codes[~active] == -1).all()
    assert ((z[codes == 1] > contact[codes == 1]) & (z[codes == 1] <= CAP_TOP)).all()
    assert (z[codes == 2] <= contact[codes == 2]).all()
    assert (codes == 1).sum() > 20 and (codes == 2).sum() > 20
    # the run's outputs carry the same codes, level by level
    out = root / "out_a"
    for k in range(grid.nz):
        with rasterio.open(out / f"summary_z{k:03d}.tif") as src:
            assert src.descriptions[-1] == "unit code"
            layer = src.read(src.count)
            expected = np.where(codes[k] >= 0, codes[k], np.nan)
            np.testing.assert_array_equal(layer, expected)


def test_report_has_a_section_per_unit_and_the_caution(field):
    root, _, done = field
    assert "CAUTION" in done.stderr
    report = json.loads((root / "out_a" / "report.json").read_text())
    assert [u["name"] for u in report["units"]] == ["cap", "fresh"]
    hashed = {Path(k).name for k in json.loads(report["input_sha256"])}  # provenance: the unit sources too
    assert {"logged_units.csv", "cap_top.tif", "contact.tif", "assays.csv"} <= hashed
    samples, codes = units_run.load_unit_samples(load_spec(root / "a" / "run.toml"))
    for section in report["units"]:
        assert {"data", "declustering", "transform", "variogram", "validation"} <= set(section)
        assert section["samples"] == int((codes == section["code"]).sum())
        assert section["nodes"] > 0


def _realizations(out: Path) -> np.ndarray:
    """(realization, z, y, x) values from each realization's level files (band 1: its own field)."""
    fields = []
    for r in range(2):
        levels = []
        for path in sorted((out / "realizations").glob(f"r{r:04d}_z*.tif")):
            with rasterio.open(path) as src:
                levels.append(src.read(1))
        fields.append(np.stack(levels))
    return np.stack(fields)


def test_a_fresh_rock_assay_leaves_every_cap_node_unchanged(field):
    """Hard boundary: one fresh-rock assay changed, every cap node's realization bit for bit the same,
    while fresh rock does change."""
    root, contacts, _ = field
    shutil.copytree(root / "a", root / "b")
    rows = list(csv.reader(open(root / "b" / "assays.csv")))
    pick = next(i for i, r in enumerate(rows[1:], 1)
                if r[3] and float(r[1]) > contacts[r[0]] + 10.0 and float(r[3]) > 0.3)
    rows[pick][3] = f"{float(rows[pick][3]) * 5.0:.3f}"
    with open(root / "b" / "assays.csv", "w", newline="") as f:
        csv.writer(f).writerows(rows)
    _run(root / "b", root / "out_b")
    spec = load_spec(root / "a" / "run.toml", {"grid.cell": [40.0, 40.0, 20.0], "grid.z_range": [200.0, 340.0]})
    codes = units_run.prepare_units(spec).node_codes
    a, b = _realizations(root / "out_a"), _realizations(root / "out_b")
    assert a.shape == b.shape and a.shape[1:] == codes.shape
    cap, fresh = codes == 1, codes == 2
    for fa, fb in zip(a, b):
        assert np.array_equal(fa[cap], fb[cap])         # bit for bit
        assert not np.array_equal(fa[fresh], fb[fresh])  # the changed assay reached fresh rock
