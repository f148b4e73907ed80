"""Covariance structures and nested models: a sum of structures, each with its own anisotropy.

:class:`Structure` (the base class of every structure, built-in or plugin) and
:class:`Model` (their sum) refer to each other (``a + b`` of two structures is a
model), so they share this module; the built-in shapes are in
:mod:`geosim.variogram.structures`.
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from .anisotropy import Anisotropy
from .codes import MATERN, TABULATED
from .plugin_forms import add_covariance, as3, evaluate_compiled, note_numpy_only

_TABLE_POINTS = 4097


@dataclass(frozen=True)
class Structure:
    """One covariance structure: a sill, an anisotropy and a correlation shape.

    Subclasses define ``kind`` (the name used in model files and run specs),
    ``code`` and :meth:`correlation`.  ``param`` carries one shape parameter
    (the Matern smoothness); structures without one ignore it.
    """

    sill: float = 1.0
    anisotropy: Anisotropy = field(default_factory=lambda: Anisotropy((1.0, 1.0, 1.0)))
    param: float = 0.0

    kind = "structure"
    code = -1
    param_name = None
    numba_correlation = None  # optional compiled scalar form rho(r, param); see plugin_forms.py

    def __post_init__(self):
        if not np.isfinite(self.sill) or self.sill < 0:
            raise ValueError(f"{self.kind}: sill must be a number >= 0, got {self.sill!r}")
        if not isinstance(self.anisotropy, Anisotropy):
            object.__setattr__(self, "anisotropy", _as_anisotropy(self.anisotropy))

    def correlation(self, r: np.ndarray) -> np.ndarray:
        """Correlation at reduced distances ``r >= 0`` (vectorized).

        By default ``numba_correlation`` evaluated in one compiled loop; structures
        without a compiled form override this method with numpy code.
        """
        function = type(self).numba_correlation
        if function is None:
            raise NotImplementedError(f"{self.kind}: define correlation(r) or numba_correlation(r, param)")
        return evaluate_compiled(function, r, self.param)

    def covariance(self, h: np.ndarray) -> np.ndarray:
        """Covariance at lag vectors ``h`` of shape (..., d)."""
        return self.sill * self.correlation(self.anisotropy.reduced_distance(h))

    def with_(self, **changes) -> Structure:
        return replace(self, **changes)

    def __add__(self, other):
        return Model([self]) + other

    __radd__ = __add__


def _as_anisotropy(value) -> Anisotropy:
    if isinstance(value, Anisotropy):
        return value
    if np.isscalar(value):
        return Anisotropy.isotropic(float(value))
    return Anisotropy(tuple(value))


BUILTIN_STRUCTURES: dict[str, type[Structure]] = {}
"""geosim's own structure classes by ``kind``; :mod:`geosim.variogram.structures` fills it in."""



class Model:
    """A nested covariance model ``C(h) = sum_j sill_j * rho_j(|M_j h|)``.

    Parameters
    ----------
    structures : sequence of Structure
        The nested structures (a nugget is a structure like any other).

    Examples
    --------
    >>> import geosim
    >>> from geosim.variogram import Model, Nugget, Spherical, Anisotropy
    >>> m = Nugget(0.1) + Spherical(0.9, Anisotropy((100.0, 50.0, 100.0), azimuth=90.0))
    >>> m.sill
    1.0
    >>> m.semivariance([[50.0, 0.0], [0.0, 50.0]]).round(4)   # half the major range; the minor range
    array([0.7188, 1.    ])
    """

    def __init__(self, structures: Iterable[Structure]):
        self.structures: tuple[Structure, ...] = tuple(structures)
        for s in self.structures:
            if not isinstance(s, Structure):
                raise TypeError(f"expected Structure instances, got {type(s).__name__}")
        if not self.structures:
            raise ValueError("a model needs at least one structure")

    # composition -----------------------------------------------------------
    def __add__(self, other) -> Model:
        if isinstance(other, Structure):
            return Model(self.structures + (other,))
        if isinstance(other, Model):
            return Model(self.structures + other.structures)
        return NotImplemented

    __radd__ = __add__

    def __eq__(self, other) -> bool:
        return isinstance(other, Model) and self.structures == other.structures

    def __hash__(self):
        return hash(self.structures)

    def __len__(self) -> int:
        return len(self.structures)

    def __iter__(self):
        return iter(self.structures)

    # values ------------------------------------------------------------------
    @property
    def sill(self) -> float:
        """Total sill: the covariance at zero lag."""
        return float(sum(s.sill for s in self.structures))

    @property
    def nugget(self) -> float:
        return float(sum(s.sill for s in self.structures if s.kind == "nugget"))

    @property
    def max_range(self) -> float:
        """Largest range of any non-nugget structure (metres)."""
        ranges = [max(s.anisotropy.ranges) for s in self.structures if s.kind != "nugget"]
        return float(max(ranges)) if ranges else 0.0

    def covariance(self, h) -> np.ndarray:
        """Covariance at lag vectors ``h`` of shape (..., d)."""
        h = np.asarray(h, dtype=float)
        return sum(s.covariance(h) for s in self.structures)

    def semivariance(self, h) -> np.ndarray:
        """Semivariance ``gamma(h) = C(0) - C(h)`` at lag vectors of shape (..., d)."""
        return self.sill - self.covariance(h)

    def cov_matrix(self, a, b=None, *, chunk: int = 2048) -> np.ndarray:
        """Covariances between point sets ``a`` (n, d) and ``b`` (m, d), shape (n, m)."""
        a = np.atleast_2d(np.asarray(a, dtype=float))
        b = a if b is None else np.atleast_2d(np.asarray(b, dtype=float))
        if a.shape[1] != b.shape[1]:
            raise ValueError(f"point sets differ in dimension: {a.shape[1]} and {b.shape[1]}")
        out = np.zeros((a.shape[0], b.shape[0]))
        # built-in closed forms and plugins' compiled forms run in compiled loops over the pairs,
        # without lag arrays; the rest (Matern, numpy-only plugins, 1-D lags) through numpy
        route = [_route(s, a.shape[1]) for s in self.structures]
        closed = [s for s, how in zip(self.structures, route) if how == "closed"]
        if closed:
            from .compiled import cov_matrix_into
            cov_matrix_into(Model(closed).compiled(), as3(a), as3(b), out)
        rest = [s for s, how in zip(self.structures, route) if how == "numpy"]
        if rest:
            for start in range(0, a.shape[0], chunk):
                block = a[start:start + chunk]
                out[start:start + chunk] += sum(s.covariance(block[:, None, :] - b[None, :, :]) for s in rest)
        if "plugin" in route:
            for s, how in zip(self.structures, route):
                if how == "plugin":
                    add_covariance(s, a, b, out)
        return out

    # compiled form -----------------------------------------------------------
    def compiled(self) -> tuple:
        """Arrays for the compiled kernels in :mod:`geosim.variogram.compiled`.

        Returns ``(codes, sills, mats, params, tables, steps)``: structure codes
        (int64[m]), sills (float64[m]), reduced-distance matrices (float64[m, 3, 3]),
        shape parameters (float64[m]), correlation tables (float64[m, T]) and
        their steps in reduced distance (float64[m]).  Structures without a
        closed compiled form (Matern, plugin structures with only a numpy form)
        are tabulated on ``0 <= r <= r_max`` and interpolated linearly.
        """
        m = len(self.structures)
        codes = np.empty(m, dtype=np.int64)
        sills = np.empty(m)
        mats = np.empty((m, 3, 3))
        params = np.empty(m)
        need_table = [s.code == MATERN or s.code < 0 or s.code >= 100 for s in self.structures]
        for s in self.structures:
            if BUILTIN_STRUCTURES.get(s.kind) is not type(s):
                note_numpy_only(type(s))
        tables = np.zeros((m, _TABLE_POINTS if any(need_table) else 1))
        steps = np.ones(m)
        for j, s in enumerate(self.structures):
            codes[j] = TABULATED if need_table[j] else s.code
            sills[j] = s.sill
            mats[j] = s.anisotropy.matrix()
            params[j] = s.param
            if need_table[j]:
                r_max = _table_extent(s)
                r = np.linspace(0.0, r_max, _TABLE_POINTS)
                tables[j] = s.correlation(r)
                tables[j, -1] = 0.0 if tables[j, -1] < 1e-6 else tables[j, -1]
                steps[j] = r_max / (_TABLE_POINTS - 1)
        return (codes, sills, np.ascontiguousarray(mats), params, tables, steps)

    # text and dictionaries ---------------------------------------------------
    def to_dicts(self) -> list[dict]:
        out = []
        for s in self.structures:
            d = {"kind": s.kind, "sill": s.sill}
            if s.kind != "nugget":
                a = s.anisotropy
                d.update(ranges=list(a.ranges), azimuth=a.azimuth, dip=a.dip, rake=a.rake)
            if s.param_name:
                d[s.param_name] = s.param
            out.append(d)
        return out

    @classmethod
    def from_dicts(cls, items: Sequence[dict], registry: dict | None = None) -> Model:
        if registry is None:  # every installed structure, plugins included
            from ..plugins import structures as installed_structures
            registry = installed_structures()
        structures = []
        for i, d in enumerate(items):
            d = dict(d)
            kind = d.pop("kind", None)
            if kind not in registry:
                raise ValueError(f"structure {i + 1}: unknown kind {kind!r}; known: {', '.join(sorted(registry))}")
            cls_ = registry[kind]
            kwargs = {"sill": float(d.pop("sill"))}
            if kind != "nugget":
                kwargs["anisotropy"] = Anisotropy(tuple(d.pop("ranges")), float(d.pop("azimuth", 0.0)),
                                                  float(d.pop("dip", 0.0)), float(d.pop("rake", 0.0)))
            if cls_.param_name and cls_.param_name in d:
                kwargs["param"] = float(d.pop(cls_.param_name))
            if d:
                raise ValueError(f"structure {i + 1} ({kind}): unexpected keys {sorted(d)}")
            structures.append(cls_(**kwargs))
        return cls(structures)

    def text(self, ndim: int | None = None) -> str:
        """The model as text, one structure a line; ``ndim=2`` prints what a 2-D grid uses
        (major and minor ranges and the azimuth), 3 or None every range and angle.

        Examples
        --------
        >>> import geosim
        >>> m = geosim.Nugget(0.1) + geosim.Spherical(0.9, geosim.Anisotropy((300.0, 100.0), azimuth=30.0))
        >>> print(m.text(2))
          nugget sill=0.1
        + spherical sill=0.9 ranges=(300, 100) azimuth=30
        >>> print(m.text(3).splitlines()[1])
        + spherical sill=0.9 ranges=(300, 100, 300) azimuth=30 dip=0 rake=0
        """
        if ndim not in (None, 2, 3):
            raise ValueError(f"ndim must be 2, 3 or None, got {ndim!r}")
        lines = []
        for i, d in enumerate(self.to_dicts()):
            parts = [f"{d['kind']} sill={d['sill']:.6g}"]
            if "ranges" in d:
                ranges = d["ranges"][:2] if ndim == 2 else d["ranges"]
                parts.append("ranges=(" + ", ".join(f"{r:.6g}" for r in ranges) + ")")
                parts.append(f"azimuth={d['azimuth']:.6g}" if ndim == 2 else
                             f"azimuth={d['azimuth']:.6g} dip={d['dip']:.6g} rake={d['rake']:.6g}")
            for k, v in d.items():
                if k not in ("kind", "sill", "ranges", "azimuth", "dip", "rake"):
                    parts.append(f"{k}={v:.6g}")
            lines.append(("  " if i == 0 else "+ ") + " ".join(parts))
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.text()

    def __repr__(self) -> str:
        """One line of the text form, e.g. ``Model(nugget sill=0.1 + spherical sill=0.9 ranges=(100, 50, 100) ...)``."""
        return f"Model({' '.join(str(self).split())})"


def _route(s: Structure, d: int) -> str:
    """How :meth:`Model.cov_matrix` evaluates a structure: "closed", "plugin" or "numpy"."""
    if type(s).numba_correlation is not None:
        return "plugin"
    if d > 1 and BUILTIN_STRUCTURES.get(s.kind) is type(s) and s.code != MATERN:
        return "closed"  # 1-D lags follow the major axis unrotated, which cov_lag does not do
    return "numpy"


def _table_extent(s: Structure) -> float:
    """Reduced distance past which the correlation stays negligible (< 1e-6), capped.

    "Stays": an oscillating (hole-effect) correlation crosses zero long before it dies out.
    """
    r = np.linspace(0.0, 50.0, 5001)
    rho = np.abs(s.correlation(r))
    above = np.nonzero(rho >= 1e-6)[0]
    if above.size and above[-1] == r.size - 1:
        return 50.0
    return float(max(r[above[-1] + 1], 1.0)) if above.size else 1.0
