"""stopwise: campaign runner for iterative (implicit) regularization.

Public API::

    run(overrides, root=...)          run one configuration, store its trace
    load_problem(overrides)           the Problem (arrays, truth, noise, L) a run sees
    load_traces(root, campaign=None, **filters)   every recorded iterate as a DataFrame
    load_runs(root, campaign=None)    one row per stored run
    verify_root(root, quarantine=False)   check every trace and manifest under a results root
"""
from __future__ import annotations

__version__ = "0.1.0"

from .problem import Problem, TrainingSet  # noqa: E402
from .query import load_runs, load_traces  # noqa: E402
from .runner import RunOutcome, execute, run  # noqa: E402
from .solvers import SOLVERS, get_solver  # noqa: E402
from .spec import RunSpec, SpecError, spec_from_overrides  # noqa: E402
from .verify import verify_root  # noqa: E402


def load_problem(overrides: list[str] | None = None) -> Problem:
    """The Problem a run with these Hydra overrides sees (same arrays, byte for byte).

    >>> p = load_problem(["dataset=diabetes"])
    >>> p.X_train.shape[1], p.task
    (10, 'regression')
    """
    from .data import build_problem

    spec = spec_from_overrides(list(overrides or []))
    return build_problem(spec.dataset, spec.split, spec.seed)


__all__ = ["Problem", "TrainingSet", "RunOutcome", "RunSpec", "SpecError", "SOLVERS", "execute",
           "get_solver", "load_problem", "load_runs", "load_traces", "run", "spec_from_overrides", "verify_root"]
