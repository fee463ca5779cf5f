"""One error root: every exception class stopwise defines derives from StopwiseError, and the
hierarchy drawn in stopwise.core.errors is the one the code defines."""
from __future__ import annotations

import builtins
import importlib
import inspect
import pkgutil
import re

import stopwise
from stopwise.core import errors
from stopwise.core.errors import SpecError, StopwiseError


def _project_exceptions() -> dict[str, type]:
    """Every exception class defined at the top level of a stopwise module, found by importing
    each module of the package (so a class added anywhere is seen)."""
    found: dict[str, type] = {}
    names = ["stopwise"] + [m.name for m in pkgutil.walk_packages(stopwise.__path__, "stopwise.")]
    for name in names:
        module = importlib.import_module(name)
        for obj in vars(module).values():
            if inspect.isclass(obj) and issubclass(obj, BaseException) and obj.__module__ == name:
                assert obj.__name__ not in found or found[obj.__name__] is obj, f"two classes named {obj.__name__}"
                found[obj.__name__] = obj
    return found


def _drawn_hierarchy() -> dict[str, tuple[str | None, str | None]]:
    """``{class: (parent, built-in base or None)}`` read from the tree in the errors docstring."""
    tree = errors.__doc__.split("::", 1)[1]
    drawn: dict[str, tuple[str | None, str | None]] = {}
    last: dict[int, str] = {}
    for line in tree.splitlines():
        m = re.match(r"^(    )((?:\|   |    )*)(\+-- )?(\w+)(?:\((\w+)\))?\s", line + " ")
        if not m or not m.group(4)[0].isupper():
            continue
        depth = len(m.group(2)) // 4 + (1 if m.group(3) else 0)
        name = m.group(4)
        drawn[name] = (last.get(depth - 1) if depth else None, m.group(5))
        last[depth] = name
    return drawn


def test_every_project_exception_derives_from_the_root():
    found = _project_exceptions()
    assert {"StopwiseError", "SpecError", "StoreError", "SchemaError", "BadArguments", "RankError"} <= set(found)
    outside = sorted(n for n, c in found.items() if not issubclass(c, StopwiseError))
    assert not outside, f"exception classes not derived from stopwise.core.errors.StopwiseError: {outside}"


def test_the_documented_hierarchy_is_the_defined_one():
    found, drawn = _project_exceptions(), _drawn_hierarchy()
    assert sorted(drawn) == sorted(found), "core/errors.py's docstring must draw every exception class"
    assert drawn["StopwiseError"] == (None, "Exception")
    for name, (parent, builtin) in drawn.items():
        cls = found[name]
        ours = [b.__name__ for b in cls.__bases__ if issubclass(b, StopwiseError)]
        if parent is not None:
            assert ours == [parent], f"{name} derives from {ours}, drawn under {parent}"
        if builtin is not None:
            assert issubclass(cls, getattr(builtins, builtin)), f"{name} is drawn as a {builtin}"


def test_builtin_bases_are_kept_for_callers_that_catch_them():
    """Code catching ValueError / TypeError keeps catching what it caught before."""
    from stopwise.cli import BadArguments
    from stopwise.data.split import SplitError
    from stopwise.results.schema import SchemaError
    from stopwise.results.store import StoreError

    for cls in (SpecError, StoreError, SplitError, BadArguments):
        assert issubclass(cls, ValueError) and issubclass(cls, StopwiseError)
    assert issubclass(SchemaError, TypeError) and not issubclass(SchemaError, SpecError)
    assert not issubclass(StoreError, SpecError)  # the CLI handles it on its own
