"""The supervised trial process: all model fitting happens here, never in the worker itself.

A signal cannot interrupt a native fit, so per-trial timeouts and memory limits are enforced
by killing this child and starting a fresh one. The child dies with its worker (Linux
parent-death signal), so killing a worker's process tree leaves nothing behind. Parent and
child talk over a pipe between our own processes; nothing read from Redis is unpickled.

Protocol (parent → child): ``("evaluate", request)``, ``("refit", request)``, and after each
``("fold", i, score)`` message the answer ``("go",)`` or ``("stop",)``.
Child → parent: ``("fold", i, score)``, ``("done", result)``, ``("pruned", result)``,
``("refit_done", result)`` or ``("error", type, message, traceback)``.
"""

from __future__ import annotations

import contextlib
import logging
import multiprocessing as mp
import os
import resource
import signal
import sys
import time
import traceback
from dataclasses import dataclass
from multiprocessing.connection import Connection
from typing import Any

log = logging.getLogger(__name__)


class TrialCrashed(Exception):
    """The trial process died, timed out or was killed; ``reason`` says which."""

    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


@dataclass
class ChildFailure(Exception):
    """The candidate raised inside the trial process."""

    kind: str
    message: str
    trace: str

    def __str__(self) -> str:
        return f"{self.kind}: {self.message}"


# ---------------------------------------------------------------------------- child side
def _vm_bytes() -> int:
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmSize:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


@contextlib.contextmanager
def _memory_limit(limit_mb: int | None):
    """Cap the address space growth of this process for one trial (MemoryError past it)."""
    if not limit_mb:
        yield
        return
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    cap = _vm_bytes() + int(limit_mb) * 1024 * 1024
    if hard != resource.RLIM_INFINITY:
        cap = min(cap, hard)
    resource.setrlimit(resource.RLIMIT_AS, (cap, hard))
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (soft, hard))


def _child_main(conn: Connection, threads: int, parent: int) -> None:
    from tuttiml.workers.runtime import die_with_parent, limit_threads, return_freed_memory

    die_with_parent()
    if os.getppid() != parent:  # the worker died while this process was still starting
        os._exit(0)
    return_freed_memory()
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the worker decides when we stop
    signal.signal(signal.SIGTERM, signal.SIG_IGN)  # a trial is never cut short by TERM
    limit_threads(threads)
    from tuttiml.workers import trial_work  # heavy imports after the thread limits

    cache = trial_work.DataCache()
    while True:
        try:
            msg = conn.recv()
        except EOFError:
            return
        kind, request = msg[0], (msg[1] if len(msg) > 1 else {})
        if kind == "exit":  # nothing to save: skip the interpreter's slow teardown
            with contextlib.suppress(Exception):
                sys.stdout.flush()
                sys.stderr.flush()
            os._exit(0)
        try:
            with _memory_limit(request.get("memory_mb")):
                if kind == "evaluate":
                    out = trial_work.evaluate(request, cache, conn)
                elif kind == "library":
                    out = ("library_done", trial_work.library(request, cache))
                elif kind == "prepare":
                    cache.get(request)  # decode the job's table before the first trial
                    out = ("ready", {})
                elif kind == "leakage":
                    out = ("leakage_done", trial_work.leakage(request, cache))
                elif kind == "selection":
                    out = ("selection_done", trial_work.selection(request, cache))
                elif kind == "explain":
                    out = ("explain_done", trial_work.explain(request, cache))
                elif kind == "refit":
                    out = ("refit_done", trial_work.refit(request, cache))
                else:
                    raise ValueError(f"unknown message {kind!r}")
            conn.send(out)
        except BaseException as exc:  # the trial's edge: report and keep serving
            if isinstance(exc, (KeyboardInterrupt, SystemExit)):
                raise
            conn.send(
                ("error", type(exc).__name__, str(exc)[:2000], traceback.format_exc()[-6000:])
            )


# ---------------------------------------------------------------------------- parent side
class TrialProcess:
    """Parent-side handle of the trial child: start, talk, time out, kill, respawn."""

    def __init__(self, threads: int = 1) -> None:
        self.threads = threads
        self._ctx = mp.get_context("spawn")
        self._proc: Any = None
        self._conn: Connection | None = None

    @property
    def pid(self) -> int | None:
        return self._proc.pid if self._proc is not None and self._proc.is_alive() else None

    def start(self) -> None:
        if self._proc is not None and self._proc.is_alive():
            return
        parent, child = self._ctx.Pipe()
        self._proc = self._ctx.Process(
            target=_child_main,
            args=(child, self.threads, os.getpid()),
            name="tutti-trial",
            daemon=True,
        )
        self._proc.start()
        child.close()
        self._conn = parent

    def kill(self) -> None:
        """Kill the child at once (a native fit ignores anything gentler)."""
        if self._proc is None:
            return
        with contextlib.suppress(ProcessLookupError, OSError, AttributeError):
            os.kill(self._proc.pid, signal.SIGKILL)
        self._proc.join(5)
        if self._conn is not None:
            self._conn.close()
        self._proc, self._conn = None, None

    def close(self) -> None:
        if self._proc is not None and self._proc.is_alive() and self._conn is not None:
            with contextlib.suppress(OSError, BrokenPipeError):
                self._conn.send(("exit",))
            self._proc.join(3)
        self.kill()

    def send(self, msg: tuple[Any, ...]) -> None:
        assert self._conn is not None
        self._conn.send(msg)

    def receive(self, deadline: float) -> tuple[Any, ...]:
        """Next message, or TrialCrashed when the deadline passes or the child dies."""
        assert self._conn is not None and self._proc is not None
        while True:
            left = deadline - time.monotonic()
            if left <= 0:
                self.kill()
                raise TrialCrashed("timeout")
            try:
                if self._conn.poll(min(left, 1.0)):
                    return self._conn.recv()  # type: ignore[no-any-return]
            except (EOFError, OSError):
                pass
            else:
                if self._proc.is_alive():
                    continue
            code = self._proc.exitcode
            self.kill()
            why = f"killed by signal {-code}" if code is not None and code < 0 else f"exit {code}"
            raise TrialCrashed(f"trial process died ({why}); often out of memory")

    def request(
        self, kind: str, request: dict[str, Any], *, timeout: float, on_fold: Any = None
    ) -> Any:
        """Run one evaluate/refit request; ``on_fold(i, score) -> bool`` answers fold messages.

        Raises:
            ChildFailure: the candidate raised.
            TrialCrashed: timeout or the child died.
        """
        self.start()
        self.send((kind, request))
        deadline = time.monotonic() + timeout
        while True:
            msg = self.receive(deadline)
            if msg[0] == "fold":
                try:
                    go = True if on_fold is None else bool(on_fold(msg[1], msg[2]))
                except BaseException:
                    # the child waits for an answer it will never get: a later request would
                    # be read as that answer, so start the next one with a fresh child
                    self.kill()
                    raise
                self.send(("go",) if go else ("stop",))
                continue
            if msg[0] == "error":
                raise ChildFailure(msg[1], msg[2], msg[3])
            return msg
