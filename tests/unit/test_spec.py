"""service.spec: SearchSpec validation messages, JSON round trip and the never-crash property."""

from __future__ import annotations

import json
import re
from datetime import UTC, datetime
from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from tuttiml.service.errors import InvalidSpecError
from tuttiml.service.spec import (
    KNOWN_FAMILIES,
    METRICS_BY_TASK,
    Metric,
    SearchSpec,
    Task,
    default_metric,
    parse_spec,
)

KNOWN = ", ".join(KNOWN_FAMILIES)


@pytest.mark.parametrize(
    ("fields", "where", "fix"),
    [
        (
            {"families": ["boostng"]},
            "families",
            f"unknown family [0] 'boostng'; choose from {KNOWN}",
        ),
        ({"families": ["bagging", "nope"]}, "families", "[1] 'nope'"),
        ({"families": []}, "families", "leave it out to search every family"),
        ({"max_trials": 0}, "max_trials", "greater than or equal to 1"),
        ({"max_trials": -5}, "max_trials", "got -5"),
        ({"wall_seconds": 0}, "wall_seconds", "greater than 0"),
        ({"trial_timeout": -1.0}, "trial_timeout", "greater than 0"),
        ({"max_failed_trials": 0}, "max_failed_trials", "greater than or equal to 1"),
        ({"folds": 1}, "folds", "greater than or equal to 2"),
        ({"parallelism": 0}, "parallelism", "greater than or equal to 1"),
        ({"memory_limit_mb": 10}, "memory_limit_mb", "greater than or equal to 64"),
        ({"holdout": 0.9}, "holdout", "less than or equal to 0.5"),
        ({"budget": 3}, "budget", "remove it; known fields are target, task"),
        ({"max_trial": 3}, "max_trial: not a spec field", "did you mean max_trials?"),
        ({"Drop-Columns": ["a"]}, "Drop-Columns", "did you mean drop_columns?"),
        ({"drop_columns": "id"}, "drop_columns", "pass a list, e.g. ['id', 'notes']"),
        ({"task": "clustering"}, "task", "'auto', 'binary', 'multiclass' or 'regression'"),
        (
            {"task": "regression", "metric": "roc_auc"},
            "metric 'roc_auc' does not fit task",
            "choose one of rmse, mae, r2",
        ),
        ({"group_column": "g", "order_column": "t"}, "spec", "give group_column or order_column"),
        ({"drop_columns": ["y"]}, "target 'y'", "also named as group/order/drop column"),
        ({"max_trials": 200_000, "wall_seconds": None}, "spec", "set wall_seconds or deadline"),
        ({"target": ""}, "target", "at least 1 character"),
    ],
)
def test_invalid_spec_fields(fields: dict[str, Any], where: str, fix: str) -> None:
    with pytest.raises(InvalidSpecError, match=re.escape(where)) as info:
        parse_spec({"target": "y", **fields})
    assert fix in str(info.value)
    assert isinstance(info.value, ValueError)


def test_missing_target_says_give_a_value() -> None:
    with pytest.raises(InvalidSpecError, match="target: Field required; give a value"):
        parse_spec({})


def test_every_problem_collected_into_one_error() -> None:
    bad = {"target": "y", "folds": 1, "max_trials": 0, "families": ["x"], "colour": "red"}
    with pytest.raises(InvalidSpecError) as info:
        parse_spec(bad)
    err = info.value
    assert len(err.problems) == 4
    for name in ("folds", "max_trials", "families", "colour"):
        assert any(p.startswith(name) for p in err.problems), name
        assert f"\n  {name}" in str(err)
    assert err.field == "folds" and err.value == 1


def test_keyword_fields_and_json_text_inputs() -> None:
    assert parse_spec(target="y", folds=3).folds == 3
    base = parse_spec(target="y")
    assert parse_spec(base, folds=4).folds == 4 and parse_spec(base) is base
    assert parse_spec('{"target": "y", "task": "binary"}').task is Task.BINARY
    with pytest.raises(InvalidSpecError, match="invalid search spec"):
        parse_spec('{"target": ')


def test_families_deduplicated_and_defaults() -> None:
    spec = parse_spec(target="y", families=["voting", "bagging", "voting"])
    assert spec.families == ("voting", "bagging")
    assert parse_spec(target="y").family_names == KNOWN_FAMILIES
    assert parse_spec(target="y", max_trials=100).failure_cap == 50
    assert parse_spec(target="y", max_failed_trials=3).failure_cap == 3


def test_spec_is_frozen() -> None:
    spec = parse_spec(target="y")
    with pytest.raises(Exception, match="frozen"):
        spec.folds = 3  # type: ignore[misc]


@pytest.mark.parametrize("task", [Task.BINARY, Task.MULTICLASS, Task.REGRESSION])
def test_resolved_fills_default_metric(task: Task) -> None:
    spec = parse_spec(target="y").resolved(task)
    assert spec.task is task and spec.metric is default_metric(task)


def test_resolved_refuses_metric_of_another_task() -> None:
    spec = parse_spec(target="price", metric="rmse")
    with pytest.raises(InvalidSpecError, match="metric: 'rmse' does not fit the binary") as info:
        spec.resolved(Task.BINARY)
    assert info.value.field == "metric" and info.value.value == "rmse"
    assert "choose one of roc_auc" in str(info.value)


# --------------------------------------------------------------------------------------------
# Properties

_names = st.text(min_size=1, max_size=12)
_datetimes = st.datetimes(
    min_value=datetime(1970, 1, 2), max_value=datetime(2200, 1, 1), timezones=st.just(UTC)
) | st.datetimes(min_value=datetime(1970, 1, 2), max_value=datetime(2200, 1, 1))


@st.composite
def valid_spec_fields(draw: st.DrawFn) -> dict[str, Any]:
    """Field values that form a valid spec (nothing left to filter out)."""
    target = draw(_names)
    others = _names.filter(lambda name: name != target)
    task = draw(st.sampled_from(Task))
    metrics = list(Metric) if task is Task.AUTO else list(METRICS_BY_TASK[task])
    split = draw(st.sampled_from(["none", "group", "order"]))
    wall = draw(st.none() | st.floats(min_value=1e-3, max_value=30 * 24 * 3600))
    deadline = draw(st.none() | _datetimes)
    high = 1_000_000 if wall is not None or deadline is not None else 100_000
    return {
        "target": target,
        "task": task.value,
        "metric": draw(st.none() | st.sampled_from(metrics).map(lambda m: m.value)),
        "folds": draw(st.integers(2, 20)),
        "group_column": draw(others) if split == "group" else None,
        "order_column": draw(others) if split == "order" else None,
        "holdout": draw(st.floats(0.0, 0.5)),
        "max_trials": draw(st.integers(1, high)),
        "wall_seconds": wall,
        "deadline": deadline,
        "trial_timeout": draw(st.floats(min_value=1e-3, max_value=24 * 3600)),
        "max_failed_trials": draw(st.none() | st.integers(1, 10**6)),
        "memory_limit_mb": draw(st.none() | st.integers(64, 10**6)),
        "families": draw(
            st.none() | st.lists(st.sampled_from(KNOWN_FAMILIES), min_size=1, unique=True)
        ),
        "seed": draw(st.integers(0, 2**31 - 1)),
        "parallelism": draw(st.integers(1, 256)),
        "library_size": draw(st.integers(0, 100)),
        "drop_columns": draw(st.lists(others, max_size=3)),
        "allow_leaks": draw(st.booleans()),
        "name": draw(st.none() | st.text(max_size=200)),
    }


@settings(max_examples=150, deadline=None)
@given(valid_spec_fields())
def test_spec_survives_dict_json_round_trip(fields: dict[str, Any]) -> None:
    spec = parse_spec(fields)
    as_dict = spec.model_dump(mode="json")
    text = json.dumps(as_dict)
    again = parse_spec(json.loads(text))
    assert again == spec
    assert SearchSpec.from_json(spec.to_json()) == spec
    assert again.to_json() == spec.to_json()


_field_names = st.sampled_from([*SearchSpec.model_fields, "bogus", ""])
_scalars = (
    st.none()
    | st.booleans()
    | st.integers(-(2**70), 2**70)
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(max_size=12)
    | st.sampled_from([*(t.value for t in Task), *(m.value for m in Metric), *KNOWN_FAMILIES])
    | _datetimes
)
_values = st.recursive(
    _scalars,
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=4), inner),
    max_leaves=6,
)


@settings(max_examples=300, deadline=None)
@given(st.dictionaries(_field_names, _values, max_size=8))
def test_validation_passes_or_raises_invalid_spec_error(fields: dict[str, Any]) -> None:
    try:
        spec = parse_spec(fields)
    except InvalidSpecError as exc:
        assert exc.problems and str(exc).startswith("invalid search spec")
    else:
        assert isinstance(spec, SearchSpec)


@settings(max_examples=100, deadline=None)
@given(st.text(max_size=60) | st.binary(max_size=60))
def test_json_text_passes_or_raises_invalid_spec_error(text: str | bytes) -> None:
    try:
        spec = parse_spec(text)
    except InvalidSpecError as exc:
        assert exc.problems
    else:
        assert isinstance(spec, SearchSpec)
