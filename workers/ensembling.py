"""Estimators tutti needs where scikit-learn and LightGBM offer none.

Everything here ends up inside exported pipelines that users load with skops, so each class is a
plain scikit-learn estimator: ``__init__`` only stores its arguments, ``fit`` validates them and
returns ``self``, learned state ends in ``_`` and prediction methods call ``check_is_fitted``.
This module imports only numpy, scikit-learn, LightGBM, ``workers._sklearn_compat`` and
``tuttiml._timeunits`` (numpy only; pandas is obtained through scikit-learn's
optional-dependency helper), so a pipeline needs nothing more at prediction time.
"""

from __future__ import annotations

import dataclasses
import math
import numbers
from collections.abc import Sequence
from typing import Any

import lightgbm
import numpy as np
from sklearn.base import (
    BaseEstimator,
    ClassifierMixin,
    RegressorMixin,
    clone,
    is_classifier,
)
from sklearn.linear_model import LogisticRegression, RidgeCV
from sklearn.model_selection import train_test_split
from sklearn.utils import Bunch, check_random_state, get_tags
from sklearn.utils.metaestimators import available_if
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data
from tuttiml.workers._estimator_base import STABLE_MODULE, _has_method, _is_frame, _require
from tuttiml.workers._sklearn_compat import NamedEstimatorsBase, take_rows
from tuttiml.workers.framing import FrameNormalizer, UserLabels  # re-exported (one import path)

__all__ = [
    "BlendingClassifier",
    "BlendingRegressor",
    "EarlyStoppingBooster",
    "EarlyStoppingBoosterClassifier",
    "EarlyStoppingBoosterRegressor",
    "FrameNormalizer",
    "RowCap",
    "UserLabels",
    "best_iterations",
    "refit_rounds",
]


# --------------------------------------------------------------------------------------------
# shared helpers


def _validated(owner: BaseEstimator, X: Any, *, reset: bool, **check: Any) -> Any:
    """Check shape and feature names like scikit-learn does, but keep DataFrames as they are.

    Returns the table to hand to inner estimators: the DataFrame itself when ``X`` is one,
    otherwise the validated array.
    """
    Xv = validate_data(owner, X, reset=reset, **check)
    return X if _is_frame(X) else Xv


def _validated_xy(owner: BaseEstimator, X: Any, y: Any, **check: Any) -> tuple[Any, np.ndarray]:
    """:func:`_validated` for ``fit``: also validates ``y`` (and requires it)."""
    Xv, yv = validate_data(owner, X, y, reset=True, **check)
    return (X if _is_frame(X) else Xv), yv


def _align_columns(values: np.ndarray, fitted: np.ndarray, classes: np.ndarray) -> np.ndarray:
    """Columns of ``values`` (ordered by ``fitted`` classes) placed in the order of ``classes``."""
    if len(fitted) == len(classes) and np.array_equal(fitted, classes):
        return values
    out = np.zeros((values.shape[0], len(classes)))
    out[:, np.searchsorted(classes, fitted)] = values
    return out


# --------------------------------------------------------------------------------------------
# blending


class _BlendingBase(NamedEstimatorsBase):
    """Shared fitting rule of :class:`BlendingClassifier` and :class:`BlendingRegressor`."""

    def __init__(
        self,
        estimators: list[tuple[str, Any]],
        final_estimator: Any = None,
        *,
        holdout_fraction: float = 0.2,
        random_state: int | None = None,
    ) -> None:
        self.estimators = estimators
        self.final_estimator = final_estimator
        self.holdout_fraction = holdout_fraction
        self.random_state = random_state

    def get_params(self, deep: bool = True) -> dict[str, Any]:
        """Parameters, including ``<member>__<param>`` paths of every member when ``deep``."""
        return self._get_params("estimators", deep=deep)

    def set_params(self, **params: Any) -> _BlendingBase:
        """Set parameters, accepting ``<member>`` and ``<member>__<param>`` keys."""
        self._set_params("estimators", **params)
        return self

    def __sklearn_tags__(self) -> Any:
        tags = super().__sklearn_tags__()
        members = [e for _, e in self._members_or_empty()]
        tags.input_tags.allow_nan = bool(members) and all(
            get_tags(e).input_tags.allow_nan for e in members
        )
        return tags

    def _members_or_empty(self) -> list[tuple[str, Any]]:
        try:
            return [(n, e) for n, e in self.estimators if not (isinstance(e, str) and e == "drop")]
        except (TypeError, ValueError):
            return []

    def _check_params(self) -> list[tuple[str, Any]]:
        est = self.estimators
        _require(
            self,
            "estimators",
            est,
            isinstance(est, Sequence)
            and len(est) > 0
            and all(isinstance(p, tuple) and len(p) == 2 for p in est),
            "a non-empty list of (name, estimator) pairs",
        )
        names = [n for n, _ in est]
        _require(self, "estimators", names, len(set(names)) == len(names), "uniquely named")
        members = self._members_or_empty()
        _require(self, "estimators", est, len(members) > 0, "not all 'drop'")
        hf = self.holdout_fraction
        _require(
            self,
            "holdout_fraction",
            hf,
            isinstance(hf, numbers.Real) and 0.0 < float(hf) < 1.0,
            "a float strictly between 0 and 1",
        )
        return members

    def _final(self) -> Any:
        return (
            self._default_final_estimator()
            if self.final_estimator is None
            else (self.final_estimator)
        )

    def _split(self, y: np.ndarray, stratify: bool) -> tuple[np.ndarray, np.ndarray]:
        """Train/hold-out row indices: stratified when asked and possible, else plain random."""
        idx = np.arange(len(y))
        kw = {"test_size": self.holdout_fraction, "random_state": self.random_state}
        if stratify:
            try:
                return train_test_split(idx, stratify=y, **kw)
            except ValueError:  # a class too small to appear on both sides
                pass
        return train_test_split(idx, **kw)

    def _fit(self, X: Any, y: Any, *, classifier: bool) -> _BlendingBase:
        members = self._check_params()
        X, y = _validated_xy(
            self, X, y, dtype=None, ensure_all_finite=False, y_numeric=not classifier
        )
        if classifier:
            check_classification_targets(y)
            self.classes_ = np.unique(y)
        train, hold = self._split(y, stratify=classifier)
        X_train, X_hold = take_rows(X, train), take_rows(X, hold)
        on_train = [clone(e).fit(X_train, y[train]) for _, e in members]
        meta = self._meta_features(on_train, X_hold)
        self.final_estimator_ = clone(self._final()).fit(meta, y[hold])
        self.estimators_ = [clone(e).fit(X, y) for _, e in members]
        self.named_estimators_ = Bunch(
            **{n: e for (n, _), e in zip(members, self.estimators_, strict=True)}
        )
        return self

    def _meta_features(self, fitted: list[Any], X: Any) -> np.ndarray:
        raise NotImplementedError

    def _meta_of(self, X: Any) -> np.ndarray:
        check_is_fitted(self)
        X = _validated(self, X, reset=False, dtype=None, ensure_all_finite=False)
        return self._meta_features(self.estimators_, X)


class BlendingClassifier(ClassifierMixin, _BlendingBase):
    """Blend classifiers through a meta-model fitted on a hold-out slice of the training rows.

    Fitting rule: the rows given to ``fit`` are split once (``holdout_fraction`` of them held
    out, stratified by class when every class has enough rows, seeded by ``random_state``).
    Each member is fitted on the remaining rows and predicts the held-out rows; the
    meta-model (``final_estimator``, default ``LogisticRegression()``) is fitted on those
    hold-out predictions. Then every member is **refitted on all rows** and the meta-model is
    kept as it is, so predictions use members that saw all the data. Members that are
    ``"drop"`` are skipped, which is the same as never adding them.

    Meta features per member: ``predict_proba`` in ``classes_`` order when available, else
    ``decision_function``, else the one-hot of ``predict``. With two classes only the
    positive-class column is kept, as ``StackingClassifier`` does.

    Args:
        estimators: list of ``(name, estimator)`` pairs; an estimator may be ``"drop"``.
        final_estimator: meta-model; ``None`` means ``LogisticRegression()``.
        holdout_fraction: share of the training rows held out for the meta-model, in (0, 1).
        random_state: seed of the hold-out split.
    """

    __module__ = STABLE_MODULE

    def _default_final_estimator(self) -> Any:
        return LogisticRegression()

    def fit(self, X: Any, y: Any) -> BlendingClassifier:
        """Fit members on the training part, the meta-model on the hold-out, refit members."""
        return self._fit(X, y, classifier=True)  # type: ignore[return-value]

    def _meta_features(self, fitted: list[Any], X: Any) -> np.ndarray:
        blocks = []
        for est in fitted:
            own = np.asarray(getattr(est, "classes_", self.classes_))
            if hasattr(est, "predict_proba"):
                block = _align_columns(np.asarray(est.predict_proba(X), float), own, self.classes_)
            elif hasattr(est, "decision_function"):
                block = np.asarray(est.decision_function(X), float)
                block = block[:, None] if block.ndim == 1 else block
            else:
                labels = np.asarray(est.predict(X))
                block = (labels[:, None] == self.classes_[None, :]).astype(float)
            if len(self.classes_) == 2 and block.shape[1] == 2:
                block = block[:, 1:]
            blocks.append(block)
        return np.hstack(blocks)

    def predict(self, X: Any) -> np.ndarray:
        """Class labels chosen by the meta-model."""
        meta = self._meta_of(X)
        return np.asarray(self.final_estimator_.predict(meta))

    @available_if(_has_method("predict_proba", "final_estimator"))
    def predict_proba(self, X: Any) -> np.ndarray:
        """Meta-model class probabilities, columns in ``classes_`` order."""
        meta = self._meta_of(X)
        final = self.final_estimator_
        proba = np.asarray(final.predict_proba(meta), dtype=float)
        return _align_columns(proba, np.asarray(final.classes_), self.classes_)


class BlendingRegressor(RegressorMixin, _BlendingBase):
    """Blend regressors through a meta-model fitted on a hold-out slice of the training rows.

    Same fitting rule as :class:`BlendingClassifier` (plain random hold-out split, members
    refitted on all rows afterwards); the meta features are the members' predictions and the
    default meta-model is ``RidgeCV()``.

    Args:
        estimators: list of ``(name, estimator)`` pairs; an estimator may be ``"drop"``.
        final_estimator: meta-model; ``None`` means ``RidgeCV()``.
        holdout_fraction: share of the training rows held out for the meta-model, in (0, 1).
        random_state: seed of the hold-out split.
    """

    __module__ = STABLE_MODULE

    def _default_final_estimator(self) -> Any:
        return RidgeCV()

    def fit(self, X: Any, y: Any) -> BlendingRegressor:
        """Fit members on the training part, the meta-model on the hold-out, refit members."""
        return self._fit(X, y, classifier=False)  # type: ignore[return-value]

    def _meta_features(self, fitted: list[Any], X: Any) -> np.ndarray:
        return np.column_stack([np.asarray(e.predict(X), dtype=float).ravel() for e in fitted])

    def predict(self, X: Any) -> np.ndarray:
        """Meta-model prediction from the members' predictions."""
        meta = self._meta_of(X)
        return np.asarray(self.final_estimator_.predict(meta), dtype=float).ravel()


# --------------------------------------------------------------------------------------------
# early-stopped LightGBM


class EarlyStoppingBooster(BaseEstimator):
    """LightGBM model that picks its number of rounds by early stopping on its own rows.

    ``fit(X, y)`` carves a validation slice (``validation_fraction`` of the rows it is given,
    stratified for classifiers, seeded by ``random_state``) out of **its own training rows**,
    fits ``estimator`` with up to ``max_rounds`` rounds on the rest and stops after
    ``patience`` rounds without improvement of LightGBM's default metric. Rows passed to
    ``predict`` are never seen during fitting. The chosen round count is ``best_iteration_``.

    When ``fixed_rounds`` is an int, the model is instead fitted on all rows for exactly that
    many rounds, without early stopping; the finalize step sets it (see :func:`refit_rounds`
    and :func:`best_iterations`) before the all-rows refit. When the rows are too few to carve
    a stratified validation slice, the model is fitted on all rows for ``max_rounds`` rounds.

    Args:
        estimator: an unfitted ``LGBMClassifier``/``LGBMRegressor``; ``None`` means one with
            ``n_jobs=1, verbose=-1`` and this object's ``random_state``. Its
            ``n_estimators`` is overridden.
        max_rounds: round limit while early stopping.
        patience: rounds without improvement before stopping.
        validation_fraction: share of the rows used for early stopping, in (0, 1).
        fixed_rounds: exact round count to fit on all rows, or ``None`` to early-stop.
        random_state: seed of the validation split.
    """

    def __init__(
        self,
        estimator: Any = None,
        *,
        max_rounds: int = 500,
        patience: int = 50,
        validation_fraction: float = 0.15,
        fixed_rounds: int | None = None,
        random_state: int | None = None,
    ) -> None:
        self.estimator = estimator
        self.max_rounds = max_rounds
        self.patience = patience
        self.validation_fraction = validation_fraction
        self.fixed_rounds = fixed_rounds
        self.random_state = random_state

    _lgbm_class: type = lightgbm.LGBMModel

    def _default_estimator(self) -> Any:
        return self._lgbm_class(n_jobs=1, verbose=-1, random_state=self.random_state)

    def _check_params(self) -> None:
        def pos_int(v: Any) -> bool:
            return isinstance(v, numbers.Integral) and not isinstance(v, bool) and v >= 1

        _require(self, "max_rounds", self.max_rounds, pos_int(self.max_rounds), "an int >= 1")
        _require(self, "patience", self.patience, pos_int(self.patience), "an int >= 1")
        vf = self.validation_fraction
        _require(
            self,
            "validation_fraction",
            vf,
            isinstance(vf, numbers.Real) and 0.0 < float(vf) < 1.0,
            "a float strictly between 0 and 1",
        )
        fr = self.fixed_rounds
        _require(self, "fixed_rounds", fr, fr is None or pos_int(fr), "None or an int >= 1")
        est = self.estimator
        _require(
            self,
            "estimator",
            est,
            est is None or isinstance(est, self._lgbm_class),
            f"None or an unfitted {self._lgbm_class.__name__}",
        )

    def _fit(self, X: Any, y: Any, *, classifier: bool) -> EarlyStoppingBooster:
        self._check_params()
        # LightGBM gets plain arrays: column names made of user categories may hold characters
        # (":", "[", ",", ...) that LightGBM refuses in feature names.
        X, y = validate_data(
            self,
            X,
            y,
            ensure_all_finite="allow-nan",
            accept_sparse=["csr", "csc"],
            y_numeric=not classifier,
        )
        if classifier:  # LightGBM is given integer codes; labels are mapped back on predict
            check_classification_targets(y)
            self.classes_, y = np.unique(y, return_inverse=True)
        template = self._default_estimator() if self.estimator is None else self.estimator
        if self.fixed_rounds is not None:
            self.estimator_ = clone(template).set_params(n_estimators=self.fixed_rounds)
            self.estimator_.fit(X, y)
            self.best_iteration_ = int(self.fixed_rounds)
            return self
        split = self._split(y, classifier)
        self.estimator_ = clone(template).set_params(n_estimators=self.max_rounds)
        if split is None:
            self.estimator_.fit(X, y)
            self.best_iteration_ = int(self.max_rounds)
            return self
        train, valid = split
        self.estimator_.fit(
            take_rows(X, train),
            y[train],
            eval_X=(take_rows(X, valid),),
            eval_y=(y[valid],),
            callbacks=[lightgbm.early_stopping(self.patience, verbose=False)],
        )
        self.best_iteration_ = int(self.estimator_.best_iteration_ or self.max_rounds)
        return self

    def _split(self, y: np.ndarray, classifier: bool) -> tuple[np.ndarray, np.ndarray] | None:
        """Train/validation indices, or ``None`` when the rows are too few to split."""
        n = len(y)
        if n < 10:
            return None
        try:
            return train_test_split(
                np.arange(n),
                test_size=self.validation_fraction,
                stratify=y if classifier else None,
                random_state=self.random_state,
            )
        except ValueError:  # a class with a single row cannot be stratified
            return None

    def __sklearn_tags__(self) -> Any:
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        tags.input_tags.sparse = True
        return tags

    def _inner_input(self, X: Any) -> Any:
        check_is_fitted(self)
        return validate_data(
            self, X, reset=False, ensure_all_finite="allow-nan", accept_sparse=["csr", "csc"]
        )


class EarlyStoppingBoosterClassifier(ClassifierMixin, EarlyStoppingBooster):
    """:class:`EarlyStoppingBooster` around an ``LGBMClassifier`` (stratified validation)."""

    __module__ = STABLE_MODULE

    _lgbm_class = lightgbm.LGBMClassifier

    def fit(self, X: Any, y: Any) -> EarlyStoppingBoosterClassifier:
        """Fit with early stopping (or ``fixed_rounds``); see the base class for the rule."""
        self._fit(X, y, classifier=True)
        return self

    def predict(self, X: Any) -> np.ndarray:
        """Predicted class labels."""
        proba = self.predict_proba(X)
        return self.classes_[np.argmax(proba, axis=1)]

    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities, columns in ``classes_`` order."""
        X = self._inner_input(X)
        return np.asarray(self.estimator_.predict_proba(X))


class EarlyStoppingBoosterRegressor(RegressorMixin, EarlyStoppingBooster):
    """:class:`EarlyStoppingBooster` around an ``LGBMRegressor``."""

    __module__ = STABLE_MODULE

    _lgbm_class = lightgbm.LGBMRegressor

    def fit(self, X: Any, y: Any) -> EarlyStoppingBoosterRegressor:
        """Fit with early stopping (or ``fixed_rounds``); see the base class for the rule."""
        self._fit(X, y, classifier=False)
        return self

    def predict(self, X: Any) -> np.ndarray:
        """Predicted values."""
        X = self._inner_input(X)
        return np.asarray(self.estimator_.predict(X), dtype=float)


def _fitted_child(parent: Any, name: str) -> Any:
    """The fitted object standing for parameter ``name`` of a fitted ``parent``, or None."""
    steps = getattr(parent, "named_steps", None)
    if steps is not None and name in steps:
        return steps[name]
    named = getattr(parent, "named_estimators_", None)
    if named is not None and name in named:
        return named[name]
    fitted = getattr(parent, name + "_", None)
    if fitted is not None and hasattr(fitted, "get_params"):
        return fitted
    return None


def best_iterations(fitted_estimator: Any) -> dict[str, int]:
    """Early-stopped round counts of every :class:`EarlyStoppingBooster` in a fitted estimator.

    Walks ``get_params(deep=True)`` and, for each booster found there, follows the parameter
    path through the fitted objects (pipeline steps, ``named_estimators_`` of voting, stacking
    and blending ensembles, and ``<param>_`` attributes such as ``estimator_`` or
    ``final_estimator_``). Boosters whose fitted counterpart cannot be located this way (e.g.
    inside bagging, which keeps many copies) are left out.

    Returns:
        ``{parameter path of fixed_rounds: best_iteration_}``, ready for ``set_params`` after
        the values are combined across folds with :func:`refit_rounds`.
    """
    found: dict[str, int] = {}
    if isinstance(fitted_estimator, EarlyStoppingBooster):
        if hasattr(fitted_estimator, "best_iteration_"):
            found["fixed_rounds"] = int(fitted_estimator.best_iteration_)
        return found
    if not hasattr(fitted_estimator, "get_params"):
        return found
    for path, value in fitted_estimator.get_params(deep=True).items():
        if not isinstance(value, EarlyStoppingBooster):
            continue
        node: Any = fitted_estimator
        for part in path.split("__"):
            node = _fitted_child(node, part)
            if node is None:
                break
        if node is not None and hasattr(node, "best_iteration_"):
            found[f"{path}__fixed_rounds"] = int(node.best_iteration_)
    return found


def refit_rounds(per_fold_best: list[int], n_train_fold: int, n_all: int) -> int:
    """Round count for the all-rows refit of an early-stopped booster.

    Rule: the mean of the per-fold best iterations, scaled by ``n_all / n_train_fold`` (more
    rows support proportionally more rounds at the same learning rate), rounded to the
    nearest int and at least 1.

    Args:
        per_fold_best: ``best_iteration_`` of the booster in each CV fold.
        n_train_fold: training rows per fold (mean over folds when they differ).
        n_all: rows of the all-rows refit.

    Raises:
        ValueError: ``per_fold_best`` is empty or a row count is not positive.
    """
    if not per_fold_best:
        raise ValueError("refit_rounds: per_fold_best is empty; pass one value per fold.")
    if n_train_fold <= 0 or n_all <= 0:
        raise ValueError(
            f"refit_rounds: row counts must be positive; got n_train_fold={n_train_fold}, "
            f"n_all={n_all}."
        )
    mean = float(np.mean(per_fold_best))
    return max(1, round(mean * n_all / n_train_fold))


# --------------------------------------------------------------------------------------------
# row cap


class RowCap(BaseEstimator):
    """Fit the inner estimator on at most ``max_rows`` training rows.

    Keeps the cost of estimators whose fit grows faster than linearly with the row count
    (kNN prediction, kernel SVMs, MLPs) bounded. When the estimator is a classifier the
    subsample is stratified: each class keeps ``floor(max_rows * share)`` rows but at least one,
    so every class stays known (the total may then exceed ``max_rows`` by at most the number
    of classes). With ``max_rows`` or fewer rows, all rows are used. Acts as a classifier or
    regressor according to the inner estimator.

    Args:
        estimator: the unfitted estimator to cap.
        max_rows: row limit, >= 1.
        random_state: seed of the subsample.
    """

    __module__ = STABLE_MODULE

    def __init__(self, estimator: Any, *, max_rows: int = 5000, random_state: int | None = None):
        self.estimator = estimator
        self.max_rows = max_rows
        self.random_state = random_state

    def __sklearn_tags__(self) -> Any:
        tags = super().__sklearn_tags__()
        inner = get_tags(self.estimator)
        tags.estimator_type = inner.estimator_type
        tags.regressor_tags = inner.regressor_tags
        tags.input_tags.allow_nan = inner.input_tags.allow_nan
        if inner.classifier_tags is not None:  # the stratified subsample needs 1-d labels
            tags.classifier_tags = dataclasses.replace(inner.classifier_tags, multi_label=False)
        tags.target_tags.required = True
        return tags

    def _rows(self, y: np.ndarray, classifier: bool) -> np.ndarray:
        n = len(y)
        if n <= self.max_rows:
            return np.arange(n)
        rng = check_random_state(self.random_state)
        if not classifier:
            return np.sort(rng.choice(n, size=self.max_rows, replace=False))
        picked = []
        for c in np.unique(y):
            members = np.flatnonzero(y == c)
            quota = max(1, math.floor(self.max_rows * len(members) / n))
            picked.append(rng.choice(members, size=quota, replace=False))
        return np.sort(np.concatenate(picked))

    def fit(self, X: Any, y: Any) -> RowCap:
        """Subsample the rows (see the class docstring) and fit a clone of ``estimator``."""
        mr = self.max_rows
        _require(
            self,
            "max_rows",
            mr,
            isinstance(mr, numbers.Integral) and not isinstance(mr, bool) and mr >= 1,
            "an int >= 1",
        )
        classifier = is_classifier(self.estimator)
        X, y = _validated_xy(self, X, y, ensure_all_finite=False, y_numeric=not classifier)
        if classifier:
            check_classification_targets(y)
            self.classes_ = np.unique(y)
        rows = self._rows(y, classifier)
        self.n_rows_fitted_ = len(rows)
        self.estimator_ = clone(self.estimator).fit(take_rows(X, rows), y[rows])
        return self

    def _inner_input(self, X: Any) -> Any:
        check_is_fitted(self)
        return _validated(self, X, reset=False, ensure_all_finite=False)

    def predict(self, X: Any) -> np.ndarray:
        """Predictions of the inner estimator."""
        X = self._inner_input(X)
        return np.asarray(self.estimator_.predict(X))

    @available_if(_has_method("predict_proba", "estimator"))
    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities of the inner classifier, columns in ``classes_`` order."""
        X = self._inner_input(X)
        return np.asarray(self.estimator_.predict_proba(X))

    @available_if(_has_method("decision_function", "estimator"))
    def decision_function(self, X: Any) -> np.ndarray:
        """Decision function of the inner classifier."""
        X = self._inner_input(X)
        return np.asarray(self.estimator_.decision_function(X))

    def score(self, X: Any, y: Any, sample_weight: Any = None) -> float:
        """Accuracy for classifiers, R² for regressors (the inner estimator's ``score``)."""
        X = self._inner_input(X)
        return float(self.estimator_.score(X, y, sample_weight=sample_weight))
