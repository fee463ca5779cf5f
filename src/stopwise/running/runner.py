"""Run one RunSpec: problem -> solver loop -> recorder -> store; skip when already done."""
from __future__ import annotations

import dataclasses
import math
import platform
import time
import traceback
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from stopwise.core.version import __version__
from stopwise.running import fastpath
from stopwise.data import cached_problem
from stopwise.problem.losses import resolve_loss
from stopwise.problem.problem import Problem
from stopwise.running.record import Recorder, make_recorder
from stopwise.solvers import get_solver
from stopwise.config.spec import RunSpec, halt_missing_column, trace_rows_bound
from stopwise.config.compose import spec_from_overrides
from stopwise.results.store import Store


@dataclass
class Trace:
    columns: dict[str, np.ndarray]
    status: str
    message: str = ""
    problem_info: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class RunOutcome:
    run_id: str
    status: str
    path: Path | None
    skipped: bool
    message: str = ""
    label: str = ""
    iterations: int = 0
    best_val_error: float = math.nan
    best_val_iteration: int = -1
    seconds: float = 0.0


def _problem_info(p: Problem, train=None) -> dict[str, Any]:
    train = train if train is not None else p.training
    return {"n_train": p.n_train, "n_val": int(p.X_val.shape[0]), "n_test": int(p.X_test.shape[0]),
            "d": p.d, "L": train.L, "task": p.task, "loss": train.loss, "noise_kind": p.noise_kind,
            "noise_level": p.noise_level,
            "noise_norm": p.noise_norm, "has_truth": p.w_true is not None,
            "preprocessing": {k: ({c: x for c, x in v.items() if c != "scale"} if k == "scale" else v)
                              for k, v in p.preprocessing.items() if k != "standardize"},
            "standardized": "standardize" in p.preprocessing}


PASS_EPS = 1e-12  # tolerance on pass counts (budget and record schedule)


INITIAL_ROWS = 4096  # rows allocated up front at most; the recorder grows beyond them when needed


def _record_rows(spec: RunSpec, n_train: int) -> int:
    """Rows to allocate: what the budget can reach (:func:`trace_rows_bound`), at most
    :data:`INITIAL_ROWS`."""
    return min(trace_rows_bound(spec.budget, spec.record, n_train), INITIAL_ROWS)


def run_rng(spec: RunSpec) -> np.random.Generator:
    """The generator a run's solver receives at ``init``: seeded by the run's seed only,
    so stochastic solvers draw the same numbers whatever their step size."""
    return np.random.default_rng([spec.seed, 0x50_17E5])


def pass_mark(passes: float, per_pass: float) -> int:
    """Index of the last point of the grid ``k / per_pass`` at or below ``passes``."""
    return int(math.floor(passes * per_pass + 1e-9))


def execute(spec: RunSpec, problem: Problem | None = None, path: str = "auto",
            record_path: str | None = None) -> Trace:
    """Run the solver loop for ``spec`` and return the recorded trace (nothing written).

    ``path`` chooses how least-squares gradients and recorded errors are evaluated
    (:mod:`stopwise.running.fastpath`): ``auto`` (the default, a function of the shapes only),
    or ``direct`` / ``fused`` / ``gram`` to force one, for checks and benchmarks;
    ``record_path`` does the same for the recorded errors only (default: as ``path``).

    Recording: the initial iterate, then every ``record.every``-th iterate, or, when
    ``record.per_pass`` is set, the first iterate at or past each point of the grid
    ``k / per_pass`` data passes; the last iterate is always recorded. With
    ``record.residual: false`` regression traces leave out the residual statistics
    (``residual_dot_prev``, and ``ncp_distance`` on problems whose rows are in signal
    order, which reads the training rows at every recorded row; :mod:`stopwise.stopping.residual`).
    """
    problem = problem if problem is not None else cached_problem(spec.dataset, spec.split, spec.seed)
    run = _prepare(spec, problem, path, record_path)
    status, message = _loop(spec, run)
    info = dict(_problem_info(problem, run.train), **run.rec.info)
    if problem.sparse:
        scale = problem.preprocessing.get("scale", {})
        info["design"] = {"kind": "csr" if run.rec.problem.sparse else "dense copy of a csr design",
                          "nnz_train": int(problem.X_train.nnz), "centered": False,
                          "scaled": scale.get("scaled", "no")}
    info["evaluation"] = dict(fastpath.describe(run.train, run.stats), prepare_seconds=run.t_prep,
                              fallbacks=run.rec.fallbacks)
    return Trace(columns=run.rec.result(), status=status, message=message, problem_info=info)


@dataclass
class _Run:
    """What the solver loop of one run works with (built by :func:`_prepare`)."""

    sdef: Any
    params: Any
    train: Any
    stats: Any
    rec: Recorder
    decided: Any       # the halting check, or None
    t_prep: float      # one-time set-up of the evaluation paths, outside the solver's seconds


def _prepare(spec: RunSpec, problem: Problem, path: str, record_path: str | None) -> _Run:
    """Solver, validated params, the solver's training set with its evaluation plan, the
    recorder and the halting check."""
    sdef = get_solver(spec.solver)
    if problem.task not in sdef.tasks:
        raise ValueError(f"solver {spec.solver!r} does not handle {problem.task} problems")
    problem = solver_problem(problem, sdef)
    params = spec.params
    clock = time.perf_counter
    t_prep = clock()
    train = problem.training_set(resolve_loss(problem.task, problem.loss, sdef.loss))
    train, stats = fastpath.prepare(problem, train, path)
    if record_path is not None and record_path != path:
        stats = fastpath.split_statistics(problem, record_path)
    t_prep = clock() - t_prep
    model = sdef.model(params, train) if sdef.model is not None else None
    if not getattr(model, "feature_weights", True):
        stats = None  # the recorder scores such a model's predictions; the X w statistics go unused
    rec = make_recorder(problem, capacity=_record_rows(spec, problem.n_train),
                        state_metrics=sdef.metrics(train, params) if sdef.metrics is not None else None,
                        loss=train.loss, model=model, statistics=stats,
                        residual=spec.record.get("residual", True))
    if spec.stopping.get("halt"):  # a Problem given directly may lack a column the rule reads
        from stopwise.stopping.rules import get_rule

        missing = [c for c in get_rule(spec.stopping["rule"]).columns if c not in rec.columns]
        if missing:
            raise ValueError(halt_missing_column(spec.stopping["rule"], missing[0], problem.name))
    return _Run(sdef, params, train, stats, rec, _halting(spec, problem), t_prep)


def solver_problem(problem: Problem, sdef: Any) -> Problem:
    """The problem a solver runs on: ``problem`` itself, or for a solver that does not take
    sparse designs (``SolverDef.sparse`` false) a dense copy of a sparse problem, made once
    per problem within the bound of :mod:`stopwise.problem.design` (above it, a one-line
    :class:`~stopwise.problem.design.DesignError` naming the solver, the shape and the choices)."""
    if problem.sparse and not sdef.sparse:
        return problem.dense(f"solver {sdef.name!r}")
    return problem


def _loop(spec: RunSpec, run: _Run) -> tuple[str, str]:
    """The timed solver loop with its record schedule, divergence check and halting rule;
    returns ``(status, message)``."""
    sdef, params, train, rec, decided = run.sdef, run.params, run.train, run.rec, run.decided
    clock = time.perf_counter
    rng = run_rng(spec)
    max_it = spec.budget["iterations"]
    max_passes = spec.budget["passes"]
    every = spec.record["every"]
    per_pass = spec.record.get("per_pass")
    factor = spec.budget["diverge_factor"]
    status, message = "completed", ""
    bad_row = False  # the last recorded row is the one that diverged

    t0 = clock()
    state = sdef.start(train, params, rng, spec.budget)
    elapsed = clock() - t0
    loss0 = rec.record(state.iteration, state.passes, elapsed, state.w, state)
    limit = factor * max(loss0, np.finfo(float).tiny)
    mark = pass_mark(state.passes, per_pass) if per_pass is not None else 0
    step = sdef.step
    halted = decided(rec) if decided else None
    while not halted and state.iteration < max_it and (max_passes is None or state.passes < max_passes - PASS_EPS):
        t0 = clock()
        state = step(train, params, state)
        elapsed += clock() - t0
        sq = float(state.w.dot(state.w))  # ndarray.dot: the same BLAS call as @, with less dispatch
        if not math.isfinite(sq):
            status, message = "diverged", f"non-finite iterate at iteration {state.iteration}"
            break
        done = (state.converged or state.iteration >= max_it
                or (max_passes is not None and state.passes >= max_passes - PASS_EPS))
        if per_pass is None:
            due = state.iteration % every == 0
        else:
            k = pass_mark(state.passes, per_pass)
            due = k > mark
            if due:
                mark = k
        if due or done:
            loss = rec.record(state.iteration, state.passes, elapsed, state.w, state, sq)
            if not math.isfinite(loss) or loss > limit:
                status = "diverged"
                message = (f"training objective grew from {loss0:.3g} to {loss:.3g} (over {factor:g} times) "
                           f"by iteration {state.iteration}")
                bad_row = True
                break
            if decided:
                halted = decided(rec)
        if state.converged:
            message = f"converged at iteration {state.iteration}: further steps cannot change the iterate"
            break
    if decided and not halted:
        # the last rows may not have been checked yet; a decision before a divergence wins
        halted = decided(rec, force=True, exclude_last=bad_row)
        if halted:
            status = "completed"
    if halted:
        message = halted
    return status, message


def _halting(spec: RunSpec, problem: Problem):
    """For ``stopping.halt: true``: a check ``(recorder, force) -> message or None``.

    The rule's selection on a prefix of the trace is *final* from some row on and stays
    so (the rules guarantee it). Checking the whole prefix after every row would cost
    O(T^2), so the check runs when the trace has grown by 1/16 since the last check (and
    when forced at the end); once final, a bisection over the unchecked rows finds the
    first row where the choice became final and the recorder is cut back to it. The
    stored trace therefore ends exactly where per-row checking would have stopped it; the
    loop may have computed up to 1/16 more iterates, which are dropped.
    """
    if not spec.stopping.get("halt"):
        return None
    from stopwise.stopping.rules import RuleContext, get_rule, make_rule_params

    rdef = get_rule(spec.stopping["rule"])
    rparams = make_rule_params(rdef.name, spec.stopping.get("params"))
    ctx = RuleContext.from_problem(problem)
    state = {"checked": 0, "next": 1}

    def final_at(view: dict, m: int):
        sel = rdef.select({c: a[:m] for c, a in view.items()}, ctx, rparams)
        return sel if sel.final and sel.iteration is not None else None

    def decided(rec: Recorder, force: bool = False, exclude_last: bool = False) -> str | None:
        n = rec.size - (1 if exclude_last else 0)
        if n == 0 or (not force and n < state["next"]):
            return None
        view = rec.view()
        sel = final_at(view, n)
        if sel is None:
            state["checked"], state["next"] = n, n + max(1, n // 16)
            return None
        lo, hi = state["checked"], n  # prefix of length lo is not final, of length hi is
        while hi - lo > 1:
            mid = (lo + hi) // 2
            got = final_at(view, mid)
            if got is None:
                lo = mid
            else:
                hi, sel = mid, got
        rec.size = hi  # drop the rows computed after the decision (see the docstring)
        return f"halted by {rdef.name} at iteration {int(view['iteration'][hi - 1])}: {sel.reason}"

    return decided


_ENVIRONMENT: dict[str, Any] = {}


def environment() -> dict[str, Any]:
    """Package versions, machine, and the BLAS/OpenMP thread counts in force now.

    Versions are read once per process; the thread counts come from a threadpoolctl
    controller kept for the process (rebuilt when modules were imported since), so
    recording them costs microseconds per run instead of a scan of the loaded libraries.
    """
    import sys

    if "versions" not in _ENVIRONMENT:
        import importlib.metadata as md

        versions = {"stopwise": __version__, "python": platform.python_version()}
        for pkg in ("numpy", "scipy", "scikit-learn", "pandas", "pyarrow", "hydra-core"):
            try:
                versions[pkg] = md.version(pkg)
            except md.PackageNotFoundError:
                versions[pkg] = None
        _ENVIRONMENT["versions"] = versions
    threads: dict[str, Any] = {}
    try:
        ctl = _ENVIRONMENT.get("controller")
        if ctl is None or _ENVIRONMENT.get("modules") != len(sys.modules):
            from threadpoolctl import ThreadpoolController

            ctl = ThreadpoolController()
            _ENVIRONMENT["controller"], _ENVIRONMENT["modules"] = ctl, len(sys.modules)
        for info in ctl.info():
            threads[f"{info.get('user_api')}:{info.get('internal_api')}"] = info.get("num_threads")
    except Exception:  # threadpoolctl missing or failing must not stop a run
        pass
    return {"versions": dict(_ENVIRONMENT["versions"]), "threads": threads, "machine": platform.machine()}


def run_level_columns(spec: RunSpec, task: str, status: str, loss: str | None = None) -> dict[str, Any]:
    cols: dict[str, Any] = {"run_id": spec.run_id, "dataset": spec.dataset.get("name"), "task": task,
                            "loss": loss, "solver": spec.solver, "seed": spec.seed, "status": status}
    for f in dataclasses.fields(spec.params):
        cols[f.name] = getattr(spec.params, f.name)
    return cols


def run_spec(spec: RunSpec, root: str | Path = "results", force: bool = False,
             store: Store | None = None) -> RunOutcome:
    """Execute and store one run unless a readable finished trace already exists."""
    store = store or Store(root)
    rid = spec.run_id
    if not force and store.is_done(rid):
        meta = store.run_meta(rid) or {}
        s = meta.get("summary", {})
        return RunOutcome(rid, meta.get("status", "?"), store.run_path(rid), True, meta.get("message", ""),
                          spec.label(), s.get("iterations", 0), s.get("best_val_error", math.nan),
                          s.get("best_val_iteration", -1), s.get("seconds", 0.0))
    try:
        trace = execute(spec)
    except Exception as e:  # recorded as a failed run; the sweep goes on
        tb = traceback.format_exception_only(type(e), e)[-1].strip()
        trace = Trace(columns={}, status="failed", message=tb)
    return save(spec, trace, store)


def summarize(columns: dict[str, np.ndarray]) -> dict[str, Any]:
    if not columns or len(columns["iteration"]) == 0:
        return {"iterations": 0, "passes": 0.0, "seconds": 0.0}
    val = columns["val_error"]
    out = {"iterations": int(columns["iteration"][-1]), "passes": float(columns["passes"][-1]),
           "seconds": float(columns["seconds"][-1]), "rows": int(len(val)),
           "final_test_error": float(columns["test_error"][-1])}
    if np.isfinite(val).any():
        i = int(np.nanargmin(np.where(np.isfinite(val), val, np.nan)))
        out.update(best_val_error=float(val[i]), best_val_iteration=int(columns["iteration"][i]),
                   test_at_best_val=float(columns["test_error"][i]))
    return out


def save(spec: RunSpec, trace: Trace, store: Store) -> RunOutcome:
    summary = summarize(trace.columns)
    task = trace.problem_info.get("task", "regression")
    meta = {"run_id": spec.run_id, "digest": spec.digest, "identity": spec.identity(),
            "config": spec.to_dict(), "status": trace.status, "message": trace.message,
            "problem": trace.problem_info, "summary": summary, "created": time.time(), **environment()}
    path = store.write_run(spec.run_id, trace.columns,
                           run_level_columns(spec, task, trace.status, trace.problem_info.get("loss")), meta)
    return RunOutcome(spec.run_id, trace.status, path, False, trace.message, spec.label(),
                      summary.get("iterations", 0), summary.get("best_val_error", math.nan),
                      summary.get("best_val_iteration", -1), summary.get("seconds", 0.0))


def run(overrides: list[str] | None = None, root: str | Path | None = None, force: bool = False) -> RunOutcome:
    """Compose a config from Hydra overrides, run it, and store its trace.

    >>> out = run(["dataset=wellposed", "solver=cgls", "budget.iterations=5"], root=tmp)  # doctest: +SKIP
    """
    from stopwise.config.compose import compose_cached
    from stopwise.config.spec import spec_from_config

    cfg = compose_cached(list(overrides or []))  # Hydra composes once per group choice in a loop
    spec = spec_from_config(cfg)
    return run_spec(spec, root if root is not None else cfg["results_root"], force=force)


__all__ = ["execute", "run", "run_spec", "save", "Trace", "RunOutcome", "spec_from_overrides"]
