"""Mean and variance in data units of a back-transformed normal variable.

Under the multi-Gaussian model a node whose kriged normal score is ``m`` with kriging
variance ``s^2`` has, in data units, the distribution of ``Z = T^-1(Y)``,
``Y ~ N(m, s^2)`` (Verly 1983, "The multigaussian approach and its applications to
the estimation of local reserves", Mathematical Geology 15(2)).
:func:`multigaussian_moments` gives its mean and variance at many nodes.

geosim's normal score back-transform is linear between the data's scores and follows
a tail model beyond the extreme data (:mod:`geosim.transforms`); a log step before it
makes each piece exponential.  Quadrature over the whole line would have to integrate
the kinks between pieces, which a fixed rule does badly, so each piece is integrated in
closed form.  With ``Y = m + s T``, a piece ``[y_k, y_k+1]`` of the line
``v = v_k + b (y - y_k)`` has ends ``a, c`` in ``T`` and slope ``W = b s`` in ``T``:

* ``E[1; a < T < c] = Phi(c) - Phi(a)``,
* ``E[T - a; ...] = phi(a) - phi(c) - a (Phi(c) - Phi(a))``,
* ``E[(T - a)^2; ...] = (1 + a^2)(Phi(c) - Phi(a)) - a phi(a) - (c - 2a) phi(c)``,

from the truncated normal's partial moments ``E[T; ...] = phi(a) - phi(c)`` and
``E[T^2; ...] = Phi(c) - Phi(a) + a phi(a) - c phi(c)`` (Johnson, Kotz and Balakrishnan
1994, Continuous Univariate Distributions, vol. 1, 2nd ed., Wiley, ch. 13, the
truncated normal distribution; from memory).  After a log step, ``z = e^(lam v) - offset``
and, completing the square in the normal density as for the log-normal's partial
expectations (Aitchison and Brown 1957, The Lognormal Distribution, Cambridge
University Press, ch. 2; from memory),

* ``E[e^(lam v); ...] = exp(lam v_k - g a + g^2 / 2) (Phi(c - g) - Phi(a - g))``, ``g = lam W``,

evaluated through logarithms where the factor in front is large (a steep piece far
from ``m``).  Moments are taken about the median ``T^-1(m)``, so the variance is not a
small difference of large numbers.

The tails have no closed form under a normal law (the uniform tail alone would need the
bivariate normal distribution function), so they alone are integrated numerically: a
composite Gauss-Legendre rule of :data:`PANELS` panels of 16 points over each tail, out
to :data:`REACH` standard deviations, whose panel next to the datum crowds its points
towards it (``T - datum ~ x^3``) to absorb a power tail's ``(y - y_n)^(1/k)`` there.
A Pareto tail grows like ``exp(y^2 / 2k)``: the rule follows it out (see
:func:`_tail_limits`), and the mean is infinite where ``s^2 >= k``, the variance where
``2 s^2 >= k``; after a log step every moment of a Pareto tail is infinite.

The work runs in one compiled loop over nodes (numba, ``cache=True``, compiled on
first use), about ``4 K`` error-function evaluations per node for ``K`` data (``8 K``
after a log) plus 192 for the tails; memory is that of the outputs.  Problems of at most
:data:`NUMPY_MOMENTS_MAX` node-evaluations (the cross-validation and the estimate of a few
hundred samples) take the same sums with numpy instead, a block of nodes at a time, so
that a first run compiles nothing for them; the two agree to rounding.
"""
from __future__ import annotations

import logging
import math

import numpy as np
from numba import njit

from .transforms import (IdentityTransform, LogTransform, NormalScoreTransform, TransformChain, lower_tail,
                         upper_tail)

__all__ = ["multigaussian_moments", "REACH", "PANELS"]

log = logging.getLogger(__name__)

REACH = 8.5        # standard deviations: N(0, 1) puts less than 1e-17 beyond; left out everywhere
PANELS = 6         # panels of the tails' Gauss-Legendre rule
POINTS = 16        # points per panel
GRADE = 3          # the panel at the datum: T - datum ~ x^GRADE
OPAQUE_PANELS = 24  # the same rule over +-REACH for transforms without a piecewise form
_BLOCK = 1 << 17    # points held at once by the rule for other transforms

_SQRT2 = math.sqrt(2.0)
_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)

_lower_tail = njit(cache=True, nogil=True)(lower_tail)
_upper_tail = njit(cache=True, nogil=True)(upper_tail)


@njit(cache=True, nogil=True)
def _ndtr(x):
    return 0.5 * math.erfc(-x / _SQRT2)


@njit(cache=True, nogil=True)
def _pdf(x):
    return math.exp(-0.5 * x * x - _LOG_SQRT_2PI)


@njit(cache=True, nogil=True)
def _log_ndtr(x):
    """``log Phi(x)``; below -35 (where erfc underflows) the asymptotic series
    ``Phi(x) ~ phi(x)/|x| (1 - 1/x^2 + 3/x^4 - 15/x^6 + 105/x^8)``, error below 1e-12."""
    if x > -35.0:
        return math.log(0.5 * math.erfc(-x / _SQRT2))
    u = 1.0 / (x * x)
    return -0.5 * x * x - math.log(-x) - _LOG_SQRT_2PI + math.log1p(u * (-1.0 + u * (3.0 + u * (-15.0 + 105.0 * u))))


@njit(cache=True, nogil=True)
def _scaled_mass(e, a, b):
    """``exp(e) (Phi(b) - Phi(a))`` for ``a <= b``, the upper side mirrored so that no two
    numbers near 1 are subtracted; through logarithms where ``exp(e)`` would overflow or
    ``Phi(b)`` underflow."""
    if a > 0.0:
        a, b = -b, -a
    if e < 600.0 and b > -30.0:
        return math.exp(e) * (_ndtr(b) - _ndtr(a))
    hi, lo = _log_ndtr(b), _log_ndtr(a)
    if lo >= hi:
        return 0.0
    return math.exp(e + hi + math.log1p(-math.exp(lo - hi)))


@njit(cache=True, nogil=True)
def _first_knot(y, x):
    """The first index with ``y[i] >= x`` (``len(y)`` if none)."""
    lo, hi = 0, y.size
    while lo < hi:
        mid = (lo + hi) // 2
        if y[mid] < x:
            lo = mid + 1
        else:
            hi = mid
    return lo


@njit(cache=True, nogil=True)
def _kernel(m, s, r, y, v, lam, offset, tails, limits, local, jac, out1, out2):
    """Sums ``E[Z - r]`` and ``E[(Z - r)^2]`` per node (module docstring).

    ``tails`` holds :meth:`NormalScoreTransform.tail_parameters` (the last entry 1.0 for a
    Pareto tail), ``limits`` the rows ``(lower from, lower to, upper from, upper to)`` in
    ``T`` per node, ``local``/``jac`` the tail rule's points (in panels from the datum)
    and weights; ``lam = 0`` means no log step.
    """
    n_knots = y.size
    pareto = tails[8] > 0.5
    n_rule = local.size
    panels = n_rule // POINTS
    for i in range(m.size):
        mi, si, ri = m[i], s[i], r[i]
        big_r = offset + ri
        m1 = 0.0
        m2 = 0.0
        # pieces reaching into +-REACH standard deviations; the rest hold no mass worth a sum
        k0 = max(_first_knot(y, mi - REACH * si) - 1, 0)
        k1 = min(_first_knot(y, mi + REACH * si), n_knots - 1)
        a = (y[k0] - mi) / si
        big_a, small_a = _ndtr(a), _pdf(a)
        for k in range(k0, k1):
            c = (y[k + 1] - mi) / si
            big_c, small_c = _ndtr(c), _pdf(c)
            if c > a:
                mass = big_c - big_a
                w = (v[k + 1] - v[k]) / (y[k + 1] - y[k]) * si
                if lam == 0.0:
                    d = v[k] - ri
                    first = small_a - small_c - a * mass
                    second = (1.0 + a * a) * mass - a * small_a - (c - 2.0 * a) * small_c
                    m1 += d * mass + w * first
                    m2 += d * d * mass + 2.0 * d * w * first + w * w * second
                else:
                    g = lam * w
                    e1 = _scaled_mass(lam * v[k] - g * a + 0.5 * g * g, a - g, c - g)
                    g = 2.0 * g
                    e2 = _scaled_mass(2.0 * lam * v[k] - g * a + 0.5 * g * g, a - g, c - g)
                    m1 += e1 - big_r * mass
                    m2 += e2 - 2.0 * big_r * e1 + big_r * big_r * mass
            a, big_a, small_a = c, big_c, small_c
        for side in range(2):
            t_from, t_to = limits[i, 2 * side], limits[i, 2 * side + 1]
            if not t_to > t_from:
                continue
            width = (t_to - t_from) / panels
            for p in range(n_rule):
                # the lower tail's datum is at its upper end, the upper tail's at its lower end
                t = t_to - width * local[p] if side == 0 else t_from + width * local[p]
                weight = width * jac[p] * _pdf(t)
                yy = mi + si * t
                if side == 0:
                    val = _lower_tail(_ndtr(yy), tails[0], tails[1], tails[2], tails[3])
                else:
                    val = _upper_tail(_ndtr(-yy), tails[4], tails[5], tails[6], tails[7], pareto)
                if lam != 0.0:
                    val = math.exp(lam * val) - offset
                dz = val - ri
                m1 += weight * dz
                m2 += weight * dz * dz
        out1[i] = m1
        out2[i] = m2


def _scaled_mass_numpy(e, a, b, ndtr, log_ndtr):
    """:func:`_scaled_mass` elementwise on arrays (``a <= b``)."""
    flip = a > 0.0
    a, b = np.where(flip, -b, a), np.where(flip, -a, b)
    direct = (e < 600.0) & (b > -30.0)
    out = np.exp(np.where(direct, e, 0.0)) * (ndtr(b) - ndtr(a))
    far = ~direct
    if far.any():
        hi, lo = log_ndtr(b[far]), log_ndtr(a[far])
        with np.errstate(divide="ignore"):  # log1p(-1) where lo == hi, left out
            via_logs = np.exp(e[far] + hi + np.log1p(-np.exp(np.minimum(lo - hi, 0.0))))
        out[far] = np.where(lo >= hi, 0.0, via_logs)
    return out


def _numpy_kernel(m, s, r, y, v, lam, offset, tails, limits, local, jac, out1, out2):
    """:func:`_kernel`'s sums with numpy, many nodes at a time: the same pieces and tail rule,
    summed in another order (equal to rounding, not bit for bit).  Small problems take it
    (:func:`uses_kernel`), so that a first run of a few hundred samples compiles no moments."""
    from scipy.special import erfc, log_ndtr

    def ndtr(x):
        return 0.5 * erfc(-x / _SQRT2)

    def pdf(x):
        return np.exp(-0.5 * x * x - _LOG_SQRT_2PI)

    n_knots = y.size
    pareto = tails[8] > 0.5
    panels = local.size // POINTS
    piece = np.arange(n_knots - 1)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
        slope = (v[1:] - v[:-1]) / (y[1:] - y[:-1])  # zero-width pieces give inf/NaN, left out below
    block = max(1, _BLOCK // (n_knots + 2 * local.size))
    for start in range(0, m.size, block):
        mi, si, ri = m[start:start + block, None], s[start:start + block, None], r[start:start + block, None]
        k0 = np.maximum(np.searchsorted(y, mi - REACH * si, side="left") - 1, 0)
        k1 = np.minimum(np.searchsorted(y, mi + REACH * si, side="left"), n_knots - 1)
        t = (y[None, :] - mi) / si
        big, small = ndtr(t), pdf(t)
        a, c = t[:, :-1], t[:, 1:]
        use = (piece >= k0) & (piece < k1) & (c > a)
        mass = big[:, 1:] - big[:, :-1]
        with np.errstate(invalid="ignore", over="ignore"):
            w = np.where(use, slope * si, 0.0)
            if lam == 0.0:
                d = v[:-1] - ri
                first = small[:, :-1] - small[:, 1:] - a * mass
                second = (1.0 + a * a) * mass - a * small[:, :-1] - (c - 2.0 * a) * small[:, 1:]
                p1 = d * mass + w * first
                p2 = d * d * mass + 2.0 * d * w * first + w * w * second
            else:
                big_r = offset + ri
                g = lam * w
                e1 = _scaled_mass_numpy(np.where(use, lam * v[:-1] - g * a + 0.5 * g * g, 0.0), a - g, c - g,
                                        ndtr, log_ndtr)
                g = 2.0 * g
                e2 = _scaled_mass_numpy(np.where(use, 2.0 * lam * v[:-1] - g * a + 0.5 * g * g, 0.0), a - g, c - g,
                                        ndtr, log_ndtr)
                p1 = e1 - big_r * mass
                p2 = e2 - 2.0 * big_r * e1 + big_r * big_r * mass
            m1 = np.where(use, p1, 0.0).sum(axis=1)
            m2 = np.where(use, p2, 0.0).sum(axis=1)
            for side in range(2):
                t_from = limits[start:start + block, 2 * side, None]
                t_to = limits[start:start + block, 2 * side + 1, None]
                width = (t_to - t_from) / panels
                # the lower tail's datum is at its upper end, the upper tail's at its lower end
                tt = t_to - width * local if side == 0 else t_from + width * local
                weight = width * jac * pdf(tt)
                yy = mi + si * tt
                if side == 0:
                    val = lower_tail(ndtr(yy), tails[0], tails[1], tails[2], tails[3])
                else:
                    val = upper_tail(ndtr(-yy), tails[4], tails[5], tails[6], tails[7], pareto)
                if lam != 0.0:
                    val = np.exp(lam * val) - offset
                dz = val - ri
                on = (t_to > t_from)[:, 0]
                m1 += np.where(on, (weight * dz).sum(axis=1), 0.0)
                m2 += np.where(on, (weight * dz * dz).sum(axis=1), 0.0)
        out1[start:start + block] = m1
        out2[start:start + block] = m2


#: Most node-evaluations (nodes x (knots + tail points)) the moments take with numpy
#: (:func:`_numpy_kernel`); more take the compiled kernel.  2^23: the cross-validation and the
#: estimate of a few hundred samples on a grid of a few ten thousand nodes.  Measured (warm, one
#: core): 15,000 nodes of 80 data 0.13 s with numpy against 0.20 s compiled, 30,000 nodes 0.28
#: against 0.38 s, 2,600 nodes of 3,000 data 0.32 against 0.23 s; compiling the kernel costs
#: about 1.1-1.6 s of CPU on a first run.
NUMPY_MOMENTS_MAX = 1 << 23


def uses_kernel(transform, n_nodes: int) -> bool:
    """Whether the moments of ``n_nodes`` nodes under ``transform`` take the compiled kernel (a
    normal score transform, alone or after a log, on more than :data:`NUMPY_MOMENTS_MAX`
    node-evaluations); fewer, and other transforms, compile nothing."""
    form = _piecewise_form(transform)
    if form is None or form[0] is None:
        return False
    return n_nodes * (len(form[0].scores_) + 2 * PANELS * POINTS) > NUMPY_MOMENTS_MAX


def _rule(panels: int, grade: int) -> tuple[np.ndarray, np.ndarray]:
    """Composite Gauss-Legendre rule on ``[0, panels]`` (in panel widths from one end): the
    first panel in ``x``, distance ``x^grade``, the others plain; points and weights."""
    x, wx = np.polynomial.legendre.leggauss(POINTS)
    x = 0.5 * (x + 1.0)
    local = np.concatenate([x ** grade] + [j + x for j in range(1, panels)])
    jac = np.concatenate([grade * x ** (grade - 1)] + [np.ones_like(x)] * (panels - 1)) * np.tile(0.5 * wx, panels)
    return local, jac


def _plain_steps(transform) -> list:
    """The chain's steps, nested chains flattened, in the forward order."""
    if type(transform) is TransformChain:
        return [s for step in transform.steps for s in _plain_steps(step)]
    return [transform]


def _piecewise_form(transform):
    """``(normal score step, log step)`` when the inverse is ``log^-1(normal score^-1(y))``,
    either part possibly absent (None), else None.  Exact types only: a subclass may
    change ``inverse``."""
    steps = [s for s in _plain_steps(transform) if type(s) is not IdentityTransform]
    core = steps.pop() if steps and type(steps[-1]) is NormalScoreTransform else None
    if len(steps) > 1 or (steps and type(steps[0]) is not LogTransform):
        return None
    return core, (steps[0] if steps else None)


def _tail_limits(core: NormalScoreTransform, log_step: LogTransform | None, m: np.ndarray, s: np.ndarray):
    """Per node: ``(lower from, lower to, upper from, upper to)`` in ``T`` for the tails'
    rule, and where the mean and the variance are infinite.

    Beyond ``+-REACH`` the normal density is negligible.  A Pareto tail grows like
    ``(1 - Phi(y))^(-1/k)``, about ``exp(y^2 / 2k)``, so ``z^j`` times the density of
    ``Y = m + s T`` behaves like a normal density in ``T`` of variance ``1 / (1 - q)``,
    ``q = j s^2 / k``, centred at ``q (m / s) / (1 - q)``: finite for ``q < 1`` only, and
    the rule reaches ``REACH + 1`` such standard deviations past the centre.  Behind a
    log step the tail grows like ``exp(exp(y^2 / 2k))``: no moment is finite.
    """
    limits = np.empty((m.size, 4))
    limits[:, 0] = -REACH
    limits[:, 1] = np.minimum((core.scores_[0] - m) / s, REACH)
    limits[:, 2] = np.maximum((core.scores_[-1] - m) / s, -REACH)
    limits[:, 3] = REACH
    no = np.zeros(m.size, dtype=bool)
    if core.upper_tail != "pareto":
        return limits, no, no
    if log_step is not None:
        limits[:, 3] = limits[:, 2]
        return limits, ~no, ~no
    k = core.upper_exponent
    inf_mean, inf_var = s * s >= k, 2.0 * s * s >= k
    q = np.where(inf_mean, 0.0, np.where(inf_var, s * s, 2.0 * s * s) / k)
    centre = q * (m / s) / (1.0 - q)
    reach = np.maximum(limits[:, 2], centre) + (REACH + 1.0) / np.sqrt(1.0 - q)
    limits[:, 3] = np.where(inf_mean, limits[:, 2], reach)
    return limits, inf_mean, inf_var


def _piecewise_moments(transform, core, log_step, m, s, compiled: bool = False):
    """Mean and variance for nodes with ``s > 0`` when ``transform`` has a piecewise form (through
    the compiled kernel when ``compiled`` or :func:`uses_kernel`, else with numpy)."""
    lam = 0.0 if log_step is None else math.log(log_step.base)
    offset = 0.0 if log_step is None else log_step.offset
    if core is None:
        if log_step is None:
            return m.copy(), s * s
        # log-normal: Aitchison and Brown (1957), ch. 2, from memory
        with np.errstate(over="ignore"):
            return (np.exp(lam * m + 0.5 * (lam * s) ** 2) - offset,
                    np.expm1((lam * s) ** 2) * np.exp(2.0 * lam * m + (lam * s) ** 2))
    r = np.asarray(transform.inverse(m), dtype=float)   # the median: moments about it cancel little
    limits, inf_mean, inf_var = _tail_limits(core, log_step, m, s)
    tails = np.array(core.tail_parameters(), dtype=float)
    first, second = np.empty(m.size), np.empty(m.size)
    work = _kernel if compiled or uses_kernel(transform, m.size) else _numpy_kernel
    work(m, s, r, np.ascontiguousarray(core.scores_, dtype=float), np.ascontiguousarray(core.values_, dtype=float),
         lam, offset, tails, limits, *_rule(PANELS, GRADE), first, second)
    if inf_var.any():
        behind = "behind a log, where no moment is finite" if log_step is not None else \
            f"with exponent {core.upper_exponent:g}, where twice the kriging variance reaches it"
        log.warning("the data-unit variance is infinite at %d of %d nodes (%d with an infinite mean): the "
                    "Pareto upper tail %s; use a bounded upper tail (\"uniform\" or \"power\") or a larger "
                    "exponent", int(inf_var.sum()), m.size, int(inf_mean.sum()), behind)
    mean = np.where(inf_mean, np.inf, r + first)
    var = np.where(inf_var, np.inf, np.maximum(second - first * first, 0.0))
    return mean, var


def _rule_moments(transform, m, s):
    """Mean and variance of ``transform.inverse(m + s T)`` by the composite rule over
    ``+-REACH`` (for transforms geosim cannot take apart), in blocks of nodes."""
    local, jac = _rule(OPAQUE_PANELS, 1)
    t = -REACH + (2.0 * REACH / OPAQUE_PANELS) * local
    wt = (2.0 * REACH / OPAQUE_PANELS) * jac * np.exp(-0.5 * t * t) / math.sqrt(2.0 * math.pi)
    mean, var = np.empty(m.size), np.empty(m.size)
    step = max(1, _BLOCK // t.size)
    for start in range(0, m.size, step):
        mm, ss = m[start:start + step], s[start:start + step]
        r = np.asarray(transform.inverse(mm), dtype=float)
        z = np.asarray(transform.inverse((mm[:, None] + ss[:, None] * t[None, :]).ravel()), dtype=float)
        dz = z.reshape(mm.size, t.size) - r[:, None]
        first = dz @ wt
        mean[start:start + step] = r + first
        var[start:start + step] = np.maximum((dz * dz) @ wt - first * first, 0.0)
    return mean, var


def multigaussian_moments(transform, mean, variance) -> tuple[np.ndarray, np.ndarray]:
    """Mean and variance of ``transform.inverse(Y)`` for ``Y ~ N(mean, variance)``, elementwise.

    For geosim's transforms (a normal score transform, alone or after a log, or a log or
    identity alone, also as a :class:`~geosim.transforms.TransformChain`) every piece of
    the back-transform is integrated in closed form and the tails by a dense rule on the
    tails only (module docstring); the result agrees with adaptive quadrature to about
    1e-8 relative.  A Pareto upper tail with exponent ``k`` gives an infinite mean where
    ``variance >= k`` and an infinite variance where ``2 variance >= k``, and after a log
    infinite moments everywhere: those are ``inf``.  Any other object with an ``inverse``
    is integrated by a composite Gauss-Legendre rule over +-8.5 standard deviations
    (24 panels of 16 points), which assumes a smooth map.  A zero variance gives
    ``inverse(mean)`` and 0; NaN in, NaN out.

    Parameters
    ----------
    transform : object with ``inverse(scores)``
        The fitted transform from data units to normal scores.
    mean, variance : array_like
        Mean and variance of the normal score, broadcast together.

    Returns
    -------
    mean, variance : ndarray
        In data units, of the broadcast shape.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from scipy import integrate
    >>> from geosim.moments import multigaussian_moments
    >>> t = geosim.NormalScoreTransform().fit([1.0, 2.0, 4.0, 8.0])
    >>> mean, var = multigaussian_moments(t, [0.0, 0.2], [0.0, 0.5])
    >>> float(mean[0]), float(var[0])    # the median, halfway between 2 and 4 in scores
    (3.0, 0.0)
    >>> density = lambda y: np.exp(-(y - 0.2) ** 2) / np.sqrt(np.pi)    # N(0.2, 0.5)
    >>> ref = integrate.quad(lambda y: t.inverse([y])[0] * density(y), -6, 6, points=t.scores_)[0]
    >>> bool(abs(mean[1] - ref) < 1e-8)
    True
    """
    mean, variance = np.broadcast_arrays(np.asarray(mean, dtype=float), np.asarray(variance, dtype=float))
    out_mean = np.full(mean.shape, np.nan)
    out_var = np.full(mean.shape, np.nan)
    ok = np.isfinite(mean) & np.isfinite(variance)
    m = mean[ok]
    s = np.sqrt(np.maximum(variance[ok], 0.0))
    got_mean, got_var = np.empty(m.shape), np.zeros(m.shape)
    point = s == 0.0
    got_mean[point] = np.asarray(transform.inverse(m[point]), dtype=float)
    spread = ~point
    if spread.any():
        form = _piecewise_form(transform)
        if form is None:
            got_mean[spread], got_var[spread] = _rule_moments(transform, m[spread], s[spread])
        else:
            got_mean[spread], got_var[spread] = _piecewise_moments(transform, *form, m[spread], s[spread])
    out_mean[ok], out_var[ok] = got_mean, got_var
    return out_mean, out_var


def warm_up() -> None:
    """Compile the moments' kernel (numba's cache keeps it) through the data-unit moments of a
    normal score transform, alone and after a log: the argument types of every real run
    (:func:`geosim.pipeline.moments_ready` calls this when a run that cross-validates or estimates
    finds it not cached, while the kriging kernel compiles in another process)."""
    z = np.random.default_rng(0).lognormal(0.0, 1.0, 12)
    for transform in (NormalScoreTransform(), TransformChain([LogTransform(), NormalScoreTransform()])):
        transform.fit(z)
        _piecewise_moments(transform, *_piecewise_form(transform), np.zeros(3), np.full(3, 0.5), compiled=True)
