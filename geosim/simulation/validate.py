"""Input checks shared by the simulation engines: one clear error per problem."""
from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..search import Neighbourhood

KRIGING = ("simple", "ordinary")


def check_inputs(data_coords, data_scores, model, grid, neighbourhood, kriging):
    """Validate engine inputs; return ``(coords (n, 3), scores (n,), neighbourhood, ordinary, model)``.

    A single structure is accepted as a one-structure model.
    """
    from ..variogram import Model, Structure
    if isinstance(model, Structure):
        model = Model([model])
    if not isinstance(model, Model):
        raise InputError(f"expected a geosim Model, got {type(model).__name__}", field="model",
                         fix="build one with geosim.Spherical(...) + geosim.Nugget(...) or geosim.Model([...])")
    if kriging not in KRIGING:
        raise InputError(f"unknown kriging type {kriging!r}", field="kriging",
                         fix=f"use one of: {', '.join(KRIGING)}")
    nb = Neighbourhood() if neighbourhood is None else neighbourhood
    if not isinstance(nb, Neighbourhood):
        raise InputError(f"expected a geosim.search.Neighbourhood, got {type(nb).__name__}",
                         field="neighbourhood", fix="build one with geosim.search.Neighbourhood(...)")
    coords = np.asarray(data_coords, dtype=np.float64)
    if coords.size == 0:
        coords = coords.reshape(0, grid.ndim)
    scores = np.asarray(data_scores, dtype=np.float64).ravel()
    if coords.ndim != 2 or coords.shape[1] != grid.ndim:
        raise InputError(f"data coordinates have shape {coords.shape}, the grid is {grid.ndim}-D",
                         field="data_coords", fix=f"pass an (n, {grid.ndim}) array of x, y"
                         + (", z" if grid.ndim == 3 else "") + " in the grid's CRS")
    if coords.shape[0] != scores.shape[0]:
        raise InputError(f"{coords.shape[0]} data locations but {scores.shape[0]} scores",
                         field="data_scores", fix="pass one normal score per data location")
    bad = np.flatnonzero(~np.isfinite(coords).all(axis=1) | ~np.isfinite(scores))
    if bad.size:
        raise InputError("data location or score is missing or not finite", row=int(bad[0]) + 1,
                         field="data_scores" if np.isfinite(coords[bad[0]]).all() else "data_coords",
                         fix="drop or correct that sample before simulating")
    if grid.n_active == 0:
        raise InputError("the grid has no active node", field="grid.mask",
                         fix="check that the domain polygon or raster overlaps the grid")
    coords3 = np.zeros((coords.shape[0], 3))
    coords3[:, :coords.shape[1]] = coords
    return coords3, scores, nb, kriging == "ordinary", model


def data_labels(sample_ids, n: int) -> tuple:
    """Labels of the data rows for error messages (row numbers from 1 by default)."""
    if sample_ids is None:
        return tuple(str(i + 1) for i in range(n))
    labels = tuple(str(s) for s in sample_ids)
    if len(labels) != n:
        raise InputError(f"{len(labels)} sample ids for {n} data", field="sample_ids",
                         fix="pass one id per data row")
    return labels


#: A node closer to a datum than this fraction of the smallest cell lies "on" the datum.
COINCIDENT_REL_TOL = 1e-4


def coincident_nodes(coords3: np.ndarray, grid, rel_tol: float = COINCIDENT_REL_TOL):
    """Active nodes lying on a datum (closer than ``rel_tol`` of the smallest cell).

    Returns ``(positions among the active nodes in C order, data ids)``.  Such a node
    and its datum would be two identical rows of a covariance matrix, so the engines give
    the node the datum's score instead of simulating it.  If several data share a node
    the first one is taken (duplicate data fail later, with their ids).
    """
    from .paths import grid_axes
    empty = np.zeros(0, dtype=np.int64)
    if coords3.shape[0] == 0:
        return empty, empty
    shape3, origin, step = grid_axes(grid)
    # nearest node by rounding the fractional node index along each axis (x -> column, ...)
    frac = (coords3 - origin) / step
    if grid.ndim == 2:
        frac[:, 2] = 0.0
    idx = np.rint(frac).astype(np.int64)
    inside = np.all((idx >= 0) & (idx < np.array([shape3[2], shape3[1], shape3[0]])), axis=1)
    near = np.linalg.norm((frac - idx) * np.abs(step), axis=1) <= rel_tol * min(grid.cell)
    hit = np.flatnonzero(inside & near)
    if hit.size == 0:
        return empty, empty
    flat = (idx[hit, 2] * shape3[1] + idx[hit, 1]) * shape3[2] + idx[hit, 0]
    mask = grid.mask.ravel()
    keep = mask[flat]
    flat, hit = flat[keep], hit[keep]
    flat, first = np.unique(flat, return_index=True)
    position = np.cumsum(mask)[flat] - 1
    return position.astype(np.int64), hit[first].astype(np.int64)


def complement(n: int, taken: np.ndarray) -> np.ndarray:
    """``0 .. n-1`` without ``taken``, in order."""
    keep = np.ones(n, dtype=bool)
    keep[taken] = False
    return np.flatnonzero(keep)


def collocated_inputs(secondary, correlation, grid, model, ordinary: bool) -> tuple[np.ndarray, float, float]:
    """Check a collocated secondary for an engine; return ``(scores of grid.shape, b, 1 - rho^2)``.

    ``b = rho sqrt(1 / sill)`` is the Markov model's factor for a secondary in normal
    scores (variance 1): ``C_ps(h) = b C_p(h)``.  Without a secondary, or with
    ``correlation = 0``, ``b`` is 0 and the engines run as without one.
    """
    rho = float(correlation)
    if not -1.0 < rho < 1.0:
        raise InputError(f"the correlation coefficient between primary and secondary is {correlation!r}",
                         field="correlation", fix="give a value strictly between -1 and 1")
    if secondary is None or rho == 0.0:
        return np.zeros(0), 0.0, 1.0
    if ordinary:
        raise InputError("collocated co-simulation needs simple kriging (a known mean)", field="kriging",
                         fix="use kriging='simple' (simulation.kriging = \"simple\")")
    sec = np.asarray(secondary, dtype=np.float64)
    if sec.shape != grid.shape:
        raise InputError(f"the secondary has shape {sec.shape}, the grid {grid.shape}", field="secondary",
                         fix="give the secondary's normal score at every node of the grid")
    missing = grid.mask & ~np.isfinite(sec)
    if missing.any():
        raise InputError(f"the secondary has no value at {int(missing.sum())} of {grid.n_active} active nodes",
                         field="secondary", fix="give a secondary value at every active node")
    return np.ascontiguousarray(sec), rho / float(np.sqrt(model.sill)), 1.0 - rho * rho
