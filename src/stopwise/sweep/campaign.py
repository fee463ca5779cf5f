"""Campaigns: expand a sweep, validate every job before anything runs, write the manifest,
and hand the pending runs, in chunks, to Hydra's multirun and whichever launcher is chosen.

Expansion uses Hydra's own override grammar and basic sweeper to list the jobs, composes
once per distinct combination of config-group choices (:mod:`stopwise.config.compose`)
and validates each job into a RunSpec, so bad input in any job is reported as one line
before a single file is written, and the manifest lists every run id before the first
run starts (which makes resume exact). Launch lists the store once, writes the pending
runs' identities into chunk files, and asks the launcher for one job per chunk; a chunk
executes its stored identities without composing again (:mod:`stopwise.sweep.chunks`).
"""
from __future__ import annotations

import hashlib
import math
import re
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from stopwise.config.compose import Composer, compose_job, hydra_context
from stopwise.config.spec import (
    RENAMED_SOLVER_KEYS,
    RunSpec,
    SpecError,
    TaskMismatch,
    campaigns_dir,
    canonical_json,
    data_keys,
    conf_dir,
    group_options,
    hydra_error_line,
    register_configs,
    solver_keys,
    spec_from_config,
)
from stopwise.results.store import Store, campaign_digest
from stopwise.solvers import get_solver

NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


def check_data(specs: list[RunSpec]) -> None:
    """Build one problem per distinct data source and split rule (the seed aside), so data
    errors (unknown feature, bad row indices, a missing file, an OpenML id that is not
    cached) are reported before anything is written. The other seeds' problems are built
    by the runs themselves (costly ones go through the on-disk problem cache).

    Every run's budget is checked against what its trace can record once n_train is known
    (:func:`stopwise.config.spec.check_trace_fits`). A solver that declares
    ``SolverDef.check`` (what it needs of the training rows, such as a positive definite
    Hessian) is checked on that problem too, once per solver, params and dataset: a pair
    that cannot run is one line naming the solver and the dataset. So is a solver that needs
    a dense design on a sparse problem too large to densify (``SolverDef.sparse``)."""
    from stopwise.config.spec import check_trace_fits
    from stopwise.data import cached_problem, prepare_problems
    from stopwise.problem.losses import resolve_loss
    from stopwise.solvers import get_solver

    firsts: dict[str, RunSpec] = {}
    keys = data_keys(specs)
    for key, s in zip(keys, specs):
        firsts.setdefault(key, s)
    try:
        prepare_problems(list(firsts.values()))
    except MemoryError as e:  # e.g. dataset.params.n=1e15: bad input, not a crash
        raise SpecError(f"a dataset of this sweep does not fit in memory: {' '.join(str(e).split())}") from None
    n_train = {key: cached_problem(s.dataset, s.split, s.seed).n_train for key, s in firsts.items()}
    seen: set[tuple] = set()
    for key, s in zip(keys, specs):  # what each budget can record, now that the training rows are known
        what = (key, s.budget["iterations"], s.budget["passes"], s.record["every"], s.record.get("per_pass"))
        if what not in seen:
            seen.add(what)
            check_trace_fits(s.budget, s.record, n_train[key])
    checked: set = set()
    for data, s in zip(keys, specs):
        sdef = get_solver(s.solver)
        if not sdef.sparse and ("dense", data, s.solver) not in checked:
            # a solver that needs a dense design: a sparse problem too large to densify is
            # refused now, in one line, rather than failing every run
            checked.add(("dense", data, s.solver))
            first = firsts[data]
            cached_problem(first.dataset, first.split, first.seed).check_dense(f"solver {s.solver!r}")
        if sdef.check is None:
            continue
        key = canonical_json([data, s.solver, s.identity()["solver"]["params"]])
        if key in checked:
            continue
        checked.add(key)
        first = firsts[data]
        problem = cached_problem(first.dataset, first.split, first.seed)
        try:
            sdef.check(problem.training_set(resolve_loss(problem.task, problem.loss, sdef.loss)), s.params)
        except SpecError as e:
            raise SpecError(f"{e} (dataset {s.dataset.get('name')!r}, seed {first.seed})") from None


# ---------------------------------------------------------------- campaign files

@dataclass
class CampaignFile:
    name: str
    path: Path
    text: str


def campaign_file(ref: str) -> CampaignFile:
    """A campaign by path (``my/trial.yaml``) or by name: ``campaigns/NAME.yaml`` in the
    working directory first, then the campaigns that ship with stopwise."""
    if ref.endswith((".yaml", ".yml")):
        path = Path(ref).expanduser()
        if not path.is_file():
            raise SpecError(f"campaign file {ref!r} does not exist")
        name = path.stem
        if not NAME.match(name):
            raise SpecError(f"campaign file name {path.name!r} is invalid: use letters, digits, '_', '-', '.'")
    else:
        if not NAME.match(ref or ""):
            raise SpecError(f"campaign name {ref!r} is invalid: use letters, digits, '_', '-', '.' "
                            "(or give a campaign file's path, ending in .yaml)")
        local = Path.cwd() / "campaigns" / f"{ref}.yaml"
        path = local if local.is_file() else campaigns_dir() / f"{ref}.yaml"
        name = ref
        if not path.is_file():
            here = sorted(p.stem for p in (Path.cwd() / "campaigns").glob("*.yaml"))
            known = sorted(set(here) | set(group_options("campaign")))
            raise SpecError(f"unknown campaign {ref!r}; valid: {', '.join(known) or '(none)'} "
                            "(or a path to a campaign file)")
    try:
        text = path.read_text()
    except (OSError, UnicodeDecodeError) as e:
        raise SpecError(f"campaign file {str(path)!r} cannot be read: {type(e).__name__}") from None
    return CampaignFile(name=name, path=path, text=text)


_PACKAGE = re.compile(r"^#\s*@package\s+(\S+)\s*$")


def _header_package(text: str) -> str:
    """The ``# @package`` of a config file's leading comments (Hydra's rule); a campaign
    file without one is global."""
    for line in text.splitlines():
        s = line.strip()
        if not s:
            continue
        if not s.startswith("#"):
            break
        m = _PACKAGE.match(s)
        if m:
            return m.group(1)
    return "_global_"


def load_campaign(cf: CampaignFile) -> tuple[str, dict[str, str], list[dict[str, str]]]:
    """Register the file's config (without its sweep lists) in Hydra's ConfigStore and
    return (the name to select it with, the common sweep params, the sub-sweeps)."""
    from hydra.core.config_store import ConfigStore
    from omegaconf import OmegaConf

    try:
        doc = OmegaConf.create(cf.text)
    except Exception as e:  # YAML syntax (yaml.YAMLError) or what OmegaConf refuses
        raise SpecError(f"campaign file {str(cf.path)!r} is not valid YAML: {' '.join(str(e).split())[:200]}") from None
    if not isinstance(doc, type(OmegaConf.create({}))):
        raise SpecError(f"campaign file {str(cf.path)!r} must be a mapping")
    params = OmegaConf.select(doc, "hydra.sweeper.params", default=None)
    common = {str(k): _sweep_text(v) for k, v in (OmegaConf.to_container(params) or {}).items()} if params is not None else {}
    subs: list[dict[str, str]] = []
    if "sweeps" in doc:
        raw = doc.sweeps
        raw = OmegaConf.to_container(raw) if OmegaConf.is_config(raw) else raw
        if not isinstance(raw, list) or not raw or not all(isinstance(s, dict) for s in raw):
            raise SpecError(f"campaign file {str(cf.path)!r}: sweeps must be a list of key: values mappings")
        subs = [{str(k): _sweep_text(v) for k, v in s.items()} for s in raw]
        del doc["sweeps"]
    name = f"_file_{hashlib.sha256(cf.text.encode()).hexdigest()[:12]}"
    ConfigStore.instance().store(group="campaign", name=name, node=doc, package=_header_package(cf.text))
    return name, common, subs


def _sweep_text(v: Any) -> str:
    if isinstance(v, list):
        return ",".join(str(x) for x in v)
    return str(v)


# ---------------------------------------------------------------- expansion

@dataclass
class Expansion:
    name: str
    base: list[str]                 # overrides common to every job (campaign selection + user's)
    jobs: list[list[str]]           # each kept job's full override list
    specs: list[RunSpec]            # one per distinct run id, in the manifest's order
    root: str
    manifest: dict[str, Any]
    launch_overrides: list[str] = field(default_factory=list)  # hydra... overrides for the launcher
    threads: int | None = None
    notes: list[str] = field(default_factory=list)  # one line each: collapsed keys, pairs left out

    @property
    def run_ids(self) -> list[str]:
        return self.manifest["run_ids"]


def sweep_jobs(composer: Composer, lines: list[str]) -> list[list[str]]:
    """Hydra's basic sweeper's cartesian product of the sweep overrides in ``lines``."""
    from hydra._internal.core_plugins.basic_sweeper import BasicSweeper
    from hydra.errors import HydraException

    try:
        parsed = composer.parser.parse_overrides(lines)
        return [list(j) for j in BasicSweeper.split_arguments(parsed, None)[0]]
    except HydraException as e:
        raise SpecError(hydra_error_line(e)) from None


def _check_file_names(specs) -> None:
    """Two different files never share a dataset name in one campaign (one line naming both)."""
    seen: dict[str, str] = {}
    for spec in specs:
        d = spec.dataset
        if d.get("source") != "file":
            continue
        path = str((d.get("params") or {}).get("path"))
        other = seen.setdefault(str(d.get("name")), path)
        if other != path:
            raise SpecError(f"dataset name {d.get('name')!r} is given to two files, {other} and {path}: "
                            "a ranking would merge them; name each with dataset.name=NAME")


# ---------------------------------------------------------------- OpenML suites

# keys a suite's expansion sets itself: a job's own value of them does not carry over
SUITE_SET_KEYS = ("dataset", "dataset.name", "dataset.params.suite", "dataset.params.splits", "seed",
                  "split.kind", "split.fold", "split.repeat", "split.train_rows", "split.val_rows", "split.test_rows")


def is_suite(cfg: dict) -> bool:
    return isinstance(cfg.get("dataset"), dict) and cfg["dataset"].get("source") == "openml_suite"


def _line_key(line: str) -> str:
    return line.lstrip("+~").split("=", 1)[0].strip()


def suite_jobs(cfg: dict, job: list[str], cache: dict[str, Any], replaced: set[str]) -> list[tuple[dict, list[str], Any]]:
    """One composed config per task and split of the suite a job names (``dataset=openml_suite``).

    Each is the config of the single-task job ``dataset=openml dataset.params.task_id=T
    dataset.name=<dataset>-t<T> split.kind=indices split.repeat=R split.fold=F seed=K`` with the
    job's other overrides, K being the split's index in the task's (repeat, fold) order: the
    run ids are those of that job written by hand. Returns (config, that job's overrides, the
    task). ``replaced`` collects the keys of ``SUITE_SET_KEYS`` the job itself set (a note says
    the expansion replaced them)."""
    from dataclasses import asdict

    from stopwise.core.params import ParamError, make_params
    from stopwise.data.errors import DataError
    from stopwise.data.openml_suite import SuiteParams, suite_tasks

    try:
        params = make_params(SuiteParams, dict(cfg["dataset"].get("params") or {}), "dataset.params (openml_suite)")
        key = canonical_json(asdict(params))
        if key not in cache:
            cache[key] = suite_tasks(params)
    except (ParamError, DataError) as e:
        raise SpecError(str(e)) from None
    _, tasks = cache[key]
    keep = []
    for line in job:
        k = _line_key(line)
        if k in SUITE_SET_KEYS:
            if k in ("seed", "dataset.name", "split.kind", "split.fold", "split.repeat"):
                replaced.add(k)
            continue
        keep.append(line)
    base = {k: v for k, v in cfg["dataset"].items() if k not in ("name", "source", "params")}
    out = []
    for t in tasks:
        splits = t.splits[:params.splits] if params.splits else t.splits
        for i, (r, f) in enumerate(splits):
            c = dict(cfg)
            c["dataset"] = dict(base, name=t.name, source="openml", params={"task_id": t.task_id})
            c["split"] = dict(cfg.get("split") or {}, kind="indices", repeat=r, fold=f,
                              train_rows=None, val_rows=None, test_rows=None)
            c["seed"] = i
            lines = keep + ["dataset=openml", f"dataset.params.task_id={t.task_id}", f"dataset.name={t.name}",
                            "split.kind=indices", f"split.repeat={r}", f"split.fold={f}", f"seed={i}"]
            out.append((c, lines, t))
    return out


def suite_task_fits(kind: str, solver_tasks: tuple[str, ...]) -> bool:
    """Whether a solver can run on a task of this kind (a classification task is binary or
    multiclass, which only loading its data tells: a solver handling either fits)."""
    if kind == "regression":
        return "regression" in solver_tasks
    return bool({"binary", "multiclass"} & set(solver_tasks))


def suite_note(rec: dict, tasks: list, replaced: set[str]) -> str:
    """One line: what a suite expanded to."""
    n_splits = sorted({len(t.splits) for t in tasks})
    label = rec.get("alias") or rec.get("name") or ""
    text = (f"suite {rec['suite_id']} ({label}, task list fetched {rec.get('fetched')}): {len(tasks)} task(s) as "
            f"datasets <name>-t<task>, each on its own folds with the seed as the split's index "
            f"({'/'.join(map(str, n_splits))} splits per task)")
    if rec.get("unsupported"):
        text += f"; left out tasks that are not supervised classification or regression: " \
                f"{', '.join(map(str, rec['unsupported']))}"
    if replaced:
        text += f"; the suite sets {', '.join(sorted(replaced))} itself (the job's values are not used)"
    return text


def expand(campaign: str | None, overrides: list[str], strict: bool = False) -> Expansion:
    """Expand a campaign plus command-line overrides into validated runs and a manifest.

    A ``solver.KEY`` that some swept solvers have applies to them and collapses for the
    others (one note line); a key none of them has is an error. A solver x dataset pair
    that cannot run (the solver does not handle the dataset's task) is left out with one
    note line, or refused when ``strict``.
    """
    from hydra.core.override_parser.types import OverrideType

    for o in overrides:
        if o.lstrip("+~").split("=", 1)[0].strip() == "campaign_id":
            raise SpecError(f"{o!r} is not allowed: campaign_id is set by stopwise sweep from the campaign's hash")
    user = list(overrides)
    cf = campaign_file(campaign) if campaign else None
    name = cf.name if cf else "adhoc"
    with hydra_context():
        common: dict[str, str] = {}
        subs: list[dict[str, str]] = [{}]
        base: list[str] = []
        if cf is not None:
            reg, common, file_subs = load_campaign(cf)
            subs = file_subs or [{}]
            base.append(f"+campaign={reg}")
        composer = Composer()
        jobs: list[list[str]] = []
        for sub in subs:
            params = {**common, **sub}
            jobs += sweep_jobs(composer, [f"{k}={v}" for k, v in params.items()] + base + user)
        specs: dict[str, RunSpec] = {}
        run_ids: list[str] = []
        kept: list[list[str]] = []
        roots, threads, launch = set(), set(), set()
        collapsed: dict[str, set[str]] = {}
        applied: set[str] = set()
        swept_solvers: list[str] = []
        left_out: dict[tuple[str, str], str] = {}
        rules: list = []
        suites: dict[str, Any] = {}    # suite params (canonical JSON) -> (record, tasks)
        replaced: set[str] = set()
        for job in jobs:
            shown = " ".join(x for x in job if not x.startswith("+campaign="))

            def where(e: Exception, shown: str = shown) -> SpecError:
                return SpecError(f"{e} (in job: {shown})" if len(jobs) > 1 else str(e))

            def named(e: SpecError) -> SpecError:
                if cf is not None:  # name the campaign's file, not its registered copy
                    return SpecError(str(e).replace(f"campaign/{reg}", str(cf.path)))
                return e

            try:
                shaping, values = composer.split(job)
                b = composer.base(shaping)
                solver_cfg = b.plain.get("solver") if isinstance(b.plain.get("solver"), dict) else {}
                solver = str(solver_cfg.get("name"))
                if solver not in swept_solvers:
                    swept_solvers.append(solver)
                use = []
                for o in values:
                    key = o.key_or_group
                    if key.startswith("solver.") and key.count(".") == 1 and o.type == OverrideType.CHANGE:
                        k = key.split(".", 1)[1]
                        if k in RENAMED_SOLVER_KEYS and k not in solver_cfg:
                            raise SpecError(f"solver.{k} is now solver.{RENAMED_SOLVER_KEYS[k]} "
                                            "(one name for the same setting across solvers)")
                        if k not in solver_cfg:
                            collapsed.setdefault(k, set()).add(solver)
                            continue
                        applied.add(k)
                    use.append(o)
                cfg = composer.apply_shared(b, use)
                if is_suite(cfg):
                    cfg = composer.apply(b, use)  # a config of its own: the suite's tasks replace its sections
                    variants = suite_jobs(cfg, job, suites, replaced)
                else:
                    variants = [(cfg, job, None)]
            except SpecError as e:
                raise where(named(e)) from None
            for cfg, vjob, task in variants:
                vshown = " ".join(x for x in vjob if not x.startswith("+campaign="))
                try:
                    if task is not None and not suite_task_fits(task.kind, get_solver(solver).tasks):
                        if strict:
                            raise where(SpecError(f"solver {solver!r} does not handle {task.kind} problems such as "
                                                  f"dataset {task.name!r}"), vshown)
                        left_out[(solver, task.name)] = task.kind
                        continue
                    spec = spec_from_config(cfg)
                except TaskMismatch as e:
                    if strict:
                        raise where(e, vshown) from None
                    left_out[(e.solver, e.dataset)] = e.task
                    continue
                except SpecError as e:
                    raise where(named(e), vshown) from None
                kept.append(vjob)
                roots.add(str(cfg.get("results_root")))
                threads.add(cfg.get("threads"))
                launch.add(tuple(x for x in shaping if composer.parse(x).is_hydra_override()))
                if spec.stopping not in rules:  # every job's rule, also of jobs that share a run
                    rules.append(spec.stopping)
                if spec.run_id not in specs:
                    specs[spec.run_id] = spec
                    run_ids.append(spec.run_id)
    _check_file_names(specs.values())
    notes: list[str] = []
    for k in sorted(collapsed):
        if k not in applied:
            valid = sorted(set().union(*(solver_keys(s) for s in swept_solvers)))
            who = ", ".join(swept_solvers)
            raise SpecError(f"solver.{k} is not a parameter of {'solver' if len(swept_solvers) == 1 else 'any solver of this sweep'} "
                            f"({who}); valid: {', '.join(valid)}")
        notes.append(f"solver.{k} does not apply to {', '.join(sorted(collapsed[k]))}: collapsed for "
                     f"{'it' if len(collapsed[k]) == 1 else 'them'}")
    for rec, tasks in suites.values():
        notes.append(suite_note(rec, tasks, replaced))
    if left_out:
        pairs = ", ".join(f"{s} x {d} ({t})" for (s, d), t in left_out.items())
        if not kept:
            raise SpecError(f"no job of this sweep can run: {pairs} (the solver does not handle the dataset's task)")
        notes.append(f"left out {len(left_out)} solver x dataset {'pair' if len(left_out) == 1 else 'pairs'} "
                     f"that cannot run: {pairs}; --strict makes this an error")
    if len(roots) != 1:
        raise SpecError("results_root must be the same for every job of a sweep")
    if len(threads) != 1:
        raise SpecError("threads must be the same for every job of a sweep")
    if len(launch) != 1:
        raise SpecError("hydra launcher overrides must be the same for every job of a sweep")
    digest = campaign_digest(name, run_ids, rules)
    file_params = dict(common)
    manifest = {
        "campaign_id": digest[:16], "digest": digest, "name": name,
        "definition": {"campaign": campaign, "overrides": user, "sweep_params": file_params,
                       "campaign_file": cf.text if cf else ""},
        "run_ids": run_ids, "jobs": len(kept), "stopping": rules, "created": time.time(),
    }
    if subs != [{}]:
        manifest["definition"]["sub_sweeps"] = subs
    if suites:  # what each suite expanded to (the task list as cached, with its fetch date)
        manifest["suites"] = {str(rec["suite_id"]): {k: rec.get(k) for k in ("alias", "name", "tasks", "fetched", "server")}
                              for rec, _ in suites.values()}
    if notes:
        manifest["notes"] = notes
    return Expansion(name=name, base=base + user, jobs=kept, specs=[specs[r] for r in run_ids],
                     root=roots.pop(), manifest=manifest, launch_overrides=list(launch.pop()),
                     threads=threads.pop(), notes=notes)


# ---------------------------------------------------------------- launch

def quote(value: str) -> str:
    """A string as one quoted Hydra override value."""
    return "'" + value.replace("\\", "\\\\").replace("'", "\\'") + "'"


def launcher_workers(exp: Expansion) -> tuple[str, int]:
    """(the launcher's kind, how many chunks it runs at once), read from Hydra's own
    composition of the sweep's launcher overrides (none: Hydra's basic launcher)."""
    if not exp.launch_overrides:
        return "basic", 1
    with hydra_context():
        cfg = compose_job(exp.launch_overrides + [f"results_root={quote(exp.root)}"], return_hydra_config=True,
                          config_name="launch")
    target = str(cfg.hydra.launcher.get("_target_", ""))
    if "joblib" in target.lower():
        n = int(cfg.hydra.launcher.get("n_jobs") or 1)
        return "joblib", n if n > 0 else 1
    if "submitit" in target.lower():
        return "queue", int(cfg.hydra.launcher.get("array_parallelism") or 1)
    return "basic", 1


def chunk_count(pending: int, kind: str, workers: int, size: int | None = None) -> int:
    """How many chunks ``pending`` runs are cut into: ``--chunk N`` runs each when given;
    one for the in-process launcher; two per worker for a local pool (Hydra composes the
    config of every launched job (``conf/launch.yaml``, with Hydra's own settings about 0.2 s
    each) in the launching process and again in the worker, so few chunks; :func:`stopwise.sweep.chunks.cut` balances them); for a
    queue, one array task per worker at most and at least 16 runs per task (an array task
    starts a Python process of its own)."""
    if pending <= 0:
        return 0
    if size is not None:
        return math.ceil(pending / size)
    if kind == "basic":
        return 1
    if kind == "joblib":
        return min(pending, 2 * workers)
    return max(1, min(workers, math.ceil(pending / 16)))


def launch(exp: Expansion, chunk: int | None = None) -> dict[str, Any]:
    """Write the manifest, then run the pending runs (missing or failed) through Hydra's
    multirun, one launcher job per chunk. Returns what was done (``pending``, ``chunks``)."""
    from stopwise.sweep.scheduler import quiet_repeats

    quiet_repeats()  # the scheduler's repeated messages: each distinct one once per sweep
    import hydra

    from stopwise.sweep import chunks as plan
    from stopwise.sweep import task as app

    store = Store(exp.root)
    status = store.statuses(exp.run_ids)
    pending = [s for s in exp.specs if status.get(s.run_id) not in ("completed", "diverged")]
    if pending:
        check_data(pending)  # bad data input: one line, before any file is written
    old = store.read_campaign(exp.manifest["campaign_id"])
    if old is not None:  # keep the original creation time on resume
        exp.manifest["created"] = old.get("created", exp.manifest["created"])
    store.write_campaign(exp.manifest)
    if not pending:
        return {"pending": 0, "chunks": 0}
    kind, workers = launcher_workers(exp)
    k = chunk_count(len(pending), kind, workers, chunk)
    cid = exp.manifest["campaign_id"]
    sizes = plan.write_plan(store, cid, pending, k, total=len(exp.run_ids), done_before=len(exp.run_ids) - len(pending))
    k = len(sizes)
    argv = ["stopwise", "--multirun", *exp.launch_overrides, f"results_root={quote(exp.root)}",
            f"campaign_id={cid}", f"+chunk={','.join(str(i) for i in range(k))}"]
    if exp.threads is not None:
        argv.append(f"threads={exp.threads}")
    register_configs()
    saved = sys.argv
    sys.argv = argv
    try:
        # conf/launch.yaml: a launched job runs stored identities, so Hydra composes only its
        # settings (a few ms per job, in this process and again in each worker or array task)
        hydra.main(config_path=str(conf_dir()), config_name="launch", version_base="1.3")(app.task)()
    finally:
        sys.argv = saved
    return {"pending": len(pending), "chunks": k}


def tally(exp_or_manifest: Any, root: str | Path) -> dict[str, int]:
    """Runs of a campaign by stored status. The chunks of the launch left each trace's status
    with its file's stamp (:func:`stopwise.sweep.chunks.chunk_statuses`); they go into the
    status index first, so the count opens only traces written by someone else."""
    from stopwise.sweep.chunks import chunk_statuses

    manifest = exp_or_manifest.manifest if isinstance(exp_or_manifest, Expansion) else exp_or_manifest
    store = Store(root)
    store.remember(chunk_statuses(store, manifest["campaign_id"]))
    status = store.statuses(manifest["run_ids"])
    counts = {"completed": 0, "diverged": 0, "failed": 0, "missing": 0}
    for rid in manifest["run_ids"]:
        st = status.get(rid, "missing")
        counts[st if st in counts else "failed"] += 1
    return counts
