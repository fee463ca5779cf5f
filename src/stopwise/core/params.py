"""Parameters declared as data: constraints, typed params dataclasses, one number spelling.

A params dataclass declares each field with ``param(default, constraint, doc)``.
:func:`make_params` builds one from a plain mapping: it refuses unknown keys, brings every
number to one spelling (:func:`normalize_number`, from the field's type as
``typing.get_type_hints`` reads it) and checks each field against its constraint. Solvers,
data sources, stopping rules, baselines and the config schemas all read the same
declarations, and the generated bad-input tests read them too.
"""
from __future__ import annotations

import dataclasses
import functools
import math
import types
import typing
from dataclasses import dataclass, field
from typing import Any, Callable, Union

from stopwise.core.errors import SpecError


# ---------------------------------------------------------------- constraints as data

@dataclass(frozen=True)
class Interval:
    """Numeric range; ``None`` ends are unbounded."""

    low: float | None = None
    high: float | None = None
    low_closed: bool = True
    high_closed: bool = True
    integer: bool = False

    def contains(self, v: Any) -> bool:
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            return False
        if self.integer and not float(v).is_integer():
            return False
        if not math.isfinite(float(v)):
            return False
        if self.low is not None and (v < self.low or (v == self.low and not self.low_closed)):
            return False
        if self.high is not None and (v > self.high or (v == self.high and not self.high_closed)):
            return False
        return True

    def describe(self) -> str:
        num = (lambda x: str(int(x))) if self.integer else (lambda x: f"{x:g}")
        lo = "-inf" if self.low is None else num(self.low)
        hi = "inf" if self.high is None else num(self.high)
        left = "[" if self.low_closed and self.low is not None else "("
        right = "]" if self.high_closed and self.high is not None else ")"
        kind = "an integer" if self.integer else "a number"
        return f"{kind} in {left}{lo}, {hi}{right}"

    def outside(self) -> Any:
        """A value outside the interval (for generated bad-input tests)."""
        if self.low is not None:
            return self.low - 1 if self.low_closed else self.low
        if self.high is not None:
            return self.high + 1 if self.high_closed else self.high
        return float("nan")


class Choice:
    """One of named options. ``options`` is a tuple, or a function giving the options at
    checking time (a registry's names, so entries registered later are accepted)."""

    __slots__ = ("_options",)

    def __init__(self, options: tuple[str, ...] | Callable[[], tuple[str, ...]]) -> None:
        self._options = options if callable(options) else tuple(options)

    @property
    def options(self) -> tuple[str, ...]:
        o = self._options
        return tuple(o()) if callable(o) else o

    def contains(self, v: Any) -> bool:
        return isinstance(v, str) and v in self.options

    def describe(self) -> str:
        return "one of " + ", ".join(self.options)

    def outside(self) -> Any:
        return "no-such-choice"

    def __eq__(self, other: object) -> bool:
        return type(other) is type(self) and other._options == self._options

    def __hash__(self) -> int:
        return hash(self._options)

    def __repr__(self) -> str:
        return f"Choice({self.options!r})"


@dataclass(frozen=True)
class Flag:
    """A true/false switch (YAML booleans only, never strings or numbers)."""

    def contains(self, v: Any) -> bool:
        return isinstance(v, bool)

    def describe(self) -> str:
        return "true or false"

    def outside(self) -> Any:
        return "no-such-flag"


Constraint = Union[Interval, Choice, Flag]


def param(default: Any, constraint: Constraint | None = None, doc: str = "",
          omit_default: bool = False, stored_as: str | None = None) -> Any:
    """Declare a params field with its constraint and one-line doc, readable by tests.

    ``omit_default``: a normalized config leaves the field out while it has its default, so
    adding the field to an existing params class keeps existing run identities unchanged.
    ``stored_as``: the field's name inside run identities when it differs from the name
    users type (a renamed field keeps the run ids it had under its former name).
    """
    return field(default=default, metadata={"constraint": constraint, "doc": doc, "omit_default": omit_default,
                                            "stored_as": stored_as})


def stored_names(cls: type) -> dict[str, str]:
    """``{name in run identities: field name}`` for the fields stored under another name."""
    return {f.metadata["stored_as"]: f.name for f in dataclasses.fields(cls) if f.metadata.get("stored_as")}


class ParamError(SpecError):
    """A parameter outside its valid range; the message is one line."""


# ---------------------------------------------------------------- types and numbers

def field_types(cls: type) -> dict[str, Any]:
    """Each field's type, resolved by ``typing.get_type_hints`` (never by reading strings).

    Resolved once per class (a sweep validates thousands of jobs against a few classes);
    callers get a copy, so the cached mapping cannot be changed through them."""
    return dict(_field_types(cls))


@functools.lru_cache(maxsize=None)
def _field_types(cls: type) -> dict[str, Any]:
    try:
        hints = typing.get_type_hints(cls)
    except Exception:  # a class whose annotations name something not importable
        hints = {}
    return {f.name: hints.get(f.name, f.type if not isinstance(f.type, str) else Any)
            for f in dataclasses.fields(cls)}


def number_kind(tp: Any) -> type | None:
    """``float`` or ``int`` when the type (``None`` aside) is exactly that number type, else None."""
    if tp in (float, int):
        return tp
    if typing.get_origin(tp) in (Union, types.UnionType):
        members = {a for a in typing.get_args(tp) if a is not type(None)}
        if len(members) == 1:
            (only,) = members
            return only if only in (float, int) else None
    return None


def normalize_number(tp: Any, v: Any) -> Any:
    """One spelling per number for a field of type ``tp``, so a run hash never depends on it.

    For a float field an int becomes a float (``1`` -> ``1.0``; the command line's ``1e0``
    and ``1.0`` already arrive as that float); for an int field an integral float becomes
    an int (``400.0`` -> ``400``). Anything else (booleans, strings, non-integral values
    for an int field) is returned unchanged for the constraint to judge: a string is never
    a number.

    >>> normalize_number(float, 1), normalize_number(int, 400.0), normalize_number(int, 2.5)
    (1.0, 400, 2.5)
    >>> normalize_number(float, True), normalize_number(float, "1")
    (True, '1')
    """
    kind = number_kind(tp)
    if kind is None or isinstance(v, bool) or not isinstance(v, (int, float)):
        return v
    if kind is float and isinstance(v, int):
        return float(v)
    if kind is int and isinstance(v, float) and v.is_integer():
        return int(v)
    return v


def validate_params(params: Any, owner: str) -> None:
    """Check every field of a params dataclass against its declared constraint."""
    for f in dataclasses.fields(params):
        c = f.metadata.get("constraint")
        v = getattr(params, f.name)
        if c is None or (v is None and f.default is None):
            continue
        if not c.contains(v):
            raise ParamError(f"{owner}.{f.name}={v!r} is invalid: must be {c.describe()}")


def make_params(cls: type, values: dict[str, Any], owner: str):
    """Build and validate a params dataclass from a plain mapping."""
    names = {f.name for f in dataclasses.fields(cls)}
    unknown = sorted(set(values) - names)
    if unknown:
        raise ParamError(
            f"{owner} has no parameter {unknown[0]!r}; valid: {', '.join(sorted(names)) or '(none)'}"
        )
    tps = field_types(cls)
    kwargs = {name: normalize_number(tps[name], values[name]) for name in tps if name in values}
    p = cls(**kwargs)
    validate_params(p, owner)
    return p


def params_data(params: Any) -> dict[str, Any]:
    """A params dataclass as plain data (what enters a run identity), each field under its
    stored name (see :func:`param`)."""
    data = dataclasses.asdict(params)
    renamed = {v: k for k, v in stored_names(type(params)).items()}
    return {renamed.get(k, k): v for k, v in data.items()} if renamed else data


__all__ = ["Choice", "Constraint", "Flag", "Interval", "ParamError", "field_types", "make_params",
           "normalize_number", "number_kind", "param", "params_data", "stored_names", "validate_params"]
