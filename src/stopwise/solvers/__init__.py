"""Solver registry: importing this package registers every built-in solver."""
from stopwise.solvers.base import SOLVERS, SolverDef, State, get_solver, register  # noqa: F401
from stopwise.solvers import gradient, krylov, mirror, primal_dual  # noqa: F401  (registration side effects)
from stopwise.solvers.prox import PROX_OPERATORS, ProxDef, register_prox  # noqa: F401
from stopwise.solvers import margin, network, schedules  # noqa: F401  (classification solvers and step schedules)
from stopwise.solvers import stochastic  # noqa: F401  (sgd, wrapped with iterate averaging)
from stopwise.solvers import kernel, row_action, semi_iterative  # noqa: F401  (kernel_gd, kaczmarz, nu_method)

__all__ = ["PROX_OPERATORS", "ProxDef", "SOLVERS", "SolverDef", "State", "get_solver", "register", "register_prox"]
