"""Variogram plots: experimental points sized by pair count, with the fitted model.

PNG through matplotlib's object API (``matplotlib.figure.Figure`` with the Agg
canvas), so no global pyplot state is touched.  Colours are sampled from
*cividis*, which is perceptually uniform and readable with the common colour
vision deficiencies (Nunez, Anderton and Renslow 2018, PLOS ONE 13(7)); each
direction also has its own marker shape, so the plot survives greyscale.
"""
from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from ..cautions import CAUTION
from .experimental import ExperimentalVariogram, VariogramMap
from .model import Model

_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">")


def plot_variogram(experimentals: ExperimentalVariogram | Sequence[ExperimentalVariogram],
                   model: Model | None = None, path: str | os.PathLike | None = None, *,
                   overwrite: bool = False, title: str | None = None, value_unit: str | None = None,
                   min_pairs: int = 1, dpi: int = 120, ax=None):
    """Draw experimental semivariograms (and a model): into a PNG file, or a figure to show.

    Parameters
    ----------
    experimentals : ExperimentalVariogram or sequence of them
        One colour and marker per direction; marker area grows with the pair count.
    model : Model, optional
        Drawn along each variogram's direction (for omnidirectional ones, averaged
        over directions the same way :func:`geosim.variogram.fit_model` does).
    path : path-like, optional
        The PNG to write (atomically).  Without it the figure is returned (a notebook
        shows it).
    overwrite : bool
        Replace an existing file.
    title : str, optional
        Figure title.
    value_unit : str, optional
        Unit of the variable (the semivariance axis shows its square); None
        labels the axis without unit (normal scores are unitless).
    min_pairs : int
        Bins with fewer pairs are not drawn.
    ax : matplotlib.axes.Axes, optional
        Draw into this Axes instead of a new figure.

    Returns
    -------
    pathlib.Path or matplotlib.figure.Figure
        The file written (the PNG carries :data:`geosim.cautions.CAUTION` in its
        ``Description`` text chunk), or the figure when no path is given.
    """
    from matplotlib import colormaps

    from .fitting import _unit_dirs

    evs = [experimentals] if isinstance(experimentals, ExperimentalVariogram) else list(experimentals)
    if not evs:
        raise ValueError("nothing to plot: give at least one experimental variogram")
    cmap = colormaps["cividis"]
    colours = [cmap(x) for x in (np.linspace(0.0, 0.9, len(evs)) if len(evs) > 1 else [0.0])]
    nmax = max(int(ev.npairs.max()) for ev in evs) or 1

    fig, ax = _axes(ax, (8.5, 4.5), dpi)
    hmax = 0.0
    for ev, colour, marker in zip(evs, colours, _MARKERS * (len(evs) // len(_MARKERS) + 1)):
        ok = ev.valid(min_pairs) & np.isfinite(ev.gamma)
        if ok.any():
            hmax = max(hmax, float(np.nanmax(ev.lags[ok])))
        sizes = 12.0 + 140.0 * np.sqrt(ev.npairs[ok] / nmax)
        ax.scatter(ev.lags[ok], ev.gamma[ok], s=sizes, color=colour, marker=marker, alpha=0.85,
                   edgecolors="black", linewidths=0.4, label=f"{ev.label} (experimental)", zorder=3)
    if hmax == 0.0:
        hmax = max(float(ev.centres[-1]) for ev in evs) or 1.0
    if model is not None:
        h = np.linspace(0.0, 1.05 * hmax, 200)
        for ev, colour in zip(evs, colours):
            dim = ev.dim
            g = np.mean([model.semivariance(h[:, None] * u[None, :dim]) for u in _unit_dirs(ev)], axis=0)
            g[0] = 0.0  # the model is 0 at zero lag; the nugget is the jump just after it
            ax.plot(h, g, color=colour, linewidth=1.8, label=f"{ev.label} (model)", zorder=2)
    variance = evs[0].variance
    if np.isfinite(variance):
        ax.axhline(variance, color="0.4", linestyle="--", linewidth=1.0, label="sample variance", zorder=1)
    ax.set_xlim(0.0, 1.05 * hmax)
    ax.set_ylim(bottom=0.0)
    ax.set_xlabel("lag distance (m)")
    unit = f" ({value_unit})\u00b2" if value_unit else ""
    ax.set_ylabel("semivariance" + (f" [{unit.strip()}]" if unit else ""))
    ax.grid(True, color="0.9", zorder=0)
    ax.legend(fontsize="small", frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    ax.set_title(title or "Semivariogram (marker area grows with pair count)", fontsize="medium")
    return _done(fig, path, overwrite)


def plot_variogram_map(vmap: VariogramMap, path: str | os.PathLike | None = None, *, overwrite: bool = False,
                       title: str | None = None, value_unit: str | None = None, dpi: int = 120, ax=None):
    """Draw a :class:`~geosim.variogram.VariogramMap` (cividis, colour bar): into a PNG or a figure.

    The axes are the east and north lag components in metres; cells with too
    few pairs are left blank.  The direction of slowest growth of the
    semivariance is the major axis of continuity.  Returns the path written (the
    PNG carries :data:`geosim.cautions.CAUTION` in its ``Description`` chunk), or
    the figure without ``path``; ``ax`` draws into the caller's Axes.
    """
    half = vmap.cell / 2.0
    extent = (vmap.dx[0] - half, vmap.dx[-1] + half, vmap.dy[0] - half, vmap.dy[-1] + half)
    fig, ax = _axes(ax, (6.0, 5.0), dpi)
    image = ax.imshow(np.ma.masked_invalid(vmap.gamma), origin="lower", extent=extent, cmap="cividis",
                      interpolation="nearest")
    unit = f" [({value_unit})\u00b2]" if value_unit else ""
    fig.colorbar(image, ax=ax, label="semivariance" + unit)
    ax.set_xlabel("east lag (m)")
    ax.set_ylabel("north lag (m)")
    ax.set_aspect("equal")
    ax.set_title(title or "Variogram map", fontsize="medium")
    return _done(fig, path, overwrite)


def _axes(ax, size, dpi):
    """The caller's Axes and its figure, or a new figure (Agg canvas, no pyplot state) and Axes."""
    if ax is not None:
        return ax.figure, ax
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=size, dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot()


def _done(fig, path, overwrite: bool):
    """The figure without a path; else the PNG written atomically, the caution in its Description."""
    if path is None:
        return fig
    from ..io.atomic import atomic_output
    with atomic_output(path, overwrite=overwrite) as tmp:
        fig.savefig(tmp, format="png", metadata={"Description": CAUTION, "Software": "geosim"})
    return Path(path)
