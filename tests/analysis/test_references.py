"""Published reference scores reproduced through the baseline code path.

Sources (also in the packaged scores.csv): scikit-learn documentation, example "Ordinary
Least Squares and Ridge Regression" (diabetes, bmi only, last 20 rows as test: MSE
2548.07, R^2 0.47), and the scikit-learn tutorial "Statistical learning: supervised
learning" (diabetes, all features, last 20 rows as test: OLS MSE 2004.5676, R^2 0.58507;
ridge R^2 for alphas logspace(-4, -1, 6)); tolerances as the check-value list states.
"""
import numpy as np
import pytest

import stopwise
from stopwise.analysis.references import (
    REFERENCE_COLUMNS,
    load_references,
    parse_method,
    protocol_problem,
    reproduce,
)

REFS = load_references()


def test_reference_file_has_the_documented_columns_and_a_source_on_every_row():
    assert list(REFS.columns) == list(REFERENCE_COLUMNS)
    assert REFS["source"].str.len().min() > 10 and REFS["read_at_source"].dtype == bool
    assert set(REFS["metric"]) <= {"mse", "r2"} and (REFS["tolerance"] > 0).all()
    assert len(REFS) >= 10 and (REFS["dataset"] == "diabetes").sum() >= 10


@pytest.mark.parametrize("i", range(len(REFS)), ids=[f"{r.method}-{r.metric}" for r in REFS.itertuples()])
def test_reference_row_is_reproduced(i):
    row = REFS.iloc[i]
    got = reproduce(row)
    assert abs(got - row["value"]) <= row["tolerance"], (row["method"], row["metric"], got, row["value"])


def test_protocols_rebuild_the_published_split():
    """Reference: the split of the sources, train_test_split(test_size=20, shuffle=False)
    on scikit-learn's loader (the last 20 of 442 rows are the test rows)."""
    from sklearn.datasets import load_diabetes

    X, y = load_diabetes(return_X_y=True, scaled=False)
    for proto in REFS["protocol"].unique():
        p = protocol_problem(proto)
        assert p.n_train == 422 and p.X_val.shape[0] == 0 and p.X_test.shape[0] == 20
        assert p.info["rows"]["test"] == list(range(422, 442))
        # targets centered on training rows: adding the training mean back gives the raw targets
        np.testing.assert_allclose(p.y_test + p.preprocessing["center_target"]["mean"], y[-20:])


def test_ridge_references_need_the_loaders_scaling():
    """Ridge's alpha depends on the feature scale: the same alpha on features standardized
    on the training rows misses the published R^2 by far more than the tolerance, so the
    reference rows would catch a protocol that dropped the loader's scaling."""
    row = REFS[REFS["method"] == "ridge alpha=0.1"].iloc[0].copy()
    row["protocol"] = "dataset=diabetes split.kind=tail split.test=20 split.val=0"
    assert abs(reproduce(row) - row["value"]) > 50 * row["tolerance"]


def test_center_features_without_standardizing_keeps_the_scale():
    p = protocol_problem(REFS["protocol"].iloc[-1])
    assert "center_features" in p.preprocessing and "standardize" not in p.preprocessing
    np.testing.assert_allclose(p.X_train.mean(axis=0), 0.0, atol=1e-15)
    # the loader's unit-norm columns (over all 442 rows) keep their norms up to the 20 test rows
    assert np.all(np.linalg.norm(p.X_train, axis=0) < 1.0)


def test_parse_method():
    assert parse_method("ols") == ("ridge", {"penalties": [0.0]})
    assert parse_method("ridge alpha=0.5") == ("ridge", {"penalties": [0.5]})
    with pytest.raises(ValueError, match="cannot read reference method"):
        parse_method("ridge 0.5")
