"""Tests of workers.library: greedy ensemble selection, stacked meta-model, honest scoring."""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import nnls
from scipy.stats import rankdata
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score
from tuttiml.service.spec import Metric
from tuttiml.workers import metrics
from tuttiml.workers.library import (
    LibraryEnsemble,
    build_library_ensembles,
    fit_meta,
    greedy_selection,
    honest_score,
    meta_features,
    meta_predict,
    weighted_average,
)

RMSE = metrics.scorer(Metric.RMSE)


def fast_auc(y_true: np.ndarray, pred: np.ndarray) -> float:
    """ROC AUC of column 1 via the Mann-Whitney U statistic (Mann & Whitney 1947), tie-averaged.

    AUC = (R1 - n1 (n1 + 1) / 2) / (n1 n0), R1 the rank sum of the positives (Hanley & McNeil
    1982, Radiology 143:29, section "AUC equals the Wilcoxon statistic"). Much faster than
    sklearn's roc_auc_score for the thousands of calls greedy selection makes; checked against
    sklearn in ``test_fast_auc_matches_sklearn``.
    """
    pos = np.asarray(y_true) == 1
    ranks = rankdata(np.asarray(pred)[:, 1])
    n1 = int(pos.sum())
    n0 = pos.size - n1
    return float((ranks[pos].sum() - n1 * (n1 + 1) / 2) / (n1 * n0))


def null_auc_var(n1: int, n0: int) -> float:
    """Variance of the AUC of uninformative scores: Var(U) / (n1 n0)^2 with
    Var(U) = n1 n0 (n1 + n0 + 1) / 12 (Mann & Whitney 1947, null distribution of U)."""
    return (n1 + n0 + 1) / (12.0 * n1 * n0)


def proba(p1: np.ndarray) -> np.ndarray:
    """Binary stored layout (n, 2) from the positive-class probability."""
    return np.column_stack([1.0 - p1, p1])


def folds_of(n: int, k: int, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).permutation(np.arange(n) % k)


# --------------------------------------------------------------------------- selection


def test_fast_auc_matches_sklearn() -> None:
    rng = np.random.default_rng(1)
    y = rng.integers(0, 2, 200)
    p = proba(np.round(rng.random(200), 2))  # rounding creates ties
    # outside reference: sklearn.metrics.roc_auc_score
    assert fast_auc(y, p) == pytest.approx(roc_auc_score(y, p[:, 1]), abs=1e-12)


def test_selection_recovers_the_true_member() -> None:
    rng = np.random.default_rng(0)
    n = 400
    y = rng.normal(size=n)
    preds = [rng.normal(size=n) for _ in range(6)]
    preds[3] = y + 0.1 * rng.normal(size=n)  # the truth plus small noise
    w = greedy_selection(preds, y, RMSE, rounds=30)
    # by hand: any noise member (RMSE ~1.4 alone) averaged with the truth raises RMSE from 0.1
    # to ~0.7, so greedy keeps picking member 3 and its weight dominates.
    assert int(np.argmax(w)) == 3
    assert w[3] >= 0.9


def test_selection_recovers_true_member_classification() -> None:
    rng = np.random.default_rng(2)
    n = 400
    y = rng.integers(0, 2, n)
    preds = [proba(rng.random(n)) for _ in range(8)]
    preds[5] = proba(np.clip(y + 0.3 * rng.normal(size=n), 0, 1) * 0.98 + 0.01)
    w = greedy_selection(preds, y, metrics.scorer(Metric.ROC_AUC, np.array([0, 1])), rounds=20)
    # by hand: member 5 alone has AUC near 1, random members have AUC near 0.5.
    assert int(np.argmax(w)) == 5
    assert w[5] >= 0.8


def test_selection_weights_approach_the_hand_computed_optimum() -> None:
    rng = np.random.default_rng(3)
    n = 4000
    y = rng.normal(size=n)
    preds = [y + rng.normal(size=n), y + rng.normal(size=n), rng.normal(size=n)]
    w = greedy_selection(preds, y, RMSE, rounds=40)
    # by hand: y, e1, e2, z independent with unit variance; on the simplex a + b + c = 1 the
    # error (a+b-1) y + a e1 + b e2 + c z has MSE a^2 + b^2 + 2 c^2, minimised (Lagrange:
    # 2a = 2b = 4c) at a = b = 0.4, c = 0.2: the pure-noise member acts as shrinkage.
    np.testing.assert_allclose(w, [0.4, 0.4, 0.2], atol=0.08)


@pytest.mark.parametrize("seed", range(5))
def test_in_sample_selection_at_least_best_single(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n, k = 150, 3
    classes = np.arange(k)
    y = rng.integers(0, k, n)
    preds = [rng.dirichlet(np.ones(k), size=n) for _ in range(12)]
    score_fn = metrics.scorer(Metric.LOG_LOSS, classes)
    w = greedy_selection(preds, y, score_fn, rounds=25)
    best_single = max(score_fn(y, p) for p in preds)
    # Caruana et al. 2004: the greedy start is the best single member and the best of the
    # nested ensembles is returned, so on these rows the score cannot be lower.
    assert score_fn(y, weighted_average(preds, w)) >= best_single - 1e-12


def test_selection_is_deterministic_on_ties() -> None:
    y = np.array([0.0, 1.0, 2.0])
    same = np.array([0.0, 1.0, 2.5])
    w = greedy_selection([same, same.copy(), same.copy()], y, RMSE, rounds=5)
    # ties go to the lowest index; a later ensemble that is not strictly better is not kept
    np.testing.assert_array_equal(w, [1.0, 0.0, 0.0])


def test_rounds_one_is_best_single() -> None:
    y = np.array([0.0, 1.0, 2.0, 3.0])
    preds = [y + 1.0, y + 0.2, y - 0.5]
    np.testing.assert_array_equal(greedy_selection(preds, y, RMSE, rounds=1), [0, 1, 0])


@settings(max_examples=25, deadline=None)
@given(
    m=st.integers(1, 6),
    n=st.integers(3, 30),
    rounds=st.integers(1, 12),
    seed=st.integers(0, 2**16),
)
def test_weights_are_a_distribution(m: int, n: int, rounds: int, seed: int) -> None:
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    preds = [rng.normal(size=n) for _ in range(m)]
    w = greedy_selection(preds, y, RMSE, rounds=rounds)
    assert w.shape == (m,)
    assert np.all(w >= 0)
    assert w.sum() == pytest.approx(1.0, abs=1e-12)
    # weights are pick counts / total picks, for some total number of picks <= rounds
    assert any(np.allclose(w * t, np.round(w * t), atol=1e-9) for t in range(1, rounds + 1))


# --------------------------------------------------------------------------- meta-model


def test_meta_regression_equals_scipy_nnls() -> None:
    rng = np.random.default_rng(4)
    n = 120
    y = rng.normal(size=n)
    preds = [y + 0.3 * rng.normal(size=n), -y + rng.normal(size=n), 0.5 * y, rng.normal(size=n)]
    meta = fit_meta(preds, y, "regression")
    X = np.column_stack(preds)
    ref, _ = nnls(X, y)  # outside reference: scipy.optimize.nnls (Lawson & Hanson)
    assert meta.weights is not None
    np.testing.assert_allclose(meta.weights, ref, atol=1e-10)
    assert np.all(meta.weights >= 0)
    np.testing.assert_allclose(meta_predict(meta, preds, "regression"), X @ ref, atol=1e-10)


def test_meta_regression_hand_computed_nnls() -> None:
    x1 = np.array([1.0, 0.0, 1.0])
    x2 = np.array([0.0, 1.0, 1.0])
    y = np.array([2.0, -1.0, 1.0])
    # by hand: unconstrained least squares solves [[2,1],[1,2]] w = [3,0] -> w = (2, -1); the
    # bound makes w2 = 0 and then w1 = x1.y / x1.x1 = 3/2 (KKT: dL/dw2 = -x2.(y - 1.5 x1) =
    # 1.5 > 0, so w2 stays at its bound).
    meta = fit_meta([x1, x2], y, "regression")
    assert meta.weights is not None
    np.testing.assert_allclose(meta.weights, [1.5, 0.0], atol=1e-12)
    np.testing.assert_allclose(meta_predict(meta, [x1, x2], "regression"), [1.5, 0.0, 1.5])


def test_meta_binary_matches_logistic_regression_and_its_optimality() -> None:
    rng = np.random.default_rng(5)
    n = 300
    y = rng.integers(0, 2, n)
    preds = [
        proba(np.clip(0.5 + (y - 0.5) * s + 0.3 * rng.normal(size=n), 0.01, 0.99))
        for s in (0.6, 0.3, 0.0)
    ]
    meta = fit_meta(preds, y, "binary")
    X = np.column_stack([p[:, 1] for p in preds])  # by hand: positive-class column per member
    np.testing.assert_array_equal(meta_features(np.stack(preds)), X)
    # outside reference: sklearn LogisticRegression with the same settings on the hand matrix
    ref = LogisticRegression(C=1.0, max_iter=1000, tol=1e-6).fit(X, y)
    out = meta_predict(meta, preds, "binary")
    np.testing.assert_allclose(out, ref.predict_proba(X), atol=1e-8)
    # hand computation: at the optimum of C * sum(logloss) + ||w||^2 / 2 (sklearn user guide,
    # "Logistic regression", binary case) the gradient C X^T (p - y) + w and C sum(p - y) vanish.
    model = meta.model
    assert isinstance(model, LogisticRegression)
    w, b = model.coef_.ravel(), model.intercept_[0]
    p = 1.0 / (1.0 + np.exp(-(X @ w + b)))
    np.testing.assert_allclose(X.T @ (p - y) + w, 0.0, atol=1e-3)
    assert abs(np.sum(p - y)) < 1e-3
    np.testing.assert_allclose(out[:, 1], p, atol=1e-12)


def test_meta_multiclass_optimality_and_layout() -> None:
    rng = np.random.default_rng(6)
    n, k = 300, 3
    y = rng.integers(0, k, n)
    onehot = np.eye(k)[y]
    preds = [(0.5 * onehot + rng.dirichlet(np.ones(k), size=n)) / 1.5 for _ in range(3)]
    meta = fit_meta(preds, y, "multiclass")
    X = np.column_stack(preds)  # by hand: member 0's k columns, then member 1's, ...
    np.testing.assert_array_equal(meta_features(np.stack(preds)), X)
    out = meta_predict(meta, preds, "multiclass")
    assert out.shape == (n, k)
    np.testing.assert_allclose(out.sum(axis=1), 1.0)
    model = meta.model
    assert isinstance(model, LogisticRegression)
    # hand computation, multinomial (softmax) logistic regression with L2 penalty ||W||^2 / 2:
    # the gradient C (P - Y)^T X + W vanishes at the optimum (common practice, softmax gradient).
    z = X @ model.coef_.T + model.intercept_
    P = np.exp(z - z.max(axis=1, keepdims=True))
    P /= P.sum(axis=1, keepdims=True)
    np.testing.assert_allclose(P, out, atol=1e-10)
    np.testing.assert_allclose((P - onehot).T @ X + model.coef_, 0.0, atol=1e-3)
    np.testing.assert_allclose((P - onehot).sum(axis=0), 0.0, atol=1e-3)


def test_meta_maps_missing_class_to_zero_probability() -> None:
    rng = np.random.default_rng(7)
    n = 60
    y = rng.integers(0, 2, n) * 2  # classes 0 and 2 only; the layout has 0, 1, 2
    preds = [rng.dirichlet(np.ones(3), size=n) for _ in range(2)]
    meta = fit_meta(preds, y, "multiclass", classes=np.array([0, 1, 2]))
    out = meta_predict(meta, preds, "multiclass")
    assert out.shape == (n, 3)
    np.testing.assert_array_equal(out[:, 1], 0.0)
    np.testing.assert_allclose(out.sum(axis=1), 1.0)


# --------------------------------------------------------------------------- honest scoring


def _regression_library(seed: int, n: int = 200, m: int = 5) -> tuple[list, np.ndarray]:
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    preds = [y * rng.random() + rng.normal(size=n) for _ in range(m)]
    return preds, y


def test_honest_selection_never_scores_rows_it_saw() -> None:
    preds, y = _regression_library(8)
    y = y + np.arange(y.size) * 1e-9  # every target distinct, so rows are identifiable
    folds = folds_of(y.size, 4)
    calls: list[frozenset[float]] = []

    def recording(y_true: np.ndarray, pred: np.ndarray) -> float:
        calls.append(frozenset(np.asarray(y_true).tolist()))
        return RMSE(y_true, pred)

    res = honest_score("selection", preds, y, folds, recording, task="regression", rounds=6)
    # by construction of the recording: in fold f's turn, every call of the selection sees only
    # the other folds' targets, then exactly one call scores the held rows.
    pos = 0
    for f in res.fold_ids:
        held = frozenset(y[folds == f].tolist())
        train = frozenset(y[folds != f].tolist())
        end = calls.index(held, pos)
        assert end > pos
        assert all(c == train for c in calls[pos:end])
        pos = end + 1
    everything = frozenset(y.tolist())
    assert all(c == everything for c in calls[pos:])  # final fit + in-sample score
    assert res.in_sample_score == pytest.approx(RMSE(y, weighted_average(preds, res.weights)))


@pytest.mark.parametrize("method", ["selection", "meta"])
def test_held_labels_do_not_move_their_own_nested_predictions(method: str) -> None:
    rng = np.random.default_rng(9)
    n = 200
    y = rng.integers(0, 2, n)
    preds = [
        proba(np.clip(0.5 + (y - 0.5) * rng.random() + 0.3 * rng.normal(size=n), 0, 1))
        for _ in range(6)
    ]
    folds = folds_of(n, 5)
    auc = metrics.scorer(Metric.ROC_AUC, np.array([0, 1]))
    base = honest_score(method, preds, y, folds, auc, task="binary", rounds=8)
    # flip the labels of fold 2's rows: by construction, the ensemble predicting those rows was
    # fitted on the other folds only, so their nested predictions must not change at all.
    y2 = y.copy()
    held = folds == 2
    y2[held] = 1 - y2[held]
    moved = honest_score(method, preds, y2, folds, auc, task="binary", rounds=8)
    np.testing.assert_array_equal(moved.nested_oof[held], base.nested_oof[held])
    # per-fold scores are the scores of the nested predictions on the held rows
    for f, s in zip(base.fold_ids, base.fold_scores, strict=True):
        assert s == pytest.approx(auc(y[folds == f], base.nested_oof[folds == f]))
    assert base.mean == pytest.approx(np.mean(base.fold_scores))
    assert base.std == pytest.approx(np.std(base.fold_scores, ddof=1))


def test_permuted_labels_honest_selection_is_at_chance() -> None:
    rng = np.random.default_rng(10)
    n, m, k = 400, 200, 5
    y_orig = rng.permutation(np.arange(n) % 2)
    strength = rng.random(m)
    preds = [
        proba(1.0 / (1.0 + np.exp(-(s * (2 * y_orig - 1) + rng.normal(size=n))))) for s in strength
    ]
    y = rng.permutation(y_orig)  # labels randomly permuted: no member carries information
    folds = folds_of(n, k, seed=11)
    res = honest_score("selection", preds, y, folds, fast_auc, task="binary", rounds=15)

    # standard error of the mean of k fold AUCs under the null (Mann & Whitney 1947 variance
    # of U; folds disjoint so their variances add): se = sqrt(sum_f var_f) / k.
    var = [
        null_auc_var(int(y[folds == f].sum()), int((1 - y[folds == f]).sum()))
        for f in res.fold_ids
    ]
    se = float(np.sqrt(np.sum(var)) / k)
    assert abs(res.mean - 0.5) <= 2 * se, (res.mean, se)
    # the same test on the pooled nested OOF predictions
    se_pooled = float(np.sqrt(null_auc_var(int(y.sum()), int((1 - y).sum()))))
    assert abs(fast_auc(y, res.nested_oof) - 0.5) <= 2 * se_pooled
    # and the check has teeth: the in-sample score of the same selection is far above chance
    assert res.in_sample_score > 0.5 + 3 * se_pooled


def test_honest_rejects_bad_input() -> None:
    preds, y = _regression_library(12, n=20)
    with pytest.raises(ValueError, match="method"):
        honest_score("vote", preds, y, folds_of(20, 2), RMSE, task="regression")
    with pytest.raises(ValueError, match="two outer folds"):
        honest_score("meta", preds, y, np.zeros(20, dtype=int), RMSE, task="regression")
    with pytest.raises(ValueError, match="same rows"):
        greedy_selection([np.zeros(3), np.zeros(4)], np.zeros(3), RMSE)


# --------------------------------------------------------------------------- convenience


def test_build_library_ensembles_classification_json() -> None:
    rng = np.random.default_rng(13)
    n = 150
    classes = np.array(["a", "b"])
    y = classes[rng.integers(0, 2, n)]
    yi = (y == "b").astype(float)
    members = {
        t: proba(np.clip(0.5 + (yi - 0.5) * rng.random() + 0.3 * rng.normal(size=n), 0, 1))
        for t in (17, 3, 42, 8)
    }
    out = build_library_ensembles(
        members, y, folds_of(n, 5), Metric.LOG_LOSS, "binary", classes, rounds=10
    )
    assert [e.method for e in out] == ["selection", "meta"]
    sel, meta = out
    assert isinstance(sel, LibraryEnsemble)
    assert set(sel.member_trial_ids) <= {3, 8, 17, 42}
    assert sel.weights is not None and sum(sel.weights) == pytest.approx(1.0)
    assert meta.member_trial_ids == [3, 8, 17, 42]
    assert meta.weights is None and meta.meta_coef is not None and meta.fitted is not None
    assert len(meta.meta_coef[0]) == 4  # one positive-class column per member
    for e in out:
        doc = json.loads(json.dumps(e.to_json()))  # plain JSON types only
        assert len(doc["fold_scores"]) == 5
        assert doc["honest_mean"] == pytest.approx(np.mean(doc["fold_scores"]))
        # log loss is a loss: natural values are the negated greater-is-better scores
        assert doc["honest_mean_natural"] == pytest.approx(-doc["honest_mean"])
        assert doc["in_sample_score_natural"] > 0
    # finalize path: the selection weights applied to the members' predictions in id order
    ids = sel.member_trial_ids
    combined = weighted_average([members[t] for t in ids], np.array(sel.weights))
    assert metrics.score(Metric.LOG_LOSS, y, combined, classes) == pytest.approx(
        sel.in_sample_score
    )
    assert meta.fitted is not None
    refit = meta_predict(meta.fitted, [members[t] for t in meta.member_trial_ids], "binary")
    assert metrics.score(Metric.LOG_LOSS, y, refit, classes) == pytest.approx(meta.in_sample_score)


def test_build_library_ensembles_regression() -> None:
    preds, y = _regression_library(14, n=100, m=3)
    members = dict(zip([5, 1, 9], preds, strict=True))
    out = build_library_ensembles(
        members, y, folds_of(100, 4), "rmse", "regression", None, rounds=8
    )
    meta = out[1]
    assert meta.weights is not None and all(w >= 0 for w in meta.weights)
    X = np.column_stack([members[t] for t in meta.member_trial_ids])
    np.testing.assert_allclose(meta.weights, nnls(X, y)[0], atol=1e-10)  # scipy reference
    json.dumps([e.to_json() for e in out])


@pytest.mark.parametrize(
    "metric",
    [
        "roc_auc",
        "log_loss",
        "accuracy",
        "balanced_accuracy",
        "f1",
        "f1_macro",
        "rmse",
        "mae",
        "r2",
    ],
)
def test_vectorised_greedy_selection_picks_what_the_scikit_learn_metric_picks(
    metric: str,
) -> None:
    """Greedy selection ranks all members per round in one vectorised pass
    (``honesty.scores_on_rows``); the weights must equal those of the plain loop calling the
    scikit-learn metric (``metrics.scorer``) once per member and round."""
    from tuttiml.workers.honesty import scores_on_rows

    rng = np.random.default_rng(7)
    n, m = 240, 12
    if metric in ("rmse", "mae", "r2"):
        y = rng.normal(size=n)
        preds = [y + rng.normal(scale=0.8 + j / 50, size=n) for j in range(m)]
        classes = None
    else:
        k = 3 if metric == "f1_macro" else 2
        y = rng.integers(0, k, n)
        classes = np.arange(k)
        preds = []
        for j in range(m):
            logits = rng.normal(size=(n, k)) + (1.0 + j / 50) * np.eye(k)[y]
            p = np.exp(logits)
            preds.append(p / p.sum(axis=1, keepdims=True))
    score_fn = metrics.scorer(Metric(metric), classes)
    plain = greedy_selection(preds, y, score_fn, rounds=15)
    fast = greedy_selection(
        preds, y, score_fn, rounds=15, batch=lambda y_, p_: scores_on_rows(metric, y_, p_, classes)
    )
    np.testing.assert_allclose(fast, plain)
    assert (plain > 0).sum() >= 2  # a real mixture, not one member
