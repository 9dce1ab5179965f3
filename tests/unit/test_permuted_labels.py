"""With the labels randomly permuted, no family may score better than chance.

A leak anywhere in a candidate pipeline (preprocessing fitted outside the folds, test rows in
an early-stopping slice, out-of-fold predictions that saw their own rows) shows up as a score
above chance on labels that carry no signal.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from tuttiml.service.data import prepare
from tuttiml.service.spec import Metric, SearchSpec
from tuttiml.workers.datasets import build_dataset
from tuttiml.workers.evaluation import cross_validate
from tuttiml.workers.families import FAMILIES
from tuttiml.workers.metrics import natural_score

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def permuted():  # type: ignore[no-untyped-def]
    frame = load_breast_cancer(as_frame=True).frame
    rng = np.random.default_rng(0)
    frame["target"] = rng.permutation(frame["target"].to_numpy())
    prep = prepare(frame, SearchSpec(target="target", metric="roc_auc", seed=0))
    record = {
        "task": prep.task,
        "schema": prep.schema,
        "columns": {"high_cardinality": list(prep.high_cardinality_columns)},
    }
    return build_dataset(prep.frame, record, prep.spec)


@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_every_family_scores_chance_on_permuted_labels(permuted, family: str) -> None:  # type: ignore[no-untyped-def]
    data = permuted
    ctx = data.context(0)
    params = FAMILIES[family].defaults(ctx)[0]
    ev = cross_validate(FAMILIES[family].build(params, ctx), data, Metric.ROC_AUC)
    rows = data.scored_rows
    y = data.y[rows]
    n1, n0 = int((y == 1).sum()), int((y == 0).sum())
    # Null standard error of ROC AUC (Mann–Whitney U under H0, no ties; Hanley & McNeil 1982)
    se = np.sqrt((n0 + n1 + 1) / (12.0 * n0 * n1))
    auc = natural_score(Metric.ROC_AUC, y, ev.oof[rows], data.classes)
    assert abs(auc - 0.5) <= 2 * se, (family, auc, se)
