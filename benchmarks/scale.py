#!/usr/bin/env python
"""Scale out: many workers on one Redis, a long job, a large table, a worker that joins late.

Four parts, each on its own private Redis (``_common.private_redis``: AOF, fsync always) and
its own key prefix; the figures of all four are printed as ONE table at the end.

1. **Many workers** — trials sleep instead of fitting: this isolates the store, not the CPU.
   1, 2, 4, 8 and 16 worker processes (``--processes N --cores N``; allowed on 2 cores only
   because trials sleep) run one job each on a tiny table (``families=["single"]``, 2 folds,
   ``parallelism=N`` so every worker holds a shard, ``max_trials`` = N × per-worker trials)
   with ``TUTTI_FAULT_INJECT={"sleep_all": 0.3}`` in the workers' environment (every trial
   sleeps 0.3 s in the trial process before its tiny fit). By default every trial is pinned
   to the cheapest candidate (GaussianNB, enqueued before the workers start), so the sampler
   never runs; ``--sampled`` lets TPE choose. Figures per N, over the steady window (trials
   started after every worker finished its first): trials/s, store ms per trial (defined
   below), CPU per trial of Redis / workers / trial processes, and whether the budget was
   exact (complete + pruned == max_trials, and the ticket counter agrees).
2. **Long job** — 5,000 cheap trials (``--quick``: 500) by a few workers, no sleep (the tiny
   table's fits are the whole trial), ``library_size=0`` so that no out-of-fold predictions
   are stored and the Redis bytes are the journal and the trial rows alone. Figures: seconds
   to open the study from a new process at the end (``workers.journal.journal_storage`` +
   ``optuna.load_study``), store ms per trial near trial 100 vs near the last trial, the
   sampler's share of ``ask`` in the same windows (printed apart: TPE's own cost grows with
   the history), and Redis bytes per trial.
3. **Large table** — a generated 1,000,000-row × 50-column table (``--quick``: 100,000 rows):
   seconds to upload it (``Client.submit``, chunked into Redis, with a progress bar), then a
   2-worker job of 2 trials (the ``single`` family's two default candidates, LightGBM and the
   linear model, 2 folds) while psutil samples every 0.5 s the RSS of each worker process
   plus its trial child; figures: peak RSS per worker ÷ the table's in-memory size
   (``DataFrame.memory_usage(deep=True)``) and rows evaluated per second.
4. **Late worker** — a job with ``parallelism=2`` started with one worker; a second worker is
   launched after ``--late-after`` seconds (default 20); figure: seconds from its launch to
   its first trial (trial rows' ``worker`` and ``started_at``).

What "store ms per trial" counts (part 1). Trial rows carry ``seconds`` (from just after
``study.ask()`` to the trial's end, before ``tell``), ``trial_process_seconds`` (the request to
the trial process, including the running trial's lease — set, refreshed by a thread, deleted —
and the per-fold ``trial.report``/``should_prune`` round trips made while the child waits) and
``tell_seconds`` (``study.tell``: the journal write of the final state and the catch-up read
of other workers' entries). Store ms per trial = mean over complete and pruned trials of
(``seconds`` − ``trial_process_seconds``) + mean ``tell_seconds``. The first term is the
``suggest_*`` calls (each writes the parameter to the journal; for parameters outside the
multivariate group the sampler runs here too), the ``doing`` update and the request set-up.
NOT counted: the ticket (one Lua call), the job-state/failure-count reads before each trial,
``study.ask()`` itself (its journal read + trial creation and the sampler's relative sampling
are not separable from the trial rows: ``ask_seconds`` spans ask + suggest and
``journal_seconds`` spans ask … tell), the lease and per-fold round trips (inside
``trial_process_seconds``), ``record_trial`` (one Lua call) and the log line. The extra rows
show the pieces that are measured around them: ``journal_seconds`` (all journal round trips of
the trial, ask … tell: pure Redis time), the Redis server's own CPU per trial (INFO cpu delta
over the run ÷ trials) and the per-worker turnaround (start-to-start cycle minus the trial
process time: everything a worker does per trial outside the trial process, sampler included).

Pruned trials carry no ``tell_seconds`` (``workers/search.py`` times the tell of complete trials
only); with 2 folds
nothing is pruned (the last fold never prunes), so part 1 has complete trials only.

Run: ``.venv/bin/python benchmarks/scale.py`` (full: about 30–40 minutes on 2 cores);
``--quick`` for a smoke run (about 3–4 minutes for all four parts, each under 1.5);
``--only workers|long|large|late``; ``--workers 1,2,4,8,16``.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import subprocess
import sys
import textwrap
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import _common  # first of the third-party block: one thread per fit, before numpy
import numpy as np
import pandas as pd
import psutil
from sklearn.datasets import make_classification
from tuttiml.service.client import Client, Job

TARGET = "y"
TERMINAL = ("finished", "failed", "cancelled")
SLEEP = 0.3


# ---------------------------------------------------------------------------- helpers
class Launcher(_common.Workers):
    """``python -m workers`` like ``_common.Workers``, plus ``--cores``, ``--name`` and env.

    ``_common.Workers`` cannot pass ``--cores`` (needed for more processes than cores) nor an
    environment for the workers (``TUTTI_FAULT_INJECT``), so the command is built here; the
    stop/wait logic (SIGTERM to the launcher, SIGKILL to its own process group) is reused.
    """

    def __init__(
        self,
        url: str,
        prefix: str,
        processes: int,
        *,
        burst: bool = True,
        cores: int | None = None,
        name: str | None = None,
        env: dict[str, str] | None = None,
        log: Path | None = None,
    ) -> None:
        cmd = [sys.executable, "-m", "tuttiml.workers", "--processes", str(processes)]
        cmd += ["--redis-url", url, "--prefix", prefix]
        if cores:
            cmd += ["--cores", str(cores)]
        if name:
            cmd += ["--name", name]
        if burst:
            cmd.append("--exit-when-empty")
        full_env = {**os.environ, "PYTHONPATH": str(_common.ROOT), **(env or {})}
        out = open(log, "ab") if log else subprocess.DEVNULL  # noqa: SIM115
        self.started = time.time()
        self.proc = subprocess.Popen(
            cmd,
            env=full_env,
            cwd=str(_common.ROOT),
            stdout=out,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        if log:
            out.close()

    def workers(self) -> list[psutil.Process]:
        """The worker processes (the launcher's children, without multiprocessing helpers)."""
        try:
            kids = psutil.Process(self.proc.pid).children()
        except psutil.NoSuchProcess:
            return []
        out = []
        for p in kids:
            with contextlib.suppress(psutil.Error):
                if "resource_tracker" not in " ".join(p.cmdline()):
                    out.append(p)
        return out


def fault_env(sleep: float) -> dict[str, str]:
    return {"TUTTI_FAULT_INJECT": json.dumps({"sleep_all": sleep})} if sleep > 0 else {}


def tiny_table(rows: int = 60, seed: int = 0) -> pd.DataFrame:
    """A tiny binary table (4 numeric features): every candidate fits in milliseconds."""
    X, y = make_classification(
        n_samples=rows, n_features=4, n_informative=3, n_redundant=0, random_state=seed
    )
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
    frame[TARGET] = y
    return frame


def large_table(rows: int, seed: int = 0) -> pd.DataFrame:
    """``rows`` × 50 columns: 46 float64 features, 3 low-cardinality categoricals, the target."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((rows, 46))
    frame = pd.DataFrame(X, columns=[f"x{i:02d}" for i in range(46)])
    for j, k in enumerate((4, 8, 16)):
        frame[f"c{j}"] = pd.Categorical.from_codes(
            rng.integers(0, k, rows), [f"v{i}" for i in range(k)]
        )
    w = rng.standard_normal(10)
    logit = X[:, :10] @ w / np.sqrt(10) + 0.5 * frame["c0"].cat.codes.to_numpy()
    frame[TARGET] = (logit + rng.logistic(size=rows) > 0).astype(np.int64)
    return frame


@contextlib.contextmanager
def client_on(url: str) -> Iterator[Client]:
    client = Client(url=url, prefix=_common.new_prefix())
    try:
        yield client
    finally:
        client.close()


def wait_trials(job: Job, budget: int, timeout: float, what: str) -> dict[str, Any]:
    """Poll until complete + pruned + failed reaches the budget or the job is final."""
    end = time.monotonic() + timeout
    while True:
        st = job.status()
        if st["trials_done"] + st["failed"] >= budget or st["state"] in TERMINAL:
            return st
        if time.monotonic() > end:
            raise TimeoutError(
                f"{what}: {st['trials_done']}/{budget} trials after {timeout:.0f} s"
            )
        time.sleep(0.25)


def finish(workers: Launcher, job: Job | None, wait: float) -> None:
    """Let burst workers finalize and leave for up to ``wait`` s, else cancel and stop them."""
    if workers.wait(wait) is not None:
        return
    if job is not None:
        with contextlib.suppress(Exception):
            job.cancel()
    workers.stop(grace=15)


def done_rows(job: Job) -> pd.DataFrame:
    rows = job.trials()
    if not len(rows):
        return rows
    return rows[rows["state"].isin(["complete", "pruned"])].copy()


def col(rows: pd.DataFrame, name: str) -> pd.Series:
    """A numeric column of the trial rows (NaN where a row lacks it)."""
    if name not in rows:
        return pd.Series(np.nan, index=rows.index)
    return pd.to_numeric(rows[name], errors="coerce")


def mean_ms(values: pd.Series) -> float:
    v = values.dropna()
    return float(v.mean()) * 1000.0 if len(v) else float("nan")


def turnaround_ms(rows: pd.DataFrame) -> float:
    """Mean per-worker start-to-start cycle minus the trial process time (ms)."""
    out = []
    for _, mine in rows.sort_values("started_at").groupby("worker"):
        starts = col(mine, "started_at").to_numpy()
        tps = col(mine, "trial_process_seconds").to_numpy()
        out += list(np.diff(starts) - tps[:-1])
    return float(np.nanmean(out)) * 1000.0 if out else float("nan")


def redis_cpu(r: Any) -> float:
    info = r.info("cpu")
    return float(info["used_cpu_sys"]) + float(info["used_cpu_user"])


def redis_commands(r: Any) -> int:
    return int(r.info("stats")["total_commands_processed"])


def fmt(x: float | None, digits: int = 1) -> str:
    return "—" if x is None or not np.isfinite(x) else f"{x:,.{digits}f}"


@dataclass
class Figure:
    part: str
    figure: str
    value: str
    goal: str = ""
    met: str = ""


@dataclass
class Report:
    figures: list[Figure] = field(default_factory=list)

    def add(self, part: str, figure: str, value: str, goal: str = "", met: bool | None = None):
        self.figures.append(
            Figure(part, figure, value, goal, "" if met is None else ("yes" if met else "NO"))
        )


def say(line: str) -> None:
    print(line, flush=True)


# ---------------------------------------------------------------------------- 1. many workers
PINNED_LEARNER = "naive_bayes"  # the cheapest candidate: a GaussianNB fit takes < 1 ms here


def pin_candidates(client: Client, job: Job, n: int) -> None:
    """Enqueue ``n`` copies of the cheapest candidate and keep the workers' defaults out.

    With every trial's parameters fixed the sampler never runs (Optuna samples lazily, only
    for parameters that are not fixed) and the trial process fits a GaussianNB on 60 rows:
    what is left of a trial is the 0.3 s sleep and the store.
    """
    import optuna
    from tuttiml.workers.families._learners import LEARNERS
    from tuttiml.workers.journal import journal_storage
    from tuttiml.workers.search import context_from_record

    ctx = context_from_record(job.record(), 0)
    prefix = f"single.{PINNED_LEARNER}"
    params = {
        "family": "single",
        "single.learner": PINNED_LEARNER,
        **LEARNERS[PINNED_LEARNER].defaults(ctx, prefix),
    }
    storage = journal_storage(client.redis, client.keys.journal(job.id))
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    study = optuna.create_study(
        study_name=job.id, storage=storage, direction="maximize", load_if_exists=True
    )
    for _ in range(n):
        study.enqueue_trial(params)
    if not client.redis.hsetnx(client.keys.job(job.id), "defaults_enqueued", 1):
        raise RuntimeError("defaults_enqueued was already set: workers got there first")


class CpuSampler:
    """Every 0.5 s: time, machine busy CPU s, Redis CPU s, worker CPU s, trial-child CPU s and
    Redis commands processed.

    Worker and trial-child CPU are summed over the launcher's processes (user + system).
    """

    def __init__(self, r: Any, launcher: Launcher | None = None, period: float = 0.5) -> None:
        self.r, self.launcher, self.period = r, launcher, period
        self.samples: list[tuple[float, ...]] = []
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _procs(self) -> tuple[float, float]:
        if self.launcher is None:
            return 0.0, 0.0
        own = kids = 0.0
        for w in self.launcher.workers():
            with contextlib.suppress(psutil.Error):
                t = w.cpu_times()
                own += t.user + t.system
                for c in w.children(recursive=True):
                    with contextlib.suppress(psutil.Error):
                        tc = c.cpu_times()
                        kids += tc.user + tc.system
        return own, kids

    def _take(self) -> None:
        ct = psutil.cpu_times()
        busy = sum(ct) - ct.idle - getattr(ct, "iowait", 0.0)
        with contextlib.suppress(Exception):
            row = (time.time(), busy, redis_cpu(self.r), *self._procs())
            self.samples.append((*row, float(redis_commands(self.r))))

    def _run(self) -> None:
        while not self._stop.wait(self.period):
            self._take()

    def __enter__(self) -> CpuSampler:
        self._take()
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join(5)
        self._take()

    def over(self, t0: float, t1: float) -> tuple[float, float, float, float, float]:
        """Between two wall times: machine busy fraction of all cores; Redis, worker and
        trial-child CPU seconds; Redis commands."""
        inside = [s for s in self.samples if t0 <= s[0] <= t1]
        if len(inside) < 2:
            return (float("nan"),) * 5
        a, b = inside[0], inside[-1]
        cores = psutil.cpu_count() or 1
        return (
            (b[1] - a[1]) / ((b[0] - a[0]) * cores),
            b[2] - a[2],
            b[3] - a[3],
            b[4] - a[4],
            b[5] - a[5],
        )


def steady(rows: pd.DataFrame) -> tuple[pd.DataFrame, float, float]:
    """Trials started once every worker had finished its first trial (start-up left out).

    Returns the rows and the window (its start, the last trial's end).
    """
    firsts = rows.groupby("worker")["finished_at"].min()
    t0 = float(firsts.max())
    inside = rows[col(rows, "started_at") >= t0]
    return inside, t0, float(col(inside, "finished_at").max()) if len(inside) else t0


def part_workers(args: argparse.Namespace, rep: Report) -> None:
    part = "1 many workers"
    what = (
        f"every trial is the pinned {PINNED_LEARNER} candidate (no sampler)"
        if not args.sampled
        else "TPE samples every trial (the real path; fits and sampler use the CPU)"
    )
    say(
        "[1] many workers — trials sleep instead of fitting: this isolates the store, not the "
        f"CPU ({SLEEP:g} s sleep per trial, tiny table, families=['single'], 2 folds; {what})"
    )
    frame = tiny_table()
    for n in args.workers:
        budget = n * args.trials_per_worker
        with _common.private_redis() as server, client_on(server.url) as client:
            job = client.submit(
                frame,
                target=TARGET,
                families=["single"],
                folds=2,
                max_trials=budget,
                parallelism=n,
                wall_seconds=3600.0,
                seed=args.seed,
            )
            if not args.sampled:
                pin_candidates(client, job, budget)
            say(f"  {n} worker(s), {budget} trials ...")
            workers = Launcher(
                server.url,
                client.settings.prefix,
                n,
                cores=n,
                env=fault_env(SLEEP),
                log=args.log,
            )
            try:
                with CpuSampler(client.redis, workers) as cpu:
                    st = wait_trials(job, budget, args.timeout, f"{n} workers")
                tickets = client.store.tickets(job.id)
            finally:
                finish(workers, job, 60.0)
            rows = job.trials()
            done = done_rows(job)
        n_done = st["complete"] + st["pruned"]
        win, w0, w1 = steady(done)
        rate = len(win) / (w1 - w0) if w1 > w0 else float("nan")
        busy, r_cpu_s, w_cpu_s, c_cpu_s, cmds = cpu.over(w0, w1)
        cmds /= max(len(win), 1)
        r_cpu, w_cpu, c_cpu = (x * 1000.0 / max(len(win), 1) for x in (r_cpu_s, w_cpu_s, c_cpu_s))
        tproc = mean_ms(col(win, "trial_process_seconds"))
        outside = mean_ms(col(win, "seconds") - col(win, "trial_process_seconds"))
        tell = mean_ms(col(win, "tell_seconds"))
        store_ms = outside + tell
        journal = mean_ms(col(win, "journal_seconds"))
        ask = mean_ms(col(win, "ask_seconds"))
        turn = turnaround_ms(win)
        exact = n_done == budget and tickets == budget
        failed = int((rows["state"] == "failed").sum()) if len(rows) else 0
        label = f"{n} worker{'s' if n > 1 else ''}"
        say(
            f"    steady window {w1 - w0:.1f} s, {len(win)} trials: {rate:.2f} trials/s, store "
            f"{store_ms:.1f} ms/trial (outside trial process {outside:.1f} + tell {tell:.1f}), "
            f"journal {journal:.1f} ms, ask {ask:.1f} ms, turnaround {turn:.1f} ms, Redis CPU "
            f"{r_cpu:.2f} ms/trial ({cmds:.0f} commands), worker CPU {w_cpu:.1f} ms/trial, "
            f"trial-process CPU {c_cpu:.1f} ms/trial, trial process {tproc:.0f} ms, "
            f"machine CPU {busy:.0%}; "
            f"{n_done}/{budget} trials, "
            f"{failed} failed, tickets {tickets}"
        )
        goal = n == 16 or n == max(args.workers)
        ideal = n / (SLEEP + 0.01)
        rep.add(part, f"{label}: trials/s (ideal ≈ {ideal:.1f})", fmt(rate, 2))
        rep.add(
            part,
            f"{label}: store ms/trial = (s − trial process) + tell",
            f"{store_ms:.1f} ({outside:.1f} + {tell:.1f})",
            "≤ 20 ms" if goal else "",
            (store_ms <= 20.0) if goal else None,
        )
        rep.add(
            part,
            f"{label}: journal / ask / turnaround ms; CPU ms/trial Redis / worker / trial "
            "process; Redis commands/trial; machine CPU",
            f"{journal:.1f} / {ask:.1f} / {turn:.1f}; {r_cpu:.1f} / {w_cpu:.0f} / {c_cpu:.0f}; "
            f"{cmds:.0f}; {busy:.0%}",
        )
        rep.add(
            part,
            f"{label}: budget exact (complete+pruned, tickets / max_trials)",
            f"{n_done}, {tickets} / {budget}" + (f"; {failed} failed" if failed else ""),
            "equal",
            exact,
        )


# ---------------------------------------------------------------------------- 2. long job
OPEN_STUDY = textwrap.dedent(
    """
    import json, sys, time, warnings
    t0 = time.perf_counter()
    import optuna
    from tuttiml.service.connection import connect
    from tuttiml.workers.journal import journal_storage
    t1 = time.perf_counter()
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    url, key, name = sys.argv[1:4]
    storage = journal_storage(connect(url), key)
    study = optuna.load_study(study_name=name, storage=storage)
    n = len(study.get_trials(deepcopy=False))
    t2 = time.perf_counter()
    print(json.dumps({"imports": t1 - t0, "open": t2 - t1, "trials": n}))
    """
)


def open_study_seconds(url: str, key: str, name: str) -> dict[str, float]:
    out = subprocess.run(
        [sys.executable, "-c", OPEN_STUDY, url, key, name],
        cwd=str(_common.ROOT),
        env={**os.environ, "PYTHONPATH": str(_common.ROOT)},
        capture_output=True,
        text=True,
        timeout=600,
        check=True,
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def key_bytes(r: Any, keys: Sequence[str | bytes]) -> int:
    total = 0
    for k in keys:
        total += int(r.memory_usage(k, samples=0) or 0)
    return total


def part_long(args: argparse.Namespace, rep: Report) -> None:
    part = "2 long job"
    budget = args.long_trials
    procs = args.long_workers
    say(
        f"[2] long job — {budget} trials, {procs} workers, tiny table, no sleep "
        "(trivial fits), library_size=0 (no out-of-fold predictions stored)"
    )
    with _common.private_redis() as server, client_on(server.url) as client:
        r = client.redis
        mem0 = int(r.info("memory")["used_memory"])
        job = client.submit(
            tiny_table(),
            target=TARGET,
            families=["single"],
            folds=2,
            max_trials=budget,
            parallelism=procs,
            library_size=0,
            wall_seconds=7 * 24 * 3600.0,
            seed=args.seed,
        )
        workers = Launcher(server.url, client.settings.prefix, procs, log=args.log)
        t0 = time.monotonic()
        try:
            end = t0 + args.timeout * 4
            last = 0.0
            while True:
                st = job.status()
                if st["trials_done"] + st["failed"] >= budget or st["state"] in TERMINAL:
                    break
                if time.monotonic() > end:
                    raise TimeoutError(f"long job: {st['trials_done']}/{budget} trials")
                if time.monotonic() - last > 30:
                    last = time.monotonic()
                    say(f"    {st['trials_done']}/{budget} trials, {last - t0:.0f} s")
                time.sleep(1.0)
            wall = time.monotonic() - t0
            keys = client.keys
            jkey = keys.journal(job.id)
            journal_bytes = key_bytes(r, [jkey])
            rows_bytes = key_bytes(r, [keys.trials(job.id)])
            job_keys = [keys.job(job.id), *r.scan_iter(match=keys.job_pattern(job.id), count=1000)]
            all_bytes = key_bytes(r, job_keys)
            mem1 = int(r.info("memory")["used_memory"])
            n_entries = int(r.llen(jkey))
            opened = open_study_seconds(server.url, jkey, job.id)
        finally:
            finish(workers, job, 60.0)
        done = done_rows(job).sort_values("number")
    n = len(done)
    say(f"    {n} trials in {wall:.0f} s; {n_entries} journal entries")
    w = max(min(100, n // 5), 1)
    lo = done[(done["number"] >= 100 - w // 2) & (done["number"] < 100 + w - w // 2)]
    if len(lo) < w // 2:  # short quick runs: the first window after the start-up trials
        lo = done.iloc[:w]
    hi = done.iloc[-w:]

    def window(rows: pd.DataFrame) -> tuple[float, float, float, float]:
        journal = mean_ms(col(rows, "journal_seconds"))
        tell = mean_ms(col(rows, "tell_seconds"))
        sampler = mean_ms(
            (col(rows, "ask_seconds") - col(rows, "journal_seconds")).clip(lower=0.0)
        )
        return journal + tell, journal, tell, sampler

    s_lo, j_lo, t_lo, a_lo = window(lo)
    s_hi, j_hi, t_hi, a_hi = window(hi)
    n_lo = f"{int(lo['number'].min())}–{int(lo['number'].max())}"
    n_hi = f"{int(hi['number'].min())}–{int(hi['number'].max())}"
    ratio = s_hi / s_lo if s_lo > 0 else float("nan")
    rep.add(part, "trials done / budget, wall s", f"{n}/{budget}, {wall:.0f} s")
    rep.add(
        part,
        "open the study from a new process at the end, s (imports apart)",
        f"{opened['open']:.2f} ({opened['trials']} trials; imports {opened['imports']:.1f})",
        "≤ 5 s",
        opened["open"] <= 5.0,
    )
    rep.add(
        part,
        f"store ms/trial = journal + tell, trials {n_lo}",
        f"{s_lo:.1f} ({j_lo:.1f} + {t_lo:.1f})",
    )
    rep.add(
        part,
        f"store ms/trial = journal + tell, trials {n_hi}",
        f"{s_hi:.1f} ({j_hi:.1f} + {t_hi:.1f})",
    )
    rep.add(part, "store ms/trial, late ÷ early window", f"{ratio:.2f}×", "≤ 2×", ratio <= 2.0)
    rep.add(
        part,
        "sampler ms/trial (ask − journal), early → late window",
        f"{a_lo:.1f} → {a_hi:.1f} ({a_hi / a_lo if a_lo > 0 else float('nan'):.1f}×)",
        "(not store)",
    )
    rep.add(
        part,
        "Redis bytes/trial: journal / trial rows / all job keys",
        f"{journal_bytes / n:,.0f} / {rows_bytes / n:,.0f} / {all_bytes / n:,.0f}",
    )
    rep.add(
        part,
        "Redis used_memory delta per trial (incl. the table)",
        f"{(mem1 - mem0) / n:,.0f} B ({(mem1 - mem0) / 1e6:.1f} MB total)",
    )
    rep.add(part, "journal entries per trial", f"{n_entries / n:.1f}")


# ---------------------------------------------------------------------------- 3. large table
class RssSampler:
    """Per worker: the peak of (worker RSS + its trial child's RSS), sampled every 0.5 s."""

    def __init__(self, launcher: Launcher, period: float = 0.5) -> None:
        self.launcher, self.period = launcher, period
        self.peak: dict[int, int] = {}
        self.peak_child: dict[int, int] = {}
        self.peak_own: dict[int, int] = {}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def sample(self) -> dict[int, int]:
        out = {}
        for w in self.launcher.workers():
            with contextlib.suppress(psutil.Error):
                total = w.memory_info().rss
                child = 0
                for c in w.children(recursive=True):
                    with contextlib.suppress(psutil.Error):
                        child += c.memory_info().rss
                out[w.pid] = total + child
                self.peak_child[w.pid] = max(self.peak_child.get(w.pid, 0), child)
                self.peak_own[w.pid] = max(self.peak_own.get(w.pid, 0), total)
        return out

    def _run(self) -> None:
        while not self._stop.wait(self.period):
            for pid, rss in self.sample().items():
                self.peak[pid] = max(self.peak.get(pid, 0), rss)

    def __enter__(self) -> RssSampler:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join(5)


def progress_bar(label: str) -> Callable[[int, int], None]:
    t0 = time.monotonic()

    def show(done: int, total: int) -> None:
        frac = done / total if total else 1.0
        bar = "#" * round(30 * frac)
        end = "\n" if done >= total else ""
        sys.stdout.write(
            f"\r    {label} [{bar:<30}] {done / 1e6:,.0f}/{total / 1e6:,.0f} MB "
            f"{time.monotonic() - t0:5.1f} s{end}"
        )
        sys.stdout.flush()

    return show


def wait_ready(launcher: Launcher, client: Client, n: int, timeout: float = 180.0) -> None:
    """Until ``n`` workers have a heartbeat and every trial child has finished importing."""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if len(client.workers()) >= n and all(w.children() for w in launcher.workers()):
            break
        time.sleep(0.5)
    else:
        raise TimeoutError("workers did not start")
    # trial children import scikit-learn & co. after they start: wait until RSS settles
    last = -1
    for _ in range(60):
        total = sum(
            c.memory_info().rss for w in launcher.workers() for c in w.children(recursive=True)
        )
        if abs(total - last) < 2 * 1024 * 1024:
            return
        last = total
        time.sleep(1.0)


def part_large(args: argparse.Namespace, rep: Report) -> None:
    part = "3 large table"
    rows = args.rows
    say(f"[3] large table — {rows:,} rows × 50 columns, 2 workers, 2 trials, single, 2 folds")
    t0 = time.monotonic()
    frame = large_table(rows, args.seed)
    table_bytes = int(frame.memory_usage(deep=True).sum())
    say(f"    generated in {time.monotonic() - t0:.1f} s; {table_bytes / 1e6:,.0f} MB in memory")
    with _common.private_redis() as server, client_on(server.url) as client:
        # workers first (not burst): their idle RSS is the baseline, the job comes after
        workers = Launcher(server.url, client.settings.prefix, 2, burst=False, log=args.log)
        try:
            wait_ready(workers, client, 2)
            sampler = RssSampler(workers)
            idle = sampler.sample()
            put_seconds: list[float] = []
            orig_put = client.store.put_data

            def timed_put(*a: Any, **k: Any) -> None:
                t = time.perf_counter()
                try:
                    orig_put(*a, **k)
                finally:
                    put_seconds.append(time.perf_counter() - t)

            client.store.put_data = timed_put  # type: ignore[method-assign]
            t_sub = time.perf_counter()
            job = client.submit(
                frame,
                target=TARGET,
                families=["single"],
                folds=2,
                max_trials=2,
                parallelism=2,
                wall_seconds=7200.0,
                seed=args.seed,
                upload_progress=progress_bar("upload"),
            )
            submit_s = time.perf_counter() - t_sub
            blob_bytes = int(
                json.loads(client.redis.get(client.keys.data_meta(str(job.record()["data"]))))[
                    "bytes"
                ]
            )
            with sampler:
                wait_trials(job, 2, args.timeout * 4, "large table")
                trials_at = time.monotonic()
                if args.large_finalize:
                    with contextlib.suppress(TimeoutError):
                        job.wait(timeout=args.timeout * 4, poll=1.0)
            final_state = job.state.value
            finalize_s = time.monotonic() - trials_at
        finally:
            workers.stop(grace=15)
        done = done_rows(job)
    say(
        f"    submit {submit_s:.1f} s (upload to Redis {sum(put_seconds):.1f} s, "
        f"{blob_bytes / 1e6:,.0f} MB Parquet); job {final_state} "
        f"{finalize_s:.0f} s after its trials"
    )
    order = sorted(sampler.peak, key=lambda pid: sampler.peak[pid], reverse=True)
    peaks = [sampler.peak[pid] for pid in order]
    idles = [idle.get(pid, 0) for pid in order]
    split = [(sampler.peak_own.get(pid, 0), sampler.peak_child.get(pid, 0)) for pid in order]
    worst = peaks[0] if peaks else 0
    ratio = worst / table_bytes
    rest = (worst - idles[0]) / table_bytes if idles else float("nan")
    put_s = sum(put_seconds)
    secs = col(done, "trial_process_seconds")
    rows_s = [rows * 2 / s for s in secs.dropna()]
    rep.add(
        part,
        "table: rows × columns, in memory / Parquet",
        f"{rows:,} × {frame.shape[1]}, {table_bytes / 1e6:,.0f} / {blob_bytes / 1e6:,.0f} MB",
    )
    rep.add(
        part,
        "upload s: Client.submit (of which chunks to Redis)",
        f"{submit_s:.1f} ({put_s:.1f}; {blob_bytes / 1e6 / max(put_s, 1e-9):,.0f} MB/s)",
    )
    rep.add(
        part,
        "peak RSS per worker (worker + trial child), MB",
        ", ".join(
            f"{p / 1e6:,.0f} (worker {o / 1e6:,.0f} + trial process {c / 1e6:,.0f}; idle "
            f"{i / 1e6:,.0f})"
            for p, (o, c), i in zip(peaks, split, idles, strict=True)
        ),
    )
    rep.add(
        part,
        "peak RSS per worker ÷ table size (largest worker)",
        f"{ratio:.2f}× (above idle: {rest:.2f}×)",
        "≤ 4×",
        ratio <= 4.0,
    )
    rep.add(
        part,
        "rows/s evaluated (rows × folds ÷ trial seconds), per trial",
        ", ".join(
            f"{r['family']}:{r['params'].get('single.learner', '?')} {v:,.0f}"
            for (_, r), v in zip(done.iterrows(), rows_s, strict=False)
        )
        or "—",
    )
    if args.large_finalize:
        rep.add(
            part,
            "finalize s after the trials (refit, explain), job state",
            f"{finalize_s:.0f}, {final_state}",
        )


# ---------------------------------------------------------------------------- 4. late worker
def part_late(args: argparse.Namespace, rep: Report) -> None:
    part = "4 late worker"
    say(
        f"[4] late worker — parallelism=2, one worker, a second after {args.late_after:g} s "
        f"({SLEEP:g} s sleeping trials, TUTTI_SHARD_SECONDS={args.shard_seconds:g})"
    )
    env = {**fault_env(SLEEP), "TUTTI_SHARD_SECONDS": f"{args.shard_seconds:g}"}
    with _common.private_redis() as server, client_on(server.url) as client:
        job = client.submit(
            tiny_table(),
            target=TARGET,
            families=["single"],
            folds=2,
            max_trials=100_000,
            parallelism=2,
            wall_seconds=3600.0,
            seed=args.seed,
        )
        first = Launcher(
            server.url, client.settings.prefix, 1, name="first", env=env, log=args.log
        )
        late: Launcher | None = None
        try:
            time.sleep(args.late_after)
            late = Launcher(
                server.url, client.settings.prefix, 1, name="late", env=env, log=args.log
            )
            alive_at = None
            first_trial = None
            end = time.monotonic() + args.timeout
            while time.monotonic() < end:
                if alive_at is None and any(
                    str(w.get("name", "")).startswith("late") for w in client.workers()
                ):
                    alive_at = time.time()
                rows = job.trials()
                if len(rows):
                    mine = rows[rows["worker"].astype(str).str.startswith("late")]
                    if len(mine):
                        first_trial = float(col(mine, "started_at").min())
                        break
                time.sleep(0.25)
            before = job.trials()
        finally:
            with contextlib.suppress(Exception):
                job.cancel()
            for w in (late, first):
                if w is not None:
                    w.stop(grace=20)
    n_first = (
        int((before["worker"].astype(str).str.startswith("first")).sum()) if len(before) else 0
    )
    if first_trial is None:
        rep.add(part, "seconds from launch to its first trial", "none in time", "≤ 60 s", False)
        return
    wait = first_trial - late.started
    boot = (alive_at - late.started) if alive_at else float("nan")
    say(f"    late worker: heartbeat after {boot:.1f} s, first trial after {wait:.1f} s")
    rep.add(
        part,
        "late worker: seconds from launch to its first trial",
        f"{wait:.1f} (start-up to heartbeat {boot:.1f}; first worker had done {n_first} trials)",
        "≤ 60 s",
        wait <= 60.0,
    )


# ---------------------------------------------------------------------------- main
PARTS: dict[str, Callable[[argparse.Namespace, Report], None]] = {
    "workers": part_workers,
    "long": part_long,
    "large": part_large,
    "late": part_late,
}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="short smoke run of every part")
    ap.add_argument("--only", choices=sorted(PARTS), action="append", help="run only this part")
    ap.add_argument(
        "--workers", default=None, help="part 1 worker counts (default 1,2,4,8,16; quick 1,16)"
    )
    ap.add_argument(
        "--trials-per-worker", type=int, default=None, help="part 1 (default 40; quick 10)"
    )
    ap.add_argument(
        "--sampled", action="store_true", help="part 1: let TPE choose (default: pinned)"
    )
    ap.add_argument("--long-trials", type=int, default=None, help="part 2 (default 5000)")
    ap.add_argument("--long-workers", type=int, default=2, help="part 2 worker processes")
    ap.add_argument("--rows", type=int, default=None, help="part 3 rows (default 1,000,000)")
    ap.add_argument("--large-finalize", action="store_true", help="part 3: also wait for finalize")
    ap.add_argument("--late-after", type=float, default=20.0, help="part 4 delay (s)")
    ap.add_argument("--shard-seconds", type=float, default=45.0, help="part 4 TUTTI_SHARD_SECONDS")
    ap.add_argument("--timeout", type=float, default=None, help="limit per run (s)")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--log", type=Path, default=None, help="append worker output to this file")
    args = ap.parse_args(argv)
    args.workers = [
        int(x) for x in (args.workers or ("1,16" if args.quick else "1,2,4,8,16")).split(",")
    ]
    args.trials_per_worker = args.trials_per_worker or (10 if args.quick else 40)
    args.long_trials = args.long_trials or (500 if args.quick else 5000)
    args.rows = args.rows or (100_000 if args.quick else 1_000_000)
    args.timeout = args.timeout or (150.0 if args.quick else 900.0)
    only = args.only or list(PARTS)
    rep = Report()
    say(
        f"scale: parts {', '.join(only)}{' (quick)' if args.quick else ''}; {os.cpu_count()} cores"
    )
    for name in PARTS:
        if name in only:
            t0 = time.monotonic()
            try:
                PARTS[name](args, rep)
            except Exception as exc:  # one broken part must not hide the others' figures
                rep.add(name, "ERROR", f"{type(exc).__name__}: {exc}"[:200], "", False)
                say(f"  {name} failed: {type(exc).__name__}: {exc}")
            say(f"  ({name}: {time.monotonic() - t0:.0f} s)")
    print()
    _common.print_table(
        ["part", "figure", "value", "goal", "met"],
        [(f.part, f.figure, f.value, f.goal, f.met) for f in rep.figures],
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
