"""Solver registry: importing this package registers every built-in solver."""
from .base import SOLVERS, SolverDef, State, get_solver, register  # noqa: F401
from . import gradient, krylov  # noqa: F401  (registration side effects)
from . import margin, network, schedules  # noqa: F401  (classification solvers and step schedules)

__all__ = ["SOLVERS", "SolverDef", "State", "get_solver", "register"]
