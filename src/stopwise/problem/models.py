"""Prediction models that an iterate parameterizes: scores of rows of X given a flat vector.

The recorder evaluates every classification iterate through a model's ``scorer``, which
owns preallocated buffers for one fixed matrix, so recording allocates nothing per row
beyond what the loss needs.

``LinearModel``    s = X w (binary), S = X W with W = w.reshape(d, K) (softmax);
                   positively homogeneous of degree 1 in w.
``TwoLayerReLU``   f(x) = sum_j a_j max(0, <u_j, x>) with theta = (vec(U), a), U of shape
                   (m, d) row-major followed by a of length m; no biases, so
                   f(c theta) = c^2 f(theta) for c > 0: homogeneous of degree 2.
"""
from __future__ import annotations

from typing import Callable

import numpy as np
from scipy.special import expit


class LinearModel:
    degree = 1

    def __init__(self, d: int, k: int = 1):
        self.d, self.k = int(d), int(k)

    @property
    def dim(self) -> int:
        return self.d * self.k

    def scores(self, X: np.ndarray, w: np.ndarray) -> np.ndarray:
        return X @ (w.reshape(self.d, self.k) if self.k > 1 else w)

    def scorer(self, X: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
        """``f(w) -> scores of X`` writing into one preallocated buffer (returned, reused)."""
        buf = np.empty((X.shape[0], self.k) if self.k > 1 else X.shape[0])
        d, k = self.d, self.k
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
