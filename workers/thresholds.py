"""Decision thresholds for binary label metrics, chosen on stored out-of-fold predictions."""

from __future__ import annotations

from typing import Any

import numpy as np
from tuttiml.service.spec import Metric, SearchSpec
from tuttiml.service.store import JobReader
from tuttiml.workers import combining, metrics
from tuttiml.workers.datasets import Dataset
from tuttiml.workers.oof import oof_array

THRESHOLD_METRICS = (Metric.F1, Metric.BALANCED_ACCURACY)


def decision_threshold(
    request: dict[str, Any], reader: JobReader, data: Dataset, spec: SearchSpec
) -> float | None:
    """For binary label metrics, the probability cut-off that maximises the metric.

    Chosen on the winner's stored out-of-fold predictions (never on rows a model was fitted
    on; for a library ensemble, its members' combined by the ensemble's rule); the exported
    pipeline then predicts with that cut-off instead of 0.5.
    """
    metric = Metric(spec.metric)
    if data.task != "binary" or metric not in THRESHOLD_METRICS or data.classes is None:
        return None
    blobs = [reader.oof(request["job_id"], int(m["number"])) for m in request["members"]]
    if any(b is None for b in blobs):
        return None
    rows = data.scored_rows
    probas = [oof_array(b)[rows].astype(float) for b in blobs]
    combiner = request.get("combiner")
    if combiner:  # a library ensemble: its members' out-of-fold rows, combined by its rule
        probas = [
            combining.combine_probas(
                probas,
                combiner["mode"],
                combiner.get("weights"),
                combiner.get("coef"),
                combiner.get("intercept"),
            )
        ]
    proba = probas[0][:, 1]
    y = data.y[rows]
    best_t, best = 0.5, -np.inf
    for t in np.unique(np.quantile(proba, np.linspace(0.01, 0.99, 99))):
        labels = np.where(proba >= t, data.classes[1], data.classes[0])
        value = metrics.score(metric, y, metrics.one_hot(labels, data.classes), data.classes)
        if value > best:
            best_t, best = float(t), value
    return best_t
