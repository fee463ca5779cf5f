"""Every example in a public docstring runs and prints what it says.

A module either has examples, and then at least one must run, or is listed in
``WITHOUT_EXAMPLES`` (the modules without one today; adding examples to them, and removing
them from the list, is open work). A module that loses its examples, or a new module without
any, fails here.
"""
import doctest
import importlib
import pkgutil

import pytest

import stopwise

MODULES = sorted(m.name for m in pkgutil.walk_packages(stopwise.__path__, "stopwise."))

WITHOUT_EXAMPLES = {
    "stopwise.analysis",
    "stopwise.cli",
    "stopwise.config",
    "stopwise.config.catalog",
    "stopwise.core",
    "stopwise.core.errors",
    "stopwise.core.version",
    "stopwise.data",
    "stopwise.data.cache",
    "stopwise.data.errors",
    "stopwise.data.openml_source",
    "stopwise.data.sources",
    "stopwise.data.split",
    "stopwise.data.tabular",
    "stopwise.problem",
    "stopwise.problem.problem",
    "stopwise.report",
    "stopwise.report.report",
    "stopwise.report.tables",
    "stopwise.results",
    "stopwise.results.query",
    "stopwise.results.store",
    "stopwise.results.verify",
    "stopwise.running",
    "stopwise.running.classify",
    "stopwise.running.fastpath",
    "stopwise.running.record",
    "stopwise.running.rerun",
    "stopwise.running.runner",
    "stopwise.solvers",
    "stopwise.solvers.averaging",
    "stopwise.solvers.base",
    "stopwise.solvers.krylov",
    "stopwise.solvers.prox",
    "stopwise.stopping",
    "stopwise.stopping.residual",
    "stopwise.sweep",
    "stopwise.sweep.campaign",
    "stopwise.sweep.task",
}


def test_the_list_without_examples_names_real_modules():
    assert WITHOUT_EXAMPLES <= set(MODULES), WITHOUT_EXAMPLES - set(MODULES)


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    mod = importlib.import_module(name)
    result = doctest.testmod(mod, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False)
    assert result.failed == 0, f"{result.failed} docstring example(s) failed in {name}"
    if name in WITHOUT_EXAMPLES:
        assert result.attempted == 0, f"{name} has examples now: remove it from WITHOUT_EXAMPLES"
    else:
        assert result.attempted > 0, f"no docstring example ran in {name}"
