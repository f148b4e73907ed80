"""Cross-validation table (CSV) and figure (PNG).

The table is plain CSV, a header and one row per sample::

    sample_id,x,y[,z],value,estimate,kriging_variance,error,standardized_error,samples_used

``error = estimate - value``; empty cells mark samples that got no estimate.
``pandas.read_csv(path)`` reads it with its defaults.  The caution, the
method, the model, the summary and the columns' meaning and units are in the
"CSV on the Web" sidecar ``cross_validation.csv-metadata.json``
(:mod:`geosim.io.csvw`).  The PNG carries the caution in its ``Disclaimer``
text chunk.  All are written atomically and never replace an existing file
unless ``overwrite=True``.
"""
from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from ..cautions import CAUTION
from .atomic import atomic_output

__all__ = ["write_crossval_csv", "plot_crossval"]


def _summary_line(result) -> str:
    return ", ".join(f"{k}={v:.6g}" if isinstance(v, float) else f"{k}={v}"
                     for k, v in result.summary().items())


def write_crossval_csv(result, path: str | os.PathLike, overwrite: bool = False, *, units: str = "",
                       provenance: dict | None = None) -> Path:
    """Write a :class:`geosim.kriging.CrossValidationResult` as a CSV table.

    Parameters
    ----------
    result : geosim.kriging.CrossValidationResult
    path : str or path-like
        Output file; its folder must exist.
    overwrite : bool
        Replace an existing file.
    units : str
        Units of the values cross-validated (``"normal score"`` for scores).
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

    axes = ["x", "y", "z"][:result.coords.shape[1]]
    sq = f"({units})^2" if units else ""
    columns = [Column("sample_id", "sample label (or index) as given", "string"),
               *(Column(a, f"{a} coordinate of the sample (metric CRS of the run)", unit="m") for a in axes),
               Column("value", "the sample's value", unit=units),
               Column("estimate", "kriged estimate at the sample with it left out (empty: no estimate)",
                      unit=units),
               Column("kriging_variance", "kriging variance of that estimate", unit=sq),
               Column("error", "estimate - value", unit=units),
               Column("standardized_error", "error / kriging standard deviation"),
               Column("samples_used", "samples in the kriging system", "integer")]
    model_text = " ".join(result.model_text.split())
    rows = zip(result.sample_ids, *result.coords.T, result.values, result.estimate, result.variance,
               result.error, result.standardized_error, result.n_used)
    return write_csv_table(
        path, columns, rows, title=f"geosim leave-one-{result.leave_out}-out cross-validation",
        provenance=provenance, overwrite=overwrite,
        notes=[f"method: {result.method} kriging; left out: {result.leave_out}; model: {model_text}",
               f"summary: {_summary_line(result)}"])


def plot_crossval(result, path: str | os.PathLike, overwrite: bool = False, *, title: str | None = None,
                  units: str = "") -> Path:
    """Three-panel PNG: estimate against value, standardized errors, and their map.

    Parameters
    ----------
    result : geosim.kriging.CrossValidationResult
    path : str or path-like
        Output PNG; its folder must exist.
    overwrite : bool
        Replace an existing file.
    title : str, optional
        Figure title (default: the method and the summary figures).
    units : str
        Units of the values, for axis labels.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from .. import __version__

    ok = np.isfinite(result.estimate)
    s = result.summary()
    u = f" ({units})" if units else ""
    fig = Figure(figsize=(13.5, 4.4), dpi=110, layout="constrained")
    FigureCanvasAgg(fig)
    ax1, ax2, ax3 = fig.subplots(1, 3)

    v, e = result.values[ok], result.estimate[ok]
    ax1.scatter(v, e, s=12, alpha=0.7, color="tab:blue", edgecolor="none")
    if v.size:
        lo, hi = float(min(v.min(), e.min())), float(max(v.max(), e.max()))
        ax1.plot([lo, hi], [lo, hi], color="0.3", lw=1, label="estimate = value")
        ax1.legend(loc="upper left", fontsize=8)
    ax1.set_xlabel(f"sample value{u}")
    ax1.set_ylabel(f"estimate without the sample{u}")
    ax1.set_title(f"correlation {s['correlation']:.3f}", fontsize=10)

    serr = result.standardized_error[ok]
    serr = serr[np.isfinite(serr)]
    if serr.size:
        ax2.hist(serr, bins=max(8, min(40, int(np.sqrt(serr.size)) * 2)), density=True, color="tab:orange",
                 alpha=0.75, label="samples")
        x = np.linspace(min(-4.0, serr.min()), max(4.0, serr.max()), 200)
        ax2.plot(x, np.exp(-0.5 * x * x) / np.sqrt(2 * np.pi), color="0.2", lw=1, label="standard normal")
        ax2.legend(loc="upper right", fontsize=8)
    ax2.set_xlabel("standardized error (error / kriging std)")
    ax2.set_ylabel("density")
    ax2.set_title(f"mean {s['mean_standardized_error']:.3f}, mean square "
                  f"{s['mean_standardized_squared_error']:.3f}", fontsize=10)

    xy = result.coords[:, :2]
    if (~ok).any():
        ax3.scatter(xy[~ok, 0], xy[~ok, 1], s=10, marker="x", color="0.5", label="no estimate")
        ax3.legend(loc="upper right", fontsize=8)
    lim = max(3.0, float(np.nanmax(np.abs(serr)))) if serr.size else 3.0
    sc = ax3.scatter(xy[ok, 0], xy[ok, 1], c=result.standardized_error[ok], s=16, cmap="coolwarm",
                     vmin=-lim, vmax=lim, edgecolor="0.3", linewidth=0.3)
    fig.colorbar(sc, ax=ax3, label="standardized error")
    ax3.set_aspect("equal", adjustable="datalim")
    ax3.set_xlabel("east (m)")
    ax3.set_ylabel("north (m)")
    ax3.ticklabel_format(useOffset=False, style="plain")
    ax3.tick_params(axis="x", labelrotation=30)
    ax3.set_title("where the errors are", fontsize=10)

    fig.suptitle(title or (f"Leave-one-{result.leave_out}-out cross-validation, {result.method} kriging: "
                           f"mean error {s['mean_error']:.4g}, RMSE {s['rmse']:.4g}, "
                           f"{s['estimated']} of {s['samples']} samples estimated"), fontsize=11)
    with atomic_output(path, overwrite) as tmp:
        fig.savefig(tmp, format="png", metadata={"Software": f"geosim {__version__}", "Disclaimer": CAUTION,
                                                 "Title": "geosim cross-validation"})
    return Path(path)
