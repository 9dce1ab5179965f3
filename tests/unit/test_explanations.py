"""The explanations record and its fenced commit: budget, per-part status, once per epoch."""

from __future__ import annotations

import json

import pytest
from tuttiml.service.connection import connect
from tuttiml.service.explanations import (
    PARTS,
    ExplainState,
    default_budget,
    not_run_record,
    part_status,
    pending_record,
    ran,
)
from tuttiml.service.keys import Keys
from tuttiml.service.spec import SearchSpec
from tuttiml.service.store import JobState, JobStore


@pytest.fixture
def store(redis_url: str, prefix: str) -> JobStore:
    return JobStore(connect(redis_url), Keys(prefix))


def _committed(store: JobStore, job_id: str = "j1", budget: float = 30.0) -> str:
    store.create_job(job_id, {"spec": "{}", "task": "binary", "schema": {}}, shards=1)
    store.transition(job_id, JobState.RUNNING)
    store.transition(job_id, JobState.FINALIZING)
    assert store.commit_final(
        job_id,
        "0",
        artifacts={"best": (b"A", {"sha256": "a"})},
        extras={"explain": pending_record("0", budget)},
        state=JobState.FINISHED,
        fields={"explain_state": "pending", "explain_budget": repr(budget)},
    )
    return job_id


def _done(epoch: str = "0") -> dict[str, object]:
    doc = pending_record(epoch, 30.0)
    doc["state"] = ExplainState.DONE.value
    doc["parts"] = {name: {"status": "done"} for name in PARTS}
    doc["leakage"] = []
    return doc


@pytest.mark.parametrize(
    ("searched", "explicit", "expected"),
    [
        (400.0, None, 100.0),  # a quarter of the search time
        (40.0, None, 30.0),  # at least the floor
        (8000.0, None, 900.0),  # at most the cap
        (400.0, 7.5, 7.5),  # the spec's value as given
        (400.0, 0.0, 0.0),  # 0: nothing that fits models
    ],
)
def test_budget_is_a_quarter_of_the_search_within_bounds_unless_the_spec_says(
    searched: float, explicit: float | None, expected: float
) -> None:
    got = default_budget(searched, explicit=explicit, min_seconds=30.0, max_seconds=900.0)
    assert got == pytest.approx(expected)


def test_spec_field_is_checked_and_optional() -> None:
    assert SearchSpec(target="y").explain_seconds is None
    assert SearchSpec(target="y", explain_seconds=0).explain_seconds == 0.0
    with pytest.raises(ValueError, match="explain_seconds"):
        SearchSpec(target="y", explain_seconds=-1)
    with pytest.raises(ValueError, match="explain_seconds"):
        SearchSpec(target="y", explain_seconds=True)


def test_a_part_without_a_result_is_never_shown_as_passed() -> None:
    pending = pending_record("0", 30.0)
    assert set(part_status(pending).values()) == {"pending"}
    assert not ran(pending, "leakage")
    doc = _done()
    del doc["parts"]["leakage"]  # type: ignore[attr-defined]
    doc["parts"]["significance"] = {"status": "not run", "reason": "stopped at 9 s"}  # type: ignore[index]
    status = part_status(doc)
    assert status["leakage"] == "not run: no result recorded"
    assert status["significance"] == "not run: stopped at 9 s"
    assert status["bias_variance"] == "done"
    assert not ran(doc, "leakage") and not ran(doc, "significance") and ran(doc, "pareto")
    gave_up = not_run_record("0", 30.0, "gave up", state=ExplainState.FAILED)
    assert all(v == "not run: gave up" for v in part_status(gave_up).values())


def test_records_from_before_the_task_read_by_their_results() -> None:
    old = {"honest": {}, "leakage": [], "significance": [], "skipped": ["significance"]}
    assert part_status(old) == {}
    assert ran(old, "leakage") and not ran(old, "significance") and not ran(old, "pareto")


def test_explanations_commit_once_per_committed_epoch(store: JobStore) -> None:
    job = _committed(store)
    assert store.pending_explanations(job) == pytest.approx(30.0)
    assert store.explain_started(job, "0") == 1
    assert store.job(job)["explain_state"] == "running"
    assert store.explain_started(job, "1") == 0  # not the committed epoch: nothing written
    assert store.commit_explanations(job, "0", explain=_done(), artifacts={}) is True
    again = {**_done(), "leakage": [{"column": "x"}]}
    assert store.commit_explanations(job, "0", explain=again, artifacts={}) is False
    assert store.extras(job)["explain"]["leakage"] == []  # the duplicate changed nothing
    rec = store.job(job)
    assert (rec["explain_state"], rec["explain_epoch"]) == ("done", "0")
    assert store.pending_explanations(job) is None
    assert store.explain_started(job, "0") == 0  # already explained
    assert store.artifact_names(job) == ["best"]


def test_stale_explanations_after_extend_change_nothing(store: JobStore) -> None:
    job = _committed(store)
    store.explain_started(job, "0")
    store.reopen(job, json.dumps({"target": "y"}), shards=1)  # epoch 1 starts
    assert store.pending_explanations(job) is None  # nothing to explain until epoch 1 commits
    late = _done()
    assert store.commit_explanations(job, "0", explain=late, artifacts={"x": (b"X", {})}) is False
    assert store.extras(job)["explain"]["state"] == "pending"
    assert "x" not in store.artifact_names(job)


@pytest.mark.parametrize(("left", "expected"), [(30.0, True), (15.0, False)])
def test_a_late_finalize_goes_straight_to_the_refit(left: float, expected: bool) -> None:
    """The library step (about LIBRARY_SECONDS = 10 s) runs only when the time left also
    covers the best trial's refit, doubled: 5 folds, 16 fold-fit seconds → 4 s → 8 s, so it
    needs 18 s: 30 s left is enough, 15 s is not (the model is due at the deadline)."""
    import time

    from tuttiml.service.records import TrialRow
    from tuttiml.workers.finalize import LIBRARY_SECONDS, Finalizer

    assert LIBRARY_SECONDS == 10.0
    fin = Finalizer.__new__(Finalizer)
    fin.spec = SearchSpec(target="y", folds=5, wall_seconds=100)
    fin.record = {"started_at": time.time() - 100 + left}
    fin.job_id = "j"
    fin.log = lambda line: None  # type: ignore[method-assign]
    board = [TrialRow(number=0, state="complete", family="single", score=0.9, fit_seconds=16.0)]
    assert fin.library_in_time(board) is expected


def test_the_report_lists_which_checks_ran_and_why_others_did_not() -> None:
    from tuttiml.service.report import render_report

    doc = _done()
    doc["parts"]["leakage"] = {"status": "not run", "reason": "stopped at <9 s>"}  # type: ignore[index]
    rows = [{"part": k, "what": PARTS[k], "status": v} for k, v in part_status(doc).items()]
    data = {
        "job": {"id": "j-1"},
        "metric": "roc_auc",
        "explanations": {"state": "done", "budget_seconds": 30.0, "seconds": 12.0, "parts": rows},
    }
    html = render_report(data)
    assert "Which checks ran" in html and "budget 30 s" in html
    assert "not run: stopped at &lt;9 s&gt;" in html  # escaped, with its reason
    assert html.count("<td>done</td>") == len(PARTS) - 1
    pending = {**data, "explanations": {"state": "pending", "parts": []}}
    assert "made before they finished" in render_report(pending)
    assert "Which checks ran" not in render_report({"job": {"id": "j-1"}, "metric": "roc_auc"})
