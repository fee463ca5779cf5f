"""Property tests (hypothesis) on validation and the run hash.

Valid configurations are drawn from the declared constraints themselves (fixed schemas,
the solvers' params, the synthetic source's params), so new fields are covered as they
are declared. Properties:

* the hash does not depend on key order at any depth;
* nor on how a number of a typed field is spelled (``1``, ``1.0``, ``1e0``; ``400`` and
  ``400.0`` for a whole-number field; ``-0.0`` and ``0.0``), neither in a plain mapping nor
  through Hydra's override parser;
* it changes when any one identity field changes to another valid value;
* it does not change with fields that are not identity (results root, campaign id,
  threads, a post-hoc stopping rule);
* every invalid value drawn outside a constraint is refused with a one-line SpecError.
"""
from __future__ import annotations

import dataclasses
import math

from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from stopwise.data.sources import SOURCES
from stopwise.core.errors import SpecError
from stopwise.solvers import SOLVERS
from stopwise.core.params import Choice, Interval
from stopwise.config.spec import FIELD_CONSTRAINTS, spec_from_config
from stopwise.config.compose import spec_from_overrides
from stopwise.stopping.rules import RULES

SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def values(c) -> st.SearchStrategy:
    """Valid values of one constraint (bounded to keep runs small: this only builds specs)."""
    if isinstance(c, Choice):
        return st.sampled_from(c.options)
    if hasattr(c, "examples"):  # a constraint of its own kind lists valid values itself
        return st.sampled_from(tuple(c.examples()))
    lo = c.low if c.low is not None else -1e6
    hi = c.high if c.high is not None else (lo + 10**6)
    if c.integer:
        lo_i = int(math.ceil(lo)) + (0 if c.low_closed or c.low is None else 1)
        hi_i = int(math.floor(hi)) - (0 if c.high_closed or c.high is None else 1)
        return st.integers(lo_i, min(hi_i, lo_i + 10**6))
    return st.floats(lo, hi, exclude_min=not c.low_closed, exclude_max=not c.high_closed or c.high is None,
                     allow_nan=False, allow_infinity=False)


def solver_params(name: str) -> st.SearchStrategy:
    fs = [f for f in dataclasses.fields(SOLVERS[name].params) if f.metadata.get("constraint") is not None]
    return st.fixed_dictionaries({f.name: values(f.metadata["constraint"]) for f in fs})


SYNTH = SOURCES["synthetic"].params
SYNTH_FIELDS = {f.name: f.metadata["constraint"] for f in dataclasses.fields(SYNTH)}


@st.composite
def configs(draw) -> dict:
    """A valid plain config: a synthetic dataset (small), any solver, any budget and split."""
    solver = draw(st.sampled_from(sorted(SOLVERS)))
    ds_params = {k: draw(values(c)) for k, c in SYNTH_FIELDS.items()}
    ds_params["n"] = draw(st.integers(20, 400))
    ds_params["d"] = draw(st.integers(1, 50))
    test = draw(st.floats(0.05, 0.45))
    val = draw(st.floats(0.0, 0.45))
    cfg = {
        "dataset": {"name": "synthetic-draw", "source": "synthetic", "params": ds_params,
                    "standardize": draw(st.booleans()), "center_target": draw(st.booleans())},
        "split": {"kind": draw(st.sampled_from(["random", "tail"])), "test": test, "val": val},
        "solver": {"name": solver, **draw(solver_params(solver))},
        "budget": {"iterations": draw(values(FIELD_CONSTRAINTS["budget.iterations"])),
                   "passes": draw(st.none() | values(FIELD_CONSTRAINTS["budget.passes"])),
                   "diverge_factor": draw(values(FIELD_CONSTRAINTS["budget.diverge_factor"]))},
        "record": {"every": draw(st.integers(1, 1000))},
        "seed": draw(values(FIELD_CONSTRAINTS["seed"])),
    }
    # Fields are drawn independently, but some solvers constrain params jointly (for example
    # hinge_diagonal's primal-dual update needs step_scale < 1): keep only valid configs.
    try:
        spec_from_config(cfg)
    except SpecError:
        assume(False)
    return cfg


def shuffled(draw, obj):
    if isinstance(obj, dict):
        keys = draw(st.permutations(list(obj)))
        return {k: shuffled(draw, obj[k]) for k in keys}
    return obj


@st.composite
def config_and_shuffle(draw):
    cfg = draw(configs())
    return cfg, shuffled(draw, cfg)


@SETTINGS
@given(config_and_shuffle())
def test_hash_ignores_key_order(pair):
    cfg, other = pair
    assert spec_from_config(cfg).digest == spec_from_config(other).digest


def respell(v, how: int):
    """Another spelling of the same number for a typed field."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return v
    if isinstance(v, float) and v.is_integer() and abs(v) < 2**53:
        return [int(v), float(v), -0.0 if v == 0 else float(v)][how % 3]
    if isinstance(v, int):
        return [float(v), v, v][how % 3]
    return v


@SETTINGS
@given(configs(), st.integers(0, 2))
def test_hash_ignores_number_spelling_of_typed_fields(cfg, how):
    other = {
        **cfg,
        "dataset": {**cfg["dataset"], "params": {k: respell(v, how) for k, v in cfg["dataset"]["params"].items()}},
        "solver": {k: respell(v, how) for k, v in cfg["solver"].items()},
        "split": {**cfg["split"], "test": respell(cfg["split"]["test"], how), "val": respell(cfg["split"]["val"], how)},
        "budget": {k: respell(v, how) for k, v in cfg["budget"].items()},
        "record": {"every": respell(cfg["record"]["every"], how)},
        "seed": respell(cfg["seed"], how),
    }
    assert spec_from_config(cfg).digest == spec_from_config(other).digest


def spellings(x: float) -> list[str]:
    """Ways to write one number on the command line that Hydra parses to it."""
    out = [repr(x), f"{x:.17e}"]
    if float(x).is_integer():
        out += [str(int(x)), f"{int(x)}.0", f"{int(x)}e0"]
    return out


@settings(max_examples=8, deadline=None)
@given(st.floats(0.01, 100, allow_nan=False) | st.integers(1, 100).map(float),
       st.floats(0.0, 0.99) | st.just(0.0), st.integers(1, 500))
def test_hash_ignores_number_spelling_on_the_command_line(step, momentum, n):
    ids = set()
    for s_step, s_mom, s_n in zip(spellings(step), spellings(momentum), spellings(float(n))):
        ids.add(spec_from_overrides(["solver=heavy_ball", f"solver.step_scale={s_step}",
                                     f"solver.momentum={s_mom}", "dataset=wellposed",
                                     f"dataset.params.n={s_n}"]).run_id)
    assert len(ids) == 1, ids


def identity_paths(cfg: dict) -> list[tuple[tuple, object]]:
    """(path in the config, constraint or value strategy) for every identity field present."""
    paths = [(("dataset", "params", k), values(c)) for k, c in SYNTH_FIELDS.items()]
    paths += [(("dataset", "standardize"), st.booleans()), (("dataset", "center_target"), st.booleans()),
              (("dataset", "name"), st.text("abcdefgh", min_size=1, max_size=8)),
              (("split", "kind"), st.sampled_from(["random", "tail"])),
              (("split", "test"), st.floats(0.05, 0.45)), (("split", "val"), st.floats(0.0, 0.45)),
              (("budget", "iterations"), values(FIELD_CONSTRAINTS["budget.iterations"])),
              (("budget", "passes"), st.none() | values(FIELD_CONSTRAINTS["budget.passes"])),
              (("budget", "diverge_factor"), values(FIELD_CONSTRAINTS["budget.diverge_factor"])),
              (("record", "every"), st.integers(1, 1000)),
              (("seed",), values(FIELD_CONSTRAINTS["seed"])),
              (("solver", "name"), st.sampled_from(sorted(SOLVERS)))]
    for f in dataclasses.fields(SOLVERS[cfg["solver"]["name"]].params):
        if f.metadata.get("constraint") is not None:
            paths.append((("solver", f.name), values(f.metadata["constraint"])))
    return paths


def get(cfg, path):
    for k in path:
        cfg = cfg[k]
    return cfg


def put(cfg, path, value):
    import copy

    out = copy.deepcopy(cfg)
    node = out
    for k in path[:-1]:
        node = node[k]
    node[path[-1]] = value
    if path == ("solver", "name"):  # another solver takes its own params
        out["solver"] = {"name": value}
    return out


@SETTINGS
@given(st.data())
def test_hash_changes_with_any_identity_field(data):
    cfg = data.draw(configs())
    path, strategy = data.draw(st.sampled_from(identity_paths(cfg)))
    new = data.draw(strategy)
    old = get(cfg, path)
    assume(new != old and not (isinstance(new, (int, float)) and isinstance(old, (int, float)) and float(new) == float(old)))
    changed = put(cfg, path, new)
    try:
        b = spec_from_config(changed)
    except SpecError:  # e.g. test + val fractions leaving no training rows: refused, not hashed
        assume(False)
    assert spec_from_config(cfg).digest != b.digest, path


@SETTINGS
@given(configs(), st.text(min_size=1, max_size=30).filter(lambda s: s.strip() and "\0" not in s
                                                          and "\n" not in s and "\r" not in s),
       st.from_regex(r"[A-Za-z0-9][A-Za-z0-9_-]{0,20}", fullmatch=True), st.integers(1, 64),
       st.sampled_from(sorted(RULES)))
def test_hash_ignores_fields_outside_the_identity(cfg, root, cid, threads, rule):
    """A post-hoc rule (``halt`` false, its default params) is not identity."""
    other = dict(cfg, results_root=root, campaign_id=cid, threads=threads,
                 stopping={"rule": rule, "halt": False, "params": {}})
    assert spec_from_config(cfg).digest == spec_from_config(other).digest


@SETTINGS
@given(st.data())
def test_values_outside_a_constraint_are_refused_in_one_line(data):
    cfg = data.draw(configs())
    fields = [(("dataset", "params", k), c) for k, c in SYNTH_FIELDS.items()]
    fields += [((*k.split("."),), c) for k, c in FIELD_CONSTRAINTS.items()
               if k.split(".")[0] in ("budget", "record", "seed", "split", "threads")]
    for f in dataclasses.fields(SOLVERS[cfg["solver"]["name"]].params):
        if f.metadata.get("constraint") is not None:
            fields.append((("solver", f.name), f.metadata["constraint"]))
    path, c = data.draw(st.sampled_from(fields))
    if isinstance(c, Choice):
        bad = data.draw(st.text(max_size=12).filter(lambda s: s not in c.options) | st.integers() | st.lists(st.integers()))
    elif not isinstance(c, Interval):  # a constraint of its own kind (Flag, a batch size): its own bad value, junk
        bad = data.draw(st.just(c.outside()) | st.text(max_size=5) | st.just(float("nan"))
                        | st.floats(-10, 10, allow_nan=False))
    else:
        below = st.floats(max_value=c.low, exclude_max=c.low_closed, allow_nan=False) if c.low is not None else st.nothing()
        above = st.floats(min_value=c.high, exclude_min=c.high_closed, allow_nan=False) if c.high is not None else st.nothing()
        bad = data.draw(below | above | st.just(float("nan")) | st.text(max_size=5) | st.just(True)
                        | (st.floats(allow_nan=False).filter(lambda x: not float(x).is_integer()) if c.integer
                           else st.nothing()))
    assume(not c.contains(bad))
    if path == ("threads",) and bad is None:
        return
    broken = put(cfg, path, bad) if len(path) > 1 else dict(cfg, **{path[0]: bad})
    try:
        spec_from_config(broken)
    except SpecError as e:
        assert "\n" not in str(e) and str(e)
        return
    raise AssertionError(f"{'.'.join(path)}={bad!r} was accepted")


@SETTINGS
@given(configs())
def test_the_identity_text_of_a_spec_is_its_canonical_json(cfg):
    """RunSpec.digest hashes the identity with one json.dumps (identity_json); that text must
    be canonical_json's, the definition of a run id (docs/architecture.md)."""
    from stopwise.config.spec import canonical_json, identity_json

    ident = spec_from_config(cfg).identity()
    assert identity_json(ident) == canonical_json(ident)
