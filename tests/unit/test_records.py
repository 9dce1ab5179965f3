"""Typed records: each round-trips through JSON, old versions load, unknown fields are refused."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from pydantic import ValidationError
from sklearn.datasets import load_diabetes, load_iris
from tuttiml.service.data import prepare, summary
from tuttiml.service.explanations import pending_record
from tuttiml.service.records import FinalResult, LibraryRecord, TableSummary, TrialRow
from tuttiml.service.spec import SearchSpec


def _iris_with_gaps() -> pd.DataFrame:
    frame = load_iris(as_frame=True).frame
    frame["species"] = load_iris().target_names[frame.pop("target")]
    frame.loc[::7, "sepal width (cm)"] = np.nan
    return frame


def test_table_summary_round_trips_through_json() -> None:
    prepared = prepare(_iris_with_gaps(), SearchSpec(target="species"))
    stored = json.loads(json.dumps(summary(prepared)))  # what the job record holds
    record = TableSummary.load(stored)
    assert record.dump() == stored
    # scikit-learn's iris DESCR: 150 instances, 50 in each of three classes
    assert record.rows == 150
    assert [(c.label, c.count) for c in record.class_balance or []] == [
        ("setosa", 50),
        ("versicolor", 50),
        ("virginica", 50),
    ]
    assert record.missing_share["sepal width (cm)"] == pytest.approx(22 / 150, abs=1e-6)


def test_regression_summary_carries_target_stats() -> None:
    frame = load_diabetes(as_frame=True).frame
    record = TableSummary.load(summary(prepare(frame, SearchSpec(target="target"))))
    # scikit-learn's diabetes DESCR: 442 instances; the target is a disease progression score
    assert record.rows == 442
    assert record.class_balance is None
    assert record.target_stats is not None
    assert record.target_stats.mean == pytest.approx(frame["target"].mean())


def test_a_summary_stored_before_versioning_loads() -> None:
    stored = summary(prepare(_iris_with_gaps(), SearchSpec(target="species")))
    stored.pop("schema_version")
    assert TableSummary.load(stored).schema_version == 1


def test_unknown_fields_are_refused() -> None:
    stored = summary(prepare(_iris_with_gaps(), SearchSpec(target="species")))
    with pytest.raises(ValidationError, match="rows_total"):
        TableSummary.load({**stored, "rows_total": 3})


# ---------------------------------------------------------------------------- trial row
# The dicts below are in the exact shape the workers stored before these records existed
# (workers/search.py, workers/leases.py, workers/trial_work.py and workers/finalize.py at
# commit 9123840); the values are invented, the point is the shape and the types.

STORED_COMPLETE_ROW = {
    "number": 7,
    "retry_of": None,
    "shard": 1,
    "worker": "host-1.2",
    "started_at": 1764700000.5,
    "arm": "boosting",
    "family": "boosting",
    "params": {"boosting.num_leaves": 31, "boosting.learning_rate": 0.1},
    "ask_seconds": 0.01,
    "cost": 1.0,
    "trial_process_seconds": 2.5,
    "members": "lgbm",
    "size_bytes": 123456,
    "fold_scores": [0.91, 0.93, 0.92],
    "fit_seconds": 2.1,
    "predict_ms": 12.5,
    "fit_info": [{"fixed_rounds": 80}, {"fixed_rounds": 95}, {"fixed_rounds": 90}],
    "finished_at": 1764700003.1,
    "seconds": 2.6,
    "state": "complete",
    "score": 0.92,
    "score_std": 0.01,
    "tell_seconds": 0.002,
    "journal_seconds": 0.004,
}
STORED_PRUNED_ROW = {
    "number": 8,
    "retry_of": None,
    "shard": 0,
    "worker": "host-1.1",
    "started_at": 1764700001.0,
    "family": "bagging",
    "params": {"bagging.n_estimators": 20},
    "ask_seconds": 0.02,
    "cost": 0.4,
    "rung_score": 0.61,
    "trial_process_seconds": 0.9,
    "members": "tree",
    "size_bytes": None,
    "fold_scores": [],
    "fit_seconds": 0.3,
    "predict_ms": 3.0,
    "fit_info": [],
    "finished_at": 1764700002.0,
    "seconds": 1.0,
    "state": "pruned",
    "tell_seconds": 0.001,
    "journal_seconds": 0.002,
}
STORED_REAPED_ROW = {
    "number": 9,
    "retry_of": 4,
    "retries": 1,
    "family": "voting",
    "state": "failed",
    "params": {"voting.voting": "soft"},
    "error": "lease expired: its worker died or lost Redis",
    "reaped": True,
    "finished_at": 1764700009.0,
}


@pytest.mark.parametrize("stored", [STORED_COMPLETE_ROW, STORED_PRUNED_ROW, STORED_REAPED_ROW])
def test_a_trial_row_stored_before_the_record_loads_in_the_same_shape(stored: dict) -> None:
    row = TrialRow.load(json.loads(json.dumps(stored)))
    assert row.number == stored["number"] and row.state == stored["state"]
    dumped = row.dump()
    assert dumped.pop("schema_version") == 1
    assert dumped == stored  # nothing added, nothing lost: readers see the same keys


def test_a_trial_row_round_trips_through_json() -> None:
    row = TrialRow(**STORED_COMPLETE_ROW)
    assert TrialRow.load(json.loads(json.dumps(row.dump()))) == row
    assert row.score == 0.92 and row.fold_scores == [0.91, 0.93, 0.92]


def test_a_failed_trial_row_has_no_score_and_stores_none() -> None:
    row = TrialRow(number=3, state="failed", family="single", error="MemoryError")
    assert row.score is None
    assert "score" not in row.dump() and "fold_scores" not in row.dump()
    with pytest.raises(ValueError, match=r"trial 3 \(failed\) has no score"):
        row.ranked_score()  # never ranked as 0.0
    assert TrialRow(**STORED_COMPLETE_ROW).ranked_score() == 0.92


def test_a_trial_pruned_at_the_row_rung_stores_no_timings() -> None:
    """A rung-pruned trial was never timed on all rows: its timings are stored as null."""
    row = TrialRow.load(
        {"number": 5, "state": "pruned", "family": "single", "rung_score": 0.9,
         "fit_seconds": None, "predict_ms": None, "score_std": None}
    )  # fmt: skip
    assert row.predict_ms is None and row.fit_seconds is None
    assert TrialRow.load(row.dump()) == row


def test_a_misspelt_trial_row_field_is_refused() -> None:
    with pytest.raises(ValidationError, match="scroe"):
        TrialRow(**{**STORED_COMPLETE_ROW, "scroe": 0.9})
    with pytest.raises(ValidationError, match="scroe"):
        TrialRow.load({**STORED_COMPLETE_ROW, "scroe": 0.9})


def test_a_trial_row_of_the_wrong_type_is_refused() -> None:
    with pytest.raises(ValidationError, match="state"):
        TrialRow.load({**STORED_REAPED_ROW, "state": "done"})
    with pytest.raises(ValidationError, match="fold_scores"):
        TrialRow.load({**STORED_COMPLETE_ROW, "fold_scores": "0.91,0.93"})
    with pytest.raises(ValidationError, match="number"):
        TrialRow.load({key: v for key, v in STORED_REAPED_ROW.items() if key != "number"})


# ---------------------------------------------------------------------------- library

STORED_LIBRARY = {
    "id": "library-selection",
    "method": "selection",
    "members": [3, 7],
    "weights": [0.6, 0.4],
    "score": 0.925,
    "score_std": 0.012,
    "fold_scores": [0.92, 0.93, 0.925],
    "in_sample_score": 0.93,
    "combiner": {"mode": "average", "weights": [0.6, 0.4]},
    "during_search": True,
}
STORED_META = {
    "id": "library-meta",
    "method": "meta",
    "members": [3, 7, 8],
    "weights": None,
    "score": 0.921,
    "score_std": 0.01,
    "fold_scores": [0.92, 0.925, 0.918],
    "in_sample_score": 0.93,
    "combiner": {
        "mode": "logistic",
        "coef": [[1.2, 0.8, -0.1], [-1.2, -0.8, 0.1]],
        "intercept": [0.05, -0.05],
    },
    "trial_optimism": 0.004,
}


@pytest.mark.parametrize("stored", [STORED_LIBRARY, STORED_META])
def test_a_library_ensemble_stored_before_the_record_loads(stored: dict) -> None:
    ens = LibraryRecord.load(json.loads(json.dumps(stored)))
    assert ens.members == stored["members"] and ens.score == stored["score"]
    dumped = ens.dump()
    for key, value in stored.items():  # every stored key reads back the same
        if key == "combiner":
            assert {k: v for k, v in dumped[key].items() if v is not None} == value
        else:
            assert dumped[key] == value


def test_a_library_ensemble_round_trips_through_json() -> None:
    ens = LibraryRecord.load(STORED_META)
    assert LibraryRecord.load(json.loads(json.dumps(ens.dump()))) == ens
    assert ens.combiner is not None and ens.combiner.mode == "logistic"
    assert ens.trial_optimism == 0.004 and not ens.during_search


def test_a_library_ensemble_with_an_unknown_field_or_wrong_type_is_refused() -> None:
    with pytest.raises(ValidationError, match="member_ids"):
        LibraryRecord.load({**STORED_LIBRARY, "member_ids": [3, 7]})
    with pytest.raises(ValidationError, match="members"):
        LibraryRecord.load({**STORED_LIBRARY, "members": ["t3", "t7"]})
    with pytest.raises(ValidationError, match="mode"):
        LibraryRecord.load({**STORED_LIBRARY, "combiner": {"mode": "median"}})


# ---------------------------------------------------------------------------- final result

STORED_SELECTION = {
    "estimate": 0.91,
    "ci_low": 0.89,
    "ci_high": 0.93,
    "n_boot": 200,
    "n_candidates": 6,
    "winner_cv": 0.925,
    "optimism": 0.015,
    "rows": 569,
}
#: What ``JobStore.extras`` returned for a finished job before the record existed: finalize's
#: commit, the first slice's leakage findings and the explanation task's Pareto points.
STORED_RESULT = {
    "library": [STORED_LIBRARY, STORED_META],
    "best": {
        "id": "library-selection",
        "kind": "library",
        "family": "library:selection",
        "score": 0.925,
    },
    "trial_optimism": 0.004,
    "holdout_score": None,
    "finalize_seconds": 8.5,
    "library_seconds": 2.5,
    "refit_errors": [],
    "passed_over_for_time": [],
    "selection": STORED_SELECTION,
    "explain": pending_record("0", 30.0),
    "leakage": {"findings": []},
    "pareto": [
        {"candidate": "t7", "score": 0.92, "predict_ms": 12.5, "on_front": True},
        {"candidate": "t3", "score": 0.91, "predict_ms": 30.0, "on_front": False},
    ],
}


def test_a_result_stored_before_the_record_loads() -> None:
    result = FinalResult.load(json.loads(json.dumps(STORED_RESULT)))
    assert result.best is not None and result.best.id == "library-selection"
    assert result.selection is not None and result.selection.optimism == 0.015
    assert [p.candidate for p in result.pareto] == ["t7", "t3"]
    dumped = result.dump()
    assert dumped.pop("schema_version") == 1
    assert set(dumped) == set(STORED_RESULT)
    assert (
        dumped["selection"] == STORED_SELECTION and dumped["explain"] == STORED_RESULT["explain"]
    )


def test_an_empty_selection_reads_as_none() -> None:
    """Finalize stored ``{}`` when it had nothing to pick from; a failed refit stored only
    the library and the errors."""
    result = FinalResult.load({"library": [], "refit_errors": ["t0: boom"], "selection": {}})
    assert result.selection is None and result.best is None
    assert FinalResult.load({}).library == []


def test_a_result_round_trips_and_stores_only_what_its_writer_set() -> None:
    result = FinalResult.load(STORED_RESULT)
    assert FinalResult.load(json.loads(json.dumps(result.dump()))) == result
    late = FinalResult(pareto=[], selection=None)  # what the explanation task adds
    assert late.dump() == {"pareto": [], "selection": None, "schema_version": 2}


def test_hold_out_and_pareto_scores_show_in_the_natural_sign_for_both_versions() -> None:
    """Version 1 stored them natural, version 2 greater-is-better: the same display."""
    point = {"candidate": "t7", "predict_ms": 12.5, "on_front": True}
    old = FinalResult.load({"holdout_score": 0.25, "pareto": [{**point, "score": 0.3}]})
    new = FinalResult.load(
        {"holdout_score": -0.25, "pareto": [{**point, "score": -0.3}], "schema_version": 2}
    )
    for result in (old, new):  # log loss: smaller is better (common practice)
        assert result.natural_holdout("log_loss") == 0.25
        assert result.natural_pareto("log_loss")[0]["score"] == 0.3
    written = FinalResult(holdout_score=-0.25)  # what finalize writes now
    assert FinalResult.load(written.dump()).natural_holdout("log_loss") == 0.25
    assert new.natural_holdout("roc_auc") == -0.25  # greater is better: unchanged


def test_a_result_with_an_unknown_field_or_wrong_type_is_refused() -> None:
    with pytest.raises(ValidationError, match="holdout"):
        FinalResult.load({**STORED_RESULT, "holdout": 0.9})
    with pytest.raises(ValidationError, match="kind"):
        FinalResult.load({**STORED_RESULT, "best": {**STORED_RESULT["best"], "kind": "model"}})
    with pytest.raises(ValidationError, match="n_boot"):
        FinalResult.load({**STORED_RESULT, "selection": {**STORED_SELECTION, "n_boot": "many"}})
