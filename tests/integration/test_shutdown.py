"""SIGTERM ends a worker in bounded time whatever state Redis is in, and loses no trial.

Issue 14 saw a busy worker hang 26 minutes after SIGTERM once Redis was stopped (its main thread
blocked, its trial process waiting on the pipe) and idle workers retry the missing server every
2 s for an hour. Each test starts its own Redis so it can stop it.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import psutil
import pytest
from optuna.trial import TrialState
from tuttiml.service.client import Client

from tests.conftest import QUICK_EXPLAIN, ROOT, RedisProcess, start_workers
from tests.integration.test_faults import _faults, _study_states, _submit, _tree, wait_until

pytestmark = pytest.mark.integration
GRACE = 4.0  # TUTTI_STOP_GRACE_SECONDS in these tests


def _exit_seconds(proc: subprocess.Popen[bytes], pids: list[int], limit: float) -> float:
    """Seconds until the launcher and every process of its tree are gone (killed after limit)."""
    t0 = time.monotonic()
    try:
        proc.wait(timeout=limit)
        wait_until(lambda: not any(psutil.pid_exists(p) and _live(p) for p in pids), 10)
    except (subprocess.TimeoutExpired, AssertionError):
        pass
    took = time.monotonic() - t0
    for p in pids:  # whatever is left of the tree, so a failing test leaves nothing behind
        if _live(p):
            os.kill(p, signal.SIGKILL)
    return took


def _live(pid: int) -> bool:
    try:
        return psutil.Process(pid).status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


def _busy(client: Client, proc: subprocess.Popen[bytes], trial: int | None = None) -> Any:
    tree = _tree(proc.pid)
    for w in client.workers():
        running = w["pid"] in tree and w.get("trial") is not None
        if running and (trial is None or int(w["trial"]) == trial):
            return w
    return None


def test_sigterm_then_redis_stopped_ends_idle_and_busy_workers_and_loses_no_trial(
    tmp_path: Path,
) -> None:
    server = RedisProcess(tmp_path / "redis")
    server.dir.mkdir()
    server.start()
    prefix = "shut"
    client = Client(url=server.url, prefix=prefix)
    env = {
        # trial 1 sleeps 2 s before its folds: SIGTERM lands while it still has folds to go
        **_faults({"sleep": {"1": 2}, "sleep_fold": 0.5}),
        "TUTTI_STOP_GRACE_SECONDS": str(GRACE),
    }
    job = _submit(client, max_trials=6, parallelism=1, seed=21, families=["single"])
    busy = start_workers(server.url, prefix, 1, burst=False, env=env, log=tmp_path / "b.log")
    # the idle group serves another key prefix, where no job is: idle for sure
    idle = start_workers(server.url, "idle", 2, burst=False, env=env, log=tmp_path / "i.log")
    try:
        wait_until(lambda: len(Client(url=server.url, prefix="idle").workers()) == 2, 120)
        wait_until(lambda: _busy(client, busy, trial=1), 120)
        trees = {w: _tree(w.pid) for w in (busy, idle)}
        for w in (busy, idle):
            os.kill(w.pid, signal.SIGTERM)
        server.kill()  # as a shutdown script does, right after the SIGTERM
        idle_took = _exit_seconds(idle, trees[idle], 60)
        busy_took = _exit_seconds(busy, trees[busy], 120)
        print(f"FIGURE sigterm_no_redis_exit_seconds idle {idle_took:.1f} busy {busy_took:.1f}")
        # idle: a few seconds; busy: the current fold (0.5 s here) plus the grace, plus margins
        # for a loaded machine (common practice: generous timing bounds in tests)
        assert idle_took < 15, (tmp_path / "i.log").read_text()[-3000:]
        assert busy_took < 0.5 + GRACE + 25, (tmp_path / "b.log").read_text()[-3000:]
        # nothing lost: with Redis back, a new worker reaps the interrupted trial and retries it
        server.start()
        w = start_workers(server.url, prefix, 1, env=env, log=tmp_path / "w.log")
        try:
            status = job.wait(timeout=300)
        finally:
            w.wait(timeout=120)
        assert status["state"] == "finished", job.logs()[-20:]
        rows = {r["number"]: r for r in client.store.trial_rows(job.id)}
        n = 1
        # Redis was gone, so its worker could not fail it: the reaper did, and it was retried
        assert rows[n]["state"] == "failed" and rows[n].get("reaped"), rows[n]
        assert any(r.get("retry_of") == n for r in rows.values())
        assert sum(r["state"] in ("complete", "pruned") for r in rows.values()) == 6
        assert TrialState.RUNNING not in _study_states(client, job.id)
    finally:
        for w in (busy, idle):
            if w.poll() is None:
                w.kill()
        server.kill()


def test_sigterm_fails_a_long_trial_after_the_grace_and_retries_it(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    env = {**_faults({"sleep": {"1": 300}}), "TUTTI_STOP_GRACE_SECONDS": str(GRACE)}
    job = _submit(
        client, max_trials=4, parallelism=1, seed=22, families=["single"], trial_timeout=600
    )
    w = start_workers(redis_url, prefix, 1, burst=False, env=env, log=tmp_path / "w.log")
    try:
        wait_until(lambda: _busy(client, w, trial=1), 120)
        tree = _tree(w.pid)
        os.kill(w.pid, signal.SIGTERM)
        took = _exit_seconds(w, tree, 120)
        print(f"FIGURE sigterm_long_trial_exit_seconds {took:.1f}")
        assert took < GRACE + 25, (tmp_path / "w.log").read_text()[-3000:]
        rows = {r["number"]: r for r in client.store.trial_rows(job.id)}
        assert rows[1]["state"] == "failed" and "shut down" in rows[1]["error"], rows.get(1)
        assert not rows[1].get("reaped")  # failed by its own worker, not left to the reaper
        assert TrialState.RUNNING not in _study_states(client, job.id)
        w2 = start_workers(redis_url, prefix, 1, env=env, log=tmp_path / "w2.log")
        try:
            status = job.wait(timeout=300)
        finally:
            w2.wait(timeout=120)
    finally:
        if w.poll() is None:
            w.kill()
    assert status["state"] == "finished", job.logs()[-20:]
    rows = {r["number"]: r for r in client.store.trial_rows(job.id)}
    again = [r for r in rows.values() if r.get("retry_of") == 1]
    assert len(again) == 1 and again[0]["state"] in ("complete", "pruned")
    assert sum(r["state"] in ("complete", "pruned") for r in rows.values()) == 4


def test_a_named_worker_restarted_after_a_kill_takes_work(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    """RQ keeps a killed worker's registration for minutes; a restart under the same
    ``--name`` used to die at start ("There exists an active worker named ...")."""

    def named(burst: bool, log: str) -> subprocess.Popen[bytes]:
        cmd = [sys.executable, "-m", "tuttiml.workers", "--processes", "1", "--name", "box"]
        cmd += ["--redis-url", redis_url, "--prefix", prefix] + (["--burst"] if burst else [])
        env = {**os.environ, "PYTHONPATH": str(ROOT), **QUICK_EXPLAIN, **_faults({})}
        out = open(tmp_path / log, "ab")  # noqa: SIM115
        return subprocess.Popen(
            cmd, env=env, stdout=out, stderr=subprocess.STDOUT, start_new_session=True
        )

    first = named(False, "w1.log")
    try:
        wait_until(lambda: len(client.workers()) == 1, 120)
        os.killpg(first.pid, signal.SIGKILL)  # a machine loss: no deregistration
        first.wait(10)
    finally:
        if first.poll() is None:
            first.kill()
    job = _submit(client, max_trials=2, parallelism=1, seed=23, families=["single"])
    again = named(True, "w2.log")
    try:
        status = job.wait(timeout=180)
    finally:
        if again.poll() is None:
            again.kill()
    assert status["state"] == "finished", (tmp_path / "w2.log").read_text()[-2000:]


def test_the_launcher_restarts_a_worker_process_that_exited(
    client: Client, redis_url: str, prefix: str, tmp_path: Path
) -> None:
    """A worker process gives up after a long Redis outage (or is killed by the OOM killer);
    without --burst its launcher starts it again instead of running one process short."""
    w = start_workers(redis_url, prefix, 1, burst=False, env=_faults({}), log=tmp_path / "w.log")
    try:
        first = wait_until(lambda: client.workers(), 120)[0]["pid"]
        os.kill(first, signal.SIGKILL)
        again = wait_until(
            lambda: [x for x in client.workers() if x["pid"] != first and _live(x["pid"])], 120
        )
        assert again[0]["pid"] in _tree(w.pid)
        tree = _tree(w.pid)
        os.kill(w.pid, signal.SIGTERM)
        assert _exit_seconds(w, tree, 60) < 30  # and SIGTERM still ends the group
    finally:
        if w.poll() is None:
            w.kill()
