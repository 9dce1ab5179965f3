"""Collects everything a job's report shows into the plain dict ``service.report`` renders."""

from __future__ import annotations

from typing import Any, Protocol

import pandas as pd
from tuttiml.service.spec import Metric, natural, score_sign
from tuttiml.service.store import JobStore
from tuttiml.service.version import __version__


class JobView(Protocol):
    """What the report reads of a job (``service.client.Job`` provides it)."""

    id: str
    store: JobStore

    def record(self) -> dict[str, Any]: ...
    def extras(self) -> dict[str, Any]: ...
    def leaderboard(self) -> pd.DataFrame: ...
    def artifact_meta(self) -> dict[str, Any]: ...


#: Relative gap between the honest estimate and the hold-out score that earns a warning.
DISAGREE = 0.05


def _honest(extras: dict[str, Any]) -> dict[str, Any]:
    honest = dict((extras.get("explain") or {}).get("honest") or {})
    holdout = extras.get("holdout_score")
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


def collect(job: JobView) -> dict[str, Any]:
    """The report's input for ``job`` (see the schema in ``service.report``)."""
    rec = job.record()
    extras = job.extras()
    board = job.leaderboard()
    metric = Metric(board.attrs["metric"])
    explain = extras.get("explain") or {}
    sig = {r["candidate"]: r for r in explain.get("significance") or []}
    leaderboard = []
    for _, r in board.iterrows():
        row = {
            "rank": int(r["rank"]),
            "candidate": r["candidate"],
            "family": r["family"],
            "members": r["members"],
            "score": r[metric.value],
            "std": r[f"{metric.value}_std"],
            "fit_seconds": r["fit_seconds"],
            "predict_ms": r["predict_ms_per_1000"],
            "size_bytes": r.get("size_bytes"),
        }
        s = sig.get(r["candidate"])
        if s is not None:
            row.update(
                mean_diff=s.get("mean_diff"),
                p_value=s.get("p_value"),
                distinguishable=s.get("distinguishable"),
            )
        leaderboard.append(row)
    trials = [
        {
            "number": t["number"],
            "family": t.get("family"),
            "state": t.get("state"),
            "score": natural(metric, t.get("score")),
            "finished_at": t.get("finished_at"),
        }
        for t in job.store.trial_rows(job.id)
    ]
    try:
        meta = job.artifact_meta()
        versions = {**meta.get("versions", {}), "tutti (report)": __version__}
    except Exception:
        versions = {"tutti": __version__}
    summary = dict(rec.get("summary") or {})
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
        "honest": _honest(extras),
        "bias_variance": explain.get("bias_variance") or [],
        "pareto": extras.get("pareto") or [],
        "ensembles": (explain.get("ensembles") or []) + (explain.get("composites") or []),
        "leakage": explain.get("leakage") or [],
        "versions": versions,
        "warnings": list(rec.get("warnings") or [])
        + [
            f"skipped for lack of time: {', '.join(explain['skipped'])}"
            for _ in [0]
            if explain.get("skipped")
        ],
    }
