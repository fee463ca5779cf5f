"""Prediction models that an iterate parameterizes: scores of rows of X given a flat vector.

The recorder evaluates every classification iterate through a model's ``scorer``, which
owns preallocated buffers for one fixed matrix, so recording allocates nothing per row
beyond what the loss needs.

``LinearModel``    s = X w (binary), S = X W with W = w.reshape(d, K) (softmax);
                   positively homogeneous of degree 1 in w.
``TwoLayerReLU``   f(x) = sum_j a_j max(0, <u_j, x>) with theta = (vec(U), a), U of shape
                   (m, d) row-major followed by a of length m; no biases, so
                   f(c theta) = c^2 f(theta) for c > 0: homogeneous of degree 2.
``KernelModel``    f(x) = sum_i c_i k(x, x_i) over the n training rows x_i, with c in R^n
                   (a function in the span of the kernel sections; kernels from
                   :mod:`sklearn.metrics.pairwise`, see :func:`kernel_matrix`).

``feature_weights`` says whether an iterate is a weight vector over the problem's features
(only then is it compared with the problem's truth ``w_true`` or its support).
"""
from __future__ import annotations

from typing import Callable

import numpy as np
from stopwise.problem.losses import expit


KERNELS = ("linear", "rbf", "polynomial", "laplacian")


class LinearModel:
    degree = 1
    feature_weights = True

    def __init__(self, d: int, k: int = 1):
        self.d, self.k = int(d), int(k)

    @property
    def dim(self) -> int:
        return self.d * self.k

    def scores(self, X: np.ndarray, w: np.ndarray) -> np.ndarray:
        return X @ (w.reshape(self.d, self.k) if self.k > 1 else w)

    def scorer(self, X: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
        """``f(w) -> scores of X`` writing into one preallocated buffer (returned, reused); for a
        ``scipy.sparse`` design, SciPy's product over the stored entries (a new array)."""
        buf = np.empty((X.shape[0], self.k) if self.k > 1 else X.shape[0])
        d, k = self.d, self.k
        if hasattr(X, "tocsr"):
            return (lambda w: X @ w.reshape(d, k)) if k > 1 else (lambda w: X @ w)
        if k > 1:
            return lambda w: np.dot(X, w.reshape(d, k), out=buf)
        return lambda w: np.dot(X, w, out=buf)


class TwoLayerReLU:
    """``f(x) = sum_j a_j max(0, <u_j, x>)``, homogeneous of degree 2 in theta.

    >>> m = TwoLayerReLU(d=2, width=2)
    >>> theta = np.array([1.0, 0.0, 0.0, 1.0, 2.0, -1.0])  # u_1 = e_1, u_2 = e_2, a = (2, -1)
    >>> m.scores(np.array([[3.0, 1.0], [-1.0, 2.0]]), theta).tolist()
    [5.0, -2.0]
    """

    degree = 2
    feature_weights = False

    def __init__(self, d: int, width: int):
        self.d, self.m = int(d), int(width)

    @property
    def dim(self) -> int:
        return self.m * (self.d + 1)

    def split(self, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Views ``(U, a)`` of a flat parameter vector."""
        md = self.m * self.d
        return theta[:md].reshape(self.m, self.d), theta[md:]

    def scores(self, X: np.ndarray, theta: np.ndarray) -> np.ndarray:
        U, a = self.split(theta)
        return np.maximum(X @ U.T, 0.0) @ a

    def scorer(self, X: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
        H = np.empty((X.shape[0], self.m))
        out = np.empty(X.shape[0])

        def score(theta: np.ndarray) -> np.ndarray:
            U, a = self.split(theta)
            np.dot(X, U.T, out=H)
            np.maximum(H, 0.0, out=H)
            return np.dot(H, a, out=out)
        return score

    def logistic_value_and_gradient(self, X: np.ndarray, y: np.ndarray,
                                    theta: np.ndarray) -> tuple[float, np.ndarray]:
        """Mean logistic loss ``(1/n) sum_i log(1 + exp(-y_i f(x_i)))`` and its gradient::

            r_i = -y_i sigma(-y_i f(x_i)) / n,   H = max(0, X U^T),
            d/da = H^T r,   d/dU = (r a^T * 1[X U^T > 0])^T X

        (the ReLU's derivative is taken as 0 at 0). Returns a new flat gradient array.
        """
        U, a = self.split(theta)
        Z = X @ U.T
        H = np.maximum(Z, 0.0)
        s = H @ a
        q = y * s
        n = max(X.shape[0], 1)
        f = float(np.logaddexp(0.0, -q).sum()) / n
        r = expit(-q)
        r *= y
        r *= -1.0 / n
        g = np.empty(self.dim)
        g[self.m * self.d:] = H.T @ r
        D = np.outer(r, a)
        D *= Z > 0.0
        g[:self.m * self.d] = (D.T @ X).ravel()
        return f, g


def kernel_matrix(A: np.ndarray, B: np.ndarray, kernel: str, gamma: float | None = None,
                  degree: int = 3, coef0: float = 1.0) -> np.ndarray:
    """``k(a_i, b_j)`` for the rows of ``A`` and ``B``, computed by scikit-learn's
    :mod:`sklearn.metrics.pairwise` with its parameter conventions (``gamma`` None means
    ``1 / n_features``)::

        linear      <a, b>
        rbf         exp(-gamma ||a - b||^2)
        polynomial  (gamma <a, b> + coef0)^degree
        laplacian   exp(-gamma ||a - b||_1)

    >>> kernel_matrix(np.array([[0.0, 1.0]]), np.array([[1.0, 1.0], [0.0, 1.0]]), "rbf", gamma=0.5).round(6).tolist()
    [[0.606531, 1.0]]
    """
    from sklearn.metrics import pairwise

    if kernel == "linear":
        return pairwise.linear_kernel(A, B)
    if kernel == "rbf":
        return pairwise.rbf_kernel(A, B, gamma=gamma)
    if kernel == "polynomial":
        return pairwise.polynomial_kernel(A, B, degree=degree, gamma=gamma, coef0=coef0)
    if kernel == "laplacian":
        return pairwise.laplacian_kernel(A, B, gamma=gamma)
    from stopwise.core.errors import SpecError

    raise SpecError(f"kernel {kernel!r} is unknown; valid: {', '.join(KERNELS)}")


def training_kernel(X: np.ndarray, kernel: str, gamma: float | None = None, degree: int = 3,
                    coef0: float = 1.0) -> np.ndarray:
    """``k(X, X)`` made exactly symmetric, ``(K + K^T) / 2`` (scikit-learn's distance-based
    kernels are symmetric only to rounding), so that its eigendecomposition is that of a
    symmetric matrix."""
    K = kernel_matrix(X, X, kernel, gamma, degree, coef0)
    K += K.T
    K *= 0.5
    return K


class KernelModel:
    """``f(x) = sum_i c_i k(x, x_i)`` over the training rows ``x_i``: an iterate is the
    coefficient vector ``c`` (length ``n_train``), and the scores of a split are
    ``K_s c`` with ``K_s = k(X_s, X_train)``, computed once per split by :meth:`scorer`.

    >>> m = KernelModel(np.array([[1.0, 0.0], [0.0, 1.0]]), "linear")
    >>> m.scores(np.array([[2.0, 3.0]]), np.array([1.0, -1.0])).tolist()
    [-1.0]
    """

    degree = 1               # scores are linear in c
    feature_weights = False

    def __init__(self, X_train: np.ndarray, kernel: str, gamma: float | None = None, degree: int = 3,
                 coef0: float = 1.0):
        self.X_train = X_train
        self.kernel, self.gamma, self.kernel_degree, self.coef0 = kernel, gamma, int(degree), float(coef0)

    @property
    def dim(self) -> int:
        return self.X_train.shape[0]

    def matrix(self, X: np.ndarray) -> np.ndarray:
        """``k(X, X_train)`` (symmetrized when ``X`` is the training rows, see :func:`training_kernel`)."""
        if X is self.X_train:
            return training_kernel(X, self.kernel, self.gamma, self.kernel_degree, self.coef0)
        return kernel_matrix(X, self.X_train, self.kernel, self.gamma, self.kernel_degree, self.coef0)

    def scores(self, X: np.ndarray, c: np.ndarray) -> np.ndarray:
        return self.matrix(X) @ c

    def scorer(self, X: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
        """``f(c) -> K_s c`` writing into one preallocated buffer (returned, reused)."""
        K = self.matrix(X)
        buf = np.empty(X.shape[0])
        return lambda c: np.dot(K, c, out=buf)
