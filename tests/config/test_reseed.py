"""Configs that differ only in their seed reuse one validation (spec_from_config's reseed
memo). The reference is validation without the memo and the run id's definition: the
SHA-256 of the identity's canonical JSON."""
from __future__ import annotations

import dataclasses
import hashlib

import pytest

import stopwise.config.spec as spec_module
from stopwise.config.compose import compose_cached
from stopwise.config.spec import SpecError, canonical_json, spec_from_config, spec_from_identity
from stopwise.solvers import SOLVERS
from stopwise.solvers.base import register

SWEEPS = [
    ["dataset=diabetes", "solver=gd", "solver.step_scale=0.7"],
    ["dataset=wellposed", "solver=sgd", "solver.batch=0.1", "record.every=3"],
    # a halting rule enters the identity ("halt", before "seed" in canonical order)
    ["dataset=wellposed", "solver=gd", "stopping=discrepancy", "stopping.halt=true"],
    # a generator whose own params carry a seed of their own
    ["dataset=wellposed", "dataset.params.seed=7", "solver=nesterov"],
]


def fresh(cfg: dict):
    """The spec validated without the memo."""
    saved = spec_module._reseed_key
    spec_module._reseed_key = lambda c: None
    try:
        return spec_from_config(cfg)
    finally:
        spec_module._reseed_key = saved


@pytest.mark.parametrize("overrides", SWEEPS, ids=lambda o: " ".join(o))
def test_a_reseeded_spec_is_the_spec_validated_afresh(overrides):
    base = compose_cached(overrides)
    spec_module._RESEED.clear()
    for seed in (0, 1, 17, 2**32 - 1):
        cfg = dict(base, seed=seed)
        got, want = spec_from_config(cfg), fresh(cfg)
        assert got == want and got.seed == seed
        assert got.identity_text == canonical_json(want.identity())
        assert got.run_id == hashlib.sha256(canonical_json(want.identity()).encode()).hexdigest()[:16]
        assert spec_from_identity(want.identity()) == want
    # one validation served every seed of the composed config, one every stored identity
    assert len(spec_module._RESEED) == 2


def test_a_reseeded_spec_owns_its_sections():
    cfg = compose_cached(SWEEPS[0])
    spec_module._RESEED.clear()
    spec_from_config(dict(cfg, seed=0))  # validated, then kept
    a = spec_from_config(dict(cfg, seed=1))  # from the memo
    a.dataset["name"] = "changed"
    a.budget["iterations"] = -1
    b = spec_from_config(dict(cfg, seed=2))
    assert b.dataset["name"] == "diabetes" and b.budget["iterations"] == cfg["budget"]["iterations"]
    assert b == fresh(dict(cfg, seed=2))


def test_a_bad_seed_is_refused_on_the_reuse_path_too():
    cfg = compose_cached(SWEEPS[0])
    spec_from_config(dict(cfg, seed=3))
    for bad in (-1, 2**32, 1.5, "x"):
        with pytest.raises(SpecError, match="seed"):
            spec_from_config(dict(cfg, seed=bad))


def test_a_solver_registered_again_is_validated_again():
    """A solver unregistered and registered again under its name (with other params) is
    validated against the new registration, not served from the memo."""
    gd = SOLVERS["gd"]
    fields = [(f.name, f.type, dataclasses.field(default=f.default, metadata=f.metadata))
              for f in dataclasses.fields(gd.params)]
    cfg = dict(compose_cached(SWEEPS[0]))
    cfg["solver"] = dict(cfg["solver"], name="ext_reseed")
    spec_module._RESEED.clear()
    made = []
    try:
        for k in range(2):
            params = dataclasses.make_dataclass(f"ReseedParams{k}", fields, frozen=True)
            register(dataclasses.replace(gd, name="ext_reseed", params=params))
            made.append((params, spec_from_config(dict(cfg, seed=k))))
            SOLVERS.unregister("ext_reseed")
    finally:
        if "ext_reseed" in SOLVERS:
            SOLVERS.unregister("ext_reseed")
    assert [type(spec.params) for _, spec in made] == [params for params, _ in made]


def test_a_solver_unregistered_since_is_one_line_naming_it():
    """Served from the memo or not, a config naming a solver no longer registered is the
    same one-line refusal that validation gives (the registry's list of valid solvers)."""
    gd = SOLVERS["gd"]
    cfg = dict(compose_cached(SWEEPS[0]))
    cfg["solver"] = dict(cfg["solver"], name="ext_gone")
    register(dataclasses.replace(gd, name="ext_gone"))
    try:
        spec_from_config(dict(cfg, seed=0))
    finally:
        SOLVERS.unregister("ext_gone")
    with pytest.raises(SpecError, match="unknown solver 'ext_gone'; valid: .*gd"):
        spec_from_config(dict(cfg, seed=1))
