"""Input checks that keep a run from computing something meaningless, and messages that point
at the right file, row or spec key."""
from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

import geosim
import geosim.config.runspec
import geosim.errors
import geosim.pipeline
import geosim.variogram.modelfile
from geosim.errors import InputError, SpecError

SAMPLES = Path(__file__).resolve().parent.parent / "sample_fields"
ORE = SAMPLES / "ore_prospect"


def _renamed_ore(folder: Path, headers: dict[str, str]) -> Path:
    """The ore prospect's tables with the header lines replaced; returns the spec path."""
    for name, header in headers.items():
        lines = (ORE / name).read_text().splitlines(keepends=True)
        (folder / name).write_text(header + "\n" + "".join(lines[1:]))
    for name in ("run.toml", "domain.geojson", "planned_holes.csv"):
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
    for name in ("run.toml", "domain.geojson", "planned_holes.csv"):
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


AQUIFER = SAMPLES / "alluvial_aquifer"
# a coarse grid and few realizations keep the runs below quick
QUICK = {"grid.cell": [200.0, 200.0], "simulation.realizations": 2, "simulation.workers": 1,
         "outputs.plots": False}


def _aquifer(folder: Path, edit=None) -> Path:
    """A copy of the aquifer sample field; ``edit(rows)`` may change the wells' data rows."""
    lines = (AQUIFER / "wells.csv").read_text().splitlines()
    rows = [line.split(",") for line in lines[1:]]
    if edit is not None:
        edit(rows)
    (folder / "wells.csv").write_text("\n".join([lines[0], *(",".join(r) for r in rows)]) + "\n")
    for name in ("run.toml", "domain.geojson", "planned_wells.csv"):
        shutil.copy(AQUIFER / name, folder / name)
    return folder / "run.toml"


def _check(spec_path, overrides=None):
    """prepare_data, make_grid and preflight: what `geosim check` runs."""
    spec = geosim.config.runspec.load_spec(spec_path, {**QUICK, **(overrides or {})})
    data = geosim.pipeline.prepare_data(spec)
    grid = geosim.pipeline.make_grid(spec, data)
    return data, geosim.pipeline.preflight(spec, data, grid)


def _cli(capsys, *args):
    from geosim_cli.main import main
    code = main(["-q", *map(str, args)])
    return code, capsys.readouterr().err


def test_samples_that_condition_nothing_are_refused(tmp_path, capsys):
    # longitude and latitude columns swapped: still valid degrees, ~500 km from the valley
    spec_path = _aquifer(tmp_path)
    code, err = _cli(capsys, "check", spec_path, "--set", 'data.x="lat"', "--set", 'data.y="lon"')
    assert code == 2, err
    assert "0 of the 80 samples lie within" in err and "would not be conditioned" in err
    assert "swapped" in err and "wells.csv" in err
    # the run refuses the same way, before it claims the folder
    code, err = _cli(capsys, "run", spec_path, "--out", tmp_path / "out", "--set", 'data.x="lat"',
                     "--set", 'data.y="lon"')
    assert code == 2 and not (tmp_path / "out").exists()
    # and so do the steps run on their own
    for step in ("simulate", "estimate"):
        code, err = _cli(capsys, step, spec_path, "--out", tmp_path / "out", "--set", 'data.x="lat"',
                         "--set", 'data.y="lon"')
        assert code == 2 and "would not be conditioned" in err, (step, err)


def test_samples_far_outside_the_domain_get_a_note(tmp_path):
    def move(rows):  # two wells 0.5 degree (about 40-55 km) east of the valley
        for r in rows[:2]:
            r[1] = f"{float(r[1]) + 0.5:.7f}"
    data, notes = _check(_aquifer(tmp_path, move))
    far = [n for n in notes if "condition nothing" in n]
    assert len(far) == 1 and far[0].startswith("2 of 80 samples") and "row 2, row 3" in far[0]
    _, clean = _check(_aquifer(tmp_path))
    assert not any("condition nothing" in n for n in clean)


def test_constant_data_are_refused(tmp_path):
    def constant(rows):
        for r in rows:
            r[3] = "1e-4"
    with pytest.raises(InputError, match="every one of the 80 values of 'k_ms' is 0.0001") as err:
        _check(_aquifer(tmp_path, constant))
    assert err.value.file.endswith("wells.csv") and err.value.field == "k_ms"

    def nearly(rows):  # differences at the 1e-12 relative level: float noise, not variability
        for i, r in enumerate(rows):
            r[3] = repr(1e-4 * (1.0 + 1e-12 * i))
    with pytest.raises(InputError, match="vary by only"):
        _check(_aquifer(tmp_path, nearly))


FIXED = {"variogram.fit": False, "variogram.directions": [], "variogram.lag": None}


def test_fixed_model_sills_must_sum_to_one(tmp_path):
    spec_path = _aquifer(tmp_path)
    # sills in data units (or percent) instead of fractions of the normal-score variance
    wrong = [{"kind": "nugget", "sill": 30.0}, {"kind": "exponential", "sill": 120.0, "ranges": [1200.0, 400.0],
                                                "azimuth": 30.0}]
    with pytest.raises(InputError, match=r"sills sum to 150 \(nugget 30 \+ exponential 120\)") as err:
        _check(spec_path, {**FIXED, "variogram.structures": wrong})
    assert err.value.field == "variogram.structures" and "0.2, 0.8" in err.value.fix
    right = [{**wrong[0], "sill": 0.2}, {**wrong[1], "sill": 0.8}]
    _check(spec_path, {**FIXED, "variogram.structures": right})
    # the same rule for a model file, naming the file
    model_file = tmp_path / "model.toml"
    geosim.variogram.modelfile.save_model(geosim.Nugget(0.5) + geosim.Spherical(1.5, 900.0), model_file)
    with pytest.raises(InputError, match="sills sum to 2") as err:
        _check(spec_path, {**FIXED, "variogram.structures": None, "variogram.model_file": str(model_file)})
    assert err.value.file == str(model_file)


def test_negative_values_of_a_non_negative_variable_get_a_note(tmp_path):
    def code(rows):
        rows[12][3] = "-99"
    overrides = {"transform.log": False, "transform.lower": None, "transform.upper": None}
    data, _ = _check(_aquifer(tmp_path, code), overrides)
    note = [n for n in data.notes if "negative" in n]
    assert len(note) == 1 and "-99" in note[0] and "row 14" in note[0] and "m/s" in note[0]
    data, _ = _check(_aquifer(tmp_path), overrides)
    assert not any("negative" in n for n in data.notes)


def test_upward_hole_from_surface_collars_gets_a_note(tmp_path):
    spec_path = _ore_holes(tmp_path, 12)
    lines = (tmp_path / "surveys.csv").read_text().splitlines()
    hole = lines[1].split(",")[0]
    flipped = [",".join(r.split(",")[:3] + [str(-float(r.split(",")[3]))]) if r.split(",")[0] == hole else r
               for r in lines[1:]]
    (tmp_path / "surveys.csv").write_text("\n".join([lines[0], *flipped]) + "\n")
    spec = geosim.config.runspec.load_spec(spec_path)
    notes = geosim.pipeline.load_samples(spec).notes
    assert any(f"surveyed upward at the collar although the collars are the ground surface: {hole}" in n
               for n in notes)
    plain = geosim.pipeline.load_samples(geosim.config.runspec.load_spec(ORE / "run.toml")).notes
    assert not any("upward" in n for n in plain)


def test_check_catches_bad_model_files_and_structures(tmp_path, capsys):
    import re
    spec_path = _aquifer(tmp_path)
    text = spec_path.read_text()
    # the spec's structures replaced by a model file
    with_file = re.sub(r"structures = \[.*?\n\]\n", 'model_file = "model.toml"\n', text, flags=re.S)
    spec_path.write_text(with_file)
    for content, said in (('format = "geosim-model 1"\n[[structure]\nkind = 3\n', "model.toml"),
                          ('title = "not a model"\n', "model.toml")):
        (tmp_path / "model.toml").write_text(content)
        code, err = _cli(capsys, "check", spec_path)
        assert code == 2, err
        assert said in err and "internal error" not in err
    (tmp_path / "model.toml").unlink()
    code, err = _cli(capsys, "check", spec_path)
    assert code == 2 and "variogram.model_file" in err, err
    spec_path.write_text(text.replace('{ kind = "exponential", sill = 0.9, ranges = [1200.0, 400.0], azimuth = 30.0 }',
                                      '{ kind = "matern", sill = 0.9, ranges = [500.0, 200.0], smoothness = 50.0 }'))
    code, err = _cli(capsys, "check", spec_path)
    assert code == 2 and "smoothness" in err and "variogram.structures" in err, err


def test_messages_point_at_the_row_the_key_and_the_units_written(tmp_path):
    def zero(rows):
        rows[12][3] = "0"
    with pytest.raises(InputError, match="value 0 has no logarithm") as err:
        _check(_aquifer(tmp_path, zero))
    assert err.value.file.endswith("wells.csv") and err.value.row == 14  # header is row 1
    # a bound inside the data, in the units the spec gave (not log10)
    with pytest.raises(InputError, match=r"transform.lower is 1e-05, above the smallest value") as err:
        _check(_aquifer(tmp_path), {"transform.lower": 1e-5})
    assert err.value.field == "transform.lower" and "wells.csv, row" in err.value.message
    # an unreadable CRS names the spec key
    with pytest.raises(InputError) as err:
        _check(_aquifer(tmp_path), {"data.crs": "EPSG:99999999"})
    assert err.value.field == "data.crs" and err.value.file == str(tmp_path / "run.toml")


def test_empty_value_column_names_file_and_column(tmp_path):
    spec_path = _ore_holes(tmp_path, 5)
    lines = (tmp_path / "assays.csv").read_text().splitlines()
    (tmp_path / "assays.csv").write_text("\n".join([lines[0]] + [r.rsplit(",", 1)[0] + "," for r in lines[1:]]) + "\n")
    with pytest.raises(InputError, match="'cu_pct' is empty in every row") as err:
        geosim.pipeline.prepare_data(geosim.config.runspec.load_spec(spec_path))
    assert err.value.file.endswith("assays.csv") and err.value.field == "cu_pct"


def test_exact_engine_size_is_checked_before_computing(tmp_path, capsys):
    code, err = _cli(capsys, "check", _aquifer(tmp_path), "--set", 'simulation.engine="exact"',
                     "--set", "grid.cell=[25.0, 25.0]")  # about 26,000 nodes in the valley
    assert code == 2 and "simulation.engine" in err and "exact engine would factor" in err, err


def test_a_run_failing_on_input_leaves_the_folder_free(tmp_path, capsys):
    spec_path = _aquifer(tmp_path)
    out = tmp_path / "out"
    quick = [a for k, v in QUICK.items() for a in ("--set", f"{k}={str(v).lower() if isinstance(v, bool) else v}")]
    # lags of 1 cm hold no pairs: the fit fails after the folder was claimed
    code, err = _cli(capsys, "run", spec_path, "--out", out, *quick, "--set", "variogram.lag=0.01")
    assert code == 2 and "variogram" in err and "internal error" not in err, err
    assert not out.exists()
    out.mkdir()  # also when the folder existed (empty) before the run
    code, err = _cli(capsys, "run", spec_path, "--out", out, *quick, "--set", "variogram.lag=0.01")
    assert code == 2 and out.is_dir() and list(out.iterdir()) == []
    code, err = _cli(capsys, "run", spec_path, "--out", out, *quick)  # fixed spec, no --overwrite
    assert code == 0, err
    assert (out / "summary.tif").is_file()


@pytest.mark.parametrize("name", ["geosim.inputchecks", "geosim.resources", "geosim.io.lock", "geosim.errors",
                                  "geosim.io.report", "geosim.drillholes"])
def test_docstring_examples(name):
    import doctest
    import importlib
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0


def test_kriging_failures_name_the_file_rows(tmp_path):
    def twin(rows):  # a well 1e-7 degree (about 9 mm) from another: a Gaussian model cannot tell them apart
        rows.append(["LV99", f"{float(rows[5][1]) + 1e-7:.7f}", rows[5][2], "7e-05"])
    gaussian = [{"kind": "gaussian", "sill": 1.0, "ranges": [1200.0, 400.0], "azimuth": 30.0}]
    spec = geosim.config.runspec.load_spec(_aquifer(tmp_path, twin), {**QUICK, **FIXED, "variogram.structures": gaussian})
    data = geosim.pipeline.prepare_data(spec)
    with pytest.raises(geosim.errors.NotPositiveDefiniteError) as err:
        geosim.pipeline.estimate(spec, data)
    assert "wells.csv row 7" in str(err.value) or "wells.csv row 82" in str(err.value), str(err.value)
