"""PNG figures of a run: summary maps, reproduction checks and decision-figure spread.

Figures use matplotlib's object API (``Figure`` with the Agg canvas, never the
pyplot state machine), perceptually uniform colour maps that stay readable
with colour-vision deficiencies (viridis for values, cividis for spread and
probabilities), map coordinates in metres with the CRS name, colour bars with
units and a scale bar.  Cells outside the domain are transparent.  Every PNG
carries :data:`geosim.cautions.CAUTION` in its ``Description`` text chunk and
is written atomically (:func:`geosim.io.atomic.atomic_output`).
"""
from __future__ import annotations

import math
import os
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from ..cautions import CAUTION
from .atomic import atomic_output, check_writable

__all__ = ["scale_bar_length", "MapSheet", "plot_map", "plot_summary_maps", "plot_histogram_reproduction",
           "plot_variogram_reproduction", "plot_decision_spread", "plot_support_comparison"]

VALUE_CMAP = "viridis"
SPREAD_CMAP = "cividis"
FOOTNOTE = "Statistical model from sparse samples; read the caution in the run report before use."
DPI = 110
PNG_COMPRESSION = 1  # zlib level of the PNGs: a tenth of the encoding time of the default 6, files ~1.3x larger
_FOOT_IN = 0.25  # inches below the x axis labels for the footnote


def _figure(size=(7.0, 6.0), layout: str | None = "constrained"):
    """A figure on the Agg canvas; ``layout=None`` for geosim's own figures, whose axes are placed
    once (:func:`_place_row`, :class:`MapSheet`) instead of by a layout solve at every draw."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=size, dpi=DPI, layout=layout)
    FigureCanvasAgg(fig)
    return fig


def axes_for(ax, size, count: int = 1, *, layout: str | None = "constrained"):
    """The figure and axes to draw on: the caller's ``ax`` (one Axes, or a sequence of
    ``count``), or a new figure of ``size`` inches with ``count`` panels in a row."""
    if ax is None:
        fig = _figure(size, layout)
        return fig, list(fig.subplots(1, count, squeeze=False)[0])
    axes = [ax] if count == 1 and not isinstance(ax, (list, tuple, np.ndarray)) else list(np.ravel(ax))
    if len(axes) != count:
        raise ValueError(f"this plot draws {count} panels; give {count} axes, got {len(axes)}")
    return axes[0].figure, axes


def _extent_in(fig, texts) -> tuple[float, float]:
    """Widest and tallest of ``texts`` (matplotlib Text objects) in inches, 0 for none or empty ones."""
    renderer = fig.canvas.get_renderer()
    boxes = [t.get_window_extent(renderer) for t in texts if t.get_visible() and t.get_text()]
    return (max((b.width for b in boxes), default=0.0) / fig.dpi,
            max((b.height for b in boxes), default=0.0) / fig.dpi)


def _margin(axis) -> float:
    """Inches beside the axes taken by ``axis``'s tick labels, ticks and label (measured, not solved)."""
    fig = axis.figure
    w, h = _extent_in(fig, axis.get_ticklabels())
    lw, lh = _extent_in(fig, [axis.label])
    ticks, label = (w, lw) if axis.axis_name == "y" else (h, lh)  # across the axis; the y label is rotated
    tick = axis.get_major_ticks()[0]
    pad = (tick.get_pad() + tick.get_tick_padding() if ticks else 0.0) + (axis.labelpad if label else 0.0)
    return ticks + label + pad / 72.0 + 0.06


def _place_row(fig, axes, *, top: float, right: float = 0.25) -> None:
    """Place a row of equally wide panels once, margins in inches: each panel's left margin
    fits its own y tick labels and label, the bottom one the x labels and the footnote, so
    nothing is cut and no layout is solved at draw time.

    Call after the panels are drawn and scaled (the tick labels are measured).
    """
    width, height = fig.get_size_inches()
    lefts = [_margin(ax.yaxis) for ax in axes]
    bottom = max(_margin(ax.xaxis) for ax in axes) + _FOOT_IN
    panel = (width - right - sum(lefts) - 0.25 * (len(axes) - 1)) / len(axes)
    x = 0.0
    for ax, left in zip(axes, lefts):
        x += left
        ax.set_position([x / width, bottom / height, panel / width, (height - top - bottom) / height])
        x += panel + 0.25


def finish(fig, path, overwrite: bool, own: bool):
    """Write the PNG when a path is given (returns the path), else return the figure to show.

    The footnote goes only on figures geosim made itself (``own``), not into a
    caller's figure.
    """
    if path is None:
        return fig
    return _save(fig, path, overwrite, footnote=own)


def _footnote(fig) -> None:
    fig.text(0.01, 0.008, FOOTNOTE, fontsize=6.5, color="0.35", ha="left", va="bottom")


def _png_options() -> dict:
    """The PNG writing options of every figure: the caution in the ``Description`` chunk, zlib level."""
    import geosim
    return {"metadata": {"Description": CAUTION, "Software": f"geosim {geosim.__version__}"},
            "pil_kwargs": {"compress_level": PNG_COMPRESSION}}


def _save(fig, path, overwrite: bool, footnote: bool = True) -> Path:
    """Write ``fig`` as a PNG (one draw: no layout engine on geosim's own figures), the caution in
    its ``Description`` chunk; ``footnote`` adds the footnote (room for it below the axes)."""
    if footnote:
        engine = fig.get_layout_engine()
        if engine is not None:
            engine.set(rect=(0.0, 0.035, 1.0, 0.965))  # room for the footnote below the axes
        _footnote(fig)
    with atomic_output(path, overwrite) as tmp:
        fig.savefig(tmp, format="png", dpi="figure", **_png_options())
    return Path(path)


def scale_bar_length(width: float) -> tuple[float, str]:
    """A round scale-bar length (1, 2 or 5 x 10^k metres) about a fifth of ``width``, and its label.

    Examples
    --------
    >>> import geosim.io.plots
    >>> geosim.io.plots.scale_bar_length(3750.0)
    (500.0, '500 m')
    >>> geosim.io.plots.scale_bar_length(12000.0)
    (2000.0, '2 km')
    """
    target = width / 5.0
    k = math.floor(math.log10(target))
    length = max(m * 10.0 ** k for m in (1, 2, 5) if m * 10.0 ** k <= target)
    label = f"{length / 1000:g} km" if length >= 1000 else f"{length:g} m"
    return float(length), label


def _scale_bar(ax, grid) -> None:
    from matplotlib import patheffects
    from matplotlib.patches import Rectangle
    width = grid.xmax - grid.xmin
    height = grid.ymax - grid.ymin
    length, label = scale_bar_length(width)
    x0 = grid.xmin + 0.04 * width
    y0 = grid.ymin + 0.04 * height
    bar_h = 0.012 * max(height, width)
    halo = [patheffects.withStroke(linewidth=3, foreground="white")]
    for i in range(2):  # two halves, black and white, as on a printed map
        ax.add_patch(Rectangle((x0 + i * length / 2, y0), length / 2, bar_h, facecolor="black" if i == 0
                               else "white", edgecolor="black", linewidth=0.8, zorder=5))
    ax.text(x0 + length / 2, y0 + 1.6 * bar_h, label, ha="center", va="bottom", fontsize=8, zorder=6,
            path_effects=halo)


def _map_values(values, grid, cmap: str, vmin, vmax, log: bool):
    """The masked array, colour map (transparent outside the domain) and norm of one map."""
    import matplotlib
    from matplotlib.colors import LogNorm, Normalize
    a = np.where(grid.mask, np.asarray(values, dtype=float), np.nan)
    if log:
        a = np.where(a > 0, a, np.nan)
    a = np.ma.masked_invalid(a)
    norm = LogNorm(vmin=vmin, vmax=vmax) if log else Normalize(vmin=vmin, vmax=vmax)
    if a.count():  # an all-masked map keeps the norm unscaled, as imshow does
        norm.autoscale_None(a)
    return a, matplotlib.colormaps[cmap].with_extremes(bad=(0.0, 0.0, 0.0, 0.0)), norm


def _map_axes(ax, grid) -> None:
    """Labels, ticks and scale bar of a map axes: what all maps of one grid share."""
    ax.set_aspect("equal")
    ax.ticklabel_format(useOffset=False, style="plain")
    # ticks outside and no grid whatever the matplotlib style: nothing of the axes but the frame and
    # the scale bar lies on the map, which MapSheet.save draws over the rest
    ax.tick_params(axis="both", labelsize=8, direction="out")
    ax.grid(False)
    ax.set_xlabel("Easting (m)")
    ax.set_ylabel("Northing (m)")
    _scale_bar(ax, grid)


def _map_title(title: str, grid) -> str:
    crs = getattr(grid.crs, "name", None) or "local coordinates, CRS not set"
    return f"{title}\n{crs}"


class MapSheet:
    """One map figure of a grid, laid out once and redrawn for each map of that grid.

    The layout is fixed when the sheet is made, from what all maps of the grid share
    (its extent, the easting and northing tick labels); the colour bar side keeps
    room for any tick labels and units.  :meth:`draw` swaps in the values, colours,
    title and colour bar of one map, so the maps of a run cost one draw each, not
    a new figure and a layout solve each; the image equals a new sheet's.

    Parameters
    ----------
    grid : geosim.Grid
        2-D grid (one level of a 3-D grid).

    Examples
    --------
    >>> import pathlib, tempfile, numpy as np, geosim
    >>> from geosim.io.plots import MapSheet
    >>> g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (20, 30))
    >>> sheet = MapSheet(g)
    >>> fig = sheet.draw(np.arange(600.0).reshape(g.shape), title="distance", units="m")
    >>> p = sheet.save(pathlib.Path(tempfile.mkdtemp()) / "d.png")
    >>> p.name
    'd.png'
    """

    _RIGHT_IN = 1.35  # colour bar, its tick labels (up to ~8 characters) and its label
    _TOP_IN = 0.55    # two title lines

    def __init__(self, grid):
        self.grid = grid
        ratio = (grid.ymax - grid.ymin) / (grid.xmax - grid.xmin)
        width, height = 7.0, float(np.clip(5.2 * ratio + 1.6, 3.0, 10.0))
        self.figure = fig = _figure((width, height), layout=None)
        self.ax = ax = fig.add_axes((0.0, 0.0, 1.0, 1.0))
        self.image = ax.imshow(np.ma.masked_all(grid.shape), extent=(grid.xmin, grid.xmax, grid.ymin, grid.ymax),
                               origin="upper", interpolation="nearest")
        _map_axes(ax, grid)
        # the tick labels depend on the axes' size: place the map, measure its labels, place it again
        left, bottom, y0, w, h = self._place(width, height, ratio, 1.0, 0.8)
        for _ in range(2):
            left, bottom, y0, w, h = self._place(width, height, ratio, _margin(ax.yaxis),
                                                 _margin(ax.xaxis) + _FOOT_IN)
        # a colour bar 0.9 of the map's height, a thirtieth as wide, beside it
        bar = fig.add_axes(((left + w + 0.15) / width, (y0 + 0.05 * h) / height, 0.03 * h / width,
                            0.9 * h / height))
        self.bar = fig.colorbar(self.image, cax=bar)
        _footnote(fig)
        self._shared = None  # the pixels all maps share, kept by the first save

    def _layers(self) -> list:
        """What :meth:`save` draws for each map, in drawing order: the map, the frame and scale
        bar over it (by z-order, as the axes draws them), the title and the colour bar."""
        over = sorted([*self.ax.spines.values(), *self.ax.patches, *self.ax.texts], key=lambda a: a.get_zorder())
        return [self.image, *over, self.ax.title, self.bar.ax]

    def _place(self, width, height, ratio, left, bottom):
        """Put the map axes at ``left``, ``bottom`` inches, as large as fits at equal scale."""
        room_w, room_h = width - left - self._RIGHT_IN, height - bottom - self._TOP_IN
        w = min(room_w, room_h / ratio)
        h = w * ratio
        y0 = bottom + (room_h - h) / 2
        self.ax.set_position((left / width, y0 / height, w / width, h / height))
        return left, bottom, y0, w, h

    def draw(self, values: np.ndarray, *, title: str, units: str = "", cmap: str = VALUE_CMAP,
             vmin: float | None = None, vmax: float | None = None, log: bool = False):
        """Put one map on the sheet (arguments as :func:`plot_map`); returns the figure."""
        a, colours, norm = _map_values(values, self.grid, cmap, vmin, vmax, log)
        self.image.set_data(a)
        self.image.set_cmap(colours)
        self.image.set_norm(norm)  # the colour bar follows: new ticks and scale
        self.ax.set_title(_map_title(title, self.grid), fontsize=10)
        self.bar.set_label(units or "no units")
        return self.figure

    def save(self, path: str | os.PathLike, overwrite: bool = False) -> Path:
        """Write the sheet as it is drawn to ``path`` (PNG, atomically, caution chunk).

        The first save draws and keeps the pixels all maps of the sheet share (axes, tick
        labels, axis labels, footnote); every save draws only :meth:`_layers` over them,
        which gives the image a whole draw gives, in about half the time.
        """
        from matplotlib.image import imsave
        canvas = self.figure.canvas
        layers = self._layers()
        if self._shared is None:
            title = self.ax.title.get_text()
            hidden = [a for a in layers if a is not self.ax.title]
            for a in hidden:
                a.set_visible(False)
            self.ax.title.set_text("")  # (a hidden title would be moved up as if it had no height)
            try:
                canvas.draw()
            finally:
                for a in hidden:
                    a.set_visible(True)
                self.ax.title.set_text(title)
            self._shared = canvas.copy_from_bbox(self.figure.bbox)
        canvas.restore_region(self._shared)
        renderer = canvas.get_renderer()
        for a in layers:
            a.draw(renderer)
        with atomic_output(path, overwrite) as tmp:
            imsave(tmp, canvas.buffer_rgba(), format="png", dpi=self.figure.dpi, **_png_options())
        return Path(path)


def plot_map(values: np.ndarray, grid, path: str | os.PathLike | None = None, *, title: str, units: str = "",
             cmap: str = VALUE_CMAP, vmin: float | None = None, vmax: float | None = None,
             log: bool = False, overwrite: bool = False, ax=None):
    """A north-up map of one 2-D array on ``grid`` (one level of a 3-D grid: use its level grid).

    Every plot function of geosim works the same way: with ``path`` it writes a PNG
    (atomically, the caution in its ``Description`` chunk) and returns the path;
    without it, it returns the :class:`matplotlib.figure.Figure`, which a notebook
    shows.  ``ax`` (a matplotlib Axes, or a sequence of them for plots of several
    panels) draws into the caller's figure instead of a new one.

    With ``log=True`` the colours follow the logarithm of the values (for log-normal
    variables such as hydraulic conductivity, whose few high values would otherwise
    leave the rest of the map in one colour); values <= 0 are left transparent.
    Several maps of one grid are drawn faster on one :class:`MapSheet`.

    Examples
    --------
    >>> import pathlib, tempfile, numpy as np, geosim
    >>> from geosim.io.plots import plot_map
    >>> g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (20, 30))
    >>> p = plot_map(np.random.default_rng(0).normal(size=g.shape), g,
    ...              pathlib.Path(tempfile.mkdtemp()) / "map.png", title="test", units="g/t")
    >>> p.read_bytes()[:8] == b"\\x89PNG\\r\\n\\x1a\\n"
    True
    >>> type(plot_map(np.ones(g.shape), g, title="in a notebook")).__name__
    'Figure'
    """
    if path is not None:
        check_writable(path, overwrite)
    if ax is None:
        sheet = MapSheet(grid)
        fig = sheet.draw(values, title=title, units=units, cmap=cmap, vmin=vmin, vmax=vmax, log=log)
        return fig if path is None else _save(fig, path, overwrite, footnote=False)
    a, colours, norm = _map_values(values, grid, cmap, vmin, vmax, log)
    im = ax.imshow(a, extent=(grid.xmin, grid.xmax, grid.ymin, grid.ymax), origin="upper", cmap=colours,
                   norm=norm, interpolation="nearest")
    _map_axes(ax, grid)
    ax.set_title(_map_title(title, grid), fontsize=10)
    bar = ax.figure.colorbar(im, ax=ax, shrink=0.9, aspect=30)
    bar.set_label(units or "no units")
    return finish(ax.figure, path, overwrite, own=False)


def plot_summary_maps(summary: Mapping[str, np.ndarray], grid, folder: str | os.PathLike, *,
                      units: str = "", prefix: str = "", log: bool = False,
                      overwrite: bool = False) -> list[Path]:
    """Maps of mean, standard deviation, P10, P90 and every exceedance probability.

    Parameters
    ----------
    summary : mapping
        Band name -> 2-D array, as returned by
        :func:`geosim.summaries.summarize_ensemble` (or read from the summary
        raster by band description order).
    grid : geosim.Grid
        2-D grid (one level).
    folder : path
        Where the PNGs go: ``<prefix>mean.png``, ``std.png``, ``p10.png``,
        ``p90.png`` and ``prob_above_<cutoff>.png``.

    Each value map spans its own range (skewed grades would leave a shared
    scale dark on the low maps), on a logarithmic colour scale with ``log=True``;
    probabilities span 0 to 1.  All are drawn on one :class:`MapSheet`.
    """
    folder = Path(folder)
    u = f" ({units})" if units else ""
    jobs = [("mean", "mean.png", f"Mean of realizations{u}", VALUE_CMAP, None, None, units),
            ("std", "std.png", f"Standard deviation of realizations{u}", SPREAD_CMAP, None, None, units),
            ("P10", "p10.png", f"P10: 10% of realizations fall below{u}", VALUE_CMAP, None, None, units),
            ("P90", "p90.png", f"P90: 90% of realizations fall below{u}", VALUE_CMAP, None, None, units)]
    for name in summary:
        if name.startswith("P(>"):
            cut = name[3:-1]
            jobs.append((name, f"prob_above_{cut}.png", f"Probability above {cut}{(' ' + units) if units else ''}",
                         SPREAD_CMAP, 0.0, 1.0, "probability (0-1)"))
    jobs = [job for job in jobs if job[0] in summary]
    for job in jobs:
        check_writable(folder / f"{prefix}{job[1]}", overwrite)
    sheet = MapSheet(grid) if jobs else None
    out = []
    for band, fname, title, cmap, vmin, vmax, unit in jobs:
        sheet.draw(summary[band], title=title, units=unit, cmap=cmap, vmin=vmin, vmax=vmax,
                   log=log and not band.startswith("P(>"))
        out.append(sheet.save(folder / f"{prefix}{fname}", overwrite))
    return out


def _lines(ax, lines: Sequence[np.ndarray], *, color, alpha: float, linewidth: float, label: str) -> None:
    """Many thin lines of one style (one per realization), drawn as one collection: one artist
    to lay out and draw instead of one per line.  ``lines`` holds (n, 2) arrays of x, y;
    NaN breaks a line, as in ``ax.plot``."""
    from matplotlib.collections import LineCollection
    ax.add_collection(LineCollection(lines, colors=[color], alpha=alpha, linewidths=linewidth, label=label))
    ax.autoscale_view()


def _steps(x: np.ndarray, f: np.ndarray) -> np.ndarray:
    """The vertices of a step line that holds each ``f[i]`` from ``x[i]`` to ``x[i + 1]`` (``where="post"``)."""
    xy = np.empty((max(2 * x.size - 1, 0), 2))
    xy[0::2, 0], xy[0::2, 1] = x, f
    xy[1::2, 0], xy[1::2, 1] = x[1:], f[:-1]
    return xy


def _ecdf(values, weights=None):
    v = np.asarray(values, dtype=float).ravel()
    w = np.ones_like(v) if weights is None else np.asarray(weights, dtype=float).ravel()
    keep = ~np.isnan(v)
    v, w = v[keep], w[keep]
    order = np.argsort(v, kind="stable")
    return v[order], np.cumsum(w[order]) / w.sum()


def plot_histogram_reproduction(data: np.ndarray, realizations: Sequence[np.ndarray],
                                path: str | os.PathLike | None = None, *, weights: np.ndarray | None = None,
                                units: str = "", log: bool | None = None, overwrite: bool = False, ax=None):
    """Cumulative distributions of the (declustered) data and of each realization.

    ``realizations`` holds one array of values per realization (a subsample is
    fine).  ``log=None`` picks a log axis when all values (data and
    realizations) are positive and span more than two orders of magnitude.
    """
    import matplotlib
    if path is not None:
        check_writable(path, overwrite)
    d = np.asarray(data, dtype=float)
    if log is None:
        pooled = np.concatenate([d.ravel()] + [np.asarray(r, dtype=float).ravel() for r in realizations])
        finite = pooled[np.isfinite(pooled)]
        log = bool(finite.size and finite.min() > 0 and finite.max() / finite.min() > 100.0)
    own = ax is None
    fig, (ax,) = axes_for(ax, (7.0, 4.8), layout=None if own else "constrained")
    colour = matplotlib.colormaps[VALUE_CMAP](0.55)
    _lines(ax, [_steps(*_ecdf(r)) for r in realizations], color=colour, alpha=0.35, linewidth=0.8,
           label="realizations")
    x, f = _ecdf(d, weights)
    ax.step(x, f, where="post", color="black", linewidth=2.0,
            label="data" + (" (declustering weights)" if weights is not None else ""))
    if log:
        ax.set_xscale("log")
    ax.set_xlabel(f"value ({units})" if units else "value")
    ax.set_ylabel("cumulative proportion")
    ax.set_ylim(0.0, 1.0)
    ax.set_title("Histogram reproduction", fontsize=10)
    ax.grid(alpha=0.3)
    ax.legend(loc="lower right", fontsize=8)
    if own:
        _place_row(fig, [ax], top=0.4)
    return finish(fig, path, overwrite, own)


def plot_variogram_reproduction(section: Mapping, path: str | os.PathLike | None = None, *, model=None,
                                ndim: int = 2, overwrite: bool = False, ax=None):
    """Realization semivariograms against the model, one panel per grid axis.

    ``section`` is the ``"variogram"`` part of
    :meth:`geosim.validation.RunChecks.summarize`.  With ``model`` the model is
    drawn as a smooth curve, otherwise through its values at the lags.
    """
    import matplotlib
    if path is not None:
        check_writable(path, overwrite)
    directions = section["directions"]
    own = ax is None
    fig, axes = axes_for(ax, (4.0 * len(directions), 4.2), len(directions), layout=None if own else "constrained")
    colour = matplotlib.colormaps[VALUE_CMAP](0.55)
    unit = {"east": 0, "north": 1, "up": 2}
    for ax, (name, d) in zip(axes, directions.items()):
        lags = np.asarray(d["lag_m"], dtype=float)
        _lines(ax, [np.column_stack([lags, np.asarray(g, dtype=float)]) for g in d["per_realization"]],
               color=colour, alpha=0.35, linewidth=0.8, label="realizations")
        ax.plot(lags, d["realization_mean"], "o", color=colour, markeredgecolor="black",
                label="mean of realizations")
        if model is not None:
            h = np.linspace(0.0, lags.max() * 1.05, 200)
            vec = np.zeros((h.size, ndim))
            vec[:, unit[name]] = h
            ax.plot(h, model.semivariance(vec), color="black", linewidth=1.8, label="model")
        else:
            ax.plot(lags, d["model"], color="black", linewidth=1.8, label="model")
        ax.fill_between(lags, np.asarray(d["lower"], dtype=float), np.asarray(d["upper"], dtype=float),
                        color="0.6", alpha=0.25, linewidth=0, label="tolerance (mean of realizations)")
        for lag, flag, y in zip(lags, d["flags"], d["realization_mean"]):
            if flag != "pass":
                ax.annotate("warn", (lag, y), textcoords="offset points", xytext=(0, 8), ha="center",
                            fontsize=7, color="black")
        ax.set_title(f"{name} (grid axis)", fontsize=10)
        ax.set_xlabel("lag (m)")
        ax.set_xlim(left=0.0)
        ax.set_ylim(bottom=0.0)
        ax.grid(alpha=0.3)
    axes[0].set_ylabel("semivariance (normal scores)")
    axes[0].legend(loc="lower right", fontsize=7)
    if own:
        fig.suptitle(f"Variogram reproduction: {section['flag']}", fontsize=11)
        _place_row(fig, axes, top=0.7)
    return finish(fig, path, overwrite, own)


_LABELS = {"tonnage": "tonnage (t)", "metal": "metal (grade units x t)", "fraction_above": "fraction above",
           "fraction_below": "fraction below", "area": "area (m\u00b2)", "volume": "volume (m\u00b3)"}


def _decision_axes(ax, key: str, q: str, x: np.ndarray, units: str) -> None:
    """Labels, scale and grid of one decision-figure panel (figure ``q`` against ``key``)."""
    label = _LABELS.get(q, q.replace("_", " "))
    if q == "mean_grade":
        label = f"mean grade above cut-off ({units})" if units else "mean grade above cut-off"
    ax.set_ylabel(label)
    ax.set_xlabel(f"{key.replace('_', ' ')} ({units})" if units else key.replace("_", " "))
    if np.all(x > 0) and x.max() >= 100.0 * x.min():  # cut-offs spanning decades (conductivity)
        ax.set_xscale("log")
    ax.ticklabel_format(axis="y", style="sci", scilimits=(-3, 4))
    ax.grid(alpha=0.3)


def plot_decision_spread(figures: Sequence[Mapping[str, np.ndarray]], path: str | os.PathLike | None = None, *,
                         units: str = "", overwrite: bool = False, ax=None):
    """Each decision figure against cut-off: every realization, the P10-P90 band and P50.

    ``figures`` is the list of per-realization dicts of
    :func:`geosim.summaries.grade_tonnage` or
    :func:`geosim.summaries.fraction_above` / :func:`~geosim.summaries.fraction_below`.
    """
    import matplotlib

    from ..summaries import QUANTILE_METHOD
    if path is not None:
        check_writable(path, overwrite)
    if not figures:
        raise ValueError("no decision figures to plot")
    key, *quantities = list(figures[0])
    x = np.asarray(figures[0][key], dtype=float)
    own = ax is None
    fig, axes = axes_for(ax, (4.2 * len(quantities), 4.2), len(quantities), layout=None if own else "constrained")
    cmap = matplotlib.colormaps[VALUE_CMAP]
    for ax, q in zip(axes, quantities):
        y = np.array([np.asarray(f[q], dtype=float) for f in figures])
        _lines(ax, [np.column_stack([x, row]) for row in y], color="0.55", alpha=0.4, linewidth=0.7,
               label="realizations")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns (nothing above cut-off)
            p10, p50, p90 = np.nanpercentile(y, [10, 50, 90], axis=0, method=QUANTILE_METHOD)
        ax.fill_between(x, p10, p90, color=cmap(0.35), alpha=0.35, linewidth=0, label="P10 to P90")
        ax.plot(x, p50, color=cmap(0.15), linewidth=2.0, marker="o", markersize=3, label="P50")
        _decision_axes(ax, key, q, x, units)
    axes[0].legend(fontsize=8)
    if own:
        fig.suptitle(f"Decision figures across {len(figures)} realizations", fontsize=11)
        _place_row(fig, axes, top=0.6)
    return finish(fig, path, overwrite, own)


def plot_support_comparison(supports: Mapping[str, Sequence[Mapping[str, np.ndarray]]], path: str | os.PathLike, *,
                            units: str = "", overwrite: bool = False) -> Path:
    """Decision figures against cut-off at several supports: P50 line and P10-P90 band per support.

    ``supports`` maps a label ("point (15 x 15 x 10 m cells)", "blocks 30 x 30 x 10 m") to
    per-realization figures as :func:`plot_decision_spread` takes them; all share the cut-offs.
    Point support overstates the spread of grades, so the tonnage above a high cut-off
    falls and the tonnage above a low one rises on blocks: the plot shows by how much.
    """
    import matplotlib

    from ..summaries import QUANTILE_METHOD
    check_writable(path, overwrite)
    if not supports or not all(supports.values()):
        raise ValueError("no decision figures to plot")
    first = next(iter(supports.values()))
    key, *quantities = list(first[0])
    x = np.asarray(first[0][key], dtype=float)
    fig, axes = axes_for(None, (4.2 * len(quantities), 4.2), len(quantities), layout=None)
    cmap = matplotlib.colormaps[VALUE_CMAP]
    styles = [("-", "o", 0.15), ("--", "s", 0.7), (":", "^", 0.45)]
    for ax, q in zip(axes, quantities):
        for (label, figures), (line, marker, tone) in zip(supports.items(), styles):
            y = np.array([np.asarray(f[q], dtype=float) for f in figures])
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns (nothing above cut-off)
                p10, p50, p90 = np.nanpercentile(y, [10, 50, 90], axis=0, method=QUANTILE_METHOD)
            ax.fill_between(x, p10, p90, color=cmap(tone), alpha=0.25, linewidth=0)
            ax.plot(x, p50, color=cmap(tone), linestyle=line, marker=marker, markersize=3, linewidth=1.8,
                    label=f"{label}: P50, band P10 to P90")
        _decision_axes(ax, key, q, x, units)
    axes[0].legend(fontsize=7)
    fig.suptitle(f"Decision figures by support, {len(first)} realizations", fontsize=11)
    _place_row(fig, axes, top=0.6)
    return _save(fig, path, overwrite)
