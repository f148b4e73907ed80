"""What a run writes: provenance of the inputs and the ensemble's plots (geosim.outputs, geosim.ensemble)."""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
from pyproj import CRS

import geosim
import geosim.outputs
import geosim.pipeline
from geosim.config.runspec import load_spec
from geosim.ensemble import RealizationWriter
from geosim.runstate import open_output

AQUIFER = Path(__file__).resolve().parents[1] / "sample_fields" / "alluvial_aquifer" / "run.toml"


def _sha256(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def test_provenance_and_run_state_list_the_same_checksums_of_every_input_file(tmp_path):
    spec = load_spec(AQUIFER)
    data = geosim.pipeline.prepare_data(spec)
    model = geosim.Model([geosim.Nugget(0.1), geosim.Spherical(0.9, geosim.Anisotropy((800.0, 800.0)))])
    files = spec.input_files()
    assert {"data.points", "domain.polygon"} <= set(files)  # the sample field names several inputs
    # hashed here with hashlib, independently of geosim's own file_sha256
    expected = {key: _sha256(path) for key, path in files.items()}
    tags = geosim.outputs.provenance_tags(spec, data, model)
    assert json.loads(tags["input_sha256"]) == {str(files[k]): sha for k, sha in expected.items()}
    assert tags["run_spec_sha256"] == spec.sha256
    header = open_output(spec, tmp_path, overwrite=False, resume=True)
    assert header["inputs"] == expected


def _ensemble(tmp_path, nz=3):
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0, 5.0), (nz, 12, 14), crs=CRS.from_epsg(32750), zmin=-100.0)
    writer = RealizationWriter(tmp_path, grid, units="g/t", back_transform=np.exp, overwrite=True)
    rng = np.random.default_rng(3)
    records = [writer(i, rng.normal(size=grid.shape)) for i in range(3)]
    out = writer.finish(records, cutoffs=[1.0])
    return writer, records, out["summary"]


def test_plots_map_only_the_levels_asked_for(tmp_path):
    writer, records, summaries = _ensemble(tmp_path)
    assert len(summaries) == 3
    chosen = sorted(Path(p).name for p in writer.plots(records, summaries, [1.0], levels=[1]))
    assert chosen == ["z001_mean.png", "z001_p10.png", "z001_p90.png", "z001_prob_above_1.png", "z001_std.png"]
    assert not list(tmp_path.glob("z000_*.png")) and not list(tmp_path.glob("z002_*.png"))
    every = [Path(p).name for p in writer.plots(records, summaries, [1.0])]
    assert sorted({name[:5] for name in every}) == ["z000_", "z001_", "z002_"]


def test_plots_log_scale_changes_the_maps(tmp_path):
    # the same summary drawn on a linear and on a log colour scale gives different images
    writer, records, summaries = _ensemble(tmp_path)
    linear = writer.plots(records, summaries, [1.0], levels=[0])
    mean = next(Path(p) for p in linear if Path(p).name == "z000_mean.png")
    before = _sha256(mean)
    logged = writer.plots(records, summaries, [1.0], levels=[0], log=True)
    assert mean in [Path(p) for p in logged] and _sha256(mean) != before
