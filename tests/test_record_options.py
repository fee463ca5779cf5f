"""Record options: the residual statistics switch (record.residual) and its identity."""
import numpy as np
import pytest

from stopwise.residual import COLUMNS as RESIDUAL_COLUMNS
from stopwise.runner import execute
from stopwise.spec import SpecError, spec_from_overrides


def test_residual_statistics_can_be_left_out():
    on = spec_from_overrides(["dataset=wellposed", "budget.iterations=30"])
    off = spec_from_overrides(["dataset=wellposed", "budget.iterations=30", "record.residual=false"])
    assert on.identity()["record"] == {"every": 1}          # the default keeps existing run ids
    assert off.identity()["record"] == {"every": 1, "residual": False}
    assert on.run_id != off.run_id
    a, b = execute(on).columns, execute(off).columns
    assert set(RESIDUAL_COLUMNS) <= set(a) and not set(RESIDUAL_COLUMNS) & set(b)
    for col in set(b) - {"seconds"}:  # everything else is the same, number for number
        np.testing.assert_array_equal(a[col][np.isfinite(a[col])], b[col][np.isfinite(b[col])], err_msg=col)


@pytest.mark.parametrize("rule", ["monotone_error", "ncp"])
def test_halting_on_a_residual_rule_needs_the_residual_columns(rule):
    extra = ["stopping.params.criterion=first"] if rule == "ncp" else []
    with pytest.raises(SpecError) as e:
        spec_from_overrides(["dataset=illposed", f"stopping={rule}", "stopping.halt=true", "record.residual=false",
                             *extra])
    assert str(e.value) == (f"stopping.rule={rule} with halt needs the residual columns: "
                            "drop record.residual=false")


def test_record_residual_must_be_a_boolean():
    with pytest.raises(SpecError, match="record.residual=.* is invalid"):
        spec_from_overrides(["record.residual=sometimes"])
