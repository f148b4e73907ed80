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
figures        ``geosim.figures``       a function ``figure(values, grid) -> float`` of
                                        one realization in data units, a figure runs
                                        can rank realizations by (``ranking.figure``)
=============  =======================  ==============================================

Each group is loaded once per process, on first use.  A plugin that fails to
import, or that fails its checks, is reported with one note (a warning of the ``geosim`` logger)
naming the package, the entry point and the reason, and is skipped: a broken
plugin never takes geosim down.

The registry sits at the bottom of the package and knows the groups, nothing
about what they hold.  Engines and writers are checked here by their shape
(the methods their contract names).  A group whose check needs the package
that defines its kind declares the check in the entry-point group
``geosim.plugin_checks``, as the structures group does with
:func:`geosim.variogram.checks.check_registration` (which runs
:func:`~geosim.variogram.checks.check_structure` on every third-party
structure); only geosim's own declarations there count.  How plugin
structures are evaluated is described in :mod:`geosim.variogram.plugin_forms`.
"""
from __future__ import annotations

import logging
from dataclasses import dataclass
from importlib.metadata import entry_points

from ._forward import forward
from .errors import GeosimError
from .errors import InvalidStructureError  # noqa: F401  (its old home; raised by geosim.variogram.checks)

log = logging.getLogger(__name__)

GROUPS = {
    "structures": "geosim.structures",
    "engines": "geosim.engines",
    "writers": "geosim.writers",
    "figures": "geosim.figures",
}
CHECKS_GROUP = "geosim.plugin_checks"  # group name -> check(name, obj, package, target), geosim's own only

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


# group -> (usable objects by name, every registration found)
_loaded: dict[str, tuple[dict[str, object], list[PluginInfo]]] = {}


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


def _check_engine_entry(name, obj, package, target):
    missing = [m for m in ("prepare", "realize") if not callable(getattr(obj, m, None))]
    if missing:
        return f"an engine needs prepare() and realize(); missing: {', '.join(missing)}", ""
    return None, "built-in" if package == OWN_PACKAGE else ""


def _check_writer_entry(name, obj, package, target):
    if not callable(obj) or not callable(getattr(obj, "finish", None)):
        return "a writer must be a class whose instances are called per realization and have finish()", ""
    return None, "built-in" if package == OWN_PACKAGE else ""


def _check_figure_entry(name, obj, package, target):
    if not callable(obj):
        return "a figure must be a function figure(values, grid) -> float of one realization", ""
    return None, "built-in" if package == OWN_PACKAGE else ""


_CHECKS = {"engines": _check_engine_entry, "writers": _check_writer_entry, "figures": _check_figure_entry}


def _group_check(group: str):
    """The check of a group's registrations: the shape checks here, or geosim's declared one."""
    if group in _CHECKS:
        return _CHECKS[group]
    for ep, package, _ in _entry_points(CHECKS_GROUP):
        if ep.name == group and package == OWN_PACKAGE:
            _CHECKS[group] = check = ep.load()
            return check
    raise LookupError(f"geosim's check for the {group} group is not installed (entry point {group!r} "
                      f"in {CHECKS_GROUP!r}); reinstall geosim, e.g. pip install -e .")


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
                    problem, note = _group_check(group)(ep.name, obj, package, ep.value)
                except Exception as exc:  # a check tripping over a plugin's code is the plugin's failure
                    problem, note = f"its check failed: {type(exc).__name__}: {exc}", ""
                status = REJECTED if problem else OK
                info = PluginInfo(group, ep.name, ep.value, package, version, status, problem or note)
                if not problem:
                    usable[ep.name] = obj
                    origin[ep.name] = info
        if not info.usable:
            log.warning("skipped the %s %r from package %s (entry point %s): %s: %s", _singular(group),
                        info.name, info.package, info.target, info.status, info.detail)
        infos.append(info)
    _loaded[group] = (usable, infos)
    return _loaded[group]


def _entry_points(group: str):
    """Entry points of a group (short name or full group name) with their distribution, geosim's own first."""
    found = []
    for ep in entry_points(group=GROUPS.get(group, group)):
        dist = getattr(ep, "dist", None)
        package = dist.metadata["Name"] if dist is not None else "unknown"
        version = dist.version if dist is not None else ""
        found.append((ep, package, version))
    found.sort(key=lambda item: (item[1] != OWN_PACKAGE, item[1].lower(), item[0].name))
    return found


def _singular(group: str) -> str:
    return group[:-1]


# moved to the variogram package; the old paths work for one release
__getattr__ = forward(__name__, {
    "check_structure": "geosim.variogram.checks",
    "has_compiled_form": "geosim.variogram.plugin_forms",
    "evaluate_compiled": "geosim.variogram.plugin_forms",
    "add_covariance": "geosim.variogram.plugin_forms",
    "note_numpy_only": "geosim.variogram.plugin_forms",
})
