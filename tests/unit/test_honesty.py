"""Tests for workers.honesty: BBC-CV, the corrected resampled t-test and re-evaluation folds."""

from __future__ import annotations

import math
import time

import numpy as np
import pytest
from scipy import stats
from tuttiml.workers import honesty, metrics
from tuttiml.workers.honesty import (
    bbc_cv,
    bootstrap_counts,
    corrected_resampled_ttest,
    inbag_winners,
    repeated_kfold_indices,
)


def _noise_proba(rng: np.random.Generator, n: int) -> np.ndarray:
    p = rng.random(n)
    return np.column_stack([1.0 - p, p])


# --- corrected resampled t-test ------------------------------------------------------------


def test_corrected_ttest_matches_hand_computation() -> None:
    # Nadeau & Bengio (2003) / Bouckaert & Frank (2004): t = mean(d) / sqrt((1/J + n2/n1) s^2)
    a = [0.80, 0.82, 0.78, 0.85, 0.81]
    b = [0.78, 0.80, 0.79, 0.80, 0.78]
    # d = [0.02, 0.02, -0.01, 0.05, 0.03]; mean = 0.11 / 5 = 0.022
    # squared deviations: 0.000004 + 0.000004 + 0.001024 + 0.000784 + 0.000064 = 0.00188
    # s^2 = 0.00188 / (5 - 1) = 0.00047
    # one 5-fold split of 100 rows: n_train = 80, n_test = 20 -> 1/5 + 20/80 = 0.45
    # t = 0.022 / sqrt(0.45 * 0.00047) = 0.022 / sqrt(0.0002115) = 0.022 / 0.0145430 = 1.51275
    expected_t = 0.022 / math.sqrt(0.45 * 0.00047)
    out = corrected_resampled_ttest(a, b, n_train=80, n_test=20)
    assert out["mean_diff"] == pytest.approx(0.022)
    assert out["t"] == pytest.approx(expected_t, rel=1e-9)
    assert out["t"] == pytest.approx(1.51275, abs=1e-5)
    assert out["df"] == 4
    # two-sided p from Student's t with J - 1 = 4 degrees of freedom (Nadeau & Bengio 2003)
    assert out["p_value"] == pytest.approx(2 * stats.t.sf(expected_t, 4), rel=1e-9)


def test_corrected_ttest_model_against_itself_gives_p_one() -> None:
    scores = [0.71, 0.74, 0.69, 0.73, 0.70, 0.72]
    out = corrected_resampled_ttest(scores, scores, n_train=90, n_test=10)
    assert out == {"mean_diff": 0.0, "t": 0.0, "p_value": 1.0, "df": 5.0}


def test_corrected_ttest_constant_nonzero_difference() -> None:
    out = corrected_resampled_ttest([0.5, 0.6, 0.7], [0.4, 0.5, 0.6], n_train=8, n_test=2)
    assert out["p_value"] == 0.0
    assert out["t"] == math.inf


def test_correction_makes_p_larger_than_paired_ttest() -> None:
    # Nadeau & Bengio (2003): overlapping training sets make the plain paired t-test too liberal;
    # the n_test / n_train term inflates the variance, so the corrected p is larger.
    rng = np.random.default_rng(3)
    a = 0.80 + 0.02 * rng.standard_normal(10)
    b = a - 0.01 + 0.01 * rng.standard_normal(10)
    corrected = corrected_resampled_ttest(a, b, n_train=50, n_test=50)
    plain = stats.ttest_rel(a, b)
    assert corrected["p_value"] > plain.pvalue
    assert abs(corrected["t"]) < abs(plain.statistic)
    # without the correction term the statistic is the paired t (scipy.stats.ttest_rel)
    tiny = corrected_resampled_ttest(a, b, n_train=10**15, n_test=1)
    assert tiny["t"] == pytest.approx(plain.statistic, rel=1e-9)
    assert tiny["p_value"] == pytest.approx(plain.pvalue, rel=1e-6)


def test_corrected_ttest_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="same length"):
        corrected_resampled_ttest([1.0, 2.0], [1.0], n_train=5, n_test=5)
    with pytest.raises(ValueError, match="at least two"):
        corrected_resampled_ttest([1.0], [1.0], n_train=5, n_test=5)
    with pytest.raises(ValueError, match="positive"):
        corrected_resampled_ttest([1.0, 2.0], [1.0, 1.0], n_train=0, n_test=5)


# --- repeated k-fold ---------------------------------------------------------------------


def test_repeated_kfold_indices_stratified_and_fresh() -> None:
    y = np.array([0] * 30 + [1] * 15)
    splits = repeated_kfold_indices(45, y, "binary", repeats=2, folds=3, seed=7)
    assert len(splits) == 6
    for r in range(2):
        tests = np.concatenate([te for _, te in splits[3 * r : 3 * r + 3]])
        assert sorted(tests.tolist()) == list(range(45))
    for tr, te in splits:
        assert not set(tr) & set(te)
        assert np.bincount(y[te]).tolist() == [10, 5]
    from sklearn.model_selection import StratifiedKFold

    search = [te for _, te in StratifiedKFold(3, shuffle=True, random_state=7).split(y, y)]
    assert any(not np.array_equal(te, s) for (_, te), s in zip(splits[:3], search, strict=True))
    again = repeated_kfold_indices(45, y, "binary", repeats=2, folds=3, seed=7)
    assert all(np.array_equal(a[1], b[1]) for a, b in zip(splits, again, strict=True))


def test_repeated_kfold_indices_regression() -> None:
    splits = repeated_kfold_indices(20, None, "regression", repeats=3, folds=4, seed=0)
    assert len(splits) == 12
    assert all(len(te) == 5 for _, te in splits)


# --- BBC-CV ------------------------------------------------------------------------------


def test_bootstrap_counts_shape_and_sums() -> None:
    counts = bootstrap_counts(50, 7, seed=1)
    assert counts.shape == (7, 50)
    assert (counts.sum(axis=1) == 50).all()
    assert np.array_equal(counts, bootstrap_counts(50, 7, seed=1))


def test_bbc_cv_removes_winners_curse_auc() -> None:
    # Tsamardinos, Greasidou & Borboudakis (2018): the best of many CV scores is optimistically
    # biased; BBC-CV's out-of-bag estimate of the selected model is not. With pure-noise
    # candidates the true AUC of any of them is 0.5.
    rng = np.random.default_rng(0)
    n, m = 200, 300
    y = np.array([0, 1] * (n // 2))
    preds = [_noise_proba(rng, n) for _ in range(m)]
    out = bbc_cv(preds, y, "roc_auc", n_boot=200, seed=0)
    assert out["winner_cv"] > 0.58
    assert abs(out["estimate"] - 0.5) < 0.04
    assert out["optimism"] > 0.05
    assert out["ci_low"] < 0.5 < out["ci_high"]
    assert out["n_candidates"] == m


def test_bbc_cv_removes_winners_curse_accuracy() -> None:
    # Tsamardinos et al. (2018), as above; balanced classes so chance = majority share = 0.5.
    rng = np.random.default_rng(1)
    n, m = 200, 300
    y = np.array(["a", "b"] * (n // 2))
    preds = [_noise_proba(rng, n) for _ in range(m)]
    out = bbc_cv(preds, y, "accuracy", n_boot=200, seed=0)
    assert out["winner_cv"] > 0.56
    assert abs(out["estimate"] - 0.5) < 0.04


def test_bbc_cv_single_candidate_is_its_oob_score() -> None:
    rng = np.random.default_rng(2)
    n = 120
    y = rng.integers(0, 2, n)
    p = np.clip(0.5 + 0.3 * (y - 0.5) + 0.25 * rng.standard_normal(n), 0.01, 0.99)
    pred = np.column_stack([1.0 - p, p])
    out = bbc_cv([pred], y, "roc_auc", n_boot=100, seed=5)
    f = metrics.scorer("roc_auc", np.array([0, 1]))
    oob = [f(y[c == 0], pred[c == 0]) for c in bootstrap_counts(n, 100, seed=5)]
    assert out["estimate"] == pytest.approx(np.mean(oob), rel=1e-12)
    assert out["winner_cv"] == pytest.approx(f(y, pred))
    assert abs(out["optimism"]) < 0.03  # nothing was selected, so (almost) no optimism


def test_vectorised_auc_equals_sklearn_on_bootstrap_samples(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # small chunk and block sizes so several candidate chunks and sample blocks are exercised
    monkeypatch.setattr(honesty, "_AUC_CHUNK", 3)
    monkeypatch.setattr(honesty, "_AUC_CACHE_CELLS", 8 * 50)
    rng = np.random.default_rng(8)
    n, m = 50, 7
    y = rng.integers(0, 2, n)
    scores = rng.random((n, m)).round(1)  # many ties
    counts = bootstrap_counts(n, 30, seed=2)
    fast = honesty._auc_inbag(scores, y == 1, counts)
    # reference: sklearn.metrics.roc_auc_score on the materialised bootstrap sample
    from sklearn.metrics import roc_auc_score

    for b in range(30):
        idx = np.repeat(np.arange(n), counts[b])
        expected = [roc_auc_score(y[idx], scores[idx, j]) for j in range(m)]
        np.testing.assert_allclose(fast[b], expected, rtol=1e-12)


@pytest.mark.parametrize(
    "metric", ["roc_auc", "accuracy", "log_loss", "balanced_accuracy", "f1", "f1_macro"]
)
def test_fast_selection_picks_a_best_candidate_classification(metric: str) -> None:
    rng = np.random.default_rng(4)
    n, m = 40, 6
    k = 3 if metric == "f1_macro" else 2
    y = rng.integers(0, k, n)
    preds = []
    for _ in range(m):
        raw = rng.random((n, k)).round(1) + 1e-3  # coarse values give ties in the scores
        preds.append(raw / raw.sum(axis=1, keepdims=True))
    classes = np.arange(k)
    counts = np.vstack([np.ones((1, n), dtype=np.int32), bootstrap_counts(n, 15, seed=0)])
    winners = inbag_winners(preds, y, metric, counts, classes=classes)
    f = metrics.scorer(metric, classes)
    for b, w in enumerate(winners):
        idx = np.repeat(np.arange(n), counts[b])
        direct = [f(y[idx], p[idx]) for p in preds]
        assert direct[w] == pytest.approx(max(direct), abs=1e-12)


@pytest.mark.parametrize("metric", ["rmse", "mae", "r2"])
def test_fast_selection_picks_a_best_candidate_regression(metric: str) -> None:
    rng = np.random.default_rng(5)
    n, m = 40, 6
    y = rng.standard_normal(n)
    preds = [y + rng.standard_normal(n) * s for s in np.linspace(0.5, 1.0, m)]
    counts = bootstrap_counts(n, 15, seed=0)
    winners = inbag_winners(preds, y, metric, counts)
    f = metrics.scorer(metric)
    for b, w in enumerate(winners):
        idx = np.repeat(np.arange(n), counts[b])
        direct = [f(y[idx], p[idx]) for p in preds]
        assert direct[w] == pytest.approx(max(direct), abs=1e-12)


def test_bbc_cv_callable_matches_metric_name() -> None:
    rng = np.random.default_rng(6)
    n = 60
    y = rng.standard_normal(n)
    preds = [y + rng.standard_normal(n) * s for s in (0.6, 0.8, 1.0)]
    by_name = bbc_cv(preds, y, "rmse", n_boot=20, seed=1)
    by_callable = bbc_cv(preds, y, metrics.scorer("rmse"), n_boot=20, seed=1)
    assert by_name == pytest.approx(by_callable)
    assert by_name["estimate"] < 0  # greater-is-better sign: negated RMSE


def test_bbc_cv_rejects_bad_input() -> None:
    y = np.array([0, 1, 0, 1])
    with pytest.raises(ValueError, match="at least one candidate"):
        bbc_cv([], y, "accuracy")
    with pytest.raises(ValueError, match="every row"):
        bbc_cv([np.zeros((3, 2))], y, "accuracy")
    with pytest.raises(ValueError, match="alpha"):
        bbc_cv([np.zeros((4, 2))], y, "accuracy", alpha=1.5)


def test_bbc_cv_speed_smoke() -> None:
    # The real target (2,000 candidates x 1,000 rows, binary AUC, well under 10 s) is timed in
    # benchmarks/explain_costs.py; here a loose bound only guards against a non-vectorised path.
    rng = np.random.default_rng(7)
    n, m = 1000, 2000
    y = rng.integers(0, 2, n)
    scores = rng.random((n, m))
    preds = [np.column_stack([1.0 - scores[:, j], scores[:, j]]) for j in range(m)]
    start = time.perf_counter()
    out = bbc_cv(preds, y, "roc_auc", n_boot=100, seed=0)
    assert time.perf_counter() - start < 30.0
    assert out["n_candidates"] == m
    assert m > honesty._AUC_CHUNK  # the chunked path was exercised


# --- selection optimism (finalize compares trials with nested library scores) ---------------


def test_selection_optimism_of_noise_candidates_matches_their_excess_over_chance() -> None:
    # Tsamardinos et al. (2018): picking the best of many pure-noise candidates inflates its CV
    # AUC above 0.5 (the true AUC of each); the optimism is that excess. Above the row cap the
    # rows are subsampled, and the figure stays of the same size.
    rng = np.random.default_rng(3)
    for n in (400, honesty.SELECTION_MAX_ROWS + 4000):
        y = np.array([0, 1] * (n // 2))
        preds = [_noise_proba(rng, n) for _ in range(100)]
        best_cv = max(metrics.score("roc_auc", y, p, np.array([0, 1])) for p in preds)
        opt = honesty.selection_optimism(preds, y, "roc_auc", seed=0)
        assert 0.5 * (best_cv - 0.5) < opt < 1.5 * (best_cv - 0.5) + 0.01


def test_selection_optimism_is_zero_without_a_choice() -> None:
    rng = np.random.default_rng(4)
    y = np.array([0, 1] * 100)
    strong = np.column_stack([1 - y * 0.8 - 0.1, y * 0.8 + 0.1])
    assert honesty.selection_optimism([strong], y, "roc_auc") == 0.0
    # identical candidates: picking among them gains nothing
    assert honesty.selection_optimism([strong, strong.copy()], y, "log_loss") < 1e-3
    # two copies of one noise candidate: the choice is no choice, so nothing to take off
    # (their unfloored BBC-CV optimism is bootstrap noise of either sign around 0)
    noise = _noise_proba(rng, 200)
    assert honesty.selection_optimism([noise, noise.copy()], y, "roc_auc") < 0.01
    # the contrast that makes the check mean something: the best of 20 distinct noise
    # candidates is optimistic (Tsamardinos, Greasidou & Borboudakis 2018); the expected best
    # of 20 null ROC AUCs on 100 + 100 rows lies about 1.9 standard errors (Hanley & McNeil
    # 1982: sqrt(201 / (12 * 100 * 100)) = 0.041) above 0.5, i.e. near 0.58
    many = [_noise_proba(rng, 200) for _ in range(20)]
    assert honesty.selection_optimism(many, y, "roc_auc") > 0.03
