"""Composition once per combination of group choices gives exactly what Hydra gives when it
composes every job from scratch (the reference: ``hydra.compose`` per job, Hydra's own
defaults-list and override semantics), for every shipped campaign and for generated sweeps
that use every kind of override (sweeps, ranges, glob, ``+``, ``++``, ``~``, dict values,
interpolations)."""
from __future__ import annotations

import random
import time

import pytest
from omegaconf import OmegaConf

import stopwise
from stopwise.config.compose import Composer, compose_cached, compose_job, hydra_context
from stopwise.config.spec import SpecError, campaigns_dir, spec_from_config
from stopwise.sweep.campaign import CampaignFile, load_campaign, sweep_jobs

CAMPAIGNS = sorted(p.stem for p in campaigns_dir().glob("*.yaml"))

# pieces of generated sweeps: (overrides, what they exercise)
PIECES = [
    ["dataset=diabetes,wellposed"],
    ["solver=gd,nesterov,heavy_ball"],
    ["solver=glob(gd*)"],
    ["solver.step_scale=0.5,1,1.5"],
    ["seed=range(0,3)"],
    ["dataset=wellposed", "seed=range(5,8)", "dataset.params.seed=${seed}"],  # the seed read by an interpolation
    ["budget.iterations=20,30"],
    ["++record.every=2"],
    ["+budget=long"],
    ["~split.fold"],
    ["split={kind:random,test:0.3,val:0.2}"],
    ["budget.passes=${budget.iterations}"],
    ["split.val=0.1", "split.val=0.25"],  # the same key twice: the last one wins
    ["stopping=holdout,budget"],
]


def per_job(job: list[str]) -> dict:
    return OmegaConf.to_container(compose_job(job), resolve=True)


def generated_sweeps(n: int, seed: int = 0) -> list[list[str]]:
    rng = random.Random(seed)
    out = []
    for _ in range(n):
        picks = rng.sample(range(len(PIECES)), k=rng.randint(2, 4))
        sweep = [o for i in sorted(picks) for o in PIECES[i]]
        if "+budget=long" in sweep:  # a group add of an already chosen group is an error: change it
            sweep[sweep.index("+budget=long")] = "budget=long"
        out.append(sweep)
    return out


def shared(composer: Composer, job: list[str]) -> dict:
    """The job's config as a sweep's expansion makes it (shared sections for seed-only changes)."""
    shaping, values = composer.split(job)
    return composer.apply_shared(composer.base(shaping), values)


def compare(jobs: list[list[str]], limit: int | None = None, seed: int = 0) -> int:
    """Compose ``jobs`` both ways (all of them, or a seeded sample of ``limit``); equal configs
    and equal run ids required. Returns the number compared."""
    composer = Composer()
    sample = jobs if limit is None or len(jobs) <= limit else random.Random(seed).sample(jobs, limit)
    for job in sample:
        mine = composer.config(job)
        ref = per_job(job)
        assert mine == ref, job
        assert shared(composer, job) == ref, job
        assert spec_from_config(mine).run_id == spec_from_config(ref).run_id
    return len(sample)


@pytest.mark.parametrize("campaign", CAMPAIGNS)
def test_every_campaign_composes_as_hydra_composes_each_job(campaign):
    with hydra_context():
        path = campaigns_dir() / f"{campaign}.yaml"
        reg, common, subs = load_campaign(CampaignFile(campaign, path, path.read_text()))
        composer = Composer()
        for sub in subs or [{}]:
            lines = [f"{k}={v}" for k, v in {**common, **sub}.items()]
            jobs = sweep_jobs(composer, lines + [f"+campaign={reg}"])
            # the registered copy of the file composes as the file itself does (Hydra's file source;
            # a file with sub-sweeps is not a plain Hydra config: only its registered copy composes)
            for job in random.Random(1).sample(jobs, 0 if subs else min(3, len(jobs))):
                as_file = [f"+campaign={campaign}" if x == f"+campaign={reg}" else x for x in job]
                assert per_job(job) == per_job(as_file)
            assert compare(jobs, limit=12) == min(12, len(jobs))
            assert len(composer.bases) <= len({tuple(x for x in j if "=" in x and x.split("=")[0] in
                                                     ("dataset", "solver", "+campaign")) for j in jobs})


@pytest.mark.slow
@pytest.mark.parametrize("campaign", CAMPAIGNS)
def test_every_job_of_every_campaign_composes_as_hydra_composes_it(campaign):
    with hydra_context():
        path = campaigns_dir() / f"{campaign}.yaml"
        reg, common, subs = load_campaign(CampaignFile(campaign, path, path.read_text()))
        composer = Composer()
        for sub in subs or [{}]:
            jobs = sweep_jobs(composer, [f"{k}={v}" for k, v in {**common, **sub}.items()] + [f"+campaign={reg}"])
            compare(jobs)


@pytest.mark.parametrize("sweep", generated_sweeps(10), ids=lambda s: " ".join(s)[:60])
def test_generated_sweeps_compose_as_hydra_composes_each_job(sweep):
    with hydra_context():
        composer = Composer()
        try:
            jobs = sweep_jobs(composer, sweep)
        except SpecError:
            pytest.skip("not a valid sweep")
        errors_mine, errors_ref = [], []
        for job in random.Random(2).sample(jobs, min(8, len(jobs))):
            try:
                mine = composer.config(job)
                assert shared(composer, job) == mine, job
            except SpecError as e:
                errors_mine.append(str(e))
                mine = None
            try:
                ref = per_job(job)
            except SpecError as e:
                errors_ref.append(str(e))
                ref = None
            assert mine == ref, job
        assert errors_mine == errors_ref  # the same jobs fail, with the same line


def test_the_fast_path_and_hydra_agree_on_type_conversion_and_errors():
    """Leaf values are converted by the schema exactly as Hydra converts them (int -> float
    field, a string into a float field refused with Hydra's line)."""
    with hydra_context():
        composer = Composer()
        for job in (["solver=gd", "solver.step_scale=1"], ["seed=7", "budget.iterations=12"],
                    ["dataset.features=[age,bmi]"], ["solver=sgd", "solver.batch=0.25", "solver.average=tail"]):
            assert composer.config(job) == per_job(job)
        assert isinstance(composer.config(["solver.step_scale=1"])["solver"]["step_scale"], float)
        for bad in (["solver.step_scale=fast"], ["solver.no_such_key=1"], ["budget.iterations=many"]):
            with pytest.raises(SpecError) as mine:
                composer.config(bad)
            with pytest.raises(SpecError) as ref:
                per_job(bad)
            assert str(mine.value) == str(ref.value)


def test_a_composition_is_paid_once_per_group_choice():
    with hydra_context():
        composer = Composer()
        jobs = sweep_jobs(composer, ["solver=gd,nesterov", "seed=range(0,40)", "solver.step_scale=0.5,1"])
        for job in jobs:
            composer.config(job)
    assert len(jobs) == 160 and len(composer.bases) == 2


def test_the_python_api_composes_once_per_group_choice(tmp_path, monkeypatch):
    """stopwise.run and load_problem in a loop: Hydra composes for a new group choice only
    (counted by watching Hydra's compose), and the results equal a fresh composition."""
    import stopwise.config.compose as C

    calls = []
    real = C.compose_job
    monkeypatch.setattr(C, "compose_job", lambda job, **kw: calls.append(list(job)) or real(job, **kw))
    C._API.clear()
    for seed in range(5):
        out = stopwise.run(["dataset=wellposed", "solver=gd", f"seed={seed}", "budget.iterations=5"], root=tmp_path)
        assert out.status == "completed"
        p = stopwise.load_problem(["dataset=wellposed", f"seed={seed}"])
        assert p.X_train.shape[0] > 0
    assert calls == [["dataset=wellposed", "solver=gd"], ["dataset=wellposed"]]
    assert compose_cached(["dataset=wellposed", "seed=3"]) == per_job_fresh(["dataset=wellposed", "seed=3"])


def per_job_fresh(job):
    with hydra_context():
        return per_job(job)


@pytest.mark.parametrize("line", ["seed=0", "seed=17", "solver.step_scale=-0.25", "budget.iterations=300",
                                  "split.val=0.10", "seed=-0"])
def test_numbers_parsed_without_the_grammar_are_what_the_grammar_makes(line):
    with hydra_context():
        composer = Composer()
        composer.parse(line.split("=")[0] + "=5")  # the template comes first
        fast = composer.parse(line)
        (ref,) = composer.parser.parse_overrides([line])
    assert fast == ref and type(fast.value()) is type(ref.value())


def test_numbers_after_the_first_of_a_key_are_stored_as_hydra_stores_them():
    """A key probes Hydra once per number type; later numbers of that type follow the stored
    conversion (as given, or float on a float node). Every job still equals Hydra's own."""
    with hydra_context():
        composer = Composer()
        jobs = [["seed=3"], ["seed=11"], ["seed=-4"],                                  # int node
                ["solver.step_scale=1"], ["solver.step_scale=7"], ["solver.step_scale=0.25"],  # float node
                ["budget.passes=2"], ["budget.passes=5"], ["budget.passes=0.5"],        # optional float
                ["split.val=0"], ["split.val=0.3"]]
        for job in jobs:
            mine, ref = composer.config(job), per_job(job)
            assert mine == ref, job
            key = job[0].split("=")[0].split(".")
            a, b = mine, ref
            for k in key:
                a, b = a[k], b[k]
            assert type(a) is type(b), (job, type(a), type(b))
        for bad in (["seed=1.5"], ["budget.iterations=2.5"]):  # a float where Hydra refuses one
            try:
                ref = per_job(bad)
            except SpecError as e:
                with pytest.raises(SpecError) as mine:
                    composer.config(bad)
                assert str(mine.value) == str(e)
            else:
                assert composer.config(bad) == ref
