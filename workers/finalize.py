"""Finalize: library ensembles, choice of the winner, refit on all rows, fenced commit.

Runs at least once per job (enqueued by the last shard to stop, re-enqueued by the sweep if
its worker died) and commits exactly once per epoch: the commit is a compare-and-set on the
job record, so a duplicate finalize changes nothing. The model is due at the job's deadline:
the explanations (significance, bias/variance, Pareto refits, diagnostics) are marked pending
in the same commit and run afterwards as their own task (``workers/explain_task.py``).
"""

from __future__ import annotations

import contextlib
import logging
import platform
import time
from collections.abc import Iterable
from typing import Any

from tuttiml.service.artifacts import seal
from tuttiml.service.explanations import default_budget, pending_record
from tuttiml.service.records import FinalResult, LibraryRecord, Selection, TrialRow, Winner
from tuttiml.service.spec import SearchSpec
from tuttiml.service.store import JobState
from tuttiml.service.trusted import TRUSTED_TYPES
from tuttiml.workers.child import ChildFailure, TrialCrashed
from tuttiml.workers.context import WorkerContext

log = logging.getLogger(__name__)
REFIT_TRIES = 3
#: Rough seconds of the library step (ensembles over stored predictions plus one BBC-CV) on
#: a few thousand rows and a few dozen candidates; measured 2–12 s on a busy 2-core machine.
LIBRARY_SECONDS = 10.0


def versions() -> dict[str, str]:
    """Library versions stored beside the artifact (the client warns on a mismatch)."""
    import lightgbm
    import numpy
    import sklearn
    import skops
    from tuttiml.service.version import __version__

    return {
        "tutti": __version__,
        "scikit-learn": sklearn.__version__,
        "lightgbm": lightgbm.__version__,
        "numpy": numpy.__version__,
        "skops": skops.__version__,
        "python": platform.python_version(),
    }


def refit_seconds(rows: Iterable[TrialRow], folds: int) -> float:
    """Estimated seconds to refit these trials on all rows, one after the other.

    A trial's ``fit_seconds`` sums its fold fits, each on (folds − 1)/folds of the rows, so
    one all-rows refit is about that sum ÷ (folds − 1).
    """
    return sum(r.fit_seconds or 0.0 for r in rows) / max(folds - 1, 1)


def explain_timeout(budget: float, spec: SearchSpec) -> float:
    """RQ timeout of the explanation task: its budget plus one refit's worth of slack."""
    return budget + max(4 * spec.trial_timeout, 600.0) + 60.0


def trial_optimism(library: list[LibraryRecord]) -> float:
    """BBC-CV optimism of picking the best trial, as the library step reported it (0 if none)."""
    return max((e.trial_optimism for e in library), default=0.0)


class Finalizer:
    """Builds and commits the final result of one job."""

    def __init__(self, ctx: WorkerContext, job_id: str) -> None:
        self.ctx, self.job_id, self.store = ctx, job_id, ctx.store
        self.record = self.store.job(job_id)
        self.spec = SearchSpec.model_validate(self.record["spec"])
        self.epoch = str(self.record.get("epoch", "0"))

    def log(self, line: str) -> None:
        log.info("job %s %s", self.job_id, line)
        with contextlib.suppress(Exception):
            self.store.log(self.job_id, f"[{self.ctx.name}] finalize: {line}")

    def phase(self, text: str) -> None:
        """Say what finalize is doing now: on the job record (``tutti status``) and in its log."""
        self.log(text)
        with contextlib.suppress(Exception):
            self.store.set_phase(self.job_id, text)

    def request(self, **extra: Any) -> dict[str, Any]:
        return self.ctx.request(
            self.job_id, seed=self.spec.seed, memory_mb=self.spec.memory_limit_mb, **extra
        )

    def run(self) -> str:
        state = self.store.state(self.job_id)
        if state in (JobState.FINISHED, JobState.FAILED):
            return "already final"
        final = JobState.CANCELLED if state is JobState.CANCELLED else JobState.FINISHED
        if final is JobState.FINISHED:
            self.store.transition(
                self.job_id, JobState.FINALIZING, allowed_from=[JobState.QUEUED, JobState.RUNNING]
            )
        t0 = time.time()
        self.phase("started")
        board = [TrialRow.load(r) for r in self.store.board(self.job_id)]
        if not board:
            return self.commit_empty(final)
        t_lib = time.time()
        library: list[LibraryRecord] = []
        selection: Selection | None = None
        if self.library_in_time(board):
            self.phase(f"library ensembles over {len(board)} candidates")
            library = self.library_ensembles(board)
            self.phase("honest estimate of picking the best (BBC-CV)")
            selection = self.selection()  # else the explanations compute it, after the commit
        else:  # no time to rebuild: the composites the search built (workers.composites)
            library = self.search_library(board)
        optimism = max(selection.optimism, 0.0) if selection else 0.0
        # what the best trial's CV score overstates (like with like)
        library = [ens.model_copy(update={"trial_optimism": optimism}) for ens in library]
        library_seconds = time.time() - t_lib
        candidates = self.candidates(board, library)
        candidates, over_time = self.affordable(candidates, board)
        artifacts: dict[str, tuple[bytes, dict[str, Any]]] = {}
        chosen: dict[str, Any] | None = None
        errors: list[str] = []
        for cand in candidates[:REFIT_TRIES]:
            try:
                self.phase(f"refit of {cand['id']} ({cand['family']}) on all rows")
                artifacts["best"] = self.refit(cand)
                chosen = cand
                break
            except (ChildFailure, TrialCrashed, ValueError) as exc:
                errors.append(f"{cand['id']}: {exc}")
                self.log(f"refit of {cand['id']} failed: {exc}")
        if chosen is None:
            reason = "refit of the best candidates failed: " + "; ".join(errors)
            ok = self.store.commit_final(
                self.job_id,
                self.epoch,
                artifacts={},
                # every field whose sign changed with version 2 is written (or cleared), so
                # the version this write stamps never covers an earlier version's values
                extras=FinalResult(
                    library=library, refit_errors=errors, holdout_score=None, pareto=[]
                ).dump(),
                state=JobState.FAILED,
                reason=reason,
            )
            return "failed" if ok else "duplicate"
        meta = artifacts["best"][1]
        budget = self.explain_budget(t0)
        result = FinalResult(
            library=library,
            best=Winner(**{k: chosen[k] for k in ("id", "kind", "family", "score")}),
            trial_optimism=trial_optimism(library),
            holdout_score=meta.get("holdout_score"),
            finalize_seconds=time.time() - t0,
            library_seconds=library_seconds,
            refit_errors=errors,
            passed_over_for_time=over_time,
            selection=selection,
            explain=pending_record(self.epoch, budget),
            pareto=[],  # this epoch's points come with its explanations
        )
        self.phase("saving the result")
        ok = self.store.commit_final(
            self.job_id,
            self.epoch,
            artifacts=artifacts,
            extras=result.dump(),
            state=final,
            fields={"explain_state": "pending", "explain_budget": repr(budget)},
        )
        self.log(f"{'committed' if ok else 'duplicate, nothing changed'}: best {chosen['id']}")
        if ok:  # a lost enqueue is found by the sweep (explanations pending, no task)
            self.ctx.queue.enqueue_explain(self.job_id, timeout=explain_timeout(budget, self.spec))
        return "committed" if ok else "duplicate"

    def search_library(self, board: list[TrialRow]) -> list[LibraryRecord]:
        """The library ensembles last built during the search, if all their members are on
        the board (scored the same honest way; they may miss the last few trials)."""
        numbers = {r.number for r in board}
        out = [
            ens
            for ens in FinalResult.load(self.store.extras(self.job_id)).library
            if ens.during_search and set(ens.members) <= numbers
        ]
        if out:
            self.log(f"library ensembles from the search reused: {len(out)}")
        return out

    def library_in_time(self, board: list[TrialRow]) -> bool:
        """Whether the time left before the deadline covers library ensembles (about
        ``LIBRARY_SECONDS``) plus the best trial's refit (estimated, doubled): the model is due
        at the deadline, so a late finalize goes straight to refitting the best trial."""
        need = LIBRARY_SECONDS + 2.0 * refit_seconds(board[:1], self.spec.folds)
        left = self.time_left()
        if left >= need:
            return True
        self.log(
            f"library ensembles skipped: {left:.0f} s left, they and the refit need ~{need:.0f} s"
        )
        return False

    def explain_budget(self, search_end: float) -> float:
        """Seconds the explanations get: the spec's, or a quarter of the search time within
        the workers' bounds."""
        started = float(self.record.get("started_at") or search_end)
        return default_budget(
            search_end - started,
            explicit=self.spec.explain_seconds,
            min_seconds=self.ctx.settings.explain_min_seconds,
            max_seconds=self.ctx.settings.explain_max_seconds,
        )

    def selection(self) -> Selection | None:
        """BBC-CV of picking the best kept candidate (greater-is-better; None when none)."""
        if self.spec.library_size <= 0:
            return None
        try:
            _, out = self.ctx.trials.request(
                "selection",
                self.request(families=list(self.spec.family_names)),
                timeout=max(self.spec.trial_timeout, 300.0),
            )
            return Selection.model_validate(out) if out else None
        except (ChildFailure, TrialCrashed) as exc:
            self.log(f"honest estimate skipped: {exc}")
            return None

    def affordable(
        self, candidates: list[dict[str, Any]], board: list[TrialRow]
    ) -> tuple[list[dict[str, Any]], list[str]]:
        """Candidates whose refit fits in the time left, and the ids of library ensembles
        passed over because theirs would not.

        A library ensemble refits every member on all rows, one after the other; its cost is
        estimated from the members' fold-fit seconds (one refit ≈ the sum over folds ÷
        (folds − 1)). A trial refits one pipeline and is always allowed, so the job ends near
        its wall budget with the best candidate it can still afford.
        """
        rows = {r.number: r for r in board}
        left = self.time_left()
        keep, passed = [], []
        for cand in candidates:
            members = [rows[m["number"]] for m in cand["members"] if m["number"] in rows]
            need = refit_seconds(members, self.spec.folds)
            if cand["kind"] == "library" and need > left:
                passed.append(cand["id"])
                continue
            keep.append(cand)
        if passed:
            self.log(f"passed over for time ({left:.0f} s left): {', '.join(passed)}")
        return keep, passed

    def time_left(self) -> float:
        """Seconds until the job's hard deadline (generous when the job has none)."""
        limits = []
        started = self.record.get("started_at")
        if started and self.spec.wall_seconds:
            limits.append(float(started) + self.spec.wall_seconds)
        if self.spec.deadline is not None:
            limits.append(self.spec.deadline.timestamp())
        if not limits:
            return max(300.0, 2 * self.spec.trial_timeout)
        return min(limits) - time.time()

    def commit_empty(self, final: JobState) -> str:
        rows = [TrialRow.load(r) for r in self.store.trial_rows(self.job_id)]
        errors = [r.error or "" for r in rows if r.state == "failed"]
        reason = (
            f"no trial completed ({len(errors)} failed"
            + (f"; last error: {errors[-1][:300]}" if errors else "")
            + ")"
        )
        state = JobState.CANCELLED if final is JobState.CANCELLED else JobState.FAILED
        ok = self.store.commit_final(
            self.job_id, self.epoch, artifacts={}, extras={}, state=state, reason=reason
        )
        return "empty" if ok else "duplicate"

    def library_ensembles(self, board: list[TrialRow]) -> list[LibraryRecord]:
        """Ensembles over the stored out-of-fold predictions (no fold fits), scored honestly."""
        if self.spec.library_size <= 0 or len(board) < 2:
            return []
        try:
            _, result = self.ctx.trials.request(
                "library",
                self.request(families=list(self.spec.family_names)),
                timeout=max(self.spec.trial_timeout, 300.0),
            )
            return [LibraryRecord.load(doc) for doc in result]
        except (ChildFailure, TrialCrashed) as exc:
            self.log(f"library ensembles skipped: {exc}")
            return []

    def candidates(
        self, board: list[TrialRow], library: list[LibraryRecord]
    ) -> list[dict[str, Any]]:
        """Complete trials and library ensembles, best first (greater is better).

        Like is compared with like: a library ensemble's score is nested (its weights never saw
        the rows they are scored on), while the best of many trials' CV scores is inflated by
        the picking itself. Trials are therefore ranked by their score minus the BBC-CV
        optimism of picking the best trial (``trial_optimism``, from the library step); the
        reported ``score`` stays the plain CV score.
        """
        by_number = {r.number: r for r in board}
        optimism = trial_optimism(library)
        out = [
            {
                "id": f"t{r.number}",
                "kind": "trial",
                "family": r.family,
                "score": r.ranked_score(),
                "rank_score": r.ranked_score() - optimism,
                "members": [self.member(r)],
                "weights": None,
            }
            for r in board
        ]
        for ens in library:
            members = [by_number[n] for n in ens.members if n in by_number]
            if len(members) != len(ens.members):
                continue
            out.append(
                {
                    "id": ens.id,
                    "kind": "library",
                    "family": f"library:{ens.method}",
                    "score": ens.score,
                    "rank_score": ens.score,
                    "members": [self.member(r) for r in members],
                    "weights": ens.weights,
                    "combiner": ens.combiner.model_dump(mode="json") if ens.combiner else None,
                }
            )
        return sorted(out, key=lambda c: (-c["rank_score"], c["kind"] != "trial", c["id"]))

    @staticmethod
    def member(row: TrialRow) -> dict[str, Any]:
        return {
            "number": row.number,
            "family": row.family,
            "params": row.params,
            "fit_info": row.fit_info,
        }

    def refit(
        self, cand: dict[str, Any], *, timeout: float | None = None
    ) -> tuple[bytes, dict[str, Any]]:
        """Refit ``cand`` on all rows in the trial process; its skops bytes and metadata."""
        _, out = self.ctx.trials.request(
            "refit",
            self.request(members=cand["members"], combiner=cand.get("combiner")),
            timeout=max(4 * self.spec.trial_timeout, 600.0) if timeout is None else timeout,
        )
        untrusted = set(out["untrusted"]) - set(TRUSTED_TYPES)
        if untrusted:
            raise ValueError(f"pipeline holds types outside the trusted list: {sorted(untrusted)}")
        blob: bytes = out["blob"]
        meta = {
            "job_id": self.job_id,
            "candidate": cand["id"],
            "kind": cand["kind"],
            "family": cand["family"],
            "cv_score": cand["score"],
            "metric": self.spec.metric.value if self.spec.metric else None,
            "task": self.record["task"],
            "classes": self.record.get("classes"),
            "schema": self.record["schema"],
            "sha256": out["sha256"],
            "hmac": seal(blob, self.ctx.settings.artifact_key),
            "size_bytes": out["size_bytes"],
            "fit_seconds": out["fit_seconds"],
            "predict_ms": out["predict_ms"],
            "holdout_score": out["holdout_score"],
            "score_note": "cv_score and holdout_score are greater-is-better: losses (log "
            "loss, RMSE, MAE) are negated",
            "decision_threshold": out.get("decision_threshold"),
            "versions": versions(),
            "created_at": time.time(),
        }
        return blob, meta
