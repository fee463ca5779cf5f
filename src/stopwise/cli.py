"""The ``stopwise`` command. ``sweep`` and ``run`` hand their remaining arguments to Hydra."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

EXIT_BAD_INPUT = 2

USAGE = """stopwise COMMAND [args]

commands:
  sweep [CAMPAIGN] [overrides]   run a campaign (a sweep over Hydra overrides)
  run [overrides]                run one configuration
  rerun ID [--root DIR]          recompute a run or a whole campaign and compare with the stored traces
  ls [--campaign C] [--root DIR] list stored runs
  select CAMPAIGN [--rule NAME[:k=v,...] ...] [--root DIR]
                                 evaluate stopping rules on a campaign's stored traces
"""


def _fail(msg: str) -> int:
    print(f"stopwise: error: {msg}", file=sys.stderr)
    return EXIT_BAD_INPUT


def cmd_sweep(argv: list[str]) -> int:
    from .campaign import expand, launch, tally
    from .spec import SpecError

    campaign = None
    rest = list(argv)
    if rest and "=" not in rest[0] and not rest[0].startswith("-"):
        campaign = rest.pop(0)
    bad = [a for a in rest if a.startswith("-")]
    if bad:
        return _fail(f"unknown option {bad[0]!r}; sweep takes a campaign name and key=value overrides")
    try:
        exp = expand(campaign, rest)
    except SpecError as e:
        return _fail(str(e))
    n_runs = len(exp.run_ids)
    print(f"campaign {exp.name} ({exp.manifest['campaign_id']}): {len(exp.jobs)} jobs, {n_runs} distinct runs, "
          f"results in {exp.root}", flush=True)
    launch(exp)
    counts = tally(exp, exp.root)
    print(f"campaign {exp.name} ({exp.manifest['campaign_id']}): "
          + ", ".join(f"{v} {k}" for k, v in counts.items() if v or k == "completed")
          + f"; traces in {Path(exp.root) / 'runs'}", flush=True)
    if counts["failed"] or counts["missing"]:
        print(f"stopwise: {counts['failed'] + counts['missing']} runs did not finish; rerun the same command to retry them",
              file=sys.stderr)
        return 1
    return 0


def cmd_run(argv: list[str]) -> int:
    from .app import outcome_line
    from .runner import run_spec
    from .spec import SpecError, compose, spec_from_config

    bad = [a for a in argv if a.startswith("-")]
    if bad:
        return _fail(f"unknown option {bad[0]!r}; run takes key=value overrides")
    try:
        cfg = compose(argv)
        spec = spec_from_config(cfg)
    except SpecError as e:
        return _fail(str(e))
    out = run_spec(spec, str(cfg.results_root))
    print(outcome_line(out))
    print(f"trace: {out.path}")
    return 1 if out.status == "failed" else 0


def cmd_rerun(argv: list[str]) -> int:
    from .rerun import rerun_one, resolve
    from .store import Store, StoreError

    ap = argparse.ArgumentParser(prog="stopwise rerun")
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
            print(f"[{i}/{len(ids)}] reproduced {rid}  largest difference {c.max_diff:.3g}", flush=True)
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

    from .query import load_runs
    from .store import StoreError

    ap = argparse.ArgumentParser(prog="stopwise ls")
    ap.add_argument("--campaign", default=None, help="campaign name or id")
    ap.add_argument("--root", default="results")
    a = ap.parse_args(argv)
    try:
        df = load_runs(a.root, a.campaign)
    except StoreError as e:
        return _fail(str(e))
    if df.empty:
        print(f"no runs under {a.root}")
        return 0
    show = df.drop(columns=["message"])
    with pd.option_context("display.max_rows", 500, "display.width", 200, "display.max_columns", 30,
                           "display.float_format", "{:.4g}".format):
        print(show.to_string(index=False))
    print(f"{len(df)} runs: " + ", ".join(f"{n} {s}" for s, n in df["status"].value_counts().items())
          + f"  (root {a.root})")
    return 0


def cmd_select(argv: list[str]) -> int:
    from .selection import format_table, parse_rule_arg, select
    from .stopping import RuleError
    from .store import StoreError

    ap = argparse.ArgumentParser(prog="stopwise select",
                                 description="selected iterate per run and stopping rule (oracle = reference only)")
    ap.add_argument("campaign", help="campaign name or id")
    ap.add_argument("--rule", action="append", default=None, metavar="NAME[:k=v,...]",
                    help="a stopping rule, repeatable (default: the campaign's rules plus oracle)")
    ap.add_argument("--root", default="results", help="results root (default: results)")
    try:
        a = ap.parse_args(argv)
    except SystemExit as e:
        return EXIT_BAD_INPUT if e.code else 0
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


COMMANDS = {"sweep": cmd_sweep, "run": cmd_run, "rerun": cmd_rerun, "ls": cmd_ls, "select": cmd_select}


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if not argv or argv[0] in ("-h", "--help", "help"):
        print(USAGE)
        return 0 if argv else EXIT_BAD_INPUT
    cmd, rest = argv[0], argv[1:]
    if cmd not in COMMANDS:
        return _fail(f"unknown command {cmd!r}; valid: {', '.join(COMMANDS)}")
    return COMMANDS[cmd](rest)


if __name__ == "__main__":
    sys.exit(main())
