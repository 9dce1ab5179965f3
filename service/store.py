"""JobStore: the job record and its state machine, data blobs, trial rows, leaderboard, artifacts.

Everything lives in Redis under one key prefix (see ``service.keys``). Values are JSON text or
raw bytes (Parquet, ``.npy`` without pickle, skops); nothing read here is ever unpickled.
Writes that touch several keys go through one transaction or Lua script.
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable, Iterable
from typing import Any

import redis
from tuttiml.service.errors import InvalidDataError, JobNotFoundError, JobStateError
from tuttiml.service.keys import Keys, check_id
from tuttiml.service.records import TrialRow
from tuttiml.service.states import _PHASE, _RECORD, _TICKET, _TRANSITION, TRANSITIONS, JobState

CHUNK_BYTES = 64 * 1024 * 1024  # one Redis string holds at most 512 MB
LOG_LINES = 5000
#: Job-record fields stored as JSON (the rest are plain strings or timestamps).
JSON_FIELDS = frozenset(
    {"spec", "summary", "warnings", "dropped", "schema", "classes", "labels", "columns"}
)


def _now() -> float:
    return time.time()


def _text(value: Any) -> str:
    return value.decode() if isinstance(value, bytes) else str(value)


class JournalList:
    """One job's Optuna journal as a Redis list: atomic batch appends, ranged reads.

    The Optuna backend (``workers.journal``) wraps this; the list is the only Redis it sees.
    Picklable: it drops its client and reconnects with the same connection settings.
    """

    def __init__(self, client: redis.Redis, key: str) -> None:
        self._client = client
        self.key = key

    def read(self, start: int, count: int) -> list[bytes]:
        return list(self._client.lrange(self.key, start, start + count - 1))

    def append(self, items: list[str]) -> None:
        if items:
            self._client.rpush(self.key, *items)

    def __getstate__(self) -> dict[str, Any]:
        pool = self._client.connection_pool
        plain = (str, int, float, bool, type(None))
        kwargs = {k: v for k, v in pool.connection_kwargs.items() if isinstance(v, plain)}
        return {"key": self.key, "kwargs": kwargs, "cls": pool.connection_class.__name__}

    def __setstate__(self, state: dict[str, Any]) -> None:
        self.key = state["key"]
        kwargs = dict(state["kwargs"])
        if state["cls"] == "UnixDomainSocketConnection":
            kwargs["unix_socket_path"] = kwargs.pop("path")
        self._client = redis.Redis(**kwargs)


class JobStore:
    """Reads and writes one deployment's jobs; the only holder of the Redis handle.

    Args:
        client: a Redis client (bytes responses).
        keys: the key builder of the deployment's prefix.
    """

    def __init__(self, client: redis.Redis, keys: Keys) -> None:
        self._r = client
        self.keys = keys
        self._transition = client.register_script(_TRANSITION)
        self._ticket = client.register_script(_TICKET)
        self._record = client.register_script(_RECORD)
        self._phase = client.register_script(_PHASE)

    # ------------------------------------------------------------------ data blobs
    def has_data(self, digest: str) -> bool:
        return bool(self._r.exists(self.keys.data_meta(digest)))

    def put_data(
        self,
        digest: str,
        data: bytes,
        *,
        chunk_bytes: int = CHUNK_BYTES,
        progress: Callable[[int, int], None] | None = None,
    ) -> None:
        """Store a blob once under its content hash, in chunks; the meta key is written last."""
        if self.has_data(digest):
            if progress:
                progress(len(data), len(data))
            return
        view = memoryview(data)
        n = max(1, -(-len(data) // chunk_bytes))
        for i in range(n):
            self._r.set(
                self.keys.data_chunk(digest, i),
                bytes(view[i * chunk_bytes : (i + 1) * chunk_bytes]),
            )
            if progress:
                progress(min((i + 1) * chunk_bytes, len(data)), len(data))
        self._r.set(self.keys.data_meta(digest), json.dumps({"chunks": n, "bytes": len(data)}))

    def get_data(self, digest: str) -> bytearray:
        raw = self._r.get(self.keys.data_meta(digest))
        if raw is None:
            raise InvalidDataError(
                f"data blob {digest[:12]}… is not in the store; resubmit the job.",
                field="data",
                value=digest,
            )
        meta = json.loads(raw)
        out = bytearray(int(meta["bytes"]))  # one buffer, filled chunk by chunk
        pos = 0
        for i in range(meta["chunks"]):
            part = self._r.get(self.keys.data_chunk(digest, i))
            if part is None:
                raise InvalidDataError(
                    f"data blob {digest[:12]}… is incomplete; resubmit the job.",
                    field="data",
                    value=digest,
                )
            out[pos : pos + len(part)] = part
            pos += len(part)
            del part
        if pos != len(out):
            raise InvalidDataError(
                f"data blob {digest[:12]}… has {pos} of {len(out)} bytes; resubmit the job.",
                field="data",
                value=digest,
            )
        return out

    # ------------------------------------------------------------------ job record
    def create_job(self, job_id: str, record: dict[str, Any], *, shards: int) -> None:
        """Write a new job (state ``queued``) with its counters in one transaction."""
        now = _now()
        fields = {k: (v if isinstance(v, str) else json.dumps(v)) for k, v in record.items()}
        fields.update(
            {
                "id": job_id,
                "state": JobState.QUEUED.value,
                "created_at": str(now),
                "queued_at": str(now),
                "shards": str(shards),
            }
        )
        pipe = self._r.pipeline(transaction=True)
        pipe.hset(self.keys.job(job_id), mapping=fields)
        pipe.zadd(self.keys.jobs, {job_id: now})
        pipe.set(self.keys.tickets(job_id), 0)
        pipe.set(self.keys.failures(job_id), 0)
        pipe.set(self.keys.live_shards(job_id), shards)
        pipe.rpush(
            self.keys.job_events(job_id),
            json.dumps({"state": "queued", "at": now, "from": None, "reason": ""}),
        )
        pipe.execute()

    def exists(self, job_id: str) -> bool:
        return bool(self._r.hexists(self.keys.job(check_id(job_id)), "state"))

    def job(self, job_id: str) -> dict[str, Any]:
        """The job record with JSON fields decoded.

        Raises:
            JobNotFoundError: no such job (the message says how to list jobs).
        """
        raw = self._r.hgetall(self.keys.job(check_id(job_id)))
        if not raw or b"state" not in raw:
            raise JobNotFoundError(
                f"job {job_id!r} not found in this store; run `tutti status` to list jobs "
                "(or check TUTTI_REDIS_URL / --redis-url points at the right server).",
                field="job_id",
                value=job_id,
            )
        out: dict[str, Any] = {}
        for k, v in raw.items():
            key, text = _text(k), _text(v)
            if key in JSON_FIELDS:
                out[key] = json.loads(text)
            elif key.endswith("_at") or key in ("deadline", "search_deadline"):
                out[key] = float(text)
            else:
                out[key] = text
        return out

    def state(self, job_id: str) -> JobState:
        raw = self._r.hget(self.keys.job(job_id), "state")
        if raw is None:
            self.job(job_id)  # raises JobNotFoundError
        return JobState(_text(raw))

    def set_fields(self, job_id: str, **fields: Any) -> None:
        self._r.hset(
            self.keys.job(job_id),
            mapping={k: (v if isinstance(v, str) else json.dumps(v)) for k, v in fields.items()},
        )

    def set_phase(self, job_id: str, phase: str) -> bool:
        """Record what finalize is doing now (shown by ``status`` while finalizing)."""
        return bool(self._phase(keys=[self.keys.job(job_id)], args=[phase, repr(_now())]))

    def set_field_once(self, job_id: str, name: str, value: Any) -> Any:
        """Set a field only if unset; return the value that is stored afterwards."""
        key = self.keys.job(job_id)
        self._r.hsetnx(key, name, value if isinstance(value, str) else json.dumps(value))
        return _text(self._r.hget(key, name))

    def transition(
        self,
        job_id: str,
        to: JobState,
        *,
        allowed_from: Iterable[JobState] | None = None,
        reason: str = "",
    ) -> JobState | None:
        """Atomic compare-and-set of the state; returns the previous state, None if refused."""
        sources = (
            list(allowed_from)
            if allowed_from is not None
            else [s for s, targets in TRANSITIONS.items() if to in targets]
        )
        prev = self._transition(
            keys=[self.keys.job(job_id), self.keys.job_events(job_id)],
            args=[to.value, repr(_now()), reason, *[s.value for s in sources]],
        )
        return JobState(_text(prev)) if prev else None

    def require_state(self, job_id: str, allowed: Iterable[JobState], action: str) -> JobState:
        st = self.state(job_id)
        if st not in set(allowed):
            raise JobStateError(
                f"job {job_id} is {st.value}; {action} needs one of "
                f"{', '.join(s.value for s in allowed)}.",
                field="state",
                value=st.value,
            )
        return st

    def events(self, job_id: str) -> list[dict[str, Any]]:
        return [json.loads(e) for e in self._r.lrange(self.keys.job_events(job_id), 0, -1)]

    def job_ids(self) -> list[str]:
        return [_text(j) for j in self._r.zrange(self.keys.jobs, 0, -1)]

    def incr_field(self, job_id: str, name: str, by: int = 1) -> int:
        """Add ``by`` to a counter field of the job record; returns the new value."""
        return int(self._r.hincrby(self.keys.job(job_id), name, by))

    def claim_field(self, job_id: str, name: str) -> bool:
        """Set a flag field if nobody has; True for the one caller that set it."""
        return bool(self._r.hsetnx(self.keys.job(job_id), name, 1))

    def committed_epoch(self, job_id: str) -> str | None:
        """The epoch whose final result is committed (None before the first commit)."""
        raw = self._r.hget(self.keys.job(job_id), "committed_epoch")
        return None if raw is None else _text(raw)

    # ------------------------------------------------------------------ leases, liveness
    def hold_lease(self, key: str, milliseconds: int) -> None:
        """Write or refresh a lease key (from ``Keys.trial_lease`` / ``Keys.shard_lease``)."""
        self._r.set(key, b"1", px=milliseconds)

    def drop_lease(self, key: str) -> None:
        self._r.delete(key)

    def trial_leased(self, job_id: str, trial_id: int) -> bool:
        """True while the worker running this Optuna trial keeps its lease fresh."""
        return bool(self._r.exists(self.keys.trial_lease(job_id, trial_id)))

    def running_shards(self, job_id: str) -> int:
        """How many shards of the job hold a live lease right now."""
        pattern = self.keys.shard_lease_pattern(job_id)
        return sum(1 for _ in self._r.scan_iter(match=pattern, count=200))

    def note_suspicion(self, job_id: str, what: str, now: float, ttl: int) -> float | None:
        """When ``what`` was first suspected (None, and noted now, if this is the first time)."""
        key = self.keys.suspicion(job_id, what)
        first = self._r.get(key)
        if first is None:
            self._r.set(key, repr(now), ex=ttl)
            return None
        return float(first)

    def clear_suspicion(self, job_id: str, what: str) -> None:
        self._r.delete(self.keys.suspicion(job_id, what))

    def put_worker(self, name: str, doc: dict[str, Any], ttl: int) -> None:
        """A worker's heartbeat: what it is doing, expiring unless refreshed."""
        self._r.set(self.keys.worker_alive(name), json.dumps(doc, default=str), ex=ttl)

    def drop_worker(self, name: str) -> None:
        self._r.delete(self.keys.worker_alive(name))

    def give_up_quickly(self) -> None:
        """From now on a failed command is retried twice within a second, then raises.

        For a worker shutting down: its normal client rides out a minute-long Redis outage,
        which would keep a SIGTERM-ed worker alive that long once Redis is gone.
        """
        from redis.backoff import ExponentialBackoff
        from redis.retry import Retry

        self._r.set_retry(Retry(ExponentialBackoff(cap=0.5, base=0.05), 2))

    def server_time(self) -> float:
        """The Redis server's clock (seconds): one clock for every machine, however skewed."""
        sec, usec = self._r.time()
        return float(sec) + float(usec) / 1e6

    def server_uptime(self) -> float:
        """Seconds since the Redis server started (expiries restart with it)."""
        return float(self._r.info("server").get("uptime_in_seconds", 1e9))

    def journal(self, job_id: str) -> JournalList:
        """The job's Optuna journal list."""
        return JournalList(self._r, self.keys.journal(job_id))

    # ------------------------------------------------------------------ budget counters
    def take_ticket(self, job_id: str, budget: int) -> int | None:
        """Take one trial ticket; None when ``budget`` tickets are already out."""
        n = int(self._ticket(keys=[self.keys.tickets(job_id)], args=[budget]))
        return None if n < 0 else n

    def return_ticket(self, job_id: str) -> None:
        self._r.decr(self.keys.tickets(job_id))

    def tickets(self, job_id: str) -> int:
        return int(self._r.get(self.keys.tickets(job_id)) or 0)

    def add_failure(self, job_id: str) -> int:
        return int(self._r.incr(self.keys.failures(job_id)))

    def failures(self, job_id: str) -> int:
        return int(self._r.get(self.keys.failures(job_id)) or 0)

    def shard_stopped(self, job_id: str) -> int:
        """One shard stopped for good; returns how many are still live (0 → finalize)."""
        return int(self._r.decr(self.keys.live_shards(job_id)))

    def add_live_shards(self, job_id: str, n: int) -> int:
        return int(self._r.incrby(self.keys.live_shards(job_id), n))

    def live_shards(self, job_id: str) -> int:
        return int(self._r.get(self.keys.live_shards(job_id)) or 0)

    # ------------------------------------------------------------------ trials
    def record_trial(
        self,
        job_id: str,
        row: TrialRow,
        *,
        oof: bytes | None = None,
        library_size: int = 0,
    ) -> None:
        """Store a finished trial's row; complete ones join the board and maybe the library."""
        number, family = row.number, row.family
        score = row.score if row.state == "complete" else None
        self._record(
            keys=[
                self.keys.trials(job_id),
                self.keys.board(job_id),
                self.keys.library(job_id, family),
                self.keys.oof(job_id, number),
                self.keys.job(job_id),
            ],
            args=[
                number,
                json.dumps(row.dump()),
                "" if score is None else repr(float(score)),
                oof or b"",
                library_size,
                self.keys.oof(job_id, 0)[:-1],
                row.state,
            ],
        )

    def trial_rows(self, job_id: str) -> list[dict[str, Any]]:
        """Every stored trial row (a ``TrialRow`` dump), by trial number."""
        rows = [json.loads(v) for v in self._r.hvals(self.keys.trials(job_id))]
        return sorted(rows, key=lambda r: int(r["number"]))

    def board(self, job_id: str, limit: int = -1) -> list[dict[str, Any]]:
        """Complete trials' rows (``TrialRow`` dumps), best first (ties by trial number)."""
        ids = self._r.zrevrange(
            self.keys.board(job_id), 0, limit if limit < 0 else limit - 1, withscores=True
        )
        if not ids:
            return []
        raw = self._r.hmget(self.keys.trials(job_id), [i for i, _ in ids])
        rows = [json.loads(v) for v in raw if v is not None]
        return sorted(rows, key=lambda r: (-float(r["score"]), int(r["number"])))

    def best_score(self, job_id: str) -> float | None:
        top = self._r.zrevrange(self.keys.board(job_id), 0, 0, withscores=True)
        return float(top[0][1]) if top else None

    def oof(self, job_id: str, number: int) -> bytes | None:
        """Stored out-of-fold predictions of one trial (``.npy`` bytes), if kept."""
        blob = self._r.get(self.keys.oof(job_id, number))
        return None if blob is None else bytes(blob)

    def library_members(self, job_id: str, families: Iterable[str]) -> dict[int, bytes]:
        """Stored out-of-fold predictions of the kept candidates of the given families."""
        out: dict[int, bytes] = {}
        for fam in families:
            for t in self._r.zrange(self.keys.library(job_id, fam), 0, -1):
                blob = self._r.get(self.keys.oof(job_id, int(t)))
                if blob is not None:
                    out[int(t)] = blob
        return out

    def claim(self, job_id: str, name: str, owner: str, seconds: float) -> bool:
        """Claim the job-wide chore ``name`` for ``seconds`` (False: someone else holds it)."""
        key = self.keys.lock(job_id, name)
        return bool(self._r.set(key, owner, nx=True, px=max(int(seconds * 1000), 1)))

    def release(self, job_id: str, name: str, owner: str) -> None:
        """Give a claim back, only if ``owner`` still holds it."""
        key = self.keys.lock(job_id, name)
        with self._r.pipeline(transaction=True) as pipe:
            try:
                pipe.watch(key)
                if _text(pipe.get(key) or b"") != owner:
                    return
                pipe.multi()
                pipe.delete(key)
                pipe.execute()
            except redis.WatchError:
                return

    # ------------------------------------------------------------------ artifacts, extras
    def put_artifact(self, job_id: str, name: str, blob: bytes, meta: dict[str, Any]) -> None:
        pipe = self._r.pipeline(transaction=True)
        pipe.hset(
            self.keys.artifact(job_id, name), mapping={"blob": blob, "meta": json.dumps(meta)}
        )
        pipe.sadd(self.keys.artifacts(job_id), name)
        pipe.execute()

    def get_artifact(self, job_id: str, name: str = "best") -> tuple[bytes, dict[str, Any]] | None:
        blob, meta = self._r.hmget(self.keys.artifact(job_id, name), ["blob", "meta"])
        if blob is None or meta is None:
            return None
        return bytes(blob), json.loads(meta)

    def artifact_names(self, job_id: str) -> list[str]:
        return sorted(_text(n) for n in self._r.smembers(self.keys.artifacts(job_id)))

    def set_extra(self, job_id: str, name: str, value: Any) -> None:
        self._r.hset(self.keys.extras(job_id), name, json.dumps(value))

    def extras(self, job_id: str) -> dict[str, Any]:
        return {
            _text(k): json.loads(v) for k, v in self._r.hgetall(self.keys.extras(job_id)).items()
        }

    def commit_final(
        self,
        job_id: str,
        epoch: str,
        *,
        artifacts: dict[str, tuple[bytes, dict[str, Any]]],
        extras: dict[str, Any],
        state: JobState,
        reason: str = "",
        fields: dict[str, str] | None = None,
    ) -> bool:
        """Commit a finalize's results exactly once per epoch (a fenced compare-and-set).

        ``fields`` are written into the job record in the same transaction (e.g. the
        explanations' state). Returns False when another finalize already committed this epoch
        (nothing changes).
        """
        key = self.keys.job(job_id)
        for _ in range(50):
            with self._r.pipeline(transaction=True) as pipe:
                try:
                    pipe.watch(key)
                    done = pipe.hget(key, "committed_epoch")
                    if done is not None and _text(done) == epoch:
                        return False
                    cur = _text(pipe.hget(key, "state") or b"")
                    now = repr(_now())
                    pipe.multi()
                    for name, (blob, meta) in artifacts.items():
                        pipe.hset(
                            self.keys.artifact(job_id, name),
                            mapping={"blob": blob, "meta": json.dumps(meta)},
                        )
                        pipe.sadd(self.keys.artifacts(job_id), name)
                    if extras:
                        pipe.hset(
                            self.keys.extras(job_id),
                            mapping={k: json.dumps(v) for k, v in extras.items()},
                        )
                    record = {**(fields or {}), "committed_epoch": epoch, "finalized_at": now}
                    if cur != state.value:
                        record.update({"state": state.value, f"{state.value}_at": now})
                        pipe.rpush(
                            self.keys.job_events(job_id),
                            json.dumps(
                                {
                                    "state": state.value,
                                    "at": float(now),
                                    "from": cur,
                                    "reason": reason,
                                }
                            ),
                        )
                    if reason:
                        record["reason"] = reason
                    pipe.hset(key, mapping=record)
                    pipe.execute()
                    return True
                except redis.WatchError:
                    continue
        raise JobStateError(f"job {job_id}: could not commit finalize (store too busy); retry.")

    def commit_explanations(
        self,
        job_id: str,
        epoch: str,
        *,
        explain: dict[str, Any],
        artifacts: dict[str, tuple[bytes, dict[str, Any]]],
        extras: dict[str, Any] | None = None,
    ) -> bool:
        """Commit a job's explanations exactly once per committed epoch (fenced).

        Writes only while ``epoch`` is still the job's committed epoch (an ``extend`` since
        then makes this result stale) and the explanations of that epoch are not committed yet,
        so a duplicate or stale explanation task changes nothing. Returns whether it wrote.
        """
        key = self.keys.job(job_id)
        for _ in range(50):
            with self._r.pipeline(transaction=True) as pipe:
                try:
                    pipe.watch(key)
                    if not self._explainable(pipe, key, epoch):
                        return False
                    pipe.multi()
                    for name, (blob, meta) in artifacts.items():
                        pipe.hset(
                            self.keys.artifact(job_id, name),
                            mapping={"blob": blob, "meta": json.dumps(meta)},
                        )
                        pipe.sadd(self.keys.artifacts(job_id), name)
                    written = {**(extras or {}), "explain": explain}
                    pipe.hset(
                        self.keys.extras(job_id),
                        mapping={k: json.dumps(v) for k, v in written.items()},
                    )
                    pipe.hset(
                        key,
                        mapping={
                            "explain_epoch": epoch,
                            "explain_state": str(explain["state"]),
                            "explained_at": repr(_now()),
                        },
                    )
                    pipe.execute()
                    return True
                except redis.WatchError:
                    continue
        raise JobStateError(f"job {job_id}: could not commit explanations (store busy); retry.")

    @staticmethod
    def _explainable(pipe: Any, key: str, epoch: str) -> bool:
        """``epoch`` is the job's current epoch, committed, and not explained yet."""
        current, committed, explained = (
            _text(v) if v is not None else None
            for v in pipe.hmget(key, ["epoch", "committed_epoch", "explain_epoch"])
        )
        return (current or "0") == epoch and committed == epoch and explained != epoch

    def pending_explanations(self, job_id: str) -> float | None:
        """The budget of the committed epoch's explanations while they are not committed yet
        (pending or running), else None."""
        state, committed, explained, budget = self._r.hmget(
            self.keys.job(job_id),
            ["explain_state", "committed_epoch", "explain_epoch", "explain_budget"],
        )
        if state is None or committed is None or _text(state) not in ("pending", "running"):
            return None
        if explained is not None and _text(explained) == _text(committed):
            return None
        return float(_text(budget)) if budget is not None else 0.0

    def explain_started(self, job_id: str, epoch: str) -> int:
        """Mark the explanations of ``epoch`` as running; returns the attempt number (0 if
        that epoch is no longer committed or already explained: then nothing is written)."""
        key = self.keys.job(job_id)
        for _ in range(50):
            with self._r.pipeline(transaction=True) as pipe:
                try:
                    pipe.watch(key)
                    if not self._explainable(pipe, key, epoch):
                        return 0
                    pipe.multi()
                    pipe.hset(key, "explain_state", "running")
                    pipe.hincrby(key, f"explain_attempts:{epoch}", 1)
                    return int(pipe.execute()[1])
                except redis.WatchError:
                    continue
        raise JobStateError(f"job {job_id}: could not start explanations (store busy); retry.")

    def reopen(self, job_id: str, spec_json: str, *, shards: int) -> int:
        """Re-open a finished, cancelled or failed job for more search; returns the new epoch.

        The study, trials and leaderboard stay; the budget counters continue; the wall clock
        restarts; finalize commits again under the new epoch.
        """
        key = self.keys.job(job_id)
        for _ in range(50):
            with self._r.pipeline(transaction=True) as pipe:
                try:
                    pipe.watch(key)
                    cur = JobState(_text(pipe.hget(key, "state") or b"queued"))
                    if cur not in (JobState.FINISHED, JobState.CANCELLED, JobState.FAILED):
                        raise JobStateError(
                            f"job {job_id} is {cur.value}; only finished, cancelled or failed "
                            "jobs can be extended.",
                            field="state",
                            value=cur.value,
                        )
                    epoch = int(_text(pipe.hget(key, "epoch") or b"0")) + 1
                    now = _now()
                    pipe.multi()
                    pipe.hdel(
                        key,
                        "stop_reason",
                        "started_at",
                        "reason",
                        "slices",
                        "shard_errors",
                        "explain_state",
                    )
                    pipe.hset(
                        key,
                        mapping={
                            "state": JobState.QUEUED.value,
                            "spec": spec_json,
                            "epoch": str(epoch),
                            "queued_at": repr(now),
                        },
                    )
                    pipe.set(self.keys.live_shards(job_id), shards)
                    pipe.set(self.keys.failures(job_id), 0)
                    pipe.rpush(
                        self.keys.job_events(job_id),
                        json.dumps(
                            {
                                "state": "queued",
                                "at": now,
                                "from": cur.value,
                                "reason": f"extended (epoch {epoch})",
                            }
                        ),
                    )
                    pipe.execute()
                    return epoch
                except redis.WatchError:
                    continue
        raise JobStateError(f"job {job_id}: could not extend (store too busy); retry.")

    # ------------------------------------------------------------------ logs, deletion
    def log(self, job_id: str, line: str) -> None:
        pipe = self._r.pipeline(transaction=False)
        pipe.rpush(self.keys.logs(job_id), f"{time.strftime('%Y-%m-%d %H:%M:%S')} {line}")
        pipe.ltrim(self.keys.logs(job_id), -LOG_LINES, -1)
        pipe.execute()

    def logs(self, job_id: str) -> list[str]:
        return [_text(x) for x in self._r.lrange(self.keys.logs(job_id), 0, -1)]

    def delete_job(self, job_id: str) -> int:
        """Remove a job's record, trials, journal, predictions and artifacts (not shared data)."""
        self.job(job_id)
        keys = [
            self.keys.job(job_id),
            *self._r.scan_iter(match=self.keys.job_pattern(job_id), count=1000),
        ]
        pipe = self._r.pipeline(transaction=True)
        for k in keys:
            pipe.delete(k)
        pipe.zrem(self.keys.jobs, job_id)
        pipe.execute()
        return len(keys)


class JobReader:
    """What the trial process may read of a job: its record, its table, stored predictions.

    The trial process runs candidate code on the user's table; it gets no way to write.
    """

    def __init__(self, client: redis.Redis, keys: Keys) -> None:
        self._store = JobStore(client, keys)

    def job(self, job_id: str) -> dict[str, Any]:
        return self._store.job(job_id)

    def get_data(self, digest: str) -> bytearray:
        return self._store.get_data(digest)

    def oof(self, job_id: str, number: int) -> bytes | None:
        return self._store.oof(job_id, number)

    def library_members(self, job_id: str, families: Iterable[str]) -> dict[int, bytes]:
        return self._store.library_members(job_id, families)
