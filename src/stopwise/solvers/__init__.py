"""Solver registry: importing this package registers every built-in solver."""
from .base import SOLVERS, SolverDef, State, get_solver, register  # noqa: F401
from . import gradient, krylov, mirror, primal_dual  # noqa: F401  (registration side effects)
from .prox import PROX_OPERATORS, ProxDef, register_prox  # noqa: F401
from . import margin, network, schedules  # noqa: F401  (classification solvers and step schedules)

__all__ = ["PROX_OPERATORS", "ProxDef", "SOLVERS", "SolverDef", "State", "get_solver", "register", "register_prox"]
