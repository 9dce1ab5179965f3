"""Report sections fed by what the job side really writes, and checks that did not run."""

from __future__ import annotations

import re
import warnings
from typing import Any

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_iris
from tuttiml.service.data import prepare, summary
from tuttiml.service.report import render_report
from tuttiml.service.spec import SearchSpec


def _summary_of(frame: pd.DataFrame, target: str) -> dict[str, Any]:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        return summary(prepare(frame, SearchSpec(target=target)))


def _page(**data: Any) -> str:
    return render_report({"job": {"id": "j-1"}, "metric": "accuracy", **data})


def _section(page: str, anchor: str) -> str:
    found = re.search(rf'<section id="{anchor}">(.*?)</section>', page, re.DOTALL)
    return found.group(1) if found else ""


def test_class_balance_written_at_submit_is_drawn_by_the_report() -> None:
    # iris DESCR (scikit-learn): "Class Distribution: 33.3% for each of 3 classes", 50 rows each
    frame = load_iris(as_frame=True).frame
    frame["target"] = frame["target"].map(dict(enumerate(load_iris().target_names)))
    page = _page(summary=_summary_of(frame, "target"))
    data = _section(page, "data")
    assert "<h3>Class balance</h3>" in data
    for name in ("setosa", "versicolor", "virginica"):
        assert re.search(rf"<td>{name}</td><td class=num>50</td><td>.*?33\.3%", data), name


def test_class_balance_shows_the_users_labels() -> None:
    # scikit-learn's breast cancer table, target as bool: 357 benign, 212 malignant (DESCR)
    frame = load_breast_cancer(as_frame=True).frame.iloc[:, [0, 1, 2, 30]]
    frame["target"] = frame["target"] == 1
    data = _section(_page(summary=_summary_of(frame, "target")), "data")
    assert "<td>False</td><td class=num>212</td>" in data
    assert "<td>True</td><td class=num>357</td>" in data


def test_missing_values_lists_only_columns_that_have_some() -> None:
    frame = load_breast_cancer(as_frame=True).frame.iloc[:, [0, 1, 2, 3, 30]].copy()
    frame.iloc[::10, 1] = np.nan  # 57 of 569 rows
    data = _section(_page(summary=_summary_of(frame, "target")), "data")
    listed = re.findall(r"<tr><td>([^<]*)</td><td><span class=.bar", data)
    assert listed == ["mean texture"]
    assert "1 of 4 feature columns have missing values" in data
    assert not re.search(r">0\.0%", data)


def test_missing_values_says_so_when_no_column_has_any() -> None:
    frame = load_iris(as_frame=True).frame
    data = _section(_page(summary=_summary_of(frame, "target")), "data")
    assert "None of the 4 feature columns has missing values." in data
    assert not re.search(r">0\.0%", data)


def test_a_leakage_check_that_did_not_run_is_never_shown_as_clean() -> None:
    page = _page(leakage=None, not_run={"leakage": "the job stopped before the checks ran"})
    leakage = _section(page, "leakage")
    assert "Not run:</b> the job stopped before the checks ran." in leakage
    assert "nothing" not in leakage
    ran = _section(_page(leakage=[]), "leakage")
    assert "ran and found nothing to report" in ran


@pytest.mark.parametrize(
    ("part", "anchor", "data"),
    [
        ("bias_variance", "bias-variance", {}),
        ("honest", "honest", {}),
        (
            "significance",
            "leaderboard",
            {"leaderboard": [{"rank": 1, "candidate": "t1", "family": "boosting"}]},
        ),
    ],
)
def test_explanations_that_did_not_run_say_so(part: str, anchor: str, data: dict) -> None:
    page = _page(**data, not_run={part: "no time left"})
    assert "not run:</b> no time left." in _section(page, anchor).lower()


def test_the_old_skipped_leakage_record_reads_as_not_run() -> None:
    from tuttiml.service.records import FinalResult
    from tuttiml.service.report_data import _explain_gaps, _leakage

    # what finalize stored when a short job skipped the checks: an empty list plus "skipped"
    explain = {"leakage": [], "skipped": ["leakage", "significance"], "significance": []}
    found, why = _leakage({"state": "finished"}, FinalResult.load({"explain": explain}))
    assert found is None and "skipped for lack of time" in why
    found, why = _leakage({"state": "finished"}, FinalResult(leakage={"findings": []}))
    assert found == [] and why == ""
    found, why = _leakage({"state": "finished"}, FinalResult(leakage={"error": "killed"}))
    assert found is None and why == "killed"
    gaps = _explain_gaps({"state": "finished"}, explain)
    assert gaps == {"significance": "skipped for lack of time"}
    assert set(_explain_gaps({"state": "finished"}, {"error": "boom"})) == {
        "honest",
        "significance",
        "bias_variance",
        "composites",
    }


class _StoredRows:
    def __init__(self, rows: list[dict[str, Any]]) -> None:
        self.rows = rows

    def trial_rows(self, job_id: str) -> list[dict[str, Any]]:
        return self.rows


class _StoredJob:
    """A finished log-loss job as the store holds it (rows and result in the stored shape)."""

    id = "j-2"

    def __init__(self, rows: list[dict[str, Any]], result: dict[str, Any]) -> None:
        self.store = _StoredRows(rows)
        self._result = result

    def record(self) -> dict[str, Any]:
        return {"state": "finished", "spec": {"target": "y"}}

    def result(self) -> Any:
        from tuttiml.service.records import FinalResult

        return FinalResult.load(self._result)

    def leaderboard(self) -> pd.DataFrame:
        board = pd.DataFrame(
            [{"rank": 1, "candidate": "t0", "family": "single", "members": "lgbm",
              "score": 0.31, "score_std": 0.01, "fit_seconds": 1.0, "predict_ms": 2.0,
              "size_bytes": 10, "exported": True}]
        )  # fmt: skip
        board.attrs["metric"] = "log_loss"
        return board

    def artifact_meta(self) -> dict[str, Any]:
        raise LookupError("no artifact in this test")


def test_the_report_reads_stored_rows_and_result_in_the_natural_sign() -> None:
    """Log loss is smaller-is-better (common practice), so the stored greater-is-better
    scores come out negated, the hold-out and Pareto scores too (version 2 of the result;
    version 1 stored those two natural, see test_records)."""
    from tuttiml.service.explanations import pending_record
    from tuttiml.service.report_data import collect

    rows = [
        {"number": 0, "family": "single", "state": "complete", "score": -0.31},
        {"number": 1, "family": "bagging", "state": "failed", "error": "boom"},
    ]
    selection = {
        "estimate": -0.33, "ci_low": -0.36, "ci_high": -0.30, "n_boot": 200,
        "n_candidates": 1, "winner_cv": -0.31, "optimism": 0.02,
    }  # fmt: skip
    explain = {**pending_record("0", 5.0), "state": "done"}
    explain["parts"]["pareto"] = {"status": "done"}
    result = {
        "best": {"id": "t0", "kind": "trial", "family": "single", "score": -0.31},
        "selection": selection,
        "holdout_score": -0.34,
        "explain": explain,
        "pareto": [{"candidate": "t0", "score": -0.31, "predict_ms": 2.0, "on_front": True}],
        "schema_version": 2,
    }
    data = collect(_StoredJob(rows, result))
    assert [t["score"] for t in data["trials"]] == [0.31, None]
    honest = data["honest"]
    assert (honest["winner_cv"], honest["bbc_estimate"]) == (0.31, 0.33)
    assert (honest["bbc_low"], honest["bbc_high"]) == (0.30, 0.36)
    assert honest["holdout"] == 0.34 and data["pareto"][0]["score"] == 0.31
    assert data["greater_is_better"] is False
