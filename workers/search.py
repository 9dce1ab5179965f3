"""One search shard: a bounded slice of trials on the job's shared study, then hand-over.

Trials start only with a ticket from an atomic counter (the budget is exact across shards),
each running trial holds a short Redis lease refreshed while it runs, and a reaper fails
trials whose lease lapsed (Optuna's journal storage has no heartbeat). At the end of a slice
the shard re-enqueues itself while budget remains, so workers that join later get work; the
last shard to stop for good enqueues finalize.
"""

from __future__ import annotations

import contextlib
import logging
import time
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
import optuna
from optuna.trial import TrialState
from tuttiml.service.records import TableSummary, TrialRow
from tuttiml.service.spec import SearchSpec
from tuttiml.service.store import JobState
from tuttiml.workers.candidates import CALIBRATED_METRICS, calibrations
from tuttiml.workers.child import ChildFailure, TrialCrashed
from tuttiml.workers.composites import LibraryRefresher
from tuttiml.workers.context import WorkerContext
from tuttiml.workers.datasets import family_context
from tuttiml.workers.families import get_family
from tuttiml.workers.families._base import FamilyContext
from tuttiml.workers.finalize import refit_seconds
from tuttiml.workers.journal import journal_storage
from tuttiml.workers.leases import Lease, Reaper
from tuttiml.workers.oof import oof_bytes
from tuttiml.workers.schedule import Budget, choose_arm, fixed_params, portfolio_trials

log = logging.getLogger(__name__)
optuna.logging.set_verbosity(optuna.logging.WARNING)

MAX_RETRIES = 2
SHUT_DOWN = "stopped: its worker was shut down (SIGTERM)"
CALIBRATION = "calibration"
SLICE_SLACK = 600.0  # RQ job timeout on top of the slice and one trial
LEAKAGE_TIMEOUT = 120.0  # at least this long for the leakage checks before the first trial
#: Finalize refits the winner and, for a library ensemble, its members: the shards stop early
#: enough for this many of the best trials' all-rows refits (estimated from their fold fits,
#: times REFIT_SAFETY) to fit before the hard deadline.
REFIT_ESTIMATE_TOP = 5
REFIT_SAFETY = 2.0
REFIT_ESTIMATE_EVERY = 5.0
#: Library composites are refreshed only while this many seconds of search time remain.
REFRESH_MARGIN = 5.0


def derive_seed(*parts: int) -> int:
    """A sampler seed from (job seed, shard, slice): distinct shards never draw alike."""
    h = 0
    for p in parts:
        h = (h * 1_000_003 + int(p) + 0x9E3779B1) % (2**31 - 1)
    return h


def context_from_record(record: dict[str, Any], seed: int) -> FamilyContext:
    """The family context from the job record alone (the worker itself never decodes data)."""
    spec = SearchSpec.model_validate(record["spec"])
    cols = record.get("columns") or {}
    return family_context(
        task=str(record["task"]),
        seed=seed,
        n_search_rows=round(TableSummary.load(record["summary"]).rows * (1 - spec.holdout)),
        n_folds=spec.folds,
        schema=record["schema"],
        high_cardinality=tuple(cols.get("high_cardinality", ())),
        n_classes=len(record.get("classes") or []),
        metric=None if spec.metric is None else str(spec.metric),
    )


def _busy_seconds(study: optuna.Study) -> float:
    """Seconds the study's journal backend has spent talking to Redis (store cost figures)."""
    return float(getattr(getattr(study._storage, "_backend", None), "busy_seconds", 0.0))


def make_pruner() -> optuna.pruners.BasePruner:
    """Median pruning on the running fold mean, from the first step on, after 5 trials.

    Step 0 is the row-halving rung on large tables (see ``Dataset.rung``), else fold 0; a
    trial is never pruned after its last fold (the shard answers that itself).
    """
    return optuna.pruners.MedianPruner(n_startup_trials=5, n_warmup_steps=0)


def make_sampler(seed: int) -> optuna.samplers.BaseSampler:
    """Multivariate TPE over each family's own parameters (the shard picks the family)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        return optuna.samplers.TPESampler(
            seed=seed, multivariate=True, group=True, n_startup_trials=10
        )


def with_fixed(
    sampler: optuna.samplers.BaseSampler, fixed: dict[str, Any]
) -> optuna.samplers.BaseSampler:
    """``sampler`` with the family (and maybe its learner) fixed; enqueued trials keep theirs."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        return optuna.samplers.PartialFixedSampler(fixed, sampler)


def open_study(ctx: WorkerContext, job_id: str, seed: int) -> optuna.Study:
    """Create or load the job's study on the Redis journal, with a shard-specific sampler."""
    storage = journal_storage(ctx.store.journal(job_id))
    sampler = make_sampler(seed)
    return optuna.create_study(
        study_name=job_id,
        storage=storage,
        sampler=sampler,
        pruner=make_pruner(),
        direction="maximize",
        load_if_exists=True,
    )


@dataclass
class Deadlines:
    """Wall-clock limits of a job: trials start only before ``search``; all ends by ``hard``."""

    hard: float
    search: float

    @classmethod
    def of(cls, spec: SearchSpec, started_at: float) -> Deadlines:
        limits = [float("inf")]
        if spec.wall_seconds is not None:
            limits.append(started_at + spec.wall_seconds)
        if spec.deadline is not None:
            limits.append(spec.deadline.timestamp())
        hard = min(limits)
        span = hard - started_at
        reserve = min(max(0.1 * span, 5.0), 900.0) if np.isfinite(span) else 0.0
        return cls(hard=hard, search=hard - reserve)


class _FoldProgress:
    """Per-fold reports of one trial: feed the pruner, answer go or stop to the trial process."""

    def __init__(self, shard: Shard, trial: optuna.Trial, row: dict[str, Any]) -> None:
        self.shard, self.trial, self.row = shard, trial, row
        self.scores: list[float] = []
        self.rung = 0  # 1 when the table is large enough for a row-halving rung

    def on_fold(self, fold: int, score: float) -> bool:
        """Report a fold (or the rung, fold -1); False stops the trial here."""
        sh, trial = self.shard, self.trial
        if fold < 0:  # the rung: a fit on a row subsample, step 0 of the pruner
            self.rung = 1
            self.row["rung_score"] = score
            trial.report(score, 0)
        else:
            self.scores.append(score)
            trial.report(float(np.mean(self.scores)), fold + self.rung)
        if sh.store.state(sh.job_id) is JobState.CANCELLED:
            self.row["note"] = "cancelled"
            return False
        if len(self.scores) >= sh.spec.folds:
            return True  # every fold is done: a complete trial is never pruned
        if sh.ctx.stop.is_set():  # SIGTERM: stop here, fail and retry it below
            self.row["note"] = "worker_stop"
            return False
        return not trial.should_prune()


class Shard:
    """Runs one slice of a job's search in this worker process."""

    def __init__(self, ctx: WorkerContext, job_id: str, shard: int) -> None:
        self.ctx, self.job_id, self.shard = ctx, job_id, shard
        self.store = ctx.store
        self.record = self.store.job(job_id)
        self.spec = SearchSpec.model_validate(self.record["spec"])
        self._last_reap = 0.0
        self._slice_end = float("inf")
        self.reaper = Reaper(ctx, job_id)

    # ----------------------------------------------------------------- entry point
    def run(self) -> str:
        """Run trials until the slice, the budget or the deadline ends; returns why it stopped."""
        state = self.store.state(self.job_id)
        if state in (JobState.FINISHED, JobState.FAILED, JobState.FINALIZING):
            return "stale"
        self.store.transition(self.job_id, JobState.RUNNING, allowed_from=[JobState.QUEUED])
        started = float(self.store.set_field_once(self.job_id, "started_at", repr(time.time())))
        self.deadlines = Deadlines.of(self.spec, started)
        self.started = started
        self._reserve, self._reserve_at = 0.0, float("-inf")
        n_slice = self.store.incr_field(self.job_id, "slices")
        seed = derive_seed(self.spec.seed, self.shard, n_slice)
        self.fctx = context_from_record(self.record, self.spec.seed)
        study = open_study(self.ctx, self.job_id, seed)
        self._sampler = study.sampler
        self._enqueue_portfolio(study)
        self._prepare()
        self._check_leakage()
        self.refresher = LibraryRefresher(
            self.ctx,
            self.job_id,
            self.spec.family_names,
            library_size=self.spec.library_size,
            log_line=self.log,
        )
        slice_end = self._slice_end = time.monotonic() + self.ctx.settings.shard_seconds
        reason = ""
        while not reason:
            reason = self.stop_reason()
            if reason:
                break
            if time.monotonic() > slice_end:
                reason = "slice"
                break
            if self.store.take_ticket(self.job_id, self.spec.max_trials) is None:
                if self.settle_orphans(study):
                    continue
                reason = "budget"
                break
            self.reap(study)
            self.run_trial(study)
            self.ctx.doing.update(trial=None, family=None)
            if time.time() + REFRESH_MARGIN < self.deadlines.search:
                self.refresher.maybe_refresh()
        self.ctx.doing.clear()
        self.hand_over(reason)
        return reason

    def stop_reason(self) -> str:
        """Why the shard must stop now ('' to go on); job-level reasons come first."""
        if self.store.state(self.job_id) is JobState.CANCELLED:
            return "cancelled"
        now = time.time()
        if now >= self.deadlines.search or now + self.refit_reserve() >= self.deadlines.hard:
            return "deadline"
        if self.store.failures(self.job_id) >= self.spec.failure_cap:
            return "failure_cap"
        if self.ctx.stop.is_set():
            return "worker_stop"
        return ""

    def refit_reserve(self) -> float:
        """Seconds finalize is expected to need for its refits (0 until half the time is gone).

        The best trials' total fold-fit seconds ÷ (folds − 1) estimates one all-rows refit each
        (a fold trains on (k − 1)/k of the rows); the sum over the top few covers a library
        ensemble's members. Read from the board at most every few seconds.
        """
        now = time.time()
        span = self.deadlines.hard - self.started
        if not np.isfinite(span) or now < self.started + 0.5 * span:
            return 0.0
        if now - self._reserve_at >= REFIT_ESTIMATE_EVERY:
            rows = self.store.board(self.job_id, limit=REFIT_ESTIMATE_TOP)
            need = refit_seconds((TrialRow.load(r) for r in rows), self.spec.folds)
            self._reserve, self._reserve_at = REFIT_SAFETY * need, now
        return self._reserve

    def hand_over(self, reason: str) -> None:
        """Continue in a new slice, or stop for good (and finalize if this was the last)."""
        if reason == "slice":
            reason = self.stop_reason() or "slice"
        if reason in ("slice", "worker_stop"):
            self.ctx.queue.enqueue_shard(
                self.job_id,
                self.shard,
                timeout=self.rq_timeout(),
                at_front=reason == "worker_stop",
            )
            return
        self.store.set_field_once(self.job_id, "stop_reason", reason)
        self.log(f"shard {self.shard} stops: {reason}")
        if self.store.shard_stopped(self.job_id) <= 0:
            self.ctx.queue.enqueue_finalize(self.job_id, timeout=self.finalize_timeout())

    def rq_timeout(self) -> float:
        return self.ctx.settings.shard_seconds + self.spec.trial_timeout + SLICE_SLACK

    def finalize_timeout(self) -> float:
        return 4 * self.spec.trial_timeout + SLICE_SLACK

    def log(self, line: str) -> None:
        log.info("job %s %s", self.job_id, line)
        with contextlib.suppress(Exception):
            self.store.log(self.job_id, f"[{self.ctx.name}] {line}")

    # ----------------------------------------------------------------- trials
    def _enqueue_portfolio(self, study: optuna.Study) -> None:
        """Once per job: the portfolio's configurations, in order, before the sampler."""
        if not self.store.claim_field(self.job_id, "defaults_enqueued"):
            return
        start = portfolio_trials(self.families(), self.fctx, on_error=self.log)
        for name, params in start:
            study.enqueue_trial({"family": name, **params}, user_attrs={"default": True})
        for name in {name for name, _ in start}:
            self.store.set_fields(self.job_id, **{f"seeded:{name}": 1})

    def _seed_family(self, study: optuna.Study, family: str) -> None:
        """The first trial of a family the portfolio left out is its cheapest default."""
        if not self.store.claim_field(self.job_id, f"seeded:{family}"):
            return
        fam = get_family(family)
        defaults = sorted(fam.defaults(self.fctx), key=lambda p: fam.cost(p, self.fctx))
        if defaults:
            study.enqueue_trial({"family": family, **defaults[0]}, user_attrs={"default": True})

    def budget(self) -> Budget:
        """How much of the job's budget is spent (time or trials) and search seconds left."""
        now = time.time()
        span = self.deadlines.search - self.started
        by_time = (now - self.started) / span if np.isfinite(span) and span > 0 else 0.0
        by_trials = self.store.tickets(self.job_id) / max(self.spec.max_trials, 1)
        left = self.deadlines.search - now if np.isfinite(self.deadlines.search) else 1e9
        return Budget(spent=min(max(by_time, by_trials), 1.0), seconds_left=max(left, 0.0))

    def next_arm(self) -> str:
        """The arm of the next sampled trial (``workers.schedule``: gain per second)."""
        rows = self.store.trial_rows(self.job_id)
        # one shard: rank by the families' cost estimates, so that timing cannot change
        # which trials run (README, Reproducibility); several: by measured seconds
        measured = self.spec.parallelism > 1
        return choose_arm(self.families(), rows, self.budget(), self.fctx, measured=measured)

    def _prepare(self) -> None:
        """Have the trial process load the table now, so the first trial is not slower."""
        request = self.ctx.request(self.job_id)
        try:
            self.ctx.trials.request("prepare", request, timeout=max(self.spec.trial_timeout, 60))
        except (ChildFailure, TrialCrashed) as exc:
            self.log(f"could not preload the data: {exc}")

    def _check_leakage(self) -> None:
        """Run the job's leakage checks once, before its first trial, and store what they found.

        They are cheap (a depth-4 tree per column) and must never be skipped for lack of time,
        so they run before the search rather than in finalize's time-bounded explanations.
        The first shard to get here claims them; a failure is stored as the reason they did
        not run, so the report says "not run" rather than "nothing found".
        """
        me = f"{self.ctx.name}/{self.shard}/{time.time()!r}"
        if self.store.set_field_once(self.job_id, "leakage_claimed_by", me) != me:
            return
        request = self.ctx.request(self.job_id, dropped=self.record.get("dropped") or {})
        timeout = max(self.spec.trial_timeout, LEAKAGE_TIMEOUT)
        try:
            _, findings = self.ctx.trials.request("leakage", request, timeout=timeout)
            result: dict[str, Any] = {"findings": list(findings)}
        except (ChildFailure, TrialCrashed) as exc:
            self.log(f"leakage checks did not run: {exc}")
            result = {"error": f"the checks failed in the worker ({exc})"}
        self.store.set_extra(self.job_id, "leakage", result)

    def trial_timeout(self) -> float:
        """The spec's per-trial timeout, cut so that a trial ends before the hard deadline."""
        reserve = self.deadlines.hard - self.deadlines.search
        left = self.deadlines.hard - time.time() - 0.5 * reserve
        return max(min(self.spec.trial_timeout, left), 1.0)

    def families(self) -> list[str]:
        return [f for f in self.spec.family_names if self.fctx.task in get_family(f).tasks]

    def run_trial(self, study: optuna.Study) -> None:
        """Ask one trial, evaluate it in the trial process, and record how it ended."""
        busy0 = _busy_seconds(study)
        a0 = time.perf_counter()
        arm = self._pick_arm(study)
        trial = study.ask()
        row: dict[str, Any] = {
            "number": trial.number,
            "retry_of": trial.user_attrs.get("retry_of"),
            "shard": self.shard,
            "worker": self.ctx.name,
            "started_at": time.time(),
        }
        enqueued = trial.user_attrs.get("default") or "retries" in trial.user_attrs
        if arm is not None and not enqueued:
            row["arm"] = arm  # sampled for this arm (enqueued trials bring their own params)
        drawn = self._draw(study, trial, row)
        if drawn is None:
            return
        family, params = drawn
        row.update(family=family, params=params, ask_seconds=time.perf_counter() - a0)
        with contextlib.suppress(Exception):  # cost units for the schedule (workers.schedule)
            row["cost"] = float(get_family(family).cost(params, self.fctx))
        self.ctx.doing.update(
            job=self.job_id, shard=self.shard, trial=trial.number, family=family, since=time.time()
        )
        folds = _FoldProgress(self, trial, row)
        outcome = self._evaluate(study, trial, row, folds)
        if outcome is not None:
            self._settle(study, trial, row, outcome, folds, busy0)

    def _pick_arm(self, study: optuna.Study) -> str | None:
        """Point the sampler at the schedule's next arm (the plain sampler if that fails)."""
        try:
            arm = self.next_arm()
            fixed = fixed_params(arm)
            self._seed_family(study, fixed["family"])
            study.sampler = with_fixed(self._sampler, fixed)
            return arm
        except Exception as exc:  # the schedule must never stop the search
            self.log(f"schedule fell back to the sampler: {type(exc).__name__}: {exc}")
            study.sampler = self._sampler
            return None

    def _draw(
        self, study: optuna.Study, trial: optuna.Trial, row: dict[str, Any]
    ) -> tuple[str, dict[str, Any]] | None:
        """The trial's family and parameters; a broken search space fails the trial (None)."""
        try:
            family = str(trial.suggest_categorical("family", self.families()))
            params = get_family(family).suggest(trial, self.fctx)
            if self.fctx.is_classification and self.spec.metric in CALIBRATED_METRICS:
                # probability calibration, fitted inside each training fold (inner 3-fold)
                choices = calibrations(self.fctx.n_rows)
                params[CALIBRATION] = str(trial.suggest_categorical(CALIBRATION, choices))
        except Exception as exc:
            self.fail(
                study,
                trial,
                {**row, "family": "unknown", "params": {}},
                f"{type(exc).__name__}: {exc}",
                retry=False,
            )
            return None
        return family, params

    def _evaluate(
        self,
        study: optuna.Study,
        trial: optuna.Trial,
        row: dict[str, Any],
        folds: _FoldProgress,
    ) -> tuple[str, dict[str, Any]] | None:
        """Run the candidate in the trial process under the trial's lease.

        Returns ``(kind, result)``, or None when the trial failed (and was recorded so).
        """
        request = self.ctx.request(
            self.job_id,
            family=row["family"],
            params=row["params"],
            seed=self.spec.seed,
            trial=trial.number,
            memory_mb=self.spec.memory_limit_mb,
        )
        lease_key = self.store.keys.trial_lease(self.job_id, trial._trial_id)
        timeout = self.trial_timeout()
        t_child = time.perf_counter()
        try:
            with Lease(self.ctx, lease_key, self.ctx.settings.lease_seconds):
                kind, result = self.ctx.trials.request(
                    "evaluate", request, timeout=timeout, on_fold=folds.on_fold
                )
            row["trial_process_seconds"] = time.perf_counter() - t_child
        except (ChildFailure, TrialCrashed) as exc:
            detail = str(exc)
            if isinstance(exc, ChildFailure) and exc.trace:
                self.log(f"trial {trial.number} traceback:\n{exc.trace}")
            if self.ctx.stop.is_set():
                self.fail(study, trial, row, f"{SHUT_DOWN}; {detail}", retry=True, count=False)
                return None
            timed_out = isinstance(exc, TrialCrashed) and exc.reason == "timeout"
            if timed_out and timeout < self.spec.trial_timeout:  # cut by the job's deadline
                detail = f"stopped at the job's deadline after {timeout:.0f} s"
                self.fail(study, trial, row, detail, retry=False, count=False)
                return None
            if timed_out:
                detail = f"timeout: ran past trial_timeout={self.spec.trial_timeout:g} s"
            self.fail(study, trial, row, detail, retry=True)
            return None
        return kind, result

    def _settle(
        self,
        study: optuna.Study,
        trial: optuna.Trial,
        row: dict[str, Any],
        outcome: tuple[str, dict[str, Any]],
        folds: _FoldProgress,
        busy0: float,
    ) -> None:
        """Tell the study and record the row of a trial the trial process finished."""
        kind, result = outcome
        row.update(
            members=result.get("members", ""),
            size_bytes=result.get("size_bytes"),
            fold_scores=result["fold_scores"],
            fit_seconds=result["fit_seconds"],
            predict_ms=result["predict_ms"],
            fit_info=result["fit_info"],
            finished_at=time.time(),
            seconds=time.time() - row["started_at"],
        )
        family = row["family"]
        if row.get("note") == "worker_stop":
            self.fail(study, trial, row, SHUT_DOWN, retry=True, count=False)
            return
        if kind == "done":
            score = float(np.mean(result["fold_scores"]))
            row.update(
                state="complete",
                score=score,
                score_std=float(np.std(result["fold_scores"], ddof=1))
                if len(result["fold_scores"]) > 1
                else 0.0,
            )
            if not self._tell(study, trial, row, busy0, values=score):
                return
            self.store.record_trial(
                self.job_id,
                TrialRow(**row),
                oof=oof_bytes(result["oof"]),
                library_size=self.spec.library_size,
            )
            self.log(f"trial {trial.number} {family} complete score={score:.5f}")
        else:
            row.update(state="pruned")
            if not self._tell(study, trial, row, busy0, state=TrialState.PRUNED):
                return
            self.store.record_trial(self.job_id, TrialRow(**row))
            where = (
                f"after {len(folds.scores)} folds"
                if folds.scores or not folds.rung
                else f"at the row-halving rung (score {row['rung_score']:.5f})"
            )
            self.log(f"trial {trial.number} {family} pruned {where}")

    def _tell(
        self,
        study: optuna.Study,
        trial: optuna.Trial,
        row: dict[str, Any] | None = None,
        busy0: float = 0.0,
        **kwargs: Any,
    ) -> bool:
        """Close the trial in the study; with ``row``, record the tell's and the journal's time
        (journal time counted from ``busy0``, the backend's busy seconds when the trial began).
        """
        t0 = time.perf_counter()
        try:
            study.tell(trial, **kwargs)
        except (optuna.exceptions.UpdateFinishedTrialError, ValueError, RuntimeError) as exc:
            self.log(f"trial {trial.number} was already closed elsewhere ({exc}); result dropped")
            return False
        if row is not None:
            row.update(
                tell_seconds=time.perf_counter() - t0,
                journal_seconds=_busy_seconds(study) - busy0,
            )
        return True

    def fail(
        self,
        study: optuna.Study,
        trial: optuna.Trial,
        row: dict[str, Any],
        error: str,
        *,
        retry: bool,
        count: bool = True,
    ) -> None:
        """Record a failed trial, give its ticket back and retry its parameters (at most 2×).

        ``count=False`` (a trial cut by the job's deadline) keeps it out of the failure cap.
        """
        if not self._tell(study, trial, state=TrialState.FAIL):
            return
        self.store.return_ticket(self.job_id)
        n_fail = self.store.add_failure(self.job_id) if count else self.store.failures(self.job_id)
        retries = int(trial.user_attrs.get("retries", 0))
        row.update(state="failed", error=error[:2000], finished_at=time.time(), retries=retries)
        self.store.record_trial(self.job_id, TrialRow(**row))
        self.log(f"trial {trial.number} failed ({n_fail} so far): {error[:300]}")
        if retry and "family" in row and row.get("params") is not None:
            self._retry(study, trial.number, {"family": row["family"], **row["params"]}, retries)

    @staticmethod
    def _retry(study: optuna.Study, number: int, params: dict[str, Any], retries: int) -> None:
        """Queue a failed trial's parameters again, unless they were retried MAX_RETRIES times."""
        if retries < MAX_RETRIES:
            study.enqueue_trial(params, user_attrs={"retry_of": number, "retries": retries + 1})

    # ----------------------------------------------------------------- reaper
    def reap(self, study: optuna.Study, *, force: bool = False) -> int:
        """Fail RUNNING trials whose lease lapsed (their worker died); returns how many.

        At most once per lease period unless ``force``; see ``workers.leases.Reaper``.
        """
        now = time.monotonic()
        if not force and now - self._last_reap < self.ctx.settings.lease_seconds:
            return 0
        self._last_reap = now
        return self.reaper.reap(study, retry=self._retry)

    def settle_orphans(self, study: optuna.Study) -> bool:
        """On a spent budget: wait for trials of dead workers to be reapable, then reap them.

        A dead worker's trial took a ticket; reaping gives it back and queues the retry, so
        this shard must not stop for good while such a trial is RUNNING (no other shard may be
        left to reap it, and finalize would then run short of the budget). Returns True when
        the run loop should go on: a ticket came back, or a stop reason or the slice end came
        up (the loop checks those first); False when no unleased trial is left.
        """
        while self.reaper.orphans(study):
            if self.reap(study, force=True):
                return True
            if self.stop_reason() or time.monotonic() > self._slice_end:
                return True
            self.ctx.stop.wait(min(1.0, self.ctx.settings.lease_seconds / 4))
        return False
