"""Compiled one-pass kernels for the least-squares gradient (numba).

``residual_gradient(X, w, y, r, g)`` computes, in one pass over the rows of ``X``::

    r_i = x_i . w - y_i          (the training residual, written to r)
    g   = sum_i r_i x_i          (= X^T (X w - y), written to g)

Each row is used for its dot product and for its share of ``g`` while it is in the
first-level cache, so ``X`` is read from memory once per call; a product with BLAS reads
it once for ``X w`` and once more for ``X^T r`` (blocked into cache-sized row groups it
still streams each group from memory at the speed of a matrix-vector product, below that
of a plain read). This is the ``fused`` evaluation path of :mod:`stopwise.running.fastpath`.
For a ``scipy.sparse`` CSR design, :func:`csr_residual_gradient` does the same row by row
over the stored entries (their values and column indices), and :func:`csr_residual` gives
the residual alone (the recorder's errors).

Floating point: the kernels are compiled with the ``reassoc`` and ``contract`` flags only
(sums may be reordered into SIMD lanes and multiply-adds fused; NaN and infinity keep
their meaning, so a diverging run still shows non-finite numbers). The order of the sums
is fixed by the compiled code, so a call repeated on the same machine gives the same bits;
its rounding differs from BLAS's by a few units of ``eps * sum_i |r_i| |x_i|``, as two BLAS
builds differ from each other.

Two variants, chosen from the row length ``d`` alone (so a rerun takes the same one):
one row at a time, and four rows at a time (each element of ``w`` loaded once for four
rows, each element of ``g`` updated once for four rows). Four rows are faster for long
rows (``d >= QUAD_MIN_D``) and for very short ones (``d < QUAD_MAX_SHORT_D``, where the
per-row overhead dominates); in between, one row at a time streams better on the
machine of ``docs/performance.md`` (``benchmarks/bench_bandwidth.py`` measures both).

The first call in a process compiles the kernels (about a second) unless numba's cache
(``__pycache__`` beside this file, or ``NUMBA_CACHE_DIR``) already holds them.
"""
from __future__ import annotations

import numpy as np
from numba import njit

FLAGS = {"reassoc", "contract"}
QUAD_MIN_D = 384
QUAD_MAX_SHORT_D = 32


@njit(fastmath=FLAGS, nogil=True, cache=True, boundscheck=False, inline="always")
def _one_row(X, w, y, r, g, i):  # pragma: no cover - compiled
    d = X.shape[1]
    s = 0.0
    for j in range(d):
        s += X[i, j] * w[j]
    s -= y[i]
    r[i] = s
    for j in range(d):
        g[j] += s * X[i, j]


@njit(fastmath=FLAGS, nogil=True, cache=True, boundscheck=False)
def _rows(X, w, y, r, g):  # pragma: no cover - compiled
    n, d = X.shape
    for j in range(d):
        g[j] = 0.0
    for i in range(n):
        _one_row(X, w, y, r, g, i)


@njit(fastmath=FLAGS, nogil=True, cache=True, boundscheck=False)
def _quads(X, w, y, r, g):  # pragma: no cover - compiled
    n, d = X.shape
    for j in range(d):
        g[j] = 0.0
    i = 0
    while i + 4 <= n:
        s0 = 0.0
        s1 = 0.0
        s2 = 0.0
        s3 = 0.0
        for j in range(d):
            wj = w[j]
            s0 += X[i, j] * wj
            s1 += X[i + 1, j] * wj
            s2 += X[i + 2, j] * wj
            s3 += X[i + 3, j] * wj
        s0 -= y[i]
        s1 -= y[i + 1]
        s2 -= y[i + 2]
        s3 -= y[i + 3]
        r[i] = s0
        r[i + 1] = s1
        r[i + 2] = s2
        r[i + 3] = s3
        for j in range(d):
            g[j] += s0 * X[i, j] + s1 * X[i + 1, j] + s2 * X[i + 2, j] + s3 * X[i + 3, j]
        i += 4
    while i < n:
        _one_row(X, w, y, r, g, i)
        i += 1


def variant(d: int) -> str:
    """``"quads"`` or ``"rows"``: the kernel used for rows of length ``d``."""
    return "quads" if d >= QUAD_MIN_D or d < QUAD_MAX_SHORT_D else "rows"


_KERNELS = {"rows": _rows, "quads": _quads}


# ---------------------------------------------------------------- CSR designs

_U1, _U2, _U3, _U4, _U5, _U6, _U7, _U8 = (np.uint64(k) for k in range(1, 9))


@njit(fastmath=FLAGS, nogil=True, cache=True, boundscheck=False)
def _csr_rows(data, indices, indptr, w, y, r, g, wg):  # pragma: no cover - compiled
    # w and g are kept side by side in wg (wg[j, 0] = w[j], wg[j, 1] = g[j]): the gather of
    # entry j and its scatter touch one cache line instead of two, which counts when w and g
    # together outgrow the second-level cache (50,000 columns: 800 KB; the step went from
    # 2.9x to 2.1x one read of the nonzeros there, docs/performance.md section 7).
    # Indices are used unsigned (no test for negative indices in the loops). The scatter
    # loads eight entries of g before it stores them: the column indices of a canonical CSR
    # row are distinct, so the loads do not wait on the stores (twice as fast as
    # g[j] += ... one entry at a time on the machine of docs/performance.md).
    n = indptr.shape[0] - 1
    for j in range(g.shape[0]):
        wg[j, 0] = w[j]
        wg[j, 1] = 0.0
    z = np.uint64(0)
    lo = np.uint64(indptr[0])
    for i in range(n):
        hi = np.uint64(indptr[i + 1])
        s = 0.0
        for k in range(lo, hi):
            s += data[k] * wg[np.uint64(indices[k]), z]
        s -= y[i]
        r[i] = s
        k = lo
        while k + _U7 < hi:
            j0 = np.uint64(indices[k])
            j1 = np.uint64(indices[k + _U1])
            j2 = np.uint64(indices[k + _U2])
            j3 = np.uint64(indices[k + _U3])
            j4 = np.uint64(indices[k + _U4])
            j5 = np.uint64(indices[k + _U5])
            j6 = np.uint64(indices[k + _U6])
            j7 = np.uint64(indices[k + _U7])
            a0 = wg[j0, _U1]
            a1 = wg[j1, _U1]
            a2 = wg[j2, _U1]
            a3 = wg[j3, _U1]
            a4 = wg[j4, _U1]
            a5 = wg[j5, _U1]
            a6 = wg[j6, _U1]
            a7 = wg[j7, _U1]
            wg[j0, _U1] = a0 + s * data[k]
            wg[j1, _U1] = a1 + s * data[k + _U1]
            wg[j2, _U1] = a2 + s * data[k + _U2]
            wg[j3, _U1] = a3 + s * data[k + _U3]
            wg[j4, _U1] = a4 + s * data[k + _U4]
            wg[j5, _U1] = a5 + s * data[k + _U5]
            wg[j6, _U1] = a6 + s * data[k + _U6]
            wg[j7, _U1] = a7 + s * data[k + _U7]
            k += _U8
        while k < hi:
            wg[np.uint64(indices[k]), _U1] += s * data[k]
            k += _U1
        lo = hi
    for j in range(g.shape[0]):
        g[j] = wg[j, 1]


@njit(fastmath=FLAGS, nogil=True, cache=True, boundscheck=False)
def _csr_residual(data, indices, indptr, w, y, r):  # pragma: no cover - compiled
    n = indptr.shape[0] - 1
    lo = np.uint64(indptr[0])
    for i in range(n):
        hi = np.uint64(indptr[i + 1])
        s = 0.0
        for k in range(lo, hi):
            s += data[k] * w[np.uint64(indices[k])]
        r[i] = s - y[i]
        lo = hi


def csr_residual_gradient(X, w: np.ndarray, y: np.ndarray, r: np.ndarray, g: np.ndarray,
                          work: np.ndarray | None = None) -> None:
    """Write ``X w - y`` into ``r`` and ``X^T (X w - y)`` into ``g`` for a CSR matrix ``X``
    in canonical form (sorted column indices, no duplicates: what :class:`Problem` holds),
    in one pass over its rows: row ``i``'s nonzeros give ``r_i = x_i . w - y_i`` and, while
    they are in cache, ``g += r_i x_i``; each stored entry is read from memory once.
    ``work`` is a C-ordered ``(p, 2)`` float64 scratch where ``w`` and ``g`` are kept side
    by side during the pass (one cache line per column touched instead of two); pass one
    kept between calls to allocate nothing, or None to have one made.

    >>> import numpy as np, scipy.sparse as sp
    >>> X = sp.csr_matrix(np.array([[1.0, 0.0, 2.0], [0.0, 3.0, 0.0]])); y = np.array([1.0, 1.0])
    >>> r = np.empty(2); g = np.empty(3)
    >>> csr_residual_gradient(X, np.array([1.0, 1.0, 1.0]), y, r, g)
    >>> r.tolist(), g.tolist()
    ([2.0, 2.0], [2.0, 6.0, 4.0])
    """
    if not X.has_canonical_format:
        raise ValueError("csr_residual_gradient needs a CSR matrix in canonical form (X.sum_duplicates())")
    d = X.shape[1]
    if work is None:
        work = np.empty((d, 2))
    elif work.shape != (d, 2) or work.dtype != np.float64 or not work.flags.c_contiguous:
        raise ValueError(f"csr_residual_gradient's work must be a C-ordered ({d}, 2) float64 array, "
                         f"not {work.dtype} {work.shape}")
    _csr_rows(X.data, X.indices, X.indptr, w, y, r, g, work)


def csr_residual(X, w: np.ndarray, y: np.ndarray, r: np.ndarray) -> None:
    """Write ``X w - y`` into ``r`` for a CSR matrix ``X`` (one read of its nonzeros, no
    allocation): the recorder's squared errors of a sparse design."""
    _csr_residual(X.data, X.indices, X.indptr, w, y, r)


def residual_gradient(X: np.ndarray, w: np.ndarray, y: np.ndarray, r: np.ndarray,
                      g: np.ndarray, kind: str | None = None) -> None:
    """Write ``X w - y`` into ``r`` and ``X^T (X w - y)`` into ``g`` (one read of ``X``).

    ``X`` is (n, d) float64, ``w`` and ``g`` (d,), ``y`` and ``r`` (n,); ``kind`` forces a
    variant (default: :func:`variant` of ``d``).

    >>> import numpy as np
    >>> X = np.arange(6.0).reshape(3, 2); y = np.ones(3); r = np.empty(3); g = np.empty(2)
    >>> residual_gradient(X, np.array([1.0, -1.0]), y, r, g)
    >>> r.tolist(), g.tolist(), (X.T @ (X @ [1.0, -1.0] - y)).tolist()
    ([-2.0, -2.0, -2.0], [-12.0, -18.0], [-12.0, -18.0])
    """
    _KERNELS[kind or variant(X.shape[1])](X, w, y, r, g)


__all__ = ["FLAGS", "QUAD_MIN_D", "QUAD_MAX_SHORT_D", "csr_residual", "csr_residual_gradient", "residual_gradient",
           "variant"]
