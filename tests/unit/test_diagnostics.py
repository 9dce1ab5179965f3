"""Tests for workers.diagnostics: diversity matrices, ensemble gain and the Pareto front."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from tuttiml.workers.diagnostics import (
    disagreement,
    ensemble_gain,
    error_correlation,
    pareto_front,
)


def _proba(rng: np.random.Generator, n: int, k: int) -> np.ndarray:
    raw = rng.random((n, k))
    return raw / raw.sum(axis=1, keepdims=True)


def test_error_correlation_regression_matches_numpy() -> None:
    rng = np.random.default_rng(0)
    y = rng.standard_normal(50)
    preds = [y + rng.standard_normal(50) for _ in range(4)]
    corr = np.array(error_correlation(preds, y, "regression"))
    # reference: numpy.corrcoef of the residuals (Pearson)
    expected = np.corrcoef(np.stack([p - y for p in preds]))
    np.testing.assert_allclose(corr, expected, atol=1e-12)


def test_error_correlation_classification_symmetric_unit_diagonal() -> None:
    rng = np.random.default_rng(1)
    y = rng.choice(np.array(["x", "y", "z"]), 40)
    base = _proba(rng, 40, 3)
    preds = [base, base, _proba(rng, 40, 3)]
    corr = np.array(error_correlation(preds, y, "multiclass"))
    np.testing.assert_allclose(corr, corr.T)
    np.testing.assert_allclose(np.diag(corr), 1.0)
    assert corr[0, 1] == pytest.approx(1.0)  # identical members err identically
    rows = np.arange(40)
    err = [1.0 - p[rows, np.searchsorted(np.array(["x", "y", "z"]), y)] for p in preds]
    assert corr[0, 2] == pytest.approx(np.corrcoef(err[0], err[2])[0, 1])


def test_error_correlation_constant_errors_reported_as_zero() -> None:
    y = np.array([1.0, 2.0, 3.0])
    corr = error_correlation([y.copy(), y + np.array([0.1, -0.2, 0.3])], y, "regression")
    assert corr == [[1.0, 0.0], [0.0, 1.0]]


def test_error_correlation_rejects_bad_layout() -> None:
    with pytest.raises(ValueError, match="probabilities"):
        error_correlation([np.ones((3, 3))], np.array([0, 1, 0]), "binary")


def test_disagreement_zero_for_identical_members() -> None:
    rng = np.random.default_rng(2)
    p = _proba(rng, 30, 3)
    out = np.array(disagreement([p, p.copy(), p], np.array([0, 1, 2])))
    np.testing.assert_array_equal(out, np.zeros((3, 3)))


def test_disagreement_by_hand() -> None:
    a = np.array([[0.9, 0.1], [0.2, 0.8], [0.6, 0.4], [0.3, 0.7]])  # labels 0 1 0 1
    b = np.array([[0.4, 0.6], [0.1, 0.9], [0.7, 0.3], [0.8, 0.2]])  # labels 1 1 0 0
    out = disagreement([a, b], np.array([0, 1]))
    assert out == [[0.0, 0.5], [0.5, 0.0]]


def test_ensemble_gain() -> None:
    assert ensemble_gain(0.91, [0.88, 0.90, 0.85]) == pytest.approx(0.01)
    assert ensemble_gain(-0.30, [-0.25, -0.40]) == pytest.approx(-0.05)
    with pytest.raises(ValueError, match="at least one"):
        ensemble_gain(0.5, [])


def _brute_front(points: list[dict]) -> set[str]:
    front = set()
    for p in points:
        dominated = any(
            q["score"] >= p["score"]
            and q["predict_ms"] <= p["predict_ms"]
            and (q["score"] > p["score"] or q["predict_ms"] < p["predict_ms"])
            for q in points
        )
        if not dominated:
            front.add(p["id"])
    return front


point_lists = st.lists(
    st.tuples(st.integers(0, 5), st.integers(0, 5)).map(
        lambda t: {"score": t[0] / 5.0, "predict_ms": float(t[1])}
    ),
    max_size=25,
).map(lambda ps: [{**p, "id": f"c{i}"} for i, p in enumerate(ps)])


@settings(max_examples=150, deadline=None)
@given(point_lists)
def test_pareto_front_matches_brute_force(points: list[dict]) -> None:
    front = pareto_front(points)
    assert len(front) == len(set(front))
    assert set(front) == _brute_front(points)


def test_pareto_front_order_ties_and_nan() -> None:
    points = [
        {"id": "slow_best", "score": 0.9, "predict_ms": 50.0},
        {"id": "fast_worse", "score": 0.8, "predict_ms": 5.0},
        {"id": "twin_a", "score": 0.85, "predict_ms": 10.0},
        {"id": "twin_b", "score": 0.85, "predict_ms": 10.0},
        {"id": "dominated", "score": 0.8, "predict_ms": 20.0},
        {"id": "failed", "score": float("nan"), "predict_ms": 1.0},
        {"id": 7, "score": 0.7, "predict_ms": 5.0},
    ]
    assert pareto_front(points) == ["slow_best", "twin_a", "twin_b", "fast_worse"]
    with pytest.raises(ValueError, match="predict_ms"):
        pareto_front([{"id": "x", "score": 1.0}])
