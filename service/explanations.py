"""The explanations record: what runs after a job's model is committed, and how it is shown.

Finalize commits the best pipeline by the job's deadline and marks the explanations
``pending``; a separate task (``workers/explain_task.py``) computes them within their own
budget and commits them once per epoch. Both sides, the client's ``status`` and the report
read the record through this module, so a part that did not run can never be shown as if it
had passed: every part is ``done``, ``pending`` or ``not run`` with a reason.
"""

from __future__ import annotations

import enum
from typing import Any

#: Version of the explanations record stored under the job's extras ``explain``.
EXPLAIN_VERSION = 1

#: Share of the search time the explanations get by default (within the workers' bounds).
EXPLAIN_SHARE = 0.25


class ExplainState(enum.StrEnum):
    """Where a job's explanations are: not yet started, computing, committed, or failed."""

    PENDING = "pending"
    RUNNING = "running"
    DONE = "done"
    FAILED = "failed"

    @property
    def final(self) -> bool:
        return self in (ExplainState.DONE, ExplainState.FAILED)


class PartStatus(enum.StrEnum):
    """One check's outcome: it ran (``done``), has yet to run, or did not run (with why)."""

    DONE = "done"
    PENDING = "pending"
    NOT_RUN = "not run"


#: The parts of the explanations, in the order they run, with what each one is.
PARTS: dict[str, str] = {
    "ensembles": "diagnostics of the library ensembles (weights, error correlation, gain)",
    "leakage": "leakage checks (id-like columns, single predictive columns, split duplicates)",
    "significance": "repeated k-fold t-tests of the top candidates against #1",
    "bias_variance": "bias and variance of the top candidates",
    "composites": "member diagnostics of voting, stacking and blending winners",
    "pareto": "refits of the fastest good candidates (score vs predict latency)",
}


def default_budget(
    searched_seconds: float,
    *,
    explicit: float | None,
    min_seconds: float,
    max_seconds: float,
) -> float:
    """Seconds the explanations of a job get.

    Args:
        searched_seconds: Time from the job's start to the end of its search.
        explicit: The spec's ``explain_seconds`` (used as given when set).
        min_seconds: The workers' floor (``TUTTI_EXPLAIN_MIN_SECONDS``).
        max_seconds: The workers' cap (``TUTTI_EXPLAIN_MAX_SECONDS``).

    Returns:
        ``explicit`` when set, else a quarter of the search time clamped to the bounds.
    """
    if explicit is not None:
        return float(explicit)
    floor = min(min_seconds, max_seconds)
    return float(min(max(EXPLAIN_SHARE * max(searched_seconds, 0.0), floor), max_seconds))


def pending_record(epoch: str, budget_seconds: float) -> dict[str, Any]:
    """The record finalize commits beside the model: every part still to run."""
    return {
        "version": EXPLAIN_VERSION,
        "state": ExplainState.PENDING.value,
        "epoch": epoch,
        "budget_seconds": float(budget_seconds),
        "parts": {name: {"status": PartStatus.PENDING.value} for name in PARTS},
    }


def not_run_record(
    epoch: str, budget_seconds: float, reason: str, *, state: ExplainState
) -> dict[str, Any]:
    """A record in which no part ran, each saying why (the task gave up, or the job was
    cancelled)."""
    parts = {name: {"status": PartStatus.NOT_RUN.value, "reason": reason} for name in PARTS}
    return {
        "version": EXPLAIN_VERSION,
        "state": state.value,
        "epoch": epoch,
        "budget_seconds": float(budget_seconds),
        "reason": reason,
        "parts": parts,
    }


def state_of(explain: dict[str, Any] | None) -> ExplainState | None:
    """The record's state; None for jobs committed before explanations were a task of their own
    (or not committed yet)."""
    if not explain or "state" not in explain:
        return None
    return ExplainState(str(explain["state"]))


def part_status(explain: dict[str, Any] | None) -> dict[str, str]:
    """Each part as shown to users: ``done``, ``pending`` or ``not run: <reason>``.

    A part missing from a committed record counts as not run, never as passed.
    """
    if not explain or state_of(explain) is None:
        return {}
    stored = explain.get("parts") or {}
    out = {}
    for name in PARTS:
        part = stored.get(name) or {}
        status = str(part.get("status") or PartStatus.NOT_RUN.value)
        if status == PartStatus.NOT_RUN.value:
            reason = part.get("reason") or "no result recorded"
            out[name] = f"{PartStatus.NOT_RUN.value}: {reason}"
        else:
            out[name] = status
    return out


def ran(explain: dict[str, Any] | None, name: str) -> bool:
    """True only when part ``name`` is recorded as done (old records: when it has a result)."""
    if not explain:
        return False
    if state_of(explain) is None:  # committed inside finalize, before this record existed
        return explain.get(name) is not None and name not in (explain.get("skipped") or [])
    part = (explain.get("parts") or {}).get(name) or {}
    return part.get("status") == PartStatus.DONE.value
