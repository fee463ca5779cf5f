"""Published reference scores shipped with the package (``scores.csv``).

One row per published score: ``dataset``, ``protocol`` (Hydra overrides that rebuild the
exact split and preprocessing), ``metric`` (``mse`` or ``r2`` on the test rows),
``value`` (as published), ``method`` (``ols``, or a baseline with its penalty such as
``ridge alpha=0.1``), ``source``, ``read_at_source`` (false: quoted from memory),
``note``, and ``tolerance`` (the absolute difference a reproduction may show: half a
unit of the last printed digit, or wider where the note says the data changed since).

:func:`reproduce` recomputes a row through the baseline code path
(:func:`stopwise.analysis.baselines.fit_path` on the Problem its protocol builds), so a broken
loader, split or preprocessing step shows up as a reference that no longer matches.
"""
from __future__ import annotations

import shlex
from importlib import resources
from typing import Any, Mapping

import numpy as np
import pandas as pd

from stopwise.core.errors import StopwiseError

REFERENCE_COLUMNS = ("dataset", "protocol", "metric", "value", "method", "source", "read_at_source", "note",
                     "tolerance")
METRICS = ("mse", "r2")


class ReferenceRowError(StopwiseError, ValueError):
    """A reference row that cannot be read; the message is one line."""


def load_references() -> pd.DataFrame:
    """The packaged reference scores as a DataFrame (one row per published score).

    >>> refs = load_references()
    >>> set(refs["dataset"]) >= {"diabetes"}
    True
    """
    with resources.files(__name__).joinpath("scores.csv").open("r", encoding="utf-8") as fh:
        df = pd.read_csv(fh, dtype={"dataset": str, "protocol": str, "metric": str, "method": str,
                                    "source": str, "note": str})
    df["read_at_source"] = df["read_at_source"].astype(str).str.lower().map({"true": True, "false": False})
    if df["read_at_source"].isna().any():
        raise ReferenceRowError("scores.csv: read_at_source must be true or false on every row")
    return df[list(REFERENCE_COLUMNS)]


def parse_method(method: str) -> tuple[str, dict[str, Any]]:
    """``ols`` -> ridge at alpha 0; ``NAME alpha=A`` / ``NAME C=c`` -> that baseline at one penalty."""
    parts = str(method).split()
    if parts == ["ols"]:
        return "ridge", {"penalties": [0.0]}
    if len(parts) == 2 and "=" in parts[1]:
        key, value = parts[1].split("=", 1)
        if key in ("alpha", "C"):
            return parts[0], {"penalties": [float(value)]}
    raise ReferenceRowError(f"cannot read reference method {method!r}; use 'ols' or 'NAME alpha=VALUE' / 'NAME C=VALUE'")


def protocol_problem(protocol: str):
    """The Problem a protocol string of Hydra overrides builds."""
    from stopwise.data import build_problem
    from stopwise.config.compose import spec_from_overrides

    spec = spec_from_overrides(shlex.split(protocol))
    return build_problem(spec.dataset, spec.split, spec.seed)


def reproduce(row: Mapping[str, Any]) -> float:
    """Recompute one reference row's metric through the baseline path on its protocol."""
    from stopwise.analysis.baselines import fit_path

    metric = row["metric"]
    if metric not in METRICS:
        raise ReferenceRowError(f"unknown reference metric {metric!r}; valid: {', '.join(METRICS)}")
    method, params = parse_method(row["method"])
    problem = protocol_problem(row["protocol"])
    res = fit_path(problem, method, params)
    if res.coefs is None:
        raise ReferenceRowError(f"reference method {row['method']!r} has no regression coefficients")
    pred = problem.X_test @ res.coefs[0]
    y = problem.y_test
    sse = float(np.sum((y - pred) ** 2))
    if metric == "mse":
        return sse / y.size
    return 1.0 - sse / float(np.sum((y - y.mean()) ** 2))


__all__ = ["REFERENCE_COLUMNS", "load_references", "parse_method", "protocol_problem", "reproduce"]
