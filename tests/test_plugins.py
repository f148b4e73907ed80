"""The plugin registry, with geosim's own registrations and a real third-party plugin.

The plugin package in ``tests/plugin_package`` is installed by pip into a temporary
folder put on ``sys.path`` (so the shared environment is never changed), and its
entry points are then read by :mod:`importlib.metadata` exactly as for any
installed package.  It adds a hole-effect structure with a compiled form
("wave"), a numpy-only structure ("cauchy"), an invalid structure ("boxcar"), a
structure under a built-in's name, a module that fails to import, an engine
("marginal") and a writer ("npy").
"""
from __future__ import annotations

import importlib
import logging
import shutil
import subprocess
import sys
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import geosim
import geosim.plugins as plugins
from geosim.errors import InvalidStructureError
from geosim.variogram import plugin_forms
from geosim.variogram.checks import check_structure
from geosim.variogram import Anisotropy, Model, Nugget, Structure
from geosim.variogram.structures import BUILTIN_STRUCTURES

HERE = Path(__file__).resolve().parent
PLUGIN_SOURCE = HERE / "plugin_package"


# -- geosim's own registrations ------------------------------------------------

def test_builtins_load_through_the_registry():
    for kind, cls in BUILTIN_STRUCTURES.items():
        assert plugins.get("structures", kind) is cls
    assert {"sequential", "exact"} <= set(plugins.available("engines"))
    from geosim.ensemble import RealizationWriter
    assert plugins.get("writers", "geotiff") is RealizationWriter
    own = [i for i in plugins.installed() if i.package == "geosim"]
    assert own and all(i.usable for i in own), [i for i in own if not i.usable]


def test_unknown_name_is_a_key_error_listing_what_exists():
    with pytest.raises(KeyError) as info:
        plugins.get("structures", "sphericle")
    assert isinstance(info.value, plugins.PluginError)
    assert "sphericle" in str(info.value) and "spherical" in str(info.value)
    with pytest.raises(ValueError, match="groups"):
        plugins.available("colours")


def test_old_paths_of_the_moved_helpers_still_work_with_a_warning():
    with pytest.warns(DeprecationWarning, match="geosim.variogram.checks.check_structure"):
        assert plugins.check_structure is check_structure
    with pytest.warns(DeprecationWarning, match="geosim.variogram.plugin_forms.evaluate_compiled"):
        assert plugins.evaluate_compiled is plugin_forms.evaluate_compiled
    assert plugins.InvalidStructureError is InvalidStructureError
    with pytest.raises(AttributeError, match="no attribute 'nothing_here'"):
        plugins.nothing_here


# -- the load-time check --------------------------------------------------------

@pytest.mark.parametrize("cls", list(BUILTIN_STRUCTURES.values()), ids=list(BUILTIN_STRUCTURES))
def test_check_accepts_every_builtin_structure(cls):
    # all six are valid covariances in 3-D (Chiles and Delfiner 2012, Geostatistics:
    # Modeling Spatial Uncertainty, section 2.5, from memory), the Gaussian on a dense lattice too
    check_structure(cls)


def _shape(kind, rho, code=-1):
    """A structure class with correlation ``rho`` (numpy), as a plugin would write it."""
    return dataclass(frozen=True)(type(kind.title(), (Structure,), {
        "kind": kind, "code": code, "correlation": lambda self, r: rho(np.asarray(r, dtype=float))}))


@pytest.mark.parametrize("kind, rho, reason", [
    # the triangular model is a covariance in 1-D only (Chiles and Delfiner 2012, section 2.5, from memory)
    ("triangle", lambda r: np.maximum(1.0 - r, 0.0), "not a valid covariance"),
    # the cosine hole effect is a covariance in 1-D only (Journel and Huijbregts 1978, Mining
    # Geostatistics, section III.B, from memory)
    ("cosine", lambda r: np.cos(np.pi * r), "not a valid covariance"),
    ("downward", lambda r: 1.0 - np.minimum(r, 1.0) ** 2, "not a valid covariance"),
    ("scaled", lambda r: 0.8 * np.exp(-3.0 * r), "zero lag"),
    ("holey", lambda r: np.where(r > 2.0, np.nan, np.exp(-r)), "not finite"),
])
def test_check_rejects_invalid_shapes(kind, rho, reason):
    with pytest.raises(InvalidStructureError, match=reason) as info:
        check_structure(_shape(kind, rho))
    assert repr(kind) in str(info.value)


def test_check_rejects_a_code_the_kernels_would_misread():
    # code 1 is the built-in spherical: the compiled kernels would evaluate this as spherical
    imposter = _shape("bumpy", lambda r: np.exp(-r), code=1)
    with pytest.raises(InvalidStructureError, match="compiled kernels.*reserved for built-in"):
        check_structure(imposter)


def test_check_rejects_a_compiled_form_that_disagrees_with_its_numpy_form():
    from numba import njit

    @njit
    def other(r, param):
        return np.exp(-2.0 * r)

    cls = _shape("twofaced", lambda r: np.exp(-3.0 * r))
    cls.numba_correlation = other
    with pytest.raises(InvalidStructureError, match="differ"):
        check_structure(cls)


# -- a real third-party plugin ---------------------------------------------------

def _install(target: Path) -> str:
    """pip-install the test plugin into ``target``; returns how it was registered."""
    source = target.parent / "plugin_source"
    shutil.copytree(PLUGIN_SOURCE, source)  # building writes into the source tree: keep tests/ clean
    cmd = [sys.executable, "-m", "pip", "install", "--quiet", "--no-deps", "--disable-pip-version-check",
           "--retries", "1", "--timeout", "15", "--target", str(target), str(source)]
    try:
        if subprocess.run(cmd, capture_output=True, text=True, timeout=300).returncode == 0:
            return "pip"
    except subprocess.TimeoutExpired:
        pass
    shutil.rmtree(target, ignore_errors=True)
    target.mkdir(parents=True)
    # no build backend reachable (offline CI): register the same package by hand, the way pip
    # lays it out, so importlib.metadata still reads real entry points
    shutil.copytree(source / "geosim_testplugin", target / "geosim_testplugin")
    meta = tomllib.loads((source / "pyproject.toml").read_text())["project"]
    info = target / f"geosim_testplugin-{meta['version']}.dist-info"
    info.mkdir()
    (info / "METADATA").write_text(f"Metadata-Version: 2.1\nName: {meta['name']}\nVersion: {meta['version']}\n")
    lines = []
    for group, eps in meta["entry-points"].items():
        lines.append(f"[{group}]")
        lines += [f"{name} = {value}" for name, value in eps.items()]
    (info / "entry_points.txt").write_text("\n".join(lines) + "\n")
    return "dist-info"


@pytest.fixture(scope="module")
def plugin(tmp_path_factory):
    """The test plugin installed for this module only; yields the notes of its first load."""
    site = tmp_path_factory.mktemp("plugin") / "site"
    how = _install(site)
    sys.path.insert(0, str(site))
    importlib.invalidate_caches()
    plugins.refresh()
    records = []
    catch = logging.Handler(logging.WARNING)
    catch.emit = records.append
    logging.getLogger("geosim").addHandler(catch)  # the notes of the first load (this fixture outlives caplog's)
    try:
        plugins.structures()
    finally:
        logging.getLogger("geosim").removeHandler(catch)
    yield {"site": site, "how": how, "warnings": [r.getMessage() for r in records]}
    sys.path.remove(str(site))
    for name in [m for m in sys.modules if m.startswith("geosim_testplugin")]:
        del sys.modules[name]
    importlib.invalidate_caches()
    plugins.refresh()


def _info(name, group="structures"):
    (found,) = [i for i in plugins.installed(group) if i.name == name and i.package == "geosim-testplugin"]
    return found


def test_plugin_structures_are_checked_at_load(plugin):
    assert _info("wave").status == "ok" and _info("wave").detail == "compiled form"
    assert _info("cauchy").status == "ok" and "numpy form only" in _info("cauchy").detail
    boxcar = _info("boxcar")
    assert boxcar.status == "rejected" and "not a valid covariance" in boxcar.detail
    assert "eigenvalue" in boxcar.detail
    ripple = _info("ripple")
    assert ripple.status == "import failed" and "fails to import on purpose" in ripple.detail
    imposter = _info("exponential")
    assert imposter.status == "rejected" and "already taken by geosim" in imposter.detail
    # the built-in keeps its name; the usable set gains exactly the two valid plugin structures
    assert plugins.get("structures", "exponential") is BUILTIN_STRUCTURES["exponential"]
    assert set(plugins.available("structures")) == set(BUILTIN_STRUCTURES) | {"wave", "cauchy"}
    assert _info("npy", "writers").usable and _info("marginal", "engines").usable
    own = [i for i in plugins.installed("engines") if i.package == "geosim"]
    assert own and all(i.detail == "built-in" for i in own)


def test_each_problem_is_one_note_naming_package_and_entry_point(plugin):
    messages = plugin["warnings"]
    for name, target, words in [("boxcar", "geosim_testplugin.shapes:Boxcar", "not a valid covariance"),
                                ("ripple", "geosim_testplugin.broken:Ripple", "import failed"),
                                ("exponential", "geosim_testplugin.shapes:Imposter", "already taken")]:
        about = [m for m in messages if f"'{name}'" in m and target in m]
        assert len(about) == 1, (name, messages)
        assert "geosim-testplugin" in about[0] and words in about[0]
    numpy_only = [m for m in messages if "only a numpy form" in m]
    assert len(numpy_only) == 1 and "'cauchy'" in numpy_only[0]
    assert not any("'wave'" in m for m in messages)


def test_numpy_only_note_comes_once_per_process(plugin, notes):
    cauchy = plugins.get("structures", "cauchy")
    Model([cauchy(1.0, 100.0)]).compiled()
    Model([cauchy(0.5, 10.0, param=2.0)]).compiled()
    assert not [n for n in notes.logged() if "numpy form" in n]


def test_unusable_plugin_lookup_says_why(plugin):
    with pytest.raises(KeyError, match="not a valid covariance"):
        plugins.get("structures", "boxcar")
    with pytest.raises(KeyError, match="import failed"):
        plugins.get("structures", "ripple")


def test_compiled_form_matches_numpy_sinc(plugin):
    wave = plugins.get("structures", "wave")
    r = np.linspace(0.0, 7.0, 707)
    # numpy.sinc(x) = sin(pi x) / (pi x), the cardinal sine the plugin documents
    np.testing.assert_allclose(wave(1.0, 10.0).correlation(r), np.sinc(r), rtol=0, atol=1e-14)
    np.testing.assert_allclose(plugin_forms.evaluate_compiled(wave.numba_correlation, r.reshape(7, 101)),
                               np.sinc(r).reshape(7, 101), rtol=0, atol=1e-14)


def test_kernels_evaluate_the_hole_effect_from_its_table(plugin):
    from geosim.variogram.compiled import cov_lag
    wave = plugins.get("structures", "wave")
    model = Nugget(0.1) + wave(0.9, Anisotropy((120.0, 60.0), azimuth=30.0))
    cm = model.compiled()
    rng = np.random.default_rng(3)
    lags = rng.uniform(-600.0, 600.0, (500, 2))
    kernel = np.array([cov_lag(cm, dx, dy, 0.0) for dx, dy in lags])
    # table of 4097 points over 50 ranges: linear interpolation errs by at most
    # step^2 / 8 * max|rho''| = (50/4096)^2 / 8 * pi^2 / 3 ~ 6e-5 (times the sill 0.9)
    np.testing.assert_allclose(kernel, model.covariance(lags), rtol=0, atol=6e-5)
    # the hole effect survives tabulation: negative covariance just past the first zero
    assert cov_lag(cm, 0.0, 0.0, 0.0) == pytest.approx(1.0)
    # along the major axis (azimuth 30) at 1.43 ranges, where sinc is lowest: 0.9 * -0.217
    az = np.radians(30.0)
    assert cov_lag(cm, 1.43 * 120.0 * np.sin(az), 1.43 * 120.0 * np.cos(az), 0.0) < -0.15


def test_model_dicts_and_run_specs_accept_plugin_kinds(plugin, tmp_path):
    wave, cauchy = plugins.get("structures", "wave"), plugins.get("structures", "cauchy")
    model = Nugget(0.1) + wave(0.6, Anisotropy((300.0, 150.0), azimuth=20.0)) + cauchy(0.3, 80.0, param=2.5)
    assert Model.from_dicts(model.to_dicts()) == model
    with pytest.raises(ValueError, match="unknown kind 'boxcar'"):
        Model.from_dicts([{"kind": "boxcar", "sill": 1.0, "ranges": [10.0]}])

    import geosim.config.runspec
    (tmp_path / "wells.csv").write_text("well_id,x,y,k\nA,0,0,1\nB,50,20,2\n")
    spec = """
[data]
points = "wells.csv"
x = "x"
y = "y"
value = "k"
crs = "EPSG:32633"
[variogram]
fit = false
structures = [{{ kind = "nugget", sill = 0.1 }}, {{ kind = "{kind}", sill = 0.9, ranges = [300.0, 150.0] }}]
[grid]
cell = [10.0, 10.0]
[simulation]
realizations = 2
seed = 1
"""
    (tmp_path / "good.toml").write_text(spec.format(kind="wave"))
    geosim.config.runspec.load_spec(tmp_path / "good.toml")
    (tmp_path / "bad.toml").write_text(spec.format(kind="boxcar"))
    with pytest.raises(geosim.SpecError, match="boxcar"):
        geosim.config.runspec.load_spec(tmp_path / "bad.toml")


def test_command_line_lists_plugins_and_survives_broken_ones(plugin):
    from geosim_cli.main import cli
    result = CliRunner().invoke(cli, ["plugins"])
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    row = {(ln.split()[0], ln.split()[1]): ln for ln in lines[1:] if ln.strip()}
    assert "compiled form" in row["structures", "wave"]
    assert "import failed" in row["structures", "ripple"]
    assert "rejected" in row["structures", "boxcar"]
    assert "geosim-testplugin" in row["writers", "npy"]
    assert " ok " in row["commands", "plugins"]


def test_rio_runs_geosim_as_a_subcommand(plugin):
    from rasterio.rio.main import main_group
    result = CliRunner().invoke(main_group, ["geosim", "plugins", "--group", "engines"])
    assert result.exit_code == 0, result.output
    assert "sequential" in result.output and "exact" in result.output
    rio = Path(sys.executable).with_name("rio")
    done = subprocess.run([str(rio), "geosim", "--help"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert "Usage: rio geosim" in done.stdout and "plugins" in done.stdout


# -- end to end: fit, krige, simulate with both engines, write -----------------------

TRUE_RANGE = 300.0


@pytest.fixture(scope="module")
def wells(plugin):
    """120 samples of a field with a hole-effect covariance (nugget 0.1 + wave 0.9, range 300 m)."""
    wave = plugins.get("structures", "wave")
    truth = Nugget(0.1) + wave(0.9, TRUE_RANGE)
    rng = np.random.default_rng(20261202)
    xy = rng.uniform(0.0, 1500.0, (120, 2))
    z = np.linalg.cholesky(truth.cov_matrix(xy)) @ rng.standard_normal(len(xy))
    return xy, z, truth


def test_fit_recovers_the_plugin_structure(wells):
    from geosim.variogram import experimental_variogram, fit_model
    xy, z, truth = wells
    wave = plugins.get("structures", "wave")
    ev = experimental_variogram(xy, z, lag=50.0, nlags=14)
    fit = fit_model(ev, Nugget(0.2) + wave(0.8, 200.0), weighting="pairs")
    assert [s.kind for s in fit.model_.structures] == ["nugget", "wave"]
    assert fit.success_
    # one realization of 120 samples pins a range only loosely: a factor of 1.5 either way
    # is generous (common practice, no source); a wrong shape drifts far outside it
    fitted = fit.model_.structures[1].anisotropy.major
    assert TRUE_RANGE / 1.5 < fitted < TRUE_RANGE * 1.5


def test_kriging_with_the_plugin_structure_matches_a_direct_solve(wells):
    from geosim.kriging import krige
    from geosim.search import Neighbourhood
    xy, z, model = wells
    targets = np.array([[400.0, 700.0], [1010.0, 222.0], [75.0, 1400.0]])
    # simple kriging with mean 0, all data: weights C^-1 c, variance C(0) - c' C^-1 c
    # (the simple kriging system; Chiles and Delfiner 2012, section 3.3, from memory)
    c = model.cov_matrix(xy)
    c0 = model.cov_matrix(xy, targets)
    w = np.linalg.solve(c, c0)
    expected, variance = w.T @ z, model.sill - np.sum(w * c0, axis=0)
    hood = Neighbourhood(max_samples=len(xy), ranges=(5000.0, 5000.0))
    local = krige(xy, z, targets, model, neighbourhood=hood)  # compiled kernel, tabulated wave
    # the table's error (~6e-5 in covariance) moves estimates by a few 1e-4 at most here
    np.testing.assert_allclose(local.estimate, expected, atol=2e-3)
    np.testing.assert_allclose(local.variance, variance, atol=2e-3)
    exact = krige(xy, z, targets, model, neighbourhood="global")  # numpy path, compiled form
    np.testing.assert_allclose(exact.estimate, expected, atol=1e-8)


def test_exact_engine_ensemble_matches_kriging(wells):
    xy, z, model = wells
    grid = geosim.Grid(300.0, 300.0, (60.0, 60.0), (6, 6))
    n = 200
    fields = geosim.simulate(xy, z, model, grid, n_realizations=n, seed=5, engine="exact", workers=1)
    stack = np.array(fields).reshape(n, -1)
    nodes = grid.coords()
    c = model.cov_matrix(xy)
    c0 = model.cov_matrix(xy, nodes)
    w = np.linalg.solve(c, c0)
    mean, var = w.T @ z, model.sill - np.sum(w * c0, axis=0)
    # ensemble mean of n independent draws has standard error sqrt(var / n); 4.5 standard
    # errors over 36 nodes keeps the false-alarm rate below 1e-4
    assert np.all(np.abs(stack.mean(axis=0) - mean) < 4.5 * np.sqrt(var / n))
    # ensemble variance: (n-1) s^2 / var ~ chi-square(n-1), relative sd sqrt(2/(n-1)) ~ 0.1; 4.5 sd
    assert np.all(np.abs(stack.var(axis=0, ddof=1) / var - 1.0) < 4.5 * np.sqrt(2.0 / (n - 1)))


def test_sequential_engine_on_workers_writes_rasters(wells, tmp_path):
    import rasterio
    xy, z, model = wells
    grid = geosim.Grid(0.0, 0.0, (50.0, 50.0), (30, 30))
    # three extra data sit on node centres: both engines must reproduce them exactly there
    on_nodes = np.array([0, 455, 899])
    xy = np.vstack([xy, grid.coords()[on_nodes]])
    z = np.concatenate([z, [2.5, -1.5, 0.7]])
    writer_cls = plugins.get("writers", "geotiff")
    writer = writer_cls(tmp_path / "out", grid, tags={"MODEL": str(model)})
    # two spawned workers: the plugin structure travels by pickle and imports in each
    records = geosim.simulate(xy, z, model, grid, n_realizations=2, seed=8, engine="sequential",
                              workers=2, sink=writer)
    serial = geosim.simulate(xy, z, model, grid, n_realizations=2, seed=8, engine="sequential", workers=1)
    for record, field in zip(records, serial):
        with rasterio.open(tmp_path / "out" / record["files"][0]) as src:
            written = src.read(1, masked=True).filled(np.nan)
            assert "wave" in src.tags()["MODEL"]
        np.testing.assert_array_equal(written, field.astype(np.float32))
        assert np.isfinite(field).all()
        np.testing.assert_array_equal(field.ravel()[on_nodes], z[-3:])


def test_third_party_engine_runs_through_the_runner(wells):
    xy, z, model = wells
    assert _info("marginal", "engines").usable
    grid = geosim.Grid(200.0, 200.0, (100.0, 100.0), (5, 5))
    n = 300
    fields = geosim.simulate(xy, z, model, grid, n_realizations=n, seed=6, engine="marginal", workers=1)
    stack = np.array(fields).reshape(n, -1)
    c = model.cov_matrix(xy)
    c0 = model.cov_matrix(xy, grid.coords())
    w = np.linalg.solve(c, c0)
    mean, var = w.T @ z, model.sill - np.sum(w * c0, axis=0)
    # as for the exact engine: 4.5 standard errors of the mean and of the variance (chi-square)
    assert np.all(np.abs(stack.mean(axis=0) - mean) < 4.5 * np.sqrt(var / n))
    assert np.all(np.abs(stack.var(axis=0, ddof=1) / var - 1.0) < 4.5 * np.sqrt(2.0 / (n - 1)))
    # realization i depends only on (seed, i), whoever the engine is
    again = geosim.simulate(xy, z, model, grid, n_realizations=n, seed=6, engine="marginal", workers=1,
                            indices=[7])
    np.testing.assert_array_equal(again[0], fields[7])


def test_third_party_writer_as_sink(wells, tmp_path):
    xy, z, model = wells
    grid = geosim.Grid(0.0, 0.0, (100.0, 100.0), (8, 8))
    npy = plugins.get("writers", "npy")(tmp_path / "npy", grid)
    records = npy.finish(geosim.simulate(xy, z, model, grid, n_realizations=2, seed=2, engine="exact",
                                         workers=1, sink=npy))
    fields = geosim.simulate(xy, z, model, grid, n_realizations=2, seed=2, engine="exact", workers=1)
    for record, field in zip(records, fields):
        np.testing.assert_array_equal(np.load(record["path"]), field)


def test_covariance_matrices_agree_across_evaluation_routes(plugin):
    # Model.cov_matrix evaluates built-in closed forms and plugin compiled forms in compiled
    # loops and the rest (Matern, numpy-only plugins) through numpy; all must equal the
    # plain lag-vector covariance, in 1-D, 2-D and 3-D
    from geosim.variogram import Cubic, Exponential, Gaussian, Matern, Spherical
    wave, cauchy = plugins.get("structures", "wave"), plugins.get("structures", "cauchy")
    model = (Nugget(0.1) + Spherical(0.2, Anisotropy((200.0, 100.0, 50.0), 20.0, 30.0, 10.0))
             + Exponential(0.1, 50.0) + Gaussian(0.1, 80.0) + Cubic(0.1, (90.0, 30.0))
             + Matern(0.1, 40.0, param=0.7) + wave(0.2, Anisotropy((300.0, 100.0, 60.0), 45.0, 10.0))
             + cauchy(0.1, 60.0))
    rng = np.random.default_rng(11)
    for d in (1, 2, 3):
        a = rng.uniform(0.0, 300.0, (120, d))
        b = np.vstack([a[:20], rng.uniform(0.0, 300.0, (80, d))])  # coincident points: the nugget
        np.testing.assert_allclose(model.cov_matrix(a, b), model.covariance(a[:, None] - b[None]),
                                   rtol=0, atol=1e-14)


def test_run_spec_end_to_end_with_a_plugin_structure(wells, tmp_path):
    # the whole job from a run spec: the wave structure is fitted, cross-validated, kriged,
    # simulated by the exact engine and written as GeoTIFF, without geosim knowing it
    import rasterio

    import geosim.pipeline
    xy, z, _ = wells
    rows = "\n".join(f"W{i},{x + 500000.0:.3f},{y + 6000000.0:.3f},{v:.6f}" for i, ((x, y), v) in
                     enumerate(zip(xy, z)))
    (tmp_path / "wells.csv").write_text("well_id,x,y,v\n" + rows + "\n")
    (tmp_path / "run.toml").write_text("""
[data]
points = "wells.csv"
x = "x"
y = "y"
id = "well_id"
value = "v"
crs = "EPSG:32633"
[variogram]
fit = true
lag = 50.0
lag_count = 14
structures = [{ kind = "nugget", sill = 0.2 }, { kind = "wave", sill = 0.8, ranges = [200.0, 200.0] }]
[grid]
cell = [100.0, 100.0]
[simulation]
engine = "exact"
realizations = 3
seed = 4
workers = 1
[outputs]
plots = false
[ranking]
figure = "value_range"
""")
    result = geosim.pipeline.run(tmp_path / "run.toml", tmp_path / "out")
    assert [s.kind for s in result.model.structures] == ["nugget", "wave"]
    assert result.computed == [0, 1, 2] and result.crossval is not None
    # the realizations are ranked by the plugin figure, computed on each realization in the worker
    ranked = (tmp_path / "out" / "ranking.csv").read_text().splitlines()[1:]
    for line in ranked:
        index, figure = int(line.split(",")[0]), float(line.split(",")[1])
        with rasterio.open(tmp_path / "out" / "realizations" / f"r{index:04d}.tif") as src:
            values = src.read(1)
        assert figure == pytest.approx(float(np.nanmax(values) - np.nanmin(values)), rel=1e-6)
    tifs = sorted((tmp_path / "out").rglob("*.tif"))
    assert len(tifs) >= 3
    for tif in tifs:
        with rasterio.open(tif) as src:
            assert any("wave" in v for v in src.tags().values()), (tif, src.tags())


def test_fitting_honours_a_plugin_parameter_range(plugin):
    # a noise-free experimental variogram of cauchy(shape=12): the fit can only recover the
    # shape because the class widens the fitting range to (0.2, 20) beyond the default (0.1, 5)
    from geosim.variogram import ExperimentalVariogram, fit_model
    cauchy = plugins.get("structures", "cauchy")
    assert cauchy.param_bounds == (0.2, 20.0)
    truth = Model([cauchy(1.0, 150.0, param=12.0)])
    lags = np.arange(1, 21) * 15.0
    gamma = truth.semivariance(np.column_stack([lags, 0.0 * lags]))
    ev = ExperimentalVariogram(centres=lags, lags=lags, gamma=gamma, npairs=np.full(20, 500), lag=15.0,
                               lag_half_width=7.5, kind="omnidirectional", direction=None, estimator="matheron",
                               variance=1.0, extent=3000.0, dim=2, nsamples=600)
    fit = fit_model(ev, Model([cauchy(1.0, 150.0, param=2.0)]), fixed=["0.sill", "0.major"])
    assert fit.params_["0.shape"] == pytest.approx(12.0, rel=1e-3)
