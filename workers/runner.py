"""The worker launcher behind ``tutti worker`` / ``python -m workers``.

It starts ``--processes`` worker processes, each an RQ worker (JSON serializer, allow-listed
tasks) that runs search slices and finalize tasks and owns one supervised trial child. Heavy
modules are imported in each worker before it takes work; every process that fits runs with
``threads`` threads (``processes × threads ≤ cores``). A SIGTERM asks every worker to stop its
current trial at the end of a fold (failed and retried) and exit, within bounded time whatever
state Redis is in (``workers.shutdown``); if the launcher dies, its workers and their trial
children die with it.
"""

from __future__ import annotations

import argparse
import contextlib
import logging
import multiprocessing as mp
import os
import signal
import sys
import threading
import time
from dataclasses import asdict, dataclass
from typing import Any

log = logging.getLogger("tutti.worker")
SWEEP_SECONDS = 30.0
HEARTBEAT_SECONDS = 2.0
RESTART_SECONDS = 5.0


@dataclass(frozen=True)
class WorkerOptions:
    """Options of one worker process (JSON-friendly so spawn can pass them)."""

    url: str | None
    prefix: str | None
    home: str | None
    exit_when_empty: bool
    threads: int
    name: str | None
    shard_seconds: float | None = None
    lease_seconds: float | None = None


def _make_worker_class() -> type:
    from rq.exceptions import StopRequested
    from rq.utils import now
    from rq.worker import SimpleWorker, WorkerStatus
    from tuttiml.service.queue import ALLOWED_TASKS

    class TuttiWorker(SimpleWorker):
        """RQ's in-process worker that runs only our allow-listed task functions."""

        shutdown: Any = None  # workers.shutdown.Shutdown, set by worker_main

        def perform_job(self, job: Any, queue: Any, execution: Any) -> bool:
            try:
                name, instance = job.func_name, job._instance
            except Exception:  # undecodable payload (e.g. a pickle): refuse it
                name, instance = None, None
            if name not in ALLOWED_TASKS or instance is not None:
                try:
                    raise PermissionError(
                        f"refused task {name!r}: tutti workers run only "
                        f"{', '.join(sorted(ALLOWED_TASKS))}"
                    )
                except PermissionError:
                    self._finalize_failure(job, queue, execution, sys.exc_info())
                log.error("refused forged or foreign task %r (job %s)", name, job.id)
                return False
            with self.shutdown.busy():
                return bool(super().perform_job(job, queue, execution))

        def request_stop(self, signum: Any, frame: Any) -> None:
            """Warm shutdown without touching Redis in the handler (see workers.shutdown).

            RQ's own handler writes the shutdown date to Redis from inside the handler: with
            Redis gone that blocks for minutes, and it can deadlock on the connection pool's
            lock held by the interrupted main thread.
            """
            self.shutdown.begin()
            self._shutdown_requested_date = now()
            signal.signal(signal.SIGINT, self.request_force_stop)
            signal.signal(signal.SIGTERM, self.request_force_stop)
            if self.get_state() == WorkerStatus.BUSY:
                self._stop_requested = True  # RQ's loop ends after the current task
            else:
                raise StopRequested()

    return TuttiWorker


def _active_jobs(ctx: Any) -> bool:
    from tuttiml.service.store import JobState

    for job_id in ctx.store.job_ids():
        with contextlib.suppress(Exception):
            st = ctx.store.state(job_id)
            if st in (JobState.QUEUED, JobState.RUNNING, JobState.FINALIZING):
                return True
            if st is JobState.CANCELLED and not ctx.store.committed_epoch(job_id):
                return True
            if st.terminal and ctx.store.pending_explanations(job_id) is not None:
                return True  # the model is committed; its explanations are still to come
    return False


def worker_main(opts: dict[str, Any]) -> None:
    """Body of one worker process."""
    o = WorkerOptions(**opts)
    from tuttiml.workers.runtime import die_with_parent, limit_threads

    die_with_parent(signal.SIGKILL)
    limit_threads(o.threads)
    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(name)s %(message)s")
    # preload the heavy modules once, before any work (a slice must not pay for imports)
    import lightgbm  # noqa: F401
    import optuna  # noqa: F401
    import sklearn.ensemble  # noqa: F401
    import tuttiml.workers.explain_task
    import tuttiml.workers.finalize
    import tuttiml.workers.search  # noqa: F401
    from tuttiml.service.config import Settings
    from tuttiml.service.connection import resolve_url
    from tuttiml.workers.context import WorkerContext, install
    from tuttiml.workers.shutdown import Shutdown
    from tuttiml.workers.sweep import sweep

    settings = Settings.from_env(
        redis_url=o.url,
        prefix=o.prefix,
        home=o.home,
        shard_seconds=o.shard_seconds,
        lease_seconds=o.lease_seconds,
    )
    url = resolve_url(settings)
    ctx = WorkerContext.create(settings, url, name=o.name, threads=o.threads)
    install(ctx)
    ctx.trials.start()
    cls = _make_worker_class()
    cls.shutdown = Shutdown(ctx, ctx.settings.stop_grace_seconds)
    worker = cls(
        [ctx.queue.final, ctx.queue.search],
        connection=ctx.queue.connection,
        serializer="json",
        # RQ refuses a name still registered by a worker that was killed (until its TTL runs
        # out, minutes): with --name, a restarted worker would die at start without the pid
        name=f"{ctx.name}.{os.getpid()}",
    )

    started = time.time()

    def heartbeat() -> None:
        doc = {
            "name": ctx.name,
            "host": os.uname().nodename,
            "pid": os.getpid(),
            "started_at": started,
            "updated_at": time.time(),
            **ctx.doing,
        }
        ctx.store.put_worker(ctx.name, doc, ttl=int(3 * HEARTBEAT_SECONDS) + 1)

    def sweeper() -> None:
        interval = min(SWEEP_SECONDS, max(2.0, ctx.settings.lease_seconds))
        last_sweep = 0.0
        while not ctx.stop.wait(HEARTBEAT_SECONDS):
            with contextlib.suppress(Exception):
                heartbeat()
            if time.monotonic() - last_sweep >= interval:
                last_sweep = time.monotonic()
                with contextlib.suppress(Exception):
                    sweep(ctx)

    with contextlib.suppress(Exception):
        heartbeat()
        sweep(ctx)
    threading.Thread(target=sweeper, daemon=True, name="tutti-sweep").start()
    try:
        if not o.exit_when_empty:
            worker.work(with_scheduler=False, logging_level="WARNING")
        else:
            while not ctx.stop.is_set():
                worker.work(burst=True, with_scheduler=False, logging_level="WARNING")
                if ctx.stop.is_set() or not _active_jobs(ctx):
                    break
                with contextlib.suppress(Exception):
                    sweep(ctx)
                time.sleep(1.0)
    finally:
        ctx.stop.set()
        ctx.trials.close()
        with contextlib.suppress(Exception):
            ctx.store.drop_worker(ctx.name)


WORKER_EXAMPLE = "example: tutti start-workers --processes 2 --exit-when-empty"


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="tutti start-workers",
        description=(
            "Run worker processes on this machine: they take search slices and finalize tasks "
            "of every job in the store, one model fit per process at a time. Ctrl-C or "
            "SIGTERM lets each finish or fail its current trial, then stop."
        ),
        epilog=f"{WORKER_EXAMPLE}\n(also: python -m tuttiml.workers …)",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_worker_arguments(p)
    return p


class _DeprecatedFlag(argparse.Action):
    """An old spelling of a flag: still works, warns once on stderr."""

    def __init__(self, *args: Any, new: str, **kwargs: Any) -> None:
        self.new = new
        super().__init__(*args, nargs=0, **kwargs)

    def __call__(self, parser: Any, namespace: Any, values: Any, option: Any = None) -> None:
        print(
            f"tutti: warning: {option} is deprecated and will be removed in tutti 0.3; "
            f"use {self.new}",
            file=sys.stderr,
        )
        setattr(namespace, self.dest, True)


def add_worker_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--processes",
        "-p",
        metavar="N",
        type=int,
        default=None,
        help="worker processes on this machine (default: cores // threads)",
    )
    p.add_argument(
        "--cores",
        metavar="N",
        type=int,
        default=None,
        help="cores this machine may use (default: all)",
    )
    p.add_argument(
        "--threads", metavar="N", type=int, default=1, help="threads per model fit (default: 1)"
    )
    p.add_argument(
        "--exit-when-empty",
        dest="exit_when_empty",
        action="store_true",
        help="exit once the queues are empty and no job is left to run (default: keep waiting "
        "for new jobs)",
    )
    p.add_argument(
        "--burst",
        dest="exit_when_empty",
        action=_DeprecatedFlag,
        new="--exit-when-empty",
        help=argparse.SUPPRESS,
    )
    p.add_argument(
        "--redis-url",
        metavar="URL",
        default=None,
        help="Redis URL shared by clients and workers (default: $TUTTI_REDIS_URL, else the "
        "embedded server under $TUTTI_HOME)",
    )
    p.add_argument(
        "--prefix",
        default=None,
        help="key prefix of the store (default: $TUTTI_PREFIX, else tutti)",
    )
    p.add_argument("--name", default=None, help="worker name prefix (default: HOST-PID)")


def plan(processes: int | None, cores: int | None, threads: int) -> tuple[int, int]:
    """(processes, threads) such that processes × threads never exceeds the cores."""
    total = cores or os.cpu_count() or 1
    if threads < 1 or total < 1:
        raise SystemExit("--threads and --cores must be at least 1")
    threads = min(threads, total)
    most = max(total // threads, 1)
    if processes is None:
        return most, threads
    if processes < 1:
        raise SystemExit("--processes must be at least 1")
    if processes * threads > total:
        raise SystemExit(
            f"--processes {processes} × --threads {threads} exceeds --cores {total}; "
            f"use at most {most} processes"
        )
    return processes, threads


def launch(args: argparse.Namespace, *, home: str | None = None) -> int:
    """Start the worker processes and supervise them until they exit or a signal arrives.

    Without ``--exit-when-empty`` a worker process that exits on its own (it gave up on a
    Redis that stayed away, or refused its writes, for longer than its retries) is started
    again after ``RESTART_SECONDS``, so a long outage does not leave the machine short.
    """
    from tuttiml.workers.runtime import limit_threads

    processes, threads = plan(args.processes, args.cores, args.threads)
    limit_threads(threads)
    ctx = mp.get_context("spawn")
    base = args.name or f"{os.uname().nodename}-{os.getpid()}"

    def start(i: int) -> Any:
        opts = WorkerOptions(
            url=args.redis_url,
            prefix=args.prefix,
            home=home,
            exit_when_empty=args.exit_when_empty,
            threads=threads,
            name=f"{base}.{i}",
        )
        p = ctx.Process(target=worker_main, args=(asdict(opts),), name=f"tutti-worker-{i}")
        p.start()
        return p

    procs = [start(i) for i in range(processes)]
    stopping = threading.Event()

    def forward(signum: int, _frame: Any) -> None:
        stopping.set()
        for p in procs:
            with contextlib.suppress(ProcessLookupError, TypeError):
                os.kill(p.pid, signal.SIGTERM)

    signal.signal(signal.SIGTERM, forward)
    signal.signal(signal.SIGINT, forward)
    print(
        f"tutti: {processes} worker process(es), {threads} thread(s) per fit; "
        f"{'exits when the queues are empty' if args.exit_when_empty else 'Ctrl-C to stop'}",
        flush=True,
    )
    exited: dict[int, float] = {}
    while not args.exit_when_empty and not stopping.is_set():
        for i, p in enumerate(procs):
            if p.is_alive() or stopping.is_set():
                continue
            since = exited.setdefault(i, time.monotonic())
            if time.monotonic() - since >= RESTART_SECONDS:
                print(f"tutti: worker {base}.{i} exited ({p.exitcode}); restarting", flush=True)
                procs[i] = start(i)
                exited.pop(i)
        stopping.wait(1.0)
    for p in procs:
        p.join()
    return max((abs(p.exitcode or 0) for p in procs), default=0)


def main(argv: list[str] | None = None) -> int:
    return launch(parser().parse_args(argv))
