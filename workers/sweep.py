"""The sweep: finds jobs whose shards, finalize or explanations were lost (a worker died) and
re-enqueues them.

A shard, finalize or explanation task holds a lease while it runs; a queued one sits in RQ.
A job that should be progressing but has neither for two consecutive looks, at least a lease
period apart, gets its lost work re-enqueued. Runs at worker start-up and then periodically.
"""

from __future__ import annotations

import logging

from tuttiml.service.store import JobState
from tuttiml.workers.context import WorkerContext

log = logging.getLogger(__name__)
FINALIZE_SHARD = -1
EXPLAIN_SHARD = -2


def _suspect(ctx: WorkerContext, job_id: str, what: str) -> bool:
    """True only when the same suspicion was raised at least one lease period ago.

    Timed on the Redis server's clock: workers' clocks may differ, and one running ahead
    would otherwise see every first suspicion as old and act on a single look.
    """
    now = ctx.store.server_time()
    ttl = int(10 * ctx.settings.lease_seconds) + 10
    first = ctx.store.note_suspicion(job_id, what, now, ttl)
    if first is None:
        return False
    if now - first >= ctx.settings.lease_seconds:
        ctx.store.clear_suspicion(job_id, what)
        return True
    return False


def _lost_explanations(ctx: WorkerContext, job_id: str) -> int:
    """Re-enqueue the explanations of a committed job when they are pending with no task."""
    from tuttiml.service.spec import SearchSpec
    from tuttiml.workers.finalize import explain_timeout

    budget = ctx.store.pending_explanations(job_id)
    if budget is None or ctx.store.running_shards(job_id) or ctx.queue.queued_for(job_id):
        return 0
    if not _suspect(ctx, job_id, "explain"):
        return 0
    spec = SearchSpec.model_validate(ctx.store.job(job_id)["spec"])
    ctx.queue.enqueue_explain(job_id, timeout=explain_timeout(budget, spec))
    ctx.store.log(job_id, f"[{ctx.name}] sweep: re-enqueued the explanations")
    log.warning("job %s: re-enqueued lost explanations", job_id)
    return 1


def sweep(ctx: WorkerContext) -> int:
    """One pass over live jobs; returns how many tasks were re-enqueued."""
    store, queue = ctx.store, ctx.queue
    fixed = 0
    if store.server_uptime() < 2 * ctx.settings.lease_seconds:
        # Redis just restarted: every lease expired during the outage, and live shards have
        # not renewed theirs yet; re-enqueueing now would run their slices twice
        return 0
    for job_id in store.job_ids():
        try:
            state = store.state(job_id)
        except Exception:
            continue
        if state.terminal:
            fixed += _lost_explanations(ctx, job_id)
        if state.terminal and state is not JobState.CANCELLED:
            continue
        if state is JobState.CANCELLED and store.committed_epoch(job_id):
            continue
        running = store.running_shards(job_id)
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
