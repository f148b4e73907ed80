"""Transforms between data values and the scale the Gaussian models work on.

Every transform has ``fit(values, weights=None) -> self``, ``transform(values)``,
``inverse(scores)``, ``describe() -> str`` and ``to_dict()``; :func:`transform_from_dict`
rebuilds one from its dictionary (as stored in a run report).

Normal score transform
----------------------
Data ``v`` sorted ascending with declustering weights ``w`` normalized to sum 1
get the plotting positions

    p_i = (w_1 + ... + w_i) - w_i / 2,

the cumulative weight up to and including ``i`` minus half its own weight (with
equal weights ``p_i = (i - 1/2) / n``, the midpoint or Hazen position), and the
scores ``y_i = Phi^-1(p_i)``, ``Phi`` the standard normal distribution function.

*Ties* (equal values) must get distinct scores so the transformed data are not
lumped; they are ordered by a random permutation drawn from ``seed`` (default) or
by their order in the input, so the result is reproducible either way.  New values
equal to a tied data value map to the weighted mean score of the tie.

Between the smallest and the largest datum the back-transform interpolates
linearly between the points ``(y_i, v_i)``.  Outside, with ``P = Phi(y)``,
``p_1``, ``p_n`` the first and last plotting positions, ``v_1``, ``v_n`` the
extreme data and ``k`` the tail's ``exponent``, the tails are named after the
distribution the values beyond the extreme datum follow:

* lower ``"uniform"``: ``v = lo + (v_1 - lo) * P / p_1`` (``lo`` = ``lower``): values
  spread evenly between the bound and the smallest datum;
* lower ``"power"``:   ``v = lo + (v_1 - lo) * (P / p_1) ** (1 / k)``, i.e.
  ``F(v) = p_1 ((v - lo) / (v_1 - lo)) ** k``, a power-function distribution;
* upper ``"uniform"``: ``v = v_n + (hi - v_n) * (P - p_n) / (1 - p_n)`` (``hi`` = ``upper``);
* upper ``"power"``:   ``v = v_n + (hi - v_n) * ((P - p_n) / (1 - p_n)) ** (1 / k)``;
* upper ``"pareto"``:  ``1 - F(v) = (1 - p_n) (v_n / v) ** k`` for ``v > v_n``, i.e.
  ``v = v_n * ((1 - p_n) / (1 - P)) ** (1 / k)``: a Pareto (power-law) tail with
  tail index ``k``, unbounded, for positively skewed grades.  Its mean is finite
  only for ``k > 1`` and its variance only for ``k > 2``; with ``k <= 2`` the
  largest simulated values grow without limit as more nodes are simulated, so
  the transform warns (the Pareto distribution's moments: Johnson, Kotz and
  Balakrishnan 1994, Continuous Univariate Distributions, vol. 1, 2nd ed., Wiley,
  chapter 20, from memory).

The uniform tails are the power tails with ``k = 1``.  Default exponents: 1 for
``"uniform"``, 1.5 for ``"power"`` (values crowd towards the bound less than
uniformly) and 3 for ``"pareto"`` (a finite variance).  Tail extrapolation of the
normal score transform follows Goovaerts (1997), Geostatistics for Natural
Resources Evaluation, Oxford University Press, section 7.2 (from memory, section
not checked; the formulas above are the ones implemented).  The forward
transform of values outside the data range inverts the same tail model, so
``inverse(transform(v)) == v``.
"""
from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ._forward import forward
from .errors import InputError
from .retired import accepts_retired

log = logging.getLogger(__name__)


def _no_note(record: logging.LogRecord) -> bool:
    """A logging filter that drops every record."""
    return False


_TINY = 1e-12  # probabilities are kept in [_TINY, 1 - _TINY] so scores stay finite
LOWER_TAILS = ("uniform", "power")
UPPER_TAILS = ("uniform", "power", "pareto")
# the exponent each tail takes when none is given (module docstring)
DEFAULT_EXPONENT = {"uniform": 1.0, "power": 1.5, "pareto": 3.0}


def _ndtr(y):
    from scipy.special import ndtr
    return ndtr(y)


def _ndtri(p):
    from scipy.special import ndtri
    return ndtri(p)


def _as_values(values, what: str = "values") -> np.ndarray:
    v = np.asarray(values, dtype=np.float64)
    if v.ndim != 1:
        raise ValueError(f"{what} must be one-dimensional, got shape {v.shape}")
    return v


def _first_nonfinite(v: np.ndarray, what: str, name: str | None) -> None:
    bad = ~np.isfinite(v)
    if bad.any():
        i = int(np.argmax(bad))
        raise InputError(f"{what} {i + 1} is {v[i]}", field=name,
                         fix="remove samples without a value before transforming")


def lower_tail(p, lower, v1, p1, inv_k):
    """Values below the smallest datum ``v1`` at probabilities ``p = Phi(y) < p1``: the
    uniform (``inv_k = 1``) and power lower tails of the module docstring.

    Plain arithmetic on numbers or arrays, so that :mod:`geosim.moments` compiles this
    same function into its kernel."""
    return lower + (v1 - lower) * (p / p1) ** inv_k


def upper_tail(q, vn, upper, pn, inv_k, pareto):
    """Values above the largest datum ``vn`` at ``q = 1 - Phi(y) < 1 - pn``: the uniform,
    power and (``pareto``) Pareto upper tails of the module docstring (like
    :func:`lower_tail`, compiled into :mod:`geosim.moments` too)."""
    if pareto:
        return vn * ((1.0 - pn) / np.maximum(q, 1e-300)) ** inv_k
    return vn + (upper - vn) * np.minimum(np.maximum(1.0 - q / (1.0 - pn), 0.0), 1.0) ** inv_k


class IdentityTransform:
    """Leaves values unchanged (for data already roughly Gaussian).

    Examples
    --------
    >>> import geosim
    >>> geosim.IdentityTransform().fit([1.0, 2.0]).inverse([3.0]).tolist()
    [3.0]
    """

    kind = "identity"

    def fit(self, values, weights=None) -> IdentityTransform:
        return self

    def transform(self, values) -> np.ndarray:
        return np.asarray(values, dtype=np.float64)

    def inverse(self, scores) -> np.ndarray:
        return np.asarray(scores, dtype=np.float64)

    def describe(self) -> str:
        return "identity (values used as they are)"

    def to_dict(self) -> dict:
        return {"kind": self.kind}


class LogTransform:
    """Logarithm ``log_base(v + offset)``, for hydraulic conductivity and other log-normal variables.

    Parameters
    ----------
    base : float
        10 (default, the usual scale for conductivity) or ``numpy.e``.
    offset : float
        Added before taking the log; 0 unless zeros are meaningful.
    name : str, optional
        Variable name, used in error messages.

    Raises
    ------
    InputError
        From ``fit``/``transform`` when a value plus offset is not positive, naming
        the sample (1-based index) and the variable.

    Examples
    --------
    >>> import geosim
    >>> t = geosim.LogTransform().fit([1e-5, 1e-3])
    >>> t.transform([1e-4]).round(6).tolist(), float(t.inverse([-4.0])[0])
    ([-4.0], 0.0001)
    """

    kind = "log"

    def __init__(self, base: float = 10.0, offset: float = 0.0, name: str | None = None):
        if not base > 1.0:
            raise ValueError(f"log base must be > 1, got {base}")
        self.base = float(base)
        self.offset = float(offset)
        self.name = name

    def fit(self, values, weights=None) -> LogTransform:
        self.transform(values)
        return self

    def transform(self, values) -> np.ndarray:
        v = np.asarray(values, dtype=np.float64) + self.offset
        bad = ~(v > 0.0)
        if bad.any():
            i = int(np.argmax(bad.ravel()))
            raw = np.ravel(values)[i]
            raise InputError(f"sample {i + 1} has value {raw}, which has no logarithm"
                             + (f" (offset {self.offset})" if self.offset else ""), field=self.name,
                             fix="correct or remove non-positive values (a value below detection is "
                                 "usually entered as half the detection limit), or use another transform")
        return np.log(v) / np.log(self.base)

    def inverse(self, scores) -> np.ndarray:
        return np.power(self.base, np.asarray(scores, dtype=np.float64)) - self.offset

    def describe(self) -> str:
        off = f" + {self.offset:g}" if self.offset else ""
        if self.base == 10.0:
            return f"log10(value{off})"
        if np.isclose(self.base, np.e):
            return f"ln(value{off})"
        return f"log base {self.base:g} of (value{off})"

    def to_dict(self) -> dict:
        return {"kind": self.kind, "base": self.base, "offset": self.offset, "name": self.name}


def infinite_variance_note(exponent: float, name: str | None = None) -> str:
    """The warning for a Pareto upper tail without a finite variance (``exponent <= 2``)."""
    who = f" of {name}" if name else ""
    return (f"the Pareto upper tail{who} with exponent {exponent:g} has an infinite variance (it needs "
            f"an exponent above 2): realization maxima can lie far above the largest datum and "
            f"standard deviations in data units become unstable; give an exponent above 2, or a "
            f"bounded tail (\"uniform\" or \"power\" up to an upper value)")


@accepts_retired("NormalScoreTransform")
class NormalScoreTransform:
    """Transform to standard normal scores by matching quantiles, with tail models.

    See the module docstring for the plotting positions, the tie rule and the
    tail formulas.

    Parameters
    ----------
    lower, upper : float, optional
        Bounds of the uniform and power tails.  Default: the data minimum and
        maximum extended by 10 % of the data range, and ``lower`` not below 0 when
        every datum is >= 0.
    lower_tail : {"uniform", "power"}
    upper_tail : {"uniform", "power", "pareto"}
    lower_exponent, upper_exponent : float, optional
        The tails' exponents ``k`` (module docstring); default 1 for a uniform,
        1.5 for a power and 3 for a Pareto tail.  A Pareto tail needs ``k >= 1``
        and logs a note (a warning of the ``geosim`` logger) for ``k <= 2``, where its
        variance is infinite.
    ties : {"random", "order"}
        How equal values are ordered before scores are assigned.
    seed : int
        Seed of the random tie order.
    name : str, optional
        Variable name, for messages and :meth:`describe`.

    Attributes
    ----------
    values_ : (n,) ndarray
        The data, sorted (ties in their broken order).
    scores_ : (n,) ndarray
        Normal score of each sorted datum.
    probabilities_ : (n,) ndarray
        Plotting position of each sorted datum.
    data_scores_ : (n,) ndarray
        Normal score of each datum in input order (ties distinct).
    lower_, upper_ : float
        Tail bounds in use.

    Examples
    --------
    >>> import numpy, geosim
    >>> t = geosim.NormalScoreTransform().fit([3.0, 1.0, 2.0, 4.0])
    >>> t.data_scores_.round(4).tolist()   # Phi^-1 of 0.625, 0.125, 0.375, 0.875
    [0.3186, -1.1503, -0.3186, 1.1503]
    >>> t.inverse(t.transform([2.5])).round(6).tolist()
    [2.5]
    """

    kind = "normal_score"

    def __init__(self, *, lower: float | None = None, upper: float | None = None,
                 lower_tail: str = "uniform", upper_tail: str = "uniform", lower_exponent: float | None = None,
                 upper_exponent: float | None = None, ties: str = "random", seed: int = 0,
                 name: str | None = None):
        if lower_tail not in LOWER_TAILS:
            raise ValueError(f"lower_tail must be 'uniform' or 'power', got {lower_tail!r}")
        if upper_tail not in UPPER_TAILS:
            raise ValueError(f"upper_tail must be 'uniform', 'power' or 'pareto', got {upper_tail!r}")
        lower_exponent = DEFAULT_EXPONENT[lower_tail] if lower_exponent is None else float(lower_exponent)
        upper_exponent = DEFAULT_EXPONENT[upper_tail] if upper_exponent is None else float(upper_exponent)
        if not lower_exponent > 0 or not upper_exponent > 0:
            raise ValueError("tail exponents must be positive")
        if upper_tail == "pareto" and upper_exponent < 1.0:
            raise ValueError(f"the Pareto tail needs upper_exponent >= 1 (a finite mean), got {upper_exponent}")
        if upper_tail == "pareto" and upper_exponent <= 2.0:
            log.warning("%s", infinite_variance_note(upper_exponent, name))
        if ties not in ("random", "order"):
            raise ValueError(f"ties must be 'random' or 'order', got {ties!r}")
        self.lower, self.upper = lower, upper
        self.lower_tail, self.upper_tail = lower_tail, upper_tail
        self.lower_exponent, self.upper_exponent = lower_exponent, upper_exponent
        self.ties, self.seed, self.name = ties, int(seed), name

    # fitting -----------------------------------------------------------------
    def fit(self, values, weights=None) -> NormalScoreTransform:
        """Build the score table from data and optional declustering weights."""
        v = _as_values(values)
        _first_nonfinite(v, "value", self.name)
        n = len(v)
        if n < 2:
            raise InputError(f"a normal score transform needs at least 2 values, got {n}", field=self.name)
        if weights is None:
            w = np.full(n, 1.0 / n)
        else:
            w = _as_values(weights, "weights")
            if w.shape != v.shape:
                raise ValueError(f"weights must match values: {w.shape} vs {v.shape}")
            if not (np.isfinite(w).all() and (w >= 0).all() and w.sum() > 0):
                raise ValueError("weights must be finite, non-negative and not all zero")
            w = w / w.sum()
        if self.ties == "random":
            key = np.random.default_rng(self.seed).permutation(n)
            order = np.lexsort((key, v))
        else:
            order = np.argsort(v, kind="stable")
        vs, ws = v[order], w[order]
        p = np.cumsum(ws) - 0.5 * ws
        p = np.clip(p, _TINY, 1.0 - _TINY)
        y = _ndtri(p)
        data_scores = np.empty(n)
        data_scores[order] = y
        lo, hi = self._bounds(vs)
        if self.upper_tail == "pareto" and not vs[-1] > 0:
            raise InputError("the Pareto upper tail needs a positive largest value", field=self.name,
                             fix="use upper_tail='uniform' or 'power'")
        self.values_, self.scores_, self.probabilities_, self.weights_ = vs, y, p, ws
        self.data_scores_ = data_scores
        self.lower_, self.upper_ = lo, hi
        self._table()
        return self

    def _bounds(self, vs: np.ndarray) -> tuple[float, float]:
        span = vs[-1] - vs[0]
        pad = 0.1 * span if span > 0 else 0.1 * max(abs(vs[0]), 1.0)
        lo = vs[0] - pad if self.lower is None else float(self.lower)
        if self.lower is None and vs[0] >= 0:
            lo = max(lo, 0.0)
        hi = vs[-1] + pad if self.upper is None else float(self.upper)
        if lo > vs[0]:
            raise InputError(f"lower bound {lo} is above the smallest value {vs[0]}", field=self.name,
                             fix="set lower at or below the data minimum")
        if self.upper_tail != "pareto" and hi < vs[-1]:
            raise InputError(f"upper bound {hi} is below the largest value {vs[-1]}", field=self.name,
                             fix="set upper at or above the data maximum")
        return float(lo), float(hi)

    def _table(self) -> None:
        # unique values with the weighted mean score of each tie: the forward lookup table
        uv, start = np.unique(self.values_, return_index=True)
        wsum = np.add.reduceat(self.weights_, start)
        mean_w = np.add.reduceat(self.scores_ * self.weights_, start) / np.where(wsum > 0, wsum, 1.0)
        mean_plain = np.add.reduceat(self.scores_, start) / np.diff(np.r_[start, len(self.values_)])
        self._uv, self._uy = uv, np.where(wsum > 0, mean_w, mean_plain)

    def _check_fitted(self) -> None:
        if not hasattr(self, "values_"):
            raise RuntimeError("fit the transform before using it")

    # mapping -----------------------------------------------------------------
    def transform(self, values) -> np.ndarray:
        """Normal scores of values (data or new values); NaN stays NaN."""
        self._check_fitted()
        v = np.asarray(values, dtype=np.float64)
        shape, v = v.shape, v.ravel()
        out = np.interp(v, self._uv, self._uy)
        v1, vn = self.values_[0], self.values_[-1]
        p1, pn = self.probabilities_[0], self.probabilities_[-1]
        with np.errstate(invalid="ignore", divide="ignore"):
            low = v < v1
            if low.any():
                frac = np.clip((v[low] - self.lower_) / (v1 - self.lower_), 0.0, 1.0) if v1 > self.lower_ \
                    else np.zeros(low.sum())
                om = self.lower_exponent if self.lower_tail == "power" else 1.0
                out[low] = _ndtri(np.clip(p1 * frac ** om, _TINY, p1))
            high = v > vn
            if high.any():
                if self.upper_tail == "pareto":
                    q = (1.0 - pn) * (vn / v[high]) ** self.upper_exponent
                else:
                    om = self.upper_exponent if self.upper_tail == "power" else 1.0
                    frac = np.clip((v[high] - vn) / (self.upper_ - vn), 0.0, 1.0) if self.upper_ > vn \
                        else np.ones(high.sum())
                    q = (1.0 - pn) * (1.0 - frac ** om)
                out[high] = -_ndtri(np.clip(q, _TINY, 1.0 - pn))
        out[np.isnan(v)] = np.nan
        return out.reshape(shape)

    def inverse(self, scores) -> np.ndarray:
        """Values of normal scores: linear interpolation inside the data, tail models outside."""
        self._check_fitted()
        y = np.asarray(scores, dtype=np.float64)
        shape, y = y.shape, y.ravel()
        from .fieldstats import interp  # numpy's interpolation; compiled for a whole realization
        out = interp(y, self.scores_, self.values_)
        low = y < self.scores_[0]
        if low.any():
            out[low] = lower_tail(_ndtr(y[low]), *self.tail_parameters()[:4])
        high = y > self.scores_[-1]
        if high.any():
            # 1 - Phi(y) without cancellation in the far tail
            out[high] = upper_tail(_ndtr(-y[high]), *self.tail_parameters()[4:])
        out[np.isnan(y)] = np.nan
        return out.reshape(shape)

    def tail_parameters(self) -> tuple[float, float, float, float, float, float, float, float, bool]:
        """``(lower_, v_1, p_1, 1/k_lower, v_n, upper_, p_n, 1/k_upper, pareto)``: the arguments
        of :func:`lower_tail` (first four) and :func:`upper_tail` (the rest) for this fit."""
        self._check_fitted()
        k_low = self.lower_exponent if self.lower_tail == "power" else 1.0
        k_up = self.upper_exponent if self.upper_tail != "uniform" else 1.0
        return (self.lower_, float(self.values_[0]), float(self.probabilities_[0]), 1.0 / k_low,
                float(self.values_[-1]), self.upper_, float(self.probabilities_[-1]), 1.0 / k_up,
                self.upper_tail == "pareto")

    def fit_transform(self, values, weights=None) -> np.ndarray:
        """Fit, then return the scores of the data in input order (ties distinct)."""
        return self.fit(values, weights).data_scores_.copy()

    # reporting ---------------------------------------------------------------
    def describe(self) -> str:
        self._check_fitted()
        lower = (f"lower tail {self.lower_tail} down to {self.lower_:g}"
                 + (f" (exponent {self.lower_exponent:g})" if self.lower_tail == "power" else ""))
        if self.upper_tail == "pareto":
            finite = "finite variance" if self.upper_exponent > 2.0 else "infinite variance"
            upper = f"upper tail pareto, unbounded (exponent {self.upper_exponent:g}, {finite})"
        else:
            upper = (f"upper tail {self.upper_tail} up to {self.upper_:g}"
                     + (f" (exponent {self.upper_exponent:g})" if self.upper_tail == "power" else ""))
        weighted = "declustering weights" if not np.allclose(self.weights_, self.weights_[0]) else "equal weights"
        who = f" of {self.name}" if self.name else ""
        return (f"normal score transform{who}: {len(self.values_)} values ({weighted}), data range "
                f"{self.values_[0]:g} to {self.values_[-1]:g}; {lower}; {upper}; ties ordered "
                + ("at random (seed %d)" % self.seed if self.ties == "random" else "by input order"))

    def to_dict(self) -> dict:
        self._check_fitted()
        return {"kind": self.kind, "name": self.name,
                "lower_tail": self.lower_tail, "upper_tail": self.upper_tail,
                "lower_exponent": self.lower_exponent, "upper_exponent": self.upper_exponent,
                "lower": self.lower_, "upper": self.upper_, "ties": self.ties, "seed": self.seed,
                "values": self.values_.tolist(), "weights": self.weights_.tolist()}

    @classmethod
    def from_dict(cls, d: Mapping) -> NormalScoreTransform:
        """Rebuild from :meth:`to_dict`: the same mapping both ways (``data_scores_`` then
        follow the stored, sorted order, since the input order is not stored)."""
        # a dictionary written before the renames carries lower_omega/upper_omega
        exponents = {k: d[k] for k in ("lower_exponent", "upper_exponent", "lower_omega", "upper_omega") if k in d}
        log.addFilter(_no_note)  # the tail was judged when the transform was first made
        try:
            t = cls(lower=d["lower"], upper=d["upper"], lower_tail=d["lower_tail"], upper_tail=d["upper_tail"],
                    ties="order", seed=d.get("seed", 0), name=d.get("name"), **exponents)
        finally:
            log.removeFilter(_no_note)
        # the stored values are already in their broken-tie order, so "order" reproduces the table
        t.fit(d["values"], d["weights"])
        t.ties = d.get("ties", "random")
        return t


def transform_from_dict(d: Mapping):
    """Rebuild a transform from its :meth:`to_dict` form.

    Examples
    --------
    >>> import geosim
    >>> t = geosim.transform_from_dict(geosim.LogTransform(base=10).to_dict())
    >>> t.describe()
    'log10(value)'
    """
    kind = d.get("kind")
    if kind == "identity":
        return IdentityTransform()
    if kind == "log":
        return LogTransform(base=d.get("base", 10.0), offset=d.get("offset", 0.0), name=d.get("name"))
    if kind == "normal_score":
        return NormalScoreTransform.from_dict(d)
    raise ValueError(f"unknown transform kind {kind!r}; expected 'identity', 'log' or 'normal_score'")


class TransformChain:
    """Transforms applied in order (e.g. log10, then normal scores), inverted in reverse.

    Has the transform interface of :mod:`geosim.transforms` (``fit``, ``transform``,
    ``inverse``, ``describe``, ``to_dict``) and is picklable, so its ``inverse`` can
    run in simulation workers.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.transforms import TransformChain
    >>> t = TransformChain([geosim.LogTransform(), geosim.NormalScoreTransform()])
    >>> k = np.array([1e-5, 1e-4, 1e-3, 1e-2])
    >>> np.allclose(t.inverse(t.fit(k).transform(k)), k)
    True
    """

    kind = "chain"

    def __init__(self, steps: Sequence[Any]):
        self.steps = list(steps)

    def fit(self, values, weights=None) -> TransformChain:
        """Fit every step in turn; ``data_scores_`` keeps the data's scores in input order.

        The last step's own ``fit_transform`` gives tied data distinct scores (the
        normal score transform's seeded tie order), where :meth:`transform` maps a
        tie to its mean score; fitting, conditioning and validation use ``data_scores_``.
        """
        v = np.asarray(values, dtype=float)
        for step in self.steps[:-1]:
            v = step.fit(v, weights).transform(v)
        last = self.steps[-1]
        v = last.fit_transform(v, weights) if hasattr(last, "fit_transform") else last.fit(v, weights).transform(v)
        self.data_scores_ = np.asarray(v, dtype=float)
        return self

    def fit_transform(self, values, weights=None) -> np.ndarray:
        """Fit, then return the data's scores in input order (ties distinct)."""
        return self.fit(values, weights).data_scores_.copy()

    def transform(self, values) -> np.ndarray:
        v = np.asarray(values, dtype=float)
        for step in self.steps:
            v = step.transform(v)
        return v

    def inverse(self, scores) -> np.ndarray:
        v = np.asarray(scores, dtype=float)
        for step in reversed(self.steps):
            v = step.inverse(v)
        return v

    def describe(self) -> str:
        return " then ".join(step.describe() for step in self.steps)

    def to_dict(self) -> dict:
        return {"kind": "chain", "steps": [step.to_dict() for step in self.steps]}


__getattr__ = forward(__name__, {"multigaussian_moments": "geosim.moments"})
