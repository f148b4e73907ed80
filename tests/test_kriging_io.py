"""Cross-validation table and figure: content, caution, atomic and non-clobbering writes."""
import csv

import numpy as np
import pytest

import geosim
from geosim.io.crossval import plot_crossval, write_crossval_csv
from geosim.io.csvw import read_csv_metadata
from geosim.kriging import cross_validate
from geosim.search import Neighbourhood
from geosim.variogram import Anisotropy


@pytest.fixture(scope="module")
def cv():
    rng = np.random.default_rng(2)
    xy = rng.uniform(0, 200, size=(40, 2)) + [431000.0, 6120000.0]
    holes = np.array([f"RC{i // 5:03d}" for i in range(40)])
    model = geosim.Nugget(0.3) + geosim.Spherical(0.7, Anisotropy((60.0, 60.0)))
    # min_samples=3 with a short search, not widened, leaves a few samples without an estimate
    return cross_validate(xy, rng.normal(size=40), model, hole_ids=holes,
                          neighbourhood=Neighbourhood(max_samples=8, min_samples=3, ranges=(35.0, 35.0),
                                                      widen=False))


def test_csv_round_trip(cv, tmp_path):
    assert np.isnan(cv.estimate).any() and np.isfinite(cv.estimate).any()
    out = write_crossval_csv(cv, tmp_path / "cv.csv", units="g/t")
    lines = out.read_text(encoding="utf-8").splitlines()
    assert not any(line.startswith("#") for line in lines)
    meta = read_csv_metadata(out)
    assert meta["dc:description"] == geosim.CAUTION and meta["url"] == "cv.csv"
    assert any(n.startswith("summary:") and "rmse=" in n for n in meta["notes"])
    units = {c["name"]: c.get("schema:unitText") for c in meta["tableSchema"]["columns"]}
    assert units["estimate"] == "g/t" and units["kriging_variance"] == "(g/t)^2" and units["x"] == "m"
    rows = list(csv.DictReader(lines))
    assert len(rows) == 40
    assert rows[0]["sample_id"] == cv.sample_ids[0] == "sample 0 (hole RC000)"
    for i, row in enumerate(rows):
        assert float(row["x"]) == pytest.approx(cv.coords[i, 0], abs=1e-3)
        assert float(row["value"]) == pytest.approx(cv.values[i], rel=1e-9)
        assert int(row["samples_used"]) == cv.n_used[i]
        if np.isfinite(cv.estimate[i]):
            assert float(row["error"]) == pytest.approx(cv.estimate[i] - cv.values[i], rel=1e-8, abs=1e-12)
            assert float(row["standardized_error"]) == pytest.approx(
                (cv.estimate[i] - cv.values[i]) / np.sqrt(cv.variance[i]), rel=1e-8, abs=1e-12)
        else:
            assert row["estimate"] == row["error"] == row["kriging_variance"] == ""
    table = np.genfromtxt(out, delimiter=",", skip_header=1, usecols=(3, 4))
    assert table.shape == (40, 2)
    assert [c["name"] for c in meta["tableSchema"]["columns"]] == lines[0].split(",")


def test_existing_files_are_not_replaced(cv, tmp_path):
    target = tmp_path / "cv.csv"
    target.write_text("keep me")
    with pytest.raises(geosim.InputError, match="overwrite"):
        write_crossval_csv(cv, target)
    assert target.read_text() == "keep me"
    write_crossval_csv(cv, target, overwrite=True)
    assert target.read_text().startswith("sample_id,")
    png = tmp_path / "cv.png"
    png.write_bytes(b"old")
    with pytest.raises(geosim.InputError):
        plot_crossval(cv, png)
    assert png.read_bytes() == b"old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cv.csv", "cv.csv-metadata.json", "cv.png"]


def test_plot_is_a_png_carrying_the_caution(cv, tmp_path):
    from PIL import Image

    out = plot_crossval(cv, tmp_path / "cv.png", units="g/t")
    with Image.open(out) as im:
        assert im.format == "PNG" and im.size[0] > 800
        assert im.text["Description"] == geosim.CAUTION
