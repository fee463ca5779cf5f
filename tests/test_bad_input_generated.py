"""Bad input generated from the config schemas: the constraints are data.

Every constrained field (the fixed schemas' ``spec.FIELD_CONSTRAINTS``, every registered
solver's params and every registered data source's params, read from their dataclass
field metadata) is sent an out-of-range value, a wrong-type value and a missing value
(``key=`` with nothing, and ``key=null`` where null is not allowed) through the real
``stopwise`` command. Each must give exactly one line ``stopwise: error: ...`` naming the
field and what is valid, exit code 2, and write no file at all.
"""
from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import pytest
from omegaconf import OmegaConf

from stopwise.cli import main
from stopwise.data.sources import SOURCES
from stopwise.solvers import SOLVERS
from stopwise.core.params import Choice, Interval
from stopwise.config.spec import FIELD_CONSTRAINTS, StopwiseConfig, conf_dir
from stopwise.config.compose import spec_from_overrides
from stopwise.core.errors import SpecError


def dataset_configs_by_source() -> dict[str, str]:
    """For each data source, one dataset config (conf/dataset/*.yaml) that uses it."""
    out: dict[str, str] = {}
    for path in sorted((conf_dir() / "dataset").glob("*.yaml")):
        src = OmegaConf.load(path).get("source")
        out.setdefault(str(src), path.stem)
    return out


def dataset_for_tasks(tasks) -> list[str]:
    """No override when the default dataset suits the solver; else a ready dataset config
    whose task it handles (from the dataset catalog, when there is one)."""
    if "regression" in tasks:
        return []
    try:
        from stopwise.config.catalog import entries
    except ImportError:
        return []
    for e in entries():
        if e.task in tasks:
            return [f"dataset={e.name}"]
    return []


def _nullable(key: str) -> bool:
    """Whether null is a valid value of a fixed-schema field (its default is None)."""
    node = StopwiseConfig()
    for part in key.split("."):
        node = getattr(node, part)
    return node is None


def constrained_fields() -> list[tuple[str, list[str], object, bool]]:
    """(key, base overrides, constraint, null allowed) for every constrained field."""
    fields = []
    for key, c in FIELD_CONSTRAINTS.items():
        fields.append((key, [], c, _nullable(key)))
    for name, d in sorted(SOLVERS.items()):
        base = [f"solver={name}", *dataset_for_tasks(d.tasks)]
        for f in dataclasses.fields(d.params):
            c = f.metadata.get("constraint")
            if c is not None:
                fields.append((f"solver.{f.name}", base, c, f.default is None))
    by_source = dataset_configs_by_source()
    for name, src in sorted(SOURCES.items()):
        if name not in by_source:
            continue  # a source without a ready config is covered once it has one (see test below)
        for f in dataclasses.fields(src.params):
            c = f.metadata.get("constraint")
            if c is not None:
                fields.append((f"dataset.params.{f.name}", [f"dataset={by_source[name]}"], c, f.default is None))
    return fields


def _spell(v) -> str:
    if isinstance(v, float) and math.isnan(v):
        return "nan"
    return str(v)


def bad_values(constraint, nullable: bool) -> list[tuple[str, str, bool]]:
    """(kind, override value, extra) for one constraint: one out-of-range, one wrong-type and
    one missing value always; a second wrong type and a second spelling of missing are
    extra (run with the slow checks)."""
    numeric = isinstance(constraint, Interval)
    vals = [("out of range", _spell(constraint.outside()), False),
            ("wrong type", "abc" if numeric else "[1,2]", False),
            ("wrong type", "[1,2]" if numeric else "{a:1}", True)]
    if nullable:
        vals.append(("missing", "", False))
    else:
        vals += [("missing", "null", False), ("missing", "", True)]
    return vals


CASES = [pytest.param(key, base, kind, value, marks=[pytest.mark.slow] if extra else [],
                      id=f"{key}={value or '<empty>'}|{base[0] if base else 'default'}")
         for key, base, c, nullable in constrained_fields()
         for kind, value, extra in bad_values(c, nullable)]


# Source params that take free text (names, paths, class lists): no Interval or Choice can
# describe them, so the generated tests skip them; their loaders check them (tests/data).
FREE_TEXT_SOURCE_PARAMS = {"sklearn": {"classes", "positive"}, "file": {"path", "target", "sep"},
                           "openml": {"name", "target"}, "openml_suite": {"suite"}}


def test_the_generator_reaches_every_solver_source_and_field():
    """Checked against what the generator does not read: the config files on disk and every
    dataclass field (not only the constrained ones)."""
    on_disk = {p.stem for p in (conf_dir() / "solver").glob("*.yaml")}
    assert on_disk == set(SOLVERS), on_disk ^ set(SOLVERS)  # a solver without a config is never sent bad input
    assert set(dataset_configs_by_source()) == set(SOURCES)  # a source without a dataset config is skipped
    for name, d in SOLVERS.items():
        free = [f.name for f in dataclasses.fields(d.params) if f.metadata.get("constraint") is None]
        assert free == [], (name, free)  # an unconstrained solver field escapes the generated checks
    for name, d in SOURCES.items():
        free = {f.name for f in dataclasses.fields(d.params) if f.metadata.get("constraint") is None}
        assert free == FREE_TEXT_SOURCE_PARAMS.get(name, set()), (name, free)
    kinds: dict[str, set[str]] = {}
    for p in CASES:
        if not p.marks:
            kinds.setdefault(p.values[0], set()).add(p.values[2])
    assert all(k == {"out of range", "wrong type", "missing"} for k in kinds.values()), kinds


@pytest.mark.parametrize("key,base,kind,value", CASES)
def test_bad_value_is_one_line_exit_2_and_writes_nothing(tmp_path, monkeypatch, capsys, key, base, kind, value):
    monkeypatch.chdir(tmp_path)
    root = tmp_path / "res"
    # a source param absent from the chosen dataset file is added with ++ (Hydra's struct rule)
    prefix = "++" if key.startswith("dataset.params.") else ""
    code = main(["run", *base, f"{prefix}{key}={value}", f"results_root={root}"])
    captured = capsys.readouterr()
    err = captured.err
    assert code == 2, (kind, err, captured.out)
    assert err.startswith("stopwise: error: ") and err.count("\n") == 1, err
    field = key.rsplit(".", 1)[-1]
    # names the field (fixed schemas: the full key; dataset params: "dataset.params (<source>).<field>")
    assert key in err or f").{field}=" in err, err
    assert "must be" in err or "valid" in err, err
    assert captured.out == ""
    assert list(Path(tmp_path).rglob("*")) == []


@pytest.mark.parametrize("key,base,c,nullable", [f for f in constrained_fields() if f[0].startswith(("budget", "solver"))][:6])
def test_bad_value_in_one_job_of_a_sweep_stops_the_whole_sweep_before_any_write(tmp_path, monkeypatch, capsys,
                                                                                 key, base, c, nullable):
    monkeypatch.chdir(tmp_path)
    root = tmp_path / "res"
    code = main(["sweep", *base, "seed=0,1", f"{key}={_spell(c.outside())}", f"results_root={root}"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "(in job:" in err, err
    assert list(Path(tmp_path).rglob("*")) == []


@pytest.mark.parametrize("key,base", [(k, b) for k, b, c, n in constrained_fields()])
def test_deleting_a_field_is_an_error_or_its_schema_default(key, base):
    """``~key`` either fails with one line naming what is wrong or means the schema's default: never
    a third outcome (a success that is not a known default fails)."""
    try:
        deleted = spec_from_overrides([*base, f"~{key}"])
    except SpecError as e:
        msg = str(e)
        # names the key, or (a dataset config that cannot load without it) the param it needs
        assert "\n" not in msg and (key in msg or "needs dataset.params." in msg), msg
        return
    # the deleted value is the declared default of the field's dataclass
    if key.startswith("dataset.params."):
        src = SOURCES[deleted.dataset["source"]]
        default = {f.name: f.default for f in dataclasses.fields(src.params)}[key.rsplit(".", 1)[1]]
        assert deleted.dataset["params"][key.rsplit(".", 1)[1]] == default
    elif key == "seed":
        assert deleted.seed == StopwiseConfig().seed
    else:
        pytest.fail(f"~{key} was accepted without a default this test knows: {deleted!r}")


@pytest.mark.parametrize("command", sorted(__import__("stopwise.cli", fromlist=["COMMANDS"]).COMMANDS))
def test_an_unknown_option_of_every_command_is_one_line_exit_2(tmp_path, monkeypatch, capsys, command):
    monkeypatch.chdir(tmp_path)
    code = main([command, "--no-such-option", "x"])
    err = capsys.readouterr().err
    assert code == 2 and err.startswith("stopwise: error: ") and err.count("\n") == 1, err
    assert "--no-such-option" in err
    assert list(Path(tmp_path).rglob("*")) == []


def test_a_dataset_too_large_for_memory_is_bad_input(tmp_path, monkeypatch, capsys):
    """10**15 rows x 40 features is more than any 64-bit address space: refused in one line."""
    monkeypatch.chdir(tmp_path)
    code = main(["sweep", "dataset=wellposed", "seed=0,1", "dataset.params.n=1000000000000000",
                 f"results_root={tmp_path / 'res'}"])
    err = capsys.readouterr().err
    assert code == 2 and "does not fit in memory" in err and err.count("\n") == 1, err
    assert list(Path(tmp_path).rglob("*")) == []
