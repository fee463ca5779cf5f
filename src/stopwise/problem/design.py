"""Designs: dense float64 arrays or ``scipy.sparse`` CSR matrices, and what the rest of the
package asks of either.

A design (``Problem.X_train``, ``X_val``, ``X_test``; ``TrainingSet.X``) is either a
C-contiguous float64 ``numpy`` array or a ``scipy.sparse`` CSR matrix of float64 with sorted
column indices (``design=sparse`` of a file dataset, see docs/datasets.md). Products with
a CSR matrix (``X @ w``, ``X.T @ r``, ``X[rows]``) read its nonzeros only; nothing here
makes an n x d dense copy except :func:`densify`, which is bounded by :func:`dense_bytes_limit`
and refuses in one line above it.

``||X||_2`` of a sparse design comes from ``scipy.sparse.linalg.svds`` (ARPACK, the largest
singular triplet only) when the smaller Gram matrix would be large, else from the smaller
Gram matrix ``X^T X`` or ``X X^T`` (a sparse product made dense: it is at most
``SPECTRUM_GRAM_MAX`` square), whose top eigenvalue is what the dense path computes too.
"""
from __future__ import annotations

import os
from typing import Any

import numpy as np

from stopwise.core.errors import SpecError

SPECTRUM_GRAM_MAX = 4096  # ||X||_2 from a Gram matrix up to this many rows (128 MiB)


class DesignError(SpecError):
    """A design that cannot be used the way asked (too large to densify); one line."""


def is_sparse(X: Any) -> bool:
    """Whether ``X`` is a ``scipy.sparse`` matrix (the package loads scipy only if it is)."""
    return hasattr(X, "tocsr") and hasattr(X, "nnz")


def as_csr(X: Any) -> Any:
    """``X`` as a CSR matrix of float64 in canonical form (sorted column indices, no
    duplicates); explicit zeros are kept (the file's entries are the design's entries)."""
    import scipy.sparse as sp

    X = sp.csr_matrix(X, dtype=np.float64)
    if not X.has_canonical_format:
        X = X.copy()
        X.sum_duplicates()  # sorted column indices, duplicates added up (as a dense copy would)
    return X


def freeze(X: Any) -> Any:
    """Mark a design read-only (for CSR: its data, indices and index pointer) and return it."""
    if is_sparse(X):
        for a in (X.data, X.indices, X.indptr):
            a.flags.writeable = False
    else:
        X.flags.writeable = False
    return X


def nnz(X: Any) -> int:
    """Stored entries of a sparse design; every entry of a dense one."""
    return int(X.nnz) if is_sparse(X) else int(X.size)


def stored_bytes(X: Any) -> int:
    """Bytes the design occupies (CSR: data, indices and index pointer)."""
    if is_sparse(X):
        return int(X.data.nbytes + X.indices.nbytes + X.indptr.nbytes)
    return int(X.nbytes)


def dense_bytes_limit() -> int | None:
    """The largest dense copy of a design stopwise makes: half of this machine's memory
    (None when the platform does not say)."""
    try:
        total = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):  # pragma: no cover - not POSIX
        return None
    return int(total) // 2


_LIMIT_OVERRIDE: list[int] = []  # tests lower the bound with :func:`limit_dense_bytes`


def _limit() -> int | None:
    return _LIMIT_OVERRIDE[-1] if _LIMIT_OVERRIDE else dense_bytes_limit()


class limit_dense_bytes:
    """Context manager lowering the densify bound (checks: a small design then stands in for
    one too large to densify)."""

    def __init__(self, nbytes: int):
        self.nbytes = int(nbytes)

    def __enter__(self):
        _LIMIT_OVERRIDE.append(self.nbytes)
        return self

    def __exit__(self, *exc):
        _LIMIT_OVERRIDE.pop()
        return False


def check_dense_size(shape: tuple[int, int], where: str, choices: str = "") -> None:
    """Raise the one-line :class:`DesignError` when a dense float64 array of ``shape`` would
    take more than :func:`dense_bytes_limit`."""
    need = 8 * int(shape[0]) * int(shape[1])
    limit = _limit()
    if limit is not None and need > limit:
        raise DesignError(f"{where}: a dense copy of its {shape[0]} x {shape[1]} sparse design needs "
                          f"{need / 2**30:.3g} GiB, more than the {limit / 2**30:.3g} GiB stopwise densifies "
                          f"({'a lowered bound' if _LIMIT_OVERRIDE else 'half of this machine memory'})"
                          f"{'; ' + choices if choices else ''}")


def densify(X: Any, where: str, choices: str = "") -> np.ndarray:
    """A dense float64 copy of a sparse design (a dense one is returned as it is), refused in
    one line naming ``where``, the shape and ``choices`` when it would take more than
    :func:`dense_bytes_limit` (:func:`check_dense_size`)."""
    if not is_sparse(X):
        return X
    check_dense_size(X.shape, where, choices)
    return np.ascontiguousarray(X.toarray(), dtype=np.float64)


def row_norms_sq(X: Any) -> np.ndarray:
    """``||x_i||^2`` of every row (a new array).

    >>> import scipy.sparse as sp
    >>> row_norms_sq(sp.csr_matrix(np.array([[3.0, 4.0], [0.0, 0.0], [0.0, 2.0]]))).tolist()
    [25.0, 0.0, 4.0]
    """
    if is_sparse(X):
        rows = np.repeat(np.arange(X.shape[0]), np.diff(X.indptr))
        return np.bincount(rows, weights=np.square(X.data), minlength=X.shape[0]).astype(np.float64)
    return np.einsum("ij,ij->i", X, X)


def gram(X: Any, rows: bool = False) -> np.ndarray:
    """``X^T X`` (``rows``: ``X X^T``) as a dense array, a sparse product for a sparse design."""
    if is_sparse(X):
        G = (X @ X.T) if rows else (X.T @ X)
        return np.ascontiguousarray(G.toarray(), dtype=np.float64)
    return X @ X.T if rows else X.T @ X


def spectral_norm_sq(X: Any) -> float:
    """``||X||_2^2`` of a design: the top eigenvalue of the smaller Gram matrix (LAPACK
    ``syevd``) when it has at most ``SPECTRUM_GRAM_MAX`` rows; above that a dense design takes
    a full SVD (``numpy.linalg.norm(X, 2)``) and a sparse one the largest singular value from
    ``scipy.sparse.linalg.svds`` (ARPACK at machine precision, ``tol=0``, a fixed start vector)."""
    n, d = X.shape
    if n == 0 or d == 0 or nnz(X) == 0:
        return 0.0
    if min(n, d) <= SPECTRUM_GRAM_MAX:
        return float(np.linalg.eigvalsh(gram(X, rows=n < d))[-1])
    if not is_sparse(X):
        return float(np.linalg.norm(X, 2)) ** 2
    return sparse_norm2(X) ** 2


def sparse_norm2(X: Any) -> float:
    """``||X||_2`` of a sparse matrix by ``scipy.sparse.linalg.svds(k=1)`` (no dense SVD).

    >>> import scipy.sparse as sp
    >>> round(sparse_norm2(sp.csr_matrix(np.diag([3.0, -5.0, 1.0]))), 12)
    5.0
    """
    from scipy.sparse.linalg import svds

    v0 = np.full(min(X.shape), 1.0 / np.sqrt(min(X.shape)))
    s = svds(X, k=1, tol=0, v0=v0, return_singular_vectors=False, solver="arpack")
    return float(s[0])


__all__ = ["DesignError", "SPECTRUM_GRAM_MAX", "as_csr", "check_dense_size", "dense_bytes_limit", "densify", "freeze", "gram",
           "is_sparse", "limit_dense_bytes", "nnz", "row_norms_sq", "sparse_norm2", "spectral_norm_sq",
           "stored_bytes"]
