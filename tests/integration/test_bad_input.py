"""Bad input through the public faces (Client, Job, the tutti command) against a real Redis.

Complements tests/unit/test_data.py and tests/unit/test_spec.py (which call ``prepare`` and
``parse_spec`` directly): here every refusal goes through ``client.submit`` / the CLI, and
each case also checks that nothing was stored under the prefix and nothing was enqueued.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import redis
import rq
from rq.job import Job as RQJob
from sklearn.datasets import load_breast_cancer
from tuttiml.service.client import Client, Job
from tuttiml.service.errors import (
    ArtifactError,
    InvalidDataError,
    InvalidSpecError,
    JobNotFoundError,
)
from tuttiml.service.spec import SearchSpec

from tests.conftest import ROOT, start_workers

pytestmark = pytest.mark.integration

TARGET = "benign"


def _table() -> pd.DataFrame:
    # Source: scikit-learn's bundled Wisconsin breast cancer data (no download): binary target.
    return load_breast_cancer(as_frame=True).frame.rename(columns={"target": TARGET})


def _with_infinities() -> pd.DataFrame:
    df = _table()
    df.loc[3, "mean radius"] = np.inf
    df.loc[7, "worst area"] = -np.inf
    return df


def _keys(r: redis.Redis, prefix: str) -> set[bytes]:
    return set(r.scan_iter(match=f"{prefix}:*", count=1000))


def _assert_nothing_stored(client: Client, prefix: str) -> None:
    assert _keys(client.redis, prefix) == set()
    assert client.queue.search.count == 0 and client.queue.final.count == 0
    assert not client.redis.exists(client.queue.search.key, client.queue.final.key)


Table = Callable[[Path], Any]


def _df(_tmp: Path) -> pd.DataFrame:
    return _table()


# id, table(tmp_path), spec (positional), fields, env, error class, field pattern, fix pattern
# fmt: off
SUBMIT_CASES: list[Any] = [
    ("max_trials not a number", _df, None, {"max_trials": "many"}, {}, InvalidSpecError,
     r"max_trials", r"should be a valid integer.*\(got 'many'\)"),
    ("folds a fraction", _df, None, {"folds": 1.5}, {}, InvalidSpecError,
     r"folds", r"valid integer, got a number with a fractional part \(got 1\.5\)"),
    pytest.param("families a string", _df, None, {"families": "boosting"}, {}, InvalidSpecError,
                 r"families", r"list", id="families a string"),
    ("holdout text", _df, None, {"holdout": "half"}, {}, InvalidSpecError,
     r"holdout", r"should be a valid number"),
    ("target not a string", _df, None, {"target": 5}, {}, InvalidSpecError,
     r"target", r"should be a valid string \(got 5\)"),
    ("group_column a list", _df, None, {"group_column": ["mean radius"]}, {}, InvalidSpecError,
     r"group_column", r"should be a valid string"),
    ("deadline unparsable", _df, None, {"deadline": "tomorrow"}, {}, InvalidSpecError,
     r"deadline", r"should be a valid datetime"),
    ("task in capitals", _df, None, {"task": "Binary"}, {}, InvalidSpecError,
     r"task", r"'auto', 'binary', 'multiclass' or 'regression' \(got 'Binary'\)"),
    ("name too long", _df, None, {"name": "n" * 201}, {}, InvalidSpecError,
     r"name", r"at most 200 characters"),
    ("unknown spec key (typo)", _df, None, {"max_trails": 3}, {}, InvalidSpecError,
     r"max_trails: not a spec field", r"did you mean max_trials\?"),
    ("spec of the wrong type", _df, 42, {}, {}, InvalidSpecError,
     r"spec: expected a mapping .* got int", r"pass a dict, JSON text or a SearchSpec"),
    ("JSON spec with a bad value", _df, '{"target": "benign", "folds": "five"}', {}, {},
     InvalidSpecError, r"folds", r"should be a valid integer"),
    ("SearchSpec overridden badly", _df, SearchSpec(target=TARGET), {"folds": 1}, {},
     InvalidSpecError, r"folds", r"greater than or equal to 2"),
    ("metric of another task", _df, None, {"metric": "rmse"}, {}, InvalidSpecError,
     r"metric: 'rmse' does not fit the binary target 'benign'", r"choose one of roc_auc"),
    ("infinities in numeric columns", lambda _tmp: _with_infinities(), None, {}, {},
     InvalidDataError, r"column 'mean radius'(.|\n)*column 'worst area'",
     r"replace them with missing values"),
    ("upload above the size cap", _df, None, {}, {"TUTTI_MAX_UPLOAD_BYTES": "1000"},
     InvalidDataError, r"data: the encoded table is .* over the upload limit of 0\.00 MB",
     r"raise TUTTI_MAX_UPLOAD_BYTES or sample rows"),
    ("CSV path that does not exist", lambda tmp: tmp / "missing.csv", None, {}, {},
     InvalidDataError, r"data: no file at '.*missing\.csv'", r"check the path"),
    pytest.param("deadline in the past", _df, None, {"deadline": "2001-01-01T00:00:00Z"}, {},
                 InvalidSpecError, r"deadline", r"future",
                 id="deadline in the past"),
    pytest.param("max_trials a boolean", _df, None, {"max_trials": True}, {}, InvalidSpecError,
                 r"max_trials", r"number", id="max_trials a boolean"),
]
# fmt: on


def _case_id(case: Any) -> str:
    return case[0] if isinstance(case, tuple) else str(case.id)


@pytest.mark.parametrize(
    ("case", "table", "spec", "fields", "env", "error", "where", "fix"),
    SUBMIT_CASES,
    ids=[_case_id(c) for c in SUBMIT_CASES],
)
def test_bad_submission_is_refused_before_anything_is_stored(
    redis_url: str,
    prefix: str,
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    case: str,
    table: Table,
    spec: Any,
    fields: dict[str, Any],
    env: dict[str, str],
    error: type[Exception],
    where: str,
    fix: str,
) -> None:
    for name, value in env.items():
        monkeypatch.setenv(name, value)
    client = Client(url=redis_url, prefix=prefix)  # settings are read (frozen) here
    try:
        if "TUTTI_MAX_UPLOAD_BYTES" in env:
            assert client.settings.max_upload_bytes == int(env["TUTTI_MAX_UPLOAD_BYTES"])
        call_fields = {"target": TARGET, **fields} if spec is None else fields
        with pytest.raises(error) as info:
            client.submit(table(tmp_path), spec, **call_fields)
        assert type(info.value) is error, f"{case}: {type(info.value).__name__}: {info.value}"
        _assert_nothing_stored(client, prefix)
        assert client.jobs() == []
        message = str(info.value)
        assert "Traceback" not in message
        assert re.search(where, message), f"{case}: field {where!r} not in {message!r}"
        assert re.search(fix, message), f"{case}: fix {fix!r} not in {message!r}"
    finally:
        client.close()


# --------------------------------------------------------------------------------------------
# Looking up jobs that are not there, or not finished


@pytest.mark.parametrize(
    ("job_id", "where", "fix"),
    [
        ("nope", r"job 'nope' not found in this store", r"run `tutti status` to list jobs"),
        ("a:b", r"job id 'a:b' is not valid", r"ids use only letters, digits, '-' and '_'"),
        ("*", r"job id '\*' is not valid", r"run `tutti status`"),
        ("x" * 65, r"job id 'x+' is not valid", r"ids use only letters"),
    ],
    ids=["unknown", "colon", "wildcard", "too long"],
)
def test_unknown_or_invalid_job_id(client: Client, prefix: str, job_id: str, where: str, fix: str):  # type: ignore[no-untyped-def]
    with pytest.raises(JobNotFoundError, match=where) as info:
        client.job(job_id)
    assert re.search(fix, str(info.value)), str(info.value)
    assert isinstance(info.value, KeyError) and not str(info.value).startswith('"')
    # a handle built by hand fails the same way on first use, and reading creates nothing
    with pytest.raises(JobNotFoundError):
        Job(client, job_id).best_pipeline()
    _assert_nothing_stored(client, prefix)


def test_best_pipeline_before_the_job_finished(
    client: Client, prefix: str, tmp_path: Path
) -> None:
    job = client.submit(_table(), target=TARGET, families=["single"], max_trials=2, parallelism=1)
    before = _keys(client.redis, prefix)
    queued = client.queue.search.count
    for call in (
        job.best_pipeline,
        job.artifact_meta,
        lambda: job.export(tmp_path / "never.skops"),
    ):
        with pytest.raises(
            ArtifactError, match=r"has no fitted pipeline yet \(state queued\)"
        ) as info:
            call()
        assert "wait for it to finish (job.wait())" in str(info.value)
        assert info.value.field == "artifact"
    assert not (tmp_path / "never.skops").exists()
    assert _keys(client.redis, prefix) == before and client.queue.search.count == queued
    assert job.leaderboard().empty and job.status()["state"] == "queued"


# --------------------------------------------------------------------------------------------
# The tutti command


def _cli(args: list[str], redis_url: str, prefix: str, cwd: Path) -> subprocess.CompletedProcess:  # type: ignore[type-arg]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run(
        [
            sys.executable,
            "-m",
            "tuttiml.service.cli",
            "--redis-url",
            redis_url,
            "--prefix",
            prefix,
            *args,
        ],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )


@pytest.mark.parametrize(
    ("args", "where", "fix"),
    [
        (["status", "NOPE"], r"job 'NOPE' not found", r"run `tutti status` to list jobs"),
        (["status", "a:b"], r"job id 'a:b' is not valid", r"ids use only letters"),
        (["leaderboard", "NOPE"], r"job 'NOPE' not found", r"run `tutti status`"),
        (["export", "NOPE", "-o", "m.skops"], r"job 'NOPE' not found", r"run `tutti status`"),
        (
            ["submit", "missing.csv", "--target", "y"],
            r"data: no file at 'missing\.csv'",
            r"check the path \(relative paths start from",
        ),
        (
            ["predict", "none.skops", "rows.csv"],
            r"model file none\.skops does not exist",
            r"create it with `tutti export JOB -o none\.skops`",
        ),
        (
            ["submit", "rows.csv", "--target", "benign", "--set", "max_trials=many"],
            r"max_trials",
            r"should be a valid integer",
        ),
    ],
    ids=["status", "status colon", "leaderboard", "export", "submit", "predict", "submit --set"],
)
def test_cli_errors_are_one_line_exit_2_no_traceback(
    redis_url: str, prefix: str, tmp_path: Path, args: list[str], where: str, fix: str
) -> None:
    _table().head(40).to_csv(tmp_path / "rows.csv", index=False)
    res = _cli(args, redis_url, prefix, tmp_path)
    assert res.returncode == 2, (res.stdout, res.stderr)
    assert "Traceback" not in res.stderr and res.stdout == ""
    lines = res.stderr.strip().splitlines()
    assert lines[0].startswith("tutti: error: "), res.stderr
    if lines[0] == "tutti: error: invalid search spec:":
        # spec errors list every problem, one indented line each
        assert len(lines) >= 2 and all(line.startswith("  ") for line in lines[1:]), lines
    else:
        assert len(lines) == 1, lines
    text = "\n".join(lines)
    assert re.search(where, text) and re.search(fix, text), text
    assert not (tmp_path / "m.skops").exists()
    probe = Client(url=redis_url, prefix=prefix)
    try:
        _assert_nothing_stored(probe, prefix)
    finally:
        probe.close()


# --------------------------------------------------------------------------------------------
# End to end: a running worker, bad input around it, then bad rows at predict time


def test_bad_input_never_reaches_or_crashes_a_running_worker(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    frame = _table()
    job = client.submit(
        frame,
        target=TARGET,
        families=["single"],
        max_trials=2,
        parallelism=1,
        folds=3,
        library_size=0,
        trial_timeout=120,
    )
    before = _keys(client.redis, prefix)
    assert client.queue.search.count == 1
    bad_calls: list[tuple[dict[str, Any], type[Exception]]] = [
        ({"target": TARGET, "folds": "3 please"}, InvalidSpecError),
        ({"target": "nope"}, InvalidDataError),
        ({"target": TARGET, "metric": "mae"}, InvalidSpecError),
    ]
    for fields, error in bad_calls:
        with pytest.raises(error):
            client.submit(frame, **fields)
    assert _keys(client.redis, prefix) == before and client.queue.search.count == 1

    # malformed arguments to an allowed task, as a buggy or hostile client could enqueue them
    conn = redis.Redis.from_url(redis_url)
    forged_queue = rq.Queue(client.keys.queue_name, connection=conn, serializer="json")
    forged = [
        forged_queue.enqueue("tuttiml.workers.tasks.run_shard", "a:b", 0),
        forged_queue.enqueue("tuttiml.workers.tasks.run_shard", job.id, "zero"),
        forged_queue.enqueue("tuttiml.workers.tasks.finalize_job", "../../etc"),
    ]
    log = tmp_path / "workers.log"
    proc = start_workers(redis_url, prefix, 1, log=log, env={"TUTTI_SHARD_SECONDS": "8"})
    try:
        for fields, error in bad_calls:  # refused while the worker runs, too
            with pytest.raises(error):
                client.submit(frame, **fields)
        proc.wait(timeout=180)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, 9)
            proc.wait(10)
    text = log.read_text(errors="replace")
    assert proc.returncode == 0, text[-3000:]
    status = job.status()
    assert status["state"] == "finished", (status, text[-3000:], job.logs()[-10:])
    assert [j.id for j in client.jobs()] == [job.id]
    assert len(list(client.redis.scan_iter(match=f"{prefix}:data:*:meta"))) == 1
    assert not list(client.redis.scan_iter(match=f"{prefix}:job:a*"))
    for rq_job in forged:
        fetched = RQJob.fetch(rq_job.id, connection=conn, serializer="json")
        assert fetched.get_status() == "failed", rq_job.id
    assert client.queue.search.count == 0 and client.queue.final.count == 0

    # predict on rows with a missing column: a clear error naming it; extra columns ignored
    model = job.best_pipeline()
    rows = frame.drop(columns=TARGET).head(30)
    expected = model.predict(rows)
    with pytest.raises(ValueError, match=r"missing from the input: 'mean radius'") as info:
        model.predict(rows.drop(columns=["mean radius"]))
    assert "pass the same columns as in training" in str(info.value)
    with pytest.raises(ValueError, match=r"'mean radius'"):
        model.predict_proba(rows.drop(columns=["mean radius"]))
    extra = rows.assign(unseen=1.0, note="x")[["note", *rows.columns[::-1], "unseen"]]
    np.testing.assert_array_equal(model.predict(extra), expected)
    np.testing.assert_allclose(model.predict_proba(extra), model.predict_proba(rows))


def test_a_shard_of_a_deleted_job_leaves_nothing_behind(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    job = client.submit(
        _table(), target=TARGET, families=["single"], max_trials=2, parallelism=1, folds=3,
        library_size=0, trial_timeout=120,
    )  # fmt: skip
    conn = redis.Redis.from_url(redis_url)
    rq.Queue(client.keys.queue_name, connection=conn, serializer="json").enqueue(
        "tuttiml.workers.tasks.run_shard", "ghost", 0
    )
    log = tmp_path / "workers.log"
    proc = start_workers(redis_url, prefix, 1, log=log, env={"TUTTI_SHARD_SECONDS": "8"})
    try:
        proc.wait(timeout=180)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, 9)
            proc.wait(10)
    assert proc.returncode == 0
    assert job.status()["state"] == "finished"
    assert not list(client.redis.scan_iter(match=f"{prefix}:job:ghost*"))
    with pytest.raises(JobNotFoundError):
        client.job("ghost")
