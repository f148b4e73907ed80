"""Cross-validation table (CSV) and figure (PNG).

The table is plain CSV, a header and one row per sample::

    sample_id,x,y[,z],value,estimate,kriging_variance,error,standardized_error,samples_used

in the units of the result (``units``).  For a run, the result is in normal
scores and the table also holds the back-transformed cross-validation in data
units, so the score columns are prefixed ``score_``::

    sample_id,x,y[,z],value,estimate,conditional_variance,error,
    score,score_estimate,score_kriging_variance,score_error,standardized_error,samples_used

where ``estimate`` is the back-transformed conditional mean (data units).
``error = estimate - value``; empty cells mark samples that got no estimate.
``pandas.read_csv(path)`` reads it with its defaults.  The caution, the
method, the model, the summaries (plain and declustered) and the columns'
meaning and units are in the "CSV on the Web" sidecar
``cross_validation.csv-metadata.json`` (:mod:`geosim.io.csvw`).  The PNG uses
the colours, footnote and ``Description`` caution chunk of the other plots
(:mod:`geosim.io.plots`) and says on every axis whether it is in normal scores
or data units.  All are written atomically and never replace an existing file
unless ``overwrite=True``.
"""
from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from .atomic import check_writable

__all__ = ["write_crossval_csv", "plot_crossval", "crossval_figure"]


def _summary_line(result) -> str:
    return ", ".join(f"{k}={v:.6g}" if isinstance(v, float) else f"{k}={v}"
                     for k, v in result.summary().items() if k not in ("scale", "units"))


def _scale_units(result, units: str | None) -> str:
    return result.units if units is None else units


def write_crossval_csv(result, path: str | os.PathLike, overwrite: bool = False, *, units: str | None = None,
                       data_units=None, provenance: dict | None = None) -> Path:
    """Write a :class:`geosim.kriging.CrossValidationResult` as a CSV table.

    Parameters
    ----------
    result : geosim.kriging.CrossValidationResult
    path : str or path-like
        Output file; its folder must exist.
    overwrite : bool
        Replace an existing file.
    units : str, optional
        Units of the values cross-validated (default: ``result.units``;
        ``"normal score"`` for scores).
    data_units : geosim.kriging.CrossValidationResult, optional
        The same cross-validation in data units
        (:meth:`~geosim.kriging.CrossValidationResult.in_data_units`): its columns
        come first and ``result``'s columns are prefixed ``score_``.
    provenance : dict, optional
        The run's provenance (:func:`geosim.io.report.provenance`) for the sidecar.

    Returns
    -------
    pathlib.Path
        The written file.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.kriging import cross_validate
    >>> from geosim.io.crossval import write_crossval_csv
    >>> xy = np.array([[0.0, 0.0], [30.0, 0.0], [0.0, 40.0], [50.0, 50.0]])
    >>> model = geosim.Spherical(1.0, geosim.Anisotropy((100.0, 100.0)))
    >>> cv = cross_validate(xy, [1.0, 2.0, 3.0, 4.0], model)
    >>> out = write_crossval_csv(cv, pathlib.Path(tempfile.mkdtemp()) / "cv.csv")
    >>> out.read_text().splitlines()[0]
    'sample_id,x,y,value,estimate,kriging_variance,error,standardized_error,samples_used'
    """
    from .csvw import Column, write_csv_table

    units = _scale_units(result, units)
    axes = ["x", "y", "z"][:result.coords.shape[1]]
    scores = data_units is not None
    pre = "score_" if scores else ""
    what = "normal score" if scores else "value"
    sq = f"({units})^2" if units else ""
    columns = [Column("sample_id", "sample label (or index) as given", "string"),
               *(Column(a, f"{a} coordinate of the sample (metric CRS of the run)", unit="m") for a in axes)]
    data = [result.sample_ids, *result.coords.T]
    if scores:
        du = data_units.units
        columns += [Column("value", "the sample's value (data units)", unit=du),
                    Column("estimate", "back-transformed conditional mean at the sample with it left out "
                                       "(data units; empty: no estimate)", unit=du),
                    Column("conditional_variance", "variance of the back-transformed conditional "
                                                   "distribution (data units)", unit=f"({du})^2" if du else ""),
                    Column("error", "estimate - value (data units)", unit=du)]
        data += [data_units.values, data_units.estimate, data_units.variance, data_units.error]
    columns += [Column("score" if scores else "value", f"the sample's {what}", unit=units),
                Column(pre + "estimate", f"kriged {what} at the sample with it left out (empty: no estimate)",
                       unit=units),
                Column(pre + "kriging_variance", "kriging variance of that estimate", unit=sq),
                Column(pre + "error", f"{pre}estimate - {pre + 'score' if scores else 'value'}", unit=units),
                Column("standardized_error", "error / kriging standard deviation"
                       + (" (normal scores)" if scores else "")),
                Column("samples_used", "samples in the kriging system", "integer")]
    data += [result.values, result.estimate, result.variance, result.error, result.standardized_error,
             result.n_used]
    model_text = " ".join(result.model_text.split())
    notes = [f"method: {result.method} kriging; left out: {result.leave_out}; model: {model_text}",
             f"summary{' in normal scores' if scores else ''}: {_summary_line(result)}"]
    if scores:
        notes.append(f"summary in data units ({data_units.units or 'no units given'}; estimate = "
                     f"back-transformed conditional mean): {_summary_line(data_units)}")
    return write_csv_table(
        path, columns, zip(*data), title=f"geosim leave-one-{result.leave_out}-out cross-validation",
        provenance=provenance, overwrite=overwrite, notes=notes)


def plot_crossval(result, path: str | os.PathLike | None = None, overwrite: bool = False, *,
                  title: str | None = None, units: str | None = None, data_units=None, log: bool = False,
                  ax=None):
    """Estimate against value (data units and/or normal scores), standardized errors, and their map.

    Parameters
    ----------
    result : geosim.kriging.CrossValidationResult
    path : str or path-like, optional
        Output PNG; its folder must exist.  Without it the figure is returned.
    overwrite : bool
        Replace an existing file.
    title : str, optional
        Figure title (default: the method and the summary figures).
    units : str, optional
        Units of ``result`` for axis labels (default ``result.units``).
    data_units : geosim.kriging.CrossValidationResult, optional
        The same cross-validation back-transformed to data units: adds a panel of
        the conditional mean against the sample value.
    log : bool
        Logarithmic axes for the data-unit panel (log-normal variables).
    ax : sequence of matplotlib Axes, optional
        Draw into the caller's figure: three axes, four with ``data_units``.

    Returns
    -------
    pathlib.Path or matplotlib.figure.Figure
        The written file, or the figure when no path is given.
    """
    from .plots import finish
    if path is not None:
        check_writable(path, overwrite)
    fig = crossval_figure(result, title=title, units=units, data_units=data_units, log=log, ax=ax)
    return finish(fig, path, overwrite, ax is None)


def crossval_figure(result, *, title: str | None = None, units: str | None = None, data_units=None,
                    log: bool = False, ax=None):
    """The matplotlib ``Figure`` :func:`plot_crossval` saves (same parameters)."""
    import matplotlib

    from .plots import SPREAD_CMAP, VALUE_CMAP, axes_for

    units = _scale_units(result, units)
    in_scores = units == "normal score"
    cmap = matplotlib.colormaps[VALUE_CMAP]
    panels = 3 + (data_units is not None)
    fig, axes = axes_for(ax, (4.5 * panels, 4.6), panels)

    def scatter(ax, res, label, log_axes=False):
        ok = np.isfinite(res.estimate)
        v, e = res.values[ok], res.estimate[ok]
        if log_axes:
            keep = (v > 0) & (e > 0)
            v, e = v[keep], e[keep]
        ax.scatter(v, e, s=12, alpha=0.75, color=cmap(0.3), edgecolor="none")
        if v.size:
            lo, hi = float(min(v.min(), e.min())), float(max(v.max(), e.max()))
            ax.plot([lo, hi], [lo, hi], color="black", lw=1, label="estimate = value")
            ax.legend(loc="upper left", fontsize=8)
        if log_axes:
            ax.set_xscale("log")
            ax.set_yscale("log")
        ax.set_xlabel(f"sample {label}")
        ax.set_ylabel(f"estimate without the sample, {label}")
        s = res.summary()
        ax.set_title(f"RMSE {s['rmse']:.4g}, mean error {s['mean_error']:.3g}, r {s['correlation']:.3f}",
                     fontsize=9)
        ax.grid(alpha=0.3)

    score_label = "normal score" if in_scores else (f"value ({units})" if units else "value (no units)")
    if data_units is not None:
        du = data_units.units
        scatter(axes.pop(0), data_units, f"value ({du}; data units)" if du else "value (data units)", log)
    scatter(axes[0], result, score_label)

    ok = np.isfinite(result.estimate)
    serr = result.standardized_error[ok]
    serr = serr[np.isfinite(serr)]
    ax2 = axes[1]
    if serr.size:
        ax2.hist(serr, bins=max(8, min(40, int(np.sqrt(serr.size)) * 2)), density=True, color=cmap(0.55),
                 alpha=0.75, label="samples")
        x = np.linspace(min(-4.0, serr.min()), max(4.0, serr.max()), 200)
        ax2.plot(x, np.exp(-0.5 * x * x) / np.sqrt(2 * np.pi), color="black", lw=1, label="standard normal")
        ax2.legend(loc="upper right", fontsize=8)
    ax2.set_xlabel("standardized error (error / kriging std"
                   + (", normal scores)" if in_scores else ")"))
    ax2.set_ylabel("density")
    s = result.summary()
    ax2.set_title(f"mean {s['mean_standardized_error']:.3f}, mean square "
                  f"{s['mean_standardized_squared_error']:.3f}", fontsize=9)
    ax2.grid(alpha=0.3)

    ax3 = axes[2]
    xy = result.coords[:, :2]
    if (~ok).any():
        ax3.scatter(xy[~ok, 0], xy[~ok, 1], s=10, marker="x", color="0.5", label="no estimate")
        ax3.legend(loc="upper right", fontsize=8)
    lim = max(3.0, float(np.nanmax(np.abs(serr)))) if serr.size else 3.0
    sc = ax3.scatter(xy[ok, 0], xy[ok, 1], c=result.standardized_error[ok], s=16, cmap=SPREAD_CMAP,
                     vmin=-lim, vmax=lim, edgecolor="0.3", linewidth=0.3)
    fig.colorbar(sc, ax=ax3, label="standardized error" + (" (normal scores)" if in_scores else ""))
    ax3.set_aspect("equal", adjustable="datalim")
    ax3.set_xlabel("Easting (m)")
    ax3.set_ylabel("Northing (m)")
    ax3.ticklabel_format(useOffset=False, style="plain")
    ax3.tick_params(axis="x", labelrotation=30)
    ax3.set_title("where the errors are", fontsize=9)

    scale = "normal scores" + (" and data units" if data_units is not None else "") if in_scores else \
        (units or "values as given")
    if ax is None:
        fig.suptitle(title or (f"Leave-one-{result.leave_out}-out cross-validation, {result.method} kriging, "
                               f"{scale}: {s['estimated']} of {s['samples']} samples estimated"), fontsize=11)
    return fig
