"""End-to-end smoke test of one run through the public API."""
import numpy as np
import pandas as pd

import stopwise


def test_run_writes_a_readable_trace(root):
    out = stopwise.run(["dataset=wellposed", "solver=cgls", "budget.iterations=20"], root=root)
    assert out.status == "completed" and not out.skipped
    df = pd.read_parquet(out.path)
    assert list(df["iteration"]) == list(range(21))
    # CGLS on a well-posed 240 x 40 system reaches the least-squares residual (numpy's lstsq)
    p = stopwise.load_problem(["dataset=wellposed"])
    w, *_ = np.linalg.lstsq(p.X_train, p.y_train, rcond=None)
    r = p.X_train @ w - p.y_train
    assert abs(df["train_loss"].iloc[-1] - r @ r / (2 * p.n_train)) < 1e-10
    again = stopwise.run(["dataset=wellposed", "solver=cgls", "budget.iterations=20"], root=root)
    assert again.skipped and again.run_id == out.run_id
