"""A 3-D run with a mean cube and a secondary cube (NetCDF, read through geosim.gridvalues), built
here from known models: the cubes are stored with z and y descending, so reading them the wrong way
up shows; the run's correlation with the secondary far from the data; coverage errors naming nodes.

The truth is a joint Gaussian field under the Markov model (Almeida and Journel 1994, Mathematical
Geology 26(5)): Y with the model's covariance, and the secondary S = rho Y + sqrt(1 - rho^2) E with
E independent unit noise at every node, so C_YS = rho C_Y and C_SS = rho^2 C_Y + (1 - rho^2) [h = 0].
"""
import numpy as np
import pytest

import geosim
import geosim.pipeline as pipeline
from geosim.config.runspec import load_spec
from geosim.errors import InputError

xarray = pytest.importorskip("xarray")
pytest.importorskip("netCDF4")

RHO = 0.7
X0, Y0 = 455000.0, 5460000.0              # EPSG:32750, an invented block of ground
CELL = (20.0, 20.0, 5.0)
NX, NY, NZ = 20, 12, 8                    # 400 x 240 x 40 m, z 100-140 m
MODEL = geosim.Nugget(0.03) + geosim.Spherical(0.97, geosim.Anisotropy((150.0, 150.0, 40.0)))
N_SAMPLES = 60


def _mean(z):
    """The mean in data units: 2.5 units from the bottom level to the top, so a cube read upside
    down puts it the wrong way round."""
    return 10.0 + 2.5 * (z - 120.0) / 20.0


def _cube(path, name, values, xs, ys, zs):
    """A CF cube of ``values`` in the grid's order (level 0 lowest, row 0 north), stored with z
    descending and y ascending: both the other way round from the grid."""
    from pyproj import CRS
    ds = xarray.Dataset({name: (("z", "y", "x"), values[::-1, ::-1, :], {"grid_mapping": "spatial_ref"})},
                        coords={"z": zs[::-1], "y": ys, "x": xs})
    ds["spatial_ref"] = xarray.DataArray(0, attrs={"crs_wkt": CRS.from_epsg(32750).to_wkt()})
    ds.to_netcdf(path)
    return path


@pytest.fixture(scope="module")
def field(tmp_path_factory):
    """Truth, samples on nodes in the western fifth, the cubes and a run spec."""
    folder = tmp_path_factory.mktemp("cube_run")
    xs = X0 + CELL[0] * (np.arange(NX) + 0.5)
    ys = Y0 + CELL[1] * (np.arange(NY) + 0.5)
    zs = 100.0 + CELL[2] * (np.arange(NZ) + 0.5)
    zz, yy, xx = np.meshgrid(zs, ys[::-1], xs, indexing="ij")
    nodes = np.column_stack([xx.ravel(), yy.ravel(), zz.ravel()])   # the grid's order: z up, y down, x
    rng = np.random.default_rng(20261203)
    cov = MODEL.cov_matrix(nodes)
    y = np.linalg.cholesky(cov + 1e-10 * np.eye(len(cov))) @ rng.standard_normal(len(nodes))
    s = RHO * y + np.sqrt(1.0 - RHO ** 2) * rng.standard_normal(len(nodes))
    # samples at nodes of the western 80 m; the eastern 100 m lie beyond every range from them
    west = np.flatnonzero(nodes[:, 0] < X0 + 80.0)
    pick = np.sort(rng.choice(west, N_SAMPLES, replace=False))
    values = _mean(nodes[pick, 2]) + y[pick]
    lines = ["id,x,y,z,grade"] + [f"S{i},{x:.3f},{yy_:.3f},{z:.3f},{v:.6f}"
                                  for i, ((x, yy_, z), v) in enumerate(zip(nodes[pick], values))]
    (folder / "samples.csv").write_text("\n".join(lines) + "\n")
    shape = (NZ, NY, NX)
    _cube(folder / "mean.nc", "mean_grade", _mean(zz), xs, ys, zs)
    _cube(folder / "survey.nc", "conductivity", (50.0 + 8.0 * s).reshape(shape), xs, ys, zs)
    gap = (50.0 + 8.0 * s).reshape(shape).copy()
    gap[-1] = np.nan  # the top level of the survey missing
    _cube(folder / "survey_gap.nc", "conductivity", gap, xs, ys, zs)
    gap = _mean(zz).copy()
    gap[0, :, -3:] = np.nan  # the bottom level's eastern three columns of the mean missing
    _cube(folder / "mean_gap.nc", "mean_grade", gap, xs, ys, zs)
    text = f"""
[data]
points = "samples.csv"
x = "x"
y = "y"
z = "z"
id = "id"
value = "grade"
crs = "EPSG:32750"
[variogram]
fit = false
structures = [{{ kind = "nugget", sill = 0.02 }},
              {{ kind = "spherical", sill = 0.63, ranges = [150.0, 150.0, 40.0] }}]
[grid]
cell = [{CELL[0]}, {CELL[1]}, {CELL[2]}]
bounds = [{X0}, {Y0}, {X0 + NX * CELL[0]}, {Y0 + NY * CELL[1]}]
z_range = [100.0, 140.0]
[simulation]
engine = "exact"
realizations = 40
seed = 5
workers = 1
[outputs]
plots = false
cross_validation = false
[mean]
file = "mean.nc"
[secondary]
file = "survey.nc"
"""
    (folder / "run.toml").write_text(text)
    return {"folder": folder, "nodes": nodes, "y": y, "s": s, "pick": pick}


def test_cubes_are_read_the_right_way_up_at_nodes_and_samples(field):
    spec = load_spec(field["folder"] / "run.toml")
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    assert grid.shape == (NZ, NY, NX) and np.allclose(grid.coords(), field["nodes"])
    # the mean at every node and sample is the known mean of its level, through the run's transform
    # (nodes and samples sit on cell centres, where trilinear reading is exact)
    expected = data.transform.transform(_mean(field["nodes"][:, 2]))
    assert np.allclose(data.mean.at_nodes(grid)[grid.mask], expected, atol=1e-9)
    assert np.allclose(data.mean.at_data, expected[field["pick"]], atol=1e-9)
    # the secondary: its own normal-score transform of the known survey at each node
    from geosim.secondary import secondary_grid
    sec = secondary_grid(spec, data.samples, data.scores, grid)
    assert np.allclose(sec.at_nodes[grid.mask], sec.transform.transform(50.0 + 8.0 * field["s"]), atol=1e-9)
    assert np.array_equal(np.argsort(sec.at_nodes[grid.mask]), np.argsort(field["s"]))
    # the correlation at the 60 samples: the truth's is 0.7; its standard error is about
    # (1 - 0.49) / sqrt(60) = 0.066, and the residual scores are a monotone, nearly linear function
    # of the truth (normal scores of mean + Y): allow 4 standard errors (upside down, about 0)
    assert sec.pairs == N_SAMPLES and abs(sec.correlation - RHO) < 4 * 0.066


def test_run_reproduces_the_correlation_with_the_secondary_far_from_the_data(field, tmp_path):
    spec = load_spec(field["folder"] / "run.toml", {"secondary.correlation": RHO})
    result = pipeline.run(spec, tmp_path / "run")
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    from geosim.secondary import secondary_grid
    sec = secondary_grid(spec, data.samples, data.scores, grid)
    mean = data.mean.at_nodes(grid)[grid.mask]
    nodes = field["nodes"]
    far = nodes[:, 0] > X0 + 300.0  # at least 220 m from every sample: beyond the 150 m range
    s = sec.at_nodes[grid.mask][far]
    with xarray.open_dataset(tmp_path / "run" / "realizations.nc") as ds:
        name = [v for v in ds.data_vars if "realization" in ds[v].dims][0]
        # in the grid's node order whatever the file's: z up, y down (row 0 north), x east
        cube = ds[name].sortby("z").sortby("y", ascending=False).transpose("realization", "z", "y", "x").values
    assert cube.shape[0] == spec["simulation.realizations"] == len(result.kept + result.computed)
    # back to the residual normal scores the engine simulated, and their correlation with the
    # survey's scores over the far nodes, one per realization
    corr = np.array([np.corrcoef(data.transform.transform(v.astype(np.float64))[far] - mean[far], s)[0, 1]
                     for v in cube.reshape(cube.shape[0], -1)])
    # reference: the same statistic for the run's own model, Markov secondary, drawn in numpy at these
    # nodes (no data this far away): a correlation over a block smaller than the range is below rho,
    # since the primary varies less inside it than the independent noise does. The realizations share
    # one survey, so their mean differs from the reference's by about one field's sampling error:
    # allow 4 standard deviations of the reference's 400 draws
    model = pipeline.variogram_model(spec, data).model
    lower = np.linalg.cholesky(model.cov_matrix(nodes[far]) + 1e-10 * np.eye(int(far.sum())))
    rng = np.random.default_rng(7)
    b = RHO / np.sqrt(model.sill)
    ref = []
    for _ in range(400):
        y = lower @ rng.standard_normal(lower.shape[0])
        ref.append(np.corrcoef(y, b * y + np.sqrt(1 - RHO ** 2) * rng.standard_normal(y.size))[0, 1])
    ref = np.array(ref)
    assert abs(corr.mean() - ref.mean()) < 4 * ref.std(ddof=1), (corr.mean(), ref.mean(), ref.std())
    # a run that ignored the survey here would sit near 0
    assert corr.mean() > ref.mean() - 4 * ref.std(ddof=1) > 0.3


def test_cube_gaps_are_refused_naming_where(field):
    folder = field["folder"]
    spec = load_spec(folder / "run.toml", {"secondary.file": "survey_gap.nc"})
    data = pipeline.prepare_data(spec)
    grid = pipeline.make_grid(spec, data)
    with pytest.raises(InputError) as err:
        pipeline.estimate(spec, data, None, grid)
    text = str(err.value)
    # the top level (z 137.5) of every column: named by count and box, in the grid's up-is-up order
    assert f"secondary grid has no value at {NX * NY} of {NX * NY * NZ:,} active grid nodes" in text
    assert "z 137.5 to 137.5" in text and err.value.field == "secondary.file" and "survey_gap.nc" in text
    spec = load_spec(folder / "run.toml", {"mean.file": "mean_gap.nc"})
    data = pipeline.prepare_data(spec)  # the samples lie in the west: covered
    with pytest.raises(InputError) as err:
        data.mean.at_nodes(grid)
    text = str(err.value)
    x_lo = X0 + CELL[0] * (NX - 3 + 0.5)
    assert f"mean grid has no value at {3 * NY} of" in text and "z 102.5 to 102.5" in text
    assert f"x {x_lo:.1f} to {X0 + CELL[0] * (NX - 0.5):.1f}" in text and err.value.field == "mean.file"
