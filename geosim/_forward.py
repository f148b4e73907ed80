"""Old import paths of moved names, kept for one release.

A module that lost public names to a module in a higher layer forwards them by
name: ``__getattr__ = forward(__name__, {"old_name": "new.module"})``.  The new
home is imported with :func:`importlib.import_module` on first access, so the
forwarding adds no import edge from the old module to the new one (the layer
rules in DEVELOPERS.md, "Architecture", and ``tests/test_architecture.py`` stay
true), and a :class:`DeprecationWarning` names the new path.
"""
from __future__ import annotations

import importlib
import warnings
from collections.abc import Callable, Mapping


def forward(module: str, moved: Mapping[str, str]) -> Callable[[str], object]:
    """A module ``__getattr__`` that resolves ``moved`` names from their new modules.

    Examples
    --------
    >>> import warnings, geosim._forward
    >>> getattr_ = geosim._forward.forward("old.place", {"CAUTION": "geosim.cautions"})
    >>> with warnings.catch_warnings(record=True) as caught:
    ...     warnings.simplefilter("always")
    ...     getattr_("CAUTION").startswith("CAUTION")
    True
    >>> str(caught[0].message)
    'old.place.CAUTION moved to geosim.cautions.CAUTION; the old path goes in the next release'
    """
    def __getattr__(name: str):
        target = moved.get(name)
        if target is None:
            raise AttributeError(f"module {module!r} has no attribute {name!r}")
        warnings.warn(f"{module}.{name} moved to {target}.{name}; the old path goes in the next release",
                      DeprecationWarning, stacklevel=2)
        return getattr(importlib.import_module(target), name)

    return __getattr__
