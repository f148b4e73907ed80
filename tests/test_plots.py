"""PNG figures: written atomically, carrying the caution, honouring the domain mask."""
import matplotlib
import numpy as np
import pytest
from matplotlib.image import imread
from PIL import Image
from pyproj import CRS

import geosim
from geosim.cautions import CAUTION
from geosim.errors import InputError
from geosim.io.plots import (plot_decision_spread, plot_histogram_reproduction, plot_map, plot_summary_maps,
                             plot_variogram_reproduction, scale_bar_length)
from geosim.summaries import fraction_above, grade_tonnage, summarize_ensemble
from geosim.validation import RunChecks


def _caution(path):
    with Image.open(path) as im:
        assert im.format == "PNG"
        return im.text.get("Description")


@pytest.mark.parametrize("width, length, label", [(3750.0, 500.0, "500 m"), (12000.0, 2000.0, "2 km"),
                                                  (99.0, 10.0, "10 m"), (1000.0, 200.0, "200 m"),
                                                  (26000.0, 5000.0, "5 km")])
def test_scale_bar_is_a_round_length_near_a_fifth(width, length, label):
    assert scale_bar_length(width) == (length, label)


def _grid(mask_half=False):
    g = geosim.Grid(612000.0, 4410000.0, (20.0, 20.0), (40, 60), crs=CRS.from_epsg(32611))
    if mask_half:
        m = np.zeros(g.shape, bool)
        m[:, 30:] = True
        g = g.with_mask(m)
    return g


def test_map_png_carries_caution_and_is_not_overwritten(tmp_path):
    g = _grid()
    p = plot_map(np.random.default_rng(0).normal(size=g.shape), g, tmp_path / "m.png", title="t", units="g/t")
    assert _caution(p) == CAUTION
    before = p.read_bytes()
    with pytest.raises(InputError, match="overwrite"):
        plot_map(np.zeros(g.shape), g, p, title="t")
    assert p.read_bytes() == before
    assert [q.name for q in tmp_path.iterdir()] == ["m.png"]


def test_cells_outside_the_domain_are_not_painted(tmp_path):
    # a constant field paints one colour; masking half the grid must remove about half of those pixels
    counts = []
    for half in (False, True):
        g = _grid(half)
        p = plot_map(np.full(g.shape, 3.0), g, tmp_path / f"m{half}.png", title="t", vmin=0.0, vmax=6.0)
        img = imread(p)[..., :3]
        colour = np.array(matplotlib.colormaps["viridis"](0.5)[:3])
        counts.append(int(np.all(np.abs(img - colour) < 0.02, axis=-1).sum()))
    assert counts[0] > 10000
    assert 0.4 < counts[1] / counts[0] < 0.6


def test_log_colours_spread_a_log_normal_field(tmp_path):
    # conductivity-like field: 1e-7 on the west half, 1e-6 on the east half and one cell of 1e-3.
    # On a linear scale both halves sit at the bottom colour; on a log scale (1e-7 to 1e-3,
    # four decades) the east half sits a quarter of the way up the colour map.
    g = _grid()
    k = np.where(np.arange(g.nx) < 30, 1e-7, 1e-6)[None, :].repeat(g.ny, axis=0)
    k[0, 0] = 1e-3
    quarter = np.array(matplotlib.colormaps["viridis"](0.25)[:3])
    counts = {}
    for log in (False, True):
        img = imread(plot_map(k, g, tmp_path / f"k{log}.png", title="K", units="m/s", log=log))[..., :3]
        counts[log] = int(np.all(np.abs(img - quarter) < 0.02, axis=-1).sum())
    # the east half covers tens of thousands of pixels; on the linear map only the colour bar shows it
    assert counts[False] < 1000 < 20000 < counts[True]


def test_summary_maps_one_file_per_band(tmp_path):
    g = _grid()
    rng = np.random.default_rng(1)
    s = summarize_ensemble(rng.lognormal(size=(8, *g.shape)), [2.5])
    paths = plot_summary_maps(s, g, tmp_path, units="g/t", prefix="au_")
    assert sorted(p.name for p in paths) == ["au_mean.png", "au_p10.png", "au_p90.png", "au_prob_above_2.5.png",
                                             "au_std.png"]
    assert all(_caution(p) == CAUTION for p in paths)


def test_reproduction_and_decision_plots(tmp_path):
    g = _grid()
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((300.0, 300.0)))])
    rng = np.random.default_rng(2)
    fields = [rng.normal(size=g.shape) for _ in range(4)]
    checks = RunChecks(g, model, g.coords()[:5], rng.normal(size=5))
    section = checks.summarize([checks(f) for f in fields])["variogram"]
    p1 = plot_variogram_reproduction(section, tmp_path / "v.png", model=model)
    p2 = plot_histogram_reproduction(np.exp(rng.normal(size=30)), [np.exp(f.ravel()) for f in fields],
                                     tmp_path / "h.png", weights=rng.uniform(0.5, 1.5, 30), units="g/t")
    grades = [np.exp(f) for f in fields]
    # cut-off 50 leaves nothing above in most realizations: mean grade is NaN there and must not break the plot
    figs = [grade_tonnage(x, g, [0.0, 1.0, 2.0, 50.0], density=2.6, thickness=3.0) for x in grades]
    p3 = plot_decision_spread(figs, tmp_path / "gt.png", units="g/t")
    p4 = plot_decision_spread([fraction_above(f, g, [-1.0, 0.0, 1.0]) for f in fields], tmp_path / "k.png")
    for p in (p1, p2, p3, p4):
        assert _caution(p) == CAUTION
        assert imread(p).shape[0] > 300
