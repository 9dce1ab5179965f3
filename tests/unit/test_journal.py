"""Our journal backend: a shared Optuna study over Redis with no pickled snapshot."""

from __future__ import annotations

import optuna
import redis
from optuna.storages.journal._base import BaseJournalSnapshot
from tuttiml.service.store import JournalList
from tuttiml.workers.journal import READ_BATCH, RedisListJournal, journal_storage


def test_appends_and_batched_reads(redis_url: str, prefix: str) -> None:
    r = redis.Redis.from_url(redis_url)
    backend = RedisListJournal(JournalList(r, f"{prefix}:j"))
    backend.append_logs([{"i": i} for i in range(READ_BATCH * 2 + 5)])
    assert [x["i"] for x in backend.read_logs(0)] == list(range(READ_BATCH * 2 + 5))
    assert [x["i"] for x in backend.read_logs(READ_BATCH + 3)][:2] == [
        READ_BATCH + 3,
        READ_BATCH + 4,
    ]


def test_study_shared_between_storages_writes_no_snapshot(redis_url: str, prefix: str) -> None:
    r = redis.Redis.from_url(redis_url)
    key = f"{prefix}:journal"
    s1 = optuna.create_study(study_name="s", storage=journal_storage(JournalList(r, key)))
    for _ in range(120):  # past Optuna's snapshot interval of 100 trials
        t = s1.ask()
        s1.tell(t, t.suggest_float("x", 0, 1))
    s2 = optuna.load_study(
        study_name="s", storage=journal_storage(JournalList(redis.Redis.from_url(redis_url), key))
    )
    assert len(s2.trials) == 120
    assert s2.best_value == s1.best_value
    assert not [k for k in r.scan_iter(match=f"{prefix}:*") if b"snapshot" in k]
    assert not isinstance(RedisListJournal(JournalList(r, key)), BaseJournalSnapshot)
