"""Losses: training objective value, gradient, and the task's error metric.

Every loss is an average over the n training rows. ``w`` is always a flat float64 vector;
for the softmax loss it holds the d x K weight matrix ``W`` in row-major order
(``W = w.reshape(d, K)``, scores ``S = X W``), so norms and differences of iterates are the
Frobenius ones and every solver, the runner and the recorder handle it unchanged.

Least squares (regression; also allowed on binary +-1 targets):

    f(w) = (1 / (2 n)) ||X w - y||^2,   grad f(w) = X^T (X w - y) / n,   L = ||X||_2^2 / n.

Logistic (binary, y_i in {-1, +1}, margins q_i = y_i <x_i, w>):

    f(w) = (1 / n) sum_i log(1 + exp(-q_i)),   grad f(w) = -(1 / n) X^T (y * sigma(-q)),
    L = ||X||_2^2 / (4 n)   (sigma' <= 1/4).

Softmax cross-entropy (multiclass, labels c_i in {0..K-1}; on a binary problem the label
-1 is class 0 and +1 class 1):

    f(W) = (1 / n) sum_i [log sum_j exp(S_ij) - S_{i c_i}],   grad f(W) = X^T (P - Y) / n,
    L = ||X||_2^2 / (2 n)   (the Hessian of log-sum-exp is bounded by 1/2; Boehning 1992).

Hinge (binary, not differentiable; the gradient is the subgradient that takes 0 at the kink):

    f(w) = (1 / n) sum_i max(0, 1 - q_i),   g(w) = -(1 / n) sum_{i: q_i < 1} y_i x_i.

The hinge has no smoothness constant; its ``L`` is the scale ``||X||_2^2 / n`` (as for least
squares) so that ``step_scale`` keeps one meaning across losses.

Task error: mean squared error for regression; for classification the misclassification
rate, where a row counts as misclassified when its margin is <= 0 (ties are errors): the
binary margin is ``y_i s_i``, the multiclass margin ``S_{i c_i} - max_{j != c_i} S_ij``.
"""
from __future__ import annotations

import functools
from typing import Callable, NamedTuple

import numpy as np

from stopwise.core.errors import SpecError


@functools.lru_cache(maxsize=1)
def _scipy_expit() -> Callable:
    from scipy.special import expit as f

    return f


def expit(x, out=None):
    """The logistic function, ``scipy.special.expit`` (SciPy loads on first use, not with the
    package: a worker that runs least squares never needs it)."""
    return _scipy_expit()(x, out=out) if out is not None else _scipy_expit()(x)


# ``train`` arguments are a stopwise.problem.problem.TrainingSet (annotations only: the problem module
# imports this one, not the other way round).

LOSS_NAMES = ("squares", "logistic", "softmax", "hinge")
TASK_LOSSES = {
    "regression": ("squares",),
    "binary": ("logistic", "hinge", "softmax", "squares"),
    "multiclass": ("softmax",),
}
DEFAULT_LOSS = {"regression": "squares", "binary": "logistic", "multiclass": "softmax"}
# L = CURVATURE[loss] * ||X||_2^2 / n
CURVATURE = {"squares": 1.0, "logistic": 0.25, "softmax": 0.5, "hinge": 1.0}
SMOOTH = ("squares", "logistic", "softmax")


class LossError(SpecError):
    """A loss that does not exist or does not fit the task; the message is one line."""


def check_loss(task: str, loss: str | None) -> str:
    """The loss a problem of ``task`` trains: ``loss`` when given and valid, else the default.

    >>> check_loss("binary", None), check_loss("binary", "hinge")
    ('logistic', 'hinge')
    """
    if loss is None:
        return DEFAULT_LOSS[task]
    if loss not in LOSS_NAMES:
        raise LossError(f"loss {loss!r} is unknown; valid: {', '.join(LOSS_NAMES)}")
    if loss not in TASK_LOSSES[task]:
        raise LossError(f"loss {loss!r} does not apply to {task} problems; valid: {', '.join(TASK_LOSSES[task])}")
    return loss


def resolve_loss(task: str, dataset_loss: str | None, solver_loss: str | None) -> str:
    """The training loss of a run: the solver's own loss (hinge diagonal method, network)
    when it has one, else the dataset's ``loss`` option, else the task's default."""
    if solver_loss is not None:
        if dataset_loss is not None and dataset_loss != solver_loss:
            raise LossError(f"dataset.loss={dataset_loss!r} conflicts with the solver, which trains "
                            f"the {solver_loss} loss; drop dataset.loss or set it to {solver_loss!r}")
        return check_loss(task, solver_loss)
    return check_loss(task, dataset_loss)


def n_outputs(loss: str, n_classes: int) -> int:
    """Columns of the weight matrix: K for softmax, 1 otherwise."""
    return max(int(n_classes), 2) if loss == "softmax" else 1


def class_index(y: np.ndarray) -> np.ndarray:
    """Class indices from encoded targets: binary -1/+1 -> 0/1, multiclass 0..K-1 as integers."""
    if y.size and y.min() < 0:
        return (y > 0).astype(np.intp)
    return y.astype(np.intp)


# ---------------------------------------------------------------- values from scores

def _log_softplus(r: np.ndarray) -> np.ndarray:
    """``log(log(1 + exp(r)))`` without underflow (``~ r`` for r << 0)."""
    out = np.empty_like(r)
    small = r < -30.0
    out[small] = r[small]  # log(log1p(e^r)) = r + log(1 - e^r / 2 + ...) ~ r to 1e-13
    big = ~small
    out[big] = np.log(np.logaddexp(0.0, r[big]))
    return out


def _row_reduce(op, S: np.ndarray) -> np.ndarray:
    """``op.reduce(S, axis=1)`` as a new array; for few columns a loop over the columns, which
    numpy runs much faster than a reduction along short rows."""
    if S.shape[1] > 16:
        return op.reduce(S, axis=1)
    out = S[:, 0].copy()
    for j in range(1, S.shape[1]):
        op(out, S[:, j], out=out)
    return out


def row_max(S: np.ndarray) -> np.ndarray:
    return _row_reduce(np.maximum, S)


def row_sum(S: np.ndarray) -> np.ndarray:
    return _row_reduce(np.add, S)


def logsumexp_rows(S: np.ndarray) -> np.ndarray:
    """``log sum_j exp(S_ij)`` per row (max-shifted; ``-inf`` entries allowed), a new array."""
    m = row_max(S)
    T = S - m[:, None]
    np.exp(T, out=T)
    out = np.log(row_sum(T))
    out += m
    return out


def multiclass_margins(S: np.ndarray, c: np.ndarray) -> np.ndarray:
    """``q_i = S_{i c_i} - max_{j != c_i} S_ij`` (a new array; ``S`` is restored)."""
    rows = np.arange(S.shape[0])
    own = S[rows, c]
    S[rows, c] = -np.inf
    other = row_max(S)
    S[rows, c] = own
    own -= other
    return own


def value_from_scores(loss: str, s: np.ndarray, y: np.ndarray, c: np.ndarray | None = None) -> float:
    """Mean loss from model scores ``s`` (length n, or n x K for softmax)."""
    n = s.shape[0]
    if n == 0:
        return float("nan")
    if loss == "squares":
        r = s - y
        return float(r @ r) / (2 * n)
    if loss == "logistic":
        return float(np.logaddexp(0.0, -(y * s)).sum()) / n
    if loss == "hinge":
        return float(np.maximum(0.0, 1.0 - y * s).sum()) / n
    if loss == "softmax":
        c = class_index(y) if c is None else c
        return float((logsumexp_rows(s) - s[np.arange(n), c]).sum()) / n
    raise LossError(f"loss {loss!r} is unknown; valid: {', '.join(LOSS_NAMES)}")


def errors_from_scores(s: np.ndarray, y: np.ndarray, c: np.ndarray | None = None) -> float:
    """Misclassification rate from scores: binary when ``s`` is a vector (margin y s),
    multiclass when it is n x K; margins <= 0 count as errors."""
    n = s.shape[0]
    if n == 0:
        return float("nan")
    if s.ndim == 1:
        return float(np.count_nonzero(y * s <= 0.0)) / n
    c = class_index(y) if c is None else c
    return float(np.count_nonzero(multiclass_margins(s, c) <= 0.0)) / n


# ---------------------------------------------------------------- value and gradient on (X, y, w)

def _scores(X: np.ndarray, w: np.ndarray, k: int) -> np.ndarray:
    return X @ (w.reshape(X.shape[1], k) if k > 1 else w)


def squares_value(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 1) -> float:
    r = X @ w - y
    return float(r @ r) / (2 * max(X.shape[0], 1))


def squares_grad(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 1) -> np.ndarray:
    """``X^T (X w - y) / n`` as a new array."""
    r = X.dot(w)  # ndarray.dot: the BLAS calls of @, with less dispatch
    r -= y
    g = X.T.dot(r)
    g /= max(X.shape[0], 1)
    return g


def logistic_value(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 1) -> float:
    return value_from_scores("logistic", X @ w, y)


def _margin_gradient(X: np.ndarray, y: np.ndarray, w: np.ndarray,
                     weights: Callable[[np.ndarray, np.ndarray], np.ndarray]) -> np.ndarray:
    """Gradient of a margin loss ``(1/n) sum_i l(y_i <x_i, w>)``: ``-(1/n) X^T c`` with
    ``c = weights(q, y) = -y * l'(q)`` of the margins ``q = y X w`` (which ``weights`` may
    overwrite), as a new array."""
    q = X @ w
    q *= y
    g = X.T @ weights(q, y)
    g *= -1.0 / max(X.shape[0], 1)
    return g


def _logistic_weights(q: np.ndarray, y: np.ndarray) -> np.ndarray:
    """``y * sigma(-q)``, in place in ``q``."""
    np.negative(q, out=q)
    expit(q, out=q)
    q *= y
    return q


def _hinge_weights(q: np.ndarray, y: np.ndarray) -> np.ndarray:
    return np.where(q < 1.0, y, 0.0)


def logistic_gradient(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 1) -> np.ndarray:
    """``-(1/n) X^T (y * sigma(-y X w))`` as a new array."""
    return _margin_gradient(X, y, w, _logistic_weights)


def hinge_value(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 1) -> float:
    return value_from_scores("hinge", X @ w, y)


def hinge_gradient(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 1) -> np.ndarray:
    """Subgradient ``-(1/n) sum_{i: y_i <x_i, w> < 1} y_i x_i`` (0 at the kink)."""
    return _margin_gradient(X, y, w, _hinge_weights)


def softmax_value(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 2) -> float:
    return value_from_scores("softmax", _scores(X, w, k), y)


def softmax_gradient(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 2) -> np.ndarray:
    """``vec(X^T (P - Y) / n)`` with ``P`` the row-wise softmax of ``X W``, as a new flat array."""
    S = _scores(X, w, k)
    S -= row_max(S)[:, None]
    np.exp(S, out=S)
    S /= row_sum(S)[:, None]
    S[np.arange(S.shape[0]), class_index(y)] -= 1.0
    G = X.T @ S
    G /= max(X.shape[0], 1)
    return G.ravel()


# ---------------------------------------------------------------- gradient of log f (normalized steps)

# Below this summed loss the plain formulas would lose the relative accuracy of their
# smallest terms to underflow; the log-domain formulas take over.
_TINY_LOSS = 1e-200


def logistic_log_gradient(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 1) -> tuple[float, np.ndarray]:
    """``(log f(w), grad f(w) / f(w))``; exact also when every margin is large and f itself
    underflows to 0 (then computed in the log domain, with the loss and the gradient
    weights scaled by the largest row loss)."""
    q = X @ w
    q *= y
    n = max(X.shape[0], 1)
    losses_ = np.logaddexp(0.0, -q)      # l_i = softplus(-q_i)
    total = float(losses_.sum())
    if total > _TINY_LOSS:
        np.negative(q, out=q)
        expit(q, out=q)                  # sigma(-q_i)
        q *= y
        g = X.T @ q
        g *= -1.0 / total
        return float(np.log(total / n)), g
    log_l = _log_softplus(-q)            # log l_i
    m = float(log_l.max())
    coef = losses_
    np.logaddexp(0.0, q, out=coef)       # -log sigma(-q_i)
    coef += m
    np.negative(coef, out=coef)
    np.exp(coef, out=coef)
    coef *= y
    g = X.T @ coef
    f = float(np.exp(log_l - m).sum())
    g *= -1.0 / f
    return m + float(np.log(f / n)), g


def softmax_log_gradient(X: np.ndarray, y: np.ndarray, w: np.ndarray, k: int = 2) -> tuple[float, np.ndarray]:
    """``(log f(W), vec(grad f(W)) / f(W))``, exact also when f underflows (see
    :func:`logistic_log_gradient`). In the log domain, with ``d_ij = S_ij - S_{i c_i}`` and
    ``r_i = log sum_{j != c_i} exp(d_ij)``, the row loss is ``softplus(r_i)`` and its score
    gradient is ``exp(d_ij - softplus(r_i))`` off the label and ``-exp(r_i - softplus(r_i))`` on it.
    """
    S = _scores(X, w, k)
    n = S.shape[0]
    rows = np.arange(n)
    c = class_index(y)
    S -= S[rows, c][:, None]
    S[rows, c] = -np.inf
    r = logsumexp_rows(S)
    sp = np.logaddexp(0.0, r)
    total = float(sp.sum())
    if total > _TINY_LOSS:
        S -= sp[:, None]
        np.exp(S, out=S)
        S[rows, c] = -np.exp(r - sp)
        G = X.T @ S
        G /= total
        return float(np.log(total / max(n, 1))), G.ravel()
    log_l = _log_softplus(r)
    m = float(log_l.max())
    S -= (sp + m)[:, None]
    np.exp(S, out=S)
    S[rows, c] = -np.exp(r - sp - m)
    G = X.T @ S
    f = float(np.exp(log_l - m).sum())
    G /= f
    return m + float(np.log(f / max(n, 1))), G.ravel()


def _plain_log_gradient(value, gradient):
    def log_gradient(X, y, w, k=1):
        f = value(X, y, w, k)
        g = gradient(X, y, w, k)
        if f > 0:
            g /= f
            return float(np.log(f)), g
        return float("-inf"), np.zeros_like(g)
    return log_gradient


class Loss(NamedTuple):
    """A loss on raw arrays: ``value(X, y, w, k)``, ``gradient(X, y, w, k)`` (new array) and
    ``log_gradient(X, y, w, k) -> (log f, grad f / f)``; ``k`` is the number of classes."""

    name: str
    value: Callable[..., float]
    gradient: Callable[..., np.ndarray]
    log_gradient: Callable[..., tuple[float, np.ndarray]]


LOSSES: dict[str, Loss] = {
    "squares": Loss("squares", squares_value, squares_grad, _plain_log_gradient(squares_value, squares_grad)),
    "logistic": Loss("logistic", logistic_value, logistic_gradient, logistic_log_gradient),
    "softmax": Loss("softmax", softmax_value, softmax_gradient, softmax_log_gradient),
    "hinge": Loss("hinge", hinge_value, hinge_gradient, _plain_log_gradient(hinge_value, hinge_gradient)),
}


def get_loss(name: str) -> Loss:
    try:
        return LOSSES[name]
    except KeyError:
        raise LossError(f"loss {name!r} is unknown; valid: {', '.join(LOSS_NAMES)}") from None


# ---------------------------------------------------------------- dispatch on a training set

def squares_gradient(train: TrainingSet, w: np.ndarray) -> np.ndarray:
    """``X^T (X w - y) / n`` on a training set, as a new array.

    When the training set carries an evaluation plan (``TrainingSet.plan``, see
    :mod:`stopwise.running.fastpath`: Gram matrix or the fused one-pass kernel) the same
    quantity is computed through it.
    """
    plan = train.plan
    if plan is not None:
        return plan(w)
    return squares_grad(train.X, train.y, w)


def gradient(train: TrainingSet, w: np.ndarray) -> np.ndarray:
    """Gradient (hinge: subgradient) of the training set's loss at ``w``, a new array."""
    if train.loss == "squares":
        return squares_gradient(train, w)
    return get_loss(train.loss).gradient(train.X, train.y, w, train.k)


def gradient_function(train: TrainingSet) -> Callable[[np.ndarray], np.ndarray]:
    """``w -> gradient(train, w)``, with the dispatch on the loss and the evaluation plan
    done now: the same function calls, in the same order, as :func:`gradient`."""
    if train.loss == "squares":
        if train.plan is not None:
            return train.plan
        X, y = train.X, train.y
        return lambda w: squares_grad(X, y, w)
    grad, X, y, k = get_loss(train.loss).gradient, train.X, train.y, train.k
    return lambda w: grad(X, y, w, k)


def value(train: TrainingSet, w: np.ndarray) -> float:
    """Training objective of the training set's loss at ``w``."""
    return get_loss(train.loss).value(train.X, train.y, w, train.k)


def log_gradient(train: TrainingSet, w: np.ndarray) -> tuple[float, np.ndarray]:
    """``(log f(w), grad f(w) / f(w))`` on the training set (the gradient of ``log f``)."""
    return get_loss(train.loss).log_gradient(train.X, train.y, w, train.k)


def mse(X: np.ndarray, y: np.ndarray, w: np.ndarray) -> float:
    if X.shape[0] == 0:
        return float("nan")
    r = X @ w - y
    return float(r @ r) / X.shape[0]


# ---------------------------------------------------------------- minibatch gradients

def minibatch_gradient(train: TrainingSet, w: np.ndarray, rows) -> np.ndarray:
    """Gradient of the training objective restricted to the rows ``B``::

        g_B(w) = (1 / |B|) sum_{i in B} grad f_i(w)

    ``rows`` is a slice or an index array (rows may repeat, as with sampling with
    replacement). Every loss is an average over rows, so this is the loss's own gradient
    on the selected rows; it dispatches on ``train.loss`` like :func:`gradient`.
    """
    return get_loss(train.loss).gradient(train.X[rows], train.y[rows], w, train.k)
