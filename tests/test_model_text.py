"""A model prints what applies to the grid's dimension: two ranges and an azimuth in 2-D."""
from __future__ import annotations

import warnings
from pathlib import Path

import pytest

import geosim

SAMPLES = Path(__file__).resolve().parent.parent / "sample_fields"


def test_2d_text_has_two_ranges_and_no_vertical_angles():
    m = geosim.Nugget(0.2) + geosim.Exponential(0.8, geosim.Anisotropy((1415.5, 160.0), azimuth=30.0))
    assert m.text(2).splitlines() == ["  nugget sill=0.2", "+ exponential sill=0.8 ranges=(1415.5, 160) azimuth=30"]
    assert "ranges=(1415.5, 160, 1415.5) azimuth=30 dip=0 rake=0" in m.text(3)
    assert str(m) == m.text(3) == m.text()
    with pytest.raises(ValueError):
        m.text(1)


@pytest.mark.parametrize("folder,ranges", [("alluvial_aquifer", 2), ("ore_prospect", 3)])
def test_run_outputs_print_the_model_for_the_grid_dimension(folder, ranges):
    import geosim.config.runspec
    import geosim.outputs
    import geosim.pipeline
    spec = geosim.config.runspec.load_spec(SAMPLES / folder / "run.toml")
    data = geosim.pipeline.prepare_data(spec)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        vg = geosim.pipeline.variogram_model(spec, data)
    tag = geosim.outputs.provenance_tags(spec, data, vg.model)["variogram_model"]
    line = [s for s in tag.splitlines() if "ranges=" in s][0]
    assert line.split("ranges=(")[1].split(")")[0].count(",") == ranges - 1
    assert ("dip=" in line) == (ranges == 3)
    assert vg.model_text() == tag and vg.fit.to_dict()["model_text"] == tag
