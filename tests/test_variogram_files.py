"""Model files (round trip, errors naming file/line/key) and variogram plots (PNG, atomic)."""
import tomllib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import geosim
from geosim.errors import InputError
from geosim.variogram import (Anisotropy, Cubic, Direction, Exponential, Gaussian, Matern, Nugget,
                              Spherical, directional_variograms, dumps_model, experimental_variogram,
                              load_model, loads_model, plot_variogram, plot_variogram_map, save_model,
                              variogram_map)

NESTED = (Nugget(0.15) + Spherical(0.55, Anisotropy((180.0, 90.0, 40.0), azimuth=60.0, dip=12.5, rake=-7.0))
          + Matern(0.2, Anisotropy.from_ratios(700.0, 0.3, 0.1, 15.0), param=0.75)
          + Cubic(0.1 / 3, 33.3) + Gaussian(1e-5, 1234.5678) + Exponential(2.0, (10.0, 5.0)))


def test_round_trip_exact(tmp_path):
    path = save_model(NESTED, tmp_path / "model.toml")
    back = load_model(path)
    assert back == NESTED
    # readable: plain TOML with one table per structure, the caution and the text form as comments
    doc = tomllib.loads(path.read_text())
    assert [s["kind"] for s in doc["structure"]] == [s.kind for s in NESTED]
    assert doc["caution"] == geosim.CAUTION
    assert "# + spherical sill=0.55" in path.read_text()


@settings(max_examples=40, deadline=None, derandomize=True)
@given(sill=st.floats(0.0, 1e6), r=st.floats(1e-3, 1e6), ratio=st.floats(0.01, 1.0),
       az=st.floats(-360.0, 360.0), dip=st.floats(-90.0, 90.0), nu=st.floats(0.05, 20.0))
def test_round_trip_any_numbers(sill, r, ratio, az, dip, nu):
    m = Nugget(sill) + Matern(sill, Anisotropy.from_ratios(r, ratio, ratio, az, dip), param=nu)
    assert loads_model(dumps_model(m)) == m


def test_never_overwrites_unless_asked(tmp_path):
    path = tmp_path / "m.toml"
    save_model(Nugget(1.0) + Spherical(1.0, 10.0), path)
    before = path.read_text()
    with pytest.raises(InputError, match="overwrite"):
        save_model(NESTED, path)
    assert path.read_text() == before
    save_model(NESTED, path, overwrite=True)
    assert load_model(path) == NESTED
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.toml"]  # no temporary left behind


GOOD = dumps_model(Nugget(0.2) + Spherical(0.8, Anisotropy((100.0, 50.0, 20.0), 30.0)))


def _line_of(text, needle):
    return next(i for i, line in enumerate(text.splitlines(), 1) if line.startswith(needle))


@pytest.mark.parametrize("old,new,field,fix", [
    ('sill = 0.8', 'sill = -0.8', "sill", "sill = 0.5"),
    ('kind = "spherical"', 'kind = "spherikal"', "kind", "spherical"),
    ('ranges = [100.0, 50.0, 20.0]', 'ranges = [100.0, 0.0]', "ranges", "metres"),
    ('azimuth = 30.0', 'azimuth = "north-east"', "azimuth", "degrees"),
    ('rake = 0.0', 'rake = 0.0\nsmoothness = 2.0', "smoothness", "remove"),
])
def test_bad_content_names_file_line_and_key(tmp_path, old, new, field, fix):
    text = GOOD.replace(old, new)
    assert text != GOOD
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(InputError) as err:
        load_model(path)
    e = err.value
    assert e.file == str(path) and e.field == field and fix in e.fix
    assert e.row == _line_of(text, new.split("\n")[-1])


def test_syntax_error_and_wrong_format(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(GOOD.replace("sill = 0.8", "sill = = 0.8"))
    with pytest.raises(InputError, match="TOML") as err:
        load_model(path)
    assert err.value.row == _line_of(GOOD, "sill = 0.8")
    path.write_text(GOOD.replace('format = "geosim-model 1"', 'format = "something else"'))
    with pytest.raises(InputError, match="format") as err:
        load_model(path)
    assert err.value.field == "format"
    with pytest.raises(InputError, match="not found"):
        load_model(tmp_path / "missing.toml")
    with pytest.raises(InputError, match="no \\[\\[structure\\]\\]"):
        loads_model('format = "geosim-model 1"\n')


# --- plot ------------------------------------------------------------------------------------------

def test_plot_writes_png_with_caution(tmp_path):
    PIL = pytest.importorskip("PIL.Image")
    rng = np.random.default_rng(2)
    xy = rng.uniform(0, 500, (300, 2))
    z = np.sin(xy[:, 0] / 80.0) + 0.3 * rng.normal(size=300)
    evs = directional_variograms(xy, z, [Direction(0.0), Direction(45.0), Direction(90.0), Direction(135.0)],
                                 lag=25.0, nlags=12)
    model = Nugget(0.1) + Spherical(0.5, Anisotropy((300.0, 150.0), azimuth=90.0))
    out = plot_variogram(evs, model, tmp_path / "vario.png", value_unit="m/s")
    with PIL.open(out) as im:
        assert im.format == "PNG" and im.size[0] > 500
        assert im.info["Description"] == geosim.CAUTION
        pixels = np.asarray(im.convert("RGB"))
    assert len(np.unique(pixels.reshape(-1, 3), axis=0)) > 20  # something was drawn
    with pytest.raises(InputError, match="overwrite"):
        plot_variogram(evs[0], None, out)
    plot_variogram(experimental_variogram(xy, z, lag=25.0, nlags=12), model, out, overwrite=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["vario.png"]


def test_plot_variogram_map(tmp_path):
    PIL = pytest.importorskip("PIL.Image")
    rng = np.random.default_rng(6)
    xy = rng.uniform(0, 400, (400, 2))
    z = np.sin((xy[:, 0] + xy[:, 1]) / 60.0)  # continuous along azimuth 135, varying along 45
    vm = variogram_map(xy, z, cell=20.0, ncells=8)
    # the map itself shows it: lags along 135 vary less than lags along 45
    c = 8
    assert vm.gamma[c - 3, c + 3] < vm.gamma[c + 3, c + 3]
    out = plot_variogram_map(vm, tmp_path / "map.png")
    with PIL.open(out) as im:
        assert im.format == "PNG" and im.info["Description"] == geosim.CAUTION
    with pytest.raises(InputError, match="overwrite"):
        plot_variogram_map(vm, out)
