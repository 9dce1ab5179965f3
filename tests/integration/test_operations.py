"""Operations around jobs: doctor, purge, the sweep that re-enqueues a dead finalize."""

from __future__ import annotations

import errno
import os
import subprocess
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import redis
from optuna.trial import TrialState
from sklearn.datasets import load_iris
from tuttiml.service.config import Settings
from tuttiml.service.doctor import PROBLEM, diagnose
from tuttiml.service.store import JobState
from tuttiml.workers.context import WorkerContext
from tuttiml.workers.search import MAX_RETRIES, Shard, open_study
from tuttiml.workers.sweep import sweep

from tests.conftest import RedisProcess

pytestmark = pytest.mark.integration


def test_doctor_accepts_a_safe_server_and_names_what_to_change(tmp_path: Path) -> None:
    server = RedisProcess(tmp_path).start()  # AOF + fsync always, noeviction (the default)
    try:
        r = redis.Redis.from_url(server.url)
        assert [f for f in diagnose(r, server.url) if f.level == PROBLEM] == []
        r.config_set("appendonly", "no")
        r.config_set("maxmemory-policy", "allkeys-lru")
        problems = {f.check: f.detail for f in diagnose(r, server.url) if f.level == PROBLEM}
        assert "appendonly yes" in problems["persistence"]
        assert "noeviction" in problems["eviction"]
        # the URL is only parsed here: a server reached over the network without a password
        remote = {
            f.check: f.detail for f in diagnose(r, "redis://10.1.2.3:6379/0") if f.level == PROBLEM
        }
        assert "requirepass" in remote["password"]
    finally:
        server.kill()


def test_doctor_names_a_server_at_its_memory_limit(tmp_path: Path) -> None:
    server = RedisProcess(tmp_path).start()
    try:
        r = redis.Redis.from_url(server.url)
        assert "memory" not in {f.check for f in diagnose(r, server.url)}  # no limit set
        used = int(r.info("memory")["used_memory"])
        r.config_set("maxmemory", str(int(used / 0.95)))  # writes about to be refused
        problems = {f.check: f.detail for f in diagnose(r, server.url) if f.level == PROBLEM}
        assert "raise maxmemory" in problems["memory"]
        r.config_set("maxmemory", str(100 * used))
        assert "memory" not in {f.check for f in diagnose(r, server.url) if f.level == PROBLEM}
    finally:
        server.kill()


@pytest.fixture
def small_disk(tmp_path: Path) -> Iterator[Path]:
    """A 2 MiB tmpfs (root only): a disk that the test can fill under the append-only file."""
    where = tmp_path / "small"
    where.mkdir()
    if os.geteuid() != 0:
        pytest.skip("mounting a small filesystem needs root")
    run = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "size=2m", "tmpfs", str(where)], capture_output=True
    )
    if run.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {run.stderr.decode().strip()}")
    try:
        yield where
    finally:
        subprocess.run(["umount", "-l", str(where)], capture_output=True)


def _fill(path: Path) -> None:
    """Write to ``path`` until its filesystem has no space left."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT)
    try:
        while True:
            os.write(fd, b"x" * 65536)
    except OSError as exc:
        assert exc.errno == errno.ENOSPC, exc
    finally:
        os.close(fd)


def test_doctor_names_a_full_disk_under_the_append_only_file(small_disk: Path) -> None:
    server = RedisProcess(small_disk).start()
    try:
        r = redis.Redis.from_url(server.url)
        # with fsync "always" Redis exits on a failed AOF write; with "everysec" (the other
        # setting the doctor accepts) it keeps serving reads and refuses writes (Redis's
        # documentation of appendfsync, from memory)
        r.config_set("appendfsync", "everysec")
        assert "disk" not in {f.check for f in diagnose(r, server.url)}
        _fill(small_disk / "filler")
        with pytest.raises(redis.ResponseError, match="MISCONF"):
            for i in range(100):
                r.set(f"k{i}", "v" * 1000)
        problems = {f.check: f.detail for f in diagnose(r, server.url) if f.level == PROBLEM}
        assert "free space on the server's disk" in problems["disk"]
        (small_disk / "filler").unlink()
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:  # Redis retries the write about once a second
            if r.info("persistence")["aof_last_write_status"] == "ok":
                break
            time.sleep(0.2)
        assert "disk" not in {f.check for f in diagnose(r, server.url) if f.level == PROBLEM}
        r.set("after", "1")  # writes are accepted again
    finally:
        server.kill()


def test_purge_removes_only_old_final_jobs(client) -> None:  # type: ignore[no-untyped-def]
    frame = load_iris(as_frame=True).frame
    old = client.submit(frame, target="target", max_trials=1)
    recent = client.submit(frame, target="target", max_trials=1)
    queued_old = client.submit(frame, target="target", max_trials=1)
    for job in (old, recent):
        client.store.transition(job.id, JobState.CANCELLED)
    long_ago = time.time() - 40 * 86400
    client.store.set_fields(old.id, created_at=repr(long_ago))
    client.store.set_fields(queued_old.id, created_at=repr(long_ago))
    everything = {old.id, recent.id, queued_old.id}
    assert client.purge(30 * 86400, dry_run=True) == [old.id]  # names it, deletes nothing
    assert {j.id for j in client.jobs()} == everything
    assert client.purge(30 * 86400) == [old.id]
    assert {j.id for j in client.jobs()} == {recent.id, queued_old.id}
    assert list(client.redis.scan_iter(match=f"{client.keys.prefix}:job:{old.id}*")) == []


def test_sweep_re_enqueues_the_finalize_of_a_dead_worker(
    client,
    redis_url: str,  # type: ignore[no-untyped-def]
    prefix: str,
) -> None:
    frame = load_iris(as_frame=True).frame
    job = client.submit(frame, target="target", max_trials=1, parallelism=1)
    client.queue.search.empty()  # its shard ran elsewhere and stopped for good …
    client.store.shard_stopped(job.id)
    client.store.transition(job.id, JobState.RUNNING)
    client.store.transition(job.id, JobState.FINALIZING)  # … and finalize's worker then died
    ctx = WorkerContext.create(
        Settings(redis_url=redis_url, prefix=prefix, lease_seconds=1.0), redis_url
    )
    # the sweep waits two lease periods after a Redis (re)start, as live leases renew
    time.sleep(max(0.0, 2.1 - client.store.server_uptime()))
    assert sweep(ctx) == 0  # first look: only a suspicion
    time.sleep(1.1)
    assert sweep(ctx) == 1  # still nothing running or queued a lease period later
    queued = client.queue.final.get_jobs()
    assert [(q.func_name, q.args) for q in queued] == [
        ("tuttiml.workers.tasks.finalize_job", [job.id])
    ]


def test_jobs_queue_in_submission_order_and_high_priority_jumps_ahead(client) -> None:  # type: ignore[no-untyped-def]
    frame = load_iris(as_frame=True).frame
    first = client.submit(frame, target="target", max_trials=1, parallelism=1)
    second = client.submit(frame, target="target", max_trials=1, parallelism=1)
    urgent = client.submit(frame, target="target", max_trials=1, parallelism=1, priority="high")
    order = [q.args[0] for q in client.queue.search.get_jobs()]
    assert order == [urgent.id, first.id, second.id]


def test_reaper_keeps_a_retry_chain_and_stops_it_at_the_retry_cap(
    client,
    redis_url: str,  # type: ignore[no-untyped-def]
    prefix: str,
) -> None:
    """A reaped trial's row names the trial it retried; its own retry follows, up to the cap."""
    frame = load_iris(as_frame=True).frame
    job = client.submit(frame, target="target", max_trials=3, parallelism=1)
    ctx = WorkerContext.create(
        Settings(redis_url=redis_url, prefix=prefix, lease_seconds=0.5), redis_url
    )
    shard = Shard(ctx, job.id, 0)
    study = open_study(ctx, job.id, seed=0)
    numbers = []
    for retries in (1, MAX_RETRIES):  # a worker died mid-trial twice; no lease is held
        t = study.ask()
        t.suggest_categorical("family", ["single"])
        t.set_user_attr("retry_of", 100 + retries)
        t.set_user_attr("retries", retries)
        numbers.append(t.number)
    time.sleep(1.1)  # past two lease periods of Redis uptime (reaping waits that long)
    # the first look only notes them (a trial just asked has no lease yet either); a lease
    # period later they are still unleased, so their worker is gone
    assert shard.reap(study, force=True) == 0
    time.sleep(0.6)
    assert shard.reap(study, force=True) == 2
    rows = {r["number"]: r for r in client.store.trial_rows(job.id)}
    for n, retries in zip(numbers, (1, MAX_RETRIES), strict=True):
        assert rows[n]["reaped"] and rows[n]["state"] == "failed"
        assert (rows[n]["retry_of"], rows[n]["retries"]) == (100 + retries, retries)
    waiting = study.get_trials(deepcopy=False, states=(TrialState.WAITING,))
    # only the first is retried: the second already used MAX_RETRIES
    assert [(w.user_attrs["retry_of"], w.user_attrs["retries"]) for w in waiting] == [
        (numbers[0], 2)
    ]
    assert waiting[0].system_attrs["fixed_params"] == {"family": "single"}


def _lost_shard_job(client, redis_url: str, prefix: str, lease: float = 1.0):  # type: ignore[no-untyped-def]
    """A running job whose only shard vanished (no lease, nothing queued)."""
    frame = load_iris(as_frame=True).frame
    job = client.submit(frame, target="target", max_trials=1, parallelism=1)
    client.queue.search.empty()
    client.store.transition(job.id, JobState.RUNNING)
    ctx = WorkerContext.create(
        Settings(redis_url=redis_url, prefix=prefix, lease_seconds=lease), redis_url
    )
    return job, ctx


def test_sweep_times_its_suspicions_on_the_servers_clock(
    client,
    redis_url: str,
    prefix: str,
    monkeypatch: pytest.MonkeyPatch,  # type: ignore[no-untyped-def]
) -> None:
    """A worker whose clock runs ahead must not take a fresh suspicion for an old one."""
    job, ctx = _lost_shard_job(client, redis_url, prefix)
    time.sleep(max(0.0, 2.1 - client.store.server_uptime()))
    assert sweep(ctx) == 0  # first look, from a machine with the right time
    wall = time.time
    monkeypatch.setattr(time, "time", lambda: wall() + 600)  # another machine, 10 min ahead
    assert sweep(ctx) == 0  # a second look at once: no lease period has passed
    monkeypatch.undo()
    time.sleep(1.1)
    assert sweep(ctx) == 1  # a lease period later the shard is still lost
    assert [q.args for q in client.queue.search.get_jobs()] == [[job.id, 1000]]


def test_sweep_leaves_leases_time_to_renew_after_a_redis_restart(tmp_path: Path) -> None:
    from tuttiml.service.client import Client

    server = RedisProcess(tmp_path)
    server.start()
    try:
        client = Client(url=server.url, prefix="rs")
        job, ctx = _lost_shard_job(client, server.url, "rs", lease=5.0)
        assert sweep(ctx) == 0
        time.sleep(5.2)  # a lease period later, but Redis is younger than two lease periods:
        assert client.store.server_uptime() < 10  # live shards may not have renewed yet
        assert sweep(ctx) == 0
        assert client.queue.queued_for(job.id) == 0
    finally:
        server.kill()


def test_finalize_waits_while_a_shard_still_holds_its_lease(
    client,
    redis_url: str,
    prefix: str,  # type: ignore[no-untyped-def]
) -> None:
    """The live-shard counter hit 0 while a shard still runs: finalize leaves it to that shard."""
    from tuttiml.workers import tasks
    from tuttiml.workers.context import install

    job, ctx = _lost_shard_job(client, redis_url, prefix)
    install(ctx)
    lease = client.keys.shard_lease(job.id, 0)
    client.store.hold_lease(lease, 5000)
    assert tasks.finalize_job(job.id) == "shards still running"
    assert client.store.state(job.id) is JobState.RUNNING
    client.store.drop_lease(lease)
    assert tasks.finalize_job(job.id) != "shards still running"
    assert client.store.state(job.id).terminal
