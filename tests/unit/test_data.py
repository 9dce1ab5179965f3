"""service.data: reading, normalising, checking and encoding the user's table."""

from __future__ import annotations

import json
import re
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from tuttiml.service.data import (
    HIGH_CARDINALITY,
    check_size,
    decode,
    digest,
    encode,
    normalize_frame,
    prepare,
    read_table,
    summary,
)
from tuttiml.service.errors import EnsembleSearchError, InvalidDataError, InvalidSpecError
from tuttiml.service.spec import Metric, SearchSpec, Task

N = 120


def _base(n: int = N, seed: int = 0) -> pd.DataFrame:
    """A small clean table: two numeric features, one categorical, a binary target."""
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "x1": rng.normal(size=n),
            "x2": rng.integers(0, 5, size=n).astype(float),
            "color": rng.choice(["red", "green", "blue"], size=n),
            "y": np.tile([0, 1], n // 2),
        }
    )


def _spec(**fields: Any) -> SearchSpec:
    return SearchSpec(**{"target": "y", **fields})


def _with(**columns: Any) -> Callable[[], pd.DataFrame]:
    def build() -> pd.DataFrame:
        df = _base()
        for name, values in columns.items():
            df[name] = values(df) if callable(values) else values
        return df

    return build


def _dup_names() -> pd.DataFrame:
    df = _base()
    return pd.concat([df, df[["x1"]]], axis=1)


def _names_collide_as_str() -> pd.DataFrame:
    df = _base()
    df[1] = 1.0
    df["1"] = 2.0
    return df


# Each case: id, table builder, spec fields, error class, field name in the message, fix wording.
# fmt: off
BAD_INPUTS: list[tuple[str, Callable[[], pd.DataFrame], dict[str, Any], type, str, str]] = [
    ("no rows", lambda: _base().iloc[:0], {}, InvalidDataError, "data", "at least one row"),
    ("no columns", lambda: pd.DataFrame(index=range(3)), {}, InvalidDataError, "data",
     "at least one row"),
    ("only target", lambda: _base()[["y"]], {}, InvalidDataError, "data",
     "add at least one column"),
    ("duplicated names", _dup_names, {}, InvalidDataError, "data", "rename them"),
    ("names collide as str", _names_collide_as_str, {}, InvalidDataError, "data",
     "1 and '1' collide"),
    ("target missing, close match", _base, {"target": "Y"}, InvalidDataError, "target",
     "did you mean 'y'"),
    ("target missing, listing", _base, {"target": "price"}, InvalidDataError, "target",
     "set target to one of its columns \\('x1', 'x2'"),
    ("target all missing", _with(y=np.nan), {}, InvalidDataError, "target",
     "choose a target column with values"),
    ("target one class", _with(y="a"), {}, InvalidDataError, "target",
     "pick a target that varies"),
    ("regression on text", _with(y=lambda d: np.where(d["y"] == 1, "yes", "no")),
     {"task": "regression"}, InvalidSpecError, "task", "use task='binary'"),
    ("binary with 3 classes", _with(y=np.arange(N) % 3), {"task": "binary"}, InvalidSpecError,
     "task", "use task='multiclass'"),
    ("multiclass with 2 classes", _base, {"task": "multiclass"}, InvalidSpecError, "task",
     "use task='binary'"),
    ("multiclass on fractions", _with(y=lambda d: np.linspace(0, 1, N)), {"task": "multiclass"},
     InvalidSpecError, "task", "use task='regression'"),
    ("class rarer than folds", _with(y=lambda d: np.where(np.arange(N) < 3, 2, d["y"])), {},
     InvalidDataError, "target", "folds=3 or less\\) or merge the rare classes"),
    ("single-row class", _with(y=lambda d: np.where(np.arange(N) < 1, "z", d["y"].astype(str))),
     {}, InvalidDataError, "target", "merge or remove the classes with a single row"),
    ("metric for another task", _base, {"metric": "rmse"}, InvalidSpecError, "metric",
     "choose one of roc_auc"),
    ("infinite values", _with(x1=lambda d: d["x1"].where(d.index != 5, np.inf)), {},
     InvalidDataError, "column 'x1'", "replace them with missing values"),
    ("complex numbers", _with(z=lambda d: d["x1"] + 1j), {}, InvalidDataError, "column 'z'",
     "split them into real and imaginary"),
    ("group column missing", _base, {"group_column": "site"}, InvalidDataError, "group_column",
     "name an existing column or leave group_column out"),
    ("order column missing", _base, {"order_column": "when"}, InvalidDataError, "order_column",
     "name an existing column or leave order_column out"),
    ("drop column missing", _base, {"drop_columns": ("nope",)}, InvalidDataError, "drop_columns",
     "remove them from drop_columns"),
    ("too few groups", _with(g=lambda d: np.arange(N) % 2), {"group_column": "g"},
     InvalidDataError, "group_column", "use fewer folds"),
    ("group with missing", _with(g=lambda d: np.where(np.arange(N) < 2, None, np.arange(N) % 6)),
     {"group_column": "g"}, InvalidDataError, "group_column", "fill them"),
    ("order column text", _with(t=lambda d: [f"2024-01-{i % 28 + 1:02d}" for i in range(N)]),
     {"order_column": "t"}, InvalidDataError, "order_column", "pd.to_datetime"),
    ("order column missing values", _with(t=lambda d: np.where(np.arange(N) < 4, np.nan, 1.0)),
     {"order_column": "t"}, InvalidDataError, "order_column", "fill them or drop those rows"),
    ("only useless features", lambda: _base()[["y"]].assign(k=1.0, e=np.nan), {},
     InvalidDataError, "data", "no feature columns left"),
    ("leak: copy", _with(leak=lambda d: d["y"]), {}, InvalidDataError, "column 'leak'",
     "allow_leaks=True"),
    ("leak: text copy", _with(leak=lambda d: np.where(d["y"] == 1, "pos", "neg")), {},
     InvalidDataError, "column 'leak'", "drop the column"),
]
# fmt: on


@pytest.mark.parametrize(
    ("build", "fields", "error", "where", "fix"),
    [case[1:] for case in BAD_INPUTS],
    ids=[case[0] for case in BAD_INPUTS],
)
def test_bad_input_raises_with_field_and_fix(
    build: Callable[[], pd.DataFrame], fields: dict[str, Any], error: type, where: str, fix: str
) -> None:
    with pytest.raises(error, match=re.escape(where)) as info:
        prepare(build(), _spec(**fields))
    assert re.search(fix, str(info.value)), str(info.value)
    assert isinstance(info.value, EnsembleSearchError) and isinstance(info.value, ValueError)
    assert info.value.field is not None


def test_bad_input_table_is_big_enough() -> None:
    assert len(BAD_INPUTS) >= 20


def test_not_a_dataframe() -> None:
    with pytest.raises(InvalidDataError, match="data: expected a pandas DataFrame"):
        prepare([[1, 2]], _spec())  # type: ignore[arg-type]


def test_every_problem_in_one_error() -> None:
    df = _base()
    df["x1"] = df["x1"].where(df.index != 0, np.inf)
    df = pd.concat([df, df[["x2"]]], axis=1)
    with pytest.raises(InvalidDataError) as info:
        prepare(df, _spec(target="yy", group_column="g"))
    text = str(info.value)
    assert "4 problems" in text
    for piece in ("duplicated column names 'x2'", "column 'x1'", "target:", "group_column:"):
        assert piece in text
    assert info.value.field == "data"


def test_spec_only_problems_raise_invalid_spec_error() -> None:
    with pytest.raises(InvalidSpecError, match="task: 'binary' needs exactly 2") as info:
        prepare(_base().assign(y=np.arange(N) % 4), _spec(task="binary"))
    assert info.value.field == "task"
    assert info.value.problems == [str(info.value)]


def test_spec_and_data_problems_together_raise_invalid_data_error() -> None:
    df = _base().assign(y=np.arange(N) % 4, leak=lambda d: d["y"] * 2.0)
    with pytest.raises(InvalidDataError, match="2 problems") as info:
        prepare(df, _spec(task="binary"))
    assert "task: 'binary'" in str(info.value) and "column 'leak'" in str(info.value)


# --------------------------------------------------------------------------------------------
# Normalising


def test_nullable_string_and_category_dtypes_normalise() -> None:
    df = pd.DataFrame(
        {
            "i": pd.array([1, None, 3, 4], dtype="Int64"),
            "u": pd.array([1, 2, None, 4], dtype="UInt8"),
            "f": pd.array([1.5, None, 3.0, 4.0], dtype="Float64"),
            "b": pd.array([True, None, False, True], dtype="boolean"),
            "nb": [True, False, True, False],
            "s": pd.array(["a", None, "b", pd.NA], dtype="string"),
            "s3": pd.array(["a", None, "b", "c"], dtype="str"),
            "c": pd.Categorical(["x", None, "y", "x"]),
            "ci": pd.Categorical([1, 2, None, 1]),
            "on": pd.Series([1, None, 2.5, pd.NA], dtype=object),
            "ob": pd.Series([True, None, False, True], dtype=object),
            "om": pd.Series([1, "a", pd.NA, b"z"], dtype=object),
            7: [1, 2, 3, 4],
        }
    )
    df.index = pd.Index([10, 11, 12, 13])
    out = normalize_frame(df)
    numeric = ["i", "u", "f", "b", "nb", "on", "ob", "7"]
    text = ["s", "s3", "c", "ci", "om"]
    assert list(out.columns) == [str(c) for c in df.columns]
    assert all(out[c].dtype == np.float64 for c in numeric)
    assert all(out[c].dtype == object for c in text)
    assert out.index.equals(pd.RangeIndex(4))
    assert out["i"].tolist()[0] == 1.0 and np.isnan(out["i"][1])
    assert out["b"].tolist()[::2] == [1.0, 0.0]
    assert out["ob"].tolist()[::2] == [1.0, 0.0]
    assert out["ci"].tolist()[:2] == ["1", "2"]
    assert out["om"].tolist()[:2] == ["1", "a"] and out["om"][3] == "z"
    for c in text:
        values = out[c].tolist()
        assert all(isinstance(v, str) or (isinstance(v, float) and np.isnan(v)) for v in values)
        assert not any(v is None or v is pd.NA for v in values)


def test_datetimes_become_seconds_with_a_warning() -> None:
    df = pd.DataFrame(
        {
            "d": pd.to_datetime(["1970-01-01 00:00:10", None]),
            "tz": pd.DatetimeIndex(["1970-01-01 01:00", "1970-01-02 01:00"]).tz_localize(
                "Europe/Paris"  # UTC+1 in 1970
            ),
            "td": pd.to_timedelta(["1min", None]),
        }
    )
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = normalize_frame(df)
    notes = [str(w.message) for w in caught]
    assert any("'d': datetimes converted to seconds since 1970-01-01 UTC" in n for n in notes)
    assert any("'td': durations converted to seconds" in n for n in notes)
    assert out["d"][0] == 10.0 and np.isnan(out["d"][1])
    assert out["tz"].tolist() == [0.0, 86400.0]
    assert out["td"][0] == 60.0


def test_normalize_refuses_infinities_naming_each_column() -> None:
    df = pd.DataFrame({"a": [1.0, np.inf], "b": [-np.inf, 2.0], "c": [1.0, 2.0]})
    with pytest.raises(InvalidDataError, match=r"column 'a'.*\n.*column 'b'"):
        normalize_frame(df)


def test_normalize_is_idempotent() -> None:
    once = normalize_frame(_base())
    pd.testing.assert_frame_equal(normalize_frame(once), once)


# --------------------------------------------------------------------------------------------
# Reading and encoding


def test_csv_and_parquet_paths_round_trip(tmp_path: Path) -> None:
    df = normalize_frame(_base().assign(note=lambda d: np.where(d.index % 7 == 0, None, "n")))
    paths = {
        "t.csv": lambda p: df.to_csv(p, index=False),
        "t.csv.gz": lambda p: df.to_csv(p, index=False, compression="gzip"),
        "t.parquet": lambda p: df.to_parquet(p, index=False),
        "t.PQ": lambda p: df.to_parquet(p, index=False),
    }
    for name, write in paths.items():
        write(tmp_path / name)
        for source in (tmp_path / name, str(tmp_path / name)):
            back = normalize_frame(read_table(source))
            pd.testing.assert_frame_equal(back, df, check_exact=False)


def test_read_table_copies_a_dataframe_shallowly() -> None:
    df = _base()
    out = read_table(df)
    out.columns = ["a", "b", "c", "d"]
    assert list(df.columns) == ["x1", "x2", "color", "y"]


@pytest.mark.parametrize(
    ("name", "content", "match"),
    [
        ("t.xlsx", b"PK", "unsupported file type .*save the table as .csv"),
        ("t", b"x", "unsupported file type .*suffix 'none'"),
        ("missing.csv", None, "no file at .*check the path"),
        ("empty.csv", b"", "is empty; write a header row"),
        ("bad.parquet", b"not parquet at all", "could not be read as Parquet .*save it again"),
        ("bad.csv.gz", b"not gzip", "could not be read as CSV .*comma-separated"),
        ("latin.csv", b"a,b\n\xff\xfe,1\n", "could not be read as CSV .*UTF-8"),
    ],
)
def test_read_table_errors(tmp_path: Path, name: str, content: bytes | None, match: str) -> None:
    path = tmp_path / name
    if content is not None:
        path.write_bytes(content)
    with pytest.raises(InvalidDataError, match=match) as info:
        read_table(path)
    assert info.value.field == "data" and info.value.value == str(path)


def test_read_table_wrong_type() -> None:
    with pytest.raises(InvalidDataError, match=r"data: expected .* \(got dict\)"):
        read_table({"a": [1]})  # type: ignore[arg-type]


def test_encode_decode_round_trip_keeps_normalised_dtypes() -> None:
    df = normalize_frame(
        pd.DataFrame(
            {
                "num": [1.0, np.nan, 3.0],
                "txt": pd.array(["a", None, "c"], dtype="string"),
                "empty_txt": pd.Categorical([None, None, None], categories=["a"]),
                "all_nan": [np.nan] * 3,
            }
        )
    )
    data = encode(df)
    assert data[:4] == b"PAR1"
    back = decode(data)
    pd.testing.assert_frame_equal(back, df)
    assert back["txt"].dtype == object and back["empty_txt"].dtype == object
    assert isinstance(back["txt"][0], str) and np.isnan(back["txt"][1])
    assert back.index.equals(pd.RangeIndex(3))


def test_digest_is_sha256_of_the_bytes() -> None:
    data = encode(normalize_frame(_base()))
    assert re.fullmatch(r"[0-9a-f]{64}", digest(data))
    assert digest(data) == digest(encode(normalize_frame(_base())))
    assert digest(data) != digest(encode(normalize_frame(_base(seed=1))))


def test_decode_rejects_garbage() -> None:
    with pytest.raises(
        InvalidDataError,
        match=r"data: the stored table is not valid Parquet \(.*\); submit the job again",
    ):
        decode(b"garbage")


def test_check_size() -> None:
    check_size(10, 10)
    with pytest.raises(InvalidDataError, match=r"data: the encoded table is 3\.00 MB") as info:
        check_size(3 * 2**20, 2**20)
    assert "1.00 MB" in str(info.value) and "raise TUTTI_MAX_UPLOAD_BYTES" in str(info.value)
    assert "sample rows" in str(info.value) and info.value.field == "data"


_cell_text = st.one_of(st.none(), st.text(max_size=5))
_cell_num = st.one_of(st.none(), st.floats(allow_infinity=False), st.integers(-(2**40), 2**40))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.integers(1, 6).flatmap(
        lambda n: st.tuples(
            st.lists(_cell_num, min_size=n, max_size=n),
            st.lists(_cell_text, min_size=n, max_size=n),
            st.lists(st.one_of(st.none(), st.booleans()), min_size=n, max_size=n),
        )
    )
)
def test_normalised_frames_survive_encode_decode(cols: tuple[list[Any], ...]) -> None:
    nums, texts, flags = cols
    df = pd.DataFrame(
        {
            "n": pd.Series(nums, dtype=object),
            "t": pd.Series(texts, dtype=object),
            "s": pd.array(texts, dtype="string"),
            "b": pd.array(flags, dtype="boolean"),
        }
    )
    out = normalize_frame(df)
    assert out["s"].dtype == object and out["b"].dtype == np.float64
    if any(t is not None for t in texts):  # an all-missing object column counts as numeric
        assert out["t"].dtype == object
    pd.testing.assert_frame_equal(decode(encode(out)), out)


# --------------------------------------------------------------------------------------------
# prepare: what passes


def test_prepare_clean_binary_table() -> None:
    prepared = prepare(_base(), _spec())
    assert prepared.task == "binary" and prepared.spec.task is Task.BINARY
    assert prepared.spec.metric is Metric.ROC_AUC
    assert prepared.schema == {"x1": "numeric", "x2": "numeric", "color": "categorical"}
    assert prepared.numeric_columns == ("x1", "x2")
    assert prepared.categorical_columns == ("color",)
    assert prepared.classes == [0, 1] and prepared.base_rate == 0.5
    assert prepared.n_rows == N and list(prepared.frame.columns) == ["x1", "x2", "color", "y"]
    assert prepared.dropped == {}
    with pytest.raises(AttributeError):
        prepared.task = "x"  # type: ignore[misc]


def test_rows_with_missing_target_are_dropped_with_a_warning() -> None:
    df = _base()
    df.loc[[3, 4, 5], "y"] = np.nan
    prepared = prepare(df, _spec())
    assert prepared.n_rows == N - 3
    assert prepared.frame.index.equals(pd.RangeIndex(N - 3))
    assert any("dropped 3 of 120 rows" in w for w in prepared.warnings)


def test_id_like_constant_and_empty_columns_are_dropped() -> None:
    df = _base().assign(
        row_id=np.arange(N) + 1000,
        code=[f"c{i}" for i in range(N)],
        k=7.0,
        blank=None,
        half=lambda d: np.where(d.index % 2 == 0, 1.0, np.nan),  # kept: missingness informs
    )
    prepared = prepare(df, _spec(drop_columns=("x2",)))
    assert set(prepared.dropped) == {"row_id", "code", "k", "blank", "x2"}
    assert "id-like" in prepared.dropped["row_id"] and "id-like" in prepared.dropped["code"]
    assert "constant" in prepared.dropped["k"] and "missing" in prepared.dropped["blank"]
    assert prepared.dropped["x2"] == "listed in drop_columns"
    assert "half" in prepared.schema
    assert not set(prepared.dropped) & set(prepared.frame.columns)
    assert any("'row_id': dropped from the features: id-like" in w for w in prepared.warnings)


def test_high_cardinality_and_duplicates_warned() -> None:
    df = _base().assign(city=[f"c{i % (HIGH_CARDINALITY + 5)}" for i in range(N)])
    df = pd.concat([df, df.iloc[:4]], ignore_index=True)
    prepared = prepare(df, _spec())
    assert prepared.high_cardinality_columns == ("city",)
    assert "city" in prepared.categorical_columns
    assert any("4 exact duplicate rows" in w for w in prepared.warnings)
    assert any("high-cardinality" in w for w in prepared.warnings)


def test_group_and_order_columns_stay_in_frame_but_not_in_features() -> None:
    df = _base().assign(g=np.arange(N) % 10)
    prepared = prepare(df, _spec(group_column="g"))
    assert "g" in prepared.frame.columns and "g" not in prepared.schema
    df = _base().assign(t=pd.date_range("2024-01-01", periods=N, freq="D"))
    prepared = prepare(df, _spec(order_column="t"))
    assert prepared.frame["t"].dtype == np.float64 and "t" not in prepared.schema


# --------------------------------------------------------------------------------------------
# Leaks


def _regression(n: int = N) -> pd.DataFrame:
    rng = np.random.default_rng(3)
    x = rng.normal(size=n)
    return pd.DataFrame({"x": x, "y": np.exp(x + rng.normal(scale=0.5, size=n))})


@pytest.mark.parametrize(
    ("make", "task"),
    [
        (lambda d: d["y"], "regression"),
        (lambda d: np.log(d["y"]), "regression"),
        (lambda d: -3 * d["y"] + 1, "regression"),
        (lambda d: np.where(d.index % 9 == 0, np.nan, np.log(d["y"])), "regression"),
    ],
    ids=["copy", "log", "negative affine", "log with missing"],
)
def test_numeric_leaks_refused(make: Callable[[pd.DataFrame], Any], task: str) -> None:
    df = _regression().assign(leak=make)
    with pytest.raises(InvalidDataError, match=r"column 'leak': .* the target 'y'") as info:
        prepare(df, _spec())
    assert info.value.field == "leak" and "allow_leaks=True" in str(info.value)
    allowed = prepare(df, _spec(allow_leaks=True))
    assert allowed.task == task and "leak" in allowed.schema
    assert any("looks like a target leak" in w for w in allowed.warnings)


def test_categorical_one_to_one_copy_of_class_target_refused() -> None:
    df = _base().assign(y=np.arange(N) % 3)
    df["label"] = df["y"].map({0: "setosa", 1: "virginica", 2: "versicolor"})
    with pytest.raises(InvalidDataError, match="column 'label': maps one-to-one onto"):
        prepare(df, _spec())


def test_strong_but_imperfect_feature_is_not_a_leak() -> None:
    df = _regression()
    df["noisy"] = np.log(df["y"]) + np.random.default_rng(0).normal(scale=0.05, size=N)
    assert "noisy" in prepare(df, _spec()).schema


# --------------------------------------------------------------------------------------------
# Task detection


def test_task_auto_detection_on_sklearn_datasets() -> None:
    # Source: scikit-learn's bundled datasets (shipped with the package, no download).
    from sklearn.datasets import load_breast_cancer, load_diabetes, load_wine

    expected = {load_breast_cancer: "binary", load_wine: "multiclass", load_diabetes: "regression"}
    for loader, task in expected.items():
        frame = loader(as_frame=True).frame
        prepared = prepare(frame, _spec(target="target"))
        assert prepared.task == task, loader.__name__
        assert prepared.dropped == {}, loader.__name__
    wine = prepare(load_wine(as_frame=True).frame, _spec(target="target"))
    assert wine.classes == [0, 1, 2] and wine.spec.metric is Metric.LOG_LOSS
    assert any("treated as multiclass" in w for w in wine.warnings)


@pytest.mark.parametrize(
    ("target", "task"),
    [
        (np.where(np.arange(N) % 2, "yes", "no"), "binary"),
        (np.arange(N) % 4, "multiclass"),
        ([f"k{i % 4}" for i in range(N)], "multiclass"),
        (np.arange(N) % 25, "regression"),  # more than 20 whole numbers: amounts
        (np.linspace(0, 1, N), "regression"),
        (np.where(np.arange(N) % 2, 2.5, -1.0), "binary"),
    ],
)
def test_task_auto_rules(target: Any, task: str) -> None:
    prepared = prepare(_base().assign(y=target), _spec())
    assert prepared.task == task


def test_classes_and_base_rate_for_text_binary() -> None:
    df = _base().assign(y=np.where(np.arange(N) < 30, "yes", "no"))
    prepared = prepare(df, _spec())
    assert prepared.classes == ["no", "yes"] and prepared.base_rate == pytest.approx(0.25)


def test_explicit_task_and_metric_kept() -> None:
    prepared = prepare(_base(), _spec(task="binary", metric="f1", folds=3))
    assert prepared.spec.metric is Metric.F1 and prepared.spec.folds == 3


# --------------------------------------------------------------------------------------------
# Summary


def test_summary_is_json_friendly() -> None:
    df = _base()
    df.loc[:9, "x1"] = np.nan
    info = summary(prepare(df, _spec()))
    assert json.loads(json.dumps(info, allow_nan=False)) == info
    assert info["rows"] == N and info["task"] == "binary" and info["metric"] == "roc_auc"
    assert info["columns"] == {
        "numeric": ["x1", "x2"],
        "categorical": ["color"],
        "high_cardinality": [],
    }
    assert info["missing_share"]["x1"] == pytest.approx(10 / N, abs=1e-6)
    assert info["class_balance"] == [
        {"label": 0, "count": 60, "share": 0.5},
        {"label": 1, "count": 60, "share": 0.5},
    ]
    assert info["base_rate"] == 0.5 and info["target_stats"] is None


def test_summary_for_regression() -> None:
    info = summary(prepare(_regression(), _spec()))
    assert json.loads(json.dumps(info, allow_nan=False)) == info
    assert info["classes"] == [] and info["class_balance"] is None and info["base_rate"] is None
    assert info["target_stats"]["min"] > 0


def test_prepare_emits_no_python_warnings() -> None:
    df = _base().assign(t=pd.date_range("2024-01-01", periods=N, freq="h"))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        prepared = prepare(df, _spec())
    assert any("seconds since 1970" in w for w in prepared.warnings)
