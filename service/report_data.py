"""Collects everything a job's report shows into the plain dict ``service.report`` renders."""

from __future__ import annotations

from typing import Any, Protocol

import pandas as pd
from tuttiml.service.explanations import PARTS, ExplainState, part_status, ran, state_of
from tuttiml.service.records import FinalResult, TableSummary, TrialRow
from tuttiml.service.spec import Metric, natural, score_sign
from tuttiml.service.store import JobStore
from tuttiml.service.version import __version__


class JobView(Protocol):
    """What the report reads of a job (``service.client.Job`` provides it)."""

    id: str
    store: JobStore

    def record(self) -> dict[str, Any]: ...
    def result(self) -> FinalResult: ...
    def leaderboard(self) -> pd.DataFrame: ...
    def artifact_meta(self) -> dict[str, Any]: ...


#: Relative gap between the honest estimate and the hold-out score that earns a warning.
DISAGREE = 0.05


def _selection(result: FinalResult, metric: Metric) -> dict[str, Any]:
    """Finalize's one BBC-CV of the winner (stored greater-is-better) in the natural sign."""
    sel = result.selection
    if sel is None:  # jobs explained inside finalize kept it with the explanations
        return dict((result.explain or {}).get("honest") or {})
    lo, hi = sorted((natural(metric, sel.ci_low), natural(metric, sel.ci_high)))
    return {
        "winner_cv": natural(metric, sel.winner_cv),
        "bbc_estimate": natural(metric, sel.estimate),
        "bbc_low": lo,
        "bbc_high": hi,
        "n_candidates": sel.n_candidates,
        "n_boot": sel.n_boot,
    }


def _explanations(explain: dict[str, Any]) -> dict[str, Any] | None:
    """State and per-part status of the explanations (None for jobs that predate them)."""
    state = state_of(explain)
    if state is None:
        return None
    status = part_status(explain)
    return {
        "state": state.value,
        "budget_seconds": explain.get("budget_seconds"),
        "seconds": explain.get("seconds"),
        "parts": [{"part": k, "what": PARTS[k], "status": v} for k, v in status.items()],
    }


def _honest(result: FinalResult, metric: Metric) -> dict[str, Any]:
    honest = _selection(result, metric)
    holdout = result.natural_holdout(metric)
    if holdout is not None:
        honest["holdout"] = holdout
        est = honest.get("bbc_estimate", honest.get("winner_cv"))
        if est is not None and abs(est - holdout) > DISAGREE * max(abs(est), 1e-9):
            honest["warning"] = (
                f"the hold-out score ({holdout:.4f}) differs from the cross-validated estimate "
                f"({est:.4f}) by more than {DISAGREE:.0%}: the hold-out is small and noisy, or "
                "the data shifts between rows (time, groups); trust neither blindly."
            )
    return honest


#: The explanation parts finalize computes after the model is fitted (each may not run).
EXPLAIN_PARTS = ("honest", "significance", "bias_variance", "composites")


def _leakage(rec: dict[str, Any], result: FinalResult) -> tuple[list[Any] | None, str]:
    """What the leakage checks found, or None and why they did not run."""
    stored = result.leakage  # written by the first search slice, before any trial
    explain = result.explain or {}
    if isinstance(stored, dict) and "findings" in stored:
        return list(stored["findings"]), ""
    if isinstance(stored, dict) and stored.get("error"):
        return None, str(stored["error"])
    if state_of(explain) is not None:  # the explanation task's record says whether it ran
        if ran(explain, "leakage"):
            return list(explain.get("leakage") or []), ""
        return None, _gap(part_status(explain).get("leakage", ""))
    if "leakage" in explain and "leakage" not in (explain.get("skipped") or []):
        return list(explain["leakage"] or []), ""  # finalize ran them (or an older job did)
    if "leakage" in (explain.get("skipped") or []):
        return None, "skipped for lack of time (the job ran before they moved ahead of the search)"
    if rec.get("state") in ("queued", "running"):
        return None, "not yet: the job's first search slice runs them before any trial"
    return None, "the job stopped before the checks ran"


def _gap(status: str) -> str:
    """A part's status as the report's reason it has no result."""
    if status.startswith("not run: "):
        return status[len("not run: ") :]
    return "pending: computed after the model is committed"


def _explain_gaps(rec: dict[str, Any], explain: dict[str, Any]) -> dict[str, str]:
    """Why each explanation part that has no result did not run."""
    if state_of(explain) is not None:
        status = part_status(explain)
        return {p: _gap(v) for p, v in status.items() if v != "done" and p in EXPLAIN_PARTS}
    if explain.get("error"):
        why = f"the explanations failed in the worker ({explain['error']})"
        return dict.fromkeys(EXPLAIN_PARTS, why)
    if not explain:
        pending = rec.get("state") in ("queued", "running", "finalizing", "finished")
        why = (
            "pending: computed after the model is fitted"
            if pending
            else "the job ended before the explanations ran"
        )
        return dict.fromkeys(EXPLAIN_PARTS, why)
    reasons = explain.get("not_run") or {}
    return {
        part: str(reasons.get(part) or "skipped for lack of time")
        for part in explain.get("skipped") or []
        if part in EXPLAIN_PARTS
    }


def collect(job: JobView) -> dict[str, Any]:
    """The report's input for ``job`` (see the schema in ``service.report``)."""
    rec = job.record()
    result = job.result()
    board = job.leaderboard()
    metric = Metric(board.attrs["metric"])
    explain = result.explain or {}
    sig = {r["candidate"]: r for r in explain.get("significance") or []}
    leaderboard = []
    for _, r in board.iterrows():
        row = {
            "rank": int(r["rank"]),
            "candidate": r["candidate"],
            "family": r["family"],
            "members": r["members"],
            "score": r["score"],
            "score_std": r["score_std"],
            "fit_seconds": r["fit_seconds"],
            "predict_ms": r["predict_ms"],
            "size_bytes": r.get("size_bytes"),
            "exported": bool(r["exported"]),
        }
        s = sig.get(r["candidate"])
        if s is not None:
            row.update(
                diff_vs_rank1=s.get("mean_diff"),
                p_value=s.get("p_value"),
                distinguishable=s.get("distinguishable"),
            )
        leaderboard.append(row)
    trials = [
        {
            "number": t.number,
            "family": t.family,
            "state": t.state,
            "score": natural(metric, t.score),
            "finished_at": t.finished_at,
        }
        for t in (TrialRow.load(doc) for doc in job.store.trial_rows(job.id))
    ]
    try:
        meta = job.artifact_meta()
        versions = {**meta.get("versions", {}), "tutti (report)": __version__}
    except Exception:
        versions = {"tutti": __version__}
    summary = TableSummary.load(rec["summary"]).dump() if rec.get("summary") else {}
    leakage, leakage_gap = _leakage(rec, result)
    not_run = _explain_gaps(rec, explain)
    if state_of(explain) is not None and result.selection is None:
        not_run["honest"] = (
            "pending: computed after the model is committed"
            if state_of(explain) in (ExplainState.PENDING, ExplainState.RUNNING)
            else "no out-of-fold predictions were kept (library_size 0) or none could be scored"
        )
    if leakage_gap:
        not_run["leakage"] = leakage_gap
    return {
        "job": {
            "id": job.id,
            "name": rec.get("name") or "",
            "state": rec["state"],
            "created_at": rec.get("created_at"),
            "finished_at": rec.get("finalized_at"),
        },
        "metric": metric.value,
        "greater_is_better": score_sign(metric) > 0,
        "spec": rec.get("spec") or {},
        "summary": summary,
        "leaderboard": leaderboard,
        "trials": trials,
        "honest": _honest(result, metric),
        "explanations": _explanations(explain),
        "bias_variance": explain.get("bias_variance") or [],
        "pareto": result.natural_pareto(metric)
        if state_of(explain) is None or ran(explain, "pareto")
        else [],
        "ensembles": (explain.get("ensembles") or []) + (explain.get("composites") or []),
        "leakage": leakage,
        "not_run": not_run,
        "versions": versions,
        "warnings": list(rec.get("warnings") or [])
        + [f"not run: {part} ({why})" for part, why in not_run.items()],
    }
