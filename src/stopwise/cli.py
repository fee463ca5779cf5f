"""The ``stopwise`` command. ``sweep`` and ``run`` hand their remaining arguments to Hydra."""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from stopwise.core.errors import StopwiseError

EXIT_BAD_INPUT = 2
# exit statuses of `stopwise run` (docs/reliability.md): 0 completed, 1 failed (the run raised;
# its trace records why), 2 bad input, 3 diverged (recorded as diverged), 4 trace not stored
EXIT_FAILED, EXIT_DIVERGED, EXIT_NOT_STORED = 1, 3, 4

USAGE = """stopwise COMMAND [args]

commands:
  sweep [CAMPAIGN|FILE.yaml] [--jobs N] [--chunk N] [--strict] [overrides]
                                 run a campaign (a sweep over Hydra overrides); --jobs N runs
                                 N chunks at once (Hydra's joblib launcher), hydra/launcher=slurm
                                 on a cluster; --chunk N runs per launched job; --strict refuses
                                 solver x dataset pairs that cannot run instead of leaving them out
  run [overrides]                run one configuration
  rerun ID [--root DIR]          recompute a run or a whole campaign and compare with the stored traces
  ls [--campaign C] [--root DIR] [--summary]
                                 list stored runs; --summary: per dataset and solver, the configuration
                                 tuned on validation error with medians and ranges over its seeds
  campaigns [--root DIR]         list stored campaigns: name, id, creation time, runs by status
  datasets                       list every dataset a run can use (rows, columns, task, source)
  datasets fetch [ID|NAME@VERSION ...] [--task ID ...] [--suite ID ...]
                                 download OpenML datasets / tasks / suites into openml's cache (needs network)
  select CAMPAIGN [--rule NAME[:k=v,...] ...] [--root DIR]
                                 evaluate stopping rules on a campaign's stored traces
  baselines CAMPAIGN [--method NAME ...] [--root DIR] [--path]
                                 fit (or reuse) explicit-regularization baselines on the campaign's splits
  rank CAMPAIGN [CAMPAIGN ...] [--rule R] [--target T] [--by B] [--format text|csv|markdown] [--compare R ...] ...
                                 tune methods on validation error, rank them across datasets;
                                 compare stopping rules against the oracle; several campaigns are
                                 ranked as one holding the union of their runs
  report CAMPAIGN [CAMPAIGN ...] [--rule R] [--out DIR] ...
                                 write an offline HTML report (tables, PNG figures) of a campaign
  verify [ROOT] [--quarantine]   check every trace and manifest; move bad files to ROOT/quarantine/
"""


class BadArguments(StopwiseError, ValueError):
    """A subcommand's options could not be parsed (one line)."""


class ArgParser(argparse.ArgumentParser):
    """argparse, but a usage error is one line ``stopwise: error: ...`` and exit code 2."""

    def error(self, message: str):  # type: ignore[override]
        raise BadArguments(f"{self.prog}: {' '.join(message.split())}; see {self.prog} --help")


def _fail(msg: str) -> int:
    print(f"stopwise: error: {msg}", file=sys.stderr)
    return EXIT_BAD_INPUT


def cores() -> int:
    """CPUs this process may run on (its affinity mask where the OS has one)."""
    try:
        return len(os.sched_getaffinity(0)) or 1
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def parallel_overrides(jobs_arg: str, rest: list[str]) -> tuple[list[str], str]:
    """Hydra overrides for ``--jobs N``: the joblib launcher with N workers, and BLAS threads
    per run so that workers x threads <= cores (unless ``threads=`` is given)."""
    from stopwise.config.spec import SpecError

    try:
        n = int(jobs_arg)
    except ValueError:
        raise SpecError(f"--jobs {jobs_arg!r} is invalid: must be a whole number of parallel workers >= 1") from None
    if n < 1:
        raise SpecError(f"--jobs {n} is invalid: must be a whole number of parallel workers >= 1")
    clash = [o for o in rest if o.lstrip("+~").startswith(("hydra/launcher=", "hydra.launcher."))]
    if clash:
        raise SpecError(f"--jobs chooses the joblib launcher; drop {clash[0]!r} or --jobs")
    given = [o for o in rest if o.lstrip("+~").split("=", 1)[0] == "threads"]
    threads = max(1, cores() // n)
    extra = ["hydra/launcher=joblib", f"hydra.launcher.n_jobs={n}"]
    if not given:
        extra.append(f"threads={threads}")
        note = f"{n} workers x {threads} BLAS {'thread' if threads == 1 else 'threads'} on {cores()} cores"
    else:
        note = f"{n} workers, {given[-1]}"
    return extra, note


def _split_sweep_options(args: list[str]) -> tuple[list[str], dict[str, str | bool]]:
    """Take ``--jobs N``, ``--chunk N`` (also ``--opt=N``) and ``--strict`` out of the
    sweep's arguments; the rest are the campaign and Hydra overrides."""
    rest: list[str] = []
    opts: dict[str, str | bool] = {}
    i = 0
    while i < len(args):
        a = args[i]
        if a in ("--jobs", "--chunk"):
            opts[a[2:]] = args[i + 1] if i + 1 < len(args) else ""
            i += 2
            continue
        if a.startswith(("--jobs=", "--chunk=")):
            k, v = a[2:].split("=", 1)
            opts[k] = v
        elif a == "--strict":
            opts["strict"] = True
        else:
            rest.append(a)
        i += 1
    return rest, opts


def _chunk_size(text: str) -> int:
    from stopwise.config.spec import SpecError

    try:
        n = int(text)
    except ValueError:
        n = 0
    if n < 1:
        raise SpecError(f"--chunk {text!r} is invalid: must be a whole number of runs per launched job >= 1")
    return n


def cmd_sweep(argv: list[str]) -> int:
    import time

    from stopwise.sweep.campaign import expand, launch, tally
    from stopwise.config.spec import SpecError

    t0 = time.perf_counter()
    campaign = None
    rest, opts = _split_sweep_options(list(argv))
    if rest and "=" not in rest[0] and not rest[0].startswith("-"):
        campaign = rest.pop(0)
    bad = [a for a in rest if a.startswith("-")]
    if bad:
        return _fail(f"unknown option {bad[0]!r}; sweep takes a campaign name or file, --jobs N, --chunk N, "
                     "--strict and key=value overrides")
    note = ""
    try:
        chunk = _chunk_size(str(opts["chunk"])) if "chunk" in opts else None
        if "jobs" in opts:
            extra, note = parallel_overrides(str(opts["jobs"]), rest)
            rest += extra
        exp = expand(campaign, rest, strict=bool(opts.get("strict")))
    except SpecError as e:
        return _fail(str(e))
    n_runs = len(exp.run_ids)
    print(f"campaign {exp.name} ({exp.manifest['campaign_id']}): {len(exp.jobs)} jobs, {n_runs} distinct runs, "
          f"results in {exp.root}" + (f"; {note}" if note else ""), flush=True)
    for line in exp.notes:
        print(f"note: {line}", flush=True)
    stopped = ""
    done: dict = {}
    try:
        done = launch(exp, chunk=chunk)
    except SpecError as e:  # data errors found before the launch: nothing ran
        return _fail(str(e))
    except Exception as e:  # the launcher itself gave up (a worker died, the cluster refused a job)
        stopped = " ".join(f"{type(e).__name__}: {e}".split())[:300]
        print(f"stopwise: the launcher stopped early: {stopped}", file=sys.stderr, flush=True)
    except SystemExit as e:  # Hydra printed the launcher's exception (above) and exits
        stopped = f"Hydra's multirun exited with status {e.code}; its error is printed above"
        print(f"stopwise: the launcher stopped early: {stopped}", file=sys.stderr, flush=True)
    counts = tally(exp, exp.root)
    ran = (f"{done['pending']} runs in {done['chunks']} {'chunk' if done['chunks'] == 1 else 'chunks'}"
           if done.get("pending") else "every run already stored")
    print(f"campaign {exp.name} ({exp.manifest['campaign_id']}): "
          + ", ".join(f"{v} {k}" for k, v in counts.items() if v or k == "completed")
          + f"; {ran}; {time.perf_counter() - t0:.1f} s; traces in {Path(exp.root) / 'runs'}", flush=True)
    if counts["failed"] or counts["missing"]:
        print(f"stopwise: {counts['failed'] + counts['missing']} runs did not finish; rerun the same command to retry them",
              file=sys.stderr)
        return 1
    return 1 if stopped else 0


def cmd_run(argv: list[str]) -> int:
    from stopwise.sweep.task import outcome_line
    from stopwise.running.runner import run_spec
    from stopwise.config.compose import compose_cached
    from stopwise.config.spec import SpecError, spec_from_config

    bad = [a for a in argv if a.startswith("-")]
    if bad:
        return _fail(f"unknown option {bad[0]!r}; run takes key=value overrides")
    from stopwise.sweep.campaign import check_data

    try:
        cfg = compose_cached(argv)
        spec = spec_from_config(cfg)
        check_data([spec])
    except SpecError as e:
        return _fail(str(e))
    from stopwise.results.store import StoreWriteError

    try:
        out = run_spec(spec, str(cfg["results_root"]))
    except StoreWriteError as e:
        print(f"stopwise: error: {e}", file=sys.stderr)
        return EXIT_NOT_STORED
    except OSError as e:  # the results root itself cannot be made (read-only parent, ...)
        print(f"stopwise: error: could not store the trace under {cfg['results_root']}: "
              f"{e.strerror or e}", file=sys.stderr)
        return EXIT_NOT_STORED
    print(outcome_line(out))
    print(f"trace: {out.path}")
    return {"failed": EXIT_FAILED, "diverged": EXIT_DIVERGED}.get(out.status, 0)


def cmd_rerun(argv: list[str]) -> int:
    from stopwise.running.rerun import rerun_one, resolve
    from stopwise.results.store import Store, StoreError

    ap = ArgParser(prog="stopwise rerun")
    ap.add_argument("id", help="run id (or unique prefix) or campaign id / name")
    ap.add_argument("--root", default="results", help="results root (default: results)")
    a = ap.parse_args(argv)
    store = Store(a.root)
    try:
        kind, ids = resolve(store, a.id)
    except StoreError as e:
        return _fail(str(e))
    if not ids:
        return _fail(f"campaign {a.id!r} has no stored runs under {a.root}")
    bad, worst = 0, 0.0
    for i, rid in enumerate(ids, 1):
        c = rerun_one(store, rid)
        worst = max(worst, c.max_diff)
        if c.ok:
            print(f"[{i}/{len(ids)}] reproduced {rid}  largest difference {c.max_diff:.3g}"
                  + "".join(f" ({n})" for n in c.notes), flush=True)
        else:
            bad += 1
            print(f"[{i}/{len(ids)}] DIFFERS    {rid}  " + "; ".join(c.problems), flush=True)
    if bad:
        print(f"{bad} of {len(ids)} runs differ from their stored traces", file=sys.stderr)
        return 1
    print(f"reproduced {len(ids)} {'run' if len(ids) == 1 else 'runs'} ({kind} {a.id}), "
          f"largest difference {worst:.3g}")
    return 0


def cmd_ls(argv: list[str]) -> int:
    import pandas as pd

    from stopwise.results.query import load_runs
    from stopwise.results.store import StoreError

    ap = ArgParser(prog="stopwise ls")
    ap.add_argument("--campaign", default=None, help="campaign name or id")
    ap.add_argument("--root", default="results")
    ap.add_argument("--summary", action="store_true",
                    help="one row per dataset and solver: the configuration tuned on mean validation error over "
                         "seeds, with medians and ranges over its seeds")
    a = ap.parse_args(argv)
    try:
        df = load_runs(a.root, a.campaign)
    except StoreError as e:
        return _fail(str(e))
    if df.empty:
        print(f"no runs under {a.root}")
        return 0
    show = summary_table(df) if a.summary else df.drop(columns=["message"])
    if a.summary:
        print(SUMMARY_NOTE)
    with pd.option_context("display.max_rows", 500, "display.width", 250, "display.max_columns", 30,
                           "display.float_format", "{:.4g}".format):
        print(show.to_string(index=False))
    print(f"{len(df)} runs: " + ", ".join(f"{n} {s}" for s, n in df["status"].value_counts().items())
          + f"  (root {a.root})")
    return 0


def campaign_rows(root: str | Path) -> list[dict]:
    """Every stored campaign, oldest first: name, id, creation time, jobs, runs and their
    stored statuses (``missing`` for runs with no trace yet)."""
    from stopwise.results.store import Store

    store = Store(root)
    rows = []
    for m in sorted(store.campaigns(), key=lambda c: c.get("created") if isinstance(c.get("created"), (int, float))
                    else 0):
        ids = list(m.get("run_ids", []))
        st = store.statuses(ids)
        counts: dict[str, int] = {}
        for rid in ids:
            k = st.get(rid, "missing")
            counts[k] = counts.get(k, 0) + 1
        created = m.get("created")
        rows.append({"name": m.get("name", "adhoc"), "campaign_id": m["campaign_id"],
                     "created": time.strftime("%Y-%m-%d %H:%M:%S", time.localtime(created))
                     if isinstance(created, (int, float)) else "?",
                     "jobs": m.get("jobs", len(ids)), "runs": len(ids),
                     "by_status": ", ".join(f"{n} {k}" for k, n in sorted(counts.items())) or "-"})
    return rows


def cmd_campaigns(argv: list[str]) -> int:
    from stopwise.report.tables import to_text
    from stopwise.results.store import StoreError
    import pandas as pd

    ap = ArgParser(prog="stopwise campaigns", description="every stored campaign with its id, creation time and "
                                                          "runs by status")
    ap.add_argument("--root", default="results", help="results root (default: results)")
    a = ap.parse_args(argv)
    try:
        rows = campaign_rows(a.root)
    except StoreError as e:
        return _fail(str(e))
    if not rows:
        print(f"no campaign under {a.root}")
        return 0
    df = pd.DataFrame(rows).rename(columns={"campaign_id": "id", "by_status": "runs by status"})
    print(to_text(df))
    print(f"{len(rows)} campaigns (root {a.root}); name a campaign by its id where a name is ambiguous")
    return 0


def cmd_verify(argv: list[str]) -> int:
    from stopwise.config.spec import SpecError
    from stopwise.results.verify import QUARANTINE, verify_root

    ap = ArgParser(prog="stopwise verify")
    ap.add_argument("root", nargs="?", default="results", help="results root (default: results)")
    ap.add_argument("--quarantine", action="store_true",
                    help=f"move bad files and stale temporary files to ROOT/{QUARANTINE}/")
    a = ap.parse_args(argv)
    try:
        rep = verify_root(a.root, quarantine=a.quarantine)
    except SpecError as e:
        return _fail(str(e))

    def rel(p: Path) -> str:
        try:
            return str(p.relative_to(rep.root))
        except ValueError:
            return str(p)

    for f in rep.bad:
        print(f"bad   {f.path}: {f.problem}")
    for f in rep.temporary:
        print(f"temp  {f.path}: {f.problem}")
    for f in rep.notes:
        print(f"note  {f.path}: {f.problem}")
    for src, dest in rep.moved:
        print(f"moved {rel(src)} -> {rel(dest)}")
    def n(k: int, what: str) -> str:
        return f"{k} {what}" + ("" if k == 1 else "s")

    summary = (f"checked {n(rep.traces, 'trace')}, {n(rep.manifests, 'manifest')}, {n(rep.baselines, 'baseline')}, "
               f"{n(rep.report_files, 'report file')} under {a.root} and {n(rep.cached, 'cached problem')}: ")
    if rep.ok:
        print(summary + "all good")
        return 0
    parts = []
    if rep.bad:
        parts.append(f"{len(rep.bad)} bad")
    if rep.temporary:
        parts.append(f"{len(rep.temporary)} leftover temporary")
    hint = "" if a.quarantine else f"; stopwise verify {a.root} --quarantine moves them aside"
    print(summary + ", ".join(parts) + hint, file=sys.stderr)
    return 1


SUMMARY_NOTE = ("per dataset and solver: the configuration whose best validation error, averaged over seeds, is "
                "lowest (among those with a validation error on the most seeds); then over that configuration's "
                "seeds the median and the range (smallest, largest) of its best validation error, of the test "
                "error at that iterate and of the final test error. Every seed counts, not the luckiest one.")


def summary_table(df):
    """Per dataset and solver: runs by status, the configuration tuned on validation error
    (lowest mean best validation error over seeds, among the configurations with a validation
    error on the most seeds), and over that configuration's seeds the median and range of its
    best validation error, test error there and final test error."""
    import numpy as np
    import pandas as pd

    from stopwise.analysis.rank import config_labels
    from stopwise.results.query import RUN_COLUMNS

    params = [c for c in df.columns if c not in RUN_COLUMNS]
    df = df.assign(config=config_labels(df, params).to_numpy() if len(df) else [])

    def med(a):
        a = a[np.isfinite(a)]
        return float(np.median(a)) if a.size else np.nan

    def rng(a):
        a = a[np.isfinite(a)]
        return f"{a.min():.4g}..{a.max():.4g}" if a.size >= 2 else "-"

    rows = []
    for (ds, sv), g in df.groupby(["dataset", "solver"], sort=True):
        row = {"dataset": ds, "solver": sv, "runs": len(g), "diverged": int((g["status"] == "diverged").sum()),
               "failed": int((g["status"] == "failed").sum())}
        ok = g[np.isfinite(g["best_val_error"].to_numpy(dtype=float))]
        if len(ok):
            per = (ok.groupby("config", sort=True)
                   .agg(n=("seed", "nunique"), mean_val=("best_val_error", "mean")).reset_index()
                   .sort_values(["n", "mean_val", "config"], ascending=[False, True, True], kind="stable"))
            best = per["config"].iloc[0]
            t = ok[ok["config"] == best]
            val = t["best_val_error"].to_numpy(dtype=float)
            test = t["test_at_best_val"].to_numpy(dtype=float)
            final = t["final_test_error"].to_numpy(dtype=float)
            row.update({"tuned config": best, "seeds": f"{t['seed'].nunique()}/{g['seed'].nunique()}",
                        "val error (median)": med(val), "test at best val (median)": med(test),
                        "test at best val (range)": rng(test), "final test error (median)": med(final)})
        rows.append(row)
    return pd.DataFrame(rows)


def cmd_datasets(argv: list[str]) -> int:
    """``stopwise datasets`` lists the catalog; ``stopwise datasets fetch ...`` warms openml's cache."""
    if argv and argv[0] == "fetch":
        return _datasets_fetch(argv[1:])
    ap = ArgParser(prog="stopwise datasets",
                   description="List every dataset a run can use; 'stopwise datasets fetch ID' warms "
                               "the OpenML cache.")
    ap.parse_args(argv)
    from stopwise.config.catalog import entries, format_table

    items = entries()
    print(format_table(items))
    print(f"{len(items)} datasets; OpenML cache: {_openml_cache_dir()}")
    return 0


def _openml_cache_dir() -> str:
    try:
        from stopwise.data.openml_source import cache_root

        return str(cache_root())
    except Exception as e:  # noqa: BLE001 - informational only
        return f"unavailable ({type(e).__name__})"


def _datasets_fetch(argv: list[str]) -> int:
    import re

    ap = ArgParser(prog="stopwise datasets fetch",
                   description="Download OpenML datasets (ID or NAME@VERSION), tasks (with the published scores "
                               "of their uploaded runs) and benchmark suites (their task list and every task) into "
                               "openml's cache, so that runs can read them without network.")
    ap.add_argument("refs", nargs="*", metavar="ID", help="dataset id, or NAME@VERSION")
    ap.add_argument("--task", type=str, action="append", default=[], metavar="ID", help="task id (repeatable)")
    ap.add_argument("--suite", type=str, action="append", default=[], metavar="ID",
                    help="benchmark suite id or alias (repeatable)")
    a = ap.parse_args(argv)
    if not a.refs and not a.task and not a.suite:
        return _fail("datasets fetch needs at least one dataset id (or NAME@VERSION), --task ID or --suite ID")
    for r in a.refs:
        if not (re.fullmatch(r"[1-9][0-9]*", r) or re.fullmatch(r"[^@\s]+@[1-9][0-9]*", r)):
            return _fail(f"{r!r} is not an OpenML dataset id or NAME@VERSION (for example 61 or iris@1)")
    for t in a.task:
        if not re.fullmatch(r"[1-9][0-9]*", t):
            return _fail(f"--task {t!r} is not an OpenML task id (a positive integer)")
    for u in a.suite:
        if not re.fullmatch(r"[1-9][0-9]*|[A-Za-z][A-Za-z0-9_.-]{0,99}", u):
            return _fail(f"--suite {u!r} is not an OpenML suite id or alias (for example 99 or OpenML-CC18)")
    from stopwise.data.openml_scores import fetch_scores
    from stopwise.data.openml_source import fetch_dataset, fetch_task
    from stopwise.data.openml_suite import fetch_suite

    failed = 0

    def attempt(kind, ref, fn):
        nonlocal failed
        try:
            return fn(ref)
        except Exception as e:  # noqa: BLE001 - network and server errors: one line each
            failed += 1
            msg = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
            print(f"stopwise: could not fetch OpenML {kind} {ref}: {type(e).__name__}: {msg}", file=sys.stderr)
            return None

    tasks = list(dict.fromkeys(a.task))
    for u in a.suite:
        got = attempt("suite", u, fetch_suite)
        if got is not None:
            rec, line = got
            print(f"fetched {line}", flush=True)
            tasks += [str(t) for t in rec["tasks"] if str(t) not in tasks]
    for r in a.refs:
        line = attempt("dataset", r, fetch_dataset)
        if line is not None:
            print(f"fetched {line}", flush=True)
    for t in tasks:
        line = attempt("task", t, fetch_task)
        if line is None:
            continue
        print(f"fetched {line}", flush=True)
        try:
            print(f"  {fetch_scores(int(t))}", flush=True)
        except Exception as e:  # noqa: BLE001 - the task is warm; its published scores are extra
            msg = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
            print(f"  task {t}: published scores not fetched ({type(e).__name__}: {msg[:120]}); rank and report "
                  "show none for it", flush=True)
    print(f"OpenML cache: {_openml_cache_dir()}")
    return 1 if failed else 0


def cmd_select(argv: list[str]) -> int:
    from stopwise.analysis.selection import format_table, parse_rule_arg, select
    from stopwise.stopping.rules import RuleError
    from stopwise.results.store import StoreError

    ap = ArgParser(prog="stopwise select",
                   description="selected iterate per run and stopping rule (oracle = reference only)")
    ap.add_argument("campaign", help="campaign name or id")
    ap.add_argument("--rule", action="append", default=None, metavar="NAME[:k=v,...]",
                    help="a stopping rule, repeatable (default: the campaign's rules plus oracle)")
    ap.add_argument("--root", default="results", help="results root (default: results)")
    a = ap.parse_args(argv)
    try:
        rules = [parse_rule_arg(r) for r in a.rule] if a.rule else None
        df = select(a.root, a.campaign, rules)
    except (RuleError, StoreError) as e:
        return _fail(str(e))
    if df.empty:
        print(f"campaign {a.campaign} has no runs under {a.root}")
        return 0
    print(format_table(df))
    n_runs = df["run_id"].nunique()
    n_rules = df["rule"].nunique()
    print(f"{n_runs} runs x {n_rules} rules (oracle rows are a reference, never a method)  (root {a.root})")
    return 0


def cmd_baselines(argv: list[str]) -> int:
    import pandas as pd

    from stopwise.analysis.baselines import BaselineError, ensure_baselines
    from stopwise.config.spec import SpecError
    from stopwise.results.store import StoreError

    ap = ArgParser(prog="stopwise baselines",
                   description="explicit-regularization baselines selected on validation error")
    ap.add_argument("campaign", help="campaign name or id")
    ap.add_argument("--method", action="append", default=None, metavar="NAME",
                    help="baseline method, repeatable (default: every method for the problem's task)")
    ap.add_argument("--root", default="results", help="results root (default: results)")
    ap.add_argument("--path", action="store_true", help="print every penalty, not only the selected one")
    a = ap.parse_args(argv)
    try:
        df = ensure_baselines(a.root, a.campaign, a.method)
    except (BaselineError, StoreError, SpecError) as e:
        return _fail(str(e))
    if df.empty:
        print(f"campaign {a.campaign} has no stored runs under {a.root} to fit baselines on")
        return 0
    show = df if a.path else df[df["selected"]]
    with pd.option_context("display.max_rows", 100000, "display.width", 200, "display.max_columns", 30,
                           "display.float_format", "{:.4g}".format):
        print(show.drop(columns=["selected"] if not a.path else []).to_string(index=False))
    n = df["baseline_id"].nunique()
    print(f"{n} baseline paths, {len(df)} penalties; selected on validation error  "
          f"(files in {Path(a.root) / 'baselines'})")
    return 0


def _ranking_parser(prog: str, description: str) -> ArgParser:
    from stopwise.analysis.rank import RANK_BY, TUNINGS, UNITS

    ap = ArgParser(prog=prog, description=description)
    ap.add_argument("campaign", nargs="+", metavar="CAMPAIGN",
                    help="campaign name or id; several are ranked as one campaign holding the union of their runs")
    ap.add_argument("--root", default="results", help="results root (default: results)")
    ap.add_argument("--rule", default="holdout", metavar="NAME[:k=v,...]",
                    help="stopping rule the methods are ranked under (default: holdout; never oracle)")
    ap.add_argument("--target", default="baseline", metavar="baseline|reference|none|NUMBER",
                    help="test error to reach: best explicit baseline (default), published reference, none, or a value")
    ap.add_argument("--eps", type=float, default=0.05, help="target = (1 + eps) f_L (default 0.05)")
    ap.add_argument("--tau", type=float, default=None,
                    help="More-Wild target f_L + tau (f_0 - f_L) instead of (1 + eps) f_L")
    ap.add_argument("--by", default="test_error", choices=RANK_BY, help="quantity to rank (default test_error)")
    ap.add_argument("--alpha", type=float, default=0.05, help="significance level of the Nemenyi test (default 0.05)")
    ap.add_argument("--confidence", type=float, default=0.95, help="level of the bootstrap interval over seeds (default 0.95)")
    ap.add_argument("--tuning", default="per_seed", choices=TUNINGS,
                    help="choose parameters per seed (default) or by mean validation error over seeds")
    ap.add_argument("--unit", default="dataset", choices=UNITS, help="profile problems: datasets or (dataset, seed)")
    ap.add_argument("--method-by", default="solver", metavar="COL[,COL]", help="columns naming a method (default solver)")
    ap.add_argument("--params", default=None, metavar="COL[,COL]",
                    help="tuned parameter columns (default: every solver parameter in the campaign)")
    ap.add_argument("--baselines", default="ensure", choices=("ensure", "stored", "none"),
                    help="explicit baselines: compute missing ones (default), use stored ones only, or none")
    return ap


def _campaigns(a):
    """The CAMPAIGN arguments: one name or id, or the list of several."""
    return a.campaign[0] if len(a.campaign) == 1 else list(a.campaign)


def _ranking_options(a) -> dict:
    return dict(target=a.target, eps=a.eps, tau=a.tau, by=a.by, alpha=a.alpha, confidence=a.confidence,
                tuning=a.tuning, unit=a.unit, method_by=tuple(c for c in a.method_by.split(",") if c),
                params=None if a.params is None else [c for c in a.params.split(",") if c])


def cmd_rank(argv: list[str]) -> int:
    from stopwise.core.errors import SpecError
    from stopwise.analysis.rank import rank_campaign
    from stopwise.results.store import StoreError, atomic_write_bytes
    from stopwise.report.tables import FORMATS, render

    ap = _ranking_parser("stopwise rank", "tune every method on validation error under one stopping rule and "
                                          "rank the methods across datasets")
    ap.add_argument("--format", default="text", choices=FORMATS, help="output format (default text)")
    ap.add_argument("--out", default=None, metavar="FILE", help="write the output to FILE instead of the terminal")
    ap.add_argument("--compare", action="append", default=None, metavar="NAME[:k=v,...]|none",
                    help="stopping rule to compare against the oracle, repeatable (default: the campaign's rules "
                         "and every registered rule at its defaults; none: no comparison; not in csv format)")
    a = ap.parse_args(argv)
    try:
        compare = _compare_rules_arg(a.compare)
        r = rank_campaign(a.root, _campaigns(a), a.rule, baselines=a.baselines, **_ranking_options(a))
        text = render(r, a.format)
        if compare is not False and a.format != "csv":
            from stopwise.analysis.rule_comparison import compare_campaign
            from stopwise.report.tables import render_rules

            opts = _ranking_options(a)
            c = compare_campaign(a.root, _campaigns(a), compare, method_by=opts["method_by"], params=opts["params"],
                                 alpha=a.alpha)
            text += ("\n" if a.format == "text" else "\n### Stopping rules compared\n\n") + render_rules(c, a.format)
    except (SpecError, StoreError) as e:
        return _fail(str(e))
    if a.out:
        atomic_write_bytes(Path(a.out), text.encode())
        print(f"wrote {a.out}")
    else:
        print(text, end="")
    return 0


def _compare_rules_arg(values: list[str] | None):
    """``--compare`` values: None (the default set), False (``none``) or a list of rule specs."""
    if values is None:
        return None
    if values == ["none"]:
        return False
    from stopwise.analysis.selection import parse_rule_arg
    from stopwise.stopping.rules import rule_specs

    specs = [parse_rule_arg(v) for v in values]
    if any(s["rule"] == "oracle" for s in specs):
        raise BadArguments("--compare oracle is invalid: the oracle is what the rules are compared against")
    rule_specs(specs)  # unknown names and bad params: one line
    return specs


def cmd_report(argv: list[str]) -> int:
    from stopwise.core.errors import SpecError
    from stopwise.report.report import report_campaign
    from stopwise.results.store import StoreError

    ap = _ranking_parser("stopwise report", "write a static HTML report of a campaign (or of several, as one): "
                                            "tables and PNG figures")
    ap.add_argument("--out", default=None, metavar="DIR",
                    help="output folder (default: ROOT/reports/CAMPAIGN, or ROOT/reports/A+B for several)")
    ap.add_argument("--mark", action="append", default=None, metavar="NAME[:k=v,...]",
                    help="rule whose stopping points the curves mark, repeatable (default: the rules the campaign "
                         "named, and the oracle)")
    a = ap.parse_args(argv)
    try:
        index = report_campaign(a.root, _campaigns(a), a.out, rule=a.rule, marked_rules=a.mark,
                                baselines=a.baselines, **_ranking_options(a))
    except (SpecError, StoreError) as e:
        return _fail(str(e))
    print(f"report: {index}")
    return 0


COMMANDS = {"sweep": cmd_sweep, "run": cmd_run, "rerun": cmd_rerun, "ls": cmd_ls, "select": cmd_select,
            "baselines": cmd_baselines, "datasets": cmd_datasets, "rank": cmd_rank, "report": cmd_report,
            "verify": cmd_verify, "campaigns": cmd_campaigns}


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if not argv or argv[0] in ("-h", "--help", "help"):
        print(USAGE)
        return 0 if argv else EXIT_BAD_INPUT
    cmd, rest = argv[0], argv[1:]
    if cmd not in COMMANDS:
        return _fail(f"unknown command {cmd!r}; valid: {', '.join(COMMANDS)}")
    try:
        return COMMANDS[cmd](rest)
    except BadArguments as e:
        return _fail(str(e))
    except SystemExit as e:  # a subcommand's --help (code 0), or a library that exits with a code
        return e.code if isinstance(e.code, int) else (0 if e.code is None else EXIT_BAD_INPUT)


if __name__ == "__main__":
    sys.exit(main())
