"""Error types: one root, and one branch for bad input.

Every exception class stopwise defines derives from :class:`StopwiseError`, so
``except StopwiseError`` catches whatever the project raises on purpose
(``tests/core/test_errors.py`` walks every module and fails on a class that does not).
Bad input raises :class:`SpecError` or a subclass, whose ``str`` is one line naming the
problem and the valid choices; the CLI prints it and exits 2. The other branches keep
the built-in base they had (``ValueError``, ``TypeError``) as a second base, so code that
catches that built-in still catches them.

The hierarchy (module of each class in brackets)::

    StopwiseError(Exception)                  the root                     [core.errors]
    +-- SpecError(ValueError)                 bad input: spec, data, params, options
    |   +-- ParamError                        a params field out of its constraint [core.params]
    |   +-- LossError                         unknown loss or one unfit for the task [problem.losses]
    |   +-- DesignError                       a sparse design too large to densify [problem.design]
    |   +-- DataError                         dataset and source input; unknown source [data.errors]
    |   |   +-- GeneratorError                                             [data.generators]
    |   |   +-- PreprocessError                                            [data.preprocess]
    |   |   +-- TabularError                                               [data.tabular]
    |   |   +-- OpenMLCacheError                                           [data.openml_source]
    |   +-- TaskMismatch                      a solver that does not handle the task [config.spec]
    |   +-- TraceTooLarge                     a budget whose trace cannot fit in memory [config.spec]
    |   +-- UnknownSolver                                                  [solvers.base]
    |   +-- UnknownProx                                                    [solvers.prox]
    |   +-- RuleError                         stopping rule name or params [stopping.rules]
    |   +-- UnknownMetricSet                                               [running.record]
    |   +-- DatasetNameClash                  two files under one dataset name [analysis.selection]
    |   +-- BaselineError                                                  [analysis.baselines]
    |   +-- StatsError                        rank statistics' input       [analysis.rankstats]
    |   +-- RankError                         ranking options and tables   [analysis.rank]
    |   +-- FormatError                       unknown table format         [report.tables]
    +-- SplitError(ValueError)                a split that cannot be made  [data.split]
    +-- SourceParamError(ValueError)          source params that do not fit together [data.sources]
    +-- AveragingError(ValueError)            averaging without what it needs [solvers.averaging]
    +-- SchemaError(TypeError)                a trace's columns of the wrong types [results.schema]
    +-- StoreError(ValueError)                a results folder's names, ids and files [results.store]
    +-- StoreWriteError(OSError)              a trace that could not be stored [results.store]
    +-- PathError(ValueError)                 unknown evaluation path      [running.fastpath]
    +-- ReferenceRowError(ValueError)         an unreadable reference row  [analysis.references]
    +-- BadArguments(ValueError)              a subcommand's options did not parse [cli]
    +-- CompositionMiss                       internal: a cached composer meets a new group [config.compose]

The classes outside :class:`SpecError` are raised below the layer that turns them into
one-line bad input (``DataError`` from a ``SplitError``, the CLI's own handlers for
``StoreError`` and ``BadArguments``), or for files on disk rather than the user's input.
"""


class StopwiseError(Exception):
    """The root of every error stopwise raises on purpose."""


class SpecError(StopwiseError, ValueError):
    """Invalid configuration or input."""


__all__ = ["SpecError", "StopwiseError"]
