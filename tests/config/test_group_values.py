"""A value that is no option name, given to a config group, is one line and exit 2.

Generated: every config group of the packaged conf/ folder (hydra's own aside), every
command that takes overrides, and a number, nan, inf, a negative number, a list and an
empty value. Hydra alone raises a bare ValueError with a 30-line traceback for a number.
"""
import io
from contextlib import redirect_stderr, redirect_stdout

import pytest

from stopwise.cli import main
from stopwise.config.spec import conf_dir

GROUPS = sorted(p.name for p in conf_dir().iterdir() if p.is_dir() and p.name != "hydra")
VALUES = ["1.5", "nan", "inf", "-9999", "[1,2]", ""]
COMMANDS = {"run": [], "sweep": ["seed=0,1"]}


def test_the_groups_are_found():
    assert {"dataset", "solver", "stopping", "budget"} <= set(GROUPS)


@pytest.mark.parametrize("command", sorted(COMMANDS))
@pytest.mark.parametrize("group", GROUPS)
@pytest.mark.parametrize("value", VALUES)
def test_a_value_that_is_no_option_is_one_line_exit_2_and_writes_nothing(command, group, value, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main([command, f"{group}={value}", *COMMANDS[command], f"results_root={tmp_path / 'results'}"])
    lines = err.getvalue().strip().splitlines()
    assert code == 2, err.getvalue()[-2000:]
    assert len(lines) == 1 and lines[0].startswith("stopwise: error: ") and group in lines[0], lines
    options = sorted(p.stem for p in (conf_dir() / group).glob("*.yaml"))
    assert "valid: " in lines[0] and all(o in lines[0] for o in options[:3])
    assert list(tmp_path.iterdir()) == []
