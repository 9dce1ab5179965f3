"""Trial and task leases, and the reaper that fails trials whose lease lapsed.

Optuna's journal storage has no heartbeat, so a worker that dies mid-trial leaves the trial
RUNNING for ever. The worker process (not its trial child) holds a short Redis lease per
running trial, renewed by a thread; the reaper fails RUNNING trials whose lease is gone, gives
their ticket back and queues their retry.

The reaper judges age by its own monotonic clock (a trial must be seen without a lease for a
whole lease period before it is failed), never by the trial's start time: that is another
machine's wall clock, and a clock running ahead there would make its dead trials look young
for ever.
"""

from __future__ import annotations

import contextlib
import logging
import threading
import time
from collections.abc import Callable
from typing import Any

import optuna
from optuna.trial import FrozenTrial, TrialState
from tuttiml.service.records import TrialRow
from tuttiml.workers.context import WorkerContext

log = logging.getLogger(__name__)

#: ``retry(study, number, params, retries)`` queues a failed trial's parameters again.
RetryFn = Callable[[optuna.Study, int, dict[str, Any], int], None]


class Lease:
    """A Redis key with a short expiry, refreshed by a thread while a trial or task runs."""

    def __init__(self, ctx: WorkerContext, key: str, seconds: float) -> None:
        self._store, self._key, self._ttl = ctx.store, key, max(round(seconds * 1000), 1000)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._beat, daemon=True, name="tutti-lease")

    def _beat(self) -> None:
        while not self._stop.wait(self._ttl / 3000.0):
            with contextlib.suppress(Exception):
                self._store.hold_lease(self._key, self._ttl)

    def __enter__(self) -> Lease:
        self._store.hold_lease(self._key, self._ttl)
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join(2)
        with contextlib.suppress(Exception):
            self._store.drop_lease(self._key)


class Reaper:
    """Finds and fails the RUNNING trials of one job whose worker is gone."""

    def __init__(self, ctx: WorkerContext, job_id: str) -> None:
        self.ctx, self.job_id, self.store = ctx, job_id, ctx.store
        self._unleased_since: dict[int, float] = {}  # trial id → monotonic first sighting

    def settled(self) -> bool:
        """False for two lease periods after Redis restarted: live trials must renew first.

        Redis expiries are wall-clock, so an outage longer than the lease expires every lease;
        reaping right after the restart would fail trials that are still running.
        """
        try:
            uptime = self.store.server_uptime()
        except Exception:
            return False
        return uptime >= 2 * self.ctx.settings.lease_seconds

    def orphans(self, study: optuna.Study) -> list[FrozenTrial]:
        """RUNNING trials that hold no lease right now (dead worker, or just asked)."""
        return [
            t
            for t in study.get_trials(deepcopy=False, states=(TrialState.RUNNING,))
            if not self.store.trial_leased(self.job_id, t._trial_id)
        ]

    def reap(self, study: optuna.Study, *, retry: RetryFn | None) -> int:
        """Fail the trials seen without a lease for a lease period; returns how many.

        A trial seen unleased for the first time is only noted: a live worker writes its lease
        milliseconds after asking, so one lease period later only dead ones are still unleased.
        """
        if not self.settled():
            return 0
        now = time.monotonic()
        seen: dict[int, float] = {}
        n = 0
        for t in self.orphans(study):
            first = self._unleased_since.get(t._trial_id, now)
            if now - first < self.ctx.settings.lease_seconds:
                seen[t._trial_id] = first
                continue
            try:
                study._storage.set_trial_state_values(t._trial_id, TrialState.FAIL)
            except Exception:  # closed in the meantime: race-tolerant
                continue
            n += 1
            self._record(study, t, retry)
        self._unleased_since = seen
        return n

    def _record(self, study: optuna.Study, t: FrozenTrial, retry: RetryFn | None) -> None:
        """Book a reaped trial: ticket back, failure counted, row written, retry queued."""
        self.store.return_ticket(self.job_id)
        self.store.add_failure(self.job_id)
        retries = int(t.user_attrs.get("retries", 0))
        row = TrialRow(
            number=t.number,
            retry_of=t.user_attrs.get("retry_of"),
            retries=retries,
            family=str(t.params.get("family", "unknown")),
            state="failed",
            params={k: v for k, v in t.params.items() if k != "family"},
            error="lease expired: its worker died or lost Redis",
            reaped=True,
            finished_at=time.time(),
        )
        self.store.record_trial(self.job_id, row)
        line = f"trial {t.number} reaped (lease expired)"
        log.info("job %s %s", self.job_id, line)
        with contextlib.suppress(Exception):
            self.store.log(self.job_id, f"[{self.ctx.name}] {line}")
        if retry is not None and "family" in t.params:
            retry(study, t.number, dict(t.params), retries)

    def drain(self, study: optuna.Study, *, within: float) -> int:
        """Reap (without retries) every unleased trial, waiting up to ``within`` seconds.

        For finalize: the search is over, so a trial still RUNNING without a lease belongs
        to a dead worker and must end failed rather than stay RUNNING in the study.
        """
        end = time.monotonic() + within
        n = 0
        while True:
            n += self.reap(study, retry=None)
            if not self.orphans(study) or time.monotonic() >= end:
                return n
            if self.ctx.stop.wait(min(1.0, self.ctx.settings.lease_seconds / 4)):
                return n
