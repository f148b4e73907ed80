"""Ensemble statistics and decision figures.

Ensemble statistics (per grid node, across realizations)
--------------------------------------------------------
* ``mean``: arithmetic mean of the realizations.
* ``std``: standard deviation with divisor ``n`` (the spread of the ensemble
  itself, ``numpy.std(..., ddof=0)``).
* ``P10``, ``P50``, ``P90``: quantiles by numpy's default ``"linear"`` method,
  definition 7 of Hyndman and Fan (1996, "Sample quantiles in statistical
  packages", The American Statistician 50(4), 361-365): with the ``n`` values
  sorted, ``P_p`` sits at position ``(n - 1) p / 100`` (0-based) with linear
  interpolation between neighbours.  P10 is thus the value below which 10 % of
  the realizations fall.
* ``P(>c)`` for each cut-off ``c``: the fraction of realizations *strictly
  above* ``c``.

Nodes outside the domain (NaN in every realization) stay NaN.

:func:`summarize_ensemble` does this on an in-memory stack and
:func:`summary_bands` on any stack; :func:`summarize_windows` takes an iterator
of stacks of windows (``(key, stack)`` pairs, the key passed through), so a
caller that reads files window by window (:func:`geosim.ensemble.summarize_realizations`)
keeps memory bounded by window size x number of realizations.  This module
computes only: it opens no file and writes none.

Decision figures (per realization)
----------------------------------
* :func:`grade_tonnage`: tonnage, mean grade and metal *at or above* each
  cut-off (``grade >= cutoff``, the usual reading of a cut-off grade).
* :func:`fraction_above` / :func:`fraction_below`: the fraction of the domain's
  cells strictly above / below each threshold (e.g. hydraulic conductivity).

:func:`decision_spread` gives P10/P50/P90 of each figure across realizations
(same quantile definition); :func:`geosim.io.decision.write_decision_csv`
writes the tables.
"""
from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Iterator, Mapping, Sequence
from typing import Any

import numpy as np
from numba import njit

from ._forward import forward
from .errors import InputError

__all__ = ["QUANTILE_METHOD", "SUMMARY_PERCENTILES", "summary_band_names", "summary_band_descriptions",
           "summary_bands", "summarize_ensemble", "summarize_windows", "grade_tonnage", "tonnage_above",
           "fraction_above", "fraction_below", "decision_rows", "decision_spread", "figure_display"]

QUANTILE_METHOD = "linear"  # numpy's default; Hyndman and Fan (1996) definition 7
SUMMARY_PERCENTILES = (10.0, 50.0, 90.0)


def _fmt(c: float) -> str:
    return f"{c:g}"


def summary_band_names(cutoffs: Sequence[float] = ()) -> list[str]:
    """Short names of the summary bands, in band order.

    Examples
    --------
    >>> import geosim.summaries
    >>> geosim.summaries.summary_band_names([0.5, 1.0])
    ['mean', 'std', 'P10', 'P50', 'P90', 'P(>0.5)', 'P(>1)']
    """
    return (["mean", "std"] + [f"P{p:g}" for p in SUMMARY_PERCENTILES]
            + [f"P(>{_fmt(c)})" for c in cutoffs])


def summary_band_descriptions(cutoffs: Sequence[float] = (), units: str = "") -> list[tuple[str, str]]:
    """``(description, unit)`` of each summary band, for GIS band descriptions."""
    u = f" ({units})" if units else ""
    out = [(f"mean of realizations{u}", units),
           (f"standard deviation of realizations{u}", units)]
    out += [(f"P{p:g}: {p:g}% of realizations fall below{u}", units) for p in SUMMARY_PERCENTILES]
    out += [(f"probability above {_fmt(c)}{(' ' + units) if units else ''} (fraction 0-1)", "fraction")
            for c in cutoffs]
    return out


#: Nodes summarized side by side by the compiled statistics (:func:`_node_bands`): each step of the
#: sorting network works on one row of this many nodes, a loop the compiler turns into vector
#: instructions.
_LANES = 256
#: Values (nodes x realizations) from which a stack's bands are worth compiling :func:`_node_bands`
#: for: below, numpy gives the same bits without the 1.2-1.9 s of CPU the kernel takes to compile on a
#: first run, at most about 50 ms more per pass than the compiled kernel; runs of at least this many
#: values compile it ahead (:func:`geosim.pipeline.run_job`).
COMPILED_BANDS_FROM = 1 << 20


def summary_bands(stack: np.ndarray, cutoffs: Sequence[float] = (), threads: int = 1,
                  compiled: bool | None = None) -> np.ndarray:
    """Summary bands of a stack ``(n_real, ...)``; returns ``(n_bands, ...)`` float64.

    Bands in :func:`summary_band_names` order.  Every realization must share the
    domain mask (NaN at the same nodes).  One compiled pass (:func:`_node_bands`) in
    double precision from the stored values: float32 values (what the files and the
    realization store hold, also when given as float64) are read as float32 and widened
    value by value (exactly), anything else as float64; ``threads`` split the nodes.
    ``compiled`` None takes that pass when it is compiled already (in this process or
    numba's cache) or the stack holds at least :data:`COMPILED_BANDS_FROM` values, and
    otherwise numpy's reductions and ``numpy.percentile``, which give the same bits
    (tested); True or False forces one.
    """
    stack = np.asarray(stack)
    shape = stack.shape[1:]
    flat = stack.reshape(stack.shape[0], -1)
    out = np.empty((5 + len(cutoffs), flat.shape[1]))
    cut = np.asarray(cutoffs, dtype=np.float64)
    if compiled is None:
        compiled = flat.size >= COMPILED_BANDS_FROM or _bands_compiled()
    bad = _compiled_bands(flat, cut, out, threads) if compiled else _numpy_bands(flat, cut, out)
    if bad:
        raise ValueError("some nodes are NaN in some realizations but not in others; every realization "
                         "must share the domain mask")
    return out.reshape((out.shape[0],) + shape)


def _bands_compiled() -> bool:
    """Whether :func:`_node_bands` runs without compiling: loaded in this process or in numba's cache."""
    from .simulation.runner import in_numba_cache
    return bool(_node_bands.signatures) or in_numba_cache(_node_bands)


def _compiled_bands(flat: np.ndarray, cut: np.ndarray, out: np.ndarray, threads: int) -> bool:
    """:func:`_node_bands` over all nodes of ``flat`` into ``out``, split over ``threads``; whether a
    node is partly NaN."""
    if flat.dtype != np.float32:
        flat = np.asarray(flat, dtype=np.float64)
        narrow = flat.astype(np.float32)
        if np.array_equal(narrow, flat, equal_nan=True):  # float32 values: the same bands, one compiled kernel
            flat = narrow
    flat = np.ascontiguousarray(flat)
    probs = np.asarray(SUMMARY_PERCENTILES, dtype=np.float64) / 100.0
    pairs = sorting_network(flat.shape[0])
    m = flat.shape[1]
    bounds = np.linspace(0, m, max(1, min(int(threads), m // _LANES + 1)) + 1).astype(np.int64)
    if len(bounds) > 2:
        from concurrent.futures import ThreadPoolExecutor
        with ThreadPoolExecutor(len(bounds) - 1) as pool:
            bad = list(pool.map(lambda k: _node_bands(flat, cut, probs, pairs, out, bounds[k], bounds[k + 1]),
                                range(len(bounds) - 1)))
    else:
        bad = [_node_bands(flat, cut, probs, pairs, out, 0, m)]
    return any(b >= 0 for b in bad)


def _numpy_bands(flat: np.ndarray, cut: np.ndarray, out: np.ndarray) -> bool:
    """The bands of :func:`_node_bands` by numpy, bit for bit, into ``out``: sums over the realization
    axis in float64 add the rows in order (as the kernel does), and ``numpy.percentile`` is the
    definition the kernel follows (its order is that of the float64 widenings); whether a node is
    partly NaN."""
    flat = np.asarray(flat, dtype=np.float64)
    n = flat.shape[0]
    nan = np.isnan(flat)
    outside = nan.all(axis=0)
    if (nan.any(axis=0) & ~outside).any():
        return True
    out[0] = flat.sum(axis=0) / n
    out[1] = np.sqrt(((flat - out[0]) ** 2).sum(axis=0) / n)
    out[2:5] = np.percentile(flat, SUMMARY_PERCENTILES, axis=0)
    for c in range(cut.shape[0]):
        out[5 + c] = (flat > cut[c]).sum(axis=0) / n
    out[:, outside] = np.nan
    return False


@functools.lru_cache(maxsize=8)
def sorting_network(n: int) -> np.ndarray:
    """The compare-exchange pairs ``(i, j)``, ``i < j``, of Batcher's odd-even merge sort of ``n`` keys
    (K. E. Batcher 1968, "Sorting networks and their applications", AFIPS Spring Joint Computer
    Conference 32, 307-314; from memory), as an ``(m, 2)`` int64 array in the order they are applied.

    The network of the next power of two with every pair reaching past ``n - 1`` left out (as if
    the missing keys were larger than all others, which such a pair never moves).  A network
    sorts every input exactly when it sorts every input of zeros and ones (Knuth, The Art of
    Computer Programming 3, section 5.3.4, the zero-one principle; from memory), which the tests check.

    Examples
    --------
    >>> import geosim.summaries
    >>> geosim.summaries.sorting_network(3).tolist()
    [[0, 1], [0, 2], [1, 2]]
    """
    pairs = []
    p = 1
    while p < n:
        k = p
        while k >= 1:
            for j in range(k % p, n - k, 2 * k):
                for i in range(min(k - 1, n - j - k - 1) + 1):
                    if (i + j) // (2 * p) == (i + j + k) // (2 * p):
                        pairs.append((i + j, i + j + k))
            k //= 2
        p *= 2
    out = np.array(pairs, dtype=np.int64).reshape(-1, 2)
    out.flags.writeable = False  # shared by every call through the cache
    return out


@njit(cache=True, nogil=True)
def _node_bands(vals, cutoffs, probs, pairs, out, start, stop):  # pragma: no cover - compiled
    """Bands of nodes ``start .. stop-1`` of ``vals (n_real, nodes)`` into ``out``; -1, or a node with some NaN.

    Per node: mean, standard deviation (divisor n, two passes), both summed in float64 over the
    realizations in index order; the fraction strictly above each cut-off; quantiles of the
    sorted values by Hyndman and Fan's definition 7 with numpy's interpolation (``a + (b - a) g``,
    or ``b - (b - a)(1 - g)`` for ``g >= 0.5``).  :data:`_LANES` nodes at a time are copied side by
    side (row ``i`` holds realization ``i`` of each) and sorted together by the compare-exchange
    ``pairs`` (:func:`sorting_network`).  No branch depends on the values (counts add comparisons,
    sums add a selected value), so the compiler turns each loop over the lanes into vector
    instructions; a compare-exchange is two such loops, the smaller value of each lane into the
    lower row and the larger into a spare row, then the spare row into the upper row.  (Rows of
    one buffer may overlap as far as the compiler knows: written in the same loop, they kept it
    from vector instructions.  Written so, and with branches in the counts, the pass took 2.1 s
    of CPU for 100 realizations of a million nodes, against 0.8 s.)
    The sort is in the values' own precision (the order of float32 values is that of their
    float64 widenings), the arithmetic in float64.
    """
    n = vals.shape[0]
    nc = cutoffs.shape[0]
    buf = np.empty((n, _LANES), dtype=vals.dtype)
    high = np.empty(_LANES, dtype=vals.dtype)
    total = np.empty(_LANES)
    mean = np.empty(_LANES)
    ss = np.empty(_LANES)
    nan = np.empty(_LANES, dtype=np.int64)
    above = np.empty(_LANES, dtype=np.int64)
    for j0 in range(start, stop, _LANES):
        w = min(_LANES, stop - j0)
        for i in range(n):
            row = buf[i]
            for k in range(w):
                row[k] = vals[i, j0 + k]
            for k in range(w, _LANES):  # idle lanes of the last group: any number will do
                row[k] = 0.0
        total[:] = 0.0
        nan[:] = 0
        for i in range(n):
            row = buf[i]
            for k in range(_LANES):
                x = np.float64(row[k])
                missing = x != x
                nan[k] += missing
                total[k] += 0.0 if missing else x
        for k in range(_LANES):
            mean[k] = total[k] / n
        ss[:] = 0.0
        for i in range(n):
            row = buf[i]
            for k in range(_LANES):
                ss[k] += (np.float64(row[k]) - mean[k]) ** 2
        for k in range(w):
            if nan[k] == n:
                for b in range(5 + nc):
                    out[b, j0 + k] = np.nan
            elif nan[k] > 0:
                return j0 + k
            else:
                out[0, j0 + k] = mean[k]
                out[1, j0 + k] = math.sqrt(ss[k] / n)
        for c in range(nc):
            above[:] = 0
            cut = cutoffs[c]
            for i in range(n):
                row = buf[i]
                for k in range(_LANES):
                    above[k] += row[k] > cut
            for k in range(w):
                if nan[k] == 0:
                    out[5 + c, j0 + k] = above[k] / n
        for p in range(pairs.shape[0]):
            lo_row = buf[pairs[p, 0]]
            hi_row = buf[pairs[p, 1]]
            for k in range(_LANES):
                x = lo_row[k]
                y = hi_row[k]
                less = x < y
                high[k] = y if less else x
                lo_row[k] = x if less else y
            for k in range(_LANES):
                hi_row[k] = high[k]
        for q in range(probs.shape[0]):
            pos = (n - 1) * probs[q]
            lo = int(math.floor(pos))
            g = pos - lo
            hi = min(lo + 1, n - 1)
            for k in range(w):
                if nan[k] == 0:
                    a = np.float64(buf[lo, k])
                    b = np.float64(buf[hi, k])
                    out[2 + q, j0 + k] = b - (b - a) * (1.0 - g) if g >= 0.5 else a + (b - a) * g
    return -1


def warm_up() -> None:
    """Compile the summary kernel (numba's cache keeps it): the float32 pass of the stacks read from
    files and realization stores (:func:`geosim.simulation.runner.compile_ahead`, for runs of at least
    :data:`COMPILED_BANDS_FROM` values)."""
    summary_bands(np.arange(6.0, dtype=np.float32).reshape(3, 2), [0.5], compiled=True)


def summarize_ensemble(fields: np.ndarray | Sequence[np.ndarray],
                       cutoffs: Sequence[float] = ()) -> dict[str, np.ndarray]:
    """Ensemble statistics of realizations held in memory.

    Parameters
    ----------
    fields : array ``(n_real, *grid.shape)`` or sequence of arrays
        Realizations in data units, NaN outside the domain.
    cutoffs : sequence of float
        Values for the exceedance probabilities.

    Returns
    -------
    dict
        ``{band name: array of grid.shape}`` in :func:`summary_band_names` order.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim.summaries
    >>> s = geosim.summaries.summarize_ensemble(np.arange(11.0).reshape(11, 1, 1), [4.5])
    >>> float(s["P10"][0, 0]), float(s["P(>4.5)"][0, 0])
    (1.0, 0.5454545454545454)
    """
    stack = np.asarray(fields if isinstance(fields, np.ndarray) else np.stack(list(fields)), dtype=float)
    if stack.ndim < 2 or stack.shape[0] < 1:
        raise ValueError(f"need a stack (n_realizations, ...) with at least one realization, got {stack.shape}")
    bands = summary_bands(stack, cutoffs)
    return dict(zip(summary_band_names(cutoffs), bands))


def summarize_windows(blocks: Iterable[tuple[Any, np.ndarray]],
                      cutoffs: Sequence[float] = (), threads: int = 1) -> Iterator[tuple[Any, np.ndarray]]:
    """Summary bands of each window of an ensemble, one window at a time.

    Parameters
    ----------
    blocks : iterable of ``(key, stack)``
        ``stack`` is ``(n_real, rows, cols)``: every realization at one window;
        ``key`` (e.g. the window) is passed through untouched.
    cutoffs : sequence of float
    threads : int
        Threads splitting each window's nodes (:func:`summary_bands`).

    Yields
    ------
    ``(key, bands)`` with ``bands`` of :func:`summary_bands`.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim.summaries
    >>> blocks = [("left", np.arange(11.0).reshape(11, 1, 1)), ("right", np.ones((11, 1, 1)))]
    >>> [(key, float(bands[0, 0, 0])) for key, bands in geosim.summaries.summarize_windows(blocks)]
    [('left', 5.0), ('right', 1.0)]
    """
    for key, stack in blocks:
        yield key, summary_bands(stack, cutoffs, threads)


# ---------------------------------------------------------------------------------------------
# decision figures

def _cell_volume(grid, thickness) -> np.ndarray | float:
    if grid.ndim == 3:
        if thickness is not None:
            raise InputError("a 3-D grid has its own level thickness (dz); do not give a thickness",
                             field="thickness", fix="leave thickness out for 3-D grids")
        return grid.cell[0] * grid.cell[1] * grid.cell[2]
    if thickness is None:
        raise InputError("a 2-D grid needs a thickness (metres) to turn cell areas into volumes",
                         field="thickness", fix="give thickness= the mining or aquifer thickness in metres")
    t = np.asarray(thickness, dtype=float)
    if t.ndim and t.shape != grid.shape:
        raise InputError(f"thickness array has shape {t.shape}, the grid {grid.shape}", field="thickness",
                         fix="give one thickness or an array of the grid's shape")
    return grid.cell[0] * grid.cell[1] * t


def _field(field, grid) -> np.ndarray:
    f = np.asarray(field, dtype=float)
    if f.shape != grid.shape:
        raise ValueError(f"field has shape {f.shape}, the grid {grid.shape}")
    return np.where(grid.mask, f, np.nan)


def grade_tonnage(field: np.ndarray, grid, cutoffs: Sequence[float], density: float | np.ndarray,
                  thickness: float | np.ndarray | None = None, metal_factor: float = 1.0) -> dict[str, np.ndarray]:
    """Tonnage, mean grade and metal at or above each cut-off, for one realization.

    Parameters
    ----------
    field : array of ``grid.shape``
        Grades, NaN outside the domain.
    grid : geosim.Grid
        Cell volume is ``dx*dy*dz`` (3-D) or ``dx*dy*thickness`` (2-D).
    cutoffs : sequence of float
        Cut-off grades; a cell counts when ``grade >= cutoff``.
    density : float or array of ``grid.shape``
        Dry bulk density in t/m^3.
    thickness : float or array of ``grid.shape``, 2-D grids only
        Thickness in metres.
    metal_factor : float
        Metal per tonne of ore per unit of grade: 1 for g/t grades (metal in grams),
        0.01 for % grades (metal in tonnes).

    Returns
    -------
    dict of arrays (one value per cut-off)
        ``cutoff``; ``tonnage`` (t); ``mean_grade`` (tonnage-weighted, grade
        units; NaN where nothing is above); ``metal`` = tonnage x mean grade x
        ``metal_factor``.

    Examples
    --------
    >>> import numpy as np, geosim
    >>> g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (1, 2))
    >>> gt = geosim.grade_tonnage(np.array([[1.0, 3.0]]), g, [0.0, 2.0], density=2.5, thickness=2.0)
    >>> gt["tonnage"].tolist(), gt["mean_grade"].tolist(), gt["metal"].tolist()
    ([1000.0, 500.0], [2.0, 3.0], [2000.0, 1500.0])
    """
    f = _field(field, grid)
    tonnes = _cell_volume(grid, thickness) * np.asarray(density, dtype=float)
    return tonnage_above(f, np.broadcast_to(tonnes, grid.shape), cutoffs, metal_factor)


def tonnage_above(grades: np.ndarray, tonnes: np.ndarray, cutoffs: Sequence[float],
                  metal_factor: float = 1.0) -> dict[str, np.ndarray]:
    """Tonnage, mean grade and metal at or above each cut-off of units (cells or blocks) of known tonnes.

    ``grades`` and ``tonnes`` have one shape; units where the grade is NaN are left
    out.  :func:`grade_tonnage` uses it for grid cells, block support
    (:mod:`geosim.support`) for blocks.  Returns what :func:`grade_tonnage` returns.
    """
    f = np.asarray(grades, dtype=float)
    tonnes = np.asarray(tonnes, dtype=float)
    inside = ~np.isnan(f)
    cut = np.asarray(cutoffs, dtype=float).ravel()
    tonnage = np.empty(cut.size)
    metal = np.empty(cut.size)
    fv, tv = f[inside], tonnes[inside]
    for k, c in enumerate(cut):
        above = fv >= c
        ta = tv[above]
        tonnage[k] = ta.sum()
        metal[k] = (ta * fv[above]).sum()
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_grade = np.where(tonnage > 0, metal / np.where(tonnage > 0, tonnage, 1.0), np.nan)
    return {"cutoff": cut, "tonnage": tonnage, "mean_grade": mean_grade, "metal": metal * metal_factor}


def _fractions(field, grid, thresholds, above: bool) -> dict[str, np.ndarray]:
    f = _field(field, grid)
    v = f[~np.isnan(f)]
    t = np.asarray(thresholds, dtype=float).ravel()
    if v.size == 0:
        frac = np.full(t.size, np.nan)
    else:
        frac = np.array([np.count_nonzero(v > c if above else v < c) / v.size for c in t])
    cell = float(np.prod(grid.cell))
    key = "fraction_above" if above else "fraction_below"
    size = "volume" if grid.ndim == 3 else "area"
    return {"threshold": t, key: frac, size: frac * v.size * cell}


def fraction_above(field: np.ndarray, grid, thresholds: Sequence[float]) -> dict[str, np.ndarray]:
    """Fraction of the domain's cells strictly above each threshold, for one realization.

    Returns ``threshold``, ``fraction_above`` (0-1) and ``area`` (m^2, 2-D) or
    ``volume`` (m^3, 3-D) of those cells.

    Examples
    --------
    >>> import numpy as np, geosim
    >>> g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (2, 2))
    >>> geosim.fraction_above(np.array([[1e-5, 1e-4], [1e-6, np.nan]]), g, [5e-6])["fraction_above"]
    array([0.66666667])
    """
    return _fractions(field, grid, thresholds, above=True)


def fraction_below(field: np.ndarray, grid, thresholds: Sequence[float]) -> dict[str, np.ndarray]:
    """Fraction of the domain's cells strictly below each threshold; see :func:`fraction_above`."""
    return _fractions(field, grid, thresholds, above=False)


def decision_rows(figures: Sequence[Mapping[str, np.ndarray]],
                  indices: Sequence[int] | None = None) -> list[dict]:
    """One row per realization and cut-off from a list of per-realization figures.

    ``figures[j]`` is the dict returned by :func:`grade_tonnage` or
    :func:`fraction_above` / :func:`fraction_below` for realization
    ``indices[j]`` (default ``j``).
    """
    rows = []
    indices = range(len(figures)) if indices is None else indices
    for i, figs in zip(indices, figures):
        key, *quantities = list(figs)
        for k, c in enumerate(np.asarray(figs[key]).ravel()):
            row = {"realization": int(i), key: float(c)}
            row.update({q: float(np.asarray(figs[q]).ravel()[k]) for q in quantities})
            rows.append(row)
    return rows


def decision_spread(figures: Sequence[Mapping[str, np.ndarray]]) -> list[dict]:
    """P10, P50, P90 and mean of each decision figure across realizations.

    Quantiles use :data:`QUANTILE_METHOD` over the realizations; realizations
    where a figure is NaN (e.g. mean grade with nothing above cut-off) are left
    out of that figure's statistics, and ``n`` says how many remained.

    Examples
    --------
    >>> import numpy as np, geosim
    >>> figs = [{"cutoff": np.array([1.0]), "tonnage": np.array([float(t)])} for t in range(11)]
    >>> geosim.decision_spread(figs)[0]
    {'cutoff': 1.0, 'figure': 'tonnage', 'n': 11, 'mean': 5.0, 'P10': 1.0, 'P50': 5.0, 'P90': 9.0}
    """
    if not figures:
        return []
    key, *quantities = list(figures[0])
    levels = np.asarray(figures[0][key], dtype=float).ravel()
    out = []
    for k, c in enumerate(levels):
        for q in quantities:
            v = np.array([float(np.asarray(f[q]).ravel()[k]) for f in figures])
            v = v[~np.isnan(v)]
            row = {key: float(c), "figure": q, "n": int(v.size)}
            if v.size:
                row["mean"] = float(v.mean())
                row.update({f"P{p:g}": float(x) for p, x in zip(
                    SUMMARY_PERCENTILES, np.percentile(v, SUMMARY_PERCENTILES, method=QUANTILE_METHOD))})
            else:
                row.update({"mean": float("nan"), **{f"P{p:g}": float("nan") for p in SUMMARY_PERCENTILES}})
            out.append(row)
    return out


# units a decision figure is shown in: (threshold at which the larger unit reads better, factor, unit)
_DISPLAY_UNITS = {"area": ((1e6, 1e6, "km\u00b2"), "m\u00b2"), "volume": ((1e6, 1e6, "million m\u00b3"), "m\u00b3"),
                  "tonnage": ((1e6, 1e6, "Mt"), "t")}


def figure_display(figure: str, values: Sequence[float], units: str = "", metal_unit: str = ""
                   ) -> tuple[np.ndarray, str]:
    """Values of one decision figure scaled for reading, and their unit.

    Areas are in m\u00b2, or km\u00b2 when the largest is a square kilometre or more;
    volumes in m\u00b3 or million m\u00b3; tonnages in t or Mt; grades in the data units.

    Examples
    --------
    >>> from geosim.summaries import figure_display
    >>> figure_display("area", [2.5e6, 4.0e6])
    (array([2.5, 4. ]), 'km²')
    >>> figure_display("volume", [5200.0])
    (array([5200.]), 'm³')
    """
    v = np.asarray(values, dtype=float)
    if figure in _DISPLAY_UNITS:
        (threshold, factor, big), small = _DISPLAY_UNITS[figure]
        finite = np.abs(v[np.isfinite(v)])
        return (v / factor, big) if finite.size and finite.max() >= threshold else (v, small)
    unit = {"mean_grade": units, "cutoff": units, "threshold": units, "metal": metal_unit,
            "fraction_above": "of the domain", "fraction_below": "of the domain"}.get(figure, "")
    return v, unit


# moved up to the modules that read and write files; the old paths work for one release
__getattr__ = forward(__name__, {"summarize_realizations": "geosim.ensemble",
                                 "decision_columns": "geosim.io.decision",
                                 "write_decision_csv": "geosim.io.decision"})
