"""With the labels randomly permuted, no candidate may score better than chance.

A leak anywhere in a candidate pipeline (an encoder or imputer fitted outside the folds, test
rows in an early-stopping slice, out-of-fold predictions that saw their own rows) shows up as
a score above chance on labels that carry no signal. The table is built so that the leaks that
matter most can show: a target encoder fitted on all rows gives every row of a 100-level
column (about three rows per level) a share of its own label back. Every family runs its
default and one drawn configuration (seeded random sampler), so options beyond the defaults
are covered too.
"""

from __future__ import annotations

import numpy as np
import optuna
import pandas as pd
import pytest
from tuttiml.service.data import prepare
from tuttiml.service.spec import Metric, SearchSpec
from tuttiml.workers.datasets import build_dataset
from tuttiml.workers.evaluation import cross_validate
from tuttiml.workers.families import FAMILIES
from tuttiml.workers.metrics import natural_score

pytestmark = pytest.mark.slow

N_ROWS = 300


def permuted_table(seed: int = 0) -> pd.DataFrame:
    """Numbers (with gaps), a 6-level and two high-cardinality categoricals; random labels.

    Generated on purpose: the point is the column kinds, and labels that carry no signal.
    """
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(
        {
            "a": rng.normal(size=N_ROWS),
            "b": rng.exponential(size=N_ROWS),
            "kind": rng.choice([f"k{i}" for i in range(6)], N_ROWS).astype(object),
            "code": [f"c{i:03d}" for i in rng.integers(0, 100, N_ROWS)],
            "shop": [f"s{i:02d}" for i in rng.integers(0, 40, N_ROWS)],
        }
    )
    frame.loc[rng.random(N_ROWS) < 0.1, "a"] = np.nan
    frame.loc[rng.random(N_ROWS) < 0.1, "kind"] = np.nan
    frame["target"] = rng.permutation(np.arange(N_ROWS) % 2)
    return frame


@pytest.fixture(scope="module")
def permuted():  # type: ignore[no-untyped-def]
    prep = prepare(permuted_table(), SearchSpec(target="target", metric="roc_auc", seed=0))
    assert set(prep.high_cardinality_columns) == {"code", "shop"}  # both target-encoded
    record = {
        "task": prep.task,
        "schema": prep.schema,
        "columns": {"high_cardinality": list(prep.high_cardinality_columns)},
    }
    return build_dataset(prep.frame, record, prep.spec)


def _drawn(family: str, ctx) -> dict:  # type: ignore[no-untyped-def]
    drawn: list[dict] = []
    study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=11))
    study.optimize(lambda t: drawn.append(FAMILIES[family].suggest(t, ctx)) or 0.0, n_trials=1)
    return drawn[0]


@pytest.mark.parametrize("which", ["default", "drawn"])
@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_every_family_scores_chance_on_permuted_labels(permuted, family: str, which: str) -> None:  # type: ignore[no-untyped-def]
    data = permuted
    ctx = data.context(0)
    params = FAMILIES[family].defaults(ctx)[0] if which == "default" else _drawn(family, ctx)
    ev = cross_validate(FAMILIES[family].build(params, ctx), data, Metric.ROC_AUC)
    rows = data.scored_rows
    y = data.y[rows]
    n1, n0 = int((y == 1).sum()), int((y == 0).sum())
    # Null standard error of ROC AUC (Mann–Whitney U under H0, no ties; Hanley & McNeil 1982)
    se = np.sqrt((n0 + n1 + 1) / (12.0 * n0 * n1))
    auc = natural_score(Metric.ROC_AUC, y, ev.oof[rows], data.classes)
    assert abs(auc - 0.5) <= 2 * se, (family, which, params, auc, se)
