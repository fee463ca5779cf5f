"""stopwise: campaign runner for iterative (implicit) regularization.

Public API::

    run(overrides, root=...)          run one configuration, store its trace
    load_problem(overrides)           the Problem (arrays, truth, noise, L) a run sees
    load_traces(root, campaign=None, **filters)   every recorded iterate as a DataFrame
    load_runs(root, campaign=None)    one row per stored run
    select(root, campaign, rules=None) every stopping rule on every stored trace (one row per run x rule)
    ensure_baselines(root, campaign)  explicit-regularization baselines on the campaign's splits
    load_baselines(root, campaign=None) stored baseline paths (one row per penalty)
    load_references()                 published reference scores shipped with the package
"""
from __future__ import annotations

__version__ = "0.1.0"

from .problem import Problem, TrainingSet  # noqa: E402
from .query import load_runs, load_traces  # noqa: E402
from .runner import RunOutcome, execute, run  # noqa: E402
from .solvers import SOLVERS, get_solver  # noqa: E402
from .spec import RunSpec, SpecError, spec_from_overrides  # noqa: E402
from .selection import select  # noqa: E402
from .baselines import BASELINES, ensure_baselines, fit_path, load_baselines  # noqa: E402
from .references import load_references  # noqa: E402
from .stopping import RULES, RuleContext, Selection, apply_rule  # noqa: E402


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
           "get_solver", "load_problem", "load_runs", "load_traces", "run", "spec_from_overrides",
           "RULES", "RuleContext", "Selection", "apply_rule", "select",
           "BASELINES", "ensure_baselines", "fit_path", "load_baselines", "load_references"]
