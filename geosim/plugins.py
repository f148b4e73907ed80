"""Entry-point registry: geosim's own structures, engines and writers load the same
way a third-party plugin's do.

Groups: ``geosim.structures`` (covariance structure classes, by ``kind``),
``geosim.engines`` (simulation engine classes, by name), ``geosim.writers``
(output writer classes, by name).
"""
from __future__ import annotations

from importlib.metadata import entry_points

GROUPS = {
    "structures": "geosim.structures",
    "engines": "geosim.engines",
    "writers": "geosim.writers",
}


def available(group: str) -> list[str]:
    """Names registered in one of :data:`GROUPS`, sorted."""
    return sorted({ep.name for ep in entry_points(group=GROUPS[group])})


def get(group: str, name: str):
    """The object registered under ``name`` in ``group``; KeyError lists what exists."""
    for ep in entry_points(group=GROUPS[group]):
        if ep.name == name:
            return ep.load()
    raise KeyError(f"no {group[:-1]} named {name!r}; installed: {', '.join(available(group)) or 'none'}")
