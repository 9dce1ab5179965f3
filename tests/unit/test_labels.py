"""The user's class labels: recorded at submit, given back by exported pipelines, never merged."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import skops.io as sio
from numpy.testing import assert_array_equal
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from tuttiml.service.data import prepare
from tuttiml.service.errors import InvalidDataError
from tuttiml.service.spec import SearchSpec
from tuttiml.service.trusted import TRUSTED_TYPES
from tuttiml.workers.ensembling import UserLabels

N = 60


def _with_target(y: object) -> pd.DataFrame:
    rng = np.random.default_rng(0)
    return pd.DataFrame({"a": rng.normal(size=N), "b": rng.normal(size=N), "y": y})


def _split(n: int = N) -> np.ndarray:
    return np.random.default_rng(1).normal(size=n)


def _prepare(df: pd.DataFrame) -> object:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        return prepare(df, SearchSpec(target="y"))


@pytest.mark.parametrize(
    ("target", "classes", "labels", "dtype"),
    [
        (_split() > 0, [0, 1], [False, True], "bool"),
        (pd.array(_split() > 0, dtype="boolean"), [0, 1], [False, True], "bool"),
        (np.where(_split() > 0, 1.0, 2.0), [1, 2], [1.0, 2.0], "float64"),
        (np.where(_split() > 0, 3, 4).astype("int32"), [3, 4], [3, 4], "int32"),
        (
            pd.Categorical(np.where(_split() > 0, 10, np.where(_split() > -0.5, 1, 2))),
            ["1", "10", "2"],
            [1, 10, 2],
            "int64",
        ),
        (
            np.where(_split() > 0, "yes", "no").astype(object),
            ["no", "yes"],
            ["no", "yes"],
            "object",
        ),
    ],
    ids=["bool", "boolean", "float", "int32", "category-of-ints", "text"],
)
def test_submit_records_the_users_label_of_each_class(
    target: object, classes: list[object], labels: list[object], dtype: str
) -> None:
    prepared = _prepare(_with_target(target))
    assert prepared.classes == classes
    assert prepared.labels == labels
    assert [type(v) for v in prepared.labels] == [type(v) for v in labels]
    assert prepared.label_dtype == dtype


@pytest.mark.parametrize(
    ("values", "shown"),
    [([1, "1"], "1 and '1'"), ([1.0, "1.0"], "1.0 and '1.0'"), ([2, "b", "2"], "2 and '2'")],
)
def test_labels_that_read_the_same_as_text_are_refused(values: list[object], shown: str) -> None:
    y = pd.Series([values[i % len(values)] for i in range(N)], dtype=object)
    with pytest.raises(InvalidDataError) as caught:
        _prepare(_with_target(y))
    err = caught.value
    assert err.field == "target"
    message = str(err)
    assert "would merge into one class" in message
    assert "astype(str)" in message  # the fix
    assert f"({shown})" in message  # the labels that merge, as the user wrote them


def _breast_cancer_bool() -> tuple[pd.DataFrame, np.ndarray]:
    # scikit-learn's breast cancer table; target 1 (benign) as True
    X, y = load_breast_cancer(return_X_y=True, as_frame=True)
    return X.iloc[:, :6], (y.to_numpy() == 1)


def test_user_labels_predicts_what_sklearn_predicts_on_the_bool_target() -> None:
    X, y = _breast_cancer_bool()
    inner = make_pipeline(StandardScaler(), LogisticRegression(max_iter=500))
    wrapped = UserLabels(inner, classes=[0, 1], labels=[False, True], dtype="bool").fit(X, y)
    # reference: the same scikit-learn pipeline fitted directly on the boolean labels
    reference = make_pipeline(StandardScaler(), LogisticRegression(max_iter=500)).fit(X, y)
    pred = wrapped.predict(X)
    assert pred.dtype == np.bool_
    assert_array_equal(pred, reference.predict(X))
    assert_array_equal(wrapped.classes_, reference.classes_)
    np.testing.assert_allclose(wrapped.predict_proba(X), reference.predict_proba(X))
    assert wrapped.score(X, y) == reference.score(X, y)


def test_user_labels_maps_labels_whose_order_differs_from_the_classes() -> None:
    # a category of numbers is searched as text ("1" < "10" < "2"); labels come back as ints
    X, y = _breast_cancer_bool()
    user = np.where(y, 10, np.where(X.iloc[:, 0] > 14, 2, 1))
    wrapped = UserLabels(
        LogisticRegression(max_iter=2000), classes=["1", "10", "2"], labels=[1, 10, 2]
    )
    wrapped.set_params(dtype="int64").fit(X, user)
    text = LogisticRegression(max_iter=2000).fit(X, user.astype(str))  # reference
    assert_array_equal(wrapped.classes_, [1, 10, 2])
    assert wrapped.predict(X).dtype == np.int64
    assert_array_equal(wrapped.predict(X), text.predict(X).astype(np.int64))
    np.testing.assert_allclose(wrapped.predict_proba(X), text.predict_proba(X))


def test_user_labels_refuses_a_label_it_does_not_know() -> None:
    X, y = _breast_cancer_bool()
    wrapped = UserLabels(LogisticRegression(), classes=[0, 1], labels=[False, True], dtype="bool")
    with pytest.raises(ValueError, match=r"y holds 0, not one of the labels \[False, True\]"):
        wrapped.fit(
            X, y.astype(int)
        )  # 0 and 1 are not False and True here: the user's labels are booleans


def test_user_labels_survive_a_skops_round_trip() -> None:
    X, y = _breast_cancer_bool()
    wrapped = UserLabels(LogisticRegression(max_iter=500), classes=[0, 1], labels=[False, True])
    wrapped.set_params(dtype="bool").fit(X, y)
    blob = sio.dumps(wrapped)
    assert set(sio.get_untrusted_types(data=blob)) <= set(TRUSTED_TYPES)
    loaded = sio.loads(blob, trusted=list(TRUSTED_TYPES))
    assert loaded.predict(X.iloc[:5]).dtype == np.bool_
    assert_array_equal(loaded.predict(X), wrapped.predict(X))
