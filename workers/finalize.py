"""Finalize: library ensembles, choice of the winner, refit on all rows, fenced commit.

Runs at least once per job (enqueued by the last shard to stop, re-enqueued by the sweep if
its worker died) and commits exactly once per epoch: the commit is a compare-and-set on the
job record, so a duplicate finalize changes nothing.
"""

from __future__ import annotations

import contextlib
import logging
import platform
import time
from collections.abc import Iterable
from typing import Any

from tuttiml.service.artifacts import seal
from tuttiml.service.spec import SearchSpec, natural
from tuttiml.service.store import JobState
from tuttiml.service.trusted import TRUSTED_TYPES
from tuttiml.workers.child import ChildFailure, TrialCrashed
from tuttiml.workers.context import WorkerContext

log = logging.getLogger(__name__)
REFIT_TRIES = 3
PARETO_REFITS = 3
TOP_N = 5
EXPLAIN_SHARE = 0.25


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


def refit_seconds(rows: Iterable[dict[str, Any]], folds: int) -> float:
    """Estimated seconds to refit these trials on all rows, one after the other.

    A trial's ``fit_seconds`` sums its fold fits, each on (folds − 1)/folds of the rows, so
    one all-rows refit is about that sum ÷ (folds − 1).
    """
    return sum(float(r.get("fit_seconds") or 0.0) for r in rows) / max(folds - 1, 1)


def trial_optimism(library: list[dict[str, Any]]) -> float:
    """BBC-CV optimism of picking the best trial, as the library step reported it (0 if none)."""
    return max((float(e.get("trial_optimism", 0.0)) for e in library), default=0.0)


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
        board = self.store.board(self.job_id)
        if not board:
            return self.commit_empty(final)
        t_lib = time.time()
        library = self.library_ensembles(board)
        library_seconds = time.time() - t_lib
        candidates = self.candidates(board, library)
        candidates, over_time = self.affordable(candidates, board)
        artifacts: dict[str, tuple[bytes, dict[str, Any]]] = {}
        chosen: dict[str, Any] | None = None
        errors: list[str] = []
        for cand in candidates[:REFIT_TRIES]:
            try:
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
                extras={"library": library, "refit_errors": errors},
                state=JobState.FAILED,
                reason=reason,
            )
            return "failed" if ok else "duplicate"
        meta = artifacts["best"][1]
        pareto = self.pareto(candidates, chosen, artifacts)
        explained = self.explain(candidates, library, board)
        extras = {
            "library": library,
            "best": {k: chosen[k] for k in ("id", "kind", "family", "score")},
            "trial_optimism": trial_optimism(library),
            "holdout_score": meta.get("holdout_score"),
            "finalize_seconds": time.time() - t0,
            "library_seconds": library_seconds,
            "refit_errors": errors,
            "passed_over_for_time": over_time,
            "pareto": pareto,
            "explain": explained,
        }
        ok = self.store.commit_final(
            self.job_id, self.epoch, artifacts=artifacts, extras=extras, state=final
        )
        self.log(f"{'committed' if ok else 'duplicate, nothing changed'}: best {chosen['id']}")
        return "committed" if ok else "duplicate"

    def affordable(
        self, candidates: list[dict[str, Any]], board: list[dict[str, Any]]
    ) -> tuple[list[dict[str, Any]], list[str]]:
        """Candidates whose refit fits in the time left, and the ids of library ensembles
        passed over because theirs would not.

        A library ensemble refits every member on all rows, one after the other; its cost is
        estimated from the members' fold-fit seconds (one refit ≈ the sum over folds ÷
        (folds − 1)). A trial refits one pipeline and is always allowed, so the job ends near
        its wall budget with the best candidate it can still afford.
        """
        rows = {int(r["number"]): r for r in board}
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

    def pareto(
        self,
        candidates: list[dict[str, Any]],
        chosen: dict[str, Any],
        artifacts: dict[str, tuple[bytes, dict[str, Any]]],
    ) -> list[dict[str, Any]]:
        """Score vs predict latency front; its best few members are refitted too."""
        from tuttiml.workers.diagnostics import pareto_front

        rows = self.store.board(self.job_id)
        points = [
            {
                "id": f"t{r['number']}",
                "score": float(r["score"]),
                "predict_ms": float(r.get("predict_ms", float("nan"))),
            }
            for r in rows
        ]
        front = set(pareto_front(points))
        by_id = {c["id"]: c for c in candidates}
        refits = 0
        for p in sorted(points, key=lambda q: -q["score"]):
            if p["id"] not in front or p["id"] == chosen["id"] or refits >= PARETO_REFITS:
                continue
            if self.time_left() < 2 * self.spec.trial_timeout / 3:
                break
            try:
                artifacts[f"pareto-{p['id']}"] = self.refit(by_id[p["id"]])
                refits += 1
            except (ChildFailure, TrialCrashed, ValueError) as exc:
                self.log(f"pareto refit of {p['id']} failed: {exc}")
        return [
            {
                "candidate": p["id"],
                "score": natural(self.spec.metric, p["score"]),
                "predict_ms": p["predict_ms"],
                "on_front": p["id"] in front,
            }
            for p in points
        ]

    def explain(
        self,
        candidates: list[dict[str, Any]],
        library: list[dict[str, Any]],
        board: list[dict[str, Any]],
    ) -> dict[str, Any]:
        """Honest estimate, significance, bias/variance, diagnostics, leakage (time-bounded)."""
        started = float(self.record.get("started_at") or time.time())
        searched = max(time.time() - started, 0.0)
        # explanations cost a quarter of the search time, at least the floor and at most the
        # cap (30 s and 900 s by default), never more than 60% of the time left before the
        # deadline; with less than the floor to spend, the parts that fit models are skipped
        # (listed as such) so a short job ends on time
        floor = min(self.ctx.settings.explain_min_seconds, self.ctx.settings.explain_max_seconds)
        budget = min(
            max(EXPLAIN_SHARE * searched, floor),
            max(self.time_left() * 0.6, 0.0),
            self.ctx.settings.explain_max_seconds,
        )
        fits_allowed = budget >= floor
        top = [
            {
                "id": c["id"],
                "family": c["family"],
                "params": c["members"][0]["params"],
                "score": c["score"],
            }
            for c in candidates
            if c["kind"] == "trial"
        ][:TOP_N]
        try:
            _, out = self.ctx.trials.request(
                "explain",
                self.request(
                    families=list(self.spec.family_names),
                    top=top,
                    library=library,
                    scores={str(r["number"]): float(r["score"]) for r in board},
                    dropped=self.record.get("dropped") or {},
                    leakage_needed="leakage" not in self.store.extras(self.job_id),
                    budget_seconds=budget,
                    fits_allowed=fits_allowed,
                ),
                timeout=budget + max(self.spec.trial_timeout, 120.0),
            )
            return dict(out)
        except (ChildFailure, TrialCrashed) as exc:
            self.log(f"explanations skipped: {exc}")
            return {"error": str(exc)}

    def commit_empty(self, final: JobState) -> str:
        rows = self.store.trial_rows(self.job_id)
        errors = [r.get("error", "") for r in rows if r.get("state") == "failed"]
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

    def library_ensembles(self, board: list[dict[str, Any]]) -> list[dict[str, Any]]:
        """Ensembles over the stored out-of-fold predictions (no fold fits), scored honestly."""
        if self.spec.library_size <= 0 or len(board) < 2:
            return []
        try:
            _, result = self.ctx.trials.request(
                "library",
                self.request(families=list(self.spec.family_names)),
                timeout=max(self.spec.trial_timeout, 300.0),
            )
            return list(result)
        except (ChildFailure, TrialCrashed) as exc:
            self.log(f"library ensembles skipped: {exc}")
            return []

    def candidates(
        self, board: list[dict[str, Any]], library: list[dict[str, Any]]
    ) -> list[dict[str, Any]]:
        """Complete trials and library ensembles, best first (greater is better).

        Like is compared with like: a library ensemble's score is nested (its weights never saw
        the rows they are scored on), while the best of many trials' CV scores is inflated by
        the picking itself. Trials are therefore ranked by their score minus the BBC-CV
        optimism of picking the best trial (``trial_optimism``, from the library step); the
        reported ``score`` stays the plain CV score.
        """
        by_number = {int(r["number"]): r for r in board}
        optimism = trial_optimism(library)
        out = [
            {
                "id": f"t{r['number']}",
                "kind": "trial",
                "family": r["family"],
                "score": float(r["score"]),
                "rank_score": float(r["score"]) - optimism,
                "members": [self.member(r)],
                "weights": None,
            }
            for r in board
        ]
        for ens in library:
            members = [by_number[int(n)] for n in ens["members"] if int(n) in by_number]
            if len(members) != len(ens["members"]):
                continue
            out.append(
                {
                    "id": ens["id"],
                    "kind": "library",
                    "family": f"library:{ens['method']}",
                    "score": float(ens["score"]),
                    "rank_score": float(ens["score"]),
                    "members": [self.member(r) for r in members],
                    "weights": ens.get("weights"),
                    "combiner": ens.get("combiner"),
                }
            )
        return sorted(out, key=lambda c: (-c["rank_score"], c["kind"] != "trial", c["id"]))

    @staticmethod
    def member(row: dict[str, Any]) -> dict[str, Any]:
        return {
            "number": int(row["number"]),
            "family": row["family"],
            "params": row["params"],
            "fit_info": row.get("fit_info") or [],
        }

    def refit(self, cand: dict[str, Any]) -> tuple[bytes, dict[str, Any]]:
        _, out = self.ctx.trials.request(
            "refit",
            self.request(members=cand["members"], combiner=cand.get("combiner")),
            timeout=max(4 * self.spec.trial_timeout, 600.0),
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
            "decision_threshold": out.get("decision_threshold"),
            "versions": versions(),
            "created_at": time.time(),
        }
        return blob, meta
