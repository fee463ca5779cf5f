"""The ``stopwise`` command. ``sweep`` and ``run`` hand their remaining arguments to Hydra."""
from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

EXIT_BAD_INPUT = 2

USAGE = """stopwise COMMAND [args]

commands:
  sweep [CAMPAIGN] [--jobs N] [overrides]
                                 run a campaign (a sweep over Hydra overrides); --jobs N runs
                                 N at once (Hydra's joblib launcher), hydra/launcher=slurm on a cluster
  run [overrides]                run one configuration
  rerun ID [--root DIR]          recompute a run or a whole campaign and compare with the stored traces
  ls [--campaign C] [--root DIR] list stored runs
  verify [ROOT] [--quarantine]   check every trace and manifest; move bad files to ROOT/quarantine/
"""


class BadArguments(ValueError):
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
    from .spec import SpecError

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


def _split_jobs(args: list[str]) -> tuple[list[str], str | None]:
    """Take ``--jobs N`` / ``--jobs=N`` out of the sweep's arguments."""
    rest, jobs, i = [], None, 0
    while i < len(args):
        a = args[i]
        if a == "--jobs":
            jobs = args[i + 1] if i + 1 < len(args) else ""
            i += 2
            continue
        if a.startswith("--jobs="):
            jobs = a.split("=", 1)[1]
        else:
            rest.append(a)
        i += 1
    return rest, jobs


def cmd_sweep(argv: list[str]) -> int:
    from .campaign import expand, launch, tally
    from .spec import SpecError

    campaign = None
    rest, jobs = _split_jobs(list(argv))
    if rest and "=" not in rest[0] and not rest[0].startswith("-"):
        campaign = rest.pop(0)
    bad = [a for a in rest if a.startswith("-")]
    if bad:
        return _fail(f"unknown option {bad[0]!r}; sweep takes a campaign name, --jobs N and key=value overrides")
    note = ""
    try:
        if jobs is not None:
            extra, note = parallel_overrides(jobs, rest)
            rest += extra
        exp = expand(campaign, rest)
    except SpecError as e:
        return _fail(str(e))
    n_runs = len(exp.run_ids)
    print(f"campaign {exp.name} ({exp.manifest['campaign_id']}): {len(exp.jobs)} jobs, {n_runs} distinct runs, "
          f"results in {exp.root}" + (f"; {note}" if note else ""), flush=True)
    stopped = ""
    try:
        launch(exp)
    except Exception as e:  # the launcher itself gave up (a worker died, the cluster refused a job)
        stopped = " ".join(f"{type(e).__name__}: {e}".split())[:300]
        print(f"stopwise: the launcher stopped early: {stopped}", file=sys.stderr, flush=True)
    counts = tally(exp, exp.root)
    print(f"campaign {exp.name} ({exp.manifest['campaign_id']}): "
          + ", ".join(f"{v} {k}" for k, v in counts.items() if v or k == "completed")
          + f"; traces in {Path(exp.root) / 'runs'}", flush=True)
    if counts["failed"] or counts["missing"]:
        print(f"stopwise: {counts['failed'] + counts['missing']} runs did not finish; rerun the same command to retry them",
              file=sys.stderr)
        return 1
    return 1 if stopped else 0


def cmd_run(argv: list[str]) -> int:
    from .app import outcome_line
    from .runner import run_spec
    from .spec import SpecError, compose, spec_from_config

    bad = [a for a in argv if a.startswith("-")]
    if bad:
        return _fail(f"unknown option {bad[0]!r}; run takes key=value overrides")
    from .campaign import check_data

    try:
        cfg = compose(argv)
        spec = spec_from_config(cfg)
        check_data([spec])
    except SpecError as e:
        return _fail(str(e))
    out = run_spec(spec, str(cfg.results_root))
    print(outcome_line(out))
    print(f"trace: {out.path}")
    return 1 if out.status == "failed" else 0


def cmd_rerun(argv: list[str]) -> int:
    from .rerun import rerun_one, resolve
    from .store import Store, StoreError

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

    ap = ArgParser(prog="stopwise ls")
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


def cmd_verify(argv: list[str]) -> int:
    from .spec import SpecError
    from .verify import QUARANTINE, verify_root

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
    summary = (f"checked {rep.traces} {'trace' if rep.traces == 1 else 'traces'} and {rep.manifests} "
               f"{'manifest' if rep.manifests == 1 else 'manifests'} under {a.root}: ")
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


COMMANDS = {"sweep": cmd_sweep, "run": cmd_run, "rerun": cmd_rerun, "ls": cmd_ls, "verify": cmd_verify}


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


if __name__ == "__main__":
    sys.exit(main())
