"""Bounded shutdown of a worker process after SIGTERM, whatever state Redis is in.

On SIGTERM the worker takes no more work and a trial in progress stops at the end of its
current fold; its shard fails it and queues its retry (the ticket comes back). Nothing here
waits on Redis inside the signal handler: a handler that runs a Redis command can deadlock on
the connection pool's lock held by the interrupted main thread, and with Redis gone its
retries last minutes. A watchdog thread bounds the rest:

- from the signal on, Redis commands give up after a couple of quick retries;
- a worker idle for ``IDLE_SECONDS`` is ended (even if a Redis call still hangs);
- a trial that has not reached the end of a fold ``grace`` seconds after the signal has its
  trial process killed, so its shard fails and retries it;
- ``FINAL_SECONDS`` later the process exits in any case.

A hard exit loses nothing: a trial it leaves RUNNING holds a lease that lapses, and the reaper
fails and retries it; a shard or finalize it leaves is re-enqueued by the sweep.
"""

from __future__ import annotations

import contextlib
import logging
import os
import signal
import sys
import threading
import time
from collections.abc import Iterator

from tuttiml.workers.context import WorkerContext

log = logging.getLogger(__name__)
IDLE_SECONDS = 3.0
FINAL_SECONDS = 10.0
POLL_SECONDS = 0.2


class Shutdown:
    """The SIGTERM side of one worker process: stop flag, busy flag and watchdog."""

    def __init__(self, ctx: WorkerContext, grace: float) -> None:
        self.ctx, self.grace = ctx, grace
        self._busy = threading.Event()
        self._begun = threading.Event()
        self.trial_killed = False

    @property
    def requested(self) -> bool:
        return self._begun.is_set()

    @contextlib.contextmanager
    def busy(self) -> Iterator[None]:
        """Mark the process busy (a task is running) for the watchdog."""
        self._busy.set()
        try:
            yield
        finally:
            self._busy.clear()

    def begin(self) -> None:
        """Called from the signal handler: no Redis, no locks; idempotent."""
        if self._begun.is_set():
            return
        self._begun.set()
        self.ctx.stop.set()
        with contextlib.suppress(Exception):
            self.ctx.store.give_up_quickly()
        threading.Thread(target=self._watch, daemon=True, name="tutti-shutdown").start()

    def _watch(self) -> None:
        t0 = time.monotonic()
        idle_since: float | None = None
        grace_over: float | None = None
        while True:
            now = time.monotonic()
            if self._busy.is_set():
                idle_since = None
            elif idle_since is None:
                idle_since = now
            if idle_since is not None and now - idle_since >= IDLE_SECONDS:
                self._exit(0, "idle after SIGTERM; exiting")
            if grace_over is None and now - t0 >= self.grace:
                grace_over = now
                self._kill_trial()
            if grace_over is not None and now - grace_over >= FINAL_SECONDS:
                self._exit(1, f"still busy {self.grace + FINAL_SECONDS:.0f} s after SIGTERM")
            time.sleep(POLL_SECONDS)

    def _kill_trial(self) -> None:
        """Kill the trial process if a trial still runs: its shard fails and retries it."""
        if self.ctx.doing.get("trial") is None:
            return
        pid = self.ctx.trials.pid
        if pid is None:
            return
        self.trial_killed = True
        log.warning("trial still running %.0f s after SIGTERM: killing it", self.grace)
        with contextlib.suppress(OSError):
            os.kill(pid, signal.SIGKILL)

    def _exit(self, code: int, why: str) -> None:
        """Leave now, whatever the main thread is blocked on (the trial process goes too)."""
        with contextlib.suppress(Exception):
            sys.stderr.write(f"tutti worker {self.ctx.name}: {why}\n")
            sys.stderr.flush()
        pid = self.ctx.trials.pid
        if pid is not None:
            with contextlib.suppress(OSError):
                os.kill(pid, signal.SIGKILL)
        os._exit(code)
