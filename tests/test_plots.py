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
from geosim.io.plots import (MapSheet, _steps, plot_decision_spread, plot_histogram_reproduction, plot_map,
                             plot_summary_maps, plot_variogram_reproduction, scale_bar_length)
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


def _checked_fields():
    """A grid, a model, a generator, four fields and their variogram reproduction section."""
    g = _grid()
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((300.0, 300.0)))])
    rng = np.random.default_rng(2)
    fields = [rng.normal(size=g.shape) for _ in range(4)]
    checks = RunChecks(g, model, g.coords()[:5], rng.normal(size=5))
    return g, model, rng, fields, checks.summarize([checks(f) for f in fields])["variogram"]


def test_reproduction_and_decision_plots(tmp_path):
    g, model, rng, fields, section = _checked_fields()
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


def _pixels(path):
    with Image.open(path) as im:
        return np.asarray(im.convert("RGBA"))


def _sheet_maps(g):
    """Maps as a run draws them on one sheet: linear values, spread, log values, probabilities."""
    rng = np.random.default_rng(7)
    values = rng.lognormal(size=g.shape)
    return [dict(values=values, title="mean", units="g/t"),
            dict(values=0.3 * values, title="sd", units="g/t", cmap="cividis"),
            dict(values=1e-6 * values, title="K", units="m/s", log=True),
            dict(values=rng.uniform(size=g.shape), title="P(>1)", units="probability (0-1)", cmap="cividis",
                 vmin=0.0, vmax=1.0),
            dict(values=1e5 * values, title="tonnes", units="t")]


# a matplotlib style with ticks inside and a grid: their lines then lie on the map, which a sheet's
# save draws over what it keeps from its first draw, so MapSheet turns them off
INWARD = {"xtick.direction": "in", "ytick.direction": "in", "axes.grid": True}


@pytest.mark.parametrize("mask_half, style", [(False, {}), (True, {}), (False, INWARD)])
def test_a_reused_map_sheet_draws_each_map_as_a_new_one(tmp_path, mask_half, style):
    # one sheet redrawn for every map (saving only what changes over what its first save kept) must
    # give, pixel for pixel, the whole draw of a new figure for that map: nothing of an earlier map
    # (colours, scale, colour bar ticks, title) may stay behind, nothing of the frame be missing
    g = _grid(mask_half)
    with matplotlib.rc_context(style):
        sheet = MapSheet(g)
        for i, kw in enumerate(_sheet_maps(g)):
            sheet.draw(**kw)
            reused = sheet.save(tmp_path / f"reused{i}.png")
            fresh = plot_map(kw.pop("values"), g, tmp_path / f"fresh{i}.png", **kw)
            assert np.array_equal(_pixels(reused), _pixels(fresh)), kw["title"]
            assert _caution(reused) == CAUTION
            with Image.open(reused) as a, Image.open(fresh) as b:
                assert a.info["dpi"] == b.info["dpi"] and a.size == b.size


def test_summary_maps_equal_single_maps(tmp_path):
    # the maps of a run (one sheet) against each band drawn alone by plot_map, log colours included
    g = _grid(True)
    s = summarize_ensemble(np.random.default_rng(6).lognormal(size=(8, *g.shape)), [1.0, 2.5])
    u = "(g/t)"
    alone = {"mean.png": ("mean", f"Mean of realizations {u}", "viridis", None, None, "g/t"),
             "std.png": ("std", f"Standard deviation of realizations {u}", "cividis", None, None, "g/t"),
             "p10.png": ("P10", f"P10: 10% of realizations fall below {u}", "viridis", None, None, "g/t"),
             "p90.png": ("P90", f"P90: 90% of realizations fall below {u}", "viridis", None, None, "g/t"),
             "prob_above_1.png": ("P(>1)", "Probability above 1 g/t", "cividis", 0.0, 1.0, "probability (0-1)"),
             "prob_above_2.5.png": ("P(>2.5)", "Probability above 2.5 g/t", "cividis", 0.0, 1.0,
                                    "probability (0-1)")}
    run = plot_summary_maps(s, g, tmp_path, units="g/t", prefix="run_", log=True)
    assert sorted(p.name for p in run) == sorted(f"run_{name}" for name in alone)
    for p in run:
        band, title, cmap, vmin, vmax, units = alone[p.name[4:]]
        single = plot_map(s[band], g, tmp_path / p.name[4:], title=title, units=units, cmap=cmap, vmin=vmin,
                          vmax=vmax, log=not band.startswith("P(>"))
        assert np.array_equal(_pixels(p), _pixels(single)), p.name


def test_summary_maps_colour_each_band_by_its_own_scale(tmp_path):
    # each band: west half at its lowest value, east half at its highest, so the west half must show the
    # bottom colour of its colour map and the east half the top; a probability band of 0.25 / 0.75 on its
    # fixed 0-1 scale shows cividis(0.25) / cividis(0.75). Counting pixels within 0.02 of a colour (as above).
    g = _grid()
    east = np.arange(g.nx)[None, :].repeat(g.ny, axis=0) >= 30
    bands = {"mean": np.where(east, 5.0, 1.0), "std": np.where(east, 0.9, 0.1),
             "P10": np.where(east, 2.0, 0.5), "P90": np.where(east, 40.0, 8.0), "P(>2)": np.where(east, 0.75, 0.25)}
    paths = {p.name: p for p in plot_summary_maps(bands, g, tmp_path, units="g/t")}
    expected = {"mean.png": ("viridis", 0.0, 1.0), "std.png": ("cividis", 0.0, 1.0),
                "p10.png": ("viridis", 0.0, 1.0), "p90.png": ("viridis", 0.0, 1.0),
                "prob_above_2.png": ("cividis", 0.25, 0.75)}
    for name, (cmap, low, high) in expected.items():
        img = imread(paths[name])[..., :3]
        for level in (low, high):
            colour = np.array(matplotlib.colormaps[cmap](level)[:3])
            # each half of the 60 x 40 cell map is over 20,000 pixels; the colour bar alone gives a few hundred
            assert np.all(np.abs(img - colour) < 0.02, axis=-1).sum() > 10000, (name, level)


def _inside(fig):
    """Every drawn thing of ``fig`` lies inside the image, and no axis labels or title of one axes
    run into another axes or its labels."""
    renderer = fig.canvas.get_renderer()
    box = fig.get_tightbbox(renderer)  # inches
    w, h = fig.get_size_inches()
    assert box.x0 >= -0.01 and box.y0 >= -0.01 and box.x1 <= w + 0.01 and box.y1 <= h + 0.01, (box, w, h)
    labels = [[b for b in (ax.xaxis.get_tightbbox(renderer), ax.yaxis.get_tightbbox(renderer),
                           ax.title.get_window_extent(renderer)) if b is not None and b.width > 0]
              for ax in fig.axes]
    for i, a in enumerate(fig.axes):
        for j, b in enumerate(fig.axes):
            if i != j:
                assert not any(x.overlaps(b.bbox) for x in labels[i]), (i, j)
                assert not any(x.overlaps(y) for x in labels[i] for y in labels[j]), (i, j)


@pytest.mark.parametrize("x0, y0, cell, shape, values, log", [
    (641000.0, 7512000.0, 10.0, (100, 200), 1.0, False),        # UTM south: seven-digit northings, wide
    (612000.0, 10012000.0, 20.0, (80, 40), 1e-6, True),         # eight-digit northings, tall, log colour bar
    (-2500.0, -1200.0, 2.5, (60, 60), -1e5, False),             # local coordinates, negative values
    (0.0, 0.0, 0.5, (30, 300), 123456.0, False)])               # a long thin strip, six-digit values
def test_map_layout_keeps_every_label_inside(tmp_path, x0, y0, cell, shape, values, log):
    g = geosim.Grid(x0, y0, (cell, cell), shape)
    field = values * np.random.default_rng(3).lognormal(size=g.shape) if log else \
        values * np.random.default_rng(3).uniform(0.5, 1.5, size=g.shape)
    fig = plot_map(field, g, title="a map with a title", units="some units (per m\u00b3)", log=log)
    fig.canvas.draw()
    _inside(fig)


def test_panel_layout_keeps_every_label_inside():
    g, model, rng, fields, section = _checked_fields()
    grades = [np.exp(f) for f in fields]
    figs = [plot_variogram_reproduction(section, model=model),
            plot_histogram_reproduction(np.exp(3 * rng.normal(size=30)), [np.exp(3 * f.ravel()) for f in fields],
                                        units="mg/L"),
            plot_decision_spread([grade_tonnage(1e4 * x, g, [1e2, 1e3, 1e4, 3e4], density=2.6, thickness=3.0)
                                  for x in grades], units="g/t"),
            plot_decision_spread([fraction_above(f, g, [-1.0, 0.0, 1.0]) for f in fields])]
    for fig in figs:
        fig.canvas.draw()
        _inside(fig)


def _realization_lines(ax):
    (lines,) = [c for c in ax.collections if c.get_label() == "realizations"]
    return lines.get_segments()


def test_every_realization_is_one_line_of_the_spread():
    g = _grid()
    rng = np.random.default_rng(4)
    fields = [rng.normal(size=g.shape) for _ in range(5)]
    figures = [fraction_above(f, g, [-1.0, 0.0, 1.0]) for f in fields]
    fig = plot_decision_spread(figures)
    for ax, q in zip(fig.axes, ["fraction_above", "area"]):
        got = _realization_lines(ax)
        assert len(got) == 5
        for line, f in zip(got, figures):
            np.testing.assert_array_equal(line, np.column_stack([f["threshold"], f[q]]))


def test_every_realization_is_one_cumulative_curve():
    # matplotlib's own post-step conversion of each realization's sorted values is the reference
    from matplotlib.cbook import pts_to_poststep
    rng = np.random.default_rng(4)
    samples = [rng.normal(size=50) for _ in range(5)]
    fig = plot_histogram_reproduction(rng.normal(size=30), samples)
    got = _realization_lines(fig.axes[0])
    assert len(got) == 5
    for line, r in zip(got, samples):
        x = np.sort(r)
        np.testing.assert_array_equal(line, np.column_stack(pts_to_poststep(x, np.arange(1, 51) / 50)))


def test_step_lines_match_matplotlib_post_steps():
    # the realizations' cumulative curves are drawn as step vertices of our own; matplotlib's own
    # conversion for ``where="post"`` is the reference
    from matplotlib.cbook import pts_to_poststep
    x, f = np.array([0.5, 1.0, 2.5, 4.0]), np.array([0.25, 0.5, 0.75, 1.0])
    np.testing.assert_array_equal(_steps(x, f), np.column_stack(pts_to_poststep(x, f)))
    assert _steps(x[:1], f[:1]).shape == (1, 2) and _steps(x[:0], f[:0]).shape == (0, 2)


def test_a_map_takes_the_colour_map_it_is_given(tmp_path):
    # west half 0, east half 1: cividis' two ends, each over 10,000 pixels (counted within 0.02 as above)
    g = _grid()
    east = np.arange(g.nx)[None, :].repeat(g.ny, axis=0) >= 30
    img = imread(plot_map(east.astype(float), g, tmp_path / "c.png", title="c", cmap="cividis"))[..., :3]
    for level in (0.0, 1.0):
        colour = np.array(matplotlib.colormaps["cividis"](level)[:3])
        assert np.all(np.abs(img - colour) < 0.02, axis=-1).sum() > 10000, level
