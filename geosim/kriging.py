"""Simple and ordinary kriging, leave-one-out cross-validation and estimation maps.

Secondary information enters in three ways: simple kriging with a locally varying
mean (:func:`krige_varying_mean`, residuals from a mean given per location),
collocated simple cokriging under the Markov model (:func:`collocated_cokrige`,
:func:`collocated_update`), and kriging with an external drift
(:func:`krige_external_drift`: the mean ``a + b s(u)`` of unknown ``a``, ``b``).

Every local system is the covariance matrix ``K`` of the selected samples,
factored ``K = L L^T`` by the compiled :func:`geosim.linalg.chol_partial` (all pivots).  One
factor serves the weights and the variance:

* simple kriging (known mean ``m``): ``y = L^-1 c``, variance ``C(0) - y.y``,
  weights ``L^-T y``, estimate ``m + w.(z - m)``;
* ordinary kriging (unknown constant mean): with ``y1 = L^-1 1`` the Lagrange
  constraint gives ``mu = (y1.y - 1) / (y1.y1)``, weights ``L^-T (y - mu y1)``
  (they sum to one) and variance ``C(0) - y.y + (y1.y - 1)^2 / (y1.y1)``, i.e. the
  simple-kriging variance plus the price of not knowing the mean;
* external drift (unknown mean ``a + b s``): the same with the two drift
  functions ``F = [1, s]``: ``G = L^-1 F``, ``r = G'y - (1, s0)``, multipliers
  ``mu = (G'G)^-1 r``, weights ``L^-T (y - G mu)``, variance ``C(0) - y.y + r.mu``.

Selection (:func:`geosim.search.select_neighbours`), build, factor and solve run
per node in one compiled loop.  With ``neighbourhood="global"`` every sample
enters every system: the data covariance is factored once by LAPACK and all
targets are solved together (level-3 BLAS).

A pivot below ``PIVOT_RTOL * C(0)`` means the local covariance is numerically
singular (coincident samples, or a model without nugget at tiny spacing); the
error names the samples.  ``regularization=eps`` retries such a system with
``eps * C(0)`` added to its diagonal and counts the nodes where that happened.
"""
from __future__ import annotations

import functools
import math
import logging
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from contextlib import nullcontext
from dataclasses import dataclass, field, replace

import numpy as np
from numba import njit

from .errors import InputError, NotPositiveDefiniteError
from .linalg import backward_t_inplace, chol_partial, forward_inplace
from .search import DataSearch, Neighbourhood, as_xyz, exclusion_arrays, select_neighbours
from .moments import multigaussian_moments
from .variogram.compiled import cov_lag

log = logging.getLogger(__name__)

# a conditional variance (Cholesky pivot) below this fraction of the sill is
# treated as singular: rounding noise, not information (common practice, no source)
PIVOT_RTOL = 1e-10
# an external drift that spans less than this fraction of its spread over all samples is constant
# over a neighbourhood: its coefficient cannot be told from the mean (common practice, no source)
DRIFT_RTOL = 1e-9
# fewest samples kriging with an external drift uses: its two constraints and one degree of freedom;
# two samples fix the weights by the constraints alone, an extrapolation of the line through them
# (common practice, no source)
DRIFT_MIN_SAMPLES = 3
# below this many targets per thread, threads cost more than they save
_MIN_ROWS_PER_THREAD = 256

Progress = Callable[[int, int, str], None]

__all__ = ["KrigingResult", "CokrigingResult", "CrossValidationResult", "krige", "krige_grid",
           "krige_varying_mean", "krige_external_drift", "collocated_cokrige", "collocated_update",
           "collocated_correlation", "MIN_COLLOCATED_PAIRS", "cross_validate", "PIVOT_RTOL", "DRIFT_RTOL",
           "DRIFT_MIN_SAMPLES", "METHODS"]


@dataclass(frozen=True)
class KrigingResult:
    """Estimates at a set of targets.

    Attributes
    ----------
    estimate, variance : (m,) ndarray
        Kriged value and kriging variance.  Simple kriging estimates every
        target (with no sample: the mean and the sill); ordinary kriging and
        kriging with an external drift give NaN where fewer than
        ``min_samples`` samples (for a drift, at least ``DRIFT_MIN_SAMPLES``)
        were found and the search was not widened.
    n_used : (m,) int64 ndarray
        Samples in each local system.
    method : str
        ``"simple"``, ``"ordinary"`` or ``"external_drift"``.
    mean : float
        The known mean (simple kriging); NaN otherwise.
    n_regularized : int
        Targets whose system was singular and got ``regularization`` on its
        diagonal (0 when no regularization was needed).
    weights, neighbours : (m, k) ndarray or None
        With ``return_weights=True``: the kriging weights and the sample index
        of each weight (padded with 0 and -1).
    n_short : int
        Targets whose search ellipsoid held fewer than ``min_samples`` samples
        (widened to the nearest ``min_samples`` when the neighbourhood says
        ``widen``).
    """

    estimate: np.ndarray
    variance: np.ndarray
    n_used: np.ndarray
    method: str
    mean: float
    n_regularized: int = 0
    weights: np.ndarray | None = field(default=None, repr=False)
    neighbours: np.ndarray | None = field(default=None, repr=False)
    n_short: int = 0

    @property
    def std(self) -> np.ndarray:
        """Kriging standard deviation."""
        return np.sqrt(self.variance)


def _as_model(model):
    """Accept a single structure where a model is expected."""
    from .variogram import Model, Structure

    if isinstance(model, Structure):
        return Model([model])
    if not isinstance(model, Model):
        raise TypeError(f"expected a geosim Model or Structure, got {type(model).__name__}")
    return model


def _check_threads(threads) -> int:
    if int(threads) != threads or threads < 1:
        raise ValueError(f"threads must be a whole number >= 1, got {threads!r}")
    return int(threads)


METHODS = ("simple", "ordinary", "external_drift")


def _check_method(method: str) -> int:
    """The kernels' mode of a method name: 0 simple, 1 ordinary, 2 external drift."""
    if method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}, got {method!r}")
    return METHODS.index(method)


def _check_drift(mode: int, drift, target_drift, n: int, m: int) -> tuple[np.ndarray, np.ndarray, float]:
    """The external drift at the samples and targets (empty arrays for the other methods) and the
    smallest spread of it a neighbourhood must show (a relative ``DRIFT_RTOL`` of its spread at the
    samples)."""
    if mode != 2:
        if drift is not None or target_drift is not None:
            raise ValueError("drift and target_drift are for method='external_drift'")
        return np.empty(0), np.empty(0), 0.0
    if drift is None or target_drift is None:
        raise ValueError("method='external_drift' needs drift (at the samples) and target_drift (at the targets)")
    d = _mean_at(drift, n, "external drift at the samples")
    t = _mean_at(target_drift, m, "external drift at the targets")
    spread = float(np.ptp(d)) if n else 0.0
    if not spread > 0.0:
        raise InputError(f"the external drift has the same value ({d[0]:g}) at every sample" if n else
                         "no samples to krige from", field="drift",
                         fix="give a drift that varies between the samples, or krige without it")
    return d, t, DRIFT_RTOL * spread


def _check_data(coords, values, what: str = "data") -> tuple[np.ndarray, np.ndarray]:
    xyz = as_xyz(coords, f"{what} coordinates")
    z = np.ascontiguousarray(values, dtype=np.float64).reshape(-1)
    if z.shape[0] != xyz.shape[0]:
        raise InputError(f"{xyz.shape[0]} coordinates but {z.shape[0]} values", field="values",
                         fix="give one value per sample")
    for arr, name in ((xyz, "coordinates"), (z, "values")):
        bad = ~np.isfinite(arr if arr.ndim == 1 else arr.sum(axis=1))
        if bad.any():
            row = int(np.argmax(bad))
            # an array position, not a file row: intake has already named the file's rows
            raise InputError(f"the sample at index {row} (counting from 0) has a missing or non-finite "
                             f"value in its {name}", field=name,
                             fix="drop or correct the sample before kriging")
    return xyz, z


def _sample_labels(n: int, sample_ids, hole_ids) -> Callable[[int], str]:
    if sample_ids is not None:
        ids = list(sample_ids)
        return lambda i: str(ids[i])
    if hole_ids is not None:
        holes = np.asarray(hole_ids)
        return lambda i: f"sample {i} (hole {holes[i]})"
    return lambda i: f"sample {i}"


def krige(data_coords, data_values, targets, model, *, method: str = "simple", mean: float = 0.0,
          drift=None, target_drift=None, neighbourhood: Neighbourhood | str = Neighbourhood(), hole_ids=None,
          sample_ids=None, regularization: float | None = None, return_weights: bool = False, threads: int = 1,
          progress: Progress | None = None) -> KrigingResult:
    """Simple, ordinary or external-drift kriging at arbitrary points.

    Parameters
    ----------
    data_coords : (n, d) array_like
        Sample coordinates, d in {2, 3}, metres of a projected CRS.
    data_values : (n,) array_like
        Sample values (for simulation, normal scores).
    targets : (m, d) array_like
        Points to estimate.
    model : geosim.variogram.Model
        Covariance model.
    method : {"simple", "ordinary", "external_drift"}
        Simple kriging uses the known ``mean``; ordinary kriging filters an
        unknown constant mean (weights sum to one); kriging with an external
        drift filters an unknown mean ``a + b s(u)`` linear in a known
        variable ``s`` (see :func:`krige_external_drift`).
    mean : float
        Known mean for simple kriging.
    drift, target_drift : (n,) and (m,) array_like, optional
        The external drift ``s`` at the samples and at the targets
        (``method="external_drift"`` only).
    neighbourhood : Neighbourhood or "global"
        Local search; ``"global"`` puts every sample in one system factored once.
    hole_ids : (n,) array_like, optional
        Drillhole of each sample (per-hole limit; named in errors).
    sample_ids : (n,) sequence, optional
        Labels for error messages (default: row numbers, with the hole).
    regularization : float, optional
        If a system cannot be factored, retry it with ``regularization * C(0)``
        added to its diagonal; the count is in ``n_regularized`` and a note
        goes to the ``geosim`` logger.
    return_weights : bool
        Keep the weights and their sample indices (memory ``m * max_samples``).
    threads : int
        Threads sharing the local systems (the compiled loop releases the GIL);
        results do not depend on it.
    progress : callable, optional
        ``progress(done, total, "kriging nodes")`` after each block.

    Returns
    -------
    KrigingResult

    Raises
    ------
    NotPositiveDefiniteError
        A local covariance matrix is singular and no (or too small a)
        regularization was given; the message names the samples.
    InputError
        External drift: the drift takes one value over a neighbourhood (the
        message names the target and its samples).

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.kriging import krige
    >>> model = geosim.Spherical(1.0, geosim.Anisotropy((100.0, 100.0)))
    >>> pts = np.array([[0.0, 0.0], [50.0, 0.0], [0.0, 50.0]])
    >>> r = krige(pts, [1.0, 2.0, 3.0], [[50.0, 0.0], [500.0, 500.0]], model, method="ordinary")
    >>> np.round(r.estimate, 6).tolist(), round(float(r.variance[0]), 6)
    ([2.0, 2.0], 0.0)
    """
    mode = _check_method(method)
    model = _as_model(model)
    threads = _check_threads(threads)
    d = np.shape(data_coords)[-1]
    xyz, z = _check_data(data_coords, data_values)
    if np.shape(targets)[-1] != d:
        raise ValueError(f"data are {d}-D but targets have {np.shape(targets)[-1]} coordinates")
    txyz = as_xyz(targets, "targets")
    drifts = _check_drift(mode, drift, target_drift, xyz.shape[0], txyz.shape[0])
    labels = _sample_labels(xyz.shape[0], sample_ids, hole_ids)
    if isinstance(neighbourhood, str):
        if neighbourhood != "global":
            raise ValueError(f"neighbourhood must be a Neighbourhood or 'global', got {neighbourhood!r}")
        res = _krige_global(xyz, z, txyz, model, mode, float(mean), regularization, labels,
                            return_weights, progress, drifts)
    else:
        search = DataSearch(xyz[:, :d], neighbourhood, model, hole_ids)
        res = _krige_local(search, z, txyz, model, mode, float(mean), regularization, labels,
                           return_weights, progress, None, None, threads, drifts)
    if res.n_regularized:
        log.warning("kriging: %d local system(s) were singular and were regularized with %g x sill on the "
                    "diagonal", res.n_regularized, regularization)
    return res


def _krige_local(search: DataSearch, z, txyz, model, mode, mean, regularization, labels,
                 return_weights, progress, excl_index, excl_hole, threads=1, drifts=None) -> KrigingResult:
    nb = search.neighbourhood
    m = txyz.shape[0]
    tframe = search.to_frame(txyz)
    excl_i, excl_h = exclusion_arrays(m, excl_index, excl_hole)
    cm = model.compiled()
    c0 = float(model.sill)
    est = np.full(m, np.nan)
    var = np.full(m, np.nan)
    n_used = np.zeros(m, dtype=np.int64)
    n_reg = np.zeros(m, dtype=np.int64)
    k = nb.max_samples
    wts = np.zeros((m if return_weights else 0, k))
    nbr = np.full((m if return_weights else 0, k), -1, dtype=np.int64)
    reg = 0.0 if regularization is None else float(regularization)
    if reg < 0:
        raise ValueError(f"regularization must be >= 0, got {regularization}")
    tol = PIVOT_RTOL * c0
    short = np.zeros(m, dtype=np.bool_)
    drift, tdrift, drift_tol = drifts if drifts is not None else (np.empty(0), np.empty(0), 0.0)
    fewest = max(nb.min_samples, DRIFT_MIN_SAMPLES) if mode == 2 else nb.min_samples
    kernel = krige_rows(mode)

    def part(rows, cand, first, limit):
        # each thread writes its own targets' outputs and has its own failure record
        more = np.zeros(rows.shape[0], dtype=np.bool_)
        fail_info = np.zeros(2)
        fail_nbr = np.full(k, -1, dtype=np.int64)
        failed = kernel(rows, cand, search.xyz, search.frame, z, search.holes, txyz, tframe, excl_i, excl_h, cm,
                        mean, drift, tdrift, drift_tol, c0, limit, fewest, nb.widen, first, short, nb.sectors,
                        nb.sector_limit, nb.hole_limit, tol, reg, est, var, n_used, n_reg, more, wts, nbr, fail_info,
                        fail_nbr)
        if failed >= 0 and fail_info[0] < 0:
            _raise_constant_drift(int(rows[failed]), txyz, fail_nbr, fail_info[1], labels, excl_index is not None)
        if failed >= 0:
            _raise_singular(int(rows[failed]), txyz, search.xyz, fail_nbr, int(fail_info[0]),
                            fail_info[1], labels, model, reg)
        return more

    exclusions = excl_index is not None or excl_hole is not None
    with ThreadPoolExecutor(threads) if threads > 1 else nullcontext() as pool:
        def sweep(targets, first, limit):
            def step(rows, cand):
                rows = targets[rows]
                if pool is None or rows.shape[0] < _MIN_ROWS_PER_THREAD * threads:
                    return part(rows, cand, first, limit)
                cuts = np.linspace(0, rows.shape[0], threads + 1).astype(int)
                jobs = [pool.submit(part, rows[a:b], cand[a:b], first, limit) for a, b in zip(cuts[:-1], cuts[1:])]
                return np.concatenate([j.result() for j in jobs])
            return step

        everything = np.arange(m, dtype=np.int64)
        search.run(tframe, sweep(everything, True, k), exclusions=exclusions, progress=progress,
                   what="kriging nodes", workers=threads)
        if nb.widen and fewest > 0 and short.any():
            # the nearest min_samples wherever they lie: the ellipsoid grown until it holds them
            thin = np.flatnonzero(short)
            search.run(tframe[thin], sweep(thin, False, fewest), exclusions=exclusions,
                       workers=threads, inside=False)
    return KrigingResult(est, var, n_used, METHODS[mode], mean if mode == 0 else math.nan, int(n_reg.sum()),
                         wts if return_weights else None, nbr if return_weights else None, int(short.sum()))


def warm_up(methods: Sequence[str] = ("simple", "ordinary")) -> None:
    """Compile the local kriging kernels of ``methods`` (numba's cache keeps them) through tiny
    runs: kriging and cross-validation with each method.

    The argument types are those of every real run, so the cached code is the code a run
    loads (:func:`geosim.simulation.runner.compile_modules_ahead` calls this in another process
    when a run starts on an empty cache, with the one method the run uses; the data-unit
    moments compile in :func:`geosim.moments.warm_up`).
    """
    from .variogram.anisotropy import Anisotropy
    from .variogram.structures import Nugget, Spherical
    rng = np.random.default_rng(0)
    xy = rng.uniform(0.0, 100.0, (12, 2))
    z = rng.lognormal(0.0, 1.0, 12)
    model = Nugget(0.1) + Spherical(0.9, Anisotropy((60.0, 60.0, 60.0)))
    nb = Neighbourhood(max_samples=6, min_samples=1)
    for method in methods:
        drift = xy[:, 0] if method == "external_drift" else None
        krige(xy, z, xy[:3] + 1.0, model, method=method, neighbourhood=nb, drift=drift,
              target_drift=None if drift is None else drift[:3] + 1.0)
        cross_validate(xy, z, model, method=method, neighbourhood=nb, drift=drift)


def _raise_constant_drift(target, txyz, sel, value, labels, left_out: bool):
    sel = [int(s) for s in sel if s >= 0]
    where = ", ".join(f"{v:.3f}" for v in txyz[target])
    what = f"left-out sample {labels(target)}" if left_out else f"target {target} ({where})"
    shown = ", ".join(labels(s) for s in sel[:5]) + (" ..." if len(sel) > 5 else "")
    raise InputError(f"kriging with an external drift at {what}: the drift has the same value ({value:g}) at all "
                     f"{len(sel)} samples of its neighbourhood ({shown}), so its coefficient cannot be told from "
                     "the mean (the system is singular)", field="drift",
                     fix="search more samples (a larger max_samples or search ranges), or use the secondary as a "
                         "collocated variable instead of a drift")


def _raise_singular(target, txyz, xyz, sel, pivot, value, labels, model, reg, context=None):
    sel = [int(s) for s in sel if s >= 0]
    bad = sel[pivot]
    # the samples closest to the failing one are the likely duplicates
    others = sorted(sel[:pivot], key=lambda s: float(np.linalg.norm(xyz[s] - xyz[bad])))
    close = others[:1]
    ids = [labels(bad)] + [labels(s) for s in close]
    if context is None:
        where = ", ".join(f"{v:.3f}" for v in txyz[target])
        context = f"kriging at target {target} ({where})"
    detail = ""
    if close:
        gap = float(np.linalg.norm(xyz[close[0]] - xyz[bad]))
        detail = f"; {labels(bad)} is {gap:.3g} m from {labels(close[0])}"
        if model.nugget == 0.0:
            detail += " and the model has no nugget"
    if reg > 0:
        detail += f"; regularization {reg:g} x sill was not enough"
    raise NotPositiveDefiniteError(pivot, value, ids, context + detail)


def kernel_of(method: str):
    """The compiled local kriging kernel of ``method`` ("simple", "ordinary", "external_drift")."""
    return krige_rows(_check_method(method))


@functools.cache
def krige_rows(mode: int):
    """The compiled local kriging kernel of ``mode`` (0 simple, 1 ordinary, 2 external drift).

    The mode is a constant of the kernel's closure, so numba drops the code of the other
    modes before typing it: a first run compiles only the estimator it uses, about a fifth
    less than all three (numba's cache keeps each mode under its own name).
    """
    ordinary = mode >= 1

    def _krige_rows(rows, cand, xyz, frame, z, holes, txyz, tframe, excl_index, excl_hole, cm, mean, drift,
                    tdrift, drift_tol, c0, max_samples, min_samples, widen, first, short, sectors, sector_limit,
                    hole_limit, tol, reg, est, var, n_used, n_reg, more, wts, nbr, fail_info, fail_nbr):
        """Select, build, factor and solve for each target in ``rows``; -1 or the failing row position.

        ``mode``: 0 simple, 1 ordinary, 2 external drift (``drift`` at the samples, ``tdrift`` at the
        targets; a neighbourhood whose drift spans no more than ``drift_tol`` fails with
        ``fail_info[0] = -1``).  ``first``: the pass inside the search ellipsoid, which marks targets
        with fewer than ``min_samples`` in ``short`` (and leaves them for the widened pass when ``widen``).
        """
        k = max_samples
        a = np.empty((k, k))
        c = np.empty(k)
        y1 = np.empty(k)
        ys = np.empty(k)
        sel = np.empty(k, dtype=np.int64)
        sector_count = np.empty(8, dtype=np.int64)  # scratch that select_neighbours resets
        hole_buf = np.empty(k, dtype=np.int64)
        hole_count = np.empty(k, dtype=np.int64)
        keep = wts.shape[0] > 0
        for i in range(rows.shape[0]):
            r = rows[i]
            count, need = select_neighbours(cand[i], frame, holes, tframe[r, 0], tframe[r, 1],
                                            tframe[r, 2], excl_index[r], excl_hole[r], k, sectors,
                                            sector_limit, hole_limit, sel, sector_count, hole_buf, hole_count)
            more[i] = need
            if need:
                continue
            n_used[r] = count
            if first and count < min_samples:
                short[r] = True
                if widen:
                    continue
            if count == 0 or (ordinary and count < min_samples):
                # simple kriging without data is the known mean with the full variance
                est[r] = np.nan if ordinary else mean
                var[r] = np.nan if ordinary else c0
                continue
            tx = txyz[r, 0]
            ty = txyz[r, 1]
            tz = txyz[r, 2]
            for attempt in range(2):
                for p in range(count):
                    ip = sel[p]
                    # one inlined cov_lag for both the row and the right-hand side (each site costs
                    # compile time on a first run); C(x_p - t) has the bits of C(t - x_p)
                    for q in range(p + 1):
                        if q < p:
                            ox, oy, oz = xyz[sel[q], 0], xyz[sel[q], 1], xyz[sel[q], 2]
                        else:
                            ox, oy, oz = tx, ty, tz
                        cpq = cov_lag(cm, xyz[ip, 0] - ox, xyz[ip, 1] - oy, xyz[ip, 2] - oz)
                        if q < p:
                            a[p, q] = cpq
                        else:
                            c[p] = cpq
                    a[p, p] = c0 * (1.0 + reg) if attempt == 1 else c0
                # the engine's factorization itself, so that a first run compiles it once for both
                piv = chol_partial(a, count, count, tol)
                if piv < 0:
                    if attempt == 1:
                        n_reg[r] = 1
                    break
                if attempt == 1 or reg <= 0.0:
                    fail_info[0] = piv
                    fail_info[1] = a[piv, piv]
                    for p in range(count):
                        fail_nbr[p] = sel[p]
                    for p in range(count, k):
                        fail_nbr[p] = -1
                    return i
            forward_inplace(a, count, c)
            ycyc = 0.0
            for p in range(count):
                ycyc += c[p] * c[p]
            if mode == 2:
                # drift centred on the neighbourhood's mean: the same system (the constant is a drift
                # function too), without the cancellation of a large offset
                sm = 0.0
                for p in range(count):
                    sm += drift[sel[p]]
                sm /= count
                lo = np.inf
                hi = -np.inf
                for p in range(count):
                    ys[p] = drift[sel[p]] - sm
                    lo = min(lo, ys[p])
                    hi = max(hi, ys[p])
                    y1[p] = 1.0
                s11 = sss = 1.0
                s1s = det = r1 = rs = 0.0
                if hi - lo > drift_tol:
                    forward_inplace(a, count, y1)
                    forward_inplace(a, count, ys)
                    s11 = s1s = sss = 0.0
                    r1 = -1.0
                    rs = sm - tdrift[r]
                    for p in range(count):
                        s11 += y1[p] * y1[p]
                        s1s += y1[p] * ys[p]
                        sss += ys[p] * ys[p]
                        r1 += y1[p] * c[p]
                        rs += ys[p] * c[p]
                    det = s11 * sss - s1s * s1s
                if hi - lo <= drift_tol or det <= PIVOT_RTOL * s11 * sss:
                    fail_info[0] = -1.0
                    fail_info[1] = sm
                    for p in range(count):
                        fail_nbr[p] = sel[p]
                    for p in range(count, k):
                        fail_nbr[p] = -1
                    return i
                # Lagrange multipliers (F' K^-1 F)^-1 (F' K^-1 c - f0), F = [1, s]
                mu1 = (sss * r1 - s1s * rs) / det
                mus = (s11 * rs - s1s * r1) / det
                v = c0 - ycyc + r1 * mu1 + rs * mus
                for p in range(count):
                    c[p] -= mu1 * y1[p] + mus * ys[p]
            elif ordinary:
                for p in range(count):
                    y1[p] = 1.0
                forward_inplace(a, count, y1)
                s11 = 0.0
                s1c = 0.0
                for p in range(count):
                    s11 += y1[p] * y1[p]
                    s1c += y1[p] * c[p]
                mu = (s1c - 1.0) / s11
                v = c0 - ycyc + (s1c - 1.0) * (s1c - 1.0) / s11
                for p in range(count):
                    c[p] -= mu * y1[p]
            else:
                v = c0 - ycyc
            backward_t_inplace(a, count, c)
            e = 0.0
            if ordinary:
                for p in range(count):
                    e += c[p] * z[sel[p]]
            else:
                for p in range(count):
                    e += c[p] * (z[sel[p]] - mean)
                e += mean
            est[r] = e
            var[r] = v if v > 0.0 else 0.0
            if keep:
                for p in range(count):
                    wts[r, p] = c[p]
                    nbr[r, p] = sel[p]
                for p in range(count, k):
                    wts[r, p] = 0.0
                    nbr[r, p] = -1
        return -1
    _krige_rows.__qualname__ = f"_krige_rows_{mode}"
    return njit(cache=True, nogil=True)(_krige_rows)




def _factor_global(xyz, model, regularization, labels):
    """Lower factor of the full data covariance (LAPACK for large n); True if regularized."""
    from .linalg import cholesky

    c0 = float(model.sill)
    cov = model.cov_matrix(xyz)
    tol = PIVOT_RTOL * c0
    for attempt in range(2):
        try:
            return cholesky(cov, tol=tol), attempt == 1
        except NotPositiveDefiniteError as err:
            if attempt == 1 or not regularization:
                _raise_singular(0, None, xyz, np.arange(xyz.shape[0]), err.pivot, err.value, labels,
                                model, regularization or 0.0, context="kriging with every sample "
                                "(global neighbourhood)")
            cov[np.diag_indices_from(cov)] += float(regularization) * c0
    raise AssertionError("unreachable")


def _krige_global(xyz, z, txyz, model, mode, mean, regularization, labels, return_weights,
                  progress, drifts) -> KrigingResult:
    from scipy.linalg import solve_triangular

    n, m = xyz.shape[0], txyz.shape[0]
    ordinary = mode >= 1
    c0 = float(model.sill)
    if n == 0:
        raise InputError("no samples to krige from", field="values", fix="give at least one sample")
    factor, regularized = _factor_global(xyz, model, regularization, labels)
    yz = solve_triangular(factor, z if ordinary else z - mean, lower=True)
    y1 = solve_triangular(factor, np.ones(n), lower=True)
    s11 = float(y1 @ y1)
    if mode == 2:  # drift functions F = [1, s - mean s]: G = L^-1 F, multipliers (G'G)^-1 (G' y - f0)
        drift, tdrift, _ = drifts
        centre = float(drift.mean())
        g = solve_triangular(factor, np.column_stack([np.ones(n), drift - centre]), lower=True)
        gg_inv = np.linalg.inv(g.T @ g)
        gz = g.T @ yz
    est, var = np.empty(m), np.empty(m)
    wts = np.empty((m, n)) if return_weights else None
    block = max(1, (1 << 21) // n)
    for start in range(0, m, block):
        stop = min(m, start + block)
        yc = solve_triangular(factor, model.cov_matrix(xyz, txyz[start:stop]), lower=True)
        v = c0 - np.einsum("ij,ij->j", yc, yc)
        if mode == 2:
            r = g.T @ yc - np.vstack([np.ones(stop - start), tdrift[start:stop] - centre])
            mu = gg_inv @ r
            est[start:stop] = yc.T @ yz - mu.T @ gz
            v += np.einsum("ij,ij->j", r, mu)
            yc -= g @ mu
        elif ordinary:
            s1c = y1 @ yc
            mu = (s1c - 1.0) / s11
            est[start:stop] = yc.T @ yz - mu * float(y1 @ yz)
            v += (s1c - 1.0) ** 2 / s11
            yc -= y1[:, None] * mu[None, :]
        else:
            est[start:stop] = mean + yc.T @ yz
        var[start:stop] = np.maximum(v, 0.0)
        if return_weights:
            wts[start:stop] = solve_triangular(factor, yc, lower=True, trans="T").T
        if progress is not None:
            progress(stop, m, "kriging nodes")
    nbr = np.broadcast_to(np.arange(n, dtype=np.int64), (m, n)).copy() if return_weights else None
    return KrigingResult(est, var, np.full(m, n, dtype=np.int64), METHODS[mode], math.nan if ordinary else mean,
                         m if regularized else 0, wts, nbr)


def krige_grid(data_coords, data_values, grid, model, *, domain=None, method: str = "simple",
               mean: float = 0.0, neighbourhood: Neighbourhood | str = Neighbourhood(), hole_ids=None,
               sample_ids=None, regularization: float | None = None, threads: int = 1,
               progress: Progress | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Kriging estimate and variance at the active nodes of a grid.

    Parameters
    ----------
    data_coords, data_values, model, method, mean, neighbourhood, hole_ids, sample_ids, \
regularization, threads, progress
        As for :func:`krige`.
    grid : geosim.grid.Grid
        Nodes to estimate; nodes outside ``grid.mask`` are left NaN.
    domain : shapely (multi)polygon, optional
        Further clips the grid (node centres inside the polygon are kept).

    Returns
    -------
    estimate, variance : ndarray of ``grid.shape``
        NaN outside the domain and where too few samples were found, ready for
        the raster writer, e.g. ``geosim.io.geotiff.write_raster(path,
        numpy.stack([estimate, variance]), grid, descriptions=[...])``.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.kriging import krige_grid
    >>> g = geosim.Grid(0.0, 0.0, (10.0, 10.0), (4, 5))
    >>> model = geosim.Exponential(1.0, geosim.Anisotropy((60.0, 60.0)))
    >>> est, var = krige_grid([[25.0, 15.0]], [2.0], g, model, mean=1.0)
    >>> est.shape, bool(np.all(var <= 1.0))
    ((4, 5), True)
    """
    if domain is not None:
        grid = grid.clip_to_polygon(domain)
    coords = grid.coords()
    if np.asarray(data_coords).shape[-1] != grid.ndim:
        raise ValueError(f"data are {np.asarray(data_coords).shape[-1]}-D but the grid is {grid.ndim}-D")
    res = krige(data_coords, data_values, coords, model, method=method, mean=mean,
                neighbourhood=neighbourhood, hole_ids=hole_ids, sample_ids=sample_ids,
                regularization=regularization, threads=threads, progress=progress)
    est = np.full(grid.shape, np.nan)
    var = np.full(grid.shape, np.nan)
    est[grid.mask] = res.estimate
    var[grid.mask] = res.variance
    return est, var


def _mean_at(values, n: int, what: str) -> np.ndarray:
    """A per-location mean or secondary value: n finite floats, else an InputError naming ``what``."""
    a = np.ascontiguousarray(values, dtype=np.float64).reshape(-1)
    if a.shape[0] != n:
        raise InputError(f"{a.shape[0]} values of {what} for {n} locations", field=what,
                         fix="give one value per location, in the same order")
    bad = ~np.isfinite(a)
    if bad.any():
        i = int(np.argmax(bad))
        raise InputError(f"{int(bad.sum())} location(s) have a missing or non-finite {what}, the first at "
                         f"index {i} (counting from 0)", field=what,
                         fix="fill the gap in the mean or secondary grid, or leave those locations out")
    return a


def krige_varying_mean(data_coords, data_values, targets, model, data_mean, target_mean, *,
                       neighbourhood: Neighbourhood | str = Neighbourhood(), hole_ids=None, sample_ids=None,
                       regularization: float | None = None, return_weights: bool = False, threads: int = 1,
                       progress: Progress | None = None) -> KrigingResult:
    """Simple kriging with a locally varying mean.

    The mean ``m(u)`` is known at every sample and target (a trend surface, a
    mean grid).  The residuals ``z - m`` are kriged with mean zero and
    ``model`` (the residual covariance) and the mean is added back:
    ``z*(u) = m(u) + sum_a w_a (z(u_a) - m(u_a))``, with the simple-kriging
    weights and variance (Goovaerts 1997, Geostatistics for Natural Resources
    Evaluation, section 6.1, simple kriging with varying local means).

    Parameters
    ----------
    data_coords, data_values, targets, model, neighbourhood, hole_ids, sample_ids, regularization, \
return_weights, threads, progress
        As for :func:`krige`.
    data_mean : (n,) array_like
        Mean at each sample.
    target_mean : (m,) array_like
        Mean at each target.

    Returns
    -------
    KrigingResult
        ``method`` is ``"simple"``; ``mean`` is NaN (the mean varies).  A target
        without samples in its search gets its own mean and the sill.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.kriging import krige_varying_mean
    >>> model = geosim.Exponential(1.0, geosim.Anisotropy((60.0, 60.0)))
    >>> r = krige_varying_mean([[0.0, 0.0]], [3.0], [[0.0, 0.0], [1e4, 0.0]], model, [2.0], [2.0, 5.0])
    >>> np.round(r.estimate, 6).tolist()
    [3.0, 5.0]
    """
    xyz, z = _check_data(data_coords, data_values)
    dm = _mean_at(data_mean, z.shape[0], "mean at the samples")
    tm = _mean_at(target_mean, np.shape(np.atleast_2d(targets))[0], "mean at the targets")
    res = krige(data_coords, z - dm, targets, model, method="simple", mean=0.0, neighbourhood=neighbourhood,
                hole_ids=hole_ids, sample_ids=sample_ids, regularization=regularization,
                return_weights=return_weights, threads=threads, progress=progress)
    return replace(res, estimate=res.estimate + tm, mean=math.nan)


def krige_external_drift(data_coords, data_values, targets, model, data_drift, target_drift, *,
                         neighbourhood: Neighbourhood | str = Neighbourhood(), hole_ids=None, sample_ids=None,
                         regularization: float | None = None, return_weights: bool = False, threads: int = 1,
                         progress: Progress | None = None) -> KrigingResult:
    """Kriging with an external drift.

    The mean of the variable is ``a + b s(u)``, linear in a variable ``s`` known
    at every sample and target (a secondary survey), with ``a`` and ``b``
    unknown and free to change from one neighbourhood to the next.  The weights
    filter both: they sum to one and reproduce the drift at the target,
    ``sum_a w_a s(u_a) = s(u)``, two Lagrange constraints on the ordinary
    kriging system of ``model``, the covariance of the residual from the drift
    (Wackernagel 2003, Multivariate Geostatistics, 3rd ed., chapter 38 on
    external drift, from memory; Goovaerts 1997, Geostatistics for Natural
    Resources Evaluation, section 6.1.3, from memory).  The variance is the
    ordinary-kriging variance plus the price of not knowing ``b``.

    Parameters
    ----------
    data_coords, data_values, targets, model, neighbourhood, hole_ids, sample_ids, regularization, \
return_weights, threads, progress
        As for :func:`krige`.
    data_drift : (n,) array_like
        The drift variable at each sample.
    target_drift : (m,) array_like
        The drift variable at each target.

    Returns
    -------
    KrigingResult
        ``method`` is ``"external_drift"``.  The neighbourhood's
        ``min_samples`` is raised to ``DRIFT_MIN_SAMPLES`` (3); targets with
        fewer samples (after widening, if asked) get NaN.

    Raises
    ------
    InputError
        The drift is the same at every sample, or over a target's
        neighbourhood: its coefficient cannot be told from the mean.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.kriging import krige_external_drift
    >>> model = geosim.Exponential(1.0, geosim.Anisotropy((60.0, 60.0)))
    >>> # values exactly 1 + s: the estimate is 1 + s at the target, whatever the covariance
    >>> r = krige_external_drift([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0]], [1.0, 3.0, 5.0], [[5.0, 5.0]], model,
    ...                          [0.0, 2.0, 4.0], [3.0])
    >>> np.round(r.estimate, 6).tolist()
    [4.0]
    """
    return krige(data_coords, data_values, targets, model, method="external_drift", drift=data_drift,
                 target_drift=target_drift, neighbourhood=neighbourhood, hole_ids=hole_ids, sample_ids=sample_ids,
                 regularization=regularization, return_weights=return_weights, threads=threads, progress=progress)


@dataclass(frozen=True)
class CokrigingResult:
    """Collocated simple cokriging at a set of targets.

    Attributes
    ----------
    estimate, variance : (m,) ndarray
        Cokriged value and cokriging variance.
    secondary_weight : (m,) ndarray
        Weight of the collocated secondary residual ``s - secondary_mean``.
    primary_factor : (m,) ndarray
        The primary weights are the simple-kriging weights times this factor
        (``1 - secondary_weight * b``, see :func:`collocated_update`).
    kriging : KrigingResult
        The primary-only simple kriging the update started from (its weights
        and neighbours when asked for).
    rho : float
        Correlation coefficient between primary and secondary.
    """

    estimate: np.ndarray
    variance: np.ndarray
    secondary_weight: np.ndarray
    primary_factor: np.ndarray
    kriging: KrigingResult = field(repr=False)
    rho: float

    @property
    def std(self) -> np.ndarray:
        """Cokriging standard deviation."""
        return np.sqrt(self.variance)

    @property
    def weights(self) -> np.ndarray | None:
        """Primary weights (with ``return_weights=True``), aligned with ``kriging.neighbours``."""
        w = self.kriging.weights
        return None if w is None else w * self.primary_factor[:, None]


def _check_rho(rho) -> float:
    r = float(rho)
    if not -1.0 < r < 1.0:
        raise InputError(f"the correlation coefficient between primary and secondary is {rho!r}",
                         field="rho", fix="give a value strictly between -1 and 1")
    return r


# fewer collocated pairs than this give a correlation too uncertain to use: its standard
# error is about (1 - rho^2) / sqrt(n), 0.2 or more below 20 pairs (common practice, no source)
MIN_COLLOCATED_PAIRS = 20


def collocated_correlation(primary, secondary, *, min_pairs: int = MIN_COLLOCATED_PAIRS) -> tuple[float, int]:
    """Correlation coefficient of primary and secondary values at the same locations.

    For the Markov model both are normal scores; pairs where either value is
    missing (NaN: e.g. a sample outside the secondary grid) are left out.

    Parameters
    ----------
    primary, secondary : (n,) array_like
        Values at the samples.
    min_pairs : int
        Fewest complete pairs accepted.

    Returns
    -------
    rho, n_pairs : float, int
        Pearson correlation coefficient and the number of pairs it rests on.

    Raises
    ------
    InputError
        Fewer than ``min_pairs`` complete pairs, a constant variable, or a
        correlation of +-1 (the Markov system would be singular).

    Examples
    --------
    >>> from geosim.kriging import collocated_correlation
    >>> collocated_correlation([0.0, 1.0, 2.0, 3.0], [0.0, 1.0, 1.0, 3.5], min_pairs=3)[1]
    4
    """
    p = np.asarray(primary, dtype=np.float64).reshape(-1)
    s = np.asarray(secondary, dtype=np.float64).reshape(-1)
    if p.shape != s.shape:
        raise InputError(f"{p.shape[0]} primary values but {s.shape[0]} secondary values", field="secondary",
                         fix="give the secondary value at every sample (NaN where it is unknown)")
    both = np.isfinite(p) & np.isfinite(s)
    n = int(both.sum())
    if n < min_pairs:
        raise InputError(f"only {n} samples have both a primary and a secondary value; at least {min_pairs} "
                         "are needed to estimate their correlation", field="rho",
                         fix="give the correlation coefficient yourself, or extend the secondary grid over "
                             "more samples")
    dp = p[both] - p[both].mean()
    ds = s[both] - s[both].mean()
    norm = math.sqrt(float(dp @ dp) * float(ds @ ds))
    if norm == 0.0:
        raise InputError("the primary or the secondary value is the same at every collocated sample, so "
                         "their correlation is undefined", field="rho",
                         fix="give the correlation coefficient yourself")
    rho = float(dp @ ds) / norm
    if abs(rho) >= 1.0 - 1e-12:
        raise InputError(f"primary and secondary are perfectly correlated (rho = {rho:.6f}) at the "
                         f"{n} collocated samples", field="rho",
                         fix="use the secondary as the primary, or give a coefficient strictly between -1 and 1")
    return rho, n


def collocated_update(estimate, variance, secondary, rho: float, sill: float, *,
                      secondary_variance: float = 1.0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Add a collocated secondary value to simple-kriging results, Markov model.

    Under the Markov model of Almeida and Journel (1994, Mathematical Geology
    26(5)) the cross-covariance is proportional to the primary covariance,
    ``C_ps(h) = b C_p(h)`` with ``b = rho sqrt(secondary_variance / sill)``.
    Then, given the primary value at the target, the collocated secondary
    ``s = b y + e`` carries an error ``e`` of variance
    ``secondary_variance (1 - rho^2)`` that is independent of every primary
    value, and the collocated cokriging system (the simple-kriging system
    bordered by one row for ``s``; Goovaerts 1997, Geostatistics for Natural
    Resources Evaluation, section 6.2) reduces to one Gaussian update of the
    simple-kriging estimate ``y`` and variance ``v``:

    ``g = b v / (b^2 v + secondary_variance (1 - rho^2))``,
    estimate ``y + g (s - b y)``, variance ``v (1 - g b)``; the primary weights
    are the simple-kriging weights times ``1 - g b`` and ``g`` is the secondary
    weight.  With ``rho = 0`` the inputs come back unchanged, bit for bit.

    Parameters
    ----------
    estimate, variance : (m,) array_like
        Simple-kriging estimate and variance of the primary residual (mean zero).
    secondary : (m,) array_like
        Secondary residual at the targets (its mean removed).
    rho : float
        Correlation coefficient between primary and secondary, in (-1, 1).
    sill : float
        Primary variance ``C_p(0)`` (the model's sill).
    secondary_variance : float
        Secondary variance ``C_s(0)``; 1 for normal scores.

    Returns
    -------
    estimate, variance, secondary_weight : (m,) ndarray
    """
    rho = _check_rho(rho)
    y = np.asarray(estimate, dtype=np.float64)
    v = np.asarray(variance, dtype=np.float64)
    if rho == 0.0:
        return y.copy(), v.copy(), np.zeros_like(y)
    if not sill > 0 or not secondary_variance > 0:
        raise ValueError(f"sill and secondary_variance must be positive, got {sill!r} and {secondary_variance!r}")
    s = np.asarray(secondary, dtype=np.float64)
    b = rho * math.sqrt(secondary_variance / sill)
    g = b * v / (b * b * v + secondary_variance * (1.0 - rho * rho))
    return y + g * (s - b * y), np.maximum(v * (1.0 - g * b), 0.0), g


def collocated_cokrige(data_coords, data_values, targets, model, secondary, rho: float, *, mean: float = 0.0,
                       data_mean=None, target_mean=None, secondary_mean: float = 0.0,
                       secondary_variance: float = 1.0, neighbourhood: Neighbourhood | str = Neighbourhood(),
                       hole_ids=None, sample_ids=None, regularization: float | None = None,
                       return_weights: bool = False, threads: int = 1,
                       progress: Progress | None = None) -> CokrigingResult:
    """Collocated simple cokriging under the Markov model.

    The primary samples found by the search plus the secondary value at the
    target itself (Almeida and Journel 1994, Mathematical Geology 26(5);
    Goovaerts 1997, section 6.2).  For simulation both variables are normal
    scores (``mean = secondary_mean = 0``, ``secondary_variance = 1``) and
    ``rho`` is the correlation of the normal scores.  See
    :func:`collocated_update` for the equations.

    Parameters
    ----------
    data_coords, data_values, targets, model, neighbourhood, hole_ids, sample_ids, regularization, \
return_weights, threads, progress
        As for :func:`krige`.
    secondary : (m,) array_like
        Secondary value at each target.
    rho : float
        Correlation coefficient between primary and secondary, in (-1, 1).
    mean : float
        Known primary mean (ignored when ``data_mean`` and ``target_mean`` are given).
    data_mean, target_mean : array_like, optional
        A locally varying primary mean at the samples and the targets, as for
        :func:`krige_varying_mean`.
    secondary_mean, secondary_variance : float
        Mean and variance of the secondary variable.

    Returns
    -------
    CokrigingResult

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.kriging import collocated_cokrige
    >>> model = geosim.Exponential(1.0, geosim.Anisotropy((60.0, 60.0)))
    >>> r = collocated_cokrige([[0.0, 0.0]], [1.0], [[1e4, 0.0]], model, [2.0], 0.5)
    >>> round(float(r.estimate[0]), 6), round(float(r.variance[0]), 6)
    (1.0, 0.75)
    """
    rho = _check_rho(rho)
    m = np.shape(np.atleast_2d(targets))[0]
    s = _mean_at(secondary, m, "secondary value at the targets") - float(secondary_mean)
    varying = data_mean is not None or target_mean is not None
    if varying and (data_mean is None or target_mean is None):
        raise ValueError("give both data_mean and target_mean, or neither")
    common = dict(neighbourhood=neighbourhood, hole_ids=hole_ids, sample_ids=sample_ids,
                  regularization=regularization, return_weights=return_weights, threads=threads,
                  progress=progress)
    if varying:
        res = krige_varying_mean(data_coords, data_values, targets, model, data_mean, target_mean, **common)
        base = _mean_at(target_mean, m, "mean at the targets")
    else:
        res = krige(data_coords, data_values, targets, model, method="simple", mean=mean, **common)
        base = float(mean)
    y, v, g = collocated_update(res.estimate - base, res.variance, s, rho, float(_as_model(model).sill),
                                secondary_variance=secondary_variance)
    b = rho * math.sqrt(secondary_variance / float(_as_model(model).sill))
    return CokrigingResult(y + base, v, g, 1.0 - g * b, res, rho)


@dataclass(frozen=True)
class CrossValidationResult:
    """Leave-one-out cross-validation of a model and a neighbourhood.

    ``error = estimate - value`` (positive: the kriging over-estimates), and
    ``standardized_error = error / kriging std``.  For a model and neighbourhood
    that suit the data, the mean error is near 0 and the mean standardized
    squared error near 1 (it exceeds 1 when the kriging variance is too small).

    :meth:`in_data_units` gives the same cross-validation back-transformed to
    data units (what a geologist reads), with the estimate the conditional mean.

    Attributes
    ----------
    coords : (n, d) ndarray
    values, estimate, variance : (n,) ndarray
        NaN estimate/variance where too few other samples were found.  In data
        units ``estimate`` is the back-transformed conditional mean and
        ``variance`` the conditional variance.
    n_used : (n,) int64 ndarray
    sample_ids : list of str
    method : str
    leave_out : str
        ``"sample"`` or ``"hole"`` (every sample of the same hole left out).
    model_text : str
    units : str
        Units of ``values`` and ``estimate``: ``"normal score"`` for normal scores,
        the data's units otherwise ("" when unknown).
    weights : (n,) ndarray, optional
        Declustering weights; :meth:`summary` then adds declustered statistics.
    scale : str
        ``"normal scores"``, ``"data units"`` or ``"as given"``.
    n_short : int
        Samples whose search held fewer than ``min_samples`` other samples (see
        :class:`~geosim.search.Neighbourhood`).
    """

    coords: np.ndarray
    values: np.ndarray
    estimate: np.ndarray
    variance: np.ndarray
    n_used: np.ndarray
    sample_ids: list
    method: str
    leave_out: str = "sample"
    model_text: str = ""
    units: str = ""
    weights: np.ndarray | None = None
    scale: str = "as given"
    n_short: int = 0

    @property
    def error(self) -> np.ndarray:
        return self.estimate - self.values

    @property
    def standardized_error(self) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.variance > 0, self.error / np.sqrt(self.variance), np.nan)

    @property
    def mean_error(self) -> float:
        return _nanmean(self.error)

    @property
    def rmse(self) -> float:
        return math.sqrt(_nanmean(self.error ** 2))

    @property
    def mean_standardized_squared_error(self) -> float:
        return _nanmean(self.standardized_error ** 2)

    def summary(self) -> dict:
        """Summary statistics over the samples that got an estimate.

        With ``weights`` the declustered mean of the values and of the estimates,
        the declustered mean error and RMSE follow the plain ones (weights of the
        estimated samples, renormalized to sum 1).
        """
        ok = np.isfinite(self.estimate)
        corr = (float(np.corrcoef(self.values[ok], self.estimate[ok])[0, 1])
                if ok.sum() > 2 and np.std(self.estimate[ok]) > 0 else math.nan)
        out = {
            "scale": self.scale, "units": self.units,
            "samples": int(self.values.shape[0]),
            "estimated": int(ok.sum()),
            "mean_value": _nanmean(np.where(ok, self.values, np.nan)),
            "mean_estimate": _nanmean(self.estimate),
            "below_min_samples": int(self.n_short),
            "mean_error": self.mean_error,
            "rmse": self.rmse,
            "mean_standardized_error": _nanmean(self.standardized_error),
            "mean_standardized_squared_error": self.mean_standardized_squared_error,
            "correlation": corr,
        }
        if self.weights is not None:
            w = np.where(ok, np.asarray(self.weights, dtype=float), 0.0)
            total = w.sum()
            w = w / total if total > 0 else w * math.nan
            err = np.where(ok, self.error, 0.0)
            out.update({"declustered_mean_value": float(w @ np.where(ok, self.values, 0.0)),
                        "declustered_mean_estimate": float(w @ np.where(ok, self.estimate, 0.0)),
                        "declustered_mean_error": float(w @ err),
                        "declustered_rmse": math.sqrt(float(w @ (err * err)))})
        return out

    def in_data_units(self, transform, values, *, units: str = "") -> CrossValidationResult:
        """The same cross-validation in data units.

        ``self`` holds normal scores; each left-out sample's kriged score ``m`` and
        kriging variance ``v`` define its conditional distribution
        ``T^-1(Y), Y ~ N(m, v)`` under the multi-Gaussian model (Verly 1983, "The
        multigaussian approach and its applications to the estimation of local
        reserves", Mathematical Geology 15(2)).  The estimate is that
        distribution's mean and the variance its variance
        (:func:`multigaussian_moments`); ``error = estimate - value`` in data units.
        The standardized error there is error / conditional standard deviation,
        which is not normal: judge standardized errors on the scores.

        Parameters
        ----------
        transform : object with ``inverse(scores)``
            The fitted transform from data units to normal scores.
        values : (n,) array
            The samples in data units, in the order of the scores.
        units : str
            Units of the data.
        """
        v = np.asarray(values, dtype=float).ravel()
        if v.shape != self.values.shape:
            raise ValueError(f"{v.size} values for {self.values.size} cross-validated samples")
        mean, var = multigaussian_moments(transform, self.estimate, self.variance)
        return CrossValidationResult(self.coords, v, mean, var, self.n_used, self.sample_ids, self.method,
                                     self.leave_out, self.model_text, units, self.weights, "data units",
                                     self.n_short)


def _nanmean(a: np.ndarray) -> float:
    a = a[np.isfinite(a)]
    return float(a.mean()) if a.size else math.nan


def cross_validate(data_coords, data_values, model, *, method: str = "ordinary", mean: float = 0.0,
                   drift=None, neighbourhood: Neighbourhood | str = Neighbourhood(), hole_ids=None,
                   sample_ids: Sequence | None = None, leave_out: str = "sample",
                   regularization: float | None = None, threads: int = 1,
                   progress: Progress | None = None) -> CrossValidationResult:
    """Leave-one-out cross-validation: krige each sample from the others.

    Parameters
    ----------
    data_coords, data_values, model, method, mean, neighbourhood, hole_ids, regularization, threads, \
progress
        As for :func:`krige`.
    drift : (n,) array_like, optional
        The external drift at the samples (``method="external_drift"``); each
        left-out sample is kriged with its own drift value as the target's.
    sample_ids : sequence, optional
        Labels for the table (default: ``hole#row`` or the row number).
    leave_out : {"sample", "hole"}
        Leave out the sample alone, or every sample of its drillhole (needs
        ``hole_ids``; more honest for composites along a hole).

    Returns
    -------
    CrossValidationResult

    Notes
    -----
    With ``neighbourhood="global"`` no system is refactored: with ``B`` the
    inverse of the (ordinary, external drift: bordered) data covariance matrix and ``r = B z``,
    the left-out errors are ``-(B_GG)^-1 r_G`` and their covariance
    ``(B_GG)^-1`` for each left-out group ``G`` (Dubrule, 1983, Cross validation
    of kriging in a unique neighborhood, Mathematical Geology 15(6), 687-699).

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.kriging import cross_validate
    >>> rng = np.random.default_rng(0)
    >>> xy = rng.uniform(0, 100, size=(30, 2))
    >>> model = geosim.Nugget(0.2) + geosim.Spherical(0.8, geosim.Anisotropy((60.0, 60.0)))
    >>> cv = cross_validate(xy, rng.normal(size=30), model)
    >>> cv.error.shape, sorted(cv.summary())[:2]
    ((30,), ['below_min_samples', 'correlation'])
    """
    mode = _check_method(method)
    if leave_out not in ("sample", "hole"):
        raise ValueError(f"leave_out must be 'sample' or 'hole', got {leave_out!r}")
    if leave_out == "hole" and hole_ids is None:
        raise ValueError("leave_out='hole' needs hole_ids")
    model = _as_model(model)
    d = np.asarray(data_coords).shape[-1]
    xyz, z = _check_data(data_coords, data_values)
    n = xyz.shape[0]
    drifts = _check_drift(mode, drift, drift, n, n)
    labels = _sample_labels(n, sample_ids, hole_ids)
    if isinstance(neighbourhood, str):
        if neighbourhood != "global":
            raise ValueError(f"neighbourhood must be a Neighbourhood or 'global', got {neighbourhood!r}")
        est, var = _loo_global(xyz, z, model, mode, float(mean), regularization, labels,
                               hole_ids if leave_out == "hole" else None, drifts[0])
        if progress is not None:
            progress(n, n, "kriging nodes")
        n_used = np.full(n, n - 1, dtype=np.int64)
        if leave_out == "hole":
            _, inverse, counts = np.unique(np.asarray(hole_ids), return_inverse=True, return_counts=True)
            n_used = (n - counts[inverse.ravel()]).astype(np.int64)
    else:
        search = DataSearch(xyz[:, :d], neighbourhood, model, hole_ids)
        res = _krige_local(search, z, xyz, model, mode, float(mean), regularization, labels, False,
                           progress, np.arange(n), search.holes if leave_out == "hole" else None,
                           _check_threads(threads), drifts)
        if res.n_regularized:
            log.warning("cross-validation: %d local system(s) were singular and were regularized with %g x "
                        "sill on the diagonal", res.n_regularized, regularization)
        est, var, n_used = res.estimate, res.variance, res.n_used
    short = 0 if isinstance(neighbourhood, str) else res.n_short  # a global system holds every sample
    return CrossValidationResult(xyz[:, :d].copy(), z.copy(), est, var, n_used,
                                 [labels(i) for i in range(n)], METHODS[mode], leave_out, model.text(d),
                                 n_short=short)


def _loo_global(xyz, z, model, mode, mean, regularization, labels, hole_ids, drift=None):
    from scipy.linalg import cho_solve

    n = xyz.shape[0]
    factor, _ = _factor_global(xyz, model, regularization, labels)
    kinv = cho_solve((factor, True), np.eye(n))
    if mode == 2:
        # the same for the drift functions F = [1, s]: K^-1 - K^-1 F (F' K^-1 F)^-1 F' K^-1
        f = np.column_stack([np.ones(n), drift - drift.mean()])
        kf = kinv @ f
        b = kinv - kf @ np.linalg.solve(f.T @ kf, kf.T)
        resid = b @ z
    elif mode == 1:
        # inverse of the bordered matrix [[K, 1], [1', 0]], top-left block, by the Schur complement
        k1 = kinv.sum(axis=1)
        b = kinv - np.outer(k1, k1) / k1.sum()
        resid = b @ z
    else:
        b = kinv
        resid = b @ (z - mean)
    if hole_ids is None:
        diag = np.diag(b)
        return z - resid / diag, 1.0 / diag
    est, var = np.empty(n), np.empty(n)
    holes = np.asarray(hole_ids)
    for h in np.unique(holes):
        g = np.nonzero(holes == h)[0]
        cov_err = np.linalg.inv(b[np.ix_(g, g)])
        est[g] = z[g] - cov_err @ resid[g]
        var[g] = np.diag(cov_err)
    return est, var
