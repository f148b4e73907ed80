"""Plots in notebooks and scripts: no path draws a figure, ``ax`` draws into the caller's axes."""
import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

import geosim
from geosim.io.crossval import plot_crossval
from geosim.io.plots import plot_decision_spread, plot_histogram_reproduction, plot_map
from geosim.kriging import cross_validate
from geosim.summaries import fraction_above
from geosim.variogram import experimental_variogram, plot_variogram, variogram_map
from geosim.variogram.plots import plot_variogram_map


def _caller_axes(n=1):
    fig = Figure(figsize=(4.0 * n, 3.0))
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, n, squeeze=False)[0]
    return fig, (axes[0] if n == 1 else list(axes))


@pytest.fixture(scope="module")
def sample():
    rng = np.random.default_rng(5)
    xy = rng.uniform(0.0, 500.0, size=(60, 2))
    z = np.sin(xy[:, 0] / 90.0) + 0.3 * rng.normal(size=60)
    grid = geosim.Grid(0.0, 0.0, (25.0, 25.0), (20, 20))
    fields = [rng.normal(size=grid.shape) for _ in range(3)]
    return xy, z, grid, fields


def test_without_a_path_every_plot_returns_a_figure(sample):
    xy, z, grid, fields = sample
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((200.0, 200.0)))])
    drawn = [plot_map(fields[0], grid, title="a map"),
             plot_histogram_reproduction(z, [f.ravel() for f in fields]),
             plot_decision_spread([fraction_above(f, grid, [-1.0, 0.0, 1.0]) for f in fields]),
             plot_variogram(experimental_variogram(xy, z, lag=40.0, nlags=8), model),
             plot_variogram_map(variogram_map(xy, z, cell=50.0, ncells=5)),
             plot_crossval(cross_validate(xy, z, model))]
    for fig in drawn:
        assert isinstance(fig, Figure) and fig.axes
        assert len(fig.canvas.print_to_buffer()[0]) > 0  # it renders, as a notebook would show it


def test_ax_draws_into_the_caller_s_figure(sample, tmp_path):
    xy, z, grid, fields = sample
    fig, ax = _caller_axes()
    assert plot_map(fields[0], grid, title="mine", ax=ax) is fig
    assert ax.images and ax.get_title().startswith("mine")
    fig, ax = _caller_axes()
    assert plot_variogram(experimental_variogram(xy, z, lag=40.0, nlags=8), ax=ax) is fig
    assert ax.collections  # the experimental points
    fig, axes = _caller_axes(3)
    assert plot_crossval(cross_validate(xy, z, geosim.Spherical(1.0, geosim.Anisotropy((200.0, 200.0)))),
                         ax=axes) is fig
    assert all(a.has_data() for a in axes)
    # with a path too, the caller's figure is written as it is (no geosim footnote added)
    fig, ax = _caller_axes()
    out = plot_map(fields[1], grid, tmp_path / "m.png", title="m", ax=ax)
    assert out == tmp_path / "m.png" and out.read_bytes()[:4] == b"\x89PNG"
    assert not [t for t in fig.texts if "caution" in t.get_text()]


def test_wrong_number_of_axes_is_refused(sample):
    _, _, grid, fields = sample
    _, axes = _caller_axes(2)
    with pytest.raises(ValueError, match="draws 3 panels; give 3 axes, got 2"):
        plot_decision_spread([{"threshold": np.array([0.0]), "fraction_above": np.array([0.5]),
                               "area": np.array([1.0]), "extra": np.array([2.0])}] * 2, ax=axes)
