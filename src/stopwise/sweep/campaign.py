"""Campaigns: expand a sweep, validate every job before anything runs, write the manifest,
and hand the launch to Hydra's multirun (its sweeper and whichever launcher is chosen).

The sweep is expanded here with Hydra's own override parser and basic sweeper, so bad
input in any job is reported as one line before a single file is written, and the
manifest lists every run id before the first run starts (which makes resume exact).
"""
from __future__ import annotations

import re
import sys
import time
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

from stopwise.config.spec import (
    RunSpec,
    SpecError,
    campaigns_dir,
    conf_dir,
    group_options,
    hydra_error_line,
    register_configs,
    spec_from_config,
)
from stopwise.results.store import Store, campaign_digest

NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


@contextmanager
def hydra_context() -> Iterator[Any]:
    """Initialize Hydra on stopwise's config dir once for many compositions."""
    from hydra import initialize_config_dir
    from hydra.core.global_hydra import GlobalHydra

    register_configs()
    with initialize_config_dir(config_dir=str(conf_dir()), version_base="1.3"):
        yield GlobalHydra.instance()


def _compose(overrides: list[str]):
    from hydra import compose
    from hydra.errors import HydraException
    from omegaconf.errors import OmegaConfBaseException

    try:
        return compose(config_name="config", overrides=overrides)
    except (HydraException, OmegaConfBaseException) as e:
        raise SpecError(hydra_error_line(e)) from None


def check_data(specs: list[RunSpec]) -> None:
    """Build each distinct problem once, so data errors (unknown feature, bad row indices,
    a missing file, an OpenML id that is not cached) are reported before anything is
    written; then store them in the processed-problem cache for the runs (in any process)."""
    from stopwise.data import prepare_problems

    try:
        prepare_problems(specs)
    except MemoryError as e:  # e.g. dataset.params.n=1e15: bad input, not a crash
        raise SpecError(f"a dataset of this sweep does not fit in memory: {' '.join(str(e).split())}") from None


def campaign_file(name: str) -> Path:
    if not NAME.match(name or ""):
        raise SpecError(f"campaign name {name!r} is invalid: use letters, digits, '_', '-', '.'")
    path = campaigns_dir() / f"{name}.yaml"
    if not path.is_file():
        raise SpecError(f"unknown campaign {name!r}; valid: {', '.join(group_options('campaign')) or '(none)'}")
    return path


@dataclass
class Expansion:
    name: str
    base: list[str]                 # overrides common to every job (campaign selection + user's)
    jobs: list[list[str]]           # each job's full override list
    specs: list[RunSpec]            # one per job (several jobs may share a run id)
    root: str
    manifest: dict[str, Any]

    @property
    def run_ids(self) -> list[str]:
        return self.manifest["run_ids"]


def expand(campaign: str | None, overrides: list[str]) -> Expansion:
    """Expand a campaign plus command-line overrides into validated jobs and a manifest."""
    from hydra._internal.core_plugins.basic_sweeper import BasicSweeper
    from hydra.core.override_parser.overrides_parser import OverridesParser
    from hydra.errors import HydraException
    from omegaconf import OmegaConf

    name = campaign or "adhoc"
    file_params: dict[str, str] = {}
    text = ""
    base = []
    if campaign:
        path = campaign_file(campaign)
        text = path.read_text()
        doc = OmegaConf.load(path)
        params = OmegaConf.select(doc, "hydra.sweeper.params", default=None)
        if params is not None:
            file_params = {str(k): str(v) for k, v in OmegaConf.to_container(params).items()}
        base.append(f"+campaign={campaign}")
    for o in overrides:
        if o.lstrip("+~").split("=", 1)[0].strip() == "campaign_id":
            raise SpecError(f"{o!r} is not allowed: campaign_id is set by stopwise sweep from the campaign's hash")
    user = list(overrides)
    with hydra_context() as gh:
        parser = OverridesParser.create(config_loader=gh.config_loader())
        try:
            parsed = parser.parse_overrides([f"{k}={v}" for k, v in file_params.items()] + base + user)
            jobs = BasicSweeper.split_arguments(parsed, None)[0]
        except HydraException as e:
            raise SpecError(hydra_error_line(e)) from None
        specs, roots = [], set()
        for job in jobs:
            try:
                cfg = _compose(list(job))
                specs.append(spec_from_config(cfg))
            except SpecError as e:
                shown = " ".join(o for o in job if not o.startswith("+campaign="))
                raise SpecError(f"{e} (in job: {shown})" if len(jobs) > 1 else str(e)) from None
            roots.add(str(cfg.results_root))
    if len(roots) != 1:
        raise SpecError("results_root must be the same for every job of a sweep")
    check_data(specs)
    run_ids: list[str] = []
    for s in specs:
        if s.run_id not in run_ids:
            run_ids.append(s.run_id)
    rules = []
    for s in specs:
        r = s.stopping
        if r not in rules:
            rules.append(r)
    digest = campaign_digest(name, run_ids, rules)
    manifest = {
        "campaign_id": digest[:16], "digest": digest, "name": name,
        "definition": {"campaign": campaign, "overrides": user, "sweep_params": file_params,
                       "campaign_file": text},
        "run_ids": run_ids, "jobs": len(jobs), "stopping": rules, "created": time.time(),
    }
    return Expansion(name=name, base=base + user, jobs=[list(j) for j in jobs], specs=specs,
                     root=roots.pop(), manifest=manifest)


def launch(exp: Expansion, extra_hydra: list[str] | None = None) -> None:
    """Run the expanded sweep through Hydra's multirun (its sweeper and launcher)."""
    from stopwise.sweep.scheduler import quiet_repeats; quiet_repeats()  # noqa: E702 (scheduler messages once per sweep)
    import hydra

    from stopwise.sweep import task as app

    store = Store(exp.root)
    old = store.read_campaign(exp.manifest["campaign_id"])
    if old is not None:  # keep the original creation time on resume
        exp.manifest["created"] = old.get("created", exp.manifest["created"])
    store.write_campaign(exp.manifest)
    file_params = exp.manifest["definition"]["sweep_params"]
    argv = ["stopwise", "--multirun", *[f"{k}={v}" for k, v in file_params.items()], *exp.base,
            f"campaign_id={exp.manifest['campaign_id']}", *(extra_hydra or [])]
    register_configs()
    saved = sys.argv
    sys.argv = argv
    try:
        hydra.main(config_path=str(conf_dir()), config_name="config", version_base="1.3")(app.task)()
    finally:
        sys.argv = saved


def tally(exp_or_manifest: Any, root: str | Path) -> dict[str, int]:
    manifest = exp_or_manifest.manifest if isinstance(exp_or_manifest, Expansion) else exp_or_manifest
    store = Store(root)
    counts = {"completed": 0, "diverged": 0, "failed": 0, "missing": 0}
    for rid in manifest["run_ids"]:
        meta = store.run_meta(rid)
        st = meta.get("status") if meta else "missing"
        counts[st if st in counts else "failed"] += 1
    return counts
