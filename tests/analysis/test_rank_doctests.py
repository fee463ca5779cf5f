"""The examples in the ranking modules' docstrings run and give what they print."""
import doctest

import pytest

import stopwise.analysis.rankstats


@pytest.mark.parametrize("module", [stopwise.analysis.rankstats])
def test_docstring_examples(module):
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0
