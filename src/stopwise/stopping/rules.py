"""Stopping rules: pure functions from one run's trace to a selected iterate.

A rule sees one run's recorded iterates (a pandas DataFrame, or a mapping of column
name -> numpy array) and a :class:`RuleContext` with what it may know about the problem
(the stated noise norm and its kind, ``n_train``, the task). It returns a
:class:`Selection`: the selected iteration (or ``None``), the data passes at that
iterate, the data passes the rule spent to decide, and one line saying why.

Only the ``oracle`` looks at test error; it is marked ``reference=True`` and is never a
method. Every other rule reads only training and validation columns, and the test suite
checks that permuting test errors never changes their choice.

Rules (see docs/stopping.md for formulas and sources):

=================  ========================================================================
budget             last iterate within an iteration and/or data-pass budget
holdout            best validation error, with patience (in passes) and minimum improvement
discrepancy        first iterate with ``||X w - y|| <= tau delta`` (Morozov)
monotone_error     first ``k`` with ``(||r_k||^2 + <r_k, r_{k+1}>) / (2 ||r_k||) <= tau delta``
ncp                training residual closest to / first accepted as white noise (NCP)
a_priori           the iterate ``ceil(c n^a)`` or ``ceil(c delta^(-b))``
oracle             minimum test error (reference only)
=================  ========================================================================

A rule's selection is *final* once later iterates cannot change it (the crossing was
seen, patience ran out, the budget was passed). A run configured with ``halt: true``
stops its loop at the first recorded iterate where its rule's selection is final.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any, Callable, Iterable, Mapping

import numpy as np

from stopwise.core.errors import SpecError
from stopwise.stopping.residual import white_noise_limit
from stopwise.core.params import Choice, Flag, Interval, ParamError, make_params, param
from stopwise.core.registry import Registry

POS = Interval(0.0, None, low_closed=False)
NONNEG = Interval(0.0, None)


class RuleError(SpecError):
    """Bad stopping-rule configuration; ``str(e)`` is one line naming the valid choices."""


# ---------------------------------------------------------------- context and result

@dataclass(frozen=True)
class RuleContext:
    """What a rule may know besides the trace (from the trace file's ``problem`` metadata).

    ``noise_norm`` is the norm of the training noise: exact for ``noise_kind == "norm"``
    (worst-case model), ``sigma sqrt(n_train)`` (its expected size) for ``"gaussian"``,
    ``None`` when the problem does not state its noise.
    """

    n_train: int = 0
    noise_norm: float | None = None
    noise_kind: str | None = None
    noise_level: float | None = None
    task: str = "regression"
    d: int | None = None

    @classmethod
    def from_problem_info(cls, info: Mapping[str, Any] | None) -> "RuleContext":
        info = info or {}
        nn = info.get("noise_norm")
        return cls(n_train=int(info.get("n_train") or 0),
                   noise_norm=None if nn is None else float(nn),
                   noise_kind=info.get("noise_kind"),
                   noise_level=None if info.get("noise_level") is None else float(info["noise_level"]),
                   task=str(info.get("task") or "regression"),
                   d=None if info.get("d") is None else int(info["d"]))

    @classmethod
    def from_problem(cls, problem: Any) -> "RuleContext":
        return cls(n_train=problem.n_train, noise_norm=problem.noise_norm, noise_kind=problem.noise_kind,
                   noise_level=problem.noise_level, task=problem.task, d=problem.d)


@dataclass(frozen=True)
class Selection:
    """A rule's choice on one trace.

    ``iteration`` is the selected iteration (``None``: the rule selects nothing, see
    ``reason``); ``passes_selected`` the data passes at it (NaN when none);
    ``passes_spent`` the data passes the rule needed before it could decide (for
    ``holdout``, where patience ran out; for rules that never became final, the whole
    trace). ``final`` says that later iterates cannot change the choice; ``row`` is the
    selected row's position in the trace. ``applicable`` is False when the rule cannot be
    evaluated on this trace at all (no stated noise level, a column the trace lacks, too
    few rows), as against a rule that was evaluated and never stopped.
    """

    iteration: int | None
    passes_selected: float
    passes_spent: float
    reason: str
    final: bool = False
    row: int | None = None
    applicable: bool = True

    @property
    def outcome(self) -> str:
        """``stopped`` (final, with an iterate), ``not stopped`` (evaluated on the whole trace
        without becoming final) or ``not applicable``."""
        if not self.applicable:
            return "not applicable"
        return "stopped" if self.final and self.iteration is not None else "not stopped"


Columns = Mapping[str, np.ndarray]


def _columns(trace: Any) -> Columns:
    """A mapping of column -> numpy array (int iteration, float others) for a DataFrame."""
    try:
        import pandas as pd
    except ImportError:  # pragma: no cover
        return trace
    if not isinstance(trace, pd.DataFrame):
        return trace
    out: dict[str, np.ndarray] = {}
    for c in trace_columns():
        if c in trace.columns:
            out[c] = (trace[c].to_numpy(dtype=np.int64) if c == "iteration"
                      else trace[c].to_numpy(dtype=np.float64, na_value=np.nan))
    return out




def _n(cols: Columns) -> int:
    it = cols.get("iteration")
    return 0 if it is None else len(it)


def _pick(cols: Columns, row: int, spent_row: int, reason: str, final: bool) -> Selection:
    p = cols["passes"]
    return Selection(int(cols["iteration"][row]), float(p[row]), float(p[spent_row]), reason, final, int(row))


def _none(cols: Columns, reason: str, final: bool = False, spent_row: int | None = None) -> Selection:
    n = _n(cols)
    if n == 0:
        return Selection(None, math.nan, 0.0, reason, final, None)
    r = n - 1 if spent_row is None else spent_row
    return Selection(None, math.nan, float(cols["passes"][r]), reason, final, None)


def _cannot(reason: str) -> Selection:
    """The rule cannot be evaluated on this trace (see ``Selection.applicable``)."""
    return Selection(None, math.nan, 0.0, reason, False, None, applicable=False)


def _g(x: float) -> str:
    return f"{x:.4g}"


def _smallest(cols: Columns, x: np.ndarray, what: str, reason: Callable[[str], str]) -> Selection:
    """The row of the smallest finite value of ``x`` (the first of ties), spending the whole
    trace and not final (a later row may be smaller); nothing when no value is finite.
    ``reason(value)`` says why, given the chosen value as written."""
    if not np.isfinite(x).any():
        return _none(cols, f"{what} is never finite")
    row = int(np.nanargmin(np.where(np.isfinite(x), x, np.nan)))
    return _pick(cols, row, _n(cols) - 1, reason(_g(x[row])), False)


def _first_at_or_below(cols: Columns, x: np.ndarray, limit: float, hit: Callable[[str], str],
                       never: Callable[[str], str]) -> Selection:
    """The first row with ``x <= limit``, spending up to it and final (no later row changes
    it); else nothing. ``hit(value)`` says why, given the value there as written;
    ``never(smallest)`` why not, given the smallest finite value (``nan`` for none)."""
    rows = np.flatnonzero(x <= limit)
    if rows.size:
        row = int(rows[0])
        return _pick(cols, row, row, hit(_g(x[row])), True)
    fin = x[np.isfinite(x)]
    return _none(cols, never(_g(float(fin.min())) if fin.size else "nan"))


def _delta(ctx: RuleContext, given: float | None) -> tuple[float | None, str]:
    if given is not None:
        return float(given), "given"
    if ctx.noise_norm is not None and math.isfinite(ctx.noise_norm):
        how = "exact" if ctx.noise_kind == "norm" else "sigma*sqrt(n_train)" if ctx.noise_kind == "gaussian" else "stated"
        return float(ctx.noise_norm), how
    return None, ""


NO_DELTA = "noise norm delta unknown: the problem does not state its noise; give stopping.params.delta"

# ---------------------------------------------------------------- budget


@dataclass(frozen=True)
class BudgetParams:
    iterations: int | None = param(None, Interval(0, None, integer=True), "largest iteration allowed (none: no limit)")
    passes: float | None = param(None, NONNEG, "largest data passes allowed (none: no limit)")


def budget(trace: Any, ctx: RuleContext, params: BudgetParams = BudgetParams()) -> Selection:
    """Last recorded iterate ``t`` with ``t <= iterations`` and ``passes_t <= passes``.

    Final once an iterate reaches or passes a limit; with no limit it is the last
    recorded iterate and never final (so without limits the rule cannot halt a run).
    """
    cols = _columns(trace)
    n = _n(cols)
    if n == 0:
        return _none(cols, "empty trace")
    ok = np.ones(n, dtype=bool)
    if params.iterations is not None:
        ok &= cols["iteration"] <= params.iterations
    if params.passes is not None:
        ok &= cols["passes"] <= params.passes + 1e-12
    over = np.flatnonzero(~ok)
    final = over.size > 0
    inside = np.flatnonzero(ok[: over[0]] if final else ok)
    if inside.size == 0:
        return _none(cols, "no recorded iterate lies within the budget", final, spent_row=0)
    row = int(inside[-1])
    # an iterate exactly at a limit is the last one the budget allows
    final = final or (params.iterations is not None and cols["iteration"][row] >= params.iterations) or \
        (params.passes is not None and cols["passes"][row] >= params.passes - 1e-12)
    what = []
    if params.iterations is not None:
        what.append(f"{params.iterations} iterations")
    if params.passes is not None:
        what.append(f"{params.passes:g} passes")
    reason = f"last iterate within {' and '.join(what)}" if what else "last recorded iterate (no budget given)"
    return _pick(cols, row, row, reason, final)


# ---------------------------------------------------------------- holdout


@dataclass(frozen=True)
class HoldoutParams:
    patience: float | None = param(None, POS, "data passes without improvement before stopping (none: never)")
    min_improvement: float = param(0.0, NONNEG, "an improvement must beat the best validation error by more")
    relative: bool = param(False, Flag(), "min_improvement is a fraction of the best validation error")


def holdout(trace: Any, ctx: RuleContext, params: HoldoutParams = HoldoutParams()) -> Selection:
    """Best validation error, stopping when patience runs out.

    Scanning rows in order with ``best`` the smallest validation error so far, row ``t``
    is an improvement when ``val_t < best - m`` (``m = min_improvement``, or
    ``min_improvement * best`` when ``relative``). Patience runs out at the first row with
    ``passes_t - passes_last_improvement >= patience``; the rule selects the row of the
    smallest validation error seen up to there (the first of ties) and spends the passes
    up to the row where patience ran out. With rows one pass apart this is scikit-learn's
    early stopping on a validation score: its SGD estimators stop after ``n_iter_no_change``
    epochs not beating ``best - tol`` (patience ``n_iter_no_change``), its MLP estimators
    after more than ``n_iter_no_change`` such epochs (patience ``n_iter_no_change + 1``)
    and keep the best epoch's weights, as this rule selects the best row.
    """
    cols = _columns(trace)
    n = _n(cols)
    if n == 0:
        return _none(cols, "empty trace")
    val = cols.get("val_error")
    if val is None or not np.isfinite(val).any():
        return _cannot("no validation error in the trace (the split has no validation rows)")
    passes = cols["passes"]
    v = np.where(np.isfinite(val), val, np.inf)  # a missing validation error never improves
    run_min = np.minimum.accumulate(v)
    prev = np.concatenate(([np.inf], run_min[:-1]))  # best before each row
    margin = params.min_improvement * (np.where(np.isfinite(prev), prev, 1.0) if params.relative else 1.0)
    with np.errstate(invalid="ignore"):
        imp = np.isfinite(v) & (np.isinf(prev) | (v < prev - margin))
    idx = np.arange(n)
    last_imp = np.maximum.accumulate(np.where(imp, idx, -1))
    if params.patience is not None:
        since = passes - passes[np.maximum(last_imp, 0)]
        out = np.flatnonzero((last_imp >= 0) & (since >= params.patience - 1e-12))
        if out.size:
            i = int(out[0])
            best_row = int(np.argmin(v[: i + 1]))
            return _pick(cols, best_row, i,
                         f"best validation error {_g(v[best_row])}; no improvement for {params.patience:g} passes "
                         f"by iteration {int(cols['iteration'][i])}", True)
    best_row = int(np.argmin(v)) if np.isfinite(run_min[-1]) else -1
    best = float(run_min[-1])
    if best_row < 0:
        return _none(cols, "validation error is never finite")
    reason = (f"best validation error {_g(best)} (patience never ran out)" if params.patience is not None
              else f"best validation error {_g(best)} over the whole trace")
    return _pick(cols, best_row, n - 1, reason, False)


# ---------------------------------------------------------------- discrepancy principle


@dataclass(frozen=True)
class DiscrepancyParams:
    tau: float = param(1.1, Interval(1.0, None, low_closed=False), "safety factor tau > 1")
    delta: float | None = param(None, POS, "noise norm delta (none: the problem's stated noise norm)")


def discrepancy(trace: Any, ctx: RuleContext, params: DiscrepancyParams = DiscrepancyParams()) -> Selection:
    """Morozov's discrepancy principle: the first recorded ``t`` with ``||X w_t - y|| <= tau delta``.

    ``delta`` bounds the norm of the training noise; it comes from ``params.delta`` or
    the problem (exact for worst-case ``norm`` noise, ``sigma sqrt(n_train)`` for Gaussian).
    """
    cols = _columns(trace)
    if _n(cols) == 0:
        return _none(cols, "empty trace")
    delta, how = _delta(ctx, params.delta)
    if delta is None:
        return _cannot(NO_DELTA)
    thr = params.tau * delta
    if "residual_norm" not in cols:
        return _cannot("trace has no residual_norm column")
    return _first_at_or_below(
        cols, cols["residual_norm"], thr,
        lambda v: f"first iterate with residual {v} <= tau*delta = {params.tau:g}*{_g(delta)} ({how})",
        lambda low: f"residual never reached tau*delta = {_g(thr)} ({how} delta); smallest {low}")


# ---------------------------------------------------------------- monotone error rule


@dataclass(frozen=True)
class MonotoneErrorParams:
    tau: float = param(1.0, Interval(1.0, None), "factor tau >= 1 on delta")
    delta: float | None = param(None, POS, "noise norm delta (none: the problem's stated noise norm)")


def monotone_error(trace: Any, ctx: RuleContext, params: MonotoneErrorParams = MonotoneErrorParams()) -> Selection:
    """Monotone error rule (Hamarik and Tautenhahn 2001; for Landweber-type iterations,
    Elfving and Nikazad 2007): the first ``k`` with

        d_k = (||r_k||^2 + <r_k, r_{k+1}>) / (2 ||r_k||) <= tau delta,

    ``r_k = y - X w_k`` the training residual of recorded iterate ``k`` and ``r_{k+1}`` the
    next recorded one. For gradient descent (Landweber) recorded at every iteration,
    ``||w_{k+1} - w*||^2 - ||w_k - w*||^2 = omega (2 <r_k, e> - <r_k, r_k + r_{k+1}>)`` for any
    ``w*`` with ``X w* = y - e``, so every step before the selected one provably brings the
    iterate closer to ``w*`` when ``||e|| <= delta``. Needs the trace column
    ``residual_dot_prev`` (recorded for regression problems).
    """
    cols = _columns(trace)
    n = _n(cols)
    if n == 0:
        return _none(cols, "empty trace")
    if "residual_dot_prev" not in cols:
        return _cannot("trace has no residual_dot_prev column (a regression trace with record.residual on has it)")
    delta, how = _delta(ctx, params.delta)
    if delta is None:
        return _cannot(NO_DELTA)
    if n < 2:
        return _cannot("needs two recorded iterates")
    r = cols["residual_norm"][:-1]
    dot = cols["residual_dot_prev"][1:]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        d = (r * r + dot) / (2 * r)
    d = np.where(r == 0, 0.0, d)
    thr = params.tau * delta
    hit = np.flatnonzero(d <= thr)
    if hit.size:
        row = int(hit[0])
        return _pick(cols, row, row + 1, f"first iterate with monotone-error statistic {_g(d[row])} <= "
                     f"tau*delta = {params.tau:g}*{_g(delta)} ({how})", True)
    return _none(cols, f"monotone-error statistic never reached tau*delta = {_g(thr)}")


# ---------------------------------------------------------------- normalized cumulative periodogram


@dataclass(frozen=True)
class NCPParams:
    criterion: str = param("min", Choice(("min", "first")),
                           "min: NCP closest to white noise; first: first iterate accepted as white noise")
    significance: float = param(0.05, Interval(0.0, 1.0, low_closed=False, high_closed=False),
                                "level of the white-noise test (criterion first)")


def ncp(trace: Any, ctx: RuleContext, params: NCPParams = NCPParams()) -> Selection:
    """Residual whiteness by the normalized cumulative periodogram (Hansen, Kilmer and
    Kjeldsen 2006; Rust and O'Leary 2008).

    With ``D_t = max_k |c_k(r_t) - k/q|`` the trace column ``ncp_distance``
    (see :mod:`stopwise.stopping.residual`): ``min`` selects the iterate with the smallest
    ``D_t`` (the first of ties); ``first`` the first iterate with
    ``D_t <= k_alpha / sqrt(q - 1)``, ``q = floor(n_train / 2)`` (Bartlett's
    cumulative-periodogram test of white noise at level ``alpha = significance``).
    """
    cols = _columns(trace)
    n = _n(cols)
    if n == 0:
        return _none(cols, "empty trace")
    if "ncp_distance" not in cols:
        return _cannot("trace has no ncp_distance column (recorded for regression problems whose training "
                           "rows are in signal order, with record.residual on)")
    dist = cols["ncp_distance"]
    if params.criterion == "first":
        q = ctx.n_train // 2
        if q < 2:
            return _cannot(f"too few training rows ({ctx.n_train}) for the white-noise test")
        lim = white_noise_limit(q, params.significance)
        return _first_at_or_below(
            cols, dist, lim,
            lambda v: (f"first iterate whose residual passes the white-noise test: NCP distance {v} <= {_g(lim)} "
                       f"(level {params.significance:g})"),
            lambda low: f"residual never passes the white-noise test (limit {_g(lim)}; smallest distance {low})")
    return _smallest(cols, dist, "NCP distance", lambda v: f"residual closest to white noise: NCP distance {v}")


# ---------------------------------------------------------------- a priori


@dataclass(frozen=True)
class APrioriParams:
    form: str = param("n", Choice(("n", "delta")), "n: t = ceil(c n^a); delta: t = ceil(c delta^(-b))")
    c: float = param(1.0, POS, "constant c > 0")
    a: float = param(0.5, Interval(None, None), "exponent of n_train (form n)")
    b: float = param(1.0, Interval(None, None), "exponent of 1/delta (form delta)")
    delta: float | None = param(None, POS, "noise norm delta (none: the problem's stated noise norm)")


def a_priori_iteration(ctx: RuleContext, params: APrioriParams) -> tuple[int | None, str]:
    if params.form == "n":
        if ctx.n_train <= 0:
            return None, "n_train unknown"
        t = params.c * float(ctx.n_train) ** params.a
        what = f"ceil({params.c:g} * {ctx.n_train}^{params.a:g})"
    else:
        delta, _ = _delta(ctx, params.delta)
        if delta is None:
            return None, NO_DELTA
        t = params.c * delta ** (-params.b)
        what = f"ceil({params.c:g} * {_g(delta)}^-{params.b:g})"
    if not math.isfinite(t) or t > 2**62:
        return None, f"a priori iteration {what} is not a finite integer"
    return int(math.ceil(t - 1e-9)), what


def a_priori(trace: Any, ctx: RuleContext, params: APrioriParams = APrioriParams()) -> Selection:
    """The iterate fixed before running: ``t* = ceil(c n^a)`` or ``ceil(c delta^(-b))``.

    Selects the last recorded iterate with ``iteration <= t*`` (``t*`` itself when it was
    recorded); selects nothing when the trace ended before ``t*``.
    """
    cols = _columns(trace)
    n = _n(cols)
    if n == 0:
        return _none(cols, "empty trace")
    t, what = a_priori_iteration(ctx, params)
    if t is None:
        return _cannot(what)
    it = cols["iteration"]
    if it[-1] < t:
        return _none(cols, f"a priori iteration {what} = {t} lies beyond the trace (last iterate {int(it[-1])})")
    row = int(np.flatnonzero(it <= t)[-1])
    note = "" if it[row] == t else f" (last recorded iterate before {t})"
    return _pick(cols, row, row, f"a priori iteration {what} = {t}{note}", True)


# ---------------------------------------------------------------- oracle


@dataclass(frozen=True)
class OracleParams:
    """The oracle has no parameters."""


def oracle(trace: Any, ctx: RuleContext, params: OracleParams = OracleParams()) -> Selection:
    """Reference only: the iterate of minimum test error (the first of ties). It knows the
    test data, so it is never ranked as a method and cannot halt a run."""
    cols = _columns(trace)
    n = _n(cols)
    if n == 0:
        return _none(cols, "empty trace")
    return _smallest(cols, cols["test_error"], "test error",
                     lambda v: f"minimum test error {v} (reference: peeks at test data)")


# ---------------------------------------------------------------- registry


@dataclass(frozen=True)
class RuleDef:
    """A registered stopping rule."""

    name: str
    params: type
    select: Callable[[Any, RuleContext, Any], Selection]
    summary: str
    source: str
    reference: bool = False
    can_halt: Callable[[Any], str | None] = field(default=lambda p: None)  # None: may halt, else why not
    # trace columns the rule reads besides iteration and passes: they are read from stored
    # traces, and a config halting on the rule must record them (config.spec checks it)
    columns: tuple[str, ...] = ()


def trace_columns() -> tuple[str, ...]:
    """Every column some registered rule reads (iteration and passes first)."""
    out = ["iteration", "passes"]
    for d in RULES.values():
        out += [c for c in d.columns if c not in out]
    return tuple(out)


RULES: Registry[RuleDef] = Registry("stopping rule", RuleError)


def register_rule(defn: RuleDef) -> RuleDef:
    """Add a stopping rule (a name registered twice raises ValueError)."""
    return RULES.register(defn.name, defn)


def _budget_halt(p: BudgetParams) -> str | None:
    return None if (p.iterations is not None or p.passes is not None) else \
        "budget without stopping.params.iterations or .passes never decides early"


register_rule(RuleDef("budget", BudgetParams, budget, "last iterate within an iteration / pass budget",
                      "-", can_halt=_budget_halt))
register_rule(RuleDef("holdout", HoldoutParams, holdout,
                      "best validation error with patience (passes) and minimum improvement",
                      "Prechelt, Early stopping - but when? (1998); scikit-learn SGD n_iter_no_change",
                      can_halt=lambda p: None if p.patience is not None else
                      "holdout without stopping.params.patience never decides early", columns=("val_error",)))
register_rule(RuleDef("discrepancy", DiscrepancyParams, discrepancy, "first iterate with ||Xw - y|| <= tau delta",
                      "Morozov (1966); Engl, Hanke and Neubauer, Regularization of Inverse Problems (1996)",
                      columns=("residual_norm",)))
register_rule(RuleDef("monotone_error", MonotoneErrorParams, monotone_error,
                      "first k with (||r_k||^2 + <r_k, r_k+1>) / (2||r_k||) <= tau delta",
                      "Hamarik and Tautenhahn, BIT 41 (2001); Elfving and Nikazad, Inverse Problems 23 (2007)",
                      columns=("residual_norm", "residual_dot_prev")))
register_rule(RuleDef("ncp", NCPParams, ncp, "training residual closest to / accepted as white noise (NCP)",
                      "Hansen, Kilmer and Kjeldsen, BIT 46 (2006); Rust and O'Leary, Inverse Problems 24 (2008)",
                      can_halt=lambda p: None if p.criterion == "first" else
                      "ncp with criterion=min needs the whole trace; use stopping.params.criterion=first to halt",
                      columns=("ncp_distance",)))
register_rule(RuleDef("a_priori", APrioriParams, a_priori, "iteration ceil(c n^a) or ceil(c delta^(-b))",
                      "a priori parameter choice, e.g. Engl, Hanke and Neubauer (1996); Yao, Rosasco and "
                      "Caponnetto, Constr. Approx. 26 (2007)"))
register_rule(RuleDef("oracle", OracleParams, oracle, "minimum test error (reference only, never ranked)",
                      "-", reference=True,
                      can_halt=lambda p: "the oracle reads test error and cannot halt a run",
                      columns=("test_error",)))


def get_rule(name: str) -> RuleDef:
    return RULES.get(name)


def make_rule_params(name: str, values: Mapping[str, Any] | None = None):
    """Validated params dataclass of rule ``name`` (unknown keys and bad values raise RuleError)."""
    d = get_rule(name)
    try:
        return make_params(d.params, dict(values or {}), f"stopping.params ({name})")
    except ParamError as e:
        raise RuleError(str(e)) from None
    except TypeError as e:  # pragma: no cover - dataclass construction on odd input
        raise RuleError(f"stopping.params ({name}) is invalid: {e}") from None


def normalize_stopping(cfg: Mapping[str, Any] | None) -> dict[str, Any]:
    """Validate a ``stopping`` config into ``{"rule", "halt", "params"}`` with every param filled."""
    cfg = dict(cfg or {})
    unknown = sorted(set(cfg) - {"rule", "halt", "params"})
    if unknown:
        raise RuleError(f"stopping has no key {unknown[0]!r}; valid: rule, halt, params")
    name = cfg.get("rule", "budget")
    d = get_rule(name)
    halt = cfg.get("halt", False)
    if not isinstance(halt, bool):
        raise RuleError(f"stopping.halt={halt!r} is invalid: must be true or false")
    params = cfg.get("params") or {}
    if not isinstance(params, Mapping):
        raise RuleError("stopping.params must be a mapping of parameter names to values")
    p = make_rule_params(name, params)
    if halt:
        why = d.can_halt(p)
        if why:
            raise RuleError(f"stopping.halt=true is invalid: {why}")
    return {"rule": name, "halt": halt, "params": dataclasses.asdict(p)}


def apply_rule(rule: str | Mapping[str, Any], trace: Any, ctx: RuleContext | None = None,
               params: Any = None) -> Selection:
    """Evaluate one rule on one trace.

    ``rule`` is a rule name (``params`` a mapping or params dataclass) or a stopping
    config mapping ``{"rule": ..., "params": ...}``.

    >>> import pandas as pd
    >>> t = pd.DataFrame({"iteration": [0, 1, 2], "passes": [0.0, 1.0, 2.0],
    ...                   "residual_norm": [3.0, 1.5, 0.9]})
    >>> apply_rule("discrepancy", t, RuleContext(n_train=10, noise_norm=1.0, noise_kind="norm")).iteration
    2
    """
    if isinstance(rule, Mapping):
        name, values = rule.get("rule"), rule.get("params")
    else:
        name, values = rule, params
    d = get_rule(name)
    p = values if isinstance(values, d.params) else make_rule_params(name, values)
    return d.select(trace, ctx or RuleContext(), p)


def rule_label(name: str, params: Mapping[str, Any] | None = None) -> str:
    """``name`` when params are the defaults, else ``name(k=v, ...)`` with the changed ones."""
    d = get_rule(name)
    p = make_rule_params(name, params)
    default = d.params()
    changed = [(f.name, getattr(p, f.name)) for f in dataclasses.fields(p)
               if getattr(p, f.name) != getattr(default, f.name)]
    if not changed:
        return name
    return f"{name}(" + ",".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in changed) + ")"


def rule_specs(rules: Iterable[Any] | None) -> list[dict[str, Any]]:
    """Normalize a list of rule names / stopping configs into ``{"rule", "params", "label"}``."""
    out: list[dict[str, Any]] = []
    seen: set[str] = set()
    for r in rules or ():
        if isinstance(r, str):
            name, params = r, {}
        elif isinstance(r, Mapping):
            name, params = r.get("rule"), r.get("params") or {}
        elif isinstance(r, (tuple, list)) and len(r) == 2:
            name, params = r
        else:
            raise RuleError(f"cannot read stopping rule {r!r}; give a name or {{'rule': NAME, 'params': {{...}}}}")
        p = dataclasses.asdict(make_rule_params(name, params))
        label = rule_label(name, p)
        if label in seen:
            continue
        seen.add(label)
        out.append({"rule": name, "params": p, "label": label})
    return out


__all__ = ["RULES", "RuleContext", "RuleDef", "RuleError", "Selection", "apply_rule", "get_rule",
           "make_rule_params", "normalize_stopping", "register_rule", "rule_label", "rule_specs", "trace_columns",
           "budget", "holdout", "discrepancy", "monotone_error", "ncp", "a_priori", "oracle"]
