"""The one registry behind every named extension point (solvers, stopping rules, prox
operators, baselines, data sources, metric sets).

``register`` refuses a name twice; a lookup of an unknown name raises the subsystem's own
:class:`SpecError` subclass with one line listing the valid names; :meth:`Registry.choice`
is the :class:`Choice` constraint of the registered names, for config schemas.

>>> from stopwise.core.errors import SpecError
>>> class UnknownColour(SpecError): pass
>>> colours = Registry("colour", UnknownColour)
>>> colours.register("red", 1)
1
>>> colours.get("blue")
Traceback (most recent call last):
...
stopwise.core.registry.UnknownColour: unknown colour 'blue'; valid: red
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Generic, Iterator, TypeVar

from stopwise.core.errors import SpecError
from stopwise.core.params import Choice

T = TypeVar("T")


class Registry(Generic[T]):
    """Named entries in registration order; reads like a read-only mapping."""

    def __init__(self, kind: str, error: type[SpecError] = SpecError, sort: bool = False) -> None:
        self.kind = kind
        self.error = error
        self.sort = sort  # list valid names sorted in messages (else in registration order)
        self._items: dict[str, T] = {}

    # -- writing
    def register(self, name: str, item: T) -> T:
        if not isinstance(name, str) or not name:
            raise ValueError(f"{self.kind} name must be a non-empty string, not {name!r}")
        if name in self._items:
            raise ValueError(f"{self.kind} {name!r} registered twice")
        self._items[name] = item
        return item

    def unregister(self, name: str) -> T:
        """Remove an entry (for tests that register a temporary one)."""
        return self._items.pop(name)

    # -- reading
    def names(self) -> list[str]:
        return sorted(self._items) if self.sort else list(self._items)

    def get(self, name: Any) -> T:
        try:
            return self._items[name]
        except (KeyError, TypeError):
            raise self.error(f"unknown {self.kind} {name!r}; valid: {', '.join(self.names()) or '(none)'}") from None

    def choice(self, extra: tuple[str, ...] = ()) -> Choice:
        """The constraint "one of the registered names" (plus fixed ``extra`` options), read
        when checking, so entries registered later are accepted."""
        return Choice(_Names(self, tuple(extra)))

    def __getitem__(self, name: str) -> T:
        return self._items[name]

    def __contains__(self, name: object) -> bool:
        return name in self._items

    def __iter__(self) -> Iterator[str]:
        return iter(self._items)

    def __len__(self) -> int:
        return len(self._items)

    def keys(self):
        return self._items.keys()

    def values(self):
        return self._items.values()

    def items(self):
        return self._items.items()

    def decorator(self, name: str) -> Callable[[T], T]:
        """``@registry.decorator(name)`` registers the decorated object."""
        return lambda item: self.register(name, item)

    def __repr__(self) -> str:
        return f"Registry({self.kind!r}: {', '.join(self.names())})"


@dataclass(frozen=True)
class _Names:
    """The current names of a registry plus fixed extras (the options of its Choice)."""

    registry: Registry
    extra: tuple[str, ...] = ()

    def __call__(self) -> tuple[str, ...]:
        names = tuple(self.registry.names())
        return names + tuple(e for e in self.extra if e not in names)


__all__ = ["Registry"]
