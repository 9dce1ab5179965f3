"""The model is due at the deadline; the explanations follow as their own task.

Real Redis, real worker processes. Explanation parts are slowed on cue (``explain_sleep`` in
``TUTTI_FAULT_INJECT``) so the pending window and a part's time limit can be observed.
Timing margins are generous; the strict figures live in ``benchmarks/deadline.py``.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from tuttiml.service.client import Client

from tests.conftest import ROOT, start_workers

pytestmark = pytest.mark.integration
FAST = {"TUTTI_LEASE_SECONDS": "3", "TUTTI_SHARD_SECONDS": "10"}


def _frame() -> pd.DataFrame:
    return load_breast_cancer(as_frame=True).frame.rename(columns={"target": "benign"})


def _submit(client: Client, **spec: Any) -> Any:
    base = {
        "target": "benign",
        "max_trials": 6,
        "families": ["boosting", "single"],
        "parallelism": 1,
        "seed": 3,
        "wall_seconds": 300,
        "trial_timeout": 60,
    }
    return client.submit(_frame(), **{**base, **spec})


def _env(explain_sleep: dict[str, float]) -> dict[str, str]:
    return {**FAST, "TUTTI_FAULT_INJECT": json.dumps({"explain_sleep": explain_sleep})}


def _until(cond: Any, timeout: float, every: float = 0.1) -> Any:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        got = cond()
        if got:
            return got
        time.sleep(every)
    raise AssertionError(f"condition not met within {timeout} s")


#: The report's bias/variance section when it did not run: a "Not run" note, never a plot.
BV_NOT_RUN = (
    '<section id="bias-variance"><h2>Bias and variance of the top candidates</h2>'
    '<p class="notrun"><b>Not run:</b> '
)


def _cli_status(redis_url: str, prefix: str, job_id: str) -> str:
    cmd = [sys.executable, "-m", "tuttiml.service.cli", "--redis-url", redis_url]
    cmd += ["--prefix", prefix, "status", job_id]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run(cmd, capture_output=True, text=True, env=env, check=True).stdout


def test_model_is_readable_while_explanations_are_pending_then_they_finish(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    # the ensemble diagnostics wait 4 s before they start (the pending window); bias/variance
    # sleeps past its share of the 120 s budget, so its hard time limit stops it: it must
    # show as not run
    job = _submit(client, explain_seconds=120)
    env = _env({"ensembles": 4, "bias_variance": 600})
    workers = start_workers(redis_url, prefix, 1, env=env, log=tmp_path / "w.log")
    try:
        _until(lambda: job.state.value in ("finished", "failed"), 300)
        st = job.status()
        assert st["state"] == "finished", (st, job.logs()[-20:])
        assert st["explanations"] in ("pending", "running"), st
        assert set(st["explain_parts"].values()) == {"pending"}
        model = job.best_pipeline()  # committed and readable while explanations are pending
        rows = _frame().drop(columns="benign").head(20)
        assert model.predict(rows).shape == (20,)
        early = job.report(tmp_path / "early.html").read_text()
        assert "Which checks ran" in early and "pending" in early
        assert BV_NOT_RUN + "pending: computed after the model is committed" in early

        done = job.wait(explanations=True, timeout=300)
    finally:
        workers.wait(timeout=300)
    rec = job.record()
    assert done["explanations"] == "done", (done, job.logs()[-20:])
    parts = done["explain_parts"]
    assert parts["leakage"] == "done", parts
    assert parts["bias_variance"].startswith("not run: stopped at its time limit"), parts
    # within their own budget after the commit (120 s), with a generous margin for a busy box
    assert rec["explained_at"] - rec["finalized_at"] < 120 + 60
    board = job.leaderboard()
    # significance gets about 40 s: done with a comparison, or (a very busy box) not run
    if parts["significance"] == "done":
        assert "p_value" in board.columns
    else:
        assert parts["significance"].startswith("not run: "), parts
        assert "p_value" not in board.columns
    assert "bias" not in board.columns
    html = job.report(tmp_path / "report.html").read_text()
    assert "not run: stopped at its time limit" in html
    assert BV_NOT_RUN + "stopped at its time limit" in html  # never shown as passed
    out = _cli_status(redis_url, prefix, job.id)
    assert "done (1 not run)" in out and "bias_variance: not run" in out, out


def test_skipped_explanations_show_as_not_run(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    job = _submit(client, explain_seconds=0, max_trials=4)
    workers = start_workers(redis_url, prefix, 1, env=FAST, log=tmp_path / "w.log")
    try:
        st = job.wait(explanations=True, timeout=300)
    finally:
        workers.wait(timeout=300)
    assert st["state"] == "finished" and st["explanations"] == "done", st
    # no fits: the diagnostics from stored predictions run, and the leakage checks ran before
    # the search; every part that fits models is recorded as not run, with the reason
    parts = st["explain_parts"]
    assert parts["ensembles"] == "done" and parts["leakage"] == "done", parts
    skipped = {k: v for k, v in parts.items() if k not in ("ensembles", "leakage")}
    assert set(skipped.values()) == {"not run: explain_seconds is 0"}, parts
    html = job.report(tmp_path / "report.html").read_text()
    assert "not run: explain_seconds is 0" in html
    assert BV_NOT_RUN + "explain_seconds is 0" in html
    out = _cli_status(redis_url, prefix, job.id)
    assert "significance: not run: explain_seconds is 0" in out, out


def test_explanations_lost_with_their_worker_are_run_again(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    job = _submit(client, explain_seconds=60)
    env = _env({"ensembles": 8})
    first = start_workers(redis_url, prefix, 1, env=env, log=tmp_path / "w1.log")
    try:
        _until(lambda: job.status()["explanations"] == "running", 300)
        os.killpg(first.pid, signal.SIGKILL)  # the whole worker tree, mid-explanation
    finally:
        first.wait(timeout=30)
    assert job.status()["explanations"] == "running"  # nobody is working on them now
    second = start_workers(redis_url, prefix, 1, env=FAST, log=tmp_path / "w2.log")
    try:
        st = job.wait(explanations=True, timeout=300)
    finally:
        second.wait(timeout=300)
    assert st["explanations"] == "done", (st, job.logs()[-20:])
    assert any("sweep: re-enqueued the explanations" in line for line in job.logs())
    rec = job.record()
    assert rec["explain_attempts:0"] == "2"
    assert st["explain_parts"]["ensembles"] == "done"  # the part that was cut by the kill
