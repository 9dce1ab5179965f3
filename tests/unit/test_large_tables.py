"""Large-table measures: float32 narrowing, shared text objects, the row-halving rung."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from tuttiml.service.data import decode, encode, normalize_frame
from tuttiml.service.spec import Metric, SearchSpec
from tuttiml.workers.datasets import Dataset, build_dataset, float32_if_exact
from tuttiml.workers.evaluation import Pruned, cross_validate


def test_ordinary_features_narrow_to_float32() -> None:
    values = np.random.default_rng(0).normal(10.0, 3.0, 10_000)
    values[::7] = np.nan
    small = float32_if_exact(values)
    assert small is not None and small.dtype == np.float32
    assert np.array_equal(np.isnan(small), np.isnan(values))


def test_integers_below_two_to_the_24_stay_exact() -> None:
    values = np.arange(0, 2**24, 997, dtype=np.float64)
    small = float32_if_exact(values)
    assert small is not None and np.array_equal(small.astype(np.float64), values)


@pytest.mark.parametrize(
    "values",
    [
        # seconds since 1970 over one day: float32 steps are 128 s at this offset
        1.7e9 + np.arange(0, 86_400, 60, dtype=np.float64),
        np.array([1.0, 2.0, 1e300]),  # overflows float32
    ],
    ids=["timestamps", "overflow"],
)
def test_values_float32_would_blur_keep_float64(values: np.ndarray) -> None:
    assert float32_if_exact(values) is None


def _breast_cancer() -> pd.DataFrame:
    frame = load_breast_cancer(as_frame=True).frame  # scikit-learn bundled (UCI WDBC)
    return frame.rename(columns=lambda c: c.replace(" ", "_"))


def _dataset(frame: pd.DataFrame, **spec_fields: object) -> Dataset:
    spec = SearchSpec(target="target", folds=5, **spec_fields)  # type: ignore[arg-type]
    features = [c for c in frame.columns if c != "target"]
    record = {"task": "binary", "schema": dict.fromkeys(features, "numeric")}
    return build_dataset(frame, record, spec)


def test_narrowed_table_scores_like_the_float64_one() -> None:
    """CV ROC AUC of a scaled logistic regression on breast cancer: float32 features change it
    by less than 1e-4 (float32 keeps ~7 significant digits; common practice)."""
    wide = _breast_cancer()
    data = _dataset(wide.copy())
    assert all(data.X[c].dtype == np.float32 for c in data.X.columns)
    model = make_pipeline(StandardScaler(), LogisticRegression(max_iter=5000))
    narrow_score = cross_validate(model, data, Metric.ROC_AUC).mean
    data.X = wide.drop(columns="target")  # the same folds on the float64 columns
    assert data.X.dtypes.eq(np.float64).all()
    wide_score = cross_validate(model, data, Metric.ROC_AUC).mean
    assert abs(narrow_score - wide_score) < 1e-4


def test_decoded_text_shares_one_string_object_per_level() -> None:
    rng = np.random.default_rng(1)
    frame = pd.DataFrame(
        {"kind": rng.choice(["pump", "valve", None], 5_000), "x": rng.normal(size=5_000)}
    )
    back = decode(encode(normalize_frame(frame)))
    pd.testing.assert_frame_equal(back, normalize_frame(frame))
    present = [v for v in back["kind"] if isinstance(v, str)]
    assert len({id(v) for v in present}) == 2  # 8 bytes a row, not a str object per row


def test_rung_scores_a_subsample_of_fold_zero_first() -> None:
    """The rung's score equals a hand computation: the template fitted on the rung's rows of
    fold 0's training part, ROC AUC (scikit-learn's roc_auc_score) on fold 0's test rows."""
    data = _dataset(_breast_cancer(), halving_rows=200)
    sub, held = data.rung(seed=0)  # type: ignore[misc]
    train, test = next(data.folds())
    assert np.array_equal(held, test) and set(sub) < set(train)
    assert len(sub) == len(train) // 2  # 1/8 is below the floor of min(20,000, half)
    model = make_pipeline(StandardScaler(), LogisticRegression(max_iter=5000))
    fitted = make_pipeline(StandardScaler(), LogisticRegression(max_iter=5000))
    fitted.fit(data.X.iloc[sub], data.y[sub])
    expected = roc_auc_score(data.y[test], fitted.predict_proba(data.X.iloc[test])[:, 1])

    seen: list[tuple[int, float]] = []

    def stop_at_rung(fold: int, score: float) -> bool:
        seen.append((fold, score))
        return False

    with pytest.raises(Pruned) as stop:
        cross_validate(model, data, Metric.ROC_AUC, on_fold=stop_at_rung, seed=0)
    partial = stop.value.args[0]
    assert seen == [(-1, pytest.approx(expected))]
    assert partial.fold_scores == [] and partial.rung_score == pytest.approx(expected)

    folds: list[int] = []
    full = cross_validate(
        model, data, Metric.ROC_AUC, on_fold=lambda f, s: folds.append(f) or True, seed=0
    )
    assert folds == [-1, 0, 1, 2, 3, 4] and full.complete and len(full.fold_scores) == 5


def test_small_tables_have_no_rung() -> None:
    data = _dataset(_breast_cancer())  # 569 rows < the default 100,000
    assert data.rung(seed=0) is None
    assert _dataset(_breast_cancer(), halving_rows=None).rung(seed=0) is None


def test_stacking_on_many_rows_fits_on_a_capped_subsample(monkeypatch: pytest.MonkeyPatch) -> None:
    """Above STACK_ROW_CAP training rows the whole stack (inner CV included) sees a stratified
    subsample; below it the stack is scikit-learn's StackingClassifier as it is."""
    from sklearn.ensemble import StackingClassifier
    from tuttiml.workers.families import get_family, stacking
    from tuttiml.workers.families._base import FamilyContext

    frame = _breast_cancer()
    X, y = frame.drop(columns="target"), frame["target"].to_numpy()
    fam = get_family("stacking")

    def ctx(n_rows: int) -> FamilyContext:
        return FamilyContext(
            task="binary",
            random_state=0,
            n_rows=n_rows,
            numeric_columns=tuple(X.columns),
            categorical_columns=(),
            high_cardinality_columns=(),
            n_classes=2,
        )

    small = fam.build(fam.defaults(ctx(len(y)))[0], ctx(len(y)))
    assert isinstance(small.steps[-1][1], StackingClassifier)
    monkeypatch.setattr(stacking, "STACK_ROW_CAP", 300)
    capped = fam.build(fam.defaults(ctx(len(y)))[0], ctx(len(y))).fit(X, y)
    model = capped.steps[-1][1]
    assert isinstance(model.estimator_, StackingClassifier)
    assert model.n_rows_fitted_ <= 300 + 2  # stratified: at most one extra row per class
    assert capped.predict_proba(X).shape == (len(y), 2)
