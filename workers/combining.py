"""LinearCombiner: the estimator a winning library ensemble is exported as.

Library ensembles are chosen on stored out-of-fold predictions; refitting one refits only its
members on all rows and combines their predictions with the weights (greedy selection) or the
meta-model coefficients (stacked meta-model) learned on those out-of-fold rows. Imports only
numpy and scikit-learn: it ends up inside exported pipelines.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin, clone
from sklearn.utils import get_tags
from sklearn.utils.validation import check_is_fitted, column_or_1d

# Exported files record this path (see tuttiml/estimators.py); keep it when moving code.
STABLE_MODULE = "tuttiml.estimators"

MODES = ("average", "logistic", "linear")


def _softmax(z: np.ndarray) -> np.ndarray:
    z = z - z.max(axis=1, keepdims=True)
    e = np.exp(z)
    return e / e.sum(axis=1, keepdims=True)


class _Combiner(BaseEstimator):
    """Shared fit/combine logic; see the classifier and regressor below."""

    def __init__(
        self,
        estimators: list[tuple[str, Any]],
        *,
        mode: str = "average",
        weights: list[float] | None = None,
        coef: list[Any] | None = None,
        intercept: list[float] | float | None = None,
    ) -> None:
        self.estimators = estimators
        self.mode = mode
        self.weights = weights
        self.coef = coef
        self.intercept = intercept

    def _check(self) -> None:
        if self.mode not in MODES:
            raise ValueError(f"mode={self.mode!r}: choose one of {', '.join(MODES)}")
        n = len(self.estimators)
        if self.mode == "average" and (self.weights is None or len(self.weights) != n):
            got = 0 if self.weights is None else len(self.weights)
            raise ValueError(f"weights: {got} weights for {n} estimators; give one per estimator")

    def fit(self, X: Any, y: Any) -> _Combiner:
        """Fit every member on all rows; the combination itself was learned beforehand."""
        self._check()
        y = column_or_1d(y, warn=True)
        self.estimators_ = [clone(est).fit(X, y) for _, est in self.estimators]
        self.n_features_in_ = getattr(self.estimators_[0], "n_features_in_", None)
        if hasattr(X, "columns"):
            self.feature_names_in_ = np.asarray(X.columns, dtype=object)
        return self

    def _member_outputs(self, X: Any) -> list[np.ndarray]:
        raise NotImplementedError

    def __sklearn_tags__(self) -> Any:
        # sparse input works exactly when every member takes it (as scikit-learn's voting does)
        tags = super().__sklearn_tags__()
        tags.input_tags.sparse = all(
            get_tags(est).input_tags.sparse for _, est in self.estimators if est != "drop"
        )
        return tags


def combine_probas(
    probas: list[np.ndarray],
    mode: str,
    weights: Any = None,
    coef: Any = None,
    intercept: Any = None,
) -> np.ndarray:
    """Class probabilities of a library ensemble from its members' probabilities.

    The one rule both the exported classifier and finalize (on stored out-of-fold
    predictions, e.g. to tune a decision threshold) apply.
    """
    if mode == "average":
        w = np.asarray(weights, dtype=float)
        return np.asarray(sum(wi * p for wi, p in zip(w, probas, strict=True)) / w.sum())
    c = np.atleast_2d(np.asarray(coef, dtype=float))
    b = np.atleast_1d(np.asarray(intercept, dtype=float))
    if probas[0].shape[1] == 2:
        feats = np.column_stack([p[:, 1] for p in probas])
        z = feats @ c.ravel() + b[0]
        p1 = 1.0 / (1.0 + np.exp(-z))
        return np.column_stack([1.0 - p1, p1])
    return _softmax(np.hstack(probas) @ c.T + b)


class LinearCombinerClassifier(ClassifierMixin, _Combiner):
    """Members' class probabilities averaged with weights, or fed to a fitted logistic model."""

    __module__ = STABLE_MODULE

    def fit(self, X: Any, y: Any) -> LinearCombinerClassifier:
        super().fit(X, y)
        self.classes_ = np.asarray(self.estimators_[0].classes_)
        return self

    def _proba(self, est: Any, X: Any) -> np.ndarray:
        if hasattr(est, "predict_proba"):
            return np.asarray(est.predict_proba(X), dtype=float)
        labels = np.asarray(est.predict(X))
        return (labels[:, None] == self.classes_[None, :]).astype(float)

    def predict_proba(self, X: Any) -> np.ndarray:
        check_is_fitted(self)
        probas = [self._proba(est, X) for est in self.estimators_]
        return combine_probas(probas, self.mode, self.weights, self.coef, self.intercept)

    def predict(self, X: Any) -> np.ndarray:
        check_is_fitted(self)
        return self.classes_[np.argmax(self.predict_proba(X), axis=1)]


class LinearCombinerRegressor(RegressorMixin, _Combiner):
    """Members' predictions averaged with weights, or combined with fitted linear weights."""

    __module__ = STABLE_MODULE

    def predict(self, X: Any) -> np.ndarray:
        check_is_fitted(self)
        preds = np.column_stack([np.asarray(e.predict(X), dtype=float) for e in self.estimators_])
        if self.mode == "average":
            w = np.asarray(self.weights, dtype=float)
            return preds @ (w / w.sum())
        coef = np.asarray(self.coef, dtype=float).ravel()
        b = float(np.asarray(self.intercept if self.intercept is not None else 0.0).ravel()[0])
        return preds @ coef + b
