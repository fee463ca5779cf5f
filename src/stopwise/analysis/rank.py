"""Rank methods by the error they reach and the data passes they need, across datasets.

Input is the table of post-hoc selections (one row per run and stopping rule, as
``stopwise.select`` returns it), optionally the explicit baselines (one row per penalty
value, as ``stopwise.load_baselines`` returns them), published reference scores, and the
traces of the tuned runs (only ``run_id``, ``iteration``, ``passes``, ``test_error`` are
read). Every function takes these as DataFrames, so tests feed hand-built tables.

A *method* is a solver family (the ``solver`` column, or the columns in ``method_by``).
Its free parameters (step scale, momentum, batch size, ...) are tuned on validation
error only:

    config*(d, m, s) = argmin_c  val_error(d, m, c, s)            (tuning="per_seed")
    config*(d, m)    = argmin_c  mean_s val_error(d, m, c, s)     (tuning="pooled")

where ``val_error`` is the validation error at the iterate the chosen stopping rule
selected. Ties go to fewer passes spent, then to the configuration label, then the run id.
Test error never enters the choice. The selected test error, the passes spent under the
rule, and the passes the tuned run needed to reach a target error are then averaged over
seeds (each seed is a separate split and initialization) with a Student t interval.

See docs/ranking.md for every quantity, its formula and its source.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from stopwise.core.errors import SpecError
from stopwise.analysis.rankstats import (
    RankTest,
    StatsError,
    data_profile,
    friedman_from_ranks,
    performance_profile,
    performance_ratios,
    rank_table,
    bootstrap_interval,
    pairwise_wilcoxon,
    MIN_INTERVAL_SEEDS,
)


class RankError(SpecError):
    """Bad input to the ranking; ``str(e)`` is one line naming the problem and the valid choices."""


# columns of the selection table that are not solver parameters
SELECTION_COLUMNS = ("run_id", "dataset", "task", "solver", "seed", "status", "rule", "reference",
                     "selected_iteration", "selected_passes", "passes_spent", "val_error", "test_error",
                     "train_error", "reason")
TUNINGS = ("per_seed", "pooled")
RANK_BY = ("test_error", "passes_to_target")
TARGET_KINDS = ("baseline", "reference", "value", "none")
UNITS = ("dataset", "replicate")
# error metrics a trace records, by the names a reference table may use for them
TRACE_METRICS = ("mse", "mean_squared_error", "error_rate", "misclassification", "zero_one")
TRACE_COLUMNS = ("run_id", "iteration", "passes", "test_error")


# ---------------------------------------------------------------- targets

@dataclass(frozen=True)
class Target:
    """The test error a run must reach to count as solved.

    ``kind`` is ``baseline`` (the best explicit baseline's test error on the same dataset
    and seed), ``reference`` (the published reference score of the dataset), ``value``
    (``value`` itself, the same for every dataset) or ``none``. For ``baseline`` and
    ``reference`` the level ``f_L`` is loosened either relatively,
    ``target = (1 + eps) f_L``, or, when ``tau`` is given, as in More and Wild (2009):
    ``target = f_L + tau (f_0 - f_L)`` with ``f_0`` the test error of the starting iterate.
    """

    kind: str = "baseline"
    eps: float = 0.05
    tau: float | None = None
    value: float | None = None

    def __post_init__(self) -> None:
        if self.kind not in TARGET_KINDS:
            raise RankError(f"target kind {self.kind!r} is invalid; valid: {', '.join(TARGET_KINDS)}")
        if not (isinstance(self.eps, (int, float)) and math.isfinite(self.eps) and self.eps >= 0):
            raise RankError(f"eps={self.eps!r} is invalid: must be a number >= 0")
        if self.tau is not None and not (isinstance(self.tau, (int, float)) and 0 <= self.tau <= 1):
            raise RankError(f"tau={self.tau!r} is invalid: must be in [0, 1]")
        if self.kind == "value":
            if not (isinstance(self.value, (int, float)) and math.isfinite(self.value) and self.value >= 0):
                raise RankError(f"target value {self.value!r} is invalid: must be a finite number >= 0")

    @classmethod
    def parse(cls, text: str, eps: float = 0.05, tau: float | None = None) -> "Target":
        """``baseline``, ``reference``, ``none`` or a number (a fixed target error)."""
        t = str(text).strip()
        if t in TARGET_KINDS and t != "value":
            return cls(kind=t, eps=eps, tau=tau)
        try:
            v = float(t)
        except ValueError:
            raise RankError(f"target {text!r} is invalid; valid: baseline, reference, none, or a number") from None
        return cls(kind="value", eps=eps, tau=tau, value=v)

    def describe(self) -> str:
        if self.kind == "none":
            return "no target"
        if self.kind == "value":
            return f"test error <= {self.value:g}"
        base = {"baseline": "the best explicit baseline's test error on the same dataset and seed",
                "reference": "the published reference score"}[self.kind]
        if self.tau is not None:
            return f"test error <= f_L + {self.tau:g} (f_0 - f_L), f_L = {base}"
        return f"test error <= (1 + {self.eps:g}) f_L, f_L = {base}"

    def level(self, f_l: np.ndarray | float, f_0: np.ndarray | float) -> np.ndarray:
        f_l = np.asarray(f_l, dtype=float)
        if self.kind == "value":
            return np.full(np.shape(f_l), float(self.value))
        if self.tau is not None:
            return f_l + self.tau * (np.asarray(f_0, dtype=float) - f_l)
        return (1.0 + self.eps) * f_l


# ---------------------------------------------------------------- the result

@dataclass
class Ranking:
    """Everything ``rank`` computes; each table is a DataFrame.

    ``replicates``  one row per (dataset, method, seed): the tuned configuration, its run,
                    selected errors, passes spent, target and passes to reach it.
    ``table``       one row per (dataset, method): means and Student t intervals over seeds.
    ``ranks``       datasets x methods ranks (1 best, ties averaged) of the ranked quantity.
    ``test``        Friedman / Iman-Davenport / Nemenyi statistics (None with < 2 datasets or methods).
    ``pairwise``    Wilcoxon signed-rank test of every pair of methods over the ranked datasets,
                    Holm-corrected (empty with < 2 datasets or methods).
    ``costs``       problems x methods passes to reach the target (inf: never reached).
    ``performance`` Dolan-More profile (method, tau, share); ``data`` More-Wild profile
                    (method, budget, share).
    """

    rule: str
    by: str
    target: Target
    tuning: str
    confidence: float
    unit: str
    replicates: pd.DataFrame
    table: pd.DataFrame
    ranks: pd.DataFrame
    test: RankTest | None
    costs: pd.DataFrame
    performance: pd.DataFrame
    data: pd.DataFrame
    params: tuple[str, ...] = ()
    notes: list[str] = field(default_factory=list)
    pairwise: pd.DataFrame = field(default_factory=pd.DataFrame)
    published: pd.DataFrame = field(default_factory=pd.DataFrame)  # OpenML tasks: see analysis.published

    @property
    def average_ranks(self) -> pd.Series:
        return self.ranks.mean(axis=0).sort_values(kind="stable") if not self.ranks.empty else pd.Series(dtype=float)


# ---------------------------------------------------------------- helpers

def param_columns(selections: pd.DataFrame, method_by: Sequence[str] = ("solver",),
                  params: Iterable[str] | None = None) -> list[str]:
    """The tuned (free) parameter columns: ``params`` if given, else every parameter a
    registered solver declares that appears in the table (minus the method columns)."""
    if params is not None:
        cols = list(params)
        missing = [c for c in cols if c not in selections.columns]
        if missing:
            raise RankError(f"parameter column {missing[0]!r} is not in the selection table; "
                            f"columns: {', '.join(map(str, selections.columns))}")
        return [c for c in cols if c not in method_by]
    import dataclasses

    from stopwise.solvers import SOLVERS
    from stopwise.config.spec import COMMON_SOLVER_KEYS

    known = list(COMMON_SOLVER_KEYS)
    for d in SOLVERS.values():
        known += [f.name for f in dataclasses.fields(d.params)]
    seen: list[str] = []
    for c in known:
        if c in selections.columns and c not in seen and c not in method_by and c not in SELECTION_COLUMNS:
            seen.append(c)
    return seen


def _fmt_value(v: Any) -> str:
    if isinstance(v, (float, np.floating)):
        return f"{float(v):g}"
    return str(v)


def solver_defaults(solver: Any) -> dict[str, Any]:
    """Default value of every parameter the registered solver ``solver`` declares (its params
    dataclass); ``{}`` for a name no solver is registered under."""
    import dataclasses

    from stopwise.solvers import SOLVERS

    if not isinstance(solver, str) or solver not in SOLVERS:
        return {}
    return {f.name: f.default for f in dataclasses.fields(SOLVERS[solver].params)
            if f.default is not dataclasses.MISSING}


def _same(a: Any, b: Any) -> bool:
    try:
        return bool(a == b) or (isinstance(a, (int, float)) and isinstance(b, (int, float))
                                and float(a) == float(b))
    except (TypeError, ValueError):
        return False


def _missing(v: Any) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA


def config_labels(df: pd.DataFrame, params: Sequence[str]) -> pd.Series:
    """``"step_scale=0.5 momentum=0.9"`` for each row: the parameters that vary among the rows
    of the same solver, and those whose value differs from the solver's default (read from its
    registered params dataclass). A parameter at its default that every row of the solver
    shares says nothing about the configuration and is left out; so are nulls. Without a
    ``solver`` column every non-null parameter is listed. ``(default)`` when nothing is left.

    >>> df = pd.DataFrame({"solver": ["heavy_ball", "heavy_ball"], "step_scale": [0.5, 1.0],
    ...                    "momentum": [0.5, 0.5]})
    >>> config_labels(df, ["step_scale", "momentum"]).tolist()
    ['step_scale=0.5', 'step_scale=1']
    """
    if not params or df.empty:
        return pd.Series(["(default)"] * len(df), index=df.index, dtype=object)
    solvers = df["solver"] if "solver" in df.columns else pd.Series([None] * len(df), index=df.index)
    keep: dict[Any, tuple[set[str], dict[str, Any]]] = {}
    for sv, g in df.groupby(solvers.map(lambda v: "" if _missing(v) else v), sort=False):
        varying = {p for p in params if g[p].map(lambda v: None if _missing(v) else repr(v)).dropna().nunique() > 1}
        keep[sv] = (varying, solver_defaults(sv) if sv != "" else {})
    labels = []
    for sv, row in zip(solvers.map(lambda v: "" if _missing(v) else v), df[list(params)].itertuples(index=False)):
        varying, defaults = keep[sv]
        parts = []
        for p, v in zip(params, row):
            if _missing(v):
                continue
            if sv == "" or p in varying or p not in defaults or not _same(v, defaults[p]):
                parts.append(f"{p}={_fmt_value(v)}")
        labels.append(" ".join(parts) or "(default)")
    return pd.Series(labels, index=df.index, dtype=object)


def method_labels(df: pd.DataFrame, method_by: Sequence[str]) -> pd.Series:
    if len(method_by) == 1:
        return df[method_by[0]].astype(str)
    out = df[method_by[0]].astype(str)
    for c in method_by[1:]:
        out = out.str.cat(df[c].map(_fmt_value), sep="/")
    return out


def _require(df: pd.DataFrame, cols: Iterable[str], what: str) -> None:
    missing = [c for c in cols if c not in df.columns]
    if missing:
        raise RankError(f"{what} lacks column {missing[0]!r}; it has: {', '.join(map(str, df.columns)) or '(none)'}")


# ---------------------------------------------------------------- tuning

def tune(selections: pd.DataFrame, rule: str, method_by: Sequence[str] = ("solver",),
         params: Iterable[str] | None = None, tuning: str = "per_seed") -> pd.DataFrame:
    """Pick each method's configuration by validation error under ``rule``.

    Returns one row per (dataset, method, seed) with the chosen run and its selection
    (``run_id`` is null and ``test_error`` NaN when no configuration of the method has a
    valid selection on that seed). Test error is carried along but never looked at.
    """
    if tuning not in TUNINGS:
        raise RankError(f"tuning {tuning!r} is invalid; valid: {', '.join(TUNINGS)}")
    method_by = tuple(method_by)
    _require(selections, ("run_id", "dataset", "seed", "rule", "val_error", "test_error", *method_by),
             "the selection table")
    rules = sorted(map(str, selections["rule"].dropna().unique()))
    if rule not in rules:
        raise RankError(f"no selections for stopping rule {rule!r}; rules in the table: {', '.join(rules) or '(none)'}")
    sel = selections[selections["rule"] == rule]
    if "reference" in sel.columns and sel["reference"].fillna(False).astype(bool).any():
        ok = [r for r in rules if not selections.loc[selections["rule"] == r, "reference"].fillna(False).astype(bool).any()] \
            if "reference" in selections.columns else rules
        raise RankError(f"stopping rule {rule!r} is a reference (it reads test error) and never ranks as a method; "
                        f"valid: {', '.join(ok) or '(none)'}")
    pcols = param_columns(selections, method_by, params)
    sel = sel.copy()
    sel["method"] = method_labels(sel, method_by)
    sel["config"] = config_labels(sel, pcols)
    for c in ("passes_spent", "selected_passes", "selected_iteration", "train_error"):
        if c not in sel.columns:
            sel[c] = np.nan
    keys = ["dataset", "method"]
    # a candidate has a selection and a validation error to compare; a method with a single
    # configuration needs no comparison, so it stays a candidate without validation rows
    has_sel = sel["selected_iteration"].notna().to_numpy() if "selected_iteration" in sel.columns \
        else np.ones(len(sel), dtype=bool)
    n_cfg = sel.groupby(keys + ["seed"], sort=False)["config"].transform("nunique").to_numpy()
    valid = has_sel & (np.isfinite(sel["val_error"].to_numpy(dtype=float)) | (n_cfg == 1))
    cand = sel[valid]
    order = ["val_error", "passes_spent", "config", "run_id"]
    if tuning == "per_seed":
        chosen = (cand.sort_values(order, kind="stable", na_position="last")
                  .groupby(keys + ["seed"], sort=False).head(1))
    else:
        # a configuration must have a valid selection on every seed of its dataset
        n_seeds = sel.groupby("dataset")["seed"].nunique()
        g = cand.groupby(keys + ["config"], sort=False)
        per_cfg = g.agg(mean_val=("val_error", "mean"), n=("seed", "nunique"),
                        mean_passes=("passes_spent", "mean")).reset_index()
        per_cfg = per_cfg[per_cfg["n"].to_numpy() == n_seeds.reindex(per_cfg["dataset"]).to_numpy()]
        best = (per_cfg.sort_values(["mean_val", "mean_passes", "config"], kind="stable")
                .groupby(keys, sort=False).head(1)[keys + ["config"]])
        chosen = cand.merge(best, on=keys + ["config"], how="inner")
        chosen = chosen.sort_values(order, kind="stable").groupby(keys + ["seed"], sort=False).head(1)
    # every (dataset, method) gets a row for every seed of its dataset; missing ones are failures
    grid = (sel[keys].drop_duplicates()
            .merge(sel[["dataset", "seed"]].drop_duplicates(), on="dataset"))
    keep = ["run_id", "config", *pcols, *[c for c in method_by if c not in keys], "status", "selected_iteration",
            "selected_passes", "passes_spent", "val_error", "test_error", "train_error"]
    keep = [c for c in dict.fromkeys(keep) if c in chosen.columns]
    out = grid.merge(chosen[keys + ["seed"] + keep], on=keys + ["seed"], how="left")
    out["valid"] = out["run_id"].notna()
    return out.sort_values(keys + ["seed"], kind="stable").reset_index(drop=True)


# ---------------------------------------------------------------- targets and passes to target

def baseline_levels(baselines: pd.DataFrame | None) -> pd.DataFrame:
    """Per (dataset, seed): the best explicit baseline (lowest test error among the
    penalties each method selected on validation) -> columns dataset, seed, f_l, f_l_method."""
    cols = ["dataset", "seed", "f_l", "f_l_method"]
    if baselines is None or baselines.empty:
        return pd.DataFrame(columns=cols)
    _require(baselines, ("dataset", "seed", "method", "selected", "test_error"), "the baseline table")
    b = baselines[baselines["selected"].fillna(False).astype(bool)]
    b = b[np.isfinite(b["test_error"].to_numpy(dtype=float))]
    b = b.sort_values(["test_error", "method"], kind="stable").groupby(["dataset", "seed"], sort=False).head(1)
    return b.rename(columns={"test_error": "f_l", "method": "f_l_method"})[cols].reset_index(drop=True)


def reference_levels(references: pd.DataFrame | None) -> pd.DataFrame:
    """Per dataset: the lowest published score among metrics a trace records (squared
    error or error rate) -> columns dataset, reference, reference_method, reference_source.

    When the table has a ``protocol_matches`` column (``gather`` adds it), only rows whose
    protocol builds the same dataset and split as the campaign's runs are used."""
    cols = ["dataset", "reference", "reference_method", "reference_source"]
    if references is None or references.empty:
        return pd.DataFrame(columns=cols)
    _require(references, ("dataset", "metric", "value"), "the reference table")
    r = references[references["metric"].astype(str).str.lower().isin(TRACE_METRICS)]
    if "protocol_matches" in r.columns:
        r = r[r["protocol_matches"].fillna(False).astype(bool)]
    r = r[np.isfinite(r["value"].to_numpy(dtype=float))]
    r = r.sort_values("value", kind="stable").groupby("dataset", sort=False).head(1)
    out = pd.DataFrame({"dataset": r["dataset"].to_numpy(), "reference": r["value"].to_numpy(dtype=float),
                        "reference_method": r["method"].to_numpy() if "method" in r else None,
                        "reference_source": r["source"].to_numpy() if "source" in r else None})
    return out[cols].reset_index(drop=True)


def passes_to_target(traces: pd.DataFrame, targets: pd.Series) -> pd.DataFrame:
    """First data-pass count at which each run's test error is <= its target.

    ``traces`` has run_id, passes, test_error (and iteration); ``targets`` maps run_id to
    a target error. Returns run_id, f_0 (test error of the first recorded iterate),
    passes_to_target (inf when never reached, NaN when the run has no target).
    """
    _require(traces, ("run_id", "passes", "test_error"), "the trace table")
    t = traces[traces["run_id"].isin(targets.index)]
    if "iteration" in t.columns:
        t = t.sort_values(["run_id", "iteration"], kind="stable")
    first = t.groupby("run_id", sort=False)["test_error"].first()
    lvl = t["run_id"].map(targets).to_numpy(dtype=float)
    hit = t["test_error"].to_numpy(dtype=float) <= lvl
    reached = t[hit].groupby("run_id", sort=False)["passes"].min()
    out = pd.DataFrame({"run_id": targets.index})
    out["f_0"] = out["run_id"].map(first).astype(float)
    p = out["run_id"].map(reached).astype(float)
    has_trace = out["run_id"].isin(first.index)
    tgt = out["run_id"].map(targets).astype(float)
    out["passes_to_target"] = np.where(tgt.notna() & has_trace, p.fillna(np.inf), np.nan)
    return out


# ---------------------------------------------------------------- the ranking

def _explicit_replicates(baselines: pd.DataFrame | None) -> pd.DataFrame:
    if baselines is None or baselines.empty:
        return pd.DataFrame()
    b = baselines[baselines["selected"].fillna(False).astype(bool)].copy()
    b = b.sort_values(["val_error"], kind="stable").groupby(["dataset", "method", "seed"], sort=False).head(1)
    out = pd.DataFrame({"dataset": b["dataset"].to_numpy(), "method": b["method"].astype(str).to_numpy(),
                        "seed": b["seed"].to_numpy(), "val_error": b["val_error"].to_numpy(dtype=float),
                        "test_error": b["test_error"].to_numpy(dtype=float),
                        "config": [f"penalty={float(v):.4g}" for v in b["penalty"]] if "penalty" in b else "",
                        "run_id": b["baseline_id"].to_numpy() if "baseline_id" in b else None})
    out["kind"] = "explicit"
    out["valid"] = np.isfinite(out["test_error"].to_numpy())
    return out


def _modal_config(s: pd.Series) -> str:
    s = s.dropna()
    if s.empty:
        return ""
    vc = s.value_counts(sort=True)
    top = vc.index[0]
    return str(top) if vc.iloc[0] == len(s) else f"{top} ({vc.iloc[0]}/{len(s)} seeds)"


SUMMARY_COLUMNS = ("dataset", "method", "kind", "seeds", "valid", "test_error", "test_error_low",
                   "test_error_high", "val_error", "passes_spent", "passes_spent_low", "passes_spent_high",
                   "selected_passes", "target", "passes_to_target", "reached", "reached_at_stop", "config")


def summarize(rep: pd.DataFrame, confidence: float = 0.95) -> pd.DataFrame:
    """Per (dataset, method): means over seeds with percentile bootstrap intervals.

    ``test_error`` and ``passes_spent`` come with ``_low``/``_high`` interval ends over the
    seeds that have a valid selection (:func:`bootstrap_interval`: never below 0 for these
    nonnegative quantities; NaN with fewer than 3 such seeds). ``passes_to_target`` is the mean over seeds when
    every seed reached the target and ``inf`` otherwise; ``reached`` counts the seeds that
    did (NaN when there is no target); ``reached_at_stop`` counts the seeds whose selected
    iterate itself meets the target.
    """
    rows = []
    for (d, m), g in rep.groupby(["dataset", "method"], sort=True):
        ok = g[g["valid"].to_numpy(bool)]
        te, te_lo, te_hi, _ = bootstrap_interval(ok["test_error"].to_numpy(dtype=float), confidence)
        row = {"dataset": d, "method": m, "kind": g["kind"].iloc[0], "seeds": len(g), "valid": len(ok),
               "test_error": te, "test_error_low": te_lo, "test_error_high": te_hi,
               "val_error": float(ok["val_error"].mean()) if len(ok) else math.nan}
        ps = ok["passes_spent"].to_numpy(dtype=float) if "passes_spent" in ok else np.array([])
        if ps.size and np.isfinite(ps).any():
            row["passes_spent"], row["passes_spent_low"], row["passes_spent_high"], _ = bootstrap_interval(ps, confidence)
        else:
            row["passes_spent"] = row["passes_spent_low"] = row["passes_spent_high"] = math.nan
        sp = ok["selected_passes"].to_numpy(dtype=float) if "selected_passes" in ok else np.array([])
        row["selected_passes"] = float(np.nanmean(sp)) if sp.size and np.isfinite(sp).any() else math.nan
        tg = g["target"].to_numpy(dtype=float) if "target" in g else np.array([math.nan])
        row["target"] = float(np.nanmean(tg)) if np.isfinite(tg).any() else math.nan
        pt = g["passes_to_target"].to_numpy(dtype=float) if "passes_to_target" in g else np.array([math.nan])
        if np.isnan(pt).all():
            row["passes_to_target"] = row["reached"] = math.nan
        else:
            fin = np.isfinite(pt)
            row["reached"] = int(fin.sum())
            row["passes_to_target"] = float(pt.mean()) if fin.all() else math.inf
        row["reached_at_stop"] = int(g["reached_at_stop"].fillna(False).astype(bool).sum()) \
            if "reached_at_stop" in g and np.isfinite(tg).any() else math.nan
        row["config"] = _modal_config(g["config"]) if "config" in g else ""
        rows.append(row)
    return pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS))


def check_options(*, target: Target | str | float = "baseline", eps: float = 0.05, tau: float | None = None,
                  by: str = "test_error", alpha: float = 0.05, confidence: float = 0.95, tuning: str = "per_seed",
                  unit: str = "dataset", **_: Any) -> Target:
    """Validate the ranking options (one-line RankError) and return the target."""
    if by not in RANK_BY:
        raise RankError(f"rank by {by!r} is invalid; valid: {', '.join(RANK_BY)}")
    if tuning not in TUNINGS:
        raise RankError(f"tuning {tuning!r} is invalid; valid: {', '.join(TUNINGS)}")
    if unit not in UNITS:
        raise RankError(f"profile unit {unit!r} is invalid; valid: {', '.join(UNITS)}")
    for name, v in (("alpha", alpha), ("confidence", confidence)):
        if not (isinstance(v, (int, float)) and 0 < v < 1):
            raise RankError(f"{name}={v!r} is invalid: must be strictly between 0 and 1")
    return target if isinstance(target, Target) else Target.parse(str(target), eps=eps, tau=tau)


def rank(selections: pd.DataFrame, rule: str = "holdout", *, traces: pd.DataFrame | Callable | None = None,
         baselines: pd.DataFrame | None = None, references: pd.DataFrame | None = None,
         target: Target | str | float = "baseline", eps: float = 0.05, tau: float | None = None,
         by: str = "test_error", alpha: float = 0.05, confidence: float = 0.95, tuning: str = "per_seed",
         unit: str = "dataset", method_by: Sequence[str] = ("solver",), params: Iterable[str] | None = None,
         include_baselines: bool = True) -> Ranking:
    """Tune, aggregate and rank methods; compute rank tests and profiles.

    ``traces`` is a DataFrame with run_id, iteration, passes, test_error for (at least)
    the tuned runs, or a function ``run_ids -> DataFrame`` that reads only those. Without
    it, passes to target and the profiles are left empty.

    The stages, each a function from table to table (``notes`` collects what a stage
    left out and why): :func:`tune` (one tuned run per dataset, method and seed, at the
    iterate the rule selected), :func:`_with_levels` (the target level), :func:`_with_passes`
    (the target and the passes each tuned run needed to reach it), :func:`_with_explicit`
    (explicit baselines as methods), :func:`summarize` (per dataset and method),
    :func:`_with_reference_gap`, :func:`_rank_scores` and :func:`_rank_tests` (order), and
    :func:`_profiles`.
    """
    target = check_options(target=target, eps=eps, tau=tau, by=by, alpha=alpha, confidence=confidence,
                           tuning=tuning, unit=unit)
    notes: list[str] = []
    pcols = param_columns(selections, tuple(method_by), params)
    rep = tune(selections, rule, method_by, pcols, tuning)
    rep["kind"] = "iterative"
    rep = _with_levels(rep, target, baselines, references, notes)
    rep = _with_passes(rep, target, _tuned_traces(rep, traces, target, notes))
    both = _with_explicit(rep, baselines if include_baselines else None)
    table = summarize(both, confidence)
    few = table[(table["valid"] > 0) & (table["valid"] < MIN_INTERVAL_SEEDS)]
    if len(few):
        notes.append(f"no interval for {len(few)} of {len(table)} (dataset, method) rows: they have fewer than "
                     f"{MIN_INTERVAL_SEEDS} seeds with a valid selection ({int(few['valid'].min())}"
                     f"{'' if few['valid'].min() == few['valid'].max() else '-' + str(int(few['valid'].max()))}), "
                     "which give no usable interval; sweep more seeds")
    table = _with_reference_gap(table, rep["dataset"], references, notes)
    scores = _rank_scores(table, by, include_baselines, notes)
    scores = _without_inapplicable(scores, selections, rule, notes)
    ranks, test = _rank_tests(scores, alpha, notes)
    if not ranks.empty:
        table["average_rank"] = table["method"].map(ranks.mean(axis=0))
    pairwise = pairwise_wilcoxon(scores, alpha) if scores.shape[0] >= 2 and scores.shape[1] >= 2 else pd.DataFrame()
    costs, perf, dprof = _profiles(both, table, unit)
    return Ranking(rule=rule, by=by, target=target, tuning=tuning, confidence=confidence, unit=unit,
                   replicates=both.reset_index(drop=True), table=table, ranks=ranks, test=test, costs=costs,
                   performance=perf, data=dprof, params=tuple(pcols), notes=notes, pairwise=pairwise)


def _with_levels(rep: pd.DataFrame, target: Target, baselines: pd.DataFrame | None,
                 references: pd.DataFrame | None, notes: list[str]) -> pd.DataFrame:
    """Add ``f_l``, the level the target loosens, per (dataset, seed): the best explicit
    baseline (with ``f_l_method``), the published reference score of the dataset, the
    target's fixed value, or NaN for no target."""
    rep["f_l"] = np.nan
    if target.kind == "baseline":
        lv = baseline_levels(baselines)
        if lv.empty:
            notes.append("no explicit baselines: no target, passes to target not computed")
        rep = rep.drop(columns="f_l").merge(lv, on=["dataset", "seed"], how="left")
    elif target.kind == "reference":
        lv = reference_levels(references)
        if lv.empty:
            notes.append("no published reference scores: no target, passes to target not computed")
        rep = rep.drop(columns="f_l").merge(lv.rename(columns={"reference": "f_l"})[["dataset", "f_l"]],
                                            on="dataset", how="left")
    elif target.kind == "value":
        rep["f_l"] = float(target.value)
    return rep


def _tuned_traces(rep: pd.DataFrame, traces: pd.DataFrame | Callable | None, target: Target,
                  notes: list[str]) -> pd.DataFrame | None:
    """The traces of the tuned runs (``traces`` itself, or what the function reads for their
    ids); None when there is no target, no tuned run or no traces."""
    run_ids = _tuned_ids(rep)
    if target.kind == "none" or not run_ids:
        return None
    if traces is None:
        notes.append("no traces given: passes to target not computed")
        return None
    tr = traces(run_ids) if callable(traces) else traces
    _require(tr, ("run_id", "passes", "test_error"), "the trace table")
    return tr


def _tuned_ids(rep: pd.DataFrame) -> list[str]:
    return rep.loc[rep["valid"].to_numpy(bool), "run_id"].astype(str).unique().tolist()


def _with_passes(rep: pd.DataFrame, target: Target, tr: pd.DataFrame | None) -> pd.DataFrame:
    """Add ``f_0`` (the tuned run's first recorded test error), ``target``,
    ``reached_at_stop`` (the selected iterate meets the target) and ``passes_to_target``
    along each tuned run's trace (inf on a seed where the method has no valid selection)."""
    valid = rep["valid"].to_numpy(bool)
    f0 = pd.Series(dtype=float)
    if tr is not None:
        t0 = tr[tr["run_id"].isin(_tuned_ids(rep))]
        if "iteration" in t0.columns:
            t0 = t0.sort_values(["run_id", "iteration"], kind="stable")
        f0 = t0.groupby("run_id", sort=False)["test_error"].first()
    rep["f_0"] = rep["run_id"].map(f0).astype(float)
    # the level needs f_0 only in the More-Wild form; without traces that form stays undefined
    rep["target"] = np.where(valid, target.level(rep["f_l"].to_numpy(dtype=float), rep["f_0"].to_numpy()), np.nan) \
        if target.kind != "none" else np.nan
    rep["reached_at_stop"] = rep["test_error"].to_numpy(dtype=float) <= rep["target"].to_numpy(dtype=float)
    rep["passes_to_target"] = np.nan
    if tr is not None:
        tg = pd.Series(rep.loc[valid, "target"].to_numpy(), index=rep.loc[valid, "run_id"].astype(str))
        tg = tg[~tg.index.duplicated()].dropna()
        hit = passes_to_target(tr, tg).set_index("run_id")["passes_to_target"]
        rep["passes_to_target"] = rep["run_id"].map(hit).astype(float)
        # a seed on which the method found no valid selection never reaches the target
        rep.loc[~rep["valid"] & rep["f_l"].notna(), "passes_to_target"] = math.inf
    return rep


def _with_explicit(rep: pd.DataFrame, baselines: pd.DataFrame | None) -> pd.DataFrame:
    """The replicates of the iterative methods followed by the explicit baselines as
    methods of their own (kind ``explicit``: error only, no data passes; the target of
    the same dataset and seed) on the datasets ``rep`` has."""
    ex = _explicit_replicates(baselines)
    if not ex.empty:
        ex = ex[ex["dataset"].isin(rep["dataset"].unique())]
        lv = rep.groupby(["dataset", "seed"])["target"].first()
        ex["target"] = [lv.get((d, s_), np.nan) for d, s_ in zip(ex["dataset"], ex["seed"])]
        ex["reached_at_stop"] = ex["test_error"].to_numpy(dtype=float) <= ex["target"].to_numpy(dtype=float)
        ex["passes_to_target"] = np.nan
        both = pd.concat([rep, ex], ignore_index=True, sort=False)
    else:
        both = rep
    both["valid"] = both["valid"].astype(bool)
    if "reached_at_stop" in both.columns:
        both["reached_at_stop"] = both["reached_at_stop"].fillna(False).astype(bool)
    return both


def _with_reference_gap(table: pd.DataFrame, datasets: pd.Series, references: pd.DataFrame | None,
                        notes: list[str]) -> pd.DataFrame:
    """Add the published reference of each dataset (``reference``, ``reference_method``,
    ``reference_source``), ``gap`` (test error minus reference) and ``rel_gap``; a dataset
    of ``datasets`` whose references all use another protocol gets a note."""
    refs = reference_levels(references)
    if references is not None and "protocol_matches" in references.columns:
        other = sorted(set(references.loc[~references["protocol_matches"].astype(bool), "dataset"].astype(str))
                       & set(map(str, datasets)) - set(map(str, refs["dataset"])))
        if other:
            notes.append("published references for " + ", ".join(other) + " use another split or preprocessing "
                         "than this campaign (see their protocol): no gap to reference computed")
    table = table.merge(refs, on="dataset", how="left") if not refs.empty else table.assign(
        reference=np.nan, reference_method=None, reference_source=None)
    table["gap"] = table["test_error"] - table["reference"]
    table["rel_gap"] = table["gap"] / table["reference"]
    return table


def _rank_scores(table: pd.DataFrame, by: str, include_baselines: bool, notes: list[str]) -> pd.DataFrame:
    """Datasets x methods of the ranked quantity ``by``: only methods present on every
    dataset; a method without a valid selection on some seed of a dataset scores inf
    there; ranking by passes drops the datasets without a target."""
    ranked_kinds = ("iterative",) if (by == "passes_to_target" or not include_baselines) else ("iterative", "explicit")
    rankable = table[table["kind"].isin(ranked_kinds)]
    present = rankable.pivot(index="dataset", columns="method", values="seeds").notna()
    full = present.all(axis=0)
    if not full.all():
        notes.append("methods missing on some dataset are not ranked: " + ", ".join(map(str, full.index[~full])))
    score = rankable[by].where(rankable["valid"] == rankable["seeds"], np.inf)
    if by == "passes_to_target":
        score = score.where(rankable["target"].notna(), np.nan)
    scores = rankable.assign(_score=score).pivot(index="dataset", columns="method", values="_score")
    scores = scores.loc[:, full[full].index]
    if by == "passes_to_target":
        dropped = scores.index[scores.isna().any(axis=1)]
        if len(dropped):
            notes.append(f"datasets without a target are not ranked by passes: {', '.join(map(str, dropped))}")
        scores = scores.dropna(axis=0, how="any")
    return scores


def _without_inapplicable(scores: pd.DataFrame, selections: pd.DataFrame, rule: str,
                          notes: list[str]) -> pd.DataFrame:
    """Leave out of the ranks the datasets where ``rule`` cannot be evaluated on any run
    (no stated noise level for the discrepancy principle, a column no trace has), with a note
    giving select's reason: such a dataset is no tie between the methods."""
    if "outcome" not in selections.columns or scores.empty:
        return scores
    sel = selections[(selections["rule"] == rule) & (selections["outcome"] != "no trace")]
    gone = []
    for d, g in sel.groupby("dataset", sort=True):
        if len(g) and (g["outcome"] == "not applicable").all() and d in scores.index:
            reason = str(g["reason"].iloc[0]) if "reason" in g else ""
            notes.append(f"rule {rule} does not apply on dataset {d}: {reason}; left out of the ranks and rank tests")
            gone.append(d)
    return scores.drop(index=gone)


def _rank_tests(scores: pd.DataFrame, alpha: float, notes: list[str]) -> tuple[pd.DataFrame, RankTest | None]:
    """Ranks per dataset (1 best, ties averaged) and the Friedman / Iman-Davenport /
    Nemenyi statistics (None with fewer than 2 datasets or methods)."""
    ranks = rank_table(scores) if scores.shape[0] and scores.shape[1] else pd.DataFrame()
    if ranks.shape[0] >= 2 and ranks.shape[1] >= 2:
        return ranks, friedman_from_ranks(ranks.mean(axis=0).to_numpy(), ranks.shape[0], alpha,
                                          methods=list(ranks.columns))
    notes.append(f"rank tests need at least 2 datasets and 2 methods (have {ranks.shape[0]} and {ranks.shape[1]})")
    return ranks, None


def _profiles(both: pd.DataFrame, table: pd.DataFrame, unit: str) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Passes to target of the iterative methods (problems x methods, a problem being a
    dataset or a (dataset, seed) replicate; problems some method lacks are dropped), and
    their Dolan-More performance and More-Wild data profiles."""
    if unit == "dataset":
        costs = table[table["kind"] == "iterative"].pivot(index="dataset", columns="method", values="passes_to_target")
    else:
        it = both[both["kind"] == "iterative"]
        costs = it.pivot_table(index=["dataset", "seed"], columns="method", values="passes_to_target",
                               aggfunc="first", dropna=False)
    costs = costs.dropna(axis=0, how="any") if not costs.empty else costs
    if not costs.empty and costs.shape[0]:
        return costs, performance_profile(costs), data_profile(costs)
    return costs, pd.DataFrame(columns=["method", "tau", "share"]), pd.DataFrame(columns=["method", "budget", "share"])


# ---------------------------------------------------------------- reading a campaign

def read_traces(root: str | Path, run_ids: Iterable[str], columns: Sequence[str] = TRACE_COLUMNS) -> pd.DataFrame:
    """Only ``columns`` of only the traces of ``run_ids`` (one Parquet column read per column)."""
    import pyarrow as pa

    from stopwise.results.schema import read_trace
    from stopwise.results.store import Store

    store = Store(root)
    tables = []
    for rid in dict.fromkeys(str(r) for r in run_ids):
        path = store.run_path(rid)
        if not path.exists():
            continue
        table = read_trace(path, columns)  # one unreadable file must not sink the ranking
        if table is not None:
            tables.append(table)
    if not tables:
        return pd.DataFrame(columns=list(columns))
    return pa.concat_tables(tables, promote_options="permissive").to_pandas()


def rule_spec(rule: str | Mapping[str, Any]) -> dict[str, Any]:
    """``NAME`` or ``NAME:key=value,...`` (or a stopping config mapping) -> {rule, params, label}."""
    from stopwise.analysis.selection import parse_rule_arg
    from stopwise.stopping.rules import RuleError, rule_specs

    try:
        spec = parse_rule_arg(rule) if isinstance(rule, str) else dict(rule)
        return rule_specs([spec])[0]
    except RuleError as e:
        raise RankError(str(e)) from None


@dataclass
class CampaignData:
    """What ranking and the report read from a results root for one campaign."""

    root: Path
    campaign: str | tuple[str, ...]  # one campaign reference, or several (the union of their runs)
    rule: str                      # label of the ranked rule
    selections: pd.DataFrame       # every requested rule
    baselines: pd.DataFrame | None
    references: pd.DataFrame | None
    tasks: pd.DataFrame | None = None  # datasets on OpenML tasks' folds (analysis.published.task_datasets)


def gather(root: str | Path, campaign: str | Sequence[str], rule: str | Mapping[str, Any] = "holdout",
           extra_rules: Iterable[Any] = (), baselines: str = "ensure", references: bool = True,
           method_by: Sequence[str] = ("solver",), params: Iterable[str] | None = None,
           **options: Any) -> CampaignData:
    """Selections (the ranked rule plus ``extra_rules``), explicit baselines and references.

    ``campaign`` is a campaign name or id, or several: then the union of their runs (a run
    that two campaigns hold counts once) is one campaign, and a method is defined once
    across them.

    ``baselines``: ``ensure`` (compute the missing ones for every dataset, split and seed of
    the campaign, reuse stored ones), ``stored`` (only what is stored) or ``none``. Every
    option is checked (``options`` as :func:`rank` takes them) before anything is computed
    or written.
    """
    from stopwise.analysis.selection import campaign_list, find_campaigns, select
    from stopwise.results.store import Store, StoreError

    if baselines not in ("ensure", "stored", "none"):
        raise RankError(f"baselines mode {baselines!r} is invalid; valid: ensure, stored, none")
    check_options(**options)
    try:
        refs = campaign_list(campaign)
        find_campaigns(Store(root), refs)
    except StoreError as e:
        raise RankError(str(e)) from None
    campaign = refs[0] if len(refs) == 1 else tuple(refs)
    main = rule_spec(rule)
    if main["rule"] == "oracle":
        raise RankError("stopping rule 'oracle' is a reference (it reads test error) and never ranks as a method; "
                        "choose another rule, e.g. holdout")
    specs = [main] + [rule_spec(r) for r in extra_rules]
    sel = select(root, campaign, rules=[{"rule": s["rule"], "params": s["params"]} for s in specs])
    if sel.empty:
        raise RankError(f"campaign {' + '.join(refs)} has no stored runs under {root}; run it first with stopwise sweep")
    _require(sel, tuple(method_by), "the selection table")
    param_columns(sel, tuple(method_by), params)
    bl = None
    if baselines != "none":
        from stopwise.analysis.baselines import ensure_baselines, load_baselines

        bl = ensure_baselines(root, campaign) if baselines == "ensure" else load_baselines(root, campaign)
    refs = None
    if references:
        from stopwise.analysis.references import load_references

        refs = mark_protocols(load_references(), root, sel)
    return CampaignData(Path(root), campaign, main["label"], sel, bl, refs, _task_datasets(root, sel, references))


def _task_datasets(root: str | Path, selections: pd.DataFrame, references: bool) -> pd.DataFrame | None:
    from stopwise.analysis.published import task_datasets

    return task_datasets(root, selections) if references else None


def mark_protocols(references: pd.DataFrame, root: str | Path, selections: pd.DataFrame) -> pd.DataFrame:
    """Add ``protocol_matches``: does the reference's protocol (Hydra overrides) build the
    same dataset and split as the campaign's runs on that dataset? The seed must match too
    when the split is random. The first stored run of each dataset stands for all of them."""
    import shlex

    from stopwise.config.spec import SpecError
    from stopwise.config.compose import spec_from_overrides
    from stopwise.results.store import Store

    store = Store(root)
    ours: dict[str, dict] = {}
    for d, rid in selections.drop_duplicates("dataset")[["dataset", "run_id"]].itertuples(index=False):
        cfg = (store.run_meta(str(rid)) or {}).get("config") or {}
        ours[str(d)] = cfg
    built: dict[str, Any] = {}
    match = []
    for d, protocol in zip(references["dataset"].astype(str), references["protocol"].astype(str)):
        cfg = ours.get(d)
        if not cfg:
            match.append(False)
            continue
        if protocol not in built:
            try:
                built[protocol] = spec_from_overrides(shlex.split(protocol))
            except (SpecError, ValueError):
                built[protocol] = None
        spec = built[protocol]
        ok = (spec is not None and spec.dataset == cfg.get("dataset") and spec.split == cfg.get("split")
              and (spec.split.get("kind") != "random" or spec.seed == cfg.get("seed")))
        match.append(bool(ok))
    return references.assign(protocol_matches=match)


def rank_campaign(root: str | Path = "results", campaign: str | Sequence[str] = "",
                  rule: str | Mapping[str, Any] = "holdout", *,
                  baselines: str = "ensure", data: CampaignData | None = None, **options: Any) -> Ranking:
    """Rank a stored campaign: select with ``rule`` on every trace, tune on validation
    error, read only the tuned runs' ``run_id, iteration, passes, test_error`` columns, and
    aggregate (``options`` go to :func:`rank`). ``campaign`` may name several campaigns:
    their runs are ranked as one campaign holding the union of them.

    >>> r = rank_campaign("results", "demo", "holdout", target="baseline")   # doctest: +SKIP
    >>> print(stopwise.report.tables.render(r, "markdown"))                          # doctest: +SKIP
    """
    data = data or gather(root, campaign, rule, baselines=baselines, **options)
    include = options.pop("include_baselines", data.baselines is not None)
    r = rank(data.selections, data.rule, traces=lambda ids: read_traces(data.root, ids),
             baselines=data.baselines, references=data.references, include_baselines=include, **options)
    return _with_published(r, data)


def _with_published(r: Ranking, data: CampaignData) -> Ranking:
    """The published scores of the campaign's OpenML tasks beside its methods (see
    :mod:`stopwise.analysis.published`)."""
    from stopwise.analysis.published import published_table

    r.published = published_table(r.table, data.tasks)
    return r

__all__ = ["Ranking", "RankError", "Target", "baseline_levels", "config_labels", "param_columns",
           "passes_to_target", "rank", "reference_levels", "solver_defaults", "summarize", "tune", "StatsError",
           "performance_ratios", "CampaignData", "gather", "rank_campaign", "read_traces",
           "rule_spec", "check_options", "mark_protocols"]
