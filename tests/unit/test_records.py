"""Typed records: each round-trips through JSON, old versions load, unknown fields are refused."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from pydantic import ValidationError
from sklearn.datasets import load_diabetes, load_iris
from tuttiml.service.data import prepare, summary
from tuttiml.service.records import TableSummary
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
