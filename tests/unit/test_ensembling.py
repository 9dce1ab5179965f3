"""Tests of workers.ensembling: scikit-learn's estimator checks plus behaviour checked by hand."""

from __future__ import annotations

import warnings
from datetime import UTC, datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import skops.io as sio
from lightgbm import LGBMClassifier, LGBMRegressor
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.linear_model import LinearRegression, LogisticRegression, Ridge
from sklearn.naive_bayes import GaussianNB
from sklearn.pipeline import make_pipeline
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor
from sklearn.utils.estimator_checks import parametrize_with_checks
from tuttiml.service.data import normalize_frame
from tuttiml.service.trusted import TRUSTED_TYPES
from tuttiml.workers.ensembling import (
    BlendingClassifier,
    BlendingRegressor,
    EarlyStoppingBoosterClassifier,
    EarlyStoppingBoosterRegressor,
    FrameNormalizer,
    RowCap,
    best_iterations,
    refit_rounds,
)

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures"


def _small_lgbm(cls: type) -> object:
    return cls(n_estimators=20, min_child_samples=2, n_jobs=1, verbose=-1, random_state=0)


CHECKED = [
    BlendingClassifier(
        [("lr", LogisticRegression()), ("nb", GaussianNB())], holdout_fraction=0.3, random_state=0
    ),
    BlendingRegressor(
        [("ridge", Ridge()), ("tree", DecisionTreeRegressor(max_depth=3, random_state=0))],
        final_estimator=LinearRegression(),
        holdout_fraction=0.3,
        random_state=0,
    ),
    EarlyStoppingBoosterClassifier(
        _small_lgbm(LGBMClassifier), max_rounds=40, patience=5, random_state=0
    ),
    EarlyStoppingBoosterRegressor(
        _small_lgbm(LGBMRegressor), max_rounds=40, patience=5, random_state=0
    ),
    RowCap(LogisticRegression(), max_rows=40, random_state=0),
    RowCap(Ridge(), max_rows=40, random_state=0),
    RowCap(DecisionTreeClassifier(random_state=0), max_rows=10_000, random_state=0),
    FrameNormalizer(),
]


def _expected_failures(estimator: object) -> dict[str, str]:
    """Checks that cannot apply, each with the reason."""
    out: dict[str, str] = {}
    if isinstance(estimator, FrameNormalizer):
        out["check_dataframe_column_names_consistency"] = (
            "by design columns are matched by name: extra columns are dropped, reordering is fine"
        )
    return out


@pytest.mark.filterwarnings("ignore:Converting data to scipy sparse matrix:UserWarning")
@parametrize_with_checks(CHECKED, expected_failed_checks=_expected_failures)
def test_sklearn_estimator_checks(estimator: object, check: object) -> None:
    check(estimator)  # type: ignore[operator]


# ---- FrameNormalizer ------------------------------------------------------------------------

SCHEMA = {"age": "numeric", "income": "numeric", "city": "categorical", "flag": "categorical"}


def _training_frame() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "age": [30.0, np.nan, 41.0],
            "income": [1.5, 2.5, np.nan],
            "city": pd.Series(["oslo", np.nan, "rome"], dtype=object),
            "flag": pd.Series(["1", "0", "1"], dtype=object),
        }
    )


def test_frame_normalizer_converts_raw_rows() -> None:
    norm = FrameNormalizer(SCHEMA).fit(_training_frame())
    raw = pd.DataFrame(
        {
            "flag": pd.array([1, None, 0], dtype="Int64"),
            "extra": ["dropped", "too", "yes"],
            "city": pd.array(["oslo", pd.NA, "paris"], dtype="string"),
            "income": ["3.5", None, "7"],
            "age": pd.array([25, pd.NA, 60], dtype="Int64"),
        }
    )
    out = norm.transform(raw)
    assert list(out.columns) == list(SCHEMA)  # schema order, extra column dropped
    assert out["age"].dtype == np.float64 and out["income"].dtype == np.float64
    assert out["city"].dtype == object and out["flag"].dtype == object
    assert_allclose(out["age"], [25.0, np.nan, 60.0])  # hand conversion of the raw values
    assert_allclose(out["income"], [3.5, np.nan, 7.0])
    assert out["city"].iloc[0] == "oslo" and out["city"].iloc[2] == "paris"
    assert out["flag"].iloc[0] == "1" and isinstance(out["flag"].iloc[0], str)
    assert out["city"].isna().tolist() == [False, True, False]
    assert out["flag"].isna().tolist() == [False, True, False]


def _time_table() -> pd.DataFrame:
    """Datetime and duration columns in the units and time zones users hand over."""
    stamps = ["2024-01-26 00:00:00", None, "1999-12-31 23:59:30"]
    return pd.DataFrame(
        {
            "ns": pd.to_datetime(stamps),
            "us": pd.to_datetime(stamps).as_unit("us"),
            "s": pd.to_datetime(stamps).as_unit("s"),
            "tz": pd.to_datetime(stamps).tz_localize("Asia/Tokyo"),
            "objects": pd.Series(
                [datetime(2024, 1, 26, tzinfo=UTC), None, datetime(1999, 12, 31, tzinfo=UTC)],
                dtype=object,
            ),
            "took": pd.to_timedelta(["90s", None, "2h"]),
            "took_ms": pd.to_timedelta(["90s", None, "2h"]).as_unit("ms"),
        }
    )


def test_frame_normalizer_sees_times_as_training_did() -> None:
    # Training stores what service.data made of the user's table; predicting on the user's own
    # rows must give the model the same numbers (pd.to_numeric would give raw ns/us ticks).
    raw = _time_table()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        trained_on = normalize_frame(raw)
    norm = FrameNormalizer(dict.fromkeys(raw.columns, "numeric")).fit(trained_on)
    pd.testing.assert_frame_equal(norm.transform(raw), trained_on, check_exact=True)
    # outside reference: Python's datetime.timestamp() (seconds since 1970-01-01 UTC)
    jan26 = datetime(2024, 1, 26, tzinfo=UTC).timestamp()
    assert norm.transform(raw)["us"].iloc[0] == jan26 == 1706227200.0
    tokyo = datetime(2024, 1, 26, tzinfo=timezone(timedelta(hours=9))).timestamp()
    assert norm.transform(raw)["tz"].iloc[0] == tokyo
    assert norm.transform(raw)["took_ms"].tolist()[::2] == [90.0, 7200.0]
    pipe = make_pipeline(
        FrameNormalizer(dict.fromkeys(raw.columns, "numeric")),
        DecisionTreeRegressor(random_state=0),
    ).fit(trained_on.iloc[[0, 2]], [1.0, 3.0])
    assert_allclose(pipe.predict(raw.iloc[[2, 0]]), [3.0, 1.0])


def test_an_exported_frame_normalizer_of_0_1_0_still_loads_and_reads_times() -> None:
    # tests/fixtures/exported_0_1_0.skops (tutti 0.1.0): its FrameNormalizer, loaded by today's
    # code, converts datetimes with today's rule (the class kept its parameters and state).
    from tuttiml.service.artifacts import read_export

    model, _ = read_export(FIXTURES / "exported_0_1_0.skops")
    norm = model.steps[0][1]
    assert isinstance(norm, FrameNormalizer)
    first = next(iter(norm.schema_))
    raw = pd.DataFrame({c: [0.0] for c in norm.schema_})
    raw[first] = pd.to_datetime(["1970-01-01 00:01:00"]).as_unit("us")
    assert norm.transform(raw)[first].iloc[0] == 60.0


def test_frame_normalizer_names_missing_columns() -> None:
    norm = FrameNormalizer(SCHEMA).fit(_training_frame())
    with pytest.raises(ValueError, match=r"missing.*'income', 'flag'.*same columns as in train"):
        norm.transform(_training_frame().drop(columns=["income", "flag"]))


def test_frame_normalizer_names_non_numeric_column() -> None:
    norm = FrameNormalizer(SCHEMA).fit(_training_frame())
    bad = _training_frame().assign(income=pd.Series(["1.0", "lots", None], dtype=object))
    with pytest.raises(ValueError, match=r"column 'income'.*'lots'"):
        norm.transform(bad)


def test_frame_normalizer_skops_round_trip() -> None:
    norm = FrameNormalizer(SCHEMA).fit(_training_frame())
    blob = sio.dumps(norm)
    assert set(sio.get_untrusted_types(data=blob)) <= set(TRUSTED_TYPES)
    loaded = sio.loads(blob, trusted=list(TRUSTED_TYPES))
    pd.testing.assert_frame_equal(
        loaded.transform(_training_frame()), norm.transform(_training_frame())
    )


def test_frame_normalizer_infers_schema_from_dtypes() -> None:
    norm = FrameNormalizer().fit(_training_frame())
    assert norm.schema_ == {
        "age": "numeric",
        "income": "numeric",
        "city": "categorical",
        "flag": "categorical",
    }


# ---- RowCap ---------------------------------------------------------------------------------


def test_row_cap_stratified_subsample_counts() -> None:
    y = np.array(["a"] * 240 + ["b"] * 57 + ["c"] * 3)
    X = np.random.default_rng(0).normal(size=(len(y), 3))
    capped = RowCap(LogisticRegression(), max_rows=100, random_state=0).fit(X, y)
    seen = capped.estimator_.classes_
    assert_array_equal(seen, ["a", "b", "c"])
    # hand computation: floor(100 * 240/300) = 80, floor(100 * 57/300) = 19, max(1, 1) = 1
    assert capped.n_rows_fitted_ == 80 + 19 + 1
    assert capped.predict_proba(X).shape == (300, 3)


def test_row_cap_under_the_cap_equals_the_inner_estimator() -> None:
    rng = np.random.default_rng(1)
    X = rng.normal(size=(120, 4))
    y = (X[:, 0] + rng.normal(size=120) > 0).astype(int)
    capped = RowCap(LogisticRegression(C=0.3), max_rows=500, random_state=0).fit(X, y)
    direct = LogisticRegression(C=0.3).fit(X, y)  # scikit-learn's class fitted directly
    assert_allclose(capped.predict_proba(X), direct.predict_proba(X))


def test_row_cap_regressor_subsamples_exactly_max_rows() -> None:
    rng = np.random.default_rng(2)
    X, y = rng.normal(size=(300, 2)), rng.normal(size=300)
    capped = RowCap(Ridge(), max_rows=50, random_state=0).fit(X, y)
    assert capped.n_rows_fitted_ == 50
    assert not hasattr(capped, "predict_proba")  # available_if: Ridge has none


def test_early_stopping_booster_rejects_bad_params() -> None:
    booster = EarlyStoppingBoosterRegressor(validation_fraction=1.5)
    with pytest.raises(ValueError, match=r"validation_fraction: must be a float strictly"):
        booster.fit(np.zeros((20, 2)), np.zeros(20))


def test_best_iterations_on_a_bare_booster() -> None:
    rng = np.random.default_rng(3)
    X = rng.normal(size=(200, 3))
    y = X[:, 0] + 0.1 * rng.normal(size=200)
    booster = EarlyStoppingBoosterRegressor(
        _small_lgbm(LGBMRegressor), max_rounds=300, patience=10, random_state=0
    ).fit(X, y)
    assert best_iterations(booster) == {"fixed_rounds": booster.best_iteration_}
    refit = EarlyStoppingBoosterRegressor(
        _small_lgbm(LGBMRegressor), fixed_rounds=refit_rounds([12, 18], 170, 200)
    )
    refit.fit(X, y)
    # hand computation: mean 15 scaled by 200/170 -> round(17.6) = 18 rounds
    assert refit.estimator_.booster_.num_trees() == 18
