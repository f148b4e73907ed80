"""Drillhole intake, minimum-curvature positions and compositing."""
from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

import geosim
from geosim.drillholes import Drillholes, composite, desurvey, direction, read_drillholes
from geosim.errors import InputError

SAMPLES = Path(__file__).resolve().parents[1] / "sample_fields" / "ore_prospect"


# -- minimum curvature against analytic geometry ---------------------------------------------------

def angles(t: np.ndarray) -> tuple[float, float]:
    """Azimuth and dip (negative down) of a unit vector (east, north, up)."""
    az = math.degrees(math.atan2(t[0], t[1])) % 360.0
    return az, math.degrees(math.asin(max(-1.0, min(1.0, t[2]))))


def test_straight_inclined_hole():
    # a straight line: p(s) = collar + s (cos(dip) sin(az), cos(dip) cos(az), sin(dip)) (analytic)
    collar = np.array([1000.0, 2000.0, 300.0])
    s = np.array([0.0, 12.5, 50.0, 100.0, 140.0])
    p = desurvey(collar, [0.0, 60.0, 120.0], [45.0] * 3, [-60.0] * 3, s)
    d = np.array([math.cos(math.radians(60)) * math.sin(math.radians(45)),
                  math.cos(math.radians(60)) * math.cos(math.radians(45)), -math.sin(math.radians(60))])
    np.testing.assert_allclose(p, collar + s[:, None] * d, atol=1e-9)


def test_vertical_quarter_circle():
    # a hole leaving the collar vertically down and ending horizontal towards east after a quarter
    # circle of radius R: at length s, theta = s / R, x = R (1 - cos theta), z = -R sin theta (analytic)
    r = 200.0
    total = r * math.pi / 2
    s = np.linspace(0.0, total, 23)
    p = desurvey([0.0, 0.0, 0.0], [0.0, total], [90.0, 90.0], [-90.0, 0.0], s)
    th = s / r
    np.testing.assert_allclose(p[:, 0], r * (1 - np.cos(th)), atol=1e-9)
    np.testing.assert_allclose(p[:, 1], 0.0, atol=1e-9)
    np.testing.assert_allclose(p[:, 2], -r * np.sin(th), atol=1e-9)


@pytest.mark.parametrize("stations", [2, 5])
def test_constant_curvature_arc_in_a_tilted_plane(stations):
    # any circular arc: p(s) = p0 + R sin(s/R) t1 + R (1 - cos(s/R)) n, with n the unit normal towards
    # the end direction t2 in the plane of t1 and t2, R = L / beta (analytic geometry). Survey stations
    # placed on the arc carry the arc's tangent, so minimum curvature must reproduce it exactly.
    t1 = direction(10.0, -70.0)[0]
    t2 = direction(80.0, -40.0)[0]
    beta = math.acos(float(t1 @ t2))
    length = 180.0
    r = length / beta
    n = t2 - (t1 @ t2) * t1
    n /= np.linalg.norm(n)
    sd = np.linspace(0.0, length, stations)
    az, dip = zip(*(angles(math.cos(s / r) * t1 + math.sin(s / r) * n) for s in sd))
    collar = np.array([5.0, -3.0, 250.0])
    s = np.linspace(0.0, length, 37)
    p = desurvey(collar, sd, az, dip, s)
    exact = collar + r * np.sin(s / r)[:, None] * t1 + r * (1 - np.cos(s / r))[:, None] * n
    np.testing.assert_allclose(p, exact, atol=1e-7)


def test_no_survey_at_collar_and_straight_below_last_survey():
    # first survey at 30 m: its orientation holds from the collar; below 60 m the hole goes straight on
    p = desurvey([0.0, 0.0, 0.0], [30.0, 60.0], [0.0, 0.0], [-45.0, -45.0], [0.0, 30.0, 100.0])
    h = math.sqrt(0.5)
    np.testing.assert_allclose(p, [[0, 0, 0], [0, 30 * h, -30 * h], [0, 100 * h, -100 * h]], atol=1e-9)


def test_vertical_without_surveys_and_bad_arguments():
    np.testing.assert_allclose(desurvey([1.0, 2.0, 3.0], [], [], [], [0.0, 10.0]), [[1, 2, 3], [1, 2, -7]])
    with pytest.raises(ValueError, match=">= 0"):
        desurvey([0, 0, 0], [], [], [], [-1.0])
    with pytest.raises(ValueError, match="increase"):
        desurvey([0, 0, 0], [10.0, 10.0], [0, 0], [-60, -60], [5.0])
    with pytest.raises(ValueError, match="opposite"):
        desurvey([0, 0, 0], [0.0, 10.0], [0, 180], [-30, 30], [5.0])


# -- reading tables ---------------------------------------------------------------------------------

def write(folder: Path, name: str, text: str) -> str:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return str(path)


COLLARS = "hole_id,x,y,z,depth\nA,100,200,50,20\nB,150,200,52,12\nC,200,200,55,10\n"
SURVEYS = "hole_id,depth,azimuth,dip\nA,0,90,-60\nA,20,90,-60\nB,5,0,-90\n"
INTERVALS = ("hole_id,from,to,cu\n"
             "A,0,1,1.0\nA,1,2.5,4.0\nA,3.5,5,2.0\nA,5,5.6,3.0\n"
             "B,2,4,0.5\nB,4,6,\nB,6,8,1.5\n")


@pytest.fixture
def files(tmp_path):
    return (write(tmp_path, "collars.csv", COLLARS), write(tmp_path, "surveys.csv", SURVEYS),
            write(tmp_path, "intervals.csv", INTERVALS))


def test_read_drillholes(files):
    h = read_drillholes(*files, values="cu", crs="EPSG:32633")
    assert isinstance(h, Drillholes) and h.ids.tolist() == ["A", "B", "C"]
    assert h.names == ("cu",) and h.crs.to_epsg() == 32633 and h.source == files
    assert set(h.surveys) == {"A", "B"}
    assert np.isnan(h.values[h.intervals_of("B")][1, 0])
    assert any("1 of 7 intervals have no cu value" in n for n in h.notes)
    assert "1 hole(s) without intervals: C" in h.notes
    np.testing.assert_allclose(h.positions("C", [10.0]), [[200, 200, 45]])
    end = h.positions("A", [20.0])[0]
    np.testing.assert_allclose(end, [100 + 10.0, 200, 50 - 20 * math.sin(math.radians(60))], atol=1e-9)
    with pytest.raises(KeyError, match="did you mean 'A'"):
        h.positions("a", [1.0])


def test_composites_by_hand(files):
    h = read_drillholes(*files, values="cu", crs=None)
    c = composite(h, 2.0, min_fraction=0.5)
    a = c.hole_ids == "A"
    # hole A, 2 m from 0 m: [0,2] = (1*1 + 1*4)/2 = 2.5; [2,4] = (0.5*4 + 0.5*2)/1.0 = 3.0 over the
    # sampled metre only (the 2.5-3.5 gap is not zero); [4,5.6] residual of 1.6 m >= 1 m kept:
    # (1*2 + 0.6*3)/1.6 = 2.375
    np.testing.assert_allclose(c.column()[a], [2.5, 3.0, 2.375])
    np.testing.assert_allclose(c.attributes["length"][a], [2.0, 1.0, 1.6])
    np.testing.assert_allclose(c.attributes["depth"][a], [1.0, 3.0, 4.8])
    # hole B from 2 m: [2,4] = 0.5; [4,6] not assayed -> left out; [6,8] = 1.5
    b = c.hole_ids == "B"
    np.testing.assert_allclose(c.column()[b], [0.5, 1.5])
    np.testing.assert_allclose(c.attributes["depth"][b], [3.0, 7.0])
    assert c.coords.shape == (5, 3) and c.crs is None
    np.testing.assert_allclose(c.coords[b], [[150, 200, 49], [150, 200, 45]])
    np.testing.assert_allclose(c.coords[a][0], h.positions("A", [1.0])[0])


def test_short_residual_merged_or_dropped(files):
    h = read_drillholes(*files, values="cu", crs=None)
    a = lambda c: c.hole_ids == "A"  # noqa: E731
    merged = composite(h, 2.0, min_fraction=0.9)  # residual 1.6 m < 1.8 m
    # [2,5.6]: (0.5*4 + 1.5*2 + 0.6*3) / (0.5 + 1.5 + 0.6) = 6.8 / 2.6
    np.testing.assert_allclose(merged.column()[a(merged)], [2.5, 6.8 / 2.6])
    np.testing.assert_allclose(merged.attributes["to"][a(merged)], [2.0, 5.6])
    assert "merged into the composite above" in merged.notes[-1]
    dropped = composite(h, 2.0, min_fraction=0.9, residual="drop")
    np.testing.assert_allclose(dropped.column()[a(dropped)], [2.5, 3.0])
    assert "dropped" in dropped.notes[-1]


def test_composites_from_the_collar(files):
    h = read_drillholes(*files, values="cu", crs=None)
    c = composite(h, 3.0, start="collar", min_sampled_fraction=0.0)
    b = c.hole_ids == "B"
    # B from the collar: [0,3] holds 2-3 (0.5); [3,6] holds 3-4 (0.5); [6,8] residual 2 m >= 1.5 m
    np.testing.assert_allclose(c.column()[b], [0.5, 0.5, 1.5])
    np.testing.assert_allclose(c.attributes["length"][b], [1.0, 1.0, 2.0])


def test_renamed_columns(tmp_path):
    col = write(tmp_path, "c.csv", "BHID,E,N,RL,EOH\nA,0,0,0,10\n")
    itv = write(tmp_path, "i.csv", "BHID,top,base,zn\nA,0,10,2.0\n")
    h = read_drillholes(col, None, itv, values="zn", crs=None,
                        columns={"collar": {"hole_id": "BHID", "x": "E", "y": "N", "z": "RL", "depth": "EOH"},
                                 "intervals": {"hole_id": "BHID", "from": "top", "to": "base"}})
    assert h.surveys == {} and composite(h, 5.0).column().tolist() == [2.0, 2.0]
    with pytest.raises(InputError, match="no column role 'easting'") as err:
        read_drillholes(col, None, itv, values="zn", crs=None, columns={"collar": {"easting": "E"}})
    assert err.value.field == "columns.collar.easting"


def test_geographic_collars_are_reprojected(tmp_path, notes):
    col = write(tmp_path, "c.csv", "hole_id,x,y,z,depth\nA,15.1,48.2,300,50\nB,15.101,48.2,301,50\n")
    itv = write(tmp_path, "i.csv", "hole_id,from,to,cu\nA,0,10,1\nB,0,10,2\n")
    with notes("UTM"):
        h = read_drillholes(col, None, itv, values="cu", crs="EPSG:4326")
    assert h.crs.to_epsg() == 32633 and h.notes[0].startswith("reprojected EPSG:4326")
    spacing = np.linalg.norm(h.collars[1, :2] - h.collars[0, :2])
    # 0.001 degree of longitude at 48.2 N is about 111.32 km * cos(48.2 deg) / 1000 = 74.2 m
    # (spherical approximation, common practice; the ellipsoid changes it by well under 1 %)
    assert spacing == pytest.approx(74.2, rel=0.01)


BAD_CASES = [
    # (table, replaced text, replacement, message, row, field)
    ("collars.csv", "B,150,200,52,12", "A,150,200,52,12", "appears twice", 3, "hole_id"),
    ("collars.csv", "C,200,200,55,10", "C,200,200,55,0", "not positive", 4, "depth"),
    ("collars.csv", "C,200,200,55,10", "C,200,two hundred,55,10", "not a number", 4, "y"),
    ("surveys.csv", "A,20,90,-60", "A,20,90,-95", "dip -95", 3, "dip"),
    ("surveys.csv", "A,20,90,-60", "A,20,365,-60", "azimuth 365", 3, "azimuth"),
    ("surveys.csv", "A,20,90,-60", "A,25,90,-60", "outside the hole", 3, "depth"),
    ("surveys.csv", "A,20,90,-60", "A,0,90,-60", "two surveys at depth 0", 3, "depth"),
    ("surveys.csv", "A,20,90,-60", "A,20,270,60", "opposite directions", 3, "azimuth"),
    ("surveys.csv", "B,5,0,-90", "D,5,0,-90", "'D' is not in the collar table", 4, "hole_id"),
    ("intervals.csv", "A,1,2.5,4.0", "A,2.5,2.5,4.0", "not less than 'to'", 3, "to"),
    ("intervals.csv", "A,1,2.5,4.0", "A,3,1,4.0", "not less than 'to'", 3, "to"),
    ("intervals.csv", "A,1,2.5,4.0", "A,-1,2.5,4.0", "above the collar", 3, "from"),
    ("intervals.csv", "B,6,8,1.5", "B,6,13,1.5", "past the hole's total depth 12", 8, "to"),
    ("intervals.csv", "A,3.5,5,2.0", "A,2,5,2.0", "overlap", 4, "from"),
    ("intervals.csv", "B,6,8,1.5", "BB,6,8,1.5", "did you mean 'B'", 8, "hole_id"),
    ("intervals.csv", "B,6,8,1.5", "B,6,8,NaN", "not a finite number", 8, "cu"),
    ("intervals.csv", "B,6,8,1.5", "B,6,8,<0.01", "not a number", 8, "cu"),
]


@pytest.mark.parametrize("name, old, new, message, row, field", BAD_CASES)
def test_bad_input_names_file_row_and_column(tmp_path, name, old, new, message, row, field):
    texts = {"collars.csv": COLLARS, "surveys.csv": SURVEYS, "intervals.csv": INTERVALS}
    assert old in texts[name]
    texts[name] = texts[name].replace(old, new)
    paths = [write(tmp_path, n, t) for n, t in texts.items()]
    with pytest.raises(InputError, match=message) as err:
        read_drillholes(*paths, values="cu", crs=None)
    e = err.value
    assert e.file == str(tmp_path / name) and e.row == row and e.field == field and e.fix


def test_overlap_names_both_rows(tmp_path):
    itv = INTERVALS.replace("A,3.5,5,2.0", "A,2,5,2.0")
    paths = [write(tmp_path, "c.csv", COLLARS), None, write(tmp_path, "i.csv", itv)]
    with pytest.raises(InputError, match=r"1-2.5 \(row 3\) and 2-5 \(row 4\)"):
        read_drillholes(*paths, values="cu", crs=None)


def test_misspelt_value_column(files):
    with pytest.raises(InputError, match="did you mean 'cu'") as err:
        read_drillholes(*files, values="cuu", crs=None)
    assert err.value.row == 1


def test_composite_arguments(files):
    h = read_drillholes(*files, values="cu", crs=None)
    for kwargs in ({"length": 0.0}, {"length": 2.0, "min_fraction": 1.5}, {"length": 2.0, "residual": "keep"},
                   {"length": 2.0, "start": "top"}):
        with pytest.raises(ValueError):
            composite(h, **kwargs)


# -- the ore prospect sample field -------------------------------------------------------------------

def test_reads_and_composites_the_ore_prospect(notes):
    if not (SAMPLES / "assays.csv").exists():
        pytest.skip("sample_fields not present")
    notes.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # the sample field needs no silent fixes
        h = read_drillholes(SAMPLES / "collars.csv", SAMPLES / "surveys.csv", SAMPLES / "assays.csv",
                            values="cu_pct", crs="EPSG:32750")
    assert not notes.logged()
    assert len(h.ids) == 40 and len(h.hole) == 5041 and h.crs.to_epsg() == 32750
    c = composite(h, 2.0, residual="merge", min_sampled_fraction=0.0)
    assert c.ndim == 3 and set(c.hole_ids) <= set(h.ids.tolist())
    assert {"length", "depth", "from", "to"} <= set(c.attributes)
    # conservation: merging keeps every sampled metre, so the length-weighted sums agree exactly
    lengths = h.bottom - h.top
    np.testing.assert_allclose((c.attributes["length"] * c.column()).sum(), (lengths * h.values[:, 0]).sum(),
                               rtol=1e-10)
    np.testing.assert_allclose(c.attributes["length"].sum(), lengths.sum(), rtol=1e-12)
    # vertical holes without surveys: composite z = collar z - depth
    vertical = [hid for hid in h.ids if hid not in h.surveys]
    assert vertical
    sel = c.hole_ids == vertical[0]
    z0 = h.collars[h.ids.tolist().index(vertical[0]), 2]
    np.testing.assert_allclose(c.coords[sel, 2], z0 - c.attributes["depth"][sel], atol=1e-9)
    assert geosim.composite is composite and geosim.read_drillholes is read_drillholes


def test_twin_holes_give_merged_composites_with_warning(tmp_path, notes):
    col = write(tmp_path, "c.csv", "hole_id,x,y,z,depth\nT1,0,0,0,10\nT2,0,0,0,10\n")
    itv = write(tmp_path, "i.csv", "hole_id,from,to,cu\nT1,0,2,1.0\nT2,0,2,3.0\n")
    h = read_drillholes(col, None, itv, values="cu", crs=None)
    with notes("merged 2 coincident samples into 1"):
        c = composite(h, 2.0)
    assert len(c) == 1 and c.column().tolist() == [2.0]
    assert "holes T1, T2" in c.notes[-1]


def test_check_positive_names_hole_and_depth(files):
    from geosim.points import check_positive
    h = read_drillholes(*files, values="cu", crs=None)
    c = composite(h, 2.0)
    check_positive(c, "cu")
    zeroed = c.take(np.arange(len(c)))
    zeroed.values[3, 0] = 0.0
    with pytest.raises(InputError, match=r"hole B, depth 3 m\)") as err:
        check_positive(zeroed, "cu")
    assert err.value.field == "cu" and err.value.row is None


@settings(max_examples=60, deadline=None)
@given(pieces=st.lists(st.tuples(st.floats(0.0, 3.0), st.floats(0.1, 4.0),
                                 st.one_of(st.none(), st.floats(0.0, 50.0))), min_size=1, max_size=25),
       length=st.floats(0.5, 6.0), min_fraction=st.floats(0.0, 1.0))
def test_merged_composites_conserve_sampled_metres(pieces, length, min_fraction):
    # property: with residual="merge" every sampled metre lands in exactly one composite, so the
    # length-weighted totals agree, and each composite lies between the values it averages
    top, bottom, vals, d = [], [], [], 0.0
    for gap, size, v in pieces:
        top.append(d + gap)
        bottom.append(d + gap + size)
        vals.append(np.nan if v is None else v)
        d = bottom[-1]
    top, bottom, vals = np.array(top), np.array(bottom), np.array(vals)
    h = Drillholes(ids=np.array(["P"]), collars=np.zeros((1, 3)), depths=np.array([d + 1.0]), surveys={},
                   hole=np.full(len(top), "P"), top=top, bottom=bottom, values=vals[:, None], names=("v",))
    ok = np.isfinite(vals)
    if not ok.any():
        with pytest.raises(InputError):
            composite(h, length, min_fraction=min_fraction)
        return
    c = composite(h, length, min_fraction=min_fraction, residual="merge", min_sampled_fraction=0.0)
    got = c.attributes["length"] * c.column()
    np.testing.assert_allclose(got.sum(), ((bottom - top) * np.where(ok, vals, 0.0)).sum(), rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(c.attributes["length"].sum(), (bottom - top)[ok].sum(), rtol=1e-9)
    assert (c.column() >= vals[ok].min() - 1e-9).all() and (c.column() <= vals[ok].max() + 1e-9).all()
    assert (np.diff(c.attributes["depth"]) > 0).all()


def test_survey_dip_sign_is_stated_never_mirrored(tmp_path):
    down = "hole_id,depth,azimuth,dip\nA,0,90,-60\nB,0,0,-90\n"
    up = "hole_id,depth,azimuth,dip\nA,0,90,60\nB,0,0,90\n"
    c, i = write(tmp_path, "c.csv", COLLARS), write(tmp_path, "i.csv", INTERVALS)
    ref = read_drillholes(c, write(tmp_path, "down.csv", down), i, values="cu", crs=None)
    # 10 m down a hole plunging 60 degrees east: 5 m east, 8.66 m below the collar (z 50)
    np.testing.assert_allclose(ref.positions("A", [10.0])[0], [105.0, 200.0, 50.0 - 10 * math.sin(math.radians(60))])
    upfile = write(tmp_path, "up.csv", up)
    # a positive-downward file read without saying so is refused: file, row, column and the fix
    with pytest.raises(InputError, match='survey_dip = "positive_down"') as err:
        read_drillholes(c, upfile, i, values="cu", crs=None)
    assert err.value.row == 2 and err.value.field == "dip" and "up.csv" in str(err.value)
    # stated: the dips are negated, the holes are those of the negative-downward file, and a note says so
    pos = read_drillholes(c, upfile, i, values="cu", crs=None, survey_dip="positive_down")
    for hole in ("A", "B"):
        np.testing.assert_allclose(pos.positions(hole, [3.0, 9.0]), ref.positions(hole, [3.0, 9.0]))
    assert any("positive downward" in n and "negated" in n for n in pos.notes)
    # stated negative_down: holes drilled upward (underground) are taken as they are
    upward = read_drillholes(c, upfile, i, values="cu", crs=None, survey_dip="negative_down")
    assert upward.positions("A", [10.0])[0, 2] == pytest.approx(50.0 + 10 * math.sin(math.radians(60)))
    with pytest.raises(ValueError, match="survey_dip"):
        read_drillholes(c, upfile, i, values="cu", crs=None, survey_dip="down")


def test_run_spec_states_the_survey_dip_convention(tmp_path):
    import geosim.config.runspec
    import geosim.pipeline
    ore = Path(__file__).resolve().parent.parent / "sample_fields" / "ore_prospect"
    spec = geosim.config.runspec.load_spec(ore / "run.toml")
    assert spec["data.survey_dip"] == "negative_down"
    flipped = tmp_path / "surveys.csv"
    lines = (ore / "surveys.csv").read_text().splitlines()
    head = lines[0].split(",")
    k = head.index("dip")
    rows = [",".join(f"{-float(v):g}" if j == k else v for j, v in enumerate(line.split(","))) for line in lines[1:]]
    flipped.write_text("\n".join([lines[0], *rows]) + "\n")
    holes = geosim.pipeline.read_holes(spec)
    for stated in ("positive_down", None):
        over = {"data.surveys": str(flipped), "data.survey_dip": stated}
        other = geosim.config.runspec.load_spec(ore / "run.toml", overrides=over)
        if stated is None:
            with pytest.raises(InputError, match="positive_down"):
                geosim.pipeline.read_holes(other)
            continue
        mine = geosim.pipeline.read_holes(other)
        name = next(iter(holes.surveys))
        np.testing.assert_allclose(mine.positions(name, [5.0, 40.0]), holes.positions(name, [5.0, 40.0]))
