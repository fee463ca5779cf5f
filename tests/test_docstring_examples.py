"""The examples in the docstrings of the stopping, baselines and references modules run."""
import doctest

import pytest

import stopwise.baselines
import stopwise.references
import stopwise.stopping


@pytest.mark.parametrize("module", [stopwise.stopping, stopwise.baselines, stopwise.references])
def test_docstring_examples(module):
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0
