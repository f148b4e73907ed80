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

__all__ = ["scale_bar_length", "plot_map", "plot_summary_maps", "plot_histogram_reproduction",
           "plot_variogram_reproduction", "plot_decision_spread", "plot_support_comparison"]

VALUE_CMAP = "viridis"
SPREAD_CMAP = "cividis"
FOOTNOTE = "Statistical model from sparse samples; read the caution in the run report before use."


def _figure(size=(7.0, 6.0)):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=size, dpi=110, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def axes_for(ax, size, count: int = 1):
    """The figure and axes to draw on: the caller's ``ax`` (one Axes, or a sequence of
    ``count``), or a new figure of ``size`` inches with ``count`` panels in a row."""
    if ax is None:
        fig = _figure(size)
        return fig, list(fig.subplots(1, count, squeeze=False)[0])
    axes = [ax] if count == 1 and not isinstance(ax, (list, tuple, np.ndarray)) else list(np.ravel(ax))
    if len(axes) != count:
        raise ValueError(f"this plot draws {count} panels; give {count} axes, got {len(axes)}")
    return axes[0].figure, axes


def finish(fig, path, overwrite: bool, own: bool):
    """Write the PNG when a path is given (returns the path), else return the figure to show.

    The footnote goes only on figures geosim made itself (``own``), not into a
    caller's figure.
    """
    if path is None:
        return fig
    return _save(fig, path, overwrite, footnote=own)


def _save(fig, path, overwrite: bool, footnote: bool = True) -> Path:
    import geosim
    if footnote:
        fig.get_layout_engine().set(rect=(0.0, 0.035, 1.0, 0.965))  # room for the footnote below the axes
        fig.text(0.01, 0.008, FOOTNOTE, fontsize=6.5, color="0.35", ha="left", va="bottom")
    with atomic_output(path, overwrite) as tmp:
        fig.savefig(tmp, format="png", metadata={"Description": CAUTION,
                                                 "Software": f"geosim {geosim.__version__}"})
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
    import matplotlib
    if path is not None:
        check_writable(path, overwrite)
    a = np.where(grid.mask, np.asarray(values, dtype=float), np.nan)
    norm = None
    if log:
        from matplotlib.colors import LogNorm
        a = np.where(a > 0, a, np.nan)
        norm, vmin, vmax = LogNorm(vmin=vmin, vmax=vmax), None, None
    a = np.ma.masked_invalid(a)
    colours = matplotlib.colormaps[cmap].with_extremes(bad=(0.0, 0.0, 0.0, 0.0))
    ratio = (grid.ymax - grid.ymin) / (grid.xmax - grid.xmin)
    own = ax is None
    fig, (ax,) = axes_for(ax, (7.0, float(np.clip(5.2 * ratio + 1.6, 3.0, 10.0))))
    im = ax.imshow(a, extent=(grid.xmin, grid.xmax, grid.ymin, grid.ymax), origin="upper", cmap=colours,
                   vmin=vmin, vmax=vmax, norm=norm, interpolation="nearest")
    ax.set_aspect("equal")
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.tick_params(axis="both", labelsize=8)
    ax.set_xlabel("Easting (m)")
    ax.set_ylabel("Northing (m)")
    crs = getattr(grid.crs, "name", None) or "local coordinates, CRS not set"
    ax.set_title(f"{title}\n{crs}", fontsize=10)
    _scale_bar(ax, grid)
    bar = fig.colorbar(im, ax=ax, shrink=0.9, aspect=30)
    bar.set_label(units or "no units")
    return finish(fig, path, overwrite, own)


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
    probabilities span 0 to 1.
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
    out = []
    for band, fname, title, cmap, vmin, vmax, unit in jobs:
        if band in summary:
            out.append(plot_map(summary[band], grid, folder / f"{prefix}{fname}", title=title, units=unit,
                                cmap=cmap, vmin=vmin, vmax=vmax, log=log and not band.startswith("P(>"),
                                overwrite=overwrite))
    return out


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
    fig, (ax,) = axes_for(ax, (7.0, 4.8))
    colour = matplotlib.colormaps[VALUE_CMAP](0.55)
    for i, r in enumerate(realizations):
        x, f = _ecdf(r)
        ax.step(x, f, where="post", color=colour, alpha=0.35, linewidth=0.8,
                label="realizations" if i == 0 else None)
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
    fig, axes = axes_for(ax, (4.0 * len(directions), 4.2), len(directions))
    colour = matplotlib.colormaps[VALUE_CMAP](0.55)
    unit = {"east": 0, "north": 1, "up": 2}
    for ax, (name, d) in zip(axes, directions.items()):
        lags = np.asarray(d["lag_m"], dtype=float)
        for i, g in enumerate(d["per_realization"]):
            ax.plot(lags, g, color=colour, alpha=0.35, linewidth=0.8, label="realizations" if i == 0 else None)
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
    fig, axes = axes_for(ax, (4.2 * len(quantities), 4.2), len(quantities))
    cmap = matplotlib.colormaps[VALUE_CMAP]
    for ax, q in zip(axes, quantities):
        y = np.array([np.asarray(f[q], dtype=float) for f in figures])
        for i, row in enumerate(y):
            ax.plot(x, row, color="0.55", alpha=0.4, linewidth=0.7, label="realizations" if i == 0 else None)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns (nothing above cut-off)
            p10, p50, p90 = np.nanpercentile(y, [10, 50, 90], axis=0, method=QUANTILE_METHOD)
        ax.fill_between(x, p10, p90, color=cmap(0.35), alpha=0.35, linewidth=0, label="P10 to P90")
        ax.plot(x, p50, color=cmap(0.15), linewidth=2.0, marker="o", markersize=3, label="P50")
        _decision_axes(ax, key, q, x, units)
    axes[0].legend(fontsize=8)
    if own:
        fig.suptitle(f"Decision figures across {len(figures)} realizations", fontsize=11)
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
    fig = _figure((4.2 * len(quantities), 4.2))
    axes = fig.subplots(1, len(quantities), squeeze=False)[0]
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
    return _save(fig, path, overwrite)
