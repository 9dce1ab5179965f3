"""Test-only fault injection in the trial process (``TUTTI_FAULT_INJECT``); inert when unset."""

from __future__ import annotations

import json
import os
import time
from typing import Any


def inject_fault(request: dict[str, Any]) -> None:
    """Test-only fault injection (``TUTTI_FAULT_INJECT``): raise, sleep or allocate on cue.

    The variable holds JSON such as ``{"raise": [3], "sleep": {"5": 30}, "alloc_mb": {"7": 4096},
    "sleep_all": 1.5}`` keyed by trial number; it is read only in the trial process and
    ignored when unset.
    """
    raw = os.environ.get("TUTTI_FAULT_INJECT")
    if not raw:
        return
    plan = json.loads(raw)
    n = str(request.get("trial"))
    if n in {str(t) for t in plan.get("raise", [])}:
        raise RuntimeError(f"injected fault in trial {n}")
    if n in plan.get("sleep", {}):
        time.sleep(float(plan["sleep"][n]))
    if plan.get("sleep_all"):
        time.sleep(float(plan["sleep_all"]))
    if n in plan.get("alloc_mb", {}):
        hog = bytearray(int(plan["alloc_mb"][n]) * 1024 * 1024)
        hog[::4096] = b"x" * len(hog[::4096])


def fold_pause() -> float:
    """Test-only: ``{"sleep_fold": seconds}`` in ``TUTTI_FAULT_INJECT`` slows every fold."""
    raw = os.environ.get("TUTTI_FAULT_INJECT")
    return float(json.loads(raw).get("sleep_fold", 0.0)) if raw else 0.0


def explain_pause(part: str) -> None:
    """Test-only: ``{"explain_sleep": {"leakage": 3}}`` in ``TUTTI_FAULT_INJECT`` makes that
    explanation part sleep first (to observe pending explanations, or a part's time limit)."""
    raw = os.environ.get("TUTTI_FAULT_INJECT")
    if raw:
        time.sleep(float(json.loads(raw).get("explain_sleep", {}).get(part, 0.0)))
