"""Scores computed from stored predictions, greater is better, so library ensembles reuse them.

Classification predictions are always an (n, k) matrix of class probabilities in the order of
``classes`` (an estimator without ``predict_proba`` contributes the one-hot of its labels);
regression predictions are a vector.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from sklearn import metrics as skm
from tuttiml.service.spec import Metric, score_sign

_EPS = 1e-15


def _labels(proba: np.ndarray, classes: np.ndarray) -> np.ndarray:
    return classes[np.argmax(proba, axis=1)]


def _clip_proba(proba: np.ndarray) -> np.ndarray:
    p = np.clip(np.asarray(proba, dtype=float), _EPS, 1.0)
    return p / p.sum(axis=1, keepdims=True)


def natural_score(
    metric: Metric, y_true: np.ndarray, pred: np.ndarray, classes: np.ndarray | None = None
) -> float:
    """The metric in its natural sign (log loss and RMSE: smaller is better)."""
    m = Metric(metric)
    if m in (Metric.RMSE, Metric.MAE, Metric.R2):
        values = np.asarray(pred, dtype=float).ravel()
        if m is Metric.RMSE:
            return float(np.sqrt(skm.mean_squared_error(y_true, values)))
        if m is Metric.MAE:
            return float(skm.mean_absolute_error(y_true, values))
        return float(skm.r2_score(y_true, values))
    if classes is None:
        raise ValueError("classes are required for classification metrics")
    proba = np.asarray(pred, dtype=float)
    if m is Metric.ROC_AUC:
        return float(skm.roc_auc_score(y_true == classes[1], proba[:, 1]))
    if m is Metric.LOG_LOSS:
        return float(skm.log_loss(y_true, _clip_proba(proba), labels=classes))
    labels = _labels(proba, classes)
    if m is Metric.ACCURACY:
        return float(skm.accuracy_score(y_true, labels))
    if m is Metric.BALANCED_ACCURACY:
        return float(skm.balanced_accuracy_score(y_true, labels))
    if m is Metric.F1:
        return float(skm.f1_score(y_true, labels, pos_label=classes[1]))
    if m is Metric.F1_MACRO:
        return float(skm.f1_score(y_true, labels, average="macro", labels=classes))
    raise ValueError(f"metric {metric!r} is not supported")


def sign(metric: Metric) -> float:
    """+1 when greater is better, -1 when smaller is better."""
    return score_sign(metric)


def score(
    metric: Metric, y_true: np.ndarray, pred: np.ndarray, classes: np.ndarray | None = None
) -> float:
    """Greater-is-better score (the natural value, negated for losses)."""
    return sign(metric) * natural_score(metric, y_true, pred, classes)


def scorer(metric: Metric, classes: np.ndarray | None = None) -> Callable[..., float]:
    """``score`` with metric and classes bound: ``f(y_true, pred) -> float``."""

    def _f(y_true: np.ndarray, pred: np.ndarray) -> float:
        return score(metric, y_true, pred, classes)

    return _f


def predictions(estimator: object, X: object, task: str, classes: np.ndarray | None) -> np.ndarray:
    """Predictions of a fitted estimator in the stored layout (see module docstring)."""
    if task == "regression":
        return np.asarray(estimator.predict(X), dtype=float).ravel()  # type: ignore[attr-defined]
    assert classes is not None
    if hasattr(estimator, "predict_proba"):
        proba = np.asarray(estimator.predict_proba(X), dtype=float)  # type: ignore[attr-defined]
        fitted = np.asarray(getattr(estimator, "classes_", classes))
        if len(fitted) == len(classes) and np.array_equal(fitted, classes):
            return proba
        out = np.zeros((proba.shape[0], len(classes)))
        for j, c in enumerate(fitted):
            out[:, np.searchsorted(classes, c)] = proba[:, j]
        return out
    return one_hot(np.asarray(estimator.predict(X)), classes)  # type: ignore[attr-defined]


def one_hot(labels: np.ndarray, classes: np.ndarray) -> np.ndarray:
    """Predicted labels in the stored probability layout (1 for the label's class, else 0)."""
    return (np.asarray(labels)[:, None] == classes[None, :]).astype(float)
