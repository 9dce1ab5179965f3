"""Chaos soak: jobs of several shapes on 4 worker processes in 3 environments, under faults.

Three worker environments share nothing but a TCP connection to one Redis (own HOME, TMPDIR,
working directory and TUTTI_HOME each; 2 + 1 + 1 worker processes). Environment "b" reaches
Redis through a small TCP relay on loopback that this script controls; environment "c" runs
with its clock shifted (an offset added to ``time.time`` by a ``sitecustomize`` module on its
PYTHONPATH). A seeded schedule injects, at random times and cycling through every kind:

- ``worker_kill``: SIGKILL to one environment's whole process group, restarted 2 s later;
- ``worker_freeze``: SIGSTOP to one worker process, SIGCONT after a while (frozen, not dead);
- ``redis_kill``: SIGKILL to Redis, restarted on the same files a few seconds later;
- ``redis_restart_finalize``: the same, at the moment a job is finalizing;
- ``link_drop``: the relay closes environment b's connections and refuses new ones;
- ``maxmemory``: Redis's ``maxmemory`` set just above its use (noeviction: writes refused);
- ``disk_full``: the append-only file's filesystem (a tmpfs mounted for the run when this
  process may mount, else none: the fault is then skipped and reported) is filled up;
- ``clock_skew``: environment c restarts with a new offset of up to ±2 minutes.

Jobs cycle through shapes: tiny, with hold-out, with a deadline, cancelled mid-way, extended
after finishing. At the end every job is checked: terminal state; complete + pruned trials and
the ticket counter agree with the budget; no trial RUNNING; one commit per epoch and the
leaderboard's exported mark names the committed pipeline; the exported file verifies and
predicts; no queue entry left. Worker memory (RSS of worker + trial processes that lived
through) may grow at most 10% after warm-up. Everything listens on 127.0.0.1 only.

    .venv/bin/python benchmarks/chaos.py                            # >= 40 jobs, >= 60 faults
    .venv/bin/python benchmarks/chaos.py --jobs 8 --faults 10 --minutes 12 --seed 5

Exit status 0 when every invariant held; the figures are printed as JSON.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import random
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import _common  # noqa: F401  (first of the third-party block: one thread per fit)
import psutil
import redis
from _common import ROOT, RedisServer

QUICK = {"TUTTI_EXPLAIN_MIN_SECONDS": "2", "TUTTI_EXPLAIN_MAX_SECONDS": "4"}
KINDS = (
    "worker_kill",
    "worker_freeze",
    "redis_kill",
    "redis_restart_finalize",
    "link_drop",
    "maxmemory",
    "disk_full",
    "clock_skew",
)
SHAPES = ("tiny", "holdout", "deadline", "cancel", "extend")
LOOPBACK = "127.0.0.1"


# ----------------------------------------------------------------------------- the relay
class Relay:
    """A TCP relay on loopback between one worker environment and Redis; can drop the link."""

    def __init__(self, target_port: int) -> None:
        self.target = (LOOPBACK, target_port)
        self.sock = socket.socket()
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind((LOOPBACK, 0))
        self.sock.listen(64)
        self.port = self.sock.getsockname()[1]
        self._down_until = 0.0
        self._conns: list[socket.socket] = []
        self._lock = threading.Lock()
        threading.Thread(target=self._accept, daemon=True).start()

    def drop(self, seconds: float) -> None:
        """Close every relayed connection and refuse new ones for ``seconds``."""
        self._down_until = time.monotonic() + seconds
        with self._lock:
            for c in self._conns:
                with contextlib.suppress(OSError):
                    c.shutdown(socket.SHUT_RDWR)
                    c.close()
            self._conns.clear()

    def _accept(self) -> None:
        while True:
            try:
                client, _ = self.sock.accept()
            except OSError:
                return
            if time.monotonic() < self._down_until:
                client.close()
                continue
            try:
                upstream = socket.create_connection(self.target, timeout=5)
            except OSError:
                client.close()
                continue
            upstream.settimeout(None)
            with self._lock:
                self._conns += [client, upstream]
            for a, b in ((client, upstream), (upstream, client)):
                threading.Thread(target=self._pipe, args=(a, b), daemon=True).start()

    @staticmethod
    def _pipe(src: socket.socket, dst: socket.socket) -> None:
        try:
            while data := src.recv(65536):
                dst.sendall(data)
        except OSError:
            pass
        for s in (src, dst):
            with contextlib.suppress(OSError):
                s.close()


# ----------------------------------------------------------------------------- environments
SITECUSTOMIZE = '''"""Chaos soak only: the wall clock runs TUTTI_CHAOS_CLOCK_OFFSET s off."""
import os
import time

_offset = float(os.environ.get("TUTTI_CHAOS_CLOCK_OFFSET") or 0)
if _offset:
    _wall, _wall_ns = time.time, time.time_ns
    time.time = lambda: _wall() + _offset
    time.time_ns = lambda: _wall_ns() + int(_offset * 1e9)
'''


@dataclass
class Environment:
    """One "machine": its own directories, environment variables and worker launcher."""

    name: str
    base: Path
    processes: int
    url: str
    prefix: str
    clock_offset: float = 0.0
    proc: subprocess.Popen[bytes] | None = None
    starts: int = 0

    def env(self) -> dict[str, str]:
        home = self.base / self.name
        for sub in ("home", "tmp", "work", "tutti", "site"):
            (home / sub).mkdir(parents=True, exist_ok=True)
        (home / "site" / "sitecustomize.py").write_text(SITECUSTOMIZE)
        env = {k: v for k, v in os.environ.items() if not k.startswith("TUTTI_")}
        env.update(
            HOME=str(home / "home"),
            TMPDIR=str(home / "tmp"),
            TUTTI_HOME=str(home / "tutti"),
            PYTHONPATH=f"{home / 'site'}{os.pathsep}{ROOT}",
            TUTTI_SHARD_SECONDS="15",
            TUTTI_LEASE_SECONDS="5",
            TUTTI_STOP_GRACE_SECONDS="5",
            TUTTI_CHAOS_CLOCK_OFFSET=repr(self.clock_offset),
            OMP_NUM_THREADS="1",
            **QUICK,
        )
        return env

    def start(self) -> None:
        cmd = [sys.executable, "-m", "tuttiml.workers", "--processes", str(self.processes)]
        cmd += ["--redis-url", self.url, "--prefix", self.prefix, "--name", self.name]
        log = open(self.base / f"{self.name}.log", "ab")  # noqa: SIM115
        self.proc = subprocess.Popen(
            cmd,
            cwd=self.base / self.name / "work",
            env=self.env(),
            stdout=log,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        self.starts += 1

    def kill(self) -> None:
        if self.proc is not None:
            with contextlib.suppress(ProcessLookupError):
                os.killpg(self.proc.pid, signal.SIGKILL)
            self.proc.wait(10)

    def stop(self, timeout: float = 60) -> float:
        """SIGTERM and wait; returns the seconds it took (killed after ``timeout``)."""
        if self.proc is None or self.proc.poll() is not None:
            return 0.0
        t0 = time.monotonic()
        os.kill(self.proc.pid, signal.SIGTERM)
        try:
            self.proc.wait(timeout)
        except subprocess.TimeoutExpired:
            self.kill()
        return time.monotonic() - t0

    def workers(self) -> list[psutil.Process]:
        """Worker processes (children of the launcher that are not its resource tracker)."""
        if self.proc is None:
            return []
        try:
            kids = psutil.Process(self.proc.pid).children()
        except psutil.NoSuchProcess:
            return []
        out = []
        for k in kids:
            with contextlib.suppress(psutil.Error):
                if "resource_tracker" not in " ".join(k.cmdline()):
                    out.append(k)
        return out


def tree_rss(p: psutil.Process) -> int:
    """RSS of a worker process plus its trial process."""
    try:
        return sum(q.memory_info().rss for q in [p, *p.children(recursive=True)])
    except psutil.NoSuchProcess:
        return 0


# ----------------------------------------------------------------------------- Redis
class Store:
    """The soak's Redis: append-only file on a small filesystem this script mounts."""

    def __init__(self, base: Path, disk_mb: int) -> None:
        self.dir = base / "redis"
        self.dir.mkdir()
        self.mounted = False
        if disk_mb and os.geteuid() == 0:
            run = subprocess.run(
                ["mount", "-t", "tmpfs", "-o", f"size={disk_mb}m", "tmpfs", str(self.dir)],
                capture_output=True,
            )
            self.mounted = run.returncode == 0
        self.server = RedisServer(self.dir)
        self.port = self.server.port

    def start(self) -> None:
        self.server.start()
        r = self.client()
        r.config_set("maxmemory-policy", "noeviction")
        r.config_set("auto-aof-rewrite-min-size", "8mb")

    def client(self) -> redis.Redis:
        return redis.Redis(host=LOOPBACK, port=self.port, socket_timeout=10)

    def kill(self) -> None:
        self.server.kill()

    def alive(self) -> bool:
        try:
            return bool(self.client().ping())
        except redis.RedisError:
            return False

    def fill_disk(self) -> Path | None:
        if not self.mounted:
            return None
        filler = self.dir / "filler"
        free = os.statvfs(self.dir)
        left = free.f_bavail * free.f_frsize
        with open(filler, "wb") as fh, contextlib.suppress(OSError):
            fh.write(b"\0" * max(left - 4096, 0))
        return filler

    def close(self) -> None:
        self.kill()
        if self.mounted:
            subprocess.run(["umount", "-l", str(self.dir)], capture_output=True)


# ----------------------------------------------------------------------------- jobs
def tables() -> dict[str, tuple[Any, str]]:
    """Open tables shipped by scikit-learn (breast cancer, wine, iris, diabetes)."""
    from sklearn.datasets import load_breast_cancer, load_diabetes, load_iris, load_wine

    return {
        "cancer": (load_breast_cancer(as_frame=True).frame, "target"),
        "wine": (load_wine(as_frame=True).frame, "target"),
        "iris": (load_iris(as_frame=True).frame, "target"),
        "diabetes": (load_diabetes(as_frame=True).frame, "target"),
    }


SHAPE_SPECS: dict[str, tuple[str, dict[str, Any]]] = {
    "tiny": ("cancer", {"max_trials": 8, "families": ["single"]}),
    "holdout": ("wine", {"max_trials": 8, "holdout": 0.2, "families": ["single", "bagging"]}),
    "deadline": ("diabetes", {"max_trials": 400, "wall_seconds": 45, "families": ["single"]}),
    "cancel": ("cancer", {"max_trials": 400, "families": ["single", "boosting"]}),
    "extend": ("iris", {"max_trials": 5, "families": ["single"]}),
}


@dataclass
class Tracked:
    shape: str
    job: Any
    submitted: float
    epochs: int = 1
    cancel_at: float | None = None
    extended: bool = False
    problems: list[str] = field(default_factory=list)

    def settled(self) -> bool:
        """Terminal, and whatever the shape still asks for (the extension) is done."""
        try:
            st = self.job.state
        except Exception:
            return False
        if not st.terminal:
            return False
        return self.shape != "extend" or self.extended


# ----------------------------------------------------------------------------- the soak
class Soak:
    def __init__(self, args: argparse.Namespace, base: Path) -> None:
        self.args, self.base = args, base
        self.rng = random.Random(args.seed)
        self.prefix = f"chaos{args.seed}"
        self.store = Store(base, args.disk_mb if "disk_full" in args.kinds else 0)
        self.store.start()
        self.relay = Relay(self.store.port)
        direct = f"redis://{LOOPBACK}:{self.store.port}/0"
        relayed = f"redis://{LOOPBACK}:{self.relay.port}/0"
        self.envs = [
            Environment("a", base, 2, direct, self.prefix),
            Environment("b", base, 1, relayed, self.prefix),
            Environment("c", base, 1, direct, self.prefix, clock_offset=37.0),
        ]
        from tuttiml.service.client import Client

        self.client = Client(url=direct, prefix=self.prefix)
        self.client.store.give_up_quickly()  # the soak's own loop must never wait on Redis
        self.tables = tables()
        self.jobs: list[Tracked] = []
        self.faults: list[tuple[float, str, str]] = []  # (at, kind, what happened)
        self.skipped: list[str] = []
        self.frozen: list[tuple[float, psutil.Process]] = []
        self.restore: list[tuple[float, str]] = []
        self.rss: dict[int, list[int]] = {}
        self.launcher_exits = 0

    # --------------------------------------------------------------- schedule
    def schedule(self, span: float) -> list[tuple[float, str]]:
        """``args.faults`` fault times spread over ``span`` seconds, every kind in turn."""
        kinds = [self.args.kinds[i % len(self.args.kinds)] for i in range(self.args.faults)]
        self.rng.shuffle(kinds)
        times = sorted(self.rng.uniform(20, span) for _ in kinds)
        return list(zip(times, kinds, strict=True))

    def submit(self, i: int) -> None:
        shape = self.args.shapes[i % len(self.args.shapes)]
        table, spec = SHAPE_SPECS[shape]
        frame, target = self.tables[table]
        job = self.client.submit(
            frame,
            target=target,
            parallelism=2,
            seed=self.args.seed * 1000 + i,
            trial_timeout=60,
            **{"wall_seconds": 900, **spec},
        )
        t = Tracked(shape, job, time.monotonic())
        if shape == "cancel":
            t.cancel_at = time.monotonic() + self.rng.uniform(20, 40)
        self.jobs.append(t)

    def steer(self) -> None:
        """Cancel and extend jobs when their shape says so."""
        now = time.monotonic()
        for t in self.jobs:
            with contextlib.suppress(Exception):
                if t.cancel_at is not None and now >= t.cancel_at:
                    t.cancel_at = None
                    t.job.cancel()
                if t.shape == "extend" and not t.extended and t.job.state.value == "finished":
                    t.job.extend(more_trials=3)
                    t.extended, t.epochs = True, 2

    # --------------------------------------------------------------- faults
    def inject(self, kind: str) -> str:
        rng = self.rng
        if kind == "worker_kill":
            env = rng.choice(self.envs)
            env.kill()
            time.sleep(2)
            env.start()
            return f"killed environment {env.name}"
        if kind == "worker_freeze":
            procs = [p for e in self.envs for p in e.workers()]
            if not procs:
                return "no worker to freeze"
            p = rng.choice(procs)
            seconds = rng.uniform(*self.args.freeze)
            with contextlib.suppress(psutil.Error):
                p.suspend()
                self.frozen.append((time.monotonic() + seconds, p))
            return f"froze pid {p.pid} for {seconds:.0f} s"
        if kind in ("redis_kill", "redis_restart_finalize"):
            if kind == "redis_restart_finalize":
                end = time.monotonic() + 60
                while time.monotonic() < end and not any(
                    self._state(t) == "finalizing" for t in self.jobs
                ):
                    self.tick()
                    time.sleep(0.2)
            self.store.kill()
            time.sleep(rng.uniform(1, 5))
            self.store.start()
            return "redis killed and restarted"
        if kind == "link_drop":
            seconds = rng.uniform(*self.args.drop)
            self.relay.drop(seconds)
            return f"environment b cut off for {seconds:.0f} s"
        if kind == "maxmemory":
            r = self.store.client()
            used = int(r.info("memory")["used_memory"])
            r.config_set("maxmemory", str(used + 512 * 1024))
            seconds = rng.uniform(10, 20)
            self.restore.append((time.monotonic() + seconds, "maxmemory"))
            return f"maxmemory at use + 512 KiB for {seconds:.0f} s"
        if kind == "disk_full":
            if self.store.fill_disk() is None:
                self.skipped.append(kind)
                return "skipped: cannot mount a small filesystem here"
            seconds = rng.uniform(10, 20)
            self.restore.append((time.monotonic() + seconds, "disk"))
            return f"AOF filesystem full for {seconds:.0f} s"
        if kind == "clock_skew":
            env = self.envs[2]
            env.clock_offset = rng.uniform(-120, 120)
            env.kill()
            env.start()
            return f"environment c restarted with clock offset {env.clock_offset:+.0f} s"
        raise ValueError(kind)

    def _state(self, t: Tracked) -> str:
        try:
            return str(t.job.state.value)
        except Exception:
            return "?"

    def tick(self) -> None:
        """Undo timed faults, restart what died, sample memory."""
        now = time.monotonic()
        for until, p in list(self.frozen):
            if now >= until:
                with contextlib.suppress(psutil.Error):
                    p.resume()
                self.frozen.remove((until, p))
        for until, what in list(self.restore):
            if now < until:
                continue
            self.restore.remove((until, what))
            if what == "disk":
                with contextlib.suppress(OSError):
                    (self.store.dir / "filler").unlink()
            if not self.store.alive():  # Redis may have stopped on a failed AOF write
                with contextlib.suppress(Exception):
                    self.store.kill()
                self.store.start()
            if what == "maxmemory":
                with contextlib.suppress(redis.RedisError):
                    self.store.client().config_set("maxmemory", "0")
        if not self.store.alive() and not self.restore:
            with contextlib.suppress(Exception):
                self.store.kill()
            self.store.start()
        for env in self.envs:
            if env.proc is not None and env.proc.poll() is not None:
                self.launcher_exits += 1  # nobody asked it to stop: a finding
                print(f"launcher of environment {env.name} exited on its own", flush=True)
                env.start()
            for p in env.workers():
                self.rss.setdefault(p.pid, []).append(tree_rss(p))

    # --------------------------------------------------------------- run
    def run(self) -> dict[str, Any]:
        t0 = time.monotonic()
        limit = self.args.minutes * 60
        plan = self.schedule(0.7 * limit)
        for env in self.envs:
            env.start()
        submitted = 0
        while time.monotonic() - t0 < limit:
            live = sum(not t.settled() for t in self.jobs)
            while submitted < self.args.jobs and live < self.args.concurrent:
                try:
                    self.submit(submitted)
                except Exception as exc:  # Redis down or full right now: a user retries
                    print(f"submit refused ({type(exc).__name__}: {exc}); retrying", flush=True)
                    break
                submitted, live = submitted + 1, live + 1
            self.steer()
            self.tick()
            while plan and time.monotonic() - t0 >= plan[0][0]:
                _, kind = plan.pop(0)
                what = self.inject(kind)
                self.faults.append((time.monotonic() - t0, kind, what))
                print(f"[{time.monotonic() - t0:6.0f} s] {kind}: {what}", flush=True)
            if not plan and submitted == self.args.jobs and all(t.settled() for t in self.jobs):
                break
            time.sleep(1.0)
        for _, p in self.frozen:
            with contextlib.suppress(psutil.Error):
                p.resume()
        self.restore = [(0.0, what) for _, what in self.restore]
        self.tick()
        elapsed = time.monotonic() - t0
        stop_seconds = [env.stop() for env in self.envs]
        return self.verdict(elapsed, stop_seconds, plan)

    # --------------------------------------------------------------- invariants
    def verdict(
        self, elapsed: float, stop_seconds: list[float], unfired: list[tuple[float, str]]
    ) -> dict[str, Any]:
        for t in self.jobs:
            t.problems = check_job(self.client, t, self.base / "exports")
        growth = memory_growth(self.rss)
        kinds: dict[str, int] = {}
        for _, kind, what in self.faults:
            if not what.startswith("skipped") and not what.startswith("no worker"):
                kinds[kind] = kinds.get(kind, 0) + 1
        bad = [t for t in self.jobs if t.problems]
        return {
            "seed": self.args.seed,
            "minutes": round(elapsed / 60, 1),
            "jobs": len(self.jobs),
            "jobs_by_shape": {s: sum(t.shape == s for t in self.jobs) for s in self.args.shapes},
            "faults_injected": sum(kinds.values()),
            "faults_by_kind": kinds,
            "faults_not_fired": len(unfired),
            "skipped": self.skipped,
            "jobs_with_problems": len(bad),
            "problems": {t.job.id: t.problems for t in bad},
            "launcher_exits_unasked": self.launcher_exits,
            "worker_memory_growth_max": growth,
            "sigterm_exit_seconds_max": round(max(stop_seconds), 1),
        }


def check_job(client: Any, t: Tracked, exports: Path) -> list[str]:
    """Every invariant of one job; returns what failed (empty when all hold)."""
    import numpy as np
    import optuna
    from optuna.trial import TrialState
    from tuttiml.service.artifacts import read_export
    from tuttiml.workers.journal import journal_storage

    job, out = t.job, []
    try:
        rec = job.record()
    except Exception as exc:
        return [f"job record unreadable: {exc}"]
    state = str(rec["state"])
    if state not in ("finished", "cancelled", "failed"):
        return [f"not terminal: {state}"]
    if state == "failed":
        out.append(f"failed: {rec.get('reason', '')[:200]}")
    rows = client.store.trial_rows(job.id)
    done = sum(r["state"] in ("complete", "pruned") for r in rows)
    budget = int(job.spec().max_trials)
    tickets = client.store.tickets(job.id)
    if tickets != done:
        out.append(f"tickets {tickets} != complete+pruned {done}")
    if rec.get("stop_reason") == "budget" and done != budget:
        out.append(f"budget {budget} but {done} complete+pruned")
    if done > budget:
        out.append(f"{done} trials over a budget of {budget}")
    storage = journal_storage(client.store.journal(job.id))
    study = optuna.load_study(study_name=job.id, storage=storage)
    states = [tr.state for tr in study.get_trials(deepcopy=False)]
    if TrialState.RUNNING in states:
        out.append(f"{states.count(TrialState.RUNNING)} trial(s) left RUNNING")
    if len(states) != len(rows):
        out.append(f"{len(states)} study trials but {len(rows)} rows")
    committed = sum("finalize: committed" in line for line in job.logs())
    if committed > t.epochs:
        out.append(f"{committed} commits for {t.epochs} epoch(s)")
    if client.queue.queued_for(job.id):
        out.append("queue entries left")
    if state == "failed" or not rows or client.store.get_artifact(job.id) is None:
        return out
    if str(rec.get("committed_epoch")) != str(rec.get("epoch", "0")):
        out.append(f"committed epoch {rec.get('committed_epoch')} != epoch {rec.get('epoch')}")
    board = job.leaderboard()
    marked = list(board.loc[board["exported"], "candidate"]) if "exported" in board else []
    meta = job.artifact_meta()
    if marked != [meta.get("candidate")]:
        out.append(f"exported mark {marked} != committed {meta.get('candidate')}")
    try:
        path = job.export(exports / f"{job.id}.skops")
        model, _ = read_export(path, key=client.settings.artifact_key)
        frame, target = tables()[SHAPE_SPECS[t.shape][0]]
        pred = model.predict(frame.drop(columns=target).head(5))
        if np.asarray(pred).shape != (5,):
            out.append(f"prediction shape {np.asarray(pred).shape}")
    except Exception as exc:
        out.append(f"export/predict: {type(exc).__name__}: {exc}")
    return out


def memory_growth(rss: dict[int, list[int]]) -> float | None:
    """Largest RSS growth of a worker tree (worker + trial process) after its warm-up.

    Samples come about once a second. The first half of a process's life is its warm-up
    (libraries imported as families first run, tables cached, several jobs seen); its peak
    there is compared with the median of its last 10 samples, so a leak shows as an end above
    every earlier peak. Only processes sampled for >= 120 s count.
    """
    import statistics

    growth = []
    for samples in rss.values():
        if len(samples) < 120:
            continue
        warm = max(samples[: len(samples) // 2])
        last = statistics.median(samples[-10:])
        if warm:
            growth.append(last / warm - 1)
    return round(max(growth), 3) if growth else None


def parse(argv: list[str] | None = None) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--seed", type=int, default=14)
    p.add_argument("--jobs", type=int, default=40)
    p.add_argument("--faults", type=int, default=64)
    p.add_argument("--minutes", type=float, default=45.0)
    p.add_argument("--concurrent", type=int, default=3, help="jobs in flight at once")
    p.add_argument("--freeze", type=float, nargs=2, default=(30.0, 90.0), help="seconds")
    p.add_argument("--drop", type=float, nargs=2, default=(5.0, 60.0), help="seconds")
    p.add_argument("--disk-mb", type=int, default=256, help="tmpfs under the AOF (0: none)")
    p.add_argument("--kinds", default=",".join(KINDS), help="fault kinds, comma-separated")
    p.add_argument("--shapes", default=",".join(SHAPES), help="job shapes, comma-separated")
    p.add_argument("--keep", action="store_true", help="keep the work directory")
    args = p.parse_args(argv)
    args.kinds, args.shapes = args.kinds.split(","), args.shapes.split(",")
    unknown = sorted(set(args.kinds) - set(KINDS)) + sorted(set(args.shapes) - set(SHAPES))
    if unknown:
        p.error(f"unknown kinds or shapes {unknown}; choose from {KINDS} and {SHAPES}")
    return args


def main(argv: list[str] | None = None) -> dict[str, Any]:
    args = parse(argv)
    base = Path(tempfile.mkdtemp(prefix="tutti-chaos-"))
    (base / "exports").mkdir()
    soak = Soak(args, base)
    try:
        figures = soak.run()
    finally:
        for env in soak.envs:
            env.kill()
        soak.store.close()
        if not args.keep:
            subprocess.run(["rm", "-rf", str(base)], check=False)
    figures["work_dir"] = str(base) if args.keep else None
    return figures


if __name__ == "__main__":
    result = main()
    print(json.dumps(result, indent=2))
    ok = (
        result["jobs_with_problems"] == 0
        and result["launcher_exits_unasked"] == 0
        and (result["worker_memory_growth_max"] or 0) <= 0.10
    )
    sys.exit(0 if ok else 1)
