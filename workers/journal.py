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
import redis
from optuna.storages import JournalStorage
from optuna.storages.journal import BaseJournalBackend

READ_BATCH = 2000


class RedisListJournal(BaseJournalBackend):
    """Journal entries as JSON items of one Redis list.

    Args:
        client: Redis client (bytes responses are fine).
        key: the list key (one per job, from ``service.keys.Keys.journal``).
    """

    def __init__(self, client: redis.Redis, key: str) -> None:
        self._client = client
        self._key = key
        self.busy_seconds = 0.0  # time spent talking to Redis (store cost, for benchmarks)

    def read_logs(self, log_number_from: int) -> Iterator[dict[str, Any]]:
        start = log_number_from
        while True:
            t0 = time.perf_counter()
            batch = self._client.lrange(self._key, start, start + READ_BATCH - 1)
            self.busy_seconds += time.perf_counter() - t0
            for item in batch:
                yield json.loads(item)
            if len(batch) < READ_BATCH:
                return
            start += len(batch)

    def append_logs(self, logs: list[dict[str, Any]]) -> None:
        if logs:
            t0 = time.perf_counter()
            self._client.rpush(self._key, *[json.dumps(log) for log in logs])
            self.busy_seconds += time.perf_counter() - t0

    def __getstate__(self) -> dict[str, Any]:
        state = self.__dict__.copy()
        state["_url_kwargs"] = self._client.connection_pool.connection_kwargs
        del state["_client"]
        return state

    def __setstate__(self, state: dict[str, Any]) -> None:
        kwargs = state.pop("_url_kwargs")
        self.__dict__.update(state)
        self._client = redis.Redis(**kwargs)


def journal_storage(client: redis.Redis, key: str) -> JournalStorage:
    """A JournalStorage over :class:`RedisListJournal` (Optuna's experimental warning muted)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        return JournalStorage(RedisListJournal(client, key))
