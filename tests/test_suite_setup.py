"""The test session itself: a fresh compile cache and reproducible property tests (tests/conftest.py)."""
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
from hypothesis import settings

ROOT = Path(__file__).resolve().parents[1]


def test_numba_compiles_into_this_sessions_own_folder():
    import numba

    folder = Path(os.environ["NUMBA_CACHE_DIR"])
    assert folder.name.startswith("geosim-test-numba-") and folder.parent == Path(tempfile.gettempdir())
    assert Path(numba.config.CACHE_DIR) == folder
    from geosim.linalg import chol_inplace

    a = np.array([[4.0, 0.0], [2.0, 5.0]])
    assert chol_inplace(a, 2, 1e-12) == -1 and a[1, 1] == 2.0
    # the kernel's machine code went to the session folder, none of it beside the sources
    assert list(folder.rglob("linalg.chol_inplace-*.nbi"))
    start = folder.stat().st_ctime
    assert not [p for p in ROOT.joinpath("geosim").rglob("*.nb[ci]") if p.stat().st_mtime >= start]


def test_subprocesses_inherit_the_session_cache():
    code = "import numba; print(numba.config.CACHE_DIR)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=120)
    assert Path(out.stdout.strip()) == Path(os.environ["NUMBA_CACHE_DIR"])


def test_property_tests_draw_the_same_examples_every_run():
    assert settings.default.derandomize is True
    assert settings.default.database is None
