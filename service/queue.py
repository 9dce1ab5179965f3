"""Thin wrapper over RQ: enqueue worker tasks by dotted path with JSON payloads (ids only)."""

from __future__ import annotations

import redis
from rq import Queue
from tuttiml.service.keys import Keys

SERIALIZER = "json"
SHARD_TASK = "tuttiml.workers.tasks.run_shard"
FINALIZE_TASK = "tuttiml.workers.tasks.finalize_job"
EXPLAIN_TASK = "tuttiml.workers.tasks.explain_job"
#: The only functions a tutti worker will run (checked again on the worker side).
ALLOWED_TASKS: frozenset[str] = frozenset({SHARD_TASK, FINALIZE_TASK, EXPLAIN_TASK})
NO_EXPIRY = -1


class TaskQueue:
    """The deployment's two RQ queues: finalize (served first) and search."""

    def __init__(self, client: redis.Redis, keys: Keys) -> None:
        self.keys = keys
        self.connection = client  # RQ workers serve these queues over the same connection
        self.search = Queue(keys.queue_name, connection=client, serializer=SERIALIZER)
        self.final = Queue(keys.finalize_queue_name, connection=client, serializer=SERIALIZER)

    def enqueue_shard(
        self, job_id: str, shard: int, *, timeout: float, at_front: bool = False
    ) -> str:
        """Queue one search slice of ``job_id`` for shard ``shard``; returns the RQ job id."""
        rq_job = self.search.enqueue(
            SHARD_TASK,
            job_id,
            shard,
            job_timeout=int(timeout),
            result_ttl=600,
            failure_ttl=7 * 24 * 3600,
            at_front=at_front,
            description=f"tutti search {job_id} shard {shard}",
        )
        return str(rq_job.id)

    def enqueue_finalize(self, job_id: str, *, timeout: float) -> str:
        rq_job = self.final.enqueue(
            FINALIZE_TASK,
            job_id,
            job_timeout=int(timeout),
            result_ttl=600,
            failure_ttl=7 * 24 * 3600,
            description=f"tutti finalize {job_id}",
        )
        return str(rq_job.id)

    def enqueue_explain(self, job_id: str, *, timeout: float) -> str:
        """Queue the explanations of ``job_id`` behind queued search work (the model is already
        committed, so they never delay another job's search more than its own shards would)."""
        rq_job = self.search.enqueue(
            EXPLAIN_TASK,
            job_id,
            job_timeout=int(timeout),
            result_ttl=600,
            failure_ttl=7 * 24 * 3600,
            description=f"tutti explain {job_id}",
        )
        return str(rq_job.id)

    def queued_for(self, job_id: str) -> int:
        """How many queued RQ jobs carry ``job_id`` (for sweeps and status)."""
        n = 0
        for q in (self.search, self.final):
            for rq_job in q.get_jobs():
                try:
                    args = rq_job.args
                except Exception:  # an undecodable (forged) entry must not stop the sweep
                    continue
                if args and args[0] == job_id:
                    n += 1
        return n
