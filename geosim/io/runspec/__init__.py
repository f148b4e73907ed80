"""The run spec's old place, kept for one release: use :mod:`geosim.config.runspec`.

``geosim.io.runspec`` is the same module object as ``geosim.config.runspec``
(every name, private ones included).  It is a package rather than a
``runspec.py`` file so that git sees the old file as renamed, and branches that
edited it follow the move when they rebase.
"""
import sys
import warnings

from ...config import runspec as _runspec

warnings.warn("geosim.io.runspec moved to geosim.config.runspec; the old path goes in the next release",
              DeprecationWarning, stacklevel=2)
sys.modules[__name__] = _runspec
