"""Covariances and rotations written out with numpy, sharing no code with geosim.

A reference that builds its matrices with geosim's own covariance or rotation code
cannot catch a bug in them.  The functions here read only a model's public parameters
(kind, sill, ranges, angles, Matern smoothness) and rebuild everything else:

* Rotation: the axes of an anisotropy are the base axes (major = north, minor = east,
  third = up) turned by three elementary rotations about the coordinate axes, in this
  order: rake about the major axis, dip about the minor axis, azimuth about the
  vertical, with the senses of geosim's stated convention (module docstring of
  ``geosim.variogram.anisotropy``: azimuth clockwise from north seen from above, dip
  positive downward, rake counter-clockwise looking down the major axis from its
  origin).  Elementary rotation matrices as in any mechanics text (e.g. Goldstein 1980,
  Classical Mechanics, 2nd ed., section 4.4; from memory).
* Correlations of the reduced distance ``r``: spherical ``1 - 1.5 r + 0.5 r^3`` (r < 1),
  exponential ``exp(-3 r)`` and gaussian ``exp(-3 r^2)`` with practical ranges
  (Journel and Huijbregts 1978, Mining Geostatistics, chapter III.B; from memory),
  cubic ``1 - 7 r^2 + 35/4 r^3 - 7/2 r^5 + 3/4 r^7`` (r < 1) (Chiles and Delfiner 2012,
  Geostatistics: Modeling Spatial Uncertainty, 2nd ed., chapter 2; from memory), Matern
  ``2^(1-nu)/Gamma(nu) (sqrt(2 nu) r)^nu K_nu(sqrt(2 nu) r)`` with ``r = h / scale``
  (Rasmussen and Williams 2006, Gaussian Processes for Machine Learning, eq. 4.14);
  the nugget is its sill at zero lag only.
"""
import numpy as np
from scipy import special


def _rot_x(t):
    c, s = np.cos(t), np.sin(t)
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


def _rot_y(t):
    c, s = np.cos(t), np.sin(t)
    return np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])


def _rot_z(t):
    c, s = np.cos(t), np.sin(t)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def axes_by_hand(azimuth, dip=0.0, rake=0.0):
    """Rows: unit major, minor and third axes in (east, north, up).

    Right-handed rotations by minus each angle: azimuth and rake are clockwise for the
    stated viewer, and a positive dip turns the northward major axis downward.
    """
    a, d, r = np.radians([azimuth, dip, rake])
    q = _rot_z(-a) @ _rot_x(-d) @ _rot_y(-r)
    east, north, up = np.eye(3)
    return np.vstack([q @ north, q @ east, q @ up])


def reduced_lags(h, ranges, azimuth, dip=0.0, rake=0.0):
    """Lag vectors ``h`` (..., d) as components along the axes divided by the ranges.

    ``ranges`` as geosim takes them: one value (isotropic), (major, minor) with the third
    equal to the major, or all three.
    """
    h = np.asarray(h, dtype=float)
    h3 = np.zeros(h.shape[:-1] + (3,))
    h3[..., :h.shape[-1]] = h
    r = np.atleast_1d(np.asarray(ranges, dtype=float))
    r = np.resize(r, 3) if r.size == 1 else np.array([r[0], r[1], r[0]]) if r.size == 2 else r
    return (h3 @ axes_by_hand(azimuth, dip, rake).T) / r


def correlation(kind, r, nu=None):
    """Unit correlation of a structure kind at reduced distances ``r``."""
    r = np.asarray(r, dtype=float)
    inside = r < 1.0
    if kind == "spherical":
        return np.where(inside, 1.0 - 1.5 * r + 0.5 * r ** 3, 0.0)
    if kind == "exponential":
        return np.exp(-3.0 * r)
    if kind == "gaussian":
        return np.exp(-3.0 * r ** 2)
    if kind == "cubic":
        return np.where(inside, 1.0 - 7.0 * r ** 2 + 8.75 * r ** 3 - 3.5 * r ** 5 + 0.75 * r ** 7, 0.0)
    if kind == "matern":
        s = np.sqrt(2.0 * nu) * np.where(r > 0, r, 1.0)
        return np.where(r > 0, 2.0 ** (1.0 - nu) / special.gamma(nu) * s ** nu * special.kv(nu, s), 1.0)
    raise ValueError(f"no independent formula for {kind!r}")


def covariance(model, a, b=None):
    """Covariance matrix ``C(a_i - b_j)`` of a geosim model, rebuilt from its parameters."""
    a = np.atleast_2d(np.asarray(a, dtype=float))
    b = a if b is None else np.atleast_2d(np.asarray(b, dtype=float))
    h = a[:, None, :] - b[None, :, :]
    zero = np.sum(h ** 2, axis=-1) <= 1e-18
    out = np.zeros(h.shape[:2])
    for s in _structures(model):
        if s.kind == "nugget":
            out += s.sill * zero
            continue
        an = s.anisotropy
        r = np.linalg.norm(reduced_lags(h, an.ranges, an.azimuth, an.dip, an.rake), axis=-1)
        out += s.sill * correlation(s.kind, r, s.param)
    return out


def sill(model):
    """Total sill: the sum of the structures' sills."""
    return float(sum(s.sill for s in _structures(model)))


def _structures(model):
    return getattr(model, "structures", (model,))


def simple_kriging(model, xy, z, targets, mean=0.0):
    """Simple kriging by ``numpy.linalg.solve`` with independent covariances: (estimate, variance)."""
    k = covariance(model, xy)
    c = covariance(model, xy, targets)
    w = np.linalg.solve(k, c)
    return mean + w.T @ (np.asarray(z) - mean), sill(model) - np.sum(w * c, axis=0)


def ordinary_kriging(model, xy, z, targets):
    """Ordinary kriging by the bordered system [[C, 1], [1', 0]] [w; mu] = [c; 1].

    Journel and Huijbregts 1978, Mining Geostatistics, section V.A (from memory):
    variance ``C(0) - w'c - mu``.  Returns (estimate, variance, weights).
    """
    n = len(z)
    a = np.zeros((n + 1, n + 1))
    a[:n, :n] = covariance(model, xy)
    a[:n, n] = a[n, :n] = 1.0
    c = covariance(model, xy, targets)
    b = np.vstack([c, np.ones(c.shape[1])])
    sol = np.linalg.solve(a, b)
    w, mu = sol[:n], sol[n]
    return w.T @ np.asarray(z), sill(model) - np.sum(w * c, axis=0) - mu, w


def select_samples(coords, target, *, max_samples, ranges, azimuth=0.0, dip=0.0, rake=0.0, sectors=0,
                   sector_limit=0, holes=None, hole_limit=0, exclude=-1):
    """Greedy neighbourhood selection in plain Python: nearest first by reduced distance.

    A sample is inside when its reduced distance is <= 1; a quadrant (octant) is the sign
    pattern of the lag along the major and minor (and third) axes; at most
    ``sector_limit`` per sector and ``hole_limit`` per hole (0: no limit).  Returns the
    chosen indices, nearest first.
    """
    lag = reduced_lags(np.asarray(coords) - target, ranges, azimuth, dip, rake)
    r = np.linalg.norm(lag, axis=1)
    chosen, per_sector, per_hole = [], {}, {}
    for p in np.argsort(r, kind="stable"):
        if r[p] > 1.0 + 1e-9 or len(chosen) == max_samples:
            break
        if p == exclude:
            continue
        s = (lag[p, 0] < 0, lag[p, 1] < 0, sectors == 8 and lag[p, 2] < 0)
        if sector_limit and per_sector.get(s, 0) >= sector_limit:
            continue
        if hole_limit and per_hole.get(holes[p], 0) >= hole_limit:
            continue
        chosen.append(int(p))
        per_sector[s] = per_sector.get(s, 0) + 1
        if holes is not None:
            per_hole[holes[p]] = per_hole.get(holes[p], 0) + 1
    return chosen
