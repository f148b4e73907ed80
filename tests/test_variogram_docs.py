"""The examples in the variogram docstrings run and give what they show."""
import doctest
import importlib

import pytest

MODULES = ["geosim.variogram", "geosim.variogram.anisotropy", "geosim.variogram.model",
           "geosim.variogram.experimental", "geosim.variogram.fitting", "geosim.variogram.modelfile"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0, f"{name} has no examples"
    assert result.failed == 0
