"""RQ entry points: the allow-list of functions a tutti worker runs (nothing else, ever).

Queue payloads are JSON (ids and small numbers) and not trusted: every argument is checked
again here before use.
"""

from __future__ import annotations

import contextlib
import logging
import traceback

from tuttiml.service.keys import check_id
from tuttiml.workers.context import current

log = logging.getLogger(__name__)
MAX_SHARD_ERRORS = 20


def _shard_id(shard: object) -> int:
    if isinstance(shard, bool) or not isinstance(shard, int) or not 0 <= shard < 1_000_000:
        raise ValueError(f"shard: expected a small non-negative integer, got {shard!r}")
    return shard


def run_shard(job_id: str, shard: int) -> str:
    """Run one search slice of ``job_id``; returns why the slice ended."""
    from tuttiml.workers.search import Shard

    job_id, shard = check_id(job_id), _shard_id(shard)
    ctx = current()
    if not ctx.store.exists(job_id):
        return "no such job"  # deleted while queued, or forged: write nothing
    lease_key = ctx.store.keys.shard_lease(job_id, shard)
    from tuttiml.workers.leases import Lease

    with Lease(ctx, lease_key, ctx.settings.lease_seconds):
        try:
            return Shard(ctx, job_id, shard).run()
        except Exception as exc:
            return _shard_crashed(job_id, shard, exc)


def _shard_crashed(job_id: str, shard: int, exc: Exception) -> str:
    """An unexpected error in a slice: log it in the job and hand the slice on (bounded)."""
    ctx = current()
    text = f"shard {shard} error: {type(exc).__name__}: {exc}\n{traceback.format_exc()[-3000:]}"
    log.error("job %s %s", job_id, text)
    with contextlib.suppress(Exception):
        ctx.store.log(job_id, f"[{ctx.name}] {text}")
    n = ctx.store.incr_field(job_id, "shard_errors")
    if n <= MAX_SHARD_ERRORS:
        ctx.queue.enqueue_shard(job_id, shard, timeout=3600)
        return "error"
    ctx.store.set_field_once(job_id, "stop_reason", f"shard errors: {type(exc).__name__}: {exc}")
    if ctx.store.shard_stopped(job_id) <= 0:
        ctx.queue.enqueue_finalize(job_id, timeout=3600)
    return "error"


def finalize_job(job_id: str) -> str:
    """Build library ensembles, refit the winner and commit the job's result (exactly once)."""
    from tuttiml.workers.finalize import Finalizer
    from tuttiml.workers.leases import Lease

    job_id = check_id(job_id)
    ctx = current()
    if not ctx.store.exists(job_id):
        return "no such job"
    if _shards_still_running(job_id):
        return "shards still running"
    with Lease(ctx, ctx.store.keys.shard_lease(job_id, -1), ctx.settings.lease_seconds):
        _reap_before_finalize(job_id)
        return Finalizer(ctx, job_id).run()


def _shards_still_running(job_id: str) -> bool:
    """True when a search shard of a running job still holds its lease: finalize must wait.

    The live-shard counter can reach 0 while a shard still runs: the sweep replaced a shard
    it took for lost (a worker frozen past its lease) and the original came back. Finalize
    then would commit while trials still run. Each shard that stops for good enqueues
    finalize again, so returning here loses nothing.
    """
    from tuttiml.service.store import JobState

    ctx = current()
    if ctx.store.state(job_id) not in (JobState.QUEUED, JobState.RUNNING):
        return False
    if ctx.store.running_shards(job_id) > 0:
        ctx.store.log(job_id, f"[{ctx.name}] finalize: shards still running; left to them")
        return True
    return False


def _reap_before_finalize(job_id: str) -> None:
    """Fail trials a dead worker left RUNNING, so none stays RUNNING past the search.

    Shards reap such trials before they stop on a spent budget; this covers the other ways
    to the end (deadline, cancel, failure cap, a sweep's finalize). Waits at most three lease
    periods, since a lease must be seen lapsed for a whole period before its trial is failed.
    """
    from tuttiml.service.store import JobState
    from tuttiml.workers.leases import Reaper
    from tuttiml.workers.search import open_study

    ctx = current()
    if ctx.store.state(job_id) in (JobState.FINISHED, JobState.FAILED):
        return
    study = open_study(ctx, job_id, seed=0)
    n = Reaper(ctx, job_id).drain(study, within=3 * ctx.settings.lease_seconds)
    if n:
        log.warning("job %s: finalize reaped %d trial(s) of dead workers", job_id, n)


def explain_job(job_id: str) -> str:
    """Compute and commit the explanations of the job's committed epoch (exactly once)."""
    from tuttiml.workers.explain_task import Explainer
    from tuttiml.workers.leases import Lease
    from tuttiml.workers.sweep import EXPLAIN_SHARD

    job_id = check_id(job_id)
    ctx = current()
    if not ctx.store.exists(job_id):
        return "no such job"
    with Lease(ctx, ctx.store.keys.shard_lease(job_id, EXPLAIN_SHARD), ctx.settings.lease_seconds):
        return Explainer(ctx, job_id).run()
