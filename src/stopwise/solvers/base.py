"""Solver contract, parameter constraints as data, and the solver registry.

A solver is a frozen params dataclass plus two pure functions::

    init(train, params, rng) -> State
    step(train, params, state) -> State

``step`` never modifies the state it receives: every array in a State is read-only, and
a step returns a new State. Randomness comes only from ``rng`` and lives in the state.
"""
from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from stopwise.core.errors import SpecError
from stopwise.problem.problem import TrainingSet


def frozen(a: np.ndarray) -> np.ndarray:
    """Mark an array read-only and return it (states are immutable)."""
    a.flags.writeable = False
    return a


@dataclass(frozen=True)
class State:
    """Base iterate record: ``w`` is evaluated, ``passes`` counts data passes.

    A solver sets ``converged`` when further steps cannot change ``w`` beyond rounding
    (for example CGLS at a least-squares solution); the runner then ends the run.
    """

    w: np.ndarray
    iteration: int = 0
    passes: float = 0.0
    converged: bool = False


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


@dataclass(frozen=True)
class Choice:
    options: tuple[str, ...]

    def contains(self, v: Any) -> bool:
        return isinstance(v, str) and v in self.options

    def describe(self) -> str:
        return "one of " + ", ".join(self.options)

    def outside(self) -> Any:
        return "no-such-choice"


@dataclass(frozen=True)
class Flag:
    """A true/false switch (YAML booleans only, never strings or numbers)."""

    def contains(self, v: Any) -> bool:
        return isinstance(v, bool)

    def describe(self) -> str:
        return "true or false"

    def outside(self) -> Any:
        return "no-such-flag"


def param(default: Any, constraint: Interval | Choice | Flag | None = None, doc: str = "",
          omit_default: bool = False) -> Any:
    """Declare a params field with its constraint and one-line doc, readable by tests.

    ``omit_default``: a normalized config leaves the field out while it has its default, so
    adding the field to an existing params class keeps existing run identities unchanged.
    """
    return field(default=default, metadata={"constraint": constraint, "doc": doc, "omit_default": omit_default})


class ParamError(SpecError):
    """A parameter outside its valid range; the message is one line."""


def validate_params(params: Any, owner: str) -> None:
    """Check every field of a params dataclass against its declared constraint."""
    for f in dataclasses.fields(params):
        c = f.metadata.get("constraint")
        v = getattr(params, f.name)
        if c is None or (v is None and f.default is None):
            continue
        if not c.contains(v):
            raise ParamError(f"{owner}.{f.name}={v!r} is invalid: must be {c.describe()}")


def _type_names(tp: Any) -> set[str]:
    text = tp if isinstance(tp, str) else getattr(tp, "__name__", str(tp))
    return set(re.split(r"[\s|\[\],.]+", text)) - {""}


def _coerce_number(tp: Any, v: Any) -> Any:
    """One spelling per number for typed fields, so the run hash never depends on it:
    an int given to a float field becomes a float (``1`` -> ``1.0``), and an integral float
    given to an int field becomes an int (``400.0`` -> ``400``). Anything else is left for
    the constraint to judge."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return v
    names = _type_names(tp)
    if "float" in names and "int" not in names and isinstance(v, int):
        return float(v)
    if "int" in names and "float" not in names and isinstance(v, float) and v.is_integer():
        return int(v)
    return v


def make_params(cls: type, values: dict[str, Any], owner: str):
    """Build and validate a params dataclass from a plain mapping."""
    names = {f.name for f in dataclasses.fields(cls)}
    unknown = sorted(set(values) - names)
    if unknown:
        raise ParamError(
            f"{owner} has no parameter {unknown[0]!r}; valid: {', '.join(sorted(names)) or '(none)'}"
        )
    kwargs = {}
    for f in dataclasses.fields(cls):
        if f.name in values:
            kwargs[f.name] = _coerce_number(f.type, values[f.name])
    p = cls(**kwargs)
    validate_params(p, owner)
    return p


# ---------------------------------------------------------------- registry

@dataclass(frozen=True)
class SolverDef:
    """A registered solver: its params class, init and step, and how it spends work.

    ``metrics``, when given, maps ``(train, params)`` to ``{column: f(state) -> float}``:
    per-iterate quantities that depend on the solver's params or on more of its state than
    ``w`` (a bias value, a dual variable's gap). The Recorder evaluates them on recorded
    iterates only, outside the solver's timed work.

    ``loss`` is the training loss the solver is built for (None: it follows the dataset's
    loss option or the task's default). ``model(params, train)`` returns the prediction
    model its iterates parameterize (None: linear scores ``X w``, see stopwise.problem.models).
    """

    name: str
    params: type
    init: Callable[[TrainingSet, Any, np.random.Generator], State]
    step: Callable[[TrainingSet, Any, State], State]
    summary: str
    tasks: tuple[str, ...] = ("regression",)
    stochastic: bool = False
    metrics: Callable[[TrainingSet, Any], dict[str, Callable[[State], float]]] | None = None
    loss: str | None = None
    model: Callable[[Any, TrainingSet], Any] | None = None
    # optional init that also receives the run's budget (a dict with ``iterations`` and
    # ``passes``), for solvers whose iterate depends on the horizon (tail averaging);
    # the runner calls it instead of ``init`` when present
    init_budget: Callable[[TrainingSet, Any, np.random.Generator, dict], State] | None = None

    def start(self, train: TrainingSet, params: Any, rng: np.random.Generator,
              budget: dict | None = None) -> State:
        """The initial state: ``init_budget`` when the solver has one, else ``init``."""
        if self.init_budget is not None:
            return self.init_budget(train, params, rng, dict(budget or {}))
        return self.init(train, params, rng)


SOLVERS: dict[str, SolverDef] = {}


def register(defn: SolverDef) -> SolverDef:
    if defn.name in SOLVERS:
        raise ValueError(f"solver {defn.name!r} registered twice")
    SOLVERS[defn.name] = defn
    return defn


class UnknownSolver(SpecError):
    pass


def get_solver(name: str) -> SolverDef:
    try:
        return SOLVERS[name]
    except KeyError:
        raise UnknownSolver(
            f"unknown solver {name!r}; valid: {', '.join(sorted(SOLVERS))}"
        ) from None


def step_size(train: TrainingSet, step_scale: float) -> float:
    """Absolute step ``step_scale / L`` for a training set (0 when L is 0)."""
    return step_scale / train.L if train.L > 0 else 0.0
