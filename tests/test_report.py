"""Provenance tags, SHA-256 and the JSON run report."""
import datetime as dt
import json

import numpy as np
import pytest

import geosim
from geosim.cautions import CAUTION
from geosim.errors import InputError
from geosim.io.report import file_sha256, provenance, read_report, write_report
from geosim.validation import RunChecks


def test_sha256_matches_published_vectors(tmp_path):
    # FIPS 180-2 (2002), Secure Hash Standard, appendix B.1 and B.2 example messages
    p = tmp_path / "abc"
    p.write_bytes(b"abc")
    assert file_sha256(p) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    p.write_bytes(b"abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq")
    assert file_sha256(p, chunk=7) == "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"


def test_provenance_holds_every_fact_as_text(tmp_path):
    a = tmp_path / "assays.csv"
    a.write_text("x,y,au\n1,2,0.5\n")
    model = geosim.Model([geosim.Nugget(0.2), geosim.Spherical(0.8, geosim.Anisotropy((150.0, 80.0)))])

    class Scores:  # anything with describe() stands for a transform
        def describe(self):
            return "normal score, 1 datum"

    tags = provenance(seed=123, engine="exact", model=model, transform=Scores(), inputs=[a], units="g/t",
                      extra={"cutoffs": [0.5, 1.0]})
    assert all(isinstance(v, str) for v in tags.values())
    assert tags["caution"] == CAUTION and tags["geosim_version"] == geosim.__version__
    assert tags["seed"] == "123" and tags["engine"] == "exact" and tags["units"] == "g/t"
    assert tags["variogram_model"] == str(model)
    assert tags["transform"] == "normal score, 1 datum"
    assert json.loads(tags["input_sha256"]) == {str(a): file_sha256(a)}
    assert json.loads(tags["cutoffs"]) == [0.5, 1.0]
    created = dt.datetime.fromisoformat(tags["created_utc"].replace("Z", "+00:00"))
    assert abs((dt.datetime.now(dt.timezone.utc) - created).total_seconds()) < 120


def test_report_is_plain_json_with_the_caution_first(tmp_path):
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (12, 12))
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((40.0, 40.0)))])
    rng = np.random.default_rng(0)
    checks = RunChecks(grid, model, grid.coords()[:6], rng.normal(size=6))
    validation = checks.summarize([checks(rng.normal(size=grid.shape)) for _ in range(3)])
    body = {**provenance(seed=1, engine="sequential"), "parameters": {"cutoffs": np.array([0.5, 1.0]),
                                                                      "n": np.int64(3), "gap": np.nan},
            "validation": validation}
    p = write_report(tmp_path / "run.json", body)
    d = read_report(p)
    assert list(d)[0] == "caution" and d["caution"] == CAUTION
    assert d["parameters"] == {"cutoffs": [0.5, 1.0], "n": 3, "gap": None}
    assert d["validation"]["histogram"]["flag"] in ("pass", "warn")
    assert "NaN" not in p.read_text()
    with pytest.raises(InputError, match="overwrite=True"):
        write_report(p, {"seed": 2})
    assert read_report(p)["seed"] == "1"
    write_report(p, {"seed": 2}, overwrite=True)
    assert read_report(p)["seed"] == 2
    assert [q.name for q in tmp_path.iterdir()] == ["run.json"]
