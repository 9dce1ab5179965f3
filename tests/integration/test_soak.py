"""Forty small jobs submitted at once, two workers: all finish, in submission order."""

from __future__ import annotations

from pathlib import Path

import pytest
from sklearn.datasets import load_iris

from tests.conftest import start_workers

pytestmark = [pytest.mark.integration, pytest.mark.slow]


def test_forty_jobs_at_once_all_finish(
    client,
    redis_url: str,
    prefix: str,  # type: ignore[no-untyped-def]
    tmp_path: Path,
) -> None:
    frame = load_iris(as_frame=True).frame
    jobs = [
        client.submit(
            frame,
            target="target",
            max_trials=2,
            parallelism=1,
            folds=3,
            families=["single"],
            seed=i,
            library_size=0,
            wall_seconds=900,
        )
        for i in range(40)
    ]
    workers = start_workers(
        redis_url, prefix, 2, log=tmp_path / "w.log", env={"TUTTI_LEASE_SECONDS": "5"}
    )
    try:
        states = [job.wait(timeout=900, poll=0.5)["state"] for job in jobs]
    finally:
        workers.wait(timeout=120)
    assert states == ["finished"] * 40  # none lost, none stuck
    for job in jobs:
        assert job.status()["trials_done"] == 2
        assert client.store.get_artifact(job.id) is not None
    starts = [job.record()["started_at"] for job in jobs]
    # queued jobs start in submission order (RQ's queue is FIFO; two workers may swap
    # neighbours, so each job starts no later than the job two places after it)
    assert all(starts[i] <= starts[i + 2] for i in range(len(starts) - 2))
