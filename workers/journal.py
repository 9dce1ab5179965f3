"""An Optuna journal backend on a Redis list: atomic appends, batched reads, no snapshots.

Optuna's stock Redis backend also writes a pickled snapshot that every new storage object
un-pickles, so whoever can write that key could run code in every worker; it also reads one
key per log entry. This backend keeps the journal as one Redis list per job: ``RPUSH`` appends
a batch atomically and ``LRANGE`` reads in batches. It is not a ``BaseJournalSnapshot``.
"""

from __future__ import annotations

import json
import time
import warnings
from collections.abc import Iterator
from typing import Any

import optuna
from optuna.storages import JournalStorage
from optuna.storages.journal import BaseJournalBackend
from tuttiml.service.store import JournalList

READ_BATCH = 2000


class RedisListJournal(BaseJournalBackend):
    """Journal entries as JSON items of one Redis list.

    Args:
        log: the job's journal list (``JobStore.journal``).
    """

    def __init__(self, log: JournalList) -> None:
        self._log = log
        self.busy_seconds = 0.0  # time spent talking to Redis (store cost, for benchmarks)

    def read_logs(self, log_number_from: int) -> Iterator[dict[str, Any]]:
        start = log_number_from
        while True:
            t0 = time.perf_counter()
            batch = self._log.read(start, READ_BATCH)
            self.busy_seconds += time.perf_counter() - t0
            for item in batch:
                yield json.loads(item)
            if len(batch) < READ_BATCH:
                return
            start += len(batch)

    def append_logs(self, logs: list[dict[str, Any]]) -> None:
        if logs:
            t0 = time.perf_counter()
            self._log.append([json.dumps(log) for log in logs])
            self.busy_seconds += time.perf_counter() - t0


def journal_storage(log: JournalList) -> JournalStorage:
    """A JournalStorage over :class:`RedisListJournal` (Optuna's experimental warning muted)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        return JournalStorage(RedisListJournal(log))
