"""The one registry (stopwise.core.registry) and every registry built on it."""
from __future__ import annotations

import pytest

from stopwise.core.errors import SpecError
from stopwise.core.registry import Registry


class UnknownThing(SpecError):
    pass


def test_register_refuses_a_name_twice_and_lookup_lists_the_names_in_one_line():
    reg = Registry("thing", UnknownThing)
    reg.register("b", 2)
    reg.register("a", 1)
    with pytest.raises(ValueError, match="thing 'a' registered twice"):
        reg.register("a", 3)
    assert reg.get("a") == 1  # the first registration stands
    with pytest.raises(UnknownThing) as e:
        reg.get("c")
    assert str(e.value) == "unknown thing 'c'; valid: b, a"
    assert Registry("thing", UnknownThing, sort=True).names() == []
    reg.unregister("b")
    assert list(reg) == ["a"] and "b" not in reg


def test_the_choice_of_a_registry_follows_later_registrations():
    reg = Registry("thing", UnknownThing)
    c = reg.choice(extra=("z",))
    assert not c.contains("q") and c.contains("z")
    reg.register("q", 0)
    assert c.contains("q") and c.describe() == "one of q, z"


def _registries():
    from stopwise.analysis.baselines import BASELINES, BaselineError
    from stopwise.data.errors import DataError
    from stopwise.data.sources import SOURCES
    from stopwise.running.record import METRIC_SETS, UnknownMetricSet
    from stopwise.solvers.base import SOLVERS, UnknownSolver
    from stopwise.solvers.prox import PROX_OPERATORS, UnknownProx
    from stopwise.stopping.rules import RULES, RuleError

    return [(SOLVERS, UnknownSolver), (RULES, RuleError), (PROX_OPERATORS, UnknownProx),
            (BASELINES, BaselineError), (SOURCES, DataError), (METRIC_SETS, UnknownMetricSet)]


@pytest.mark.parametrize("index", range(6))
def test_every_registry_refuses_duplicates_and_names_its_entries(index):
    reg, error = _registries()[index]
    first = next(iter(reg))
    with pytest.raises(ValueError, match="registered twice"):
        reg.register(first, reg[first])
    with pytest.raises(error) as e:
        reg.get("no-such-entry")
    msg = str(e.value)
    assert isinstance(e.value, SpecError) and "\n" not in msg
    assert msg.startswith("unknown ") and all(n in msg for n in reg.names())
