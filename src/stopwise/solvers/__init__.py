"""Solver registry: importing this package registers every built-in solver."""
from .base import SOLVERS, SolverDef, State, get_solver, register  # noqa: F401
from . import gradient, krylov, stochastic  # noqa: F401  (registration side effects)

__all__ = ["SOLVERS", "SolverDef", "State", "get_solver", "register"]
