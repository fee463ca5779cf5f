"""stopwise: campaign runner for iterative (implicit) regularization.

Public API::

    run(overrides, root=...)          run one configuration, store its trace
    load_problem(overrides)           the Problem (arrays, truth, noise, L) a run sees
    load_traces(root, campaign=None, **filters)   every recorded iterate as a DataFrame
    load_runs(root, campaign=None)    one row per stored run
    hard_margin(X, y)                 separability (LP) and the hard-margin SVM of a binary problem
    build_problem(dataset, split, seed) / cached_problem(...)   the data layer (docs/datasets.md)
    register_source(SourceDef(...))   add a dataset source
    select(root, campaign, rules=None) every stopping rule on every stored trace (one row per run x rule)
    ensure_baselines(root, campaign)  explicit-regularization baselines on the campaign's splits
    load_baselines(root, campaign=None) stored baseline paths (one row per penalty)
    load_references()                 published reference scores shipped with the package
    rank(selections, rule, ...)       tune on validation error, aggregate over seeds, rank across datasets
    rank_campaign(root, campaign, rule)  the same on a stored campaign (reads only the columns it needs)
    compare_campaign(root, campaign)  stopping rules against the oracle on a campaign's paths, ranked
    compare_rules(selections)         the same on a select() table that holds the oracle rows
    report_campaign(root, campaign)   static HTML report (tables, PNG figures) of a campaign
    verify_root(root, quarantine=False)   check every trace and manifest under a results root
"""
from __future__ import annotations

from stopwise.core.version import __version__  # noqa: E402

from stopwise.problem.losses import LOSSES, get_loss, minibatch_gradient  # noqa: E402
from stopwise.problem.margins import HardMargin, hard_margin, is_separable, normalized_margin  # noqa: E402
from stopwise.problem.models import LinearModel, TwoLayerReLU  # noqa: E402
from stopwise.data import RawData, SourceDef, build_problem, cached_problem  # noqa: E402
from stopwise.data.sources import register_source  # noqa: E402
from stopwise.problem.problem import Problem, TrainingSet  # noqa: E402
from stopwise.running.runner import RunOutcome, execute, run  # noqa: E402
from stopwise.solvers import PROX_OPERATORS, SOLVERS, ProxDef, get_solver, register_prox  # noqa: E402
from stopwise.solvers.averaging import AveragingParams, averaged  # noqa: E402
from stopwise.solvers.stochastic import SGDParams  # noqa: E402
from stopwise.config.spec import RunSpec, SpecError  # noqa: E402
from stopwise.config.compose import spec_from_overrides
# Ranking, baselines, selection and verification load on first use (PEP 562), so a launcher
# worker that only runs solvers does not pay for SciPy's statistics and scikit-learn's models.
_LAZY = {
    "load_runs": "results.query", "load_traces": "results.query",  # pandas loads with them
    "select": "analysis.selection",
    "BASELINES": "analysis.baselines", "ensure_baselines": "analysis.baselines", "fit_path": "analysis.baselines",
    "load_baselines": "analysis.baselines",
    "load_references": "analysis.references",
    "RULES": "stopping.rules", "RuleContext": "stopping.rules", "Selection": "stopping.rules", "apply_rule": "stopping.rules",
    "Ranking": "analysis.rank", "RankError": "analysis.rank", "Target": "analysis.rank", "rank": "analysis.rank", "rank_campaign": "analysis.rank",
    "compare_campaign": "analysis.rule_comparison", "compare_rules": "analysis.rule_comparison",
    "RuleComparison": "analysis.rule_comparison",
    "RankTest": "analysis.rankstats", "critical_difference": "analysis.rankstats", "data_profile": "analysis.rankstats",
    "friedman_from_ranks": "analysis.rankstats", "friedman_test": "analysis.rankstats", "nemenyi_q": "analysis.rankstats",
    "performance_profile": "analysis.rankstats", "rank_table": "analysis.rankstats", "student_interval": "analysis.rankstats",
    "bootstrap_interval": "analysis.rankstats",
    "verify_root": "results.verify",
}


def __getattr__(name: str):
    mod = _LAZY.get(name)
    if mod is None:
        raise AttributeError(f"module 'stopwise' has no attribute {name!r}")
    import importlib

    module = importlib.import_module(f".{mod}", __name__)
    for other, where in _LAZY.items():  # bind all of them now: importing a submodule named like
        if where == mod:                # one of its functions (rank) sets the package attribute
            globals()[other] = getattr(module, other)
    return globals()[name]


def report_campaign(root="results", campaign="", out=None, rule="holdout", **options):
    """Write the static HTML report of a stored campaign; see :func:`stopwise.report.report.report_campaign`.

    (Imported on first use: it is the only part of stopwise that needs matplotlib.)
    """
    from stopwise.report.report import report_campaign as write

    return write(root, campaign, out, rule=rule, **options)




def load_problem(overrides: list[str] | None = None) -> Problem:
    """The Problem a run with these Hydra overrides sees (same arrays, byte for byte).

    >>> p = load_problem(["dataset=diabetes"])
    >>> p.X_train.shape[1], p.task
    (10, 'regression')
    """
    from stopwise.data import build_problem

    spec = spec_from_overrides(list(overrides or []))
    return build_problem(spec.dataset, spec.split, spec.seed)


__all__ = ["RawData", "SourceDef", "build_problem", "cached_problem", "register_source",
           "Problem", "TrainingSet", "RunOutcome", "RunSpec", "SpecError", "SOLVERS", "execute",
           "get_solver", "load_problem", "load_runs", "load_traces", "run", "spec_from_overrides",
           "PROX_OPERATORS", "ProxDef", "register_prox",
           "RULES", "RuleContext", "Selection", "apply_rule", "select",
           "BASELINES", "ensure_baselines", "fit_path", "load_baselines", "load_references",
           "RankError", "RankTest", "Ranking", "Target", "critical_difference", "data_profile", "friedman_from_ranks",
           "friedman_test", "nemenyi_q", "performance_profile", "rank", "rank_campaign", "rank_table",
           "report_campaign", "student_interval", "bootstrap_interval", "RuleComparison", "compare_campaign", "compare_rules",
           "LOSSES", "get_loss", "HardMargin", "hard_margin", "is_separable", "normalized_margin",
           "LinearModel", "TwoLayerReLU", "verify_root",
           "AveragingParams", "SGDParams", "averaged", "minibatch_gradient"]


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))
