"""Composites of scored members during the search, from their stored out-of-fold predictions.

Every complete trial keeps its out-of-fold (OOF) predictions (the best few of each family, see
``SearchSpec.library_size``). A weighted vote (greedy ensemble selection) and a stack (a
meta-model on the members' predictions) over those members need no new fold fits: the
library step of finalize (``workers.library``, run in the trial process) builds and scores
them honestly (nested over the folds). This module runs that same step *during* the search,
every few completed trials, so the composites show on the leaderboard as soon as they exist
and the schedule never has to pay for composite trials that re-fit members in every fold.

One shard at a time refreshes (a short-lived claim in the store), only when enough new
trials completed since the last refresh, and each shard spends at most ``MAX_SHARE`` of its
time on it. Finalize rebuilds the library on the final members and commits it, replacing
what the search stored.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable, Sequence

from tuttiml.service.records import LibraryRecord
from tuttiml.service.store import JobState
from tuttiml.workers.child import ChildFailure, TrialCrashed
from tuttiml.workers.context import WorkerContext

log = logging.getLogger(__name__)

#: Refresh after at least this many newly completed trials ...
EVERY_TRIALS = 3
#: ... and at least this many seconds after the previous refresh (any shard's).
EVERY_SECONDS = 8.0
#: A shard stops refreshing once refreshes took this share of its time so far.
MAX_SHARE = 0.08
#: The claim on a refresh expires after this many seconds (a dead refresher frees it).
CLAIM_SECONDS = 120.0
#: The trial process gets this long for one refresh.
REFRESH_TIMEOUT = 120.0


class LibraryRefresher:
    """Rebuilds the job's library composites from stored OOF predictions, now and then.

    Args:
        ctx: the worker's context (store, trial process).
        job_id: the job.
        families: the job's families (their kept members form the library).
        library_size: ``SearchSpec.library_size``; 0 turns the refresh off.
        log_line: where to write a line for the job's log.
    """

    def __init__(
        self,
        ctx: WorkerContext,
        job_id: str,
        families: Sequence[str],
        *,
        library_size: int,
        log_line: Callable[[str], None] | None = None,
    ) -> None:
        self.ctx, self.job_id, self.store = ctx, job_id, ctx.store
        self.families = list(families)
        self.enabled = library_size > 0
        self.log_line = log_line or (lambda line: log.info("job %s %s", job_id, line))
        self.started = time.monotonic()
        self.spent = 0.0

    def due(self) -> bool:
        """True when enough trials completed and enough time passed since the last refresh."""
        if not self.enabled:
            return False
        elapsed = time.monotonic() - self.started
        if self.spent > MAX_SHARE * max(elapsed, EVERY_SECONDS):
            return False
        rec = self.store.job(self.job_id)
        done = int(rec.get("n_complete", 0) or 0)
        last_n = int(rec.get("library_n", 0) or 0)
        last_at = float(rec.get("library_at", 0.0) or 0.0)
        return done >= max(last_n + EVERY_TRIALS, 2) and time.time() - last_at >= EVERY_SECONDS

    def maybe_refresh(self) -> list[LibraryRecord] | None:
        """Refresh if due and no other shard is at it; returns the stored composites."""
        if not self.due():
            return None
        if not self.store.claim(self.job_id, "library", self.ctx.name, CLAIM_SECONDS):
            return None
        t0 = time.monotonic()
        try:
            return self.refresh()
        finally:
            self.spent += time.monotonic() - t0
            self.store.release(self.job_id, "library", self.ctx.name)

    def refresh(self) -> list[LibraryRecord] | None:
        """Build the composites now and store them where the leaderboard reads them."""
        n_before = int(self.store.job(self.job_id).get("n_complete", 0) or 0)
        t0 = time.time()
        request = self.ctx.request(self.job_id, families=self.families)
        try:
            _, result = self.ctx.trials.request("library", request, timeout=REFRESH_TIMEOUT)
        except (ChildFailure, TrialCrashed) as exc:
            self.log_line(f"library refresh skipped: {exc}")
            self.store.set_fields(self.job_id, library_n=n_before, library_at=repr(time.time()))
            return None
        library = [
            LibraryRecord.load(doc).model_copy(update={"during_search": True}) for doc in result
        ]
        if self.store.state(self.job_id) is not JobState.RUNNING:
            return None  # finalize owns the library from here on
        self.store.set_extra(self.job_id, "library", [ens.dump() for ens in library])
        self.store.set_fields(self.job_id, library_n=n_before, library_at=repr(time.time()))
        if library:
            best = max(library, key=lambda ens: ens.score)
            self.log_line(
                f"library composites refreshed over {n_before} trials in "
                f"{time.time() - t0:.1f} s: best {best.id} score={best.score:.5f}"
            )
        return library
