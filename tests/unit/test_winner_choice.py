"""Finalize's choice of the winner: trials and library ensembles compared like with like."""

from __future__ import annotations

from tuttiml.service.records import LibraryRecord, TrialRow
from tuttiml.workers.finalize import Finalizer


def _trial(number: int, score: float, fit_seconds: float = 0.0) -> TrialRow:
    return TrialRow(
        number=number, state="complete", family="single", score=score, fit_seconds=fit_seconds
    )


def _library(method: str, score: float, members: list[int], optimism: float) -> LibraryRecord:
    return LibraryRecord(
        id=f"library-{method}",
        method=method,
        members=members,
        weights=[1.0 / len(members)] * len(members),
        score=score,
        trial_optimism=optimism,
    )


def _order(board: list[TrialRow], library: list[LibraryRecord]) -> list[str]:
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


def test_a_library_ensemble_whose_refit_would_overrun_the_budget_is_passed_over() -> None:
    """10 s are left of the wall budget; 5 folds, so one all-rows refit ≈ fold-fit seconds / 4.
    The selection ensemble's members need (8 + 8) / 4 = 4 s: kept. The meta ensemble's need
    (8 + 8 + 48) / 4 = 16 s: passed over. A trial is one refit and always allowed (t2 too,
    though 48 / 4 = 12 s: some pipeline must be exported)."""
    import time

    from tuttiml.service.spec import SearchSpec

    fin = Finalizer.__new__(Finalizer)
    fin.spec = SearchSpec(target="y", folds=5, wall_seconds=60)
    fin.record = {"started_at": time.time() - 50}
    fin.job_id = "j"
    fin.log = lambda line: None  # type: ignore[method-assign]
    board = [
        _trial(0, 0.90, fit_seconds=8.0),
        _trial(1, 0.89, fit_seconds=8.0),
        _trial(2, 0.88, fit_seconds=48.0),
    ]
    library = [
        _library("meta", 0.95, [0, 1, 2], 0.0),
        _library("selection", 0.94, [0, 1], 0.0),
    ]
    kept, passed = fin.affordable(fin.candidates(board, library), board)
    assert passed == ["library-meta"]
    assert [c["id"] for c in kept] == ["library-selection", "t0", "t1", "t2"]
