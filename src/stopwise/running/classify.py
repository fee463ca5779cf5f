"""Per-iterate metrics of classification problems (used by the Recorder).

Each split's scores are computed once per recorded iterate (one product with the split's
matrix, into a preallocated buffer) and every column is derived from them:

    train_loss                  the training objective (the run's loss on the training rows)
    train/val/test_error        misclassification rate (margin <= 0 counts as an error)
    val_loss, test_loss         the run's loss on the validation and test rows
    margin                      normalized margin on the training rows: binary linear
                                min_i y_i <w, x_i> / ||w||; softmax min_i (S_{i c_i} -
                                max_{j != c_i} S_ij) / ||W||_F; a model homogeneous of degree
                                k divides by ||theta||^k (the network: k = 2)
    svm_angle, svm_dist         binary linear models on separable training rows: angle
                                (radians) and distance between w / ||w|| and the hard-margin
                                direction w* / ||w*|| (for softmax on a binary problem the
                                effective weight W[:, 1] - W[:, 0] is compared); NaN otherwise
    residual_norm               ||X w - y|| for the squares loss, NaN otherwise
"""
from __future__ import annotations

import math

import numpy as np

from stopwise.problem.losses import class_index, multiclass_margins, n_outputs, value_from_scores
from stopwise.problem.margins import reference
from stopwise.problem.models import LinearModel

COLUMNS = ("val_loss", "test_loss", "margin", "svm_angle", "svm_dist")
SPLITS = ("train", "val", "test")


class ClassificationMetrics:
    columns = COLUMNS

    def __init__(self, problem, loss: str, model=None):
        self.problem = problem
        self.loss = loss
        k = n_outputs(loss, problem.n_classes)
        self.model = model if model is not None else LinearModel(problem.d, k)
        self.degree = self.model.degree
        self.multi = isinstance(self.model, LinearModel) and self.model.k > 1
        self._score = {}
        self._y = {}
        self._c = {}
        for s in SPLITS:
            X = getattr(problem, "X_" + s)
            y = getattr(problem, "y_" + s)
            self._score[s] = self.model.scorer(X)
            self._y[s] = y
            self._c[s] = class_index(y) if self.multi else None
        self._qbuf = {s: np.empty(self._y[s].shape[0]) for s in SPLITS}
        self.ref = None
        self._u = None
        self.info: dict = {"loss": loss}
        if problem.task == "binary" and isinstance(self.model, LinearModel):
            self.ref = reference(problem)
            self.info.update(separable=None if self.ref.info.get("skipped") else self.ref.separable,
                             svm_method=self.ref.method)
            if self.ref.separable:
                self._u = self.ref.direction
                self.info.update(svm_margin=self.ref.margin, svm_norm=float(np.linalg.norm(self.ref.w)),
                                 svm_min_functional_margin=self.ref.min_functional_margin,
                                 svm_w=self.ref.w.tolist())
                if "kkt" in self.ref.info:
                    self.info["svm_kkt"] = self.ref.info["kkt"]
                self._v = np.empty(problem.d)

    def _split(self, split: str, w: np.ndarray) -> tuple[float, float, np.ndarray, np.ndarray]:
        """(loss, error, scores, margins) of one split; binary scores and margins live in
        preallocated buffers."""
        y = self._y[split]
        if y.shape[0] == 0:
            return math.nan, math.nan, np.empty(0), np.empty(0)
        s = self._score[split](w)
        loss = value_from_scores(self.loss, s, y, self._c[split])
        if s.ndim == 1:
            q = np.multiply(y, s, out=self._qbuf[split])
        else:
            q = multiclass_margins(s, self._c[split])
        err = float(np.count_nonzero(q <= 0.0)) / y.shape[0]
        return loss, err, s, q

    def fill(self, col: dict, i: int, w: np.ndarray) -> float:
        """Write row ``i`` of the classification columns for iterate ``w``; returns the
        training objective."""
        loss, err, s, q = self._split("train", w)
        col["train_loss"][i] = loss
        col["train_error"][i] = err
        nw = math.sqrt(float(w @ w))
        qmin = float(q.min()) if q.size else math.nan
        col["margin"][i] = qmin / nw ** self.degree if nw > 0 else math.nan
        if self.loss == "squares":
            r = s - self._y["train"]
            col["residual_norm"][i] = math.sqrt(float(r @ r))
        else:
            col["residual_norm"][i] = math.nan
        col["val_loss"][i], col["val_error"][i], _, _ = self._split("val", w)
        col["test_loss"][i], col["test_error"][i], _, _ = self._split("test", w)
        angle = dist = math.nan
        if self._u is not None:
            if self.multi:
                W = w.reshape(self.problem.d, -1)
                v = np.subtract(W[:, 1], W[:, 0], out=self._v)
            else:
                v = w
            nv = math.sqrt(float(v @ v))
            if nv > 0:
                diff = np.multiply(v, 1.0 / nv, out=self._v)
                diff -= self._u
                dist = math.sqrt(float(diff @ diff))
                angle = 2.0 * math.asin(min(dist / 2.0, 1.0))
        col["svm_angle"][i] = angle
        col["svm_dist"][i] = dist
        return loss
