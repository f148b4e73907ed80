"""Entry-point registry: geosim's own structures, engines and writers load the same
way a third-party plugin's do.

Groups (entry-point group names in ``pyproject.toml``):

=============  =======================  ==============================================
short name     entry-point group        what an entry point names
=============  =======================  ==============================================
structures     ``geosim.structures``    a :class:`geosim.variogram.Structure` subclass,
                                        registered under its ``kind``
engines        ``geosim.engines``       a simulation engine class (``prepare``,
                                        ``realize``; see DEVELOPERS.md)
writers        ``geosim.writers``       an output writer class (a picklable sink with
                                        ``finish``; see DEVELOPERS.md)
=============  =======================  ==============================================

Each group is loaded once per process, on first use.  A plugin that fails to
import, or that fails its checks, is reported with one :class:`GeosimWarning`
naming the package, the entry point and the reason, and is skipped: a broken
plugin never takes geosim down.  Third-party covariance structures are checked
for positive-definite covariance matrices on random 2-D and 3-D point sets
(:func:`check_structure`) before they are offered.

How plugin structures reach compiled code
-----------------------------------------
The kriging and simulation kernels are fixed functions, compiled once and cached
on disk; a plugin cannot add code to them.  Inside those kernels every structure
without a built-in closed form is read from a table of its correlation
(:meth:`geosim.variogram.Model.compiled`, linear interpolation in 4097 points),
which costs the same whatever the structure.  Outside them geosim evaluates
structures directly: covariance matrices (:meth:`~geosim.variogram.Model.cov_matrix`:
the exact engine, global kriging, the checks here), model fitting and the table
itself.  A structure that sets ``numba_correlation``, a numba-compiled scalar
function ``rho(r, param)``, is evaluated there by compiled loops that call it
through a function pointer (:func:`add_covariance`, :func:`evaluate_compiled`;
compiled once for all plugins and cached); a structure with only a numpy
``correlation`` goes through numpy lag arrays, which is slower (see
``tests/benchmarks/bench_plugins.py``), and geosim says so once per structure kind
per process.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass
from importlib.metadata import entry_points

import numpy as np

from .errors import GeosimError, GeosimWarning

GROUPS = {
    "structures": "geosim.structures",
    "engines": "geosim.engines",
    "writers": "geosim.writers",
}

OWN_PACKAGE = "geosim"
OK, REJECTED, IMPORT_FAILED = "ok", "rejected", "import failed"


@dataclass(frozen=True)
class PluginInfo:
    """One registration found in an entry-point group, and what became of it.

    ``status`` is ``"ok"``, ``"rejected"`` (failed a check, or its name was
    taken) or ``"import failed"``; ``detail`` says why, or for usable
    structures how they are evaluated.
    """

    group: str
    name: str
    target: str
    package: str
    version: str
    status: str
    detail: str = ""

    @property
    def usable(self) -> bool:
        return self.status == OK


class PluginError(GeosimError, KeyError):
    """A plugin that is not installed, failed to import or was rejected."""

    def __str__(self) -> str:  # KeyError would show the message quoted
        return str(self.args[0]) if self.args else ""


class InvalidStructureError(GeosimError, ValueError):
    """A covariance structure that fails geosim's checks (e.g. not positive definite)."""


# group -> (usable objects by name, every registration found)
_loaded: dict[str, tuple[dict[str, object], list[PluginInfo]]] = {}
_numpy_only_noted: set[str] = set()
_correlation_kernel = None  # (correlation loop, covariance loop)
_checking = False


def available(group: str) -> list[str]:
    """Usable names registered in one of :data:`GROUPS`, sorted.

    Examples
    --------
    >>> import geosim.plugins
    >>> "spherical" in geosim.plugins.available("structures")
    True
    """
    return sorted(_load(group)[0])


def get(group: str, name: str):
    """The object registered under ``name`` in ``group``.

    Raises
    ------
    PluginError
        (a ``KeyError``) if nothing usable is registered under that name; the
        message says why (not installed, failed to import, rejected) and lists
        what is available.

    Examples
    --------
    >>> import geosim.plugins
    >>> geosim.plugins.get("structures", "spherical").__name__
    'Spherical'
    """
    usable, infos = _load(group)
    if name in usable:
        return usable[name]
    known = ", ".join(sorted(usable)) or "none"
    for info in infos:
        if info.name == name:
            raise PluginError(f"the {_singular(group)} {name!r} from package {info.package} "
                              f"({info.target}) is not usable: {info.status}: {info.detail}. "
                              f"Available: {known}")
    raise PluginError(f"no {_singular(group)} named {name!r} is installed; available: {known}")


def structures() -> dict[str, type]:
    """Usable covariance structure classes by ``kind``, built-in and plugin.

    This is the registry :meth:`geosim.variogram.Model.from_dicts` reads, so
    model files and run specs accept every installed structure.
    """
    return dict(_load("structures")[0])


def installed(group: str | None = None) -> list[PluginInfo]:
    """Every registration found, usable or not, for one group or all of them.

    Examples
    --------
    >>> import geosim.plugins
    >>> [i.status for i in geosim.plugins.installed("structures") if i.name == "nugget"]
    ['ok']
    """
    groups = [group] if group is not None else list(GROUPS)
    return [info for g in groups for info in _load(g)[1]]


def refresh() -> None:
    """Forget what was loaded, so the next lookup rescans the installed entry points.

    Needed only after installing or removing a plugin in a running session.
    """
    _loaded.clear()


def has_compiled_form(cls: type) -> bool:
    """Whether a structure class supplies ``numba_correlation`` (see the module notes)."""
    return getattr(cls, "numba_correlation", None) is not None


def evaluate_compiled(function, r, param: float = 0.0) -> np.ndarray:
    """Evaluate a compiled scalar correlation ``function(r, param)`` at every ``r``.

    Parameters
    ----------
    function : numba dispatcher
        An ``@numba.njit`` function of two float64 arguments returning float64.
    r : array_like
        Reduced distances.
    param : float
        The structure's shape parameter (ignored by structures without one).
    """
    r = np.asarray(r, dtype=np.float64)
    flat = np.ascontiguousarray(r).ravel()
    out = np.empty_like(flat)
    _kernels()[0](function, flat, float(param), out)
    return out.reshape(r.shape)


def add_covariance(structure, a: np.ndarray, b: np.ndarray, out: np.ndarray) -> None:
    """Add the covariances of a structure with a compiled form between point sets to ``out``.

    ``out[i, j] += sill * rho(|M (a_i - b_j)|)`` in one compiled loop over the pairs,
    without the lag arrays of the numpy path; :meth:`geosim.variogram.Model.cov_matrix`
    uses it for every structure that sets ``numba_correlation``.

    Parameters
    ----------
    structure : Structure
        An instance whose class sets ``numba_correlation``.
    a, b : (n, d) and (m, d) arrays
        Coordinates, d in {1, 2, 3}.
    out : (n, m) float64 C-contiguous array
    """
    function = type(structure).numba_correlation
    if function is None:
        raise ValueError(f"structure {structure.kind!r} has no compiled form (numba_correlation)")
    if a.shape[1] == 1:  # 1-D lags run along the major axis, as in Anisotropy.reduced_distance
        mat = np.zeros((3, 3))
        mat[0, 0] = 1.0 / structure.anisotropy.ranges[0]
    else:
        mat = np.ascontiguousarray(structure.anisotropy.matrix())
    _kernels()[1](function, mat, float(structure.sill), float(structure.param), _as3(a), _as3(b), out)


def _as3(points: np.ndarray) -> np.ndarray:
    p3 = np.zeros((points.shape[0], 3))
    p3[:, :points.shape[1]] = points
    return p3


def _kernels():
    """The two compiled loops, compiled on first use (cached on disk)."""
    global _correlation_kernel
    if _correlation_kernel is None:
        from numba import njit, types

        @njit(cache=True, nogil=True)
        def correlation_loop(function, r, param, out):
            for i in range(r.size):
                out[i] = function(r[i], param)

        @njit(cache=True, nogil=True)
        def covariance_loop(function, mat, sill, param, a, b, out):
            for i in range(a.shape[0]):
                for j in range(b.shape[0]):
                    dx = a[i, 0] - b[j, 0]
                    dy = a[i, 1] - b[j, 1]
                    dz = a[i, 2] - b[j, 2]
                    u = mat[0, 0] * dx + mat[0, 1] * dy + mat[0, 2] * dz
                    v = mat[1, 0] * dx + mat[1, 1] * dy + mat[1, 2] * dz
                    w = mat[2, 0] * dx + mat[2, 1] * dy + mat[2, 2] * dz
                    out[i, j] += sill * function(np.sqrt(u * u + v * v + w * w), param)

        # typed with a function pointer rather than per plugin, so each loop compiles once
        f64 = types.float64
        pointer = types.FunctionType(f64(f64, f64))
        correlation_loop.compile(types.void(pointer, f64[::1], f64, f64[::1]))
        covariance_loop.compile(types.void(pointer, f64[:, ::1], f64, f64, f64[:, ::1], f64[:, ::1],
                                           f64[:, ::1]))
        for loop in (correlation_loop, covariance_loop):
            loop.disable_compile()
        _correlation_kernel = (correlation_loop, covariance_loop)
    return _correlation_kernel


def note_numpy_only(cls: type, where: str = "") -> None:
    """Warn, once per structure kind per process, that ``cls`` has only a numpy form."""
    kind = getattr(cls, "kind", cls.__name__)
    if kind in _numpy_only_noted or has_compiled_form(cls) or _checking:
        return
    _numpy_only_noted.add(kind)
    source = f" ({where})" if where else ""
    warnings.warn(
        f"covariance structure {kind!r}{source} supplies only a numpy form: inside the compiled "
        f"kriging and simulation kernels it is read from a table like every non-built-in structure, "
        f"but wherever geosim evaluates it directly (covariance matrices of the exact engine and of "
        f"global kriging, fitting) it runs through numpy, which is slower. Its author can add "
        f"numba_correlation(r, param) for compiled speed; see DEVELOPERS.md, 'Adding a covariance "
        f"structure'.",
        GeosimWarning, stacklevel=3)


# checks ------------------------------------------------------------------------

def check_structure(cls: type, *, seed: int = 20261202) -> None:
    """Check a covariance structure class before geosim uses it.

    The structure (sill 1, an oblique anisotropy, its default shape parameter)
    must give a correlation that is finite, 1 at zero lag and at most 1 in size;
    its covariance matrices (:meth:`geosim.variogram.Model.cov_matrix`) on random
    and lattice point sets in 2-D and 3-D must have no negative eigenvalue beyond
    round-off; its compiled form, if any, must agree with its numpy form; and the
    compiled kernels' evaluation (:func:`geosim.variogram.compiled.cov_lag`) must
    agree with it.  Fixed seed, so every process checks the same point sets.

    Raises
    ------
    InvalidStructureError
        Naming the first check that failed.

    Examples
    --------
    >>> import geosim, geosim.plugins
    >>> geosim.plugins.check_structure(geosim.Spherical)
    """
    from .variogram import Anisotropy, Model, Structure

    name = getattr(cls, "kind", getattr(cls, "__name__", repr(cls)))
    if not (isinstance(cls, type) and issubclass(cls, Structure)):
        raise InvalidStructureError(f"{name!r} is not a subclass of geosim.variogram.Structure")
    try:
        s = cls(sill=1.0, anisotropy=Anisotropy((1.0, 0.6, 0.35), azimuth=30.0, dip=20.0, rake=10.0))
    except Exception as exc:
        raise InvalidStructureError(f"structure {name!r} cannot be built with sill=1 and its default "
                                    f"parameter: {type(exc).__name__}: {exc}") from exc

    r = np.concatenate([[0.0], np.geomspace(1e-6, 20.0, 400)])
    rho = _evaluate(s.correlation, r, name, "correlation(r)")
    if not np.all(np.isfinite(rho)):
        raise InvalidStructureError(f"structure {name!r}: correlation is not finite at r = "
                                    f"{r[~np.isfinite(rho)][0]:.3g}")
    if abs(rho[0] - 1.0) > 1e-9:
        raise InvalidStructureError(f"structure {name!r}: correlation at zero lag is {rho[0]:.6g}, "
                                    f"must be 1 (the sill carries the variance)")
    if np.max(np.abs(rho)) > 1.0 + 1e-9:
        raise InvalidStructureError(f"structure {name!r}: correlation reaches {np.max(np.abs(rho)):.6g} "
                                    f"in size, must stay within [-1, 1]")
    if has_compiled_form(cls) and _overrides_correlation(cls):
        compiled = _evaluate(lambda x: evaluate_compiled(cls.numba_correlation, x, s.param), r, name,
                             "numba_correlation(r, param)")
        worst = float(np.max(np.abs(compiled - rho)))
        if not worst <= 1e-9:
            raise InvalidStructureError(f"structure {name!r}: numba_correlation and correlation differ "
                                        f"by up to {worst:.3g}; they must be the same function")

    model = Model([s])
    for label, points in _check_point_sets(seed):
        c = model.cov_matrix(points)
        lowest = float(np.linalg.eigvalsh(c)[0])
        # eigenvalues of a valid covariance can dip below 0 only by round-off, which is of
        # order n * eps * ||C|| (||C|| <= n here); 1e-7 * n sits far above that and far
        # below what an invalid shape gives (tenths). Common practice, no source.
        if lowest < -1e-7 * len(points):
            raise InvalidStructureError(
                f"structure {name!r} is not a valid covariance: the covariance matrix of {label} has "
                f"eigenvalue {lowest:.3g} < 0, so kriging and simulation systems would not be "
                f"positive definite")

    from .variogram.compiled import cov_matrix_into
    _, points = _check_point_sets(seed)[2]
    kernel_values = np.empty((len(points), len(points)))
    global _checking
    _checking = True  # the registry warns about a numpy-only form once the checks pass
    try:
        compiled = model.compiled()
    finally:
        _checking = False
    cov_matrix_into(compiled, points, points, kernel_values)
    worst = float(np.max(np.abs(kernel_values - model.cov_matrix(points))))
    # a linear table of 4097 points errs by at most step^2/8 * max|rho''|, ~1e-5 for shapes
    # with a bounded second derivative away from 0; 1e-3 flags a wrong evaluation
    if not worst <= 1e-3:
        cause = (f"its code {cls.code} is reserved for built-in structures (leave the default -1)"
                 if 0 <= cls.code < 100 else
                 "its correlation changes too sharply for the kernels' linear table of 4097 points")
        raise InvalidStructureError(
            f"structure {name!r}: the compiled kernels evaluate it differently from its correlation() "
            f"(by up to {worst:.3g}): {cause}")


def _evaluate(function, r, name, what):
    try:
        return np.asarray(function(r), dtype=float)
    except Exception as exc:
        raise InvalidStructureError(f"structure {name!r}: {what} failed on an array of reduced "
                                    f"distances: {type(exc).__name__}: {exc}") from exc


def _overrides_correlation(cls) -> bool:
    from .variogram import Structure
    return cls.correlation is not Structure.correlation


def _check_point_sets(seed: int) -> list[tuple[str, np.ndarray]]:
    """Random and lattice point sets spanning a few ranges, 2-D and 3-D."""
    rng = np.random.default_rng(seed)
    g2 = np.arange(10) * 0.25
    g3 = np.arange(5) * 0.3
    return [
        ("100 random 2-D points", rng.uniform(-1.5, 1.5, (100, 2))),
        ("a 10 x 10 2-D lattice", np.stack(np.meshgrid(g2, g2), -1).reshape(-1, 2)),
        ("120 random 3-D points", rng.uniform(-1.5, 1.5, (120, 3))),
        ("a 5 x 5 x 5 3-D lattice", np.stack(np.meshgrid(g3, g3, g3), -1).reshape(-1, 3)),
    ]


def _check_structure_entry(name, obj, package):
    from .variogram import Structure
    from .variogram.structures import BUILTIN_STRUCTURES

    if not (isinstance(obj, type) and issubclass(obj, Structure)):
        return "the entry point is not a subclass of geosim.variogram.Structure", ""
    if obj.kind != name:
        return (f"its kind {obj.kind!r} differs from the entry-point name {name!r}; they must be equal "
                f"so that model files and run specs find it"), ""
    if package == OWN_PACKAGE and BUILTIN_STRUCTURES.get(name) is obj:
        return None, "built-in"
    try:
        check_structure(obj)
    except InvalidStructureError as exc:
        return str(exc), ""
    return None, "compiled form" if has_compiled_form(obj) else "numpy form only (slower)"


def _check_engine_entry(name, obj, package):
    missing = [m for m in ("prepare", "realize") if not callable(getattr(obj, m, None))]
    if missing:
        return f"an engine needs prepare() and realize(); missing: {', '.join(missing)}", ""
    return None, "built-in" if package == OWN_PACKAGE else ""


def _check_writer_entry(name, obj, package):
    if not callable(obj) or not callable(getattr(obj, "finish", None)):
        return "a writer must be a class whose instances are called per realization and have finish()", ""
    return None, "built-in" if package == OWN_PACKAGE else ""


_CHECKS = {"structures": _check_structure_entry, "engines": _check_engine_entry,
           "writers": _check_writer_entry}


# loading -----------------------------------------------------------------------

def _load(group: str) -> tuple[dict[str, object], list[PluginInfo]]:
    if group not in GROUPS:
        raise ValueError(f"unknown plugin group {group!r}; groups: {', '.join(GROUPS)}")
    if group in _loaded:
        return _loaded[group]
    usable: dict[str, object] = {}
    origin: dict[str, PluginInfo] = {}
    infos: list[PluginInfo] = []
    seen = set()
    for ep, package, version in _entry_points(group):
        if (ep.name, ep.value, package) in seen:  # one distribution found twice on sys.path
            continue
        seen.add((ep.name, ep.value, package))
        if ep.name in usable:
            first = origin[ep.name]
            info = PluginInfo(group, ep.name, ep.value, package, version, REJECTED,
                              f"the name is already taken by {first.package} ({first.target})")
        else:
            try:
                obj = ep.load()
            except Exception as exc:  # any failure inside a plugin's import is the plugin's
                info = PluginInfo(group, ep.name, ep.value, package, version, IMPORT_FAILED,
                                  f"{type(exc).__name__}: {exc}")
            else:
                try:
                    problem, note = _CHECKS[group](ep.name, obj, package)
                except Exception as exc:  # a check tripping over a plugin's code is the plugin's failure
                    problem, note = f"its check failed: {type(exc).__name__}: {exc}", ""
                status = REJECTED if problem else OK
                info = PluginInfo(group, ep.name, ep.value, package, version, status, problem or note)
                if not problem:
                    usable[ep.name] = obj
                    origin[ep.name] = info
                    if group == "structures" and package != OWN_PACKAGE:
                        note_numpy_only(obj, f"package {package}, entry point {ep.value}")
        if not info.usable:
            warnings.warn(f"skipped the {_singular(group)} {info.name!r} from package {info.package} "
                          f"(entry point {info.target}): {info.status}: {info.detail}",
                          GeosimWarning, stacklevel=3)
        infos.append(info)
    _loaded[group] = (usable, infos)
    return _loaded[group]


def _entry_points(group: str):
    """Entry points of a group with their distribution, geosim's own first."""
    found = []
    for ep in entry_points(group=GROUPS[group]):
        dist = getattr(ep, "dist", None)
        package = dist.metadata["Name"] if dist is not None else "unknown"
        version = dist.version if dist is not None else ""
        found.append((ep, package, version))
    found.sort(key=lambda item: (item[1] != OWN_PACKAGE, item[1].lower(), item[0].name))
    return found


def _singular(group: str) -> str:
    return group[:-1]
