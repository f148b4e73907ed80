"""Old spellings of settings, accepted for one more release with a warning naming the new one.

Every renamed run-spec key, run-spec value and API keyword is listed here, once: the
run-spec reader, the API functions (through :func:`accepts_retired`) and the test
that proves no old name is taken silently all read these tables.  An old name works
exactly like its new name and raises a :class:`~geosim.errors.RetiredNameWarning`
(a :class:`FutureWarning`, shown by default) saying what to write instead; giving
both the old and the new name is an error.  Remove an entry (and its old name is
refused) in the release after the one that renamed it.
"""
from __future__ import annotations

import functools
import inspect
import warnings
from collections.abc import Callable, Mapping
from typing import Any

from .errors import RetiredNameWarning

__all__ = ["RETIRED_KEYWORDS", "RETIRED_KEYWORD_VALUES", "RETIRED_SPEC_KEYS", "RETIRED_SPEC_VALUES",
           "accepts_retired", "retired_note"]

# API owner (function or class name) -> {old keyword: new keyword}
RETIRED_KEYWORDS: dict[str, dict[str, str]] = {
    "NormalScoreTransform": {"lower_omega": "lower_exponent", "upper_omega": "upper_exponent"},
    "cell_declustering": {"sizes": "cell_sizes", "n_sizes": "size_count", "n_offsets": "origin_shifts",
                          "objective": "pick_mean"},
    "cell_weights": {"n_offsets": "origin_shifts"},
    "Direction": {"azimuth_tol": "horizontal_half_angle", "dip_tol": "vertical_half_angle",
                  "bandwidth_h": "horizontal_max_offset", "bandwidth_v": "vertical_max_offset"},
    "experimental_variogram": {"lag_tol": "lag_half_width"},
    "directional_variograms": {"lag_tol": "lag_half_width"},
    "downhole_variogram": {"lag_tol": "lag_half_width"},
    "variogram_map": {"bandwidth_v": "vertical_max_offset"},
}

# new keyword -> {old value: new value}, for every owner that has the keyword
RETIRED_KEYWORD_VALUES: dict[str, dict[Any, Any]] = {
    "lower_tail": {"linear": "uniform"},
    "upper_tail": {"linear": "uniform", "hyperbolic": "pareto"},
    "pick_mean": {"min": "lowest", "max": "highest"},
}

# run spec: "section.key" (or "section.list.key" for each table of a list) -> new key name(s)
# in the same table; an old key that split into two sets both
RETIRED_SPEC_KEYS: dict[str, tuple[str, ...]] = {
    "declustering.sizes": ("size_range",),
    "declustering.count": ("size_count",),
    "declustering.offsets": ("origin_shifts",),
    "declustering.objective": ("pick_mean",),
    "transform.tail_power": ("upper_exponent",),
    "variogram.directions.tolerance": ("horizontal_half_angle", "vertical_half_angle"),
    "variogram.directions.bandwidth": ("horizontal_max_offset", "vertical_max_offset"),
}

# run spec: "section.key" (new name) -> {old value: new value}
RETIRED_SPEC_VALUES: dict[str, dict[Any, Any]] = {
    "transform.lower_tail": {"linear": "uniform"},
    "transform.upper_tail": {"linear": "uniform", "hyperbolic": "pareto"},
    "declustering.pick_mean": {"min": "lowest", "max": "highest"},
    "search.sectors": {0: "off", 4: "quadrants", 8: "octants"},
}

_ONE_RELEASE = "the old name is accepted in this release only"


def retired_note(old: str, new: str, where: str = "") -> str:
    """The one wording of the warning: ``where: old is now written new (...)``."""
    return f"{where + ': ' if where else ''}{old} is now written {new} ({_ONE_RELEASE})"


def _value_key(value: Any) -> Any:
    """The value as a lookup key in the old-value tables; None for values that cannot be old
    ones (True == 1 in a dict lookup, and lists cannot be looked up at all)."""
    return value if isinstance(value, (str, int)) and not isinstance(value, bool) else None


def accepts_retired(owner: str) -> Callable:
    """Decorate a function (or a class, wrapping its ``__init__``) so that the old keyword
    names of ``owner`` in :data:`RETIRED_KEYWORDS`, and old values of its keywords in
    :data:`RETIRED_KEYWORD_VALUES`, work with a :class:`RetiredNameWarning`.

    Examples
    --------
    >>> import warnings
    >>> from geosim.retired import accepts_retired
    >>> @accepts_retired("cell_weights")
    ... def cell_weights(coords, size, *, origin_shifts=8):
    ...     return origin_shifts
    >>> with warnings.catch_warnings(record=True) as caught:
    ...     warnings.simplefilter("always")
    ...     cell_weights(None, 1.0, n_offsets=3)
    3
    >>> str(caught[0].message)
    'cell_weights: n_offsets is now written origin_shifts (the old name is accepted in this release only)'
    """
    renames = RETIRED_KEYWORDS.get(owner, {})

    def decorate(obj):
        target = obj.__init__ if inspect.isclass(obj) else obj
        params = inspect.signature(target).parameters
        values = {name: RETIRED_KEYWORD_VALUES[name] for name in params if name in RETIRED_KEYWORD_VALUES}

        @functools.wraps(target)
        def wrapper(*args, **kwargs):
            for old, new in renames.items():
                if old in kwargs:
                    if new in kwargs:
                        raise TypeError(f"{owner}: give {new} only ({old} is its old name), not both")
                    warnings.warn(retired_note(old, new, owner), RetiredNameWarning, stacklevel=2)
                    kwargs[new] = kwargs.pop(old)
            for name, table in values.items():
                if name in kwargs and _value_key(kwargs[name]) in table:
                    new_value = table[kwargs[name]]
                    warnings.warn(retired_note(f"{name}={kwargs[name]!r}", f"{name}={new_value!r}", owner),
                                  RetiredNameWarning, stacklevel=2)
                    kwargs[name] = new_value
            return target(*args, **kwargs)

        if inspect.isclass(obj):
            obj.__init__ = wrapper
            return obj
        return wrapper
    return decorate


def retire_spec_names(values: dict, warn: Callable[[str], None]) -> list[str]:
    """Rename old keys and values in a parsed run spec in place; call ``warn(text)`` for each
    one found.  Returns problems (an old and a new name both given) as ``key: ...`` texts."""
    problems: list[str] = []

    def rename(table: Mapping, where: str, old: str, news: tuple[str, ...]) -> None:
        if not isinstance(table, dict) or old not in table:
            return
        clash = [n for n in news if n in table]
        if clash:
            problems.append(f"{where}.{old}: the old name of {where}.{clash[0]}; give only "
                            f"{where}.{clash[0]}, found both")
            return
        warn(retired_note(f"{where}.{old}", " and ".join(f"{where}.{n}" for n in news)))
        value = table.pop(old)
        for n in news:
            table[n] = value

    for dotted, news in RETIRED_SPEC_KEYS.items():
        parts = dotted.split(".")
        section = values.get(parts[0])
        if len(parts) == 2:
            rename(section, parts[0], parts[1], news)
        elif isinstance(section, dict) and isinstance(section.get(parts[1]), list):
            for i, item in enumerate(section[parts[1]]):
                rename(item, f"{parts[0]}.{parts[1]}[{i}]", parts[2], news)
    for dotted, table in RETIRED_SPEC_VALUES.items():
        section, key = dotted.split(".")
        node = values.get(section)
        if isinstance(node, dict) and key in node and _value_key(node[key]) in table:
            old = node[key]
            node[key] = table[old]
            warn(retired_note(f"{dotted} = {_toml(old)}", f"{dotted} = {_toml(node[key])}"))
    return problems


def _toml(value: Any) -> str:
    return f'"{value}"' if isinstance(value, str) else str(value)
