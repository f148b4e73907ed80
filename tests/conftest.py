"""Test-session setup: a fresh numba compile cache and reproducible property tests.

numba keys a kernel's cached machine code on the kernel's own source file only: after a
change to a function it calls in another file (``cov_lag``, ``chol_partial``) an old cache
keeps running the old machine code and can give a green run.  Every test session therefore
compiles into a new temporary folder, set here before numba or geosim is imported (pytest
imports this file before any test module); subprocesses started by the tests (the command
line, the process pool, Dask workers) inherit it through the environment.  The folder is
removed when the session ends.
"""
import os
import shutil
import sys
import tempfile

import pytest

if "numba" in sys.modules:
    # numba reads NUMBA_CACHE_DIR once, at import: setting it now would not take effect
    raise RuntimeError("numba was imported before tests/conftest.py could give it a fresh cache folder; "
                       "do not load plugins that import numba or geosim into the test session")

SESSION_NUMBA_CACHE = tempfile.mkdtemp(prefix="geosim-test-numba-")
os.environ["NUMBA_CACHE_DIR"] = SESSION_NUMBA_CACHE

from hypothesis import settings  # noqa: E402  (after the cache folder is set, on purpose)

# every property test draws the same examples on every run and machine, and no example
# database carries failures from one run into the next
settings.register_profile("geosim", derandomize=True, database=None, print_blob=True)
settings.load_profile("geosim")


def pytest_unconfigure(config):
    shutil.rmtree(SESSION_NUMBA_CACHE, ignore_errors=True)


def pytest_collection_modifyitems(config, items):
    # a property test given its own settings must not switch derandomization off again
    loose = [item.nodeid for item in items
             if getattr(getattr(item, "obj", None), "_hypothesis_internal_use_settings", None) is not None
             and not item.obj._hypothesis_internal_use_settings.derandomize]
    if loose:
        raise pytest.UsageError("property tests must be reproducible (derandomize=True): " + ", ".join(loose))


@pytest.fixture
def notes(caplog):
    """``with notes(pattern): ...`` asserts that geosim logged a note (a WARNING record of the
    ``geosim`` logger or a child) matching the regular expression ``pattern`` inside the block;
    ``notes.logged()`` lists the notes' texts so far, ``notes.clear()`` forgets them."""
    import contextlib
    import logging
    import re

    class Notes:
        def logged(self) -> list[str]:
            return [r.getMessage() for r in caplog.records
                    if r.levelno >= logging.WARNING and (r.name == "geosim" or r.name.startswith("geosim."))]

        def clear(self) -> None:
            caplog.clear()

        @contextlib.contextmanager
        def __call__(self, pattern: str = ""):
            before = len(self.logged())
            yield
            new = self.logged()[before:]
            assert any(re.search(pattern, text) for text in new), \
                f"no geosim note matching {pattern!r} was logged; notes: {new}"

    caplog.set_level(logging.INFO, logger="geosim")
    return Notes()
