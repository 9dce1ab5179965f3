"""A real job on a boolean target with a datetime feature: the exported pipeline predicts in the
user's labels and reads the user's own datetimes as training did (real Redis, real worker)."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal
from sklearn.datasets import load_breast_cancer
from tuttiml.service.data import normalize_frame

from tests.conftest import run_to_end

pytestmark = pytest.mark.integration


def _table() -> pd.DataFrame:
    # scikit-learn's breast cancer table, target as bool, "mean radius" (the strongest single
    # feature) turned into a datetime: one day later per unit of radius
    frame = load_breast_cancer(as_frame=True).frame
    cols = ["mean radius", "mean texture", "mean smoothness", "worst concavity"]
    out = frame[cols].rename(columns={"mean radius": "measured"})
    out["measured"] = pd.Timestamp("2024-01-01") + pd.to_timedelta(out["measured"], unit="D")
    out["benign"] = frame["target"] == 1
    return out


def test_bool_target_and_datetime_feature_round_trip(
    client,
    redis_url: str,
    prefix: str,
    tmp_path: Path,  # type: ignore[no-untyped-def]
) -> None:
    table = _table()
    unseen = table.iloc[::7]  # rows the job never sees
    job = client.submit(
        table.drop(index=unseen.index),
        target="benign",
        max_trials=3,
        families=["boosting"],
        seed=0,
        wall_seconds=300,
    )
    run_to_end(job, redis_url, prefix, tmp_path / "workers.log")
    model = job.best_pipeline()
    raw = unseen.drop(columns="benign")
    pred = model.predict(raw)
    assert pred.dtype == np.bool_  # the user's labels, not 0/1
    assert_array_equal(model.classes_, [False, True])
    # the datetime column carries the signal; the numbers the model sees at predict time are
    # the ones training saw (service.data's conversion of the same rows)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        as_trained = normalize_frame(raw)
    assert_array_equal(pred, model.predict(as_trained))
    assert_array_equal(model.predict_proba(raw), model.predict_proba(as_trained))
    # and they are worth something: the UCI documentation (wdbc.names) reports "mean radius"
    # among the strongest single features (from memory); well above the majority share
    majority = max(unseen["benign"].mean(), 1 - unseen["benign"].mean())
    assert (pred == unseen["benign"].to_numpy()).mean() > majority + 0.1
