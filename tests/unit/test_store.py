"""JobStore against a real Redis server: state machine, exact budget, library bound, fences."""

from __future__ import annotations

import json
import threading

import pytest
from tuttiml.service.connection import connect
from tuttiml.service.errors import JobNotFoundError
from tuttiml.service.keys import Keys
from tuttiml.service.records import FinalResult, TrialRow, Winner
from tuttiml.service.store import JobReader, JobState, JobStore

from tests.contracts import StoreContract


@pytest.fixture
def store(redis_url: str, prefix: str) -> JobStore:
    return JobStore(connect(redis_url), Keys(prefix))


def _job(store: JobStore, job_id: str = "j1", shards: int = 2) -> str:
    store.create_job(job_id, {"spec": "{}", "task": "binary", "schema": {}}, shards=shards)
    return job_id


def test_missing_job_is_a_clear_error(store: JobStore) -> None:
    with pytest.raises(JobNotFoundError, match="tutti status"):
        store.job("nope")
    with pytest.raises(JobNotFoundError, match="letters, digits"):
        store.job("bad:id*")


def test_state_machine_refuses_illegal_transitions(store: JobStore) -> None:
    job = _job(store)
    assert store.transition(job, JobState.FINISHED) is None  # queued → finished is not allowed
    assert store.transition(job, JobState.RUNNING) is JobState.QUEUED
    assert store.transition(job, JobState.RUNNING, allowed_from=[JobState.QUEUED]) is None
    assert store.transition(job, JobState.FINALIZING) is JobState.RUNNING
    events = store.events(job)
    assert [e["state"] for e in events] == ["queued", "running", "finalizing"]
    assert all("at" in e for e in events)


def test_ticket_budget_is_exact_under_concurrency(store: JobStore) -> None:
    job = _job(store)
    got: list[int] = []
    lock = threading.Lock()

    def grab() -> None:
        while (t := store.take_ticket(job, 37)) is not None:
            with lock:
                got.append(t)

    threads = [threading.Thread(target=grab) for _ in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert sorted(got) == list(range(1, 38))
    store.return_ticket(job)
    assert store.take_ticket(job, 37) == 37
    assert store.take_ticket(job, 37) is None


def test_library_keeps_best_k_per_family(store: JobStore) -> None:
    job = _job(store)
    for n, score in enumerate([0.5, 0.9, 0.7, 0.8, 0.6]):
        row = TrialRow(number=n, family="bagging", state="complete", score=score)
        store.record_trial(job, row, oof=b"x" * 10, library_size=2)
    store.record_trial(
        job,
        TrialRow(number=9, family="boosting", state="complete", score=0.1),
        oof=b"y",
        library_size=2,
    )
    kept = store.library_members(job, ["bagging", "boosting"])
    assert sorted(kept) == [1, 3, 9]
    assert [r["number"] for r in store.board(job)] == [1, 3, 2, 4, 0, 9]
    rec = store.job(job)
    assert rec["n_complete"] == "6"


def test_rerecording_a_trial_moves_its_counter(store: JobStore) -> None:
    job = _job(store)
    store.record_trial(job, TrialRow(number=0, family="bagging", state="failed"))
    store.record_trial(job, TrialRow(number=0, family="bagging", state="complete", score=1))
    rec = store.job(job)
    assert rec["n_failed"] == "0" and rec["n_complete"] == "1"


def test_commit_final_happens_once_per_epoch(store: JobStore) -> None:
    job = _job(store)
    store.transition(job, JobState.RUNNING)
    store.transition(job, JobState.FINALIZING)
    first = store.commit_final(
        job,
        "0",
        artifacts={"best": (b"A", {"sha256": "a"})},
        extras={"k": 1},
        state=JobState.FINISHED,
    )
    second = store.commit_final(
        job,
        "0",
        artifacts={"best": (b"B", {"sha256": "b"})},
        extras={"k": 2},
        state=JobState.FINISHED,
    )
    assert first and not second
    blob, meta = store.get_artifact(job)  # type: ignore[misc]
    assert blob == b"A" and meta == {"sha256": "a"}
    assert store.extras(job) == {"k": 1}
    assert store.state(job) is JobState.FINISHED


def test_data_blobs_are_chunked_and_content_addressed(store: JobStore) -> None:
    data = bytes(range(256)) * 1000
    seen: list[tuple[int, int]] = []
    store.put_data("abc", data, chunk_bytes=10_000, progress=lambda a, b: seen.append((a, b)))
    assert store.get_data("abc") == data
    assert len(seen) == 26 and seen[-1] == (len(data), len(data))
    meta = json.loads(store._r.get(store.keys.data_meta("abc")))
    assert meta == {"chunks": 26, "bytes": len(data)}


def test_delete_job_removes_every_key(store: JobStore) -> None:
    job = _job(store)
    store.record_trial(
        job,
        TrialRow(number=0, family="f", state="complete", score=1),
        oof=b"z",
        library_size=3,
    )
    store.log(job, "hello")
    store.delete_job(job)
    assert list(store._r.scan_iter(match=f"{store.keys.prefix}:job:{job}*")) == []
    assert job not in store.job_ids()


class TestJobStore(StoreContract):
    """The store contract on the Redis store."""


def test_reader_offers_no_writes(redis_url: str, prefix: str) -> None:
    reader = JobReader(connect(redis_url), Keys(prefix))
    public = {n for n in dir(reader) if not n.startswith("_")}
    assert public == {"job", "get_data", "oof", "library_members"}


def test_trial_rows_and_the_result_read_back_as_their_records(store: JobStore) -> None:
    job = _job(store)
    row = TrialRow(number=4, family="single", state="complete", score=0.8, fold_scores=[0.8])
    store.record_trial(job, row, oof=b"o", library_size=1)
    assert [TrialRow.load(r) for r in store.trial_rows(job)] == [row]
    assert [TrialRow.load(r) for r in store.board(job)] == [row]
    # the first search slice writes the leakage findings; finalize's commit must keep them
    store.set_extra(job, "leakage", {"findings": []})
    store.transition(job, JobState.RUNNING)
    store.transition(job, JobState.FINALIZING)
    final = FinalResult(
        best=Winner(id="t4", kind="trial", family="single", score=0.8), trial_optimism=0.0
    )
    assert store.commit_final(job, "0", artifacts={}, extras=final.dump(), state=JobState.FINISHED)
    read = FinalResult.load(store.extras(job))
    assert read.best == final.best and read.leakage == {"findings": []}
