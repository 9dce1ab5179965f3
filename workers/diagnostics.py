"""Ensemble diagnostics computed from stored out-of-fold predictions only (no refitting).

All candidates share the same folds, so their OOF predictions line up row by row: diversity
(error correlation, disagreement), the gain of an ensemble over its best member, and the
score / prediction-time Pareto front can all be read off the stored arrays.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np


def _member_errors(preds: Sequence[np.ndarray], y: np.ndarray, task: str, classes: Any) -> Any:
    if task == "regression":
        return np.stack([np.asarray(p, dtype=float).ravel() - y.astype(float) for p in preds])
    classes = np.unique(y) if classes is None else np.asarray(classes)
    yi = np.searchsorted(classes, y)
    if np.any(yi >= len(classes)) or not np.array_equal(classes[yi], y):
        raise ValueError("y holds labels that are not in classes")
    rows = np.arange(len(y))
    errors = []
    for p in preds:
        proba = np.asarray(p, dtype=float)
        if proba.ndim != 2 or proba.shape[1] != len(classes):
            raise ValueError("classification predictions must be (n, len(classes)) probabilities")
        errors.append(1.0 - proba[rows, yi])
    return np.stack(errors)


def error_correlation(
    preds: Sequence[np.ndarray], y: np.ndarray, task: str, *, classes: np.ndarray | None = None
) -> list[list[float]]:
    """Pairwise Pearson correlation of the members' OOF errors.

    Low correlation means members err on different rows, which is what averaging exploits.
    Errors are residuals ``pred - y`` for regression and ``1 - p(true class)`` for
    classification.

    Args:
        preds: OOF predictions of each member on the same rows (layout of ``workers.metrics``).
        y: True targets.
        task: ``"binary"``, ``"multiclass"`` or ``"regression"``.
        classes: Sorted labels of the probability columns (default: sorted unique ``y``).

    Returns:
        A symmetric ``m x m`` nested list with ones on the diagonal. A correlation involving a
        member whose errors are constant is undefined and reported as 0.0 (JSON has no NaN).

    Raises:
        ValueError: no members, lengths that differ from ``y``, or a bad probability layout.
    """
    y = np.asarray(y)
    if len(preds) == 0:
        raise ValueError("error_correlation needs at least one member")
    if any(len(p) != len(y) for p in preds):
        raise ValueError("every member must predict every row of y")
    errors = _member_errors(preds, y, task, classes)
    centred = errors - errors.mean(axis=1, keepdims=True)
    norms = np.sqrt(np.einsum("ij,ij->i", centred, centred))
    with np.errstate(divide="ignore", invalid="ignore"):
        corr = (centred @ centred.T) / np.outer(norms, norms)
    corr = np.where(np.isfinite(corr), np.clip(corr, -1.0, 1.0), 0.0)
    np.fill_diagonal(corr, 1.0)
    corr = (corr + corr.T) / 2.0
    return corr.tolist()


def disagreement(preds: Sequence[np.ndarray], classes: np.ndarray) -> list[list[float]]:
    """Pairwise share of rows on which two members predict different labels.

    Args:
        preds: OOF class-probability matrices (n, k) of each member, columns in ``classes``
            order; the predicted label is the arg-max column (first one on ties, as in
            ``workers.metrics``).
        classes: Sorted class labels.

    Returns:
        A symmetric ``m x m`` nested list in [0, 1] with zeros on the diagonal.

    Raises:
        ValueError: no members, members of different lengths or a bad probability layout.
    """
    k = len(classes)
    if len(preds) == 0:
        raise ValueError("disagreement needs at least one member")
    n = len(preds[0])
    onehot = []
    for p in preds:
        proba = np.asarray(p, dtype=float)
        if proba.ndim != 2 or proba.shape != (n, k):
            raise ValueError("predictions must all be (n, len(classes)) probability matrices")
        onehot.append(np.eye(k)[np.argmax(proba, axis=1)].ravel())
    stacked = np.stack(onehot)
    agree = stacked @ stacked.T / max(n, 1)
    out = np.clip(1.0 - agree, 0.0, 1.0)
    np.fill_diagonal(out, 0.0)
    return out.tolist()


def ensemble_gain(ensemble_score: float, member_scores: Sequence[float]) -> float:
    """Ensemble score minus its best member's score (both greater-is-better).

    Positive means the ensemble beats every member alone; negative means it is worse than simply
    keeping the best member.

    Raises:
        ValueError: no member scores.
    """
    if len(member_scores) == 0:
        raise ValueError("ensemble_gain needs at least one member score")
    return float(ensemble_score) - float(max(member_scores))


def pareto_front(points: list[dict[str, Any]]) -> list[str]:
    """Ids of the candidates no other candidate beats on both score and prediction time.

    A point is dominated when another has a score at least as high and ``predict_ms`` at most as
    low, one of them strictly. Points that tie exactly on both are all kept. Sort by score
    (descending) then time, and sweep keeping the fastest time seen among strictly better
    scores: O(n log n).

    Args:
        points: Dicts with ``"id"``, ``"score"`` (greater is better) and ``"predict_ms"`` (lower
            is better). Points whose score or time is NaN are ignored (failed candidates).

    Returns:
        Front ids as strings, best score first (ties by faster time, then input order).

    Raises:
        ValueError: a point lacks one of the keys.
    """
    rows: list[tuple[float, float, int, str]] = []
    for i, p in enumerate(points):
        try:
            score, ms, ident = float(p["score"]), float(p["predict_ms"]), str(p["id"])
        except KeyError as exc:
            raise ValueError(f"point {i} lacks key {exc.args[0]!r}") from exc
        if math.isnan(score) or math.isnan(ms):
            continue
        rows.append((-score, ms, i, ident))
    rows.sort()
    front: list[str] = []
    fastest_better = math.inf  # fastest time among points with a strictly higher score
    start = 0
    while start < len(rows):
        end = start
        while end < len(rows) and rows[end][0] == rows[start][0]:
            end += 1
        group_fastest = rows[start][1]  # the group is sorted by time
        if group_fastest < fastest_better:
            front.extend(r[3] for r in rows[start:end] if r[1] == group_fastest)
        fastest_better = min(fastest_better, group_fastest)
        start = end
    return front
