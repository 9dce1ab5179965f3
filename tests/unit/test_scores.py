"""The one conversion between stored (greater-is-better) scores and a metric's natural sign."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import get_scorer, log_loss, mean_squared_error, roc_auc_score
from tuttiml.service.spec import Metric, natural, score_sign


@pytest.mark.parametrize(
    ("metric", "sklearn_scorer"),
    [
        (Metric.ROC_AUC, "roc_auc"),
        (Metric.LOG_LOSS, "neg_log_loss"),
        (Metric.ACCURACY, "accuracy"),
        (Metric.BALANCED_ACCURACY, "balanced_accuracy"),
        (Metric.F1, "f1"),
        (Metric.F1_MACRO, "f1_macro"),
        (Metric.RMSE, "neg_root_mean_squared_error"),
        (Metric.MAE, "neg_mean_absolute_error"),
        (Metric.R2, "r2"),
    ],
)
def test_sign_agrees_with_scikit_learns_scorers(metric: Metric, sklearn_scorer: str) -> None:
    # scikit-learn's scorer objects carry the same convention: `_sign` is -1 for the neg_* ones
    assert score_sign(metric) == get_scorer(sklearn_scorer)._sign


def test_natural_undoes_the_stored_sign() -> None:
    y = np.array([0, 1, 1, 0, 1])
    p = np.array([0.2, 0.7, 0.6, 0.4, 0.9])
    stored_ll = -log_loss(y, p)  # what a trial stores: greater is better
    assert natural(Metric.LOG_LOSS, stored_ll) == pytest.approx(log_loss(y, p))
    assert natural("roc_auc", roc_auc_score(y, p)) == pytest.approx(roc_auc_score(y, p))
    rmse = float(np.sqrt(mean_squared_error([1.0, 2.0], [1.5, 2.5])))
    assert natural(Metric.RMSE, -rmse) == pytest.approx(0.5)
    assert natural(Metric.RMSE, None) is None
