"""Finalize's choice of the winner: trials and library ensembles compared like with like."""

from __future__ import annotations

from typing import Any

from workers.finalize import Finalizer


def _trial(number: int, score: float) -> dict[str, Any]:
    return {"number": number, "family": "single", "params": {}, "score": score}


def _library(method: str, score: float, members: list[int], optimism: float) -> dict[str, Any]:
    return {
        "id": f"library-{method}",
        "method": method,
        "members": members,
        "weights": [1.0 / len(members)] * len(members),
        "score": score,
        "trial_optimism": optimism,
    }


def _order(board: list[dict[str, Any]], library: list[dict[str, Any]]) -> list[str]:
    finalizer = Finalizer.__new__(Finalizer)  # candidates() reads nothing from the instance
    return [c["id"] for c in finalizer.candidates(board, library)]


def test_library_ensemble_wins_when_the_best_trials_lead_is_within_its_optimism() -> None:
    """Best trial 0.950 (CV, picked among many: optimism 0.004 by BBC-CV) against a library
    ensemble whose nested score is 0.948: 0.946 < 0.948, so the ensemble goes first."""
    board = [_trial(0, 0.950), _trial(1, 0.940), _trial(2, 0.930)]
    library = [_library("selection", 0.948, [0, 1], 0.004)]
    assert _order(board, library) == ["library-selection", "t0", "t1", "t2"]


def test_a_clear_trial_lead_still_wins() -> None:
    board = [_trial(0, 0.960), _trial(1, 0.940)]
    library = [_library("selection", 0.948, [0, 1], 0.004), _library("meta", 0.947, [0, 1], 0.004)]
    assert _order(board, library) == ["t0", "library-selection", "library-meta", "t1"]


def test_without_library_the_plain_cv_order_holds() -> None:
    board = [_trial(3, 0.90), _trial(1, 0.95), _trial(2, 0.95)]
    assert _order(board, []) == ["t1", "t2", "t3"]
    cands = Finalizer.candidates(Finalizer.__new__(Finalizer), board, [])
    assert [c["score"] for c in cands] == [0.95, 0.95, 0.90]  # the reported score is unchanged
