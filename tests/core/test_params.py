"""Parameters declared as data (stopwise.core.params): types come from
``typing.get_type_hints`` and every number has one spelling."""
from __future__ import annotations

import dataclasses
from typing import Optional

import pytest
from hypothesis import given
from hypothesis import strategies as st

from stopwise.core.params import (Choice, Interval, ParamError, field_types, make_params, normalize_number,
                                  number_kind, param)

Alias = Optional[float]  # resolvable only through the module's globals, never by reading the string


@dataclasses.dataclass(frozen=True)
class Example:
    rate: float = param(0.5, Interval(0.0, 1.0), "a fraction")
    steps: int = param(3, Interval(1, None, integer=True), "a count")
    scale: Alias = param(None, Interval(0.0, None, low_closed=False), "optional")
    mode: str = param("a", Choice(("a", "b")), "a choice")
    both: int | float = param(1, None, "a union of two number types: left as given")


def test_types_are_resolved_by_get_type_hints_not_by_reading_strings():
    assert isinstance(dataclasses.fields(Example)[0].type, str)  # postponed annotations
    t = field_types(Example)
    assert t["rate"] is float and t["steps"] is int and t["mode"] is str
    assert number_kind(t["scale"]) is float  # the alias resolved to Optional[float]
    assert number_kind(t["both"]) is None and number_kind(t["mode"]) is None


@given(st.integers(-10**12, 10**12))
def test_an_int_for_a_float_field_is_the_float_python_parses(i):
    # Python's own parsing of the decimal spelling is the reference (float(str(i)))
    v = normalize_number(float, i)
    assert type(v) is float and v == float(str(i))
    assert normalize_number(Optional[float], i) == float(f"{i}e0")


@given(st.integers(-10**12, 10**12))
def test_a_whole_float_for_an_int_field_is_the_int_python_parses(i):
    v = normalize_number(int, float(f"{i}.0"))
    assert type(v) is int and v == int(str(i))


@pytest.mark.parametrize("value", [True, False, "1", "1e0", 1.5, None, [1]])
def test_other_values_are_left_for_the_constraint(value):
    tp = int if value == 1.5 else float
    assert normalize_number(tp, value) is value


def test_make_params_spells_numbers_once_and_refuses_in_one_line():
    a = make_params(Example, {"rate": 1, "steps": 4.0}, "example")
    b = make_params(Example, {"rate": 1.0, "steps": 4}, "example")
    assert a == b and type(a.rate) is float and type(a.steps) is int
    with pytest.raises(ParamError, match=r"^example\.steps=4\.5 is invalid: must be an integer in \[1, inf\)$"):
        make_params(Example, {"steps": 4.5}, "example")
    with pytest.raises(ParamError, match=r"^example has no parameter 'nope'; valid: both, mode, rate, scale, steps$"):
        make_params(Example, {"nope": 1}, "example")
    with pytest.raises(ParamError, match="rate='1' is invalid"):  # a string is never a number
        make_params(Example, {"rate": "1"}, "example")


def test_a_choice_may_follow_its_options_when_checked():
    live = ["x"]
    c = Choice(lambda: tuple(live))
    assert c.contains("x") and not c.contains("y")
    live.append("y")
    assert c.contains("y") and c.describe() == "one of x, y"
    assert Choice(("a",)) == Choice(("a",)) and hash(Choice(("a",))) == hash(Choice(("a",)))
