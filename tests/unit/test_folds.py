"""The job's fixed fold assignment: stratified, group-aware, time-ordered, hold-out."""

from __future__ import annotations

import numpy as np
import pandas as pd
from tuttiml.service.spec import SearchSpec
from tuttiml.workers.datasets import HOLDOUT, PRE_BLOCK, assign_folds


def _frame(n: int = 300) -> tuple[pd.DataFrame, np.ndarray]:
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(
        {
            "x": rng.normal(size=n),
            "group": rng.integers(0, 30, n).astype(str),
            "when": rng.permutation(n).astype(float),
        }
    )
    y = (rng.random(n) < 0.3).astype(int)
    return frame, y


def test_stratified_folds_keep_the_class_balance() -> None:
    frame, y = _frame()
    ids, mode = assign_folds(frame, y, SearchSpec(target="y", folds=5), "binary")
    assert mode == "kfold" and set(ids) == set(range(5))
    shares = [y[ids == f].mean() for f in range(5)]
    assert max(shares) - min(shares) < 0.05  # stratification (common practice)


def test_group_folds_never_split_a_group() -> None:
    frame, y = _frame()
    ids, _ = assign_folds(frame, y, SearchSpec(target="y", group_column="group"), "binary")
    per_group = pd.Series(ids).groupby(frame["group"]).nunique()
    assert (per_group == 1).all()


def test_time_ordered_folds_train_only_on_the_past() -> None:
    frame, y = _frame()
    spec = SearchSpec(target="y", order_column="when", folds=4)
    ids, mode = assign_folds(frame, y, spec, "binary")
    assert mode == "expanding"
    when = frame["when"].to_numpy()
    assert when[ids == PRE_BLOCK].max() < when[ids == 0].min()
    for f in range(1, 4):
        assert when[ids == f - 1].max() < when[ids == f].min()


def test_holdout_rows_are_reserved_and_never_in_a_fold() -> None:
    frame, y = _frame()
    ids, _ = assign_folds(frame, y, SearchSpec(target="y", holdout=0.2, seed=3), "binary")
    assert abs((ids == HOLDOUT).mean() - 0.2) < 0.01
    again, _ = assign_folds(frame, y, SearchSpec(target="y", holdout=0.2, seed=3), "binary")
    assert np.array_equal(ids, again)  # fixed by the seed
