"""The explanations of a committed job: their own task, their own budget, one fenced commit.

Finalize commits the best pipeline by the job's deadline and enqueues this task with the
explanations marked pending. Here each part runs in the trial process under a hard timeout
(its share of the budget), so a part that overruns loses only itself and is recorded as not
run, with the reason; unused time passes to the later parts. The result is committed once per
epoch (``JobStore.commit_explanations``), so a duplicate task or one made stale by ``extend``
changes nothing; the sweep re-enqueues the task when its worker died.
"""

from __future__ import annotations

import contextlib
import logging
import time
from typing import Any

from tuttiml.service.explanations import (
    EXPLAIN_VERSION,
    ExplainState,
    PartStatus,
    not_run_record,
)
from tuttiml.service.records import FinalResult, LibraryRecord, ParetoPoint, TrialRow
from tuttiml.service.spec import natural
from tuttiml.service.store import JobState
from tuttiml.workers.child import ChildFailure, TrialCrashed
from tuttiml.workers.context import WorkerContext
from tuttiml.workers.finalize import Finalizer, refit_seconds

log = logging.getLogger(__name__)
TOP_N = 5
PARETO_REFITS = 3
#: Share of the budget each part that fits models may use; unused time flows to later parts.
SHARES: dict[str, float] = {
    "leakage": 0.15,
    "significance": 0.35,
    "bias_variance": 0.2,
    "composites": 0.15,
    "pareto": 0.15,
}
#: A part aims to finish within this share of its slot; the slot itself is a hard timeout.
INNER = 0.85
#: Seconds the diagnostics of library ensembles (no fits, stored predictions only) may take.
ENSEMBLES_TIMEOUT = 120.0
#: Parts whose empty result means they did not get to run (others may find nothing).
NEED_A_RESULT = ("significance", "bias_variance")
#: Seconds kept back from the budget for the commit itself.
COMMIT_RESERVE = 1.0
#: A task started this many times for one epoch (its worker died each time) gives up.
MAX_ATTEMPTS = 3


class Explainer:
    """Computes and commits the explanations of one job's committed epoch."""

    def __init__(self, ctx: WorkerContext, job_id: str) -> None:
        self.fin = Finalizer(ctx, job_id)  # spec, record, candidates and refits are shared
        self.ctx, self.job_id, self.store = ctx, job_id, ctx.store
        self.spec, self.epoch = self.fin.spec, self.fin.epoch
        self.end = time.monotonic()  # set when the parts start: their shared end

    def log(self, line: str) -> None:
        log.info("job %s %s", self.job_id, line)
        with contextlib.suppress(Exception):
            self.store.log(self.job_id, f"[{self.ctx.name}] explain: {line}")

    def run(self) -> str:
        rec = self.store.job(self.job_id)
        result = FinalResult.load(self.store.extras(self.job_id))
        pending = result.explain or {}
        if str(rec.get("committed_epoch")) != self.epoch or pending.get("epoch") != self.epoch:
            return "nothing to explain"
        budget = float(pending.get("budget_seconds") or 0.0)
        attempt = self.store.explain_started(self.job_id, self.epoch)
        if attempt == 0:
            return "already explained"
        if attempt > MAX_ATTEMPTS:
            why = f"gave up after {MAX_ATTEMPTS} attempts (the worker died each time)"
            return self.commit(not_run_record(self.epoch, budget, why, state=ExplainState.FAILED))
        if JobState(rec["state"]) is not JobState.FINISHED:
            why = f"the job is {rec['state']}"
            return self.commit(not_run_record(self.epoch, budget, why, state=ExplainState.DONE))
        self.log(f"start (attempt {attempt}, budget {budget:.0f} s)")
        t0 = time.monotonic()
        more: dict[str, Any] = {}
        if result.selection is None and self.spec.library_size > 0:
            more["selection"] = self.fin.selection()  # finalize had no time for it
        doc, artifacts, pareto = self.explain(budget, result, t0)
        if result.schema_version < 2 and result.holdout_score is not None:
            # finalized by version 1 (natural sign): this write stamps version 2, so the
            # hold-out score is rewritten greater-is-better (the sign flip is its own inverse)
            more["holdout_score"] = natural(self.spec.metric, result.holdout_score)
        added = FinalResult(pareto=pareto, **more)
        return self.commit(doc, artifacts=artifacts, extras=added.dump())

    def commit(
        self,
        doc: dict[str, Any],
        *,
        artifacts: dict[str, tuple[bytes, dict[str, Any]]] | None = None,
        extras: dict[str, Any] | None = None,
    ) -> str:
        ok = self.store.commit_explanations(
            self.job_id, self.epoch, explain=doc, artifacts=artifacts or {}, extras=extras
        )
        self.log(f"{'committed' if ok else 'duplicate or stale, nothing changed'}")
        return "committed" if ok else "duplicate"

    # ------------------------------------------------------------------ the parts
    def explain(
        self, budget: float, result: FinalResult, t0: float
    ) -> tuple[dict[str, Any], dict[str, tuple[bytes, dict[str, Any]]], list[ParetoPoint]]:
        """Every part within ``budget`` seconds from ``t0`` (monotonic): the record, the Pareto
        refits and points."""
        end = self.end = t0 + budget - min(COMMIT_RESERVE, budget / 10)
        board = [TrialRow.load(r) for r in self.store.board(self.job_id)]
        library: list[LibraryRecord] = result.library
        candidates = self.fin.candidates(board, library) if board else []
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
        common = {
            "families": list(self.spec.family_names),
            "top": top,
            "library": [ens.dump() for ens in library],
            "scores": {str(r.number): r.ranked_score() for r in board},
            "dropped": self.fin.record.get("dropped") or {},
        }
        doc: dict[str, Any] = {
            "version": EXPLAIN_VERSION,
            "state": ExplainState.DONE.value,
            "epoch": self.epoch,
            "budget_seconds": budget,
            "parts": {},
        }
        # no fits, so it runs even with a budget of 0; otherwise within the budget too
        hard = ENSEMBLES_TIMEOUT if budget <= 0 else min(ENSEMBLES_TIMEOUT, end - time.monotonic())
        doc["ensembles"] = self.part(doc, "ensembles", common, 0.0, max(hard, 0.5))
        artifacts: dict[str, tuple[bytes, dict[str, Any]]] = {}
        pareto: list[ParetoPoint] = []
        names = list(SHARES)
        for i, name in enumerate(names):
            left = end - time.monotonic()
            slot = left * SHARES[name] / sum(SHARES[n] for n in names[i:])
            if name == "leakage" and "findings" in (result.leakage or {}):
                doc["parts"][name] = {"status": PartStatus.DONE.value, "before_search": True}
            elif budget <= 0:
                self.not_run(doc, name, self.no_time_reason())
            elif slot < 0.5:
                self.not_run(doc, name, f"no time left of the {budget:.0f} s budget")
            elif name == "pareto":
                best = result.best.id if result.best else ""
                pareto = self.pareto(doc, candidates, board, best, artifacts, slot)
            else:
                doc[name] = self.part(doc, name, common, INNER * slot, slot)
        doc["seconds"] = time.monotonic() - t0
        return doc, artifacts, pareto

    def part(
        self, doc: dict[str, Any], name: str, common: dict[str, Any], inner: float, hard: float
    ) -> list[dict[str, Any]]:
        """One part in the trial process, killed at ``hard`` seconds (then: not run)."""
        t = time.monotonic()
        try:
            _, rows = self.ctx.trials.request(
                "explain",
                self.fin.request(part=name, budget_seconds=inner, **common),
                timeout=hard,
            )
        except TrialCrashed as exc:
            why = str(exc)
            if why == "timeout":
                why = f"stopped at its time limit ({hard:.0f} s)"
            self.not_run(doc, name, why)
            self.warm(common, self.end - time.monotonic())
            return []
        except ChildFailure as exc:
            self.not_run(doc, name, f"error: {exc}")
            return []
        if not rows and name in NEED_A_RESULT:
            self.not_run(doc, name, f"no candidate finished within its {inner:.0f} s")
            return []
        if name == "significance" and len(rows) < 2:  # #1 alone: no test was made
            why = "only #1 finished in time" if len(common["top"]) > 1 else "only one candidate"
            self.not_run(doc, name, f"{why}, nothing to compare with")
            return []
        doc["parts"][name] = {
            "status": PartStatus.DONE.value,
            "seconds": round(time.monotonic() - t, 3),
        }
        return list(rows)

    def warm(self, common: dict[str, Any], left: float) -> None:
        """Start a fresh trial process with the table loaded after one was killed, so the
        next part's slot is not spent on start-up (only while budget is left)."""
        if left < 1.0:
            return
        try:
            self.ctx.trials.request("prepare", self.fin.request(**common), timeout=left)
        except (ChildFailure, TrialCrashed) as exc:
            self.log(f"could not restart the trial process: {exc}")

    def no_time_reason(self) -> str:
        """Why a budget of 0 s: the spec asked for it, or the workers' bounds gave nothing."""
        if self.spec.explain_seconds == 0:
            return "explain_seconds is 0"
        return (
            "explain_seconds unset and the workers' bounds give 0 s "
            "(TUTTI_EXPLAIN_MIN_SECONDS / TUTTI_EXPLAIN_MAX_SECONDS)"
        )

    def not_run(self, doc: dict[str, Any], name: str, reason: str) -> None:
        doc["parts"][name] = {"status": PartStatus.NOT_RUN.value, "reason": reason}
        doc.setdefault(name, None)
        self.log(f"{name} not run: {reason}")

    def pareto(
        self,
        doc: dict[str, Any],
        candidates: list[dict[str, Any]],
        board: list[TrialRow],
        best: str,
        artifacts: dict[str, tuple[bytes, dict[str, Any]]],
        seconds: float,
    ) -> list[ParetoPoint]:
        """Score vs predict latency front; its best few members are refitted while time allows.

        A refit starts only when its estimated time (fold-fit seconds ÷ (folds − 1), doubled)
        fits in the ``seconds`` left, and is killed when they run out.
        """
        from tuttiml.workers.diagnostics import pareto_front

        t = time.monotonic()
        end = t + seconds
        points = [
            {"id": f"t{r.number}", "score": r.ranked_score(), "predict_ms": r.predict_ms}
            for r in board
            if r.predict_ms is not None  # not measured (non-finite): no place on the plot
        ]
        front = set(pareto_front(points))
        by_id = {c["id"]: c for c in candidates}
        rows = {f"t{r.number}": r for r in board}
        refits, skipped = 0, 0
        for p in sorted(points, key=lambda q: -q["score"]):
            if p["id"] not in front or p["id"] == best or refits >= PARETO_REFITS:
                continue
            left = end - time.monotonic()
            if 2 * refit_seconds([rows[p["id"]]], self.spec.folds) > left:
                skipped += 1
                continue
            try:
                artifacts[f"pareto-{p['id']}"] = self.fin.refit(by_id[p["id"]], timeout=left)
                refits += 1
            except (ChildFailure, TrialCrashed, ValueError) as exc:
                self.log(f"pareto refit of {p['id']} failed: {exc}")
        doc["parts"]["pareto"] = {
            "status": PartStatus.DONE.value,
            "seconds": round(time.monotonic() - t, 3),
            "refits": refits,
            "refits_skipped_for_time": skipped,
        }
        return [
            ParetoPoint(
                candidate=p["id"],
                score=p["score"],
                predict_ms=p["predict_ms"],
                on_front=p["id"] in front,
            )
            for p in points
        ]


__all__ = ["Explainer"]
