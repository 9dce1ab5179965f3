"""Successive halving over rows, end to end: a real worker, a real Redis, real fits.

The breast-cancer table (scikit-learn bundled, 569 rows) stands in for a large one by setting
``halving_rows`` below its size, so every trial first fits on a subsample of fold 0.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from sklearn.datasets import load_breast_cancer
from tuttiml.service.client import Client

from tests.conftest import run_to_end

pytestmark = pytest.mark.integration


def test_trials_graduate_from_a_row_subsample_to_all_rows(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    frame = load_breast_cancer(as_frame=True).frame
    job = client.submit(
        frame,
        target="target",
        families=["single"],
        folds=3,
        max_trials=14,
        parallelism=1,
        halving_rows=100,
        wall_seconds=600,
        seed=4,
    )
    run_to_end(job, redis_url, prefix, tmp_path / "w.log")
    rows = client.store.trial_rows(job.id)
    settled = [r for r in rows if r["state"] in ("complete", "pruned")]
    assert len(settled) == 14
    # every trial ran the rung first; complete ones then ran all three folds on all rows
    assert all(r.get("rung_score") is not None for r in settled)
    complete = [r for r in settled if r["state"] == "complete"]
    assert complete and all(len(r["fold_scores"]) == 3 for r in complete)
    at_rung = [r for r in settled if r["state"] == "pruned" and not r["fold_scores"]]
    assert at_rung, "no candidate was stopped at the rung"
    # stopped candidates never reach the leaderboard
    board = set(job.leaderboard()["trial"].dropna().astype(int))
    assert board and not {int(r["number"]) for r in at_rung} & board
    assert any("row-halving rung" in line for line in job.logs())
