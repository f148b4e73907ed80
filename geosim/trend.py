"""Polynomial trend surfaces fitted by least squares, with standard errors.

A trend of order 1 or 2 in the coordinates (x, y for 2-D data, x, y, z for 3-D)
is fitted to sample values by ordinary least squares.  The coordinates enter
relative to the centroid of the samples, in metres, so that the normal
equations stay well conditioned for projected coordinates of several hundred
kilometres; the coefficients are reported in that frame (term ``"x"`` means
``x - origin_x``, ``"x*y"`` means ``(x - origin_x) (y - origin_y)``).

Standard errors are the usual ones for independent residuals of constant
variance: ``s^2 = RSS / (n - p)`` and ``Cov(beta) = s^2 (X'X)^-1`` (Draper and
Smith 1998, Applied Regression Analysis, 3rd ed., chapter 5; from memory).
Spatially correlated residuals make them optimistic; the fit is a locally
varying mean for kriging, not a test of significance.

With declustering ``weights`` the fit is weighted least squares (rows scaled by
the square root of the weights, normalized to mean 1), so that clustered samples
count as the area they represent, and the weighted residuals have mean zero: the
known mean simple kriging of the residuals assumes.  ``s^2`` is then the weighted
residual sum of squares over ``n - p`` and ``R^2`` the weighted share (Draper and
Smith 1998, section 9.2, weighted least squares; from memory).
"""
from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations_with_replacement

import numpy as np

from .errors import InputError

__all__ = ["Trend", "fit_trend", "trend_terms"]

_AXES = "xyz"
# a design whose smallest singular value is below this fraction of its largest
# cannot separate the terms (samples on a line or a plane for that order)
# (common practice, no source)
_RANK_RTOL = 1e-10


def trend_terms(ndim: int, order: int) -> tuple[str, ...]:
    """Names of the terms of a polynomial trend, constant first.

    Examples
    --------
    >>> from geosim.trend import trend_terms
    >>> trend_terms(2, 2)
    ('1', 'x', 'y', 'x*x', 'x*y', 'y*y')
    """
    if ndim not in (2, 3):
        raise ValueError(f"a trend needs 2-D or 3-D coordinates, got {ndim}-D")
    if order not in (1, 2):
        raise InputError(f"trend order {order!r} is not supported", field="order",
                         fix="give 1 (linear) or 2 (quadratic)")
    names = ["1"]
    for k in range(1, order + 1):
        names += ["*".join(_AXES[i] for i in combo) for combo in combinations_with_replacement(range(ndim), k)]
    return tuple(names)


def _design(rel: np.ndarray, order: int) -> np.ndarray:
    cols = [np.ones(rel.shape[0])]
    for k in range(1, order + 1):
        for combo in combinations_with_replacement(range(rel.shape[1]), k):
            cols.append(np.prod(rel[:, list(combo)], axis=1))
    return np.column_stack(cols)


@dataclass(frozen=True)
class Trend:
    """A fitted polynomial trend.

    Attributes
    ----------
    order : int
        1 (linear) or 2 (quadratic).
    origin : (d,) ndarray
        Centroid of the samples; the terms use coordinates relative to it.
    terms : tuple of str
        Term names, as :func:`trend_terms`.
    coefficients, standard_errors : (p,) ndarray
        Least-squares coefficients (data units per metre to the term's power)
        and their standard errors.
    covariance : (p, p) ndarray
        Covariance matrix of the coefficients.
    residual_variance : float
        ``RSS / (n - p)``; NaN when ``n == p``.
    r_squared : float
        Share of the data variance the trend explains.
    n : int
        Samples used.
    """

    order: int
    origin: np.ndarray
    terms: tuple[str, ...]
    coefficients: np.ndarray
    standard_errors: np.ndarray
    covariance: np.ndarray
    residual_variance: float
    r_squared: float
    n: int

    def __call__(self, coords) -> np.ndarray:
        """Trend value at each point of ``coords`` ((m, d) array_like)."""
        xyz = np.atleast_2d(np.asarray(coords, dtype=np.float64))
        if xyz.shape[1] != self.origin.shape[0]:
            raise ValueError(f"the trend was fitted to {self.origin.shape[0]}-D data, "
                             f"got {xyz.shape[1]}-D coordinates")
        return _design(xyz - self.origin, self.order) @ self.coefficients

    def residuals(self, coords, values) -> np.ndarray:
        """``values`` minus the trend at ``coords``."""
        return np.asarray(values, dtype=np.float64).reshape(-1) - self(coords)

    def table(self) -> list[dict]:
        """One dict per term: name, coefficient, standard error (for a report)."""
        return [{"term": t, "coefficient": float(c), "standard_error": float(e)}
                for t, c, e in zip(self.terms, self.coefficients, self.standard_errors)]


def fit_trend(coords, values, order: int = 1, weights=None) -> Trend:
    """Fit a polynomial trend of order 1 or 2 by least squares.

    Parameters
    ----------
    coords : (n, d) array_like
        Sample coordinates, d in {2, 3}, metres of a projected CRS.
    values : (n,) array_like
        Sample values (e.g. normal scores, for a mean in normal-score space).
    order : {1, 2}
        Linear or quadratic in the coordinates.
    weights : (n,) array_like, optional
        Declustering weights (positive); weighted least squares when given.

    Returns
    -------
    Trend

    Raises
    ------
    InputError
        Non-finite values, fewer samples than terms, or samples laid out so
        that the terms cannot be told apart (all on a line or plane).

    Examples
    --------
    >>> import numpy as np
    >>> from geosim.trend import fit_trend
    >>> xy = np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0], [10.0, 10.0]])
    >>> t = fit_trend(xy, 1.0 + 0.5 * xy[:, 0] - 0.2 * xy[:, 1])
    >>> np.round(t.coefficients, 6).tolist()  # about the centroid (5, 5)
    [2.5, 0.5, -0.2]
    """
    xyz = np.atleast_2d(np.asarray(coords, dtype=np.float64))
    z = np.asarray(values, dtype=np.float64).reshape(-1)
    terms = trend_terms(xyz.shape[1], order)
    if z.shape[0] != xyz.shape[0]:
        raise InputError(f"{xyz.shape[0]} coordinates but {z.shape[0]} values", field="values",
                         fix="give one value per sample")
    bad = ~np.isfinite(z) | ~np.isfinite(xyz).all(axis=1)
    if bad.any():
        raise InputError(f"the sample at index {int(np.argmax(bad))} (counting from 0) has a missing or "
                         "non-finite coordinate or value", field="values",
                         fix="drop or correct the sample before fitting a trend")
    n, p = z.shape[0], len(terms)
    if n < p:
        raise InputError(f"a trend of order {order} in {xyz.shape[1]}-D has {p} terms but there are only "
                         f"{n} samples", field="order", fix="use a lower order or more samples")
    if weights is None:
        w = np.ones(n)
    else:
        w = np.asarray(weights, dtype=np.float64).reshape(-1)
        if w.shape[0] != n or not np.all(np.isfinite(w)) or np.any(w <= 0):
            raise InputError("the weights must be one positive number per sample", field="weights",
                             fix="pass the declustering weights of the same samples")
        w = w * (n / w.sum())
    origin = xyz.mean(axis=0)
    root = np.sqrt(w)
    x = _design(xyz - origin, order) * root[:, None]
    z = z * root
    # scale columns to unit length so the rank test and the solve do not depend on units
    scale = np.linalg.norm(x, axis=0)
    scale[scale == 0] = 1.0
    u, sv, vt = np.linalg.svd(x / scale, full_matrices=False)
    if sv[-1] <= _RANK_RTOL * sv[0]:
        raise InputError(f"the {n} samples do not spread enough to fit a trend of order {order} in "
                         f"{xyz.shape[1]}-D (they lie on a line or plane for these terms)", field="order",
                         fix="use a lower order, or a trend only where the samples spread")
    beta = (vt.T @ ((u.T @ z) / sv)) / scale
    resid = z - x @ beta
    rss = float(resid @ resid)
    dof = n - p
    s2 = rss / dof if dof > 0 else float("nan")
    inv = (vt.T / sv ** 2) @ vt
    cov = s2 * inv / np.outer(scale, scale)
    centre = float(w @ (z / root)) / n
    tss = float(w @ (z / root - centre) ** 2)
    r2 = 1.0 - rss / tss if tss > 0 else float("nan")
    return Trend(order, origin, terms, beta, np.sqrt(np.diag(cov)), cov, s2, r2, n)
