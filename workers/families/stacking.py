"""The "stacking" family: a meta-model fitted on cross-validated member predictions."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from sklearn.ensemble import StackingClassifier, StackingRegressor
from sklearn.pipeline import Pipeline
from tuttiml.workers.ensembling import RowCap
from tuttiml.workers.families._base import BaseFamily, FamilyContext
from tuttiml.workers.families._learners import (
    LEARNERS,
    Params,
    chosen_members,
    default_members,
    default_meta,
    learner_names,
    learners_cost,
    make_meta,
    make_preprocessor,
    suggest_members,
    suggest_meta,
)

if TYPE_CHECKING:
    import optuna

#: Members of the optional second layer (their library defaults).
SECOND_LAYER = ("linear", "lgbm")
#: Training rows above which the whole stack (inner CV, members, meta-model) fits on a
#: stratified subsample: its inner CV costs (cv + 1) fits of every member.
STACK_ROW_CAP = 50_000


class StackingFamily(BaseFamily):
    """``StackingClassifier``/``StackingRegressor`` after one shared preprocessing step.

    Members: 2–4 distinct learners chosen by ``stacking.use.<learner>`` flags, spaces under
    ``stacking.<learner>.``. The table is one-hot encoded and scaled once in front of the
    stack, so that ``stacking.passthrough`` hands numeric features to the meta-model.
    ``stacking.cv`` (3–5) is the inner fold count; ``stacking.meta`` picks the meta-model.
    With ``stacking.second_layer`` the meta-model is itself a stack of a linear model and a
    small LightGBM (default settings) under that meta-model.
    """

    name = "stacking"

    def suggest(self, trial: optuna.Trial, ctx: FamilyContext) -> Params:
        params = suggest_members(trial, ctx, self.name, learner_names(ctx))
        params[self.key("cv")] = trial.suggest_int(self.key("cv"), 3, 5)
        params[self.key("passthrough")] = trial.suggest_categorical(
            self.key("passthrough"), (False, True)
        )
        params.update(suggest_meta(trial, ctx, self.name))
        params[self.key("second_layer")] = trial.suggest_categorical(
            self.key("second_layer"), (False, True)
        )
        return params

    def build(self, params: Params, ctx: FamilyContext) -> Any:
        members = chosen_members(params, self.name, learner_names(ctx))
        estimators = [(n, LEARNERS[n].model(params, ctx, self.key(n))) for n in members]
        cls = StackingClassifier if ctx.is_classification else StackingRegressor
        final = make_meta(params, ctx, self.name)
        cv = int(params[self.key("cv")])
        if params[self.key("second_layer")]:
            layer = [
                (n, LEARNERS[n].model(LEARNERS[n].defaults(ctx, n), ctx, n)) for n in SECOND_LAYER
            ]
            final = cls(layer, final_estimator=final, cv=cv, n_jobs=1)
        stack = cls(
            estimators,
            final_estimator=final,
            cv=cv,
            passthrough=bool(params[self.key("passthrough")]),
            n_jobs=1,
        )
        prep = make_preprocessor(ctx, scale=True, encoding="onehot")
        if ctx.n_rows > STACK_ROW_CAP:  # the inner CV multiplies every member's fits
            return Pipeline(
                [
                    ("prep", prep),
                    (
                        "model",
                        RowCap(stack, max_rows=STACK_ROW_CAP, random_state=ctx.random_state),
                    ),
                ]
            )
        return Pipeline([("prep", prep), ("model", stack)])

    def cost(self, params: Params, ctx: FamilyContext) -> float:
        """Members fitted cv + 1 times (inner folds, then all rows)."""
        members = chosen_members(params, self.name, learner_names(ctx))
        return (int(params[self.key("cv")]) + 1) * learners_cost(members)

    def defaults(self, ctx: FamilyContext) -> list[Params]:
        """LightGBM, linear model and random forest under a linear meta-model, 5 folds."""
        params = default_members(
            ctx, self.name, learner_names(ctx), ("lgbm", "linear", "random_forest")
        )
        params.update(
            {
                self.key("cv"): 5,
                self.key("passthrough"): False,
                self.key("second_layer"): False,
                **default_meta(self.name),
            }
        )
        return [params]
