"""F1 jobs: the exported pipeline predicts with the tuned threshold, and the hold-out score
is the score of exactly those predictions on the reserved rows."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.metrics import f1_score, mean_squared_error
from sklearn.model_selection import train_test_split
from tuttiml.service.client import Client
from tuttiml.service.report_data import collect

from tests.conftest import run_to_end

pytestmark = pytest.mark.integration


def test_f1_threshold_and_holdout_score_match_a_hand_computation(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    frame = load_breast_cancer(as_frame=True).frame  # scikit-learn bundled (UCI WDBC)
    job = client.submit(
        frame,
        target="target",
        metric="f1",
        holdout=0.2,
        families=["single"],
        max_trials=4,
        parallelism=1,
        wall_seconds=600,
        seed=5,
    )
    run_to_end(job, redis_url, prefix, tmp_path / "w.log")
    meta = job.artifact_meta()
    threshold = meta["decision_threshold"]
    assert threshold is not None and 0.0 < threshold < 1.0, meta
    model = job.best_pipeline()
    X, y = frame.drop(columns="target"), frame["target"].to_numpy()
    # the predicted labels are the probabilities cut at the tuned threshold
    proba = model.predict_proba(X)[:, 1]
    assert np.array_equal(model.predict(X), (proba >= threshold).astype(int))
    # the hold-out rows are a stratified 20% split with the job's seed (scikit-learn's
    # train_test_split, the documented rule); their F1 by scikit-learn's f1_score
    _, held = train_test_split(np.arange(len(y)), test_size=0.2, random_state=5, stratify=y)
    expected = f1_score(y[held], model.predict(X.iloc[held]))
    assert meta["holdout_score"] == pytest.approx(expected, abs=1e-12)


def test_a_loss_hold_out_score_is_stored_greater_is_better_and_shown_natural(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    frame = load_diabetes(as_frame=True).frame  # scikit-learn bundled (Efron et al. 2004)
    job = client.submit(
        frame,
        target="target",
        metric="rmse",
        holdout=0.2,
        families=["single"],
        max_trials=3,
        parallelism=1,
        wall_seconds=600,
        seed=6,
    )
    run_to_end(job, redis_url, prefix, tmp_path / "w.log")
    model = job.best_pipeline()
    X, y = frame.drop(columns="target"), frame["target"].to_numpy()
    # regression hold-out rows: a plain 20% split with the job's seed (train_test_split)
    _, held = train_test_split(np.arange(len(y)), test_size=0.2, random_state=6)
    rmse = float(np.sqrt(mean_squared_error(y[held], model.predict(X.iloc[held]))))
    assert rmse > 0
    # stored greater-is-better (RMSE negated) in the metadata and the result, natural on show
    assert job.artifact_meta()["holdout_score"] == pytest.approx(-rmse, rel=1e-9)
    assert job.result().natural_holdout("rmse") == pytest.approx(rmse, rel=1e-9)
    assert collect(job)["honest"]["holdout"] == pytest.approx(rmse, rel=1e-9)  # the report
