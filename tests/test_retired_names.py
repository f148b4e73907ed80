"""Old spellings of settings: each is listed in geosim.retired, still works for one release,
and is never accepted without a RetiredNameWarning naming its new name."""
from __future__ import annotations

import importlib
import inspect
import pkgutil
import warnings

import numpy as np
import pytest

import geosim
from geosim.errors import GeosimWarning, RetiredNameWarning, SpecError
from geosim.config.runspec import SCHEMA, TOP_LEVEL, spec_from_dict
from geosim.retired import (RETIRED_KEYWORD_VALUES, RETIRED_KEYWORDS, RETIRED_SPEC_KEYS,
                            RETIRED_SPEC_VALUES)

RNG = np.random.default_rng(3)
XY = RNG.uniform(0, 100, (40, 2))
V = RNG.lognormal(size=40)


def _public_callables():
    """(qualified name, object) of every public function and class geosim defines."""
    seen = {}
    with warnings.catch_warnings():
        # modules kept at an old path forward to their new home and say so; their objects are
        # found in the new home (an object is keyed by the module that defines it)
        warnings.simplefilter("ignore", DeprecationWarning)
        modules = [geosim] + [importlib.import_module(m.name)
                              for m in pkgutil.walk_packages(geosim.__path__, "geosim.")]
    for module in modules:
        for name, obj in vars(module).items():
            if name.startswith("_") or not callable(obj):
                continue
            home = getattr(obj, "__module__", "") or ""
            if home.startswith("geosim") and (inspect.isclass(obj) or inspect.isfunction(obj)):
                seen[f"{home}.{obj.__qualname__}"] = obj
    for name in geosim.__all__:
        obj = getattr(geosim, name)
        if inspect.isclass(obj) or inspect.isfunction(obj):
            seen.setdefault(f"{obj.__module__}.{obj.__qualname__}", obj)
    return seen


def _keywords(obj) -> set[str]:
    try:
        target = obj.__init__ if inspect.isclass(obj) else obj
        return set(inspect.signature(target).parameters) - {"self"}
    except (TypeError, ValueError):
        return set()


OLD_KEYWORDS = {old for table in RETIRED_KEYWORDS.values() for old in table}


def test_no_public_keyword_is_a_retired_name():
    """Every keyword of every public function and class: an old name must not be a live
    parameter anywhere (it would be taken silently); a renamed owner keeps the new names."""
    callables = _public_callables()
    assert len(callables) > 60  # the walk found the API, not an empty list
    live = {}
    for qualname, obj in callables.items():
        for kw in _keywords(obj):
            live.setdefault(kw, []).append(qualname)
    clashes = {kw: live[kw] for kw in OLD_KEYWORDS if kw in live}
    assert not clashes, f"retired keyword names still live: {clashes}"
    by_name = {q.rsplit(".", 1)[-1]: obj for q, obj in callables.items()}
    for owner, table in RETIRED_KEYWORDS.items():
        assert owner in by_name, owner
        assert set(table.values()) <= _keywords(by_name[owner]), owner


def _spec_keys():
    keys = [k for k in TOP_LEVEL]
    for section, table in SCHEMA.items():
        keys += [f"{section}.{k}" for k in table]
    return keys


def test_no_spec_key_is_a_retired_name():
    keys = _spec_keys()
    assert "declustering.size_count" in keys and len(keys) > 60
    for old in RETIRED_SPEC_KEYS:
        assert old not in keys, f"{old} is retired but still a spec key"
    for dotted, table in RETIRED_SPEC_VALUES.items():
        section, key = dotted.rsplit(".", 1)
        check = SCHEMA[section][key].check
        for old, new in table.items():
            assert check(old)[1] is not None, f"{dotted} = {old!r} accepted as a current value"
            assert check(new)[1] is None, f"{dotted} = {new!r} (the new value) is refused"


# minimal calls of each owner of a renamed keyword: owner -> (call(**kwargs), {old: example value})
CALLS = {
    "NormalScoreTransform": (lambda **kw: geosim.NormalScoreTransform(upper_tail="power", lower_tail="power",
                                                                        **kw).fit(V),
                             {"lower_omega": 2.0, "upper_omega": 3.0}),
    "cell_declustering": (lambda **kw: geosim.cell_declustering(XY, V, **kw),
                          {"sizes": [5.0, 20.0], "n_sizes": 5, "n_offsets": 2, "objective": "max"}),
    "cell_weights": (lambda **kw: geosim.declustering.cell_weights(XY, 10.0, **kw), {"n_offsets": 3}),
    "Direction": (lambda **kw: geosim.Direction(30.0, **kw),
                  {"azimuth_tol": 10.0, "dip_tol": 12.0, "bandwidth_h": 5.0, "bandwidth_v": 2.0}),
    "experimental_variogram": (lambda **kw: geosim.experimental_variogram(XY, V, lag=10.0, nlags=4, **kw),
                               {"lag_tol": 3.0}),
    "directional_variograms": (lambda **kw: geosim.directional_variograms(
        XY, V, [geosim.Direction(0.0)], lag=10.0, nlags=4, **kw)[0], {"lag_tol": 3.0}),
    "downhole_variogram": (lambda **kw: geosim.downhole_variogram(
        np.column_stack([XY, XY[:, 0]]), V, np.arange(40) % 4, lag=10.0, nlags=4, **kw), {"lag_tol": 3.0}),
    "variogram_map": (lambda **kw: geosim.variogram_map(np.column_stack([XY, XY[:, 0]]), V, cell=10.0,
                                                        ncells=3, **kw), {"bandwidth_v": 5.0}),
}


def _same(a, b):
    if hasattr(a, "to_dict"):
        a, b = a.to_dict(), b.to_dict()
    elif hasattr(a, "gamma"):
        a, b = (a.gamma, a.npairs), (b.gamma, b.npairs)
    elif hasattr(a, "weights") and hasattr(a, "cell_size"):
        a, b = (a.weights, a.cell_size, a.pick_mean), (b.weights, b.cell_size, b.pick_mean)
    np.testing.assert_equal(a, b)


def test_every_retired_keyword_has_a_call_here():
    assert set(CALLS) == set(RETIRED_KEYWORDS)
    for owner, (_, examples) in CALLS.items():
        assert set(examples) == set(RETIRED_KEYWORDS[owner]), owner


@pytest.mark.parametrize("owner,old", [(o, k) for o, t in RETIRED_KEYWORDS.items() for k in t])
def test_old_keyword_warns_names_the_new_one_and_works_the_same(owner, old):
    call, examples = CALLS[owner]
    new = RETIRED_KEYWORDS[owner][old]
    value = examples[old]
    with pytest.warns(RetiredNameWarning, match=rf"{owner}: {old} is now written {new}\b"):
        got = call(**{old: value})
    new_value = RETIRED_KEYWORD_VALUES[new][value] if new in RETIRED_KEYWORD_VALUES else value
    with warnings.catch_warnings():
        warnings.simplefilter("error", RetiredNameWarning)
        expected = call(**{new: new_value})
    _same(got, expected)
    with pytest.raises(TypeError, match=f"give {new} only"):
        call(**{old: value, new: new_value})


@pytest.mark.parametrize("owner,name,old", [
    ("NormalScoreTransform", "upper_tail", "hyperbolic"), ("NormalScoreTransform", "upper_tail", "linear"),
    ("NormalScoreTransform", "lower_tail", "linear"), ("cell_declustering", "pick_mean", "min"),
    ("cell_declustering", "pick_mean", "max")])
def test_old_keyword_values_warn_and_work_the_same(owner, name, old):
    assert old in RETIRED_KEYWORD_VALUES[name]
    new = RETIRED_KEYWORD_VALUES[name][old]
    if owner == "NormalScoreTransform":
        def call(**kw):
            return geosim.NormalScoreTransform(upper_exponent=3.0, **kw).fit(V)
    else:
        call = CALLS[owner][0]
    with pytest.warns(RetiredNameWarning, match=f"{name}='{old}' is now written {name}='{new}'"):
        got = call(**{name: old})
    _same(got, call(**{name: new}))


def test_every_retired_keyword_value_is_exercised():
    exercised = {("upper_tail", "hyperbolic"), ("upper_tail", "linear"), ("lower_tail", "linear"),
                 ("pick_mean", "min"), ("pick_mean", "max")}
    assert exercised == {(k, v) for k, t in RETIRED_KEYWORD_VALUES.items() for v in t}


def test_a_stored_transform_with_old_names_still_loads():
    t = geosim.NormalScoreTransform(upper_tail="pareto", upper_exponent=3.0).fit(V)
    d = t.to_dict()
    d["upper_tail"], d["upper_omega"], d["lower_tail"], d["lower_omega"] = "hyperbolic", 3.0, "linear", 1.0
    del d["upper_exponent"], d["lower_exponent"]
    with pytest.warns(RetiredNameWarning, match="upper_omega is now written upper_exponent"):
        back = geosim.transform_from_dict(d)
    y = np.linspace(-5, 5, 41)
    np.testing.assert_array_equal(back.inverse(y), t.inverse(y))


# -- run specs ---------------------------------------------------------------------------------

BASE = {"data": {"points": "wells.csv", "x": "x", "y": "y", "value": "k", "crs": "EPSG:32633"},
        "grid": {"cell": [10.0, 10.0]}, "simulation": {"realizations": 2, "seed": 1},
        "variogram": {"directions": [{"azimuth": 30.0}]}}

# old key -> (example value, new key(s) with the value they should get)
SPEC_EXAMPLES = {
    "declustering.sizes": ([10.0, 50.0], {"declustering.size_range": [10.0, 50.0]}),
    "declustering.count": (12, {"declustering.size_count": 12}),
    "declustering.offsets": (4, {"declustering.origin_shifts": 4}),
    "declustering.objective": ("max", {"declustering.pick_mean": "highest"}),
    "transform.tail_power": (2.5, {"transform.upper_exponent": 2.5}),
    "variogram.directions.tolerance": (15.0, {"horizontal_half_angle": 15.0, "vertical_half_angle": 15.0}),
    "variogram.directions.bandwidth": (40.0, {"horizontal_max_offset": 40.0, "vertical_max_offset": 40.0}),
}


def _with(dotted, value):
    import copy
    values = copy.deepcopy(BASE)
    parts = dotted.split(".")
    if parts[:2] == ["variogram", "directions"]:
        values["variogram"]["directions"][0][parts[2]] = value
    else:
        values.setdefault(parts[0], {})[parts[1]] = value
    return values


def _load(values, tmp_path):
    (tmp_path / "wells.csv").write_text("id,x,y,k\nA,0,0,1\nB,10,0,2\nC,0,10,3\n")
    return spec_from_dict(values, tmp_path, file=tmp_path / "run.toml")


def test_every_retired_spec_key_has_an_example():
    assert set(SPEC_EXAMPLES) == set(RETIRED_SPEC_KEYS)


@pytest.mark.parametrize("old", sorted(RETIRED_SPEC_KEYS))
def test_old_spec_key_warns_names_the_new_key_and_loads_the_same(old, tmp_path):
    value, expected = SPEC_EXAMPLES[old]
    with pytest.warns(RetiredNameWarning, match=r"run.toml: .*" + old.rsplit(".", 1)[1] + " is now written"):
        spec = _load(_with(old, value), tmp_path)
    for key, want in expected.items():
        got = spec["variogram.directions"][0][key] if "." not in key else spec[key]
        assert got == want, key
    news = RETIRED_SPEC_KEYS[old]
    if old.startswith("variogram.directions"):
        fresh = _with(old, None)
        del fresh["variogram"]["directions"][0][old.rsplit(".", 1)[1]]
        fresh["variogram"]["directions"][0].update(expected)
    else:
        fresh = _with(f"{old.split('.')[0]}.{news[0]}", list(expected.values())[0])
    with warnings.catch_warnings():
        warnings.simplefilter("error", RetiredNameWarning)
        assert _load(fresh, tmp_path).sha256 == spec.sha256  # the old name changes nothing computed
    both = _with(old, value)
    section = both["variogram"]["directions"][0] if old.startswith("variogram.directions") \
        else both[old.split(".")[0]]
    section[news[0]] = section[old.rsplit(".", 1)[1]] if not isinstance(value, str) else "highest"
    with pytest.raises(SpecError, match="give only"):
        _load(both, tmp_path)


@pytest.mark.parametrize("dotted,old", [(d, o) for d, t in RETIRED_SPEC_VALUES.items() for o in t])
def test_old_spec_value_warns_and_loads_the_same(dotted, old, tmp_path):
    new = RETIRED_SPEC_VALUES[dotted][old]
    with pytest.warns(RetiredNameWarning, match=f"{dotted} = .* is now written {dotted} = "):
        spec = _load(_with(dotted, old), tmp_path)
    assert spec[dotted] == new
    with warnings.catch_warnings():
        warnings.simplefilter("error", RetiredNameWarning)
        assert _load(_with(dotted, new), tmp_path).sha256 == spec.sha256


def test_the_command_line_shows_the_warning_as_a_note(tmp_path):
    from click.testing import CliRunner

    from geosim_cli.main import cli
    text = ('[data]\npoints = "wells.csv"\nx = "x"\ny = "y"\nvalue = "k"\ncrs = "EPSG:32633"\n'
            '[declustering]\ncount = 12\n[grid]\ncell = [10.0, 10.0]\n[simulation]\nrealizations = 2\nseed = 1\n')
    (tmp_path / "run.toml").write_text(text)
    (tmp_path / "wells.csv").write_text("id,x,y,k\nA,0,0,1\nB,10,0,2\nC,0,10,3\n")
    result = CliRunner().invoke(cli, ["check", str(tmp_path / "run.toml")], prog_name="geosim")
    assert "note: " in result.output and "declustering.count is now written declustering.size_count" \
        in result.output


def test_retired_warning_is_a_geosim_and_a_future_warning():
    # FutureWarning: Python shows it by default; GeosimWarning: the command line prints it as a note
    assert issubclass(RetiredNameWarning, GeosimWarning) and issubclass(RetiredNameWarning, FutureWarning)


def test_every_choice_the_key_reference_lists_is_accepted_by_its_checker():
    """`geosim check --keys` and the validation agree: each value listed as 'one of ...' passes
    the key's checker (search.sectors used to list numbers its checker refused as text)."""
    import re

    from geosim.config.runspec import reference
    checked = 0
    for section, keys in SCHEMA.items():
        for name, key in keys.items():
            expected = key.check(object())[1]
            if expected.startswith("one of "):
                for value in re.findall(r'"([^"]*)"', expected):
                    assert key.check(value)[1] is None, (section, name, value)
                    assert f'"{value}"' in reference()
                    checked += 1
    assert checked >= 15
