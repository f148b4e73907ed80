"""Fitting nested covariance models to experimental semivariograms.

Weighted least squares (``scipy.optimize.least_squares``, trust-region with
bounds) over the parameters of a template :class:`~geosim.variogram.Model`.

Parameters are named ``"<j>.<field>"`` where ``j`` indexes
``template.structures`` (from 0) and the field is ``sill``, ``major``,
``minor``, ``vertical`` (the three ranges, metres) or the structure's shape
parameter (``smoothness`` for Matern).  Orientations (azimuth, dip, rake) are
kept from the template: choose them from a variogram map or geology, then fit.

Which ranges are free: with only omnidirectional variograms, each structure's
ranges scale together (``major`` is free, ``minor`` and ``vertical`` keep their
template ratios to it).  With directional (or down-hole) variograms, an axis is
free when some direction lies within 30 degrees of it; the other axes keep
their template ratio to ``major``.  Anything named in ``fixed`` keeps its
template value.

Weightings, for bin ``k`` with ``N_k`` pairs, experimental ``g_k`` and model
``gamma_k``:

* ``"cressie"``: residual ``sqrt(N_k) (g_k / gamma_k - 1)``, Cressie (1985),
  Fitting variogram models by weighted least squares, Mathematical Geology 17(5)
  (the criterion from memory);
* ``"pairs"``: residual ``sqrt(N_k) (g_k - gamma_k)``;
* ``"equal"``: residual ``g_k - gamma_k``.

Omnidirectional variograms are compared with the model averaged over evenly
spread directions (horizontal azimuths in 2-D, a hemisphere in 3-D); for an
isotropic model that average is exact.
"""
from __future__ import annotations

import math
import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from .anisotropy import Anisotropy, axes
from .experimental import ExperimentalVariogram
from .model import Model

log = logging.getLogger(__name__)

WEIGHTINGS = ("cressie", "pairs", "equal")
_COVERED = math.cos(math.radians(30.0))
# warn when the total sill is beyond x1.5 or /1.5 the sample variance (common practice, no source)
_SILL_FACTOR = 1.5


@dataclass
class FitResult:
    """Outcome of :func:`fit_model`.

    Attributes
    ----------
    model_ : Model
        The fitted model.
    params_ : dict
        Every parameter (free, tied and fixed) by name, as fitted.
    free_ : tuple of str
        Names of the parameters the fit adjusted.
    wrss_ : float
        Weighted residual sum of squares at the optimum (constraint penalty excluded).
    rmse_ : float
        Root mean square of ``g_k - gamma_k`` over the bins used (unweighted,
        in the units of the semivariance).
    rmse_by_direction_ : dict
        The same per experimental variogram, keyed by its label.
    nbins_ : int
        Bins used in the fit.
    success_ : bool
        Whether the optimizer reported convergence.
    message_ : str
        The optimizer's message.
    warnings_ : list of str
        Signs of a degenerate fit (also logged as notes on the ``geosim`` logger).
    weighting : str
        The weighting used.
    ndim_ : int
        2 or 3: the dimension of the data fitted (the model's text shows what applies).
    """

    model_: Model
    params_: dict
    free_: tuple
    wrss_: float
    rmse_: float
    rmse_by_direction_: dict
    nbins_: int
    success_: bool
    message_: str
    warnings_: list = field(default_factory=list)
    weighting: str = "cressie"
    ndim_: int = 3

    def to_dict(self) -> dict:
        """Plain data for JSON reports: the model as ``to_dicts()``, parameters, fit figures, warnings."""
        return {"model": self.model_.to_dicts(), "model_text": self.model_.text(self.ndim_), "params": dict(self.params_),
                "free": list(self.free_), "weighting": self.weighting, "wrss": self.wrss_, "rmse": self.rmse_,
                "rmse_by_direction": dict(self.rmse_by_direction_), "nbins": self.nbins_,
                "success": self.success_, "message": self.message_, "warnings": list(self.warnings_)}

    def __str__(self) -> str:
        lines = ["fitted model:", self.model_.text(self.ndim_),
                 f"weighting: {self.weighting}; bins used: {self.nbins_}; "
                 f"free parameters: {len(self.free_)}",
                 f"weighted RSS: {self.wrss_:.6g}; RMSE: {self.rmse_:.6g}"]
        for label, v in self.rmse_by_direction_.items():
            lines.append(f"  RMSE {label}: {v:.6g}")
        lines += [f"warning: {w}" for w in self.warnings_]
        return "\n".join(lines)


def parameter_names(template: Model) -> list[str]:
    """All parameter names of a template model, in order.

    Examples
    --------
    >>> import geosim
    >>> from geosim.variogram import Nugget, Spherical, parameter_names
    >>> parameter_names(Nugget(0.2) + Spherical(0.8, 100.0))
    ['0.sill', '1.sill', '1.major', '1.minor', '1.vertical']
    """
    names = []
    for j, s in enumerate(template.structures):
        names.append(f"{j}.sill")
        if s.kind != "nugget":
            names += [f"{j}.major", f"{j}.minor", f"{j}.vertical"]
        if s.param_name:
            names.append(f"{j}.{s.param_name}")
    return names


def fit_model(experimental: ExperimentalVariogram | Sequence[ExperimentalVariogram], template: Model, *,
              weighting: str = "cressie", fixed: Sequence[str] = (),
              bounds: Mapping[str, tuple[float, float]] | None = None, total_sill: float | None = None,
              min_pairs: int = 30) -> FitResult:
    """Fit the parameters of ``template`` to one or several experimental variograms.

    Parameters
    ----------
    experimental : ExperimentalVariogram or sequence of them
        Several directions are fitted jointly (one set of parameters).
    template : Model
        Structures, orientations and starting values.
    weighting : {"cressie", "pairs", "equal"}
        See the module docstring.
    fixed : sequence of str
        Parameter names kept at their template value (see :func:`parameter_names`).
    bounds : mapping, optional
        ``name -> (low, high)`` overriding the defaults: sills in
        ``[0, 10 x max(variance, max gamma)]``, ranges in
        ``[shortest lag / 10, 10 x data extent]``, smoothness in ``[0.1, 5]`` (a structure
        class may set ``param_bounds = (low, high)`` for its shape parameter).
    total_sill : float, optional
        Constrain the sills to add up to this (1.0 for normal scores).
    min_pairs : int
        Bins with fewer pairs are left out.  The default 30 follows the usual
        rule of thumb (Journel and Huijbregts 1978, Mining Geostatistics,
        section III.C, from memory).

    Returns
    -------
    FitResult

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.variogram import Exponential, Model, experimental_variogram, fit_model
    >>> x = np.arange(0.0, 1000.0, 2.0)  # twelve 1 km transects of a 60 m exponential, 5 km apart
    >>> cov = Model([Exponential(1.0, 60.0)]).cov_matrix(x[:, None])
    >>> z = np.linalg.cholesky(cov) @ np.random.default_rng(0).normal(size=(x.size, 12))
    >>> xy = np.column_stack([np.tile(x, 12), np.repeat(5000.0 * np.arange(12), x.size)])
    >>> ev = experimental_variogram(xy, z.T.ravel(), lag=4.0, nlags=20)
    >>> fit = fit_model(ev, Model([Exponential(1.0, 30.0)]))
    >>> abs(fit.model_.structures[0].anisotropy.major / 60.0 - 1.0) < 0.25  # 3 x the seed-to-seed spread
    True
    """
    from scipy.optimize import least_squares

    evs = [experimental] if isinstance(experimental, ExperimentalVariogram) else list(experimental)
    if not evs:
        raise ValueError("give at least one experimental variogram")
    if weighting not in WEIGHTINGS:
        raise ValueError(f"weighting must be one of {WEIGHTINGS}, got {weighting!r}")
    if not isinstance(template, Model):
        template = Model(template)
    dim = evs[0].dim
    if any(ev.dim != dim for ev in evs):
        raise ValueError("the experimental variograms mix 2-D and 3-D data; fit one dimension at a time")
    names = parameter_names(template)
    start = _values(template)
    unknown = sorted(set(fixed) - set(names)) + sorted(set(bounds or {}) - set(names))
    if unknown:
        raise ValueError(f"unknown parameter(s) {unknown}; this template has {names}")

    # the data: lag vectors, experimental values, pair counts
    blocks = []
    for ev in evs:
        ok = ev.valid(min_pairs) & np.isfinite(ev.gamma) & np.isfinite(ev.lags)
        if ok.any():
            blocks.append((ev, ev.lags[ok], ev.gamma[ok], ev.npairs[ok].astype(float), _unit_dirs(ev)))
    nbins = sum(len(b[1]) for b in blocks)

    free, tied = _free_parameters(template, evs, dim, set(fixed))
    if nbins < len(free):
        raise InputError(f"{nbins} lag bins with >= {min_pairs} pairs cannot determine {len(free)} free "
                         f"parameters ({', '.join(free)})",
                         fix="use a lag and lag count that give more bins with pairs, lower min_pairs, "
                             "or fix parameters")
    variance = float(evs[0].variance)
    gmax = max([float(np.nanmax(b[2])) for b in blocks] + [variance if np.isfinite(variance) else 0.0])
    extent = max(float(ev.extent) for ev in evs)
    shortest = min([float(b[1].min()) for b in blocks] or [1.0])
    lo, hi = _default_bounds(template, gmax, shortest, extent, total_sill)
    for name, (a, b) in (bounds or {}).items():
        if not (a < b):
            raise ValueError(f"bounds for {name}: low {a!r} must be below high {b!r}")
        lo[name], hi[name] = float(a), float(b)
    if total_sill is not None:
        free_sills = [n for n in free if n.endswith(".sill")]
        fixed_sum = sum(start[n] for n in names if n.endswith(".sill") and n not in free)
        if not free_sills and not math.isclose(fixed_sum, total_sill, rel_tol=1e-9):
            raise ValueError(f"all sills are fixed and add up to {fixed_sum:g}, not total_sill={total_sill:g}")

    def values_of(p) -> dict:
        values = dict(start)
        values.update(zip(free, p))
        for name, (base, ratio) in tied.items():
            values[name] = values[base] * ratio
        return values

    # lag vectors in each structure's (fixed) frame, so that a residual costs a few vector operations
    frames = [None if s.kind == "nugget" else axes(s.anisotropy.azimuth, s.anisotropy.dip, s.anisotropy.rake)
              for s in template.structures]
    rotated = []
    for _, lags, _, _, dirs in blocks:
        h = np.concatenate([lags[:, None] * u[None, :] for u in dirs])  # (ndirs * nbins, 3)
        if dim == 2:
            h[:, 2] = 0.0
        rotated.append([None if f is None else h @ f.T for f in frames])

    def model_gamma(values) -> list[np.ndarray]:
        out = []
        for (_, lags, _, _, dirs), q in zip(blocks, rotated):
            g = np.zeros(len(lags) * len(dirs))
            for j, s in enumerate(template.structures):
                sill = values[f"{j}.sill"]
                if s.kind == "nugget":
                    g += sill  # every lag used is > 0
                    continue
                ranges = np.array([values[f"{j}.major"], values[f"{j}.minor"], values[f"{j}.vertical"]])
                r = np.sqrt(np.sum((q[j] / ranges) ** 2, axis=1))
                shape = s if not s.param_name else s.with_(param=values[f"{j}.{s.param_name}"])
                g += sill * (1.0 - shape.correlation(r))
            out.append(g.reshape(len(dirs), len(lags)).mean(axis=0))
        return out

    def residuals(p):
        return residuals_of(values_of(p), penalty=True)

    def residuals_of(values, penalty):
        parts = []
        for (_, _, g, npairs, _), model_g in zip(blocks, model_gamma(values)):
            if weighting == "cressie":
                parts.append(np.sqrt(npairs) * (g / np.maximum(model_g, 1e-12 * gmax) - 1.0))
            elif weighting == "pairs":
                parts.append(np.sqrt(npairs) * (g - model_g))
            else:
                parts.append(g - model_g)
        if penalty and total_sill is not None:
            total = sum(values[n] for n in names if n.endswith(".sill"))
            scale = math.sqrt(sum(b[3].sum() for b in blocks)) * 1e3 / max(total_sill, 1e-12)
            parts.append(np.array([scale * (total - total_sill)]))
        return np.concatenate(parts)

    lb = np.array([lo[n] for n in free])
    ub = np.array([hi[n] for n in free])
    best = None
    if free:
        for factor in (1.0, 0.4, 2.5):  # a few starts against local minima in the ranges
            x0 = np.array([start[n] * (factor if _is_range(n) else 1.0) for n in free])
            x0 = np.clip(x0, lb + 1e-9 * (ub - lb), ub - 1e-9 * (ub - lb))
            res = least_squares(residuals, x0, bounds=(lb, ub), x_scale="jac", method="trf")
            if best is None or res.cost < best.cost:
                best = res
        p, success, message = best.x, bool(best.success), str(best.message)
    else:
        p, success, message = np.array([]), True, "no free parameters"

    values = values_of(p)
    free_sills = [n for n in free if n.endswith(".sill")]
    if total_sill is not None and free_sills:  # remove the penalty's last ~1e-9 of slack
        target = total_sill - sum(values[n] for n in names if n.endswith(".sill") and n not in free)
        current = sum(values[n] for n in free_sills)
        if current > 0 and target > 0:
            for n in free_sills:
                values[n] *= target / current
    model = _model_from(template, values)
    values = _values(model)
    wres = residuals_of(values, penalty=False)
    raw_by = {}
    raw_all = []
    for ev, lags, g, _, dirs in blocks:
        r = g - np.mean([model.semivariance(lags[:, None] * u[None, :dim]) for u in dirs], axis=0)
        raw_by[ev.label] = float(np.sqrt(np.mean(r**2)))
        raw_all.append(r)
    raw = np.concatenate(raw_all) if raw_all else np.array([np.nan])
    notes = _diagnose(model, values, free, lo, hi, extent, variance, success, message, evs)
    for w in notes:
        log.warning("%s", w)
    return FitResult(model, values, tuple(free), float(wres @ wres), float(np.sqrt(np.mean(raw**2))),
                     raw_by, nbins, success, message, notes, weighting, dim)


# internals --------------------------------------------------------------------

def _is_range(name: str) -> bool:
    return name.split(".", 1)[1] in ("major", "minor", "vertical")


def _values(model: Model) -> dict:
    out = {}
    for j, s in enumerate(model.structures):
        out[f"{j}.sill"] = float(s.sill)
        if s.kind != "nugget":
            out[f"{j}.major"], out[f"{j}.minor"], out[f"{j}.vertical"] = map(float, s.anisotropy.ranges)
        if s.param_name:
            out[f"{j}.{s.param_name}"] = float(s.param)
    return out


def _model_from(template: Model, values: dict) -> Model:
    structures = []
    for j, s in enumerate(template.structures):
        changes = {"sill": values[f"{j}.sill"]}
        if s.kind != "nugget":
            a = s.anisotropy
            changes["anisotropy"] = Anisotropy((values[f"{j}.major"], values[f"{j}.minor"],
                                                values[f"{j}.vertical"]), a.azimuth, a.dip, a.rake)
        if s.param_name:
            changes["param"] = values[f"{j}.{s.param_name}"]
        structures.append(s.with_(**changes))
    return Model(structures)


def _unit_dirs(ev: ExperimentalVariogram) -> list[np.ndarray]:
    """Directions over which the model is evaluated for this experimental variogram."""
    if ev.direction is not None:
        return [ev.direction.vector()]
    if ev.dim == 2:
        return [axes(az)[0] for az in np.arange(0.0, 180.0, 10.0)]
    # evenly spread directions on the upper hemisphere (golden-angle spiral)
    k = np.arange(48)
    up = (k + 0.5) / 48
    az = np.degrees(k * math.pi * (3.0 - math.sqrt(5.0))) % 360.0
    return [axes(a, -math.degrees(math.asin(u)))[0] for a, u in zip(az, up)]


def _free_parameters(template: Model, evs, dim: int, fixed: set):
    """Free parameter names, and tied ones: name -> (base name, ratio to base)."""
    dirs = [ev.direction.vector() for ev in evs if ev.direction is not None]
    has_omni = any(ev.direction is None for ev in evs)
    free, tied = [], {}
    for j, s in enumerate(template.structures):
        if f"{j}.sill" not in fixed:
            free.append(f"{j}.sill")
        if s.kind != "nugget":
            frame = axes(s.anisotropy.azimuth, s.anisotropy.dip, s.anisotropy.rake)
            for k, axis in enumerate(("major", "minor", "vertical")):
                name = f"{j}.{axis}"
                covered = any(abs(float(d @ frame[k])) >= _COVERED for d in dirs)
                if k == 0:
                    free_axis = has_omni or covered
                else:
                    free_axis = covered and not (dim == 2 and k == 2)
                if name in fixed:
                    continue
                if free_axis:
                    free.append(name)
                else:
                    tied[name] = (f"{j}.major", s.anisotropy.ranges[k] / s.anisotropy.ranges[0])
            if f"{j}.major" not in free:
                # an axis tied to a major range that does not move keeps its template value
                for k, axis in ((1, "minor"), (2, "vertical")):
                    tied.pop(f"{j}.{axis}", None)
        if s.param_name and f"{j}.{s.param_name}" not in fixed:
            free.append(f"{j}.{s.param_name}")
    return free, tied


def _default_bounds(template: Model, gmax: float, shortest: float, extent: float, total_sill):
    lo, hi = {}, {}
    sill_hi = float(total_sill) if total_sill is not None else 10.0 * max(gmax, 1e-12)
    r_lo = max(shortest / 10.0, 1e-9)
    r_hi = 10.0 * max(extent, shortest)
    for j, s in enumerate(template.structures):
        lo[f"{j}.sill"], hi[f"{j}.sill"] = 0.0, sill_hi
        if s.kind != "nugget":
            for axis in ("major", "minor", "vertical"):
                lo[f"{j}.{axis}"], hi[f"{j}.{axis}"] = r_lo, r_hi
        if s.param_name:
            # a plugin structure may state its own range for its shape parameter
            lo[f"{j}.{s.param_name}"], hi[f"{j}.{s.param_name}"] = getattr(type(s), "param_bounds", (0.1, 5.0))
    return lo, hi


def _diagnose(model, values, free, lo, hi, extent, variance, success, message, evs) -> list[str]:
    notes = []
    if not success:
        notes.append(f"the optimizer did not converge ({message}); check the starting model")
    for j, s in enumerate(model.structures):
        if s.kind == "nugget":
            continue
        r = max(s.anisotropy.ranges)
        if r > extent:
            notes.append(f"structure {j} ({s.kind}): fitted range {r:.4g} m exceeds the data extent "
                         f"{extent:.4g} m; the data do not resolve it")
        if model.sill > 0 and s.sill < 1e-3 * model.sill:
            notes.append(f"structure {j} ({s.kind}) fitted a sill of almost 0; consider removing it")
    if np.isfinite(variance) and variance > 0 and model.sill > 0:
        ratio = model.sill / variance
        if ratio > _SILL_FACTOR or ratio < 1.0 / _SILL_FACTOR:
            notes.append(f"total sill {model.sill:.4g} is {ratio:.2f} times the sample variance "
                         f"{variance:.4g}; look for a trend, outliers or too short lags")
    for n in free:
        span = hi[n] - lo[n]
        if values[n] <= lo[n] + 1e-6 * span and not n.endswith(".sill"):
            notes.append(f"parameter {n} = {values[n]:.4g} sits at its lower bound {lo[n]:.4g}")
        elif values[n] >= hi[n] - 1e-6 * span:
            notes.append(f"parameter {n} = {values[n]:.4g} sits at its upper bound {hi[n]:.4g}")
    if all(ev.direction is None for ev in evs) and \
            any(not st.anisotropy.is_isotropic for st in model.structures if st.kind != "nugget"):
        notes.append("anisotropy ratios were kept from the template: omnidirectional variograms "
                     "cannot resolve them")
    return notes
