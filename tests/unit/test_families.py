"""Family contracts plus reference checks of each family against scikit-learn or by hand."""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np
import pandas as pd
import pytest
from lightgbm import LGBMClassifier
from numpy.testing import assert_allclose
from sklearn.base import clone
from sklearn.compose import ColumnTransformer
from sklearn.ensemble import BaggingClassifier, BaggingRegressor, RandomForestClassifier
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.model_selection import KFold, StratifiedKFold, cross_val_predict, train_test_split
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder, StandardScaler, TargetEncoder
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor
from tuttiml.service.errors import InvalidSpecError
from tuttiml.service.spec import KNOWN_FAMILIES
from tuttiml.workers.ensembling import (
    BlendingClassifier,
    EarlyStoppingBoosterClassifier,
    FrameNormalizer,
    best_iterations,
    refit_rounds,
)
from tuttiml.workers.families import FAMILIES, get_family
from tuttiml.workers.families._learners import (
    LEARNERS,
    default_members,
    learner_names,
)

from tests.contracts import N_TRAIN, FamilyContract, family_data


class TestSingleFamily(FamilyContract):
    family = FAMILIES["single"]


class TestBaggingFamily(FamilyContract):
    family = FAMILIES["bagging"]


class TestBoostingFamily(FamilyContract):
    family = FAMILIES["boosting"]


class TestVotingFamily(FamilyContract):
    family = FAMILIES["voting"]


class TestStackingFamily(FamilyContract):
    family = FAMILIES["stacking"]
    n_sampled = 1


class TestBlendingFamily(FamilyContract):
    family = FAMILIES["blending"]


# ---- registry -------------------------------------------------------------------------------


def test_registry_matches_the_spec_names() -> None:
    assert tuple(sorted(FAMILIES)) == KNOWN_FAMILIES
    assert all(FAMILIES[name].name == name for name in FAMILIES)


def test_unknown_family_lists_known_names() -> None:
    with pytest.raises(InvalidSpecError, match=r"unknown family 'boostng'.*bagging, blending"):
        get_family("boostng")
    assert get_family("voting") is FAMILIES["voting"]


# ---- reference computations -----------------------------------------------------------------


def _split(task: str) -> tuple[pd.DataFrame, np.ndarray, pd.DataFrame, Any]:
    X, y, ctx = family_data(task)
    return X.iloc[:N_TRAIN], y[:N_TRAIN], X.iloc[N_TRAIN:], ctx


def _members_params(family: str, ctx: Any, members: tuple[str, ...]) -> dict[str, Any]:
    return default_members(ctx, family, learner_names(ctx), members)


@pytest.mark.parametrize("task", ["binary", "regression"])
def test_stacking_equals_hand_computation(task: str) -> None:
    X, y, X_test, ctx = _split(task)
    members = ("linear", "tree")
    params = _members_params("stacking", ctx, members)
    params.update(
        {
            "stacking.cv": 3,
            "stacking.passthrough": False,
            "stacking.second_layer": False,
            "stacking.meta": "linear",
            "stacking.meta_C": 2.0,
        }
    )
    est = FAMILIES["stacking"].build(params, ctx).fit(X, y)

    # Hand computation following the StackingClassifier/Regressor user guide: the meta-model
    # is fitted on cross_val_predict outputs of the members (int cv = StratifiedKFold for
    # classifiers, KFold for regressors, no shuffling); for two classes only the second
    # probability column is kept; members are refitted on all rows for prediction. Built from
    # scikit-learn alone: the stack's shared preprocessing as documented in
    # make_preprocessor (scaled, one-hot) and the members' default configurations.
    prep = _documented_preprocessing(task, scale=True)
    Z, Z_test = prep.fit_transform(X, y), prep.transform(X_test)
    if task == "binary":
        models: list[Any] = [
            LogisticRegression(C=1.0, max_iter=1000, random_state=0),
            DecisionTreeClassifier(max_depth=6, min_samples_leaf=5, random_state=0),
        ]
        cv: Any = StratifiedKFold(3)
        oof = [
            cross_val_predict(clone(m), Z, y, cv=cv, method="predict_proba")[:, 1:] for m in models
        ]
        meta = LogisticRegression(C=2.0, max_iter=1000, random_state=0).fit(np.hstack(oof), y)
        full = [clone(m).fit(Z, y) for m in models]
        want = meta.predict_proba(np.hstack([m.predict_proba(Z_test)[:, 1:] for m in full]))
        assert_allclose(est.predict_proba(X_test), want, rtol=1e-6, atol=1e-9)
    else:
        models = [
            Ridge(alpha=1.0, random_state=0),
            DecisionTreeRegressor(max_depth=6, min_samples_leaf=5, random_state=0),
        ]
        oof = [cross_val_predict(clone(m), Z, y, cv=KFold(3)) for m in models]
        meta = Ridge(alpha=0.5, random_state=0).fit(np.column_stack(oof), y)
        full = [clone(m).fit(Z, y) for m in models]
        want = meta.predict(np.column_stack([m.predict(Z_test) for m in full]))
        assert_allclose(est.predict(X_test), want, rtol=1e-6, atol=1e-9)


def _documented_preprocessing(
    task: str, *, scale: bool, encoding: str = "onehot"
) -> ColumnTransformer:
    """``make_preprocessor``'s documented configuration, from scikit-learn classes only.

    ``family_data``'s columns: x0..x3 numeric (median imputation with indicators, scaled when
    ``scale``), ``color`` low-cardinality (a constant level for missing values, then one-hot
    with levels under 5 rows pooled and at most 30 columns, or ordinal codes with unknown
    levels at -1, levels under 5 rows pooled and at most 60), ``city`` high-cardinality
    (constant fill, target encoding cross-fitted on seeded shuffled 5-fold splits, stratified
    for classes, scaled when ``scale``).
    """

    def scaled(steps: list[tuple[str, Any]]) -> Pipeline:
        return Pipeline([*steps, ("scale", StandardScaler())] if scale else steps)

    fill = ("fill", SimpleImputer(strategy="constant", fill_value="__missing__"))
    if encoding == "onehot":
        encoder: Any = OneHotEncoder(
            handle_unknown="infrequent_if_exist",
            min_frequency=5,
            max_categories=30,
            sparse_output=False,
            dtype=np.float32,
        )
    else:
        encoder = OrdinalEncoder(
            handle_unknown="use_encoded_value",
            unknown_value=-1,
            min_frequency=5,
            max_categories=60,
            dtype=np.float32,
        )
    regression = task == "regression"
    folds: Any = (KFold if regression else StratifiedKFold)(5, shuffle=True, random_state=0)
    target_type = "continuous" if regression else task
    impute = SimpleImputer(strategy="median", add_indicator=True, keep_empty_features=True)
    return ColumnTransformer(
        [
            ("num", scaled([("impute", impute)]), [f"x{i}" for i in range(4)]),
            ("cat", Pipeline([fill, ("encode", encoder)]), ["color"]),
            (
                "high",
                scaled([fill, ("encode", TargetEncoder(target_type=target_type, cv=folds))]),
                ["city"],
            ),
        ]
    ).set_output(transform="pandas")


def test_soft_vote_is_weighted_mean_of_member_probabilities() -> None:
    X, y, X_test, ctx = _split("multiclass")
    members = ("linear", "naive_bayes", "tree")
    weights = {"linear": 0.2, "naive_bayes": 0.5, "tree": 1.0}
    params = _members_params("voting", ctx, members)
    params.update(
        {"voting.voting": "soft", **{f"voting.weight.{n}": w for n, w in weights.items()}}
    )
    got = FAMILIES["voting"].build(params, ctx).fit(X, y).predict_proba(X_test)
    # VotingClassifier user guide: soft voting averages the members' predict_proba with the
    # given weights (np.average over members).
    probas = [
        LEARNERS[n].build(params, ctx, f"voting.{n}").fit(X, y).predict_proba(X_test)
        for n in members
    ]
    want = np.average(probas, axis=0, weights=[weights[n] for n in members])
    assert_allclose(got, want, rtol=1e-10)


def test_blending_equals_hand_computation() -> None:
    X, y, X_test, ctx = _split("binary")
    members = ("linear", "tree")
    params = _members_params("blending", ctx, members)
    params.update(
        {"blending.holdout_fraction": 0.25, "blending.meta": "linear", "blending.meta_C": 1.0}
    )
    got = FAMILIES["blending"].build(params, ctx).fit(X, y).predict_proba(X_test)
    # Hand computation of the documented rule: stratified seeded hold-out split, members fit
    # on the rest, meta-model on their positive-class probabilities for the hold-out rows,
    # members refitted on all rows for prediction.
    train, hold = train_test_split(np.arange(len(y)), test_size=0.25, stratify=y, random_state=0)
    pipes = [LEARNERS[n].build(params, ctx, f"blending.{n}") for n in members]
    part = [clone(p).fit(X.iloc[train], y[train]) for p in pipes]
    meta_X = np.hstack([p.predict_proba(X.iloc[hold])[:, 1:] for p in part])
    meta = LogisticRegression(C=1.0, max_iter=1000, random_state=0).fit(meta_X, y[hold])
    full = [clone(p).fit(X, y) for p in pipes]
    want = meta.predict_proba(np.hstack([p.predict_proba(X_test)[:, 1:] for p in full]))
    assert_allclose(got, want, rtol=1e-10)


def test_blending_drop_member_equals_never_adding_it() -> None:
    X, y, X_test, ctx = _split("multiclass")
    a = LEARNERS["linear"].build(LEARNERS["linear"].defaults(ctx, "a"), ctx, "a")
    b = LEARNERS["tree"].build(LEARNERS["tree"].defaults(ctx, "b"), ctx, "b")
    with_drop = BlendingClassifier([("a", a), ("x", "drop"), ("b", b)], random_state=0)
    without = BlendingClassifier([("a", clone(a)), ("b", clone(b))], random_state=0)
    # STYLE 8 rule: dropping a member equals never adding it.
    assert_allclose(
        with_drop.fit(X, y).predict_proba(X_test),
        without.fit(X, y).predict_proba(X_test),
        rtol=1e-12,
    )


@pytest.mark.parametrize("task", ["binary", "regression"])
def test_bagging_matches_sklearn_bagging_built_directly(task: str) -> None:
    X, y, X_test, ctx = _split(task)
    params = {
        "bagging.kind": "bagged",
        "bagging.base": "tree",
        "bagging.tree.max_depth": 4,
        "bagging.tree.min_samples_leaf": 3,
        "bagging.n_estimators": 15,
        "bagging.max_samples": 0.7,
        "bagging.max_features": 0.8,
        "bagging.bootstrap": True,
        "bagging.bootstrap_features": True,
    }
    if task == "binary":
        params["bagging.tree.class_weight"] = "none"
    got_est = FAMILIES["bagging"].build(params, ctx).fit(X, y)
    bag, tree = (
        (BaggingClassifier, DecisionTreeClassifier)
        if task == "binary"
        else (BaggingRegressor, DecisionTreeRegressor)
    )
    direct = Pipeline(
        [
            ("prep", _documented_preprocessing(task, scale=False, encoding="ordinal")),
            (
                "model",
                bag(
                    tree(max_depth=4, min_samples_leaf=3, random_state=0),
                    n_estimators=15,
                    max_samples=0.7,
                    max_features=0.8,
                    bootstrap=True,
                    bootstrap_features=True,
                    random_state=0,
                ),
            ),
        ]
    ).fit(X, y)
    # scikit-learn's BaggingClassifier/Regressor with the same parameters and seed, behind the
    # documented preprocessing built from scikit-learn classes.
    if task == "binary":
        assert_allclose(got_est.predict_proba(X_test), direct.predict_proba(X_test))
    else:
        assert_allclose(got_est.predict(X_test), direct.predict(X_test))


def test_random_forest_choice_matches_sklearn_forest() -> None:
    X, y, X_test, ctx = _split("binary")
    params = {
        "bagging.kind": "random_forest",
        "bagging.random_forest.n_estimators": 30,
        "bagging.random_forest.max_features": 0.5,
        "bagging.random_forest.min_samples_leaf": 2,
        "bagging.random_forest.class_weight": "balanced",
    }
    got = FAMILIES["bagging"].build(params, ctx).fit(X, y).predict_proba(X_test)
    direct = Pipeline(
        [
            ("prep", _documented_preprocessing("binary", scale=False, encoding="ordinal")),
            (
                "model",
                RandomForestClassifier(
                    n_estimators=30,
                    max_features=0.5,
                    min_samples_leaf=2,
                    class_weight="balanced",
                    n_jobs=1,
                    random_state=0,
                ),
            ),
        ]
    ).fit(X, y)
    # scikit-learn's RandomForestClassifier with the same parameters and seed, behind the
    # documented preprocessing built from scikit-learn classes.
    assert_allclose(got, direct.predict_proba(X_test))


# ---- early stopping ---------------------------------------------------------------------------


class _SpyLGBM(LGBMClassifier):
    """LGBMClassifier recording the row ids (last column) it is fitted and evaluated on."""

    seen: ClassVar[dict[str, list[np.ndarray]]] = {"fit": [], "eval": []}

    def fit(self, X: Any, y: Any, **kw: Any) -> _SpyLGBM:  # type: ignore[override]
        self.seen["fit"].append(np.asarray(X)[:, -1])
        for part in kw.get("eval_X") or ():
            self.seen["eval"].append(np.asarray(part)[:, -1])
        return super().fit(X, y, **kw)  # type: ignore[return-value]


def test_early_stopping_booster_never_sees_test_rows() -> None:
    X, y, _ = family_data("binary")
    table = X[["x1", "x2", "x3"]].assign(rid=np.arange(len(y), dtype=float))
    train_rows, test_rows = np.arange(0, 100), np.arange(100, len(y))
    _SpyLGBM.seen = {"fit": [], "eval": []}
    spy = _SpyLGBM(n_estimators=5, min_child_samples=5, n_jobs=1, verbose=-1, random_state=0)
    booster = EarlyStoppingBoosterClassifier(
        spy, max_rounds=200, patience=10, validation_fraction=0.2, random_state=0
    )
    booster.fit(table.iloc[train_rows], y[train_rows])
    fit_rows = np.concatenate(_SpyLGBM.seen["fit"]).astype(int)
    eval_rows = np.concatenate(_SpyLGBM.seen["eval"]).astype(int)
    # common practice: the early-stopping slice is carved from the training rows only
    assert set(fit_rows) | set(eval_rows) == set(train_rows)
    assert not set(fit_rows) & set(eval_rows)
    assert not (set(fit_rows) | set(eval_rows)) & set(test_rows)
    assert len(eval_rows) == 20  # validation_fraction * 100 rows
    assert 1 <= booster.best_iteration_ <= 200

    _SpyLGBM.seen = {"fit": [], "eval": []}
    fixed = clone(booster).set_params(fixed_rounds=7).fit(table.iloc[train_rows], y[train_rows])
    assert _SpyLGBM.seen["eval"] == []  # no early stopping, all training rows fitted
    assert set(np.concatenate(_SpyLGBM.seen["fit"]).astype(int)) == set(train_rows)
    assert fixed.estimator_.booster_.num_trees() == 7 and fixed.best_iteration_ == 7


def test_refit_rounds_rule() -> None:
    # hand computation: mean(10, 20, 30) = 20, scaled by 1000 / 800 -> 25
    assert refit_rounds([10, 20, 30], n_train_fold=800, n_all=1000) == 25
    assert refit_rounds([1], n_train_fold=1000, n_all=10) == 1  # never below one round
    with pytest.raises(ValueError, match="empty"):
        refit_rounds([], n_train_fold=10, n_all=10)


@pytest.mark.parametrize(
    ("family", "params_of", "path"),
    [
        ("single", lambda ctx: FAMILIES["single"].defaults(ctx)[0], "model__fixed_rounds"),
        ("voting", lambda ctx: FAMILIES["voting"].defaults(ctx)[0], "lgbm__model__fixed_rounds"),
        (
            "stacking",
            lambda ctx: FAMILIES["stacking"].defaults(ctx)[0],
            "model__lgbm__fixed_rounds",
        ),
        (
            "blending",
            lambda ctx: FAMILIES["blending"].defaults(ctx)[0],
            "lgbm__model__fixed_rounds",
        ),
    ],
)
def test_best_iterations_paths_can_be_set(family: str, params_of: Any, path: str) -> None:
    X, y, _, ctx = _split("binary")
    est = FAMILIES[family].build(params_of(ctx), ctx)
    fitted = clone(est).fit(X, y)
    found = best_iterations(fitted)
    assert list(found) == [path]
    rounds = refit_rounds([found[path]], n_train_fold=len(y), n_all=len(y))
    refit = clone(est).set_params(**{path: rounds}).fit(X, y)
    assert best_iterations(refit) == {path: rounds}


# ---- raw user rows --------------------------------------------------------------------------


def test_json_like_category_names_reach_lightgbm_safely() -> None:
    X, y, X_test, ctx = _split("binary")
    odd = np.array(["a:b", "[x]", "c,d", '{"q"}'], dtype=object)
    X = X.assign(color=pd.Series(odd[np.arange(len(X)) % 4], index=X.index, dtype=object))
    params = _members_params("stacking", ctx, ("lgbm", "linear"))
    params.update(
        {
            "stacking.cv": 3,
            "stacking.passthrough": True,
            "stacking.second_layer": False,
            "stacking.meta": "lgbm",
        }
    )
    est = FAMILIES["stacking"].build(params, ctx).fit(X, y)
    # common practice: LightGBM rejects JSON special characters in feature names
    assert est.predict_proba(X_test).shape == (len(X_test), 2)


def test_frame_normalizer_in_front_accepts_raw_rows() -> None:
    X, y, X_test, ctx = _split("multiclass")
    schema = {c: "numeric" for c in ctx.numeric_columns}
    schema.update(
        {c: "categorical" for c in (*ctx.categorical_columns, *ctx.high_cardinality_columns)}
    )
    model = FAMILIES["single"].build(FAMILIES["single"].defaults(ctx)[1], ctx)
    pipe = Pipeline([("normalize", FrameNormalizer(schema)), ("model", model)]).fit(X, y)
    raw = X_test.astype({"x1": "Float64", "color": "string"}).assign(extra=1)
    raw["x2"] = raw["x2"].astype(str)  # numbers typed as text
    # the same rows in the worker layout give the same predictions (hand-built reference)
    assert_allclose(pipe.predict_proba(raw), pipe.predict_proba(X_test), rtol=1e-12)


def test_calibration_leaves_a_hard_vote_as_it_is() -> None:
    """A hard vote has neither probabilities nor a decision function, so there is nothing for
    CalibratedClassifierCV to calibrate (scikit-learn refuses it); the candidate is built and
    scored uncalibrated instead of failing the trial."""
    from sklearn.calibration import CalibratedClassifierCV
    from tuttiml.workers.candidates import build_candidate

    X, y, ctx = family_data("multiclass")
    fam = get_family("voting")
    params = {**fam.defaults(ctx)[0], "voting.voting": "hard", "calibration": "sigmoid"}
    hard = build_candidate(fam, dict(params), ctx)
    assert not isinstance(hard, CalibratedClassifierCV)
    assert hard.fit(X, y).predict(X).shape == (len(y),)
    soft = build_candidate(fam, {**params, "voting.voting": "soft"}, ctx)
    assert isinstance(soft, CalibratedClassifierCV)


def test_hard_votes_only_where_labels_can_compete() -> None:
    """Log loss and ROC AUC rank probabilities; a hard vote's one-hot output puts zero on
    every class but one, so under those metrics it can only lose (common practice: a log loss
    of a wrong hard label is infinite). It is offered for label metrics only."""
    import dataclasses

    import optuna
    from tuttiml.workers.datasets import PROBABILITY_METRICS

    assert {"log_loss", "roc_auc"} == PROBABILITY_METRICS
    _, _, ctx = family_data("multiclass")
    fam = get_family("voting")

    def votes(c: Any) -> set[str]:
        study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=0))
        return {fam.suggest(study.ask(), c)["voting.voting"] for _ in range(40)}

    assert votes(dataclasses.replace(ctx, scores_probabilities=True)) == {"soft"}
    assert votes(dataclasses.replace(ctx, scores_probabilities=False)) == {"soft", "hard"}


@pytest.mark.parametrize("metric", ["roc_auc", "accuracy"])
def test_worker_and_trial_process_build_the_same_context(metric: str) -> None:
    """The worker suggests from the job record, the trial process builds from the decoded
    table; both must see the same context, or a suggested candidate would differ from the
    one scored."""
    from sklearn.datasets import load_breast_cancer
    from tuttiml.service.spec import SearchSpec, Task
    from tuttiml.workers.datasets import build_dataset
    from tuttiml.workers.search import context_from_record

    frame = load_breast_cancer(as_frame=True).frame  # scikit-learn bundled (UCI WDBC)
    frame.columns = [c.replace(" ", "_") for c in frame.columns]
    from tuttiml.service.data import prepare, summary

    spec = SearchSpec(target="target", metric=metric).resolved(Task.BINARY)  # type: ignore[arg-type]
    schema = dict.fromkeys([c for c in frame.columns if c != "target"], "numeric")
    record = {
        "task": "binary",
        "schema": schema,
        "summary": summary(prepare(frame, spec)),  # the record's summary, as submit writes it
        "classes": [0, 1],
        "spec": spec.model_dump(mode="json"),
    }
    worker = context_from_record(record, seed=3)
    trial_process = build_dataset(frame, record, spec).context(3)
    assert worker == trial_process
    assert worker.scores_probabilities is (metric == "roc_auc")


@pytest.mark.parametrize("task", ["binary", "multiclass", "regression"])
def test_default_trials_run_cheapest_first(task: str) -> None:
    """Every family's defaults are enqueued exactly once, ordered by estimated cost: the
    single learners before the composites, and the stack (inner CV: cv + 1 fits of each
    member) last."""
    from tuttiml.workers.schedule import default_trials

    _, _, ctx = family_data(task)
    order = default_trials(KNOWN_FAMILIES, ctx)
    expected = [
        (name, p)
        for name in KNOWN_FAMILIES
        if ctx.task in FAMILIES[name].tasks
        for p in FAMILIES[name].defaults(ctx)
    ]
    assert sorted(map(repr, order)) == sorted(map(repr, expected))
    costs = [FAMILIES[name].cost(p, ctx) for name, p in order]
    assert costs == sorted(costs)
    assert order[0][0] == "single"
    assert order[-1][0] == "stacking"
    # the default stack and the default vote have the same three members
    stack = FAMILIES["stacking"].defaults(ctx)[0]
    vote = FAMILIES["voting"].defaults(ctx)[0]
    assert FAMILIES["stacking"].cost(stack, ctx) == pytest.approx(
        (stack["stacking.cv"] + 1) * FAMILIES["voting"].cost(vote, ctx)
    )
    # every candidate a family can draw has a positive cost
    import optuna

    for name in KNOWN_FAMILIES:
        if ctx.task not in FAMILIES[name].tasks:
            continue
        study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=1))
        for _ in range(10):
            assert FAMILIES[name].cost(FAMILIES[name].suggest(study.ask(), ctx), ctx) > 0


@pytest.mark.parametrize("task", ["binary", "multiclass"])
@pytest.mark.parametrize("name", [n for n in LEARNERS if n != "lgbm"])
def test_every_classifier_gives_class_probabilities(task: str, name: str) -> None:
    """Log loss and ROC AUC score probabilities (common practice), and users call
    ``predict_proba`` on the export: a hard-label learner once scored a log loss of 0 on folds
    it happened to get all right, won, and exported a pipeline without it."""
    from tests.contracts import family_data

    X, y, ctx = family_data(task)
    if name not in learner_names(ctx):
        pytest.skip(f"{name} does not support {task}")
    model = LEARNERS[name].build(LEARNERS[name].defaults(ctx, "s"), ctx, "s").fit(X, y)
    proba = model.predict_proba(X)  # AttributeError for a hard-label learner
    assert proba.shape == (len(X), len(np.unique(y)))
    assert_allclose(proba.sum(axis=1), 1.0)
    # not one-hot labels in disguise: some rows get a probability strictly between 0 and 1
    assert ((proba > 1e-6) & (proba < 1 - 1e-6)).any()
    assert LEARNERS[name].proba
