"""Run-spec reading and complete validation (geosim.config.runspec)."""
from __future__ import annotations

import textwrap

import pytest

from geosim.errors import SpecError
from geosim.config.runspec import EXECUTION_KEYS, load_spec, parse_overrides, spec_from_dict

MINIMAL = """
[data]
points = "wells.csv"
x = "x"
y = "y"
value = "k"
crs = "EPSG:32633"

[grid]
cell = [10.0, 10.0]

[simulation]
realizations = 4
seed = 11
"""


@pytest.fixture
def folder(tmp_path):
    (tmp_path / "wells.csv").write_text("id,x,y,k\nA,0,0,1\nB,10,0,2\nC,0,10,3\n")
    return tmp_path


def write(folder, text, name="run.toml"):
    path = folder / name
    path.write_text(textwrap.dedent(text))
    return path


def problems_of(path, **kwargs):
    with pytest.raises(SpecError) as info:
        load_spec(path, **kwargs)
    return info.value.problems


def test_minimal_spec_gets_defaults_and_resolves_paths(folder):
    spec = load_spec(write(folder, MINIMAL))
    assert spec["simulation.engine"] == "sequential"
    assert spec["simulation.kriging"] == "simple"
    assert spec["search.max_samples"] == 16
    assert spec["declustering.method"] == "cells"
    assert spec["outputs.cutoffs"] == []
    assert spec["data.working_crs"] == "auto"
    assert spec.resolve(spec["data.points"]) == folder / "wells.csv"
    assert spec.input_files() == {"data.points": folder / "wells.csv"}
    assert not spec.is_drillholes


def test_every_problem_is_listed_with_its_key_path(folder):
    text = MINIMAL.replace('value = "k"', 'valeu = "k"').replace("[10.0, 10.0]", "[10.0, -1.0]")
    text = text.replace("realizations = 4", "realizations = 0") + '\n[serach]\nmax_samples = 8\n'
    text = text.replace('points = "wells.csv"', 'points = "missing.csv"')
    problems = problems_of(write(folder, text))
    joined = "\n".join(problems)
    # one problem per mistake, all at once, each starting with its key path
    assert any(p.startswith("data.valeu: unknown key (did you mean 'value'?)") for p in problems)
    assert any(p.startswith("data.value: required") for p in problems)
    assert any(p.startswith("grid.cell: expected a list of 2 or 3 numbers > 0, found list [10.0, -1.0]")
               for p in problems)
    assert any(p.startswith("simulation.realizations: expected an integer >= 1") for p in problems)
    assert any(p.startswith("serach: unknown section (did you mean [search]?)") for p in problems)
    assert any(p.startswith("data.points: expected an existing file") and "missing.csv" in p for p in problems)
    assert len(problems) == 6, joined


def test_spec_error_names_the_file(folder):
    path = write(folder, MINIMAL.replace("seed = 11", 'seed = "eleven"'))
    with pytest.raises(SpecError) as info:
        load_spec(path)
    assert info.value.file == str(path)
    assert info.value.problems == ["simulation.seed: expected an integer >= 0 and <= 9223372036854775807, "
                                   "found text 'eleven'"]


def test_toml_syntax_error_is_one_problem_with_the_line(folder):
    problems = problems_of(write(folder, MINIMAL + "\n[grid\n"))
    assert len(problems) == 1 and problems[0].startswith("not valid TOML") and "line" in problems[0]


def test_missing_spec_file(tmp_path):
    assert problems_of(tmp_path / "nope.toml") == ["the run-spec file does not exist"]


def test_combinations_are_checked(folder):
    text = MINIMAL + textwrap.dedent("""
        [variogram]
        fit = false
        structures = [{ kind = "spherial", sill = 1.0 }]
        [search]
        min_samples = 20
        """)
    text = text.replace('points = "wells.csv"', 'points = "wells.csv"\ncollars = "wells.csv"')
    problems = problems_of(write(folder, text))
    assert any(p.startswith("data: expected either points") for p in problems)
    assert any(p.startswith("variogram.structures[0].kind: expected one of") and "did you mean 'spherical'" in p
               for p in problems)
    assert any(p.startswith("variogram.structures[0].ranges: required") for p in problems)
    assert any(p.startswith("search.min_samples: expected at most search.max_samples (16), found 20")
               for p in problems)


def test_drillholes_need_intervals_composites_and_a_3d_cell(folder):
    text = MINIMAL.replace('points = "wells.csv"\nx = "x"\ny = "y"\n', 'collars = "wells.csv"\n')
    problems = problems_of(write(folder, text))
    assert any(p.startswith("data.intervals: required for drillholes") for p in problems)
    assert any(p.startswith("data.composites: required for drillholes") for p in problems)
    assert any(p.startswith("grid.cell: expected [dx, dy, dz] for drillhole data") for p in problems)


def test_unknown_engine(folder):
    text = MINIMAL.replace("seed = 11", 'seed = 11\nengine = "fastest"')
    problems = problems_of(write(folder, text))
    assert any(p.startswith("simulation.engine: expected one of") and "sequential" in p for p in problems)


def test_overrides_are_validated_like_the_file(folder):
    path = write(folder, MINIMAL)
    spec = load_spec(path, ["simulation.realizations=2", "grid.cell=[50, 50]", 'data.units="m/s"'])
    assert spec["simulation.realizations"] == 2
    assert spec["grid.cell"] == [50.0, 50.0]
    assert spec["data.units"] == "m/s"
    assert problems_of(path, overrides=["simulation.realizations=-3"])[0].startswith(
        "simulation.realizations: expected an integer >= 1")
    with pytest.raises(SpecError):
        load_spec(path, ["no equals sign"])


def test_parse_overrides_reads_toml_values_and_falls_back_to_text():
    assert parse_overrides(["a.b=3", "a.c=true", "a.d=[1, 2]", "a.e=EPSG:32633"]) == {
        "a.b": 3, "a.c": True, "a.d": [1, 2], "a.e": "EPSG:32633"}


def test_hash_is_canonical(folder):
    a = load_spec(write(folder, MINIMAL, "a.toml"))
    # same content, other key order, comments and spacing: same hash
    shuffled = textwrap.dedent("""
        # a comment
        [simulation]
        seed = 11
        realizations   = 4
        [grid]
        cell = [10, 10]
        [data]
        crs = "EPSG:32633"
        value = "k"
        y = "y"
        x = "x"
        points = "wells.csv"
        """)
    b = load_spec(write(folder, shuffled, "b.toml"))
    assert a.sha256 == b.sha256 and len(a.sha256) == 64
    # execution-only keys do not change what is computed, so not the hash either
    assert "simulation.workers" in EXECUTION_KEYS
    assert load_spec(folder / "a.toml", ["simulation.workers=2"]).sha256 == a.sha256
    assert load_spec(folder / "a.toml", ["simulation.seed=12"]).sha256 != a.sha256


def test_spec_from_dict_validates_too(folder):
    values = {"data": {"points": "wells.csv", "x": "x", "y": "y", "value": "k", "crs": "EPSG:32633"},
              "grid": {"cell": [5.0, 5.0]}, "simulation": {"realizations": 1, "seed": 0}}
    spec = spec_from_dict(values, folder)
    assert spec.path is None and spec["grid.cell"] == [5.0, 5.0]
    values["grid"]["cell"] = "five"
    with pytest.raises(SpecError, match="grid.cell: expected a list"):
        spec_from_dict(values, folder)


def test_reference_lists_every_key_with_its_form():
    from geosim.config.runspec import SCHEMA, reference
    text = reference()
    for section, keys in SCHEMA.items():
        assert f"[{section}]" in text
        block = text.split(f"[{section}]", 1)[1].split("\n[", 1)[0]
        for name in keys:
            assert f"\n  {name}  " in block, (section, name)
    assert '  realizations  an integer >= 1 and <= 100000 (required)' in text
    assert '  engine  non-empty text (default "sequential")' in text


def test_sample_field_specs_are_valid():
    from pathlib import Path
    root = Path(__file__).resolve().parent.parent / "sample_fields"
    aquifer = load_spec(root / "alluvial_aquifer" / "run.toml")
    ore = load_spec(root / "ore_prospect" / "run.toml")
    assert not aquifer.is_drillholes and len(aquifer["grid.cell"]) == 2
    assert ore.is_drillholes and len(ore["grid.cell"]) == 3
