"""Every Redis key name tutti uses, derived from one prefix (the only place keys are built)."""

from __future__ import annotations

import re
from dataclasses import dataclass

_ID = re.compile(r"^[A-Za-z0-9_-]{1,64}$")


def check_id(value: str, what: str = "job id") -> str:
    """Refuse ids that could escape their key (colons, spaces, wildcards)."""
    if not isinstance(value, str) or not _ID.match(value):
        from tuttiml.service.errors import JobNotFoundError

        raise JobNotFoundError(
            f"{what} {value!r} is not valid: ids use only letters, digits, '-' and '_'; "
            "run `tutti status` to list jobs.",
            field=what,
            value=value,
        )
    return value


@dataclass(frozen=True)
class Keys:
    """Key builder for one deployment prefix.

    Job keys live under ``<prefix>:job:<id>:…``, data blobs under ``<prefix>:data:<sha256>``.
    """

    prefix: str = "tutti"

    # deployment-wide
    @property
    def jobs(self) -> str:
        """Sorted set of job ids by submission time."""
        return f"{self.prefix}:jobs"

    @property
    def queue_name(self) -> str:
        """RQ queue for search shards (RQ adds its own ``rq:`` namespace)."""
        return f"{self.prefix}-search"

    @property
    def finalize_queue_name(self) -> str:
        """RQ queue for finalize tasks, served before search so it never waits behind a search."""
        return f"{self.prefix}-finalize"

    @property
    def workers(self) -> str:
        """Hash: worker name -> JSON of what it is doing."""
        return f"{self.prefix}:workers"

    def worker_alive(self, name: str) -> str:
        return f"{self.prefix}:worker:{name}:alive"

    # data
    def data_meta(self, digest: str) -> str:
        return f"{self.prefix}:data:{digest}:meta"

    def data_chunk(self, digest: str, index: int) -> str:
        return f"{self.prefix}:data:{digest}:chunk:{index}"

    # job
    def job(self, job_id: str) -> str:
        """Hash: the job record (spec JSON, state, timestamps, counters)."""
        return f"{self.prefix}:job:{job_id}"

    def job_events(self, job_id: str) -> str:
        """List of state-transition JSON lines."""
        return f"{self.prefix}:job:{job_id}:events"

    def tickets(self, job_id: str) -> str:
        """Counter: trials allowed to start (the exact budget)."""
        return f"{self.prefix}:job:{job_id}:tickets"

    def failures(self, job_id: str) -> str:
        """Counter: failed trials."""
        return f"{self.prefix}:job:{job_id}:failures"

    def live_shards(self, job_id: str) -> str:
        """Counter: shards enqueued or running; the one that brings it to 0 finalizes."""
        return f"{self.prefix}:job:{job_id}:live_shards"

    def shard_lease(self, job_id: str, shard: int) -> str:
        return f"{self.prefix}:job:{job_id}:shard:{shard}:lease"

    def shard_lease_pattern(self, job_id: str) -> str:
        """Pattern matching the leases of every running shard of a job."""
        return f"{self.prefix}:job:{job_id}:shard:*:lease"

    def suspicion(self, job_id: str, what: str) -> str:
        """When the sweep first suspected ``what`` (lost shards, lost finalize) of a job."""
        return f"{self.prefix}:job:{job_id}:suspect:{what}"

    def trials(self, job_id: str) -> str:
        """Hash: trial number -> JSON result row."""
        return f"{self.prefix}:job:{job_id}:trials"

    def board(self, job_id: str) -> str:
        """Sorted set: complete trial number by mean CV score (greater is better)."""
        return f"{self.prefix}:job:{job_id}:board"

    def library(self, job_id: str, family: str) -> str:
        """Sorted set: trial numbers of one family whose out-of-fold predictions are kept."""
        return f"{self.prefix}:job:{job_id}:library:{family}"

    def oof(self, job_id: str, trial: int) -> str:
        """Out-of-fold predictions of a trial (``.npy`` bytes, no pickle)."""
        return f"{self.prefix}:job:{job_id}:oof:{trial}"

    def lock(self, job_id: str, name: str) -> str:
        """Short-lived claim on one job-wide chore (e.g. ``library``: one refresher at a time)."""
        return f"{self.prefix}:job:{job_id}:lock:{name}"

    def trial_lease(self, job_id: str, trial_id: int) -> str:
        return f"{self.prefix}:job:{job_id}:lease:{trial_id}"

    def artifact(self, job_id: str, name: str = "best") -> str:
        """Hash: skops bytes, SHA-256, metadata of a fitted pipeline."""
        return f"{self.prefix}:job:{job_id}:artifact:{name}"

    def artifacts(self, job_id: str) -> str:
        """Set of artifact names stored for a job."""
        return f"{self.prefix}:job:{job_id}:artifacts"

    def extras(self, job_id: str) -> str:
        """Hash of finalize outputs (library ensembles, holdout score, notes) as JSON."""
        return f"{self.prefix}:job:{job_id}:extras"

    def logs(self, job_id: str) -> str:
        """Capped list of the job's worker log lines."""
        return f"{self.prefix}:job:{job_id}:logs"

    def journal(self, job_id: str) -> str:
        """List holding the Optuna journal of the job's study (one JSON entry per item)."""
        return f"{self.prefix}:job:{job_id}:journal"

    def job_pattern(self, job_id: str) -> str:
        """Pattern matching every key of a job (for delete)."""
        return f"{self.prefix}:job:{job_id}:*"
