"""Base-learner library shared by the families: preprocessing, search spaces and builders.

Every learner draws its hyperparameters under a caller-given prefix, so a composite family can
reuse a learner's space under its own name (``"voting.lgbm.num_leaves"``). A learner builds
either its bare model (for ensembles that preprocess once, e.g. bagging and stacking) or a
``Pipeline(prep, model)`` that accepts the raw table described in
:class:`~workers.families._base.FamilyContext`. All preprocessing sits inside the returned
estimator, so it is fitted inside each CV fold. Every estimator runs on one thread and gets
``ctx.random_state`` where it takes a seed.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from lightgbm import LGBMClassifier, LGBMRegressor
from sklearn.calibration import CalibratedClassifierCV
from sklearn.compose import ColumnTransformer, TransformedTargetRegressor
from sklearn.ensemble import (
    ExtraTreesClassifier,
    ExtraTreesRegressor,
    RandomForestClassifier,
    RandomForestRegressor,
)
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.model_selection import KFold, StratifiedKFold
from sklearn.naive_bayes import GaussianNB
from sklearn.neighbors import KNeighborsClassifier, KNeighborsRegressor
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder, StandardScaler, TargetEncoder
from sklearn.svm import SVC, SVR, LinearSVC, LinearSVR
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor
from tuttiml.workers.ensembling import (
    EarlyStoppingBoosterClassifier,
    EarlyStoppingBoosterRegressor,
    RowCap,
)
from tuttiml.workers.families._base import ALL_TASKS, BINARY, MULTICLASS, REGRESSION, FamilyContext

if TYPE_CHECKING:
    import optuna

Params = dict[str, Any]
CLASSIFICATION: frozenset[str] = frozenset({BINARY, MULTICLASS})
MISSING_LEVEL = "__missing__"
CLASS_WEIGHTS = ("none", "balanced")


def make_preprocessor(ctx: FamilyContext, *, scale: bool, encoding: str = "onehot") -> Any:
    """Column-wise preprocessing of the raw table, output as a pandas DataFrame.

    Numeric columns: median imputation with missing-value indicators (plus standard scaling
    when ``scale``). Low-cardinality categoricals: a constant level for missing values, then
    one-hot (rare levels pooled, unknown levels mapped to the pooled column or to all zeros)
    or ordinal codes (unknown -> -1) for tree models. High-cardinality categoricals: target
    encoding, cross-fitted on shuffled, seeded folds so that a row's code never uses its own
    target.

    Args:
        ctx: the columns by kind, the task and the seed.
        scale: standardise numeric outputs (linear, kernel, neighbour and neural models).
        encoding: ``"onehot"`` or ``"ordinal"``.

    Raises:
        ValueError: unknown ``encoding``.
    """
    if encoding not in ("onehot", "ordinal"):
        raise ValueError(f"encoding: must be 'onehot' or 'ordinal'; got {encoding!r}.")
    parts: list[tuple[str, Any, list[str]]] = []
    if ctx.numeric_columns:
        num: list[tuple[str, Any]] = [
            (
                "impute",
                SimpleImputer(strategy="median", add_indicator=True, keep_empty_features=True),
            ),
        ]
        if scale:
            num.append(("scale", StandardScaler()))
        parts.append(("num", Pipeline(num), list(ctx.numeric_columns)))
    if ctx.categorical_columns:
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
        parts.append(
            (
                "cat",
                Pipeline([("fill", _fill()), ("encode", encoder)]),
                list(ctx.categorical_columns),
            )
        )
    if ctx.high_cardinality_columns:
        if ctx.is_classification:
            folds: Any = StratifiedKFold(5, shuffle=True, random_state=ctx.random_state)
        else:
            folds = KFold(5, shuffle=True, random_state=ctx.random_state)
        target_type = {BINARY: "binary", MULTICLASS: "multiclass"}.get(ctx.task, "continuous")
        high: list[tuple[str, Any]] = [
            ("fill", _fill()),
            ("encode", TargetEncoder(target_type=target_type, cv=folds)),
        ]
        if scale:
            high.append(("scale", StandardScaler()))
        parts.append(("high", Pipeline(high), list(ctx.high_cardinality_columns)))
    return ColumnTransformer(parts, remainder="drop", n_jobs=1).set_output(transform="pandas")


def _fill() -> SimpleImputer:
    return SimpleImputer(strategy="constant", fill_value=MISSING_LEVEL)


# --------------------------------------------------------------------------------------------
# search-space description


@dataclass(frozen=True)
class Dim:
    """One hyperparameter: its kind (``float``/``int``/``cat``), range, default and tasks."""

    name: str
    kind: str
    low: float = 0.0
    high: float = 0.0
    log: bool = False
    choices: tuple[Any, ...] = ()
    default: Any = None
    tasks: frozenset[str] = ALL_TASKS

    def draw(self, trial: optuna.Trial, key: str) -> Any:
        """Ask ``trial`` for this dimension under the full Optuna name ``key``."""
        if self.kind == "cat":
            return trial.suggest_categorical(key, self.choices)
        if self.kind == "int":
            return trial.suggest_int(key, int(self.low), int(self.high), log=self.log)
        return trial.suggest_float(key, self.low, self.high, log=self.log)


def _class_weight() -> Dim:
    return Dim("class_weight", "cat", choices=CLASS_WEIGHTS, default="none", tasks=CLASSIFICATION)


def _cw(value: str) -> str | None:
    return None if value == "none" else value


@dataclass(frozen=True)
class Learner:
    """A base learner: its space, how to build its model, and the preprocessing it wants.

    ``make(values, ctx)`` receives the unprefixed values (``{"C": 0.5}``) and returns the
    bare model for ``ctx.task``. ``proba`` tells whether the classifier has ``predict_proba``.
    ``cost`` is the rough time of one fit of its default configuration relative to a default
    LightGBM (measured single-threaded on scikit-learn's breast-cancer and digits tables); it
    only orders the default trials, cheapest first.
    """

    name: str
    tasks: frozenset[str]
    dims: tuple[Dim, ...]
    make: Callable[[Params, FamilyContext], Any]
    scale: bool
    encoding: str
    proba: bool = True
    cost: float = 1.0

    def _dims(self, ctx: FamilyContext) -> list[Dim]:
        return [d for d in self.dims if ctx.task in d.tasks]

    def suggest(self, trial: optuna.Trial, ctx: FamilyContext, prefix: str) -> Params:
        """Draw this learner's hyperparameters, each named ``f"{prefix}.{param}"``."""
        return {f"{prefix}.{d.name}": d.draw(trial, f"{prefix}.{d.name}") for d in self._dims(ctx)}

    def defaults(self, ctx: FamilyContext, prefix: str) -> Params:
        """The learner's default configuration, keyed like :meth:`suggest`."""
        return {f"{prefix}.{d.name}": d.default for d in self._dims(ctx)}

    def model(self, params: Params, ctx: FamilyContext, prefix: str) -> Any:
        """The bare (unfitted) model; it expects the preprocessed numeric table.

        Raises:
            KeyError: a hyperparameter of this learner is missing from ``params``.
        """
        return self.make({d.name: params[f"{prefix}.{d.name}"] for d in self._dims(ctx)}, ctx)

    def preprocessor(self, ctx: FamilyContext) -> Any:
        """The preprocessing this learner wants (see :func:`make_preprocessor`)."""
        return make_preprocessor(ctx, scale=self.scale, encoding=self.encoding)

    def build(self, params: Params, ctx: FamilyContext, prefix: str) -> Pipeline:
        """``Pipeline(prep, model)`` accepting the raw table."""
        model = self.model(params, ctx, prefix)
        return Pipeline([("prep", self.preprocessor(ctx)), ("model", model)])


# --------------------------------------------------------------------------------------------
# builders


def _cap(model: Any, ctx: FamilyContext) -> RowCap:
    return RowCap(model, max_rows=ctx.row_cap, random_state=ctx.random_state)


def _scaled_target(model: Any) -> TransformedTargetRegressor:
    """Standardise the target so that kernel, margin and neural models see unit scale."""
    return TransformedTargetRegressor(regressor=model, transformer=StandardScaler())


def _linear(v: Params, ctx: FamilyContext) -> Any:
    if ctx.is_classification:
        return LogisticRegression(
            C=v["C"],
            class_weight=_cw(v["class_weight"]),
            max_iter=1000,
            random_state=ctx.random_state,
        )
    return Ridge(alpha=v["alpha"], random_state=ctx.random_state)


def _knn(v: Params, ctx: FamilyContext) -> Any:
    # at most a quarter of the fold's rows, so bagged or inner-CV subsets still have k rows
    k = max(1, min(v["n_neighbors"], ctx.n_rows // 4))
    cls = KNeighborsClassifier if ctx.is_classification else KNeighborsRegressor
    return _cap(cls(n_neighbors=k, weights=v["weights"], n_jobs=1), ctx)


def _tree(v: Params, ctx: FamilyContext) -> Any:
    kw = {
        "max_depth": v["max_depth"],
        "min_samples_leaf": v["min_samples_leaf"],
        "random_state": ctx.random_state,
    }
    if ctx.is_classification:
        return DecisionTreeClassifier(class_weight=_cw(v["class_weight"]), **kw)
    return DecisionTreeRegressor(**kw)


def _linear_svm(v: Params, ctx: FamilyContext) -> Any:
    if ctx.is_classification:  # calibrated so that it has predict_proba
        svm = LinearSVC(
            C=v["C"],
            class_weight=_cw(v["class_weight"]),
            max_iter=2000,
            random_state=ctx.random_state,
        )
        return CalibratedClassifierCV(svm, method="sigmoid", cv=3)
    return _scaled_target(
        LinearSVR(
            C=v["C"],
            loss="squared_epsilon_insensitive",
            dual=False,
            max_iter=2000,
            random_state=ctx.random_state,
        )
    )


def _svm_rbf(v: Params, ctx: FamilyContext) -> Any:
    if ctx.is_classification:
        # calibrated so that it has predict_proba: without it a hard-label SVM scored a log
        # loss of 0 on folds it happened to get all right, won, and exported a pipeline
        # without predict_proba
        svm = SVC(
            C=v["C"],
            gamma=v["gamma"],
            class_weight=_cw(v["class_weight"]),
            random_state=ctx.random_state,
        )
        return _cap(CalibratedClassifierCV(svm, method="sigmoid", cv=3), ctx)
    return _cap(_scaled_target(SVR(C=v["C"], gamma=v["gamma"], epsilon=v["epsilon"])), ctx)


def _mlp(v: Params, ctx: FamilyContext) -> Any:
    kw = {
        "hidden_layer_sizes": (v["hidden"],),
        "alpha": v["alpha"],
        "learning_rate_init": v["learning_rate_init"],
        "max_iter": 300,
        "early_stopping": True,
        "random_state": ctx.random_state,
    }
    if ctx.is_classification:
        return _cap(MLPClassifier(**kw), ctx)
    return _cap(_scaled_target(MLPRegressor(**kw)), ctx)


def lgbm_model(
    kw: Params, ctx: FamilyContext, *, max_rounds: int = 500, patience: int = 30
) -> Any:
    """Early-stopped LightGBM for ``ctx.task`` with the given LGBM keyword arguments.

    ``subsample`` below 1 turns on bagging every round; ``n_jobs=1``, ``verbose=-1`` and the
    seed are always set.
    """
    kw = dict(kw)
    if "class_weight" in kw:
        kw["class_weight"] = _cw(kw["class_weight"])
    kw["subsample_freq"] = 1 if kw.get("subsample", 1.0) < 1.0 else 0
    kw.update(n_jobs=1, verbose=-1, random_state=ctx.random_state)
    if ctx.is_classification:
        return EarlyStoppingBoosterClassifier(
            LGBMClassifier(**kw),
            max_rounds=max_rounds,
            patience=patience,
            random_state=ctx.random_state,
        )
    return EarlyStoppingBoosterRegressor(
        LGBMRegressor(**kw),
        max_rounds=max_rounds,
        patience=patience,
        random_state=ctx.random_state,
    )


def _forest(cls_model: type, reg_model: type) -> Callable[[Params, FamilyContext], Any]:
    def make(v: Params, ctx: FamilyContext) -> Any:
        kw = {
            "n_estimators": v["n_estimators"],
            "max_features": v["max_features"],
            "min_samples_leaf": v["min_samples_leaf"],
            "n_jobs": 1,
            "random_state": ctx.random_state,
        }
        if ctx.is_classification:
            return cls_model(class_weight=_cw(v["class_weight"]), **kw)
        return reg_model(**kw)

    return make


_FOREST_DIMS = (
    Dim("n_estimators", "int", 50, 300, default=200),
    Dim("max_features", "float", 0.1, 1.0, default=0.5),
    Dim("min_samples_leaf", "int", 1, 20, log=True, default=1),
    _class_weight(),
)

LEARNERS: dict[str, Learner] = {
    "linear": Learner(
        "linear",
        ALL_TASKS,
        (
            Dim("C", "float", 1e-3, 1e2, log=True, default=1.0, tasks=CLASSIFICATION),
            Dim("alpha", "float", 1e-3, 1e3, log=True, default=1.0, tasks=frozenset({REGRESSION})),
            _class_weight(),
        ),
        _linear,
        scale=True,
        encoding="onehot",
        cost=0.3,
    ),
    "knn": Learner(
        "knn",
        ALL_TASKS,
        (
            Dim("n_neighbors", "int", 3, 50, log=True, default=10),
            Dim("weights", "cat", choices=("uniform", "distance"), default="distance"),
        ),
        _knn,
        scale=True,
        encoding="onehot",
        cost=0.2,
    ),
    "naive_bayes": Learner(
        "naive_bayes",
        CLASSIFICATION,
        (Dim("var_smoothing", "float", 1e-11, 1e-3, log=True, default=1e-9),),
        lambda v, ctx: GaussianNB(var_smoothing=v["var_smoothing"]),
        scale=True,
        encoding="onehot",
        cost=0.2,
    ),
    "tree": Learner(
        "tree",
        ALL_TASKS,
        (
            Dim("max_depth", "int", 2, 12, default=6),
            Dim("min_samples_leaf", "int", 1, 50, log=True, default=5),
            _class_weight(),
        ),
        _tree,
        scale=False,
        encoding="ordinal",
        cost=0.3,
    ),
    "linear_svm": Learner(
        "linear_svm",
        ALL_TASKS,
        (
            Dim("C", "float", 1e-3, 1e2, log=True, default=1.0),
            _class_weight(),
        ),
        _linear_svm,
        scale=True,
        encoding="onehot",
        cost=1.0,
    ),
    "svm_rbf": Learner(
        "svm_rbf",
        ALL_TASKS,
        (
            Dim("C", "float", 1e-2, 1e3, log=True, default=1.0),
            Dim("gamma", "float", 1e-4, 1.0, log=True, default=0.05),
            Dim(
                "epsilon", "float", 1e-3, 1.0, log=True, default=0.1, tasks=frozenset({REGRESSION})
            ),
            _class_weight(),
        ),
        _svm_rbf,
        scale=True,
        encoding="onehot",
        cost=1.0,
    ),
    "mlp": Learner(
        "mlp",
        ALL_TASKS,
        (
            Dim("hidden", "int", 16, 128, log=True, default=64),
            Dim("alpha", "float", 1e-5, 1e-1, log=True, default=1e-4),
            Dim("learning_rate_init", "float", 1e-4, 1e-2, log=True, default=1e-3),
        ),
        _mlp,
        scale=True,
        encoding="onehot",
        cost=1.0,
    ),
    "lgbm": Learner(
        "lgbm",
        ALL_TASKS,
        (
            Dim("num_leaves", "int", 8, 128, log=True, default=31),
            Dim("learning_rate", "float", 0.01, 0.3, log=True, default=0.1),
            Dim("min_child_samples", "int", 5, 100, log=True, default=20),
            Dim("subsample", "float", 0.5, 1.0, default=1.0),
            Dim("colsample_bytree", "float", 0.5, 1.0, default=1.0),
            Dim("reg_lambda", "float", 1e-3, 10.0, log=True, default=1e-3),
            _class_weight(),
        ),
        lgbm_model,
        scale=False,
        encoding="ordinal",
        cost=1.0,
    ),
    "random_forest": Learner(
        "random_forest",
        ALL_TASKS,
        _FOREST_DIMS,
        _forest(RandomForestClassifier, RandomForestRegressor),
        scale=False,
        encoding="ordinal",
        cost=10.0,
    ),
    "extra_trees": Learner(
        "extra_trees",
        ALL_TASKS,
        _FOREST_DIMS,
        _forest(ExtraTreesClassifier, ExtraTreesRegressor),
        scale=False,
        encoding="ordinal",
        cost=5.0,
    ),
}

#: Order in which composite families fill up or trim their member sets.
MEMBER_PRIORITY = (
    "lgbm",
    "linear",
    "random_forest",
    "extra_trees",
    "knn",
    "mlp",
    "linear_svm",
    "svm_rbf",
    "naive_bayes",
    "tree",
)


def learner_names(
    ctx: FamilyContext, *, need_proba: bool = False, among: Sequence[str] | None = None
) -> tuple[str, ...]:
    """Learners supporting ``ctx.task`` (and ``predict_proba`` when asked), in registry order."""
    names = list(LEARNERS) if among is None else [n for n in LEARNERS if n in among]
    return tuple(
        n
        for n in names
        if ctx.task in LEARNERS[n].tasks
        and not (need_proba and ctx.is_classification and not LEARNERS[n].proba)
    )


# --------------------------------------------------------------------------------------------
# member sets and meta-models for composite families


def learners_cost(names: Sequence[str]) -> float:
    """Summed relative cost (see :class:`Learner`) of one default fit of each learner."""
    return float(sum(LEARNERS[n].cost for n in names))


def chosen_members(
    params: Params, prefix: str, candidates: Sequence[str], *, low: int = 2, high: int = 4
) -> list[str]:
    """Distinct member learners selected by the ``f"{prefix}.use.<learner>"`` flags.

    Rule: flagged learners in :data:`MEMBER_PRIORITY` order, trimmed to ``high``; when fewer
    than ``low`` are flagged, unflagged candidates are added in that same order.
    """
    ranked = [n for n in MEMBER_PRIORITY if n in candidates]
    chosen = [n for n in ranked if params.get(f"{prefix}.use.{n}", False)][:high]
    for n in ranked:
        if len(chosen) >= low:
            break
        if n not in chosen:
            chosen.append(n)
    return sorted(chosen, key=ranked.index)


def suggest_members(
    trial: optuna.Trial,
    ctx: FamilyContext,
    prefix: str,
    candidates: Sequence[str],
    *,
    low: int = 2,
    high: int = 4,
) -> Params:
    """Draw one include flag per candidate, then the spaces of the members that result."""
    params: Params = {
        f"{prefix}.use.{n}": trial.suggest_categorical(f"{prefix}.use.{n}", (False, True))
        for n in candidates
    }
    for n in chosen_members(params, prefix, candidates, low=low, high=high):
        params.update(LEARNERS[n].suggest(trial, ctx, f"{prefix}.{n}"))
    return params


def default_members(
    ctx: FamilyContext, prefix: str, candidates: Sequence[str], members: Sequence[str]
) -> Params:
    """Parameters selecting ``members`` with their default configurations."""
    params: Params = {f"{prefix}.use.{n}": n in members for n in candidates}
    for n in members:
        params.update(LEARNERS[n].defaults(ctx, f"{prefix}.{n}"))
    return params


META_CHOICES = ("linear", "lgbm")


def suggest_meta(trial: optuna.Trial, ctx: FamilyContext, prefix: str) -> Params:
    """Meta-model choice (``f"{prefix}.meta"``) and, for the linear one, its inverse penalty."""
    params: Params = {f"{prefix}.meta": trial.suggest_categorical(f"{prefix}.meta", META_CHOICES)}
    if params[f"{prefix}.meta"] == "linear":
        key = f"{prefix}.meta_C"
        params[key] = trial.suggest_float(key, 1e-2, 1e2, log=True)
    return params


def default_meta(prefix: str) -> Params:
    """The linear meta-model with unit penalty."""
    return {f"{prefix}.meta": "linear", f"{prefix}.meta_C": 1.0}


def make_meta(params: Params, ctx: FamilyContext, prefix: str) -> Any:
    """Meta-model: logistic/ridge regression (``alpha = 1 / meta_C``) or a small LightGBM."""
    if params[f"{prefix}.meta"] == "linear":
        c = float(params[f"{prefix}.meta_C"])
        if ctx.is_classification:
            return LogisticRegression(C=c, max_iter=1000, random_state=ctx.random_state)
        return Ridge(alpha=1.0 / c, random_state=ctx.random_state)
    kw = {
        "n_estimators": 100,
        "num_leaves": 7,
        "learning_rate": 0.05,
        "min_child_samples": 10,
        "n_jobs": 1,
        "verbose": -1,
        "random_state": ctx.random_state,
    }
    return LGBMClassifier(**kw) if ctx.is_classification else LGBMRegressor(**kw)
