"""Tests of workers.combining: scikit-learn's estimator checks, skops, and its voting classes."""

from __future__ import annotations

import numpy as np
import pytest
import skops.io as sio
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.datasets import load_diabetes, load_iris
from sklearn.ensemble import VotingClassifier, VotingRegressor
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.naive_bayes import GaussianNB
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor
from sklearn.utils.estimator_checks import parametrize_with_checks
from tuttiml.service.trusted import TRUSTED_TYPES
from tuttiml.workers.combining import LinearCombinerClassifier, LinearCombinerRegressor

CHECKED = [
    LinearCombinerClassifier(
        [("lr", LogisticRegression()), ("nb", GaussianNB())], weights=[0.7, 0.3]
    ),
    LinearCombinerRegressor(
        [("ridge", Ridge()), ("tree", DecisionTreeRegressor(max_depth=3, random_state=0))],
        weights=[0.5, 0.5],
    ),
]


@parametrize_with_checks(CHECKED)
def test_sklearn_estimator_checks(estimator: object, check: object) -> None:
    check(estimator)  # type: ignore[operator]


def test_average_equals_scikit_learns_soft_vote() -> None:
    # Reference: sklearn.ensemble.VotingClassifier(voting="soft", weights=...) averages the
    # members' probabilities with the same weights.
    X, y = load_iris(return_X_y=True)
    members = [
        ("lr", LogisticRegression(max_iter=500)),
        ("tree", DecisionTreeClassifier(max_depth=3, random_state=0)),
    ]
    ours = LinearCombinerClassifier(members, weights=[2.0, 1.0]).fit(X, y)
    ref = VotingClassifier(members, voting="soft", weights=[2.0, 1.0]).fit(X, y)
    assert_allclose(ours.predict_proba(X), ref.predict_proba(X), atol=1e-12)
    assert_array_equal(ours.predict(X), ref.predict(X))


def test_regressor_average_equals_scikit_learns_voting_regressor() -> None:
    X, y = load_diabetes(return_X_y=True)
    members = [("ridge", Ridge()), ("tree", DecisionTreeRegressor(max_depth=4, random_state=0))]
    ours = LinearCombinerRegressor(members, weights=[0.25, 0.75]).fit(X, y)
    ref = VotingRegressor(members, weights=[0.25, 0.75]).fit(X, y)
    assert_allclose(ours.predict(X), ref.predict(X), rtol=1e-12)


@pytest.mark.parametrize("est", CHECKED, ids=lambda e: type(e).__name__)
def test_skops_round_trip_with_the_trusted_list(est: object) -> None:
    X, y = (load_iris if "Classifier" in type(est).__name__ else load_diabetes)(return_X_y=True)
    fitted = est.fit(X, y)  # type: ignore[attr-defined]
    blob = sio.dumps(fitted)
    assert set(sio.get_untrusted_types(data=blob)) <= set(TRUSTED_TYPES)
    again = sio.loads(blob, trusted=list(TRUSTED_TYPES))
    assert_array_equal(again.predict(X), fitted.predict(X))


def test_weights_must_match_the_members() -> None:
    est = LinearCombinerClassifier([("lr", LogisticRegression())], weights=[0.5, 0.5])
    X, y = load_iris(return_X_y=True)
    with pytest.raises(ValueError, match="2 weights for 1 estimators"):
        est.fit(X, y)
    assert not np.isnan(X).any()
