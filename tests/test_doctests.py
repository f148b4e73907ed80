"""Every example in every docstring of geosim runs and gives what it shows."""
import doctest
import importlib
import pkgutil
import warnings

import pytest

import geosim

MODULES = ["geosim"] + sorted(m.name for m in pkgutil.walk_packages(geosim.__path__, "geosim."))
# the optional extras' modules import their libraries lazily, so every module imports without them
NEEDS = {"geosim.io.cube": "xarray", "geosim.vector": "pyogrio"}
# modules whose examples are their documentation: they must keep some
DOCUMENTED = {"geosim.variogram", "geosim.variogram.anisotropy", "geosim.variogram.model",
              "geosim.variogram.experimental", "geosim.variogram.fitting", "geosim.variogram.modelfile",
              "geosim.io.csvw", "geosim.grid", "geosim.search"}


def test_every_module_is_collected():
    assert {"geosim.pipeline", "geosim.io.csvw", "geosim.vector", "geosim.variogram.model"} <= set(MODULES)


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    if name in NEEDS:
        pytest.importorskip(NEEDS[name])
    module = importlib.import_module(name)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # examples show results; notes they raise are tested elsewhere
        result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE | doctest.ELLIPSIS,
                                 report=False)
    assert result.attempted > 0 or name not in DOCUMENTED, f"{name} has no examples"
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples in {name} failed (run pytest -s)"
