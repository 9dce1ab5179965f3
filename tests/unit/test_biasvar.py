"""Tests for workers.biasvar: the decomposition against mlxtend, and bagging lowering variance."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from mlxtend.evaluate import bias_variance_decomp
from sklearn.datasets import load_diabetes, load_wine, make_classification
from sklearn.ensemble import BaggingClassifier
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor
from tuttiml.workers.biasvar import bias_variance, holdout_split


def _split(X: np.ndarray, y: np.ndarray, task: str, seed: int = 0) -> tuple[np.ndarray, ...]:
    train, test = holdout_split(len(y), y, task, fraction=0.3, seed=seed)
    return X[train], y[train], X[test], y[test]


def test_zero_one_loss_matches_mlxtend_on_wine() -> None:
    X, y = load_wine(return_X_y=True)
    X_tr, y_tr, X_te, y_te = _split(X, y, "multiclass")
    tree = DecisionTreeClassifier(random_state=0)
    ours = bias_variance(tree, X_tr, y_tr, X_te, y_te, loss="0-1_loss", rounds=20, seed=3)
    # reference: mlxtend.evaluate.bias_variance_decomp (same estimator, data, rounds and seed)
    loss, bias, var = bias_variance_decomp(
        tree, X_tr, y_tr, X_te, y_te, loss="0-1_loss", num_rounds=20, random_seed=3
    )
    assert ours == pytest.approx({"expected_loss": loss, "bias": bias, "variance": var}, abs=1e-12)
    assert ours["variance"] > 0


def test_mse_matches_mlxtend_on_diabetes() -> None:
    X, y = load_diabetes(return_X_y=True)
    X_tr, y_tr, X_te, y_te = _split(X, y, "regression")
    tree = DecisionTreeRegressor(max_depth=4, random_state=0)
    ours = bias_variance(tree, X_tr, y_tr, X_te, y_te, loss="mse", rounds=20, seed=1)
    # reference: mlxtend.evaluate.bias_variance_decomp (same estimator, data, rounds and seed)
    loss, bias, var = bias_variance_decomp(
        tree, X_tr, y_tr, X_te, y_te, loss="mse", num_rounds=20, random_seed=1
    )
    assert ours == pytest.approx({"expected_loss": loss, "bias": bias, "variance": var}, rel=1e-9)
    # squared-error decomposition: expected loss = bias^2 + variance (common practice)
    assert ours["expected_loss"] == pytest.approx(ours["bias"] + ours["variance"], rel=1e-9)


def test_dataframes_and_string_labels_give_the_same_numbers() -> None:
    X, y = load_wine(return_X_y=True)
    X_tr, y_tr, X_te, y_te = _split(X, y, "multiclass", seed=1)
    tree = DecisionTreeClassifier(max_depth=3, random_state=0)
    plain = bias_variance(tree, X_tr, y_tr, X_te, y_te, rounds=8, seed=0)
    # names sort like the integer codes, so tree splits and mode ties break the same way
    names = np.array(["1_barolo", "2_grignolino", "3_barbera"])
    frames = bias_variance(
        tree,
        pd.DataFrame(X_tr),
        pd.Series(names[y_tr]),
        pd.DataFrame(X_te),
        pd.Series(names[y_te]),
        rounds=8,
        seed=0,
    )
    assert frames == pytest.approx(plain)


def test_generator_draws_are_reproducible() -> None:
    X, y = load_wine(return_X_y=True)
    X_tr, y_tr, X_te, y_te = _split(X, y, "multiclass")
    tree = DecisionTreeClassifier(random_state=0)
    a = bias_variance(tree, X_tr, y_tr, X_te, y_te, rounds=5, seed=2, rng_compat="generator")
    b = bias_variance(tree, X_tr, y_tr, X_te, y_te, rounds=5, seed=2, rng_compat="generator")
    assert a == b
    with pytest.raises(ValueError, match="rng_compat"):
        bias_variance(tree, X_tr, y_tr, X_te, y_te, rounds=5, rng_compat="other")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="loss"):
        bias_variance(tree, X_tr, y_tr, X_te, y_te, loss="hinge")  # type: ignore[arg-type]


def test_bagging_deep_trees_lowers_variance() -> None:
    # Breiman (1996), "Bagging predictors"; common practice: averaging bootstrap-trained deep
    # trees removes much of a single deep tree's variance.
    X, y = make_classification(n_samples=300, n_features=10, n_informative=5, random_state=0)
    X_tr, y_tr, X_te, y_te = _split(X, y, "binary")
    tree = DecisionTreeClassifier(random_state=0)
    bag = BaggingClassifier(DecisionTreeClassifier(), n_estimators=15, random_state=0, n_jobs=1)
    single = bias_variance(tree, X_tr, y_tr, X_te, y_te, rounds=12, seed=0)
    bagged = bias_variance(bag, X_tr, y_tr, X_te, y_te, rounds=12, seed=0)
    assert bagged["variance"] < single["variance"]
    assert bagged["expected_loss"] < single["expected_loss"]


def test_holdout_split_is_fixed_disjoint_and_stratified() -> None:
    y = np.array([0] * 60 + [1] * 20)
    train, test = holdout_split(80, y, "binary", fraction=0.25, seed=4)
    again_train, again_test = holdout_split(80, y, "binary", fraction=0.25, seed=4)
    assert np.array_equal(test, again_test) and np.array_equal(train, again_train)
    assert not set(train) & set(test)
    assert sorted([*train, *test]) == list(range(80))
    assert np.bincount(y[test]).tolist() == [15, 5]
    # a class with one row cannot be stratified: fall back to a plain split
    y_rare = np.array([0] * 19 + [1])
    train, test = holdout_split(20, y_rare, "binary", fraction=0.25, seed=0)
    assert len(test) == 5
    with pytest.raises(ValueError, match="fraction"):
        holdout_split(10, None, "regression", fraction=1.0, seed=0)
