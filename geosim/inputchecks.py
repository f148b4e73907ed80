"""Checks that keep a run from computing something meaningless, and the notes a practitioner
would want, all made before any realization is computed.

A simulation that exits 0 with believable maps is the worst way to fail: samples that
condition nothing (a swapped longitude/latitude, a wrong UTM zone, a domain drawn
elsewhere), a constant variable given invented variability, or a fixed covariance
model whose sills are not those of normal scores.  These are refused here with the
file, row or spec key and the fix.  Things that may be right but deserve a look (a
few negative grades, a hole drilled upward from surface, samples far from the
domain) become notes.

Every function takes plain arrays and objects; :func:`geosim.pipeline.preflight`
applies them to a run spec.
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .errors import InputError

__all__ = ["sample_label", "check_variability", "check_score_sill", "check_conditioning",
           "negative_values_note", "upward_holes_note", "SILL_TOLERANCE", "MIN_CONDITIONING_SAMPLES",
           "CONDITIONED_NODES_NOTE"]

# normal scores have variance 1; a fixed model's total sill further from it than this is
# refused (common practice, no source: the fitted path warns beyond x1.5, this is for
# models the user typed)
SILL_TOLERANCE = 0.02
# fewer samples than this within reach of the domain cannot condition a simulation
MIN_CONDITIONING_SAMPLES = 3
# note when fewer active nodes than this fraction have a sample within reach
CONDITIONED_NODES_NOTE = 0.05
# at most this many grid nodes are measured for the reach check (a regular subset beyond)
_MAX_CHECKED_NODES = 200_000
# units of variables that cannot be negative (concentrations, grades, conductivities)
_NON_NEGATIVE_UNITS = ("%", "ppm", "ppb", "g/t", "oz/t", "kg/t", "mg/l", "mg/kg", "ug/l", "µg/l", "m/s", "m/d",
                       "m/day", "md", "darcy", "t/m3", "t/m³", "g/cm3")


def sample_label(samples, i: int) -> tuple[str | None, int | None, str]:
    """Where sample ``i`` of a :class:`~geosim.points.PointSet` comes from: (file, row, text).

    Points carry their file row (attribute ``row``); composites their hole and depths.
    """
    attrs = samples.attributes
    file = samples.source[0] if samples.source else None
    if "row" in attrs:
        return file, int(attrs["row"][i]), f"row {int(attrs['row'][i])}"
    if samples.hole_ids is not None and "from" in attrs and "to" in attrs:
        file = samples.source[-1] if samples.source else None  # the interval table
        return file, None, f"hole {samples.hole_ids[i]} {attrs['from'][i]:g}-{attrs['to'][i]:g} m"
    return file, None, f"sample {i + 1}"


def _labels(samples, indices: Sequence[int], most: int = 5) -> str:
    shown = [sample_label(samples, int(i))[2] for i in indices[:most]]
    return ", ".join(shown) + (f" and {len(indices) - most} more" if len(indices) > most else "")


def check_variability(values: np.ndarray, weights: np.ndarray | None, *, name: str, samples) -> None:
    """Refuse a (near) constant variable: it has no variability for a model to describe.

    Near constant means a spread below 1e-9 of the largest magnitude, or a declustered
    variance of zero.

    Examples
    --------
    >>> import numpy as np
    >>> from geosim.points import PointSet
    >>> from geosim.inputchecks import check_variability
    >>> s = PointSet(np.zeros((3, 2)), np.full((3, 1), 0.5), ("cu",), None, None, {}, ("a.csv",), ())
    >>> check_variability(s.column("cu"), None, name="cu", samples=s)
    Traceback (most recent call last):
    ...
    geosim.errors.InputError: a.csv, field 'cu': every one of the 3 values of 'cu' is 0.5: ...
    """
    v = np.asarray(values, dtype=float)
    scale = max(float(np.max(np.abs(v))), np.finfo(float).tiny)
    spread = float(np.ptp(v))
    if weights is not None:
        w = np.asarray(weights, dtype=float) / np.sum(weights)
        mean = float(np.sum(w * v))
        declustered = float(np.sum(w * (v - mean) ** 2))
    else:
        declustered = None
    if spread <= 1e-9 * scale or declustered == 0.0:
        what = (f"every one of the {len(v)} values of {name!r} is {v[0]:g}" if spread == 0.0 else
                f"the {len(v)} values of {name!r} vary by only {spread:.3g} around {np.mean(v):g}")
        raise InputError(what + ": a constant variable has no spatial variability for a covariance model "
                         "to describe, and a simulation would invent it", file=samples.source[-1]
                         if samples.source else None, field=name,
                         fix="check data.value names the intended column; a constant field needs no "
                             "simulation (its value is known everywhere the data represent)")


def check_score_sill(model, *, file: str | None, field: str) -> None:
    """Refuse a fixed model of normal scores whose sills do not sum to 1 (their variance).

    Examples
    --------
    >>> import geosim
    >>> from geosim.inputchecks import check_score_sill
    >>> check_score_sill(geosim.Nugget(0.2) + geosim.Spherical(0.8, 100.0), file="run.toml", field="s")
    >>> check_score_sill(geosim.Nugget(30.0) + geosim.Spherical(120.0, 100.0), file="run.toml", field="s")
    Traceback (most recent call last):
    ...
    geosim.errors.InputError: run.toml, field 's': the model's sills sum to 150 ...
    """
    total = float(model.sill)
    if abs(total - 1.0) <= SILL_TOLERANCE:
        return
    parts = " + ".join(f"{s.kind} {s.sill:g}" for s in model.structures)
    scaled = ", ".join(f"{s.sill / total:.3g}" for s in model.structures) if total > 0 else "fractions"
    raise InputError(f"the model's sills sum to {total:g} ({parts}), but it describes normal scores, whose "
                     f"variance is 1: realizations would have {total:g} times the variance of the data's "
                     "scores and back-transform to impossible values", file=file, field=field,
                     fix=f"give the sills as fractions of the total that sum to 1 (here {scaled}), or set "
                         "variogram.fit = true to fit them")


def _active_nodes(grid) -> np.ndarray:
    coords = grid.coords()
    if len(coords) > _MAX_CHECKED_NODES:
        coords = coords[:: int(np.ceil(len(coords) / _MAX_CHECKED_NODES))]
    return coords


def check_conditioning(samples, grid, reach: float, *, spec_file: str | None = None) -> list[str]:
    """Refuse samples that cannot condition the grid; note samples far outside it.

    A sample conditions a node when it lies within ``reach`` metres (the longest range
    of the variogram model: beyond it the covariance is nil) of that node.

    Returns
    -------
    list of str
        Notes: samples out of reach of every active node, and a grid mostly beyond
        the data's reach.

    Raises
    ------
    InputError
        When fewer than :data:`MIN_CONDITIONING_SAMPLES` samples lie within reach of
        an active node: the realizations would be unconditional.
    """
    from scipy.spatial import cKDTree
    nodes = _active_nodes(grid)
    coords = samples.coords[:, : nodes.shape[1]]
    node_tree = cKDTree(nodes)
    to_node, _ = node_tree.query(coords)
    near = to_node <= reach
    file = samples.source[0] if samples.source else None
    if near.sum() < MIN_CONDITIONING_SAMPLES:
        nearest = float(to_node.min())
        raise InputError(
            f"{int(near.sum())} of the {len(coords)} samples lie within {reach:,.0f} m (the longest range of "
            f"the variogram model) of a grid node inside the domain; the nearest is {nearest:,.0f} m away, so "
            "the realizations would not be conditioned by the data", file=file,
            fix="check data.crs and the x/y columns (longitude and latitude swapped? another UTM zone?), "
                f"the domain and grid.bounds{' in ' + spec_file if spec_file else ''}")
    notes = []
    far = np.flatnonzero(~near)
    if far.size:
        notes.append(f"{far.size} of {len(coords)} samples lie farther than {reach:,.0f} m (the longest "
                     f"variogram range) from every grid node inside the domain and condition nothing: "
                     f"{_labels(samples, far)}")
    to_data, _ = cKDTree(coords).query(nodes, distance_upper_bound=reach)
    reached = float(np.mean(np.isfinite(to_data)))
    if reached < CONDITIONED_NODES_NOTE:
        notes.append(f"only {100 * reached:.1f}% of the grid nodes inside the domain have a sample within "
                     f"{reach:,.0f} m; elsewhere the realizations follow the model alone")
    return notes


def negative_values_note(values: np.ndarray, *, name: str, units: str | None, samples) -> str | None:
    """A note when a variable that cannot be negative has negative values.

    The variable is taken to be non-negative when its units are those of a
    concentration, grade or conductivity, or when most of its values are positive
    and only a few (at most a tenth) negative: the pattern of below-detection codes
    such as -1 or -99.
    """
    v = np.asarray(values, dtype=float)
    negative = np.flatnonzero(v < 0.0)
    if negative.size == 0:
        return None
    unit_says = units is not None and units.strip().lower().split(" ")[0] in _NON_NEGATIVE_UNITS
    if not unit_says and negative.size > 0.1 * v.size:
        return None
    why = f"its units ({units}) are those of a quantity that cannot be negative" if unit_says else \
        "the other values are positive"
    codes = sorted({float(x) for x in v[negative]})
    return (f"{negative.size} value(s) of {name!r} are negative ({', '.join(f'{c:g}' for c in codes[:5])}) "
            f"while {why}: {_labels(samples, negative)}; if they are below-detection codes, enter half the "
            "detection limit instead")


def upward_holes_note(holes, *, surface_collars: bool) -> str | None:
    """A note naming holes surveyed upward at the collar that are likely drilled from surface.

    They are when ``surface_collars`` says the collars are the ground surface (e.g. the
    domain stops at the surface through them), or when only a few holes (at most a
    quarter) point upward while the rest go down.  A programme of upward holes from
    underground gets no note.
    """
    upward = [str(h) for h in holes.ids if h in holes.surveys and holes.surveys[h][0, 2] > 0.0]
    if not upward:
        return None
    if surface_collars:
        why = "although the collars are the ground surface"
    elif len(upward) <= 0.25 * len(holes.ids):
        why = "while the other holes go down (from a surface collar an upward hole points into the air)"
    else:
        return None
    shown = ", ".join(upward[:8]) + (f" and {len(upward) - 8} more" if len(upward) > 8 else "")
    return (f"{len(upward)} hole(s) are surveyed upward at the collar {why}: {shown}; dips are negative "
            "downward, so check the sign of their survey dips")
