"""Checks a covariance structure passes before geosim uses it.

:func:`check_structure` is the check a third-party structure goes through when
the registry (:mod:`geosim.plugins`) loads it, and what a plugin's own tests
call; :func:`check_registration` is the structures group's registration check,
declared to the registry in ``pyproject.toml``
(``[project.entry-points."geosim.plugin_checks"]``), so that the registry at
the bottom of the package needs nothing from this one.
"""
from __future__ import annotations

import numpy as np

from ..errors import InvalidStructureError
from ..plugins import OWN_PACKAGE
from .anisotropy import Anisotropy
from .model import BUILTIN_STRUCTURES, Model, Structure
from .plugin_forms import evaluate_compiled, has_compiled_form, note_numpy_only, numpy_notes_held

__all__ = ["InvalidStructureError", "check_structure", "check_registration"]


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
    >>> import geosim, geosim.variogram.checks
    >>> geosim.variogram.checks.check_structure(geosim.Spherical)
    """
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
    if has_compiled_form(cls) and cls.correlation is not Structure.correlation:
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

    from .compiled import cov_matrix_into
    _, points = _check_point_sets(seed)[2]
    kernel_values = np.empty((len(points), len(points)))
    with numpy_notes_held():  # the registry warns about a numpy-only form once the checks pass
        compiled = model.compiled()
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


def check_registration(name: str, obj, package: str, target: str) -> tuple[str | None, str]:
    """The registry's check of one entry in the ``geosim.structures`` group.

    ``target`` is the entry point's ``module:object``.  Returns
    ``(problem, note)``: ``problem`` is None for a usable structure,
    else why it is rejected; ``note`` says how a usable one is evaluated.
    geosim's own built-ins pass unchecked; a third-party structure goes through
    :func:`check_structure`, and one with only a numpy form is noted once.
    """
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
    if package != OWN_PACKAGE:
        note_numpy_only(obj, f"package {package}, entry point {target}")
    return None, "compiled form" if has_compiled_form(obj) else "numpy form only (slower)"


def _evaluate(function, r, name, what):
    try:
        return np.asarray(function(r), dtype=float)
    except Exception as exc:
        raise InvalidStructureError(f"structure {name!r}: {what} failed on an array of reduced "
                                    f"distances: {type(exc).__name__}: {exc}") from exc


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
