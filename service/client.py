"""Client and Job: submit searches, follow them, read the leaderboard, take the best pipeline."""

from __future__ import annotations

import json
import secrets
import sys
import time
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pandas as pd
from tuttiml.service import data as tables
from tuttiml.service.artifacts import load_pipeline, write_export
from tuttiml.service.config import Settings
from tuttiml.service.connection import connect, masked_url, resolve_url
from tuttiml.service.errors import ArtifactError, JobStateError
from tuttiml.service.explanations import PARTS, ExplainState, PartStatus, part_status
from tuttiml.service.keys import Keys, check_id
from tuttiml.service.queue import TaskQueue
from tuttiml.service.records import FinalResult, TrialRow
from tuttiml.service.spec import Metric, SearchSpec, natural, parse_spec, score_sign
from tuttiml.service.store import JobState, JobStore

SHARD_TIMEOUT_SLACK = 600.0


def _new_job_id() -> str:
    return f"{time.strftime('%Y%m%d-%H%M%S')}-{secrets.token_hex(3)}"


def _fmt_seconds(s: float) -> str:
    s = max(int(s), 0)
    return (
        f"{s // 3600:d}:{s % 3600 // 60:02d}:{s % 60:02d}"
        if s >= 3600
        else f"{s // 60:02d}:{s % 60:02d}"
    )


#: Keys of ``Job.status()`` (and of each job in ``tutti status --json``), in this order.
STATUS_KEYS: tuple[str, ...] = (
    "job",
    "name",
    "state",
    "phase",
    "task",
    "metric",
    "trials_done",
    "max_trials",
    "complete",
    "pruned",
    "failed",
    "best_score",
    "elapsed_seconds",
    "seconds_left",
    "stop_reason",
    "reason",
    "explanations",
    "explain_budget",
    "explain_parts",
)

#: Old names of status keys (tutti 0.1), still readable with a DeprecationWarning until 0.3.
_OLD_STATUS_KEYS = {
    "budget": "max_trials",
    "best": "best_score",
    "elapsed": "elapsed_seconds",
    "eta": "seconds_left",
}


#: Columns of ``Job.leaderboard()`` (and of each row in ``tutti leaderboard --json``).
LEADERBOARD_COLUMNS: tuple[str, ...] = (
    "rank",
    "candidate",
    "family",
    "members",
    "score",
    "score_std",
    "folds",
    "fit_seconds",
    "predict_ms",
    "size_bytes",
    "trial",
    "exported",
)


class JobStatus(dict[str, Any]):
    """``Job.status()``: a plain dict (JSON-ready) whose pre-0.2 key names still read.

    ``status["budget"]`` returns ``status["max_trials"]`` with a DeprecationWarning; the
    old names are never stored, so ``json.dumps`` and iteration show only ``STATUS_KEYS``.
    """

    def __missing__(self, key: str) -> Any:
        new = _OLD_STATUS_KEYS.get(key)
        if new is None:
            raise KeyError(key)
        warnings.warn(
            f"job status key {key!r} is deprecated and will be removed in tutti 0.3; use {new!r}",
            DeprecationWarning,
            stacklevel=2,
        )
        return self[new]


class Client:
    """Entry point of the Python API.

    Args:
        url: Redis URL shared by clients and workers; default ``TUTTI_REDIS_URL`` or, when
            unset, the embedded server under ``TUTTI_HOME`` (started on first use).
        prefix: key prefix (default ``TUTTI_PREFIX`` or ``tutti``).
        home: data directory of the embedded server.
    """

    def __init__(
        self, url: str | None = None, *, prefix: str | None = None, home: str | Path | None = None
    ) -> None:
        self.settings = Settings.from_env(redis_url=url, prefix=prefix, home=home)
        self.url = resolve_url(self.settings)
        self.keys = Keys(self.settings.prefix)
        self.redis = connect(self.url, require_up=True)
        self.store = JobStore(self.redis, self.keys)
        self.queue = TaskQueue(self.redis, self.keys)

    # ------------------------------------------------------------------ submit
    def submit(
        self,
        data: pd.DataFrame | str | Path,
        spec: SearchSpec | dict[str, Any] | None = None,
        *,
        upload_progress: Callable[[int, int], None] | None = None,
        **fields: Any,
    ) -> Job:
        """Validate spec and table, store them and queue the search.

        ``client.submit(df, target="y", max_trials=60)`` and
        ``client.submit(df, spec=SearchSpec(target="y"))`` are equivalent; CSV and Parquet
        paths work in place of a DataFrame.

        Raises:
            InvalidSpecError: a spec field breaks a rule (every problem listed).
            InvalidDataError: the table cannot be searched as it is.
            Nothing is stored or enqueued when either is raised.
        """
        parsed = parse_spec(spec, **fields)
        parsed.check_deadline()
        frame = tables.read_table(data)
        prepared = tables.prepare(frame, parsed)
        blob = tables.encode(prepared.frame)
        tables.check_size(len(blob), self.settings.max_upload_bytes)
        digest = tables.digest(blob)
        job_id = _new_job_id()
        self.store.put_data(digest, blob, progress=upload_progress)
        del blob
        resolved = prepared.spec
        record = {
            "spec": resolved.to_json(),
            "data": digest,
            "task": prepared.task,
            "schema": prepared.schema,
            "classes": list(prepared.classes),
            "labels": list(prepared.labels),
            "label_dtype": prepared.label_dtype or "",
            "columns": {
                "numeric": list(prepared.numeric_columns),
                "categorical": list(prepared.categorical_columns),
                "high_cardinality": list(prepared.high_cardinality_columns),
            },
            "summary": tables.summary(prepared),
            "warnings": list(prepared.warnings),
            "dropped": dict(prepared.dropped),
            "name": resolved.name or "",
        }
        self.store.create_job(job_id, record, shards=resolved.parallelism)
        timeout = self.settings.shard_seconds + resolved.trial_timeout + SHARD_TIMEOUT_SLACK
        for shard in range(resolved.parallelism):  # `high` jumps ahead of queued jobs
            self.queue.enqueue_shard(
                job_id, shard, timeout=timeout, at_front=resolved.priority == "high"
            )
        return Job(self, job_id)

    # ------------------------------------------------------------------ lookup
    def job(self, job_id: str) -> Job:
        """Handle of an existing job (JobNotFoundError if there is none)."""
        self.store.job(check_id(job_id))
        return Job(self, job_id)

    def jobs(self) -> list[Job]:
        return [Job(self, j) for j in self.store.job_ids()]

    def status(self) -> list[JobStatus]:
        """Every job's ``Job.status()`` dict, oldest first (``pd.DataFrame(...)`` for a table)."""
        return [j.status() for j in self.jobs()]

    # ------------------------------------------------------------------ local workers
    def start_workers(
        self,
        processes: int = 2,
        *,
        exit_when_empty: bool = True,
        log_path: str | Path | None = None,
        burst: bool | None = None,
    ) -> Any:
        """Start ``python -m tuttiml.workers`` on this machine against this client's store.

        Args:
            processes: worker processes to start.
            exit_when_empty: the workers exit once no job is left to run.
            log_path: file their output is appended to (default: discarded).
            burst: deprecated spelling of ``exit_when_empty`` (removed in 0.3).
        """
        import subprocess

        if burst is not None:
            warnings.warn(
                "start_workers(burst=...) is deprecated and will be removed in tutti 0.3; "
                "use exit_when_empty=...",
                DeprecationWarning,
                stacklevel=2,
            )
            exit_when_empty = burst
        cmd = [
            sys.executable,
            "-m",
            "tuttiml.workers",
            "--processes",
            str(processes),
            "--redis-url",
            self.url,
            "--prefix",
            self.settings.prefix,
        ]
        if exit_when_empty:
            cmd.append("--exit-when-empty")
        out = open(log_path, "ab") if log_path else subprocess.DEVNULL  # noqa: SIM115
        return subprocess.Popen(cmd, stdout=out, stderr=subprocess.STDOUT)

    def purge(self, older_than_seconds: float, *, dry_run: bool = False) -> list[str]:
        """Delete every finished, failed or cancelled job submitted before the cut-off.

        Args:
            older_than_seconds: age (since submission) a final job must exceed.
            dry_run: only list the jobs that would be deleted.

        Returns:
            The ids of the jobs deleted (or, with ``dry_run``, that would be).
        """
        cut = time.time() - older_than_seconds
        gone = []
        for job in self.jobs():
            rec = job.record()
            if JobState(rec["state"]).terminal and float(rec.get("created_at", 0)) < cut:
                if not dry_run:
                    job.delete()
                gone.append(job.id)
        return gone

    def workers(self) -> list[dict[str, Any]]:
        """Live worker processes and what each is doing (from their heartbeat keys)."""
        out = []
        pattern = self.keys.worker_alive("*")
        for key in self.redis.scan_iter(match=pattern, count=500):
            raw = self.redis.get(key)
            if raw:
                out.append(json.loads(raw))
        return sorted(out, key=lambda w: str(w.get("name")))

    def doctor(self) -> list[Any]:
        """Checks of the Redis server this client points at (see ``service.doctor``)."""
        from tuttiml.service.doctor import diagnose

        return diagnose(self.redis, self.url, embedded=not self.settings.redis_url)

    def close(self) -> None:
        self.redis.close()


class Job:
    """A search job in the store (any machine that reaches the same Redis sees the same)."""

    def __init__(self, client: Client, job_id: str) -> None:
        self.client = client
        self.id = job_id

    def __repr__(self) -> str:
        return f"Job({self.id!r})"

    @property
    def store(self) -> JobStore:
        return self.client.store

    def record(self) -> dict[str, Any]:
        return self.store.job(self.id)

    def spec(self) -> SearchSpec:
        return SearchSpec.model_validate(self.record()["spec"])

    # ------------------------------------------------------------------ progress
    def status(self) -> JobStatus:
        """Where the job stands, as a plain dict with the keys of ``STATUS_KEYS``.

        ``best_score`` has the metric's natural sign; ``phase`` says what finalize is doing
        while the state is ``finalizing`` (empty otherwise); ``seconds_left`` is an estimate
        while running (``None`` otherwise). The same dict is what ``tutti status --json``
        prints, one per job.
        ``explanations`` is ``pending``, ``running``, ``done`` or ``failed`` once the model is
        committed (None before, and for jobs committed before explanations were a task of
        their own); ``explain_parts`` says for each part ``done``, ``pending`` or
        ``not run: <reason>`` once they are committed.

        """
        rec = self.record()
        spec = SearchSpec.model_validate(rec["spec"])
        metric = Metric(spec.metric) if spec.metric else None
        done = int(rec.get("n_complete", 0) or 0) + int(rec.get("n_pruned", 0) or 0)
        best = self.store.best_score(self.id)
        best_natural = natural(metric, best) if metric is not None else None
        start = rec.get("started_at")
        end = rec.get("finalized_at") or (time.time() if start else None)
        elapsed = (end - start) if start and end else 0.0
        state = JobState(rec["state"])
        eta = None
        if start and done and state is JobState.RUNNING:
            per = elapsed / done
            left_trials = (spec.max_trials - done) * per
            limits = [left_trials]
            if spec.wall_seconds:
                limits.append(start + spec.wall_seconds - time.time())
            eta = max(min(limits), 0.0)
        finalizing = state is JobState.FINALIZING or (
            state is JobState.CANCELLED and rec.get("committed_epoch") is None
        )
        return JobStatus(
            job=self.id,
            name=rec.get("name") or "",
            state=rec["state"],
            phase=str(rec.get("phase") or "") if finalizing else "",
            task=rec.get("task"),
            metric=metric.value if metric else None,
            trials_done=done,
            max_trials=spec.max_trials,
            complete=int(rec.get("n_complete", 0) or 0),
            pruned=int(rec.get("n_pruned", 0) or 0),
            failed=int(rec.get("n_failed", 0) or 0),
            best_score=best_natural,
            elapsed_seconds=elapsed,
            seconds_left=eta,
            stop_reason=rec.get("stop_reason"),
            reason=rec.get("reason"),
            **self._explanations(rec),
        )

    def _explanations(self, rec: dict[str, Any]) -> dict[str, Any]:
        """The explanations' state, their budget and, once settled, each part's status."""
        state = rec.get("explain_state")
        if state is None or rec.get("committed_epoch") is None:
            return {"explanations": None, "explain_budget": None, "explain_parts": {}}
        if rec.get("explain_epoch") == rec.get("committed_epoch"):
            parts = part_status(self.result().explain)
        else:
            parts = {name: PartStatus.PENDING.value for name in PARTS}
        budget = rec.get("explain_budget")
        return {
            "explanations": state,
            "explain_budget": float(budget) if budget is not None else None,
            "explain_parts": parts,
        }

    @property
    def state(self) -> JobState:
        return self.store.state(self.id)

    def is_final(self, state: str | None = None) -> bool:
        """Whether nothing more will happen to the job: finished, failed, or cancelled with
        its finalize committed (a cancelled job still fits its best-so-far)."""
        st = JobState(state) if state is not None else self.state
        if not st.terminal:
            return False
        return st is not JobState.CANCELLED or self.record().get("committed_epoch") is not None

    def wait(
        self,
        *,
        progress: bool = False,
        timeout: float | None = None,
        poll: float = 1.0,
        stream: Any = None,
        explanations: bool = False,
    ) -> JobStatus:
        """Block until the job is final; with ``progress`` draw a one-line progress bar.

        On a terminal the line is redrawn in place; elsewhere a line is written whenever the
        trials, the best score, the state or finalize's phase change (and every 30 s). While
        the job needs a worker and none is alive on this store for ``NO_WORKER_SECONDS``, a
        line on ``stream`` (default stderr) says so and how to start one; waiting goes on.

        The model is ready when the job is final; its explanations follow (``status()``
        shows them pending). With ``explanations=True`` wait for those too.

        Returns:
            The final ``status()``.

        The model is ready when the job is final; its explanations follow (``status()``
        shows them pending). With ``explanations=True`` wait for those too.

        Raises:
            TimeoutError: ``timeout`` seconds passed first.
        """
        stream = stream or sys.stderr
        tty = bool(getattr(stream, "isatty", lambda: False)())
        end = None if timeout is None else time.monotonic() + timeout
        last: tuple[Any, ...] = ()
        last_at = 0.0
        watch = _WorkerWatch(self.client)
        while True:
            st = self.status()
            final = self.is_final(st["state"])
            if final and explanations and st["explanations"] is not None:
                final = ExplainState(st["explanations"]).final
            if not final and watch.nobody_for_long(st["state"]):
                stream.write(("\n" if progress and tty else "") + watch.message() + "\n")
                stream.flush()
            if progress:
                line = progress_line(st)
                keys = ("trials_done", "best_score", "state", "phase", "explanations")
                key = tuple(st[k] for k in keys)
                if tty:
                    stream.write("\r" + line + "\x1b[K")
                elif key != last or final or (time.monotonic() - last_at > 30):
                    stream.write(line.rstrip() + "\n")  # a log-friendly line per change
                    last_at = time.monotonic()
                last = key
                stream.flush()
            if final:
                if progress and tty:
                    stream.write("\n")
                return st
            if end is not None and time.monotonic() > end:
                if progress and tty:
                    stream.write("\n")
                raise TimeoutError(f"job {self.id} still {st['state']} after {timeout} s")
            time.sleep(poll)

    # ------------------------------------------------------------------ results
    def trials(self) -> pd.DataFrame:
        """Every finished trial (complete, pruned, failed) with its parameters.

        ``score`` and ``fold_scores`` are in the metric's natural sign, as on the leaderboard.
        """
        rows = [TrialRow.load(r) for r in self.store.trial_rows(self.id)]
        metric = self.spec().metric
        docs = []
        for r in rows:
            doc = r.dump()
            doc.pop("schema_version")
            if metric is not None and r.score is not None:
                doc["score"] = natural(metric, r.score)
            if metric is not None and r.fold_scores:
                doc["fold_scores"] = [natural(metric, f) for f in r.fold_scores]
            docs.append(doc)
        return pd.DataFrame(docs)

    def leaderboard(self) -> pd.DataFrame:
        """Complete candidates best first: trials and library ensembles, natural metric sign.

        Columns are ``LEADERBOARD_COLUMNS`` (plus ``diff_vs_rank1``, ``p_value``,
        ``distinguishable``, ``bias`` and ``variance`` once finalize computed them).
        ``DataFrame.attrs`` carries the metric and whether greater or smaller is better. Once
        the job is final, ``exported`` marks the candidate behind the stored pipeline: finalize
        ranks trials by their CV score minus the optimism of picking the best of them (BBC-CV)
        against the library ensembles' nested scores, so it may sit below rank 1.
        """
        rec = self.record()
        spec = SearchSpec.model_validate(rec["spec"])
        metric = Metric(spec.metric) if spec.metric else Metric.ROC_AUC
        rows = []
        for r in (TrialRow.load(doc) for doc in self.store.board(self.id)):
            rows.append(
                {
                    "candidate": f"t{r.number}",
                    "family": r.family,
                    "members": r.members,
                    "score": r.score,
                    "score_std": r.score_std,
                    "folds": len(r.fold_scores),
                    "fit_seconds": r.fit_seconds,
                    "predict_ms": r.predict_ms,
                    "size_bytes": r.size_bytes,
                    "trial": r.number,
                }
            )
        result = self.result()
        for ens in result.library:
            rows.append(
                {
                    "candidate": ens.id,
                    "family": f"library:{ens.method}",
                    "members": ",".join(f"t{m}" for m in ens.members),
                    "score": ens.score,
                    "score_std": ens.score_std,
                    "folds": len(ens.fold_scores),
                    "fit_seconds": None,
                    "predict_ms": None,
                    "size_bytes": None,
                    "trial": None,
                }
            )
        cols = list(LEADERBOARD_COLUMNS)
        if not rows:
            board = pd.DataFrame(columns=cols)
        else:
            board = pd.DataFrame(rows).sort_values(
                ["score", "candidate"], ascending=[False, True], kind="stable"
            )
            board["score"] = [natural(metric, s) for s in board["score"]]
            board.insert(0, "rank", range(1, len(board) + 1))
            # the exported pipeline: trials compete with library ensembles after their
            # selection optimism is taken off, so it need not be rank 1
            board["exported"] = board["candidate"] == (result.best.id if result.best else None)
            board = board[cols].reset_index(drop=True)
            for col in ("trial", "size_bytes"):  # whole numbers, missing for library rows
                board[col] = board[col].astype("Int64")
            board = _with_explanations(board, result.explain or {})
        board.attrs.update(
            metric=metric.value,
            greater_is_better=score_sign(metric) > 0,
            direction="higher is better" if score_sign(metric) > 0 else "lower is better",
        )
        return board

    def _artifact(self, name: str = "best") -> tuple[bytes, dict[str, Any]]:
        found = self.store.get_artifact(self.id, name)
        if found is None:
            st = self.store.state(self.id)
            raise ArtifactError(
                f"job {self.id} has no fitted pipeline yet (state {st.value}); "
                "wait for it to finish (job.wait()) or check `tutti status`.",
                field="artifact",
                value=name,
            )
        return found

    def best_pipeline(self, max_predict_ms: float | None = None) -> Any:
        """The winner refitted on all rows: a scikit-learn estimator that takes raw rows.

        Args:
            max_predict_ms: latency budget in milliseconds per 1,000 rows; the best refitted
                candidate (winner or Pareto-front alternative) within it is returned.

        Raises:
            ArtifactError: no pipeline yet, none within the budget, or a failed integrity check.
        """
        blob, meta = self._artifact(self._name_within(max_predict_ms))
        return load_pipeline(blob, meta, key=self.client.settings.artifact_key)

    def _name_within(self, max_predict_ms: float | None) -> str:
        if max_predict_ms is None:
            return "best"
        options = []
        for name in self.store.artifact_names(self.id):
            found = self.store.get_artifact(self.id, name)
            if found and float(found[1].get("predict_ms", float("inf"))) <= max_predict_ms:
                options.append((float(found[1]["cv_score"]), name == "best", name))
        if not options:
            raise ArtifactError(
                f"no refitted pipeline of job {self.id} predicts 1,000 rows within "
                f"{max_predict_ms:g} ms; raise max_predict_ms or see the Pareto front in "
                "`tutti report`.",
                field="max_predict_ms",
                value=max_predict_ms,
            )
        return max(options)[2]

    def report(self, path: str | Path) -> Path:
        """Write the self-contained HTML report of this job."""
        from tuttiml.service.report import write_report
        from tuttiml.service.report_data import collect

        return write_report(collect(self), Path(path))

    def artifact_meta(self) -> dict[str, Any]:
        return self._artifact()[1]

    def export(self, path: str | Path, *, max_predict_ms: float | None = None) -> Path:
        """Write the best pipeline as a skops file plus ``<file>.json`` metadata."""
        blob, meta = self._artifact(self._name_within(max_predict_ms))
        load_pipeline(blob, meta, key=self.client.settings.artifact_key)  # verify first
        out = Path(path)
        write_export(out, blob, meta)
        return out

    def extras(self) -> dict[str, Any]:
        """The job's result hash as stored (JSON); :meth:`result` is the typed record."""
        return self.store.extras(self.id)

    def result(self) -> FinalResult:
        """The job's result: winner, library ensembles, honest estimate, explanations."""
        return FinalResult.load(self.store.extras(self.id))

    def logs(self) -> list[str]:
        return self.store.logs(self.id)

    def cancel(self) -> bool:
        """Stop the search; workers stop within one fold and finalize keeps the best so far."""
        prev = self.store.transition(
            self.id, JobState.CANCELLED, allowed_from=[JobState.QUEUED, JobState.RUNNING]
        )
        if prev is None:
            st = self.store.state(self.id)
            if st is JobState.CANCELLED:
                return False
            raise JobStateError(
                f"job {self.id} is {st.value}; only queued or running jobs can be cancelled.",
                field="state",
                value=st.value,
            )
        return True

    def delete(self) -> int:
        """Remove the job's record, trials, journal, predictions and artifacts."""
        return self.store.delete_job(self.id)

    def extend(self, *, more_trials: int | None = None, wall_seconds: float | None = None) -> Job:
        """Continue a finished, cancelled or failed job on the same study, then finalize again.

        Args:
            more_trials: trials to add to the budget (default: the original ``max_trials``).
            wall_seconds: wall-clock budget of the continuation (default: the original).
        """
        spec = self.spec()
        done = self.store.tickets(self.id)
        extra = spec.max_trials if more_trials is None else more_trials
        new = parse_spec(
            spec.model_dump(mode="json"),
            max_trials=done + extra,
            wall_seconds=wall_seconds or spec.wall_seconds,
        )
        new.check_deadline()
        self.store.reopen(self.id, new.to_json(), shards=new.parallelism)
        timeout = self.client.settings.shard_seconds + new.trial_timeout + SHARD_TIMEOUT_SLACK
        for shard in range(new.parallelism):
            self.client.queue.enqueue_shard(self.id, shard, timeout=timeout)
        return self


#: A job that needs a worker and has had none alive this long gets a line saying so.
NO_WORKER_SECONDS = 5.0
_NEEDS_WORKER = frozenset({"queued", "running", "finalizing"})


class _WorkerWatch:
    """Notices, while a job waits, that no worker is alive on the store (says so once)."""

    def __init__(self, client: Client, every: float = 1.0) -> None:
        self.client, self.every = client, every
        self.alone_since: float | None = None
        self.checked_at = float("-inf")
        self.told = False

    def nobody_for_long(self, state: str) -> bool:
        """True once per spell of ``NO_WORKER_SECONDS`` without a live worker."""
        now = time.monotonic()
        if state not in _NEEDS_WORKER:
            self.alone_since = None
            return False
        if now - self.checked_at >= self.every:
            self.checked_at = now
            if self.client.workers():
                self.alone_since, self.told = None, False
            elif self.alone_since is None:
                self.alone_since = now
        if self.told or self.alone_since is None or now - self.alone_since < NO_WORKER_SECONDS:
            return False
        self.told = True
        return True

    def message(self) -> str:
        settings = self.client.settings
        where = "" if not settings.redis_url else f" --redis-url {masked_url(settings.redis_url)}"
        prefix = "" if settings.prefix == Settings().prefix else f" --prefix {settings.prefix}"
        return (
            f"tutti: no worker is alive on this store ({masked_url(self.client.url)}, prefix "
            f"{settings.prefix!r}), so the job waits; start one on any machine that reaches it: "
            f"`tutti{where}{prefix} start-workers --processes 2` (still waiting)"
        )


def _with_explanations(board: pd.DataFrame, explain: dict[str, Any]) -> pd.DataFrame:
    """Join finalize's significance and bias/variance columns onto the board (when present)."""
    sig = pd.DataFrame(explain.get("significance") or [])
    if not sig.empty:
        keep = [
            c for c in ("candidate", "mean_diff", "p_value", "distinguishable") if c in sig.columns
        ]
        board = board.merge(
            sig[keep].rename(columns={"mean_diff": "diff_vs_rank1"}), on="candidate", how="left"
        )
    bv = pd.DataFrame(explain.get("bias_variance") or [])
    if not bv.empty:
        board = board.merge(bv[["candidate", "bias", "variance"]], on="candidate", how="left")
    return board


def progress_line(st: dict[str, Any]) -> str:
    """``[#####-----] 12/60 trials · best roc_auc 0.9612 · 01:23 · running``.

    While finalizing, the state is followed by what finalize is doing (its ``phase``).
    """
    width = 24
    frac = min(st["trials_done"] / max(st["max_trials"], 1), 1.0)
    bar = "#" * round(frac * width) + "-" * (width - round(frac * width))
    best = "—" if st["best_score"] is None else f"{st['best_score']:.4f}"
    fails = f" · {st['failed']} failed" if st["failed"] else ""
    state = st["state"] + (f": {st['phase']}" if st.get("phase") else "")
    explained = f" · explanations {st['explanations']}" if st.get("explanations") else ""
    return (
        f"[{bar}] {st['trials_done']}/{st['max_trials']} trials · best {st['metric']} {best}"
        f" · {_fmt_seconds(st['elapsed_seconds'])}{fails} · {state}{explained}   "
    )
