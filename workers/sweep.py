"""The sweep: finds jobs whose shards or finalize were lost (a worker died) and re-enqueues them.

A shard or finalize holds a lease while it runs; a queued one sits in RQ. A job that should
be progressing but has neither for two consecutive looks, at least a lease period apart,
gets its lost work re-enqueued. Runs at worker start-up and then periodically.
"""

from __future__ import annotations

import logging
import time

from tuttiml.service.store import JobState
from tuttiml.workers.context import WorkerContext

log = logging.getLogger(__name__)
FINALIZE_SHARD = -1


def _running_shards(ctx: WorkerContext, job_id: str) -> int:
    pattern = ctx.store.keys.shard_lease(job_id, 0).rsplit(":", 2)[0] + ":*:lease"
    return sum(1 for _ in ctx.store.r.scan_iter(match=pattern, count=200))


def _suspect(ctx: WorkerContext, job_id: str, what: str) -> bool:
    """True only when the same suspicion was raised at least one lease period ago."""
    key = f"{ctx.store.keys.job(job_id)}:suspect:{what}"
    now = time.time()
    first = ctx.store.r.get(key)
    if first is None:
        ctx.store.r.set(key, repr(now), ex=int(10 * ctx.settings.lease_seconds) + 10)
        return False
    if now - float(first) >= ctx.settings.lease_seconds:
        ctx.store.r.delete(key)
        return True
    return False


def sweep(ctx: WorkerContext) -> int:
    """One pass over live jobs; returns how many tasks were re-enqueued."""
    store, queue = ctx.store, ctx.queue
    fixed = 0
    for job_id in store.job_ids():
        try:
            state = store.state(job_id)
        except Exception:
            continue
        if state.terminal and state is not JobState.CANCELLED:
            continue
        if state is JobState.CANCELLED and store.r.hget(store.keys.job(job_id), "committed_epoch"):
            continue
        running = _running_shards(ctx, job_id)
        queued = queue.queued_for(job_id)
        live = store.live_shards(job_id)
        if state in (JobState.QUEUED, JobState.RUNNING) and live > 0:
            missing = live - running - queued
            if missing > 0 and _suspect(ctx, job_id, f"shards{missing}"):
                for i in range(missing):
                    queue.enqueue_shard(job_id, 1000 + i, timeout=3600)
                fixed += missing
                store.log(job_id, f"[{ctx.name}] sweep: re-enqueued {missing} lost shard(s)")
                log.warning("job %s: re-enqueued %d lost shard(s)", job_id, missing)
        elif not running and not queued and _suspect(ctx, job_id, "finalize"):
            queue.enqueue_finalize(job_id, timeout=3600)
            fixed += 1
            store.log(job_id, f"[{ctx.name}] sweep: re-enqueued finalize")
    return fixed
