"""Row splits into train / validation / test.

``random``  seeded permutation; ``tail``  the last rows are the test part in file order
and the rows just before them the validation part; ``indices``  explicit row lists.
A part size below 1 is a fraction of all rows, a size of 1 or more a row count.
"""
from __future__ import annotations

import numpy as np

from stopwise.core.errors import StopwiseError

SPLIT_KINDS = ("random", "tail", "indices")
_SPLIT_STREAM = 0x5EED_5B17  # separates the split's random stream from the solver's


class SplitError(StopwiseError, ValueError):
    """A split that cannot be made of the rows given; the message is one line."""


def part_size(n: int, size: float, what: str) -> int:
    if size < 0:
        raise SplitError(f"split.{what}={size!r} is invalid: must be >= 0 (a fraction < 1 or a row count)")
    if size < 1:
        return int(round(size * n))
    if not float(size).is_integer():
        raise SplitError(f"split.{what}={size!r} is invalid: a row count must be a whole number")
    return int(size)


def split_rows(n: int, kind: str, test: float, val: float, seed: int,
               rows: tuple | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (train, val, test) row index arrays for ``n`` rows."""
    if kind not in SPLIT_KINDS:
        raise SplitError(f"split.kind={kind!r} is invalid: must be one of {', '.join(SPLIT_KINDS)}")
    if kind == "indices":
        if rows is None or rows[0] is None or rows[2] is None:
            raise SplitError("split.kind=indices needs split.train_rows and split.test_rows (split.val_rows optional)")
        parts = [np.asarray(r if r is not None else [], dtype=np.int64) for r in rows]
        allrows = np.concatenate(parts)
        if allrows.size and (allrows.min() < 0 or allrows.max() >= n):
            raise SplitError(f"split row indices must lie in [0, {n - 1}]")
        if np.unique(allrows).size != allrows.size:
            raise SplitError("split row lists overlap or repeat a row")
        tr, va, te = parts
    else:
        if test < 1 and val < 1 and test + val >= 1:
            raise SplitError(f"split.test + split.val = {test + val:g} leaves no training rows: the fractions must sum to < 1")
        k_te = part_size(n, test, "test")
        k_va = part_size(n, val, "val")
        if val > 0 and k_va == 0:
            raise SplitError(f"split.val={val:g} gives no validation rows of {n} rows: the dataset is too small "
                             "for a validation part (use a row count, split.val >= 1, or split.val=0)")
        if k_te + k_va >= n:
            raise SplitError(f"split leaves no training rows: {k_te} test + {k_va} validation of {n} rows")
        if kind == "random":
            order = np.random.default_rng([int(seed), _SPLIT_STREAM]).permutation(n)
            te, va, tr = order[:k_te], order[k_te:k_te + k_va], order[k_te + k_va:]
            tr, va, te = np.sort(tr), np.sort(va), np.sort(te)
        else:
            idx = np.arange(n)
            te = idx[n - k_te:]
            va = idx[n - k_te - k_va:n - k_te]
            tr = idx[:n - k_te - k_va]
    if tr.size == 0:
        raise SplitError("split leaves no training rows")
    if te.size == 0:
        raise SplitError(f"split has no test rows: use split.test >= 1 row (of {n})")
    return tr, va, te


def carve_validation(train: np.ndarray, test: np.ndarray, val: float, seed: int,
                     n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Predefined (train, test) rows (an OpenML task's fold): the test rows are kept as
    they are and a validation part of size ``val`` (a fraction of the training fold, or a
    row count) is drawn from the training fold by a seeded permutation."""
    train = np.sort(np.asarray(train, dtype=np.int64))
    test = np.sort(np.asarray(test, dtype=np.int64))
    both = np.concatenate([train, test])
    if both.size and (both.min() < 0 or both.max() >= n):
        raise SplitError(f"the predefined fold has row indices outside [0, {n - 1}]")
    if np.intersect1d(train, test).size:
        raise SplitError("the predefined fold puts a row in both its training and test parts")
    if test.size == 0:
        raise SplitError("the predefined fold has no test rows")
    k_va = part_size(train.size, val, "val")
    if val > 0 and k_va == 0:
        raise SplitError(f"split.val={val:g} gives no validation rows of the {train.size} training rows of the fold "
                         "(use a row count, split.val >= 1, or split.val=0)")
    if k_va >= train.size:
        raise SplitError(f"split.val={val:g} leaves no training rows of the {train.size} in the fold")
    order = np.random.default_rng([int(seed), _SPLIT_STREAM, 1]).permutation(train.size)
    va = np.sort(train[order[:k_va]])
    tr = np.sort(train[order[k_va:]])
    return tr, va, test
