"""Members are tuned, composites are built from them: the schedule of a real job.

Real Redis, two real worker processes, every family, on scikit-learn's bundled breast-cancer
table. Checks that the portfolio runs first, that the job's trials are mostly members (no
composite trial before the second half of the budget), and that library composites built
from stored out-of-fold predictions show on the leaderboard while the job still runs.
"""

from __future__ import annotations

import time
from pathlib import Path

import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from tuttiml.workers.schedule import MEMBER_FAMILIES, portfolio_trials
from tuttiml.workers.search import context_from_record

from tests.conftest import start_workers

pytestmark = pytest.mark.integration

WALL = 60.0


def test_members_first_and_composites_on_the_board_mid_search(
    client, redis_url: str, prefix: str, tmp_path: Path
) -> None:  # type: ignore[no-untyped-def]
    frame = load_breast_cancer(as_frame=True).frame
    job = client.submit(
        frame, target="target", max_trials=400, wall_seconds=WALL, parallelism=2, seed=0
    )
    workers = start_workers(
        redis_url, prefix, 2, log=tmp_path / "w.log", env={"TUTTI_SHARD_SECONDS": "20"}
    )
    mid_search: pd.DataFrame | None = None
    try:
        deadline = time.time() + 600
        while time.time() < deadline:
            state = job.status()["state"]
            if state not in ("queued", "running"):
                break
            board = job.leaderboard()
            library = board[board["family"].str.startswith("library:")]
            if len(library) and job.status()["state"] == "running" and mid_search is None:
                mid_search = board
                extras = job.extras()
            time.sleep(0.5)
        status = job.wait(timeout=600)
    finally:
        workers.wait(timeout=120)
    log = (tmp_path / "w.log").read_text()
    assert status["state"] == "finished", (status, log[-3000:], job.logs()[-20:])
    trials = job.trials().sort_values("number").reset_index(drop=True)
    done = trials[trials["state"].isin(["complete", "pruned"])]

    # the portfolio runs first, in its order (a loaded machine may end the job before the
    # whole learned portfolio has run: then the trials that ran are its first entries)
    record = job.record()
    start = portfolio_trials(record["spec"].get("families") or list(_all()), _ctx(record))
    first = trials.head(len(start))
    assert len(first) >= min(2, len(start)), trials[["number", "family", "state"]]
    assert [(r.family, r.params) for r in first.itertuples()] == [
        (name, params) for name, params in start
    ][: len(first)]

    # mostly members: composite trials only in the second half of the search time (the
    # search ends about 10% before the wall budget, so half of it is 0.45 * WALL)
    started = float(record["started_at"])
    is_member = done["family"].isin(MEMBER_FAMILIES)
    assert is_member.mean() >= 0.6, done["family"].value_counts()
    early = done[done["started_at"] < started + 0.4 * WALL]
    assert early["family"].isin(MEMBER_FAMILIES).all(), early[["number", "family"]]

    # composites over scored members were on the board while the search still ran; they
    # are combinations of complete trials (no fits of their own) with nested fold scores
    assert mid_search is not None, job.logs()[-30:]
    lib = mid_search[mid_search["family"].str.startswith("library:")]
    assert set(lib["family"]) == {"library:selection", "library:meta"}
    assert lib["trial"].isna().all()
    complete = set(trials.loc[trials["state"] == "complete", "number"])
    for ens in extras["library"]:
        assert ens["during_search"] is True
        assert set(ens["members"]) <= complete
        assert len(ens["fold_scores"]) == 5
    assert "library composites refreshed" in "\n".join(job.logs())
    # finalize rebuilt the library on the final members, or, with no time left for that,
    # kept the search's (its logs say which); either way composites are on the final board
    final = job.extras()["library"]
    assert final, job.logs()[-20:]
    reused = any("library ensembles from the search reused" in line for line in job.logs())
    assert all(bool(e.get("during_search")) == reused for e in final)
    assert set(job.leaderboard()["family"]) >= {"library:selection", "library:meta"}


def _all() -> tuple[str, ...]:
    from tuttiml.service.spec import KNOWN_FAMILIES

    return KNOWN_FAMILIES


def _ctx(record: dict) -> object:  # type: ignore[type-arg]
    from tuttiml.service.spec import SearchSpec

    return context_from_record(record, SearchSpec.model_validate(record["spec"]).seed)
