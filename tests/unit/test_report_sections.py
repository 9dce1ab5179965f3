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
    from tuttiml.service.report_data import _explain_gaps, _leakage

    # what finalize stored when a short job skipped the checks: an empty list plus "skipped"
    explain = {"leakage": [], "skipped": ["leakage", "significance"], "significance": []}
    found, why = _leakage({"state": "finished"}, {"explain": explain})
    assert found is None and "skipped for lack of time" in why
    found, why = _leakage({"state": "finished"}, {"leakage": {"findings": []}})
    assert found == [] and why == ""
    found, why = _leakage({"state": "finished"}, {"leakage": {"error": "killed"}})
    assert found is None and why == "killed"
    gaps = _explain_gaps({"state": "finished"}, explain)
    assert gaps == {"significance": "skipped for lack of time"}
    assert set(_explain_gaps({"state": "finished"}, {"error": "boom"})) == {
        "honest",
        "significance",
        "bias_variance",
        "composites",
    }
