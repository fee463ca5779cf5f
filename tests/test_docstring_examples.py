"""Every example in a public docstring runs and prints what it says."""
import doctest
import importlib
import pkgutil

import pytest

import stopwise

MODULES = sorted(m.name for m in pkgutil.walk_packages(stopwise.__path__, "stopwise."))


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    mod = importlib.import_module(name)
    result = doctest.testmod(mod, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False)
    assert result.failed == 0, f"{result.failed} docstring example(s) failed in {name}"
