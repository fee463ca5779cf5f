"""Solver contract and the solver registry (parameter constraints: stopwise.core.params).

A solver is a frozen params dataclass plus two pure functions::

    init(train, params, rng) -> State
    step(train, params, state) -> State

``step`` never modifies the state it receives: every array in a State is read-only, and
a step returns a new State. Randomness comes only from ``rng`` and lives in the state.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from stopwise.core.errors import SpecError
from stopwise.core.registry import Registry
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

    ``check(train, params)``, when given, raises :class:`SpecError` (one line) for a
    training set the solver cannot run on (a Hessian that is not positive definite for the
    strongly convex methods, too many rows for a kernel matrix). ``stopwise run`` and
    ``stopwise sweep`` call it on the problem of each dataset and split before anything is
    written (``sweep.campaign.check_data``); the solver's ``init`` calls it too, so a run on
    another seed's problem that fails it is recorded as failed with that line.

    ``sparse``: the solver runs on a ``scipy.sparse`` CSR design as it is (see
    :mod:`stopwise.problem.design`); the others receive a dense copy of a sparse problem
    (:meth:`stopwise.problem.problem.Problem.dense`), or a one-line refusal when it is too large.
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
    check: Callable[[TrainingSet, Any], None] | None = None
    # whether init and step take a scipy.sparse CSR training design (products with X and
    # X^T, row selection, the training set's gradient); a solver without it is given a dense
    # copy of a sparse problem within the bound of stopwise.problem.design, else refused
    sparse: bool = False

    def start(self, train: TrainingSet, params: Any, rng: np.random.Generator,
              budget: dict | None = None) -> State:
        """The initial state: ``init_budget`` when the solver has one, else ``init``."""
        if self.init_budget is not None:
            return self.init_budget(train, params, rng, dict(budget or {}))
        return self.init(train, params, rng)


class UnknownSolver(SpecError):
    """An unknown solver name (one line listing the registered ones)."""


SOLVERS: Registry[SolverDef] = Registry("solver", UnknownSolver, sort=True)


def register(defn: SolverDef) -> SolverDef:
    """Add a solver (a name registered twice raises ValueError)."""
    return SOLVERS.register(defn.name, defn)


def get_solver(name: str) -> SolverDef:
    return SOLVERS.get(name)


def step_size(train: TrainingSet, step_scale: float) -> float:
    """Absolute step ``step_scale / L`` for a training set (0 when L is 0)."""
    return step_scale / train.L if train.L > 0 else 0.0
