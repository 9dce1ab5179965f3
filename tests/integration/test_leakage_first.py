"""The leakage checks run before the search and are never skipped; the report never shows a
check that did not run as clean (real Redis, real worker)."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from tuttiml.service.report import render_report
from tuttiml.service.report_data import collect

from tests.conftest import start_workers

pytestmark = pytest.mark.integration


def test_leakage_runs_before_the_search_when_explanations_get_no_time(
    client,
    redis_url: str,
    prefix: str,
    tmp_path: Path,  # type: ignore[no-untyped-def]
) -> None:
    # scikit-learn's breast cancer table plus a near copy of the target (the target plus noise
    # in [0, 0.5): not a copy, not monotone, not one-to-one, so submit lets it through) and a
    # row number (dropped as id-like at submit)
    frame = load_breast_cancer(as_frame=True).frame.iloc[:, [0, 1, 2, 30]].copy()
    rng = np.random.default_rng(0)
    frame["lab_result"] = frame["target"] + rng.uniform(0, 0.5, size=len(frame))
    frame["row_number"] = np.arange(len(frame))
    # no time for explanations that fit models: the leakage checks must still have run
    job = client.submit(
        frame,
        target="target",
        max_trials=2,
        families=["boosting"],
        seed=0,
        wall_seconds=240,
        explain_seconds=0,
    )
    log = tmp_path / "workers.log"
    workers = start_workers(redis_url, prefix, 1, log=log)
    try:
        status = job.wait(timeout=300, explanations=True)
    finally:
        workers.wait(timeout=120)
    assert status["state"] == "finished", log.read_text()[-3000:]
    parts = status["explain_parts"]
    assert parts["significance"].startswith("not run") and parts["leakage"] == "done", parts

    stored = job.extras()["leakage"]["findings"]  # written by the first slice
    by_column = {f["column"]: f for f in stored}
    assert "alone predicts the target" in by_column["lab_result"]["finding"]
    assert by_column["row_number"]["action"] == "dropped before the search"

    data = collect(job)
    assert data["leakage"] == stored
    assert "leakage" not in data["not_run"]
    assert "explain_seconds is 0" in data["not_run"]["bias_variance"]
    page = render_report(data)
    leakage = re.search(r'<section id="leakage">(.*?)</section>', page, re.DOTALL)
    assert leakage and "lab_result" in leakage.group(1)
    bias = re.search(r'<section id="bias-variance">(.*?)</section>', page, re.DOTALL)
    assert bias and "Not run:" in bias.group(1)
