"""Input checks that keep a run from computing something meaningless, and messages that point
at the right file, row or spec key."""
from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

import geosim
import geosim.config.runspec
import geosim.pipeline
from geosim.errors import InputError, SpecError

SAMPLES = Path(__file__).resolve().parent.parent / "sample_fields"
ORE = SAMPLES / "ore_prospect"


def _renamed_ore(folder: Path, headers: dict[str, str]) -> Path:
    """The ore prospect's tables with the header lines replaced; returns the spec path."""
    for name, header in headers.items():
        lines = (ORE / name).read_text().splitlines(keepends=True)
        (folder / name).write_text(header + "\n" + "".join(lines[1:]))
    for name in ("run.toml", "domain.geojson"):
        shutil.copy(ORE / name, folder / name)
    return folder / "run.toml"


def test_documented_column_mapping_reads_renamed_tables(tmp_path):
    spec_path = _renamed_ore(tmp_path, {"collars.csv": "HOLE,x,y,z,EOH",
                                        "surveys.csv": "HOLE,depth,azimuth,dip",
                                        "assays.csv": "HOLE,FROM_M,TO_M,cu_pct"})
    # the form the spec reference documents: default name -> name in the files, for every
    # table; plus one table's own rename where the role (depth) is in two tables
    columns = {"hole_id": "HOLE", "from": "FROM_M", "to": "TO_M", "collar": {"depth": "EOH"}}
    renamed = geosim.pipeline.load_samples(geosim.config.runspec.load_spec(spec_path, {"data.columns": columns}))
    plain = geosim.pipeline.load_samples(geosim.config.runspec.load_spec(ORE / "run.toml"))
    np.testing.assert_array_equal(renamed.coords, plain.coords)
    np.testing.assert_array_equal(renamed.values, plain.values)
    # without the mapping the renamed file is refused naming the file and the column
    with pytest.raises(InputError, match="hole_id") as err:
        geosim.pipeline.load_samples(geosim.config.runspec.load_spec(spec_path))
    assert err.value.file.endswith("collars.csv")


@pytest.mark.parametrize("columns, said", [({"hole": "HOLE"}, "'hole' is not a drillhole column role"),
                                           ({"collars": {"x": "E"}}, "unknown drillhole table 'collars'"),
                                           ({"survey": {"from": "F"}}, "survey table has no column role 'from'")])
def test_bad_column_mapping_is_a_spec_problem(columns, said):
    with pytest.raises(SpecError) as err:
        geosim.config.runspec.load_spec(ORE / "run.toml", {"data.columns": columns})
    assert len(err.value.problems) == 1
    assert err.value.problems[0].startswith("data.columns:") and said in err.value.problems[0]


def _ore_holes(folder: Path, holes: int, in_line: bool = False) -> Path:
    """The ore prospect cut to its first ``holes`` holes (collars moved onto one line if asked)."""
    collars = (ORE / "collars.csv").read_text().splitlines()
    keep = collars[1:holes + 1]
    if in_line:
        keep = [",".join([r.split(",")[0], f"{454700 + 40 * i:.2f}", f"{5459900 + 30 * i:.2f}", *r.split(",")[3:]])
                for i, r in enumerate(keep)]
    ids = {r.split(",")[0] for r in keep}
    (folder / "collars.csv").write_text("\n".join([collars[0], *keep]) + "\n")
    for name in ("surveys.csv", "assays.csv"):
        lines = (ORE / name).read_text().splitlines()
        (folder / name).write_text("\n".join([lines[0], *[r for r in lines[1:] if r.split(",")[0] in ids]]) + "\n")
    for name in ("run.toml", "domain.geojson"):
        shutil.copy(ORE / name, folder / name)
    return folder / "run.toml"


@pytest.mark.parametrize("holes, in_line, said", [(2, False, "found 2 collar position(s)"),
                                                  (4, True, "found 4 collars in one line")])
def test_below_collars_needs_three_collars_not_in_a_line(tmp_path, holes, in_line, said):
    spec = geosim.config.runspec.load_spec(_ore_holes(tmp_path, holes, in_line),
                                       {"domain.below_collars": True, "domain.polygon": None,
                                        "grid.cell": [40.0, 40.0, 20.0]})
    data = geosim.pipeline.prepare_data(spec)
    with pytest.raises(InputError, match="at least three collars") as err:
        geosim.pipeline.make_grid(spec, data)
    assert said in err.value.message and err.value.field == "domain.below_collars"
    assert err.value.file == spec.name
