"""The first and last steps of every exported pipeline: raw rows in, the user's labels out.

``FrameNormalizer`` turns the user's raw DataFrame into the frame the search saw (same rules
as at submit); ``UserLabels`` gives predictions back in the user's labels and dtype. Imports
only numpy, scikit-learn and light helpers, so a pipeline needs nothing more to predict.
"""

from __future__ import annotations

import dataclasses
import numbers
from typing import Any

import numpy as np
from sklearn.base import (
    BaseEstimator,
    ClassifierMixin,
    TransformerMixin,
    clone,
)
from sklearn.utils import get_tags
from sklearn.utils.metaestimators import available_if
from sklearn.utils.validation import check_is_fitted
from tuttiml.workers._estimator_base import STABLE_MODULE, _has_method, _is_frame, _require
from tuttiml.workers._sklearn_compat import pandas_module

from tuttiml._timeunits import to_seconds

NUMERIC = "numeric"
CATEGORICAL = "categorical"

__all__ = ["FrameNormalizer", "UserLabels"]


# --------------------------------------------------------------------------------------------
# the user's own class labels


def _label_key(value: Any) -> tuple[str, Any]:
    """Dict key of a label that keeps True, 1 and "1" apart (Python hashes True like 1)."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool):
        return "bool", value
    if isinstance(value, numbers.Number):
        return "number", value
    return type(value).__name__, value


class UserLabels(ClassifierMixin, BaseEstimator):
    """A classifier that speaks the user's class labels, with their dtype, on both ends.

    The search trains on normalised class labels (a boolean target as 0/1, whole-number floats
    as ints, a category of numbers as text); exported pipelines end in this wrapper so that
    ``predict`` returns ``False``/``True`` for a boolean target, ``1.0`` for a float one, and
    ``classes_`` lists the user's labels. ``fit`` takes the user's labels too: each is mapped
    to its normalised class and a clone of ``estimator`` is fitted on those.

    Args:
        estimator: the classifier to wrap (fitted on the normalised ``classes``).
        classes: the normalised class labels, sorted.
        labels: the user's label of each of ``classes``, in the same order.
        dtype: numpy dtype name of the labels ``predict`` returns (``"bool"``, ``"int32"``,
            ``"float64"``, ``"object"``…).

    Raises (at fit):
        ValueError: ``classes`` and ``labels`` differ in length, or ``y`` holds a label not in
            ``labels``.
    """

    __module__ = STABLE_MODULE

    def __init__(
        self, estimator: Any, *, classes: list[Any], labels: list[Any], dtype: str = "object"
    ) -> None:
        self.estimator = estimator
        self.classes = classes
        self.labels = labels
        self.dtype = dtype

    def __sklearn_tags__(self) -> Any:
        tags = super().__sklearn_tags__()
        inner = get_tags(self.estimator)
        tags.input_tags = dataclasses.replace(inner.input_tags)
        return tags

    def _classes_array(self) -> np.ndarray:
        classes = list(self.classes)
        if all(isinstance(c, numbers.Integral) for c in classes):
            return np.asarray(classes, dtype=np.int64)
        return np.asarray(classes, dtype=object)

    def fit(self, X: Any, y: Any) -> UserLabels:
        """Map the user's labels ``y`` to the normalised classes and fit a clone on them."""
        _require(
            self,
            "labels",
            self.labels,
            len(self.labels) == len(self.classes),
            f"one label per class ({len(self.classes)} classes)",
        )
        classes = self._classes_array()
        lookup = {_label_key(lab): i for i, lab in enumerate(self.labels)}
        values = np.asarray(y, dtype=object).ravel()
        positions = np.empty(len(values), dtype=np.int64)
        for row, value in enumerate(values):
            found = lookup.get(_label_key(value))
            if found is None:
                raise ValueError(
                    f"UserLabels: y holds {value!r}, not one of the labels {list(self.labels)!r};"
                    " fit with the labels the job was trained on."
                )
            positions[row] = found
        self.estimator_ = clone(self.estimator).fit(X, classes[positions])
        self.classes_ = self._to_user(np.asarray(self.estimator_.classes_))
        return self

    def _to_user(self, inner: np.ndarray) -> np.ndarray:
        classes = self._classes_array()
        positions = np.searchsorted(classes, inner)
        labels = np.empty(len(self.labels), dtype=object)
        labels[:] = list(self.labels)
        return labels[positions].astype(self.dtype)

    def predict(self, X: Any) -> np.ndarray:
        """Class labels, in the user's own labels and dtype."""
        check_is_fitted(self)
        return self._to_user(np.asarray(self.estimator_.predict(X)))

    @available_if(_has_method("predict_proba", "estimator"))
    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities of the wrapped classifier, columns in ``classes_`` order."""
        check_is_fitted(self)
        return np.asarray(self.estimator_.predict_proba(X))

    @available_if(_has_method("decision_function", "estimator"))
    def decision_function(self, X: Any) -> np.ndarray:
        """Decision function of the wrapped classifier."""
        check_is_fitted(self)
        return np.asarray(self.estimator_.decision_function(X))


# --------------------------------------------------------------------------------------------
# input normalisation


class FrameNormalizer(TransformerMixin, BaseEstimator):
    """Bring raw user rows into the exact table layout the rest of a pipeline was fitted on.

    Placed first in exported pipelines so that ``predict`` accepts what users actually hand
    over: nullable pandas dtypes, ``pd.NA``/``None``, numbers as strings, extra columns.
    ``transform`` returns a DataFrame with the schema's columns in schema order: numeric
    columns as float64 with NaN for missing, categorical columns as ``object`` holding ``str``
    with NaN for missing. Extra columns are dropped.

    Args:
        schema: column name -> ``"numeric"`` or ``"categorical"``. ``None`` infers it at fit
            (numeric and boolean dtypes are numeric, the rest categorical; an array's columns
            are named ``x0, x1, ...`` and are all numeric).

    Raises (at transform):
        ValueError: schema columns are missing, or a numeric column holds non-numbers.
    """

    __module__ = STABLE_MODULE

    def __init__(self, schema: dict[str, str] | None = None) -> None:
        self.schema = schema

    def __sklearn_tags__(self) -> Any:
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        tags.input_tags.string = True
        tags.input_tags.categorical = True
        tags.requires_fit = True
        tags.transformer_tags.preserves_dtype = []  # numeric output is always float64
        return tags

    def _frame(self, X: Any, names: list[str] | None) -> Any:
        pd = pandas_module("FrameNormalizer")
        if _is_frame(X):
            return X
        if hasattr(X, "toarray"):
            raise TypeError("FrameNormalizer: sparse input is not supported; pass a DataFrame.")
        arr = np.asarray(X)
        if arr.ndim != 2:
            raise ValueError(
                f"Expected 2D array, got {arr.ndim}D array instead. Reshape your data either "
                "using array.reshape(-1, 1) if your data has a single feature or "
                "array.reshape(1, -1) if it contains a single sample; or pass a DataFrame."
            )
        if arr.dtype.kind == "c":
            raise ValueError("Complex data not supported; pass real numbers.")
        if names is not None and arr.shape[1] != len(names):
            raise ValueError(
                f"X has {arr.shape[1]} features, but FrameNormalizer is expecting "
                f"{len(names)} features as input."
            )
        cols = names if names is not None else [f"x{i}" for i in range(arr.shape[1])]
        return pd.DataFrame(arr, columns=cols)

    def fit(self, X: Any, y: Any = None) -> FrameNormalizer:
        """Record (or infer) the schema and check it against ``X``."""
        pd = pandas_module("FrameNormalizer")
        frame = self._frame(X, None)
        for axis, what in ((0, "sample"), (1, "feature")):
            if frame.shape[axis] < 1:
                raise ValueError(
                    f"Found array with 0 {what}(s) (shape={frame.shape}) while a minimum of 1 "
                    "is required by FrameNormalizer."
                )
        if self.schema is None:
            schema = {
                str(c): NUMERIC
                if pd.api.types.is_numeric_dtype(frame[c]) or pd.api.types.is_bool_dtype(frame[c])
                else CATEGORICAL
                for c in frame.columns
            }
            if not _is_frame(X):
                schema = dict.fromkeys(schema, NUMERIC)
        else:
            schema = dict(self.schema)
        bad = {k: v for k, v in schema.items() if v not in (NUMERIC, CATEGORICAL)}
        _require(self, "schema", bad, not bad, "a dict mapping columns to 'numeric'/'categorical'")
        self.schema_ = schema
        self.n_features_in_ = frame.shape[1]
        if _is_frame(X):
            self.feature_names_in_ = np.asarray([str(c) for c in frame.columns], dtype=object)
        else:
            self.__dict__.pop("feature_names_in_", None)
        self._convert(frame)  # fail at fit on the same problems transform would report
        return self

    def transform(self, X: Any) -> Any:
        """The normalised DataFrame (see the class docstring)."""
        check_is_fitted(self)
        names = None if _is_frame(X) else list(getattr(self, "feature_names_in_", self.schema_))
        return self._convert(self._frame(X, names))

    def _convert(self, frame: Any) -> Any:
        pd = pandas_module("FrameNormalizer")
        present = {str(c): c for c in frame.columns}
        missing = [c for c in self.schema_ if c not in present]
        if missing:
            raise ValueError(
                f"FrameNormalizer: {len(missing)} column(s) missing from the input: "
                f"{', '.join(map(repr, missing))}; pass the same columns as in training."
            )
        out = {}
        for name, kind in self.schema_.items():
            col = frame[present[name]]
            out[name] = _numeric(col, name, pd) if kind == NUMERIC else _categorical(col, pd)
        return pd.DataFrame(out, index=frame.index, columns=list(self.schema_))

    def get_feature_names_out(self, input_features: Any = None) -> np.ndarray:
        """The schema's column names, in output order."""
        check_is_fitted(self)
        return np.asarray(list(self.schema_), dtype=object)


def _numeric(col: Any, name: str, pd: Any) -> Any:
    """A column as float64 with NaN for missing; ValueError naming the column otherwise.

    Datetimes and durations become seconds by the same rule the table went through before
    training (:func:`tuttiml._timeunits.to_seconds`), not by ``pd.to_numeric``'s raw ticks.
    """
    seconds = to_seconds(col, pd)
    if seconds is not None:
        return pd.Series(seconds, index=col.index, dtype="float64")
    series = col.astype(object) if isinstance(col.dtype, pd.CategoricalDtype) else col
    if pd.api.types.is_bool_dtype(series):
        series = series.astype(object)
    try:
        values = pd.to_numeric(series, errors="raise")
        arr = values.to_numpy(dtype="float64", na_value=np.nan)
    except (ValueError, TypeError) as exc:
        bad = next((v for v in series if not _number_like(v, pd)), None)
        raise ValueError(
            f"FrameNormalizer: column {name!r} is numeric in training but got a value that is "
            f"not a number ({bad!r}); pass numbers or missing values in this column."
        ) from exc
    return pd.Series(arr, index=col.index, dtype="float64")


def _number_like(value: Any, pd: Any) -> bool:
    if value is None or value is pd.NA:
        return True
    try:
        float(value)
    except (TypeError, ValueError):
        return False
    return True


def _categorical(col: Any, pd: Any) -> Any:
    """A column as ``object`` holding ``str``, NaN for missing."""
    values = col.astype(object).to_numpy()
    missing = pd.isna(values)
    out = np.empty(len(values), dtype=object)
    out[missing] = np.nan
    out[~missing] = [str(v) for v in values[~missing]]
    return pd.Series(out, index=col.index, dtype=object)
