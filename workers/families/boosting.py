"""The "boosting" family: LightGBM (early-stopped), histogram gradient boosting, AdaBoost."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from sklearn.ensemble import (
    AdaBoostClassifier,
    AdaBoostRegressor,
    HistGradientBoostingClassifier,
    HistGradientBoostingRegressor,
)
from sklearn.pipeline import Pipeline
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor
from tuttiml.workers.families._base import BaseFamily, FamilyContext
from tuttiml.workers.families._learners import CLASS_WEIGHTS, Params, lgbm_model, make_preprocessor

if TYPE_CHECKING:
    import optuna

KINDS = ("lgbm", "hist_gb", "adaboost")


class BoostingFamily(BaseFamily):
    """Boosted trees; ``boosting.kind`` picks the implementation, knobs live under its name.

    LightGBM stops early on a slice of its own training rows (``EarlyStoppingBooster``) with
    ``max_rounds`` as the limit; the finalize step refits it for a fixed round count.
    ``HistGradientBoosting*`` uses its built-in early stopping on its own rows with
    ``max_iter`` as the limit. AdaBoost boosts shallow trees for a fixed number of rounds.
    All three see ordinal-encoded categoricals.
    """

    name = "boosting"

    def suggest(self, trial: optuna.Trial, ctx: FamilyContext) -> Params:
        kind = trial.suggest_categorical(self.key("kind"), KINDS)
        p: Params = {self.key("kind"): kind}

        def num(
            param: str,
            low: float,
            high: float,
            log: bool = True,
            integer: bool = False,
        ) -> None:
            key = self.key(f"{kind}.{param}")
            draw = trial.suggest_int if integer else trial.suggest_float
            p[key] = draw(key, low, high, log=log)  # type: ignore[operator]

        num("learning_rate", 0.01, 0.3 if kind != "adaboost" else 1.0)
        if kind == "adaboost":
            num("n_estimators", 25, 300, integer=True)
            num("max_depth", 1, 4, log=False, integer=True)
            return p
        num("max_rounds", 100, 1000, integer=True)
        num("leaves", 8, 128, integer=True)
        num("min_leaf", 5, 100, integer=True)
        num("l2", 1e-3, 10.0)
        num("colsample", 0.5, 1.0, log=False)
        if kind == "lgbm":
            num("subsample", 0.5, 1.0, log=False)
            num("l1", 1e-3, 10.0)
        if ctx.is_classification:
            key = self.key(f"{kind}.class_weight")
            p[key] = trial.suggest_categorical(key, CLASS_WEIGHTS)
        return p

    def build(self, params: Params, ctx: FamilyContext) -> Any:
        kind = params[self.key("kind")]
        v = {
            k.removeprefix(self.key(f"{kind}.")): val
            for k, val in params.items()
            if k.startswith(self.key(f"{kind}."))
        }
        cw: Params = {}
        if ctx.is_classification and kind != "adaboost":
            cw["class_weight"] = None if v["class_weight"] == "none" else v["class_weight"]
        seed = ctx.random_state
        if kind == "lgbm":
            model: Any = lgbm_model(
                {
                    "learning_rate": v["learning_rate"],
                    "num_leaves": v["leaves"],
                    "min_child_samples": v["min_leaf"],
                    "reg_lambda": v["l2"],
                    "reg_alpha": v["l1"],
                    "colsample_bytree": v["colsample"],
                    "subsample": v["subsample"],
                    **cw,
                },
                ctx,
                max_rounds=v["max_rounds"],
                patience=50,
            )
        elif kind == "hist_gb":
            cls = (
                HistGradientBoostingClassifier
                if ctx.is_classification
                else (HistGradientBoostingRegressor)
            )
            model = cls(
                learning_rate=v["learning_rate"],
                max_iter=v["max_rounds"],
                max_leaf_nodes=v["leaves"],
                min_samples_leaf=v["min_leaf"],
                l2_regularization=v["l2"],
                max_features=v["colsample"],
                early_stopping=True,
                n_iter_no_change=20,
                random_state=seed,
                **cw,
            )
        else:
            tree = (DecisionTreeClassifier if ctx.is_classification else DecisionTreeRegressor)(
                max_depth=v["max_depth"], random_state=seed
            )
            cls = AdaBoostClassifier if ctx.is_classification else AdaBoostRegressor
            model = cls(
                estimator=tree,
                n_estimators=v["n_estimators"],
                learning_rate=v["learning_rate"],
                random_state=seed,
            )
        prep = make_preprocessor(ctx, scale=False, encoding="ordinal")
        return Pipeline([("prep", prep), ("model", model)])

    def cost(self, params: Params, ctx: FamilyContext) -> float:
        """Early-stopped LightGBM about a plain one, histogram boosting 2.5×, AdaBoost
        by rounds."""
        kind = params[self.key("kind")]
        if kind == "adaboost":
            return 0.02 * params[self.key("adaboost.n_estimators")]
        return 1.2 if kind == "lgbm" else 2.5

    def defaults(self, ctx: FamilyContext) -> list[Params]:
        """LightGBM and HistGradientBoosting with (close to) their library defaults."""
        out = []
        for kind in ("lgbm", "hist_gb"):
            p: Params = {self.key("kind"): kind}
            base = {
                "learning_rate": 0.1,
                "max_rounds": 1000,
                "leaves": 31,
                "min_leaf": 20,
                "l2": 1e-3,
                "colsample": 1.0,
            }
            if kind == "lgbm":
                base.update(subsample=1.0, l1=1e-3)
            if ctx.is_classification:
                base["class_weight"] = "none"
            p.update({self.key(f"{kind}.{k}"): val for k, val in base.items()})
            out.append(p)
        return out
