"""What a worker process holds for its whole life: settings, store, queue, trial child."""

from __future__ import annotations

import os
import socket
import threading
from dataclasses import dataclass, field

from tuttiml.service.config import Settings
from tuttiml.service.connection import connect
from tuttiml.service.queue import TaskQueue
from tuttiml.service.store import JobStore
from tuttiml.workers.child import TrialProcess


@dataclass
class WorkerContext:
    """Per-process state shared by the task functions (set up once by the worker launcher)."""

    settings: Settings
    url: str
    store: JobStore
    queue: TaskQueue
    trials: TrialProcess
    name: str
    threads: int = 1
    stop: threading.Event = field(default_factory=threading.Event)
    doing: dict[str, object] = field(default_factory=dict)

    @classmethod
    def create(
        cls, settings: Settings, url: str, *, name: str | None = None, threads: int = 1
    ) -> WorkerContext:
        from tuttiml.service.keys import Keys

        client = connect(url)
        keys = Keys(settings.prefix)
        return cls(
            settings=settings,
            url=url,
            store=JobStore(client, keys),
            queue=TaskQueue(client, keys),
            trials=TrialProcess(threads),
            name=name or f"{socket.gethostname()}-{os.getpid()}",
            threads=threads,
        )

    def request(self, job_id: str, **extra: object) -> dict[str, object]:
        """A trial-process request about ``job_id``: where its store is, plus ``extra``."""
        return {"redis_url": self.url, "prefix": self.settings.prefix, "job_id": job_id, **extra}


_CURRENT: WorkerContext | None = None


def install(ctx: WorkerContext) -> None:
    global _CURRENT
    _CURRENT = ctx


def current() -> WorkerContext:
    """The process's context; built from the environment when no launcher installed one."""
    global _CURRENT
    if _CURRENT is None:
        from tuttiml.service.connection import resolve_url

        settings = Settings.from_env()
        _CURRENT = WorkerContext.create(settings, resolve_url(settings))
    return _CURRENT
