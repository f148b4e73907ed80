"""Tables of the change-of-support outputs: values at given points, and realizations ranked by a figure.

Both are plain CSV with a "CSV on the Web" sidecar (:mod:`geosim.io.csvw`) carrying
the caution, the provenance, column descriptions and units.  The functions here
receive computed arrays (:mod:`geosim.support`) and only write.
"""
from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from .csvw import Column, write_csv_table

__all__ = ["write_point_summary_csv", "write_ranking_csv"]


def write_point_summary_csv(path: str | os.PathLike, ids: Sequence[str], coords: np.ndarray,
                            summary: Mapping[str, np.ndarray], *, units: str = "", n_realizations: int,
                            provenance: Mapping[str, str] | None = None, notes: Sequence[str] = (),
                            overwrite: bool = False) -> Path:
    """One row per point: id, coordinates (working CRS), mean, spread, P10/P50/P90, P(>c).

    ``summary`` is :func:`geosim.support.point_summary` of the realizations' values
    at the points; its P(>c) bands become columns ``P_above_<c>``.
    """
    c = np.asarray(coords, dtype=float)
    axes = ["x", "y", "z"][:c.shape[1]]
    columns = [Column("id", "point name (the file's id column, else its data row)", "string")]
    columns += [Column(a, f"{a} of the point in the working CRS", "double", "m") for a in axes]
    columns.append(Column("mean", "mean of the realizations at the point's node", "double", units))
    columns.append(Column("std", "standard deviation of the realizations there (divisor n)", "double", units))
    names = list(summary)
    for name in names[2:5]:
        columns.append(Column(name, f"{name}: {name[1:]}% of the realizations fall below (Hyndman and Fan 1996 "
                                    "type 7)", "double", units))
    for name in names[5:]:
        level = name[3:-1]
        columns.append(Column(f"P_above_{level}", f"fraction of realizations strictly above {level}"
                                                  f"{(' ' + units) if units else ''}", "double", ""))
    rows = ([ident, *map(float, c[i]), *(float(summary[n][i]) for n in names)] for i, ident in enumerate(ids))
    return write_csv_table(path, columns, rows, title=f"values at given points across {n_realizations} "
                                                      "realizations", provenance=provenance,
                           notes=["each point takes the value of the grid node whose cell holds it",
                                  *notes], primary_key=["id"], overwrite=overwrite)


def write_ranking_csv(path: str | os.PathLike, indices: Sequence[int], figures: Sequence[float],
                      ranks: Sequence[int], picked: Mapping[str, int], *, figure: str, unit: str = "",
                      provenance: Mapping[str, str] | None = None, notes: Sequence[str] = (),
                      overwrite: bool = False) -> Path:
    """Every realization's figure and rank, and which percentile (if any) it was picked for."""
    by_index: dict[int, list[str]] = {}
    for label, i in picked.items():
        by_index.setdefault(int(i), []).append(label)
    columns = [Column("realization", "realization index (0-based)", "integer"),
               Column("figure", f"{figure} in this realization (empty: undefined there)", "double", unit),
               Column("rank", "1 for the smallest figure (0: figure undefined)", "integer"),
               Column("picked_as", "the percentile(s) of the figure this realization is nearest to, if picked",
                      "string")]
    rows = ([int(i), float(f), int(r), " ".join(by_index.get(int(i), []))]
            for i, f, r in zip(indices, figures, ranks))
    return write_csv_table(path, columns, rows, title=f"realizations ranked by {figure}", provenance=provenance,
                           notes=list(notes), primary_key=["realization"], overwrite=overwrite)
