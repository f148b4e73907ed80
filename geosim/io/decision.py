"""Decision figures as CSV files.

The figures are computed in :mod:`geosim.summaries`
(:func:`~geosim.summaries.decision_rows`, :func:`~geosim.summaries.decision_spread`);
this module describes their columns and writes them.
"""
from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path

from .csvw import Column, write_csv_table

__all__ = ["decision_columns", "write_decision_csv"]

_DECISION_COLUMNS = {
    "realization": ("realization index (0-based; realization i depends only on the seed and i)", "integer", ""),
    "cutoff": ("cut-off grade; a cell counts when its grade is at or above it", "double", "{units}"),
    "threshold": ("threshold; a cell counts when its value is strictly beyond it", "double", "{units}"),
    "tonnage": ("ore tonnage at or above the cut-off", "double", "t"),
    "mean_grade": ("tonnage-weighted mean grade at or above the cut-off (empty: nothing above)", "double",
                   "{units}"),
    "metal": ("metal at or above the cut-off: tonnage x mean grade x metal factor", "double", "{metal}"),
    "fraction_above": ("fraction (0 to 1) of the domain's cells strictly above the threshold", "double", ""),
    "fraction_below": ("fraction (0 to 1) of the domain's cells strictly below the threshold", "double", ""),
    "area": ("area of those cells", "double", "m2"),
    "volume": ("volume of those cells", "double", "m3"),
    "figure": ("which decision figure the row summarizes (a column of decision_figures.csv)", "string", ""),
    "n": ("realizations in which the figure is defined", "integer", ""),
    "mean": ("mean of the figure across realizations, in the figure's unit", "double", ""),
    "P10": ("10th percentile of the figure across realizations (Hyndman and Fan 1996 type 7)", "double", ""),
    "P50": ("median of the figure across realizations", "double", ""),
    "P90": ("90th percentile of the figure across realizations", "double", ""),
}


def decision_columns(names: Sequence[str], units: str = "", metal_unit: str = ""):
    """:class:`geosim.io.csvw.Column` descriptions of decision-table columns.

    ``units`` are the data units (grades, conductivities); ``metal_unit`` the
    unit of ``metal`` (``t`` for % grades with metal factor 0.01, ``g`` for g/t).
    """
    out = []
    for name in names:
        description, datatype, unit = _DECISION_COLUMNS.get(name, (name, "double", ""))
        out.append(Column(name, description, datatype, unit.format(units=units or "", metal=metal_unit or "")))
    return out


def write_decision_csv(path: str | os.PathLike, rows: Sequence[Mapping], overwrite: bool = False, *,
                       units: str = "", metal_unit: str = "", provenance: Mapping[str, str] | None = None
                       ) -> Path:
    """Write rows (from :func:`geosim.summaries.decision_rows` or ``decision_spread``) as a plain CSV, atomically.

    The table has a header line and the rows, nothing else; its caution,
    provenance, column descriptions and units are in the "CSV on the Web"
    sidecar ``<name>.csv-metadata.json`` (:mod:`geosim.io.csvw`).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import numpy as np, geosim
    >>> figs = [{"threshold": np.array([1e-4]), "fraction_above": np.array([0.25 * t])} for t in range(3)]
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "decision_figures.csv"
    >>> print(geosim.write_decision_csv(p, geosim.decision_rows(figs), units="m/s").read_text(), end="")
    realization,threshold,fraction_above
    0,0.0001,0
    1,0.0001,0.25
    2,0.0001,0.5
    """
    if not rows:
        raise ValueError("no rows to write")
    header = list(rows[0])
    spread = "figure" in header
    notes = []
    if spread:
        notes.append("one row per cut-off (or threshold) and figure; mean and percentiles are in the unit of "
                     "the figure: tonnage t, mean_grade and cutoff data units, metal the metal unit, "
                     "fraction_above/below 0 to 1, area m2, volume m3")
    title = ("decision figures: spread across realizations" if spread
             else "decision figures per realization")
    return write_csv_table(path, decision_columns(header, units, metal_unit), ([r.get(k) for k in header]
                                                                            for r in rows),
                           title=title, provenance=provenance, notes=notes,
                           primary_key=[header[0], "figure"] if spread else header[:2], overwrite=overwrite)
