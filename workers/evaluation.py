"""Cross-validated scoring of one built candidate on the job's fixed folds; plain numbers out."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from sklearn.base import clone
from tuttiml.service.spec import Metric
from tuttiml.workers import metrics
from tuttiml.workers.datasets import Dataset

LATENCY_ROWS = 1000


class Pruned(Exception):
    """The caller asked to stop after a fold (pruning or cancel)."""


@dataclass
class Evaluation:
    """Outcome of one candidate's cross-validation.

    Attributes:
        fold_scores: greater-is-better score per evaluated fold.
        oof: out-of-fold predictions over all rows (NaN where a row got none).
        fit_seconds: total fit time over the folds.
        predict_ms_per_1000: mean prediction time per 1,000 rows.
        fit_info: per-fold facts a refit needs (e.g. boosting's best iteration per param path).
        complete: every fold was evaluated.
        size_bytes: pickle length of the last fold's fitted model.
        rung_score: score of the row-halving rung (large tables only; see ``Dataset.rung``).
    """

    fold_scores: list[float]
    oof: np.ndarray
    fit_seconds: float
    predict_ms_per_1000: float
    fit_info: list[dict[str, int]] = field(default_factory=list)
    complete: bool = True
    size_bytes: int | None = None
    rung_score: float | None = None

    @property
    def mean(self) -> float:
        return float(np.mean(self.fold_scores))

    @property
    def std(self) -> float:
        return float(np.std(self.fold_scores, ddof=1)) if len(self.fold_scores) > 1 else 0.0


def empty_predictions(data: Dataset) -> np.ndarray:
    n = len(data.y)
    if data.classes is None:
        return np.full(n, np.nan)
    return np.full((n, len(data.classes)), np.nan)


def cross_validate(
    template: Any,
    data: Dataset,
    metric: Metric,
    *,
    on_fold: Callable[[int, float], bool] | None = None,
    fit_info: Callable[[Any], dict[str, int]] | None = None,
    seed: int = 0,
) -> Evaluation:
    """Fit a clone of ``template`` on each fold's training rows and score its test rows.

    On a large table (``data.rung(seed)`` is not None) a first fit on a row subsample of fold
    0 is scored and passed to ``on_fold`` as fold -1 before the full folds: successive halving
    over rows, with the caller's pruner deciding who graduates to all rows.

    Args:
        template: unfitted estimator (preprocessing included).
        data: the job's dataset and fold assignment.
        metric: what to score with (greater is better internally).
        on_fold: called after each fold with (fold, score); returning False stops early.
        fit_info: extracts per-fold facts from the fitted estimator.
        seed: the job's seed (fixes the rung's subsample).

    Raises:
        Pruned: ``on_fold`` asked to stop; ``args[0]`` carries the partial Evaluation.
    """
    oof = empty_predictions(data)
    scores: list[float] = []
    info: list[dict[str, int]] = []
    fit_s = 0.0
    pred_ms: list[float] = []
    X, y = data.X, data.y
    rung = data.rung(seed) if on_fold is not None else None
    rung_score: float | None = None
    if rung is not None and on_fold is not None:
        sub, held = rung
        _, pred, fit_rung, _ = _fit_predict(template, data, sub, held)
        fit_s += fit_rung
        rung_score = metrics.score(metric, y[held], pred, data.classes)
        del pred
        if not on_fold(-1, rung_score):
            raise Pruned(Evaluation([], oof, fit_s, float("nan"), [], False, None, rung_score))
    for fold, (train, test) in enumerate(data.folds()):
        est, pred, fit_fold, predict_s = _fit_predict(template, data, train, test)
        fit_s += fit_fold
        pred_ms.append(predict_s * 1000.0 * 1000.0 / max(len(test), 1))
        oof[test] = pred
        scores.append(metrics.score(metric, y[test], pred, data.classes))
        if fit_info is not None:
            info.append(fit_info(est))
        if on_fold is not None and not on_fold(fold, scores[-1]):
            raise Pruned(
                Evaluation(
                    scores, oof, fit_s, float(np.mean(pred_ms)), info, False, None, rung_score
                )
            )
    return Evaluation(
        scores, oof, fit_s, _latency(est, X, test), info, True, _size(est), rung_score
    )


def _fit_predict(
    template: Any, data: Dataset, train: np.ndarray, test: np.ndarray
) -> tuple[Any, np.ndarray, float, float]:
    """(fitted clone, predictions on ``test``, fit seconds, predict seconds)."""
    est = clone(template)
    t0 = time.perf_counter()
    est.fit(data.X.iloc[train], data.y[train])
    t1 = time.perf_counter()
    pred = metrics.predictions(est, data.X.iloc[test], data.task, data.classes)
    return est, pred, t1 - t0, time.perf_counter() - t1


def _latency(est: Any, X: Any, test: np.ndarray) -> float:
    """Milliseconds to predict 1,000 rows in one call (rows drawn from the last test fold).

    Timing a full batch rather than scaling a small fold's time keeps per-call overhead from
    inflating the figure.
    """
    batch = X.iloc[np.resize(test, LATENCY_ROWS)]
    t0 = time.perf_counter()
    est.predict(batch)
    return (time.perf_counter() - t0) * 1000.0 * 1000.0 / LATENCY_ROWS


def _size(est: Any) -> int | None:
    """Serialized size of one fold's fitted model (pickle bytes written, never read back)."""
    import pickle

    try:
        return len(pickle.dumps(est, protocol=pickle.HIGHEST_PROTOCOL))
    except Exception:
        return None
