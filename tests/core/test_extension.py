"""A solver and a stopping rule registered from outside the package (here, inside the
test) are picked up by the generated bad-input checks, the identity checks and the
command line with no other edit: no config file, no list to extend."""
from __future__ import annotations

import dataclasses
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import test_bad_input_generated as generated  # the generators of tests/test_bad_input_generated.py

from stopwise.config.spec import forget_configs, spec_from_config
from stopwise.config.compose import spec_from_overrides
from stopwise.core.errors import SpecError
from stopwise.solvers.base import SOLVERS
from stopwise.stopping.rules import RULES

# One source of the registration, run here and in the CLI's own process.
REGISTER = textwrap.dedent('''
    from dataclasses import dataclass
    import numpy as np
    from stopwise.core.params import Interval, param
    from stopwise.solvers.base import SolverDef, State, frozen, register, step_size
    from stopwise.stopping.rules import RuleDef, register_rule, budget, BudgetParams

    @dataclass(frozen=True)
    class DampedParams:
        step_scale: float = param(1.0, Interval(0.0, 2.0, low_closed=False), "step times L")
        damping: float = param(0.5, Interval(0.0, 1.0), "weight of the previous iterate")

    def _init(train, params, rng):
        return State(w=frozen(np.zeros(train.dim)))

    def _step(train, params, state):
        g = train.gradient(state.w)
        w = (1 - params.damping) * (state.w - step_size(train, params.step_scale) * g) + params.damping * state.w
        return State(w=frozen(w), iteration=state.iteration + 1, passes=state.passes + 1.0)

    register(SolverDef("ext_damped", DampedParams, _init, _step, "damped gradient descent (test extension)"))

    @dataclass(frozen=True)
    class CapParams:
        cap: int = param(7, Interval(1, None, integer=True), "last iteration allowed")

    def _cap(trace, ctx, params):
        return budget(trace, ctx, BudgetParams(iterations=params.cap))

    register_rule(RuleDef("ext_cap", CapParams, _cap, "the budget rule at a fixed cap (test extension)", "-",
                          columns=("train_error",)))
''')


@pytest.fixture
def extension():
    exec(compile(REGISTER, "<extension>", "exec"), {})
    try:
        yield
    finally:
        SOLVERS.unregister("ext_damped")
        RULES.unregister("ext_cap")
        forget_configs("solver", "ext_damped")
        forget_configs("stopping", "ext_cap")


def test_the_generated_bad_input_cases_cover_the_new_solver(extension, tmp_path, monkeypatch, capsys):
    cases = [(k, b, c, n) for k, b, c, n in generated.constrained_fields() if b[:1] == ["solver=ext_damped"]]
    assert {k for k, *_ in cases} == {"solver.step_scale", "solver.damping"}
    for key, base, c, nullable in cases:
        for kind, value, extra in generated.bad_values(c, nullable):
            if extra:
                continue
            generated.test_bad_value_is_one_line_exit_2_and_writes_nothing(tmp_path, monkeypatch, capsys,
                                                                           key, base, kind, value)


def test_the_new_rule_is_configured_checked_and_hashed_like_the_built_ins(extension):
    post_hoc = spec_from_overrides(["stopping=ext_cap"])
    assert post_hoc.stopping == {"rule": "ext_cap", "halt": False, "params": {"cap": 7}}
    halting = spec_from_overrides(["stopping=ext_cap", "stopping.halt=true", "stopping.params.cap=9"])
    assert halting.stopping["params"] == {"cap": 9}
    plain = {"dataset": {"name": "diabetes", "source": "sklearn", "params": {}}, "solver": {"name": "gd"}}
    assert spec_from_config(dict(plain, stopping={"rule": "ext_cap", "halt": True, "params": {"cap": 9.0}})).run_id \
        == spec_from_config(dict(plain, stopping={"rule": "ext_cap", "halt": True, "params": {"cap": 9}})).run_id
    assert post_hoc.run_id == spec_from_overrides([]).run_id != halting.run_id
    assert halting.identity()["halt"] == {"rule": "ext_cap", "params": {"cap": 9}}
    with pytest.raises(SpecError, match=r"cap=0 is invalid: must be an integer in \[1, inf\)"):
        spec_from_overrides(["stopping=ext_cap", "stopping.params.cap=0"])
    with pytest.raises(SpecError, match=r"ext_cap has no parameter 'bogus'; valid: cap$"):
        spec_from_overrides(["stopping=ext_cap", "stopping.params.bogus=1"])


def test_the_identity_checks_cover_the_new_solver(extension):
    base = {"dataset": {"name": "diabetes", "source": "sklearn", "params": {}},
            "solver": {"name": "ext_damped", "damping": 0, "step_scale": 1}}
    a = spec_from_config(base)
    b = spec_from_config(dict(base, solver={"step_scale": 1.0, "damping": 0.0, "name": "ext_damped"}))
    assert a.run_id == b.run_id  # key order and number spelling do not matter
    for f in dataclasses.fields(SOLVERS["ext_damped"].params):  # every param is identity
        other = spec_from_config(dict(base, solver=dict(base["solver"], **{f.name: 0.25})))
        assert other.run_id != a.run_id, f.name
    assert spec_from_overrides(["solver=ext_damped", "solver.damping=0", "solver.step_scale=1e0"]).run_id \
        == spec_from_overrides(["solver=ext_damped", "solver.step_scale=1", "solver.damping=0.0"]).run_id


def test_the_cli_runs_the_new_solver_halting_on_the_new_rule(tmp_path):
    root = tmp_path / "res"
    code = REGISTER + textwrap.dedent(f'''
        import sys
        from stopwise.cli import main
        sys.exit(main(["run", "solver=ext_damped", "stopping=ext_cap", "stopping.halt=true",
                       "budget.iterations=50", "results_root={root}"]))
    ''')
    src = Path(__file__).resolve().parents[2] / "src"
    env_path = f"{src}"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=tmp_path,
                         env={**__import__("os").environ, "PYTHONPATH": env_path})
    assert out.returncode == 0, out.stderr
    import stopwise

    traces = stopwise.load_traces(root)
    assert set(traces["solver"]) == {"ext_damped"}
    assert int(traces["iteration"].max()) == 7  # halted where the rule became final
    bad = subprocess.run([sys.executable, "-c", REGISTER + "\nimport sys\nfrom stopwise.cli import main\n"
                          f"sys.exit(main(['run', 'solver=ext_damped', 'solver.damping=2', 'results_root={root}']))"],
                         capture_output=True, text=True, cwd=tmp_path, env={**__import__("os").environ, "PYTHONPATH": env_path})
    assert bad.returncode == 2 and bad.stderr.count("\n") == 1
    assert "solver.damping=2.0 is invalid: must be a number in [0, 1]" in bad.stderr
